//! Writing the files a user names on the command line (`--html FILE`, exported reports).
//!
//! Why not `std::fs::write`: it truncates the file and then writes, so an error or a crash part-way
//! leaves half a report where the old one was, and anything reading the file meanwhile (a browser
//! reloading the page) sees half of it. Writing a temporary file beside the target and renaming it
//! over the target avoids both, but done naively it breaks what the user may have set up: a
//! symbolic link becomes a regular file, `/dev/null` or a named pipe is replaced by a regular file
//! (as root even `/dev/null` itself), and the file's permissions fall back to the defaults.
//! [`write_file`] follows links, writes straight into devices and pipes, and replaces regular
//! files atomically, keeping their mode (and, as root, their owner).

use std::error::Error;
use std::ffi::{OsStr, OsString};
use std::fmt;
use std::fs::{self, File, Metadata, OpenOptions};
use std::io::{self, Write};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering};

/// How many symbolic links [`write_file`] follows before it gives up: Linux's own limit
/// (`MAXSYMLINKS`, see path_resolution(7)).
const MAX_LINKS: usize = 40;

/// Names of temporary files are cut to this many bytes of the target's name, so that the
/// temporary name stays under the usual 255-byte limit of a file name.
const MAX_TEMP_STEM: usize = 200;

/// Tells the temporary files of one process apart (several threads may write at once).
static TEMP_COUNTER: AtomicU64 = AtomicU64::new(0);

/// Why [`write_file`] could not write a file, by the phase that failed.
///
/// Its `Display` is one sentence for the user: the path, what went wrong and what to do next.
#[derive(Debug)]
#[non_exhaustive]
pub enum OutputError {
    /// The path names a folder (an existing one, or by its form: a trailing `/`, `..`).
    IsADirectory {
        /// The folder.
        path: PathBuf,
    },
    /// The path could not be followed to the file to write: a symbolic link could not be read,
    /// the links form a loop, or a folder on the way cannot be looked into.
    Resolve {
        /// The path (or link) that could not be followed.
        path: PathBuf,
        /// What the system said.
        source: io::Error,
    },
    /// An existing file that is not a regular file (a device, a named pipe, ...) could not be
    /// opened for writing.
    Open {
        /// The file.
        path: PathBuf,
        /// What the system said.
        source: io::Error,
    },
    /// The temporary file beside the target could not be created (the folder is missing,
    /// read-only, ...). Nothing was changed.
    Create {
        /// The file that was to be written.
        path: PathBuf,
        /// What the system said.
        source: io::Error,
    },
    /// Writing the bytes, or flushing them to the disk, failed. A regular file keeps its old
    /// content; a device or pipe may have received part of the bytes.
    Write {
        /// The file that was to be written.
        path: PathBuf,
        /// What the system said.
        source: io::Error,
    },
    /// The finished temporary file could not be put in place of the target (its mode could not
    /// be set, or the rename failed). The target keeps its old content.
    Replace {
        /// The file that was to be written.
        path: PathBuf,
        /// What the system said.
        source: io::Error,
    },
}

impl OutputError {
    /// The file (or link, or folder) the error is about.
    pub fn path(&self) -> &Path {
        match self {
            OutputError::IsADirectory { path }
            | OutputError::Resolve { path, .. }
            | OutputError::Open { path, .. }
            | OutputError::Create { path, .. }
            | OutputError::Write { path, .. }
            | OutputError::Replace { path, .. } => path,
        }
    }
}

/// The folder holding `path`, `.` for a bare file name.
fn folder_of(path: &Path) -> &Path {
    match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p,
        _ => Path::new("."),
    }
}

