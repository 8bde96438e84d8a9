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
    tmp.as_file().sync_all().map_err(err)?;
    tmp.persist(path).map_err(|e| err(e.error))?;
    Ok(())
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
