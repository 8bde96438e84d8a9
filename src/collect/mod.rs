//! Collectors: one module per source of facts. [`stamp`] runs them all and assembles a
//! [`Manifest`]. A collector that fails adds a warning and leaves its section empty; stamping
//! itself never fails, so it can never break the training run it records.
//!
//! To add a collector: write a module with `collect(...) -> Result<Section, String>` (or
//! returning the section and pushing warnings), add its section to
//! [`crate::manifest::Content`], call it here, and teach [`crate::diff`] to compare it.

pub mod at_rev;
pub mod cargo_features;
pub mod change_cache;
pub mod cpu;
pub mod data;
pub mod env;
pub mod fsdeps;
pub mod git;
pub mod gpu;
mod includes;
pub mod lockfile_cache;
pub mod lockfiles;
pub mod native;
pub mod patch;
pub mod process;
pub mod python;
pub mod scope;
pub mod stack_cache;
pub mod status_cache;
pub mod system;

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use crate::manifest::{Content, Manifest, Prepared, RunInfo};
use crate::redact::scrub_secrets;

/// What to stamp and how.
#[derive(Debug, Clone)]
pub struct StampOptions {
    /// A folder inside the checkout to stamp.
    pub repo: PathBuf,
    /// Free text stored in `[run]`.
    pub label: Option<String>,
    /// Leave out host name and remote URL, and hash values holding paths.
    pub private: bool,
    /// The environment to read variables from (normally the process's own).
    pub env: BTreeMap<String, String>,
    /// Lockfiles to read besides those found in the repository.
    pub extra_lockfiles: Vec<PathBuf>,
    /// Skip lockfiles altogether.
    pub no_lockfiles: bool,
    /// Declared data inputs and how to digest them.
    pub data: data::DataOptions,
    /// Python interpreters to describe (`--python`); empty means the active environment or
    /// `python3` on `PATH`.
    pub python: Vec<PathBuf>,
    /// Store the uncommitted change as a patch, leaving out files above this many bytes
    /// (`stamp --keep-patch`); `None`: do not store it.
    pub keep_patch: Option<u64>,
    /// The training job's declared scope (`--entry`, the policy's `[scope]`); `None`: no
    /// scope is recorded.
    pub scope: Option<scope::Request>,
    /// A running process to describe (`stamp --pid`), already read: its libraries are
    /// recorded in `[process]` and marked in `[[native.libraries]]`.
    pub process: Option<process::ProcessFacts>,
}

impl StampOptions {
    /// Options for a folder, reading this process's environment.
    pub fn new(repo: impl Into<PathBuf>) -> Self {
        StampOptions {
            repo: repo.into(),
            label: None,
            private: false,
            env: std::env::vars_os()
                .map(|(k, v)| {
                    (
                        k.to_string_lossy().into_owned(),
                        v.to_string_lossy().into_owned(),
                    )
                })
                .collect(),
            extra_lockfiles: Vec::new(),
            no_lockfiles: false,
            data: data::DataOptions::default(),
            python: Vec::new(),
            keep_patch: None,
            scope: None,
            process: None,
        }
    }
}

/// The environment variable that sets, in seconds, how long the git collector may take.
pub const GIT_TIMEOUT_VAR: &str = "RUNPRINT_GIT_TIMEOUT_SECS";

/// Default for [`GIT_TIMEOUT_VAR`]: far longer than the status of a large repository takes.
pub const DEFAULT_GIT_TIMEOUT_SECS: u64 = 120;

/// Repositories whose git collector is still running after its timeout (stuck in libgit2),
/// so that a process calling [`stamp`] again does not start a second stuck thread.
static STUCK_GIT: std::sync::Mutex<std::collections::BTreeSet<PathBuf>> =
    std::sync::Mutex::new(std::collections::BTreeSet::new());

