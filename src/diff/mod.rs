//! Comparing two manifests: every difference becomes a [`Change`] with an [`Impact`] and a
//! reason; the [`Report`]'s verdict is the highest impact found.
//!
//! The comparison is pure apart from one optional look into git ([`git::changed_between`]) to
//! list the files changed between two commits, so that documentation-only commits do not ask
//! for a retrain.

pub mod rules;
pub mod stack;

use std::collections::{BTreeMap, BTreeSet};
use std::path::Path;

use serde::{Deserialize, Serialize};

use crate::collect::git;
use crate::manifest::{Content, DataInput, Lockfile, Manifest, Package};
use crate::version::{self, VersionChange};

/// How much a change matters, in increasing order.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Impact {
    /// No effect on results is expected.
    None,
    /// Results may shift slightly: rerun and compare metrics.
    Verify,
    /// Results are expected to change: retrain.
    Retrain,
}

impl Impact {
    /// The verdict word.
    pub fn as_str(self) -> &'static str {
        match self {
            Impact::None => "none",
            Impact::Verify => "verify",
            Impact::Retrain => "retrain",
        }
    }

    /// The documented exit code for a verdict: 0 none, 3 verify, 4 retrain.
    pub fn exit_code(self) -> u8 {
        match self {
            Impact::None => 0,
            Impact::Verify => 3,
            Impact::Retrain => 4,
        }
    }
}

impl std::fmt::Display for Impact {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.as_str())
    }
}

/// One difference between two manifests.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Change {
    /// How much it matters.
    pub impact: Impact,
    /// What changed, e.g. `requirements.txt: numpy` or `env OMP_NUM_THREADS`.
    pub subject: String,
    /// Why it has this impact, in one sentence.
    pub reason: String,
    /// Manifest section: `git`, `lockfiles`, `env`, `cpu`, `system`.
    pub section: String,
    /// The old value, where there is one.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub old: Option<String>,
    /// The new value, where there is one.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub new: Option<String>,
}

/// One side of a comparison, for the report's header.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Side {
    /// The manifest's path as given.
    pub path: String,
    /// Its stored fingerprint.
    pub fingerprint: String,
    /// Its label, if any.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub label: Option<String>,
    /// When it was stamped.
    pub created: String,
    /// True when the content no longer matches the stored fingerprint.
    pub modified: bool,
}

impl Side {
    /// Describes a loaded manifest.
    pub fn of(path: &str, m: &Manifest) -> Side {
        Side {
            path: path.to_string(),
            fingerprint: m.fingerprint.clone(),
            label: m.run.label.clone(),
            created: m.run.created.clone(),
            modified: m.is_modified(),
        }
    }
}

/// The result of a comparison.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Report {
    /// The highest impact found (`none` when nothing differs).
    pub verdict: Impact,
    /// Changes, most important first.
    pub changes: Vec<Change>,
    /// The baseline.
    pub old: Side,
    /// The manifest compared with it.
    pub new: Side,
    /// Remarks about the comparison itself (edited manifests, missing commits).
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub notes: Vec<String>,
    /// Compact diffs of changed package lists, one per lockfile (filled on request, see
    /// [`package_list_diffs`]).
    #[serde(skip_serializing_if = "Vec::is_empty", default)]
    pub details: Vec<Detail>,
}

/// A compact textual diff of one lockfile's package list.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Detail {
    /// The lockfile's path.
    pub subject: String,
    /// Unified diff of `name version` lines, with three lines of context.
    pub diff: String,
}