impl fmt::Display for OutputError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        use io::ErrorKind as K;
        let p = self.path().display();
        let d = folder_of(self.path()).display();
        match self {
            OutputError::IsADirectory { .. } => {
                write!(f, "cannot write {p}: it names a folder; name a file instead (inside it or elsewhere)")
            }
            OutputError::Resolve { source, .. } => match source.kind() {
                K::NotADirectory => write!(f, "cannot write {p}: a part of the path is not a folder; pick another path"),
                K::PermissionDenied => {
                    write!(f, "cannot write {p}: no permission to look into the folder {d}; pick another path")
                }
                _ => write!(
                    f,
                    "cannot write {p}: cannot follow the path ({source}); fix or remove the symbolic link, or pick another path"
                ),
            },
            OutputError::Open { source, .. } => match source.kind() {
                K::PermissionDenied => {
                    write!(f, "cannot write {p}: no permission to write to it; change its permissions or pick another path")
                }
                _ => write!(f, "cannot write {p}: cannot open it for writing ({source}); pick another path"),
            },
            OutputError::Create { source, .. } => match source.kind() {
                K::NotFound => write!(f, "cannot write {p}: the folder {d} does not exist; create it or pick another path"),
                K::PermissionDenied => write!(
                    f,
                    "cannot write {p}: no permission to create files in the folder {d}; pick a folder you can write to"
                ),
                K::ReadOnlyFilesystem => {
                    write!(f, "cannot write {p}: the folder {d} is on a read-only file system; pick another path")
                }
                K::NotADirectory => write!(f, "cannot write {p}: {d} is not a folder; pick another path"),
                K::StorageFull => write!(f, "cannot write {p}: the disk is full; free some space or pick another path"),
                _ => write!(f, "cannot write {p}: cannot create a file in the folder {d} ({source}); pick another path"),
            },
            OutputError::Write { source, .. } => match source.kind() {
                K::StorageFull => write!(f, "cannot write {p}: the disk is full; free some space or pick another path"),
                _ => write!(f, "cannot write {p}: writing failed ({source}); check the disk or pick another path"),
            },
            OutputError::Replace { source, .. } => write!(
                f,
                "cannot write {p}: cannot put the new file in place ({source}); the old file is unchanged; \
                 check the permissions of the folder {d} or pick another path"
            ),
        }
    }
}

impl Error for OutputError {
    fn source(&self) -> Option<&(dyn Error + 'static)> {
        match self {
            OutputError::IsADirectory { .. } => None,
            OutputError::Resolve { source, .. }
            | OutputError::Open { source, .. }
            | OutputError::Create { source, .. }
            | OutputError::Write { source, .. }
            | OutputError::Replace { source, .. } => Some(source),
        }
    }
}

/// Writes `bytes` to the file the user named at `path`.
///
/// - Symbolic links are followed to their final target (a relative link relative to the folder
///   holding it); the links stay links. A dangling link creates the file it points to.
/// - An existing file that is not a regular file (a character or block device such as
///   `/dev/null`, a named pipe, ...) is opened and written directly, never replaced. A named pipe
///   blocks until something reads it.
/// - An existing regular file is replaced atomically: the bytes go to a hidden temporary file in
///   the same folder (`.NAME.PID-N.part`), which is flushed to the disk, given the old file's
///   permission bits (and, where allowed — as root — its owner and group) and renamed over the
///   target; the folder is then flushed (best effort). Readers see the old file or the new one,
///   never half of one. Like any replace-by-rename, this gives the path a new inode: other hard
///   links keep the old content.
/// - A new file gets the usual mode of a new file (`0o666` less the umask).
/// - On any error after the temporary file was created, it is removed and the target keeps its
///   old content.
///
/// # Errors
///
/// [`OutputError::IsADirectory`] for a folder, and one variant per failing phase otherwise; see
/// [`OutputError`].
pub fn write_file(path: &Path, bytes: &[u8]) -> Result<(), OutputError> {
    if names_folder(path) {
        return Err(OutputError::IsADirectory { path: path.to_path_buf() });
    }
    let (target, existing) = resolve(path)?;
    match existing {
        Some(meta) if meta.is_dir() => Err(OutputError::IsADirectory { path: target }),
        Some(meta) if meta.is_file() => replace(&target, bytes, Some(&meta)),
        Some(_) => write_in_place(&target, bytes),
        None => replace(&target, bytes, None),
    }
}

/// Whether `path` names a folder by its form alone: no file name (`/`, `..`) or a trailing
/// separator.
fn names_folder(path: &Path) -> bool {
    path.file_name().is_none() || path.as_os_str().to_string_lossy().ends_with(std::path::is_separator)
}

