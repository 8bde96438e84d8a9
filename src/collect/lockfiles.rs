//! Finds every supported lockfile under the repository root and parses it.
//!
//! The walk respects `.gitignore` (the `ignore` crate, as ripgrep does) and skips folders that
//! hold installed or built code rather than the project's own: `.git`, `node_modules`,
//! `target`, virtual environments and caches. A file that cannot be read or parsed becomes a
//! warning; the others are still recorded.

use std::collections::HashSet;
use std::path::{Path, PathBuf};
use std::process::Command;

use sha2::{Digest, Sha256};

use crate::lockfile::{cargo, requirements, Format, Parsed};
use crate::manifest::{hex, Lockfile};

/// Folder names never descended into.
const SKIPPED_DIRS: &[&str] = &[
    ".git",
    "node_modules",
    "target",
    ".venv",
    "venv",
    "__pycache__",
    "site-packages",
    ".tox",
    ".nox",
    ".mypy_cache",
    ".pytest_cache",
];

/// Lockfiles found under `root`, as paths relative to it, sorted.
pub fn discover(root: &Path) -> Vec<PathBuf> {
    let mut found: Vec<PathBuf> = ignore::WalkBuilder::new(root)
        .hidden(false)
        .git_ignore(true)
        .git_exclude(true)
        .require_git(false)
        .filter_entry(|e| {
            !(e.file_type().is_some_and(|t| t.is_dir())
                && e.file_name()
                    .to_str()
                    .is_some_and(|n| SKIPPED_DIRS.contains(&n)))
        })
        .build()
        .filter_map(Result::ok)
        .filter(|e| e.file_type().is_some_and(|t| t.is_file()))
        .filter(|e| e.file_name().to_str().and_then(Format::detect).is_some())
        .filter_map(|e| e.path().strip_prefix(root).ok().map(Path::to_path_buf))
        .collect();
    found.sort();
    found
}

/// Reads and parses every lockfile under `root`, plus `extra` files named by the user (which
/// may lie outside it). Problems are pushed to `warnings`; duplicates are read once.
pub fn collect(root: &Path, extra: &[PathBuf], warnings: &mut Vec<String>) -> Vec<Lockfile> {
    let mut files: Vec<(PathBuf, String)> = discover(root)
        .into_iter()
        .map(|rel| (root.join(&rel), rel.to_string_lossy().replace('\\', "/")))
        .collect();
    for path in extra {
        let abs = std::path::absolute(path).unwrap_or_else(|_| path.clone());
        let root_abs = std::path::absolute(root).unwrap_or_else(|_| root.to_path_buf());
        let shown = match abs.strip_prefix(&root_abs) {
            Ok(rel) => rel.to_string_lossy().replace('\\', "/"),
            Err(_) => path.to_string_lossy().into_owned(),
        };
        if !files.iter().any(|(_, s)| *s == shown) {
            files.push((abs, shown));
        }
    }
    files
        .iter()
        .filter_map(|(abs, shown)| read_one(root, abs, shown, warnings))
        .collect()
}

/// Reads and parses one lockfile; `shown` is the path written to the manifest.
fn read_one(root: &Path, abs: &Path, shown: &str, warnings: &mut Vec<String>) -> Option<Lockfile> {
    let Some(format) = abs
        .file_name()
        .and_then(|n| n.to_str())
        .and_then(Format::detect)
    else {
        warnings.push(format!(
            "lockfile `{shown}`: not a lockfile format runprint reads"
        ));
        return None;
    };
    let bytes = match crate::limits::read_regular_file(abs) {
        Ok(b) => b,
        Err(e) => {
            warnings.push(format!("lockfile `{shown}`: cannot read: {e}"));
            return None;
        }
    };
    let text = match crate::lockfile::decode(&bytes, shown) {
        Ok(t) => t,
        Err(e) => {
            warnings.push(format!("lockfile {e}"));
            return None;
        }
    };
    // A companion file (go.sum beside go.mod) is read with it; its hashes reach the packages.
    let companion = format.companion().and_then(|name| {
        let path = abs.with_file_name(name);
        let shown = match shown.rsplit_once('/') {
            Some((dir, _)) => format!("{dir}/{name}"),
            None => name.to_string(),
        };
        if std::fs::symlink_metadata(&path).is_err() {
            return None;
        }
        let bytes = match crate::limits::read_regular_file(&path) {
            Ok(b) => b,
            Err(e) => {
                warnings.push(format!("lockfile `{shown}`: cannot read: {e}"));
                return None;
            }
        };
        match crate::lockfile::decode(&bytes, &shown) {
            Ok(text) => Some((text.to_string(), shown)),
            Err(e) => {
                warnings.push(format!("lockfile {e}"));
                None
            }
        }
    });
    let mut parsed = match format.parse_with_companion(
        text,
        shown,
        companion.as_ref().map(|(t, p)| (t.as_str(), p.as_str())),
    ) {
        Ok(p) => p,
        Err(e) => {
            warnings.push(format!("lockfile {e}"));
            return None;
        }
    };
    warnings.append(&mut parsed.warnings);
    if !parsed.includes.is_empty() {
        merge_includes(root, abs, &mut parsed, warnings);
    }
    if format == Format::CargoLock {
        if let Some(dir) = abs.parent() {
            match cargo_features(dir) {
                Ok(Some(metadata)) => cargo::apply_features(&mut parsed.packages, &metadata),
                Ok(None) => {}
                Err(e) => warnings.push(format!(
                    "lockfile `{shown}`: enabled features not recorded: {e}"
                )),
            }
        }
    }
    Some(Lockfile {
        path: shown.to_string(),
        ecosystem: format.ecosystem().to_string(),
        format_version: parsed.format_version,
        sha256: hex(&Sha256::digest(&bytes)),
        packages: parsed.packages,
    })
}

