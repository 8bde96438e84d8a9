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

/// Runs every collector and builds the manifest. Failures are recorded in `run.warnings`.
pub fn stamp(opts: &StampOptions) -> Manifest {
    let mut warnings = Vec::new();
    let mut content = Content::default();

    let mut root = opts.repo.clone();
    match git::collect(&opts.repo, opts.private) {
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
