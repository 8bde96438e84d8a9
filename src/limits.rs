//! The file-opening policy: every read of a file runprint did not write goes through here
//! (`tests/file_policy.rs` fails when `std::fs::read*`, `File::open` or `OpenOptions` appear
//! in another module).
//!
//! runprint runs in CI on pull requests from strangers and inside training jobs next to
//! credentials, on files it did not write, so no input may make it read without bound, wait
//! forever, or read a file the repository merely points at:
//!
//! * [`Confinement::read`] reads a repository's file only when its real path, the one the
//!   opened descriptor has (`/proc/self/fd/N` on Linux), lies inside the repository: a
//!   committed symbolic link `requirements.txt -> /etc/shadow` or `-> ../.netrc` is refused
//!   with a warning that names the file and never its content;
//! * a file larger than [`max_file_bytes`] is refused before it is read, judged first by its
//!   metadata and then by a reader that stops one byte past the limit (a file that grows while
//!   it is read, or a pipe, cannot get past it);
//! * [`read_regular_file`] refuses anything that is not a regular file (a FIFO would block the
//!   open, a device could stream forever). It opens with `O_NONBLOCK` and checks the opened
//!   file itself, so a file swapped for a FIFO between the check and the open cannot block;
//! * [`read_named_file`] is for files the user named on the command line (`diff OLD NEW`), where
//!   a pipe such as `<(cat old.toml)` is legitimate; only the size bound applies.
//!
//! The limit defaults to [`DEFAULT_MAX_FILE_BYTES`] and can be set, in bytes, with the
//! environment variable [`MAX_FILE_BYTES_VAR`] (an advanced setting, used by the tests to
//! exercise the limit on small files).
//!
//! Nesting depth is bounded by the parsers themselves; `tests/malformed.rs` feeds 100,000
//! nested brackets to each parser family and checks for an error rather than a stack
//! overflow: `serde_json` stops at 128 levels, the `toml` crate's parser at a fixed recursion
//! limit, and the YAML crate at its own recursion limit.

use std::fs::File;
use std::io::{self, Read};
use std::path::Path;

/// The default largest file runprint reads: 256 MiB, far above any real lockfile or manifest.
pub const DEFAULT_MAX_FILE_BYTES: u64 = 256 * 1024 * 1024;

/// The environment variable that sets the limit in bytes (a plain decimal integer).
pub const MAX_FILE_BYTES_VAR: &str = "RUNPRINT_MAX_FILE_BYTES";

/// The largest file runprint reads, from [`MAX_FILE_BYTES_VAR`] when it holds a positive
/// integer, else [`DEFAULT_MAX_FILE_BYTES`].
pub fn max_file_bytes() -> u64 {
    positive_var(MAX_FILE_BYTES_VAR).unwrap_or(DEFAULT_MAX_FILE_BYTES)
}

/// The positive integer an environment variable holds, if it holds one.
fn positive_var<T: std::str::FromStr + PartialOrd + Default>(name: &str) -> Option<T> {
    std::env::var(name)
        .ok()
        .and_then(|v| v.trim().parse::<T>().ok())
        .filter(|n| *n > T::default())
}

/// The default largest number of packages recorded for one lockfile: 100,000, several times
/// the largest real lockfiles (a big JavaScript monorepo resolves a few tens of thousands).
/// Above it, the lockfile is recorded by its digest alone, so that a manifest and the memory
/// needed to write and compare it stay bounded.
pub const DEFAULT_MAX_PACKAGES: usize = 100_000;

/// The environment variable that sets the package limit (a plain decimal integer).
pub const MAX_PACKAGES_VAR: &str = "RUNPRINT_MAX_PACKAGES";

/// The largest number of packages recorded for one lockfile, from [`MAX_PACKAGES_VAR`] when
/// it holds a positive integer, else [`DEFAULT_MAX_PACKAGES`].
pub fn max_packages() -> usize {
    positive_var(MAX_PACKAGES_VAR).unwrap_or(DEFAULT_MAX_PACKAGES)
}

