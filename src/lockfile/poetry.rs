//! Poetry's `poetry.lock`, lock versions 1.x and 2.x.
//!
//! Grammar as implemented (the format Poetry's `src/poetry/packages/locker.py` writes, and its
//! history):
//! * `[metadata]` holds `lock-version`; `1.0`/`1.1` keep file hashes in `[metadata.files]`
//!   (package name → `[{file, hash}]`), `2.0` moved them into each package's `files`;
//! * `[[package]]`: `name` (as published; normalized here), `version`, `optional` (only pulled in
//!   by an extra), `category = "main" | "dev"` (written up to Poetry 1.4), `groups` (lock 2.1:
//!   the dependency groups that need the package; dev-only when `main` is not among them),
//!   `markers` (a string, or a table from group to marker in 2.1), `files = [{file, hash}]`,
//!   `[package.source]` with `type` (`git`, `directory`, `file`, `url`, `legacy`…), `url`,
//!   `reference` (requested ref, or the index name for `legacy`) and `resolved_reference` (the
//!   commit). No `[package.source]` means the default index, PyPI.
//!
//! Files from Poetry 1.5 to 1.8 have neither `category` nor `groups`, so nothing is marked dev.
//! Direct dependencies are declared in `pyproject.toml`, not here: `direct` stays unknown.

use std::collections::BTreeMap;

use serde::Deserialize;

use crate::error::LockfileError;
use crate::lockfile::python::{
    any_of_markers, checked_hash, sort_packages, tidy_hashes, toml_error,
};
use crate::lockfile::requirements::normalize_name;
use crate::lockfile::Parsed;
use crate::manifest::Package;
use crate::redact::scrub_url_credentials;

/// Lock versions whose meaning this parser knows.
const KNOWN_VERSIONS: &[&str] = &["1.0", "1.1", "2.0", "2.1"];

#[derive(Deserialize)]
struct TomlPoetryLock {
    #[serde(default)]
    package: Vec<TomlPackage>,
    metadata: Option<TomlMetadata>,
}

#[derive(Deserialize)]
struct TomlMetadata {
    #[serde(rename = "lock-version")]
    lock_version: Option<String>,
    #[serde(default)]
    files: BTreeMap<String, Vec<TomlFile>>,
}

#[derive(Deserialize)]
struct TomlPackage {
    name: String,
    version: String,
    #[serde(default)]
    optional: bool,
    category: Option<String>,
    groups: Option<Vec<String>>,
    markers: Option<toml::Value>,
    #[serde(default)]
    files: Vec<TomlFile>,
    source: Option<TomlSource>,
    #[serde(default)]
    dependencies: BTreeMap<String, serde::de::IgnoredAny>,
}

#[derive(Deserialize)]
struct TomlFile {
    hash: String,
    file: Option<String>,
}

#[derive(Deserialize)]
struct TomlSource {
    #[serde(rename = "type")]
    kind: String,
    url: Option<String>,
    reference: Option<String>,
    resolved_reference: Option<String>,
}

