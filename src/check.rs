//! `runprint check`: does anything that changed since a model's baseline manifest require a
//! retrain? Two modes, both ending in the ordinary [`crate::diff::compare`] so that verdicts,
//! reasons and exit codes are exactly those of `diff`:
//!
//! * [`against_current`]: the baseline against a fresh stamp of this checkout and machine
//!   (a scheduled job);
//! * [`against_revision`]: the baseline against the repository as it is at a git revision, read
//!   from the object database without a checkout (a dependency-bump pull request). Only what a
//!   revision holds is compared: the commit (with documentation-only commits classified as
//!   `none`), submodule commits and every lockfile. The machine sections are taken from the
//!   baseline, so they never differ, and the report says so.

use std::path::Path;

use crate::collect::at_rev::{self, CommitPresence, RevError};
use crate::diff::{compare_with, Report};
use crate::manifest::{Lockfile, Manifest, RunInfo};
use crate::policy::Policy;

/// The side name used for a fresh stamp that is not saved.
pub const CURRENT: &str = "(current environment)";

/// The files changed between the commits of two manifests, listed in the git repository that
/// contains `repo` (default: the current folder); `None` when the commits are the same, either
/// is missing, or the repository does not hold both. This is the comparison's only look into
/// git, kept out of [`crate::diff`] so that the comparison stays pure.
pub fn commit_files(
    repo: Option<&Path>,
    old: &Manifest,
    new: &Manifest,
) -> Option<Vec<crate::diff::FileStat>> {
    let (a, b) = (
        old.content.git.commit.as_ref()?,
        new.content.git.commit.as_ref()?,
    );
    if a == b {
        return None;
    }
    let cwd = std::env::current_dir().ok();
    let dir = repo.or(cwd.as_deref())?;
    crate::collect::git::diff_stats_between(dir, a, b)
}

/// [`compare_with`] with the changed files listed in the repository that contains `repo`
/// (default: the current folder).
pub fn compare_in_repo(
    old_path: &str,
    old: &Manifest,
    new_path: &str,
    new: &Manifest,
    repo: Option<&Path>,
    policy: &Policy,
) -> Report {
    let files = commit_files(repo, old, new);
    compare_with(old_path, old, new_path, new, files.as_deref(), policy)
}

/// Compares a baseline with a manifest just stamped; `repo` is the stamped checkout, used to
/// list the files changed between the two commits.
pub fn against_current(
    baseline_path: &str,
    baseline: &Manifest,
    current_name: &str,
    current: &Manifest,
    repo: &Path,
    policy: &Policy,
) -> Report {
    compare_in_repo(
        baseline_path,
        baseline,
        current_name,
        current,
        Some(repo),
        policy,
    )
}

