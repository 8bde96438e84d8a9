//! `git status`'s answer kept between stamps, so that a warm stamp of an unchanged checkout
//! does not start `git status` at all (on a small repository, starting it is most of a stamp).
//!
//! git's status (`--porcelain -z --untracked-files=all --no-renames`) is decided by HEAD, the
//! index, the contents of the tracked files, the names of the files in every folder it looks
//! into for untracked files, the ignore and attribute rules, and configuration. The cache keeps
//! git's own output beside the metadata ([`FileStamp`]: size, modification and status-change
//! times, inode, device, as `lstat` gives them; or "missing") of everything that decides it:
//!
//! * git's files: `HEAD`, `index`, `packed-refs`, the loose ref HEAD names, `config`,
//!   `info/exclude`, `info/attributes`, `info/sparse-checkout`;
//! * the user's and the system's configuration, ignore and attribute files
//!   (git-config(1) "FILES", gitignore(5), gitattributes(5)): `$HOME/.gitconfig`,
//!   `$XDG_CONFIG_HOME/git/{config,ignore,attributes}` (or `$HOME/.config/git/…`),
//!   `/etc/gitconfig` and `etc/gitconfig` beside the `git` executable's prefix;
//! * every tracked file and every untracked file git listed (an untracked `.gitignore` among
//!   them);
//! * every folder of the work tree that is not ignored, or holds tracked files: a file created,
//!   removed or renamed in a folder changes the folder's modification time.
//!
//! The answer is used only while every one of these has the same metadata, the rule git's own
//! index uses for a file it need not read again. It is kept only when none of them changed
//! within [`crate::cache::RACY_WINDOW_NS`] before `git status` started (a second write inside the file
//! system's timestamp granularity could leave every field unchanged), and only for a plain
//! layout: `.git` a folder at the work tree's root, no `.gitmodules` and no submodule in the
//! index, no `GIT_*` variable that could change a status, no configuration that names other files (`include`,
//! `excludesFile`, `attributesFile`, `worktree`), at most [`MAX_PATHS`] paths. Anything else
//! runs `git status` every time, as without a cache. `--rehash` ignores it.
//!
//! One file per repository and host, `status-<digest>.json`, in the cache folder.

use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};

use crate::cache::FileStamp;

const CACHE_KIND: &str = "runprint-status-cache";
const CACHE_VERSION: u32 = 1;

/// Repositories with more paths to check than this run `git status` (whose parallel index
/// refresh is then the faster way).
pub const MAX_PATHS: usize = 4000;

/// A `git status` that ran to its end this time: what it printed, the `git` it ran and when
/// it started (wall clock, nanoseconds since the epoch).
pub struct Fresh {
    /// What it printed.
    pub output: Output,
    /// The `git` executable it ran.
    pub program: PathBuf,
    /// When it started.
    pub started_ns: i128,
}

/// What `git status` printed.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Output {
    /// Its standard output (NUL-separated records).
    pub stdout: Vec<u8>,
    /// Its standard error (warnings about folders it could not read).
    pub stderr: Vec<u8>,
}

#[derive(Serialize, Deserialize)]
struct CacheFile {
    kind: String,
    version: u32,
    /// The work tree's root the answer is for.
    root: PathBuf,
    /// Every path that decides the answer, with its metadata (`None`: missing).
    sources: Vec<(PathBuf, Option<FileStamp>)>,
    output: Output,
}

