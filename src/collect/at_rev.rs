//! The repository as it is at a git revision, read from git's object database (libgit2)
//! without checking anything out: the commit, its submodule commits and every lockfile in its
//! tree, parsed from the blobs with the same pure parsers `stamp` uses.
//!
//! What this cannot know, and says so through [`RevFacts::notes`]:
//! * Cargo's enabled features come from `cargo metadata`, which needs a checkout; they are not
//!   read at a revision.
//! * Lockfiles named with `stamp --lockfile` outside the repository are not in its history.
//!
//! The walk skips the same folders as the on-disk walk ([`super::lockfiles::SKIPPED_DIRS`]);
//! `.gitignore` needs no handling because ignored files are not committed.

use git2::{ObjectType, Repository, Tree, TreeWalkMode, TreeWalkResult};

use crate::lockfile::Format;
use crate::manifest::{GitInfo, Lockfile, Submodule};

/// What a revision holds.
#[derive(Debug)]
pub struct RevFacts {
    /// The git section as a stamp of a clean checkout of the revision would record it (the
    /// remote is not a fact of a revision and is left empty).
    pub git: GitInfo,
    /// Every lockfile in the revision's tree, sorted by path.
    pub lockfiles: Vec<Lockfile>,
    /// The commit's time, RFC 3339 UTC.
    pub committed: String,
    /// Problems with single files (unparseable lockfiles); the rest is still read.
    pub warnings: Vec<String>,
}

/// Errors that stop the reading of a revision altogether.
#[derive(Debug, thiserror::Error)]
pub enum RevError {
    /// No repository contains the folder.
    #[error("`{dir}` is not inside a git repository: {message}")]
    NoRepository {
        /// The folder.
        dir: String,
        /// libgit2's reason.
        message: String,
    },
    /// The revision does not name a commit.
    #[error("`{rev}` does not name a commit in the repository at `{dir}`: {message}")]
    BadRevision {
        /// The revision as given.
        rev: String,
        /// The repository's folder.
        dir: String,
        /// libgit2's reason.
        message: String,
    },
    /// The commit's objects could not be read.
    #[error("cannot read revision `{rev}`: {message}")]
    Read {
        /// The revision as given.
        rev: String,
        /// libgit2's reason.
        message: String,
    },
}

/// Whether a commit is present in a repository, and why not.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum CommitPresence {
    /// The commit can be read.
    Present,
    /// The commit is missing and the repository is a shallow clone.
    MissingShallow,
    /// The commit is missing from a full clone (another repository, rewritten history).
    Missing,
}

/// Opens the repository that contains `dir`.
pub fn open(dir: &std::path::Path) -> Result<Repository, RevError> {
    crate::collect::git::discover(dir).map_err(|e| RevError::NoRepository {
        dir: dir.display().to_string(),
        message: e.message().to_string(),
    })
}

/// Whether `commit` (a full hex id) is in `repo`.
pub fn commit_presence(repo: &Repository, commit: &str) -> CommitPresence {
    let present = git2::Oid::from_str(commit)
        .ok()
        .and_then(|oid| repo.find_commit(oid).ok())
        .is_some();
    if present {
        CommitPresence::Present
    } else if repo.is_shallow() {
        CommitPresence::MissingShallow
    } else {
        CommitPresence::Missing
    }
}

