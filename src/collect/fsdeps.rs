//! File-system access that remembers what it touched, so that a result computed from files
//! can be cached and later checked for freshness by looking at those files again.
//!
//! The numerical-stack collectors ([`super::python`], [`super::native`]) read files only
//! through these functions. While [`record`] runs, every path they touch is noted with how it
//! was used; [`Dependencies::snapshot`] then takes the metadata of each one, and
//! [`Snapshot::is_current`] tells whether all of them still look the same. Outside [`record`]
//! the functions are the plain `std::fs` calls.

use std::cell::RefCell;
use std::collections::{BTreeMap, BTreeSet};
use std::path::{Component, Path, PathBuf};
use std::sync::{Arc, Mutex};
use std::time::SystemTime;

use serde::{Deserialize, Serialize};

use crate::cache::FileStamp;

/// How a path was used.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Access {
    /// Its content was read (or its type or existence tested): its metadata must not change.
    Read,
    /// Its entries were listed: a folder's modification time changes when an entry is added,
    /// removed or renamed.
    List,
    /// Its symbolic links were resolved: the resolved path must not change.
    Resolve,
}

/// The paths noted while [`record`] ran.
#[derive(Debug, Clone, Default)]
pub struct Dependencies(Arc<Mutex<BTreeSet<(PathBuf, Access)>>>);

thread_local! {
    static CURRENT: RefCell<Option<Dependencies>> = const { RefCell::new(None) };
}

/// Runs `f` noting every path it touches through this module, on this thread and on threads
/// started with [`inherit`].
pub fn record<T>(f: impl FnOnce() -> T) -> (T, Dependencies) {
    let deps = Dependencies::default();
    let previous = CURRENT.with(|c| c.replace(Some(deps.clone())));
    let out = f();
    CURRENT.with(|c| *c.borrow_mut() = previous);
    (out, deps)
}

/// The recorder of this thread, to hand to a worker thread (see [`inherit`]).
pub fn current() -> Option<Dependencies> {
    CURRENT.with(|c| c.borrow().clone())
}

/// Runs `f` on this (worker) thread with the recorder of the thread that started it.
pub fn inherit<T>(deps: Option<Dependencies>, f: impl FnOnce() -> T) -> T {
    let previous = CURRENT.with(|c| c.replace(deps));
    let out = f();
    CURRENT.with(|c| *c.borrow_mut() = previous);
    out
}

fn note(path: &Path, access: Access) {
    CURRENT.with(|c| {
        if let Some(deps) = c.borrow().as_ref() {
            deps.0
                .lock()
                .unwrap_or_else(|e| e.into_inner())
                .insert((path.to_path_buf(), access));
        }
    });
}

/// Reads a file through the file-opening policy ([`crate::limits::read_regular_file`]: a
/// regular file only, never a FIFO or a device such as `/dev/zero` behind a `METADATA`
/// link, and bounded in size).
pub fn read(path: impl AsRef<Path>) -> std::io::Result<Vec<u8>> {
    let path = path.as_ref();
    note(path, Access::Read);
    crate::limits::read_regular_file(path)
}

/// [`read`] as UTF-8 text.
pub fn read_to_string(path: impl AsRef<Path>) -> std::io::Result<String> {
    let path = path.as_ref();
    note(path, Access::Read);
    crate::limits::read_regular_text(path)
}

/// Opens a regular file for reading ([`crate::limits::open_regular`]: never a FIFO or a
/// device); the caller bounds how much it reads.
pub fn open(path: impl AsRef<Path>) -> std::io::Result<std::fs::File> {
    let path = path.as_ref();
    note(path, Access::Read);
    crate::limits::open_regular(path, true)
}

/// `std::fs::read_dir`.
pub fn read_dir(path: impl AsRef<Path>) -> std::io::Result<std::fs::ReadDir> {
    let path = path.as_ref();
    note(path, Access::List);
    std::fs::read_dir(path)
}

/// `std::fs::canonicalize`.
pub fn canonicalize(path: impl AsRef<Path>) -> std::io::Result<PathBuf> {
    let path = path.as_ref();
    note(path, Access::Resolve);
    std::fs::canonicalize(path)
}

