//! Property tests on stable Rust, beside the coverage-guided fuzz targets in `fuzz/` (cargo
//! fuzz, nightly; see DEVELOPERS.md): every parser gets arbitrary bytes, arbitrary text and
//! mutations of a valid input, and must return a result without panicking; the manifest must
//! round-trip (`parse(render(m)) == m`) in both forms, and any manifest that parses must render
//! and parse back to itself.
//!
//! Each property runs 256 cases by default so `cargo test` stays fast. To search longer:
//!
//!     PROPTEST_CASES=100000 cargo test --release --test fuzz
//!
//! Inputs that once failed are kept in `tests/corpus/` as regression cases (see
//! `tests/malformed.rs`); `fuzz/replay.sh` runs the fuzz targets over them in CI.

mod common;

use std::collections::BTreeMap;
use std::path::Path;

use proptest::prelude::*;
use runprint::lockfile::{decode, Format};
use runprint::manifest::{
    Content, CpuInfo, DataEntry, DataInput, EnvInfo, GitInfo, Lockfile, Manifest, ManifestFormat,
    Package, RunInfo, Submodule, SystemInfo, MAX_INTEGER,
};

fn config() -> ProptestConfig {
    // PROPTEST_CASES overrides the count; failures are not persisted to files in the tree.
    ProptestConfig {
        cases: std::env::var("PROPTEST_CASES")
            .ok()
            .and_then(|v| v.parse().ok())
            .unwrap_or(256),
        failure_persistence: None,
        ..ProptestConfig::default()
    }
}

fn seed(name: &str) -> Vec<u8> {
    std::fs::read(common::crate_path(&format!(
        "tests/corpus/{name}/good/seed"
    )))
    .unwrap()
}

/// A mutation of a byte string: delete, insert, overwrite, duplicate or truncate a range.
#[derive(Debug, Clone)]
enum Mutation {
    Delete(usize, usize),
    Insert(usize, Vec<u8>),
    Overwrite(usize, u8),
    Duplicate(usize, usize),
    Truncate(usize),
}

fn mutation() -> impl Strategy<Value = Mutation> {
    prop_oneof![
        (any::<usize>(), 0..64usize).prop_map(|(a, n)| Mutation::Delete(a, n)),
        (
            any::<usize>(),
            prop::collection::vec(
                prop_oneof![
                    any::<u8>(),
                    prop::sample::select(b"[]{}\"'=:,-#\n\r\t @\\".to_vec())
                ],
                1..16
            )
        )
            .prop_map(|(a, b)| Mutation::Insert(a, b)),
        (any::<usize>(), any::<u8>()).prop_map(|(a, b)| Mutation::Overwrite(a, b)),
        (any::<usize>(), 0..256usize).prop_map(|(a, n)| Mutation::Duplicate(a, n)),
        any::<usize>().prop_map(Mutation::Truncate),
    ]
}

fn apply(bytes: &mut Vec<u8>, mutations: &[Mutation]) {
    for m in mutations {
        let len = bytes.len().max(1);
        match m {
            Mutation::Delete(a, n) => {
                let a = a % len;
                let end = (a + n).min(bytes.len());
                if a < end {
                    bytes.drain(a..end);
                }
            }
            Mutation::Insert(a, ins) => {
                let a = a % (bytes.len() + 1);
                bytes.splice(a..a, ins.iter().copied());
            }
            Mutation::Overwrite(a, b) => {
                if !bytes.is_empty() {
                    let a = a % bytes.len();
                    bytes[a] = *b;
                }
            }
            Mutation::Duplicate(a, n) => {
                let a = a % len;
                let end = (a + n).min(bytes.len());
                if a < end {
                    let piece = bytes[a..end].to_vec();
                    bytes.splice(end..end, piece);
                }
            }
            Mutation::Truncate(a) => bytes.truncate(a % len),
        }
    }
}