/// Follows symbolic links from `path` to the file to write; returns it with its metadata, `None`
/// when it does not exist (yet).
fn resolve(path: &Path) -> Result<(PathBuf, Option<Metadata>), OutputError> {
    let mut current = path.to_path_buf();
    for _ in 0..=MAX_LINKS {
        let meta = match fs::symlink_metadata(&current) {
            Ok(meta) => meta,
            Err(e) if e.kind() == io::ErrorKind::NotFound => return Ok((current, None)),
            Err(source) => return Err(OutputError::Resolve { path: current, source }),
        };
        if !meta.file_type().is_symlink() {
            return Ok((current, Some(meta)));
        }
        let link = fs::read_link(&current).map_err(|source| OutputError::Resolve { path: current.clone(), source })?;
        // A relative link is relative to the folder holding it. The folder part is not made
        // canonical: the system resolves it (links and `..` included) as it would for the link.
        current = if link.is_absolute() { link } else { folder_of(&current).join(link) };
    }
    Err(OutputError::Resolve {
        path: path.to_path_buf(),
        source: io::Error::other(format!("more than {MAX_LINKS} symbolic links in a row, probably a loop")),
    })
}

/// Writes into an existing file that is not a regular file (device, pipe), without replacing it.
fn write_in_place(target: &Path, bytes: &[u8]) -> Result<(), OutputError> {
    let mut file = OpenOptions::new()
        .write(true)
        .open(target)
        .map_err(|source| OutputError::Open { path: target.to_path_buf(), source })?;
    // No fsync: devices and pipes do not support it (EINVAL), and there is nothing to make durable.
    write_body(&mut file, bytes).map_err(|source| OutputError::Write { path: target.to_path_buf(), source })
}

/// Writes a temporary file beside `target` and renames it over `target`. `old` is the metadata of
/// the regular file being replaced, `None` for a new file.
fn replace(target: &Path, bytes: &[u8], old: Option<&Metadata>) -> Result<(), OutputError> {
    let folder = folder_of(target);
    let name = target.file_name().ok_or_else(|| OutputError::IsADirectory { path: target.to_path_buf() })?;
    let (mut file, temp) =
        create_temp(folder, name).map_err(|source| OutputError::Create { path: target.to_path_buf(), source })?;
    // From here on, `temp` removes the temporary file when dropped, unless it was renamed.
    let write_err = |source| OutputError::Write { path: target.to_path_buf(), source };
    let replace_err = |source| OutputError::Replace { path: target.to_path_buf(), source };
    write_body(&mut file, bytes).map_err(write_err)?;
    if let Some(old) = old {
        keep_owner_and_mode(&file, old).map_err(replace_err)?;
    }
    file.sync_all().map_err(write_err)?;
    drop(file);
    #[cfg(test)]
    hooks::before_rename(target);
    fs::rename(&temp.path, target).map_err(replace_err)?;
    temp.keep();
    sync_folder(folder);
    Ok(())
}

/// A temporary file that is removed when dropped, unless [`TempFile::keep`] was called (after it
/// was renamed into place).
struct TempFile {
    path: PathBuf,
}

impl TempFile {
    /// Forgets the file: it has been renamed, its name is no longer ours.
    fn keep(self) {
        std::mem::forget(self);
    }
}

impl Drop for TempFile {
    fn drop(&mut self) {
        let _ = fs::remove_file(&self.path);
    }
}

/// Creates a new, hidden temporary file in `folder` for the target named `name`.
fn create_temp(folder: &Path, name: &OsStr) -> io::Result<(File, TempFile)> {
    let pid = std::process::id();
    // A file of that name may be left over from a crashed run of a process with the same id:
    // then take the next number.
    for _ in 0..100 {
        let n = TEMP_COUNTER.fetch_add(1, Ordering::Relaxed);
        let mut temp_name = OsString::from(".");
        temp_name.push(stem(name));
        temp_name.push(format!(".{pid}-{n}.part"));
        let path = folder.join(temp_name);
        // Default mode: 0o666 less the umask, as for any new file.
        match OpenOptions::new().write(true).create_new(true).open(&path) {
            Ok(file) => return Ok((file, TempFile { path })),
            Err(e) if e.kind() == io::ErrorKind::AlreadyExists => continue,
            Err(e) => return Err(e),
        }
    }
    Err(io::Error::new(io::ErrorKind::AlreadyExists, "no free name for a temporary file"))
}

