//! Collectors: one module per source of facts. [`stamp`] runs them all and assembles a
//! [`Manifest`]. A collector that fails adds a warning and leaves its section empty; stamping
//! itself never fails, so it can never break the training run it records.
//!
//! To add a collector: write a module with `collect(...) -> Result<Section, String>` (or
//! returning the section and pushing warnings), add its section to
//! [`crate::manifest::Content`], call it here, and teach [`crate::diff`] to compare it.

pub mod cpu;
pub mod data;
pub mod env;
pub mod git;
pub mod lockfiles;
pub mod system;

use std::collections::BTreeMap;
use std::path::PathBuf;

use crate::manifest::{Content, Manifest, RunInfo};
use crate::redact::scrub_secrets;

/// What to stamp and how.
#[derive(Debug, Clone)]
pub struct StampOptions {
    /// A folder inside the checkout to stamp.
    pub repo: PathBuf,
    /// Free text stored in `[run]`.
    pub label: Option<String>,
    /// Leave out host name and remote URL, and hash values holding paths.
    pub private: bool,
    /// The environment to read variables from (normally the process's own).
    pub env: BTreeMap<String, String>,
    /// Lockfiles to read besides those found in the repository.
    pub extra_lockfiles: Vec<PathBuf>,
    /// Skip lockfiles altogether.
    pub no_lockfiles: bool,
    /// Declared data inputs and how to digest them.
    pub data: data::DataOptions,
}

impl StampOptions {
    /// Options for a folder, reading this process's environment.
    pub fn new(repo: impl Into<PathBuf>) -> Self {
        StampOptions {
            repo: repo.into(),
            label: None,
            private: false,
            env: std::env::vars_os()
                .map(|(k, v)| {
                    (
                        k.to_string_lossy().into_owned(),
                        v.to_string_lossy().into_owned(),
                    )
                })
                .collect(),
            extra_lockfiles: Vec::new(),
            no_lockfiles: false,
            data: data::DataOptions::default(),
        }
    }
}

/// The environment variable that sets, in seconds, how long the git collector may take.
pub const GIT_TIMEOUT_VAR: &str = "RUNPRINT_GIT_TIMEOUT_SECS";

/// Default for [`GIT_TIMEOUT_VAR`]: far longer than the status of a large repository takes.
pub const DEFAULT_GIT_TIMEOUT_SECS: u64 = 120;

/// Runs the git collector on a watchdog thread. libgit2 can loop forever on a damaged
/// repository (a truncated loose object makes its zlib reader spin, see
/// `tests/fs_traps.rs`), and a stamp must never hang the job it records: after the timeout the
/// git section is left empty with a warning, and the stuck thread ends with the process.
fn collect_git_with_timeout(opts: &StampOptions) -> Result<git::GitFacts, String> {
    let secs = opts
        .env
        .get(GIT_TIMEOUT_VAR)
        .and_then(|v| v.trim().parse::<u64>().ok())
        .filter(|&s| s > 0)
        .unwrap_or(DEFAULT_GIT_TIMEOUT_SECS);
    let (tx, rx) = std::sync::mpsc::channel();
    let (repo, private) = (opts.repo.clone(), opts.private);
    let spawned = std::thread::Builder::new()
        .name("runprint-git".into())
        .spawn(move || {
            let _ = tx.send(git::collect(&repo, private));
        });
    if spawned.is_err() {
        return git::collect(&opts.repo, opts.private);
    }
    rx.recv_timeout(std::time::Duration::from_secs(secs))
        .unwrap_or_else(|_| {
            Err(format!(
                "git: no answer from the repository at `{}` within {secs} s (a damaged object \
                 can make the git library loop; `git fsck` checks the repository); git facts \
                 not recorded",
                opts.repo.display()
            ))
        })
}

/// Runs every collector and builds the manifest. Failures are recorded in `run.warnings`.
pub fn stamp(opts: &StampOptions) -> Manifest {
    let mut warnings = Vec::new();
    let mut content = Content::default();

    let mut root = opts.repo.clone();
    match collect_git_with_timeout(opts) {
        Ok(facts) => {
            content.git = facts.info;
            if let Some(w) = facts.workdir {
                root = w;
            }
        }
        Err(e) => warnings.push(e),
    }
    content.system = system::collect();
    match cpu::collect() {
        Ok(c) => content.cpu = c,
        Err(e) => warnings.push(format!("cpu: {e}")),
    }
    content.env = env::collect(&opts.env, opts.private);
    if !opts.no_lockfiles {
        content.lockfiles = lockfiles::collect(&root, &opts.extra_lockfiles, &mut warnings);
    }

    content.data = data::collect(&opts.data, &root, opts.private, &mut warnings);
    if opts.private {
        let user = ["USER", "LOGNAME", "USERNAME"]
            .iter()
            .find_map(|k| opts.env.get(*k).filter(|v| !v.is_empty()));
        crate::privacy::apply(&mut content, &mut warnings, user.map(String::as_str));
    }

    let run = RunInfo {
        tool_version: env!("CARGO_PKG_VERSION").to_string(),
        created: humantime::format_rfc3339_seconds(std::time::SystemTime::now()).to_string(),
        label: opts.label.clone(),
        hostname: if opts.private {
            None
        } else {
            system::hostname()
        },
        warnings: warnings.iter().map(|w| scrub_secrets(w)).collect(),
    };
    Manifest::new(run, content)
}
