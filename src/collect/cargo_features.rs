//! Enabled Cargo features, from `cargo metadata`, with a small cache.
//!
//! Features decide which backend a Rust crate compiles (BLAS, GPU, SIMD), but they are not in
//! `Cargo.lock`; only cargo's resolver knows them. Running `cargo metadata` costs a few hundred
//! milliseconds, more than the rest of a stamp, so the result is cached under a key made of the
//! bytes of `Cargo.lock` and of every `Cargo.toml` below it (a member's manifest can switch a
//! feature without touching the lockfile), the toolchain file that pins the Rust version, plus
//! the operating system and architecture. A failure is cached the same way (a pinned toolchain
//! that is not installed, crates missing from the local registry cache): a warm stamp never
//! starts `cargo` again for inputs that did not change. cargo never reaches the network
//! (`--offline`, `--locked`, `CARGO_NET_OFFLINE`).

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::Command;

use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};

use crate::lockfile::cargo::{feature_map, FeatureMap};
use crate::manifest::hex;

const CACHE_FILE: &str = "cargo-features-v2.json";
const CACHE_VERSION: u32 = 2;
const CACHE_KIND: &str = "runprint-cargo-features";
/// Entries kept; the oldest are dropped first.
const CACHE_ENTRIES: usize = 32;

/// One package's features: name, version, source, features.
type Row = (String, String, Option<String>, Vec<String>);

#[derive(Serialize, Deserialize)]
struct CacheFile {
    kind: String,
    version: u32,
    /// Key, insertion order, and the features as (name, version, source, features) rows, or
    /// why they could not be read.
    entries: BTreeMap<String, (u64, Result<Vec<Row>, String>)>,
}

/// The enabled features of the workspace whose `Cargo.lock` is `lock` (with `lock_bytes`).
/// `manifests` lists every `Cargo.toml` found in the repository. `Ok(None)` when there is no
/// `Cargo.toml` beside the lockfile or `cargo` is not on PATH.
pub fn features(
    lock: &Path,
    lock_bytes: &[u8],
    manifests: &[PathBuf],
    cache_dir: Option<&Path>,
    rehash: bool,
) -> Result<Option<FeatureMap>, Failure> {
    let dir = lock.parent().unwrap_or(Path::new("."));
    let manifest = dir.join("Cargo.toml");
    if !manifest.is_file() {
        return Ok(None);
    }
    let (pin, folders) = outside_inputs(dir);
    let key = cache_key(dir, lock_bytes, manifests, pin.as_deref(), &folders);
    let lasting = |message: String| Failure {
        message,
        depends_on: Some(pin.iter().chain(&folders).cloned().collect()),
    };
    let cache_path = cache_dir.map(|d| d.join(CACHE_FILE));
    let mut cache = cache_path
        .as_deref()
        .and_then(load)
        .unwrap_or_else(|| CacheFile {
            kind: CACHE_KIND.into(),
            version: CACHE_VERSION,
            entries: BTreeMap::new(),
        });
    // `--rehash` computes anew (and keeps the new result).
    if let Some((_, result)) = cache.entries.get(&key).filter(|_| !rehash) {
        return match result {
            Ok(rows) => Ok(Some(
                rows.iter()
                    .map(|(n, v, s, f)| ((n.clone(), v.clone(), s.clone()), f.clone()))
                    .collect(),
            )),
            Err(why) => Err(lasting(why.clone())),
        };
    }
    let result = match run_metadata(dir, &manifest, manifests) {
        Ok(None) => return Ok(None),
        Ok(Some(map)) => Ok(map),
        // Refusing a special file is about this moment's file system: not kept.
        Err(Why::Now(message)) => {
            return Err(Failure {
                message,
                depends_on: None,
            })
        }
        Err(Why::Lasting(why)) => Err(why),
    };
    if let Some(path) = cache_path {
        let order = cache.entries.values().map(|(o, _)| *o).max().unwrap_or(0) + 1;
        let kept = result.as_ref().map_err(Clone::clone).map(|map| {
            map.iter()
                .map(|((n, v, s), f)| (n.clone(), v.clone(), s.clone(), f.clone()))
                .collect()
        });
        cache.entries.insert(key, (order, kept));
        while cache.entries.len() > CACHE_ENTRIES {
            let oldest = cache
                .entries
                .iter()
                .min_by_key(|(_, (o, _))| *o)
                .map(|(k, _)| k.clone());
            if let Some(k) = oldest {
                cache.entries.remove(&k);
            }
        }
        // A cache that cannot be written only costs time on the next stamp.
        if let Ok(bytes) = serde_json::to_vec(&cache) {
            crate::cache::write_cache_file(&path, &bytes);
        }
    }
    result.map(Some).map_err(lasting)
}