/// Compares a baseline with revision `rev` of the repository containing `repo`.
pub fn against_revision(
    baseline_path: &str,
    baseline: &Manifest,
    repo: &Path,
    rev: &str,
    policy: &Policy,
) -> Result<Report, RevError> {
    let git_repo = at_rev::open(repo)?;
    let facts = at_rev::read(&git_repo, rev)?;
    let mut notes = vec![format!(
        "compared with revision `{rev}` as stored in git, without a checkout: only the commit, submodules and lockfiles are compared; the machine sections (system, cpu, env, data and any other facts of a machine) are not compared in this mode"
    )];
    let short = |c: &str| c.chars().take(12).collect::<String>();

    // Start from the baseline so that every section a revision cannot hold compares equal,
    // including sections added by later versions of the manifest.
    let mut content = baseline.content.clone();
    let base_git = &baseline.content.git;
    match &base_git.commit {
        None => notes.push(
            "the baseline records no commit (it was stamped outside a git repository or before the first commit), so the code is not compared; lockfiles only".into(),
        ),
        Some(commit) => match at_rev::commit_presence(&git_repo, commit) {
            CommitPresence::Present => {
                content.git = facts.git.clone();
                // Where the repository was cloned from is not a fact of a revision.
                content.git.remote = base_git.remote.clone();
            }
            CommitPresence::MissingShallow => notes.push(format!(
                "the baseline commit `{}` is not in this shallow clone, so the code changed since it cannot be listed; lockfiles only (fetch more history, e.g. `git fetch --unshallow`, to compare the code)",
                short(commit)
            )),
            CommitPresence::Missing => notes.push(format!(
                "the baseline commit `{}` is not in this repository, so the code changed since it cannot be listed; lockfiles only",
                short(commit)
            )),
        },
    }

    // `--repo` naming a folder of the repository: its lockfiles only, as a stamp reads them.
    let mut rev_lockfiles = facts.lockfiles;
    if let Some(folder) = git_repo
        .workdir()
        .and_then(|root| crate::collect::lockfiles::folder_within(repo, root))
    {
        rev_lockfiles.retain(|l| l.path.starts_with(&folder));
        notes.push(format!(
            "lockfiles under `{folder}` only (--repo names a folder of the repository)"
        ));
    }
    content.lockfiles = revision_lockfiles(&baseline.content.lockfiles, rev_lockfiles);
    if baseline
        .content
        .lockfiles
        .iter()
        .any(|l| l.packages.iter().any(|p| !p.features.is_empty()))
    {
        notes.push("Cargo's enabled features are not read at a revision (that needs `cargo metadata` on a checkout): the baseline's features are kept for unchanged packages and features are not compared".into());
    }
    for w in &facts.warnings {
        notes.push(format!("at revision `{rev}`: {w}"));
    }

    let run = RunInfo {
        tool_version: env!("CARGO_PKG_VERSION").to_string(),
        created: facts.committed.clone(),
        label: Some(format!("revision {rev}")),
        hostname: baseline.run.hostname.clone(),
        warnings: facts.warnings,
    };
    let new = Manifest::new(run, content);
    let commit = facts.git.commit.as_deref().unwrap_or_default();
    let workdir = git_repo
        .workdir()
        .map(Path::to_path_buf)
        .unwrap_or_else(|| repo.to_path_buf());
    let mut report = compare_in_repo(
        baseline_path,
        baseline,
        &format!("revision {rev} ({})", short(commit)),
        &new,
        Some(&workdir),
        policy,
    );
    // Time, label and host of a revision are not facts of a run.
    report.changes.retain(|c| c.section != "run");
    report.notes.extend(notes);
    Ok(report)
}

/// The lockfiles of a revision, plus the baseline's lockfiles that lie outside the repository
/// (named with `stamp --lockfile`, which no revision holds). Cargo packages that are unchanged
/// keep the baseline's features, which a revision cannot tell.
fn revision_lockfiles(baseline: &[Lockfile], mut at_rev: Vec<Lockfile>) -> Vec<Lockfile> {
    for lock in &mut at_rev {
        let Some(base) = baseline.iter().find(|b| b.path == lock.path) else {
            continue;
        };
        for p in &mut lock.packages {
            if let Some(bp) = base
                .packages
                .iter()
                .find(|bp| bp.name == p.name && bp.version == p.version && bp.source == p.source)
            {
                p.features = bp.features.clone();
            }
        }
    }
    for base in baseline {
        let outside = base.path.starts_with('/') || base.path.starts_with("../");
        if outside && !at_rev.iter().any(|l| l.path == base.path) {
            at_rev.push(base.clone());
        }
    }
    at_rev.sort_by(|a, b| a.path.cmp(&b.path));
    at_rev
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::manifest::Package;

    fn lock(path: &str, features: &[&str]) -> Lockfile {
        Lockfile {
            packages_omitted: None,
            path: path.into(),
            ecosystem: "cargo".into(),
            sha256: "x".into(),
            packages: vec![Package {
                name: "ndarray".into(),
                version: "0.16.1".into(),
                features: features.iter().map(|f| f.to_string()).collect(),
                ..Package::default()
            }],
            ..Lockfile::default()
        }
    }

    #[test]
    fn features_carry_over_and_outside_lockfiles_stay() {
        let baseline = vec![
            lock("Cargo.lock", &["std"]),
            lock("/opt/req/Cargo.lock", &[]),
        ];
        let merged = revision_lockfiles(&baseline, vec![lock("Cargo.lock", &[])]);
        assert_eq!(merged.len(), 2);
        assert_eq!(merged[0].path, "/opt/req/Cargo.lock");
        assert_eq!(merged[1].packages[0].features, vec!["std"]);
    }
}
