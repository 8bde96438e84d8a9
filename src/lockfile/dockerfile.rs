//! Container recipes (`Dockerfile`, `Dockerfile.*`, `*.dockerfile`, `Containerfile`): the base
//! images of their `FROM` instructions, recorded as packages of the `oci` ecosystem, so that a
//! new base image is compared as a dependency rather than as code.
//!
//! Grammar as implemented, from the Dockerfile reference (docs.docker.com/reference/dockerfile):
//!
//! * parser directives at the top (`# escape=` sets the line-continuation character, `\` or
//!   `` ` ``); other lines starting with `#` are comments;
//! * a line ending with the escape character continues on the next one;
//! * `ARG NAME[=default]` before the first `FROM` declares a variable `FROM` may use, as `$NAME`,
//!   `${NAME}`, `${NAME:-word}` or `${NAME:+word}`;
//! * `FROM [--platform=P] image [AS name]`, the image `[host[:port]/]path[:tag][@digest]`;
//!   a `FROM` naming an earlier stage, and `scratch`, are not base images.
//!
//! Each base image is a package: `name` the image without tag or digest, `version` its tag
//! (`latest` when it has neither tag nor digest, as Docker pulls it), `hashes` its digest,
//! `platform` the `--platform` value. A variable without a default stays as written.

use std::collections::BTreeMap;

use crate::error::LockfileError;
use crate::lockfile::Parsed;
use crate::manifest::Package;

/// True for the file names of container recipes.
pub fn is_dockerfile_name(name: &str) -> bool {
    let lower = name.to_ascii_lowercase();
    // `Dockerfile.gpu`, `Dockerfile.dev`; but `dockerfile.rs` or `dockerfile.py` is source
    // code about container recipes (a module of that name), not one.
    let recipe_suffix = |rest: &str| !SOURCE_SUFFIXES.contains(&rest);
    lower == "dockerfile"
        || lower.strip_prefix("dockerfile.").is_some_and(recipe_suffix)
        || lower.ends_with(".dockerfile")
        || lower == "containerfile"
        || lower
            .strip_prefix("containerfile.")
            .is_some_and(recipe_suffix)
}

/// File-name extensions of source code and documents, which a `Dockerfile.*` name does not
/// end with (common practice).
const SOURCE_SUFFIXES: &[&str] = &[
    "rs", "py", "pyi", "go", "js", "mjs", "ts", "java", "kt", "rb", "c", "h", "cc", "cpp", "hpp",
    "sh", "md", "rst", "txt", "json", "toml", "lock", "orig", "bak", "swp", "snap",
];

/// Substitutes `$NAME`, `${NAME}`, `${NAME:-word}` and `${NAME:+word}` with the declared
/// values; an undeclared variable stays as written.
fn substitute(text: &str, vars: &BTreeMap<String, String>) -> String {
    let mut out = String::new();
    let mut rest = text;
    while let Some(i) = rest.find('$') {
        out.push_str(&rest[..i]);
        let after = &rest[i + 1..];
        if let Some(body) = after.strip_prefix('{') {
            let Some(end) = body.find('}') else {
                out.push_str(&rest[i..]);
                return out;
            };
            let expr = &body[..end];
            let value = if let Some((name, word)) = expr.split_once(":-") {
                vars.get(name)
                    .filter(|v| !v.is_empty())
                    .cloned()
                    .unwrap_or_else(|| word.to_string())
            } else if let Some((name, word)) = expr.split_once(":+") {
                if vars.get(name).is_some_and(|v| !v.is_empty()) {
                    word.to_string()
                } else {
                    String::new()
                }
            } else {
                vars.get(expr)
                    .cloned()
                    .unwrap_or_else(|| format!("${{{expr}}}"))
            };
            out.push_str(&value);
            rest = &body[end + 1..];
        } else {
            let len = after
                .find(|c: char| !(c.is_ascii_alphanumeric() || c == '_'))
                .unwrap_or(after.len());
            let name = &after[..len];
            match vars.get(name) {
                Some(v) if len > 0 => out.push_str(v),
                _ => {
                    out.push('$');
                    out.push_str(name);
                }
            }
            rest = &after[len..];
        }
    }
    out.push_str(rest);
    out
}

