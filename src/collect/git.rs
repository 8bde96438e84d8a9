//! Source control: the commit, the branch, the uncommitted change and submodules. References,
//! the index and configuration are read with libgit2 (the `git2` crate); the work-tree status
//! comes from the `git` executable when it is on `PATH` (faster, and it reports a damaged
//! object instead of looping on it), else from libgit2, so that no `git` executable is needed.
//!
//! The uncommitted change is summarised by [`GitInfo::dirty_digest`]: SHA-256 over, for every
//! changed path in sorted order, the path, its state and the SHA-256 of its content in the work
//! tree. Two dirty runs with different edits therefore get different digests, and the same edit
//! made twice gets the same digest.

use std::io::Read;
use std::path::{Path, PathBuf};
use std::sync::Mutex;

use git2::{Repository, Status, StatusOptions};
use sha2::{Digest, Sha256};

use crate::cache::FileStamp;
use crate::collect::change_cache::{self, ChangeCache};
use crate::collect::status_cache;
use crate::manifest::{hex, GitInfo, Submodule};
use crate::redact::scrub_url_credentials;

/// What the git collector found: the facts and the work-tree root (used to look for lockfiles).
pub struct GitFacts {
    /// The section for the manifest.
    pub info: GitInfo,
    /// The repository's work tree, when there is one.
    pub workdir: Option<PathBuf>,
    /// Untracked, not ignored files of the work tree, relative to its root (with the tracked
    /// files of [`tracked_files`], what a walk respecting `.gitignore` would find), when the
    /// status could be read.
    pub untracked: Option<Vec<String>>,
    /// What git warned about while listing (a folder it could not open, say): those files
    /// are missing from the changed paths.
    pub warnings: Vec<String>,
}

/// How the collector runs the `git` executable, shared with the watchdog that may stop it.
#[derive(Debug, Default)]
pub struct GitControl {
    /// `PATH` to find `git` in (the stamped environment's); `None`: this process's own.
    pub path_env: Option<String>,
    /// The running `git` child, so that [`GitControl::stop`] can end it.
    child: Mutex<Option<std::process::Child>>,
    /// Set by [`GitControl::stop`]: no new `git` process is started after it.
    stopped: std::sync::atomic::AtomicBool,
}

impl GitControl {
    /// A control that looks `git` up in `path_env` (or this process's `PATH`).
    pub fn new(path_env: Option<String>) -> GitControl {
        GitControl {
            path_env,
            ..GitControl::default()
        }
    }

    /// Kills the running `git` child, if any, and keeps any other from starting; the collector
    /// then returns with an error instead of waiting on it.
    pub fn stop(&self) {
        self.stopped
            .store(true, std::sync::atomic::Ordering::SeqCst);
        if let Some(child) = self
            .child
            .lock()
            .unwrap_or_else(|e| e.into_inner())
            .as_mut()
        {
            let _ = child.kill();
        }
    }
}