/// The error for a file over the limit (`size` when known).
pub(crate) fn too_large(size: Option<u64>, limit: u64) -> io::Error {
    let what = match size {
        Some(size) => format!("{size} bytes is"),
        None => "the file is".to_string(),
    };
    io::Error::new(
        io::ErrorKind::InvalidData,
        format!(
            "{what} over the {limit}-byte limit for files runprint reads \
             (set {MAX_FILE_BYTES_VAR} to raise it)"
        ),
    )
}

/// Reads at most `limit` bytes from an open file; more is an error.
fn read_to_limit(file: File, len_hint: u64, limit: u64) -> io::Result<Vec<u8>> {
    // One byte more than the file: `read_to_end` probes for the end with a read into spare
    // capacity, and a full vector would be grown (and the file copied) just for that probe.
    let mut bytes = Vec::with_capacity(len_hint.min(limit).min(1 << 24).saturating_add(1) as usize);
    file.take(limit.saturating_add(1)).read_to_end(&mut bytes)?;
    if bytes.len() as u64 > limit {
        return Err(too_large(None, limit));
    }
    Ok(bytes)
}

/// Reads a regular file of at most [`max_file_bytes`] bytes. FIFOs, sockets and devices are
/// refused without blocking.
pub fn read_regular_file(path: &Path) -> io::Result<Vec<u8>> {
    read_regular_file_with_limit(path, max_file_bytes())
}

/// [`read_regular_file`] with an explicit limit.
pub fn read_regular_file_with_limit(path: &Path, limit: u64) -> io::Result<Vec<u8>> {
    let file = open_regular(path, true)?;
    let len = file.metadata()?.len();
    if len > limit {
        return Err(too_large(Some(len), limit));
    }
    read_to_limit(file, len, limit)
}

/// Reads a regular file of at most [`max_file_bytes`] bytes without following a symbolic
/// link at its last component (a link is refused as such).
pub fn read_regular_file_nofollow(path: &Path) -> io::Result<Vec<u8>> {
    let limit = max_file_bytes();
    let file = open_regular(path, false)?;
    let len = file.metadata()?.len();
    if len > limit {
        return Err(too_large(Some(len), limit));
    }
    read_to_limit(file, len, limit)
}

/// Why a file was not read, as the rest of a sentence that starts with its name: the
/// policy's own words ("is a FIFO, not a regular file (never read)") or "cannot be read
/// (…)" with the system's reason.
pub fn refusal(e: &io::Error) -> String {
    let text = e.to_string();
    if text.starts_with("is ") {
        text
    } else if e.raw_os_error() == Some(libc::ELOOP) {
        "is a symbolic link that loops (never read)".to_string()
    } else {
        format!("cannot be read ({text})")
    }
}

/// Opens a regular file for reading without blocking on a FIFO and without following a
/// symbolic link at the last component when `follow` is false. The descriptor is back in
/// blocking mode when returned. Anything but a regular file is refused.
pub fn open_regular(path: &Path, follow: bool) -> io::Result<File> {
    // Judged by its metadata first, so a device is never even opened (opening some devices
    // has effects of its own); the opened descriptor is checked again below, as the file may
    // be swapped between the two steps.
    let before = if follow {
        std::fs::metadata(path)?
    } else {
        std::fs::symlink_metadata(path)?
    };
    if before.is_symlink() {
        return Err(io::Error::new(
            io::ErrorKind::InvalidInput,
            "is a symbolic link",
        ));
    }
    if !before.is_file() {
        return Err(not_regular(&before));
    }
    let mut options = std::fs::OpenOptions::new();
    options.read(true);
    #[cfg(unix)]
    {
        use std::os::unix::fs::OpenOptionsExt;
        // Opening a FIFO for reading blocks until a writer appears, unless non-blocking;
        // O_NOCTTY keeps a terminal device from becoming the controlling terminal.
        let mut flags = libc::O_NONBLOCK | libc::O_NOCTTY;
        if !follow {
            flags |= libc::O_NOFOLLOW;
        }
        options.custom_flags(flags);
    }
    let file = options.open(path).map_err(|e| {
        if !follow && e.raw_os_error() == Some(libc::ELOOP) {
            io::Error::new(io::ErrorKind::InvalidInput, "is a symbolic link")
        } else {
            e
        }
    })?;
    let meta = file.metadata()?;
    if !meta.is_file() {
        return Err(not_regular(&meta));
    }
    blocking(&file);
    Ok(file)
}

