//! Atomic file writes: the data goes to a temporary file in the destination's folder, is
//! flushed to disk, then renamed over the destination. A reader (or a crash) sees either the
//! old complete file or the new complete one, never a mix.
//!
//! A process killed between the two steps leaves its temporary file (`.runprint-*.tmp`)
//! behind. Every write sweeps away such files in its folder once they are older than
//! [`STALE_TEMPORARY`]: no write takes that long, so a file that old belongs to a dead writer.
//! Age, not the writer's process id, decides, because several hosts (or containers with
//! separate process ids) may write into one shared folder.

use std::io::Write;
use std::path::Path;
use std::time::{Duration, SystemTime};

use crate::error::WriteError;

/// How old a leftover temporary file must be before a later write removes it.
pub const STALE_TEMPORARY: Duration = Duration::from_secs(10 * 60);

const PREFIX: &str = ".runprint-";
const SUFFIX: &str = ".tmp";

/// Writes `bytes` to `path` atomically.
pub fn write_atomic(path: &Path, bytes: &[u8]) -> Result<(), WriteError> {
    let err = |source| WriteError {
        path: path.to_path_buf(),
        source,
    };
    let dir = match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p,
        _ => Path::new("."),
    };
    remove_stale_temporaries(dir, SystemTime::now());
    let mut tmp = tempfile::Builder::new()
        .prefix(PREFIX)
        .suffix(SUFFIX)
        .tempfile_in(dir)
        .map_err(err)?;
    tmp.write_all(bytes).map_err(err)?;
    // The data and what is needed to read it back (its size); not the times.
    tmp.as_file().sync_data().map_err(err)?;
    tmp.persist(path).map_err(|e| err(e.error))?;
    Ok(())
}

/// Writes a file the user named (`stamp --out`, `check --save`) without ever destroying what
/// the name stands for:
/// * a symbolic link is written through: its target is replaced atomically, the link stays;
/// * a character device, FIFO or socket (`/dev/null`, `/dev/stdout`, a pipe) is written to in
///   place, never replaced by a regular file (which, as root, would destroy a device node);
/// * an existing regular file is replaced atomically and keeps its permission bits;
/// * a new file is written atomically.
pub fn write_output(path: &Path, bytes: &[u8]) -> Result<(), WriteError> {
    let err = |source| WriteError {
        path: path.to_path_buf(),
        source,
    };
    let meta = match std::fs::symlink_metadata(path) {
        Ok(m) => m,
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => return write_atomic(path, bytes),
        Err(e) => return Err(err(e)),
    };
    if meta.is_symlink() {
        // The final target, following every link; a dangling link's target is created.
        let target = match std::fs::canonicalize(path) {
            Ok(t) => t,
            Err(_) => {
                let link = std::fs::read_link(path).map_err(err)?;
                path.parent().unwrap_or(Path::new(".")).join(link)
            }
        };
        if std::fs::symlink_metadata(&target).is_ok_and(|m| m.is_symlink()) {
            return Err(err(std::io::Error::new(
                std::io::ErrorKind::InvalidInput,
                "is a chain of symbolic links that does not end in a file",
            )));
        }
        return write_output(&target, bytes);
    }
    if meta.is_dir() {
        return Err(err(std::io::Error::new(
            std::io::ErrorKind::InvalidInput,
            "is a folder",
        )));
    }
    if !meta.is_file() {
        let mut options = std::fs::OpenOptions::new();
        options.write(true);
        #[cfg(unix)]
        {
            use std::os::unix::fs::OpenOptionsExt;
            // A FIFO without a reader is an error at once rather than a wait (open(2), ENXIO).
            options.custom_flags(libc::O_NONBLOCK | libc::O_NOCTTY);
        }
        let mut f = options.open(path).map_err(err)?;
        crate::limits::blocking(&f);
        f.write_all(bytes).map_err(err)?;
        return f.flush().map_err(err);
    }
    write_atomic(path, bytes)?;
    std::fs::set_permissions(path, meta.permissions()).map_err(err)
}

/// Removes the temporary files of killed writers from `dir`: plain files named
/// `.runprint-*.tmp` last modified more than [`STALE_TEMPORARY`] before `now`. Best effort:
/// a file that cannot be read or removed (another process removed it first) is left alone.
pub fn remove_stale_temporaries(dir: &Path, now: SystemTime) {
    remove_older_than(dir, now, STALE_TEMPORARY, |name| {
        name.starts_with(PREFIX) && name.ends_with(SUFFIX)
    });
}

