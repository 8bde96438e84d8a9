//! The training job's scope as the comparison uses it: the union of both manifests'
//! `[scope]` sections, and what it says about a file, a package or a lockfile.

use std::collections::BTreeSet;

use crate::manifest::Content;

/// The training job's scope as both manifests record it: the union of both sides, so that a
/// file or package in either is in scope.
#[derive(Debug, Default)]
pub struct ScopeView {
    /// Both closures are complete: files outside them can be judged out of scope.
    pub files_known: bool,
    /// Repository files of either closure.
    pub files: BTreeSet<String>,
    /// Globs of configuration and data the job reads (either side).
    pub reads: Option<globset::GlobSet>,
    /// Packages either side can load, when both sides know them.
    pub packages: Option<BTreeSet<String>>,
    /// Lockfiles in scope on either side.
    pub lockfiles: BTreeSet<String>,
    /// The Python (`pypi`, `conda`) lockfiles of either side: the package list, which follows
    /// Python imports, judges only their packages.
    pub python_lockfiles: BTreeSet<String>,
    /// Why parts of the scope could not be used, for the report's notes.
    pub notes: Vec<String>,
}

impl ScopeView {
    /// The view of two manifests' scopes; `None` unless both recorded one.
    pub fn of(old: &Content, new: &Content) -> Option<ScopeView> {
        let (a, b) = (old.scope.as_ref()?, new.scope.as_ref()?);
        let mut v = ScopeView {
            files_known: a.complete && b.complete,
            ..ScopeView::default()
        };
        v.files
            .extend(a.files.keys().chain(b.files.keys()).cloned());
        v.lockfiles
            .extend(a.lockfiles.iter().chain(&b.lockfiles).cloned());
        v.python_lockfiles.extend(
            old.lockfiles
                .iter()
                .chain(&new.lockfiles)
                .filter(|l| matches!(l.ecosystem.as_str(), "pypi" | "conda"))
                .map(|l| l.path.clone()),
        );
        let globs: Vec<&String> = a.reads.iter().chain(&b.reads).collect();
        if !globs.is_empty() {
            let mut set = globset::GlobSetBuilder::new();
            for g in globs {
                if let Ok(glob) = globset::GlobBuilder::new(g).literal_separator(true).build() {
                    set.add(glob);
                }
            }
            v.reads = set.build().ok();
        }
        v.packages = match (&a.packages, &b.packages) {
            (Some(x), Some(y)) => Some(x.iter().chain(y).map(|p| p.to_ascii_lowercase()).collect()),
            _ => None,
        };
        if !v.files_known {
            v.notes.push("the training job's import closure is incomplete on at least one side, so changed files are judged without it (see `[scope] notes`)".into());
        }
        if v.packages.is_none() {
            v.notes.push("the packages the training job can load are not known on both sides, so every package is judged (see `[scope] notes`)".into());
        }
        Some(v)
    }

    /// True when the package cannot be loaded by the job.
    pub fn excludes_package(&self, name: &str) -> bool {
        let n = crate::lockfile::requirements::normalize_name(name);
        self.packages.as_ref().is_some_and(|p| !p.contains(&n))
    }

    /// True when the lockfile is not one the job installs from.
    pub fn excludes_lockfile(&self, path: &str) -> bool {
        !self.lockfiles.contains(path)
    }
}