/// Reads the commit, submodules and lockfiles of `rev` (a branch, tag, commit id or any
/// revision expression git understands).
pub fn read(repo: &Repository, rev: &str) -> Result<RevFacts, RevError> {
    let dir = repo
        .workdir()
        .unwrap_or_else(|| repo.path())
        .display()
        .to_string();
    let object = repo
        .revparse_single(rev)
        .map_err(|e| RevError::BadRevision {
            rev: rev.to_string(),
            dir: dir.clone(),
            message: e.message().to_string(),
        })?;
    let commit = object.peel_to_commit().map_err(|e| RevError::BadRevision {
        rev: rev.to_string(),
        dir,
        message: e.message().to_string(),
    })?;
    let read_err = |e: git2::Error| RevError::Read {
        rev: rev.to_string(),
        message: e.message().to_string(),
    };
    let tree = commit.tree().map_err(read_err)?;

    // A local branch of that name is what a checkout of `rev` would be on.
    let branch = repo
        .find_branch(rev, git2::BranchType::Local)
        .ok()
        .map(|_| rev.to_string());
    let (lockfile_paths, submodules) = walk(&tree).map_err(read_err)?;
    let mut warnings = Vec::new();
    let lockfiles = lockfile_paths
        .iter()
        .filter_map(|path| read_lockfile(repo, &tree, path, &mut warnings))
        .collect();
    let secs = commit.time().seconds().max(0) as u64;
    let committed = humantime::format_rfc3339_seconds(
        std::time::UNIX_EPOCH + std::time::Duration::from_secs(secs),
    )
    .to_string();
    Ok(RevFacts {
        git: GitInfo {
            present: true,
            commit: Some(commit.id().to_string()),
            detached: branch.is_none(),
            branch,
            submodules,
            ..GitInfo::default()
        },
        lockfiles,
        committed,
        warnings,
    })
}

/// Lockfile paths (sorted) and submodule commits (gitlinks) in a tree.
fn walk(tree: &Tree<'_>) -> Result<(Vec<String>, Vec<Submodule>), git2::Error> {
    let mut lockfiles = Vec::new();
    let mut submodules = Vec::new();
    tree.walk(TreeWalkMode::PreOrder, |dir, entry| {
        let Some(name) = entry.name() else {
            return TreeWalkResult::Ok;
        };
        match entry.kind() {
            Some(ObjectType::Tree) if super::lockfiles::SKIPPED_DIRS.contains(&name) => {
                TreeWalkResult::Skip
            }
            Some(ObjectType::Blob) if Format::detect_path(&format!("{dir}{name}")).is_some() => {
                lockfiles.push(format!("{dir}{name}"));
                TreeWalkResult::Ok
            }
            // A gitlink: the submodule's commit as recorded by the superproject.
            Some(ObjectType::Commit) => {
                submodules.push(Submodule {
                    path: format!("{dir}{name}"),
                    commit: Some(entry.id().to_string()),
                });
                TreeWalkResult::Ok
            }
            _ => TreeWalkResult::Ok,
        }
    })?;
    lockfiles.sort();
    submodules.sort_by(|a, b| a.path.cmp(&b.path));
    Ok((lockfiles, submodules))
}

/// The bytes of the blob at `path` in `tree`: `Ok(None)` when there is none, `Err` with the
/// reason when it is there but is not read. The same policy as for files on disk
/// ([`crate::limits`]): a symbolic link (mode 120000, whose blob is the link's target) is never
/// followed, and a blob over the size limit is refused from the object's header, before its
/// content is loaded.
fn blob_read(repo: &Repository, tree: &Tree<'_>, path: &str) -> Result<Option<Vec<u8>>, String> {
    let Ok(entry) = tree.get_path(std::path::Path::new(path)) else {
        return Ok(None);
    };
    if entry.filemode() == 0o120000 {
        return Err("is a symbolic link (never followed)".into());
    }
    if entry.kind() != Some(git2::ObjectType::Blob) {
        return Ok(None);
    }
    let limit = crate::limits::max_file_bytes();
    let size = repo
        .odb()
        .and_then(|odb| odb.read_header(entry.id()))
        .map(|(size, _)| size as u64)
        .map_err(|e| format!("cannot read its object: {}", e.message()))?;
    if size > limit {
        return Err(crate::limits::too_large(Some(size), limit).to_string());
    }
    let blob = repo
        .find_blob(entry.id())
        .map_err(|e| format!("cannot read its object: {}", e.message()))?;
    Ok(Some(blob.content().to_vec()))
}

/// [`blob_read`], with the reason for a refused blob pushed to `warnings`.
fn blob_bytes_or_warn(
    repo: &Repository,
    tree: &Tree<'_>,
    path: &str,
    warnings: &mut Vec<String>,
) -> Option<Vec<u8>> {
    match blob_read(repo, tree, path) {
        Ok(b) => b,
        Err(e) => {
            warnings.push(format!("lockfile `{path}`: {e}"));
            None
        }
    }
}

