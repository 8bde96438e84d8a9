//! PDM's `pdm.lock`, lock versions 4.x.
//!
//! Grammar as implemented (PDM's documentation, "Lock file", and files written by `pdm lock`,
//! PDM 2.29, lock version 4.5.1):
//! * `[metadata]`: `lock_version` (`MAJOR.MINOR.PATCH`; a new major cannot be read by older PDM,
//!   a new minor may add fields), `groups`, `strategy`, `content_hash`; early 4.x files keep
//!   hashes in `[metadata.files]` under keys `"NAME VERSION"`;
//! * `[[package]]`: `name`, `version`, `groups` (the groups that need it), `marker`, `files =
//!   [{file | url, hash}]`, and for non-index sources `git`/`hg`/`svn` + `ref` + `revision`,
//!   `path`, `url`, `editable`. The index a package came from is not recorded.
//!
//! The same package appears once per set of extras it is locked with; identical entries are
//! merged. A package outside the `default` group is recorded as optional (installed only when a
//! group is asked for). `pdm.lock` does not tell dependency groups from extras, so a package is
//! marked dev only when every group it belongs to is `dev`, the group `pdm add --dev` uses by
//! default (PDM's documentation, "Manage dependencies"; from memory).

use std::collections::BTreeMap;

use serde::Deserialize;

use crate::error::LockfileError;
use crate::lockfile::python::{checked_hash, sort_packages, tidy_hashes, toml_error};
use crate::lockfile::requirements::normalize_name;
use crate::lockfile::Parsed;
use crate::manifest::Package;
use crate::redact::scrub_url_credentials;

/// The newest lock-version minor this parser has seen for major 4.
const KNOWN_MINOR: u64 = 5;

#[derive(Deserialize)]
struct TomlPdmLock {
    metadata: Option<TomlMetadata>,
    #[serde(default)]
    package: Vec<TomlPackage>,
}

#[derive(Deserialize)]
struct TomlMetadata {
    lock_version: Option<String>,
    #[serde(default)]
    files: BTreeMap<String, Vec<TomlFile>>,
}

#[derive(Deserialize)]
struct TomlPackage {
    name: String,
    version: Option<String>,
    groups: Option<Vec<String>>,
    marker: Option<String>,
    #[serde(default)]
    files: Vec<TomlFile>,
    git: Option<String>,
    hg: Option<String>,
    svn: Option<String>,
    #[serde(rename = "ref")]
    reference: Option<String>,
    revision: Option<String>,
    path: Option<String>,
    url: Option<String>,
    #[serde(default)]
    editable: bool,
    #[serde(default)]
    dependencies: Vec<String>,
}

#[derive(Deserialize)]
struct TomlFile {
    hash: String,
    file: Option<String>,
}

