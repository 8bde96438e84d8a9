//! Version ordering and the kind of a version change, by each ecosystem's own rules:
//! PEP 440 for Python (`pypi`, `conda`), SemVer 2.0.0 for Cargo, npm, Go and NuGet, and a
//! dotted-number fallback for everything else or for versions the strict rules reject.

use std::cmp::Ordering;
use std::str::FromStr;

use serde::{Deserialize, Serialize};

/// What kind of change a version bump is.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum VersionChange {
    /// The first release number grew (for `0.x`, the second: SemVer's initial-development rule).
    Major,
    /// The minor number grew.
    Minor,
    /// A smaller step: patch, post-release, build or local label.
    Patch,
    /// A calendar-versioned package (first number a year, as in `2024.8.30`) moved to a
    /// later release: calendar versioning promises no compatibility meaning, so a new year is
    /// judged like a minor release, not a major one.
    Calendar,
    /// One side is a pre-release (alpha, beta, rc, dev).
    PreRelease,
    /// The new version is lower than the old one.
    Downgrade,
    /// The versions could not be ordered (not versions, or unparsable).
    Unknown,
}

impl VersionChange {
    /// A short phrase for reports.
    pub fn phrase(self) -> &'static str {
        match self {
            VersionChange::Major => "major version change",
            VersionChange::Minor => "minor version change",
            VersionChange::Patch => "patch-level version change",
            VersionChange::Calendar => "calendar-versioned release",
            VersionChange::PreRelease => "change to or from a pre-release",
            VersionChange::Downgrade => "downgrade",
            VersionChange::Unknown => "version change",
        }
    }
}

/// A parsed version: its release numbers, whether it is a pre-release, and an ordering key.
enum Parsed {
    Pep440(pep440_rs::Version),
    Semver(semver::Version),
    Dotted(Vec<u64>, bool),
}

impl Parsed {
    fn release(&self) -> Vec<u64> {
        match self {
            Parsed::Pep440(v) => v.release().to_vec(),
            Parsed::Semver(v) => vec![v.major, v.minor, v.patch],
            Parsed::Dotted(r, _) => r.clone(),
        }
    }

    fn is_pre(&self) -> bool {
        match self {
            Parsed::Pep440(v) => v.any_prerelease(),
            Parsed::Semver(v) => !v.pre.is_empty(),
            Parsed::Dotted(_, pre) => *pre,
        }
    }

    fn cmp(&self, other: &Parsed) -> Option<Ordering> {
        match (self, other) {
            (Parsed::Pep440(a), Parsed::Pep440(b)) => Some(a.cmp(b)),
            (Parsed::Semver(a), Parsed::Semver(b)) => Some(a.cmp_precedence(b)),
            _ => {
                let (a, b) = (self.release(), other.release());
                let n = a.len().max(b.len());
                let pad = |v: &[u64]| {
                    (0..n)
                        .map(|i| v.get(i).copied().unwrap_or(0))
                        .collect::<Vec<_>>()
                };
                Some(
                    pad(&a)
                        .cmp(&pad(&b))
                        .then(other.is_pre().cmp(&self.is_pre())),
                )
            }
        }
    }
}

fn is_pep440(ecosystem: &str) -> bool {
    matches!(ecosystem, "pypi" | "conda")
}

fn parse(ecosystem: &str, text: &str) -> Option<Parsed> {
    let text = text.trim();
    // A container image tag: leading dotted numbers, then a variant (`3.12-slim`,
    // `12.4.1-cudnn-runtime-ubuntu22.04`), not a pre-release.
    if ecosystem == "oci" {
        return match dotted(text)? {
            Parsed::Dotted(release, _) => Some(Parsed::Dotted(release, false)),
            other => Some(other),
        };
    }
    if is_pep440(ecosystem) {
        if let Ok(v) = text.parse::<pep440_rs::Version>() {
            return Some(Parsed::Pep440(v));
        }
    } else if let Ok(v) = semver::Version::parse(text.strip_prefix('v').unwrap_or(text)) {
        return Some(Parsed::Semver(v));
    }
    dotted(text)
}

