//! Toolchain pins: the files that choose a language's interpreter or compiler for a folder.
//! Each pin is recorded as a package of the `toolchain` ecosystem named after the language
//! (`python`, `rust`, `node`), so that a changed pin is compared like a changed dependency.
//!
//! Grammar as implemented:
//!
//! * `.python-version` (pyenv's README, "Choosing the Python version"; uv reads the same
//!   file): one version per line (`3.11.7`, `3.12`, `pypy3.10-7.3.12`, `system`); several lines
//!   make several versions available, the first one preferred; `#` starts a comment line.
//! * `rust-toolchain.toml` (rustup book, "Overrides", "The toolchain file"): a `[toolchain]`
//!   table with `channel` (`1.85.0`, `stable`, `nightly-2025-01-01`), `components`, `targets`
//!   and `profile`, or a `path` to a custom toolchain; the legacy `rust-toolchain` file may hold
//!   the same TOML or a bare channel name on one line. The channel is the version, the
//!   components the features, the targets the platform.
//! * `.nvmrc` and `.node-version` (nvm's README, ".nvmrc"; the same one-line form other Node
//!   version managers read): the first line that is not a comment; a leading `v` is dropped.
//!
//! `go.mod`'s `go` and `toolchain` lines are read with the module file (see
//! [`super::golang`]).

use serde::Deserialize;

use crate::error::LockfileError;
use crate::lockfile::python::toml_error;
use crate::lockfile::Parsed;
use crate::manifest::Package;

/// The languages whose pins are read, by file name.
pub fn language_of(file_name: &str) -> Option<&'static str> {
    match file_name {
        ".python-version" => Some("python"),
        "rust-toolchain" | "rust-toolchain.toml" => Some("rust"),
        ".nvmrc" | ".node-version" => Some("node"),
        _ => None,
    }
}

fn pin(language: &str, version: &str) -> Package {
    Package {
        name: language.to_string(),
        version: version.to_string(),
        direct: Some(true),
        ..Package::default()
    }
}

fn parsed(packages: Vec<Package>) -> Parsed {
    Parsed::sorted(None, packages, Vec::new())
}

/// The lines of a one-value-per-line pin file that are not blank or comments.
fn values(text: &str) -> impl Iterator<Item = &str> {
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    text.lines()
        .map(|l| l.split('#').next().unwrap_or_default().trim())
        .filter(|l| !l.is_empty())
}

/// Parses a `.python-version` file.
pub fn parse_python_version(text: &str, path: &str) -> Result<Parsed, LockfileError> {
    let mut packages: Vec<Package> = Vec::new();
    for v in values(text) {
        if v.chars().any(char::is_whitespace) {
            return Err(LockfileError::at(
                path,
                None,
                format!("`{v}` is not one version name"),
            ));
        }
        let mut p = pin("python", v);
        // The first version is the one used; the others are only made available.
        p.optional = !packages.is_empty();
        packages.push(p);
    }
    Ok(parsed(packages))
}

/// Parses `.nvmrc` or `.node-version`.
pub fn parse_node_version(text: &str, path: &str) -> Result<Parsed, LockfileError> {
    let Some(v) = values(text).next() else {
        return Ok(parsed(Vec::new()));
    };
    if v.chars().any(char::is_whitespace) {
        return Err(LockfileError::at(
            path,
            None,
            format!("`{v}` is not one version name"),
        ));
    }
    let v = v
        .strip_prefix('v')
        .filter(|r| r.starts_with(|c: char| c.is_ascii_digit()))
        .unwrap_or(v);
    Ok(parsed(vec![pin("node", v)]))
}

#[derive(Deserialize)]
struct RustToolchainFile {
    toolchain: RustToolchain,
}

#[derive(Deserialize)]
struct RustToolchain {
    #[serde(default)]
    channel: Option<String>,
    #[serde(default)]
    path: Option<String>,
    #[serde(default)]
    components: Vec<String>,
    #[serde(default)]
    targets: Vec<String>,
    #[serde(default)]
    profile: Option<String>,
}

