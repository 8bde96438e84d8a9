//! Go modules: `go.mod`, read together with the `go.sum` beside it when there is one.
//!
//! Grammar as implemented (The Go Programming Language, "Go Modules Reference", sections
//! "go.mod files", "Lexical elements", "require directive", "replace directive" and "go.sum
//! files", <https://go.dev/ref/mod>):
//! * `//` starts a comment; tokens are separated by white space; strings may be double-quoted or
//!   back-quoted;
//! * a directive is `verb args` on one line, or `verb (` … `)` with one set of args per line;
//! * `module PATH`, `go VERSION`, `require PATH VERSION`, `replace PATH [VERSION] => PATH
//!   [VERSION]` (a replacement path starting with `./`, `../` or `/` is a directory) are read;
//!   `toolchain`, `godebug`, `exclude`, `retract`, `tool` and `ignore` are recognised and
//!   skipped; any other verb is a warning;
//! * a `require` whose comment is `indirect` (or starts with `indirect;`) is transitive; others
//!   are direct. Since `go 1.17` the file lists every module that provides a package the main
//!   module builds; an older file lists only part of the graph, which gives a warning;
//! * `go.sum` lines are `PATH VERSION HASH` or `PATH VERSION/go.mod HASH`.
//!
//! Recorded per `require`: the module path (case-sensitive, as written), the required version,
//! the source (none for the module proxy; `module+PATH@VERSION` for a module replacement,
//! `path+DIR` for a directory replacement) and the hash from `go.sum` of the module actually
//! used: the `h1:` hash of its content as written, or when `go.sum` has only the `/go.mod` line,
//! that hash marked `go.mod:h1:…` (it covers the go.mod file alone). The format version is the
//! `go` directive.

use std::collections::BTreeMap;

use crate::error::LockfileError;
use crate::lockfile::support::sort_packages;
use crate::lockfile::Parsed;
use crate::manifest::Package;
use crate::redact::scrub_url_credentials;

struct Require {
    path: String,
    version: String,
    indirect: bool,
}

struct Replace {
    old_path: String,
    old_version: Option<String>,
    new_path: String,
    new_version: Option<String>,
}

