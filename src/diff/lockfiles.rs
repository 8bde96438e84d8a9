//! The `lockfiles` section: lockfiles added or removed, and their packages one by one.

use super::*;

pub(super) fn compare_lockfiles(
    old: &[Lockfile],
    new: &[Lockfile],
    ctx: &Context<'_>,
    out: &mut Vec<Change>,
) {
    let index = |ls: &[Lockfile]| -> BTreeMap<String, usize> {
        ls.iter()
            .enumerate()
            .map(|(i, l)| (l.path.clone(), i))
            .collect()
    };
    let (oi, ni) = (index(old), index(new));
    for (path, a, b) in outer_join(&oi, &ni) {
        match (a.map(|&i| &old[i]), b.map(|&i| &new[i])) {
            (Some(a), Some(b))
                if a.sha256 != b.sha256
                    && (a.packages_omitted.is_some() || b.packages_omitted.is_some()) =>
            {
                let count = |l: &Lockfile| {
                    Some(match l.packages_omitted {
                        Some(n) => {
                            format!("{n} packages (not recorded), {}", digest_short(&l.sha256))
                        }
                        None => {
                            format!("{} packages, {}", l.packages.len(), digest_short(&l.sha256))
                        }
                    })
                };
                out.push(Change::from_rule(
                    &rules::LOCK_UNRECORDED,
                    Section::Lockfiles,
                    format!("{} ({})", b.path, b.ecosystem),
                    "the lockfile changed, and its packages were left out of a manifest (over the package limit); compare the files themselves".to_string(),
                    count(a),
                    count(b),
                ));
            }
            (Some(a), Some(b)) => {
                if a.sha256 != b.sha256 || a.packages != b.packages {
                    compare_packages(path, &b.ecosystem, &a.packages, &b.packages, ctx, out);
                }
            }
            (Some(a), None) => out.push(whole_lockfile(a, false, ctx)),
            (None, Some(b)) => out.push(whole_lockfile(b, true, ctx)),
            (None, None) => {}
        }
    }
}

fn whole_lockfile(l: &Lockfile, added: bool, ctx: &Context<'_>) -> Change {
    let numeric: Vec<&str> = l
        .packages
        .iter()
        .filter(|p| {
            rules::classify_package(&p.name, p.dev, None, &[&p.version], ctx.policy).class
                == crate::classes::PackageClass::Numeric
        })
        .map(|p| p.name.as_str())
        .collect();
    let verb = if added { "added" } else { "removed" };
    let scope = ctx.scope.as_ref();
    let (rule, lead) = if scope.is_some_and(|s| s.excludes_lockfile(&l.path)) {
        (
            &rules::LOCK_OUT_OF_SCOPE,
            format!("the lockfile was {verb}; the training job does not install from it"),
        )
    } else if l.packages_omitted.is_none()
        && !l.packages.is_empty()
        && matches!(l.ecosystem.as_str(), "pypi" | "conda")
        && scope.is_some_and(|s| l.packages.iter().all(|p| s.excludes_package(&p.name)))
    {
        (
            &rules::LOCK_OUT_OF_SCOPE,
            format!(
                "the lockfile was {verb} with {} package(s), none of which the training code imports, directly or through a dependency",
                l.packages.len()
            ),
        )
    } else if let Some(n) = l.packages_omitted {
        (
            &rules::LOCK_UNRECORDED,
            format!(
                "the lockfile was {verb} with {n} package(s), not recorded (over the package limit)"
            ),
        )
    } else if !numeric.is_empty() {
        (
            &rules::LOCK_NUMERIC,
            format!(
                "the lockfile was {verb} with {} package(s), among them numerical libraries ({})",
                l.packages.len(),
                some_paths(&numeric.iter().map(|s| s.to_string()).collect::<Vec<_>>())
            ),
        )
    } else if l.packages.is_empty() {
        (&rules::LOCK_EMPTY, format!("the lockfile was {verb}"))
    } else {
        (
            &rules::LOCK_OTHER,
            format!(
                "the lockfile was {verb} with {} package(s)",
                l.packages.len()
            ),
        )
    };
    let count = Some(format!("{} packages", l.packages.len()));
    let (old, new) = if added { (None, count) } else { (count, None) };
    Change::from_rule(
        rule,
        Section::Lockfiles,
        format!("{} ({})", l.path, l.ecosystem),
        lead,
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

/// The highest of several versions of one package (a lockfile may hold several).
fn highest<'a>(ecosystem: &str, vs: &BTreeSet<&'a String>) -> Option<&'a String> {
    vs.iter().copied().max_by(|x, y| {
        crate::version::compare(ecosystem, x, y).unwrap_or(std::cmp::Ordering::Equal)
    })
}

