//! Small pieces shared by the JavaScript, Go, .NET, R and Julia parsers: error conversion for
//! the JSON and YAML crates, integrity splitting, platform labels and the final ordering of a
//! package list.

use crate::error::LockfileError;
use crate::manifest::Package;

/// A `serde_json` error as a [`LockfileError`]; `serde_json` reports the line itself.
pub(crate) fn json_error(path: &str, e: &serde_json::Error) -> LockfileError {
    let line = (e.line() > 0).then_some(e.line());
    let message = match e.classify() {
        serde_json::error::Category::Eof => {
            "file ends in the middle of a JSON value (truncated?)".to_string()
        }
        _ => format!("not valid JSON: {}", strip_position(&e.to_string())),
    };
    LockfileError::at(path, line, message)
}

/// A YAML error as a [`LockfileError`], with the line where the YAML crate knows it.
pub(crate) fn yaml_error(path: &str, e: &yaml_serde::Error) -> LockfileError {
    LockfileError::at(
        path,
        e.location().map(|l| l.line()),
        format!("not valid YAML: {}", strip_position(&e.to_string())),
    )
}

/// Drops the trailing " at line N column M" both serde crates append, since the error type
/// already prints the line.
fn strip_position(message: &str) -> &str {
    match message.rfind(" at line ") {
        Some(i) => &message[..i],
        None => message,
    }
}

/// The deepest flow nesting (`[`, `{`) a YAML lockfile may have. Real lockfiles nest a few
/// levels; the YAML parser slows down sharply on deep flow nesting (100,000 levels take over a
/// minute), so deeper input is refused before it reaches the parser.
pub(crate) const MAX_YAML_FLOW_DEPTH: usize = 256;

/// Refuses YAML whose flow collections nest deeper than [`MAX_YAML_FLOW_DEPTH`]. Brackets
/// inside quoted scalars and comments are not counted; a bracket inside a plain scalar is, which
/// can only over-count and never lets deep input through.
pub(crate) fn check_yaml_depth(text: &str, path: &str) -> Result<(), LockfileError> {
    let mut depth = 0usize;
    let mut line = 1;
    let mut quote: Option<char> = None;
    let mut prev = '\n';
    let mut chars = text.chars().peekable();
    while let Some(c) = chars.next() {
        if c == '\n' {
            line += 1;
        }
        match quote {
            Some('"') if c == '\\' => {
                chars.next();
            }
            Some('\'') if c == '\'' && chars.peek() == Some(&'\'') => {
                chars.next();
            }
            Some(q) if c == q => quote = None,
            Some(_) => {}
            None => match c {
                '"' | '\'' => quote = Some(c),
                '#' if prev.is_whitespace() => {
                    for n in chars.by_ref() {
                        if n == '\n' {
                            line += 1;
                            break;
                        }
                    }
                }
                '[' | '{' => {
                    depth += 1;
                    if depth > MAX_YAML_FLOW_DEPTH {
                        return Err(LockfileError::at(
                            path,
                            Some(line),
                            format!(
                                "YAML nested more than {MAX_YAML_FLOW_DEPTH} levels deep; not a lockfile"
                            ),
                        ));
                    }
                }
                ']' | '}' => depth = depth.saturating_sub(1),
                _ => {}
            },
        }
        prev = c;
    }
    Ok(())
}

/// The hashes of an SRI `integrity` value, kept as written (`sha512-…`, `sha1-…`). The field may
/// hold several space-separated hashes (W3C Subresource Integrity, section 3.5).
pub(crate) fn sri_hashes(integrity: Option<&str>) -> Vec<String> {
    integrity
        .map(|i| i.split_whitespace().map(str::to_string).collect())
        .unwrap_or_default()
}

/// A platform label from npm/pnpm-style `os`, `cpu` and `libc` lists, in the shape Yarn writes
/// its `conditions` (`os=linux & cpu=x64`); lists are joined with `,` as written.
pub(crate) fn platform_label(os: &[String], cpu: &[String], libc: &[String]) -> Option<String> {
    let parts: Vec<String> = [("os", os), ("cpu", cpu), ("libc", libc)]
        .iter()
        .filter(|(_, v)| !v.is_empty())
        .map(|(k, v)| format!("{k}={}", v.join(",")))
        .collect();
    (!parts.is_empty()).then(|| parts.join(" & "))
}

