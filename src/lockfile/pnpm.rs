//! `pnpm-lock.yaml`, lockfile versions 5.x, 6.x and 9.0.
//!
//! Layout as implemented (pnpm's lockfile specification, `lockfile/6.0.md` and `9.0.md` in the
//! pnpm/spec repository, and files written by pnpm 8 and 9 in CI):
//! * `lockfileVersion`: `5.3`/`5.4` (pnpm 6 and 7, keys `/name/1.2.3_peer@1`), `'6.0'`
//!   (pnpm 8, keys `/name@1.2.3(peer@1)`), `'9.0'` (pnpm 9 and later, keys `name@1.2.3`);
//! * the project's own dependencies under `importers.<path>.{dependencies, devDependencies,
//!   optionalDependencies}` (a single-project file before 9.0 puts these maps at the top);
//!   each maps a name to `{specifier, version}` (a bare version string in 5.x);
//! * `packages`: one entry per resolved package with `resolution` (`{integrity}`,
//!   `{tarball, integrity}`, `{type: git, repo, commit}` or `{type: directory, directory}`),
//!   `os`/`cpu`/`libc`, and before 9.0 the `dev` and `optional` flags; `name` and `version`
//!   fields appear when the key does not hold them;
//! * 9.0 moves the dependency graph to `snapshots` (keyed by the full dependency path, with
//!   `optional: true` where the copy is needed only optionally) and drops `dev`, which is then
//!   computed by walking the graph from the importers: dev when reachable from a
//!   `devDependencies` entry and not from the others.
//!
//! A file may hold several YAML documents (later pnpm versions put configuration dependencies in
//! a first document); the last one describes the project and is the one read.
//!
//! Recorded per `packages` entry: name, version (peer suffixes dropped), the source (tarball
//! URL, `git+REPO#COMMIT` or `path+DIR`; none for the configured registry), the SRI integrity
//! as written, dev, optional, direct (named by an importer) and the platform.

use std::collections::{BTreeMap, BTreeSet, VecDeque};

use serde::Deserialize;

use crate::error::LockfileError;
use crate::lockfile::support::{
    platform_label, sort_packages, split_at_name, sri_hashes, yaml_error,
};
use crate::lockfile::{line_of, Parsed};
use crate::manifest::Package;
use crate::redact::scrub_url_credentials;

/// Lockfile versions this runprint knows (pnpm/spec `lockfile/README.md`).
const KNOWN_VERSIONS: &[&str] = &["5.3", "5.4", "6.0", "6.1", "7.0", "9.0"];

#[derive(Deserialize)]
#[serde(rename_all = "camelCase")]
struct PnpmLock {
    lockfile_version: Option<yaml_serde::Value>,
    #[serde(default)]
    importers: BTreeMap<String, Importer>,
    /// Before workspaces (5.x single projects) the project's own dependencies sit at the top.
    #[serde(flatten)]
    top: Importer,
    #[serde(default)]
    packages: BTreeMap<String, PnpmPackage>,
    #[serde(default)]
    snapshots: BTreeMap<String, Snapshot>,
}

#[derive(Deserialize, Default)]
#[serde(rename_all = "camelCase")]
struct Importer {
    #[serde(default)]
    dependencies: BTreeMap<String, ImporterDep>,
    #[serde(default)]
    dev_dependencies: BTreeMap<String, ImporterDep>,
    #[serde(default)]
    optional_dependencies: BTreeMap<String, ImporterDep>,
}

/// `{specifier, version}` since 6.0, a bare version before.
#[derive(Deserialize)]
#[serde(untagged)]
enum ImporterDep {
    Plain(String),
    Spec { version: String },
}

impl ImporterDep {
    fn version(&self) -> &str {
        match self {
            ImporterDep::Plain(v) | ImporterDep::Spec { version: v } => v,
        }
    }
}

#[derive(Deserialize, Default)]
#[serde(rename_all = "camelCase")]
struct PnpmPackage {
    name: Option<String>,
    version: Option<String>,
    resolution: Option<Resolution>,
    dev: Option<bool>,
    #[serde(default)]
    optional: bool,
    #[serde(default)]
    os: Vec<String>,
    #[serde(default)]
    cpu: Vec<String>,
    #[serde(default)]
    libc: Vec<String>,
    // Lockfile versions before 9.0 list the edges here (names only are used).
    #[serde(default)]
    dependencies: BTreeMap<String, serde::de::IgnoredAny>,
    #[serde(default)]
    optional_dependencies: BTreeMap<String, serde::de::IgnoredAny>,
}