/// For every lockfile present in both manifests whose packages differ, a unified diff of its
/// package list (the `similar` crate), for `--verbose` reports.
pub fn package_list_diffs(old: &Manifest, new: &Manifest) -> Vec<Detail> {
    let lines = |l: &Lockfile| -> String {
        l.packages
            .iter()
            .map(|p| format!("{} {}\n", p.name, p.version))
            .collect()
    };
    let mut out = Vec::new();
    for a in &old.content.lockfiles {
        let Some(b) = new.content.lockfiles.iter().find(|b| b.path == a.path) else {
            continue;
        };
        let (ta, tb) = (lines(a), lines(b));
        if ta == tb {
            continue;
        }
        let diff = similar::TextDiff::from_lines(&ta, &tb)
            .unified_diff()
            .context_radius(3)
            .header(&format!("old/{}", a.path), &format!("new/{}", b.path))
            .to_string();
        out.push(Detail {
            subject: a.path.clone(),
            diff,
        });
    }
    out
}

/// Compares two manifests. `repo` is a folder inside a git repository that may hold both
/// commits (used to list the files changed between them).
pub fn compare(
    old_path: &str,
    old: &Manifest,
    new_path: &str,
    new: &Manifest,
    repo: Option<&Path>,
) -> Report {
    let mut notes = Vec::new();
    let (old_side, new_side) = (Side::of(old_path, old), Side::of(new_path, new));
    for side in [&old_side, &new_side] {
        if side.modified {
            notes.push(format!(
                "`{}` was modified after stamping: its stored fingerprint does not match its content",
                side.path
            ));
        }
    }
    let mut changes = Vec::new();
    compare_git(&old.content, &new.content, repo, &mut changes, &mut notes);
    compare_lockfiles(&old.content.lockfiles, &new.content.lockfiles, &mut changes);
    compare_data(&old.content, &new.content, &mut changes);
    compare_env(&old.content, &new.content, &mut changes);
    compare_cpu(&old.content, &new.content, &mut changes);
    compare_system(&old.content, &new.content, &mut changes);
    compare_run(old, new, &mut changes);
    stack::compare(&old.content, &new.content, &mut changes);
    sort_changes(&mut changes);
    Report {
        verdict: changes
            .iter()
            .map(|c| c.impact)
            .max()
            .unwrap_or(Impact::None),
        changes,
        old: old_side,
        new: new_side,
        notes,
        details: Vec::new(),
    }
}

/// Orders changes most important first; within an impact, by section then subject.
pub fn sort_changes(changes: &mut [Change]) {
    let rank = |s: &str| match s {
        "git" => 0,
        "data" => 1,
        "lockfiles" => 2,
        "env" => 3,
        "cpu" => 4,
        "system" => 5,
        _ => 6,
    };
    changes.sort_by(|a, b| {
        b.impact
            .cmp(&a.impact)
            .then_with(|| rank(&a.section).cmp(&rank(&b.section)))
            .then_with(|| a.subject.cmp(&b.subject))
    });
}

fn change(
    impact: Impact,
    section: &str,
    subject: impl Into<String>,
    reason: impl Into<String>,
    old: Option<String>,
    new: Option<String>,
) -> Change {
    Change {
        impact,
        subject: subject.into(),
        reason: reason.into(),
        section: section.to_string(),
        old,
        new,
    }
}

fn short(commit: &Option<String>) -> Option<String> {
    commit.as_ref().map(|c| c.chars().take(12).collect())
}

/// Lists up to five paths.
fn some_paths(paths: &[String]) -> String {
    let mut s = paths
        .iter()
        .take(5)
        .map(String::as_str)
        .collect::<Vec<_>>()
        .join(", ");
    if paths.len() > 5 {
        s.push_str(&format!(" and {} more", paths.len() - 5));
    }
    s
}

/// Impact of a set of changed files: documentation only, or code.
fn classify_paths(paths: &[String], what: &str) -> (Impact, String) {
    let code: Vec<String> = paths
        .iter()
        .filter(|p| !rules::is_documentation_path(p))
        .cloned()
        .collect();
    if code.is_empty() && !paths.is_empty() {
        (
            Impact::None,
            format!(
                "{what} only documentation ({}), which training does not read",
                some_paths(paths)
            ),
        )
    } else if code.is_empty() {
        (Impact::None, format!("{what} no file contents"))
    } else {
        (
            Impact::Retrain,
            format!("{what} {} file(s) of code or configuration ({}), which can change what training computes", code.len(), some_paths(&code)),
        )
    }
}

