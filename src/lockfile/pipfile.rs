//! pipenv's `Pipfile.lock` (JSON).
//!
//! Grammar as implemented (pipenv's documentation, "Pipfile & Pipfile.lock", and files written by
//! `pipenv lock`):
//! * `_meta`: `pipfile-spec` (6 in current files), `sources` (`[{name, url, verify_ssl}]`);
//! * every other top-level key is a package category: `default` (from `[packages]`), `develop`
//!   (from `[dev-packages]`) or a custom category; each maps a package name to
//!   `{version: "==X", hashes: ["sha256:…"], markers, index, git, ref, editable, path, file}`.
//!
//! Entries outside `default` are recorded as dev, unless the same package and version is also in
//! `default`. `markers` is recorded as the platform; `index` names one of `_meta.sources`, whose
//! URL becomes the source. The file does not say which packages are direct.

use std::collections::BTreeMap;

use serde::Deserialize;

use crate::error::LockfileError;
use crate::lockfile::python::{checked_hash, json_error, line_of_str, sort_packages, tidy_hashes};
use crate::lockfile::requirements::normalize_name;
use crate::lockfile::Parsed;
use crate::manifest::Package;
use crate::redact::scrub_url_credentials;

#[derive(Deserialize, Default)]
struct JsonMeta {
    #[serde(rename = "pipfile-spec")]
    pipfile_spec: Option<serde_json::Value>,
    #[serde(default)]
    sources: Vec<JsonSource>,
}

#[derive(Deserialize)]
struct JsonSource {
    name: String,
    url: String,
}

#[derive(Deserialize)]
struct JsonEntry {
    version: Option<String>,
    #[serde(default)]
    hashes: Vec<String>,
    markers: Option<String>,
    index: Option<String>,
    git: Option<String>,
    hg: Option<String>,
    svn: Option<String>,
    #[serde(rename = "ref")]
    reference: Option<String>,
    #[serde(default)]
    editable: bool,
    path: Option<String>,
    file: Option<String>,
}