/// Bytes as lockfile text, as on disk ([`crate::lockfile::decode`]: byte-order mark dropped,
/// UTF-8 and control characters checked, with the line).
fn decode_or_warn(bytes: &[u8], path: &str, warnings: &mut Vec<String>) -> Option<String> {
    match crate::lockfile::decode(bytes, path) {
        Ok(t) => Some(t.to_string()),
        Err(e) => {
            warnings.push(format!("lockfile {e}"));
            None
        }
    }
}

/// Parses one lockfile from the tree, as `collect::lockfiles` does from disk.
fn read_lockfile(
    repo: &Repository,
    tree: &Tree<'_>,
    path: &str,
    warnings: &mut Vec<String>,
) -> Option<Lockfile> {
    let format = Format::detect_path(path)?;
    let bytes = blob_bytes_or_warn(repo, tree, path, warnings)?;
    let text = decode_or_warn(&bytes, path, warnings)?;
    let mut source = TreeSource { repo, tree };
    let companion = super::includes::companion(&mut source, &path.to_string(), format, warnings);
    let mut parsed = crate::lockfile::parse_or_warn(
        format,
        &text,
        path,
        companion.as_ref().map(|(t, p)| (t.as_str(), p.as_str())),
        warnings,
    )?;
    if !parsed.includes.is_empty() {
        super::includes::merge(&mut source, path.to_string(), &mut parsed, warnings);
    }
    Some(Lockfile::from_parsed(
        path, format, parsed, &bytes, warnings,
    ))
}

/// `name` in the folder of `path`.
fn sibling(path: &str, name: &str) -> String {
    match path.rsplit_once('/') {
        Some((dir, _)) => format!("{dir}/{name}"),
        None => name.to_string(),
    }
}

/// Resolves `target` relative to the folder of `from`, inside the tree: `.` and `..` are
/// applied; a path that leaves the tree or is absolute gives `None`.
fn resolve(from: &str, target: &str) -> Option<String> {
    if target.starts_with('/') {
        return None;
    }
    let mut parts: Vec<&str> = from.split('/').collect();
    parts.pop();
    for part in target.split('/') {
        match part {
            "" | "." => {}
            ".." => {
                parts.pop()?;
            }
            p => parts.push(p),
        }
    }
    Some(parts.join("/"))
}

/// A git tree as the place included files are read from: paths inside the tree only.
struct TreeSource<'r, 't> {
    repo: &'r Repository,
    tree: &'t Tree<'r>,
}

impl super::includes::IncludeSource for TreeSource<'_, '_> {
    type Key = String;

    fn locate(&mut self, from: &String, target: &str) -> Result<String, String> {
        resolve(from, target).ok_or_else(|| {
            format!(
                "included {} lies outside the repository and was not read",
                super::includes::quoted(target)
            )
        })
    }

    fn load(&mut self, _from: &String, key: &String) -> Result<String, String> {
        match blob_read(self.repo, self.tree, key)? {
            Some(b) => crate::lockfile::decode(&b, key)
                .map(str::to_string)
                .map_err(|e| e.message),
            None => Err("not found at this revision".into()),
        }
    }

    fn shown(&self, key: &String) -> String {
        key.clone()
    }

    fn beside(&mut self, of: &String, name: &str) -> Option<String> {
        let path = sibling(of, name);
        self.tree.get_path(std::path::Path::new(&path)).ok()?;
        Some(path)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn includes_resolve_inside_the_tree_only() {
        assert_eq!(
            resolve("py/requirements.txt", "base.txt").as_deref(),
            Some("py/base.txt")
        );
        assert_eq!(
            resolve("py/requirements.txt", "../common/./c.txt").as_deref(),
            Some("common/c.txt")
        );
        assert_eq!(resolve("requirements.txt", "../outside.txt"), None);
        assert_eq!(resolve("requirements.txt", "/etc/x.txt"), None);
    }

    #[test]
    fn companion_sits_beside_the_file() {
        assert_eq!(sibling("svc/go.mod", "go.sum"), "svc/go.sum");
        assert_eq!(sibling("go.mod", "go.sum"), "go.sum");
    }
}