/// Why a non-regular file is refused, by its type.
fn not_regular(meta: &std::fs::Metadata) -> io::Error {
    let what = kind_of(meta);
    io::Error::new(
        io::ErrorKind::InvalidInput,
        format!("is {what}, not a regular file (never read)"),
    )
}

/// The kind of a file, in words.
pub fn kind_of(meta: &std::fs::Metadata) -> &'static str {
    #[cfg(unix)]
    {
        use std::os::unix::fs::FileTypeExt;
        let t = meta.file_type();
        if t.is_fifo() {
            return "a FIFO";
        }
        if t.is_socket() {
            return "a socket";
        }
        if t.is_char_device() {
            return "a character device";
        }
        if t.is_block_device() {
            return "a block device";
        }
    }
    if meta.is_dir() {
        "a folder"
    } else if meta.is_symlink() {
        "a symbolic link"
    } else if meta.is_file() {
        "a regular file"
    } else {
        "a special file"
    }
}

/// Puts a descriptor opened with `O_NONBLOCK` back into blocking mode.
#[cfg(unix)]
pub(crate) fn blocking(file: &File) {
    // Back to blocking reads: a regular file ignores the flag, but a slow network file
    // system should not see spurious `WouldBlock` errors.
    use std::os::unix::io::AsRawFd;
    let fd = file.as_raw_fd();
    // SAFETY: `fd` is a valid open descriptor owned by `file` for the duration of the calls.
    unsafe {
        let flags = libc::fcntl(fd, libc::F_GETFL);
        if flags >= 0 {
            libc::fcntl(fd, libc::F_SETFL, flags & !libc::O_NONBLOCK);
        }
    }
}

#[cfg(not(unix))]
pub(crate) fn blocking(_file: &File) {}

/// The real path of an open file: what `/proc/self/fd/N` points at on Linux (the file that was
/// opened, whatever links led there), else the path resolved again.
fn real_path_of(file: &File, path: &Path) -> io::Result<std::path::PathBuf> {
    #[cfg(target_os = "linux")]
    {
        use std::os::unix::io::AsRawFd;
        let link = format!("/proc/self/fd/{}", file.as_raw_fd());
        if let Ok(p) = std::fs::read_link(link) {
            return Ok(p);
        }
    }
    let _ = file;
    std::fs::canonicalize(path)
}

/// Reads that stay inside one folder (the repository being stamped): a file whose real path
/// lies outside it is refused, whatever symbolic links lead there.
#[derive(Debug, Clone)]
pub struct Confinement {
    root: std::path::PathBuf,
}

impl Confinement {
    /// Reads confined to `root` (resolved once, here).
    pub fn new(root: &Path) -> Confinement {
        Confinement {
            root: std::fs::canonicalize(root).unwrap_or_else(|_| {
                std::path::absolute(root).unwrap_or_else(|_| root.to_path_buf())
            }),
        }
    }

    /// The resolved folder reads are confined to.
    pub fn root(&self) -> &Path {
        &self.root
    }

    /// True when a resolved path lies inside the folder.
    pub fn contains(&self, real: &Path) -> bool {
        real.starts_with(&self.root)
    }

    /// Opens a regular file inside the folder (see [`open_regular`]).
    pub fn open(&self, path: &Path) -> io::Result<File> {
        let file = open_regular(path, true)?;
        let real = real_path_of(&file, path)?;
        if !self.contains(&real) {
            return Err(io::Error::new(
                io::ErrorKind::PermissionDenied,
                "is a symbolic link to a file outside the repository (never read)",
            ));
        }
        Ok(file)
    }

    /// Reads a regular file of at most [`max_file_bytes`] bytes inside the folder.
    pub fn read(&self, path: &Path) -> io::Result<Vec<u8>> {
        let limit = max_file_bytes();
        let file = self.open(path)?;
        let len = file.metadata()?.len();
        if len > limit {
            return Err(too_large(Some(len), limit));
        }
        read_to_limit(file, len, limit)
    }
}

