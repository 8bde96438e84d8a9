//! Comparing two manifests: every difference becomes a [`Change`] decided by one rule of the
//! built-in table ([`rules::all`]), adjusted by the repository's policy
//! ([`crate::policy::Policy`]); the [`Report`]'s verdict is the highest impact found, and its
//! "most likely cause" the change most likely to explain a difference in results.
//!
//! The comparison is pure: the files changed between the two commits, which it classes so that
//! a documentation-only commit does not ask for a retrain, are passed in ([`FileStat`], listed
//! by [`crate::check::commit_files`]); nothing here reads a file or runs a program.

/// Defines rules as statics, each beside the conditions that fire it, and `$group`, the list
/// of them in order ([`rules::RULE_GROUPS`] lists the groups).
macro_rules! rule_group {
    ($(#[$meta:meta])* $group:ident;
     $( $name:ident = $id:literal, $sec:literal, $imp:ident, $w:literal,
        $title:literal, $reason:literal, $source:literal; )*) => {
        $(
            #[doc = $title]
            pub static $name: $crate::diff::rules::Rule = $crate::diff::rules::Rule {
                id: $id,
                section: $sec,
                title: $title,
                impact: $crate::classes::Impact::$imp,
                weight: $w,
                reason: $reason,
                source: $source,
            };
        )*
        $(#[$meta])*
        pub static $group: &[&$crate::diff::rules::Rule] = &[$(&$name),*];
    };
}

mod data;
mod env;
mod git;
pub mod group;
mod host;
mod lockfiles;
pub mod rules;
mod scope;
pub mod stack;

use std::collections::{BTreeMap, BTreeSet};

use serde::{Deserialize, Serialize};

use crate::classes::PathClass;
use crate::manifest::{Content, DataInput, Lockfile, Manifest, Package};
use crate::policy::Policy;
use rules::{PackageChange, Rule};
pub use scope::ScopeView;

pub use crate::classes::{Impact, Section};

/// Every key of two key-sorted sequences (maps, or vectors sorted by key with each key once)
/// in order, with the value each side has: the outer join every section comparison walks (a
/// merge of the two sequences, nothing collected).
pub fn outer_join<K: Ord, A, B>(
    old: impl IntoIterator<Item = (K, A)>,
    new: impl IntoIterator<Item = (K, B)>,
) -> impl Iterator<Item = (K, Option<A>, Option<B>)> {
    let (mut a, mut b) = (old.into_iter().peekable(), new.into_iter().peekable());
    std::iter::from_fn(move || {
        use std::cmp::Ordering::*;
        match (a.peek(), b.peek()) {
            (None, None) => None,
            (Some(_), None) => a.next().map(|(k, v)| (k, Some(v), None)),
            (None, Some(_)) => b.next().map(|(k, v)| (k, None, Some(v))),
            (Some((ka, _)), Some((kb, _))) => match ka.cmp(kb) {
                Less => a.next().map(|(k, v)| (k, Some(v), None)),
                Greater => b.next().map(|(k, v)| (k, None, Some(v))),
                Equal => {
                    let (k, va) = a.next()?;
                    let (_, vb) = b.next()?;
                    Some((k, Some(va), Some(vb)))
                }
            },
        }
    })
}

/// One file changed between two commits, with its line counts (0 for binary files).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct FileStat {
    /// Path relative to the repository root (the new path of a rename).
    pub path: String,
    /// Lines added.
    pub added: u64,
    /// Lines removed.
    pub removed: u64,
    /// The content did not change: a rename or a mode change of identical bytes (git's exact
    /// rename detection, `git diff --find-renames=100%`).
    pub unchanged: bool,
}

/// One difference between two manifests.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct Change {
    /// How much it matters.
    pub impact: Impact,
    /// What changed, e.g. `requirements.txt: numpy` or `env OMP_NUM_THREADS`.
    pub subject: String,
    /// Why it has this impact, in one sentence.
    pub reason: String,
    /// Manifest section: `git`, `data`, `lockfiles`, `env`, `cpu`, `system`, `python`,
    /// `native`, `gpu`, `run`.
    pub section: Section,
    /// The old value, where there is one.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub old: Option<String>,
    /// The new value, where there is one.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub new: Option<String>,
    /// The rule that decided it (see `runprint rules`), written as its id.
    #[serde(serialize_with = "rule_id")]
    pub rule: &'static Rule,
    /// Where the rule's behaviour is documented (the rule's source).
    pub source: &'static str,
    /// Set when the policy file accepted this change: it then has impact `none`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub accepted: Option<Accepted>,
    /// A compact word diff of the old and new values (`--verbose`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub value_diff: Option<String>,
    /// The lockfiles where the package changed this same way (one row for them all).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub lockfiles: Vec<String>,
    /// The subject of the change this one is grouped under: a package the changed package
    /// pulled in as a dependency, or a library a changed distribution ships. It follows its
    /// group's row, and the group's row carries the highest impact of the group.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub group: Option<String>,
    /// The package it is about (normalized name), for grouping.
    #[serde(skip)]
    pub package: Option<String>,
    /// The distribution that ships the library it is about, for grouping.
    #[serde(skip)]
    pub shipped_by: Option<String>,
    /// The highest weight in its group, when it heads one.
    #[serde(skip)]
    pub group_weight: Option<u8>,
}

