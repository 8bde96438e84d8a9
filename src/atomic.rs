//! Atomic file writes: the data goes to a temporary file in the destination's folder, is
//! flushed to disk, then renamed over the destination. A reader (or a crash) sees either the
//! old complete file or the new complete one, never a mix.

use std::io::Write;
use std::path::Path;

use crate::error::WriteError;

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
    let mut tmp = tempfile::Builder::new()
        .prefix(".runprint-")
        .suffix(".tmp")
        .tempfile_in(dir)
        .map_err(err)?;
    tmp.write_all(bytes).map_err(err)?;
    tmp.as_file().sync_all().map_err(err)?;
    tmp.persist(path).map_err(|e| err(e.error))?;
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

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