/// The root of the work tree containing `dir` when its layout is plain enough to cache (see
/// the module docs); `None` otherwise.
fn plain_layout(dir: &Path, env: &std::collections::BTreeMap<String, String>) -> Option<PathBuf> {
    // git's variables for networking, identities, editors and tracing do not touch a
    // status; any other (`GIT_DIR`, `GIT_INDEX_FILE`, `GIT_CONFIG_*`…, git(1)
    // "ENVIRONMENT VARIABLES") might.
    const HARMLESS: [&str; 13] = [
        "GIT_SSL_",
        "GIT_TERMINAL_PROMPT",
        "GIT_ASKPASS",
        "GIT_AUTHOR_",
        "GIT_COMMITTER_",
        "GIT_EDITOR",
        "GIT_PAGER",
        "GIT_SSH",
        "GIT_HTTP_",
        "GIT_PROXY_",
        "GIT_CURL_",
        "GIT_TRACE",
        "GIT_LFS_",
    ];
    let relocates = env
        .keys()
        .filter(|k| k.starts_with("GIT_"))
        .any(|k| !HARMLESS.iter().any(|h| k.starts_with(h)));
    if relocates {
        return None;
    }
    let root = crate::collect::git::work_tree_root(dir)?;
    let git = root.join(".git");
    let plain = std::fs::symlink_metadata(&git).is_ok_and(|m| m.is_dir())
        && std::fs::symlink_metadata(root.join(".gitmodules")).is_err();
    plain.then_some(root)
}

/// git's own files and the user's and system's files that decide a status, as paths (in a
/// fixed order).
fn setting_files(
    root: &Path,
    env: &std::collections::BTreeMap<String, String>,
    git_program: Option<&Path>,
) -> Vec<PathBuf> {
    let git = root.join(".git");
    let mut files: Vec<PathBuf> = [
        "HEAD",
        "index",
        "packed-refs",
        "config",
        "info/exclude",
        "info/attributes",
        "info/sparse-checkout",
    ]
    .iter()
    .map(|f| git.join(f))
    .collect();
    // The loose ref HEAD names (`ref: refs/heads/main`).
    if let Ok(head) = crate::limits::read_regular_text(&git.join("HEAD")) {
        if let Some(r) = head.trim().strip_prefix("ref: ") {
            if !r.split('/').any(|part| part == ".." || part.is_empty()) {
                files.push(git.join(r));
            }
        }
    }
    let home = env.get("HOME").filter(|h| !h.is_empty()).map(PathBuf::from);
    let xdg = env
        .get("XDG_CONFIG_HOME")
        .filter(|x| !x.is_empty())
        .map(PathBuf::from)
        .or_else(|| home.as_ref().map(|h| h.join(".config")));
    if let Some(home) = &home {
        files.push(home.join(".gitconfig"));
    }
    if let Some(xdg) = &xdg {
        for f in ["config", "ignore", "attributes"] {
            files.push(xdg.join("git").join(f));
        }
    }
    files.push(PathBuf::from("/etc/gitconfig"));
    // A git built with another prefix reads `<prefix>/etc/gitconfig`.
    if let Some(prefix) = git_program
        .and_then(|p| p.parent())
        .and_then(|bin| bin.parent())
    {
        let system = prefix.join("etc/gitconfig");
        if system != Path::new("/etc/gitconfig") {
            files.push(system);
        }
    }
    files
}

/// The kept answer for the work tree containing `dir`, when everything that decides it is as
/// it was; `None` otherwise (then `git status` runs).
pub fn lookup(
    cache_dir: &Path,
    dir: &Path,
    env: &std::collections::BTreeMap<String, String>,
    git_program: Option<&Path>,
) -> Option<Output> {
    let root = plain_layout(dir, env)?;
    let path = crate::cache::per_repository_file(cache_dir, "status", &root);
    let bytes = crate::cache::read_cache_file(&path).ok()?;
    let file: CacheFile = serde_json::from_slice(&bytes).ok()?;
    if file.kind != CACHE_KIND || file.version != CACHE_VERSION || file.root != root {
        return None;
    }
    // The same setting files (the environment may name others now), then every source as it
    // was.
    let settings = setting_files(&root, env, git_program);
    let recorded = file.sources.iter().map(|(p, _)| p);
    if !settings.iter().zip(recorded).all(|(a, b)| a == b) || file.sources.len() < settings.len() {
        return None;
    }
    let same = file
        .sources
        .iter()
        .all(|(p, stamp)| FileStamp::of_link(p) == *stamp);
    if same {
        crate::cache::mark_used(&path);
    }
    same.then_some(file.output)
}