fn compare_git(
    old: &Content,
    new: &Content,
    repo: Option<&Path>,
    out: &mut Vec<Change>,
    notes: &mut Vec<String>,
) {
    let (o, n) = (&old.git, &new.git);
    if o.present != n.present {
        out.push(change(
            Impact::Verify,
            "git",
            "source control",
            "only one side was stamped inside a git repository, so the code cannot be compared",
            Some(o.present.to_string()),
            Some(n.present.to_string()),
        ));
        return;
    }
    if !o.present {
        return;
    }
    if o.commit != n.commit {
        let listed = match (&o.commit, &n.commit) {
            (Some(a), Some(b)) => {
                let cwd = std::env::current_dir().ok();
                repo.or(cwd.as_deref())
                    .and_then(|dir| git::changed_between(dir, a, b))
            }
            _ => None,
        };
        match listed {
            Some(mut paths) => {
                // Uncommitted edits on either side count too.
                paths.extend(o.changed_paths.iter().cloned());
                paths.extend(n.changed_paths.iter().cloned());
                paths.sort();
                paths.dedup();
                let (impact, reason) =
                    classify_paths(&paths, "the code changed between the two commits:");
                out.push(change(
                    impact,
                    "git",
                    "commit",
                    reason,
                    short(&o.commit),
                    short(&n.commit),
                ));
            }
            None => {
                notes.push("the files changed between the two commits could not be listed (run inside the repository or pass --repo)".into());
                out.push(change(
                    Impact::Retrain,
                    "git",
                    "commit",
                    "the commit changed and the changed files could not be listed, so it is treated as a change to training code",
                    short(&o.commit),
                    short(&n.commit),
                ));
            }
        }
    } else if o.dirty_digest != n.dirty_digest {
        let mut paths: Vec<String> = o
            .changed_paths
            .iter()
            .chain(&n.changed_paths)
            .cloned()
            .collect();
        paths.sort();
        paths.dedup();
        // A path changed identically on both sides cannot be told apart by the lists alone, so
        // all listed paths are considered.
        let (impact, reason) = classify_paths(&paths, "the uncommitted changes differ in");
        out.push(change(
            impact,
            "git",
            "uncommitted changes",
            reason,
            Some(
                o.dirty_digest
                    .as_deref()
                    .map_or("clean".into(), digest_short),
            ),
            Some(
                n.dirty_digest
                    .as_deref()
                    .map_or("clean".into(), digest_short),
            ),
        ));
    }
    if o.branch != n.branch {
        out.push(change(
            Impact::None,
            "git",
            "branch",
            "a branch name does not change the code that runs; the commit does",
            o.branch.clone(),
            n.branch.clone(),
        ));
    }
    if o.remote != n.remote {
        out.push(change(
            Impact::None,
            "git",
            "remote",
            "where the repository was cloned from does not change the code that runs",
            o.remote.clone(),
            n.remote.clone(),
        ));
    }
    let subs = |g: &crate::manifest::GitInfo| -> BTreeMap<String, Option<String>> {
        g.submodules
            .iter()
            .map(|s| (s.path.clone(), s.commit.clone()))
            .collect()
    };
    let (os, ns) = (subs(o), subs(n));
    for path in os.keys().chain(ns.keys()).collect::<BTreeSet<_>>() {
        let (a, b) = (
            os.get(path).cloned().flatten(),
            ns.get(path).cloned().flatten(),
        );
        if a != b {
            out.push(change(
                Impact::Retrain,
                "git",
                format!("submodule {path}"),
                "a submodule holds vendored code built or imported by training; its commit changed",
                short(&a),
                short(&b),
            ));
        }
    }
}