/// Leading dotted numbers (`1.2.3.4`, `v2.0`, `2.36-rc1`); a non-numeric tail marks a
/// pre-release.
fn dotted(text: &str) -> Option<Parsed> {
    let text = text.strip_prefix('v').unwrap_or(text);
    let end = text
        .find(|c: char| !(c.is_ascii_digit() || c == '.'))
        .unwrap_or(text.len());
    let release: Vec<u64> = text[..end]
        .split('.')
        .filter(|s| !s.is_empty())
        .map(|s| s.parse().ok())
        .collect::<Option<_>>()?;
    if release.is_empty() {
        return None;
    }
    let tail = &text[end..];
    let pre = !tail.is_empty() && !tail.starts_with('+');
    Some(Parsed::Dotted(release, pre))
}

/// Orders two versions by the ecosystem's rules; `None` when either is not a version.
pub fn compare(ecosystem: &str, a: &str, b: &str) -> Option<Ordering> {
    parse(ecosystem, a)?.cmp(&parse(ecosystem, b)?)
}

/// Classifies the change from `old` to `new`.
pub fn classify(ecosystem: &str, old: &str, new: &str) -> VersionChange {
    let (Some(a), Some(b)) = (parse(ecosystem, old), parse(ecosystem, new)) else {
        return VersionChange::Unknown;
    };
    match a.cmp(&b) {
        None => return VersionChange::Unknown,
        Some(Ordering::Greater) => return VersionChange::Downgrade,
        _ => {}
    }
    if a.is_pre() || b.is_pre() {
        return VersionChange::PreRelease;
    }
    let (ra, rb) = (a.release(), b.release());
    let at = |r: &[u64], i: usize| r.get(i).copied().unwrap_or(0);
    // CalVer (calver.org): a four-digit year as the first number.
    let is_year = |n: u64| (1990..=2200).contains(&n);
    if at(&ra, 0) != at(&rb, 0) && is_year(at(&ra, 0)) && is_year(at(&rb, 0)) {
        VersionChange::Calendar
    } else if at(&ra, 0) != at(&rb, 0) {
        VersionChange::Major
    } else if at(&ra, 1) != at(&rb, 1) {
        // SemVer 2.0.0 item 4: in 0.y.z anything may change, so a 0.x minor step is breaking.
        if at(&ra, 0) == 0 && !is_pep440(ecosystem) {
            VersionChange::Major
        } else {
            VersionChange::Minor
        }
    } else {
        VersionChange::Patch
    }
}

/// The local label of a version (`2.1.0+cu121` → `cu121`): PEP 440 local version labels for
/// `pypi` and `conda`, SemVer build metadata elsewhere. PEP 440 says a local version "may not
/// contain the exact same code" as the public one.
pub fn local_label(version: &str) -> Option<&str> {
    version
        .split_once('+')
        .map(|(_, l)| l)
        .filter(|l| !l.is_empty())
}

/// The version without its local label.
pub fn public_part(version: &str) -> &str {
    version.split_once('+').map_or(version, |(p, _)| p)
}

