//! Multi-platform conda lockfiles: conda-lock's unified `conda-lock.yml` and pixi's
//! `pixi.lock`. Both list, for each platform, the exact conda packages (and PyPI packages
//! installed beside them) by URL and hash.
//!
//! Grammar as implemented:
//!
//! * `conda-lock.yml` (conda-lock's "Output formats" page: the unified lockfile, defined by
//!   its `Lockfile` model; checked against conda-lock 4.0's own writer and reader): a YAML
//!   mapping with `version: 1`, `metadata` and `package`, a list of entries with `name`,
//!   `version`, `manager` (`conda` or `pip`), `platform`, `url`, `hash` (`md5`, `sha256`),
//!   `category` (`main`, `dev`…) and `optional`.
//! * `pixi.lock` (rattler-lock, format versions 4 to 7; checked against py-rattler's writer
//!   and reader): `version`, `environments` (each a mapping of platform to a list of
//!   `{conda: URL}` or `{pypi: URL}` references) and `packages`, the entries those URLs
//!   name: `conda: URL` (or, before version 6, `kind: conda` with `url`) with `sha256`, `md5`
//!   and optionally `name`/`version` (otherwise read from the file name,
//!   `NAME-VERSION-BUILD.conda`), and `pypi: URL` (or `kind: pypi`) with `name`, `version`
//!   and `sha256`.
//!
//! Each package is recorded once per platform, its URL (credentials removed) the source, its
//! platform the platform. PyPI entries get PEP 503 names. In `conda-lock.yml` a category
//! other than `main` is recorded as `dev`; in `pixi.lock` a package no platform of the
//! `default` environment uses is recorded as `optional` (it belongs to another environment,
//! such as `test` or `docs`).

use std::collections::BTreeMap;

use serde::Deserialize;

use crate::error::LockfileError;
use crate::lockfile::conda::name_version_of_url;
use crate::lockfile::python::hash_pair;
use crate::lockfile::requirements::normalize_name;
use crate::lockfile::Parsed;
use crate::manifest::Package;
use crate::redact::scrub_url_credentials;

/// `conda-lock.yml`, `conda-lock.yaml` and `NAME.conda-lock.yml` (conda-lock's "Output
/// formats": the unified lockfile must end in `.conda-lock.yml`).
pub fn is_conda_lock_name(file_name: &str) -> bool {
    file_name == "conda-lock.yml"
        || file_name == "conda-lock.yaml"
        || file_name.ends_with(".conda-lock.yml")
        || file_name.ends_with(".conda-lock.yaml")
}

fn yaml_error(path: &str, e: &yaml_serde::Error) -> LockfileError {
    LockfileError::at(path, e.location().map(|l| l.line()), e.to_string())
}

fn hashes(md5: Option<&str>, sha256: Option<&str>) -> Vec<String> {
    [("md5", md5), ("sha256", sha256)]
        .into_iter()
        .filter_map(|(algo, d)| d.and_then(|d| hash_pair(algo, d)))
        .collect()
}

#[derive(Deserialize)]
struct CondaLock {
    version: u32,
    #[serde(default)]
    package: Vec<CondaLockEntry>,
}

#[derive(Deserialize)]
struct CondaLockEntry {
    name: String,
    version: String,
    manager: String,
    platform: String,
    url: String,
    #[serde(default)]
    hash: CondaLockHash,
    #[serde(default)]
    category: Option<String>,
    #[serde(default)]
    optional: bool,
}

#[derive(Deserialize, Default)]
struct CondaLockHash {
    #[serde(default)]
    md5: Option<String>,
    #[serde(default)]
    sha256: Option<String>,
}

/// Parses a `conda-lock.yml`; `path` only names the file in errors.
pub fn parse_conda_lock(text: &str, path: &str) -> Result<Parsed, LockfileError> {
    let lock: CondaLock = yaml_serde::from_str(text).map_err(|e| yaml_error(path, &e))?;
    let mut warnings = Vec::new();
    if lock.version != 1 {
        warnings.push(format!(
            "`{path}`: conda-lock format version {} is not one runprint knows (1); read as version 1",
            lock.version
        ));
    }
    let mut packages = Vec::new();
    for e in lock.package {
        let name = match e.manager.as_str() {
            "conda" => e.name.to_ascii_lowercase(),
            "pip" => normalize_name(&e.name),
            other => {
                warnings.push(format!(
                    "`{path}`: `{}` has the unknown manager `{other}`; not recorded",
                    e.name
                ));
                continue;
            }
        };
        let category = e.category.as_deref().unwrap_or("main");
        packages.push(Package {
            name,
            version: e.version,
            source: Some(scrub_url_credentials(&e.url)),
            hashes: hashes(e.hash.md5.as_deref(), e.hash.sha256.as_deref()),
            platform: Some(e.platform),
            dev: category != "main",
            optional: e.optional && category == "main",
            ..Package::default()
        });
    }
    Ok(Parsed::sorted(
        Some(lock.version.to_string()),
        packages,
        warnings,
    ))
}