/// Runs the git collector on a watchdog thread, and a stamp never hangs on git:
///
/// * the `git` executable (status) is killed at the timeout, and its thread returns;
/// * libgit2 can loop forever on a damaged repository (a truncated loose object makes its zlib
///   reader spin, see `tests/fs_traps.rs`) and a thread cannot be killed: after the timeout the
///   git section is left empty with a warning, the repository is remembered, and later stamps
///   of it in this process return that warning at once instead of starting another thread.
///
/// [`start_git_collector`] starts the thread; [`GitPending::wait`] waits for its answer, so
/// the caller does other work meanwhile.
fn start_git_collector(
    opts: &StampOptions,
    control: std::sync::Arc<git::GitControl>,
    started: git::Started,
    opened: Option<git2::Repository>,
    cache_use: git::CacheUse,
) -> GitPending {
    let secs = opts
        .env
        .get(GIT_TIMEOUT_VAR)
        .and_then(|v| v.trim().parse::<u64>().ok())
        .filter(|&s| s > 0)
        .unwrap_or(DEFAULT_GIT_TIMEOUT_SECS);
    let key = std::fs::canonicalize(&opts.repo).unwrap_or_else(|_| opts.repo.clone());
    let stuck = || STUCK_GIT.lock().unwrap_or_else(|e| e.into_inner());
    if stuck().contains(&key) {
        drop(started);
        git::abandon_git_status(&control);
        return GitPending::Done(Err(format!(
            "git: an earlier reading of the repository at `{}` has not finished (a damaged \
             object can make the git library loop; `git fsck` checks the repository); git \
             facts not recorded",
            opts.repo.display()
        )));
    }
    let (tx, rx) = std::sync::mpsc::channel();
    // Set by the thread when it ends, under the STUCK_GIT lock, so that the watchdog never
    // marks as stuck a thread that has just finished.
    let finished = std::sync::Arc::new(std::sync::atomic::AtomicBool::new(false));
    let cache = cache_use.clone();
    let (repo, private, ctl, done_key, done) = (
        opts.repo.clone(),
        opts.private,
        control.clone(),
        key.clone(),
        finished.clone(),
    );
    // The status and the opened repository move into the thread; if the thread cannot
    // start, they come back here.
    let handed = std::sync::Arc::new(std::sync::Mutex::new(Some((started, opened))));
    let mine = handed.clone();
    let take = |h: &std::sync::Mutex<Option<(git::Started, Option<git2::Repository>)>>| {
        h.lock()
            .unwrap_or_else(|e| e.into_inner())
            .take()
            .unwrap_or((Ok(None), None))
    };
    let spawned = std::thread::Builder::new()
        .name("runprint-git".into())
        .spawn(move || {
            let (started, opened) = take(&mine);
            let result = git::collect(&repo, private, &ctl, started, cache, opened);
            let mut stuck = STUCK_GIT.lock().unwrap_or_else(|e| e.into_inner());
            done.store(true, std::sync::atomic::Ordering::SeqCst);
            stuck.remove(&done_key);
            drop(stuck);
            let _ = tx.send(result);
        });
    if spawned.is_err() {
        let (started, opened) = take(&handed);
        return GitPending::Done(git::collect(
            &opts.repo,
            opts.private,
            &control,
            started,
            cache_use,
            opened,
        ));
    }
    GitPending::Running(GitThread {
        rx,
        finished,
        key,
        secs,
        control,
        repo: opts.repo.clone(),
    })
}

/// A git collector started by [`start_git_collector`].
enum GitPending {
    /// Answered without a thread.
    Done(Result<git::GitFacts, String>),
    /// Running on its thread.
    Running(GitThread),
}

/// The git collector's thread, which sends its answer on `rx`.
struct GitThread {
    rx: std::sync::mpsc::Receiver<Result<git::GitFacts, String>>,
    /// Set by the thread when it ends.
    finished: std::sync::Arc<std::sync::atomic::AtomicBool>,
    /// The repository's key in [`STUCK_GIT`].
    key: PathBuf,
    /// The timeout in seconds.
    secs: u64,
    control: std::sync::Arc<git::GitControl>,
    repo: PathBuf,
}