/// True when two PEP 440 versions differ only in their post-release number (`1.2.3` against
/// `1.2.3.post1`): PEP 440 reserves post-releases for fixes that do not touch the distributed
/// software.
pub fn is_post_release_step(ecosystem: &str, old: &str, new: &str) -> bool {
    if !is_pep440(ecosystem) {
        return false;
    }
    let (Ok(a), Ok(b)) = (
        public_part(old).trim().parse::<pep440_rs::Version>(),
        public_part(new).trim().parse::<pep440_rs::Version>(),
    ) else {
        return false;
    };
    a.post() != b.post() && a.clone().with_post(None) == b.clone().with_post(None)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn ascending(ecosystem: &str, list: &[&str]) {
        for pair in list.windows(2) {
            assert_eq!(
                compare(ecosystem, pair[0], pair[1]),
                Some(Ordering::Less),
                "{} < {}",
                pair[0],
                pair[1]
            );
        }
    }

    #[test]
    fn semver_spec_precedence_examples() {
        // SemVer 2.0.0, item 11 (precedence), the two example chains given there.
        ascending("cargo", &["1.0.0", "2.0.0", "2.1.0", "2.1.1"]);
        ascending(
            "npm",
            &[
                "1.0.0-alpha",
                "1.0.0-alpha.1",
                "1.0.0-alpha.beta",
                "1.0.0-beta",
                "1.0.0-beta.2",
                "1.0.0-beta.11",
                "1.0.0-rc.1",
                "1.0.0",
            ],
        );
        // SemVer 2.0.0, item 10: build metadata does not take part in precedence.
        assert_eq!(
            compare("cargo", "1.0.0+build.1", "1.0.0+build.2"),
            Some(Ordering::Equal)
        );
    }

    #[test]
    fn pep440_summary_ordering_example() {
        // PEP 440, "Summary of permitted suffixes and relative ordering": the example list.
        ascending(
            "pypi",
            &[
                "1.dev0",
                "1.0.dev456",
                "1.0a1",
                "1.0a2.dev456",
                "1.0a12.dev456",
                "1.0a12",
                "1.0b1.dev456",
                "1.0b2",
                "1.0b2.post345.dev456",
                "1.0b2.post345",
                "1.0rc1.dev456",
                "1.0rc1",
                "1.0",
                "1.0+abc.5",
                "1.0+abc.7",
                "1.0+5",
                "1.0.post456.dev34",
                "1.0.post456",
                "1.0.15",
                "1.1.dev1",
            ],
        );
        // PEP 440, "Release segment": 1.0 and 1.0.0 are equal.
        assert_eq!(compare("pypi", "1.0", "1.0.0"), Some(Ordering::Equal));
    }

    #[test]
    fn kinds() {
        assert_eq!(classify("pypi", "1.26.4", "2.1.3"), VersionChange::Major);
        assert_eq!(classify("pypi", "1.5.1", "1.6.0"), VersionChange::Minor);
        assert_eq!(classify("pypi", "4.66.4", "4.67.1"), VersionChange::Minor);
        assert_eq!(classify("pypi", "2.2.2", "2.2.3"), VersionChange::Patch);
        assert_eq!(
            classify("pypi", "2.2.2", "2.2.2.post1"),
            VersionChange::Patch
        );
        assert_eq!(
            classify("pypi", "2.0.0", "2.1.0rc1"),
            VersionChange::PreRelease
        );
        assert_eq!(classify("pypi", "2.0", "1.9"), VersionChange::Downgrade);
        assert_eq!(classify("cargo", "0.15.6", "0.16.1"), VersionChange::Major);
        assert_eq!(classify("cargo", "1.0.0", "1.0.1"), VersionChange::Patch);
        assert_eq!(classify("go", "v1.2.3", "v1.3.0"), VersionChange::Minor);
        assert_eq!(
            classify("nuget", "4.7.0.1", "4.7.0.2"),
            VersionChange::Patch
        );
        assert_eq!(classify("pypi", "", "1.0"), VersionChange::Unknown);
    }

    #[test]
    fn local_labels_and_post_releases() {
        // PEP 440, "Local version identifiers" and "Post-releases".
        assert_eq!(local_label("2.1.0+cu121"), Some("cu121"));
        assert_eq!(local_label("2.1.0"), None);
        assert_eq!(public_part("2.1.0+cpu"), "2.1.0");
        assert!(is_post_release_step("pypi", "1.2.3", "1.2.3.post1"));
        assert!(!is_post_release_step("pypi", "1.2.3", "1.2.4"));
        assert!(!is_post_release_step("cargo", "1.2.3", "1.2.3.post1"));
    }
}

/// The newest version a PEP 440 specifier admits, which is what an installer resolving it
/// takes when a newer release exists (pip's resolver prefers the newest candidate; common
/// practice).
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Newest {
    /// No upper bound: the newest release.
    Unbounded,
    /// Below this version (`<V`, `~=`, `==V.*`).
    Below(pep440_rs::Version),
    /// This version or below (`<=V`, `==V`, `===V`, or a pinned version as written).
    AtMost(pep440_rs::Version),
}

