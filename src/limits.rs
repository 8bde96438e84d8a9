//! Bounded reading of the files runprint parses: manifests, lockfiles and the digest cache.
//!
//! runprint runs inside training jobs on files it did not write, so no input may make it read
//! without bound or wait forever:
//!
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
    std::env::var(MAX_FILE_BYTES_VAR)
        .ok()
        .and_then(|v| v.trim().parse::<u64>().ok())
        .filter(|&n| n > 0)
        .unwrap_or(DEFAULT_MAX_FILE_BYTES)
}

fn too_large(size: Option<u64>, limit: u64) -> io::Error {
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
    let mut bytes = Vec::with_capacity(len_hint.min(limit).min(1 << 24) as usize);
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
    let mut options = std::fs::OpenOptions::new();
    options.read(true);
    #[cfg(unix)]
    {
        use std::os::unix::fs::OpenOptionsExt;
        // Opening a FIFO for reading blocks until a writer appears, unless non-blocking.
        options.custom_flags(libc::O_NONBLOCK);
    }
    let file = options.open(path)?;
    let meta = file.metadata()?;
    if !meta.is_file() {
        return Err(io::Error::new(
            io::ErrorKind::InvalidInput,
            "not a regular file (a FIFO, socket or device is never read)",
        ));
    }
    if meta.len() > limit {
        return Err(too_large(Some(meta.len()), limit));
    }
    #[cfg(unix)]
    {
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
    read_to_limit(file, meta.len(), limit)
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
        assert!(err.contains("not a regular file"), "{err}");
    }

    #[test]
    fn a_folder_is_refused() {
        let dir = tempfile::tempdir().unwrap();
        assert!(read_named_file(dir.path()).is_err());
        assert!(read_regular_file(dir.path()).is_err());
    }
}
