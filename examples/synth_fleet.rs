//! Writes N synthetic node manifests of one distributed job for the `fleet` benchmark:
//! `cargo run --release --example synth_fleet -- N OUT_DIR`.
//!
//! Each manifest has the size of a real training repository's: a requirements file of 150
//! hashed packages, a `Cargo.lock` of 200, 30 CPU features and the usual numerical variables.
//! Nodes differ as real ones do (host name, time, `CUDA_VISIBLE_DEVICES` per local rank, the
//! pinned CPU list), and three are odd: one with another thread count, one on an older
//! processor without AVX-512, one with another numpy. Names and values are generated; the data
//! is for benchmarking only.

use runprint::manifest::{Content, Lockfile, Manifest, ManifestFormat, Package, RunInfo};

fn packages(prefix: &str, n: usize, hashes: usize) -> Vec<Package> {
    (0..n)
        .map(|i| Package {
            name: format!("{prefix}-{i:04}"),
            version: format!("{}.{}.{}", i % 5 + 1, i % 13, i % 7),
            source: None,
            hashes: (0..hashes)
                .map(|h| format!("sha256:{:064x}", i * 7919 + h * 104729))
                .collect(),
            ..Package::default()
        })
        .collect()
}

fn node(i: usize) -> Manifest {
    let mut c = Content::default();
    c.git.present = true;
    c.git.commit = Some("3c1e5a7b9d2f00112233445566778899aabbccdd".into());
    c.git.branch = Some("main".into());
    c.system.os = "linux".into();
    c.system.kernel = Some("6.8.0".into());
    c.system.libc = Some("glibc".into());
    c.system.libc_version = Some("2.39".into());
    c.system.memory_bytes = 1_099_511_627_776 - (i as u64 % 3) * 4096;
    c.cpu.arch = "x86_64".into();
    c.cpu.vendor = Some("GenuineIntel".into());
    c.cpu.model_name = Some("Synthetic Server CPU 64-core".into());
    c.cpu.logical_cores = 128;
    c.cpu.physical_cores = Some(64);
    let local = i % 8;
    c.cpu.allowed_cpus = Some(format!("{}-{}", local * 16, local * 16 + 15));
    c.cpu.allowed_cpu_count = Some(16);
    let mut features: Vec<String> = [
        "aes",
        "avx",
        "avx2",
        "bmi1",
        "bmi2",
        "f16c",
        "fma",
        "popcnt",
        "sse",
        "sse2",
        "sse4_1",
        "sse4_2",
        "ssse3",
        "vaes",
        "vpclmulqdq",
        "gfni",
        "sha_ni",
        "avx_vnni",
        "pni",
        "smep",
        "avx512f",
        "avx512bw",
        "avx512cd",
        "avx512dq",
        "avx512vl",
        "avx512_bf16",
        "avx512_vnni",
        "avx512ifma",
        "avx512vbmi",
        "amx_bf16",
    ]
    .iter()
    .map(|s| s.to_string())
    .collect();
    if i == 42 {
        features.retain(|f| !f.starts_with("avx512") && !f.starts_with("amx"));
    }
    features.sort();
    c.cpu.features = features;
    for (k, v) in [
        ("OMP_NUM_THREADS", if i == 17 { "16" } else { "8" }),
        ("MKL_NUM_THREADS", "8"),
        ("CUBLAS_WORKSPACE_CONFIG", ":4096:8"),
        ("NCCL_IB_DISABLE", "0"),
        ("PYTHONHASHSEED", "0"),
        ("LD_LIBRARY_PATH", "/opt/cuda/lib64"),
        ("VIRTUAL_ENV", "/opt/venv"),
    ] {
        c.env.vars.insert(k.into(), v.into());
    }
    c.env
        .vars
        .insert("CUDA_VISIBLE_DEVICES".into(), local.to_string());
    let mut py = packages("pylib", 150, 2);
    py[0].name = "numpy".into();
    py[0].version = if i == 99 { "2.1.3" } else { "1.26.4" }.into();
    py.sort_by(|a, b| a.name.cmp(&b.name));
    c.lockfiles = vec![
        Lockfile {
            packages_omitted: None,
            path: "Cargo.lock".into(),
            ecosystem: "cargo".into(),
            format_version: Some("4".into()),
            sha256: format!("{:064x}", 1),
            packages: packages("crate", 200, 1),
        },
        Lockfile {
            packages_omitted: None,
            path: "trainer/requirements.txt".into(),
            ecosystem: "pypi".into(),
            format_version: None,
            sha256: format!("{:064x}", if i == 99 { 3 } else { 2 }),
            packages: py,
        },
    ];
    Manifest::new(
        RunInfo {
            tool_version: "bench".into(),
            created: format!("2026-12-01T06:{:02}:{:02}Z", i / 60 % 60, i % 60),
            label: Some("synthetic job".into()),
            hostname: Some(format!("node-{:04}", i / 8)),
            warnings: Vec::new(),
        },
        c,
    )
}

fn main() {
    let args: Vec<String> = std::env::args().collect();
    let usage = "usage: synth_fleet N OUT_DIR";
    let n: usize = args.get(1).and_then(|s| s.parse().ok()).expect(usage);
    let dir = std::path::Path::new(args.get(2).expect(usage));
    std::fs::create_dir_all(dir).unwrap();
    for i in 0..n {
        std::fs::write(
            dir.join(format!("rank-{i:05}.toml")),
            node(i).render(ManifestFormat::Toml),
        )
        .unwrap();
    }
}