/// Parses the text of a `Pipfile.lock`; `path` only names the file in errors.
pub fn parse(text: &str, path: &str) -> Result<Parsed, LockfileError> {
    let mut top: BTreeMap<String, serde_json::Value> =
        serde_json::from_str(text).map_err(|e| json_error(path, &e))?;
    let meta: JsonMeta = match top.remove("_meta") {
        Some(v) => serde_json::from_value(v).map_err(|e| {
            LockfileError::at(
                path,
                line_of_str(text, "\"_meta\""),
                format!("`_meta`: {e}"),
            )
        })?,
        None => {
            return Err(LockfileError::at(
                path,
                None,
                "no `_meta` object (every Pipfile.lock has one)",
            ))
        }
    };
    let mut warnings = Vec::new();
    let format_version = meta.pipfile_spec.as_ref().map(|v| match v {
        serde_json::Value::String(s) => s.clone(),
        other => other.to_string(),
    });
    match format_version.as_deref() {
        Some("6") => {}
        Some(v) => warnings.push(format!(
            "`{path}`: Pipfile.lock pipfile-spec {v} is not the one this runprint knows (6); packages were read as far as possible"
        )),
        None => warnings.push(format!(
            "`{path}`: Pipfile.lock has no `pipfile-spec`; packages were read as far as possible"
        )),
    }
    let index_urls: BTreeMap<&str, &str> = meta
        .sources
        .iter()
        .map(|s| (s.name.as_str(), s.url.as_str()))
        .collect();

    // `default` first, so that a package also listed in another category stays non-dev.
    let mut categories: Vec<(String, serde_json::Value)> = top.into_iter().collect();
    categories.sort_by_key(|(name, _)| name != "default");
    let mut packages: Vec<Package> = Vec::new();
    for (category, value) in categories {
        let entries: BTreeMap<String, JsonEntry> = serde_json::from_value(value).map_err(|e| {
            LockfileError::at(
                path,
                line_of_str(text, &format!("\"{category}\"")),
                format!("category `{category}`: {e}"),
            )
        })?;
        let dev = category != "default";
        for (name, e) in entries {
            let mut hashes = e
                .hashes
                .iter()
                .map(|h| checked_hash(text, path, h))
                .collect::<Result<Vec<_>, _>>()?;
            tidy_hashes(&mut hashes);
            let version = e
                .version
                .as_deref()
                .map(|v| v.trim_start_matches("===").trim_start_matches("=="))
                .unwrap_or("")
                .to_string();
            let vcs = [("git", &e.git), ("hg", &e.hg), ("svn", &e.svn)]
                .into_iter()
                .find_map(|(kind, url)| url.as_ref().map(|u| (kind, u)));
            let source = if let Some((kind, url)) = vcs {
                let url = url.strip_prefix(&format!("{kind}+")).unwrap_or(url);
                let commit = e.reference.as_deref().map(|r| format!("#{r}"));
                Some(format!("{kind}+{url}{}", commit.unwrap_or_default()))
            } else if let Some(p) = &e.path {
                Some(format!("path+{p}"))
            } else if let Some(f) = &e.file {
                Some(f.clone())
            } else {
                e.index
                    .as_deref()
                    .and_then(|i| index_urls.get(i))
                    .map(|url| format!("registry+{url}"))
            };
            let source = source.map(|s| {
                let s = scrub_url_credentials(&s);
                if e.editable {
                    format!("editable+{s}")
                } else {
                    s
                }
            });
            let package = Package {
                name: normalize_name(&name),
                version,
                source,
                hashes,
                dev,
                platform: e.markers.filter(|m| !m.trim().is_empty()),
                ..Package::default()
            };
            let in_default = dev
                && packages.iter().any(|p| {
                    !p.dev
                        && p.name == package.name
                        && p.version == package.version
                        && p.source == package.source
                });
            if !in_default {
                packages.push(package);
            }
        }
    }
    sort_packages(&mut packages);
    Ok(Parsed {
        format_version,
        packages,
        warnings,
        ..Parsed::default()
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    // Shape written by `pipenv lock` (pipenv 2026.10.3, pipfile-spec 6), with a git entry as
    // pipenv's documentation shows them.
    const LOCK: &str = r#"{
    "_meta": {
        "hash": {"sha256": "69da"},
        "pipfile-spec": 6,
        "requires": {},
        "sources": [{"name": "pypi", "url": "https://pypi.org/simple", "verify_ssl": true}]
    },
    "default": {
        "certifi": {
            "hashes": ["sha256:1324c476b4811eff41a8bc2122cd0bbd4d9c7234c725446d99ab1612b3a7fdd2"],
            "index": "pypi",
            "markers": "python_version >= '3.7'",
            "version": "==2026.10.19.post1"
        },
        "Packaging": {"hashes": ["sha256:BB", "sha256:aa"], "version": "==26.4"},
        "tools": {"editable": true, "git": "https://u:p@git.invalid/org/tools.git", "ref": "abc123"}
    },
    "develop": {
        "packaging": {"hashes": ["sha256:aa", "sha256:bb"], "version": "==26.4"},
        "pytest": {"hashes": [], "version": "==9.2.0"}
    }
}"#;

    #[test]
    fn default_and_develop() {
        let parsed = parse(LOCK, "Pipfile.lock").unwrap();
        assert_eq!(parsed.format_version.as_deref(), Some("6"));
        assert!(parsed.warnings.is_empty());
        let names: Vec<(&str, bool)> = parsed
            .packages
            .iter()
            .map(|p| (p.name.as_str(), p.dev))
            .collect();
        assert_eq!(
            names,
            [
                ("certifi", false),
                ("packaging", false),
                ("pytest", true),
                ("tools", false)
            ]
        );
        let certifi = &parsed.packages[0];
        assert_eq!(certifi.version, "2026.10.19.post1");
        assert_eq!(
            certifi.source.as_deref(),
            Some("registry+https://pypi.org/simple")
        );
        assert_eq!(certifi.platform.as_deref(), Some("python_version >= '3.7'"));
        assert_eq!(parsed.packages[1].hashes, ["sha256:aa", "sha256:bb"]);
        assert_eq!(
            parsed.packages[3].source.as_deref(),
            Some("editable+git+https://git.invalid/org/tools.git#abc123")
        );
    }

    #[test]
    fn unknown_spec_warns_but_reads() {
        let text = LOCK.replace("\"pipfile-spec\": 6", "\"pipfile-spec\": 7");
        let parsed = parse(&text, "Pipfile.lock").unwrap();
        assert_eq!(parsed.packages.len(), 4);
        assert!(parsed.warnings[0].contains('7'));
    }

    #[test]
    fn malformed_and_truncated() {
        let err = parse(&LOCK[..LOCK.len() / 2], "x/Pipfile.lock").unwrap_err();
        assert!(
            err.line.is_some() && err.to_string().contains("x/Pipfile.lock"),
            "{err}"
        );
        let err = parse(
            "{\n\"_meta\": {},\n\"default\": {\"a\": {\"version\": 1}}\n}",
            "Pipfile.lock",
        )
        .unwrap_err();
        assert_eq!(err.line, Some(3), "{err}");
        assert!(err.message.contains("default"), "{err}");
        let err = parse("[]", "Pipfile.lock").unwrap_err();
        assert_eq!(err.line, Some(1), "{err}");
        let bad = LOCK.replace("sha256:BB", "sha256:QQ");
        let err = parse(&bad, "Pipfile.lock").unwrap_err();
        assert_eq!(err.line, Some(15), "{err}");
    }
}