#[derive(Deserialize)]
struct Pixi {
    version: u32,
    #[serde(default)]
    environments: BTreeMap<String, PixiEnvironment>,
    #[serde(default)]
    packages: Vec<PixiPackage>,
}

#[derive(Deserialize, Default)]
struct PixiEnvironment {
    #[serde(default)]
    packages: BTreeMap<String, Vec<BTreeMap<String, String>>>,
}

#[derive(Deserialize)]
struct PixiPackage {
    #[serde(default)]
    conda: Option<String>,
    #[serde(default)]
    pypi: Option<String>,
    #[serde(default)]
    kind: Option<String>,
    #[serde(default)]
    url: Option<String>,
    #[serde(default)]
    name: Option<String>,
    #[serde(default)]
    version: Option<String>,
    #[serde(default)]
    sha256: Option<String>,
    #[serde(default)]
    md5: Option<String>,
}

impl PixiPackage {
    /// `("conda" | "pypi", URL)`, in either shape.
    fn reference(&self) -> Option<(&'static str, &str)> {
        if let Some(u) = &self.conda {
            return Some(("conda", u));
        }
        if let Some(u) = &self.pypi {
            return Some(("pypi", u));
        }
        match (self.kind.as_deref(), &self.url) {
            (Some("conda"), Some(u)) => Some(("conda", u)),
            (Some("pypi"), Some(u)) => Some(("pypi", u)),
            _ => None,
        }
    }
}

