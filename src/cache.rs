//! The digest cache: lets an unchanged data input skip rehashing.
//!
//! An entry is keyed by the file's absolute path and is valid only while the file's size,
//! modification time, status-change time, inode and device all still match. The status-change
//! time (`ctime`) cannot be set by a user: restoring a modification time after an edit (with
//! `touch -d`, say) still changes it, so such an edit is detected.
//!
//! A file modified within [`RACY_WINDOW_NS`] of being hashed is not cached, because a second
//! write within the file system's timestamp granularity could leave every stat field
//! unchanged (the "racy" case git's index also guards against).
//!
//! The cache is one JSON file, replaced atomically. Concurrent stamps may overwrite each
//! other's additions (costing a rehash later) but can never make an entry wrong, since every
//! entry is re-validated against the file's metadata before use. A cache that cannot be parsed
//! or comes from another format version is discarded with a warning.
//!
//! # Seals
//!
//! Every cache file runprint writes ([`write_cache_file`]) starts with a seal line,
//! `runprint-seal HEX`: an HMAC-SHA256 (RFC 2104) of the file's name (its key: every cache
//! file is named by the digest of what it is keyed on) and of its content, under a random
//! 32-byte key kept in the cache folder (`seal-key`, created once, readable by its owner
//! only). [`read_cache_file`] checks it: a file edited by hand, cut short, or copied from
//! another machine or folder does not match, is reported as a warning
//! ([`take_warnings`]) and is treated as absent, so its results are computed again. The seal
//! is no defence against someone who can read the key: that person could as well replace
//! the runprint binary.

use std::collections::HashMap;
use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};

use crate::atomic::write_atomic;

/// The seal key's file in a cache folder.
const SEAL_KEY_FILE: &str = "seal-key";
/// What a sealed cache file starts with, before the hexadecimal seal and a line feed.
const SEAL_PREFIX: &[u8] = b"runprint-seal ";

/// Warnings about cache files that did not match their seal, until the stamp collects them.
static WARNINGS: std::sync::Mutex<Vec<String>> = std::sync::Mutex::new(Vec::new());

/// The warnings about broken cache seals since the last call (the stamp adds them to the
/// manifest's warnings).
pub fn take_warnings() -> Vec<String> {
    WARNINGS
        .lock()
        .map(|mut w| std::mem::take(&mut *w))
        .unwrap_or_default()
}

/// The seal key of a cache folder, created (32 random bytes, mode 0600, published with a
/// link so that concurrent stamps agree on one key) when missing. `None` when it cannot be
/// read or made: caching is then off.
fn seal_key(dir: &Path) -> Option<[u8; 32]> {
    // Read once per folder and process: a stamp opens several cache files in one folder.
    static KEYS: std::sync::Mutex<Vec<(PathBuf, [u8; 32])>> = std::sync::Mutex::new(Vec::new());
    if let Some(key) = KEYS
        .lock()
        .ok()
        .and_then(|keys| keys.iter().find(|(d, _)| d == dir).map(|(_, k)| *k))
    {
        return Some(key);
    }
    let key = read_or_make_seal_key(dir)?;
    if let Ok(mut keys) = KEYS.lock() {
        keys.push((dir.to_path_buf(), key));
    }
    Some(key)
}

/// [`seal_key`] without the memory.
fn read_or_make_seal_key(dir: &Path) -> Option<[u8; 32]> {
    let path = dir.join(SEAL_KEY_FILE);
    for _ in 0..2 {
        match crate::limits::read_regular_file_with_limit(&path, 64) {
            Ok(bytes) => return bytes.try_into().ok(),
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => {
                let mut key = [0u8; 32];
                getrandom::fill(&mut key).ok()?;
                std::fs::create_dir_all(dir).ok()?;
                // tempfile creates the file readable and writable by its owner only.
                let mut tmp = tempfile::NamedTempFile::new_in(dir).ok()?;
                std::io::Write::write_all(&mut tmp, &key).ok()?;
                match tmp.persist_noclobber(&path) {
                    Ok(_) => return Some(key),
                    // Another stamp made it first: read that one.
                    Err(e) if e.error.kind() == std::io::ErrorKind::AlreadyExists => continue,
                    Err(_) => return None,
                }
            }
            Err(_) => return None,
        }
    }
    None
}

