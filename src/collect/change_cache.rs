//! Digests of the work tree's changed files (the uncommitted change), reused while a file's
//! metadata is unchanged: a job stamped again on the same checkout does not read its few
//! hundred edited or untracked files again.
//!
//! An entry holds a file's path in the work tree, its metadata ([`FileStamp`]: size,
//! modification and status-change times, inode, device, as `lstat` gives them) and the SHA-256
//! of its content; it is used only while all of them match, the rule git's own index uses to
//! tell an unchanged file. A file modified within [`crate::cache::RACY_WINDOW_NS`] before it
//! was read is not kept. The file keeps the entries of the latest stamp's changed files only.
//!
//! One file per repository and host, `worktree-<digest>.json`, in the digest cache's folder;
//! `--rehash` ignores it. A damaged or foreign file is read as an empty cache.

use std::collections::HashMap;
use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};

use crate::cache::FileStamp;

const CACHE_KIND: &str = "runprint-worktree-cache";
const CACHE_VERSION: u32 = 1;

/// One file's digest, with the metadata it was read under.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Entry {
    /// The path in the work tree (invalid UTF-8 replaced: the metadata still tells two files
    /// apart).
    pub path: String,
    /// Its metadata when it was read.
    pub stamp: FileStamp,
    /// Hex SHA-256 of the content.
    pub sha256: String,
}

#[derive(Serialize, Deserialize)]
struct CacheFile {
    kind: String,
    version: u32,
    entries: Vec<Entry>,
}

/// The digests stored by the previous stamp of a work tree.
#[derive(Debug, Default)]
pub struct ChangeCache {
    path: Option<PathBuf>,
    old: HashMap<String, Entry>,
}

impl ChangeCache {
    /// No cache.
    pub fn disabled() -> ChangeCache {
        ChangeCache::default()
    }

    /// The cache of the work tree at `root` in `dir` (`None`: no caching); with `rehash`, what
    /// is stored is not used.
    pub fn open(dir: Option<&Path>, root: &Path, rehash: bool) -> ChangeCache {
        let Some(dir) = dir else {
            return ChangeCache::disabled();
        };
        let path = crate::cache::per_repository_file(dir, "worktree", root);
        let old = if rehash {
            HashMap::new()
        } else {
            crate::cache::read_cache_file(&path)
                .ok()
                .and_then(|b| serde_json::from_slice::<CacheFile>(&b).ok())
                .filter(|f| f.kind == CACHE_KIND && f.version == CACHE_VERSION)
                .map(|f| f.entries.into_iter().map(|e| (e.path.clone(), e)).collect())
                .unwrap_or_default()
        };
        ChangeCache {
            path: Some(path),
            old,
        }
    }

    /// The stored digest of `path` if the file still has metadata `stamp`.
    pub fn get(&self, path: &str, stamp: &FileStamp) -> Option<&str> {
        self.old
            .get(path)
            .filter(|e| e.stamp == *stamp)
            .map(|e| e.sha256.as_str())
    }

    /// An entry for a file read since `started_ns` with metadata `stamp` (taken before the
    /// reading), or `None` when the file changed too recently to be trusted.
    pub fn entry(path: &str, stamp: FileStamp, sha256: &str, started_ns: i128) -> Option<Entry> {
        (!stamp.is_racy(started_ns)).then(|| Entry {
            path: path.to_string(),
            stamp,
            sha256: sha256.to_string(),
        })
    }

    /// Stores this stamp's entries, when they differ from what was loaded. Best effort: a cache
    /// that cannot be written only costs time on the next stamp.
    pub fn save(self, mut entries: Vec<Entry>) {
        let Some(path) = self.path else { return };
        let same = entries.len() == self.old.len()
            && entries.iter().all(|e| self.old.get(&e.path) == Some(e));
        if same {
            crate::cache::mark_used(&path);
            return;
        }
        entries.sort_by(|a, b| a.path.cmp(&b.path));
        let file = CacheFile {
            kind: CACHE_KIND.into(),
            version: CACHE_VERSION,
            entries,
        };
        let Ok(bytes) = serde_json::to_vec(&file) else {
            return;
        };
        crate::cache::write_cache_file(&path, &bytes);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_digest_is_reused_only_while_every_stat_field_matches() {
        let dir = tempfile::tempdir().unwrap();
        let root = dir.path().join("repo");
        let file = root.join("train.py");
        std::fs::create_dir_all(&root).unwrap();
        std::fs::write(&file, "lr = 0.1\n").unwrap();
        let stamp = FileStamp::of(&std::fs::symlink_metadata(&file).unwrap());
        // Just written: not trusted.
        assert!(ChangeCache::entry("train.py", stamp, "ab", crate::cache::now_ns()).is_none());
        let later = crate::cache::now_ns() + 5_000_000_000;
        let e = ChangeCache::entry("train.py", stamp, "ab", later).unwrap();
        ChangeCache::open(Some(dir.path()), &root, false).save(vec![e]);
        let cache = ChangeCache::open(Some(dir.path()), &root, false);
        assert_eq!(cache.get("train.py", &stamp), Some("ab"));
        for changed in [
            FileStamp {
                size: stamp.size + 1,
                ..stamp
            },
            FileStamp {
                mtime_ns: stamp.mtime_ns + 1,
                ..stamp
            },
            FileStamp {
                ctime_ns: stamp.ctime_ns + 1,
                ..stamp
            },
            FileStamp {
                inode: stamp.inode + 1,
                ..stamp
            },
        ] {
            assert_eq!(cache.get("train.py", &changed), None);
        }
        assert_eq!(cache.get("other.py", &stamp), None);
        // --rehash ignores what is stored; a damaged file is an empty cache.
        assert_eq!(
            ChangeCache::open(Some(dir.path()), &root, true).get("train.py", &stamp),
            None
        );
        let path = crate::cache::per_repository_file(dir.path(), "worktree", &root);
        std::fs::write(&path, "[").unwrap();
        assert_eq!(
            ChangeCache::open(Some(dir.path()), &root, false).get("train.py", &stamp),
            None
        );
    }
}