/// Why features could not be read.
#[derive(Debug, Clone)]
pub struct Failure {
    /// The reason, one sentence.
    pub message: String,
    /// For a lasting failure (cached), the files outside the repository it holds for as long
    /// as they are unchanged (see [`outside_inputs`]); `None` for a failure of the moment.
    pub depends_on: Option<Vec<PathBuf>>,
}

impl std::fmt::Display for Failure {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(&self.message)
    }
}

/// Why `cargo metadata` gave no features: for as long as the inputs stay the same (cached),
/// or because of a file as it is now (not cached).
enum Why {
    Lasting(String),
    Now(String),
}

/// Runs `cargo metadata` for the workspace at `dir`; `Ok(None)` when cargo is not on PATH.
fn run_metadata(
    dir: &Path,
    manifest: &Path,
    manifests: &[PathBuf],
) -> Result<Option<FeatureMap>, Why> {
    refuse_toolchain_by_path(dir).map_err(Why::Lasting)?;
    refuse_special_inputs(dir, manifests).map_err(Why::Now)?;
    let Some(host) = cargo_host_triple(dir).map_err(Why::Lasting)? else {
        return Ok(None);
    };
    // Only the host platform's packages: those for other platforms may never have been
    // downloaded, and `--offline` (no network in the middle of a training job) would fail.
    let mut cmd = cargo_metadata::MetadataCommand::new()
        .manifest_path(manifest)
        .other_options(vec![
            "--locked".to_string(),
            "--offline".to_string(),
            "--filter-platform".to_string(),
            host,
        ])
        .cargo_command();
    neutralise(&mut cmd, dir);
    let out = crate::child::run(
        cmd,
        crate::child::timeout(METADATA_TIMEOUT),
        METADATA_OUTPUT,
    )
    .map_err(|e| Why::Now(format!("`cargo metadata` {e}")))?;
    if !out.status.success() {
        let first = crate::redact::scrub_url_credentials(&crate::child::first_line(&out.stderr));
        let all = String::from_utf8_lossy(&out.stderr).to_ascii_lowercase();
        // cargo's words when a crate is not in the local registry cache and it may not
        // download it (`--offline`); from memory of cargo's messages.
        let missing = all.contains("offline") || all.contains("download");
        return Err(Why::Lasting(if missing {
            format!(
                "Cargo's enabled features were not read: some crates of `Cargo.lock` are not in this machine's cargo cache and runprint never downloads (run `cargo fetch` once to read them); cargo said: {first}"
            )
        } else {
            format!("`cargo metadata` failed ({}): {first}", out.status)
        }));
    }
    let metadata = cargo_metadata::MetadataCommand::parse(String::from_utf8_lossy(&out.stdout))
        .map_err(|e| {
            Why::Now(format!(
                "`cargo metadata` printed something unexpected: {e}"
            ))
        })?;
    Ok(Some(feature_map(&metadata)))
}

fn load(path: &Path) -> Option<CacheFile> {
    let bytes = crate::cache::read_cache_file(path).ok()?;
    serde_json::from_slice::<CacheFile>(&bytes)
        .ok()
        .filter(|c| c.kind == CACHE_KIND && c.version == CACHE_VERSION)
}