/// The seal of a cache file's content under the folder's key, as hex.
fn seal_of(key: &[u8; 32], name: &str, body: &[u8]) -> hmac::Hmac<sha2::Sha256> {
    use hmac::Mac;
    let mut mac = <hmac::Hmac<sha2::Sha256> as Mac>::new_from_slice(key)
        .expect("HMAC takes a key of any length");
    mac.update(&(name.len() as u64).to_le_bytes());
    mac.update(name.as_bytes());
    mac.update(body);
    mac
}

/// Why a cache file gave nothing.
#[derive(Debug)]
pub enum CacheRead {
    /// There is none (or no seal key can be had): compute anew, quietly.
    Missing,
    /// It could not be read, or did not match its seal (a warning was recorded).
    Unusable,
}

/// Reads a sealed cache file and returns its content after the seal, when the seal matches.
/// A file that does not match its seal records a warning ([`take_warnings`]).
pub fn read_cache_file(path: &Path) -> Result<Vec<u8>, CacheRead> {
    use hmac::Mac;
    let bytes = match crate::limits::read_regular_file(path) {
        Ok(b) => b,
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => return Err(CacheRead::Missing),
        Err(_) => return Err(CacheRead::Unusable),
    };
    let dir = path.parent().ok_or(CacheRead::Missing)?;
    let name = path.file_name().and_then(|n| n.to_str()).unwrap_or("");
    let key = seal_key(dir).ok_or(CacheRead::Missing)?;
    let body_start = bytes.iter().position(|&b| b == b'\n').map(|i| i + 1);
    let checked = body_start.and_then(|start| {
        let hex = bytes[..start - 1].strip_prefix(SEAL_PREFIX)?;
        let tag = decode_hex(hex)?;
        seal_of(&key, name, &bytes[start..])
            .verify_slice(&tag)
            .ok()
            .map(|()| start)
    });
    match checked {
        Some(start) => Ok(bytes[start..].to_vec()),
        None => {
            if let Ok(mut w) = WARNINGS.lock() {
                w.push(format!(
                    "cache file `{}` does not match its seal (edited, cut short or copied from elsewhere); not used, its results were computed again",
                    path.display()
                ));
            }
            Err(CacheRead::Unusable)
        }
    }
}

/// Bytes from hexadecimal digits, or `None`.
fn decode_hex(hex: &[u8]) -> Option<Vec<u8>> {
    if !hex.len().is_multiple_of(2) {
        return None;
    }
    hex.chunks(2)
        .map(|pair| u8::from_str_radix(std::str::from_utf8(pair).ok()?, 16).ok())
        .collect()
}

/// The sealed form of a cache file's content (`None` when no seal key can be had).
fn sealed(path: &Path, body: &[u8]) -> Option<Vec<u8>> {
    use hmac::Mac;
    let dir = path.parent()?;
    let name = path.file_name()?.to_str()?;
    let key = seal_key(dir)?;
    let tag = seal_of(&key, name, body).finalize().into_bytes();
    let mut out = Vec::with_capacity(body.len() + 80);
    out.extend_from_slice(SEAL_PREFIX);
    out.extend_from_slice(crate::manifest::hex(&tag).as_bytes());
    out.push(b'\n');
    out.extend_from_slice(body);
    Some(out)
}

/// Cache format version; a file with another version is discarded.
pub const CACHE_VERSION: u32 = 1;
const CACHE_KIND: &str = "runprint-digest-cache";
const CACHE_FILE: &str = "digests-v1.json";

/// Cache files unused for this long are removed when a cache file is next written: a new
/// runprint build, another set of variables or another working folder starts a new stack
/// cache file, and every repository stamped has its own lockfile and work-tree files.
pub const UNUSED_CACHE_FILE: std::time::Duration = std::time::Duration::from_secs(30 * 24 * 3600);

/// The per-key and per-repository cache files that [`write_cache_file`] prunes.
const PRUNED_PREFIXES: &[&str] = &["stack-", "lockfiles-", "worktree-"];

/// Marks a cache file as used now (its modification time), so that pruning keeps it. Best
/// effort.
pub fn mark_used(path: &Path) {
    if let Ok(f) = std::fs::File::options().append(true).open(path) {
        let _ = f.set_modified(std::time::SystemTime::now());
    }
}

