//! A cache of the numerical-stack scan (the Python environments and their native libraries).
//!
//! Reading a large environment means thousands of small files and memory-mapping hundreds of
//! compiled libraries; it rarely changes between two runs of a job. The scan is recorded with
//! [`fsdeps`], which notes every path it reads, lists or resolves. The cache keeps the result
//! with the metadata of each of those paths (size, times, inode: [`crate::cache::FileStamp`])
//! and a key of everything else the scan depends on: the interpreters asked for, `--private`,
//! the working folder, the environment variables the collectors read, the runprint build
//! itself, the host and the CPU's dispatch facts. A later stamp with the same key whose paths all look the same takes the result from
//! the cache; anything else scans again. A file changed within two seconds of the scan is not
//! trusted (see [`fsdeps::Dependencies::snapshot`]), so no cached result is ever saved from a
//! half-finished installation.
//!
//! One file per key, `stack-<digest of the key>.json`, in the digest cache's folder;
//! `--rehash` ignores it. A corrupt or foreign file is simply scanned over and replaced: it
//! only ever costs time.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};

use crate::cache::FileStamp;
use crate::collect::fsdeps::{self, Snapshot};
use crate::collect::python::PythonScan;
use crate::manifest::{hex, NativeInfo};

const CACHE_KIND: &str = "runprint-stack-cache";
const CACHE_VERSION: u32 = 4;

/// Environment variables the Python and native collectors read (`src/collect/python.rs`,
/// `src/collect/native.rs`); every variable whose name starts with `PYTHON` counts too, since
/// an interpreter that has to be asked reads them. A test checks this list against the
/// sources.
pub const ENV_VARS: &[&str] = &[
    "CONDA_PREFIX",
    "HOME",
    "LD_LIBRARY_PATH",
    "LD_PRELOAD",
    "MKL_THREADING_LAYER",
    "OPENBLAS_CORETYPE",
    "PATH",
    "PYENV_VERSION",
    "VIRTUAL_ENV",
];

/// Everything besides files that the scan's result depends on.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Key {
    /// The interpreters described.
    pub interpreters: Vec<PathBuf>,
    /// Whether they were named (`--python`) rather than found.
    pub explicit: bool,
    /// `--private`.
    pub private: bool,
    /// The working folder (a pyenv shim's `.python-version` is looked up from it).
    pub cwd: Option<PathBuf>,
    /// SHA-256 of the values of [`ENV_VARS`] and `PYTHON*` (digests, so that a credential in
    /// a variable never lands in the cache file).
    pub env: BTreeMap<String, String>,
    /// The program doing the scan: a different build may scan differently.
    pub program: Option<FileStamp>,
    /// SHA-256 of the host name: nodes sharing a home folder (and so a cache folder) keep
    /// one cache file each instead of replacing each other's.
    pub host: Option<String>,
    /// The CPUID facts an OpenBLAS dispatcher reads (the kernel family recorded for each
    /// dynamic-architecture build depends on them; a cache folder can move between CPUs).
    #[serde(default)]
    pub cpu: Option<String>,
    /// One of those variables looks like it holds a credential (`crate::redact`): the scan
    /// then probes paths cut from it (PYTHONPATH is split at `:`), so it is never cached.
    #[serde(skip)]
    pub secret_in_env: bool,
}

impl Key {
    /// The key for a scan of `interpreters` in `env`.
    pub fn new(
        interpreters: &[PathBuf],
        explicit: bool,
        private: bool,
        env: &BTreeMap<String, String>,
    ) -> Key {
        let read = |k: &String| ENV_VARS.contains(&k.as_str()) || k.starts_with("PYTHON");
        Key {
            secret_in_env: env.iter().any(|(k, v)| {
                read(k)
                    && (crate::redact::is_secret_name(k) || crate::redact::looks_secret_value(v))
            }),
            interpreters: interpreters.to_vec(),
            explicit,
            private,
            cwd: std::env::current_dir().ok(),
            env: env
                .iter()
                .filter(|(k, _)| read(k))
                .map(|(k, v)| (k.clone(), hex(&Sha256::digest(v.as_bytes()))))
                .collect(),
            program: crate::cache::program_stamp(),
            host: crate::collect::system::hostname().map(|h| hex(&Sha256::digest(h.as_bytes()))),
            cpu: crate::stack::openblas_core::Cpu::this_machine().map(|c| c.signature()),
        }
    }

    fn file_name(&self) -> String {
        let json = serde_json::to_vec(self).unwrap_or_default();
        format!("stack-{}.json", &hex(&Sha256::digest(&json))[..16])
    }
}

/// A scan's result, as the stamp uses it.
#[derive(Debug, Clone, Default, Serialize, Deserialize)]
pub struct Scanned {
    /// One per interpreter.
    pub scans: Vec<PythonScan>,
    /// The native section.
    pub native: NativeInfo,
    /// The warnings the scan gave (given again when the result is reused).
    pub warnings: Vec<String>,
}

#[derive(Serialize, Deserialize)]
struct CacheFile {
    kind: String,
    version: u32,
    key: Key,
    snapshot: Snapshot,
    scanned: Scanned,
}

/// The cached result for `key` in `dir`, if there is one and every path it was computed from
/// still looks the same.
pub fn load(dir: &Path, key: &Key) -> Option<Scanned> {
    let path = dir.join(key.file_name());
    let bytes = crate::cache::read_cache_file(&path).ok()?;
    let file: CacheFile = serde_json::from_slice(&bytes).ok()?;
    let current = file.kind == CACHE_KIND
        && file.version == CACHE_VERSION
        && file.key == *key
        && file.snapshot.is_current();
    if current {
        crate::cache::mark_used(&path);
    }
    current.then_some(file.scanned)
}