/// Reads the repository that contains `dir`. A folder outside any repository gives
/// `present = false`; other failures are returned as a message for the warnings.
///
/// `started` is the `git status` that [`start_status`] started for `dir` with the same
/// `control`: it takes longest, so the caller starts it before anything else and it runs
/// while the repository is opened and HEAD is read here.
pub fn collect(
    dir: &Path,
    private: bool,
    control: &GitControl,
    started: Started,
    cache: CacheUse,
    opened: Option<Repository>,
) -> Result<GitFacts, String> {
    let found = match opened {
        Some(repo) => Ok(repo),
        None => discover(dir),
    };
    let repo = match found {
        Ok(r) => r,
        Err(e) if e.code() == git2::ErrorCode::NotFound => {
            abandon_git_status(control);
            return Ok(GitFacts {
                info: GitInfo::default(),
                workdir: None,
                untracked: None,
                warnings: Vec::new(),
            });
        }
        Err(e) => {
            abandon_git_status(control);
            return Err(format!(
                "git: cannot open repository at `{}`: {}",
                dir.display(),
                e.message()
            ));
        }
    };
    let mut info = GitInfo {
        present: true,
        ..GitInfo::default()
    };
    let workdir = repo.workdir().map(Path::to_path_buf);
    if workdir.is_none() {
        // A bare repository has no work tree to report on.
        abandon_git_status(control);
    }

    match repo.head() {
        Ok(head) => {
            // The reference's target, not the commit object: reading a damaged object can
            // make libgit2 loop, and HEAD names a commit by definition.
            info.commit = head
                .target()
                .or_else(|| head.peel_to_commit().ok().map(|c| c.id()))
                .map(|id| id.to_string());
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
        Err(e) => {
            abandon_git_status(control);
            return Err(format!("git: cannot read HEAD: {}", e.message()));
        }
    }
    info.detached = repo.head_detached().unwrap_or(false);

    let mut untracked = None;
    let mut warnings = Vec::new();
    if let Some(root) = &workdir {
        let failed = |e: String| format!("git: cannot read the work tree status: {e}");
        // Loaded while git's status runs.
        let digests = ChangeCache::open(cache.dir.as_deref(), root, cache.rehash);
        let (entries, fresh) = match started {
            Ok(Some(running)) => {
                let (entries, said, fresh) =
                    finish_git_status(root, control, running).map_err(failed)?;
                warnings = said;
                (entries, fresh)
            }
            Err(e) => return Err(failed(e)),
            Ok(None) => (
                status_with_libgit2(&repo, root).map_err(|e| {
                    format!("git: cannot read the work tree status: {}", e.message())
                })?,
                None,
            ),
        };
        let listed: Vec<String> = entries
            .iter()
            .filter(|e| e.untracked)
            .map(|e| e.path.clone())
            .collect();
        if let (Some(cache_dir), Some(fresh)) = (cache.kept_dir(), fresh) {
            status_cache::save(cache_dir, dir, &cache.env, &repo, &listed, &fresh);
        }
        untracked = Some(listed);
        let (paths, digest, keep) = uncommitted_change(entries, &digests);
        digests.save(keep);
        info.dirty = !paths.is_empty();
        info.dirty_digest = digest;
        // The digest covers the real names; the names shown lose any token-like segment.
        info.changed_paths = paths.iter().map(|p| crate::redact::scrub_path(p)).collect();
    }

    if !private {
        info.remote = remote_url(&repo);
    }
    // Submodules are declared in `.gitmodules`; without it there is nothing to load.
    if workdir
        .as_ref()
        .is_none_or(|w| w.join(".gitmodules").exists())
    {
        info.submodules = submodules(&repo);
    }
    Ok(GitFacts {
        info,
        workdir,
        untracked,
        warnings,
    })
}

/// One changed path of the work tree.
struct StatusEntry {
    /// The path as git stores it (bytes; a name need not be UTF-8).
    raw: Vec<u8>,
    /// The path for the manifest (invalid UTF-8 replaced).
    path: String,
    /// Deleted from the work tree.
    deleted: bool,
    /// Not tracked (and not ignored).
    untracked: bool,
    /// Full path in the work tree.
    abs: PathBuf,
}

/// Status from the `git` executable when it is on PATH: `git status --porcelain -z`, with
/// optional locks off so the index is never rewritten under a running job. git's own status is
/// faster than libgit2's on large trees (its untracked cache and parallel index refresh).
/// [`start_status`] starts it (`Ok(None)` when there is no `git` to run: libgit2 takes
/// over) and [`finish_git_status`] reads its answer: an error with git's own message when it
/// fails (a damaged object, a repository owned by another user) or is stopped.
///
/// git finds the repository from any folder inside it, and its porcelain paths are relative to
/// the work tree's root wherever it runs (git-status(1)), so it can start before the
/// repository is opened.
pub fn start_status(dir: &Path, control: &GitControl, cache: &CacheUse) -> Started {
    use std::process::{Command, Stdio};
    let search = control
        .path_env
        .clone()
        .or_else(|| std::env::var("PATH").ok());
    let Some(program) = find_program("git", search.as_deref(), dir) else {
        return Ok(None);
    };
    // A warm stamp of an unchanged checkout takes git's answer from the cache.
    if let Some(cache_dir) = cache.kept_dir() {
        if let Some(output) = status_cache::lookup(cache_dir, dir, &cache.env, Some(&program)) {
            return Ok(Some(RunningStatus::Kept(output)));
        }
    }
    let started_ns = crate::cache::now_ns();
    let mut cmd = Command::new(&program);
    cmd.args([
        // A repository's configuration may name a file-system monitor program, which
        // `status` would run (git-config(1), `core.fsmonitor`): none is run.
        "-c",
        "core.fsmonitor=false",
        "--no-optional-locks",
        "status",
        "--porcelain=v1",
        "-z",
        "--untracked-files=all",
        "--no-renames",
        "--ignore-submodules=none",
    ])
    .current_dir(dir)
    .stdin(Stdio::null())
    .stdout(Stdio::piped())
    .stderr(Stdio::piped());
    if let Some(path) = &control.path_env {
        // For the programs git itself runs (hooks are not run by status, but helpers may be).
        cmd.env("PATH", path);
    }
    let mut slot = control.child.lock().unwrap_or_else(|e| e.into_inner());
    if control.stopped.load(std::sync::atomic::Ordering::SeqCst) {
        return Err("stopped".into());
    }
    let mut child = match cmd.spawn() {
        Ok(c) => c,
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => return Ok(None),
        Err(e) => return Err(format!("cannot run `git`: {e}")),
    };
    let pipes = (child.stdout.take(), child.stderr.take());
    *slot = Some(child);
    match pipes {
        (Some(stdout), Some(stderr)) => Ok(Some(RunningStatus::Child {
            stdout,
            stderr,
            program,
            started_ns,
        })),
        _ => Err("cannot read the output of `git`".into()),
    }
}

/// The executable `name` in the folders of `path` (a `PATH` value; relative entries, and the
/// empty one meaning the current folder, are taken from `cwd`, the child's working folder), as
/// `execvp` would find it. `None` when there is none.
///
/// Looked up here rather than by the child: with a program path the standard library starts
/// the child with `posix_spawn` instead of `fork` (it must fork when the child's `PATH` is
/// changed and the program is looked up in it), and the child makes one `execve` instead of
/// one per folder in front of git's.
fn find_program(name: &str, path: Option<&str>, cwd: &Path) -> Option<PathBuf> {
    if !cfg!(unix) {
        // Elsewhere the standard library's own lookup knows the executable suffixes.
        return Some(PathBuf::from(name));
    }
    // Where execvp looks without a PATH (glibc's default).
    let path = path.unwrap_or("/bin:/usr/bin");
    std::env::split_paths(path)
        .map(|d| cwd.join(d).join(name))
        .find(|p| is_executable_file(p))
}

fn is_executable_file(path: &Path) -> bool {
    let Ok(meta) = std::fs::metadata(path) else {
        return false;
    };
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        meta.is_file() && meta.permissions().mode() & 0o111 != 0
    }
    #[cfg(not(unix))]
    {
        meta.is_file()
    }
}