/// Writes a cache file atomically, then removes the per-key and per-repository cache files in
/// its folder left unused for [`UNUSED_CACHE_FILE`]. Best effort: a cache that cannot be
/// written only costs time later.
pub fn write_cache_file(path: &Path, bytes: &[u8]) {
    let Some(dir) = path.parent() else { return };
    if std::fs::create_dir_all(dir).is_err() {
        return;
    }
    let Some(sealed) = sealed(path, bytes) else {
        return;
    };
    let _ = write_atomic(path, &sealed);
    prune_unused(dir, std::time::SystemTime::now());
}

/// Removes the cache files named like [`PRUNED_PREFIXES`] (`*.json`) in `dir` last modified
/// more than [`UNUSED_CACHE_FILE`] before `now`.
pub fn prune_unused(dir: &Path, now: std::time::SystemTime) {
    crate::atomic::remove_older_than(dir, now, UNUSED_CACHE_FILE, |name| {
        name.ends_with(".json") && PRUNED_PREFIXES.iter().any(|p| name.starts_with(p))
    });
}

/// The metadata of the running program: a cache written by another build of runprint may
/// hold results that build computed differently.
pub fn program_stamp() -> Option<FileStamp> {
    std::env::current_exe()
        .and_then(std::fs::metadata)
        .ok()
        .map(|m| FileStamp::of(&m))
}

/// The file `PREFIX-DIGEST.json` in `dir` for the repository whose work tree is at `root` on
/// this host: one per repository, and one per node where nodes share a home folder (and so a
/// cache folder), so that they do not replace each other's.
pub fn per_repository_file(dir: &Path, prefix: &str, root: &Path) -> PathBuf {
    use sha2::{Digest, Sha256};
    let root = std::path::absolute(root).unwrap_or_else(|_| root.to_path_buf());
    let mut key = Sha256::new();
    key.update(root.to_string_lossy().as_bytes());
    key.update([0]);
    if let Some(host) = crate::collect::system::hostname() {
        key.update(host.as_bytes());
    }
    let digest = crate::manifest::hex(&key.finalize());
    dir.join(format!("{prefix}-{}.json", &digest[..16]))
}

/// Files changed this recently (nanoseconds) before hashing are not cached.
pub const RACY_WINDOW_NS: i128 = 2_000_000_000;

/// What identifies one version of a file on disk.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct FileStamp {
    /// Size in bytes.
    pub size: u64,
    /// Modification time, nanoseconds since the epoch.
    pub mtime_ns: i128,
    /// Status-change time, nanoseconds since the epoch (0 where the OS has none).
    pub ctime_ns: i128,
    /// Inode number (0 where the OS has none).
    pub inode: u64,
    /// Device number (0 where the OS has none).
    pub dev: u64,
}

impl FileStamp {
    /// Modified, or its status changed, less than [`RACY_WINDOW_NS`] before `started_ns` (or
    /// later): a result read from the file then cannot be trusted to match this metadata.
    pub fn is_racy(&self, started_ns: i128) -> bool {
        let limit = started_ns - RACY_WINDOW_NS;
        self.mtime_ns >= limit || self.ctime_ns >= limit
    }

    /// The stamp of `path`, following links; `None` when absent or unreadable.
    pub fn of_path(path: &Path) -> Option<FileStamp> {
        std::fs::metadata(path).ok().map(|m| FileStamp::of(&m))
    }

    /// The stamp of `path` itself (a link's own, not its target's); `None` when absent or
    /// unreadable.
    pub fn of_link(path: &Path) -> Option<FileStamp> {
        std::fs::symlink_metadata(path)
            .ok()
            .map(|m| FileStamp::of(&m))
    }

    /// Reads a file's stamp from its metadata.
    pub fn of(meta: &std::fs::Metadata) -> FileStamp {
        #[cfg(unix)]
        {
            use std::os::unix::fs::MetadataExt;
            FileStamp {
                size: meta.len(),
                mtime_ns: meta.mtime() as i128 * 1_000_000_000 + meta.mtime_nsec() as i128,
                ctime_ns: meta.ctime() as i128 * 1_000_000_000 + meta.ctime_nsec() as i128,
                inode: meta.ino(),
                dev: meta.dev(),
            }
        }
        #[cfg(not(unix))]
        {
            let mtime_ns = meta
                .modified()
                .ok()
                .and_then(|t| t.duration_since(std::time::UNIX_EPOCH).ok())
                .map_or(0, |d| d.as_nanos() as i128);
            FileStamp {
                size: meta.len(),
                mtime_ns,
                ctime_ns: 0,
                inode: 0,
                dev: 0,
            }
        }
    }
}

