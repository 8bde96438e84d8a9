//! `stamp --private`: what is hidden so that a manifest can be shared outside a team.
//!
//! Left out: the host name and the git remote URL. Replaced by a short digest
//! (`private:sha256:` + 16 hex digits, so two runs with the same value still compare equal):
//!
//! * environment values that hold a path or the user's login name;
//! * paths outside the repository: data inputs and `--lockfile` files given as absolute paths
//!   or reaching out with `..`;
//! * absolute paths inside package sources (`path+/home/…`, `file:///home/…`) and inside
//!   warnings.
//!
//! What stays: paths relative to the repository (they name the project's own files), package
//! names and versions, hardware and system facts, and thread or determinism settings.

use sha2::{Digest, Sha256};

use crate::manifest::{hex, Content};

/// The digest that replaces a private value.
pub fn digest(value: &str) -> String {
    format!(
        "private:sha256:{}",
        &hex(&Sha256::digest(value.as_bytes()))[..16]
    )
}

/// True when a path as written points outside the repository: absolute, or climbing out with
/// `..`.
pub fn is_outside_path(path: &str) -> bool {
    path.starts_with('/')
        || path.starts_with('\\')
        || path.get(1..3) == Some(":\\")
        || path == ".."
        || path.starts_with("../")
        || path.contains("/../")
}

/// A path for the manifest: unchanged when it stays inside the repository, else its digest.
pub fn private_path(path: &str) -> String {
    if is_outside_path(path) {
        digest(path)
    } else {
        path.to_string()
    }
}

/// Replaces every absolute path in free text (one starting with `/` at the start of the text
/// or after a space, quote, backtick, parenthesis, `=`, `+` or `file://`) by its digest.
pub fn hide_absolute_paths(text: &str) -> String {
    let is_end = |c: char| c.is_whitespace() || matches!(c, '`' | '"' | '\'' | ')' | ',' | ';');
    let mut out = String::with_capacity(text.len());
    let mut rest = text;
    let mut prev: Option<char> = None;
    while let Some(c) = rest.chars().next() {
        let starts_path = c == '/'
            && (prev.is_none_or(|p| {
                p.is_whitespace() || matches!(p, '`' | '"' | '\'' | '(' | '=' | '+' | ':')
            }) || out.ends_with("file://"));
        if starts_path && rest.starts_with("//") && out.ends_with("file:") {
            // `file:///abs/path`: the path starts at the third slash.
            out.push_str("//");
            prev = Some('/');
            rest = &rest[2..];
        } else if starts_path {
            let end = rest.find(is_end).unwrap_or(rest.len());
            let path = &rest[..end];
            // `//host` after a URL scheme is not a local path.
            if path.starts_with("//") {
                out.push_str(path);
            } else {
                out.push_str(&digest(path));
            }
            prev = path.chars().last();
            rest = &rest[end..];
        } else {
            out.push(c);
            prev = Some(c);
            rest = &rest[c.len_utf8()..];
        }
    }
    out
}

/// True when `value` contains `user` as a whole word (delimited by anything but letters and
/// digits).
fn contains_word(value: &str, user: &str) -> bool {
    value
        .split(|c: char| !c.is_alphanumeric())
        .any(|w| w == user)
}

/// Applies `--private` to collected content and warnings. `user` is the login name when
/// known; names shorter than three characters are not searched for, as they match too much.
pub fn apply(content: &mut Content, warnings: &mut [String], user: Option<&str>) {
    let user = user.filter(|u| u.chars().count() >= 3);
    for value in content.env.vars.values_mut() {
        let has_user = user.is_some_and(|u| contains_word(value, u));
        if !value.starts_with("private:sha256:") && (value.contains('/') || has_user) {
            *value = digest(value);
        }
    }
    for lockfile in &mut content.lockfiles {
        lockfile.path = private_path(&lockfile.path);
        for package in &mut lockfile.packages {
            if let Some(source) = &mut package.source {
                *source = hide_absolute_paths(source);
            }
        }
    }
    for input in &mut content.data {
        if !input.path.starts_with("private:sha256:") {
            input.path = private_path(&input.path);
        }
    }
    content.git.remote = None;
    for warning in warnings.iter_mut() {
        let mut hidden = hide_absolute_paths(warning);
        if let Some(u) = user {
            if contains_word(&hidden, u) {
                hidden = hidden
                    .split_inclusive(|c: char| !c.is_alphanumeric())
                    .map(|piece| {
                        let word = piece.trim_end_matches(|c: char| !c.is_alphanumeric());
                        if word == u {
                            format!("[user]{}", &piece[word.len()..])
                        } else {
                            piece.to_string()
                        }
                    })
                    .collect();
            }
        }
        *warning = hidden;
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn absolute_paths_in_text_are_hidden() {
        let t = hide_absolute_paths("data `/home/alice/x.csv`: cannot read (see /tmp/y)");
        assert!(!t.contains("alice") && !t.contains("/tmp/y"), "{t}");
        assert!(t.starts_with("data `private:sha256:"), "{t}");
        assert_eq!(
            hide_absolute_paths("https://host.invalid/a/b and a/b"),
            "https://host.invalid/a/b and a/b"
        );
        let f = hide_absolute_paths("file:///home/alice/p.whl");
        assert!(f.starts_with("file://private:sha256:"), "{f}");
        let p = hide_absolute_paths("path+/home/alice/crate");
        assert!(p.starts_with("path+private:sha256:"), "{p}");
    }

    #[test]
    fn outside_paths() {
        for p in ["/a", "../x", "a/../../b", ".."] {
            assert!(is_outside_path(p), "{p}");
        }
        for p in ["a/b", "requirements.txt", "..hidden"] {
            assert!(!is_outside_path(p), "{p}");
        }
    }

    #[test]
    fn user_name_in_values_and_warnings() {
        let mut c = Content::default();
        c.env
            .vars
            .insert("CONDA_DEFAULT_ENV".into(), "alice-gpu".into());
        c.env.vars.insert("OMP_NUM_THREADS".into(), "4".into());
        let mut w = vec!["lockfile owned by alice: bad".to_string()];
        apply(&mut c, &mut w, Some("alice"));
        assert!(c.env.vars["CONDA_DEFAULT_ENV"].starts_with("private:"));
        assert_eq!(c.env.vars["OMP_NUM_THREADS"], "4");
        assert_eq!(w[0], "lockfile owned by [user]: bad");
    }
}