/// Ends a started `git status` whose answer is no longer wanted.
pub fn abandon_git_status(control: &GitControl) {
    let child = control
        .child
        .lock()
        .unwrap_or_else(|e| e.into_inner())
        .take();
    if let Some(mut c) = child {
        let _ = c.kill();
        let _ = c.wait();
    }
}

/// What [`start_status`] gives [`collect`].
pub type Started = Result<Option<RunningStatus>, String>;

/// A `git status` started by [`start_status`], or its answer kept from an earlier stamp.
pub enum RunningStatus {
    /// The child's pipes, the program and when it started (wall clock, nanoseconds).
    Child {
        /// The child's standard output.
        stdout: std::process::ChildStdout,
        /// The child's standard error.
        stderr: std::process::ChildStderr,
        /// The `git` executable it runs.
        program: PathBuf,
        /// When it was started (wall clock, nanoseconds since the epoch).
        started_ns: i128,
    },
    /// What `git status` answered for the same files ([`status_cache`]).
    Kept(status_cache::Output),
}

/// The changed paths, git's warnings, and the status itself when it ran this time.
type Finished = (Vec<StatusEntry>, Vec<String>, Option<status_cache::Fresh>);

/// Reads the output of a started `git status` and waits for it (or takes the answer kept).
fn finish_git_status(
    root: &Path,
    control: &GitControl,
    running: RunningStatus,
) -> Result<Finished, String> {
    let (mut stdout, mut stderr, program, started_ns) = match running {
        RunningStatus::Kept(output) => {
            let (entries, said) = parse_status(root, &output.stdout, &output.stderr);
            return Ok((entries, said, None));
        }
        RunningStatus::Child {
            stdout,
            stderr,
            program,
            started_ns,
        } => (stdout, stderr, program, started_ns),
    };
    // Both pipes at once, so that neither can fill up and block git; a kill by
    // `GitControl::stop` closes them.
    let (out, err) = std::thread::scope(|s| {
        let err = s.spawn(move || {
            let mut buf = Vec::new();
            let _ = stderr.read_to_end(&mut buf);
            buf
        });
        let mut out = Vec::new();
        let _ = stdout.read_to_end(&mut out);
        (out, err.join().unwrap_or_default())
    });
    let child = control
        .child
        .lock()
        .unwrap_or_else(|e| e.into_inner())
        .take();
    let status = child.map(|mut c| c.wait());
    if control.stopped.load(std::sync::atomic::Ordering::SeqCst) {
        return Err("`git status` was stopped".into());
    }
    match status {
        Some(Ok(s)) if s.success() => {}
        _ => {
            let message = String::from_utf8_lossy(&err);
            let message = message
                .lines()
                .rev()
                .find(|l| !l.trim().is_empty())
                .unwrap_or("`git status` failed");
            return Err(crate::redact::scrub_secrets(message.trim()));
        }
    }
    let (entries, said) = parse_status(root, &out, &err);
    let fresh = status_cache::Fresh {
        output: status_cache::Output {
            stdout: out,
            stderr: err,
        },
        program,
        started_ns,
    };
    Ok((entries, said, Some(fresh)))
}

/// The entries and warnings of a successful `git status --porcelain=v1 -z`'s output.
fn parse_status(root: &Path, out: &[u8], err: &[u8]) -> (Vec<StatusEntry>, Vec<String>) {
    // git goes on past a folder it cannot open, saying so on stderr ("warning: could not
    // open directory 'x/': Permission denied"): the files in it are missing from the list.
    let said: Vec<String> = String::from_utf8_lossy(err)
        .lines()
        .filter_map(|l| l.trim().strip_prefix("warning:"))
        .map(|l| {
            format!(
                "git: {}; files there are not in the changed paths",
                crate::escape::printable(crate::redact::scrub_secrets(l.trim()).as_str())
            )
        })
        .collect();
    // Each record: two status letters, a space, the path, NUL (git-status(1), "Porcelain
    // Format Version 1" with -z).
    let mut entries = Vec::new();
    for record in out.split(|&b| b == 0).filter(|r| r.len() > 3) {
        let (x, y) = (record[0], record[1]);
        let raw = record[3..].to_vec();
        let path = String::from_utf8_lossy(&raw).into_owned();
        let abs = root.join(path_from_bytes(&raw));
        entries.push(StatusEntry {
            raw,
            deleted: y == b'D' || (x == b'D' && !abs.exists()),
            untracked: x == b'?',
            path,
            abs,
        });
    }
    (entries, said)
}

