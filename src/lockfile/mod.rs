//! Lockfile formats. Each submodule is a pure parser from text to [`Parsed`]; the file name
//! decides which one applies ([`Format::detect`]). Discovery on disk lives in
//! [`crate::collect::lockfiles`].
//!
//! To add a format: write `parse(text, path) -> Result<Parsed, LockfileError>` in a new module,
//! add a [`Format`] variant, teach [`Format::detect`] its file names and [`Format::parse`] to call
//! it. Comparison and rendering need nothing more.

pub mod cargo;
pub mod requirements;

use crate::error::LockfileError;
use crate::manifest::Package;

/// What a parser returns.
#[derive(Debug, Default)]
pub struct Parsed {
    /// The format's own version marker, where it has one.
    pub format_version: Option<String>,
    /// Packages, sorted.
    pub packages: Vec<Package>,
    /// Problems that did not stop the parse (an unknown format version, say).
    pub warnings: Vec<String>,
}

/// Supported lockfile formats.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Format {
    /// Rust's `Cargo.lock`.
    CargoLock,
    /// pip's `requirements*.txt`.
    Requirements,
}

impl Format {
    /// The format of a file, judged by its name.
    pub fn detect(file_name: &str) -> Option<Format> {
        if file_name == "Cargo.lock" {
            Some(Format::CargoLock)
        } else if file_name.starts_with("requirements") && file_name.ends_with(".txt") {
            Some(Format::Requirements)
        } else {
            None
        }
    }

    /// The ecosystem's name as written in manifests.
    pub fn ecosystem(self) -> &'static str {
        match self {
            Format::CargoLock => "cargo",
            Format::Requirements => "pypi",
        }
    }

    /// Parses a file of this format.
    pub fn parse(self, text: &str, path: &str) -> Result<Parsed, LockfileError> {
        match self {
            Format::CargoLock => cargo::parse(text, path),
            Format::Requirements => requirements::parse(text, path),
        }
    }
}

/// 1-based line number of a byte offset.
pub fn line_of(text: &str, offset: usize) -> usize {
    let offset = offset.min(text.len());
    text.as_bytes()[..offset]
        .iter()
        .filter(|&&b| b == b'\n')
        .count()
        + 1
}