/// Parses bytes as the named format the way `stamp` does; any result but a panic is fine, and
/// an error must name the file.
fn parse_any(name: &str, bytes: &[u8]) {
    let format = Format::detect(name).unwrap();
    let shown = format!("fuzz/{name}");
    if let Err(e) = decode(bytes, &shown).and_then(|t| format.parse(t, &shown)) {
        assert!(e.to_string().contains(&shown), "{e}");
    }
}

proptest! {
    #![proptest_config(config())]

    #[test]
    fn lockfile_parsers_survive_arbitrary_bytes(
        index in 0..Format::ALL.len(),
        bytes in prop::collection::vec(any::<u8>(), 0..512),
    ) {
        parse_any(Format::ALL[index].example_name(), &bytes);
    }

    #[test]
    fn lockfile_parsers_survive_arbitrary_text(
        index in 0..Format::ALL.len(),
        text in prop::collection::vec(token(), 0..96),
    ) {
        parse_any(Format::ALL[index].example_name(), text.concat().as_bytes());
    }

    #[test]
    fn lockfile_parsers_survive_mutated_valid_input(
        index in 0..Format::ALL.len(),
        mutations in prop::collection::vec(mutation(), 1..6),
    ) {
        let mut bytes = seed(Format::ALL[index].example_name());
        apply(&mut bytes, &mutations);
        parse_any(Format::ALL[index].example_name(), &bytes);
    }

    #[test]
    fn manifest_reader_survives_arbitrary_and_mutated_input(
        json in any::<bool>(),
        raw in prop::collection::vec(any::<u8>(), 0..256),
        mutations in prop::collection::vec(mutation(), 1..6),
    ) {
        let path = Path::new("fuzz/manifest.toml");
        for bytes in [raw, {
            let mut b = seed(if json { "manifest-json" } else { "manifest" });
            apply(&mut b, &mutations);
            b
        }] {
            let Ok(text) = String::from_utf8(bytes) else { continue };
            // The event reader answers as the `toml` crate does, or not at all.
            // Read whole, and cut before every line that opens a table.
            for piece in [usize::MAX, 1] {
                if let Some(fast) =
                    runprint::toml_events::from_str_in_pieces::<toml::Value>(&text, piece)
                {
                    let full: Result<toml::Value, _> = toml::from_str(&text);
                    prop_assert_eq!(Some(&fast), full.as_ref().ok());
                }
            }
            match Manifest::parse(&text, path) {
                // Whatever parses renders (in both forms) and parses back to itself.
                Ok(m) => {
                    for format in [ManifestFormat::Toml, ManifestFormat::Json] {
                        let back = Manifest::parse(&m.render(format), path).unwrap();
                        prop_assert_eq!(&back, &m);
                    }
                }
                Err(e) => prop_assert!(e.to_string().contains("fuzz/manifest.toml")),
            }
        }
    }

    #[test]
    fn manifest_round_trips(m in manifest()) {
        // Written manifests take the event reader, which reads them as `toml` does.
        let text = m.render(ManifestFormat::Toml);
        let fast = runprint::toml_events::from_str::<Manifest>(&text);
        prop_assert_eq!(fast.as_ref(), Some(&m));
        // Cut before every line that opens a table: the same manifest, or (a cut inside a
        // multi-line string, such as an `os` of "[\n") nothing, for the full parser to read.
        let cut = runprint::toml_events::from_str_in_pieces::<Manifest>(&text, 1);
        prop_assert!(cut.is_none() || cut.as_ref() == Some(&m));
        let full = toml::from_str::<Manifest>(&text).ok();
        prop_assert_eq!(full.as_ref(), Some(&m));
        for format in [ManifestFormat::Toml, ManifestFormat::Json] {
            let text = m.render(format);
            let back = Manifest::parse(&text, Path::new("m")).unwrap();
            prop_assert_eq!(&back, &m);
            prop_assert!(!back.is_modified());
        }
    }
}

