//! A repository's policy file, `runprint.toml` at the repository root (or `--policy FILE`):
//! how a team adjusts the built-in rules (the comparison checks that the rule ids an acceptance
//! names exist: `diff::rules::check_policy`).
//!
//! Grammar as implemented (TOML, kebab-case keys, every key optional, unknown keys rejected):
//!
//! ```toml
//! fail-on = "retrain"            # "verify" (default), "retrain" or "never"
//!
//! [paths]                        # globs (globset syntax) relative to the repository root
//! code = ["src/**"]              # a path takes the first class that matches, in the order
//! config = ["experiments/*.py"]  # irrelevant, docs, metadata, notebooks, ci, tests, build,
//! data = ["fixtures/**"]         # dependencies, data, config, code; unmatched paths fall
//! docs = ["notes/**"]            # back to the built-in defaults
//! irrelevant = ["scratch/**"]
//! tests = ["qa/**"]
//! ci = []
//! build = []
//! notebooks = []
//! metadata = []
//! dependencies = []
//!
//! [packages]                     # globs over package names, case-insensitive
//! numeric = ["kelp-kernels"]     # treated as numerical libraries
//! compiled = ["fastparse"]       # unknown, ships compiled code
//! pure = ["our-utils"]           # unknown, pure script code
//! tooling = ["internal-logger"]  # demoted: never affects results
//! infrastructure = ["kelp-rpc"]  # demoted: networking, telemetry, never affects results
//!
//! [env]                          # globs over variable names, case-sensitive
//! precision = ["KELP_MATMUL_MODE"]
//! threads = ["KELP_WORKERS"]
//! determinism = []
//! kernels = []
//! loader = []
//! collectives = []
//! devices = []
//! cache = ["KELP_CACHE"]
//! logging = []
//! irrelevant = ["KELP_UI_THEME"]
//!
//! [scope]                        # the training job: what it runs and reads (see below)
//! entry = ["train.py", "kelp.train"]  # entry points: files or Python modules
//! lockfiles = ["requirements.txt"]    # the lockfiles it installs from (default: all)
//! reads = ["configs/**", "data/**"]   # globs of configuration and data it reads
//!
//! [[accept]]                     # a known change, accepted until a date
//! subject = "env OMP_NUM_THREADS" # a glob over the change's subject
//! rule = "env.threads"           # optional: only changes decided by this rule
//! old = "8"                      # optional: only from this value
//! new = "16"                     # optional: only to this value
//! reason = "16-core nodes since run 212; metrics checked"
//! expires = 2027-03-31           # a TOML date or "YYYY-MM-DD"; the last day it applies
//! ```
//!
//! `fail-on` changes only the exit code of `diff`: the verdict word is never changed. With
//! `fail-on = "retrain"` a `verify` verdict exits 0 and a `retrain` verdict still exits 4; with
//! `"never"` every verdict exits 0. Bad input always exits 2.
//!
//! An accepted change keeps its rule and is reported with impact `none` and the acceptance's
//! reason. An acceptance past its date no longer applies and the report says so.
//!
//! Errors name the file, the line and the key ([`PolicyError`]).

use std::path::{Path, PathBuf};

use globset::{Glob, GlobBuilder, GlobSet, GlobSetBuilder};
use serde::Deserialize;
use toml::Spanned;

use crate::classes::Impact;

/// The name of the policy file at a repository's root.
pub const POLICY_FILE: &str = "runprint.toml";

/// A policy file could not be used.
#[derive(Debug, thiserror::Error)]
pub enum PolicyError {
    /// The file could not be read.
    #[error("cannot read policy `{}`: {source}", path.display())]
    Read {
        /// The file.
        path: PathBuf,
        /// The operating system's reason.
        source: std::io::Error,
    },
    /// The file is not a valid policy.
    #[error("`{}`{}{}: invalid policy: {message}", path.display(),
        line.map(|l| format!(", line {l}")).unwrap_or_default(),
        key.as_ref().map(|k| format!(", key `{k}`")).unwrap_or_default())]
    Invalid {
        /// The file.
        path: PathBuf,
        /// 1-based line, when known.
        line: Option<usize>,
        /// The key at fault (dotted, `accept[2].expires`), when known.
        key: Option<String>,
        /// What was wrong.
        message: String,
    },
}