/// Parses the text of a `pdm.lock`; `path` only names the file in errors.
pub fn parse(text: &str, path: &str) -> Result<Parsed, LockfileError> {
    let lock: TomlPdmLock = toml::from_str(text).map_err(|e| toml_error(text, path, &e))?;
    let mut metadata = lock.metadata.ok_or_else(|| {
        LockfileError::at(
            path,
            None,
            "no `[metadata]` table (every pdm.lock has one; is the file cut short?)",
        )
    })?;
    let mut warnings = Vec::new();
    let known = metadata.lock_version.as_deref().is_some_and(|v| {
        let mut parts = v.split('.').map(|p| p.parse::<u64>());
        matches!(
            (parts.next(), parts.next()),
            (Some(Ok(4)), Some(Ok(minor))) if minor <= KNOWN_MINOR
        )
    });
    if !known {
        warnings.push(format!(
            "`{path}`: pdm.lock lock_version {} is not one this runprint knows (4.0 to 4.{KNOWN_MINOR}); packages were read as far as possible",
            metadata.lock_version.as_deref().unwrap_or("(none)")
        ));
    }
    let mut old_files = std::mem::take(&mut metadata.files);
    let mut packages = Vec::with_capacity(lock.package.len());
    for p in lock.package {
        let version = p.version.clone().unwrap_or_default();
        let files = if p.files.is_empty() {
            old_files
                .get_mut(&format!("{} {}", p.name, version))
                .map(std::mem::take)
                .unwrap_or_default()
        } else {
            p.files
        };
        let mut hashes = files
            .iter()
            .map(|f| checked_hash(text, path, &f.hash))
            .collect::<Result<Vec<_>, _>>()?;
        tidy_hashes(&mut hashes);
        let vcs = [("git", &p.git), ("hg", &p.hg), ("svn", &p.svn)]
            .into_iter()
            .find_map(|(kind, url)| url.as_ref().map(|u| (kind, u)));
        let source = if let Some((kind, url)) = vcs {
            Some(super::python::vcs_source(
                kind,
                url,
                p.reference.as_deref(),
                p.revision.as_deref(),
            ))
        } else if let Some(local) = &p.path {
            Some(format!("path+{local}"))
        } else {
            p.url.clone()
        };
        let source = source.map(|s| {
            let s = scrub_url_credentials(&s);
            if p.editable {
                format!("editable+{s}")
            } else {
                s
            }
        });
        let (optional, dev) = match &p.groups {
            Some(groups) if !groups.iter().any(|g| g == "default") => (
                true,
                !groups.is_empty() && groups.iter().all(|g| g == "dev"),
            ),
            _ => (false, false),
        };
        packages.push(Package {
            name: normalize_name(&p.name),
            version,
            source,
            hashes,
            dev,
            optional,
            platform: p.marker.filter(|m| !m.trim().is_empty()),
            compiled: crate::lockfile::support::any_compiled(
                files.iter().filter_map(|f| f.file.as_deref()),
            ),
            // PDM writes each edge as a PEP 508 requirement: the name comes first.
            requires: crate::lockfile::support::requires_list(p.dependencies.iter().filter_map(
                |d| {
                    let end = d
                        .find(|c: char| !(c.is_ascii_alphanumeric() || "-_.".contains(c)))
                        .unwrap_or(d.len());
                    (end > 0).then(|| normalize_name(&d[..end]))
                },
            )),
            ..Package::default()
        });
    }
    sort_packages(&mut packages);
    Ok(Parsed {
        format_version: metadata.lock_version,
        packages,
        warnings,
        ..Parsed::default()
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    // Shape written by `pdm lock -G :all` (PDM 2.29.4, lock_version 4.5.1); hashes shortened.
    const LOCK: &str = r#"# This file is @generated by PDM.
[metadata]
groups = ["default", "dev", "plot"]
strategy = ["inherit_metadata"]
lock_version = "4.5.1"
content_hash = "sha256:ab8a"

[[metadata.targets]]
requires_python = ">=3.10"

[[package]]
name = "colorama"
version = "0.4.6"
summary = "Cross-platform colored terminal text."
groups = ["dev"]
marker = "sys_platform == \"win32\""
files = [
    {file = "colorama-0.4.6-py2.py3-none-any.whl", hash = "sha256:4F1D"},
    {file = "colorama-0.4.6.tar.gz", hash = "sha256:0869"},
]

[[package]]
name = "Packaging"
version = "26.4"
groups = ["default", "dev"]
files = []

[[package]]
name = "pyparsing"
version = "3.3.3"
groups = ["plot"]

[[package]]
name = "requests"
version = "2.34.2"
groups = ["default"]

[[package]]
name = "requests"
version = "2.34.2"
extras = ["socks"]
groups = ["default"]

[[package]]
name = "tools"
version = "0.2.0"
git = "https://u:p@git.invalid/org/tools.git"
ref = "main"
revision = "0123abcd"
groups = ["default"]
"#;

    #[test]
    fn groups_sources_and_extras_duplicates() {
        let parsed = parse(LOCK, "pdm.lock").unwrap();
        assert_eq!(parsed.format_version.as_deref(), Some("4.5.1"));
        assert!(parsed.warnings.is_empty(), "{:?}", parsed.warnings);
        let names: Vec<&str> = parsed.packages.iter().map(|p| p.name.as_str()).collect();
        assert_eq!(
            names,
            ["colorama", "packaging", "pyparsing", "requests", "tools"]
        );
        let colorama = &parsed.packages[0];
        assert!(colorama.dev && colorama.optional);
        assert_eq!(colorama.hashes, ["sha256:0869", "sha256:4f1d"]);
        assert_eq!(
            colorama.platform.as_deref(),
            Some("sys_platform == \"win32\"")
        );
        assert!(!parsed.packages[1].dev && !parsed.packages[1].optional);
        let pyparsing = &parsed.packages[2];
        assert!(pyparsing.optional && !pyparsing.dev);
        assert_eq!(
            parsed.packages[4].source.as_deref(),
            Some("git+https://git.invalid/org/tools.git?rev=main#0123abcd")
        );
    }

    // Lock 4.2 shape (early 4.x, per PDM's changelog; from memory): hashes in `[metadata.files]`.
    #[test]
    fn old_metadata_files() {
        let text = "[[package]]\nname = \"idna\"\nversion = \"3.4\"\n\n[metadata]\nlock_version = \"4.2\"\n\n[metadata.files]\n\"idna 3.4\" = [\n    {url = \"https://files.invalid/idna-3.4.tar.gz\", hash = \"sha256:814f\"},\n]\n";
        let parsed = parse(text, "pdm.lock").unwrap();
        assert_eq!(parsed.packages[0].hashes, ["sha256:814f"]);
        assert!(parsed.warnings.is_empty());
    }

    #[test]
    fn unknown_version_warns_but_reads() {
        let text = LOCK.replace("4.5.1", "5.0.0");
        let parsed = parse(&text, "pdm.lock").unwrap();
        assert_eq!(parsed.packages.len(), 5);
        assert!(parsed.warnings[0].contains("5.0.0"));
    }

    #[test]
    fn malformed_and_truncated() {
        let cut = &LOCK[..LOCK.find("hash = \"sha256:4F1D\"").unwrap() + 12];
        let err = parse(cut, "pdm.lock").unwrap_err();
        assert!(err.line.is_some(), "{err}");
        let err = parse("[[package]]\nname = \"a\"\n", "q/pdm.lock").unwrap_err();
        assert!(err.to_string().contains("q/pdm.lock") && err.message.contains("metadata"));
        let err = parse(
            "[metadata]\nlock_version = \"4.5.0\"\n[[package]]\nversion = \"1\"\n",
            "pdm.lock",
        )
        .unwrap_err();
        assert!(err.message.contains("name"), "{err}");
        let bad = LOCK.replace("sha256:0869", "sha256:08 69");
        let err = parse(&bad, "pdm.lock").unwrap_err();
        assert_eq!(err.line, Some(19), "{err}");
    }
}
