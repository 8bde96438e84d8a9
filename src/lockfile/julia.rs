//! Julia's `Manifest.toml`, the old format and format 2.0.
//!
//! Layout as implemented (Pkg.jl documentation, "Project.toml and Manifest.toml", section
//! "Manifest.toml"):
//! * format 2.0 (Julia 1.7 and later): top-level `julia_version`, `manifest_format = "2.0"`,
//!   `project_hash`, and the packages under `[[deps.Name]]`;
//! * the old format (no `manifest_format`): packages directly as top-level `[[Name]]` arrays;
//! * an entry has `uuid`, and for a registered package `version` and `git-tree-sha1`; `repo-url`
//!   and `repo-rev` for a package tracked from a repository, `path` for a developed one. Standard
//!   libraries carry `uuid` and `deps` only in older manifests.
//!
//! Recorded per entry: the name as written (Julia names are case-sensitive; two packages may
//! share a name and differ by UUID), the version (empty for a standard library without one),
//! the source (none for a registry, `git+URL#REV` for `repo-url`, `path+DIR` for `path`,
//! `stdlib` for an entry with neither version nor tree hash), and `git-tree-sha1:<hex>`. The
//! `julia_version` of a 2.0 manifest is recorded as a package named `julia`.

use serde::Deserialize;

use crate::error::LockfileError;
use crate::lockfile::support::sort_packages;
use crate::lockfile::{line_of, Parsed};
use crate::manifest::Package;
use crate::redact::scrub_url_credentials;

#[derive(Deserialize)]
struct TomlEntry {
    version: Option<String>,
    #[serde(rename = "git-tree-sha1")]
    git_tree_sha1: Option<String>,
    #[serde(rename = "repo-url")]
    repo_url: Option<String>,
    #[serde(rename = "repo-rev")]
    repo_rev: Option<String>,
    path: Option<String>,
}

/// Parses a `Manifest.toml`; `path` only names the file in errors.
pub fn parse(text: &str, path: &str) -> Result<Parsed, LockfileError> {
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    let toml_err = |e: toml::de::Error| {
        LockfileError::at(
            path,
            e.span().map(|s| line_of(text, s.start)),
            e.message().to_string(),
        )
    };
    let mut table: toml::Table = toml::from_str(text).map_err(toml_err)?;
    let julia_version = table
        .get("julia_version")
        .and_then(|v| v.as_str())
        .map(str::to_string);
    let format = table.get("manifest_format").map(|v| match v {
        toml::Value::String(s) => s.clone(),
        other => other.to_string(),
    });
    let mut warnings = Vec::new();
    let deps = match format.as_deref() {
        None => {
            // Old format: every top-level array of tables is a package name. (Taken, not
            // copied: a deep copy of every entry cost more than the parse itself.)
            std::mem::take(&mut table)
        }
        Some(f) => {
            if f != "2.0" {
                warnings.push(format!(
                    "`{path}`: manifest_format {f} is not one this runprint knows (1.0, 2.0); packages were read as far as possible"
                ));
            }
            match table.remove("deps") {
                Some(toml::Value::Table(t)) => t,
                None => toml::Table::new(),
                Some(_) => {
                    return Err(LockfileError::at(
                        path,
                        text.find("deps").map(|o| line_of(text, o)),
                        "`deps` must be a table",
                    ))
                }
            }
        }
    };
    let mut packages = Vec::new();
    if let Some(v) = julia_version {
        packages.push(Package {
            name: "julia".into(),
            version: v,
            ..Package::default()
        });
    }
    for (name, value) in deps {
        let toml::Value::Array(entries) = value else {
            // Top-level scalars of the old format (none are written today) and tables.
            continue;
        };
        for entry in entries {
            // The line is looked for only when there is an error to report: searching the
            // text for every entry made large manifests quadratic.
            let e: TomlEntry = entry.try_into().map_err(|e: toml::de::Error| {
                let line = text.find(&format!("{name}]]")).map(|o| line_of(text, o));
                LockfileError::at(path, line, format!("package `{name}`: {}", e.message()))
            })?;
            let source = match (&e.repo_url, &e.path) {
                (Some(url), _) => Some(match &e.repo_rev {
                    Some(rev) => format!("git+{url}#{rev}"),
                    None => format!("git+{url}"),
                }),
                (None, Some(p)) => Some(format!("path+{p}")),
                (None, None) if e.version.is_none() && e.git_tree_sha1.is_none() => {
                    Some("stdlib".to_string())
                }
                _ => None,
            };
            packages.push(Package {
                name: name.clone(),
                version: e.version.unwrap_or_default(),
                source: source.as_deref().map(scrub_url_credentials),
                hashes: e
                    .git_tree_sha1
                    .map(|h| format!("git-tree-sha1:{h}"))
                    .into_iter()
                    .collect(),
                ..Package::default()
            });
        }
    }
    sort_packages(&mut packages);
    Ok(Parsed {
        format_version: Some(format.unwrap_or_else(|| "1.0".to_string())),
        packages,
        warnings,
        includes: Vec::new(),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn old_format_top_level_arrays() {
        let text = "[[Example]]\ndeps = [\"Random\"]\ngit-tree-sha1 = \"46e44e869b4d90b96bd8ed1fdcf32244fddfb6cc\"\nuuid = \"7876af07-990d-54b4-ab0e-23690620f79a\"\nversion = \"0.5.3\"\n\n[[Random]]\nuuid = \"9a3f8284-a2c9-5f02-9a11-845980a1fd5c\"\n";
        let parsed = parse(text, "Manifest.toml").unwrap();
        assert_eq!(parsed.format_version.as_deref(), Some("1.0"));
        assert_eq!(parsed.packages.len(), 2);
        assert_eq!(
            parsed.packages[0].hashes,
            ["git-tree-sha1:46e44e869b4d90b96bd8ed1fdcf32244fddfb6cc"]
        );
        assert_eq!(parsed.packages[1].source.as_deref(), Some("stdlib"));
    }

    #[test]
    fn unknown_format_warns() {
        let text = "manifest_format = \"3.0\"\n[[deps.A]]\nuuid = \"x\"\nversion = \"1.0.0\"\n";
        let parsed = parse(text, "Manifest.toml").unwrap();
        assert_eq!(parsed.packages.len(), 1);
        assert!(parsed.warnings[0].contains("3.0"));
    }

    #[test]
    fn malformed_and_truncated() {
        let msg = parse(
            "manifest_format = \"2.0\"\n[[deps.A]]\nversion = \"1.0\n",
            "env/Manifest.toml",
        )
        .unwrap_err()
        .to_string();
        assert!(
            msg.contains("env/Manifest.toml") && msg.contains("line 3"),
            "{msg}"
        );
        let msg = parse(
            "manifest_format = \"2.0\"\n\n[[deps.A]]\nversion = 1\n",
            "Manifest.toml",
        )
        .unwrap_err()
        .to_string();
        assert!(
            msg.contains("package `A`") && msg.contains("line 3"),
            "{msg}"
        );
        let msg = parse("manifest_format = \"2.0\"\ndeps = 1\n", "Manifest.toml")
            .unwrap_err()
            .to_string();
        assert!(msg.contains("line 2"), "{msg}");
    }
}