/// `Path::exists`.
pub fn exists(path: impl AsRef<Path>) -> bool {
    let path = path.as_ref();
    note(path, Access::Read);
    path.exists()
}

/// `Path::is_file`.
pub fn is_file(path: impl AsRef<Path>) -> bool {
    let path = path.as_ref();
    note(path, Access::Read);
    path.is_file()
}

/// `Path::is_dir`.
pub fn is_dir(path: impl AsRef<Path>) -> bool {
    let path = path.as_ref();
    note(path, Access::Read);
    path.is_dir()
}

/// Metadata as stored: size, modification and status-change times, inode, device.
pub type Stamp = (u64, i128, i128, u64, u64);

fn tuple(s: FileStamp) -> Stamp {
    (s.size, s.mtime_ns, s.ctime_ns, s.inode, s.dev)
}

fn is_false(b: &bool) -> bool {
    !*b
}

/// What one path looked like, for the ways it was used.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Seen {
    /// The path.
    #[serde(rename = "p")]
    pub path: PathBuf,
    /// Its symbolic links were resolved.
    #[serde(rename = "r", default, skip_serializing_if = "is_false")]
    pub resolve_used: bool,
    /// Its own metadata (following links), or `None` when absent or unreadable.
    #[serde(rename = "s", default, skip_serializing_if = "Option::is_none")]
    pub stamp: Option<Stamp>,
    /// The resolved path, when resolution was used and succeeded.
    #[serde(rename = "t", default, skip_serializing_if = "Option::is_none")]
    pub resolved: Option<PathBuf>,
}

/// A folder whose metadata stands for the files in it that were used (see [`Snapshot`]).
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct SeenFolder {
    /// The path.
    #[serde(rename = "p")]
    pub path: PathBuf,
    /// Its metadata (following links), or `None` when absent or unreadable.
    #[serde(rename = "s", default, skip_serializing_if = "Option::is_none")]
    pub stamp: Option<Stamp>,
    /// Its resolved path, when a file in it was resolved (the file then resolved to this
    /// plus its name).
    #[serde(rename = "t", default, skip_serializing_if = "Option::is_none")]
    pub resolved: Option<PathBuf>,
}

/// Every noted path with what it looked like.
///
/// Inside the package trees handed to [`Dependencies::snapshot`] (the environment's
/// `site-packages` folders), a file is checked through the metadata of the folder holding it.
/// Installers (pip, uv, conda, dpkg for system libraries) put files in place by creating,
/// renaming or removing directory entries, and each of those changes the folder's
/// modification time (POSIX `rename`, `unlink`, `open` with `O_CREAT`); an environment holds
/// thousands of such files and a few hundred folders, so this costs a few hundred system calls
/// instead of a few thousand. What it cannot see is a file inside a package overwritten in
/// place by hand; `--rehash` scans again. Everything else (`pyvenv.cfg`, the loader's cache,
/// `.pth` files, system libraries) is checked file by file.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Snapshot {
    /// Folders whose metadata stands for the files in them, sorted by path.
    pub folders: Vec<SeenFolder>,
    /// Every other noted path, sorted by path.
    pub entries: Vec<Seen>,
    /// How many noted paths the folders stand for.
    pub by_folder: usize,
}

impl Dependencies {
    /// Number of distinct noted paths.
    pub fn len(&self) -> usize {
        self.0.lock().unwrap_or_else(|e| e.into_inner()).len()
    }