#[derive(Deserialize, Default)]
struct Resolution {
    integrity: Option<String>,
    tarball: Option<String>,
    #[serde(rename = "type")]
    kind: Option<String>,
    repo: Option<String>,
    commit: Option<String>,
    directory: Option<String>,
}

#[derive(Deserialize, Default)]
#[serde(rename_all = "camelCase")]
struct Snapshot {
    #[serde(default)]
    dependencies: BTreeMap<String, String>,
    #[serde(default)]
    optional_dependencies: BTreeMap<String, String>,
    #[serde(default)]
    optional: bool,
}

/// Parses a `pnpm-lock.yaml`; `path` only names the file in errors.
pub fn parse(text: &str, path: &str) -> Result<Parsed, LockfileError> {
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    let mut last = None;
    for doc in yaml_serde::Deserializer::from_str(text) {
        last = Some(PnpmLock::deserialize(doc).map_err(|e| yaml_error(path, &e))?);
    }
    let lock = last.ok_or_else(|| LockfileError::at(path, None, "empty file"))?;
    if lock.lockfile_version.is_none() && lock.packages.is_empty() && lock.importers.is_empty() {
        return Err(LockfileError::at(
            path,
            None,
            "empty file, or no `lockfileVersion`, `importers` or `packages`; this is not a pnpm lockfile",
        ));
    }

    let format_version = match &lock.lockfile_version {
        Some(yaml_serde::Value::String(s)) => Some(s.clone()),
        Some(yaml_serde::Value::Number(n)) => Some(n.to_string()),
        _ => None,
    };
    let mut warnings = Vec::new();
    if !format_version
        .as_deref()
        .is_some_and(|v| KNOWN_VERSIONS.contains(&v))
    {
        warnings.push(format!(
            "`{path}`: pnpm lockfileVersion {} is not one this runprint knows ({}); packages were read as far as possible",
            format_version.as_deref().unwrap_or("(missing)"),
            KNOWN_VERSIONS.join(", ")
        ));
    }
    let major: u32 = format_version
        .as_deref()
        .and_then(|v| v.split('.').next())
        .and_then(|m| m.parse().ok())
        .unwrap_or(9);

    let mut importers: Vec<&Importer> = lock.importers.values().collect();
    importers.push(&lock.top);

    // Packages keys (peer suffix dropped) named by an importer, and, for 9.0, the keys reached
    // from production and from development roots.
    let package_keys: BTreeSet<&str> = lock.packages.keys().map(|k| strip_peers(k)).collect();
    let mut direct: BTreeSet<String> = BTreeSet::new();
    let mut prod_roots = Vec::new();
    let mut dev_roots = Vec::new();
    for imp in &importers {
        for (kind, deps) in [
            ("prod", &imp.dependencies),
            ("prod", &imp.optional_dependencies),
            ("dev", &imp.dev_dependencies),
        ] {
            for (name, dep) in deps {
                let version = dep.version();
                if version.starts_with("link:") {
                    continue;
                }
                if let Some(key) = package_key_for(&package_keys, name, version) {
                    direct.insert(key);
                }
                let root = snapshot_key_for(&lock.snapshots, name, version);
                if kind == "dev" {
                    dev_roots.push(root);
                } else {
                    prod_roots.push(root);
                }
            }
        }
    }
    let prod_reach = reach(&lock.snapshots, prod_roots);
    let dev_reach = reach(&lock.snapshots, dev_roots);
    // A 9.0 package is optional when every snapshot of it is.
    let mut snapshot_optional: BTreeMap<&str, bool> = BTreeMap::new();
    for (key, snap) in &lock.snapshots {
        let base = strip_peers(key);
        let all = snapshot_optional.entry(base).or_insert(true);
        *all &= snap.optional;
    }

    // 9.0 lists the edges in `snapshots`, one per peer combination: their union.
    let mut snapshot_edges: BTreeMap<&str, BTreeSet<&str>> = BTreeMap::new();
    for (key, snap) in &lock.snapshots {
        snapshot_edges.entry(strip_peers(key)).or_default().extend(
            snap.dependencies
                .keys()
                .chain(snap.optional_dependencies.keys())
                .map(String::as_str),
        );
    }

    let mut packages = Vec::with_capacity(lock.packages.len());
    for (key, p) in &lock.packages {
        let base = strip_peers(key);
        let parsed_key = split_key(base, major);
        let name = p
            .name
            .clone()
            .or_else(|| parsed_key.map(|(n, _)| n.to_string()));
        let version = p
            .version
            .clone()
            .or_else(|| parsed_key.map(|(_, v)| v.to_string()));
        let (Some(name), Some(version)) = (name, version) else {
            return Err(LockfileError::at(
                path,
                text.find(key.as_str()).map(|o| line_of(text, o)),
                format!("cannot tell the name and version of package `{key}`"),
            ));
        };
        let res = p.resolution.as_ref();
        let source = res.and_then(|r| match (r.kind.as_deref(), r) {
            (
                Some("git"),
                Resolution {
                    repo: Some(repo),
                    commit: Some(commit),
                    ..
                },
            ) => Some(format!("git+{repo}#{commit}")),
            (
                Some("directory"),
                Resolution {
                    directory: Some(d), ..
                },
            ) => Some(format!("path+{d}")),
            (
                _,
                Resolution {
                    tarball: Some(t), ..
                },
            ) => Some(t.clone()),
            _ => None,
        });
        let (dev, optional) = if lock.snapshots.is_empty() {
            (p.dev == Some(true), p.optional)
        } else {
            (
                dev_reach.contains(base) && !prod_reach.contains(base),
                snapshot_optional.get(base).copied().unwrap_or(false),
            )
        };
        packages.push(Package {
            name,
            version,
            source: source.as_deref().map(scrub_url_credentials),
            hashes: sri_hashes(res.and_then(|r| r.integrity.as_deref())),
            dev,
            optional,
            direct: Some(direct.contains(base)),
            platform: platform_label(&p.os, &p.cpu, &p.libc),
            requires: crate::lockfile::support::requires_list(
                p.dependencies
                    .keys()
                    .chain(p.optional_dependencies.keys())
                    .map(String::as_str)
                    .chain(snapshot_edges.get(base).into_iter().flatten().copied())
                    .map(str::to_string),
            ),
            ..Package::default()
        });
    }
    sort_packages(&mut packages);
    Ok(Parsed {
        format_version,
        packages,
        warnings,
        includes: Vec::new(),
    })
}