fn compare_data(old: &Content, new: &Content, out: &mut Vec<Change>) {
    let index = |c: &Content| -> BTreeMap<String, DataInput> {
        c.data.iter().map(|d| (d.path.clone(), d.clone())).collect()
    };
    let (o, n) = (index(old), index(new));
    for path in o.keys().chain(n.keys()).collect::<BTreeSet<_>>() {
        let subject = format!("data {path}");
        match (o.get(path), n.get(path)) {
            (Some(a), Some(b)) if a.sha256 != b.sha256 => {
                let detail = changed_files(a, b).map_or_else(String::new, |d| format!(" ({d})"));
                out.push(change(
                    Impact::Retrain,
                    "data",
                    subject,
                    format!("the training data changed{detail}; a model trained on different data is a different model"),
                    Some(format!("{} files, {} bytes, {}", a.files, a.size, digest_short(&a.sha256))),
                    Some(format!("{} files, {} bytes, {}", b.files, b.size, digest_short(&b.sha256))),
                ));
            }
            (Some(_), Some(_)) => {}
            (a, b) => out.push(change(
                Impact::Verify,
                "data",
                subject,
                "the data input is declared on one side only, so its content cannot be compared",
                a.map(|d| digest_short(&d.sha256)),
                b.map(|d| digest_short(&d.sha256)),
            )),
        }
    }
}

/// Names the files that differ between two listings of one folder, when both have listings.
fn changed_files(a: &DataInput, b: &DataInput) -> Option<String> {
    if a.entries.is_empty() || b.entries.is_empty() {
        return None;
    }
    let (ae, be): (BTreeMap<&str, &str>, BTreeMap<&str, &str>) = (
        a.entries
            .iter()
            .map(|e| (e.path.as_str(), e.sha256.as_str()))
            .collect(),
        b.entries
            .iter()
            .map(|e| (e.path.as_str(), e.sha256.as_str()))
            .collect(),
    );
    let mut parts = Vec::new();
    let changed: Vec<String> = ae
        .iter()
        .filter(|(p, d)| be.get(*p).is_some_and(|e| e != *d))
        .map(|(p, _)| p.to_string())
        .collect();
    let added: Vec<String> = be
        .keys()
        .filter(|p| !ae.contains_key(*p))
        .map(|p| p.to_string())
        .collect();
    let removed: Vec<String> = ae
        .keys()
        .filter(|p| !be.contains_key(*p))
        .map(|p| p.to_string())
        .collect();
    for (word, list) in [("changed", changed), ("added", added), ("removed", removed)] {
        if !list.is_empty() {
            parts.push(format!("{word}: {}", some_paths(&list)));
        }
    }
    Some(parts.join("; "))
}

fn digest_short(d: &str) -> String {
    d.strip_prefix("sha256:")
        .unwrap_or(d)
        .chars()
        .take(12)
        .collect()
}

fn compare_lockfiles(old: &[Lockfile], new: &[Lockfile], out: &mut Vec<Change>) {
    let index = |ls: &[Lockfile]| -> BTreeMap<String, usize> {
        ls.iter()
            .enumerate()
            .map(|(i, l)| (l.path.clone(), i))
            .collect()
    };
    let (oi, ni) = (index(old), index(new));
    for path in oi.keys().chain(ni.keys()).collect::<BTreeSet<_>>() {
        match (
            oi.get(path).map(|&i| &old[i]),
            ni.get(path).map(|&i| &new[i]),
        ) {
            (Some(a), Some(b)) => {
                if a.sha256 != b.sha256 || a.packages != b.packages {
                    compare_packages(path, &b.ecosystem, &a.packages, &b.packages, out);
                }
            }
            (Some(a), None) => out.push(whole_lockfile(a, false)),
            (None, Some(b)) => out.push(whole_lockfile(b, true)),
            (None, None) => {}
        }
    }
}

