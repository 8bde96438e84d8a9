//! One fact, one row, and the root cause first.
//!
//! After the sections are compared, the changes are folded so that each fact is reported
//! once and a bump is shown with what it brought:
//!
//! 1. A package that changed the same way (same rule, same old and new values) in several
//!    lockfiles is one row listing those lockfiles (`lockfiles`).
//! 2. A changed package that another changed package depends on (the edges recorded by the
//!    lockfiles and the installed `Requires-Dist`, followed transitively) is grouped under it:
//!    "torch 2.6.0 → 2.7.0, with nvidia-cudnn-cu12 9.1 → 9.7, nvidia-nccl-cu12 …". Packages are
//!    taken most important first, so a group's head is never less important than its members.
//! 3. The same package seen again in the `python` section, and a library of the `gpu` or
//!    `native` section shipped by a changed distribution (cuDNN in `nvidia-cudnn-cu12`,
//!    OpenBLAS in `numpy`), join the row of that package.
//!
//! A grouped change keeps its own row in the JSON report (still ordered most important
//! first), with `group` naming the subject of its head; the text and Markdown reports show it
//! under its head. The head carries the highest impact and weight of its group, so the verdict
//! and the most likely cause never get weaker by grouping.

use std::collections::{BTreeMap, BTreeSet, HashMap};

use super::{Change, Impact};
use crate::lockfile::requirements::normalize_name;
use crate::manifest::Content;

/// Dependency edges by normalized package name.
pub type Edges = BTreeMap<String, BTreeSet<String>>;

/// The dependency edges both manifests record: their lockfiles' and their installed
/// distributions'.
pub fn edges(old: &Content, new: &Content) -> Edges {
    let mut e: Edges = BTreeMap::new();
    for c in [old, new] {
        for l in &c.lockfiles {
            for p in &l.packages {
                if !p.requires.is_empty() {
                    e.entry(normalize_name(&p.name))
                        .or_default()
                        .extend(p.requires.iter().map(|r| normalize_name(r)));
                }
            }
        }
        for env in &c.python {
            for d in &env.distributions {
                if !d.requires.is_empty() {
                    e.entry(normalize_name(&d.name))
                        .or_default()
                        .extend(d.requires.iter().cloned());
                }
            }
        }
    }
    e
}

fn reach(edges: &Edges, from: &str) -> BTreeSet<String> {
    let mut seen = BTreeSet::new();
    let mut todo: Vec<&str> = edges
        .get(from)
        .map(|s| s.iter().map(String::as_str).collect())
        .unwrap_or_default();
    while let Some(n) = todo.pop() {
        if n != from && seen.insert(n.to_string()) {
            if let Some(next) = edges.get(n) {
                todo.extend(next.iter().map(String::as_str));
            }
        }
    }
    seen
}

