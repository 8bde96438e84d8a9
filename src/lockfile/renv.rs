//! R's `renv.lock` (JSON).
//!
//! Layout as implemented (renv documentation, article "Lockfiles", and the JSON schema renv
//! ships as `inst/schema/draft-07.renv.lock.schema.json`):
//! * `R.Version` and `R.Repositories` (a list of `{Name, URL}`); optional `Bioconductor.Version`;
//! * `Packages`: name → the package's DESCRIPTION fields as renv copied them: `Package`,
//!   `Version`, `Source` (`Repository`, `Bioconductor`, `GitHub`, `GitLab`, `Bitbucket`, `git`,
//!   `URL`, `Local`, …), `Repository` (a name from `R.Repositories`), `Hash` and the `Remote*`
//!   fields of packages installed from elsewhere (`RemoteUsername`, `RemoteRepo`, `RemoteUrl`,
//!   `RemoteHost`, `RemoteSha`).
//!
//! The file has no format version. R's own version is recorded as a package named `R` (and the
//! Bioconductor release as `Bioconductor`), since both change what the packages compute and no
//! CRAN package can take either name. Package names are case-sensitive and kept as written.
//! Source: the repository's URL for `Repository` packages, `git+https://HOST/USER/REPO#SHA` for
//! GitHub/GitLab/Bitbucket, `git+URL#SHA` for `git`, otherwise the `Source` value as written.
//! `Hash` (an MD5 over selected DESCRIPTION fields, identifying a build rather than a tarball)
//! is kept as `renv-md5:<hex>`. renv records no dev or direct flag.

use std::collections::BTreeMap;

use serde::Deserialize;

use crate::error::LockfileError;
use crate::lockfile::support::{json_error, sort_packages};
use crate::lockfile::{line_of, Parsed};
use crate::manifest::Package;
use crate::redact::scrub_url_credentials;

#[derive(Deserialize)]
struct JsonLock {
    #[serde(rename = "R")]
    r: Option<JsonR>,
    #[serde(rename = "Bioconductor")]
    bioconductor: Option<JsonVersionOnly>,
    #[serde(rename = "Packages")]
    packages: Option<BTreeMap<String, JsonPackage>>,
}

#[derive(Deserialize)]
#[serde(rename_all = "PascalCase")]
struct JsonR {
    version: Option<String>,
    #[serde(default)]
    repositories: Vec<JsonRepository>,
}

#[derive(Deserialize)]
#[serde(rename_all = "PascalCase")]
struct JsonRepository {
    name: String,
    #[serde(rename = "URL")]
    url: String,
}

#[derive(Deserialize)]
#[serde(rename_all = "PascalCase")]
struct JsonVersionOnly {
    version: Option<String>,
}

#[derive(Deserialize)]
#[serde(rename_all = "PascalCase")]
struct JsonPackage {
    package: Option<String>,
    version: Option<String>,
    source: Option<String>,
    repository: Option<String>,
    hash: Option<String>,
    remote_host: Option<String>,
    remote_username: Option<String>,
    remote_repo: Option<String>,
    #[serde(rename = "RemoteUrl")]
    remote_url: Option<String>,
    remote_sha: Option<String>,
}

/// Parses a `renv.lock`; `path` only names the file in errors.
pub fn parse(text: &str, path: &str) -> Result<Parsed, LockfileError> {
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    let lock: JsonLock = serde_json::from_str(text).map_err(|e| json_error(path, &e))?;
    let Some(entries) = lock.packages else {
        return Err(LockfileError::at(
            path,
            None,
            "no `Packages` object; this is not an renv lockfile",
        ));
    };
    let repositories: BTreeMap<&str, &str> = lock
        .r
        .iter()
        .flat_map(|r| r.repositories.iter())
        .map(|r| (r.name.as_str(), r.url.as_str()))
        .collect();
    let mut packages = Vec::with_capacity(entries.len() + 2);
    if let Some(v) = lock.r.as_ref().and_then(|r| r.version.clone()) {
        packages.push(Package {
            name: "R".into(),
            version: v,
            ..Package::default()
        });
    }
    if let Some(v) = lock.bioconductor.and_then(|b| b.version) {
        packages.push(Package {
            name: "Bioconductor".into(),
            version: v,
            ..Package::default()
        });
    }
    for (key, p) in &entries {
        let Some(version) = p.version.clone() else {
            return Err(LockfileError::at(
                path,
                text.find(&format!("\"{key}\"")).map(|o| line_of(text, o)),
                format!("package `{key}` has no `Version`"),
            ));
        };
        let source = match (p.source.as_deref(), &p.remote_sha) {
            (Some("Repository"), _) => p
                .repository
                .as_deref()
                .map(|r| repositories.get(r).copied().unwrap_or(r).to_string()),
            (Some("GitHub" | "GitLab" | "Bitbucket"), Some(sha)) => {
                let host = match (p.source.as_deref(), p.remote_host.as_deref()) {
                    (_, Some(h)) if !h.starts_with("api.") => h.to_string(),
                    (Some("GitHub"), _) => "github.com".into(),
                    (Some("GitLab"), _) => "gitlab.com".into(),
                    _ => "bitbucket.org".into(),
                };
                match (&p.remote_username, &p.remote_repo) {
                    (Some(u), Some(r)) => Some(format!("git+https://{host}/{u}/{r}#{sha}")),
                    _ => p.source.clone(),
                }
            }
            (Some("git"), Some(sha)) => p.remote_url.as_ref().map(|u| format!("git+{u}#{sha}")),
            (other, _) => other.map(str::to_string),
        };
        packages.push(Package {
            name: p.package.clone().unwrap_or_else(|| key.clone()),
            version,
            source: source.as_deref().map(scrub_url_credentials),
            hashes: p
                .hash
                .as_ref()
                .map(|h| format!("renv-md5:{h}"))
                .into_iter()
                .collect(),
            ..Package::default()
        });
    }
    sort_packages(&mut packages);
    Ok(Parsed {
        format_version: None,
        packages,
        warnings: Vec::new(),
        includes: Vec::new(),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn reads_fixture() {
        let text = include_str!("../../fixtures/lockfiles/cran/renv.lock");
        let parsed = parse(text, "renv.lock").unwrap();
        assert!(parsed
            .packages
            .iter()
            .any(|p| p.name == "R" && p.version == "4.4.1"));
    }

    #[test]
    fn malformed_and_truncated() {
        let msg = parse(
            "{\n \"R\": {\"Version\": \"4.4.1\"},\n \"Packages\": {\n",
            "analysis/renv.lock",
        )
        .unwrap_err()
        .to_string();
        assert!(
            msg.contains("analysis/renv.lock") && msg.contains("truncated"),
            "{msg}"
        );
        let msg = parse(
            "{\"Packages\": {\n\"a\": {\"Package\": \"a\"}}}",
            "renv.lock",
        )
        .unwrap_err()
        .to_string();
        assert!(
            msg.contains("no `Version`") && msg.contains("line 2"),
            "{msg}"
        );
        let msg = parse("{\"Packages\": {\"a\": {\"Version\": 1}}}", "renv.lock")
            .unwrap_err()
            .to_string();
        assert!(msg.contains("line 1"), "{msg}");
        assert!(parse("{}", "renv.lock").is_err());
    }
}
