//! A cache of parsed lockfiles, so that a stamp of an unchanged repository neither reads git's
//! index to find its lockfiles nor reads and parses them again.
//!
//! Two things are kept, both checked against file metadata (size, modification and
//! status-change times, inode, device: [`FileStamp`]) before use:
//!
//! * the lockfile candidates among the files git tracks (their names say they are lockfiles or
//!   `Cargo.toml`), valid while the index file has the same metadata (git replaces the index
//!   file whenever it changes it, so its inode and times change);
//! * per lockfile, the parsed result and its warnings, with the metadata of every path the
//!   result was read from: the lockfile, its companion (`go.sum`, present or not), the files
//!   a requirements file includes, and for `Cargo.lock` the `Cargo.toml` files its enabled
//!   features come from. The list of those manifests must also be the same.
//!
//! A path modified within [`crate::cache::RACY_WINDOW_NS`] before it was read is not trusted (it could change
//! again within the file system's timestamp granularity without its metadata showing it), the
//! digest cache's rule. A result whose features could not be computed for a reason of the
//! moment (no `cargo`, a special file cargo would wait on) is not kept, so that the next stamp
//! tries again; one that failed for a lasting reason (a pinned toolchain not installed, crates
//! missing from cargo's cache) is kept with the toolchain pin and rustup's and cargo's folders
//! among the files it depends on.
//!
//! One file per repository root and host, `lockfiles-<digest>.json`, in the digest cache's
//! folder; it also names the runprint build and the file-size limit it was written with, and is
//! ignored when either differs. `--rehash` ignores it. A corrupt or foreign file is read as an
//! empty cache and replaced: it only ever costs time. Warnings are kept scrubbed of secrets,
//! as they reach the manifest.

use std::collections::HashMap;
use std::path::{Path, PathBuf};
use std::time::SystemTime;

use crate::cache::FileStamp;
use crate::manifest::{Lockfile, LockfileText};
use serde::{Deserialize, Serialize};

const CACHE_KIND: &str = "runprint-lockfile-cache";
const CACHE_VERSION: u32 = 2;

/// What the results depend on besides files: the build that parsed them and the size limit
/// files were read with.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
struct Writer {
    program: Option<FileStamp>,
    max_file_bytes: u64,
}

impl Writer {
    fn this_process() -> Writer {
        Writer {
            program: crate::cache::program_stamp(),
            max_file_bytes: crate::limits::max_file_bytes(),
        }
    }
}

/// The lockfile candidates among the files in git's index.
#[derive(Debug, Clone, Serialize, Deserialize)]
struct Listing {
    index: PathBuf,
    stamp: FileStamp,
    candidates: Vec<String>,
}

/// One lockfile's result and what it was read from.
#[derive(Debug, Clone)]
pub struct Entry {
    /// The path shown in the manifest.
    shown: String,
    /// Every path read, the lockfile first, with its metadata (`None`: absent).
    inputs: Vec<(PathBuf, Option<FileStamp>)>,
    /// For `Cargo.lock`: the `Cargo.toml` files below its folder that decided its features.
    manifests: Vec<PathBuf>,
    /// The parsed lockfile and its serialized form (`None` when it could not be read).
    lockfile: Option<(Lockfile, LockfileText)>,
    warnings: Vec<String>,
}

/// An entry as the cache file's header holds it: the lockfile's serialized forms are stored
/// raw after the header (byte ranges), not as escaped JSON strings.
#[derive(Serialize, Deserialize)]
struct StoredEntry {
    shown: String,
    inputs: Vec<(PathBuf, Option<FileStamp>)>,
    manifests: Vec<PathBuf>,
    /// Byte ranges of the lockfile's canonical JSON and of its TOML, after the header.
    lockfile: Option<[(usize, usize); 2]>,
    warnings: Vec<String>,
}

/// The cache file's header: one line of JSON, followed by the raw serialized lockfiles.
#[derive(Serialize, Deserialize)]
struct CacheFile {
    kind: String,
    version: u32,
    writer: Writer,
    listing: Option<Listing>,
    files: Vec<StoredEntry>,
    /// SHA-256 of what follows the header: a lockfile's TOML is used as stored, beside the
    /// record parsed from its JSON, so the two must be the pair that was written.
    blobs_sha256: String,
}