/// Folds `changes` (see the module documentation). The order is not kept: sort afterwards
/// with [`super::sort_changes`].
pub fn group(mut changes: Vec<Change>, edges: &Edges) -> Vec<Change> {
    // 1. The same change in several lockfiles.
    // Keyed by what follows the lockfile's path in the subject (`name`, or `name 1.0
    // features`), the rule and the values.
    type Key<'c> = (&'c str, &'c str, Option<&'c str>, Option<&'c str>);
    let mut first: HashMap<Key<'_>, usize> = HashMap::new();
    let mut merged_into: Vec<Option<usize>> = vec![None; changes.len()];
    for i in 0..changes.len() {
        let c = &changes[i];
        if c.section != "lockfiles" || c.package.is_none() || c.accepted.is_some() {
            continue;
        }
        let key = (
            c.subject.split_once(": ").map_or("", |(_, rest)| rest),
            c.rule.id,
            c.old.as_deref(),
            c.new.as_deref(),
        );
        match first.get(&key) {
            Some(&j) => merged_into[i] = Some(j),
            None => {
                first.insert(key, i);
            }
        }
    }
    for i in 0..changes.len() {
        if let Some(j) = merged_into[i] {
            let paths = std::mem::take(&mut changes[i].lockfiles);
            changes[j].lockfiles.extend(paths);
        }
    }
    let mut changes: Vec<Change> = changes
        .into_iter()
        .zip(merged_into)
        .filter(|(_, m)| m.is_none())
        .map(|(c, _)| c)
        .collect();
    for c in &mut changes {
        if c.lockfiles.len() > 1 {
            c.lockfiles.sort();
            c.lockfiles.dedup();
            if let Some((_, rest)) = c.subject.split_once(": ") {
                c.subject = format!("{rest} (in {} lockfiles)", c.lockfiles.len());
            }
        }
    }

    // 2. Dependencies under the package that pulled them in.
    let is_package_row = |c: &Change| {
        c.package.is_some()
            && c.accepted.is_none()
            && matches!(c.section.as_str(), "lockfiles" | "python")
    };
    let reaches: Vec<BTreeSet<String>> = changes
        .iter()
        .map(|c| match (&c.package, is_package_row(c)) {
            (Some(p), true) => reach(edges, p),
            _ => BTreeSet::new(),
        })
        .collect();
    let changed: BTreeSet<&str> = changes
        .iter()
        .filter(|c| is_package_row(c))
        .filter_map(|c| c.package.as_deref())
        .collect();
    let descendants: Vec<usize> = reaches
        .iter()
        .map(|r| r.iter().filter(|p| changed.contains(p.as_str())).count())
        .collect();
    let mut order: Vec<usize> = (0..changes.len())
        .filter(|&i| is_package_row(&changes[i]))
        .collect();
    order.sort_by(|&a, &b| {
        let (x, y) = (&changes[a], &changes[b]);
        (y.impact, y.weight(), descendants[b], x.section == "python").cmp(&(
            x.impact,
            x.weight(),
            descendants[a],
            y.section == "python",
        ))
    });
    let mut head_of: Vec<Option<usize>> = vec![None; changes.len()];
    // Package name → the positions in `order` of its rows (ascending).
    let mut rows_of: HashMap<&str, Vec<usize>> = HashMap::new();
    for (pos, &r) in order.iter().enumerate() {
        let name = changes[r].package.as_deref().unwrap_or_default();
        rows_of.entry(name).or_default().push(pos);
    }
    // Package name → the row that heads it (itself or its group's head).
    let mut package_head: BTreeMap<String, usize> = BTreeMap::new();
    for (pos, &r) in order.iter().enumerate() {
        if head_of[r].is_some() {
            continue;
        }
        let p = changes[r].package.as_deref().unwrap_or_default();
        package_head.entry(p.to_string()).or_insert(r);
        // The later rows of the same package (seen again in the python section) and of its
        // dependencies join this row's group, unless an earlier head took them.
        let names = std::iter::once(p).chain(reaches[r].iter().map(String::as_str));
        for name in names {
            let Some(positions) = rows_of.get(name) else {
                continue;
            };
            for &later in positions.iter().filter(|&&at| at > pos) {
                let q = order[later];
                if head_of[q].is_none() {
                    head_of[q] = Some(r);
                    package_head.entry(name.to_string()).or_insert(r);
                }
            }
        }
    }
    // 3. Libraries shipped by a changed distribution.
    for i in 0..changes.len() {
        if head_of[i].is_some() || is_package_row(&changes[i]) {
            continue;
        }
        if let Some(&h) = changes[i]
            .shipped_by
            .as_deref()
            .and_then(|d| package_head.get(&normalize_name(d)))
        {
            head_of[i] = Some(h);
        }
    }
    // Heads carry the highest impact and weight of their group.
    let mut raise: BTreeMap<usize, (Impact, u8, Vec<String>)> = BTreeMap::new();
    for (i, h) in head_of.iter().enumerate() {
        let Some(h) = *h else { continue };
        let e = raise
            .entry(h)
            .or_insert((changes[h].impact, changes[h].weight(), Vec::new()));
        let c = &changes[i];
        if (c.impact, c.weight()) > (e.0, e.1) {
            e.2.push(format!("{} ({})", c.subject, c.impact));
        }
        e.0 = e.0.max(c.impact);
        e.1 = e.1.max(c.weight());
    }
    let subjects: Vec<String> = changes.iter().map(|c| c.subject.clone()).collect();
    for (h, (impact, weight, stronger)) in raise {
        let c = &mut changes[h];
        if impact > c.impact {
            c.reason = format!(
                "{}; it brought {}, which raises this row to {impact}",
                c.reason,
                stronger.join(", ")
            );
            c.impact = impact;
        }
        c.group_weight = Some(weight);
    }
    for (i, h) in head_of.into_iter().enumerate() {
        if let Some(h) = h {
            changes[i].group = Some(subjects[h].clone());
        }
    }
    changes
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::diff::rules;
    use crate::diff::Section;

    fn pkg(lockfile: &str, name: &str, rule: &'static rules::Rule, old: &str, new: &str) -> Change {
        let mut c = Change::from_rule(
            rule,
            Section::Lockfiles,
            format!("{lockfile}: {name}"),
            "",
            Some(old.into()),
            Some(new.into()),
        );
        c.package = Some(name.into());
        c.lockfiles = vec![lockfile.into()];
        c
    }

    #[test]
    fn one_row_per_package_and_dependencies_under_their_parent() {
        let edges: Edges = [
            ("torch", vec!["nvidia-cudnn-cu12", "triton"]),
            ("nvidia-cudnn-cu12", vec!["nvidia-cublas-cu12"]),
        ]
        .into_iter()
        .map(|(k, v)| (k.to_string(), v.into_iter().map(String::from).collect()))
        .collect();
        let mut changes = vec![
            pkg(
                "a/uv.lock",
                "torch",
                &rules::PKG_NUMERIC_MINOR,
                "2.6.0",
                "2.7.0",
            ),
            pkg(
                "b/uv.lock",
                "torch",
                &rules::PKG_NUMERIC_MINOR,
                "2.6.0",
                "2.7.0",
            ),
            pkg(
                "a/uv.lock",
                "nvidia-cudnn-cu12",
                &rules::PKG_NUMERIC_MINOR,
                "9.1.0",
                "9.7.0",
            ),
            pkg(
                "a/uv.lock",
                "nvidia-cublas-cu12",
                &rules::PKG_NUMERIC_MINOR,
                "12.4.5",
                "12.8.3",
            ),
            pkg(
                "a/uv.lock",
                "requests",
                &rules::PKG_INFRASTRUCTURE,
                "2.31.0",
                "2.32.3",
            ),
        ];
        let mut gpu = Change::from_rule(
            &crate::diff::stack::GPU_CUDNN,
            Section::Gpu,
            "cudnn (nvidia-cudnn-cu12)",
            "",
            Some("9.1.0".into()),
            Some("9.7.0".into()),
        );
        gpu.shipped_by = Some("nvidia-cudnn-cu12".into());
        changes.push(gpu);
        let mut out = group(changes, &edges);
        crate::diff::sort_changes(&mut out);
        let mut rows: Vec<(&str, Option<&str>)> = out
            .iter()
            .map(|c| (c.subject.as_str(), c.group.as_deref()))
            .collect();
        rows.sort();
        assert_eq!(
            rows,
            [
                (
                    "a/uv.lock: nvidia-cublas-cu12",
                    Some("torch (in 2 lockfiles)")
                ),
                (
                    "a/uv.lock: nvidia-cudnn-cu12",
                    Some("torch (in 2 lockfiles)")
                ),
                ("a/uv.lock: requests", None),
                ("cudnn (nvidia-cudnn-cu12)", Some("torch (in 2 lockfiles)")),
                ("torch (in 2 lockfiles)", None),
            ]
        );
        let torch = out.iter().find(|c| c.subject.starts_with("torch")).unwrap();
        assert_eq!(torch.lockfiles, ["a/uv.lock", "b/uv.lock"]);
        assert_eq!(torch.impact, Impact::Retrain);
        // The head sorts first: it carries its group's highest weight, and more descendants.
        assert_eq!(out[0].subject, "torch (in 2 lockfiles)");
    }
}
