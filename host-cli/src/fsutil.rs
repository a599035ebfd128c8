//! Atomic file writing: a file is either fully replaced or left as it was.
//!
//! [`write_atomic`] and [`write_atomic_with`] write into a new temporary file in the target's
//! own directory (so the final rename stays on one file system), flush it to the disk with
//! `fsync`, rename it over the target, and then `fsync` the directory so the rename itself
//! survives a power cut. If anything fails before the rename, the temporary file is removed and
//! the target is untouched. A reader never sees a half-written file.
//!
//! The temporary file is named `.<target name>.<process id>.<counter>.tmp`; it is created with
//! `create_new`, so two writers never share one, even within a process.
//!
//! [`write_all`] does the same for a set of files that belong together (a blob and its Rust
//! source, a report and its figures): every file is staged into its temporary file first, and
//! only when all are staged are they renamed into place. A failure while staging leaves every
//! target as it was. [`write_all_in`] also creates the directory the set goes into, and removes
//! it again when the set could not be written.

use std::fs::{self, File, OpenOptions};
use std::io::{self, BufWriter, Write};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering};

static COUNTER: AtomicU64 = AtomicU64::new(0);

/// Replaces the file at `path` with `bytes`, atomically (see the [module docs](self)).
///
/// # Errors
/// Any I/O error of creating, writing, syncing or renaming the temporary file; the target is
/// then unchanged and the temporary file removed.
pub fn write_atomic(path: &Path, bytes: &[u8]) -> io::Result<()> {
    write_atomic_with(path, |w| w.write_all(bytes))
}

/// Replaces the file at `path` with what `write` writes, atomically (see the
/// [module docs](self)). The writer is buffered.
///
/// # Errors
/// An error returned by `write`, or any I/O error of creating, syncing or renaming the
/// temporary file; the target is then unchanged and the temporary file removed.
pub fn write_atomic_with<F>(path: &Path, write: F) -> io::Result<()>
where
    F: FnOnce(&mut dyn Write) -> io::Result<()>,
{
    let (dir, name) = split_target(path)?;
    let (tmp_path, file) = create_temp(&dir, &name)?;
    let result = fill(file, write).and_then(|()| fs::rename(&tmp_path, path));
    if let Err(e) = result {
        // The original error matters more than a failed clean-up.
        let _ = fs::remove_file(&tmp_path);
        return Err(e);
    }
    sync_dir(&dir)
}

/// Why a set of files could not be written: the file concerned and the I/O error.
#[derive(Debug, thiserror::Error)]
#[error("{}: {source}", path.display())]
pub struct WriteError {
    /// The target file (or directory) the error concerns.
    pub path: PathBuf,
    /// The operating system's error.
    #[source]
    pub source: io::Error,
}

impl WriteError {
    fn new(path: &Path, source: io::Error) -> WriteError {
        WriteError {
            path: path.to_path_buf(),
            source,
        }
    }
}

/// A file staged into its temporary file, not yet renamed over its target.
struct Staged<'a> {
    target: &'a Path,
    dir: PathBuf,
    tmp: PathBuf,
}

/// The directory of `path` and its file name, or an error if `path` names no file.
fn split_target(path: &Path) -> io::Result<(PathBuf, String)> {
    let name = path.file_name().ok_or_else(|| {
        io::Error::new(
            io::ErrorKind::InvalidInput,
            format!("{} does not name a file", path.display()),
        )
    })?;
    let dir = match path.parent() {
        Some(d) if !d.as_os_str().is_empty() => d.to_path_buf(),
        _ => PathBuf::from("."),
    };
    Ok((dir, name.to_string_lossy().into_owned()))
}

/// Creates, fills and syncs the temporary file of `target`.
fn stage<'a>(target: &'a Path, bytes: &[u8]) -> io::Result<Staged<'a>> {
    let (dir, name) = split_target(target)?;
    let (tmp, file) = create_temp(&dir, &name)?;
    if let Err(e) = fill(file, |w| w.write_all(bytes)) {
        let _ = fs::remove_file(&tmp);
        return Err(e);
    }
    Ok(Staged { target, dir, tmp })
}

/// Writes every `(path, bytes)` of `files`, all or nothing as far as the file system allows.
///
/// First every file is staged: its temporary file is created beside the target, written and
/// synced to the disk. If any staging fails, every temporary file made so far is removed, no
/// target is touched, and the error names the file whose staging failed. Then the temporary
/// files are renamed over their targets in the order given, and each directory is synced.
///
/// A rename can still fail after every file was staged (the target turned into a directory,
/// the directory's permissions changed in between). The files renamed before it are then
/// already replaced and stay so, the remaining temporary files are removed, and the error
/// names the file whose rename failed; the set is then mixed, old and new. A rename within one
/// directory is a single metadata operation, so this window is small compared with writing the
/// contents, which is where a full disk or a missing directory shows.
///
/// # Errors
/// [`WriteError`] naming the file concerned.
pub fn write_all(files: &[(&Path, &[u8])]) -> Result<(), WriteError> {
    let mut staged = Vec::with_capacity(files.len());
    for (path, bytes) in files {
        match stage(path, bytes) {
            Ok(s) => staged.push(s),
            Err(e) => {
                remove_temps(&staged);
                return Err(WriteError::new(path, e));
            }
        }
    }
    for (i, s) in staged.iter().enumerate() {
        if let Err(e) = fs::rename(&s.tmp, s.target) {
            remove_temps(&staged[i..]);
            return Err(WriteError::new(s.target, e));
        }
    }
    let mut dirs: Vec<&Path> = staged.iter().map(|s| s.dir.as_path()).collect();
    dirs.sort();
    dirs.dedup();
    for d in dirs {
        sync_dir(d).map_err(|e| WriteError::new(d, e))?;
    }
    Ok(())
}