/// Parses a `go.mod`; `companion` is the `go.sum` beside it as `(text, path)`, when there is
/// one. The paths only name the files in errors.
pub fn parse(
    text: &str,
    path: &str,
    companion: Option<(&str, &str)>,
) -> Result<Parsed, LockfileError> {
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    let mut warnings = Vec::new();
    let mut go_version = None;
    let mut toolchain = None;
    let mut requires = Vec::new();
    let mut replaces = Vec::new();
    // The verb of an open block and the line that opened it.
    let mut block: Option<(String, usize)> = None;
    for (i, raw) in text.lines().enumerate() {
        let line_no = i + 1;
        let err = |m: String| LockfileError::at(path, Some(line_no), m);
        let (tokens, comment) = tokenize(raw).map_err(err)?;
        if tokens.is_empty() {
            continue;
        }
        let (verb, args): (String, &[String]) = match &block {
            Some(_) if tokens == [")"] => {
                block = None;
                continue;
            }
            Some((verb, _)) => (verb.clone(), &tokens[..]),
            None if tokens.len() == 2 && tokens[1] == "(" => {
                block = Some((tokens[0].clone(), line_no));
                continue;
            }
            None => (tokens[0].clone(), &tokens[1..]),
        };
        match verb.as_str() {
            "module" => {}
            "go" => match args {
                [v] => go_version = Some(v.clone()),
                _ => return Err(err("`go` takes one version".into())),
            },
            "require" => match args {
                [p, v] if p.is_empty() || v.is_empty() => {
                    return Err(err("`require` has an empty module path or version".into()))
                }
                [p, v] => requires.push(Require {
                    path: p.clone(),
                    version: v.clone(),
                    indirect: comment
                        .map(str::trim)
                        .is_some_and(|c| c == "indirect" || c.starts_with("indirect;")),
                }),
                _ => return Err(err("`require` takes a module path and a version".into())),
            },
            "replace" => {
                let arrow = args.iter().position(|a| a == "=>");
                let (old, new) = match arrow {
                    Some(a) => (&args[..a], &args[a + 1..]),
                    None => return Err(err("`replace` needs `=>`".into())),
                };
                let (old_path, old_version) = match old {
                    [p] => (p.clone(), None),
                    [p, v] => (p.clone(), Some(v.clone())),
                    _ => return Err(err("`replace` needs a module path before `=>`".into())),
                };
                let (new_path, new_version) = match new {
                    [p] => (p.clone(), None),
                    [p, v] => (p.clone(), Some(v.clone())),
                    _ => return Err(err("`replace` needs a path or module after `=>`".into())),
                };
                if new_version.is_none() && !is_directory(&new_path) {
                    return Err(err(format!(
                        "replacement `{new_path}` is neither a directory (`./`, `../`, `/`) nor a module with a version"
                    )));
                }
                replaces.push(Replace {
                    old_path,
                    old_version,
                    new_path,
                    new_version,
                });
            }
            "toolchain" => match args {
                [v] => toolchain = Some(v.clone()),
                _ => return Err(err("`toolchain` takes one name".into())),
            },
            "godebug" | "exclude" | "retract" | "tool" | "ignore" => {}
            other => warnings.push(format!(
                "`{path}`, line {line_no}: unknown go.mod directive `{other}` skipped"
            )),
        }
    }
    if let Some((verb, line)) = block {
        return Err(LockfileError::at(
            path,
            Some(line),
            format!("`{verb} (` block is never closed (truncated file?)"),
        ));
    }
    match go_version.as_deref().map(go_minor) {
        Some(Some((1, minor))) if minor < 17 => warnings.push(format!(
            "`{path}`: `go 1.{minor}` files list only part of the module graph; transitive modules may be missing"
        )),
        Some(Some((1, _))) => {}
        Some(_) => warnings.push(format!(
            "`{path}`: go directive `{}` is not a Go 1 version this runprint knows; modules were read as far as possible",
            go_version.as_deref().unwrap_or_default()
        )),
        None => warnings.push(format!(
            "`{path}`: no `go` directive (Go then assumes 1.16); transitive modules may be missing"
        )),
    }

    let sums = match companion {
        Some((sum_text, sum_path)) => parse_sum(sum_text, sum_path)?,
        None => BTreeMap::new(),
    };
    let mut packages = Vec::with_capacity(requires.len());
    for r in requires {
        let replace = replaces
            .iter()
            .find(|x| x.old_path == r.path && x.old_version.as_deref() == Some(&r.version))
            .or_else(|| {
                replaces
                    .iter()
                    .find(|x| x.old_path == r.path && x.old_version.is_none())
            });
        let (source, used) = match replace {
            None => (None, Some((r.path.clone(), r.version.clone()))),
            Some(Replace {
                new_path,
                new_version: Some(v),
                ..
            }) => (
                Some(format!("module+{new_path}@{v}")),
                Some((new_path.clone(), v.clone())),
            ),
            Some(Replace { new_path, .. }) => (Some(format!("path+{new_path}")), None),
        };
        let hash = used.and_then(|key| {
            let (content, go_mod) = sums.get(&key)?;
            content
                .clone()
                .or_else(|| go_mod.as_ref().map(|h| format!("go.mod:{h}")))
        });
        packages.push(Package {
            name: r.path,
            version: r.version,
            source: source.as_deref().map(scrub_url_credentials),
            hashes: hash.into_iter().collect(),
            direct: Some(!r.indirect),
            ..Package::default()
        });
    }
    sort_packages(&mut packages);
    // The format version is the `go` line; a `toolchain` line, which names the toolchain that
    // builds the module (Go documentation, "Go Toolchains"), is recorded with it so that the
    // diff compares both.
    let format_version = match (go_version, toolchain) {
        (Some(go), Some(t)) => Some(format!("{go} (toolchain {t})")),
        (None, Some(t)) => Some(format!("(toolchain {t})")),
        (go, None) => go,
    };
    Ok(Parsed {
        format_version,
        packages,
        warnings,
        includes: Vec::new(),
    })
}

/// `go.sum`: (module path, version) → (content hash, go.mod hash).
type SumTable = BTreeMap<(String, String), (Option<String>, Option<String>)>;

