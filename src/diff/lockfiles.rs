//! The `lockfiles` section: lockfiles added or removed, and their packages one by one.

use super::*;
use crate::lockfile::{deciding_lockfile, is_input_or_pin};
use crate::version::{self, VersionChange};

pub(super) fn compare_lockfiles(
    old: &[Lockfile],
    new: &[Lockfile],
    files: Option<&[FileStat]>,
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
                if b.ecosystem == "go" && a.format_version != b.format_version {
                    go_toolchain(path, a, b, out);
                }
                if a.sha256 == b.sha256 && a.packages == b.packages {
                    continue;
                }
                if b.ecosystem == "toolchain" {
                    compare_toolchain(path, &a.packages, &b.packages, out);
                } else if let Some(lock) =
                    deciding_lockfile(b, new).or_else(|| deciding_lockfile(a, old))
                {
                    compare_locked_input(path, lock, &a.packages, &b.packages, ctx, out);
                } else {
                    compare_packages(path, &b.ecosystem, &a.packages, &b.packages, ctx, out);
                }
            }
            (Some(a), None) => one_side(a, false, old, new, files, ctx, out),
            (None, Some(b)) => one_side(b, true, new, old, files, ctx, out),
            (None, None) => {}
        }
    }
}

/// A changed input where a lockfile decides: each declared change, as information.
fn compare_locked_input(
    path: &str,
    lock: &Lockfile,
    old: &[Package],
    new: &[Package],
    ctx: &Context<'_>,
    out: &mut Vec<Change>,
) {
    for (name, a, b) in changed_names(old, new) {
        let (a, b) = (&a, &b);
        if let Some(c) = stale_lock(path, lock, name, b, ctx) {
            out.push(c);
            continue;
        }
        let v = |ps: &Vec<&Package>| (!ps.is_empty()).then(|| versions(ps));
        let mut c = Change::from_rule(
            &rules::PKG_INPUT_LOCKED,
            Section::Lockfiles,
            format!("{path}: {name}"),
            format!(
                "{name}'s declaration changed, but `{}` decides what is installed",
                lock.path
            ),
            v(a),
            v(b),
        );
        c.package = Some(name.to_string());
        c.lockfiles.push(path.to_string());
        out.push(c);
    }
}

/// A declared range the lockfile beside it no longer satisfies (`torch>=2.9.1` over a lock
/// of torch 2.8.0, the input bumped without locking again): the locker resolves again on the
/// next sync or install (uv, Poetry, PDM check that the lock matches its inputs), so the
/// version moves at least to the range's lower bound. Judged as that version change.
fn stale_lock(
    path: &str,
    lock: &Lockfile,
    name: &str,
    declared: &[&Package],
    ctx: &Context<'_>,
) -> Option<Change> {
    if lock.ecosystem != "pypi" {
        return None;
    }
    let locked: Vec<&Package> = lock.packages.iter().filter(|p| p.name == name).collect();
    // A declaration (the main list, an extra, a group) that every locked version fails. A
    // lock may hold several versions of one package for different markers or extras (uv's
    // forks): one that satisfies the declaration is the one its fork installs.
    let (spec, excluded) = declared
        .iter()
        .filter(|d| d.source.is_none())
        .find_map(|d| {
            let spec = d.version.as_str();
            let all_fail = !locked.is_empty()
                && locked
                    .iter()
                    .all(|p| version::admits(spec, &p.version) == Some(false));
            // Every fork moves; the lowest locked version makes the largest step.
            let lowest = locked.iter().min_by(|x, y| {
                version::compare("pypi", &x.version, &y.version)
                    .unwrap_or(std::cmp::Ordering::Equal)
            });
            all_fail.then_some(()).and(lowest).map(|p| (spec, *p))
        })?;
    let target = version::lowest_admitted(spec)
        .filter(|low| {
            version::compare("pypi", low, &excluded.version) == Some(std::cmp::Ordering::Greater)
        })
        .or_else(|| {
            version::newest_admitted(spec)
                .as_ref()
                .and_then(version::newest_stand_in)
        })?;
    let mut c = ctx.package_change(
        Some(path),
        Section::Lockfiles,
        format!("{path}: {name}"),
        name,
        rules::Installed::Always,
        ctx.compiled(name),
        PackageChange::Version {
            ecosystem: "pypi",
            old: &excluded.version,
            new: &target,
        },
        (Some(excluded.version.clone()), Some(spec.to_string())),
    );
    c.reason = format!(
        "`{}` locks {name} {}, which the declared `{spec}` excludes: the next sync locks again; {}",
        lock.path, excluded.version, c.reason
    );
    Some(c)
}