/// What the features of the workspace at `dir` depend on outside its manifests: the toolchain
/// file that pins the Rust version (rustup reads the first one found from the folder up), and
/// the folders of the toolchains rustup has installed and of the crates in cargo's local cache
/// (installing a toolchain or `cargo fetch` changes their modification times), so that a
/// cached failure ends when they change.
fn outside_inputs(dir: &Path) -> (Option<PathBuf>, Vec<PathBuf>) {
    let start = std::path::absolute(dir).unwrap_or_else(|_| dir.to_path_buf());
    let pin = start
        .ancestors()
        .flat_map(|f| [f.join("rust-toolchain.toml"), f.join("rust-toolchain")])
        .find(|f| f.is_file());
    let home = |var: &str, default: &str| {
        std::env::var_os(var)
            .map(PathBuf::from)
            .or_else(|| std::env::var_os("HOME").map(|h| PathBuf::from(h).join(default)))
    };
    let mut folders: Vec<PathBuf> = Vec::new();
    if let Some(rustup) = home("RUSTUP_HOME", ".rustup") {
        folders.push(rustup.join("toolchains"));
    }
    if let Some(cargo) = home("CARGO_HOME", ".cargo") {
        let registry = cargo.join("registry/cache");
        folders.push(registry.clone());
        if let Ok(entries) = std::fs::read_dir(&registry) {
            let mut sub: Vec<PathBuf> = entries.flatten().map(|e| e.path()).collect();
            sub.sort();
            folders.extend(sub);
        }
    }
    (pin, folders)
}

fn cache_key(
    dir: &Path,
    lock_bytes: &[u8],
    manifests: &[PathBuf],
    pin: Option<&Path>,
    folders: &[PathBuf],
) -> String {
    let mut h = Sha256::new();
    h.update(std::env::consts::OS.as_bytes());
    h.update([0]);
    h.update(std::env::consts::ARCH.as_bytes());
    h.update([0]);
    h.update(dir.to_string_lossy().as_bytes());
    h.update([0]);
    h.update(lock_bytes);
    for var in ["RUSTUP_TOOLCHAIN", "CARGO", "PATH"] {
        h.update([0]);
        h.update(std::env::var_os(var).unwrap_or_default().as_encoded_bytes());
    }
    if let Some(file) = pin {
        h.update([0]);
        h.update(file.to_string_lossy().as_bytes());
        h.update([0]);
        h.update(crate::limits::read_regular_file(file).unwrap_or_default());
    }
    for f in folders {
        h.update([0]);
        h.update(f.to_string_lossy().as_bytes());
        if let Ok(meta) = std::fs::metadata(f) {
            let stamp = crate::cache::FileStamp::of(&meta);
            h.update(serde_json::to_vec(&stamp).unwrap_or_default());
        }
    }
    let mut under: Vec<&PathBuf> = manifests.iter().filter(|m| m.starts_with(dir)).collect();
    under.sort();
    for m in under {
        h.update([0]);
        h.update(m.to_string_lossy().as_bytes());
        h.update([0]);
        // An unreadable manifest still changes the key, through its absence marker.
        match crate::limits::read_regular_file(m) {
            Ok(b) => h.update(&b),
            Err(_) => h.update(b"<unreadable>"),
        }
    }
    hex(&h.finalize())
}

/// How long `cargo metadata` may take (it reads every package's manifest from the local
/// registry cache; a large workspace takes a few seconds).
const METADATA_TIMEOUT: std::time::Duration = std::time::Duration::from_secs(120);

/// The most `cargo metadata` may print (a large workspace prints tens of megabytes).
const METADATA_OUTPUT: usize = 256 << 20;