    /// Whether nothing was noted.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// The metadata of every noted path now; files below one of `package_trees` are covered by
    /// their folder (see [`Snapshot`]). `None` when a path was modified less than
    /// [`crate::cache::RACY_WINDOW_NS`] before `started` (or later): it may have changed again
    /// within the file system's timestamp granularity without its metadata showing it, so the
    /// result computed from it cannot be trusted to match the metadata (the digest cache's
    /// rule).
    pub fn snapshot(&self, started: SystemTime, package_trees: &[PathBuf]) -> Option<Snapshot> {
        // Per path: (listed, resolved). A listed folder is always checked by its own metadata.
        let mut by_path: BTreeMap<PathBuf, (bool, bool)> = BTreeMap::new();
        for (path, access) in self.0.lock().unwrap_or_else(|e| e.into_inner()).iter() {
            let e = by_path.entry(path.clone()).or_default();
            match access {
                Access::Read => {}
                Access::List => e.0 = true,
                Access::Resolve => e.1 = true,
            }
        }
        let limit_ns = started
            .duration_since(SystemTime::UNIX_EPOCH)
            .ok()?
            .as_nanos() as i128
            - crate::cache::RACY_WINDOW_NS;
        let recent = |s: &Option<Stamp>| s.is_some_and(|s| s.1 >= limit_ns || s.2 >= limit_ns);
        let stamp_of = |p: &Path| std::fs::metadata(p).ok().map(|m| tuple(FileStamp::of(&m)));
        let mut folders: BTreeMap<PathBuf, SeenFolder> = BTreeMap::new();
        let mut entries = Vec::with_capacity(by_path.len());
        let mut by_folder_count = 0;
        for (path, (listed, resolve_used)) in by_path {
            // The reference answers, from the standard library; `Snapshot::is_current` gets
            // the same ones with fewer system calls.
            let resolved = resolve_used
                .then(|| std::fs::canonicalize(&path).ok())
                .flatten();
            let parent = path.parent().filter(|p| !p.as_os_str().is_empty());
            let in_tree = !listed
                && parent.is_some_and(|parent| {
                    package_trees
                        .iter()
                        .any(|t| parent.starts_with(t) && parent != t.as_path())
                });
            // By folder only where the folder also gives the resolution: the file itself is
            // not a link (a link's target could change behind an unchanged folder), and it
            // resolves to its folder's resolved path plus its name (or not at all, being
            // absent: then the unchanged folder says it is still absent).
            let mut folder_resolved = None;
            let by_folder = in_tree
                && (!resolve_used
                    || match (&resolved, parent, path.file_name()) {
                        (Some(r), Some(parent), Some(name)) => {
                            folder_resolved = std::fs::canonicalize(parent).ok();
                            folder_resolved
                                .as_ref()
                                .is_some_and(|cp| cp.join(name) == *r)
                        }
                        (None, _, _) => std::fs::symlink_metadata(&path).is_err(),
                        _ => false,
                    });
            if by_folder {
                by_folder_count += 1;
                let parent = parent.unwrap_or(Path::new("/")).to_path_buf();
                let folder = match folders.entry(parent) {
                    std::collections::btree_map::Entry::Occupied(e) => e.into_mut(),
                    std::collections::btree_map::Entry::Vacant(e) => {
                        let stamp = stamp_of(e.key());
                        if recent(&stamp) {
                            return None;
                        }
                        let path = e.key().clone();
                        e.insert(SeenFolder {
                            path,
                            stamp,
                            resolved: None,
                        })
                    }
                };
                if folder_resolved.is_some() {
                    folder.resolved = folder_resolved;
                }
            } else {
                let stamp = stamp_of(&path);
                if recent(&stamp) {
                    return None;
                }
                entries.push(Seen {
                    path,
                    resolve_used,
                    stamp,
                    resolved,
                });
            }
        }
        Some(Snapshot {
            folders: folders.into_values().collect(),
            entries,
            by_folder: by_folder_count,
        })
    }
}

impl Snapshot {
    /// Whether every path still looks as it did.
    ///
    /// Shaped to cost about one system call per folder and per path checked on its own: a path
    /// that is not a symbolic link has the metadata `lstat` gives, and resolves to its
    /// folder's resolved path plus its name, with each folder resolved once. Links, and paths
    /// with `.` or `..`, are resolved by the standard library. The check runs on the calling
    /// thread, leaving the other cores to the collectors running meanwhile.
    pub fn is_current(&self) -> bool {
        let dirs = DirResolver::default();
        // An unchanged folder has the same entries; one that still resolves to the same path
        // gives its files the same resolution.
        let folders_ok = self.folders.iter().all(|f| {
            dirs.stamp(&f.path) == f.stamp
                && f.resolved
                    .as_ref()
                    .is_none_or(|r| dirs.resolve_any(&f.path).as_ref() == Some(r))
        });
        folders_ok
            && self.entries.iter().all(|seen| {
                // A folder that is also checked on its own (a listed `.dist-info`) is looked
                // at once.
                let node = dirs.node(&seen.path);
                if node.stamp != seen.stamp {
                    return false;
                }
                if seen.resolve_used {
                    let now = match node.kind {
                        Kind::Missing => None,
                        Kind::Plain { .. } => dirs.resolve_plain(&seen.path),
                        Kind::Link => std::fs::canonicalize(&seen.path).ok(),
                    };
                    if now != seen.resolved {
                        return false;
                    }
                }
                true
            })
    }
}