/// Parses a `pixi.lock`; `path` only names the file in errors.
pub fn parse_pixi(text: &str, path: &str) -> Result<Parsed, LockfileError> {
    let lock: Pixi = yaml_serde::from_str(text).map_err(|e| yaml_error(path, &e))?;
    let mut warnings = Vec::new();
    if !(4..=7).contains(&lock.version) {
        warnings.push(format!(
            "`{path}`: pixi lock format version {} is not one runprint knows (4 to 7); read as far as possible",
            lock.version
        ));
    }
    let by_url: BTreeMap<(&str, &str), &PixiPackage> = lock
        .packages
        .iter()
        .filter_map(|p| p.reference().map(|(kind, url)| ((kind, url), p)))
        .collect();
    // (kind, URL, platform) → used by the default environment?
    let mut used: BTreeMap<(&str, &str, &str), bool> = BTreeMap::new();
    for (env, e) in &lock.environments {
        for (platform, refs) in &e.packages {
            for r in refs {
                for (kind, url) in r {
                    let kind = match kind.as_str() {
                        "conda" => "conda",
                        "pypi" => "pypi",
                        _ => continue,
                    };
                    let default = used
                        .entry((kind, url.as_str(), platform.as_str()))
                        .or_insert(false);
                    *default |= env == "default";
                }
            }
        }
    }
    let mut packages = Vec::new();
    for ((kind, url, platform), in_default) in used {
        let entry = by_url.get(&(kind, url));
        let named = entry.and_then(|p| Some((p.name.clone()?, p.version.clone()?)));
        let (name, version) = match (named, kind) {
            (Some((n, v)), "pypi") => (normalize_name(&n), v),
            (Some((n, v)), _) => (n.to_ascii_lowercase(), v),
            (None, "conda") => match name_version_of_url(url) {
                Ok(nv) => nv,
                Err(why) => {
                    warnings.push(format!("`{path}`: {why}; not recorded"));
                    continue;
                }
            },
            (None, _) => {
                warnings.push(format!(
                    "`{path}`: the PyPI package `{}` has no name and version; not recorded",
                    scrub_url_credentials(url)
                ));
                continue;
            }
        };
        if entry.is_none() {
            warnings.push(format!(
                "`{path}`: `{}` is used by an environment but not listed under `packages`",
                scrub_url_credentials(url)
            ));
        }
        packages.push(Package {
            name,
            version,
            source: Some(scrub_url_credentials(url)),
            hashes: entry
                .map(|p| hashes(p.md5.as_deref(), p.sha256.as_deref()))
                .unwrap_or_default(),
            platform: Some(platform.to_string()),
            optional: !in_default,
            ..Package::default()
        });
    }
    Ok(Parsed::sorted(
        Some(lock.version.to_string()),
        packages,
        warnings,
    ))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The shape conda-lock 4.0's `write_conda_lock_file` gives (see the integration test that
    /// runs it).
    #[test]
    fn conda_lock_entries() {
        let text = "version: 1\nmetadata:\n  platforms: [linux-64]\npackage:\n- name: pytest\n  version: 8.3.4\n  manager: conda\n  platform: linux-64\n  dependencies: {}\n  url: https://conda.anaconda.org/conda-forge/noarch/pytest-8.3.4-pyhd8ed1ab_1.conda\n  hash:\n    md5: '44444444444444444444444444444444'\n  category: dev\n  optional: true\n- name: Torch_Audio\n  version: 2.5.1\n  manager: pip\n  platform: linux-64\n  url: https://u:p@files.example.invalid/torch_audio-2.5.1-py3-none-any.whl\n  hash:\n    sha256: '66666666666666666666666666666666666666666666666666666666666666aa'\n  category: main\n  optional: false\n";
        let p = parse_conda_lock(text, "conda-lock.yml").unwrap();
        assert!(p.warnings.is_empty());
        assert_eq!(p.packages.len(), 2);
        assert!(p.packages[0].dev);
        let audio = &p.packages[1];
        assert_eq!(audio.name, "torch-audio");
        assert!(!audio.source.as_deref().unwrap().contains("u:p"));
        let err =
            parse_conda_lock("version: 1\npackage:\n- name: x\n", "conda-lock.yml").unwrap_err();
        assert_eq!(err.line, Some(3));
    }

    /// Version 6 as pixi writes it (conda entries without name and version) and the version 5
    /// `kind:` shape.
    #[test]
    fn pixi_entries_in_both_shapes() {
        let v6 = "version: 6\nenvironments:\n  default:\n    channels:\n    - url: https://conda.anaconda.org/conda-forge/\n    packages:\n      linux-64:\n      - conda: https://conda.anaconda.org/conda-forge/linux-64/numpy-2.1.3-py312h58c1407_0.conda\n  test:\n    packages:\n      linux-64:\n      - conda: https://conda.anaconda.org/conda-forge/linux-64/numpy-2.1.3-py312h58c1407_0.conda\n      - pypi: https://files.pythonhosted.org/packages/pytest-8.3.4-py3-none-any.whl\npackages:\n- conda: https://conda.anaconda.org/conda-forge/linux-64/numpy-2.1.3-py312h58c1407_0.conda\n  sha256: abababababababababababababababababababababababababababababababab\n  md5: abababababababababababababababab\n- pypi: https://files.pythonhosted.org/packages/pytest-8.3.4-py3-none-any.whl\n  name: pytest\n  version: 8.3.4\n";
        let p = parse_pixi(v6, "pixi.lock").unwrap();
        assert!(p.warnings.is_empty(), "{:?}", p.warnings);
        let got: Vec<(&str, &str, bool, usize)> = p
            .packages
            .iter()
            .map(|p| {
                (
                    p.name.as_str(),
                    p.version.as_str(),
                    p.optional,
                    p.hashes.len(),
                )
            })
            .collect();
        assert_eq!(
            got,
            [("numpy", "2.1.3", false, 2), ("pytest", "8.3.4", true, 0)]
        );
        let v5 = "version: 5\nenvironments:\n  default:\n    packages:\n      linux-64:\n      - conda: https://c.invalid/linux-64/torch-2.5.1-cuda_0.conda\npackages:\n- kind: conda\n  name: pytorch\n  version: 2.5.1\n  build: cuda_0\n  url: https://c.invalid/linux-64/torch-2.5.1-cuda_0.conda\n";
        let p = parse_pixi(v5, "pixi.lock").unwrap();
        assert_eq!(p.packages[0].name, "pytorch");
    }
}