/// True when a recorded Python version is a specifier (or empty: any version) rather than
/// one version.
pub fn is_range(version: &str) -> bool {
    version.is_empty() || version.starts_with(['<', '>', '=', '!', '~'])
}

/// The newest version admitted by `spec`: a PEP 440 specifier list, a bare version (as a
/// pinned requirement is recorded) or empty (any version). `None` when it does not parse.
pub fn newest_admitted(spec: &str) -> Option<Newest> {
    use pep440_rs::Operator;
    if spec.is_empty() {
        return Some(Newest::Unbounded);
    }
    if !is_range(spec) {
        return pep440_rs::Version::from_str(spec).ok().map(Newest::AtMost);
    }
    let specifiers = pep440_rs::VersionSpecifiers::from_str(spec).ok()?;
    let mut best = Newest::Unbounded;
    for s in specifiers.iter() {
        let v = s.version().clone();
        let bound = match s.operator() {
            Operator::LessThan => Newest::Below(v),
            Operator::LessThanEqual | Operator::Equal | Operator::ExactEqual => Newest::AtMost(v),
            Operator::EqualStar => Newest::Below(bump(&v, v.release().len().saturating_sub(1))),
            // `~=X.Y.Z` is `>=X.Y.Z, ==X.Y.*` (PEP 440, "Compatible release").
            Operator::TildeEqual => Newest::Below(bump(&v, v.release().len().saturating_sub(2))),
            _ => continue,
        };
        if tighter(&bound, &best) {
            best = bound;
        }
    }
    Some(best)
}

/// `v`'s release with part `i` raised by one and the parts after it dropped.
fn bump(v: &pep440_rs::Version, i: usize) -> pep440_rs::Version {
    let mut release: Vec<u64> = v.release().iter().take(i + 1).copied().collect();
    if let Some(last) = release.last_mut() {
        *last += 1;
    }
    pep440_rs::Version::new(release)
}

fn tighter(a: &Newest, b: &Newest) -> bool {
    let key = |n: &Newest| match n {
        Newest::Unbounded => None,
        Newest::Below(v) => Some((v.clone(), 0)),
        Newest::AtMost(v) => Some((v.clone(), 1)),
    };
    match (key(a), key(b)) {
        (Some(_), None) => true,
        (Some(x), Some(y)) => x < y,
        _ => false,
    }
}

/// A version standing for "the newest admitted" in version comparisons: the version itself
/// for `AtMost`; for `Below(V)`, a version just under `V` (`<2.2` → `2.1.999999`, `<2.0` →
/// `1.999999`), so that `<2.2` → `<2.4` reads as a minor step and `==1.26.4` → `<2.0` as one.
pub fn newest_stand_in(n: &Newest) -> Option<String> {
    const HIGH: u64 = 999_999;
    match n {
        Newest::Unbounded => None,
        Newest::AtMost(v) => Some(v.to_string()),
        Newest::Below(v) => {
            let mut release: Vec<u64> = v.release().to_vec();
            while release.len() > 1 && release.last() == Some(&0) {
                release.pop();
            }
            let last = release.len() - 1;
            if release[last] == 0 {
                return Some("0".into());
            }
            release[last] -= 1;
            release.push(HIGH);
            Some(
                release
                    .iter()
                    .map(u64::to_string)
                    .collect::<Vec<_>>()
                    .join("."),
            )
        }
    }
}

#[cfg(test)]
mod range_tests {
    use super::*;