/// Settings through which a repository's own files would make cargo run a program of the
/// repository: `.cargo/config.toml` may set `build.rustc`, `build.rustc-wrapper` and
/// `build.rustc-workspace-wrapper`, and `cargo metadata` runs `rustc` (through them) to learn
/// the target's configuration. Environment variables take precedence over configuration files
/// ("Configuration: Environment variables", The Cargo Book), and an empty wrapper variable
/// turns the wrapper off ("Environment variables Cargo reads", `RUSTC_WRAPPER`); `RUSTC` is
/// set to the plain name, found on `PATH`. `CARGO_NET_OFFLINE` keeps cargo off the network
/// even where `--offline` would not reach (`net.offline`), and `RUSTUP_AUTO_INSTALL=0` keeps
/// rustup from downloading a toolchain the repository pins (rustup book, "Environment
/// variables").
const NEUTRAL_ENV: &[(&str, &str)] = &[
    ("RUSTUP_AUTO_INSTALL", "0"),
    ("RUSTC", "rustc"),
    ("RUSTC_WRAPPER", ""),
    ("RUSTC_WORKSPACE_WRAPPER", ""),
    ("CARGO_BUILD_RUSTC", "rustc"),
    ("CARGO_BUILD_RUSTC_WRAPPER", ""),
    ("CARGO_BUILD_RUSTC_WORKSPACE_WRAPPER", ""),
    ("CARGO_NET_OFFLINE", "true"),
];

/// Starts cargo in the lockfile's folder (so its vendored-source configuration still applies)
/// with every setting that could run the repository's programs overridden.
fn neutralise(cmd: &mut Command, dir: &Path) {
    if !dir.as_os_str().is_empty() {
        cmd.current_dir(dir);
    }
    for (k, v) in NEUTRAL_ENV {
        cmd.env(k, v);
    }
}

/// rustup reads `rust-toolchain.toml` (or `rust-toolchain`) from the folder cargo starts in
/// and its parents, and a `path = "…"` there names a toolchain folder whose `cargo` and
/// `rustc` it then runs ("Overrides: The toolchain file", rustup book): a repository could
/// ship its own. Such a file is refused rather than obeyed.
fn refuse_toolchain_by_path(dir: &Path) -> Result<(), String> {
    let start = std::path::absolute(dir).unwrap_or_else(|_| dir.to_path_buf());
    for folder in start.ancestors() {
        for name in ["rust-toolchain.toml", "rust-toolchain"] {
            let file = folder.join(name);
            let Ok(bytes) = crate::limits::read_regular_file(&file) else {
                continue;
            };
            let text = String::from_utf8_lossy(&bytes);
            let by_path = toml::from_str::<toml::Table>(&text)
                .ok()
                .and_then(|t| t.get("toolchain").and_then(|t| t.get("path")).cloned())
                .is_some();
            if by_path {
                return Err(format!(
                    "`{}` names a toolchain by path, whose programs runprint does not run",
                    file.display()
                ));
            }
            // The first toolchain file found decides, as for rustup.
            return Ok(());
        }
    }
    Ok(())
}

/// `cargo metadata` reads every member's `Cargo.toml` and the `.cargo/config.toml` (or
/// `.cargo/config`) files of the folder it starts in and of its parents ("Configuration:
/// Hierarchical structure", The Cargo Book), as well as `rust-toolchain(.toml)` through
/// rustup; a FIFO or device among them would hold cargo until its time limit. Such a file is
/// refused before cargo starts, naming it.
fn refuse_special_inputs(dir: &Path, manifests: &[PathBuf]) -> Result<(), String> {
    let start = std::path::absolute(dir).unwrap_or_else(|_| dir.to_path_buf());
    let configs = start.ancestors().flat_map(|folder| {
        [
            folder.join(".cargo/config.toml"),
            folder.join(".cargo/config"),
            folder.join("rust-toolchain.toml"),
            folder.join("rust-toolchain"),
        ]
    });
    let members = manifests
        .iter()
        .filter(|m| m.starts_with(dir))
        .cloned()
        .chain(declared_manifests(&start));
    for path in members.chain(configs) {
        let Ok(meta) = std::fs::metadata(&path) else {
            continue;
        };
        if !meta.is_file() && !meta.is_dir() {
            return Err(format!(
                "`{}` is {}, which cargo would wait on; `cargo metadata` was not run",
                path.display(),
                crate::limits::kind_of(&meta)
            ));
        }
    }
    Ok(())
}

