//! The malformed-input corpus (`tests/corpus/`, see `make_corpus.py` there): every lockfile
//! parser and the manifest reader against truncated files, wrong types, invalid UTF-8, control
//! characters, huge numbers, duplicate keys, 100,000-deep nesting, empty files, binary garbage,
//! Windows line endings and a byte-order mark.
//!
//! * `good/`: must parse, with the same packages as the seed;
//! * `bad/`: must be refused with an error naming the file (and its line for syntax errors);
//!   `diff` exits 2 on a bad manifest, `stamp` records a warning and still writes the rest;
//! * `lenient/`: damage that cannot be told from valid input; must not panic, and like every
//!   input that parses, must not yield a package without a name.
//!
//! A panic or a stack overflow anywhere fails the test binary.

mod common;

use std::path::{Path, PathBuf};

use common::{crate_path, runprint};
use runprint::lockfile::{decode, Format, Parsed};
use runprint::manifest::Manifest;

/// `(format folder, kind, case, path)` for every corpus file.
fn corpus() -> Vec<(String, String, String, PathBuf)> {
    let root = crate_path("tests/corpus");
    let mut out = Vec::new();
    for fmt in std::fs::read_dir(&root).unwrap() {
        let fmt = fmt.unwrap().path();
        if !fmt.is_dir() {
            continue;
        }
        for kind in ["good", "bad", "lenient"] {
            let Ok(entries) = std::fs::read_dir(fmt.join(kind)) else {
                continue;
            };
            for case in entries {
                let case = case.unwrap().path();
                out.push((
                    fmt.file_name().unwrap().to_str().unwrap().to_string(),
                    kind.to_string(),
                    case.file_name().unwrap().to_str().unwrap().to_string(),
                    case,
                ));
            }
        }
    }
    out.sort();
    out
}

fn parse_lockfile(format: &str, bytes: &[u8], shown: &str) -> Result<Parsed, String> {
    let f = Format::detect(format).expect("corpus folders are named after lockfile names");
    decode(bytes, shown)
        .and_then(|t| f.parse(t, shown))
        .map_err(|e| {
            let text = e.to_string();
            // Syntax-level damage must carry a line; a missing or mistyped field found after
            // the whole file was read may not have one.
            if e.line.is_none() {
                format!("NOLINE {text}")
            } else {
                text
            }
        })
}

fn summary(p: &Parsed) -> Vec<(String, String)> {
    p.packages
        .iter()
        .map(|p| (p.name.clone(), p.version.clone()))
        .collect()
}

/// Cases whose damage is structural (a required field missing or of the wrong type once the
/// syntax is valid), where no line is known.
fn line_optional(case: &str) -> bool {
    case.starts_with("wrong-type")
        || case.starts_with("truncated")
        || case.starts_with("empty")
        || case.starts_with("whitespace")
        || case.starts_with("huge-integer")
        || case.starts_with("deep-nesting")
        || case.starts_with("duplicate")
        || case == "binary-garbage"
        || case.starts_with("alias-bomb")
        || case == "lone-cr-line-endings"
}

#[test]
fn corpus_has_at_least_eighty_malformed_inputs_across_every_parser() {
    let all = corpus();
    let bad = all.iter().filter(|c| c.1 == "bad").count();
    assert!(bad >= 80, "only {bad} malformed inputs");
    // Every lockfile format runprint reads has a folder.
    for name in common::lockfile_names()
        .iter()
        .copied()
        .chain(["manifest", "manifest-json"])
    {
        assert!(
            all.iter().any(|c| c.0 == name && c.1 == "bad"),
            "no bad case for {name}"
        );
    }
}

#[test]
fn lockfile_corpus_parses_good_refuses_bad_and_never_panics() {
    let mut failures = Vec::new();
    for (format, kind, case, path) in corpus() {
        if format.starts_with("manifest") {
            continue;
        }
        let bytes = std::fs::read(&path).unwrap();
        let shown = format!("corpus/{format}/{case}");
        let result = parse_lockfile(&format, &bytes, &shown);
        // Whatever parses names every package (the fuzz targets' invariant, fuzz/src/lib.rs).
        if let Ok(parsed) = &result {
            if let Some(p) = parsed.packages.iter().find(|p| p.name.is_empty()) {
                failures.push(format!("{shown}: a package without a name: {p:?}"));
            }
        }
        match (kind.as_str(), &result) {
            ("good", Ok(parsed)) => {
                let seed = std::fs::read(path.with_file_name("seed")).unwrap();
                let seed = parse_lockfile(&format, &seed, "seed").unwrap();
                let expected = if case == "empty" || case == "whitespace-only" {
                    Vec::new()
                } else {
                    summary(&seed)
                };
                if summary(parsed) != expected {
                    failures.push(format!("{shown}: packages differ from the seed's"));
                }
            }
            ("good", Err(e)) => failures.push(format!("{shown}: valid input refused: {e}")),
            ("bad", Ok(_)) => failures.push(format!("{shown}: malformed input accepted")),
            ("bad", Err(e)) => {
                if !e.contains(&shown) {
                    failures.push(format!("{shown}: error does not name the file: {e}"));
                }
                if e.starts_with("NOLINE") && !line_optional(&case) {
                    failures.push(format!("{shown}: error has no line: {e}"));
                }
            }
            _ => {}
        }
    }
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}