/// Toolchain pins, one language at a time: the first (preferred) version of each side.
fn compare_toolchain(path: &str, old: &[Package], new: &[Package], out: &mut Vec<Change>) {
    let (og, ng) = (group_by_name(old), group_by_name(new));
    let (og, ng) = (
        og.iter().map(|(n, ps)| (*n, ps)),
        ng.iter().map(|(n, ps)| (*n, ps)),
    );
    let first = |ps: Option<&Vec<&Package>>| {
        ps.and_then(|ps| ps.iter().find(|p| !p.optional).or(ps.first()))
            .map(|p| p.version.clone())
    };
    for (language, a, b) in outer_join(og, ng) {
        let (va, vb) = (first(a), first(b));
        if va == vb {
            continue;
        }
        let (rule, lead): (&'static Rule, String) = match language {
            "python" => {
                let step = match (&va, &vb) {
                    (Some(x), Some(y)) => version::classify("pypi", x, y),
                    _ => VersionChange::Unknown,
                };
                let rule = if step == VersionChange::Patch {
                    &super::stack::PY_MICRO
                } else {
                    &super::stack::PY_MINOR
                };
                (rule, "the pinned Python version changed".to_string())
            }
            "go" => (&rules::TOOLCHAIN_GO, "the Go toolchain changed".to_string()),
            other => (
                &rules::TOOLCHAIN_OTHER,
                format!("the pinned {other} toolchain changed"),
            ),
        };
        out.push(Change::from_rule(
            rule,
            Section::Lockfiles,
            format!("{path}: {language}"),
            lead,
            va,
            vb,
        ));
    }
}

/// `go.mod`'s `go` and `toolchain` lines, recorded as its format version: the toolchain that
/// builds the module (the `toolchain` line when there is one, else the `go` line; Go
/// documentation, "Go Toolchains").
fn go_toolchain(path: &str, a: &Lockfile, b: &Lockfile, out: &mut Vec<Change>) {
    let (va, vb) = (a.format_version.clone(), b.format_version.clone());
    compare_toolchain(
        path,
        &[toolchain_pin("go", va)],
        &[toolchain_pin("go", vb)],
        out,
    );
}

fn toolchain_pin(language: &str, version: Option<String>) -> Package {
    Package {
        name: language.to_string(),
        version: version.unwrap_or_default(),
        ..Package::default()
    }
}