impl GitPending {
    /// The collector's answer, or a warning once the timeout has passed.
    fn wait(self) -> Result<git::GitFacts, String> {
        let GitThread {
            rx,
            finished,
            key,
            secs,
            control,
            repo,
        } = match self {
            GitPending::Done(result) => return result,
            GitPending::Running(thread) => thread,
        };
        let timeout = |what: &str| {
            format!(
                "git: no answer from the repository at `{}` within {secs} s{what}; git facts \
                 not recorded",
                repo.display()
            )
        };
        match rx.recv_timeout(std::time::Duration::from_secs(secs)) {
            Ok(result) => result,
            Err(std::sync::mpsc::RecvTimeoutError::Disconnected) => {
                Err("git: the collector stopped unexpectedly".into())
            }
            Err(std::sync::mpsc::RecvTimeoutError::Timeout) => {
                // Kill `git` if that is what runs; its thread then answers at once.
                control.stop();
                match rx.recv_timeout(std::time::Duration::from_millis(500)) {
                    Ok(Ok(facts)) => Ok(facts),
                    Ok(Err(_)) => Err(timeout(" (`git status` was stopped)")),
                    Err(_) => {
                        let mut stuck = STUCK_GIT.lock().unwrap_or_else(|e| e.into_inner());
                        if !finished.load(std::sync::atomic::Ordering::SeqCst) {
                            stuck.insert(key);
                        }
                        Err(timeout(
                            " (a damaged object can make the git library loop; `git fsck` \
                             checks the repository)",
                        ))
                    }
                }
            }
        }
    }
}

/// The numerical stack: Python environments, native libraries, GPU. The Python and native
/// parts come from [`stack_cache`] when nothing they read has changed since the last stamp.
/// With `RUNPRINT_TIMINGS` set, each part's duration goes to stderr (used by
/// `benches/stack.sh`).
fn stamp_stack(opts: &StampOptions, content: &mut Content, warnings: &mut Vec<String>) {
    let timings = opts.env.contains_key("RUNPRINT_TIMINGS");
    let start = std::time::Instant::now();
    // The GPU probe reads only the machine's own folders: it runs beside the Python and
    // native parts (usually a cache check), and is completed with their findings below.
    std::thread::scope(|s| {
        let probe = s.spawn(|| gpu::probe(&gpu::GpuPaths::host(&opts.env)));
        let (interpreters, explicit) = if opts.python.is_empty() {
            (
                python::default_interpreter(&opts.env).into_iter().collect(),
                false,
            )
        } else {
            (opts.python.clone(), true)
        };
        let key = stack_cache::Key::new(&interpreters, explicit, opts.private, &opts.env);
        let cache_dir = opts.data.cache_dir.as_deref();
        let cached = cache_dir
            .filter(|_| !opts.data.rehash)
            .and_then(|dir| stack_cache::load(dir, &key));
        let from_cache = cached.is_some();
        let mut python_done = None;
        let scanned = cached.unwrap_or_else(|| {
            stack_cache::scan_and_save(cache_dir, &key, || {
                let mut w = Vec::new();
                let mut scans = Vec::new();
                for interpreter in &interpreters {
                    match python::collect(interpreter, &opts.env, opts.private, &mut w) {
                        Ok(scan) => scans.push(scan),
                        // A default interpreter that cannot be read is not worth a warning; a
                        // named one is.
                        Err(e) if explicit => w.push(format!("python: {e}")),
                        Err(_) => {}
                    }
                }
                python_done = Some(std::time::Instant::now());
                let native = native::collect(
                    &scans,
                    &opts.env,
                    opts.private,
                    &native::SystemPaths::host(),
                    &mut w,
                );
                stack_cache::Scanned {
                    scans,
                    native,
                    warnings: w,
                }
            })
        });
        let native_done = std::time::Instant::now();
        warnings.extend(scanned.warnings);
        content.python = scanned.scans.iter().map(|s| s.env.clone()).collect();
        content.native = scanned.native;
        let probe = probe.join().unwrap_or_else(|_| gpu::Probe::stopped());
        content.gpu = Some(gpu::finish(probe, &scanned.scans, warnings));
        if timings {
            let ms = |d: std::time::Duration| d.as_secs_f64() * 1e3;
            match python_done {
                Some(p) => eprintln!(
                    "timing: python {:.3} ms, native {:.3} ms, gpu {:.3} ms",
                    ms(p - start),
                    ms(native_done - p),
                    ms(native_done.elapsed())
                ),
                None => eprintln!(
                "timing: python and native {:.3} ms (from the cache: {from_cache}), gpu {:.3} ms",
                ms(native_done - start),
                ms(native_done.elapsed())
            ),
            }
        }
    });
}