/// The same list through libgit2, for machines without the `git` executable.
fn status_with_libgit2(repo: &Repository, root: &Path) -> Result<Vec<StatusEntry>, git2::Error> {
    let mut opts = StatusOptions::new();
    opts.include_untracked(true)
        .recurse_untracked_dirs(true)
        .include_ignored(false)
        .renames_head_to_index(false);
    let statuses = repo.statuses(Some(&mut opts))?;
    Ok(statuses
        .iter()
        .filter(|e| e.status() != Status::CURRENT && !e.status().contains(Status::IGNORED))
        .map(|e| {
            let status = e.status();
            let raw = e.path_bytes().to_vec();
            let path = String::from_utf8_lossy(&raw).into_owned();
            let abs = root.join(path_from_bytes(&raw));
            StatusEntry {
                raw,
                deleted: status.intersects(Status::WT_DELETED)
                    || (status.intersects(Status::INDEX_DELETED) && !abs.exists()),
                untracked: status.intersects(Status::WT_NEW)
                    && !status.intersects(Status::INDEX_NEW),
                path,
                abs,
            }
        })
        .collect())
}

/// The files in the index (submodules left out), relative to the work tree, in the index's
/// (sorted) order. Reading the index touches no object, so a damaged object cannot stall it.
pub fn tracked_files(index: &Path) -> Option<Vec<String>> {
    let index = git2::Index::open(index).ok()?;
    Some(
        index
            .iter()
            .filter(|e| e.mode != 0o160000)
            .map(|e| String::from_utf8_lossy(&e.path).into_owned())
            .collect(),
    )
}

/// Where the collector may keep the digests of changed files ([`ChangeCache`]).
#[derive(Debug, Clone, Default)]
pub struct CacheUse {
    /// The cache folder; `None`: no caching.
    pub dir: Option<PathBuf>,
    /// `--rehash`: hash every changed file again.
    pub rehash: bool,
    /// The environment the stamp reads (which setting files git's status depends on).
    pub env: std::collections::BTreeMap<String, String>,
}

impl CacheUse {
    /// The folder whose kept answers may be used and replaced: none under `--rehash`.
    pub fn kept_dir(&self) -> Option<&Path> {
        self.dir.as_deref().filter(|_| !self.rehash)
    }
}

