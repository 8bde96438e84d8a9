//! Enabled Cargo features, from `cargo metadata`, with a small cache.
//!
//! Features decide which backend a Rust crate compiles (BLAS, GPU, SIMD), but they are not in
//! `Cargo.lock`; only cargo's resolver knows them. Running `cargo metadata` costs a few hundred
//! milliseconds, more than the rest of a stamp, so the result is cached under a key made of the
//! bytes of `Cargo.lock` and of every `Cargo.toml` below it (a member's manifest can switch a
//! feature without touching the lockfile), plus the operating system and architecture.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::Command;

use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};

use crate::atomic::write_atomic;
use crate::lockfile::cargo::{feature_map, FeatureMap};
use crate::manifest::hex;

const CACHE_FILE: &str = "cargo-features-v1.json";
const CACHE_KIND: &str = "runprint-cargo-features";
/// Entries kept; the oldest are dropped first.
const CACHE_ENTRIES: usize = 32;

/// One package's features: name, version, source, features.
type Row = (String, String, Option<String>, Vec<String>);

#[derive(Serialize, Deserialize)]
struct CacheFile {
    kind: String,
    version: u32,
    /// Key, insertion order, and the features as (name, version, source, features) rows.
    entries: BTreeMap<String, (u64, Vec<Row>)>,
}

/// The enabled features of the workspace whose `Cargo.lock` is `lock` (with `lock_bytes`).
/// `manifests` lists every `Cargo.toml` found in the repository. `Ok(None)` when there is no
/// `Cargo.toml` beside the lockfile or `cargo` is not on PATH.
pub fn features(
    lock: &Path,
    lock_bytes: &[u8],
    manifests: &[PathBuf],
    cache_dir: Option<&Path>,
) -> Result<Option<FeatureMap>, String> {
    let dir = lock.parent().unwrap_or(Path::new("."));
    let manifest = dir.join("Cargo.toml");
    if !manifest.is_file() {
        return Ok(None);
    }
    let key = cache_key(dir, lock_bytes, manifests);
    let cache_path = cache_dir.map(|d| d.join(CACHE_FILE));
    let mut cache = cache_path
        .as_deref()
        .and_then(load)
        .unwrap_or_else(|| CacheFile {
            kind: CACHE_KIND.into(),
            version: 1,
            entries: BTreeMap::new(),
        });
    if let Some((_, rows)) = cache.entries.get(&key) {
        return Ok(Some(
            rows.iter()
                .map(|(n, v, s, f)| ((n.clone(), v.clone(), s.clone()), f.clone()))
                .collect(),
        ));
    }
    let Some(host) = cargo_host_triple() else {
        return Ok(None);
    };
    // Only the host platform's packages: those for other platforms may never have been
    // downloaded, and `--offline` (no network in the middle of a training job) would fail.
    let metadata = cargo_metadata::MetadataCommand::new()
        .manifest_path(&manifest)
        .other_options(vec![
            "--locked".to_string(),
            "--offline".to_string(),
            "--filter-platform".to_string(),
            host,
        ])
        .exec()
        .map_err(|e| {
            let msg = e.to_string();
            crate::redact::scrub_url_credentials(
                msg.lines().next().unwrap_or("cargo metadata failed"),
            )
        })?;
    let map = feature_map(&metadata);
    if let Some(path) = cache_path {
        let order = cache.entries.values().map(|(o, _)| *o).max().unwrap_or(0) + 1;
        let rows = map
            .iter()
            .map(|((n, v, s), f)| (n.clone(), v.clone(), s.clone(), f.clone()))
            .collect();
        cache.entries.insert(key, (order, rows));
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
        if let Some(parent) = path.parent() {
            let _ = std::fs::create_dir_all(parent);
        }
        if let Ok(bytes) = serde_json::to_vec(&cache) {
            let _ = write_atomic(&path, &bytes);
        }
    }
    Ok(Some(map))
}

fn load(path: &Path) -> Option<CacheFile> {
    let bytes = std::fs::read(path).ok()?;
    serde_json::from_slice::<CacheFile>(&bytes)
        .ok()
        .filter(|c| c.kind == CACHE_KIND && c.version == 1)
}

fn cache_key(dir: &Path, lock_bytes: &[u8], manifests: &[PathBuf]) -> String {
    let mut h = Sha256::new();
    h.update(std::env::consts::OS.as_bytes());
    h.update([0]);
    h.update(std::env::consts::ARCH.as_bytes());
    h.update([0]);
    h.update(dir.to_string_lossy().as_bytes());
    h.update([0]);
    h.update(lock_bytes);
    let mut under: Vec<&PathBuf> = manifests.iter().filter(|m| m.starts_with(dir)).collect();
    under.sort();
    for m in under {
        h.update([0]);
        h.update(m.to_string_lossy().as_bytes());
        h.update([0]);
        // An unreadable manifest still changes the key, through its absence marker.
        match std::fs::read(m) {
            Ok(b) => h.update(&b),
            Err(_) => h.update(b"<unreadable>"),
        }
    }
    hex(&h.finalize())
}

/// The host triple from `cargo -vV`, or `None` when cargo is not on PATH.
fn cargo_host_triple() -> Option<String> {
    let cargo = std::env::var_os("CARGO").unwrap_or_else(|| "cargo".into());
    let out = Command::new(cargo)
        .arg("-vV")
        .stderr(std::process::Stdio::null())
        .output()
        .ok()
        .filter(|o| o.status.success())?;
    String::from_utf8_lossy(&out.stdout)
        .lines()
        .find_map(|l| l.strip_prefix("host:"))
        .map(|h| h.trim().to_string())
}