/// Reads the files a requirements file includes, relative to the file that names them, each
/// at most once (so include cycles end), and adds their packages to `parsed`. Entries from
/// constraints files (`-c`) are marked optional: they pin versions without asking for
/// installation.
fn merge_includes(root: &Path, file: &Path, parsed: &mut Parsed, warnings: &mut Vec<String>) {
    let root = root.canonicalize().unwrap_or_else(|_| root.to_path_buf());
    let mut seen: HashSet<PathBuf> = file.canonicalize().into_iter().collect();
    let mut queue: Vec<(PathBuf, crate::lockfile::Include)> = parsed
        .includes
        .drain(..)
        .map(|inc| (file.to_path_buf(), inc))
        .collect();
    while let Some((from, inc)) = queue.pop() {
        let from_shown = shown_path(&root, &from);
        if inc.target.contains("://") {
            warnings.push(format!(
                "lockfile `{from_shown}`: included `{}` is a URL and was not read",
                crate::redact::scrub_url_credentials(&inc.target)
            ));
            continue;
        }
        let target = from.parent().unwrap_or(Path::new(".")).join(&inc.target);
        let loaded = target.canonicalize().and_then(|c| {
            let bytes = crate::limits::read_regular_file(&c)?;
            let text = crate::lockfile::decode(&bytes, &inc.target)
                .map_err(|e| std::io::Error::new(std::io::ErrorKind::InvalidData, e.message))?;
            Ok((text.to_string(), c))
        });
        let (text, canonical) = match loaded {
            Ok(v) => v,
            Err(e) => {
                warnings.push(format!(
                    "lockfile `{from_shown}`: cannot read included `{}`: {e}",
                    inc.target
                ));
                continue;
            }
        };
        if !seen.insert(canonical.clone()) {
            continue;
        }
        match requirements::parse(&text, &shown_path(&root, &canonical)) {
            Ok(mut sub) => {
                warnings.append(&mut sub.warnings);
                for mut p in sub.packages {
                    p.optional |= inc.constraints_only;
                    parsed.packages.push(p);
                }
                queue.extend(sub.includes.into_iter().map(|i| {
                    let constraints_only = i.constraints_only || inc.constraints_only;
                    (
                        canonical.clone(),
                        crate::lockfile::Include {
                            constraints_only,
                            ..i
                        },
                    )
                }));
            }
            Err(e) => warnings.push(format!("lockfile {e}")),
        }
    }
    crate::lockfile::python::sort_packages(&mut parsed.packages);
}

/// A path as shown in warnings: relative to the root when inside it.
fn shown_path(root: &Path, path: &Path) -> String {
    let path = path.canonicalize().unwrap_or_else(|_| path.to_path_buf());
    path.strip_prefix(root)
        .unwrap_or(&path)
        .to_string_lossy()
        .replace('\\', "/")
}

/// Runs `cargo metadata` for the workspace beside a `Cargo.lock`, when `cargo` is on PATH and a
/// `Cargo.toml` is there. `--locked --offline` keep it from changing the lockfile or reaching
/// the network in the middle of a training job.
fn cargo_features(dir: &Path) -> Result<Option<cargo_metadata::Metadata>, String> {
    let manifest = dir.join("Cargo.toml");
    if !manifest.is_file() {
        return Ok(None);
    }
    let Some(host) = cargo_host_triple() else {
        return Ok(None);
    };
    // Only the host platform's packages: those for other platforms may never have been
    // downloaded, and `--offline` would fail on them.
    cargo_metadata::MetadataCommand::new()
        .manifest_path(&manifest)
        .other_options(vec![
            "--locked".to_string(),
            "--offline".to_string(),
            "--filter-platform".to_string(),
            host,
        ])
        .exec()
        .map(Some)
        .map_err(|e| {
            let msg = e.to_string();
            crate::redact::scrub_url_credentials(
                msg.lines().next().unwrap_or("cargo metadata failed"),
            )
        })
}

/// The host triple from `cargo -vV`, or `None` when cargo is not on PATH.
fn cargo_host_triple() -> Option<String> {
    let cargo = std::env::var_os("CARGO").unwrap_or_else(|| "cargo".into());
    let out = Command::new(cargo)
        .arg("-vV")
        .stderr(std::process::Stdio::null())
        .output()
        .ok()
        .filter(|o| o.status.success())?;
    String::from_utf8_lossy(&out.stdout)
        .lines()
        .find_map(|l| l.strip_prefix("host:"))
        .map(|h| h.trim().to_string())
}