    /// PEP 440, "Version specifiers": the compatible-release and prefix-matching examples
    /// (`~= 2.2` is `>= 2.2, == 2.*`; `~= 1.4.5` is `>= 1.4.5, == 1.4.*`).
    #[test]
    fn newest_admitted_by_specifiers() {
        let v = |s: &str| pep440_rs::Version::from_str(s).unwrap();
        assert_eq!(newest_admitted("~=2.2"), Some(Newest::Below(v("3"))));
        assert_eq!(newest_admitted("~=1.4.5"), Some(Newest::Below(v("1.5"))));
        assert_eq!(newest_admitted("==1.1.*"), Some(Newest::Below(v("1.2"))));
        assert_eq!(newest_admitted(">=2.1,<2.2"), Some(Newest::Below(v("2.2"))));
        assert_eq!(newest_admitted("<=2.4,<2.3"), Some(Newest::Below(v("2.3"))));
        assert_eq!(newest_admitted("<2.3,<=2.3"), Some(Newest::Below(v("2.3"))));
        assert_eq!(newest_admitted(">=2"), Some(Newest::Unbounded));
        assert_eq!(newest_admitted(""), Some(Newest::Unbounded));
        assert_eq!(newest_admitted("1.26.4"), Some(Newest::AtMost(v("1.26.4"))));
        assert_eq!(newest_admitted(">=1,<2 || >3"), None);
    }

    #[test]
    fn stand_ins_read_as_the_step_between_ranges() {
        let step = |a: &str, b: &str| {
            let (x, y) = (newest_admitted(a).unwrap(), newest_admitted(b).unwrap());
            classify(
                "pypi",
                &newest_stand_in(&x).unwrap(),
                &newest_stand_in(&y).unwrap(),
            )
        };
        assert_eq!(step(">=2.1,<2.2", ">=2.1,<2.4"), VersionChange::Minor);
        assert_eq!(step("==1.26.4", "<2.0"), VersionChange::Minor);
        assert_eq!(step("<2", "<3"), VersionChange::Major);
        assert_eq!(step("~=2.1.0", "~=2.1.3"), VersionChange::Patch);
        assert_eq!(step("<2.4", "<2.2"), VersionChange::Downgrade);
    }
}

/// Whether PEP 440 `spec` (a specifier list, or a bare version as pinned requirements are
/// recorded, or empty) admits `version`; `None` when either does not parse.
pub fn admits(spec: &str, version: &str) -> Option<bool> {
    let v = pep440_rs::Version::from_str(version).ok()?;
    if spec.is_empty() {
        return Some(true);
    }
    if !is_range(spec) {
        return Some(pep440_rs::Version::from_str(spec).ok()? == v);
    }
    let specifiers = pep440_rs::VersionSpecifiers::from_str(spec).ok()?;
    Some(specifiers.contains(&v))
}

/// The lowest version `spec` admits by its lower bounds (`>=X`, `>X`, `==X`, `~=X`, `===X`),
/// the highest of them when there are several; `None` without one.
pub fn lowest_admitted(spec: &str) -> Option<String> {
    use pep440_rs::Operator;
    if !is_range(spec) {
        return (!spec.is_empty()).then(|| spec.to_string());
    }
    let specifiers = pep440_rs::VersionSpecifiers::from_str(spec).ok()?;
    specifiers
        .iter()
        .filter(|s| {
            matches!(
                s.operator(),
                Operator::GreaterThanEqual
                    | Operator::GreaterThan
                    | Operator::Equal
                    | Operator::ExactEqual
                    | Operator::TildeEqual
                    | Operator::EqualStar
            )
        })
        .map(|s| s.version().clone())
        .max()
        .map(|v| v.to_string())
}

#[cfg(test)]
mod admits_tests {
    use super::*;

    /// PEP 440, "Version specifiers": inclusive and exclusive bounds, compatible release.
    #[test]
    fn admitted_versions() {
        assert_eq!(admits(">=2.9.1", "2.8.0"), Some(false));
        assert_eq!(admits(">=2.8.0", "2.8.0"), Some(true));
        assert_eq!(admits("~=2.2", "3.0"), Some(false));
        assert_eq!(admits("", "1.0"), Some(true));
        assert_eq!(admits("1.26.4", "1.26.4"), Some(true));
        assert_eq!(
            lowest_admitted(">=2.8,>=2.9.1,<3").as_deref(),
            Some("2.9.1")
        );
        assert_eq!(lowest_admitted("<3"), None);
    }
}