#[test]
fn manifest_corpus_bad_exits_2_naming_the_file_good_compares() {
    let seed = crate_path("tests/corpus/manifest/good/seed");
    let mut failures = Vec::new();
    for (format, kind, case, path) in corpus() {
        if !format.starts_with("manifest") {
            continue;
        }
        // The library: good files load unmodified, bad files are refused.
        let loaded = Manifest::load(&path);
        match (kind.as_str(), &loaded) {
            ("good", Ok(m)) if m.is_modified() => {
                failures.push(format!("{format}/{case}: reads as modified"))
            }
            ("good", Err(e)) => failures.push(format!("{format}/{case}: refused: {e}")),
            ("bad", Ok(_)) => failures.push(format!("{format}/{case}: accepted")),
            _ => {}
        }
        if kind == "lenient" {
            continue;
        }
        // The binary: exit 2 with the file named, or a normal comparison.
        let out = runprint()
            .arg("diff")
            .arg(&seed)
            .arg(&path)
            .output()
            .unwrap();
        let stderr = String::from_utf8_lossy(&out.stderr);
        let code = out.status.code();
        if kind == "bad" {
            if code != Some(2) {
                failures.push(format!("{format}/{case}: diff exit {code:?}, expected 2"));
            }
            if !stderr.contains(&path.display().to_string()) {
                failures.push(format!(
                    "{format}/{case}: error does not name the file: {stderr}"
                ));
            }
            if !stderr.contains("line ") && !line_optional(&case) && case != "newer-schema" {
                failures.push(format!("{format}/{case}: error has no line: {stderr}"));
            }
        } else if code != Some(0) {
            failures.push(format!(
                "{format}/{case}: diff against its own seed exited {code:?}: {stderr}"
            ));
        }
    }
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}

#[test]
fn stamp_records_a_warning_per_bad_lockfile_and_writes_the_rest() {
    let dir = tempfile::tempdir().unwrap();
    let mut expected_good = Vec::new();
    let mut expected_bad = Vec::new();
    for (format, kind, case, path) in corpus() {
        if format.starts_with("manifest") {
            continue;
        }
        let folder = format!("{}-{kind}-{case}", format.replace('.', "_"));
        let target = dir.path().join(&folder).join(&format);
        std::fs::create_dir_all(target.parent().unwrap()).unwrap();
        std::fs::copy(&path, &target).unwrap();
        let shown = format!("{folder}/{format}");
        match kind.as_str() {
            "good" => expected_good.push(shown),
            "bad" => expected_bad.push(shown),
            _ => {}
        }
    }
    let out_file = dir.path().join("out.toml");
    let out = runprint()
        .args(["stamp", "--quiet", "--repo"])
        .arg(dir.path())
        .arg("--out")
        .arg(&out_file)
        .output()
        .unwrap();
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(0), "{stderr}");
    let m = Manifest::load(&out_file).unwrap();
    assert!(!m.is_modified());
    for shown in &expected_bad {
        assert!(
            m.run.warnings.iter().any(|w| w.contains(shown.as_str())),
            "no warning for {shown}"
        );
        assert!(!m.content.lockfiles.iter().any(|l| &l.path == shown));
    }
    for shown in &expected_good {
        assert!(
            m.content.lockfiles.iter().any(|l| &l.path == shown),
            "{shown} missing from the manifest"
        );
    }
    // The rest of the manifest is still there.
    assert!(!m.content.cpu.arch.is_empty());
}

/// Runs `stamp` over a folder holding one lockfile, with a small size limit.
fn stamp_with_limit(dir: &Path, limit: &str) -> Manifest {
    let out_file = dir.join("out.toml");
    let out = runprint()
        .env("RUNPRINT_MAX_FILE_BYTES", limit)
        .args(["stamp", "--quiet", "--repo"])
        .arg(dir)
        .arg("--out")
        .arg(&out_file)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0));
    // Read back without the limit (the manifest is larger than the tiny limit).
    Manifest::parse(&std::fs::read_to_string(&out_file).unwrap(), &out_file).unwrap()
}

