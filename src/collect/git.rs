//! Source control: the commit, the branch, the uncommitted change and submodules, read with
//! libgit2 (the `git2` crate) so that no `git` executable is needed.
//!
//! The uncommitted change is summarised by [`GitInfo::dirty_digest`]: SHA-256 over, for every
//! changed path in sorted order, the path, its state and the SHA-256 of its content in the work
//! tree. Two dirty runs with different edits therefore get different digests, and the same edit
//! made twice gets the same digest.

use std::io::Read;
use std::path::{Path, PathBuf};

use git2::{Repository, Status, StatusOptions};
use sha2::{Digest, Sha256};

use crate::manifest::{hex, GitInfo, Submodule};
use crate::redact::scrub_url_credentials;

/// What the git collector found: the facts and the work-tree root (used to look for lockfiles).
pub struct GitFacts {
    /// The section for the manifest.
    pub info: GitInfo,
    /// The repository's work tree, when there is one.
    pub workdir: Option<PathBuf>,
}

/// Reads the repository that contains `dir`. A folder outside any repository gives
/// `present = false`; other failures are returned as a message for the warnings.
pub fn collect(dir: &Path, private: bool) -> Result<GitFacts, String> {
    let repo = match Repository::discover(dir) {
        Ok(r) => r,
        Err(e) if e.code() == git2::ErrorCode::NotFound => {
            return Ok(GitFacts {
                info: GitInfo::default(),
                workdir: None,
            })
        }
        Err(e) => {
            return Err(format!(
                "git: cannot open repository at `{}`: {}",
                dir.display(),
                e.message()
            ))
        }
    };
    let mut info = GitInfo {
        present: true,
        ..GitInfo::default()
    };
    let workdir = repo.workdir().map(Path::to_path_buf);

    match repo.head() {
        Ok(head) => {
            info.commit = head.peel_to_commit().ok().map(|c| c.id().to_string());
            if head.is_branch() {
                info.branch = head.shorthand().map(str::to_string);
            }
        }
        Err(e) if e.code() == git2::ErrorCode::UnbornBranch => {
            // No commit yet: the branch name is where HEAD points.
            info.branch = repo
                .find_reference("HEAD")
                .ok()
                .and_then(|r| r.symbolic_target().map(str::to_string))
                .map(|t| t.trim_start_matches("refs/heads/").to_string());
        }
        Err(e) => return Err(format!("git: cannot read HEAD: {}", e.message())),
    }
    info.detached = repo.head_detached().unwrap_or(false);

    if let Some(root) = &workdir {
        let (paths, digest) = uncommitted_change(&repo, root)
            .map_err(|e| format!("git: cannot read the work tree status: {}", e.message()))?;
        info.dirty = !paths.is_empty();
        info.dirty_digest = digest;
        info.changed_paths = paths;
    }

    if !private {
        info.remote = remote_url(&repo);
    }
    info.submodules = submodules(&repo);
    Ok(GitFacts { info, workdir })
}

/// Changed paths (tracked changes and untracked, not-ignored files) and the digest over them.
fn uncommitted_change(
    repo: &Repository,
    root: &Path,
) -> Result<(Vec<String>, Option<String>), git2::Error> {
    let mut opts = StatusOptions::new();
    opts.include_untracked(true)
        .recurse_untracked_dirs(true)
        .include_ignored(false)
        .renames_head_to_index(false);
    let statuses = repo.statuses(Some(&mut opts))?;
    // Paths as raw bytes: a file name that is not UTF-8 is still hashed and opened by its
    // real name, and listed in `changed-paths` with replacement characters.
    let mut entries: Vec<(Vec<u8>, Status)> = statuses
        .iter()
        .filter(|e| e.status() != Status::CURRENT && !e.status().contains(Status::IGNORED))
        .map(|e| (e.path_bytes().to_vec(), e.status()))
        .collect();
    entries.sort();
    entries.dedup_by(|a, b| a.0 == b.0);
    if entries.is_empty() {
        return Ok((Vec::new(), None));
    }
    let mut digest = Sha256::new();
    for (path, status) in &entries {
        digest.update(path);
        digest.update([0]);
        let on_disk = root.join(path_from_bytes(path));
        let deleted = status.intersects(Status::WT_DELETED)
            || (status.intersects(Status::INDEX_DELETED) && !on_disk.exists());
        let state = if deleted {
            "deleted".to_string()
        } else {
            content_digest(&on_disk)
        };
        digest.update(state.as_bytes());
        digest.update(b"\n");
    }
    let paths = entries
        .into_iter()
        .map(|(p, _)| String::from_utf8_lossy(&p).into_owned())
        .collect();
    Ok((paths, Some(format!("sha256:{}", hex(&digest.finalize())))))
}