/// Splits an image reference into (name, tag, digest). The tag is after the last `:` that
/// follows the last `/` (a registry's port comes before a `/`).
fn split_image(image: &str) -> (String, Option<String>, Option<String>) {
    let (rest, digest) = match image.split_once('@') {
        Some((r, d)) => (r, Some(d.to_string())),
        None => (image, None),
    };
    let slash = rest.rfind('/').map_or(0, |i| i + 1);
    match rest[slash..].rfind(':') {
        Some(c) => (
            rest[..slash + c].to_string(),
            Some(rest[slash + c + 1..].to_string()),
            digest,
        ),
        None => (rest.to_string(), None, digest),
    }
}

/// Parses a container recipe; `path` only names the file in errors.
pub fn parse(text: &str, path: &str) -> Result<Parsed, LockfileError> {
    let mut escape = '\\';
    let mut lines = text.lines().enumerate().peekable();
    // Parser directives: only at the very top, before any other line.
    while let Some((_, line)) = lines.peek() {
        let t = line.trim();
        let Some(directive) = t.strip_prefix('#') else {
            break;
        };
        match directive.split_once('=') {
            Some((k, v)) if k.trim().eq_ignore_ascii_case("escape") => {
                escape = match v.trim() {
                    "`" => '`',
                    "\\" => '\\',
                    other => {
                        return Err(LockfileError::at(
                            path,
                            Some(lines.peek().map_or(1, |(n, _)| n + 1)),
                            format!("the escape directive takes `\\` or `` ` ``, not `{other}`"),
                        ))
                    }
                };
            }
            Some(_) => {}
            None => break,
        }
        lines.next();
    }
    // Instructions, joined across continuation lines, with their first line number.
    let mut instructions: Vec<(usize, String)> = Vec::new();
    let mut current: Option<(usize, String)> = None;
    for (n, line) in lines {
        let t = line.trim();
        if current.is_none() && (t.is_empty() || t.starts_with('#')) {
            continue;
        }
        if current.is_some() && t.starts_with('#') {
            continue;
        }
        let (body, continues) = match t.strip_suffix(escape) {
            Some(b) => (b, true),
            None => (t, false),
        };
        let entry = current.get_or_insert_with(|| (n + 1, String::new()));
        if !entry.1.is_empty() {
            entry.1.push(' ');
        }
        entry.1.push_str(body.trim());
        if !continues {
            instructions.extend(current.take());
        }
    }
    instructions.extend(current.take());

    let mut vars: BTreeMap<String, String> = BTreeMap::new();
    let mut stages: Vec<String> = Vec::new();
    let mut seen_from = false;
    let mut packages = Vec::new();
    for (line, instruction) in instructions {
        let mut words = instruction.split_whitespace();
        let keyword = words.next().unwrap_or("").to_ascii_uppercase();
        match keyword.as_str() {
            "ARG" if !seen_from => {
                for decl in words {
                    let (k, v) = decl.split_once('=').unwrap_or((decl, ""));
                    let v = v.trim_matches('"').trim_matches('\'');
                    vars.insert(k.to_string(), v.to_string());
                }
            }
            "FROM" => {
                seen_from = true;
                let mut platform = None;
                let mut image = None;
                let mut alias = None;
                let rest: Vec<&str> = words.collect();
                let mut i = 0;
                while i < rest.len() {
                    let w = rest[i];
                    if let Some(p) = w.strip_prefix("--platform=") {
                        platform = Some(substitute(p, &vars));
                    } else if w.starts_with("--") {
                        // Other flags carry no image.
                    } else if image.is_none() {
                        image = Some(substitute(w, &vars));
                    } else if w.eq_ignore_ascii_case("as") {
                        alias = rest.get(i + 1).map(|a| a.to_ascii_lowercase());
                        i += 1;
                    }
                    i += 1;
                }
                let Some(image) = image else {
                    return Err(LockfileError::at(
                        path,
                        Some(line),
                        "FROM names no image".to_string(),
                    ));
                };
                let is_stage = stages.contains(&image.to_ascii_lowercase());
                if let Some(a) = alias {
                    stages.push(a);
                }
                if is_stage || image.eq_ignore_ascii_case("scratch") {
                    continue;
                }
                let (name, tag, digest) = split_image(&image);
                packages.push(Package {
                    name,
                    version: match (&tag, &digest) {
                        (Some(t), _) => t.clone(),
                        (None, Some(_)) => String::new(),
                        (None, None) => "latest".into(),
                    },
                    hashes: digest.into_iter().collect(),
                    platform,
                    direct: Some(true),
                    ..Package::default()
                });
            }
            _ => {}
        }
    }
    packages.sort_by(|a, b| (&a.name, &a.version).cmp(&(&b.name, &b.version)));
    packages.dedup();
    Ok(Parsed {
        packages,
        ..Parsed::default()
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Recipe names (Docker documentation: `-f Dockerfile.dev`, `*.dockerfile`; Podman's
    /// `Containerfile`) and source files named after them, which are not recipes.
    #[test]
    fn recipe_names_and_source_files() {
        for name in [
            "Dockerfile",
            "Dockerfile.gpu",
            "dockerfile.prod",
            "train.dockerfile",
            "Containerfile",
            "Containerfile.cuda",
        ] {
            assert!(is_dockerfile_name(name), "{name}");
        }
        for name in [
            "dockerfile.rs",
            "Dockerfile.md",
            "dockerfile.py",
            "containerfile.go",
        ] {
            assert!(!is_dockerfile_name(name), "{name}");
        }
    }

    fn images(text: &str) -> Vec<(String, String, Vec<String>, Option<String>)> {
        parse(text, "Dockerfile")
            .unwrap()
            .packages
            .into_iter()
            .map(|p| (p.name, p.version, p.hashes, p.platform))
            .collect()
    }

    /// The FROM and ARG examples of the Dockerfile reference ("Understand how ARG and FROM
    /// interact", "FROM"), from memory.
    #[test]
    fn the_reference_examples() {
        let text = "ARG  CODE_VERSION=latest\nFROM base:${CODE_VERSION}\nCMD  /code/run-app\n\n\
                    FROM extras:${CODE_VERSION}\nCMD  /code/run-extras\n";
        assert_eq!(
            images(text),
            [
                ("base".into(), "latest".into(), vec![], None),
                ("extras".into(), "latest".into(), vec![], None),
            ]
        );
        // Multi-stage: a later FROM naming a stage is not a base image.
        let text = "FROM --platform=$BUILDPLATFORM golang:1.23 AS build\nRUN go build\n\
                    FROM build AS test\nFROM scratch\nCOPY --from=build /out /\n";
        assert_eq!(
            images(text),
            [(
                "golang".into(),
                "1.23".into(),
                vec![],
                Some("$BUILDPLATFORM".into())
            )]
        );
    }

    #[test]
    fn registries_ports_digests_continuations_and_the_escape_directive() {
        let digest = "sha256:0123456789abcdef0123456789abcdef0123456789abcdef0123456789abcdef";
        let text = format!(
            "# escape=`\n# syntax=docker/dockerfile:1\nARG CUDA=12.4.1\nFROM `\n  registry.example.invalid:5000/nvidia/cuda:${{CUDA}}-cudnn-runtime-ubuntu22.04@{digest} `\n  AS train\nFROM python\n"
        );
        assert_eq!(
            images(&text),
            [
                ("python".into(), "latest".into(), vec![], None),
                (
                    "registry.example.invalid:5000/nvidia/cuda".into(),
                    "12.4.1-cudnn-runtime-ubuntu22.04".into(),
                    vec![digest.to_string()],
                    None
                ),
            ]
        );
        let e = parse("FROM\n", "docker/Dockerfile")
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("docker/Dockerfile") && e.contains("line 1"),
            "{e}"
        );
        assert_eq!(substitute("${A:-x}${B:+y}$C", &BTreeMap::new()), "x$C");
    }
}