/// A dependency path without its peer suffix: `a@1.0.0(b@2.0.0)` → `a@1.0.0`. The 5.x suffix
/// (`/a/1.0.0_b@2.0.0`) stays: importers write it too, and [`split_key`] drops it from the
/// version.
fn strip_peers(key: &str) -> &str {
    match key.find('(') {
        Some(i) => &key[..i],
        None => key,
    }
}

/// Name and version from a `packages` key without peer suffix: `/name/1.2.3` before 6.0,
/// `/name@1.2.3` in 6.x and `name@1.2.3` from 9.0.
fn split_key(key: &str, major: u32) -> Option<(&str, &str)> {
    let k = key.strip_prefix('/').unwrap_or(key);
    let (name, version) = if major < 6 {
        let (name, version) = k.rsplit_once('/')?;
        (name, version.split('_').next().unwrap_or(version))
    } else {
        split_at_name(k)?
    };
    (!name.is_empty() && !version.is_empty()).then_some((name, version))
}

/// The `packages` key an importer or snapshot reference points at. The reference is a version
/// (`1.2.3(peer@1)`), a full path for aliases and non-registry packages, or `link:`.
fn package_key_for(keys: &BTreeSet<&str>, name: &str, reference: &str) -> Option<String> {
    let r = strip_peers(reference);
    [
        format!("{name}@{r}"),
        format!("/{name}@{r}"),
        format!("/{name}/{r}"),
        r.to_string(),
        format!("/{r}"),
    ]
    .into_iter()
    .find(|k| keys.contains(k.as_str()))
}

/// The `snapshots` key a reference points at (9.0).
fn snapshot_key_for(snapshots: &BTreeMap<String, Snapshot>, name: &str, reference: &str) -> String {
    let full = format!("{name}@{reference}");
    if snapshots.contains_key(&full) {
        full
    } else {
        reference.to_string()
    }
}