/// Keeps what `fresh`, a `git status` run in `dir`, answered, when the layout is plain and
/// nothing that decides the answer changed too recently. `untracked` are the paths git listed
/// as untracked; the tracked ones come from `repo`'s index. Best effort.
pub fn save(
    cache_dir: &Path,
    dir: &Path,
    env: &std::collections::BTreeMap<String, String>,
    repo: &git2::Repository,
    untracked: &[String],
    fresh: &Fresh,
) {
    let Some(root) = plain_layout(dir, env) else {
        return;
    };
    let Some(sources) = sources(&root, env, Some(&fresh.program), repo, untracked) else {
        return;
    };
    let racy = sources
        .iter()
        .any(|(_, s)| s.is_some_and(|s| s.is_racy(fresh.started_ns)));
    if racy {
        return;
    }
    let file = CacheFile {
        kind: CACHE_KIND.into(),
        version: CACHE_VERSION,
        root: root.clone(),
        sources,
        output: fresh.output.clone(),
    };
    if let Ok(text) = serde_json::to_vec(&file) {
        let path = crate::cache::per_repository_file(cache_dir, "status", &root);
        crate::cache::write_cache_file(&path, &text);
    }
}

/// Every path whose metadata decides the status (see the module docs), with that metadata;
/// `None` when the repository is not one to cache.
fn sources(
    root: &Path,
    env: &std::collections::BTreeMap<String, String>,
    git_program: Option<&Path>,
    repo: &git2::Repository,
    untracked: &[String],
) -> Option<Vec<(PathBuf, Option<FileStamp>)>> {
    let settings = setting_files(root, env, git_program);
    // Configuration that names other files, or another work tree, is not followed.
    for f in &settings {
        let name = f.file_name().and_then(|n| n.to_str()).unwrap_or_default();
        if matches!(name, "config" | ".gitconfig" | "gitconfig") {
            if let Ok(text) = crate::limits::read_regular_text(f) {
                let lower = text.to_ascii_lowercase();
                let names_files = ["include", "excludesfile", "attributesfile", "worktree"]
                    .iter()
                    .any(|k| lower.contains(k));
                if names_files {
                    return None;
                }
            }
        }
    }
    let index = repo.index().ok()?;
    if index.iter().any(|e| e.mode == 0o160000) || index.len() > MAX_PATHS {
        return None;
    }
    let tracked: Vec<String> = index
        .iter()
        .map(|e| String::from_utf8_lossy(&e.path).into_owned())
        .collect();
    // Folders holding tracked files are looked into whatever the ignore rules say.
    let mut holding: std::collections::BTreeSet<PathBuf> = std::collections::BTreeSet::new();
    for t in &tracked {
        let mut p = Path::new(t).parent();
        while let Some(d) = p.filter(|d| !d.as_os_str().is_empty()) {
            if !holding.insert(d.to_path_buf()) {
                break;
            }
            p = d.parent();
        }
    }
    let mut folders = vec![PathBuf::new()];
    let mut walk = vec![PathBuf::new()];
    while let Some(rel) = walk.pop() {
        let entries = std::fs::read_dir(root.join(&rel)).ok()?;
        for entry in entries {
            let entry = entry.ok()?;
            if !entry.file_type().ok()?.is_dir() {
                continue;
            }
            let name = entry.file_name();
            if rel.as_os_str().is_empty() && name == ".git" {
                continue;
            }
            let sub = rel.join(&name);
            // A nested repository is listed as one untracked entry, never looked into.
            let nested = entry.path().join(".git").exists();
            let ignored = !holding.contains(&sub) && repo.is_path_ignored(&sub).unwrap_or(false);
            if ignored {
                continue;
            }
            folders.push(sub.clone());
            if !nested {
                walk.push(sub);
            }
            if folders.len() > MAX_PATHS {
                return None;
            }
        }
    }
    let files = tracked.iter().chain(untracked).map(|p| root.join(p));
    let all: Vec<PathBuf> = settings
        .into_iter()
        .chain(folders.iter().map(|f| root.join(f)))
        .chain(files)
        .collect();
    if all.len() > 3 * MAX_PATHS {
        return None;
    }
    Some(
        all.into_iter()
            .map(|p| {
                let stamp = FileStamp::of_link(&p);
                (p, stamp)
            })
            .collect(),
    )
}