/// The target's name, cut to [`MAX_TEMP_STEM`] bytes for the temporary name.
#[cfg(unix)]
fn stem(name: &OsStr) -> &OsStr {
    use std::os::unix::ffi::OsStrExt;
    let bytes = name.as_bytes();
    OsStr::from_bytes(&bytes[..bytes.len().min(MAX_TEMP_STEM)])
}

/// The target's name, cut to about [`MAX_TEMP_STEM`] characters for the temporary name.
#[cfg(not(unix))]
fn stem(name: &OsStr) -> OsString {
    name.to_string_lossy().chars().take(MAX_TEMP_STEM).collect::<String>().into()
}

/// Gives the temporary file the owner, group and permission bits of the file it replaces.
#[cfg(unix)]
fn keep_owner_and_mode(file: &File, old: &Metadata) -> io::Result<()> {
    use std::os::unix::fs::{fchown, MetadataExt, PermissionsExt};
    let now = file.metadata()?;
    if (now.uid(), now.gid()) != (old.uid(), old.gid()) {
        // Best effort: only root may give a file away; a user may still set a group they are in.
        if fchown(file, Some(old.uid()), Some(old.gid())).is_err() {
            let _ = fchown(file, None, Some(old.gid()));
        }
    }
    // After the owner: changing the owner clears the set-user/group-id bits.
    file.set_permissions(fs::Permissions::from_mode(old.mode() & 0o7777))
}

/// Fallback elsewhere: the new file keeps the default attributes.
#[cfg(not(unix))]
fn keep_owner_and_mode(_file: &File, _old: &Metadata) -> io::Result<()> {
    Ok(())
}

/// Flushes the folder's entries (the rename) to the disk; best effort.
#[cfg(unix)]
fn sync_folder(folder: &Path) {
    if let Ok(dir) = File::open(folder) {
        let _ = dir.sync_all();
    }
}

/// Fallback elsewhere: folders cannot be opened to flush them.
#[cfg(not(unix))]
fn sync_folder(_folder: &Path) {}

/// Writes all of `bytes` to `file`. Tests can make it fail part-way.
fn write_body(file: &mut File, bytes: &[u8]) -> io::Result<()> {
    #[cfg(test)]
    if let Some(limit) = hooks::WRITE_LIMIT.with(|l| l.take()) {
        file.write_all(&bytes[..limit.min(bytes.len())])?;
        return Err(io::Error::new(io::ErrorKind::StorageFull, "injected by the test: disk full"));
    }
    file.write_all(bytes)
}

/// Failure injection for the tests, per thread so tests running in parallel do not interfere.
#[cfg(test)]
mod hooks {
    use std::cell::{Cell, RefCell};
    use std::path::Path;

    /// Runs just before the rename, with the target.
    type BeforeRename = Box<dyn FnOnce(&Path)>;

    thread_local! {
        /// When set, the next write stops after this many bytes with a "disk full" error.
        pub(super) static WRITE_LIMIT: Cell<Option<usize>> = const { Cell::new(None) };
        /// When set, runs once just before the next rename.
        pub(super) static BEFORE_RENAME: RefCell<Option<BeforeRename>> = const { RefCell::new(None) };
    }

    pub(super) fn before_rename(target: &Path) {
        if let Some(hook) = BEFORE_RENAME.with(|h| h.borrow_mut().take()) {
            hook(target);
        }
    }
}

#[cfg(all(test, unix))]
mod tests {
    use super::*;
    use std::os::unix::fs::{symlink, FileTypeExt, MetadataExt, PermissionsExt};
    use std::sync::mpsc;
    use std::time::Duration;

    /// A fresh folder under the system's temporary folder, removed on drop. Dropping it outside
    /// a panic also checks that no `.part` file was left anywhere inside.
    struct Scratch(PathBuf);

    impl Scratch {
        fn new(tag: &str) -> Scratch {
            static N: AtomicU64 = AtomicU64::new(0);
            let n = N.fetch_add(1, Ordering::Relaxed);
            let dir = std::env::temp_dir().join(format!("ohmsight-output-{tag}-{}-{n}", std::process::id()));
            let _ = fs::remove_dir_all(&dir);
            fs::create_dir_all(&dir).unwrap();
            Scratch(dir)
        }

        fn path(&self, name: &str) -> PathBuf {
            self.0.join(name)
        }
    }