/// Changed paths (tracked changes and untracked, not-ignored files), the digest over them, and
/// the entries for `cache` to keep.
fn uncommitted_change(
    mut entries: Vec<StatusEntry>,
    cache: &ChangeCache,
) -> (Vec<String>, Option<String>, Vec<change_cache::Entry>) {
    entries.sort_by(|a, b| a.raw.cmp(&b.raw));
    entries.dedup_by(|a, b| a.raw == b.raw);
    if entries.is_empty() {
        return (Vec::new(), None, Vec::new());
    }
    // Each file's metadata is looked at here, and a digest the cache still holds is reused;
    // the files left to read are hashed in parallel when there are several (handing a few
    // metadata checks to the thread pool costs more than doing them). The digest then takes
    // them in path order.
    let started_ns = crate::cache::now_ns();
    let mut to_hash = Vec::new();
    let mut states: Vec<Option<(String, Option<change_cache::Entry>)>> = entries
        .iter()
        .enumerate()
        .map(|(i, e)| {
            if e.deleted {
                return Some(("deleted".to_string(), None));
            }
            match look(&e.abs, &e.path, cache, started_ns) {
                Look::Known(state, entry) => Some((state, entry)),
                Look::Read(stamp) => {
                    to_hash.push((i, stamp));
                    None
                }
            }
        })
        .collect();
    let hash = |&(i, stamp): &(usize, FileStamp)| {
        let e: &StatusEntry = &entries[i];
        let sha256 = file_sha256(&e.abs);
        let entry = sha256
            .as_deref()
            .and_then(|d| ChangeCache::entry(&e.path, stamp, d, started_ns));
        (sha256.unwrap_or_else(|| "unreadable".into()), entry)
    };
    let hashed: Vec<(String, Option<change_cache::Entry>)> = if to_hash.len() > 1 {
        use rayon::prelude::*;
        to_hash.par_iter().map(hash).collect()
    } else {
        to_hash.iter().map(hash).collect()
    };
    for ((i, _), h) in to_hash.iter().zip(hashed) {
        states[*i] = Some(h);
    }
    let states: Vec<(String, Option<change_cache::Entry>)> = states.into_iter().flatten().collect();
    let mut digest = Sha256::new();
    for (e, (state, _)) in entries.iter().zip(&states) {
        digest.update(&e.raw);
        digest.update([0]);
        digest.update(state.as_bytes());
        digest.update(b"\n");
    }
    let keep = states.into_iter().filter_map(|(_, e)| e).collect();
    let paths = entries.into_iter().map(|e| e.path).collect();
    (
        paths,
        Some(format!("sha256:{}", hex(&digest.finalize()))),
        keep,
    )
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

/// What a changed work-tree file's state is, from its metadata alone.
enum Look {
    /// Known without reading: a symbolic link's target, a folder's or special file's
    /// marker, a missing file, or a digest the cache holds for this metadata (with the entry
    /// to keep).
    Known(String, Option<change_cache::Entry>),
    /// A regular file to read, with its metadata before the reading.
    Read(FileStamp),
}

/// The state of the work-tree file at `path` (`key`: its path in the work tree) as far as
/// its metadata tells, taking a digest from `cache` when the file's metadata is unchanged.
fn look(path: &Path, key: &str, cache: &ChangeCache, started_ns: i128) -> Look {
    let meta = match std::fs::symlink_metadata(path) {
        Ok(m) => m,
        Err(_) => return Look::Known("missing".into(), None),
    };
    if meta.file_type().is_symlink() {
        let target = std::fs::read_link(path).unwrap_or_default();
        return Look::Known(format!("link:{}", target.display()), None);
    }
    if meta.is_dir() {
        // A submodule or nested repository: its own commit is recorded elsewhere.
        return Look::Known("dir".into(), None);
    }
    if !meta.is_file() {
        // A FIFO would block the open; a socket or device has no content to hash.
        return Look::Known("special".into(), None);
    }
    let stamp = FileStamp::of(&meta);
    match cache.get(key, &stamp) {
        Some(known) => {
            let entry = ChangeCache::entry(key, stamp, known, started_ns);
            Look::Known(known.to_string(), entry)
        }
        None => Look::Read(stamp),
    }
}

/// Hex SHA-256 of a changed file's content; `None` when it cannot be read. A symbolic link is
/// never followed: as git stores it, its content is the path it points to (gitglossary,
/// "symlink"; mode 120000 in git's tree format), so a link to a file outside the repository
/// is hashed as its target's name, not its content. A FIFO, socket or device is never opened.
fn file_sha256(path: &Path) -> Option<String> {
    let mut hasher = Sha256::new();
    if std::fs::symlink_metadata(path).ok()?.is_symlink() {
        use std::os::unix::ffi::OsStrExt;
        let target = std::fs::read_link(path).ok()?;
        hasher.update(target.as_os_str().as_bytes());
        return Some(hex(&hasher.finalize()));
    }
    let mut file = crate::limits::open_regular(path, false).ok()?;
    // On the stack: hundreds of changed files are hashed per stamp, and a fresh heap block
    // per file made the allocator map, zero and purge tens of megabytes.
    let mut buf = [0u8; 1 << 14];
    loop {
        match file.read(&mut buf) {
            Ok(0) => break,
            Ok(n) => hasher.update(&buf[..n]),
            Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
            Err(_) => return None,
        }
    }
    Some(hex(&hasher.finalize()))
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

/// Opens the repository that contains `dir`, as [`Repository::discover`] does, once
/// [`preflight`] has found nothing that would make git or libgit2 wait forever; what it found
/// is the error's message.
pub fn discover(dir: &Path) -> Result<Repository, git2::Error> {
    let checked = preflight(dir).map_err(|problem| {
        git2::Error::new(
            git2::ErrorCode::GenericError,
            git2::ErrorClass::Repository,
            problem,
        )
    })?;
    discover_checked(dir, &checked)
}

/// The root of the work tree that contains `dir`, without opening the repository: the nearest
/// folder from `dir` (its real path) up that holds a `.git` entry, a folder or a `gitdir:`
/// file, as git looks for it (gitrepository-layout(5)). Anything less plain (no `.git` on the
/// way, or a folder on the way that is itself a git folder: a bare repository, or `dir`
/// inside `.git`) is answered by [`discover`], as before. For finding the policy file, which
/// happens before git's status can start.
pub fn work_tree_root(dir: &Path) -> Option<PathBuf> {
    let real = std::fs::canonicalize(dir).ok()?;
    for folder in real.ancestors() {
        if std::fs::symlink_metadata(folder.join(".git")).is_ok() {
            return Some(folder.to_path_buf());
        }
        let is_git_folder = folder.join("HEAD").is_file() && folder.join("objects").is_dir();
        if is_git_folder {
            break;
        }
    }
    discover(dir)
        .ok()
        .and_then(|r| r.workdir().map(Path::to_path_buf))
}

/// Proof that [`preflight`] found nothing in the repository containing a folder: what lets
/// [`work_tree`] open it without looking again.
#[derive(Debug)]
pub struct Checked(());

/// [`Repository::discover`] once [`preflight`] has passed.
fn discover_checked(dir: &Path, _: &Checked) -> Result<Repository, git2::Error> {
    Repository::discover(dir)
}

/// The files of a git folder that opening the repository and listing its status read
/// (gitrepository-layout(5)), relative to the git folder.
const GIT_FILES: &[&str] = &[
    "HEAD",
    "config",
    "config.worktree",
    "index",
    "commondir",
    "packed-refs",
    "shallow",
    "info/exclude",
    "info/attributes",
    "info/sparse-checkout",
    "info/grafts",
    "objects/info/alternates",
];

/// Files of the common folder (the main repository's, for a linked work tree).
const COMMON_FILES: &[&str] = &[
    "config",
    "packed-refs",
    "info/exclude",
    "info/attributes",
    "objects/info/alternates",
];

/// How deep git follows `include.path` (git's `MAX_INCLUDE_DEPTH`, config.c, from memory).
const MAX_INCLUDE_DEPTH: usize = 10;

/// Looks, without opening anything that could block, at the files git and libgit2 read when
/// they open the repository that contains `dir` and list its status: the `.git` entry (a
/// folder, or a file `gitdir: PATH` that must lead to one), the git folder's own files
/// ([`GIT_FILES`]), the branch file HEAD names, the common folder of a linked work tree, every
/// file a configuration includes (`include.path`, `includeIf.*.path`, followed as git does up
/// to [`MAX_INCLUDE_DEPTH`]) and the work tree's top `.gitignore`. A FIFO, socket or device
/// among them would make libgit2 (in this process, where no timeout can stop it) or `git`
/// wait forever; such a file, and a `.git` file that leads nowhere, is returned as a message
/// naming it. `Ok`: nothing found (or no `.git` above `dir`: libgit2 decides).
pub fn preflight(dir: &Path) -> Result<Checked, String> {
    match first_blocking(dir) {
        Some(problem) => Err(problem),
        None => Ok(Checked(())),
    }
}

/// [`preflight`]'s search: the first problem found, if any.
fn first_blocking(dir: &Path) -> Option<String> {
    let start = std::path::absolute(dir).unwrap_or_else(|_| dir.to_path_buf());
    for folder in start.ancestors() {
        let dotgit = folder.join(".git");
        let Ok(meta) = std::fs::symlink_metadata(&dotgit) else {
            continue;
        };
        let gitdir = if meta.is_file() {
            match gitdir_from_file(folder, &dotgit) {
                Ok(d) => d,
                Err(problem) => return Some(problem),
            }
        } else {
            match std::fs::metadata(&dotgit) {
                Ok(m) if m.is_dir() => dotgit.clone(),
                Ok(m) => {
                    return Some(format!(
                        "`{}` is {}, not a git folder",
                        dotgit.display(),
                        crate::limits::kind_of(&m)
                    ))
                }
                Err(_) => {
                    return Some(format!(
                        "`{}` is a symbolic link that leads nowhere",
                        dotgit.display()
                    ))
                }
            }
        };
        // git reads `.gitignore` without following a link (git 2.32 release notes), so only
        // the entry itself can block it.
        let top_ignore = folder.join(".gitignore");
        return check_git_folder(&gitdir).or_else(|| {
            std::fs::symlink_metadata(&top_ignore)
                .is_ok_and(|m| !m.is_symlink())
                .then(|| special(&top_ignore))
                .flatten()
        });
    }
    None
}

/// The git folder a `.git` file names (`gitdir: PATH`, relative to the file's folder), or why
/// there is none.
fn gitdir_from_file(folder: &Path, dotgit: &Path) -> Result<PathBuf, String> {
    let bytes = crate::limits::read_regular_file_with_limit(dotgit, 64 << 10)
        .map_err(|e| format!("`{}` {}", dotgit.display(), crate::limits::refusal(&e)))?;
    let text = String::from_utf8_lossy(&bytes);
    let target = text
        .lines()
        .next()
        .and_then(|l| l.strip_prefix("gitdir:"))
        .map(str::trim)
        .filter(|t| !t.is_empty())
        .ok_or_else(|| {
            format!(
                "`{}` is a file that does not name a git folder (`gitdir: PATH`)",
                dotgit.display()
            )
        })?;
    let gitdir = folder.join(target);
    if !std::fs::metadata(&gitdir).is_ok_and(|m| m.is_dir()) {
        return Err(format!(
            "`{}` points to a git folder that does not exist; the work tree is not a usable \
             repository",
            dotgit.display()
        ));
    }
    Ok(gitdir)
}

/// The message for a FIFO, socket or device at `path` (links followed); `None` for a regular
/// file, a folder, or nothing there.
fn special(path: &Path) -> Option<String> {
    let meta = std::fs::metadata(path).ok()?;
    (!meta.is_file() && !meta.is_dir()).then(|| {
        format!(
            "`{}` is {}, which git would wait on forever; the repository was not read",
            path.display(),
            crate::limits::kind_of(&meta)
        )
    })
}

/// [`preflight`] for one git folder.
fn check_git_folder(gitdir: &Path) -> Option<String> {
    for f in GIT_FILES {
        if let Some(problem) = special(&gitdir.join(f)) {
            return Some(problem);
        }
    }
    let small = |p: &Path| crate::limits::read_regular_file_with_limit(p, 1 << 20).ok();
    let common = small(&gitdir.join("commondir"))
        .map(|b| gitdir.join(String::from_utf8_lossy(&b).trim()))
        .unwrap_or_else(|| gitdir.to_path_buf());
    if common != gitdir {
        for f in COMMON_FILES {
            if let Some(problem) = special(&common.join(f)) {
                return Some(problem);
            }
        }
    }
    // HEAD names its branch as `ref: refs/heads/NAME`; the branch file may live in either.
    if let Some(head) = small(&gitdir.join("HEAD")) {
        let head = String::from_utf8_lossy(&head);
        if let Some(r) = head.trim().strip_prefix("ref:").map(str::trim) {
            if !r.split('/').any(|part| part == "..") {
                for base in [gitdir, common.as_path()] {
                    if let Some(problem) = special(&base.join(r)) {
                        return Some(problem);
                    }
                }
            }
        }
    }
    let mut queue: Vec<(PathBuf, usize)> = [common.join("config"), gitdir.join("config.worktree")]
        .into_iter()
        .chain((common != gitdir).then(|| gitdir.join("config")))
        .map(|p| (p, 0))
        .collect();
    let mut seen = std::collections::HashSet::new();
    while let Some((config, depth)) = queue.pop() {
        if depth > MAX_INCLUDE_DEPTH || !seen.insert(config.clone()) {
            continue;
        }
        if let Some(problem) = special(&config) {
            return Some(problem);
        }
        let Some(bytes) = small(&config) else {
            continue;
        };
        let base = config.parent().unwrap_or(Path::new("/")).to_path_buf();
        for target in config_includes(&String::from_utf8_lossy(&bytes)) {
            let path = match target.strip_prefix("~/") {
                Some(rest) => match std::env::var_os("HOME") {
                    Some(home) => PathBuf::from(home).join(rest),
                    None => continue,
                },
                None => base.join(&target),
            };
            queue.push((path, depth + 1));
        }
    }
    None
}

/// The paths a git configuration file includes: the `path` values of its `[include]` and
/// `[includeIf "…"]` sections (git-config(1), "Includes"), whatever their conditions (a
/// condition only decides whether git reads the file, and any file it might read is looked
/// at). Values may be quoted; `#` and `;` start a comment outside quotes.
pub(crate) fn config_includes(text: &str) -> Vec<String> {
    let mut out = Vec::new();
    let mut in_include = false;
    for line in text.lines() {
        let line = line.trim();
        if let Some(rest) = line.strip_prefix('[') {
            let name = rest
                .split(|c: char| c == ']' || c == '"' || c.is_whitespace())
                .next()
                .unwrap_or("")
                .to_ascii_lowercase();
            in_include = name == "include" || name == "includeif";
            // `[include] path = x` on one line.
            let Some((_, after)) = rest.split_once(']') else {
                continue;
            };
            if !in_include || after.trim().is_empty() {
                continue;
            }
            if let Some(v) = include_path(after.trim()) {
                out.push(v);
            }
            continue;
        }
        if in_include {
            if let Some(v) = include_path(line) {
                out.push(v);
            }
        }
    }
    out
}

/// The value of a `path = VALUE` line, unquoted, without its comment.
fn include_path(line: &str) -> Option<String> {
    let (key, value) = line.split_once('=')?;
    if !key.trim().eq_ignore_ascii_case("path") {
        return None;
    }
    let mut out = String::new();
    let mut quoted = false;
    let mut chars = value.trim().chars();
    while let Some(c) = chars.next() {
        match c {
            '"' => quoted = !quoted,
            '\\' => {
                if let Some(n) = chars.next() {
                    out.push(match n {
                        'n' => '\n',
                        't' => '\t',
                        other => other,
                    });
                }
            }
            '#' | ';' if !quoted => break,
            c => out.push(c),
        }
    }
    let out = out.trim().to_string();
    (!out.is_empty()).then_some(out)
}

/// The work tree that contains `dir`: its root, and the repository opened once (its index is
/// the `index` file of [`Repository::path`]; [`collect`] takes it). `None` outside a
/// repository or in a bare one. `checked` is [`preflight`]'s answer for `dir`.
pub fn work_tree(dir: &Path, checked: &Checked) -> Option<(PathBuf, Repository)> {
    let repo = discover_checked(dir, checked).ok()?;
    let root = repo.workdir()?.to_path_buf();
    Some((root, repo))
}

/// The diff between the trees of two commits, or `None` when either is not in `repo`.
fn tree_diff<'r>(repo: &'r Repository, old: &str, new: &str) -> Option<git2::Diff<'r>> {
    let tree = |id: &str| -> Option<git2::Tree<'r>> {
        let oid = git2::Oid::from_str(id).ok()?;
        repo.find_commit(oid).ok()?.tree().ok()
    };
    let (a, b) = (tree(old)?, tree(new)?);
    repo.diff_tree_to_tree(Some(&a), Some(&b), None).ok()
}