fn whole_lockfile(l: &Lockfile, added: bool) -> Change {
    let numeric: Vec<&str> = l
        .packages
        .iter()
        .filter(|p| rules::is_numeric_package(&p.name))
        .map(|p| p.name.as_str())
        .collect();
    let (impact, reason) = if !numeric.is_empty() {
        (
            Impact::Retrain,
            format!(
                "the lockfile was {} with {} package(s), among them numerical libraries ({})",
                if added { "added" } else { "removed" },
                l.packages.len(),
                numeric.join(", ")
            ),
        )
    } else if l.packages.is_empty() {
        (
            Impact::None,
            format!(
                "the lockfile was {} and lists no packages",
                if added { "added" } else { "removed" }
            ),
        )
    } else {
        (
            Impact::Verify,
            format!(
                "the lockfile was {} with {} package(s) that training may load",
                if added { "added" } else { "removed" },
                l.packages.len()
            ),
        )
    };
    let count = Some(format!("{} packages", l.packages.len()));
    let (old, new) = if added { (None, count) } else { (count, None) };
    change(
        impact,
        "lockfiles",
        format!("{} ({})", l.path, l.ecosystem),
        reason,
        old,
        new,
    )
}

fn versions(ps: &[&Package]) -> String {
    ps.iter()
        .map(|p| {
            if p.version.is_empty() {
                p.source.clone().unwrap_or_default()
            } else {
                p.version.clone()
            }
        })
        .collect::<Vec<_>>()
        .join(", ")
}

/// The kind of change between two sets of versions of one package (a lockfile may hold several
/// versions of one name): the highest old version against the highest new one.
fn version_kind(
    ecosystem: &str,
    old: &BTreeSet<&String>,
    new: &BTreeSet<&String>,
) -> VersionChange {
    let highest = |vs: &BTreeSet<&String>| -> Option<String> {
        vs.iter()
            .copied()
            .max_by(|x, y| version::compare(ecosystem, x, y).unwrap_or(std::cmp::Ordering::Equal))
            .cloned()
    };
    match (highest(old), highest(new)) {
        (Some(a), Some(b)) => version::classify(ecosystem, &a, &b),
        _ => VersionChange::Unknown,
    }
}

fn group_by_name(ps: &[Package]) -> BTreeMap<String, Vec<&Package>> {
    let mut m: BTreeMap<String, Vec<&Package>> = BTreeMap::new();
    for p in ps {
        m.entry(p.name.clone()).or_default().push(p);
    }
    m
}

