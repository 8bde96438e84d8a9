//! Helpers shared by the Python lockfile parsers (`pylock.toml`, `poetry.lock`, `Pipfile.lock`,
//! `uv.lock`, `pdm.lock`) and the conda ones: turning a decoder's error into a
//! [`LockfileError`] with a line, writing hashes as `algo:hex`, and the common sort order.

use crate::error::LockfileError;

/// A TOML decoding error, with the line its span starts on.
pub(crate) fn toml_error(text: &str, path: &str, e: &toml::de::Error) -> LockfileError {
    LockfileError::at(
        path,
        e.span().map(|s| super::line_of(text, s.start)),
        e.message().trim().to_string(),
    )
}

/// A JSON decoding error; serde_json counts lines from 1 and reports 0 when it has none.
pub(crate) fn json_error(path: &str, e: &serde_json::Error) -> LockfileError {
    // serde_json's Display appends " at line L column C"; the line is reported separately.
    let message = e.to_string();
    let message = match message.rfind(" at line ") {
        Some(i) => message[..i].to_string(),
        None => message,
    };
    LockfileError::at(path, (e.line() > 0).then_some(e.line()), message)
}

/// Checks and normalizes one hash given as `algo:hex` (or `algo=hex`, as wheel RECORDs and some
/// URL fragments write it): lower-case algorithm and digest.
pub(crate) fn normalize_hash(raw: &str) -> Option<String> {
    let (algo, digest) = raw.split_once(':').or_else(|| raw.split_once('='))?;
    hash_pair(algo, digest)
}

/// `algo:hex` from an algorithm name and a hex digest, or `None` when either is malformed.
pub(crate) fn hash_pair(algo: &str, digest: &str) -> Option<String> {
    let algo = algo.trim();
    let digest = digest.trim();
    let algo_ok = !algo.is_empty() && algo.chars().all(|c| c.is_ascii_alphanumeric());
    let digest_ok = !digest.is_empty() && digest.chars().all(|c| c.is_ascii_hexdigit());
    (algo_ok && digest_ok).then(|| {
        format!(
            "{}:{}",
            algo.to_ascii_lowercase(),
            digest.to_ascii_lowercase()
        )
    })
}

/// The 1-based line where `needle` first occurs in `text`, to point at a value that a typed
/// decoder accepted but that fails a later check.
pub(crate) fn line_of_str(text: &str, needle: &str) -> Option<usize> {
    text.find(needle).map(|o| super::line_of(text, o))
}

/// Checks a hash read from `path`, naming the line where it is written when it is malformed.
pub(crate) fn checked_hash(text: &str, path: &str, raw: &str) -> Result<String, LockfileError> {
    normalize_hash(raw).ok_or_else(|| {
        LockfileError::at(
            path,
            line_of_str(text, raw),
            format!("malformed hash `{raw}` (expected ALGORITHM:HEXDIGEST)"),
        )
    })
}

/// Sorts and removes duplicate hashes in place.
pub(crate) fn tidy_hashes(hashes: &mut Vec<String>) {
    hashes.sort();
    hashes.dedup();
}

/// Joins marker expressions into one PEP 508 marker that holds when any of them holds.
pub(crate) fn any_of_markers(markers: &[String]) -> Option<String> {
    let markers: Vec<&str> = markers
        .iter()
        .map(|m| m.trim())
        .filter(|m| !m.is_empty())
        .collect();
    match markers.as_slice() {
        [] => None,
        [one] => Some((*one).to_string()),
        many => Some(
            many.iter()
                .map(|m| format!("({m})"))
                .collect::<Vec<_>>()
                .join(" or "),
        ),
    }
}

/// The order every parser returns: name, version, source, then platform; exact duplicates
/// (the same entry written twice, as pdm does once per extras set) are dropped.
/// A version-control source in the manifest's notation: `KIND+URL?rev=REQUESTED#COMMIT`, each
/// of the two suffixes present only when the lockfile records it.
pub(crate) fn vcs_source(
    kind: &str,
    url: &str,
    requested: Option<&str>,
    commit: Option<&str>,
) -> String {
    let rev = requested.map(|r| format!("?rev={r}")).unwrap_or_default();
    let commit = commit.map(|c| format!("#{c}")).unwrap_or_default();
    format!("{kind}+{url}{rev}{commit}")
}

pub(crate) use super::support::sort_packages;

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn hashes_are_checked_and_lower_cased() {
        assert_eq!(
            normalize_hash("SHA256:ABcd").as_deref(),
            Some("sha256:abcd")
        );
        assert_eq!(normalize_hash("md5=00ff").as_deref(), Some("md5:00ff"));
        assert_eq!(normalize_hash("sha256:"), None);
        assert_eq!(normalize_hash("sha256:xyz"), None);
        assert_eq!(normalize_hash("nodigest"), None);
    }

    #[test]
    fn markers_are_joined_with_or() {
        assert_eq!(any_of_markers(&[]), None);
        assert_eq!(
            any_of_markers(&["a == '1'".into()]).as_deref(),
            Some("a == '1'")
        );
        assert_eq!(
            any_of_markers(&["a == '1'".into(), "b == '2'".into()]).as_deref(),
            Some("(a == '1') or (b == '2')")
        );
    }

    #[test]
    fn json_errors_keep_the_line_apart() {
        let e = serde_json::from_str::<serde_json::Value>("{\n\"a\": }").unwrap_err();
        let err = json_error("x.json", &e);
        assert_eq!(err.line, Some(2));
        assert!(!err.message.contains("at line"), "{}", err.message);
    }
}