pub use crate::diff::FileStat;

/// The files changed between two commits of the repository that contains `dir`, with lines
/// added and removed (git2's patch statistics, as `git diff --numstat` counts them), or `None`
/// when either commit is not in that repository.
pub fn diff_stats_between(dir: &Path, old: &str, new: &str) -> Option<Vec<FileStat>> {
    let repo = discover(dir).ok()?;
    let mut diff = tree_diff(&repo, old, new)?;
    let mut find = git2::DiffFindOptions::new();
    find.renames(true).exact_match_only(true);
    // Without rename detection a rename is a deletion and an addition, both still listed.
    let _ = diff.find_similar(Some(&mut find));
    let mut out = Vec::new();
    for (i, delta) in diff.deltas().enumerate() {
        let Some(path) = delta.new_file().path().or(delta.old_file().path()) else {
            continue;
        };
        let (added, removed) = git2::Patch::from_diff(&diff, i)
            .ok()
            .flatten()
            .and_then(|p| p.line_stats().ok())
            .map_or((0, 0), |(_, a, r)| (a as u64, r as u64));
        let unchanged = matches!(
            delta.status(),
            git2::Delta::Renamed | git2::Delta::Modified | git2::Delta::Typechange
        ) && delta.old_file().id() == delta.new_file().id()
            && !delta.old_file().id().is_zero();
        out.push(FileStat {
            path: path.to_string_lossy().into_owned(),
            added,
            removed,
            unchanged,
        });
    }
    out.sort_by(|x, y| x.path.cmp(&y.path));
    Some(out)
}