fn compare_packages(
    path: &str,
    ecosystem: &str,
    old: &[Package],
    new: &[Package],
    out: &mut Vec<Change>,
) {
    let (og, ng) = (group_by_name(old), group_by_name(new));
    for name in og.keys().chain(ng.keys()).collect::<BTreeSet<_>>() {
        let subject = format!("{path}: {name}");
        let empty = Vec::new();
        let (a, b) = (
            og.get(name).unwrap_or(&empty),
            ng.get(name).unwrap_or(&empty),
        );
        let dev = a.iter().chain(b.iter()).all(|p| p.dev);
        if a.is_empty() || b.is_empty() {
            let what = if a.is_empty() {
                "new dependency"
            } else {
                "removed dependency"
            };
            let (impact, reason) = rules::package_impact(name, dev, what);
            let v = |ps: &Vec<&Package>| Some(versions(ps)).filter(|s| !s.is_empty());
            out.push(change(impact, "lockfiles", subject, reason, v(a), v(b)));
            continue;
        }
        let key = |p: &&Package| (p.version.clone(), p.source.clone());
        let (ak, bk): (BTreeSet<_>, BTreeSet<_>) =
            (a.iter().map(key).collect(), b.iter().map(key).collect());
        if ak != bk {
            let (av, bv): (BTreeSet<&String>, BTreeSet<&String>) = (
                a.iter().map(|p| &p.version).collect(),
                b.iter().map(|p| &p.version).collect(),
            );
            let (impact, reason) = if av == bv {
                rules::package_impact(
                    name,
                    dev,
                    "change of source (registry, URL or git revision)",
                )
            } else {
                let kind = version_kind(ecosystem, &av, &bv);
                rules::version_change_impact(name, dev, kind)
            };
            out.push(change(
                impact,
                "lockfiles",
                subject,
                reason,
                Some(versions(a)),
                Some(versions(b)),
            ));
            continue;
        }
        // Same versions and sources: look for rebuilt artifacts and feature changes.
        for pa in a {
            let Some(pb) = b.iter().find(|pb| key(pb) == key(pa)) else {
                continue;
            };
            if !pa.hashes.is_empty()
                && !pb.hashes.is_empty()
                && pa.hashes.iter().all(|h| !pb.hashes.contains(h))
            {
                let (impact, reason) = rules::package_impact(
                    name,
                    dev,
                    "rebuilt artifact with the same version (different hash)",
                );
                out.push(change(
                    impact,
                    "lockfiles",
                    format!("{subject} {}", pa.version),
                    reason,
                    pa.hashes.first().cloned(),
                    pb.hashes.first().cloned(),
                ));
            }
            if pa.features != pb.features {
                let (impact, reason) = rules::package_impact(
                    name,
                    dev,
                    "change of enabled features (which can select another backend)",
                );
                out.push(change(
                    impact,
                    "lockfiles",
                    format!("{subject} {} features", pa.version),
                    reason,
                    Some(pa.features.join(",")),
                    Some(pb.features.join(",")),
                ));
            }
        }
    }
}

fn compare_env(old: &Content, new: &Content, out: &mut Vec<Change>) {
    let (o, n) = (&old.env.vars, &new.env.vars);
    for name in o.keys().chain(n.keys()).collect::<BTreeSet<_>>() {
        let (a, b) = (o.get(name), n.get(name));
        if a == b {
            continue;
        }
        let (impact, why) = rules::env_var_impact(name);
        let what = match (a, b) {
            (None, _) => "was set",
            (_, None) => "was unset",
            _ => "changed",
        };
        out.push(change(
            impact,
            "env",
            format!("env {name}"),
            format!("{name} {what}: {why}"),
            a.cloned(),
            b.cloned(),
        ));
    }
    let (ro, rn): (BTreeSet<_>, BTreeSet<_>) = (
        old.env.redacted.iter().collect(),
        new.env.redacted.iter().collect(),
    );
    for name in ro.symmetric_difference(&rn) {
        out.push(change(
            Impact::None,
            "env",
            format!("env {name}"),
            "a credential's presence does not change results (its value is never recorded)",
            None,
            None,
        ));
    }
}

fn opt(s: &Option<String>) -> String {
    s.clone().unwrap_or_else(|| "unknown".into())
}