/// Which verdict makes `diff` exit non-zero.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum FailOn {
    /// `verify` and `retrain` exit 3 and 4 (the default).
    #[default]
    Verify,
    /// Only `retrain` exits non-zero (4); `verify` exits 0.
    Retrain,
    /// Every verdict exits 0.
    Never,
}

pub use crate::classes::{EnvClass, PackageClass, PathClass};

/// One accepted change.
#[derive(Debug, Clone)]
pub struct Acceptance {
    /// Glob over change subjects.
    pub subject: String,
    /// Only changes decided by this rule id.
    pub rule: Option<String>,
    /// Only from this old value.
    pub old: Option<String>,
    /// Only to this new value.
    pub new: Option<String>,
    /// Why it is accepted.
    pub reason: String,
    /// Last day it applies, `YYYY-MM-DD`.
    pub expires: String,
    /// Line in the policy file.
    pub line: usize,
    /// Line of its `rule` key, when it has one.
    pub rule_line: Option<usize>,
    matcher: globset::GlobMatcher,
}

impl Acceptance {
    /// True when it applies to a change with this subject, rule and values (dates aside).
    pub fn matches(&self, subject: &str, rule: &str, old: Option<&str>, new: Option<&str>) -> bool {
        self.matcher.is_match(subject)
            && self.rule.as_deref().is_none_or(|r| r == rule)
            && self.old.as_deref().is_none_or(|o| Some(o) == old)
            && self.new.as_deref().is_none_or(|n| Some(n) == new)
    }

    /// True when `today` (`YYYY-MM-DD`) is after its last day.
    pub fn is_expired(&self, today: &str) -> bool {
        today > self.expires.as_str()
    }
}

/// A loaded policy. [`Policy::default`] is the built-in behaviour.
#[derive(Debug, Clone, Default)]
pub struct Policy {
    /// The file it came from (`None` for the built-in default).
    pub path: Option<PathBuf>,
    /// Which verdict makes `diff` exit non-zero.
    pub fail_on: FailOn,
    paths: Vec<(PathClass, GlobSet)>,
    packages: Vec<(PackageClass, GlobSet)>,
    env: Vec<(EnvClass, GlobSet)>,
    /// Accepted changes.
    pub accept: Vec<Acceptance>,
    /// The day acceptances are checked against (`YYYY-MM-DD`); today unless set.
    pub today: Option<String>,
    /// The training job's scope (`[scope]`), when declared.
    pub scope: Option<crate::collect::scope::Request>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields, rename_all = "kebab-case")]
struct PolicyFile {
    #[serde(default)]
    fail_on: Option<FailOn>,
    #[serde(default)]
    paths: PathsFile,
    #[serde(default)]
    packages: PackagesFile,
    #[serde(default)]
    env: EnvFile,
    #[serde(default)]
    accept: Vec<AcceptFile>,
    #[serde(default)]
    scope: Option<ScopeFile>,
}

#[derive(Deserialize, Default)]
#[serde(deny_unknown_fields)]
struct ScopeFile {
    #[serde(default)]
    entry: Vec<String>,
    #[serde(default)]
    lockfiles: Globs,
    #[serde(default)]
    reads: Globs,
}

type Globs = Vec<Spanned<String>>;

#[derive(Deserialize, Default)]
#[serde(deny_unknown_fields)]
struct PathsFile {
    #[serde(default)]
    code: Globs,
    #[serde(default)]
    config: Globs,
    #[serde(default)]
    data: Globs,
    #[serde(default)]
    docs: Globs,
    #[serde(default)]
    irrelevant: Globs,
    #[serde(default)]
    tests: Globs,
    #[serde(default)]
    ci: Globs,
    #[serde(default)]
    build: Globs,
    #[serde(default)]
    notebooks: Globs,
    #[serde(default)]
    metadata: Globs,
    #[serde(default)]
    dependencies: Globs,
}