#[cfg(all(test, unix))]
mod tests {
    use super::*;
    use std::os::unix::fs::PermissionsExt;

    fn write_program(path: &Path, mode: u32) {
        std::fs::create_dir_all(path.parent().unwrap()).unwrap();
        std::fs::write(path, "#!/bin/sh\n").unwrap();
        std::fs::set_permissions(path, std::fs::Permissions::from_mode(mode)).unwrap();
    }

    /// The work tree's root as `git rev-parse --show-toplevel` (run here) gives it: from a
    /// sub-folder, from a linked work tree (a `.git` file), from a repository nested in
    /// another; `None` where git finds no work tree (a bare repository, no repository).
    #[test]
    fn work_tree_root_agrees_with_git() {
        let top = tempfile::tempdir().unwrap();
        let base = std::fs::canonicalize(top.path()).unwrap();
        let run = |dir: &Path, args: &[&str]| {
            std::process::Command::new("git")
                .args(args)
                .current_dir(dir)
                .env("GIT_CONFIG_NOSYSTEM", "1")
                .env("GIT_CEILING_DIRECTORIES", base.parent().unwrap())
                .output()
                .unwrap()
        };
        let main = base.join("main");
        std::fs::create_dir_all(main.join("a/b")).unwrap();
        std::fs::write(main.join("a/b/f.txt"), "x\n").unwrap();
        run(&main, &["init", "-q"]);
        let commit = [
            "-c",
            "user.name=t",
            "-c",
            "user.email=t@example.invalid",
            "commit",
            "-qm",
            "x",
        ];
        run(&main, &["add", "-A"]);
        run(&main, &commit);
        run(&main, &["worktree", "add", "-q", "../linked"]);
        std::fs::create_dir_all(main.join("a/inner")).unwrap();
        run(&main.join("a/inner"), &["init", "-q"]);
        run(&base, &["init", "-q", "--bare", "bare.git"]);
        std::fs::create_dir_all(base.join("plain")).unwrap();
        for dir in [
            main.clone(),
            main.join("a/b"),
            base.join("linked/a"),
            main.join("a/inner"),
            base.join("bare.git"),
            base.join("plain"),
        ] {
            let out = run(&dir, &["rev-parse", "--show-toplevel"]);
            let expected = out
                .status
                .success()
                .then(|| PathBuf::from(String::from_utf8_lossy(&out.stdout).trim()))
                .filter(|p| !p.as_os_str().is_empty());
            assert_eq!(work_tree_root(&dir), expected, "{}", dir.display());
        }
    }