/// Saves a result with the snapshot of what it was computed from. Best effort: a cache that
/// cannot be written only costs time on the next stamp.
pub fn save(dir: &Path, key: &Key, snapshot: Snapshot, scanned: &Scanned) {
    if key.secret_in_env {
        return;
    }
    let file = CacheFile {
        kind: CACHE_KIND.into(),
        version: CACHE_VERSION,
        key: key.clone(),
        snapshot,
        scanned: scanned.clone(),
    };
    let Ok(text) = serde_json::to_string(&file) else {
        return;
    };
    // The snapshot holds every path the scan looked at, some taken from variables such as
    // PYTHONPATH; if anything in it looks like a credential (the redaction rules of
    // `crate::redact`), nothing is cached: a scan every time is slower, never wrong.
    if crate::redact::scrub_secrets(&text) != text {
        return;
    }
    crate::cache::write_cache_file(&dir.join(key.file_name()), text.as_bytes());
}

/// Runs `scan` with its file accesses recorded, and saves the result when it can be trusted.
pub fn scan_and_save(dir: Option<&Path>, key: &Key, scan: impl FnOnce() -> Scanned) -> Scanned {
    let started = std::time::SystemTime::now();
    let (mut scanned, deps) = fsdeps::record(scan);
    // Warnings reach the manifest scrubbed; the cache keeps them the same way.
    for w in &mut scanned.warnings {
        *w = crate::redact::scrub_secrets(w);
    }
    if let Some(dir) = dir {
        // The site folders are package trees: their files are checked by folder.
        let trees: Vec<PathBuf> = scanned
            .scans
            .iter()
            .flat_map(|s| s.sites.iter().cloned())
            .collect();
        if let Some(snapshot) = deps.snapshot(started, &trees) {
            save(dir, key, snapshot, &scanned);
        }
    }
    scanned
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Every environment variable named in the collectors' sources is part of the key.
    #[test]
    fn the_key_covers_every_variable_the_collectors_read() {
        let re = regex::Regex::new(r#""([A-Z][A-Z0-9]*_[A-Z0-9_]+|[A-Z]+PATH|HOME|PYTHON[A-Z]*)""#)
            .unwrap();
        for file in ["src/collect/python.rs", "src/collect/native.rs"] {
            let text =
                std::fs::read_to_string(Path::new(env!("CARGO_MANIFEST_DIR")).join(file)).unwrap();
            let code = text.split("#[cfg(test)]").next().unwrap();
            for c in re.captures_iter(code) {
                let name = &c[1];
                assert!(
                    ENV_VARS.contains(&name) || name.starts_with("PYTHON"),
                    "{file} reads {name}, which is not in stack_cache::ENV_VARS"
                );
            }
        }
    }

    #[test]
    fn keys_differ_by_interpreter_privacy_and_variables() {
        let env: BTreeMap<String, String> = [
            ("PATH".to_string(), "/usr/bin".to_string()),
            ("JOB_ID".to_string(), "17".to_string()),
        ]
        .into();
        let base = Key::new(&[PathBuf::from("/venv/bin/python")], true, false, &env);
        // The build doing the scan is part of the key: another build scans anew.
        assert!(base.program.is_some());
        // A variable the scan does not read does not matter.
        let mut other = env.clone();
        other.insert("JOB_ID".into(), "18".into());
        assert_eq!(
            base,
            Key::new(&[PathBuf::from("/venv/bin/python")], true, false, &other)
        );
        other.insert("PYTHONPATH".into(), "/src".into());
        let with_path = Key::new(&[PathBuf::from("/venv/bin/python")], true, false, &other);
        assert_ne!(base.file_name(), with_path.file_name());
        let private = Key::new(&[PathBuf::from("/venv/bin/python")], true, true, &env);
        assert_ne!(base.file_name(), private.file_name());
    }

    #[test]
    fn a_saved_result_is_reused_until_a_file_it_read_changes() {
        let dir = tempfile::tempdir().unwrap();
        let input = dir.path().join("METADATA");
        std::fs::write(&input, "Name: numpy\nVersion: 1.26.4\n").unwrap();
        // Old enough to be trusted.
        let f = std::fs::File::options().write(true).open(&input).unwrap();
        f.set_modified(std::time::SystemTime::now() - std::time::Duration::from_secs(60))
            .unwrap();
        drop(f);
        std::thread::sleep(std::time::Duration::from_millis(2100)); // past ctime's racy window
        let key = Key::new(&[], false, false, &BTreeMap::new());
        let cache = dir.path().join("cache");
        let scan = || Scanned {
            warnings: vec![fsdeps::read_to_string(&input).unwrap()],
            ..Scanned::default()
        };
        let first = scan_and_save(Some(&cache), &key, scan);
        let hit = load(&cache, &key).expect("saved");
        assert_eq!(hit.warnings, first.warnings);
        std::fs::write(&input, "Name: numpy\nVersion: 2.0.0\n").unwrap();
        assert!(load(&cache, &key).is_none());
        // A damaged file is a miss, never an error.
        std::fs::write(cache.join(key.file_name()), "{not json").unwrap();
        assert!(load(&cache, &key).is_none());
    }
}