/// How a policy acceptance changed a change.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
pub struct Accepted {
    /// The impact the rule gave before the acceptance.
    pub impact: Impact,
    /// The acceptance's reason.
    pub reason: String,
    /// Its last day, `YYYY-MM-DD`.
    pub expires: String,
}

fn rule_id<S: serde::Serializer>(rule: &&'static Rule, s: S) -> Result<S::Ok, S::Error> {
    s.serialize_str(rule.id)
}

impl Change {
    /// A change decided by `rule`: the impact, rule id and source come from the rule, and the
    /// reason is `lead: rule reason` (or the rule's reason alone when `lead` is empty).
    pub fn from_rule(
        rule: &'static Rule,
        section: Section,
        subject: impl Into<String>,
        lead: impl Into<String>,
        old: Option<String>,
        new: Option<String>,
    ) -> Change {
        let lead = lead.into();
        Change {
            impact: rule.impact,
            subject: subject.into(),
            reason: if lead.is_empty() {
                rule.reason.to_string()
            } else {
                format!("{lead}: {}", rule.reason)
            },
            section,
            old,
            new,
            rule,
            source: rule.source,
            accepted: None,
            value_diff: None,
            lockfiles: Vec::new(),
            group: None,
            package: None,
            shipped_by: None,
            group_weight: None,
        }
    }

    /// How likely it explains a difference in results (its rule's weight; 0 when none).
    pub fn weight(&self) -> u8 {
        if self.accepted.is_some() {
            return 0;
        }
        let own = self.rule.weight;
        self.group_weight.map_or(own, |g| g.max(own))
    }
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
            label: m.run.label.as_deref().map(crate::redact::scrub_secrets),
            created: m.run.created.clone(),
            modified: m.is_modified(),
        }
    }
}

/// The result of a comparison.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct Report {
    /// The highest impact found (`none` when nothing differs).
    pub verdict: Impact,
    /// One line naming the change most likely to explain a difference in results; absent when
    /// the verdict is `none`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub most_likely_cause: Option<String>,
    /// Changes, most important first (by impact, then by how likely each explains a
    /// difference in results).
    pub changes: Vec<Change>,
    /// The baseline.
    pub old: Side,
    /// The manifest compared with it.
    pub new: Side,
    /// Remarks about the comparison itself (edited manifests, missing commits, expired
    /// acceptances).
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub notes: Vec<String>,
    /// The changed files of the code, by class, and the size of the change.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub code_change: Option<CodeChange>,
    /// The policy file applied, if any.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub policy: Option<String>,
    /// Acceptances of the policy file past their date, which no longer apply.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub expired_acceptances: Vec<ExpiredAcceptance>,
    /// Compact diffs of changed package lists, one per lockfile (filled on request, see
    /// [`package_list_diffs`]).
    #[serde(skip_serializing_if = "Vec::is_empty", default)]
    pub details: Vec<Detail>,
    /// Show each change's rule, source and value diff in text and Markdown (`--verbose`).
    #[serde(skip)]
    pub verbose: bool,
    /// List every `none` change in the text report instead of a count per kind (`--all`).
    #[serde(skip)]
    pub all: bool,
}