/// [`write_all`] into `dir`: creates `dir` and its missing parents first, and when the set
/// cannot be written removes again the directories it created (those still empty), so a
/// failed command leaves no empty folder behind. `files` holds names relative to `dir`.
///
/// Returns the paths written, in the order given.
///
/// # Errors
/// [`WriteError`] naming the directory that could not be created or the file that could not
/// be written.
pub fn write_all_in(dir: &Path, files: &[(String, Vec<u8>)]) -> Result<Vec<PathBuf>, WriteError> {
    let created = create_dirs(dir).map_err(|(p, e)| WriteError::new(&p, e))?;
    let paths: Vec<PathBuf> = files.iter().map(|(name, _)| dir.join(name)).collect();
    let set: Vec<(&Path, &[u8])> = paths
        .iter()
        .zip(files)
        .map(|(p, (_, bytes))| (p.as_path(), bytes.as_slice()))
        .collect();
    if let Err(e) = write_all(&set) {
        for d in created.iter().rev() {
            let _ = fs::remove_dir(d);
        }
        return Err(e);
    }
    Ok(paths)
}

/// Creates `dir` and its missing parents; returns those created, outermost first. On failure
/// removes those already created and returns the directory that failed.
fn create_dirs(dir: &Path) -> Result<Vec<PathBuf>, (PathBuf, io::Error)> {
    let missing: Vec<&Path> = dir
        .ancestors()
        .filter(|a| !a.as_os_str().is_empty())
        .take_while(|a| !a.exists())
        .collect();
    let mut created = Vec::with_capacity(missing.len());
    for d in missing.into_iter().rev() {
        match fs::create_dir(d) {
            Ok(()) => created.push(d.to_path_buf()),
            // Another process made it in between: it is not ours to remove.
            Err(e) if e.kind() == io::ErrorKind::AlreadyExists && d.is_dir() => {}
            Err(e) => {
                for c in created.iter().rev() {
                    let _ = fs::remove_dir(c);
                }
                return Err((d.to_path_buf(), e));
            }
        }
    }
    Ok(created)
}