    /// Every `.part` file under `dir` (not following links).
    fn part_files(dir: &Path) -> Vec<PathBuf> {
        let mut found = Vec::new();
        for entry in fs::read_dir(dir).unwrap() {
            let entry = entry.unwrap();
            let kind = entry.file_type().unwrap();
            if kind.is_dir() {
                found.extend(part_files(&entry.path()));
            } else if entry.file_name().to_string_lossy().ends_with(".part") {
                found.push(entry.path());
            }
        }
        found
    }

    impl Drop for Scratch {
        fn drop(&mut self) {
            let left = part_files(&self.0);
            let _ = fs::remove_dir_all(&self.0);
            if !std::thread::panicking() {
                assert!(left.is_empty(), "temporary files left behind: {left:?}");
            }
        }
    }

    fn mode(path: &Path) -> u32 {
        fs::metadata(path).unwrap().permissions().mode() & 0o7777
    }

    /// The mode this process gives a new file (0o666 less the umask), seen on a file made by std.
    fn new_file_mode(dir: &Scratch) -> u32 {
        let probe = dir.path("probe");
        File::create(&probe).unwrap();
        let m = mode(&probe);
        fs::remove_file(&probe).unwrap();
        m
    }

    #[test]
    fn new_file_is_created_with_content_and_default_mode() {
        let dir = Scratch::new("new");
        let expected_mode = new_file_mode(&dir);
        let target = dir.path("report.html");
        write_file(&target, b"<p>hello</p>").unwrap();
        assert_eq!(fs::read(&target).unwrap(), b"<p>hello</p>");
        assert!(fs::symlink_metadata(&target).unwrap().file_type().is_file());
        assert_eq!(mode(&target), expected_mode);
        // Empty content is a valid file too.
        let empty = dir.path("empty.json");
        write_file(&empty, b"").unwrap();
        assert_eq!(fs::read(&empty).unwrap(), b"");
    }

    #[test]
    fn folder_of_a_bare_name_is_the_current_folder() {
        // Only checks the folder arithmetic for a name without a folder; the current folder is
        // shared by the tests, so this does not change it.
        assert_eq!(folder_of(Path::new("report.html")), Path::new("."));
        assert_eq!(folder_of(Path::new("out/report.html")), Path::new("out"));
        assert_eq!(folder_of(Path::new("/report.html")), Path::new("/"));
    }

    #[test]
    fn existing_file_is_replaced_and_keeps_its_mode() {
        let dir = Scratch::new("replace");
        for wanted in [0o640, 0o600, 0o755, 0o444] {
            let target = dir.path(&format!("report-{wanted:o}.html"));
            fs::write(&target, b"old content that is longer than the new one").unwrap();
            fs::set_permissions(&target, fs::Permissions::from_mode(wanted)).unwrap();
            let old_inode = fs::metadata(&target).unwrap().ino();
            write_file(&target, b"new").unwrap();
            assert_eq!(fs::read(&target).unwrap(), b"new");
            assert_eq!(mode(&target), wanted, "mode {wanted:o}");
            // Replaced by a rename, not rewritten in place.
            assert_ne!(fs::metadata(&target).unwrap().ino(), old_inode);
        }
    }

    #[test]
    fn existing_file_keeps_its_owner_when_root() {
        let dir = Scratch::new("owner");
        let target = dir.path("owned.html");
        fs::write(&target, b"old").unwrap();
        let me = fs::metadata(&target).unwrap();
        // As root, give the file to another user and group (65534: nobody/nogroup on Linux);
        // as a user, the owner is ours and must stay ours.
        let (uid, gid) = if me.uid() == 0 {
            std::os::unix::fs::chown(&target, Some(65534), Some(65534)).unwrap();
            (65534, 65534)
        } else {
            (me.uid(), me.gid())
        };
        fs::set_permissions(&target, fs::Permissions::from_mode(0o640)).unwrap();
        write_file(&target, b"new").unwrap();
        let after = fs::metadata(&target).unwrap();
        assert_eq!((after.uid(), after.gid()), (uid, gid));
        assert_eq!(after.permissions().mode() & 0o7777, 0o640);
        assert_eq!(fs::read(&target).unwrap(), b"new");
    }