/// A path as git stores it (bytes) in the platform's form.
fn path_from_bytes(bytes: &[u8]) -> PathBuf {
    #[cfg(unix)]
    {
        use std::os::unix::ffi::OsStrExt;
        PathBuf::from(std::ffi::OsStr::from_bytes(bytes))
    }
    #[cfg(not(unix))]
    {
        PathBuf::from(String::from_utf8_lossy(bytes).into_owned())
    }
}

/// SHA-256 of a work-tree file's content (a symbolic link's target, a folder's marker).
fn content_digest(path: &Path) -> String {
    let meta = match std::fs::symlink_metadata(path) {
        Ok(m) => m,
        Err(_) => return "missing".into(),
    };
    if meta.file_type().is_symlink() {
        let target = std::fs::read_link(path).unwrap_or_default();
        return format!("link:{}", target.display());
    }
    if meta.is_dir() {
        // A submodule or nested repository: its own commit is recorded elsewhere.
        return "dir".into();
    }
    if !meta.is_file() {
        // A FIFO would block the open; a socket or device has no content to hash.
        return "special".into();
    }
    let mut hasher = Sha256::new();
    let Ok(mut file) = std::fs::File::open(path) else {
        return "unreadable".into();
    };
    let mut buf = vec![0u8; 1 << 16];
    loop {
        match file.read(&mut buf) {
            Ok(0) => break,
            Ok(n) => hasher.update(&buf[..n]),
            Err(_) => return "unreadable".into(),
        }
    }
    hex(&hasher.finalize())
}

/// `origin`'s URL, else the first remote's, with credentials removed.
fn remote_url(repo: &Repository) -> Option<String> {
    let remote = repo.find_remote("origin").ok().or_else(|| {
        let names = repo.remotes().ok()?;
        let first = names.iter().flatten().next()?.to_string();
        repo.find_remote(&first).ok()
    })?;
    remote.url().map(scrub_url_credentials)
}

fn submodules(repo: &Repository) -> Vec<Submodule> {
    let mut subs: Vec<Submodule> = repo
        .submodules()
        .unwrap_or_default()
        .iter()
        .map(|s| Submodule {
            path: s.path().to_string_lossy().into_owned(),
            commit: s
                .workdir_id()
                .or_else(|| s.index_id())
                .or_else(|| s.head_id())
                .map(|id| id.to_string()),
        })
        .collect();
    subs.sort_by(|a, b| a.path.cmp(&b.path));
    subs
}

/// Paths changed between two commits of the repository that contains `dir`, or `None` when
/// either commit is not in that repository (a shallow clone, another repository).
pub fn changed_between(dir: &Path, old: &str, new: &str) -> Option<Vec<String>> {
    let repo = Repository::discover(dir).ok()?;
    let tree = |id: &str| -> Option<git2::Tree<'_>> {
        let oid = git2::Oid::from_str(id).ok()?;
        repo.find_commit(oid).ok()?.tree().ok()
    };
    let (a, b) = (tree(old)?, tree(new)?);
    let diff = repo.diff_tree_to_tree(Some(&a), Some(&b), None).ok()?;
    let mut paths: Vec<String> = diff
        .deltas()
        .flat_map(|d| [d.old_file().path(), d.new_file().path()])
        .flatten()
        .map(|p| p.to_string_lossy().into_owned())
        .collect();
    paths.sort();
    paths.dedup();
    Some(paths)
}