/// Paths looked at once each, for [`Snapshot::is_current`]: their metadata and resolved path.
#[derive(Default)]
struct DirResolver(RefCell<std::collections::HashMap<PathBuf, Node>>);

/// What `lstat` says of a path.
#[derive(Clone, Copy, PartialEq, Eq)]
enum Kind {
    /// Absent or unreadable.
    Missing,
    /// A symbolic link.
    Link,
    /// Anything else.
    Plain { dir: bool },
}

#[derive(Clone)]
struct Node {
    kind: Kind,
    /// Metadata following links.
    stamp: Option<Stamp>,
    /// The resolved path (`None`: it does not resolve); computed when first asked for.
    resolved: Option<Option<PathBuf>>,
}

impl DirResolver {
    /// The resolved path of `path`, known not to be a link itself: for an absolute path of
    /// plain names, its folder's resolved path plus its name; with `.` or `..` in it,
    /// component by component ([`DirResolver::resolve`]).
    fn resolve_plain(&self, path: &Path) -> Option<PathBuf> {
        let simple = path.is_absolute()
            && path
                .components()
                .all(|c| matches!(c, Component::RootDir | Component::Normal(_)));
        if !simple {
            return self.resolve(path);
        }
        match (path.parent(), path.file_name()) {
            (Some(parent), Some(name)) => Some(self.folder_resolved(parent)?.join(name)),
            _ => std::fs::canonicalize(path).ok(),
        }
    }

    /// The resolved path of any path (a link, a missing path or not).
    fn resolve_any(&self, path: &Path) -> Option<PathBuf> {
        if !path.is_absolute() {
            return std::fs::canonicalize(path).ok();
        }
        match self.node(path).kind {
            Kind::Missing => None,
            Kind::Link => std::fs::canonicalize(path).ok(),
            Kind::Plain { .. } => self.resolve_plain(path),
        }
    }

    /// The metadata of a folder (following links).
    fn stamp(&self, dir: &Path) -> Option<Stamp> {
        if !dir.is_absolute() {
            return std::fs::metadata(dir)
                .ok()
                .map(|m| tuple(FileStamp::of(&m)));
        }
        self.node(dir).stamp
    }

    /// `lstat` of a path (and `stat` for a link), once per path.
    fn node(&self, path: &Path) -> Node {
        if let Some(known) = self.0.borrow().get(path) {
            return known.clone();
        }
        let node = match std::fs::symlink_metadata(path) {
            Ok(m) if !m.file_type().is_symlink() => Node {
                kind: Kind::Plain { dir: m.is_dir() },
                stamp: Some(tuple(FileStamp::of(&m))),
                resolved: None,
            },
            Ok(_) => Node {
                kind: Kind::Link,
                stamp: std::fs::metadata(path)
                    .ok()
                    .map(|m| tuple(FileStamp::of(&m))),
                resolved: None,
            },
            Err(_) => Node {
                kind: Kind::Missing,
                stamp: None,
                resolved: Some(None),
            },
        };
        self.0.borrow_mut().insert(path.to_path_buf(), node.clone());
        node
    }