/// The code's changed files by class and the size of the change.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
pub struct CodeChange {
    /// `commits` (both commits were found) or `uncommitted` (recorded changed paths).
    pub scope: String,
    /// Number of changed files.
    pub files: usize,
    /// Lines added, when both commits were found.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub lines_added: Option<u64>,
    /// Lines removed, when both commits were found.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub lines_removed: Option<u64>,
    /// Changed paths by class: `data`, `code`, `config`, `dependencies`, `docs`, `irrelevant`.
    pub classes: BTreeMap<String, Vec<String>>,
}

/// An acceptance past its date.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
pub struct ExpiredAcceptance {
    /// Its subject glob.
    pub subject: String,
    /// Its last day.
    pub expires: String,
    /// Its reason.
    pub reason: String,
    /// Subjects of this comparison it would have accepted.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub would_match: Vec<String>,
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

/// A compact word diff of two values: unchanged words as they are, removed ones as `[-…-]`,
/// added ones as `{+…+}` (the `similar` crate).
pub fn word_diff(old: &str, new: &str) -> String {
    use similar::ChangeTag;
    let diff = similar::TextDiff::from_words(old, new);
    let mut out = String::new();
    let mut open: Option<ChangeTag> = None;
    for c in diff.iter_all_changes() {
        if open != Some(c.tag()) {
            match open {
                Some(ChangeTag::Delete) => out.push_str("-]"),
                Some(ChangeTag::Insert) => out.push_str("+}"),
                _ => {}
            }
            match c.tag() {
                ChangeTag::Delete => out.push_str("[-"),
                ChangeTag::Insert => out.push_str("{+"),
                ChangeTag::Equal => {}
            }
            open = Some(c.tag());
        }
        out.push_str(c.value());
    }
    match open {
        Some(ChangeTag::Delete) => out.push_str("-]"),
        Some(ChangeTag::Insert) => out.push_str("+}"),
        _ => {}
    }
    out
}

/// Fills each change's `value_diff` and marks the report verbose (`--verbose`).
pub fn explain_values(report: &mut Report) {
    report.verbose = true;
    for c in &mut report.changes {
        if let (Some(a), Some(b)) = (&c.old, &c.new) {
            if a != b {
                c.value_diff = Some(word_diff(a, b));
            }
        }
    }
}

/// Compares two manifests with the built-in rules. `files` are the files changed between
/// their two commits, when they could be listed ([`crate::check::commit_files`]); without them
/// a changed commit cannot be told from a change of training code.
pub fn compare(
    old_path: &str,
    old: &Manifest,
    new_path: &str,
    new: &Manifest,
    files: Option<&[FileStat]>,
) -> Report {
    compare_with(old_path, old, new_path, new, files, &Policy::default())
}

/// What the section comparisons share: the policy, the lockfiles recorded on both sides and
/// what installed copies say about compiled code.
pub struct Context<'a> {
    /// The repository's policy.
    pub policy: &'a Policy,
    /// Lockfile paths recorded in both manifests.
    pub lockfiles: Vec<&'a str>,
    compiled: BTreeMap<String, bool>,
    /// Dependency edges both manifests record.
    edges: group::Edges,
    /// The training job's scope, when both manifests recorded one.
    pub scope: Option<ScopeView>,
}

