//! How parsing time grows with the number of entries, for every lockfile format, the
//! manifest reader and the policy file:
//! `cargo run --release --example scaling_bench [-- SMALL]`.
//!
//! For each format a file of SMALL entries (default 2,000) and one of ten times as many are
//! generated in the format's own grammar, parsed several times from memory, and the medians
//! compared. A parser that looks for each entry's line by searching the text grows with the
//! square of the entries (100x for 10x); a linear one stays near 10x. The target is at most
//! about 12x. The generated files are bench inputs only: the tests check the parsers against
//! files written by the real tools.

use std::fmt::Write as _;
use std::path::Path;
use std::time::Instant;

use runprint::lockfile::Format;

/// A file name runprint detects, and a generator of a file with `n` entries (plus a
/// companion file's text, for `go.mod`'s `go.sum`).
type Generator = (&'static str, fn(usize) -> (String, Option<String>));

const HASH: &str = "0123456789abcdef0123456789abcdef0123456789abcdef0123456789abcdef";

fn lines(n: usize, head: &str, entry: impl Fn(usize) -> String, tail: &str) -> String {
    let mut s = String::from(head);
    for i in 0..n {
        s.push_str(&entry(i));
    }
    s.push_str(tail);
    s
}

fn json_entries(n: usize, entry: impl Fn(usize) -> String) -> String {
    (0..n).map(entry).collect::<Vec<_>>().join(",\n")
}

const GENERATORS: &[Generator] = &[
    ("Cargo.lock", |n| {
        let e = |i| {
            format!("\n[[package]]\nname = \"crate-{i}\"\nversion = \"1.0.{}\"\nsource = \"registry+https://github.com/rust-lang/crates.io-index\"\nchecksum = \"{HASH}\"\n", i % 9)
        };
        (lines(n, "version = 4\n", e, ""), None)
    }),
    ("requirements.txt", |n| {
        let e = |i| format!("pkg-{i}==1.0.{} \\\n    --hash=sha256:{HASH}\n", i % 9);
        (lines(n, "# pinned\n", e, ""), None)
    }),
    ("package-lock.json", |n| {
        let body = json_entries(n, |i| {
            format!("    \"node_modules/pkg-{i}\": {{\"version\": \"1.0.{}\", \"resolved\": \"https://registry.npmjs.org/pkg-{i}/-/pkg-{i}-1.0.0.tgz\", \"integrity\": \"sha512-AAAA\"}}", i % 9)
        });
        (format!("{{\"name\": \"app\", \"version\": \"1.0.0\", \"lockfileVersion\": 3, \"requires\": true, \"packages\": {{\n    \"\": {{\"name\": \"app\", \"version\": \"1.0.0\"}},\n{body}\n}}}}\n"), None)
    }),
    ("yarn.lock", |n| {
        let e = |i| {
            format!("\npkg-{i}@^1.0.0:\n  version \"1.0.{}\"\n  resolved \"https://registry.yarnpkg.com/pkg-{i}/-/pkg-{i}-1.0.0.tgz#abc\"\n  integrity sha512-AAAA\n", i % 9)
        };
        (lines(n, "# yarn lockfile v1\n\n", e, ""), None)
    }),
    ("pnpm-lock.yaml", |n| {
        let mut s =
            String::from("lockfileVersion: '9.0'\n\nimporters:\n\n  .:\n    dependencies:\n");
        for i in 0..n {
            let _ = write!(
                s,
                "      pkg-{i}:\n        specifier: 1.0.{v}\n        version: 1.0.{v}\n",
                v = i % 9
            );
        }
        s.push_str("\npackages:\n\n");
        for i in 0..n {
            let _ = write!(
                s,
                "  pkg-{i}@1.0.{}:\n    resolution: {{integrity: sha512-AAAA}}\n\n",
                i % 9
            );
        }
        s.push_str("snapshots:\n\n");
        for i in 0..n {
            let _ = write!(s, "  pkg-{i}@1.0.{}: {{}}\n\n", i % 9);
        }
        (s, None)
    }),
    ("go.mod", |n| {
        let m = lines(
            n,
            "module example.com/trainer\n\ngo 1.22\n\nrequire (\n",
            |i| format!("\texample.com/mod{i} v1.0.{}\n", i % 9),
            ")\n",
        );
        let sum = lines(
            n,
            "",
            |i| {
                format!("example.com/mod{i} v1.0.{v} h1:AAAA=\nexample.com/mod{i} v1.0.{v}/go.mod h1:BBBB=\n", v = i % 9)
            },
            "",
        );
        (m, Some(sum))
    }),
    ("packages.lock.json", |n| {
        let body = json_entries(n, |i| {
            format!("      \"Pkg{i}\": {{\"type\": \"Direct\", \"requested\": \"[1.0.0, )\", \"resolved\": \"1.0.{}\", \"contentHash\": \"AAAA\"}}", i % 9)
        });
        (
            format!("{{\"version\": 1, \"dependencies\": {{\"net8.0\": {{\n{body}\n}}}}}}\n"),
            None,
        )
    }),
    ("renv.lock", |n| {
        let body = json_entries(n, |i| {
            format!("    \"pkg{i}\": {{\"Package\": \"pkg{i}\", \"Version\": \"1.0.{}\", \"Source\": \"Repository\", \"Repository\": \"CRAN\", \"Hash\": \"{}\"}}", i % 9, &HASH[..32])
        });
        (format!("{{\"R\": {{\"Version\": \"4.4.1\", \"Repositories\": [{{\"Name\": \"CRAN\", \"URL\": \"https://cloud.r-project.org\"}}]}}, \"Packages\": {{\n{body}\n}}}}\n"), None)
    }),
    ("Manifest.toml", |n| {
        let e = |i| {
            format!("\n[[deps.Pkg{i}]]\ngit-tree-sha1 = \"{}\"\nuuid = \"{:08x}-0000-4000-8000-000000000000\"\nversion = \"1.0.{}\"\n", &HASH[..40], i, i % 9)
        };
        (
            lines(
                n,
                "julia_version = \"1.11.1\"\nmanifest_format = \"2.0\"\nproject_hash = \"abc\"\n",
                e,
                "",
            ),
            None,
        )
    }),
    ("pylock.toml", |n| {
        let e = |i| {
            format!("\n[[packages]]\nname = \"pkg-{i}\"\nversion = \"1.0.{v}\"\n\n[[packages.wheels]]\nname = \"pkg_{i}-1.0.{v}-py3-none-any.whl\"\nurl = \"https://files.example.invalid/pkg_{i}-1.0.{v}-py3-none-any.whl\"\nhashes = {{sha256 = \"{HASH}\"}}\n", v = i % 9)
        };
        (
            lines(n, "lock-version = \"1.0\"\ncreated-by = \"bench\"\n", e, ""),
            None,
        )
    }),
    ("poetry.lock", |n| {
        let e = |i| {
            format!("\n[[package]]\nname = \"pkg-{i}\"\nversion = \"1.0.{}\"\ndescription = \"x\"\noptional = false\npython-versions = \">=3.9\"\ngroups = [\"main\"]\nfiles = [\n    {{file = \"pkg-1.0.tar.gz\", hash = \"sha256:{HASH}\"}},\n]\n", i % 9)
        };
        (lines(n, "", e, "\n[metadata]\nlock-version = \"2.1\"\npython-versions = \"^3.11\"\ncontent-hash = \"abc\"\n"), None)
    }),
    ("Pipfile.lock", |n| {
        let body = json_entries(n, |i| {
            format!("        \"pkg-{i}\": {{\"hashes\": [\"sha256:{HASH}\"], \"index\": \"pypi\", \"version\": \"==1.0.{}\"}}", i % 9)
        });
        (format!("{{\"_meta\": {{\"hash\": {{\"sha256\": \"abc\"}}, \"pipfile-spec\": 6, \"requires\": {{}}, \"sources\": []}},\n    \"default\": {{\n{body}\n}}, \"develop\": {{}}}}\n"), None)
    }),
    ("uv.lock", |n| {
        let e = |i| {
            format!("\n[[package]]\nname = \"pkg-{i}\"\nversion = \"1.0.{v}\"\nsource = {{ registry = \"https://pypi.org/simple\" }}\nwheels = [\n    {{ url = \"https://files.example.invalid/pkg_{i}-1.0.{v}-py3-none-any.whl\", hash = \"sha256:{HASH}\", size = 1 }},\n]\n", v = i % 9)
        };
        (
            lines(n, "version = 1\nrequires-python = \">=3.11\"\n", e, ""),
            None,
        )
    }),
    ("pdm.lock", |n| {
        let e = |i| {
            format!("\n[[package]]\nname = \"pkg-{i}\"\nversion = \"1.0.{}\"\ngroups = [\"default\"]\nfiles = [\n    {{file = \"pkg-1.0.tar.gz\", hash = \"sha256:{HASH}\"}},\n]\n", i % 9)
        };
        (lines(n, "[metadata]\ngroups = [\"default\"]\nstrategy = [\"inherit_metadata\"]\nlock_version = \"4.5.1\"\ncontent_hash = \"sha256:abc\"\n", e, ""), None)
    }),
    ("environment.yml", |n| {
        let e = |i| format!("  - pkg-{i}=1.0.{}=h0_0\n", i % 9);
        (
            lines(
                n,
                "name: bench\nchannels:\n  - conda-forge\ndependencies:\n",
                e,
                "",
            ),
            None,
        )
    }),
    ("spec-file.txt", |n| {
        let e = |i| {
            format!(
                "https://conda.anaconda.org/conda-forge/linux-64/pkg-{i}-1.0.{}-h0_0.conda#{}\n",
                i % 9,
                &HASH[..32]
            )
        };
        (lines(n, "# platform: linux-64\n@EXPLICIT\n", e, ""), None)
    }),
];

/// Median seconds of `runs` calls of `f`.
fn median(runs: usize, mut f: impl FnMut()) -> f64 {
    let mut times: Vec<f64> = (0..runs)
        .map(|_| {
            let t = Instant::now();
            f();
            t.elapsed().as_secs_f64()
        })
        .collect();
    times.sort_by(|a, b| a.total_cmp(b));
    times[times.len() / 2]
}

/// Runs a measurement at `small` and ten times `small` entries and prints one row.
/// Keeps the largest ratio seen, with its input's name.
fn keep_worst<'a>(worst: &mut (f64, &'a str), ratio: f64, name: &'a str) {
    if ratio > worst.0 {
        *worst = (ratio, name);
    }
}

