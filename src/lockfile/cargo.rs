//! `Cargo.lock`, format versions 1 to 4.
//!
//! Grammar as implemented (from the format cargo writes; see `src/resolver/encode.rs` in cargo
//! and the `cargo-lock` crate's notes):
//! * an optional top-level `version = N` (absent in v1 and v2 files);
//! * `[[package]]` tables with `name`, `version`, optional `source` and `checksum`;
//! * in v1, checksums live in `[metadata]` under keys `"checksum NAME VERSION (SOURCE)"`.
//!
//! Enabled features are not in the lockfile; [`apply_features`] merges them from
//! `cargo metadata`'s resolve graph.

use std::collections::{BTreeMap, HashMap};

use serde::Deserialize;

use crate::error::LockfileError;
use crate::lockfile::{line_of, Parsed};
use crate::manifest::Package;

#[derive(Deserialize)]
struct TomlCargoLock {
    version: Option<toml::Value>,
    #[serde(default)]
    package: Vec<TomlPackage>,
    #[serde(default)]
    metadata: BTreeMap<String, toml::Value>,
}

#[derive(Deserialize)]
struct TomlPackage {
    name: String,
    version: String,
    source: Option<String>,
    checksum: Option<String>,
    // Cargo writes each edge as `name`, `name version` or `name version (source)`.
    #[serde(default)]
    dependencies: Vec<String>,
}

/// Parses the text of a `Cargo.lock`; `path` only names the file in errors.
pub fn parse(text: &str, path: &str) -> Result<Parsed, LockfileError> {
    let lock: TomlCargoLock = toml::from_str(text).map_err(|e| {
        LockfileError::at(
            path,
            e.span().map(|s| line_of(text, s.start)),
            e.message().to_string(),
        )
    })?;
    let mut warnings = Vec::new();
    let format_version = match &lock.version {
        Some(toml::Value::Integer(n)) => {
            if !(1..=4).contains(n) {
                warnings.push(format!(
                    "`{path}`: Cargo.lock format version {n} is newer than this runprint knows (1-4); packages were read as far as possible"
                ));
            }
            n.to_string()
        }
        Some(other) => {
            return Err(LockfileError::at(
                path,
                text.find("version").map(|o| line_of(text, o)),
                format!("`version` must be an integer, found {other}"),
            ))
        }
        None if lock.metadata.keys().any(|k| k.starts_with("checksum ")) => "1".into(),
        None if lock.package.iter().any(|p| p.checksum.is_some()) => "2".into(),
        None => "1".into(),
    };
    let mut packages: Vec<Package> = lock
        .package
        .into_iter()
        .map(|p| {
            let v1_checksum = lock
                .metadata
                .get(&format!(
                    "checksum {} {} ({})",
                    p.name,
                    p.version,
                    p.source.as_deref().unwrap_or("")
                ))
                .and_then(|v| v.as_str())
                .map(str::to_string);
            let checksum = p
                .checksum
                .or(v1_checksum)
                .filter(|c| c != "<none>")
                .map(|c| format!("sha256:{c}"));
            Package {
                name: p.name,
                version: p.version,
                source: p.source.map(|s| crate::redact::scrub_url_credentials(&s)),
                hashes: checksum.into_iter().collect(),
                requires: crate::lockfile::support::requires_list(
                    p.dependencies
                        .iter()
                        .filter_map(|d| d.split_whitespace().next().map(str::to_string)),
                ),
                ..Package::default()
            }
        })
        .collect();
    packages
        .sort_by(|a, b| (&a.name, &a.version, &a.source).cmp(&(&b.name, &b.version, &b.source)));
    Ok(Parsed {
        format_version: Some(format_version),
        packages,
        warnings,
        ..Parsed::default()
    })
}

/// Enabled features per package, keyed by (name, version, source), as `cargo metadata`'s
/// resolve graph lists them (sorted).
pub type FeatureMap = BTreeMap<(String, String, Option<String>), Vec<String>>;

/// Reads the enabled features of every resolved package from `cargo metadata` output.
pub fn feature_map(metadata: &cargo_metadata::Metadata) -> FeatureMap {
    let mut features = FeatureMap::new();
    let Some(resolve) = &metadata.resolve else {
        return features;
    };
    let by_id: HashMap<&cargo_metadata::PackageId, &cargo_metadata::Package> =
        metadata.packages.iter().map(|p| (&p.id, p)).collect();
    for node in &resolve.nodes {
        if let Some(p) = by_id.get(&node.id) {
            let key = (
                p.name.to_string(),
                p.version.to_string(),
                p.source.as_ref().map(|s| s.repr.clone()),
            );
            let mut f: Vec<String> = node.features.iter().map(|f| f.to_string()).collect();
            f.sort();
            features.insert(key, f);
        }
    }
    features
}

/// Fills in each package's enabled features.
pub fn apply_features(packages: &mut [Package], features: &FeatureMap) {
    for p in packages {
        let key = (p.name.clone(), p.version.clone(), p.source.clone());
        if let Some(f) = features.get(&key) {
            p.features = f.clone();
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // v1 layout: checksums in [metadata] (format written by cargo before 1.41; described in
    // cargo's src/resolver/encode.rs).
    const V1: &str = r#"
[[package]]
name = "a"
version = "0.1.0"

[[package]]
name = "itoa"
version = "1.0.11"
source = "registry+https://github.com/rust-lang/crates.io-index"

[metadata]
"checksum itoa 1.0.11 (registry+https://github.com/rust-lang/crates.io-index)" = "49f1f14873335454500d59611f1cf4a4b0f786f9ac11f4312a78e4cf2566695b"
"#;

    #[test]
    fn v1_checksums_from_metadata() {
        let parsed = parse(V1, "Cargo.lock").unwrap();
        assert_eq!(parsed.format_version.as_deref(), Some("1"));
        let itoa = &parsed.packages[1];
        assert_eq!(itoa.name, "itoa");
        assert_eq!(
            itoa.hashes,
            ["sha256:49f1f14873335454500d59611f1cf4a4b0f786f9ac11f4312a78e4cf2566695b"]
        );
        assert!(parsed.packages[0].source.is_none());
    }

    #[test]
    fn v4_with_version_key() {
        let text = "version = 4\n\n[[package]]\nname = \"x\"\nversion = \"1.0.0\"\nsource = \"registry+https://github.com/rust-lang/crates.io-index\"\nchecksum = \"00\"\n";
        let parsed = parse(text, "Cargo.lock").unwrap();
        assert_eq!(parsed.format_version.as_deref(), Some("4"));
        assert_eq!(parsed.packages[0].hashes, ["sha256:00"]);
    }

    #[test]
    fn unknown_version_warns_but_reads() {
        let text = "version = 9\n[[package]]\nname = \"x\"\nversion = \"1.0.0\"\n";
        let parsed = parse(text, "Cargo.lock").unwrap();
        assert_eq!(parsed.packages.len(), 1);
        assert!(parsed.warnings[0].contains("version 9"));
    }

    #[test]
    fn malformed_names_file_and_line() {
        let err = parse("version = 3\n[[package]]\nname = \n", "sub/Cargo.lock").unwrap_err();
        let msg = err.to_string();
        assert!(
            msg.contains("sub/Cargo.lock") && msg.contains("line 3"),
            "{msg}"
        );
    }
}