/// Base package keys reachable from `roots` through `snapshots`.
fn reach(snapshots: &BTreeMap<String, Snapshot>, roots: Vec<String>) -> BTreeSet<String> {
    let mut seen: BTreeSet<String> = BTreeSet::new();
    let mut queue: VecDeque<String> = roots.into();
    while let Some(key) = queue.pop_front() {
        if !seen.insert(key.clone()) {
            continue;
        }
        if let Some(snap) = snapshots.get(&key) {
            for (name, reference) in snap.dependencies.iter().chain(&snap.optional_dependencies) {
                if !reference.starts_with("link:") {
                    queue.push_back(snapshot_key_for(snapshots, name, reference));
                }
            }
        }
    }
    seen.iter().map(|k| strip_peers(k).to_string()).collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn find<'a>(parsed: &'a Parsed, name: &str, version: &str) -> &'a Package {
        parsed
            .packages
            .iter()
            .find(|p| p.name == name && p.version == version)
            .unwrap_or_else(|| panic!("{name}@{version} missing: {:?}", parsed.packages))
    }

    // 6.0 layout (pnpm/spec `lockfile/6.0.md`), as pnpm 8 writes it for a single project.
    const V6: &str = r#"lockfileVersion: '6.0'

dependencies:
  debug:
    specifier: 4.3.4
    version: 4.3.4(supports-color@7.2.0)

devDependencies:
  is-number:
    specifier: ^7.0.0
    version: 7.0.0