impl<'a> Context<'a> {
    /// The context of comparing two manifests' contents.
    pub fn new(old: &'a Content, new: &'a Content, policy: &'a Policy) -> Context<'a> {
        let old_locks: BTreeSet<&str> = old.lockfiles.iter().map(|l| l.path.as_str()).collect();
        let lockfiles = new
            .lockfiles
            .iter()
            .map(|l| l.path.as_str())
            .filter(|p| old_locks.contains(p))
            .collect();
        let mut compiled: BTreeMap<String, bool> = BTreeMap::new();
        for env in old.python.iter().chain(&new.python) {
            for d in &env.distributions {
                *compiled.entry(d.name.to_ascii_lowercase()).or_default() |= d.compiled;
            }
        }
        Context {
            policy,
            lockfiles,
            compiled,
            scope: ScopeView::of(old, new),
            edges: group::edges(old, new),
        }
    }

    /// A numerical library the package depends on, directly or not, by the recorded edges.
    pub fn numeric_dependency(&self, name: &str) -> Option<String> {
        let start = crate::lockfile::requirements::normalize_name(name);
        let mut seen = BTreeSet::new();
        let mut todo = vec![start.clone()];
        while let Some(n) = todo.pop() {
            for d in self.edges.get(&n).into_iter().flatten() {
                if seen.insert(d.clone()) {
                    if rules::is_numeric_package(d) {
                        return Some(d.clone());
                    }
                    todo.push(d.clone());
                }
            }
        }
        None
    }

    /// What an installed copy says about a package shipping compiled code.
    pub fn compiled(&self, name: &str) -> Option<bool> {
        self.compiled.get(&name.to_ascii_lowercase()).copied()
    }

    /// A package change decided by the rules.
    #[allow(clippy::too_many_arguments)]
    pub fn package_change(
        &self,
        lockfile: Option<&str>,
        section: Section,
        subject: String,
        name: &str,
        installed: rules::Installed,
        compiled: Option<bool>,
        change: PackageChange<'_>,
        values: (Option<String>, Option<String>),
    ) -> Change {
        let versions: Vec<&str> = match change {
            PackageChange::Version { old, new, .. } | PackageChange::Range { old, new, .. } => {
                vec![old, new]
            }
            _ => [&values.0, &values.1]
                .into_iter()
                .flatten()
                .map(String::as_str)
                .collect(),
        };
        let dev = installed != rules::Installed::Always;
        let mut class = rules::classify_package(name, dev, compiled, &versions, self.policy);
        // Declared only in optional extras or groups: judged like a development dependency,
        // under its own rule.
        let on_request = installed == rules::Installed::OnRequest
            && class.class == crate::classes::PackageClass::Dev;
        if on_request {
            class.how = "declared only in optional extras or groups".into();
        }
        // A package the tables do not know that loads a numerical library does its arithmetic
        // through it: judged like compiled code.
        if class.class == crate::classes::PackageClass::Pure {
            if let Some(numeric) = self.numeric_dependency(name) {
                class = rules::Classified {
                    class: crate::classes::PackageClass::Compiled,
                    how: format!(
                        "not in runprint's tables; it depends on the numerical library {numeric}"
                    ),
                };
            }
        }
        let scope = self.scope.as_ref();
        if let Some(path) = lockfile.filter(|p| scope.is_some_and(|s| s.excludes_lockfile(p))) {
            class = rules::Classified {
                class: crate::classes::PackageClass::OutOfScope,
                how: format!("locked in `{path}`, which the training job does not install from"),
            };
        } else if scope.is_some_and(|s| {
            s.excludes_package(name)
                && lockfile.is_none_or(|path| s.python_lockfiles.contains(path))
        }) && class.class != crate::classes::PackageClass::OutOfScope
        {
            class = rules::Classified {
                class: crate::classes::PackageClass::OutOfScope,
                how: "outside the training job's scope".into(),
            };
        }
        let (rule, lead) = rules::package_rule(name, &class, change);
        // The scope may have reclassed it since.
        let rule = if on_request && class.class == crate::classes::PackageClass::Dev {
            &rules::PKG_INPUT_EXTRA
        } else {
            rule
        };
        let mut c = Change::from_rule(rule, section, subject, lead, values.0, values.1);
        c.package = Some(crate::lockfile::requirements::normalize_name(name));
        if let Some(path) = lockfile {
            c.lockfiles.push(path.to_string());
        }
        c
    }
}

/// Compares two manifests under a policy (see [`compare`]).
pub fn compare_with(
    old_path: &str,
    old: &Manifest,
    new_path: &str,
    new: &Manifest,
    files: Option<&[FileStat]>,
    policy: &Policy,
) -> Report {
    // Checking a fingerprint serializes and hashes the whole content: both are checked while
    // the sections are compared.
    let ((old_side, new_side), (ctx, mut changes, code_change, compare_notes)) = rayon::join(
        || rayon::join(|| Side::of(old_path, old), || Side::of(new_path, new)),
        || {
            let ctx = Context::new(&old.content, &new.content, policy);
            let (mut changes, mut notes) = (Vec::new(), Vec::new());
            let code_change = git::compare_git(
                &old.content,
                &new.content,
                files,
                &ctx,
                &mut changes,
                &mut notes,
            );
            lockfiles::compare_lockfiles(
                &old.content.lockfiles,
                &new.content.lockfiles,
                files,
                &ctx,
                &mut changes,
            );
            data::compare_data(&old.content, &new.content, &mut changes);
            env::compare_env(&old.content, &new.content, &ctx, &mut changes);
            host::compare_cpu(&old.content, &new.content, &mut changes);
            host::compare_system(&old.content, &new.content, &mut changes);
            host::compare_run(old, new, &mut changes);
            stack::compare(&old.content, &new.content, &ctx, &mut changes);
            (ctx, changes, code_change, notes)
        },
    );
    let mut notes: Vec<String> = [&old_side, &new_side]
        .into_iter()
        .filter(|side| side.modified)
        .map(|side| {
            format!(
                "`{}` was modified after stamping: its stored fingerprint does not match its content",
                side.path
            )
        })
        .collect();
    notes.extend(compare_notes);
    if let Some(s) = &ctx.scope {
        notes.extend(s.notes.iter().cloned());
    }
    let expired_acceptances = apply_acceptances(policy, &mut changes, &mut notes);
    let mut changes = group::group(changes, &ctx.edges);
    sort_changes(&mut changes);
    let verdict = changes
        .iter()
        .map(|c| c.impact)
        .max()
        .unwrap_or(Impact::None);
    Report {
        verdict,
        most_likely_cause: most_likely_cause(&changes, verdict),
        changes,
        old: old_side,
        new: new_side,
        notes,
        code_change,
        policy: policy.path.as_ref().map(|p| p.display().to_string()),
        expired_acceptances,
        details: Vec::new(),
        verbose: false,
        all: false,
    }
}

/// Applies the policy's acceptances; returns the expired ones (which do not apply).
fn apply_acceptances(
    policy: &Policy,
    changes: &mut [Change],
    notes: &mut Vec<String>,
) -> Vec<ExpiredAcceptance> {
    let today = policy.today();
    let mut expired = Vec::new();
    for a in &policy.accept {
        let hits: Vec<usize> = changes
            .iter()
            .enumerate()
            .filter(|(_, c)| {
                c.impact > Impact::None
                    && a.matches(&c.subject, c.rule.id, c.old.as_deref(), c.new.as_deref())
            })
            .map(|(i, _)| i)
            .collect();
        if a.is_expired(&today) {
            let would_match: Vec<String> =
                hits.iter().map(|&i| changes[i].subject.clone()).collect();
            notes.push(format!(
                "the acceptance of `{}` (policy line {}) expired on {} and no longer applies{}",
                a.subject,
                a.line,
                a.expires,
                if would_match.is_empty() {
                    String::new()
                } else {
                    format!("; it would have accepted {}", would_match.join(", "))
                }
            ));
            expired.push(ExpiredAcceptance {
                subject: a.subject.clone(),
                expires: a.expires.clone(),
                reason: a.reason.clone(),
                would_match,
            });
            continue;
        }
        for i in hits {
            let c = &mut changes[i];
            if c.accepted.is_some() {
                continue;
            }
            c.accepted = Some(Accepted {
                impact: c.impact,
                reason: a.reason.clone(),
                expires: a.expires.clone(),
            });
            c.reason = format!(
                "accepted by the policy until {} ({}); the rule said {}: {}",
                a.expires, a.reason, c.impact, c.reason
            );
            c.impact = Impact::None;
        }
    }
    expired
}

/// The one-line "most likely cause": the first change of the verdict's impact after sorting.
fn most_likely_cause(sorted: &[Change], verdict: Impact) -> Option<String> {
    if verdict == Impact::None {
        return None;
    }
    let top = sorted.first()?;
    let title = top.rule.title;
    let values = |c: &Change| match (&c.old, &c.new) {
        (Some(a), Some(b)) => format!(" {a} → {b}"),
        (None, Some(b)) => format!(" (absent) → {b}"),
        (Some(a), None) => format!(" {a} → (absent)"),
        (None, None) => String::new(),
    };
    let members: Vec<&Change> = sorted
        .iter()
        .filter(|c| c.group.as_deref() == Some(top.subject.as_str()))
        .collect();
    let others = sorted
        .iter()
        .filter(|c| c.group.is_none() && c.impact > Impact::None)
        .count()
        - 1;
    let mut line = format!("{}{}", top.subject, values(top));
    if !members.is_empty() {
        let shown: Vec<String> = members
            .iter()
            .take(3)
            .map(|c| {
                let name = c.package.as_deref().unwrap_or(&c.subject);
                format!("{name}{}", values(c))
            })
            .collect();
        line.push_str(&format!(", with {}", shown.join(", ")));
        if members.len() > 3 {
            line.push_str(&format!(" and {} more", members.len() - 3));
        }
    }
    if !title.is_empty() {
        line.push_str(&format!(" — {title}"));
    }
    if others > 0 {
        line.push_str(&format!(
            "; {others} other change(s) could also move results"
        ));
    }
    Some(line)
}

/// Orders changes most important first: by impact, then by how likely each explains a
/// difference in results (its rule's weight), then by section and subject.
pub fn sort_changes(changes: &mut [Change]) {
    let rank = |s: &str| match s {
        "git" => 0,
        "data" => 1,
        "lockfiles" => 2,
        "python" => 3,
        "native" => 4,
        "gpu" => 5,
        "env" => 6,
        "cpu" => 7,
        "system" => 8,
        _ => 9,
    };
    changes.sort_by(|a, b| {
        b.impact
            .cmp(&a.impact)
            .then_with(|| b.weight().cmp(&a.weight()))
            // A group's head before its members: it names the cause.
            .then_with(|| a.group.is_some().cmp(&b.group.is_some()))
            .then_with(|| rank(a.section.as_str()).cmp(&rank(b.section.as_str())))
            .then_with(|| a.subject.cmp(&b.subject))
    });
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

fn digest_short(d: &str) -> String {
    d.strip_prefix("sha256:")
        .unwrap_or(d)
        .chars()
        .take(12)
        .collect()
}

fn opt(s: &Option<String>) -> String {
    s.clone().unwrap_or_else(|| "unknown".into())
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A manifest holding one `uv.lock` with these packages (its digest named after `v`).
    fn uv_lock(v: &str, packages: Vec<Package>) -> Manifest {
        Manifest::new(
            crate::manifest::RunInfo::default(),
            Content {
                lockfiles: vec![Lockfile {
                    path: "uv.lock".into(),
                    ecosystem: "pypi".into(),
                    sha256: format!("sha256:{v}"),
                    packages,
                    ..Lockfile::default()
                }],
                ..Content::default()
            },
        )
    }

    #[test]
    fn word_diff_marks_removed_and_added_words() {
        assert_eq!(
            word_diff("--a --b=1 --c", "--a --b=2 --c"),
            "--a [---b=1-]{+--b=2+} --c"
        );
        assert_eq!(word_diff("8", "16"), "[-8-]{+16+}");
    }

    #[test]
    fn outer_join_walks_both_key_sets_in_order() {
        let a: BTreeMap<i32, &str> = [(1, "a"), (3, "c"), (5, "e")].into_iter().collect();
        let b: BTreeMap<i32, &str> = [(2, "B"), (3, "C"), (6, "F")].into_iter().collect();
        let got: Vec<(i32, Option<&str>, Option<&str>)> = outer_join(&a, &b)
            .map(|(k, x, y)| (*k, x.copied(), y.copied()))
            .collect();
        assert_eq!(
            got,
            [
                (1, Some("a"), None),
                (2, None, Some("B")),
                (3, Some("c"), Some("C")),
                (5, Some("e"), None),
                (6, None, Some("F")),
            ]
        );
    }

    /// The package list of a scope follows Python imports: it judges the packages of Python
    /// lockfiles only. A Cargo.lock the job installs from (a Rust extension) keeps its verdict.
    #[test]
    fn the_scope_judges_only_python_packages_by_the_python_package_list() {
        let side = |ndarray: &str, fastapi: &str| {
            let lock = |path: &str, eco: &str, name: &str, v: &str| Lockfile {
                path: path.into(),
                ecosystem: eco.into(),
                sha256: format!("sha256:{name}{v}"),
                packages: vec![Package {
                    name: name.into(),
                    version: v.into(),
                    ..Package::default()
                }],
                ..Lockfile::default()
            };
            Manifest::new(
                crate::manifest::RunInfo::default(),
                Content {
                    lockfiles: vec![
                        lock("Cargo.lock", "cargo", "ndarray", ndarray),
                        lock("requirements.txt", "pypi", "fastapi", fastapi),
                    ],
                    scope: Some(crate::manifest::Scope {
                        entry: vec!["train.py".into()],
                        lockfiles: vec!["Cargo.lock".into(), "requirements.txt".into()],
                        complete: true,
                        packages: Some(vec!["numpy".into()]),
                        ..Default::default()
                    }),
                    ..Content::default()
                },
            )
        };
        let r = compare(
            "a",
            &side("0.15.6", "0.115.0"),
            "b",
            &side("0.16.1", "0.115.6"),
            None,
        );
        let rule = |s: &str| {
            r.changes
                .iter()
                .find(|c| c.subject.contains(s))
                .unwrap()
                .rule
                .id
        };
        assert_eq!(rule("ndarray"), "pkg.numeric.major");
        assert_eq!(rule("fastapi"), "pkg.out-of-scope");
        assert_eq!(r.verdict, Impact::Retrain);
    }

    /// The wheel tags a lockfile lists decide an unknown package's class (PEP 427: a platform
    /// wheel holds compiled code).
    #[test]
    fn locked_platform_wheels_mark_compiled_code() {
        let side = |v: &str, compiled: bool| {
            uv_lock(
                v,
                vec![Package {
                    name: "kelp-fastparse".into(),
                    version: v.into(),
                    compiled: Some(compiled),
                    ..Package::default()
                }],
            )
        };
        let r = compare("a", &side("1.0.0", true), "b", &side("1.0.1", true), None);
        assert_eq!(r.changes[0].rule.id, "pkg.compiled");
        let r = compare("a", &side("1.0.0", false), "b", &side("1.0.1", false), None);
        assert_eq!(r.changes[0].rule.id, "pkg.pure.patch");
    }

    /// A package the tables do not know that depends on a numerical library (the edges a
    /// lockfile records) is judged like compiled code, not like a pure utility.
    #[test]
    fn an_unknown_package_that_loads_a_numerical_library_weighs_like_compiled_code() {
        let side = |v: &str| {
            let packages = vec![
                Package {
                    name: "kelp-tensors".into(),
                    version: v.into(),
                    requires: vec!["kelp-core".into()],
                    ..Package::default()
                },
                Package {
                    name: "kelp-core".into(),
                    version: "1.0.0".into(),
                    requires: vec!["numpy".into()],
                    ..Package::default()
                },
            ];
            uv_lock(v, packages)
        };
        let r = compare("a", &side("0.4.0"), "b", &side("0.5.0"), None);
        let c = &r.changes[0];
        assert_eq!(c.rule.id, "pkg.compiled", "{c:?}");
        assert!(
            c.reason.contains("depends on the numerical library numpy"),
            "{}",
            c.reason
        );
    }

    /// Package order in a lockfile carries no meaning (common practice: package managers sort
    /// their lockfiles, but a hand-made manifest need not): the same packages in another order,
    /// one name twice, compare equal; a version added to a name shows.
    #[test]
    fn package_order_does_not_matter_and_repeated_names_are_compared_as_a_set() {
        let p = |name: &str, v: &str| Package {
            name: name.into(),
            version: v.into(),
            ..Package::default()
        };
        let forward = vec![
            p("kelp-a", "1.0.0"),
            p("kelp-b", "2.0.0"),
            p("kelp-b", "3.0.0"),
        ];
        let backward: Vec<Package> = forward.iter().rev().cloned().collect();
        let r = compare(
            "a",
            &uv_lock("1", forward.clone()),
            "b",
            &uv_lock("2", backward),
            None,
        );
        assert!(r.changes.is_empty(), "{:?}", r.changes);
        let mut more = forward.clone();
        more.insert(0, p("kelp-b", "3.1.0"));
        let r = compare("a", &uv_lock("1", forward), "b", &uv_lock("2", more), None);
        assert_eq!(r.changes.len(), 1, "{:?}", r.changes);
        assert_eq!(r.changes[0].new.as_deref(), Some("3.1.0, 2.0.0, 3.0.0"));
    }
}