#[derive(Debug, Clone, Serialize, Deserialize)]
struct Entry {
    stamp: FileStamp,
    sha256: String,
}

#[derive(Debug, Serialize, Deserialize)]
struct CacheFile {
    kind: String,
    version: u32,
    entries: HashMap<String, Entry>,
}

/// An in-memory digest cache backed by a file.
#[derive(Debug, Default)]
pub struct DigestCache {
    path: Option<PathBuf>,
    entries: HashMap<String, Entry>,
    dirty: bool,
}

impl DigestCache {
    /// A cache that remembers nothing (`--rehash` still records new digests in it).
    pub fn disabled() -> DigestCache {
        DigestCache::default()
    }

    /// The default folder: `$XDG_CACHE_HOME/runprint`, else `$HOME/.cache/runprint`.
    pub fn default_dir(env: &std::collections::BTreeMap<String, String>) -> Option<PathBuf> {
        if let Some(x) = env.get("XDG_CACHE_HOME").filter(|x| !x.is_empty()) {
            return Some(Path::new(x).join("runprint"));
        }
        env.get("HOME")
            .filter(|h| !h.is_empty())
            .map(|h| Path::new(h).join(".cache").join("runprint"))
    }

    /// Opens the cache in `dir`. A missing file is an empty cache; a corrupt or foreign one is
    /// discarded and a warning is pushed. With `ignore_existing` (`--rehash`), old entries are
    /// not loaded but new ones are still saved.
    pub fn open(dir: &Path, ignore_existing: bool, warnings: &mut Vec<String>) -> DigestCache {
        let path = dir.join(CACHE_FILE);
        let mut cache = DigestCache {
            path: Some(path.clone()),
            ..DigestCache::default()
        };
        if ignore_existing {
            cache.dirty = true;
            return cache;
        }
        match read_cache_file(&path) {
            Ok(bytes) => match serde_json::from_slice::<CacheFile>(&bytes) {
                Ok(f) if f.kind == CACHE_KIND && f.version == CACHE_VERSION => {
                    cache.entries = f.entries;
                }
                Ok(f) => {
                    warnings.push(format!(
                        "digest cache `{}` has format version {} (this runprint uses {CACHE_VERSION}); discarded",
                        path.display(),
                        f.version
                    ));
                    cache.dirty = true;
                }
                Err(e) => {
                    warnings.push(format!(
                        "digest cache `{}` is corrupt ({e}); discarded",
                        path.display()
                    ));
                    cache.dirty = true;
                }
            },
            Err(CacheRead::Missing) => {}
            // A broken seal has recorded its own warning.
            Err(CacheRead::Unusable) => cache.dirty = true,
        }
        cache
    }

    /// The cached digest of `path`, if its stamp still matches.
    pub fn get(&self, path: &Path, stamp: &FileStamp) -> Option<String> {
        let e = self.entries.get(path.to_str()?)?;
        (e.stamp == *stamp).then(|| e.sha256.clone())
    }

    /// Records a digest computed at `hashed_at_ns` (unless the file was too fresh to trust).
    pub fn put(&mut self, path: &Path, stamp: FileStamp, sha256: String, hashed_at_ns: i128) {
        let Some(key) = path.to_str() else { return };
        if hashed_at_ns - stamp.mtime_ns.max(stamp.ctime_ns) < RACY_WINDOW_NS {
            return;
        }
        self.entries
            .insert(key.to_string(), Entry { stamp, sha256 });
        self.dirty = true;
    }

    /// Writes the cache back atomically if anything changed. Entries for files that no longer
    /// exist are dropped.
    pub fn save(mut self) -> Result<(), String> {
        let Some(path) = self.path.take() else {
            return Ok(());
        };
        if !self.dirty {
            return Ok(());
        }
        self.entries.retain(|p, _| Path::new(p).exists());
        if let Some(dir) = path.parent() {
            std::fs::create_dir_all(dir)
                .map_err(|e| format!("cannot create `{}`: {e}", dir.display()))?;
        }
        let file = CacheFile {
            kind: CACHE_KIND.into(),
            version: CACHE_VERSION,
            entries: self.entries,
        };
        let bytes = serde_json::to_vec(&file).map_err(|e| e.to_string())?;
        let bytes = sealed(&path, &bytes).ok_or("no seal key can be made in the cache folder")?;
        write_atomic(&path, &bytes).map_err(|e| e.to_string())
    }
}