/// Parses `rust-toolchain.toml` or the legacy `rust-toolchain` (TOML, or one channel name).
pub fn parse_rust_toolchain(text: &str, path: &str) -> Result<Parsed, LockfileError> {
    let body = text.strip_prefix('\u{feff}').unwrap_or(text);
    // The legacy form is one channel name; TOML has a table header or a `key =`.
    let legacy_one_line = !body.contains('[') && !body.contains('=');
    if legacy_one_line {
        let mut lines = values(body);
        let Some(channel) = lines.next() else {
            return Err(LockfileError::at(path, None, "names no toolchain"));
        };
        if lines.next().is_some() || channel.chars().any(char::is_whitespace) {
            return Err(LockfileError::at(
                path,
                None,
                "a legacy toolchain file holds one channel name",
            ));
        }
        return Ok(parsed(vec![pin("rust", channel)]));
    }
    let file: RustToolchainFile = toml::from_str(body).map_err(|e| toml_error(body, path, &e))?;
    let t = file.toolchain;
    let version = match (&t.channel, &t.path) {
        (Some(c), _) => c.clone(),
        (None, Some(p)) => format!("path:{p}"),
        (None, None) => {
            return Err(LockfileError::at(
                path,
                None,
                "[toolchain] names neither a channel nor a path",
            ))
        }
    };
    let mut p = pin("rust", &version);
    p.features = t.components;
    if let Some(profile) = t.profile {
        p.features.push(format!("profile={profile}"));
    }
    p.features.sort();
    p.features.dedup();
    let mut targets = t.targets;
    targets.sort();
    targets.dedup();
    p.platform = (!targets.is_empty()).then(|| targets.join(","));
    Ok(parsed(vec![p]))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn one(p: &Parsed) -> (&str, &str) {
        assert_eq!(p.packages.len(), 1);
        (&p.packages[0].name, &p.packages[0].version)
    }

    #[test]
    fn python_version_files() {
        let p = parse_python_version("3.12.1\n# comment\npypy3.10-7.3.12\n", ".python-version")
            .unwrap();
        assert_eq!(p.packages.len(), 2);
        assert_eq!(p.packages[0].version, "3.12.1");
        assert!(!p.packages[0].optional);
        assert!(p.packages[1].optional);
        assert!(parse_python_version("3.11 3.12\n", ".python-version").is_err());
        assert!(parse_python_version("", ".python-version")
            .unwrap()
            .packages
            .is_empty());
    }

    /// rustup book, "The toolchain file": its example file.
    #[test]
    fn rust_toolchain_files() {
        let text = "[toolchain]\nchannel = \"nightly-2020-07-10\"\ncomponents = [ \"rustfmt\", \"rustc-dev\" ]\ntargets = [ \"wasm32-unknown-unknown\", \"thumbv2-none-eabi\" ]\nprofile = \"minimal\"\n";
        let p = parse_rust_toolchain(text, "rust-toolchain.toml").unwrap();
        assert_eq!(one(&p), ("rust", "nightly-2020-07-10"));
        assert_eq!(
            p.packages[0].features,
            ["profile=minimal", "rustc-dev", "rustfmt"]
        );
        assert_eq!(
            p.packages[0].platform.as_deref(),
            Some("thumbv2-none-eabi,wasm32-unknown-unknown")
        );
        let legacy = parse_rust_toolchain("1.85.0\n", "rust-toolchain").unwrap();
        assert_eq!(one(&legacy), ("rust", "1.85.0"));
        let legacy_toml = parse_rust_toolchain(text, "rust-toolchain").unwrap();
        assert_eq!(one(&legacy_toml), ("rust", "nightly-2020-07-10"));
        let err =
            parse_rust_toolchain("[toolchain]\nchannel = \n", "rust-toolchain.toml").unwrap_err();
        assert_eq!(err.line, Some(2));
    }

    #[test]
    fn node_version_files() {
        assert_eq!(
            one(&parse_node_version("v20.10.0\n", ".nvmrc").unwrap()),
            ("node", "20.10.0")
        );
        assert_eq!(
            one(&parse_node_version("# pinned\nlts/iron\n", ".nvmrc").unwrap()),
            ("node", "lts/iron")
        );
    }
}
