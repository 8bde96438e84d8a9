//! Pinned `requirements*.txt` files as pip reads them.
//!
//! Grammar as implemented (pip's "Requirements File Format" documentation and PEP 508):
//! * `#` starts a comment when at the start of a line or after whitespace; a trailing `\` joins
//!   the next line;
//! * a requirement is `NAME[EXTRAS] SPECIFIER ; MARKER --hash=ALGO:DIGEST ...`, or
//!   `NAME @ URL ; MARKER`;
//! * `-e`/`--editable` lines name a local path or VCS URL (`#egg=NAME` gives the name);
//! * other option lines (`-r`, `-c`, `-i`, `--index-url`, `--find-links`…) are not packages and
//!   are skipped; their values may hold credentials and are never recorded.
//!
//! Names are normalized as PEP 503 says: lower case, runs of `-`, `_`, `.` become one `-`.

use crate::error::LockfileError;
use crate::lockfile::Parsed;
use crate::manifest::Package;
use crate::redact::scrub_url_credentials;

/// PEP 503 normalization of a distribution name.
pub fn normalize_name(name: &str) -> String {
    let mut out = String::with_capacity(name.len());
    let mut in_sep = false;
    for c in name.chars() {
        if matches!(c, '-' | '_' | '.') {
            if !in_sep {
                out.push('-');
            }
            in_sep = true;
        } else {
            out.push(c.to_ascii_lowercase());
            in_sep = false;
        }
    }
    out
}

/// Is this a valid PEP 508 distribution name?
fn is_valid_name(name: &str) -> bool {
    let bytes = name.as_bytes();
    !bytes.is_empty()
        && bytes[0].is_ascii_alphanumeric()
        && bytes[bytes.len() - 1].is_ascii_alphanumeric()
        && bytes
            .iter()
            .all(|b| b.is_ascii_alphanumeric() || matches!(b, b'-' | b'_' | b'.'))
}

/// Parses a requirements file; `path` only names the file in errors.
pub fn parse(text: &str, path: &str) -> Result<Parsed, LockfileError> {
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    let mut packages = Vec::new();
    for (line_no, logical) in logical_lines(text) {
        let line = strip_comment(&logical);
        let line = line.trim();
        if line.is_empty() {
            continue;
        }
        if let Some(rest) = line
            .strip_prefix("-e ")
            .or_else(|| line.strip_prefix("--editable "))
            .or_else(|| line.strip_prefix("--editable="))
        {
            packages.push(editable(rest.trim(), path, line_no)?);
            continue;
        }
        if line.starts_with('-') {
            continue;
        }
        packages.push(requirement(line, path, line_no)?);
    }
    packages.sort_by(|a: &Package, b| (&a.name, &a.version).cmp(&(&b.name, &b.version)));
    Ok(Parsed {
        format_version: None,
        packages,
        warnings: Vec::new(),
    })
}

/// Joins continuation lines; yields the 1-based number of each logical line's first line.
fn logical_lines(text: &str) -> Vec<(usize, String)> {
    let mut out = Vec::new();
    let mut current = String::new();
    let mut start = 0;
    for (i, raw) in text.lines().enumerate() {
        let raw = raw.strip_suffix('\r').unwrap_or(raw);
        if current.is_empty() {
            start = i + 1;
        }
        match raw.strip_suffix('\\') {
            Some(head) => {
                current.push_str(head);
                current.push(' ');
            }
            None => {
                current.push_str(raw);
                out.push((start, std::mem::take(&mut current)));
            }
        }
    }
    if !current.is_empty() {
        out.push((start, current));
    }
    out
}

fn strip_comment(line: &str) -> &str {
    if line.trim_start().starts_with('#') {
        return "";
    }
    match line.find(" #").or_else(|| line.find("\t#")) {
        Some(i) => &line[..i],
        None => line,
    }
}