/// Pieces of lockfile syntax, so that arbitrary text gets past the UTF-8 and control-character
/// checks into the parsers themselves.
fn token() -> impl Strategy<Value = String> {
    prop_oneof![
        prop::sample::select(vec![
            "[",
            "]",
            "{",
            "}",
            "\"",
            "'",
            "=",
            "==",
            ":",
            ",",
            "-",
            "#",
            "\n",
            "\r\n",
            " ",
            "  ",
            "\t",
            "@",
            "\\",
            ";",
            "[[package]]\n",
            "name = ",
            "version = ",
            "\"version\": ",
            "packages:\n",
            "lockfileVersion",
            "require (\n",
            ")\n",
            "@EXPLICIT\n",
            "--hash=",
            "sha256:",
            "1.0.0",
            "é",
            "\u{feff}",
            "&a",
            "*a",
            "!!",
            "|",
            ">",
            "?",
            "%",
        ])
        .prop_map(str::to_string),
        "[a-z0-9._-]{1,8}",
        any::<char>().prop_map(|c| c.to_string()),
    ]
}

fn text() -> impl Strategy<Value = String> {
    // Any Unicode scalar value, control characters included: rendering must escape them.
    prop::collection::vec(any::<char>(), 0..12).prop_map(|c| c.into_iter().collect())
}

fn opt_text() -> impl Strategy<Value = Option<String>> {
    prop::option::of(text())
}

fn int() -> impl Strategy<Value = u64> {
    prop_oneof![0..1000u64, Just(MAX_INTEGER), 0..=MAX_INTEGER]
}

fn package() -> impl Strategy<Value = Package> {
    (
        (
            text(),
            text(),
            opt_text(),
            prop::collection::vec(text(), 0..3),
        ),
        (
            prop::collection::vec(text(), 0..3),
            any::<bool>(),
            any::<bool>(),
            prop::option::of(any::<bool>()),
            opt_text(),
        ),
        (
            prop::option::of(any::<bool>()),
            prop::collection::vec(text(), 0..3),
        ),
    )
        .prop_map(
            |(
                (name, version, source, hashes),
                (features, dev, optional, direct, platform),
                (compiled, requires),
            )| {
                Package {
                    name,
                    version,
                    source,
                    hashes,
                    features,
                    dev,
                    optional,
                    direct,
                    platform,
                    compiled,
                    requires,
                }
            },
        )
}