    /// The resolved path of an absolute path of plain names: its folder's plus its name when
    /// it is not a link, the standard library's answer when it is.
    fn folder_resolved(&self, dir: &Path) -> Option<PathBuf> {
        let node = self.node(dir);
        if let Some(known) = node.resolved {
            return known;
        }
        let resolved = match (node.kind, dir.parent(), dir.file_name()) {
            (Kind::Link, _, _) => std::fs::canonicalize(dir).ok(),
            (_, Some(parent), Some(name)) => self.folder_resolved(parent).map(|p| p.join(name)),
            _ => Some(dir.to_path_buf()), // the root
        };
        if let Some(n) = self.0.borrow_mut().get_mut(dir) {
            n.resolved = Some(resolved.clone());
        }
        resolved
    }

    /// The resolved path of any path, as `realpath(3)` finds it: component by component, each
    /// prefix already resolved, so `..` removes the last name; a component that is a link hands
    /// the whole path to the standard library; a missing component, or one that is not a
    /// folder but has more after it, does not resolve.
    fn resolve(&self, path: &Path) -> Option<PathBuf> {
        if !path.is_absolute() {
            return std::fs::canonicalize(path).ok();
        }
        let mut parts = path.components().peekable();
        let mut cur = PathBuf::new();
        while let Some(c) = parts.next() {
            match c {
                Component::RootDir => cur.push("/"),
                Component::CurDir => {}
                Component::ParentDir => {
                    cur.pop();
                }
                Component::Prefix(_) => return std::fs::canonicalize(path).ok(),
                Component::Normal(name) => {
                    cur.push(name);
                    match self.node(&cur).kind {
                        Kind::Missing => return None,
                        Kind::Link => return std::fs::canonicalize(path).ok(),
                        Kind::Plain { dir } if !dir && parts.peek().is_some() => return None,
                        Kind::Plain { .. } => {}
                    }
                }
            }
        }
        Some(cur)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::time::Duration;

    /// The files here were all made just now; a scan "started" later than the racy window
    /// trusts them.
    fn later() -> SystemTime {
        SystemTime::now() + Duration::from_secs(5)
    }

    /// Past the coarsest kernel timestamp tick, so that a rewrite gets a new time.
    fn tick() {
        std::thread::sleep(Duration::from_millis(50));
    }

    #[test]
    fn notes_paths_on_this_thread_and_inheriting_workers_only() {
        let dir = tempfile::tempdir().unwrap();
        let a = dir.path().join("a");
        std::fs::write(&a, "1").unwrap();
        let ((), deps) = record(|| {
            let _ = read_to_string(&a);
            let _ = exists(dir.path().join("missing"));
            let parent = current();
            std::thread::scope(|s| {
                s.spawn(|| inherit(parent, || is_dir(dir.path())));
                s.spawn(|| is_file(dir.path().join("not-noted")));
            });
        });
        let noted: Vec<PathBuf> = deps
            .0
            .lock()
            .unwrap()
            .iter()
            .map(|(p, _)| p.clone())
            .collect();
        assert_eq!(
            noted,
            [dir.path().to_path_buf(), a, dir.path().join("missing")]
        );
        // Outside `record` nothing is noted anywhere.
        let _ = read_to_string(dir.path().join("a"));
        assert_eq!(deps.len(), 3);
    }

    #[test]
    fn a_snapshot_sees_edits_new_entries_new_files_and_retargeted_links() {
        let dir = tempfile::tempdir().unwrap();
        let (file, sub, link) = (
            dir.path().join("f"),
            dir.path().join("sub"),
            dir.path().join("link"),
        );
        std::fs::write(&file, "12").unwrap();
        std::fs::create_dir(&sub).unwrap();
        std::os::unix::fs::symlink(&file, &link).unwrap();
        let ((), deps) = record(|| {
            let _ = read(&file);
            let _ = read_dir(&sub);
            let _ = exists(dir.path().join("later"));
            let _ = canonicalize(&link);
        });
        let snap = deps.snapshot(later(), &[]).expect("nothing recent");
        assert!(snap.is_current());

        tick();
        std::fs::write(&file, "34").unwrap(); // same size, new time
        assert!(!snap.is_current());
        let snap = deps.snapshot(later(), &[]).unwrap();
        tick();
        std::fs::write(sub.join("new"), "").unwrap();
        assert!(!snap.is_current());

        let snap = deps.snapshot(later(), &[]).unwrap();
        std::fs::write(dir.path().join("later"), "").unwrap();
        assert!(!snap.is_current());

        std::fs::remove_file(dir.path().join("later")).unwrap();
        let snap = deps.snapshot(later(), &[]).unwrap();
        assert!(snap.is_current());
        std::fs::remove_file(&link).unwrap();
        std::os::unix::fs::symlink(&sub, &link).unwrap();
        assert!(!snap.is_current());
    }

    #[test]
    fn a_file_changed_within_the_racy_window_gives_no_snapshot() {
        let dir = tempfile::tempdir().unwrap();
        let file = dir.path().join("f");
        std::fs::write(&file, "1").unwrap();
        let ((), deps) = record(|| {
            let _ = read(&file);
        });
        assert!(deps.snapshot(SystemTime::now(), &[]).is_none());
        // Setting the modification time back does not help: the status-change time says
        // "just now".
        let f = std::fs::File::options().write(true).open(&file).unwrap();
        f.set_modified(SystemTime::now() - Duration::from_secs(60))
            .unwrap();
        assert!(deps.snapshot(SystemTime::now(), &[]).is_none());
        assert!(deps.snapshot(later(), &[]).is_some());
    }

    /// The quick check resolves through linked folders and `..` exactly as the standard
    /// library does, and notices when a linked folder points elsewhere.
    #[test]
    fn resolution_through_linked_folders_matches_the_standard_library() {
        let dir = tempfile::tempdir().unwrap();
        let root = dir.path();
        for d in ["real/lib", "other/lib"] {
            std::fs::create_dir_all(root.join(d)).unwrap();
            std::fs::write(root.join(d).join("libx.so"), "elf").unwrap();
        }
        std::os::unix::fs::symlink(root.join("real"), root.join("link")).unwrap();
        let paths = [
            root.join("link/lib/libx.so"),
            root.join("real/lib/../lib/libx.so"),
            root.join("link/lib"),
            root.join("link/lib/missing.so"),
        ];
        let ((), deps) = record(|| {
            for p in &paths {
                let _ = canonicalize(p);
            }
        });
        let snap = deps.snapshot(later(), &[]).unwrap();
        let first = snap.entries.iter().find(|e| e.path == paths[0]).unwrap();
        assert_eq!(
            first.resolved.as_deref(),
            Some(
                std::fs::canonicalize(root.join("real/lib/libx.so"))
                    .unwrap()
                    .as_path()
            )
        );
        assert!(snap.is_current());
        std::fs::remove_file(root.join("link")).unwrap();
        std::os::unix::fs::symlink(root.join("other"), root.join("link")).unwrap();
        assert!(!snap.is_current());
    }

    /// A package tree reached through a linked folder: moving the real folder and pointing the
    /// link at its new place leaves every folder inside with the same metadata, but the
    /// libraries now resolve elsewhere; the folder's resolved path catches it.
    #[test]
    fn a_moved_tree_behind_a_link_is_seen() {
        let dir = tempfile::tempdir().unwrap();
        let root = std::fs::canonicalize(dir.path()).unwrap();
        let libs = root.join("real/site-packages/numpy.libs");
        std::fs::create_dir_all(&libs).unwrap();
        std::fs::write(libs.join("libopenblas.so"), "elf").unwrap();
        std::os::unix::fs::symlink(root.join("real"), root.join("env")).unwrap();
        let site = root.join("env/site-packages");
        let ((), deps) = record(|| {
            let _ = canonicalize(site.join("numpy.libs/libopenblas.so"));
        });
        let snap = deps.snapshot(later(), std::slice::from_ref(&site)).unwrap();
        assert_eq!(snap.by_folder, 1);
        assert!(snap.is_current());
        std::fs::rename(root.join("real"), root.join("moved")).unwrap();
        std::fs::remove_file(root.join("env")).unwrap();
        std::os::unix::fs::symlink(root.join("moved"), root.join("env")).unwrap();
        assert!(!snap.is_current());
    }

    /// Component-by-component resolution gives what the standard library's `canonicalize`
    /// (`realpath(3)`) gives, for `..` after folders, files, links and missing names.
    #[test]
    fn resolution_with_dot_dot_matches_realpath() {
        let dir = tempfile::tempdir().unwrap();
        let root = std::fs::canonicalize(dir.path()).unwrap();
        std::fs::create_dir_all(root.join("pkg/sub")).unwrap();
        std::fs::create_dir_all(root.join("pkg.libs")).unwrap();
        std::fs::write(root.join("pkg.libs/libx.so"), "elf").unwrap();
        std::fs::write(root.join("pkg/file"), "x").unwrap();
        std::os::unix::fs::symlink(root.join("pkg/sub"), root.join("linked")).unwrap();
        let cases = [
            "pkg/../pkg.libs/libx.so",
            "pkg/sub/../../pkg.libs/libx.so",
            "pkg/./sub/..",
            "pkg/file/../sub",
            "pkg/missing/../sub",
            "linked/../pkg.libs/libx.so",
            "linked/..",
            "pkg/sub/../../../..",
        ];
        let dirs = DirResolver::default();
        for case in cases {
            let path = root.join(case);
            assert_eq!(
                dirs.resolve(&path),
                std::fs::canonicalize(&path).ok(),
                "{case}"
            );
            assert_eq!(
                dirs.resolve_plain(&path),
                std::fs::canonicalize(&path).ok(),
                "{case}"
            );
        }
    }

    /// Inside a package tree, files are checked through their folder: what installers do
    /// (create, rename, remove entries) is seen; an in-place overwrite is the documented blind
    /// spot. Outside the tree every file is checked on its own.
    #[test]
    fn package_trees_are_checked_by_folder() {
        let dir = tempfile::tempdir().unwrap();
        let site = dir.path().join("site-packages");
        let info = site.join("numpy-2.0.0.dist-info");
        let libs = site.join("numpy.libs");
        std::fs::create_dir_all(&info).unwrap();
        std::fs::create_dir_all(&libs).unwrap();
        std::fs::write(info.join("METADATA"), "Name: numpy\nVersion: 2.0.0\n").unwrap();
        std::fs::write(libs.join("libopenblas.so"), "elf").unwrap();
        let cfg = dir.path().join("pyvenv.cfg");
        std::fs::write(&cfg, "version = 3.11.7\n").unwrap();
        let record = || {
            record(|| {
                let _ = read_dir(&site);
                let _ = read_to_string(info.join("METADATA"));
                let _ = exists(info.join("direct_url.json"));
                let _ = canonicalize(libs.join("libopenblas.so"));
                let _ = read(libs.join("libopenblas.so"));
                let _ = read_to_string(&cfg);
            })
            .1
        };
        let trees = [site.clone()];
        let snap = record().snapshot(later(), &trees).unwrap();
        assert_eq!(snap.by_folder, 3, "{snap:?}");
        assert_eq!(snap.folders.len(), 2);
        // The resolved library's folder keeps its resolved path.
        let libs_seen = snap.folders.iter().find(|f| f.path == libs).unwrap();
        assert_eq!(
            libs_seen.resolved.as_deref(),
            Some(std::fs::canonicalize(&libs).unwrap().as_path())
        );
        assert!(snap.is_current());

        // An installer's way: a new file renamed over the old one.
        tick();
        std::fs::write(libs.join(".tmp"), "elf2").unwrap();
        std::fs::rename(libs.join(".tmp"), libs.join("libopenblas.so")).unwrap();
        assert!(!snap.is_current());
        let snap = record().snapshot(later(), &trees).unwrap();
        tick();
        std::fs::write(info.join("direct_url.json"), "{}").unwrap();
        assert!(!snap.is_current());

        let snap = record().snapshot(later(), &trees).unwrap();
        // The blind spot: overwritten in place, same folder entries.
        tick();
        std::fs::write(info.join("METADATA"), "Name: numpy\nVersion: 2.0.1\n").unwrap();
        assert!(snap.is_current());
        // Outside the tree, an in-place edit is seen.
        std::fs::write(&cfg, "version = 3.11.8\n").unwrap();
        assert!(!snap.is_current());
    }
}