    #[test]
    fn temporary_file_is_hidden_beside_the_target_with_the_old_mode() {
        let dir = Scratch::new("temp");
        let target = dir.path("page.html");
        fs::write(&target, b"old").unwrap();
        fs::set_permissions(&target, fs::Permissions::from_mode(0o640)).unwrap();
        let (tx, rx) = mpsc::channel();
        let folder = dir.0.clone();
        hooks::BEFORE_RENAME.with(|h| {
            *h.borrow_mut() = Some(Box::new(move |_: &Path| {
                // Seen just before the rename: the finished temporary file and the old target.
                let parts = part_files(&folder);
                let seen: Vec<_> = parts.iter().map(|p| (p.clone(), mode(p), fs::read(p).unwrap())).collect();
                tx.send(seen).unwrap();
            }))
        });
        write_file(&target, b"new page").unwrap();
        let seen = rx.recv().unwrap();
        assert_eq!(seen.len(), 1, "{seen:?}");
        let (path, temp_mode, content) = &seen[0];
        let name = path.file_name().unwrap().to_string_lossy().into_owned();
        let prefix = format!(".page.html.{}-", std::process::id());
        assert!(name.starts_with(&prefix) && name.ends_with(".part"), "{name}");
        assert_eq!(path.parent().unwrap(), dir.0);
        assert_eq!(*temp_mode, 0o640);
        assert_eq!(content, b"new page");
        assert_eq!(fs::read(&target).unwrap(), b"new page");
    }

    #[test]
    fn symlinks_are_followed_and_stay_links() {
        let dir = Scratch::new("links");
        fs::create_dir(dir.path("real")).unwrap();
        fs::create_dir(dir.path("links")).unwrap();
        let target = dir.path("real/report.html");
        fs::write(&target, b"old").unwrap();
        fs::set_permissions(&target, fs::Permissions::from_mode(0o640)).unwrap();

        // Relative to the folder holding the link, not to the current folder.
        let relative = dir.path("links/relative.html");
        symlink("../real/report.html", &relative).unwrap();
        // Absolute.
        let absolute = dir.path("links/absolute.html");
        symlink(&target, &absolute).unwrap();
        // A chain of two: link -> relative link -> target.
        let chain = dir.path("chain.html");
        symlink("links/relative.html", &chain).unwrap();

        for (link, content) in [(&relative, "one"), (&absolute, "two"), (&chain, "three")] {
            let before = fs::read_link(link).unwrap();
            write_file(link, content.as_bytes()).unwrap();
            assert_eq!(fs::read_to_string(&target).unwrap(), content, "through {link:?}");
            assert!(fs::symlink_metadata(link).unwrap().file_type().is_symlink(), "{link:?}");
            assert_eq!(fs::read_link(link).unwrap(), before);
            assert!(fs::symlink_metadata(&target).unwrap().file_type().is_file());
            assert_eq!(mode(&target), 0o640);
        }
        assert!(fs::symlink_metadata(&relative).unwrap().file_type().is_symlink());
        // Nothing new appeared beside the links.
        let mut names: Vec<_> = fs::read_dir(dir.path("links")).unwrap().map(|e| e.unwrap().file_name()).collect();
        names.sort();
        assert_eq!(names, ["absolute.html", "relative.html"]);
    }

    #[test]
    fn dangling_symlink_creates_its_target() {
        let dir = Scratch::new("dangling");
        fs::create_dir(dir.path("out")).unwrap();
        let link = dir.path("latest.html");
        symlink("out/2024.html", &link).unwrap();
        assert!(fs::metadata(&link).is_err(), "dangling before");
        write_file(&link, b"fresh").unwrap();
        assert_eq!(fs::read(dir.path("out/2024.html")).unwrap(), b"fresh");
        assert!(fs::symlink_metadata(dir.path("out/2024.html")).unwrap().file_type().is_file());
        assert!(fs::symlink_metadata(&link).unwrap().file_type().is_symlink());
        assert_eq!(fs::read_link(&link).unwrap(), Path::new("out/2024.html"));
    }

    #[test]
    fn symlink_loop_is_a_resolve_error() {
        let dir = Scratch::new("loop");
        let a = dir.path("a.html");
        let b = dir.path("b.html");
        symlink("b.html", &a).unwrap();
        symlink("a.html", &b).unwrap();
        let err = write_file(&a, b"x").unwrap_err();
        assert!(matches!(err, OutputError::Resolve { .. }), "{err:?}");
        assert!(err.to_string().contains(&a.display().to_string()), "{err}");
        assert!(err.source().is_some());
        assert!(fs::symlink_metadata(&a).unwrap().file_type().is_symlink());
        assert!(fs::symlink_metadata(&b).unwrap().file_type().is_symlink());
    }

