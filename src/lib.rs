//! runprint records, in one small manifest per training run, everything outside the training
//! code that can change its results, and compares two manifests to say whether a difference
//! needs a retrain (`retrain`), a rerun and comparison (`verify`), or nothing (`none`).
//!
//! Layout (see `DEVELOPERS.md`):
//! * [`manifest`]: the versioned, typed manifest and its fingerprint;
//! * [`collect`]: one module per source of facts, assembled by [`collect::stamp`];
//! * [`lockfile`]: pure parsers from lockfile text to packages;
//! * [`diff`]: the comparison and its rule table ([`diff::rules`]);
//! * [`policy`]: a repository's `runprint.toml`, adjusting the rules;
//! * [`report`]: rendering for people, programs and pull requests;
//! * [`cli`]: the command line; the `runprint` binary only calls [`cli::main`].
//!
//! ```
//! use runprint::manifest::{Content, Manifest, RunInfo};
//! let a = Manifest::new(RunInfo::default(), Content::default());
//! let b = Manifest::new(RunInfo { label: Some("rerun".into()), ..RunInfo::default() }, Content::default());
//! // The label is not part of the fingerprint.
//! assert_eq!(a.fingerprint, b.fingerprint);
//! let report = runprint::diff::compare("a", &a, "b", &b, None);
//! assert_eq!(report.verdict, runprint::diff::Impact::None);
//! ```

#![warn(missing_docs)]

pub mod atomic;
pub mod cache;
pub mod check;
pub mod child;
pub mod classes;
pub mod cli;
pub mod collect;
pub mod diff;
pub mod envvars;
pub mod error;
pub mod escape;
pub mod fleet;
pub mod hashing;
pub mod imports;
pub mod limits;
pub mod lockfile;
pub mod manifest;
pub mod policy;
pub mod privacy;
pub mod recreate;
pub mod redact;
pub mod report;
pub mod stack;
pub mod stdlib;
pub mod toml_events;
pub mod version;