packages:

  /debug@4.3.4(supports-color@7.2.0):
    resolution: {integrity: sha512-AAAA}
    dependencies:
      ms: 2.1.2
    dev: false

  /ms@2.1.2:
    resolution: {integrity: sha512-BBBB, tarball: 'https://u:p@npm.internal.example/ms/-/ms-2.1.2.tgz'}
    dev: false

  /is-number@7.0.0:
    resolution: {integrity: sha512-CCCC}
    dev: true

  /fsevents@2.3.3:
    resolution: {integrity: sha512-DDDD}
    os: [darwin]
    optional: true

  github.com/o/lib/0123456789abcdef:
    resolution: {tarball: https://codeload.github.com/o/lib/tar.gz/0123456789abcdef}
    name: lib
    version: 1.0.0
"#;

    #[test]
    fn v6_entries() {
        let parsed = parse(V6, "pnpm-lock.yaml").unwrap();
        assert_eq!(parsed.format_version.as_deref(), Some("6.0"));
        assert!(parsed.warnings.is_empty());
        assert_eq!(parsed.packages.len(), 5);
        let debug = find(&parsed, "debug", "4.3.4");
        assert_eq!(debug.direct, Some(true));
        assert_eq!(debug.hashes, ["sha512-AAAA"]);
        let ms = find(&parsed, "ms", "2.1.2");
        assert_eq!(ms.direct, Some(false));
        assert_eq!(
            ms.source.as_deref(),
            Some("https://npm.internal.example/ms/-/ms-2.1.2.tgz")
        );
        assert!(find(&parsed, "is-number", "7.0.0").dev);
        let fse = find(&parsed, "fsevents", "2.3.3");
        assert!(fse.optional && fse.platform.as_deref() == Some("os=darwin"));
        assert!(find(&parsed, "lib", "1.0.0").source.is_some());
    }

    #[test]
    fn v5_slash_keys() {
        let text = "lockfileVersion: 5.4\n\nspecifiers:\n  '@s/a': ^1.0.0\n\ndependencies:\n  '@s/a': 1.0.0_b@2.0.0\n\npackages:\n\n  /@s/a/1.0.0_b@2.0.0:\n    resolution: {integrity: sha512-EEEE}\n    dev: false\n\n  /b/2.0.0:\n    resolution: {integrity: sha512-FFFF}\n    dev: false\n";
        let parsed = parse(text, "pnpm-lock.yaml").unwrap();
        assert_eq!(parsed.format_version.as_deref(), Some("5.4"));
        assert_eq!(find(&parsed, "@s/a", "1.0.0").direct, Some(true));
        assert_eq!(find(&parsed, "b", "2.0.0").direct, Some(false));
    }

    // 9.0 layout (pnpm/spec `lockfile/9.0.md`): `packages` plus `snapshots`, dev computed.
    const V9: &str = r#"lockfileVersion: '9.0'

settings:
  autoInstallPeers: true
  excludeLinksFromLockfile: false

importers:

  .:
    dependencies:
      debug:
        specifier: 4.3.4
        version: 4.3.4
      tool:
        specifier: workspace:*
        version: link:packages/tool
    optionalDependencies:
      is-odd:
        specifier: ^3.0.1
        version: 3.0.1
    devDependencies:
      is-number:
        specifier: ^7.0.0
        version: 7.0.0

  packages/tool:
    dependencies:
      lib:
        specifier: git+https://git.example/o/lib.git
        version: git+https://git.example/o/lib.git#0123456789abcdef

packages:

  debug@4.3.4:
    resolution: {integrity: sha512-AAAA}

  is-number@6.0.0:
    resolution: {integrity: sha512-BBBB}

  is-number@7.0.0:
    resolution: {integrity: sha512-CCCC}

  is-odd@3.0.1:
    resolution: {integrity: sha512-DDDD}

  lib@git+https://git.example/o/lib.git#0123456789abcdef:
    resolution: {type: git, repo: 'https://tok@git.example/o/lib.git', commit: 0123456789abcdef}
    version: 1.2.0

  ms@2.1.2:
    resolution: {integrity: sha512-EEEE}

snapshots:

  debug@4.3.4:
    dependencies:
      ms: 2.1.2

  is-number@6.0.0:
    optional: true

  is-number@7.0.0: {}

  is-odd@3.0.1:
    dependencies:
      is-number: 6.0.0
    optional: true

  lib@git+https://git.example/o/lib.git#0123456789abcdef: {}

  ms@2.1.2: {}
"#;

    #[test]
    fn v9_entries() {
        let parsed = parse(V9, "pnpm-lock.yaml").unwrap();
        assert_eq!(parsed.format_version.as_deref(), Some("9.0"));
        assert_eq!(parsed.packages.len(), 6);
        let dev = find(&parsed, "is-number", "7.0.0");
        assert!(dev.dev && !dev.optional && dev.direct == Some(true));
        let nested = find(&parsed, "is-number", "6.0.0");
        assert!(!nested.dev && nested.optional && nested.direct == Some(false));
        let ms = find(&parsed, "ms", "2.1.2");
        assert!(!ms.dev && !ms.optional && ms.direct == Some(false));
        let lib = find(&parsed, "lib", "1.2.0");
        assert_eq!(
            lib.source.as_deref(),
            Some("git+https://git.example/o/lib.git#0123456789abcdef")
        );
        assert_eq!(lib.direct, Some(true));
    }

    #[test]
    fn last_document_is_the_project() {
        let text = format!(
            "---\nlockfileVersion: '9.0'\nimporters:\n  .:\n    configDependencies: {{}}\npackages:\n  pnpm@10.0.0:\n    resolution: {{integrity: sha512-ZZZZ}}\n\n---\n{V9}"
        );
        let parsed = parse(&text, "pnpm-lock.yaml").unwrap();
        assert!(parsed.packages.iter().all(|p| p.name != "pnpm"));
        assert_eq!(parsed.packages.len(), 6);
    }

    #[test]
    fn unknown_version_warns() {
        let parsed = parse(
            "lockfileVersion: '12.0'\npackages:\n  a@1.0.0:\n    resolution: {integrity: sha512-A}\n",
            "pnpm-lock.yaml",
        )
        .unwrap();
        assert_eq!(parsed.packages.len(), 1);
        assert!(parsed.warnings[0].contains("12.0"));
    }

    #[test]
    fn malformed_and_truncated() {
        let msg = parse(
            "lockfileVersion: '9.0'\npackages:\n  a@1:\n    resolution: {integrity: x\n",
            "app/pnpm-lock.yaml",
        )
        .unwrap_err()
        .to_string();
        assert!(
            msg.contains("app/pnpm-lock.yaml") && msg.contains("line"),
            "{msg}"
        );
        let cut = &V9[..V9.find("is-number@7.0.0:\n    resolution").unwrap() + 30];
        let msg = parse(cut, "pnpm-lock.yaml").unwrap_err().to_string();
        assert!(msg.contains("line"), "{msg}");
        let msg = parse(
            "lockfileVersion: '9.0'\npackages:\n  '@':\n    resolution: {integrity: x}\n",
            "pnpm-lock.yaml",
        )
        .unwrap_err()
        .to_string();
        assert!(
            msg.contains("cannot tell") && msg.contains("line 3"),
            "{msg}"
        );
        let msg = parse("", "pnpm-lock.yaml").unwrap_err().to_string();
        assert!(msg.contains("empty"), "{msg}");
    }
}
