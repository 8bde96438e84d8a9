//! uv's `uv.lock`, schema version 1 (any revision).
//!
//! Grammar as implemented (uv's documentation, "Lockfile versioning", and the files `uv lock`
//! writes):
//! * top level: `version = 1` (a breaking change bumps it), `revision` (backwards-compatible
//!   additions; not a reason to warn), `[manifest] members` for multi-member workspaces;
//! * `[[package]]`: `name` (normalized), `version` (absent for dynamic local projects), `source`
//!   (an inline table with one key: `registry`, `git`, `url`, `path`, `directory`, `editable`,
//!   `virtual`), `sdist = {hash}`, `wheels = [{hash}]`, `resolution-markers` (the forks the entry
//!   belongs to; recorded as its platform), `dependencies`, `[package.optional-dependencies]` and
//!   `[package.dev-dependencies]` (lists of `{name, version?, source?, extra?}` references).
//!
//! The workspace members (the `[manifest] members`, or else the packages whose source is the
//! project folder `.`) are the roots. A package a member names is direct; one reachable only
//! through a member's dependency groups is dev; one reachable only through a member's extras is
//! optional.

use std::collections::{BTreeMap, BTreeSet};

use serde::Deserialize;

use crate::error::LockfileError;
use crate::lockfile::python::{
    any_of_markers, checked_hash, sort_packages, tidy_hashes, toml_error,
};
use crate::lockfile::requirements::normalize_name;
use crate::lockfile::Parsed;
use crate::manifest::Package;
use crate::redact::scrub_url_credentials;

#[derive(Deserialize)]
struct TomlUvLock {
    version: Option<toml::Value>,
    revision: Option<i64>,
    #[serde(default)]
    package: Vec<TomlPackage>,
    manifest: Option<TomlManifest>,
}

#[derive(Deserialize)]
struct TomlManifest {
    #[serde(default)]
    members: Vec<String>,
}

#[derive(Deserialize)]
#[serde(rename_all = "kebab-case")]
struct TomlPackage {
    name: String,
    version: Option<String>,
    source: Option<BTreeMap<String, toml::Value>>,
    sdist: Option<TomlArtifact>,
    #[serde(default)]
    wheels: Vec<TomlArtifact>,
    #[serde(default)]
    resolution_markers: Vec<String>,
    #[serde(default)]
    dependencies: Vec<TomlDep>,
    #[serde(default)]
    optional_dependencies: BTreeMap<String, Vec<TomlDep>>,
    #[serde(default, alias = "dependency-groups")]
    dev_dependencies: BTreeMap<String, Vec<TomlDep>>,
}

#[derive(Deserialize)]
struct TomlArtifact {
    hash: Option<String>,
    url: Option<String>,
    path: Option<String>,
    filename: Option<String>,
}

impl TomlArtifact {
    fn file(&self) -> Option<&str> {
        self.filename
            .as_deref()
            .or(self.url.as_deref())
            .or(self.path.as_deref())
    }
}

#[derive(Deserialize)]
struct TomlDep {
    name: String,
    version: Option<String>,
    source: Option<BTreeMap<String, toml::Value>>,
    #[serde(default)]
    extra: Vec<String>,
}

/// Source kinds in the order uv documents them.
const SOURCE_KINDS: &[&str] = &[
    "registry",
    "git",
    "url",
    "path",
    "directory",
    "editable",
    "virtual",
];

/// Parses the text of a `uv.lock`; `path` only names the file in errors.
pub fn parse(text: &str, path: &str) -> Result<Parsed, LockfileError> {
    let lock: TomlUvLock = toml::from_str(text).map_err(|e| toml_error(text, path, &e))?;
    let version = match &lock.version {
        Some(toml::Value::Integer(n)) => *n,
        Some(other) => {
            return Err(LockfileError::at(
                path,
                crate::lockfile::python::line_of_str(text, "version"),
                format!("`version` must be an integer, found {other}"),
            ))
        }
        None => {
            return Err(LockfileError::at(
                path,
                None,
                "no top-level `version` (every uv.lock has one; is this a uv.lock?)",
            ))
        }
    };
    let mut warnings = Vec::new();
    if version != 1 {
        warnings.push(format!(
            "`{path}`: uv.lock version {version} is not the one this runprint knows (1); packages were read as far as possible"
        ));
    }
    let format_version = match lock.revision {
        Some(r) => format!("{version} (revision {r})"),
        None => version.to_string(),
    };

    let pkgs = &lock.package;
    let roots = roots(pkgs, lock.manifest.as_ref());
    let graph = Graph { pkgs };
    // Needed by a plain install, by an install with all extras, and by one with all groups too.
    let required = graph.reach(&roots, false, false);
    let with_extras = graph.reach(&roots, true, false);
    let everything = graph.reach(&roots, true, true);
    let mut direct = BTreeSet::new();
    for &r in &roots {
        let p = &pkgs[r];
        let refs = p
            .dependencies
            .iter()
            .chain(p.optional_dependencies.values().flatten())
            .chain(p.dev_dependencies.values().flatten());
        for d in refs {
            direct.extend(graph.resolve(d));
        }
    }

    let mut packages = Vec::with_capacity(pkgs.len());
    for (i, p) in pkgs.iter().enumerate() {
        let mut hashes = p
            .sdist
            .iter()
            .chain(&p.wheels)
            .filter_map(|a| a.hash.as_deref())
            .map(|h| checked_hash(text, path, h))
            .collect::<Result<Vec<_>, _>>()?;
        tidy_hashes(&mut hashes);
        let is_root = roots.contains(&i);
        packages.push(Package {
            name: normalize_name(&p.name),
            version: p.version.clone().unwrap_or_default(),
            source: p.source.as_ref().and_then(source_string),
            hashes,
            dev: !is_root && !with_extras.contains(&i) && everything.contains(&i),
            optional: !is_root && !required.contains(&i) && with_extras.contains(&i),
            direct: (!roots.is_empty() && !is_root).then(|| direct.contains(&i)),
            platform: any_of_markers(&p.resolution_markers),
            compiled: crate::lockfile::support::any_compiled(
                p.wheels.iter().filter_map(TomlArtifact::file),
            ),
            requires: crate::lockfile::support::requires_list(
                p.dependencies
                    .iter()
                    .chain(p.optional_dependencies.values().flatten())
                    .map(|d| normalize_name(&d.name)),
            ),
            ..Package::default()
        });
    }
    sort_packages(&mut packages);
    Ok(Parsed {
        format_version: Some(format_version),
        packages,
        warnings,
        ..Parsed::default()
    })
}

