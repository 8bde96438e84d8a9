//! Writes two synthetic manifests with N packages each (a tenth of them at another version) for
//! the `diff` benchmark: `cargo run --release --example synth_manifests -- N OUT_DIR`.
//! The package names are generated; the data is for benchmarking only.

use runprint::manifest::{Content, Lockfile, Manifest, ManifestFormat, Package, RunInfo};

fn manifest(n: usize, bumped: bool) -> Manifest {
    let per_file = n / 4;
    let lockfiles = ["cargo", "pypi", "npm", "go"]
        .iter()
        .enumerate()
        .map(|(f, eco)| Lockfile {
            packages_omitted: None,
            path: format!("svc{f}/lock"),
            ecosystem: eco.to_string(),
            format_version: None,
            sha256: if bumped { "b".into() } else { "a".into() },
            packages: (0..per_file)
                .map(|i| Package {
                    name: format!("pkg-{f}-{i:06}"),
                    version: if bumped && i % 10 == 0 {
                        format!("1.{}.1", i % 7 + 1)
                    } else {
                        format!("1.{}.0", i % 7)
                    },
                    source: Some("registry+https://registry.example.invalid/index".into()),
                    hashes: vec![format!("sha256:{:064x}", i * 31 + f)],
                    ..Package::default()
                })
                .collect(),
        })
        .collect();
    let content = Content {
        lockfiles,
        ..Content::default()
    };
    Manifest::new(
        RunInfo {
            tool_version: "bench".into(),
            created: "2026-01-01T00:00:00Z".into(),
            ..RunInfo::default()
        },
        content,
    )
}

fn main() {
    let args: Vec<String> = std::env::args().collect();
    let n: usize = args
        .get(1)
        .and_then(|s| s.parse().ok())
        .expect("usage: synth_manifests N OUT_DIR");
    let dir = std::path::Path::new(args.get(2).expect("usage: synth_manifests N OUT_DIR"));
    std::fs::create_dir_all(dir).unwrap();
    for (name, bumped) in [("old.toml", false), ("new.toml", true)] {
        std::fs::write(
            dir.join(name),
            manifest(n, bumped).render(ManifestFormat::Toml),
        )
        .unwrap();
    }
}