impl CacheFile {
    /// Reads a cache file; `None` when it is damaged.
    fn decode(bytes: &[u8]) -> Option<(CacheFile, Vec<Entry>)> {
        // Compact JSON escapes every newline, so the header ends at the first one.
        let nl = bytes.iter().position(|&b| b == b'\n')?;
        let header: CacheFile = serde_json::from_slice(&bytes[..nl]).ok()?;
        let blobs = &bytes[nl + 1..];
        if crate::hashing::sha256_bytes(blobs) != header.blobs_sha256 {
            return None;
        }
        let text = |(from, to): (usize, usize)| -> Option<String> {
            String::from_utf8(blobs.get(from..to)?.to_vec()).ok()
        };
        let mut entries = Vec::with_capacity(header.files.len());
        for f in &header.files {
            let lockfile = match f.lockfile {
                Some([json, toml]) => {
                    let json = text(json)?;
                    let lockfile: Lockfile = serde_json::from_str(&json).ok()?;
                    let toml = text(toml)?;
                    Some((lockfile, LockfileText { json, toml }))
                }
                None => None,
            };
            entries.push(Entry {
                shown: f.shown.clone(),
                inputs: f.inputs.clone(),
                manifests: f.manifests.clone(),
                lockfile,
                warnings: f.warnings.clone(),
            });
        }
        Some((header, entries))
    }

    /// Writes the header and the raw serialized lockfiles.
    fn encode(writer: Writer, listing: Option<Listing>, entries: Vec<Entry>) -> Option<Vec<u8>> {
        let mut blobs = Vec::new();
        let mut files = Vec::with_capacity(entries.len());
        for e in entries {
            let lockfile = e.lockfile.map(|(_, t)| {
                let mut range = |s: &str| {
                    let from = blobs.len();
                    blobs.extend_from_slice(s.as_bytes());
                    (from, blobs.len())
                };
                [range(&t.json), range(&t.toml)]
            });
            files.push(StoredEntry {
                shown: e.shown,
                inputs: e.inputs,
                manifests: e.manifests,
                lockfile,
                warnings: e.warnings,
            });
        }
        let header = CacheFile {
            kind: CACHE_KIND.into(),
            version: CACHE_VERSION,
            writer,
            listing,
            files,
            blobs_sha256: crate::hashing::sha256_bytes(&blobs),
        };
        let mut out = serde_json::to_vec(&header).ok()?;
        out.push(b'\n');
        out.extend(blobs);
        Some(out)
    }
}

/// One lockfile's result: the parsed file (`None` when it could not be read) and warnings.
pub type Result = (Option<Lockfile>, Vec<String>);

/// What one lockfile's reading depended on, noted by the reader.
#[derive(Debug, Default)]
pub struct Inputs {
    /// Paths read or looked for, besides the lockfile itself.
    pub paths: Vec<PathBuf>,
    /// The `Cargo.toml` files the features came from.
    pub manifests: Vec<PathBuf>,
    /// False when the result should not be reused (a reader that may answer differently next
    /// time with the same files, such as `cargo` missing or failing).
    pub reusable: bool,
}

/// The cache for one stamp: what was loaded, and what this stamp found.
#[derive(Debug, Default)]
pub struct LockfileCache {
    /// The cache file; `None`: no caching.
    path: Option<PathBuf>,
    old_listing: Option<Listing>,
    old: HashMap<String, Entry>,
    listing: Option<Listing>,
    files: Vec<Entry>,
    changed: bool,
    /// Lockfiles taken from the cache and read anew, and whether the listing was reused.
    reused: usize,
    read: usize,
    listing_reused: bool,
    /// `--rehash`: stored results are not used (this stamp's are saved).
    rehash: bool,
}

impl LockfileCache {
    /// No cache: everything is read and nothing saved.
    pub fn disabled() -> LockfileCache {
        LockfileCache::default()
    }

    /// True when opened for `--rehash`: every cache consulted while reading the lockfiles
    /// (Cargo's enabled features too) must compute anew.
    pub fn rehash(&self) -> bool {
        self.rehash
    }

    /// The cache for the repository at `root` in `dir` (`None`: no caching). With `rehash`,
    /// the stored results are not used, but this stamp's are saved.
    pub fn open(dir: Option<&Path>, root: &Path, rehash: bool) -> LockfileCache {
        let Some(dir) = dir else {
            return LockfileCache::disabled();
        };
        let path = crate::cache::per_repository_file(dir, "lockfiles", root);
        let mut cache = LockfileCache {
            path: Some(path.clone()),
            ..LockfileCache::default()
        };
        if rehash {
            cache.changed = true;
            cache.rehash = true;
            return cache;
        }
        let loaded = crate::cache::read_cache_file(&path)
            .ok()
            .and_then(|bytes| CacheFile::decode(&bytes))
            .filter(|(f, _)| {
                f.kind == CACHE_KIND
                    && f.version == CACHE_VERSION
                    && f.writer == Writer::this_process()
            });
        match loaded {
            Some((f, entries)) => {
                cache.old_listing = f.listing;
                cache.old = entries.into_iter().map(|e| (e.shown.clone(), e)).collect();
            }
            None => cache.changed = true,
        }
        cache
    }

