//! File input and output that never destroys what it should not.
//!
//! # Writing
//! [`write_atomic`] and [`write_atomic_with`] write into a new temporary file in the target's
//! own directory (so the final rename stays on one file system), flush it to the disk with
//! `fsync`, rename it over the target, and then `fsync` the directory so the rename itself
//! survives a power cut. If anything fails before the rename, the temporary file is removed and
//! the target is untouched. A reader never sees a half-written file.
//!
//! The temporary file is made by the `tempfile` crate, named `.<target name>.<random>.tmp`,
//! and holds an exclusive lock for as long as its writer lives. A process killed mid-write
//! leaves its temporary file behind, unlocked; the next write to the same target removes every
//! such file whose lock it can take (see [`remove_stale_temps`]), so stale files do not pile up.
//!
//! Only regular files are replaced: a target that is a symbolic link, a directory, a device
//! or a pipe is refused with [`io::ErrorKind::InvalidInput`] rather than silently turned into a
//! regular file (writing through a link would change a file elsewhere, replacing it would break
//! the link, and a device must not become a file).
//!
//! [`write_all`] does the same for a set of files that belong together (a blob and its Rust
//! source, a report and its figures): every file is staged into its temporary file first, and
//! only when all are staged are they renamed into place. A failure while staging leaves every
//! target as it was. [`write_all_in`] also creates the directory the set goes into, and removes
//! it again when the set could not be written; it holds an exclusive lock on the directory
//! while it writes, so two runs writing into one folder never mix their files.
//!
//! [`check_outputs`] refuses a set of outputs that name one file twice or name an input.
//!
//! # Reading
//! [`read_limited`] reads a whole file but never more than a limit, checked against the file's
//! size before anything is read and again while reading (a pipe or a growing file has no size
//! up front). The caller chooses the limit of each kind of file (hone's are in
//! `hone_host::limits`).
//!
//! # Locking
//! [`lock_file`] takes an exclusive lock on an existing file for a read-modify-write, such as
//! committing a checkpoint into a flash image; the lock survives the atomic replacement of the
//! file because it re-checks that the path still names the locked file.

use std::fs::{self, File};
use std::io::{self, BufWriter, Read, Write};
use std::path::{Path, PathBuf};

use tempfile::NamedTempFile;

/// Reads the whole file at `path`, refusing it when it is larger than `limit` bytes. `what`
/// names the kind of file in the error ("model blob", "config").
///
/// # Errors
/// The I/O error of opening or reading; [`io::ErrorKind::InvalidData`] with a message giving
/// the limit when the file is larger.
pub fn read_limited(path: &Path, limit: u64, what: &str) -> io::Result<Vec<u8>> {
    let mut file = File::open(path)?;
    read_limited_from(&mut file, limit, what)
}

/// [`read_limited`] on a file already open.
///
/// # Errors
/// As [`read_limited`].
pub fn read_limited_from(file: &mut File, limit: u64, what: &str) -> io::Result<Vec<u8>> {
    let too_large = |size: String| {
        io::Error::new(
            io::ErrorKind::InvalidData,
            format!("{size} is larger than a {what} may be ({limit} bytes); this is not a {what}"),
        )
    };
    let meta = file.metadata()?;
    if meta.is_dir() {
        return Err(io::Error::new(
            io::ErrorKind::InvalidInput,
            "is a directory, not a file",
        ));
    }
    if meta.is_file() && meta.len() > limit {
        return Err(too_large(format!("the file's {} bytes", meta.len())));
    }
    let reserve = if meta.is_file() { meta.len() } else { 0 };
    let mut bytes = Vec::with_capacity(usize::try_from(reserve).unwrap_or(0));
    file.take(limit.saturating_add(1)).read_to_end(&mut bytes)?;
    if bytes.len() as u64 > limit {
        return Err(too_large("the file".to_owned()));
    }
    Ok(bytes)
}

/// [`read_limited`] for UTF-8 text. Invalid UTF-8 is reported with the line and column of the
/// first bad byte.
///
/// # Errors
/// As [`read_limited`]; [`io::ErrorKind::InvalidData`] for bytes that are not UTF-8.
pub fn read_text_limited(path: &Path, limit: u64, what: &str) -> io::Result<String> {
    let bytes = read_limited(path, limit, what)?;
    String::from_utf8(bytes).map_err(|e| {
        let at = e.utf8_error().valid_up_to();
        let bytes = e.as_bytes();
        let (line, column) = line_column(bytes, at);
        io::Error::new(
            io::ErrorKind::InvalidData,
            format!(
                "line {line}, column {column}: bytes that are not UTF-8 text; save the file \
                 as UTF-8"
            ),
        )
    })
}