/// Lets the numerical-stack thread yield the CPU to git's status, which is the longest step
/// and runs at the same time: on a machine with few cores the two compete, and the stack
/// (usually a cache check) has the rest of the status's duration to finish in. Linux gives
/// each thread its own nice value (setpriority(2), "a thread ID"); elsewhere nothing changes.
fn lower_this_threads_priority() {
    #[cfg(target_os = "linux")]
    // SAFETY: plain integer arguments; the thread changes only its own nice value.
    unsafe {
        let tid = libc::syscall(libc::SYS_gettid) as libc::id_t;
        libc::setpriority(libc::PRIO_PROCESS, tid, 10);
    }
}

/// Runs `f`, printing its duration on stderr when `RUNPRINT_TIMINGS` is set.
fn timed<T>(on: bool, name: &str, f: impl FnOnce() -> T) -> T {
    let start = std::time::Instant::now();
    let out = f();
    if on {
        eprintln!(
            "timing: {name} {:.3} ms",
            start.elapsed().as_secs_f64() * 1e3
        );
    }
    out
}

/// Runs every collector and builds the manifest. Failures are recorded in `run.warnings`.
///
/// The independent collectors run at the same time, each keeping its own warnings, merged
/// afterwards in a fixed order so that the manifest does not depend on scheduling:
///
/// * git's status (a child process, or its answer kept from an earlier stamp of the same
///   unchanged checkout: [`status_cache`]) on one thread;
/// * the numerical stack on another, the GPU probe beside it on a third;
/// * on this one, the data digests, then the lockfiles found among the files in git's index,
///   the system, CPU and environment sections, while the status is still running. Untracked
///   files come only with the status; when one of them is a lockfile (or a `Cargo.toml`) the
///   lockfiles are read again from the full list.
pub fn stamp(opts: &StampOptions) -> Manifest {
    stamp_prepared(opts, false).0
}