    #[test]
    fn dev_null_stays_a_character_device() {
        let null = Path::new("/dev/null");
        assert!(fs::symlink_metadata(null).unwrap().file_type().is_char_device());
        write_file(null, b"discarded").unwrap();
        assert!(fs::symlink_metadata(null).unwrap().file_type().is_char_device());
        // No temporary file was made beside it.
        let leftovers: Vec<_> = fs::read_dir("/dev")
            .unwrap()
            .filter_map(|e| e.ok())
            .filter(|e| e.file_name().to_string_lossy().starts_with(".null."))
            .collect();
        assert!(leftovers.is_empty(), "{leftovers:?}");
    }

    #[test]
    fn fifo_receives_the_bytes_and_stays_a_fifo() {
        let dir = Scratch::new("fifo");
        let fifo = dir.path("pipe");
        let made = match std::process::Command::new("mkfifo").arg(&fifo).status() {
            Ok(status) => status,
            Err(e) if e.kind() == io::ErrorKind::NotFound => {
                eprintln!("skipped: mkfifo is not installed");
                return;
            }
            Err(e) => panic!("mkfifo: {e}"),
        };
        assert!(made.success());
        assert!(fs::symlink_metadata(&fifo).unwrap().file_type().is_fifo());
        let (tx, rx) = mpsc::channel();
        let reader_path = fifo.clone();
        std::thread::spawn(move || {
            let got = fs::read(&reader_path);
            let _ = tx.send(got.map_err(|e| e.to_string()));
        });
        let payload: Vec<u8> = (0..100_000u32).map(|i| (i % 251) as u8).collect();
        write_file(&fifo, &payload).unwrap();
        // A reader still blocked here would mean the pipe was replaced instead of written.
        let got = rx.recv_timeout(Duration::from_secs(20)).expect("the reader got no end of data").unwrap();
        assert_eq!(got, payload);
        assert!(fs::symlink_metadata(&fifo).unwrap().file_type().is_fifo());
    }

    #[test]
    fn directory_is_an_error() {
        let dir = Scratch::new("dir");
        let folder = dir.path("site");
        fs::create_dir(&folder).unwrap();
        fs::write(folder.join("keep.txt"), b"keep").unwrap();
        let err = write_file(&folder, b"x").unwrap_err();
        assert!(matches!(err, OutputError::IsADirectory { .. }), "{err:?}");
        assert!(err.to_string().contains(&folder.display().to_string()), "{err}");
        assert!(err.source().is_none());
        // Through a link to it, and by form.
        let link = dir.path("site-link");
        symlink("site", &link).unwrap();
        assert!(matches!(write_file(&link, b"x"), Err(OutputError::IsADirectory { .. })));
        assert!(matches!(write_file(&dir.path("new/"), b"x"), Err(OutputError::IsADirectory { .. })));
        assert!(matches!(write_file(&dir.path("site/.."), b"x"), Err(OutputError::IsADirectory { .. })));
        assert!(fs::metadata(&folder).unwrap().is_dir());
        assert_eq!(fs::read(folder.join("keep.txt")).unwrap(), b"keep");
        assert!(fs::metadata(dir.path("new")).is_err());
    }

    #[test]
    fn missing_folder_is_named_in_the_error() {
        let dir = Scratch::new("missing");
        let folder = dir.path("no-such-folder");
        let target = folder.join("report.html");
        let err = write_file(&target, b"x").unwrap_err();
        assert!(matches!(err, OutputError::Create { .. }), "{err:?}");
        assert_eq!(err.path(), target);
        let text = err.to_string();
        assert!(
            text.contains(&format!("the folder {} does not exist", folder.display())),
            "the message must name the folder: {text}"
        );
        assert!(text.contains(&target.display().to_string()) && text.contains("create it"), "{text}");
        let io = err.source().unwrap().downcast_ref::<io::Error>().unwrap();
        assert_eq!(io.kind(), io::ErrorKind::NotFound);
        assert!(fs::metadata(&folder).is_err());
    }