// `..Content::default()` keeps this building when a section is added (its default is used).
#[allow(clippy::needless_update)]
fn content() -> impl Strategy<Value = Content> {
    let git = (
        any::<bool>(),
        (opt_text(), opt_text(), any::<bool>(), any::<bool>()),
        (opt_text(), prop::collection::vec(text(), 0..3), opt_text()),
        prop::collection::vec((text(), opt_text()), 0..2),
    )
        .prop_map(
            |(
                present,
                (commit, branch, detached, dirty),
                (dirty_digest, changed_paths, remote),
                subs,
            )| {
                GitInfo {
                    present,
                    commit,
                    branch,
                    detached,
                    dirty,
                    dirty_digest,
                    changed_paths,
                    remote,
                    submodules: subs
                        .into_iter()
                        .map(|(path, commit)| Submodule { path, commit })
                        .collect(),
                    ..GitInfo::default()
                }
            },
        );
    let system = (
        text(),
        opt_text(),
        opt_text(),
        opt_text(),
        opt_text(),
        int(),
    )
        .prop_map(
            |(os, os_version, kernel, libc, libc_version, memory_bytes)| SystemInfo {
                os,
                os_version,
                kernel,
                libc,
                libc_version,
                memory_bytes,
            },
        );
    let cpu = (
        (
            text(),
            opt_text(),
            opt_text(),
            opt_text(),
            opt_text(),
            opt_text(),
        ),
        (
            prop::option::of(any::<u32>()),
            any::<u32>(),
            opt_text(),
            prop::option::of(any::<u32>()),
            prop::collection::vec(text(), 0..4),
        ),
    )
        .prop_map(
            |(
                (arch, vendor, model_name, family, model, stepping),
                (physical_cores, logical_cores, allowed_cpus, allowed_cpu_count, features),
            )| CpuInfo {
                arch,
                vendor,
                model_name,
                family,
                model,
                stepping,
                physical_cores,
                logical_cores,
                allowed_cpus,
                allowed_cpu_count,
                features,
            },
        );
    let env = (
        prop::collection::btree_map(text(), text(), 0..4),
        prop::collection::vec(text(), 0..3),
    )
        .prop_map(
            |(vars, redacted): (BTreeMap<String, String>, Vec<String>)| EnvInfo { vars, redacted },
        );
    let lockfile = (
        text(),
        text(),
        opt_text(),
        text(),
        prop::collection::vec(package(), 0..3),
    )
        .prop_map(
            |(path, ecosystem, format_version, sha256, packages)| Lockfile {
                packages_omitted: None,
                path,
                ecosystem,
                format_version,
                sha256,
                packages,
            },
        );
    let data = (
        (text(), text(), text(), int(), int()),
        prop::collection::vec((text(), text(), int()), 0..3),
    )
        .prop_map(|((path, kind, sha256, size, files), entries)| DataInput {
            path,
            kind,
            sha256,
            size,
            files,
            entries: entries
                .into_iter()
                .map(|(path, sha256, size)| DataEntry { path, sha256, size })
                .collect(),
        });
    (
        git,
        system,
        cpu,
        env,
        prop::collection::vec(lockfile, 0..3),
        prop::collection::vec(data, 0..2),
    )
        .prop_map(|(git, system, cpu, env, lockfiles, data)| Content {
            git,
            system,
            cpu,
            env,
            lockfiles,
            data,
            ..Content::default()
        })
}

fn manifest() -> impl Strategy<Value = Manifest> {
    (
        (
            text(),
            text(),
            opt_text(),
            opt_text(),
            prop::collection::vec(text(), 0..3),
        ),
        content(),
    )
        .prop_map(
            |((tool_version, created, label, hostname, warnings), content)| {
                Manifest::new(
                    RunInfo {
                        tool_version,
                        created,
                        label,
                        hostname,
                        warnings,
                    },
                    content,
                )
            },
        )
}

/// Every lockfile format has a fuzz target in `fuzz/fuzz_targets/`, and every target is listed
/// in `fuzz/Cargo.toml` and has seeds in `fuzz/targets.sh`: a new parser cannot be added
/// without one.
#[test]
fn every_parser_has_a_fuzz_target() {
    let dir = common::crate_path("fuzz/fuzz_targets");
    let cargo = std::fs::read_to_string(common::crate_path("fuzz/Cargo.toml")).unwrap();
    let seeds = std::fs::read_to_string(common::crate_path("fuzz/targets.sh")).unwrap();
    let mut fuzzed = std::collections::BTreeSet::new();
    let mut targets = Vec::new();
    for entry in std::fs::read_dir(&dir).unwrap() {
        let path = entry.unwrap().path();
        let target = path.file_stem().unwrap().to_str().unwrap().to_string();
        let text = std::fs::read_to_string(&path).unwrap();
        if let Some(rest) = text.split("runprint_fuzz::lockfile(\"").nth(1) {
            fuzzed.insert(rest.split('"').next().unwrap().to_string());
        }
        assert!(
            cargo.contains(&format!("name = \"{target}\"")),
            "{target} is not a [[bin]] of fuzz/Cargo.toml"
        );
        assert!(
            seeds.contains(&format!("    {target}) echo ")),
            "{target} has no seeds in fuzz/targets.sh"
        );
        targets.push(target);
    }
    let expected: std::collections::BTreeSet<String> = common::lockfile_names()
        .iter()
        .map(|s| s.to_string())
        .collect();
    assert_eq!(fuzzed, expected);
    for other in ["go_sum", "manifest", "policy"] {
        assert!(targets.iter().any(|t| t == other), "no fuzz target {other}");
    }
}