/// The source in the manifest's notation, `KIND+LOCATION` (`registry+https://pypi.org/simple`,
/// `git+URL?rev=…#COMMIT`, `editable+.`), and a direct URL as itself.
fn source_string(source: &BTreeMap<String, toml::Value>) -> Option<String> {
    let (kind, value) = SOURCE_KINDS
        .iter()
        .find_map(|k| source.get(*k).map(|v| (*k, v)))
        .or_else(|| source.iter().next().map(|(k, v)| (k.as_str(), v)))?;
    let location = value
        .as_str()
        .map_or_else(|| value.to_string(), str::to_string);
    let s = if kind == "url" {
        location
    } else {
        format!("{kind}+{location}")
    };
    Some(scrub_url_credentials(&s))
}

/// Indices of the workspace members.
fn roots(pkgs: &[TomlPackage], manifest: Option<&TomlManifest>) -> Vec<usize> {
    let members: BTreeSet<String> = manifest
        .map(|m| m.members.iter().map(|n| normalize_name(n)).collect())
        .unwrap_or_default();
    pkgs.iter()
        .enumerate()
        .filter(|(_, p)| {
            if members.is_empty() {
                p.source.as_ref().is_some_and(|s| {
                    ["editable", "virtual", "directory"]
                        .iter()
                        .any(|k| s.get(*k).and_then(|v| v.as_str()) == Some("."))
                })
            } else {
                members.contains(&normalize_name(&p.name))
            }
        })
        .map(|(i, _)| i)
        .collect()
}

struct Graph<'a> {
    pkgs: &'a [TomlPackage],
}