#[test]
fn files_over_the_size_limit_are_refused_with_a_clear_message() {
    let dir = tempfile::tempdir().unwrap();
    let mut text = String::new();
    for i in 0..20 {
        text.push_str(&format!("package-{i}==1.0.{i}\n"));
    }
    std::fs::write(dir.path().join("requirements.txt"), &text).unwrap();
    let m = stamp_with_limit(dir.path(), "100");
    assert!(m.content.lockfiles.is_empty());
    let w = m.run.warnings.join("\n");
    assert!(
        w.contains("requirements.txt") && w.contains(&format!("{} bytes", text.len())),
        "{w}"
    );
    assert!(w.contains("RUNPRINT_MAX_FILE_BYTES"), "{w}");
    // Under the limit it is read.
    let m = stamp_with_limit(dir.path(), "100000");
    assert_eq!(m.content.lockfiles[0].packages.len(), 20);

    // A manifest over the limit: exit 2 naming the file.
    let seed = crate_path("tests/corpus/manifest/good/seed");
    let out = runprint()
        .env("RUNPRINT_MAX_FILE_BYTES", "1000")
        .arg("diff")
        .arg(&seed)
        .arg(&seed)
        .output()
        .unwrap();
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{stderr}");
    assert!(stderr.contains(&seed.display().to_string()) && stderr.contains("limit"));
}

#[test]
fn a_manifest_can_come_through_a_pipe() {
    // `diff <(cat a) <(cat b)`: a pipe is a file the user named, read with the size bound.
    let seed = crate_path("tests/corpus/manifest/good/seed");
    let out = std::process::Command::new("bash")
        .arg("-c")
        .arg(format!(
            "{} diff <(cat {}) <(cat {})",
            assert_cmd::cargo::cargo_bin("runprint").display(),
            seed.display(),
            seed.display()
        ))
        .output()
        .unwrap();
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
}

/// 100,000 levels of nesting in each parser family's syntax.
fn deep_inputs(family: &str) -> Vec<(&'static str, String)> {
    const N: usize = 100_000;
    match family {
        "toml" => vec![
            (
                "arrays",
                format!("x = {}{}\n", "[".repeat(N), "]".repeat(N)),
            ),
            (
                "inline-tables",
                format!("x = {}1{}\n", "{a = ".repeat(N), "}".repeat(N)),
            ),
        ],
        "json" => vec![
            ("arrays", format!("{}{}", "[".repeat(N), "]".repeat(N))),
            (
                "objects",
                format!("{}1{}", "{\"a\":".repeat(N), "}".repeat(N)),
            ),
        ],
        "yaml" => vec![
            ("flow", format!("x: {}{}\n", "[".repeat(N), "]".repeat(N))),
            (
                "flow-maps",
                format!("x: {}1{}\n", "{a: ".repeat(N), "}".repeat(N)),
            ),
            (
                "block",
                (0..2000)
                    .map(|i| format!("{}- \n", "  ".repeat(i)))
                    .collect(),
            ),
        ],
        _ => vec![
            ("brackets", format!("{}\n", "[".repeat(N))),
            ("long-line", format!("{}==1.0\n", "a".repeat(1_000_000))),
        ],
    }
}

#[test]
fn deep_nesting_is_an_error_not_a_stack_overflow() {
    // (file name, family, whether deep input must be refused). serde_json stops at 128
    // levels; the toml crate's parser has its own recursion limit; the YAML crate refuses deep
    // documents when building values. Line-based formats have no nesting, and a conda
    // environment file ignores keys it does not read, so there only "no crash" is asked.
    let formats = [
        ("Cargo.lock", "toml", true),
        ("Manifest.toml", "toml", true),
        ("pylock.toml", "toml", true),
        ("poetry.lock", "toml", true),
        ("uv.lock", "toml", true),
        ("pdm.lock", "toml", true),
        ("package-lock.json", "json", true),
        ("packages.lock.json", "json", true),
        ("renv.lock", "json", true),
        ("Pipfile.lock", "json", true),
        ("pnpm-lock.yaml", "yaml", true),
        ("environment.yml", "yaml", false),
        ("requirements.txt", "lines", false),
        ("go.mod", "lines", false),
        ("yarn.lock", "lines", false),
        ("spec-file.txt", "lines", false),
    ];
    for (name, family, must_fail) in formats {
        for (case, text) in deep_inputs(family) {
            let shown = format!("{name}/{case}");
            let result = parse_lockfile(name, text.as_bytes(), &shown);
            if must_fail {
                let err = result.expect_err(&shown);
                assert!(err.contains(&shown), "{err}");
            }
        }
    }
    let dir = tempfile::tempdir().unwrap();
    for family in ["toml", "json"] {
        for (case, text) in deep_inputs(family) {
            let p = dir.path().join(format!("{family}-{case}"));
            std::fs::write(&p, &text).unwrap();
            let err = Manifest::load(&p).unwrap_err().to_string();
            assert!(err.contains(&p.display().to_string()), "{err}");
        }
    }
}