/// Nanoseconds since the epoch, now.
pub fn now_ns() -> i128 {
    std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map_or(0, |d| d.as_nanos() as i128)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn stamp_of(p: &Path) -> FileStamp {
        FileStamp::of(&std::fs::metadata(p).unwrap())
    }

    #[test]
    fn round_trip_and_validation() {
        let dir = tempfile::tempdir().unwrap();
        let f = dir.path().join("data.bin");
        std::fs::write(&f, b"abc").unwrap();
        let s = stamp_of(&f);
        let mut w = Vec::new();
        let mut c = DigestCache::open(dir.path(), false, &mut w);
        c.put(&f, s, "d1".into(), now_ns() + 10 * RACY_WINDOW_NS);
        c.save().unwrap();
        let c = DigestCache::open(dir.path(), false, &mut w);
        assert!(w.is_empty());
        assert_eq!(c.get(&f, &s).as_deref(), Some("d1"));
        let changed = FileStamp { size: 4, ..s };
        assert_eq!(c.get(&f, &changed), None);
    }

    #[test]
    fn fresh_files_are_not_cached() {
        let dir = tempfile::tempdir().unwrap();
        let f = dir.path().join("data.bin");
        std::fs::write(&f, b"abc").unwrap();
        let s = stamp_of(&f);
        let mut c = DigestCache::open(dir.path(), false, &mut Vec::new());
        c.put(&f, s, "d1".into(), now_ns());
        assert_eq!(c.get(&f, &s), None);
    }

    #[test]
    fn corrupt_and_foreign_caches_are_discarded_with_a_warning() {
        let dir = tempfile::tempdir().unwrap();
        let file = dir.path().join(CACHE_FILE);
        std::fs::write(&file, sealed(&file, b"{not json").unwrap()).unwrap();
        let mut w = Vec::new();
        let c = DigestCache::open(dir.path(), false, &mut w);
        assert!(c.entries.is_empty());
        assert!(w[0].contains("corrupt"), "{w:?}");
        let foreign = br#"{"kind":"runprint-digest-cache","version":99,"entries":{}}"#;
        std::fs::write(&file, sealed(&file, foreign).unwrap()).unwrap();
        let mut w = Vec::new();
        DigestCache::open(dir.path(), false, &mut w);
        assert!(w[0].contains("version 99"), "{w:?}");
    }

    #[test]
    fn an_edited_cache_file_breaks_its_seal_and_is_recomputed() {
        let dir = tempfile::tempdir().unwrap();
        let data = dir.path().join("rows.csv");
        std::fs::write(&data, b"a\n1\n").unwrap();
        let meta = std::fs::metadata(&data).unwrap();
        let stamp = FileStamp::of(&meta);
        let real = "0".repeat(64);
        let mut c = DigestCache::open(dir.path(), false, &mut Vec::new());
        c.put(&data, stamp, real.clone(), i128::MAX / 2);
        c.save().unwrap();
        // The key file is the owner's only (common practice for key material).
        let mode = std::os::unix::fs::PermissionsExt::mode(
            &std::fs::metadata(dir.path().join(SEAL_KEY_FILE))
                .unwrap()
                .permissions(),
        );
        assert_eq!(mode & 0o077, 0, "{mode:o}");
        let c = DigestCache::open(dir.path(), false, &mut Vec::new());
        assert_eq!(c.get(&data, &stamp), Some(real.clone()));
        // A file copied from another cache folder (another key) is not believed either.
        let other = tempfile::tempdir().unwrap();
        std::fs::copy(dir.path().join(CACHE_FILE), other.path().join(CACHE_FILE)).unwrap();
        let c = DigestCache::open(other.path(), false, &mut Vec::new());
        assert!(c.entries.is_empty());
        // Edit the digest in the file, as a user or another program might.
        let file = dir.path().join(CACHE_FILE);
        let text = String::from_utf8(std::fs::read(&file).unwrap()).unwrap();
        std::fs::write(&file, text.replace(&real, &"1".repeat(64))).unwrap();
        let c = DigestCache::open(dir.path(), false, &mut Vec::new());
        assert_eq!(
            c.get(&data, &stamp),
            None,
            "the edited entry is not believed"
        );
        assert!(take_warnings()
            .iter()
            .any(|w| w.contains("does not match its seal") && w.contains(CACHE_FILE)));
    }
}