/// The packages by name, in name order (a lockfile may hold several versions of one name).
/// Collectors write packages sorted, so the sort only checks the order.
fn group_by_name(ps: &[Package]) -> Vec<(&str, Vec<&Package>)> {
    let mut refs: Vec<&Package> = ps.iter().collect();
    refs.sort_by(|a, b| a.name.cmp(&b.name));
    let mut out: Vec<(&str, Vec<&Package>)> = Vec::new();
    for p in refs {
        match out.last_mut() {
            Some((name, group)) if *name == p.name => group.push(p),
            _ => out.push((p.name.as_str(), vec![p])),
        }
    }
    out
}

fn compare_packages(
    path: &str,
    ecosystem: &str,
    old: &[Package],
    new: &[Package],
    ctx: &Context<'_>,
    out: &mut Vec<Change>,
) {
    let (og, ng) = (group_by_name(old), group_by_name(new));
    let empty = Vec::new();
    let (og, ng) = (
        og.iter().map(|(n, ps)| (*n, ps)),
        ng.iter().map(|(n, ps)| (*n, ps)),
    );
    for (name, a, b) in outer_join(og, ng) {
        let (a, b) = (a.unwrap_or(&empty), b.unwrap_or(&empty));
        // Most packages of a bumped lockfile did not change: nothing to build for them.
        if a.len() == b.len() && a.iter().zip(b).all(|(x, y)| x == y) {
            continue;
        }
        let subject = format!("{path}: {name}");
        let dev = a.iter().chain(b.iter()).all(|p| p.dev);
        // The installed copy first, else the wheels the lockfile lists (PEP 427 tags).
        let compiled = ctx.compiled(name).or_else(|| {
            a.iter()
                .chain(b.iter())
                .filter_map(|p| p.compiled)
                .reduce(|x, y| x || y)
        });
        let pkg = |subject: String, change, values| {
            ctx.package_change(
                Some(path),
                Section::Lockfiles,
                subject,
                name,
                dev,
                compiled,
                change,
                values,
            )
        };
        if a.is_empty() || b.is_empty() {
            let change = if a.is_empty() {
                PackageChange::Added
            } else {
                PackageChange::Removed
            };
            let v = |ps: &Vec<&Package>| Some(versions(ps)).filter(|s| !s.is_empty());
            out.push(pkg(subject, change, (v(a), v(b))));
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
            let change = if av == bv {
                PackageChange::Source
            } else {
                match (highest(ecosystem, &av), highest(ecosystem, &bv)) {
                    (Some(o), Some(n)) => PackageChange::Version {
                        ecosystem,
                        old: o,
                        new: n,
                    },
                    _ => PackageChange::Source,
                }
            };
            out.push(pkg(subject, change, (Some(versions(a)), Some(versions(b)))));
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
                out.push(pkg(
                    format!("{subject} {}", pa.version),
                    PackageChange::Rebuilt,
                    (pa.hashes.first().cloned(), pb.hashes.first().cloned()),
                ));
            }
            if pa.features != pb.features {
                out.push(pkg(
                    format!("{subject} {} features", pa.version),
                    PackageChange::Features,
                    (Some(pa.features.join(",")), Some(pb.features.join(","))),
                ));
            }
        }
    }
}