    /// The files of git's index (at `index`) whose names make them lockfile candidates, from
    /// the cache while the index file is unchanged, else from `list` (every tracked file).
    pub fn tracked_candidates(
        &mut self,
        index: &Path,
        list: impl FnOnce() -> Option<Vec<String>>,
    ) -> Option<Vec<String>> {
        let started = SystemTime::now();
        let stamp = FileStamp::of_path(index);
        if let (Some(old), Some(stamp)) = (&self.old_listing, stamp) {
            if old.index == index && old.stamp == stamp {
                self.listing = Some(old.clone());
                self.listing_reused = true;
                return Some(old.candidates.clone());
            }
        }
        let candidates: Vec<String> = list()?.into_iter().filter(|f| is_candidate(f)).collect();
        // Metadata taken after the reading, trusted only if older than the racy window.
        let now = FileStamp::of_path(index);
        self.listing = match now {
            Some(s) if now == stamp && !recent(&s, started) => Some(Listing {
                index: index.to_path_buf(),
                stamp: s,
                candidates: candidates.clone(),
            }),
            _ => None,
        };
        self.changed = true;
        Some(candidates)
    }

    /// The stored result for the lockfile shown as `shown` at `abs`, if every path it was read
    /// from looks the same and (for `Cargo.lock`) the same `manifests` decide its features.
    /// A stored entry used moves to this stamp's entries (looked up first, for a second
    /// reading after git's status).
    pub fn lookup(&mut self, shown: &str, abs: &Path, manifests: &[PathBuf]) -> Option<Result> {
        let current = |e: &Entry| {
            e.inputs.first().is_some_and(|(p, _)| p == abs)
                && e.manifests == manifests
                && e.inputs.iter().all(|(p, s)| FileStamp::of_path(p) == *s)
        };
        let result = |e: &Entry| {
            (
                e.lockfile.as_ref().map(|(l, _)| l.clone()),
                e.warnings.clone(),
            )
        };
        if let Some(e) = self.files.iter().find(|e| e.shown == shown) {
            return current(e).then(|| {
                self.reused += 1;
                result(e)
            });
        }
        let e = self.old.remove(shown)?;
        if !current(&e) {
            return None;
        }
        self.reused += 1;
        let found = result(&e);
        self.files.push(e);
        Some(found)
    }

    /// An entry for a result read from `abs` and `inputs` since `started`, or `None` when it
    /// cannot be trusted later (see the module's notes).
    pub fn entry(
        shown: &str,
        abs: &Path,
        inputs: Inputs,
        started: SystemTime,
        result: &Result,
    ) -> Option<Entry> {
        if !inputs.reusable {
            return None;
        }
        let mut paths = vec![abs.to_path_buf()];
        paths.extend(inputs.paths);
        paths.extend(inputs.manifests.iter().cloned());
        let mut stamped = Vec::with_capacity(paths.len());
        for p in paths {
            let s = FileStamp::of_path(&p);
            if s.is_some_and(|s| recent(&s, started)) {
                return None;
            }
            stamped.push((p, s));
        }
        let lockfile = match &result.0 {
            Some(l) => Some((l.clone(), LockfileText::of(l)?)),
            None => None,
        };
        Some(Entry {
            shown: shown.to_string(),
            inputs: stamped,
            manifests: inputs.manifests,
            lockfile,
            warnings: result
                .1
                .iter()
                .map(|w| crate::redact::scrub_secrets(w))
                .collect(),
        })
    }

    /// Keeps for saving the entry of the lockfile shown as `shown`, just read (`None` when it
    /// cannot be trusted later; see [`LockfileCache::entry`]).
    pub fn keep(&mut self, shown: &str, entry: Option<Entry>) {
        self.read += 1;
        self.changed = true;
        self.files.retain(|f| f.shown != shown);
        self.files.extend(entry);
    }

    /// The serialized form of each of `lockfiles` that this stamp's entries hold (see
    /// [`LockfileText`]), by position; `None` for a lockfile they do not hold as it is.
    pub fn texts(&self, lockfiles: &[Lockfile]) -> Vec<Option<LockfileText>> {
        lockfiles
            .iter()
            .map(|l| {
                self.files
                    .iter()
                    .find(|e| e.shown == l.path)
                    .and_then(|e| e.lockfile.as_ref())
                    .filter(|(stored, _)| stored == l)
                    .map(|(_, text)| text.clone())
            })
            .collect()
    }