fn compare_cpu(old: &Content, new: &Content, out: &mut Vec<Change>) {
    let (o, n) = (&old.cpu, &new.cpu);
    if o.arch != n.arch {
        out.push(change(Impact::Retrain, "cpu", "cpu architecture", "a different instruction-set architecture uses different kernels, fused multiply-add contraction and math libraries; results are expected to differ", Some(o.arch.clone()), Some(n.arch.clone())));
    }
    let ident = |c: &crate::manifest::CpuInfo| {
        (
            c.vendor.clone(),
            c.model_name.clone(),
            c.family.clone(),
            c.model.clone(),
            c.stepping.clone(),
        )
    };
    if ident(o) != ident(n) {
        out.push(change(Impact::Verify, "cpu", "cpu model", "BLAS and frameworks pick kernels for the processor they find, and different kernels round differently; rerun and compare metrics", Some(opt(&o.model_name)), Some(opt(&n.model_name))));
    }
    if o.features != n.features {
        let (of, nf): (BTreeSet<_>, BTreeSet<_>) =
            (o.features.iter().collect(), n.features.iter().collect());
        let gone: Vec<&str> = of.difference(&nf).map(|s| s.as_str()).collect();
        let came: Vec<&str> = nf.difference(&of).map(|s| s.as_str()).collect();
        let mut parts = Vec::new();
        if !came.is_empty() {
            parts.push(format!("gained {}", came.join(" ")));
        }
        if !gone.is_empty() {
            parts.push(format!("lost {}", gone.join(" ")));
        }
        let summary = came
            .iter()
            .map(|f| format!("+{f}"))
            .chain(gone.iter().map(|f| format!("-{f}")))
            .collect::<Vec<_>>()
            .join(" ");
        out.push(change(Impact::Verify, "cpu", "cpu features", format!("the processor {}; numerical libraries dispatch to different code paths (e.g. AVX-512 or FMA kernels), which changes the last digits", parts.join(" and ")), Some(format!("{} features", o.features.len())), Some(format!("{} features ({summary})", n.features.len()))));
    }
    let counts =
        |c: &crate::manifest::CpuInfo| (c.logical_cores, c.physical_cores, c.allowed_cpu_count);
    if counts(o) != counts(n) {
        let fmt = |c: &crate::manifest::CpuInfo| {
            format!(
                "{} logical, {} allowed",
                c.logical_cores,
                c.allowed_cpu_count.map_or("?".into(), |n| n.to_string())
            )
        };
        out.push(change(Impact::Verify, "cpu", "cpu count", "libraries size their thread pools from the CPU count unless told otherwise, and a different thread count splits reductions differently", Some(fmt(o)), Some(fmt(n))));
    }
}

fn compare_run(old: &Manifest, new: &Manifest, out: &mut Vec<Change>) {
    let (o, n) = (&old.run, &new.run);
    if o.hostname != n.hostname {
        out.push(change(Impact::None, "run", "host name", "the machine's name does not change arithmetic (its processor, libraries and drivers are compared separately)", o.hostname.clone(), n.hostname.clone()));
    }
    if o.label != n.label {
        out.push(change(
            Impact::None,
            "run",
            "label",
            "the label is a note for people",
            o.label.clone(),
            n.label.clone(),
        ));
    }
    if o.tool_version != n.tool_version {
        out.push(change(
            Impact::None,
            "run",
            "runprint version",
            "the version of runprint that wrote the manifest does not affect training",
            Some(o.tool_version.clone()),
            Some(n.tool_version.clone()),
        ));
    }
}

fn compare_system(old: &Content, new: &Content, out: &mut Vec<Change>) {
    let (o, n) = (&old.system, &new.system);
    if (&o.libc, &o.libc_version) != (&n.libc, &n.libc_version) {
        let f =
            |s: &crate::manifest::SystemInfo| format!("{} {}", opt(&s.libc), opt(&s.libc_version));
        out.push(change(Impact::Verify, "system", "libc", "the C library provides libm; its exp/log/sin implementations can differ in the last bit between versions", Some(f(o)), Some(f(n))));
    }
    if (&o.os, &o.os_version) != (&n.os, &n.os_version) {
        out.push(change(Impact::None, "system", "operating system", "the operating system release itself does not do the arithmetic (its C library and drivers are compared separately)", Some(format!("{} {}", o.os, opt(&o.os_version))), Some(format!("{} {}", n.os, opt(&n.os_version)))));
    }
    if o.kernel != n.kernel {
        out.push(change(
            Impact::None,
            "system",
            "kernel",
            "the kernel schedules work but does not change arithmetic",
            o.kernel.clone(),
            n.kernel.clone(),
        ));
    }
    if o.memory_bytes != n.memory_bytes {
        out.push(change(Impact::None, "system", "memory", "the amount of memory does not change arithmetic (unless batch sizes are derived from it, which the training code decides)", Some(o.memory_bytes.to_string()), Some(n.memory_bytes.to_string())));
    }
}