fn row(name: &str, small: usize, measure: &dyn Fn(usize) -> (usize, f64)) -> f64 {
    let (count_small, t_small) = measure(small);
    let (count_large, t_large) = measure(small * 10);
    let ratio = t_large / t_small;
    println!(
        "| `{name}` | {count_small} | {:.2} | {count_large} | {:.2} | {ratio:.1}x |",
        t_small * 1e3,
        t_large * 1e3
    );
    ratio
}

fn lockfile_measure(
    name: &'static str,
    generate: fn(usize) -> (String, Option<String>),
) -> impl Fn(usize) -> (usize, f64) {
    move |n| {
        let format = Format::detect(name).expect("a detected name");
        let (text, companion) = generate(n);
        let parse = || {
            format
                .parse_with_companion(&text, name, companion.as_deref().map(|c| (c, "go.sum")))
                .expect("generated text parses")
        };
        let count = parse().packages.len();
        (
            count,
            median(7, || {
                std::hint::black_box(parse());
            }),
        )
    }
}

fn main() {
    let small: usize = std::env::args()
        .nth(1)
        .and_then(|a| a.parse().ok())
        .unwrap_or(2_000);
    println!("| input | entries | ms | entries (10x) | ms | time ratio |");
    println!("|---|---|---|---|---|---|");
    let mut worst: (f64, &str) = (0.0, "");
    // `SCALING_ONLY=NAME` measures that lockfile format alone, or `manifest` or `policy`
    // (for a profiler).
    let only = std::env::var("SCALING_ONLY").ok();
    for (name, generate) in GENERATORS {
        if only.as_deref().is_some_and(|o| o != *name) {
            continue;
        }
        let ratio = row(name, small, &lockfile_measure(name, *generate));
        keep_worst(&mut worst, ratio, name);
    }
    if only
        .as_deref()
        .is_some_and(|o| o != "manifest" && o != "policy")
    {
        return;
    }
    // The TOML crate alone on Julia's layout (one `[[deps.NAME]]` header per package), to
    // tell the crate's share from the parser's.
    let julia_toml = |n: usize| {
        let (text, _) = GENERATORS[8].1(n);
        let t = median(7, || {
            std::hint::black_box(toml::from_str::<toml::Table>(&text).expect("parses"));
        });
        (n, t)
    };
    if only.is_none() {
        row("toml::from_str of Manifest.toml", small, &julia_toml);
    }
    // The manifest reader: one lockfile of n packages in a stamped manifest.
    let manifest = |n: usize| {
        let (text, _) = GENERATORS[0].1(n);
        let parsed = Format::CargoLock
            .parse_with_companion(&text, "Cargo.lock", None)
            .expect("parses");
        let content = runprint::manifest::Content {
            lockfiles: vec![runprint::manifest::Lockfile {
                path: "Cargo.lock".into(),
                ecosystem: "cargo".into(),
                format_version: Some("4".into()),
                sha256: HASH.into(),
                packages: parsed.packages,
                packages_omitted: None,
            }],
            ..Default::default()
        };
        let m = runprint::manifest::Manifest::new(runprint::manifest::RunInfo::default(), content);
        let toml = m.render(runprint::manifest::ManifestFormat::Toml);
        let t = median(7, || {
            std::hint::black_box(
                runprint::manifest::Manifest::parse(&toml, Path::new("m.toml")).expect("reads"),
            );
        });
        (n, t)
    };
    if only.as_deref() != Some("policy") {
        keep_worst(
            &mut worst,
            row("manifest (TOML)", small, &manifest),
            "manifest",
        );
    }
    // The policy file: n `[[accept]]` entries.
    let policy = |n: usize| {
        let text = lines(
            n,
            "fail-on = \"retrain\"\n",
            |i| {
                format!("\n[[accept]]\nsubject = \"env VAR_{i}\"\nrule = \"env.threads\"\nnew = \"{i}\"\nreason = \"checked\"\nexpires = 2999-01-31\n")
            },
            "",
        );
        let t = median(7, || {
            std::hint::black_box(
                runprint::policy::Policy::parse(&text, Path::new("runprint.toml")).expect("reads"),
            );
        });
        (n, t)
    };
    if only.as_deref() != Some("manifest") {
        keep_worst(
            &mut worst,
            row("runprint.toml [[accept]]", small, &policy),
            "policy",
        );
    }
    println!(
        "\nworst ratio: {:.1}x ({}); target: at most about 12x",
        worst.0, worst.1
    );
}