/// The `Cargo.toml` files the workspace at `dir` declares, whether or not git lists them (git
/// never lists a FIFO): its `workspace.members` (globs expanded over folders, as cargo does)
/// and the `path` of its dependencies ("Specifying dependencies", The Cargo Book). One level:
/// a member's own path dependencies are not followed.
fn declared_manifests(dir: &Path) -> Vec<PathBuf> {
    let Ok(bytes) = crate::limits::read_regular_file(&dir.join("Cargo.toml")) else {
        return Vec::new();
    };
    let Ok(doc) = toml::from_str::<toml::Table>(&String::from_utf8_lossy(&bytes)) else {
        return Vec::new();
    };
    let mut folders: Vec<String> = Vec::new();
    let members = doc
        .get("workspace")
        .and_then(|w| w.get("members"))
        .and_then(|m| m.as_array());
    for pattern in members.into_iter().flatten().filter_map(|m| m.as_str()) {
        if !pattern.contains(['*', '?', '[']) {
            folders.push(pattern.to_string());
            continue;
        }
        let Ok(glob) = globset::GlobBuilder::new(pattern)
            .literal_separator(true)
            .build()
        else {
            continue;
        };
        let matcher = glob.compile_matcher();
        let depth = pattern.split('/').count();
        for entry in walkdir::WalkDir::new(dir)
            .min_depth(1)
            .max_depth(depth)
            .into_iter()
            .filter_map(Result::ok)
            .filter(|e| e.file_type().is_dir())
        {
            if let Ok(rel) = entry.path().strip_prefix(dir) {
                if matcher.is_match(rel) {
                    folders.push(rel.to_string_lossy().into_owned());
                }
            }
        }
    }
    let tables = ["dependencies", "dev-dependencies", "build-dependencies"];
    let workspace_deps = doc.get("workspace").and_then(|w| w.get("dependencies"));
    let deps = tables
        .iter()
        .filter_map(|t| doc.get(*t))
        .chain(workspace_deps)
        .filter_map(|t| t.as_table())
        .flat_map(|t| t.values());
    for dep in deps {
        if let Some(path) = dep.get("path").and_then(|p| p.as_str()) {
            folders.push(path.to_string());
        }
    }
    folders
        .into_iter()
        .map(|f| dir.join(f).join("Cargo.toml"))
        .collect()
}

/// The host triple from `cargo -vV`; `Ok(None)` when cargo is not on PATH, `Err` when it is
/// there but does not run (rustup's answer when the toolchain the repository pins is not
/// installed).
fn cargo_host_triple(dir: &Path) -> Result<Option<String>, String> {
    let cargo = std::env::var_os("CARGO").unwrap_or_else(|| "cargo".into());
    let mut cmd = Command::new(cargo);
    cmd.arg("-vV");
    neutralise(&mut cmd, dir);
    let out = match crate::child::run(
        cmd,
        crate::child::timeout(std::time::Duration::from_secs(30)),
        1 << 20,
    ) {
        Ok(out) => out,
        Err(e) if e.is_not_found() => return Ok(None),
        Err(e) => return Err(format!("`cargo -vV` {e}")),
    };
    if !out.status.success() {
        let said = crate::child::first_line(&out.stderr);
        let pinned = said.contains("toolchain") && said.contains("not installed");
        return Err(if pinned {
            format!(
                "Cargo's enabled features were not read: the Rust toolchain the repository pins is not installed on this machine (rustup said: {said})"
            )
        } else {
            format!("`cargo -vV` failed ({}): {said}", out.status)
        });
    }
    Ok(String::from_utf8_lossy(&out.stdout)
        .lines()
        .find_map(|l| l.strip_prefix("host:"))
        .map(|h| h.trim().to_string()))
}