fn requirement(line: &str, path: &str, line_no: usize) -> Result<Package, LockfileError> {
    let err = |m: String| LockfileError::at(path, Some(line_no), m);
    // Split off `--hash` options, which pip allows after the requirement.
    let mut hashes = Vec::new();
    let mut req_part = String::new();
    let mut tokens = line.split_whitespace().peekable();
    while let Some(tok) = tokens.next() {
        if let Some(h) = tok.strip_prefix("--hash=") {
            hashes.push(h.to_string());
        } else if tok == "--hash" {
            match tokens.next() {
                Some(h) => hashes.push(h.to_string()),
                None => return Err(err("`--hash` without a value".into())),
            }
        } else if tok.starts_with("--") {
            // Per-requirement options such as --config-settings: not part of the identity.
        } else {
            req_part.push_str(tok);
            req_part.push(' ');
        }
    }
    for h in &hashes {
        let valid = h.split_once(':').is_some_and(|(algo, digest)| {
            !algo.is_empty() && !digest.is_empty() && digest.chars().all(|c| c.is_ascii_hexdigit())
        });
        if !valid {
            return Err(err(format!(
                "malformed hash `{h}` (expected ALGORITHM:HEXDIGEST)"
            )));
        }
    }
    hashes.sort();
    let req = req_part.trim();
    let req = req.split_once(';').map_or(req, |(r, _marker)| r).trim();

    // `name @ url`
    if let Some((name, url)) = req.split_once(" @ ").or_else(|| {
        req.split_once('@')
            .filter(|(n, _)| is_valid_name(strip_extras(n.trim())))
    }) {
        let name = strip_extras(name.trim());
        if !is_valid_name(name) {
            return Err(err(format!("`{name}` is not a valid package name")));
        }
        return Ok(Package {
            name: normalize_name(name),
            version: String::new(),
            source: Some(scrub_url_credentials(url.trim())),
            hashes,
            ..Package::default()
        });
    }

    let name_end = req
        .find(|c: char| !(c.is_ascii_alphanumeric() || matches!(c, '-' | '_' | '.')))
        .unwrap_or(req.len());
    let name = &req[..name_end];
    if !is_valid_name(name) {
        return Err(err(format!(
            "`{}` does not start with a valid package name",
            req.chars().take(40).collect::<String>()
        )));
    }
    let mut rest = req[name_end..].trim_start();
    if rest.starts_with('[') {
        let close = rest
            .find(']')
            .ok_or_else(|| err("unclosed `[` in extras".into()))?;
        rest = rest[close + 1..].trim_start();
    }
    let spec: String = rest.split_whitespace().collect();
    let version = if let Some(v) = spec.strip_prefix("===") {
        v.to_string()
    } else if let Some(v) = spec.strip_prefix("==") {
        if v.is_empty() {
            return Err(err(format!("`{name}==` has no version")));
        }
        v.to_string()
    } else {
        // Unpinned: keep the specifier itself so that a change is still visible.
        spec
    };
    Ok(Package {
        name: normalize_name(name),
        version,
        hashes,
        ..Package::default()
    })
}

fn strip_extras(name: &str) -> &str {
    name.split_once('[').map_or(name, |(n, _)| n).trim()
}

fn editable(target: &str, path: &str, line_no: usize) -> Result<Package, LockfileError> {
    let name = target
        .split_once("#egg=")
        .map(|(_, egg)| egg.split('&').next().unwrap_or(egg))
        .or_else(|| {
            target
                .trim_end_matches('/')
                .rsplit('/')
                .next()
                .filter(|n| is_valid_name(n))
        })
        .ok_or_else(|| {
            LockfileError::at(path, Some(line_no), "editable requirement without a name")
        })?;
    Ok(Package {
        name: normalize_name(name),
        version: String::new(),
        source: Some(format!("editable+{}", scrub_url_credentials(target))),
        ..Package::default()
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn pep503_examples() {
        // PEP 503, "Normalized Names": these all normalize to `friendly-bard`.
        for n in [
            "friendly-bard",
            "Friendly-Bard",
            "FRIENDLY-BARD",
            "friendly.bard",
            "friendly_bard",
            "friendly--bard",
            "FrIeNdLy-._.-bArD",
        ] {
            assert_eq!(normalize_name(n), "friendly-bard", "{n}");
        }
    }

    #[test]
    fn pinned_with_hashes_markers_and_continuations() {
        // Shape written by `pip-compile --generate-hashes` and `pip freeze` (pip docs,
        // "Requirements File Format" and "Hash-checking mode").
        let text = "# comment\nNumPy==1.26.4 \\\n    --hash=sha256:aa \\\n    --hash=sha256:bb\nscikit_learn[alldeps]==1.5.0 ; python_version >= \"3.9\"  # trailing\n-i https://user:pw@index.invalid/simple\n-r other.txt\n";
        let parsed = parse(text, "requirements.txt").unwrap();
        assert_eq!(parsed.packages.len(), 2);
        assert_eq!(parsed.packages[0].name, "numpy");
        assert_eq!(parsed.packages[0].version, "1.26.4");
        assert_eq!(parsed.packages[0].hashes, ["sha256:aa", "sha256:bb"]);
        assert_eq!(parsed.packages[1].name, "scikit-learn");
        assert_eq!(parsed.packages[1].version, "1.5.0");
    }

    #[test]
    fn urls_and_editables() {
        let text = "torch @ https://tok:x@files.invalid/torch-2.3.0.whl\n-e git+https://host.invalid/org/lib.git@abc123#egg=My_Lib\n";
        let parsed = parse(text, "requirements.txt").unwrap();
        assert_eq!(parsed.packages[0].name, "my-lib");
        assert!(parsed.packages[0]
            .source
            .as_deref()
            .unwrap()
            .starts_with("editable+git+https://host.invalid/"));
        assert_eq!(
            parsed.packages[1].source.as_deref(),
            Some("https://files.invalid/torch-2.3.0.whl")
        );
    }

    #[test]
    fn errors_name_line() {
        let err = parse("numpy==1.0\n\n!!bad\n", "reqs/requirements.txt").unwrap_err();
        assert_eq!(err.line, Some(3));
        assert!(err.to_string().contains("`reqs/requirements.txt`, line 3"));
        let err = parse("numpy==1.0 --hash=sha256\n", "r.txt").unwrap_err();
        assert_eq!(err.line, Some(1));
    }
}