/// Reads a regular file as UTF-8 text, bounded like [`read_regular_file`].
pub fn read_regular_text(path: &Path) -> io::Result<String> {
    String::from_utf8(read_regular_file(path)?)
        .map_err(|_| io::Error::new(io::ErrorKind::InvalidData, "is not valid UTF-8"))
}

/// Reads a file the user named (a pipe allowed), of at most [`max_file_bytes`] bytes.
pub fn read_named_file(path: &Path) -> io::Result<Vec<u8>> {
    let limit = max_file_bytes();
    let file = File::open(path)?;
    let meta = file.metadata()?;
    if meta.is_dir() {
        return Err(io::Error::new(
            io::ErrorKind::InvalidInput,
            "is a folder, not a file",
        ));
    }
    if meta.is_file() && meta.len() > limit {
        return Err(too_large(Some(meta.len()), limit));
    }
    read_to_limit(file, meta.len(), limit)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn limit_is_enforced_by_metadata_and_reader() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("f");
        std::fs::write(&p, vec![b'x'; 100]).unwrap();
        assert_eq!(read_regular_file_with_limit(&p, 100).unwrap().len(), 100);
        let err = read_regular_file_with_limit(&p, 99)
            .unwrap_err()
            .to_string();
        assert!(
            err.contains("100 bytes") && err.contains(MAX_FILE_BYTES_VAR),
            "{err}"
        );
    }

    #[cfg(unix)]
    #[test]
    fn a_fifo_is_refused_without_blocking() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("fifo");
        let c = std::ffi::CString::new(p.to_str().unwrap()).unwrap();
        // SAFETY: a valid NUL-terminated path.
        assert_eq!(unsafe { libc::mkfifo(c.as_ptr(), 0o600) }, 0);
        let err = read_regular_file(&p).unwrap_err().to_string();
        assert!(err.contains("a FIFO, not a regular file"), "{err}");
    }

    #[cfg(unix)]
    #[test]
    fn confinement_refuses_links_out_of_the_folder_and_keeps_links_inside() {
        let outside = tempfile::tempdir().unwrap();
        let secret = outside.path().join(".netrc");
        std::fs::write(&secret, "machine h login u password hunter2\n").unwrap();
        let repo = tempfile::tempdir().unwrap();
        std::fs::write(repo.path().join("real.txt"), "numpy==1.26.4\n").unwrap();
        std::os::unix::fs::symlink(&secret, repo.path().join("requirements.txt")).unwrap();
        std::os::unix::fs::symlink("real.txt", repo.path().join("requirements-dev.txt")).unwrap();
        std::fs::create_dir(repo.path().join("sub")).unwrap();
        let rel = format!("../../{}", secret.strip_prefix("/").unwrap().display());
        let deep = format!("../{rel}");
        std::os::unix::fs::symlink(&deep, repo.path().join("sub/requirements.txt")).unwrap();
        let c = Confinement::new(repo.path());
        for p in ["requirements.txt", "sub/requirements.txt"] {
            let err = c.read(&repo.path().join(p)).unwrap_err().to_string();
            assert!(err.contains("outside the repository"), "{p}: {err}");
            assert!(!err.contains("hunter2"), "{err}");
        }
        assert_eq!(
            c.read(&repo.path().join("requirements-dev.txt")).unwrap(),
            b"numpy==1.26.4\n"
        );
        // A symbolic link to a device is refused for its type before anything is read.
        std::os::unix::fs::symlink("/dev/zero", repo.path().join("zero")).unwrap();
        let err = c.read(&repo.path().join("zero")).unwrap_err().to_string();
        assert!(err.contains("character device"), "{err}");
        // Not following: the link itself is refused.
        let err = open_regular(&repo.path().join("requirements-dev.txt"), false)
            .unwrap_err()
            .to_string();
        assert!(err.contains("symbolic link"), "{err}");
    }

    #[test]
    fn a_folder_is_refused() {
        let dir = tempfile::tempdir().unwrap();
        assert!(read_named_file(dir.path()).is_err());
        assert!(read_regular_file(dir.path()).is_err());
    }
}
