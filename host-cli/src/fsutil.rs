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
    let (tmp_path, file) = create_temp(&dir, &name.to_string_lossy())?;
    let result = fill(file, write).and_then(|()| fs::rename(&tmp_path, path));
    if let Err(e) = result {
        // The original error matters more than a failed clean-up.
        let _ = fs::remove_file(&tmp_path);
        return Err(e);
    }
    sync_dir(&dir)
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
    fn missing_directory_and_no_file_name_are_errors() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("no-such-dir").join("f.bin");
        assert!(write_atomic(&p, b"x").is_err());
        assert!(!p.exists());
        // `..` names a directory, not a file.
        assert!(write_atomic(Path::new(".."), b"x").is_err());
    }
}
