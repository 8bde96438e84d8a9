//! Typed errors. Each names the file it concerns, and the line where the format has lines, so
//! that a user can go straight to the problem.

use std::path::PathBuf;

use thiserror::Error;

/// A manifest could not be read.
#[derive(Debug, Error)]
pub enum ManifestError {
    /// The file could not be opened or read.
    #[error("cannot read manifest `{}`: {source}", path.display())]
    Read {
        /// The manifest's path.
        path: PathBuf,
        /// The operating system's reason.
        source: std::io::Error,
    },
    /// The text is not a valid manifest.
    #[error("`{}`{}: not a valid runprint manifest: {message}", path.display(), line.map(|l| format!(", line {l}")).unwrap_or_default())]
    Syntax {
        /// The manifest's path.
        path: PathBuf,
        /// 1-based line of the problem, when known.
        line: Option<usize>,
        /// What was wrong.
        message: String,
    },
    /// The manifest was written by a newer runprint.
    #[error("`{}`: manifest schema version {found} is not supported (this runprint reads up to {supported})", path.display())]
    UnsupportedVersion {
        /// The manifest's path.
        path: PathBuf,
        /// The version found in the file.
        found: u32,
        /// The highest version this build reads.
        supported: u32,
    },
}

/// A lockfile or requirements file could not be parsed.
#[derive(Debug, Error)]
#[error("`{path}`{}: {message}", line.map(|l| format!(", line {l}")).unwrap_or_default())]
pub struct LockfileError {
    /// The file's path as it will be shown.
    pub path: String,
    /// 1-based line of the problem, when known.
    pub line: Option<usize>,
    /// What was wrong.
    pub message: String,
}

impl LockfileError {
    /// An error at a line of a file. The message passes [`crate::redact::content_free`]: it
    /// may name a package or a key, never quote a line of the file.
    pub fn at(path: &str, line: Option<usize>, message: impl Into<String>) -> Self {
        LockfileError {
            path: path.to_string(),
            line,
            message: crate::redact::content_free(&message.into()),
        }
    }
}

/// Writing a manifest failed.
#[derive(Debug, Error)]
#[error("cannot write `{}`: {source}", path.display())]
pub struct WriteError {
    /// The destination.
    pub path: PathBuf,
    /// The operating system's reason.
    pub source: std::io::Error,
}