#[derive(Deserialize, Default)]
#[serde(deny_unknown_fields)]
struct PackagesFile {
    #[serde(default)]
    numeric: Globs,
    #[serde(default)]
    compiled: Globs,
    #[serde(default)]
    pure: Globs,
    #[serde(default)]
    tooling: Globs,
    #[serde(default)]
    infrastructure: Globs,
}

#[derive(Deserialize, Default)]
#[serde(deny_unknown_fields)]
struct EnvFile {
    #[serde(default)]
    precision: Globs,
    #[serde(default)]
    threads: Globs,
    #[serde(default)]
    determinism: Globs,
    #[serde(default)]
    kernels: Globs,
    #[serde(default)]
    loader: Globs,
    #[serde(default)]
    collectives: Globs,
    #[serde(default)]
    devices: Globs,
    #[serde(default)]
    cache: Globs,
    #[serde(default)]
    logging: Globs,
    #[serde(default)]
    irrelevant: Globs,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct AcceptFile {
    subject: Spanned<String>,
    #[serde(default)]
    rule: Option<Spanned<String>>,
    #[serde(default)]
    old: Option<String>,
    #[serde(default)]
    new: Option<String>,
    reason: Spanned<String>,
    expires: Spanned<toml::Value>,
}

/// 1-based line of a byte offset.
fn line_of(text: &str, offset: usize) -> usize {
    text[..offset.min(text.len())].matches('\n').count() + 1
}

/// The dotted key at a line: the nearest table header above it and the key on the line.
fn key_at(text: &str, line: usize) -> Option<String> {
    let lines: Vec<&str> = text.lines().collect();
    let here = lines.get(line.checked_sub(1)?)?.trim();
    let local = if here.starts_with('[') {
        None
    } else {
        here.split_once('=').map(|(k, _)| k.trim().to_string())
    };
    let mut table: Option<String> = None;
    let mut index = 0usize;
    let mut header_of_here = None;
    for (i, l) in lines.iter().enumerate().take(line) {
        let t = l.trim();
        if let Some(name) = t.strip_prefix("[[").and_then(|s| s.split("]]").next()) {
            let name = name.trim().to_string();
            if table
                .as_deref()
                .is_some_and(|prev| prev.starts_with(&format!("{name}[")))
            {
                index += 1;
            } else {
                index = 0;
            }
            table = Some(format!("{name}[{index}]"));
            if i + 1 == line {
                header_of_here = table.clone();
            }
        } else if let Some(name) = t.strip_prefix('[').and_then(|s| s.split(']').next()) {
            table = Some(name.trim().to_string());
            if i + 1 == line {
                header_of_here = table.clone();
            }
        }
    }
    match (table, local) {
        (_, None) => header_of_here,
        (Some(t), Some(k)) => Some(format!("{t}.{k}")),
        (None, Some(k)) => Some(k),
    }
}

fn days_in_month(year: u32, month: u32) -> u32 {
    match month {
        4 | 6 | 9 | 11 => 30,
        2 if (year.is_multiple_of(4) && !year.is_multiple_of(100)) || year.is_multiple_of(400) => {
            29
        }
        2 => 28,
        _ => 31,
    }
}

/// Parses `YYYY-MM-DD` into the same text, checking the calendar.
fn parse_date(text: &str) -> Option<String> {
    let mut parts = text.trim().splitn(3, '-');
    let (y, m, d) = (parts.next()?, parts.next()?, parts.next()?);
    if y.len() != 4 || m.len() != 2 || d.len() != 2 {
        return None;
    }
    let (y, m, d): (u32, u32, u32) = (y.parse().ok()?, m.parse().ok()?, d.parse().ok()?);
    if !(1..=12).contains(&m) || d == 0 || d > days_in_month(y, m) {
        return None;
    }
    Some(format!("{y:04}-{m:02}-{d:02}"))
}

/// Today's UTC date, `YYYY-MM-DD`.
pub fn today() -> String {
    humantime::format_rfc3339_seconds(std::time::SystemTime::now()).to_string()[..10].to_string()
}

impl Policy {
    /// Parses a policy; `path` names the file in errors.
    pub fn parse(text: &str, path: &Path) -> Result<Policy, PolicyError> {
        let lines = crate::lockfile::LineIndex::new(text);
        let invalid = |offset: Option<usize>, key: Option<String>, message: String| {
            let line = offset.map(|o| line_of(text, o));
            PolicyError::Invalid {
                path: path.to_path_buf(),
                line,
                key: key.or_else(|| line.and_then(|l| key_at(text, l))),
                message,
            }
        };
        let file: PolicyFile = toml::from_str(text)
            .map_err(|e| invalid(e.span().map(|s| s.start), None, e.message().to_string()))?;
        let globs = |list: &Globs, key: &str, case_insensitive: bool| {
            let mut b = GlobSetBuilder::new();
            for g in list {
                let glob = GlobBuilder::new(g.get_ref())
                    .case_insensitive(case_insensitive)
                    .literal_separator(key.starts_with("paths."))
                    .build()
                    .map_err(|e| {
                        invalid(
                            Some(g.span().start),
                            Some(key.to_string()),
                            format!("bad glob `{}`: {}", g.get_ref(), e.kind()),
                        )
                    })?;
                b.add(glob);
            }
            b.build()
                .map_err(|e| invalid(None, Some(key.to_string()), format!("bad glob set: {e}")))
        };
        let mut policy = Policy {
            path: Some(path.to_path_buf()),
            fail_on: file.fail_on.unwrap_or_default(),
            ..Policy::default()
        };
        let p = &file.paths;
        for (class, list, key) in [
            (PathClass::Irrelevant, &p.irrelevant, "paths.irrelevant"),
            (PathClass::Docs, &p.docs, "paths.docs"),
            (PathClass::Metadata, &p.metadata, "paths.metadata"),
            (PathClass::Notebooks, &p.notebooks, "paths.notebooks"),
            (PathClass::Ci, &p.ci, "paths.ci"),
            (PathClass::Tests, &p.tests, "paths.tests"),
            (PathClass::Build, &p.build, "paths.build"),
            (
                PathClass::Dependencies,
                &p.dependencies,
                "paths.dependencies",
            ),
            (PathClass::Data, &p.data, "paths.data"),
            (PathClass::Config, &p.config, "paths.config"),
            (PathClass::Code, &p.code, "paths.code"),
        ] {
            policy.paths.push((class, globs(list, key, false)?));
        }
        let k = &file.packages;
        for (class, list, key) in [
            (PackageClass::Tooling, &k.tooling, "packages.tooling"),
            (
                PackageClass::Infrastructure,
                &k.infrastructure,
                "packages.infrastructure",
            ),
            (PackageClass::Numeric, &k.numeric, "packages.numeric"),
            (PackageClass::Compiled, &k.compiled, "packages.compiled"),
            (PackageClass::Pure, &k.pure, "packages.pure"),
        ] {
            policy.packages.push((class, globs(list, key, true)?));
        }
        let e = &file.env;
        for (class, list, key) in [
            (EnvClass::Irrelevant, &e.irrelevant, "env.irrelevant"),
            (EnvClass::Precision, &e.precision, "env.precision"),
            (EnvClass::Determinism, &e.determinism, "env.determinism"),
            (EnvClass::Threads, &e.threads, "env.threads"),
            (EnvClass::Kernels, &e.kernels, "env.kernels"),
            (EnvClass::Loader, &e.loader, "env.loader"),
            (EnvClass::Collectives, &e.collectives, "env.collectives"),
            (EnvClass::Devices, &e.devices, "env.devices"),
            (EnvClass::Cache, &e.cache, "env.cache"),
            (EnvClass::Logging, &e.logging, "env.logging"),
        ] {
            policy.env.push((class, globs(list, key, false)?));
        }
        if let Some(scope) = &file.scope {
            // The globs are checked here so that a bad one is an error naming its line.
            globs(&scope.lockfiles, "scope.lockfiles", false)?;
            globs(&scope.reads, "scope.reads", false)?;
            if scope.entry.is_empty() {
                return Err(invalid(
                    None,
                    Some("scope.entry".into()),
                    "a scope needs at least one entry point".into(),
                ));
            }
            policy.scope = Some(crate::collect::scope::Request {
                entry: scope.entry.clone(),
                lockfiles: scope
                    .lockfiles
                    .iter()
                    .map(|g| g.get_ref().clone())
                    .collect(),
                reads: scope.reads.iter().map(|g| g.get_ref().clone()).collect(),
            });
        }
        for (i, a) in file.accept.iter().enumerate() {
            let key = |k: &str| Some(format!("accept[{i}].{k}"));
            let matcher = Glob::new(a.subject.get_ref())
                .map_err(|e| {
                    invalid(
                        Some(a.subject.span().start),
                        key("subject"),
                        format!("bad glob `{}`: {}", a.subject.get_ref(), e.kind()),
                    )
                })?
                .compile_matcher();
            if a.reason.get_ref().trim().is_empty() {
                return Err(invalid(
                    Some(a.reason.span().start),
                    key("reason"),
                    "an acceptance needs a reason".into(),
                ));
            }
            let date_text = match a.expires.get_ref() {
                toml::Value::Datetime(d) if d.time.is_none() && d.offset.is_none() => d.to_string(),
                toml::Value::String(s) => s.clone(),
                other => other.to_string(),
            };
            let expires = parse_date(&date_text).ok_or_else(|| {
                invalid(
                    Some(a.expires.span().start),
                    key("expires"),
                    format!("`{date_text}` is not a date (expected YYYY-MM-DD)"),
                )
            })?;
            policy.accept.push(Acceptance {
                subject: a.subject.get_ref().clone(),
                rule: a.rule.as_ref().map(|r| r.get_ref().clone()),
                rule_line: a.rule.as_ref().map(|r| lines.line(r.span().start)),
                old: a.old.clone(),
                new: a.new.clone(),
                reason: a.reason.get_ref().trim().to_string(),
                expires,
                line: lines.line(a.subject.span().start),
                matcher,
            });
        }
        Ok(policy)
    }