fn parse_sum(text: &str, path: &str) -> Result<SumTable, LockfileError> {
    let mut out = SumTable::new();
    for (i, line) in text.lines().enumerate() {
        let fields: Vec<&str> = line.split_whitespace().collect();
        match fields.as_slice() {
            [] => {}
            [module, version, hash] => {
                let entry = out
                    .entry((
                        module.to_string(),
                        version.trim_end_matches("/go.mod").to_string(),
                    ))
                    .or_default();
                if version.ends_with("/go.mod") {
                    entry.1 = Some(hash.to_string());
                } else {
                    entry.0 = Some(hash.to_string());
                }
            }
            _ => {
                return Err(LockfileError::at(
                    path,
                    Some(i + 1),
                    "expected `MODULE VERSION HASH` (or `MODULE VERSION/go.mod HASH`)",
                ))
            }
        }
    }
    Ok(out)
}

/// Splits a go.mod line into tokens and the text of its `//` comment.
fn tokenize(line: &str) -> Result<(Vec<String>, Option<&str>), String> {
    let mut tokens = Vec::new();
    let mut rest = line.trim_start();
    while !rest.is_empty() {
        if let Some(c) = rest.strip_prefix("//") {
            return Ok((tokens, Some(c)));
        }
        let (token, after) = match rest.chars().next() {
            Some('"') => {
                let end = find_closing_quote(&rest[1..])
                    .ok_or_else(|| "unterminated quoted string".to_string())?;
                let quoted = &rest[..end + 2];
                let s: String = serde_json::from_str(quoted)
                    .map_err(|e| format!("bad quoted string {quoted}: {e}"))?;
                (s, &rest[end + 2..])
            }
            Some('`') => {
                let end = rest[1..]
                    .find('`')
                    .ok_or_else(|| "unterminated back-quoted string".to_string())?;
                (rest[1..end + 1].to_string(), &rest[end + 2..])
            }
            _ => {
                let end = rest.find(char::is_whitespace).unwrap_or(rest.len());
                let word = &rest[..end];
                // `//` may follow a token without a space.
                match word.find("//") {
                    Some(c) if c > 0 => (word[..c].to_string(), &rest[c..]),
                    _ => (word.to_string(), &rest[end..]),
                }
            }
        };
        // Every token names something (a directive, a module path, a version), and an empty
        // module path is not a valid one (value from memory of Go's module path rules, not
        // checked against the Go sources here).
        if token.is_empty() {
            return Err("empty quoted string".into());
        }
        tokens.push(token);
        rest = after.trim_start();
    }
    Ok((tokens, None))
}

fn find_closing_quote(s: &str) -> Option<usize> {
    let mut escaped = false;
    for (i, c) in s.char_indices() {
        match c {
            _ if escaped => escaped = false,
            '\\' => escaped = true,
            '"' => return Some(i),
            _ => {}
        }
    }
    None
}

/// A replacement target that names a directory (Go Modules Reference, "replace directive").
fn is_directory(p: &str) -> bool {
    p.starts_with("./")
        || p.starts_with("../")
        || p.starts_with('/')
        || p.starts_with(".\\")
        || p.starts_with("..\\")
        || p == "."
        || p == ".."
}

/// `1.21.3` → (1, 21).
fn go_minor(v: &str) -> Option<(u32, u32)> {
    let mut parts = v.split('.');
    let major = parts.next()?.parse().ok()?;
    let minor: String = parts
        .next()?
        .chars()
        .take_while(char::is_ascii_digit)
        .collect();
    Some((major, minor.parse().ok()?))
}

#[cfg(test)]
mod tests {
    use super::*;

    // Shapes from the Go Modules Reference, "go.mod files" (require block with `// indirect`,
    // replace to a module and to a directory) and "go.sum files".
    const GO_MOD: &str = r#"module example.com/trainer

go 1.22

toolchain go1.22.4

require (
	golang.org/x/text v0.14.0
	gonum.org/v1/gonum v0.15.0 // indirect
	example.com/fork v1.0.0
	"example.com/quoted" v0.1.0 //indirect
)

require example.com/local v0.0.0-00010101000000-000000000000

replace example.com/fork v1.0.0 => example.com/fork-patched v1.0.1
replace example.com/local => ../local
"#;