/// A lockfile, input or pin recorded on one side only.
fn one_side(
    l: &Lockfile,
    added: bool,
    this: &[Lockfile],
    other: &[Lockfile],
    files: Option<&[FileStat]>,
    ctx: &Context<'_>,
    out: &mut Vec<Change>,
) {
    let changed_in_git = files.is_some_and(|fs| fs.iter().any(|f| f.path == l.path));
    if is_input_or_pin(l) && !changed_in_git && !other.iter().any(is_input_or_pin) {
        let verb = if added { "added" } else { "removed" };
        let count = Some(format!("{} packages", l.packages.len()));
        let (old, new) = if added { (None, count) } else { (count, None) };
        out.push(Change::from_rule(
            &rules::LOCK_INPUT_FIRST_RECORDED,
            Section::Lockfiles,
            format!("{} ({})", l.path, l.ecosystem),
            format!("recorded on one side only ({verb}); the other manifest records no dependency inputs or toolchain pins at all"),
            old,
            new,
        ));
        return;
    }
    // The other side's packages are none.
    let (a, b): (&[Package], &[Package]) = if added {
        (&[], &l.packages)
    } else {
        (&l.packages, &[])
    };
    if l.ecosystem == "toolchain" {
        compare_toolchain(&l.path, a, b, out);
        return;
    }
    if let Some(lock) = deciding_lockfile(l, this) {
        compare_locked_input(&l.path, lock, a, b, ctx, out);
        return;
    }
    out.push(whole_lockfile(l, added, ctx));
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

/// How a declared range moved, when either side is a range (one entry a side).
enum RangeStep {
    /// The newest version admitted is the same.
    SameNewest,
    /// Stand-ins for the newest version admitted on each side (see
    /// [`version::newest_stand_in`]).
    Newest(String, String),
}

fn declared_range_step(a: &BTreeSet<&String>, b: &BTreeSet<&String>) -> Option<RangeStep> {
    // A mention without a version (the package named again in an extra or a group, `numpy`)
    // adds no constraint beside one that has a version: it is left out of the comparison.
    let constrained = |s: &BTreeSet<&String>| -> BTreeSet<String> {
        let with: BTreeSet<String> = s
            .iter()
            .filter(|v| !v.is_empty())
            .map(|v| v.to_string())
            .collect();
        if with.is_empty() {
            s.iter().map(|v| v.to_string()).collect()
        } else {
            with
        }
    };
    let (a, b) = (constrained(a), constrained(b));
    if a == b {
        return Some(RangeStep::SameNewest);
    }
    let (Some(x), Some(y)) = (a.first(), b.first()) else {
        return None;
    };
    if a.len() != 1 || b.len() != 1 || !(version::is_range(x) || version::is_range(y)) {
        return None;
    }
    let (nx, ny) = (version::newest_admitted(x)?, version::newest_admitted(y)?);
    if nx == ny {
        return Some(RangeStep::SameNewest);
    }
    Some(RangeStep::Newest(
        version::newest_stand_in(&nx)?,
        version::newest_stand_in(&ny)?,
    ))
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

/// The package names whose entries differ between two lists, with each side's entries (a
/// lockfile may hold several versions of one name). Most packages of a bumped lockfile did
/// not change: nothing is built for them.
fn changed_names<'a>(
    old: &'a [Package],
    new: &'a [Package],
) -> Vec<(&'a str, Vec<&'a Package>, Vec<&'a Package>)> {
    let (og, ng) = (group_by_name(old), group_by_name(new));
    let (og, ng) = (og.into_iter(), ng.into_iter());
    outer_join(og, ng)
        .filter_map(|(name, a, b)| {
            let (a, b) = (a.unwrap_or_default(), b.unwrap_or_default());
            let same = a.len() == b.len() && a.iter().zip(&b).all(|(x, y)| x == y);
            (!same).then_some((name, a, b))
        })
        .collect()
}

fn compare_packages(
    path: &str,
    ecosystem: &str,
    old: &[Package],
    new: &[Package],
    ctx: &Context<'_>,
    out: &mut Vec<Change>,
) {
    let is_input =
        crate::lockfile::Format::detect_path(path).is_some_and(crate::lockfile::Format::is_input);
    for (name, a, b) in changed_names(old, new) {
        let (a, b) = (&a, &b);
        let subject = format!("{path}: {name}");
        // In a dependency input, a package declared only in optional extras or non-default
        // groups (`[project.optional-dependencies] eval = [...]`) is installed only when asked
        // for; a numerical library keeps its own rules, and what an environment installed is
        // compared under `python`.
        let all = |f: fn(&Package) -> bool| a.iter().chain(b.iter()).all(|p| f(p));
        let installed = if all(|p| p.dev) {
            rules::Installed::ForDevelopment
        } else if is_input && all(|p| p.dev || p.optional) {
            rules::Installed::OnRequest
        } else {
            rules::Installed::Always
        };
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
                installed,
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
            let ranges = (ecosystem == "pypi")
                .then(|| declared_range_step(&av, &bv))
                .flatten();
            let change = if av == bv {
                PackageChange::Source
            } else if let Some(step) = &ranges {
                match step {
                    RangeStep::SameNewest => {
                        let mut c = Change::from_rule(
                            &rules::PKG_RANGE_SAME_NEWEST,
                            Section::Lockfiles,
                            subject,
                            format!("{name}'s declared range changed (or it was declared again without a version); the newest version it admits did not"),
                            Some(versions(a)),
                            Some(versions(b)),
                        );
                        c.package = Some(name.to_string());
                        c.lockfiles.push(path.to_string());
                        out.push(c);
                        continue;
                    }
                    RangeStep::Newest(o, n) => PackageChange::Range {
                        ecosystem,
                        old: o,
                        new: n,
                    },
                }
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