    /// Reads and parses a policy file.
    pub fn load(path: &Path) -> Result<Policy, PolicyError> {
        let bytes = crate::limits::read_named_file(path).map_err(|source| PolicyError::Read {
            path: path.to_path_buf(),
            source,
        })?;
        Policy::parse_bytes(bytes, path)
    }

    /// Parses a policy file's bytes (UTF-8).
    fn parse_bytes(bytes: Vec<u8>, path: &Path) -> Result<Policy, PolicyError> {
        let text = String::from_utf8(bytes).map_err(|_| PolicyError::Read {
            path: path.to_path_buf(),
            source: std::io::Error::new(std::io::ErrorKind::InvalidData, "is not valid UTF-8"),
        })?;
        Policy::parse(&text, path)
    }

    /// The policy for a comparison: `explicit` when given, else `runprint.toml` at the root of
    /// the git repository containing `dir` (or in `dir` itself outside a repository), else the
    /// built-in default.
    pub fn discover(explicit: Option<&Path>, dir: &Path) -> Result<Policy, PolicyError> {
        if let Some(p) = explicit {
            return Policy::load(p);
        }
        let root = crate::collect::git::work_tree_root(dir).unwrap_or_else(|| dir.to_path_buf());
        let candidate = root.join(POLICY_FILE);
        if candidate.is_file() {
            Policy::load(&candidate)
        } else {
            Ok(Policy::default())
        }
    }