/// The 1-based line and byte column of byte `at` in `bytes`.
pub fn line_column(bytes: &[u8], at: usize) -> (usize, usize) {
    let before = &bytes[..at.min(bytes.len())];
    let line = before.iter().filter(|&&b| b == b'\n').count() + 1;
    let start = before
        .iter()
        .rposition(|&b| b == b'\n')
        .map_or(0, |i| i + 1);
    (line, before.len() - start + 1)
}

/// A value from a file or the command line, made safe to echo in a message: control
/// characters escaped, and cut to `max` characters with the length of the rest said.
pub fn echo(text: &str, max: usize) -> String {
    let mut out = String::new();
    let mut chars = text.chars();
    for c in chars.by_ref().take(max) {
        if c.is_control() {
            out.extend(c.escape_default());
        } else {
            out.push(c);
        }
    }
    let rest = chars.count();
    if rest > 0 {
        out.push_str(&format!("… ({rest} more characters)"));
    }
    out
}

/// Why a set of outputs was refused by [`check_outputs`].
#[derive(Debug, thiserror::Error)]
pub enum OutputError {
    /// Two outputs name the same file.
    #[error("{first} and {second} name the same file {}; give each output its own path", path.display())]
    Twice {
        /// The option of the first output.
        first: String,
        /// The option of the second.
        second: String,
        /// The path of the second as given.
        path: PathBuf,
    },
    /// An output names an input.
    #[error("{output} {} is the input {input}; writing it would destroy the input, give another path", path.display())]
    IsInput {
        /// The output's option.
        output: String,
        /// The input's option.
        input: String,
        /// The output's path as given.
        path: PathBuf,
    },
}

/// The canonical form of `path`, also for a file that does not exist yet (its directory is
/// made canonical and its name appended). Falls back to the path as given.
fn canonical(path: &Path) -> PathBuf {
    if let Ok(p) = fs::canonicalize(path) {
        return p;
    }
    match (path.parent(), path.file_name()) {
        (Some(d), Some(n)) => {
            let d = if d.as_os_str().is_empty() {
                Path::new(".")
            } else {
                d
            };
            fs::canonicalize(d).map_or_else(|_| path.to_path_buf(), |d| d.join(n))
        }
        _ => path.to_path_buf(),
    }
}

/// Refuses outputs that name one file twice, and outputs that name an input, comparing
/// canonical paths (so `./a`, `a` and a link to `a` are one file). Each path comes with the
/// option that gave it, for the message.
///
/// # Errors
/// [`OutputError`] naming both options.
pub fn check_outputs(
    inputs: &[(&str, &Path)],
    outputs: &[(&str, &Path)],
) -> Result<(), OutputError> {
    let ins: Vec<(&str, PathBuf)> = inputs.iter().map(|(o, p)| (*o, canonical(p))).collect();
    let mut seen: Vec<(&str, PathBuf)> = Vec::new();
    for (opt, p) in outputs {
        let c = canonical(p);
        if let Some((first, _)) = seen.iter().find(|(_, s)| *s == c) {
            return Err(OutputError::Twice {
                first: (*first).to_owned(),
                second: (*opt).to_owned(),
                path: p.to_path_buf(),
            });
        }
        if let Some((input, _)) = ins.iter().find(|(_, s)| *s == c) {
            return Err(OutputError::IsInput {
                output: (*opt).to_owned(),
                input: (*input).to_owned(),
                path: p.to_path_buf(),
            });
        }
        seen.push((opt, c));
    }
    Ok(())
}

/// Replaces the file at `path` with `bytes`, atomically (see the [module docs](self)).
///
/// # Errors
/// Any I/O error of creating, writing, syncing or renaming the temporary file; the target is
/// then unchanged and the temporary file removed. [`io::ErrorKind::InvalidInput`] when the
/// target exists and is not a regular file.
pub fn write_atomic(path: &Path, bytes: &[u8]) -> io::Result<()> {
    write_atomic_with(path, |w| w.write_all(bytes))
}