/// Removes the plain files in `dir` whose (UTF-8) name `matches` and that were last modified
/// more than `age` before `now`. Best effort: a file that cannot be read or removed (another
/// process removed it first) is left alone.
pub fn remove_older_than(
    dir: &Path,
    now: SystemTime,
    age: std::time::Duration,
    matches: impl Fn(&str) -> bool,
) {
    let Ok(entries) = std::fs::read_dir(dir) else {
        return;
    };
    for entry in entries.flatten() {
        let name = entry.file_name();
        let Some(name) = name.to_str() else { continue };
        if !matches(name) {
            continue;
        }
        // `DirEntry::metadata` does not follow symbolic links.
        let Ok(meta) = entry.metadata() else { continue };
        let old = meta
            .modified()
            .ok()
            .and_then(|m| now.duration_since(m).ok())
            .is_some_and(|a| a > age);
        if meta.is_file() && old {
            let _ = std::fs::remove_file(entry.path());
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn stale_temporaries_of_killed_writers_are_removed() {
        let dir = tempfile::tempdir().unwrap();
        let touch = |name: &str, age: Duration| {
            let p = dir.path().join(name);
            std::fs::write(&p, b"partial").unwrap();
            let f = std::fs::File::options().write(true).open(&p).unwrap();
            f.set_modified(SystemTime::now() - age).unwrap();
        };
        let hour = Duration::from_secs(3600);
        touch(".runprint-AbC123.tmp", hour);
        touch(".runprint-live01.tmp", Duration::from_secs(5));
        touch(".other-AbC123.tmp", hour);
        touch("notes.tmp", hour);
        std::fs::create_dir(dir.path().join(".runprint-dir.tmp")).unwrap();
        std::os::unix::fs::symlink("/nonexistent", dir.path().join(".runprint-link.tmp")).unwrap();
        write_atomic(&dir.path().join("m.toml"), b"new").unwrap();
        let mut left: Vec<String> = std::fs::read_dir(dir.path())
            .unwrap()
            .map(|e| e.unwrap().file_name().into_string().unwrap())
            .collect();
        left.sort();
        assert_eq!(
            left,
            [
                ".other-AbC123.tmp",
                ".runprint-dir.tmp",
                ".runprint-link.tmp",
                ".runprint-live01.tmp",
                "m.toml",
                "notes.tmp"
            ]
        );
    }

    #[cfg(unix)]
    #[test]
    fn named_outputs_are_written_through_never_replaced() {
        use std::os::unix::fs::PermissionsExt;
        let dir = tempfile::tempdir().unwrap();
        // A symbolic link: the target gets the text, the link stays a link.
        let target = dir.path().join("real.toml");
        std::fs::write(&target, b"old").unwrap();
        let link = dir.path().join("link.toml");
        std::os::unix::fs::symlink("real.toml", &link).unwrap();
        write_output(&link, b"new").unwrap();
        assert!(std::fs::symlink_metadata(&link).unwrap().is_symlink());
        assert_eq!(std::fs::read(&target).unwrap(), b"new");
        // An existing file keeps its mode (644 stays 644, not the temporary file's 600).
        std::fs::set_permissions(&target, std::fs::Permissions::from_mode(0o644)).unwrap();
        write_output(&target, b"newer").unwrap();
        let mode = std::fs::metadata(&target).unwrap().permissions().mode() & 0o777;
        assert_eq!(mode, 0o644);
        // A character device is written to, not replaced: /dev/null stays a device.
        write_output(Path::new("/dev/null"), b"x").unwrap();
        use std::os::unix::fs::FileTypeExt;
        assert!(std::fs::metadata("/dev/null")
            .unwrap()
            .file_type()
            .is_char_device());
        // A FIFO with a reader gets the bytes in place.
        let fifo = dir.path().join("fifo");
        let c = std::ffi::CString::new(fifo.to_str().unwrap()).unwrap();
        // SAFETY: a valid NUL-terminated path.
        assert_eq!(unsafe { libc::mkfifo(c.as_ptr(), 0o600) }, 0);
        let reader = {
            let fifo = fifo.clone();
            std::thread::spawn(move || std::fs::read(fifo).unwrap())
        };
        let mut tries = 0;
        while let Err(e) = write_output(&fifo, b"through") {
            tries += 1;
            assert!(tries < 500, "{e}");
            std::thread::sleep(Duration::from_millis(10));
        }
        assert_eq!(reader.join().unwrap(), b"through");
        assert!(std::fs::symlink_metadata(&fifo)
            .unwrap()
            .file_type()
            .is_fifo());
    }

    #[test]
    fn replaces_whole_file_and_leaves_no_temporary() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("m.toml");
        write_atomic(&p, b"old").unwrap();
        write_atomic(&p, b"new content").unwrap();
        assert_eq!(std::fs::read(&p).unwrap(), b"new content");
        assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 1);
    }

    #[test]
    fn missing_folder_is_an_error_naming_the_file() {
        let err = write_atomic(Path::new("/nonexistent-folder-xyz/m.toml"), b"x").unwrap_err();
        assert!(err.to_string().contains("/nonexistent-folder-xyz/m.toml"));
    }
}