    const GO_SUM: &str = "golang.org/x/text v0.14.0 h1:ScX5w1eTa3QqT8oi6+ziP7dTV1S2+ALU0bI+0zXKWiQ=
golang.org/x/text v0.14.0/go.mod h1:18ZOQIKpY8NJVqYksKHtTdi31H5itFRjB5/qKTNYzSU=
gonum.org/v1/gonum v0.15.0/go.mod h1:AAAA=
example.com/fork-patched v1.0.1 h1:BBBB=
example.com/fork v1.0.0 h1:CCCC=
";

    #[test]
    fn go_mod_with_sum() {
        let parsed = parse(GO_MOD, "go.mod", Some((GO_SUM, "go.sum"))).unwrap();
        assert_eq!(
            parsed.format_version.as_deref(),
            Some("1.22 (toolchain go1.22.4)")
        );
        assert!(parsed.warnings.is_empty(), "{:?}", parsed.warnings);
        let by_name: BTreeMap<&str, &Package> = parsed
            .packages
            .iter()
            .map(|p| (p.name.as_str(), p))
            .collect();
        let text = by_name["golang.org/x/text"];
        assert_eq!(text.version, "v0.14.0");
        assert_eq!(
            text.hashes,
            ["h1:ScX5w1eTa3QqT8oi6+ziP7dTV1S2+ALU0bI+0zXKWiQ="]
        );
        assert_eq!(text.direct, Some(true));
        let gonum = by_name["gonum.org/v1/gonum"];
        assert_eq!(gonum.direct, Some(false));
        assert_eq!(gonum.hashes, ["go.mod:h1:AAAA="]);
        let fork = by_name["example.com/fork"];
        assert_eq!(
            fork.source.as_deref(),
            Some("module+example.com/fork-patched@v1.0.1")
        );
        assert_eq!(fork.hashes, ["h1:BBBB="]);
        let local = by_name["example.com/local"];
        assert_eq!(local.source.as_deref(), Some("path+../local"));
        assert!(local.hashes.is_empty());
        assert_eq!(by_name["example.com/quoted"].direct, Some(false));
    }

    #[test]
    fn without_sum_and_old_go() {
        let parsed = parse(
            "module m\ngo 1.16\nrequire a.example/b v1.2.3\n",
            "go.mod",
            None,
        )
        .unwrap();
        assert_eq!(parsed.packages.len(), 1);
        assert!(parsed.packages[0].hashes.is_empty());
        assert!(parsed.warnings[0].contains("part of the module graph"));
    }

    #[test]
    fn malformed_and_truncated() {
        let cases = [
            (
                "module m\ngo 1.22\nrequire (\n\ta.example/b v1.0.0\n",
                3,
                "never closed",
            ),
            (
                "module m\ngo 1.22\nrequire a.example/b\n",
                3,
                "module path and a version",
            ),
            (
                "module m\nreplace a.example/b => c.example/d\n",
                2,
                "neither a directory",
            ),
            ("module m\nreplace a.example/b ../x\n", 2, "needs `=>`"),
            ("module \"m\ngo 1.22\n", 1, "unterminated"),
        ];
        for (text, line, what) in cases {
            let msg = parse(text, "svc/go.mod", None).unwrap_err().to_string();
            assert!(
                msg.contains("svc/go.mod")
                    && msg.contains(&format!("line {line}"))
                    && msg.contains(what),
                "{text:?} gave {msg}"
            );
        }
        let msg = parse(
            "module m\ngo 1.22\n",
            "go.mod",
            Some(("a v1 h1:x\nb v1\n", "svc/go.sum")),
        )
        .unwrap_err()
        .to_string();
        assert!(
            msg.contains("svc/go.sum") && msg.contains("line 2"),
            "{msg}"
        );
    }

    #[test]
    fn unknown_directive_warns() {
        let parsed = parse("module m\ngo 1.22\nfrobnicate x\n", "go.mod", None).unwrap();
        assert!(parsed.warnings[0].contains("frobnicate"));
    }
}