    /// Includes as git-config(1) ("Includes", "Conditional includes") writes them: a `path`
    /// key in `[include]` or `[includeIf "…"]`, quoted or not, with a trailing comment.
    #[test]
    fn config_includes_are_found_in_every_form() {
        let text = "[core]\n\tpath = not-an-include\n[include]\n\tpath = a.inc\n\
                    [includeIf \"gitdir:~/work/\"]\n\tPath = \"~/b inc\" ; comment\n\
                    [Include] path = c.inc # comment\n[user]\n\tname = x\n";
        assert_eq!(config_includes(text), ["a.inc", "~/b inc", "c.inc"]);
    }

    /// The lookup follows execvp(3) (POSIX `exec`: "the path prefix … is obtained by a search of
    /// the directories passed as the environment variable PATH"; a zero-length prefix is the
    /// current working directory): the first folder holding an executable file of that name.
    #[test]
    fn git_is_found_as_execvp_would_find_it() {
        let dir = tempfile::tempdir().unwrap();
        let (a, b, cwd) = (
            dir.path().join("a"),
            dir.path().join("b"),
            dir.path().join("w"),
        );
        write_program(&a.join("git"), 0o644); // not executable: skipped
        write_program(&b.join("git"), 0o755);
        std::fs::create_dir_all(a.join("dir/git")).unwrap();
        let path = format!("{}:{}", a.display(), b.display());
        assert_eq!(find_program("git", Some(&path), &cwd), Some(b.join("git")));
        // A folder named like the program is not it.
        let path = format!("{}:{}", a.join("dir").display(), b.display());
        assert_eq!(find_program("git", Some(&path), &cwd), Some(b.join("git")));
        // Relative and empty entries are taken from the child's working folder.
        write_program(&cwd.join("tools/git"), 0o755);
        assert_eq!(
            find_program("git", Some("tools"), &cwd),
            Some(cwd.join("tools/git"))
        );
        write_program(&cwd.join("git"), 0o755);
        assert_eq!(
            find_program("git", Some(&format!(":{}", b.display())), &cwd)
                .map(|p| p.canonicalize().unwrap()),
            Some(cwd.join("git").canonicalize().unwrap())
        );
        assert_eq!(
            find_program("git", Some(&a.display().to_string()), &cwd),
            None
        );
    }
}