fn remove_temps(staged: &[Staged<'_>]) {
    for s in staged {
        let _ = fs::remove_file(&s.tmp);
    }
}

fn create_temp(dir: &Path, name: &str) -> io::Result<(PathBuf, File)> {
    loop {
        let n = COUNTER.fetch_add(1, Ordering::Relaxed);
        let tmp = dir.join(format!(".{name}.{}.{n}.tmp", std::process::id()));
        match OpenOptions::new().write(true).create_new(true).open(&tmp) {
            Ok(f) => return Ok((tmp, f)),
            // A stale file of an earlier process with the same id: take the next number.
            Err(e) if e.kind() == io::ErrorKind::AlreadyExists => continue,
            Err(e) => return Err(e),
        }
    }
}

fn fill<F>(file: File, write: F) -> io::Result<()>
where
    F: FnOnce(&mut dyn Write) -> io::Result<()>,
{
    let mut w = BufWriter::new(file);
    write(&mut w)?;
    let file = w.into_inner().map_err(io::IntoInnerError::into_error)?;
    file.sync_all()
}

/// Makes a rename in `dir` durable. Directories cannot be opened for syncing on every
/// platform; there the rename is as durable as the platform makes it.
fn sync_dir(dir: &Path) -> io::Result<()> {
    #[cfg(unix)]
    {
        File::open(dir)?.sync_all()
    }
    #[cfg(not(unix))]
    {
        let _ = dir;
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn entries(dir: &Path) -> Vec<String> {
        let mut v: Vec<String> = fs::read_dir(dir)
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
            .collect();
        v.sort();
        v
    }

    #[test]
    fn writes_and_replaces() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("model.bin");
        write_atomic(&p, b"first").unwrap();
        assert_eq!(fs::read(&p).unwrap(), b"first");
        write_atomic(&p, b"second, longer").unwrap();
        assert_eq!(fs::read(&p).unwrap(), b"second, longer");
        assert_eq!(entries(dir.path()), ["model.bin"]);
    }

    #[test]
    fn failure_mid_way_leaves_target_and_no_temp_file() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("report.json");
        write_atomic(&p, b"old").unwrap();
        let e = write_atomic_with(&p, |w| {
            // More than the buffer holds, so part of it reaches the temporary file.
            w.write_all(&vec![b'x'; 64 * 1024])?;
            Err(io::Error::other("disk full"))
        })
        .unwrap_err();
        assert_eq!(e.to_string(), "disk full");
        assert_eq!(fs::read(&p).unwrap(), b"old");
        assert_eq!(entries(dir.path()), ["report.json"]);
    }

    #[test]
    fn failed_rename_removes_the_temp_file() {
        let dir = tempfile::tempdir().unwrap();
        // A non-empty directory in the target's place makes the rename fail.
        let p = dir.path().join("out");
        fs::create_dir(&p).unwrap();
        fs::write(p.join("keep"), b"k").unwrap();
        assert!(write_atomic(&p, b"data").is_err());
        assert_eq!(entries(dir.path()), ["out"]);
        assert_eq!(entries(&p), ["keep"]);
    }

    #[test]
    fn write_all_writes_every_file() {
        let dir = tempfile::tempdir().unwrap();
        let (a, b) = (dir.path().join("m.honb"), dir.path().join("m.rs"));
        write_atomic(&a, b"old blob").unwrap();
        write_all(&[(&a, b"new blob"), (&b, b"pub const X: u8 = 1;")]).unwrap();
        assert_eq!(fs::read(&a).unwrap(), b"new blob");
        assert_eq!(fs::read(&b).unwrap(), b"pub const X: u8 = 1;");
        assert_eq!(entries(dir.path()), ["m.honb", "m.rs"]);
    }

    #[test]
    fn write_all_failing_second_file_leaves_the_first_untouched() {
        let dir = tempfile::tempdir().unwrap();
        let first = dir.path().join("m.honb");
        let second = dir.path().join("no-such-dir").join("m.rs");
        // A fresh target stays absent, an existing one keeps its bytes.
        let e = write_all(&[(&first, b"blob"), (&second, b"src")]).unwrap_err();
        assert_eq!(e.path, second);
        assert!(e.to_string().starts_with(&second.display().to_string()));
        assert_eq!(entries(dir.path()), Vec::<String>::new());
        write_atomic(&first, b"old").unwrap();
        assert!(write_all(&[(&first, b"new"), (&second, b"src")]).is_err());
        assert_eq!(fs::read(&first).unwrap(), b"old");
        assert_eq!(entries(dir.path()), ["m.honb"]);
    }

    #[test]
    fn write_all_failed_rename_names_the_file_and_removes_the_temps() {
        let dir = tempfile::tempdir().unwrap();
        let (a, b, c) = (
            dir.path().join("a"),
            dir.path().join("b"),
            dir.path().join("c"),
        );
        // A non-empty directory in the second target's place: staging succeeds (the
        // temporary file goes beside it), the rename fails.
        fs::create_dir(&b).unwrap();
        fs::write(b.join("keep"), b"k").unwrap();
        let e = write_all(&[(&a, b"1"), (&b, b"2"), (&c, b"3")]).unwrap_err();
        assert_eq!(e.path, b);
        // The rename before the failing one stands, the one after never happened.
        assert_eq!(fs::read(&a).unwrap(), b"1");
        assert!(!c.exists());
        assert_eq!(entries(dir.path()), ["a", "b"]);
        assert_eq!(entries(&b), ["keep"]);
    }

    #[test]
    fn write_all_in_creates_the_folder_and_removes_it_on_failure() {
        let dir = tempfile::tempdir().unwrap();
        let out = dir.path().join("report").join("inner");
        let files = vec![
            ("r.md".to_owned(), b"# r".to_vec()),
            ("r.html".to_owned(), b"<html>".to_vec()),
        ];
        let written = write_all_in(&out, &files).unwrap();
        assert_eq!(written, [out.join("r.md"), out.join("r.html")]);
        assert_eq!(entries(&out), ["r.html", "r.md"]);

        // A file name with a missing directory fails staging: the folders made for the set
        // are removed again, a folder that existed before stays.
        let fresh = dir.path().join("fresh").join("deeper");
        let bad = vec![
            ("ok.md".to_owned(), b"x".to_vec()),
            ("missing/x.svg".to_owned(), b"y".to_vec()),
        ];
        let e = write_all_in(&fresh, &bad).unwrap_err();
        assert_eq!(e.path, fresh.join("missing/x.svg"));
        assert!(!dir.path().join("fresh").exists());
        assert!(write_all_in(&out, &bad).is_err());
        assert_eq!(entries(&out), ["r.html", "r.md"]);
    }

    #[test]
    fn missing_directory_and_no_file_name_are_errors() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("no-such-dir").join("f.bin");
        assert!(write_atomic(&p, b"x").is_err());
        assert!(!p.exists());
        // `..` names a directory, not a file.
        assert!(write_atomic(Path::new(".."), b"x").is_err());
    }
}