/// Parses the text of a `poetry.lock`; `path` only names the file in errors.
pub fn parse(text: &str, path: &str) -> Result<Parsed, LockfileError> {
    let lock: TomlPoetryLock = toml::from_str(text).map_err(|e| toml_error(text, path, &e))?;
    let mut metadata = lock.metadata.ok_or_else(|| {
        LockfileError::at(
            path,
            None,
            "no `[metadata]` table (every poetry.lock has one; is the file cut short?)",
        )
    })?;
    let mut warnings = Vec::new();
    match metadata.lock_version.as_deref() {
        Some(v) if KNOWN_VERSIONS.contains(&v) => {}
        Some(v) => warnings.push(format!(
            "`{path}`: poetry.lock lock-version {v} is not one this runprint knows ({}); packages were read as far as possible",
            KNOWN_VERSIONS.join(", ")
        )),
        None => warnings.push(format!(
            "`{path}`: poetry.lock has no `lock-version`; packages were read as far as possible"
        )),
    }
    // Lock 1.x: hashes per package name in `[metadata.files]`.
    let mut old_files: BTreeMap<String, Vec<TomlFile>> = std::mem::take(&mut metadata.files)
        .into_iter()
        .map(|(name, files)| (normalize_name(&name), files))
        .collect();
    let mut packages = Vec::with_capacity(lock.package.len());
    for p in lock.package {
        let name = normalize_name(&p.name);
        let files = if p.files.is_empty() {
            old_files.remove(&name).unwrap_or_default()
        } else {
            p.files
        };
        let mut hashes = files
            .iter()
            .map(|f| checked_hash(text, path, &f.hash))
            .collect::<Result<Vec<_>, _>>()?;
        tidy_hashes(&mut hashes);
        let dev = match (&p.groups, &p.category) {
            (Some(groups), _) => !groups.iter().any(|g| g == "main"),
            (None, Some(category)) => category == "dev",
            (None, None) => false,
        };
        let markers: Vec<String> = match &p.markers {
            Some(toml::Value::String(m)) => vec![m.clone()],
            Some(toml::Value::Table(by_group)) => by_group
                .values()
                .filter_map(|v| v.as_str().map(str::to_string))
                .collect(),
            _ => Vec::new(),
        };
        packages.push(Package {
            name,
            version: p.version,
            source: p.source.map(|s| scrub_url_credentials(&source_string(&s))),
            hashes,
            dev,
            optional: p.optional,
            platform: any_of_markers(&markers),
            compiled: crate::lockfile::support::any_compiled(
                files.iter().filter_map(|f| f.file.as_deref()),
            ),
            requires: crate::lockfile::support::requires_list(
                p.dependencies.keys().map(|n| normalize_name(n)),
            ),
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

/// The source in the manifest's notation: `git+URL?rev=REF#COMMIT`, `registry+URL` for a named
/// index, `KIND+PATH` for local sources, and the URL itself for a direct archive.
fn source_string(s: &TomlSource) -> String {
    let url = s.url.as_deref().unwrap_or("");
    match s.kind.as_str() {
        "git" => super::python::vcs_source(
            "git",
            url,
            s.reference.as_deref(),
            s.resolved_reference.as_deref(),
        ),
        "url" => url.to_string(),
        "directory" | "file" => format!("{}+{url}", s.kind),
        // `legacy`, `explicit`, `supplemental`, `primary`: a named package index.
        _ => format!("registry+{url}"),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // Lock 2.1 shape, as Poetry 2.x writes it (seen in files written by `poetry lock`, Poetry
    // 2.5.1): groups, an optional extra, a marker table and a git source.
    const V2_1: &str = r#"
[[package]]
name = "Charset_Normalizer"
version = "3.5.3"
description = "x"
optional = false
python-versions = ">=3.7"
groups = ["main"]
files = [
    {file = "b.whl", hash = "sha256:BB"},
    {file = "a.tar.gz", hash = "sha256:aa"},
]

[[package]]
name = "pytest"
version = "9.2.0"
optional = false
python-versions = ">=3.10"
groups = ["dev"]
markers = {dev = "sys_platform == \"linux\""}
files = []

[[package]]
name = "pyparsing"
version = "3.3.3"
optional = true
python-versions = ">=3.9"
groups = ["main"]
markers = "extra == \"plot\""
files = []

[[package]]
name = "private-lib"
version = "0.3.0"
optional = false
python-versions = "*"
groups = ["main", "dev"]
files = []

[package.source]
type = "git"
url = "https://user:pw@git.invalid/org/private-lib.git"
reference = "main"
resolved_reference = "0123456789abcdef0123456789abcdef01234567"

[metadata]
lock-version = "2.1"
python-versions = ">=3.10"
content-hash = "00"
"#;

    #[test]
    fn lock_2_1() {
        let parsed = parse(V2_1, "poetry.lock").unwrap();
        assert_eq!(parsed.format_version.as_deref(), Some("2.1"));
        assert!(parsed.warnings.is_empty());
        let by_name = |n: &str| parsed.packages.iter().find(|p| p.name == n).unwrap();
        let cn = by_name("charset-normalizer");
        assert_eq!(cn.hashes, ["sha256:aa", "sha256:bb"]);
        assert!(!cn.dev && !cn.optional && cn.source.is_none());
        let pytest = by_name("pytest");
        assert!(pytest.dev);
        assert_eq!(
            pytest.platform.as_deref(),
            Some("sys_platform == \"linux\"")
        );
        assert!(by_name("pyparsing").optional);
        let private = by_name("private-lib");
        assert!(!private.dev);
        assert_eq!(
            private.source.as_deref(),
            Some("git+https://git.invalid/org/private-lib.git?rev=main#0123456789abcdef0123456789abcdef01234567")
        );
    }

    // Lock 1.1 shape (Poetry 1.1 to 1.2, per the history of locker.py): `category` and hashes in
    // `[metadata.files]`.
    #[test]
    fn lock_1_1_category_and_metadata_files() {
        let text = r#"
[[package]]
name = "numpy"
version = "1.21.0"
description = ""
category = "main"
optional = false
python-versions = ">=3.7"

[[package]]
name = "pytest"
version = "6.2.5"
description = ""
category = "dev"
optional = false
python-versions = ">=3.6"

[metadata]
lock-version = "1.1"
python-versions = "^3.8"
content-hash = "00"

[metadata.files]
numpy = [
    {file = "numpy-1.21.0.zip", hash = "sha256:e80fe25cba41c124d04c662f33f6364909b985f2eb5998aaa5ae4b9587242cce"},
]
pytest = []
"#;
        let parsed = parse(text, "poetry.lock").unwrap();
        assert_eq!(parsed.format_version.as_deref(), Some("1.1"));
        assert_eq!(
            parsed.packages[0].hashes,
            ["sha256:e80fe25cba41c124d04c662f33f6364909b985f2eb5998aaa5ae4b9587242cce"]
        );
        assert!(!parsed.packages[0].dev);
        assert!(parsed.packages[1].dev);
    }

    #[test]
    fn unknown_version_warns_but_reads() {
        let text = V2_1.replace("lock-version = \"2.1\"", "lock-version = \"3.0\"");
        let parsed = parse(&text, "poetry.lock").unwrap();
        assert_eq!(parsed.packages.len(), 4);
        assert!(parsed.warnings[0].contains("3.0"));
    }

    #[test]
    fn malformed_and_truncated() {
        let err = parse("[[package]]\nname = \"a\"\nversion = 1.0\n", "poetry.lock").unwrap_err();
        assert_eq!(err.line, Some(3), "{err}");
        // Cut inside the first package: no `[metadata]` any more.
        let cut = &V2_1[..V2_1.find("[[package]]\nname = \"pytest\"").unwrap()];
        let err = parse(cut, "sub/poetry.lock").unwrap_err();
        assert!(err.to_string().contains("sub/poetry.lock"), "{err}");
        // Cut inside an inline table.
        let cut = &V2_1[..V2_1.find("sha256:BB").unwrap()];
        let err = parse(cut, "poetry.lock").unwrap_err();
        assert!(err.line.is_some(), "{err}");
        let bad = V2_1.replace("sha256:aa", "sha256:not-hex");
        let err = parse(&bad, "poetry.lock").unwrap_err();
        assert_eq!(err.line, Some(11), "{err}");
    }
}