    /// The day acceptances are checked against.
    pub fn today(&self) -> String {
        self.today.clone().unwrap_or_else(today)
    }

    /// The exit code for a verdict under `fail-on`: the fixed code (0, 3, 4) when the verdict
    /// reaches the threshold, else 0.
    pub fn exit_code(&self, verdict: Impact) -> u8 {
        let fails = match self.fail_on {
            FailOn::Verify => verdict >= Impact::Verify,
            FailOn::Retrain => verdict >= Impact::Retrain,
            FailOn::Never => false,
        };
        if fails {
            verdict.exit_code()
        } else {
            0
        }
    }

    /// The class the policy gives a path, if any.
    pub fn path_class(&self, path: &str) -> Option<PathClass> {
        self.paths
            .iter()
            .find(|(_, set)| set.is_match(path))
            .map(|(c, _)| *c)
    }

    /// The class the policy gives a package, if any.
    pub fn package_class(&self, name: &str) -> Option<PackageClass> {
        self.packages
            .iter()
            .find(|(_, set)| set.is_match(name))
            .map(|(c, _)| *c)
    }

    /// The class the policy gives an environment variable, if any.
    pub fn env_class(&self, name: &str) -> Option<EnvClass> {
        self.env
            .iter()
            .find(|(_, set)| set.is_match(name))
            .map(|(c, _)| *c)
    }