/// As [`stamp`]. With `prepare`, once every section but `[git]` is known and while git's
/// status is still running, the rest of the manifest is serialized ahead of time
/// ([`Content::prepare`]); it is returned for [`Manifest::render_prepared`] (`None` when it
/// could not be used: `--private`, or lockfiles read again after the status).
pub fn stamp_prepared(opts: &StampOptions, prepare: bool) -> (Manifest, Option<Prepared>) {
    let t = opts.env.contains_key("RUNPRINT_TIMINGS");
    // git's status takes longest: it starts before anything else.
    let control = std::sync::Arc::new(git::GitControl::new(opts.env.get("PATH").cloned()));
    // A FIFO or device where git reads (its index, a configuration include) would hold git
    // and libgit2 forever: then neither starts, and the git collector reports the file.
    let checked = git::preflight(&opts.repo).ok();
    let cache_use = git::CacheUse {
        dir: opts.data.cache_dir.clone(),
        rehash: opts.data.rehash,
        env: opts.env.clone(),
    };
    let started = match &checked {
        None => Ok(None),
        Some(_) => git::start_status(&opts.repo, &control, &cache_use),
    };
    let (work_tree, opened) = match checked.and_then(|c| git::work_tree(&opts.repo, &c)) {
        Some((root, repo)) => (Some((root, repo.path().join("index"))), Some(repo)),
        None => (None, None),
    };
    let guess_root = work_tree
        .as_ref()
        .map_or_else(|| opts.repo.clone(), |(root, _)| root.clone());
    // `--no-lockfiles` stops the search; `--lockfile` still names files to read.
    let discover = !opts.no_lockfiles;
    let read_any = discover || !opts.extra_lockfiles.is_empty();
    // `--repo` naming a folder inside the repository: the lockfiles under it only.
    let under = lockfiles::folder_within(&opts.repo, &guess_root);
    if let Some(folder) = under.as_deref().filter(|_| discover) {
        eprintln!(
            "note: lockfiles are read under `{}` only (--repo names a folder of the repository)",
            crate::escape::printable(folder)
        );
    }
    let read_lockfiles =
        |root: &Path, listed: Option<&[String]>, cache: &mut lockfile_cache::LockfileCache| {
            let mut w = Vec::new();
            let l = timed(t, "lockfiles", || {
                lockfiles::collect_cached(
                    root,
                    &opts.extra_lockfiles,
                    opts.data.cache_dir.as_deref(),
                    listed,
                    under.as_deref(),
                    cache,
                    &mut w,
                )
            });
            (l, w)
        };
    let mut lock_cache = lockfile_cache::LockfileCache::disabled();
    let git_started = std::time::Instant::now();
    let git = start_git_collector(opts, control, started, opened, cache_use);
    let (git_result, mut content, early, mut prepared, early_warnings) = std::thread::scope(|s| {
        let stack = s.spawn(|| {
            lower_this_threads_priority();
            let mut w = Vec::new();
            let mut c = Content::default();
            stamp_stack(opts, &mut c, &mut w);
            (c, w)
        });
        let mut content = Content::default();
        let mut data_warnings = Vec::new();
        content.data = timed(t, "data", || {
            data::collect(&opts.data, &guess_root, opts.private, &mut data_warnings)
        });
        if read_any {
            lock_cache = lockfile_cache::LockfileCache::open(
                opts.data.cache_dir.as_deref(),
                &guess_root,
                opts.data.rehash,
            );
        }
        // The tracked files, and the warnings of the lockfiles read from them.
        // Only the files named with --lockfile: no search.
        let only_named = (!discover && read_any).then(|| {
            let (found, w) = read_lockfiles(&guess_root, Some(&[]), &mut lock_cache);
            content.lockfiles = found;
            w
        });
        let early = match &work_tree {
            Some((root, index)) if discover => lock_cache
                .tracked_candidates(index, || git::tracked_files(index))
                .map(|tracked| {
                    let (found, w) = read_lockfiles(root, Some(&tracked), &mut lock_cache);
                    content.lockfiles = found;
                    (tracked, w)
                }),
            _ => None,
        };
        content.system = timed(t, "system", system::collect);
        let cpu_warning = match timed(t, "cpu", cpu::collect) {
            Ok(c) => {
                content.cpu = c;
                None
            }
            Err(e) => Some(format!("cpu: {e}")),
        };
        content.env = env::collect(&opts.env, opts.private);
        let (stack, stack_warnings) = stack.join().unwrap_or_else(|_| {
            (
                Content::default(),
                vec!["stack: the collector stopped unexpectedly".to_string()],
            )
        });
        content.python = stack.python;
        content.native = stack.native;
        if let Some(facts) = &opts.process {
            content.process = Some(process::describe(facts, &mut content.native, opts.private));
        }
        content.gpu = stack.gpu;
        // Lockfiles are final unless the status names an untracked one (checked below).
        let lockfiles_known = !discover || early.is_some();
        let prepared = (prepare && lockfiles_known && !opts.private)
            .then(|| {
                // Lockfiles taken from the cache come with their serialized form.
                let texts = lock_cache.texts(&content.lockfiles);
                timed(t, "prepare", || content.prepare(&texts))
            })
            .flatten();
        // A warm stamp's scope: the index digest and the last result, read while git runs.
        let ahead = opts.scope.as_ref().and_then(|_| {
            let (root, index) = work_tree.as_ref()?;
            timed(t, "scope read ahead", || {
                scope::Ahead::read(root, Some(index), opts.data.cache_dir.as_deref())
            })
        });
        let git = git.wait();
        if t {
            eprintln!(
                "timing: git {:.3} ms",
                git_started.elapsed().as_secs_f64() * 1e3
            );
        }
        (
            git,
            content,
            early,
            prepared,
            (
                cpu_warning,
                data_warnings,
                stack_warnings,
                ahead,
                only_named,
            ),
        )
    });
    let (cpu_warning, data_warnings, stack_warnings, ahead, only_named) = early_warnings;
    let (root, untracked) = match &git_result {
        Ok(facts) => (
            facts.workdir.clone().unwrap_or_else(|| opts.repo.clone()),
            facts.untracked.as_deref(),
        ),
        Err(_) => (opts.repo.clone(), None),
    };
    let lock_warnings = if !discover {
        only_named.unwrap_or_default()
    } else {
        let reread = match (early, untracked) {
            (Some((tracked, early_warnings)), Some(untracked)) => {
                let matters = |f: &String| lockfile_cache::is_candidate(f);
                if untracked.iter().any(matters) {
                    let mut all = tracked;
                    all.extend(untracked.iter().filter(|f| matters(f)).cloned());
                    all.sort();
                    all.dedup();
                    Err(read_lockfiles(&root, Some(&all), &mut lock_cache))
                } else {
                    Ok(early_warnings)
                }
            }
            // No status (git failed or is missing): walk the folders.
            _ => Err(read_lockfiles(&root, None, &mut lock_cache)),
        };
        match reread {
            Ok(w) => w,
            Err((found, w)) => {
                content.lockfiles = found;
                prepared = None;
                w
            }
        }
    };
    if t && read_any {
        eprintln!("timing: lockfile cache: {}", lock_cache.summary());
    }
    lock_cache.save();

    let untracked: Vec<String> = untracked.map(<[String]>::to_vec).unwrap_or_default();
    let mut warnings = Vec::new();
    match git_result {
        Ok(facts) => {
            content.git = facts.info;
            warnings.extend(facts.warnings);
        }
        Err(e) => warnings.push(e),
    }
    if let Some(request) = &opts.scope {
        let mut changed = content.git.changed_paths.clone();
        changed.extend(untracked);
        let index = work_tree
            .as_ref()
            .filter(|_| content.git.present)
            .map(|(_, index)| index.as_path());
        let collected = timed(t, "scope", || {
            scope::collect(
                request,
                &scope::Inputs {
                    root: &root,
                    index,
                    changed: &changed,
                    python: &content.python,
                    lockfiles: &content.lockfiles,
                    cache_dir: opts.data.cache_dir.as_deref(),
                },
                ahead,
            )
        });
        content.scope = Some(collected.scope);
        if let Some(sc) = &content.scope {
            warnings.extend(
                sc.notes
                    .iter()
                    .filter(|n| n.starts_with("entry point"))
                    .map(|n| format!("scope: {n}")),
            );
        }
        // The scope comes after the ahead-of-time serialization: it is added to it.
        if let (Some(p), Some(sc)) = (prepared.as_mut(), content.scope.as_ref()) {
            let appended = match &collected.rendered {
                Some(r) => p.append_rendered_scope(r),
                None => p.append_scope(sc),
            };
            if !appended {
                prepared = None;
            }
        }
    }
    if let Some(cap) = opts.keep_patch.filter(|_| content.git.dirty) {
        content.git.patch = patch::collect(&root, cap, &mut warnings);
    }
    warnings.extend(cpu_warning);
    warnings.extend(lock_warnings);
    warnings.extend(data_warnings);
    warnings.extend(stack_warnings);
    if opts.private {
        let user = ["USER", "LOGNAME", "USERNAME"]
            .iter()
            .find_map(|k| opts.env.get(*k).filter(|v| !v.is_empty()));
        crate::privacy::apply(&mut content, &mut warnings, user.map(String::as_str));
    }

    let run = RunInfo {
        tool_version: env!("CARGO_PKG_VERSION").to_string(),
        created: humantime::format_rfc3339_seconds(std::time::SystemTime::now()).to_string(),
        label: opts.label.as_deref().map(scrub_secrets),
        hostname: if opts.private {
            None
        } else {
            system::hostname()
        },
        warnings: dedup_warnings(
            warnings
                .iter()
                .cloned()
                .chain(crate::cache::take_warnings())
                .map(|w| scrub_secrets(&w)),
        ),
    };
    let manifest = Manifest::new_prepared(run, content, prepared.as_ref());
    (manifest, prepared)
}

/// Each warning once, in the order first given: the same problem met by two collectors (or
/// by one file read for two lockfiles) is one line.
fn dedup_warnings(all: impl Iterator<Item = String>) -> Vec<String> {
    let mut seen = std::collections::HashSet::new();
    all.filter(|w| seen.insert(w.clone())).collect()
}
