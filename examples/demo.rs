//! Writes the demo manifests in `fixtures/demo/`: two stamps of an invented team's model,
//! before and after a dependency bump and a move to bigger nodes.
//!
//! The scenario is invented for the demo: the Tidewater Forecasting team trains `kelp-yield`,
//! a model that predicts the harvest of seaweed farms from sensor buoys.
//!
//! Run with `cargo run --example demo` from the repository root.

use std::collections::BTreeMap;

use runprint::manifest::{
    Content, CpuInfo, EnvInfo, GitInfo, Lockfile, Manifest, ManifestFormat, Package, RunInfo,
    SystemInfo,
};

fn pkg(name: &str, version: &str, hash: &str) -> Package {
    Package {
        name: name.into(),
        version: version.into(),
        hashes: vec![format!("sha256:{hash}")],
        ..Package::default()
    }
}

fn base() -> Content {
    let features = [
        "avx", "avx2", "f16c", "fma", "pni", "sse", "sse2", "sse4_1", "sse4_2", "ssse3",
    ];
    Content {
        git: GitInfo {
            present: true,
            commit: Some("5d0c7e2a9b41f3e8c6a7d2b1e0f9c8a7b6d5e4f3".into()),
            branch: Some("main".into()),
            remote: Some("https://git.tidewater.invalid/forecasting/kelp-yield.git".into()),
            ..GitInfo::default()
        },
        system: SystemInfo {
            os: "linux".into(),
            os_version: Some("Debian GNU/Linux 12".into()),
            kernel: Some("6.1.0-27-amd64".into()),
            libc: Some("glibc".into()),
            libc_version: Some("2.36".into()),
            memory_bytes: 68_719_476_736,
        },
        cpu: CpuInfo {
            arch: "x86_64".into(),
            vendor: Some("GenuineIntel".into()),
            model_name: Some("Example Xeon 8-core @ 2.60GHz".into()),
            family: Some("6".into()),
            model: Some("85".into()),
            stepping: Some("7".into()),
            physical_cores: Some(8),
            logical_cores: 16,
            allowed_cpus: Some("0-15".into()),
            allowed_cpu_count: Some(16),
            features: features.iter().map(|s| s.to_string()).collect(),
        },
        env: EnvInfo {
            vars: BTreeMap::from([
                ("OMP_NUM_THREADS".to_string(), "8".to_string()),
                ("PYTHONHASHSEED".to_string(), "0".to_string()),
                ("CUBLAS_WORKSPACE_CONFIG".to_string(), ":4096:8".to_string()),
            ]),
            redacted: vec!["BUOY_API_TOKEN".into()],
        },
        lockfiles: vec![Lockfile {
            packages_omitted: None,
            path: "trainer/requirements.txt".into(),
            ecosystem: "pypi".into(),
            format_version: None,
            sha256: "1f7c0d3e5a9b2c4d6e8f0a1b3c5d7e9f1a2b4c6d8e0f1a3b5c7d9e1f2a4b6c8d".into(),
            packages: vec![
                pkg("numpy", "1.26.4", "aa01"),
                pkg("pandas", "2.2.2", "aa02"),
                pkg("scikit-learn", "1.5.1", "aa03"),
                pkg("tqdm", "4.66.4", "aa04"),
            ],
        }],
        ..Content::default()
    }
}

fn main() {
    let old = base();
    let mut new = base();
    // The bump a bot opened: numpy to 2.x, tqdm patch, a new plotting dependency.
    let pkgs = &mut new.lockfiles[0].packages;
    pkgs[0] = pkg("numpy", "2.1.3", "bb01");
    pkgs[3] = pkg("tqdm", "4.67.1", "bb04");
    pkgs.push(pkg("seaborn-lite", "0.3.0", "bb05"));
    pkgs.sort_by(|a, b| a.name.cmp(&b.name));
    new.lockfiles[0].sha256 =
        "9e8d7c6b5a4f3e2d1c0b9a8f7e6d5c4b3a2f1e0d9c8b7a6f5e4d3c2b1a0f9e8d".into();
    // A README edit left uncommitted.
    new.git.dirty = true;
    new.git.changed_paths = vec!["README.md".into()];
    new.git.dirty_digest =
        Some("sha256:3c1e5a7b9d2f4a6c8e0b1d3f5a7c9e2b4d6f8a0c1e3b5d7f9a2c4e6b8d0f1a3c".into());
    // Bigger nodes: AVX-512 and twice the threads.
    new.cpu.model_name = Some("Example Xeon 16-core @ 2.10GHz".into());
    new.cpu.model = Some("143".into());
    new.cpu.logical_cores = 32;
    new.cpu.physical_cores = Some(16);
    new.cpu.allowed_cpus = Some("0-31".into());
    new.cpu.allowed_cpu_count = Some(32);
    new.cpu
        .features
        .extend(["avx512f", "avx512bw", "avx512vl", "avx512_bf16"].map(String::from));
    new.cpu.features.sort();
    new.env.vars.insert("OMP_NUM_THREADS".into(), "16".into());

    let write = |name: &str, created: &str, host: &str, label: &str, content: Content| {
        let m = Manifest::new(
            RunInfo {
                tool_version: env!("CARGO_PKG_VERSION").into(),
                created: created.into(),
                label: Some(label.into()),
                hostname: Some(host.into()),
                warnings: vec![],
            },
            content,
        );
        let path = format!("fixtures/demo/{name}");
        std::fs::write(&path, m.render(ManifestFormat::Toml))
            .expect("run from the repository root");
        eprintln!("wrote {path} ({})", m.short_fingerprint());
    };
    write(
        "baseline.toml",
        "2026-11-03T07:12:40Z",
        "train-node-04",
        "kelp-yield v7 production run",
        old,
    );
    write(
        "candidate.toml",
        "2026-12-01T06:02:11Z",
        "train-node-19",
        "kelp-yield v8 candidate",
        new,
    );
}