impl Graph<'_> {
    /// The packages a reference can mean: same name, and same version and source where the
    /// reference gives them (uv adds them only when the name alone is ambiguous).
    fn resolve(&self, d: &TomlDep) -> Vec<usize> {
        let name = normalize_name(&d.name);
        self.pkgs
            .iter()
            .enumerate()
            .filter(|(_, p)| normalize_name(&p.name) == name)
            .filter(|(_, p)| d.version.is_none() || p.version == d.version)
            .filter(|(_, p)| d.source.is_none() || p.source == d.source)
            .map(|(i, _)| i)
            .collect()
    }

    /// Everything reachable from the roots. Extras named on a reference are always followed;
    /// the roots' own extras and groups only when asked.
    fn reach(&self, roots: &[usize], root_extras: bool, root_groups: bool) -> BTreeSet<usize> {
        let mut seen: BTreeSet<usize> = roots.iter().copied().collect();
        let mut queue: Vec<(usize, Vec<String>)> = Vec::new();
        for &r in roots {
            let p = &self.pkgs[r];
            let mut refs: Vec<&TomlDep> = p.dependencies.iter().collect();
            if root_extras {
                refs.extend(p.optional_dependencies.values().flatten());
            }
            if root_groups {
                refs.extend(p.dev_dependencies.values().flatten());
            }
            for d in refs {
                for t in self.resolve(d) {
                    queue.push((t, d.extra.clone()));
                }
            }
        }
        // A package is revisited when reached with extras not yet followed.
        let mut followed: BTreeSet<(usize, String)> = BTreeSet::new();
        while let Some((i, extras)) = queue.pop() {
            let first = seen.insert(i);
            let p = &self.pkgs[i];
            let mut refs: Vec<&TomlDep> = Vec::new();
            if first {
                refs.extend(&p.dependencies);
            }
            for e in extras {
                if followed.insert((i, e.clone())) {
                    refs.extend(p.optional_dependencies.get(&e).into_iter().flatten());
                }
            }
            for d in refs {
                for t in self.resolve(d) {
                    queue.push((t, d.extra.clone()));
                }
            }
        }
        seen
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // Shape written by `uv lock` (uv 0.13.9, version 1 revision 5) for a virtual project with
    // an extra and a dev group; hashes shortened.
    const LOCK: &str = r#"version = 1
revision = 5
requires-python = ">=3.9"
resolution-markers = [
    "python_full_version >= '3.10'",
    "python_full_version < '3.10'",
]

[[package]]
name = "demo-trainer"
version = "0.1.0"
source = { virtual = "." }
dependencies = [
    { name = "requests" },
]

[package.optional-dependencies]
plot = [
    { name = "pyparsing" },
]

[package.dev-dependencies]
dev = [
    { name = "pytest", version = "9.2.0", source = { registry = "https://pypi.org/simple" }, marker = "python_full_version >= '3.10'" },
]

[[package]]
name = "idna"
version = "3.20"
source = { registry = "https://pypi.org/simple" }
sdist = { url = "https://files.invalid/idna-3.20.tar.gz", hash = "sha256:A7", size = 1, upload-time = "2026-09-17T14:11:04Z" }
wheels = [
    { url = "https://files.invalid/idna-3.20-py3-none-any.whl", hash = "sha256:ab", size = 1 },
]

[[package]]
name = "iniconfig"
version = "2.3.1"
source = { registry = "https://pypi.org/simple" }

[[package]]
name = "pyparsing"
version = "3.3.3"
source = { registry = "https://pypi.org/simple" }

[[package]]
name = "pytest"
version = "9.2.0"
source = { registry = "https://pypi.org/simple" }
resolution-markers = [
    "python_full_version >= '3.10'",
]
dependencies = [
    { name = "iniconfig" },
    { name = "requests", extra = ["socks"] },
]

[[package]]
name = "pysocks"
version = "1.7.1"
source = { git = "https://t:x@git.invalid/pysocks?rev=v1#0123abcd" }

[[package]]
name = "requests"
version = "2.34.2"
source = { registry = "https://pypi.org/simple" }
dependencies = [
    { name = "idna" },
]

[package.optional-dependencies]
socks = [
    { name = "pysocks" },
]
"#;

    #[test]
    fn roles_from_the_graph() {
        let parsed = parse(LOCK, "uv.lock").unwrap();
        assert_eq!(parsed.format_version.as_deref(), Some("1 (revision 5)"));
        assert!(parsed.warnings.is_empty(), "{:?}", parsed.warnings);
        let get = |n: &str| parsed.packages.iter().find(|p| p.name == n).unwrap();
        let root = get("demo-trainer");
        assert_eq!(root.source.as_deref(), Some("virtual+."));
        assert_eq!(root.direct, None);
        let requests = get("requests");
        assert_eq!(
            (requests.direct, requests.dev, requests.optional),
            (Some(true), false, false)
        );
        let idna = get("idna");
        assert_eq!(
            (idna.direct, idna.dev, idna.optional),
            (Some(false), false, false)
        );
        assert_eq!(idna.hashes, ["sha256:a7", "sha256:ab"]);
        assert_eq!(
            idna.source.as_deref(),
            Some("registry+https://pypi.org/simple")
        );
        let pytest = get("pytest");
        assert_eq!((pytest.direct, pytest.dev), (Some(true), true));
        assert_eq!(
            pytest.platform.as_deref(),
            Some("python_full_version >= '3.10'")
        );
        assert!(get("iniconfig").dev);
        // Reached only through `requests[socks]`, which only pytest asks for.
        let pysocks = get("pysocks");
        assert!(pysocks.dev);
        assert_eq!(
            pysocks.source.as_deref(),
            Some("git+https://git.invalid/pysocks?rev=v1#0123abcd")
        );
        let pyparsing = get("pyparsing");
        assert_eq!(
            (pyparsing.direct, pyparsing.dev, pyparsing.optional),
            (Some(true), false, true)
        );
    }

    #[test]
    fn unknown_version_warns_but_reads() {
        let text = LOCK.replacen("version = 1\n", "version = 2\n", 1);
        let parsed = parse(&text, "uv.lock").unwrap();
        assert_eq!(parsed.packages.len(), 7);
        assert!(parsed.warnings[0].contains("version 2"));
    }

    #[test]
    fn malformed_and_truncated() {
        let cut = &LOCK[..LOCK.find("hash = \"sha256:ab\"").unwrap() + 10];
        let err = parse(cut, "w/uv.lock").unwrap_err();
        assert!(
            err.line.is_some() && err.to_string().contains("w/uv.lock"),
            "{err}"
        );
        let err = parse("version = \"one\"\n", "uv.lock").unwrap_err();
        assert_eq!(err.line, Some(1), "{err}");
        let err = parse("[[package]]\nname = \"a\"\n", "uv.lock").unwrap_err();
        assert!(err.message.contains("version"), "{err}");
        let bad = LOCK.replace("sha256:A7", "sha256:");
        let err = parse(&bad, "uv.lock").unwrap_err();
        assert_eq!(err.line, Some(31), "{err}");
    }
}
