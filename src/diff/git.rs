//! The `git` section: the commit, the uncommitted change, branch, remote and submodules; the
//! changed files by class (and by the training job's scope).

use super::*;

/// Classes the changed paths and picks the deciding rule; the lead names the files by class.
fn classify_paths(
    paths: &[String],
    unchanged: &BTreeSet<String>,
    stats: Option<(u64, u64)>,
    scope: &str,
    ctx: &Context<'_>,
) -> (&'static Rule, String, CodeChange) {
    let mut classes: BTreeMap<PathClass, Vec<String>> = BTreeMap::new();
    for p in paths {
        let class = if unchanged.contains(p) {
            PathClass::Unchanged
        } else {
            let class = rules::path_class(p, ctx.policy, &ctx.lockfiles);
            match &ctx.scope {
                Some(s) if s.files_known && rules::outside_scope(p, class, s) => {
                    PathClass::OutOfScope
                }
                _ => class,
            }
        };
        classes.entry(class).or_default().push(p.clone());
    }
    let present: Vec<PathClass> = classes.keys().copied().collect();
    let rule = rules::git_rule(&present);
    let size = match stats {
        Some((a, r)) => format!("{} file(s), +{a} −{r} lines", paths.len()),
        None => format!("{} file(s)", paths.len()),
    };
    let listing = classes
        .iter()
        .map(|(c, ps)| format!("{} {}", c.as_str(), some_paths(ps)))
        .collect::<Vec<_>>()
        .join("; ");
    let lead = if paths.is_empty() {
        format!("{scope}: no file changed")
    } else {
        format!("{scope}: {size} ({listing})")
    };
    let summary = CodeChange {
        scope: if stats.is_some() {
            "commits".into()
        } else {
            "uncommitted".into()
        },
        files: paths.len(),
        lines_added: stats.map(|s| s.0),
        lines_removed: stats.map(|s| s.1),
        classes: classes
            .into_iter()
            .map(|(c, ps)| (c.as_str().to_string(), ps))
            .collect(),
    };
    (rule, lead, summary)
}

pub(super) fn compare_git(
    old: &Content,
    new: &Content,
    files: Option<&[FileStat]>,
    ctx: &Context<'_>,
    out: &mut Vec<Change>,
    notes: &mut Vec<String>,
) -> Option<CodeChange> {
    let (o, n) = (&old.git, &new.git);
    if o.present != n.present {
        out.push(Change::from_rule(
            &rules::GIT_PRESENCE,
            Section::Git,
            "source control",
            "",
            Some(o.present.to_string()),
            Some(n.present.to_string()),
        ));
        return None;
    }
    if !o.present {
        return None;
    }
    let mut summary = None;
    if o.commit != n.commit {
        let listed = match (&o.commit, &n.commit) {
            (Some(_), Some(_)) => files,
            _ => None,
        };
        match listed {
            Some(stats) => {
                let (added, removed) = stats
                    .iter()
                    .fold((0, 0), |(a, r), f| (a + f.added, r + f.removed));
                let mut unchanged: BTreeSet<String> = stats
                    .iter()
                    .filter(|f| f.unchanged)
                    .map(|f| f.path.clone())
                    .collect();
                let mut paths: Vec<String> = stats.iter().map(|f| f.path.clone()).collect();
                // Uncommitted edits on either side count too.
                paths.extend(o.changed_paths.iter().cloned());
                paths.extend(n.changed_paths.iter().cloned());
                paths.sort();
                paths.dedup();
                for p in o.changed_paths.iter().chain(&n.changed_paths) {
                    unchanged.remove(p);
                }
                let (rule, lead, s) = classify_paths(
                    &paths,
                    &unchanged,
                    Some((added, removed)),
                    "the code changed between the two commits",
                    ctx,
                );
                summary = Some(s);
                out.push(Change::from_rule(
                    rule,
                    Section::Git,
                    "commit",
                    lead,
                    short(&o.commit),
                    short(&n.commit),
                ));
            }
            None => {
                notes.push("the files changed between the two commits could not be listed (run inside the repository or pass --repo)".into());
                out.push(Change::from_rule(
                    &rules::GIT_UNLISTED,
                    Section::Git,
                    "commit",
                    "",
                    short(&o.commit),
                    short(&n.commit),
                ));
            }
        }
    } else if o.dirty_digest != n.dirty_digest {
        // With the same commit, the recorded digests tell whether the uncommitted change
        // differs, and the recorded path lists name the files. A path changed identically on
        // both sides cannot be told apart by the lists alone, so all listed paths count.
        let mut paths: Vec<String> = o
            .changed_paths
            .iter()
            .chain(&n.changed_paths)
            .cloned()
            .collect();
        paths.sort();
        paths.dedup();
        let (rule, lead, s) = classify_paths(
            &paths,
            &BTreeSet::new(),
            None,
            "the uncommitted changes differ",
            ctx,
        );
        summary = Some(s);
        let digest = |d: &Option<String>| Some(d.as_deref().map_or("clean".into(), digest_short));
        out.push(Change::from_rule(
            rule,
            Section::Git,
            "uncommitted changes",
            lead,
            digest(&o.dirty_digest),
            digest(&n.dirty_digest),
        ));
    }
    if o.branch != n.branch {
        out.push(Change::from_rule(
            &rules::GIT_BRANCH,
            Section::Git,
            "branch",
            "",
            o.branch.clone(),
            n.branch.clone(),
        ));
    }
    if o.remote != n.remote {
        out.push(Change::from_rule(
            &rules::GIT_REMOTE,
            Section::Git,
            "remote",
            "",
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
    for (path, a, b) in outer_join(&os, &ns) {
        let (a, b) = (a.cloned().flatten(), b.cloned().flatten());
        if a != b {
            out.push(Change::from_rule(
                &rules::GIT_SUBMODULE,
                Section::Git,
                format!("submodule {path}"),
                "",
                short(&a),
                short(&b),
            ));
        }
    }
    summary
}