    #[test]
    fn failure_while_writing_keeps_the_old_file_and_leaves_no_temporary() {
        let dir = Scratch::new("write-fail");
        let target = dir.path("report.html");
        fs::write(&target, b"the old report").unwrap();
        fs::set_permissions(&target, fs::Permissions::from_mode(0o640)).unwrap();
        // The write stops after 4 bytes of the temporary file with "disk full".
        hooks::WRITE_LIMIT.with(|l| l.set(Some(4)));
        let err = write_file(&target, b"the new report, much longer").unwrap_err();
        assert!(matches!(err, OutputError::Write { .. }), "{err:?}");
        assert!(err.to_string().contains("disk is full"), "{err}");
        assert_eq!(fs::read(&target).unwrap(), b"the old report");
        assert_eq!(mode(&target), 0o640);
        assert!(part_files(&dir.0).is_empty(), "{:?}", part_files(&dir.0));

        // A new file that fails is not created at all.
        let fresh = dir.path("fresh.html");
        hooks::WRITE_LIMIT.with(|l| l.set(Some(2)));
        assert!(matches!(write_file(&fresh, b"abcdef"), Err(OutputError::Write { .. })));
        assert!(fs::symlink_metadata(&fresh).is_err());

        // The hook is used up: the next write succeeds.
        write_file(&target, b"done").unwrap();
        assert_eq!(fs::read(&target).unwrap(), b"done");
    }

    #[test]
    fn failing_rename_removes_the_temporary_file() {
        let dir = Scratch::new("rename-fail");
        let target = dir.path("report.html");
        fs::write(&target, b"old").unwrap();
        // Just before the rename the target becomes a folder that is not empty, so the system
        // refuses the rename (EISDIR): a real failure after the temporary file was written.
        hooks::BEFORE_RENAME.with(|h| {
            *h.borrow_mut() = Some(Box::new(|target: &Path| {
                fs::remove_file(target).unwrap();
                fs::create_dir(target).unwrap();
                fs::write(target.join("inside"), b"inside").unwrap();
            }))
        });
        let err = write_file(&target, b"new").unwrap_err();
        assert!(matches!(err, OutputError::Replace { .. }), "{err:?}");
        assert!(err.to_string().contains(&target.display().to_string()), "{err}");
        assert!(err.source().is_some());
        assert!(part_files(&dir.0).is_empty(), "{:?}", part_files(&dir.0));
        assert_eq!(fs::read(target.join("inside")).unwrap(), b"inside");
    }

    #[test]
    fn concurrent_writers_leave_one_whole_file() {
        let dir = Scratch::new("concurrent");
        let target = dir.path("shared.json");
        fs::write(&target, b"start").unwrap();
        let contents: Vec<Vec<u8>> = (0..8u8).map(|i| vec![b'a' + i; 20_000 + usize::from(i)]).collect();
        std::thread::scope(|s| {
            for content in &contents {
                let target = &target;
                s.spawn(move || {
                    for _ in 0..5 {
                        write_file(target, content).unwrap();
                    }
                });
            }
        });
        let last = fs::read(&target).unwrap();
        assert!(contents.contains(&last), "the file is not one writer's whole content");
    }

    #[test]
    fn every_error_names_its_path_and_a_next_step() {
        let p = PathBuf::from("/x/y.html");
        let e = || io::Error::from(io::ErrorKind::PermissionDenied);
        let errors = [
            OutputError::IsADirectory { path: p.clone() },
            OutputError::Resolve { path: p.clone(), source: e() },
            OutputError::Open { path: p.clone(), source: e() },
            OutputError::Create { path: p.clone(), source: e() },
            OutputError::Create { path: p.clone(), source: io::Error::from(io::ErrorKind::NotFound) },
            OutputError::Write { path: p.clone(), source: e() },
            OutputError::Replace { path: p.clone(), source: e() },
        ];
        for err in &errors {
            let text = err.to_string();
            assert!(text.starts_with("cannot write /x/y.html: "), "{text}");
            assert!(text.contains("; "), "no next step: {text}");
            assert!(!text.contains('\n'), "{text}");
        }
        assert_eq!(
            errors[4].to_string(),
            "cannot write /x/y.html: the folder /x does not exist; create it or pick another path"
        );
    }
}
