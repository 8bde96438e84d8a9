//! NuGet's `packages.lock.json`, versions 1 and 2.
//!
//! Layout as implemented (NuGet documentation, "Enable repeatable package restores using a lock
//! file" and "Central Package Management"; NuGet.Client `PackagesLockFileBuilder.cs`):
//! * `version`: 1, or 2 when Central Package Management is on;
//! * `dependencies`: one object per target, a framework (`net8.0`) or a framework with a runtime
//!   (`net8.0/linux-x64`), mapping a package id to `{type, requested, resolved, contentHash,
//!   dependencies}`;
//! * `type` is `Direct` (referenced by the project), `Transitive`, `CentralTransitive`
//!   (transitive, pinned centrally) or `Project` (a project reference: no version or hash).
//!
//! Recorded per target and id: the id in lower case (NuGet ids compare case-insensitively; the
//! package sources' flat-container API uses the lower-case form), `resolved` as the version,
//! `contentHash` (base64 SHA-512 of the `.nupkg`) as an SRI-style `sha512-<base64 as written>`,
//! `direct` from `type`, and the target as the platform. Project references get an empty
//! version and the source `project`.

use std::collections::BTreeMap;

use serde::Deserialize;

use crate::error::LockfileError;
use crate::lockfile::support::{json_error, sort_packages};
use crate::lockfile::Parsed;
use crate::manifest::Package;

#[derive(Deserialize)]
struct JsonLock {
    version: Option<serde_json::Value>,
    dependencies: Option<BTreeMap<String, BTreeMap<String, JsonEntry>>>,
}

#[derive(Deserialize)]
#[serde(rename_all = "camelCase")]
struct JsonEntry {
    #[serde(rename = "type")]
    kind: Option<String>,
    resolved: Option<String>,
    content_hash: Option<String>,
}

/// Parses a `packages.lock.json`; `path` only names the file in errors.
pub fn parse(text: &str, path: &str) -> Result<Parsed, LockfileError> {
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    let lock: JsonLock = serde_json::from_str(text).map_err(|e| json_error(path, &e))?;
    let Some(targets) = lock.dependencies else {
        return Err(LockfileError::at(
            path,
            None,
            "no `dependencies` object; this is not a NuGet lock file",
        ));
    };
    let format_version = lock.version.as_ref().map(|v| v.to_string());
    let mut warnings = Vec::new();
    if !matches!(lock.version.as_ref().and_then(|v| v.as_u64()), Some(1 | 2)) {
        warnings.push(format!(
            "`{path}`: NuGet lock file version {} is not one this runprint knows (1, 2); packages were read as far as possible",
            format_version.as_deref().unwrap_or("(missing)")
        ));
    }
    let mut packages = Vec::new();
    for (target, entries) in targets {
        for (id, e) in entries {
            let is_project = e.kind.as_deref() == Some("Project");
            let version = match (&e.resolved, is_project) {
                (Some(v), _) => v.clone(),
                (None, true) => String::new(),
                (None, false) => {
                    return Err(LockfileError::at(
                        path,
                        text.find(&format!("\"{id}\""))
                            .map(|o| crate::lockfile::line_of(text, o)),
                        format!("package `{id}` for `{target}` has no `resolved` version"),
                    ))
                }
            };
            let direct = match e.kind.as_deref() {
                Some("Direct") => Some(true),
                Some("Transitive" | "CentralTransitive") => Some(false),
                _ => None,
            };
            packages.push(Package {
                name: id.to_lowercase(),
                version,
                source: is_project.then(|| "project".to_string()),
                hashes: e
                    .content_hash
                    .map(|h| format!("sha512-{h}"))
                    .into_iter()
                    .collect(),
                direct,
                platform: Some(target.clone()),
                ..Package::default()
            });
        }
    }
    sort_packages(&mut packages);
    Ok(Parsed {
        format_version,
        packages,
        warnings,
        includes: Vec::new(),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn reads_fixture_shape() {
        let text = include_str!("../../fixtures/lockfiles/nuget/packages.lock.json");
        let parsed = parse(text, "packages.lock.json").unwrap();
        assert_eq!(parsed.format_version.as_deref(), Some("1"));
        assert!(parsed.warnings.is_empty());
        assert!(parsed
            .packages
            .iter()
            .all(|p| p.name == p.name.to_lowercase()));
    }

    #[test]
    fn unknown_version_warns() {
        let parsed = parse(
            r#"{"version": 3, "dependencies": {"net8.0": {"A": {"type": "Direct", "resolved": "1.0.0"}}}}"#,
            "packages.lock.json",
        )
        .unwrap();
        assert_eq!(parsed.packages[0].name, "a");
        assert!(parsed.warnings[0].contains("version 3"));
    }

    #[test]
    fn malformed_and_truncated() {
        let msg = parse(
            "{\n \"version\": 1,\n \"dependencies\": {\n",
            "src/App/packages.lock.json",
        )
        .unwrap_err()
        .to_string();
        assert!(
            msg.contains("src/App/packages.lock.json") && msg.contains("truncated"),
            "{msg}"
        );
        let msg = parse(
            "{\"version\": 1,\n\"dependencies\": {\"net8.0\": {\"A\": {\"type\": 5}}}}",
            "p.json",
        )
        .unwrap_err()
        .to_string();
        assert!(msg.contains("line 2"), "{msg}");
        let msg = parse(
            "{\"version\": 1,\n\"dependencies\": {\"net8.0\": {\n\"A\": {\"type\": \"Direct\"}}}}",
            "p.json",
        )
        .unwrap_err()
        .to_string();
        assert!(
            msg.contains("no `resolved`") && msg.contains("line 3"),
            "{msg}"
        );
        assert!(parse("{\"version\": 1}", "p.json").is_err());
    }
}