/// Sorts packages by name, version, source and platform and drops exact duplicates (npm and
/// Yarn may list one package at several install paths).
pub(crate) fn sort_packages(packages: &mut Vec<Package>) {
    for p in packages.iter_mut() {
        p.hashes.sort();
        p.hashes.dedup();
    }
    packages.sort_by(|a, b| {
        (
            &a.name,
            &a.version,
            &a.source,
            &a.platform,
            &a.hashes,
            a.dev,
            a.optional,
        )
            .cmp(&(
                &b.name,
                &b.version,
                &b.source,
                &b.platform,
                &b.hashes,
                b.dev,
                b.optional,
            ))
    });
    packages.dedup();
}

/// Splits an npm-style descriptor or locator `name@rest` at the `@` that ends the name (a
/// leading `@` belongs to a scope). Returns `None` when there is no such `@`.
pub(crate) fn split_at_name(spec: &str) -> Option<(&str, &str)> {
    let start = usize::from(spec.starts_with('@'));
    let at = spec[start..].find('@')? + start;
    Some((&spec[..at], &spec[at + 1..]))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn splits_scoped_and_plain_names() {
        assert_eq!(split_at_name("a@^1"), Some(("a", "^1")));
        assert_eq!(split_at_name("@s/b@npm:1.0.0"), Some(("@s/b", "npm:1.0.0")));
        assert_eq!(
            split_at_name("x@patch:x@npm%3A1#p"),
            Some(("x", "patch:x@npm%3A1#p"))
        );
        assert_eq!(split_at_name("@s/b"), None);
    }

    #[test]
    fn platform_labels() {
        let s = |v: &[&str]| v.iter().map(|x| x.to_string()).collect::<Vec<_>>();
        assert_eq!(
            platform_label(&s(&["linux"]), &s(&["x64", "arm64"]), &s(&["glibc"])).as_deref(),
            Some("os=linux & cpu=x64,arm64 & libc=glibc")
        );
        assert_eq!(platform_label(&[], &[], &[]), None);
    }

    #[test]
    fn several_integrity_hashes() {
        assert_eq!(sri_hashes(Some("sha512-a sha1-b")), ["sha512-a", "sha1-b"]);
    }
}

/// Whether a wheel file name (or a URL or path ending in one) holds compiled code: PEP 427
/// names a wheel `{name}-{version}(-{build})?-{python}-{abi}-{platform}.whl`, and a pure wheel
/// has ABI `none` and platform `any`. `None` for anything that is not a wheel name.
pub(crate) fn wheel_is_compiled(file: &str) -> Option<bool> {
    let name = file.rsplit(['/', '\\']).next()?;
    let name = name.split(['?', '#']).next()?;
    let stem = name.strip_suffix(".whl")?;
    let parts: Vec<&str> = stem.split('-').collect();
    if parts.len() < 5 {
        return None;
    }
    let (abi, platform) = (parts[parts.len() - 2], parts[parts.len() - 1]);
    Some(abi != "none" || platform != "any")
}

/// Whether any of a package's wheels is compiled (`None` when no file name is a wheel).
pub(crate) fn any_compiled<'a>(files: impl IntoIterator<Item = &'a str>) -> Option<bool> {
    files
        .into_iter()
        .filter_map(wheel_is_compiled)
        .reduce(|a, b| a || b)
}

/// Sorted names without duplicates, for `Package::requires`.
pub(crate) fn requires_list(names: impl IntoIterator<Item = String>) -> Vec<String> {
    let mut v: Vec<String> = names.into_iter().collect();
    v.sort();
    v.dedup();
    v
}

#[cfg(test)]
mod wheel_tests {
    use super::*;

    #[test]
    fn wheel_tags_as_pep_427_names_them() {
        // File names in PEP 427's own examples and PyPI's naming (from memory).
        assert_eq!(
            wheel_is_compiled("distribution-1.0-1-py27-none-any.whl"),
            Some(false)
        );
        assert_eq!(
            wheel_is_compiled("https://files.example.invalid/a/numpy-2.1.3-cp311-cp311-manylinux_2_17_x86_64.manylinux2014_x86_64.whl"),
            Some(true)
        );
        assert_eq!(
            wheel_is_compiled("requests-2.32.3-py3-none-any.whl"),
            Some(false)
        );
        assert_eq!(wheel_is_compiled("numpy-2.1.3.tar.gz"), None);
        assert_eq!(
            any_compiled(["a-1-py3-none-any.whl", "a-1-cp311-cp311-win_amd64.whl"]),
            Some(true)
        );
    }
}