/// Replaces the file at `path` with what `write` writes, atomically (see the
/// [module docs](self)). The writer is buffered.
///
/// # Errors
/// An error returned by `write`, or any I/O error of creating, syncing or renaming the
/// temporary file; the target is then unchanged and the temporary file removed.
/// [`io::ErrorKind::InvalidInput`] when the target exists and is not a regular file.
pub fn write_atomic_with<F>(path: &Path, write: F) -> io::Result<()>
where
    F: FnOnce(&mut dyn Write) -> io::Result<()>,
{
    let (dir, name) = split_target(path)?;
    check_replaceable(path)?;
    let tmp = create_temp(&dir, &name)?;
    let tmp = fill(tmp, write)?;
    // On failure the temporary file is dropped, which removes it.
    tmp.persist(path).map_err(|e| e.error)?;
    sync_dir(&dir)
}

/// Why a set of files could not be written: the file concerned and the I/O error.
#[derive(Debug, thiserror::Error)]
#[error("{}: {source}", path.display())]
pub struct WriteError {
    /// The target file (or directory) the error concerns.
    pub path: PathBuf,
    /// The operating system's error. Not a `#[source]`: the message already holds it, and a
    /// chain printer would say it twice.
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
    tmp: NamedTempFile,
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

/// Refuses a target that exists and is not a regular file.
fn check_replaceable(path: &Path) -> io::Result<()> {
    match fs::symlink_metadata(path) {
        Ok(m) if m.file_type().is_symlink() => Err(io::Error::new(
            io::ErrorKind::InvalidInput,
            "is a symbolic link; hone replaces only regular files, give the link's target or \
             another path",
        )),
        Ok(m) if m.is_dir() => Err(io::Error::new(
            io::ErrorKind::InvalidInput,
            "is a directory; give a file path",
        )),
        Ok(m) if !m.is_file() => Err(io::Error::new(
            io::ErrorKind::InvalidInput,
            "is not a regular file (a device, pipe or socket); hone replaces only regular files",
        )),
        _ => Ok(()),
    }
}

/// Creates, fills and syncs the temporary file of `target`.
fn stage<'a>(target: &'a Path, bytes: &[u8]) -> io::Result<Staged<'a>> {
    let (dir, name) = split_target(target)?;
    check_replaceable(target)?;
    let tmp = create_temp(&dir, &name)?;
    let tmp = fill(tmp, |w| w.write_all(bytes))?;
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
        // On an error the temporary files staged so far are dropped, which removes them.
        staged.push(stage(path, bytes).map_err(|e| WriteError::new(path, e))?);
    }
    let mut dirs: Vec<PathBuf> = staged.iter().map(|s| s.dir.clone()).collect();
    for s in staged {
        let target = s.target;
        s.tmp
            .persist(target)
            .map_err(|e| WriteError::new(target, e.error))?;
    }
    dirs.sort();
    dirs.dedup();
    for d in &dirs {
        sync_dir(d).map_err(|e| WriteError::new(d, e))?;
    }
    Ok(())
}

/// [`write_all`] into `dir`: creates `dir` and its missing parents first, and when the set
/// cannot be written removes again the directories it created (those still empty), so a
/// failed command leaves no empty folder behind. `files` holds names relative to `dir`.
///
/// The directory is locked exclusively while the set is written: two runs writing into one
/// folder at once write one after the other, so the folder always holds one run's set.
///
/// Returns the paths written, in the order given.
///
/// # Errors
/// [`WriteError`] naming the directory that could not be created or locked, or the file that
/// could not be written.
pub fn write_all_in(dir: &Path, files: &[(String, Vec<u8>)]) -> Result<Vec<PathBuf>, WriteError> {
    let created = create_dirs(dir).map_err(|(p, e)| WriteError::new(&p, e))?;
    let result = lock_dir(dir)
        .map_err(|e| WriteError::new(dir, e))
        .and_then(|_lock| {
            let paths: Vec<PathBuf> = files.iter().map(|(name, _)| dir.join(name)).collect();
            let set: Vec<(&Path, &[u8])> = paths
                .iter()
                .zip(files)
                .map(|(p, (_, bytes))| (p.as_path(), bytes.as_slice()))
                .collect();
            write_all(&set).map(|()| paths)
        });
    if result.is_err() {
        for d in created.iter().rev() {
            let _ = fs::remove_dir(d);
        }
    }
    result
}