    /// A one-line summary for `runprint policy check`.
    pub fn summary(&self) -> String {
        fn count<T>(v: &[(T, GlobSet)]) -> usize {
            v.iter().map(|(_, s)| s.len()).sum()
        }
        let today = self.today();
        let expired = self.accept.iter().filter(|a| a.is_expired(&today)).count();
        format!(
            "fail-on {}, {} path glob(s), {} package glob(s), {} variable glob(s), {} acceptance(s) ({} expired)",
            match self.fail_on {
                FailOn::Verify => "verify",
                FailOn::Retrain => "retrain",
                FailOn::Never => "never",
            },
            count(&self.paths),
            count(&self.packages),
            count(&self.env),
            self.accept.len(),
            expired
        )
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn err(text: &str) -> String {
        Policy::parse(text, Path::new("runprint.toml"))
            .unwrap_err()
            .to_string()
    }

    #[test]
    fn a_full_policy_parses() {
        let p = Policy::parse(
            "fail-on = \"retrain\"\n[paths]\nirrelevant = [\"notebooks/**\"]\ncode = [\"**/*.py\"]\n\
             [packages]\nnumeric = [\"Kelp-*\"]\n[env]\nprecision = [\"KELP_MODE\"]\n\
             [[accept]]\nsubject = \"env OMP_*\"\nreason = \"checked\"\nexpires = 2999-12-31\n",
            Path::new("runprint.toml"),
        )
        .unwrap();
        assert_eq!(p.fail_on, FailOn::Retrain);
        assert_eq!(p.path_class("notebooks/a.py"), Some(PathClass::Irrelevant));
        assert_eq!(p.path_class("src/a.py"), Some(PathClass::Code));
        assert_eq!(p.path_class("README.md"), None);
        assert_eq!(p.package_class("kelp-kernels"), Some(PackageClass::Numeric));
        assert_eq!(p.env_class("KELP_MODE"), Some(EnvClass::Precision));
        assert_eq!(p.accept[0].expires, "2999-12-31");
        assert_eq!(p.accept[0].line, 10);
        assert!(p.accept[0].matches("env OMP_NUM_THREADS", "env.threads", None, None));
        assert_eq!(p.exit_code(Impact::Verify), 0);
        assert_eq!(p.exit_code(Impact::Retrain), 4);
    }

    #[test]
    fn errors_name_file_line_and_key() {
        let e = err("[paths]\ncode = [\"src/**\"]\nscripts = [\"x\"]\n");
        assert!(e.contains("runprint.toml") && e.contains("line 3"), "{e}");
        assert!(
            e.contains("paths.scripts") && e.contains("unknown field"),
            "{e}"
        );
        let e = err("fail-on = 3\n");
        assert!(e.contains("line 1") && e.contains("fail-on"), "{e}");
        let e = err("[paths]\ncode = [\"src/[\"]\n");
        assert!(
            e.contains("line 2") && e.contains("paths.code") && e.contains("bad glob"),
            "{e}"
        );
        let e = err("[[accept]]\nsubject = \"x\"\nreason = \"r\"\nexpires = \"2027-02-30\"\n");
        assert!(
            e.contains("line 4") && e.contains("accept[0].expires"),
            "{e}"
        );
        let e = err("fail-on = \"sometimes\"\n");
        assert!(e.contains("line 1") && e.contains("fail-on"), "{e}");
    }

    #[test]
    fn calendar() {
        assert_eq!(parse_date("2024-02-29").as_deref(), Some("2024-02-29"));
        assert_eq!(parse_date("2023-02-29"), None);
        assert_eq!(parse_date("2023-13-01"), None);
        assert_eq!(parse_date("23-01-01"), None);
        assert_eq!(today().len(), 10);
    }
}