    /// For `RUNPRINT_TIMINGS`: how many lockfile results were reused and read, and whether the
    /// index listing was reused.
    pub fn summary(&self) -> String {
        format!(
            "{} reused, {} read, index listing reused: {}",
            self.reused, self.read, self.listing_reused
        )
    }

    /// Writes what this stamp found, if it differs from what was loaded. Best effort: a cache
    /// that cannot be written only costs time on the next stamp.
    pub fn save(self) {
        let Some(path) = self.path else { return };
        // Unchanged: nothing read anew, and every stored entry used again.
        let unchanged = !self.changed
            && self.old.is_empty()
            && self.listing.as_ref().map(|l| (&l.index, l.stamp))
                == self.old_listing.as_ref().map(|l| (&l.index, l.stamp));
        if unchanged {
            crate::cache::mark_used(&path);
            return;
        }
        let Some(bytes) = CacheFile::encode(Writer::this_process(), self.listing, self.files)
        else {
            return;
        };
        crate::cache::write_cache_file(&path, &bytes);
    }
}

/// Whether a repository file (a `/`-separated path) matters for lockfiles: its name makes it a
/// lockfile or a `Cargo.toml`.
pub fn is_candidate(path: &str) -> bool {
    let name = path.rsplit('/').next().unwrap_or(path);
    name == "Cargo.toml" || crate::lockfile::Format::detect_path(path).is_some()
}

/// Modified (or its status changed) less than the racy window before `started`, or later.
fn recent(s: &FileStamp, started: SystemTime) -> bool {
    started
        .duration_since(SystemTime::UNIX_EPOCH)
        .map_or(true, |d| s.is_racy(d.as_nanos() as i128))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn result() -> Result {
        (None, vec!["lockfile `a`: a warning".into()])
    }

    #[test]
    fn a_file_changed_within_the_racy_window_is_not_kept() {
        let dir = tempfile::tempdir().unwrap();
        let lock = dir.path().join("requirements.txt");
        std::fs::write(&lock, "numpy==1.26.4\n").unwrap();
        let inputs = || Inputs {
            reusable: true,
            ..Inputs::default()
        };
        // Just written: its times are within two seconds of the reading.
        let now = SystemTime::now();
        assert!(LockfileCache::entry("a", &lock, inputs(), now, &result()).is_none());
        // Read long after it was written (as if): kept, with its metadata.
        let later = now + std::time::Duration::from_secs(5);
        let e = LockfileCache::entry("a", &lock, inputs(), later, &result()).unwrap();
        assert_eq!(e.inputs[0].1, FileStamp::of_path(&lock));
        // A result its reader marks as not reusable is never kept.
        let mut no = inputs();
        no.reusable = false;
        assert!(LockfileCache::entry("a", &lock, no, later, &result()).is_none());
    }

    #[test]
    fn a_cache_from_another_size_limit_is_ignored() {
        let dir = tempfile::tempdir().unwrap();
        let root = dir.path().join("repo");
        let lock = root.join("requirements.txt");
        std::fs::create_dir_all(&root).unwrap();
        std::fs::write(&lock, "numpy==1.26.4\n").unwrap();
        let mut cache = LockfileCache::open(Some(dir.path()), &root, false);
        let later = SystemTime::now() + std::time::Duration::from_secs(5);
        let inputs = Inputs {
            reusable: true,
            ..Inputs::default()
        };
        let e = LockfileCache::entry("requirements.txt", &lock, inputs, later, &result());
        cache.keep("requirements.txt", e);
        cache.save();
        let mut cache = LockfileCache::open(Some(dir.path()), &root, false);
        assert!(cache.lookup("requirements.txt", &lock, &[]).is_some());
        // Another path shown under the same name is another file.
        let mut cache = LockfileCache::open(Some(dir.path()), &root, false);
        assert!(cache
            .lookup("requirements.txt", &root.join("x/requirements.txt"), &[])
            .is_none());
        // --rehash does not use what is stored.
        let mut rehash = LockfileCache::open(Some(dir.path()), &root, true);
        assert!(rehash.lookup("requirements.txt", &lock, &[]).is_none());
        // The written file names the limit it was read under; another limit ignores it.
        let path = cache.path.clone().unwrap();
        let text = std::fs::read_to_string(&path).unwrap();
        let limit = crate::limits::max_file_bytes();
        let other = text.replace(
            &format!("\"max_file_bytes\":{limit}"),
            &format!("\"max_file_bytes\":{}", limit + 1),
        );
        assert_ne!(other, text);
        std::fs::write(&path, other).unwrap();
        let mut cache = LockfileCache::open(Some(dir.path()), &root, false);
        assert!(cache.lookup("requirements.txt", &lock, &[]).is_none());
    }
}