/// An exclusive lock on a file or directory, released when dropped.
#[derive(Debug)]
pub struct Lock {
    file: File,
}

impl Lock {
    /// The locked file, to read it through the lock.
    pub fn file(&mut self) -> &mut File {
        &mut self.file
    }
}

/// Takes an exclusive lock on the existing file at `path`, waiting for another holder to
/// release it. When the file was replaced (renamed over) while this waited, the lock is
/// taken again on the new file, so the holder always locks the file the path names.
///
/// # Errors
/// The I/O error of opening or locking the file.
pub fn lock_file(path: &Path) -> io::Result<Lock> {
    loop {
        let file = File::open(path)?;
        fs4::FileExt::lock(&file)?;
        if same_file(&file.metadata()?, &fs::metadata(path)?) {
            return Ok(Lock { file });
        }
    }
}

#[cfg(unix)]
fn same_file(a: &fs::Metadata, b: &fs::Metadata) -> bool {
    use std::os::unix::fs::MetadataExt;
    a.dev() == b.dev() && a.ino() == b.ino()
}

#[cfg(not(unix))]
fn same_file(_: &fs::Metadata, _: &fs::Metadata) -> bool {
    true
}

/// An exclusive lock on a directory. Directories can be opened for locking on Unix only;
/// elsewhere there is no lock.
fn lock_dir(dir: &Path) -> io::Result<Option<Lock>> {
    #[cfg(unix)]
    {
        let file = File::open(dir)?;
        fs4::FileExt::lock(&file)?;
        Ok(Some(Lock { file }))
    }
    #[cfg(not(unix))]
    {
        let _ = dir;
        Ok(None)
    }
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

const TEMP_SUFFIX: &str = ".tmp";

fn temp_prefix(name: &str) -> String {
    format!(".{name}.")
}

/// Removes the temporary files of `name` in `dir` that no living writer holds: those whose
/// lock can be taken. A writer locks its temporary file from the moment it creates it until
/// the rename, so only files of killed processes are removed. Returns how many were removed.
pub fn remove_stale_temps(dir: &Path, name: &str) -> usize {
    let prefix = temp_prefix(name);
    let Ok(entries) = fs::read_dir(dir) else {
        return 0;
    };
    let mut removed = 0;
    for e in entries.flatten() {
        let file_name = e.file_name();
        let Some(n) = file_name.to_str() else {
            continue;
        };
        let random = n
            .strip_prefix(&prefix)
            .and_then(|r| r.strip_suffix(TEMP_SUFFIX));
        // The random part has no dots, so `.a.b.x.tmp` is not taken for a file of `a`.
        if !random.is_some_and(|r| !r.is_empty() && !r.contains('.')) {
            continue;
        }
        let path = e.path();
        let Ok(meta) = fs::symlink_metadata(&path) else {
            continue;
        };
        if !meta.is_file() {
            continue;
        }
        let Ok(f) = File::open(&path) else {
            continue;
        };
        if fs4::FileExt::try_lock(&f).is_ok() && fs::remove_file(&path).is_ok() {
            removed += 1;
        }
    }
    removed
}

fn create_temp(dir: &Path, name: &str) -> io::Result<NamedTempFile> {
    remove_stale_temps(dir, name);
    let prefix = temp_prefix(name);
    let mut builder = tempfile::Builder::new();
    builder.prefix(&prefix).suffix(TEMP_SUFFIX);
    // A temporary file is private by default; the output gets the permissions of any new
    // file (read and write for all, less the umask).
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        builder.permissions(fs::Permissions::from_mode(0o666));
    }
    let tmp = builder.tempfile_in(dir)?;
    fs4::FileExt::lock(tmp.as_file())?;
    Ok(tmp)
}

fn fill<F>(tmp: NamedTempFile, write: F) -> io::Result<NamedTempFile>
where
    F: FnOnce(&mut dyn Write) -> io::Result<()>,
{
    let mut w = BufWriter::new(tmp);
    write(&mut w)?;
    let tmp = w.into_inner().map_err(io::IntoInnerError::into_error)?;
    tmp.as_file().sync_all()?;
    Ok(tmp)
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
mod tests;
