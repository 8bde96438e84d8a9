//! Finds every supported lockfile under the repository root and parses it.
//!
//! The walk respects `.gitignore` (the `ignore` crate, as ripgrep does) and skips folders that
//! hold installed or built code rather than the project's own: `.git`, `node_modules`,
//! `target`, virtual environments and caches. A file that cannot be read or parsed becomes a
//! warning; the others are still recorded.

use std::path::{Path, PathBuf};

use crate::collect::cargo_features;
use crate::collect::lockfile_cache::{self as cache, Inputs, LockfileCache};
use crate::lockfile::{cargo, Format};
use crate::manifest::Lockfile;

/// Folder names never descended into.
pub(crate) const SKIPPED_DIRS: &[&str] = &[
    ".git",
    "node_modules",
    "target",
    ".venv",
    "venv",
    "__pycache__",
    "site-packages",
    ".tox",
    ".nox",
    ".mypy_cache",
    ".pytest_cache",
];

/// Lockfiles found under `root`, as paths relative to it, sorted.
pub fn discover(root: &Path) -> Vec<PathBuf> {
    discover_all(root, &mut Vec::new()).0
}

/// One walk of the repository: the lockfiles (relative to `root`, sorted) and the absolute
/// paths of every `Cargo.toml` (they decide Cargo's enabled features).
///
/// The walk honours `.gitignore` files and the repository's `.git/info/exclude` as git does
/// (gitignore(5): a deeper file's patterns take precedence over a shallower one's, and every
/// `.gitignore` over `info/exclude`; the last matching pattern of a file decides; an ignored
/// folder is not entered), matched by the `ignore` crate's gitignore matcher. The pattern
/// files themselves are read through the file-opening policy and never through a symbolic
/// link (git 2.32 and later do not follow one either), so a FIFO or device named `.gitignore`
/// cannot block the walk: it becomes a warning, as do folders that cannot be listed and
/// lockfile-named entries whose path is not UTF-8. Entries that have a lockfile's name but are
/// not regular files (FIFOs, devices, links to nothing) are returned, so that reading them
/// gives a warning rather than silence. Global excludes (`core.excludesFile`) and `.ignore`
/// files are not read: this walk is the fallback when git cannot list the files.
pub fn discover_all(root: &Path, warnings: &mut Vec<String>) -> (Vec<PathBuf>, Vec<PathBuf>) {
    use ignore::gitignore::Gitignore;
    use ignore::Match;
    let mut found = Vec::new();
    let mut cargo_manifests = Vec::new();
    // The pattern files of the folders above the current entry, deepest last, with the depth
    // of the folder that holds each.
    let mut stack: Vec<(usize, Gitignore)> = Vec::new();
    let exclude = patterns(
        root,
        &root.join(".git/info/exclude"),
        ".git/info/exclude",
        warnings,
    );
    let mut walk = walkdir::WalkDir::new(root)
        .follow_links(false)
        .sort_by_file_name()
        .into_iter();
    while let Some(next) = walk.next() {
        let entry = match next {
            Ok(e) => e,
            Err(e) => {
                let shown = e
                    .path()
                    .and_then(|p| p.strip_prefix(root).ok())
                    .map_or_else(|| ".".to_string(), |p| p.to_string_lossy().into_owned());
                let why = e.io_error().map_or_else(
                    || "a loop of folders".to_string(),
                    |io| io.kind().to_string(),
                );
                warnings.push(format!(
                    "lockfiles: folder `{shown}` could not be listed ({why}); lockfiles in it \
                     were not read"
                ));
                continue;
            }
        };
        let depth = entry.depth();
        while stack.last().is_some_and(|(d, _)| *d >= depth) {
            stack.pop();
        }
        let is_dir = entry.file_type().is_dir();
        if depth > 0 {
            if is_dir
                && entry
                    .file_name()
                    .to_str()
                    .is_some_and(|n| SKIPPED_DIRS.contains(&n))
            {
                walk.skip_current_dir();
                continue;
            }
            let verdict = stack
                .iter()
                .rev()
                .map(|(_, gi)| gi)
                .chain(exclude.as_ref())
                .map(|gi| gi.matched(entry.path(), is_dir))
                .find(|m| !m.is_none());
            if matches!(verdict, Some(Match::Ignore(_))) {
                if is_dir {
                    walk.skip_current_dir();
                }
                continue;
            }
        }
        let rel = entry.path().strip_prefix(root).unwrap_or(entry.path());
        if is_dir {
            let file = entry.path().join(".gitignore");
            let shown = rel.join(".gitignore").to_string_lossy().into_owned();
            if let Some(gi) = patterns(entry.path(), &file, &shown, warnings) {
                stack.push((depth, gi));
            }
            continue;
        }
        let Some(name) = entry.file_name().to_str() else {
            continue;
        };
        if name == "Cargo.toml" {
            let abs = std::path::absolute(entry.path()).unwrap_or_else(|_| entry.path().into());
            cargo_manifests.push(abs);
        }
        if Format::detect_path(&rel.to_string_lossy().replace('\\', "/")).is_some() {
            if rel.to_str().is_none() {
                warnings.push(not_utf8(&rel.to_string_lossy()));
                continue;
            }
            found.push(rel.to_path_buf());
        }
    }
    found.sort();
    (found, cargo_manifests)
}

/// The warning for a lockfile whose path (`shown`, invalid bytes replaced) is not UTF-8.
fn not_utf8(shown: &str) -> String {
    format!(
        "lockfile `{}`: its path is not UTF-8 and cannot be written to a manifest; not read",
        crate::escape::printable(shown)
    )
}

/// The gitignore patterns of `file` (matched relative to `dir`), read without following a
/// link and through the file-opening policy; `None` when there is no such file. A file that
/// cannot be read is a warning naming it (`shown`), never its content.
fn patterns(
    dir: &Path,
    file: &Path,
    shown: &str,
    warnings: &mut Vec<String>,
) -> Option<ignore::gitignore::Gitignore> {
    let bytes = match crate::limits::read_regular_file_nofollow(file) {
        Ok(b) => b,
        // Absent, or a parent that is no folder (`.git` as a file of a linked work tree).
        Err(e)
            if e.kind() == std::io::ErrorKind::NotFound
                || e.raw_os_error() == Some(libc::ENOTDIR) =>
        {
            return None
        }
        // A folder that cannot be listed is reported by the walk, once.
        Err(e)
            if e.kind() == std::io::ErrorKind::PermissionDenied
                && std::fs::read_dir(dir).is_err() =>
        {
            return None
        }
        Err(e) => {
            warnings.push(format!(
                "`{shown}` {}; its patterns were not applied",
                crate::limits::refusal(&e)
            ));
            return None;
        }
    };
    let mut builder = ignore::gitignore::GitignoreBuilder::new(dir);
    for line in String::from_utf8_lossy(&bytes).lines() {
        // A pattern the matcher cannot compile is skipped, as git skips what it cannot use.
        let _ = builder.add_line(None, line);
    }
    builder.build().ok()
}

/// The lockfiles and `Cargo.toml` files among a list of repository files, skipping the same
/// folders as the walk. A listed lockfile that is not a regular file is kept (reading it gives
/// the warning); one that is gone from the work tree (deleted, not yet committed) is not. A
/// path git gave with bytes that are not UTF-8 (shown with U+FFFD) cannot be opened by its
/// listed name: it is a warning.
fn from_listing(
    root: &Path,
    files: &[String],
    warnings: &mut Vec<String>,
) -> (Vec<PathBuf>, Vec<PathBuf>) {
    let mut found = Vec::new();
    let mut cargo_manifests = Vec::new();
    for f in files {
        let mut parts = f.split('/').collect::<Vec<_>>();
        let Some(name) = parts.pop() else { continue };
        if parts.iter().any(|d| SKIPPED_DIRS.contains(d)) {
            continue;
        }
        if name == "Cargo.toml" {
            let p = root.join(f);
            cargo_manifests.push(std::path::absolute(&p).unwrap_or(p));
        }
        if Format::detect_path(f).is_some() {
            let gone = std::fs::symlink_metadata(root.join(f))
                .is_err_and(|e| e.kind() == std::io::ErrorKind::NotFound);
            if !gone {
                found.push(PathBuf::from(f));
            } else if f.contains('\u{FFFD}') {
                warnings.push(not_utf8(f));
            }
        }
    }
    found.sort();
    (found, cargo_manifests)
}

/// What reading one lockfile needs to know about the others.
struct Context<'a> {
    root: &'a Path,
    /// `root` made absolute (not resolved), to tell the repository's files from those named
    /// on the command line outside it.
    root_abs: PathBuf,
    /// Reads of the repository's files stay inside it.
    confine: crate::limits::Confinement,
    cargo_manifests: Vec<PathBuf>,
    cache_dir: Option<&'a Path>,
    /// `--rehash`: no cached result is used.
    rehash: bool,
}

impl Context<'_> {
    /// True for a path of the repository (lexically under its root, or resolving into it).
    fn read_confined(&self, path: &Path) -> bool {
        path.starts_with(self.root)
            || path.starts_with(&self.root_abs)
            || self.confine.contains(path)
    }

    /// Reads a file: confined to the repository when it is one of the repository's files (so a
    /// committed symbolic link out of it is refused), else (a file the user named outside the
    /// repository) bounded and regular only.
    fn read(&self, path: &Path) -> std::io::Result<Vec<u8>> {
        if self.read_confined(path) {
            self.confine.read(path)
        } else {
            crate::limits::read_regular_file(path)
        }
    }

    /// For a `Cargo.lock`, the `Cargo.toml` files below its folder (they decide its enabled
    /// features), sorted; empty for other formats.
    fn manifests_for(&self, lockfile: &Path) -> Vec<PathBuf> {
        if lockfile
            .file_name()
            .and_then(|n| n.to_str())
            .and_then(Format::detect)
            != Some(Format::CargoLock)
        {
            return Vec::new();
        }
        let dir = lockfile.parent().unwrap_or(Path::new("."));
        let mut under: Vec<PathBuf> = self
            .cargo_manifests
            .iter()
            .filter(|m| m.starts_with(dir))
            .cloned()
            .collect();
        under.sort();
        under
    }
}

/// Reads and parses every lockfile under `root`, plus `extra` files named by the user (which
/// may lie outside it). Problems are pushed to `warnings`; duplicates are read once.
pub fn collect(root: &Path, extra: &[PathBuf], warnings: &mut Vec<String>) -> Vec<Lockfile> {
    collect_with(root, extra, None, None, warnings)
}

/// The folder of the repository at `root` that `repo` names, relative and ending in `/`;
/// `None` when `repo` is the root itself or outside it.
pub fn folder_within(repo: &Path, root: &Path) -> Option<String> {
    let repo = std::fs::canonicalize(repo).ok()?;
    let root = std::fs::canonicalize(root).ok()?;
    let rel = repo.strip_prefix(&root).ok()?;
    let rel = rel.to_str()?.replace('\\', "/");
    (!rel.is_empty()).then(|| format!("{}/", rel.trim_end_matches('/')))
}

/// As [`collect`], with a cache folder for Cargo's enabled features, and optionally the
/// repository's file list (tracked and untracked-not-ignored files, relative to `root`, as
/// git lists them) to use instead of walking the folders.
pub fn collect_with(
    root: &Path,
    extra: &[PathBuf],
    cache_dir: Option<&Path>,
    listed: Option<&[String]>,
    warnings: &mut Vec<String>,
) -> Vec<Lockfile> {
    let mut cache = LockfileCache::disabled();
    collect_cached(root, extra, cache_dir, listed, None, &mut cache, warnings)
}

/// As [`collect_with`], taking each lockfile's result from `cache` when nothing it was read
/// from has changed, and keeping the new ones in it; with `under` (a relative folder ending
/// in `/`), only the lockfiles found below it.
pub fn collect_cached(
    root: &Path,
    extra: &[PathBuf],
    cache_dir: Option<&Path>,
    listed: Option<&[String]>,
    under: Option<&str>,
    cache: &mut LockfileCache,
    warnings: &mut Vec<String>,
) -> Vec<Lockfile> {
    let (mut found, cargo_manifests) = match listed {
        Some(files) => from_listing(root, files, warnings),
        None => discover_all(root, warnings),
    };
    // `--repo SUBDIR`: the lockfiles under that folder only (relative, ending in `/`).
    if let Some(prefix) = under {
        found.retain(|rel| rel.to_string_lossy().replace('\\', "/").starts_with(prefix));
    }
    let mut files: Vec<(PathBuf, String)> = found
        .into_iter()
        .map(|rel| (root.join(&rel), rel.to_string_lossy().replace('\\', "/")))
        .collect();
    let root_abs = std::path::absolute(root).unwrap_or_else(|_| root.to_path_buf());
    for path in extra {
        let abs = std::path::absolute(path).unwrap_or_else(|_| path.clone());
        let shown = match abs.strip_prefix(&root_abs) {
            Ok(rel) => rel.to_string_lossy().replace('\\', "/"),
            Err(_) => path.to_string_lossy().into_owned(),
        };
        if !files.iter().any(|(_, s)| *s == shown) {
            files.push((abs, shown));
        }
    }
    let ctx = Context {
        root,
        root_abs: root_abs.clone(),
        confine: crate::limits::Confinement::new(root),
        cargo_manifests,
        cache_dir,
        rehash: cache.rehash(),
    };
    // Results from the cache first, on this thread: handing a few metadata checks to the
    // thread pool costs more than doing them, and the pool may be busy. The files left are
    // read and parsed in parallel when there are several. Results and warnings keep the
    // files' order.
    let mut results: Vec<Option<cache::Result>> = files
        .iter()
        .map(|(abs, shown)| cache.lookup(shown, abs, &ctx.manifests_for(abs)))
        .collect();
    let read = |(abs, shown): &(PathBuf, String)| {
        let started = std::time::SystemTime::now();
        let mut inputs = Inputs {
            reusable: true,
            ..Inputs::default()
        };
        let mut w = Vec::new();
        let result = (read_one(&ctx, abs, shown, &mut inputs, &mut w), w);
        let entry = LockfileCache::entry(shown, abs, inputs, started, &result);
        (result, entry)
    };
    let missing: Vec<usize> = (0..files.len()).filter(|&i| results[i].is_none()).collect();
    let fresh: Vec<(cache::Result, Option<cache::Entry>)> = if missing.len() > 1 {
        use rayon::prelude::*;
        missing.par_iter().map(|&i| read(&files[i])).collect()
    } else {
        missing.iter().map(|&i| read(&files[i])).collect()
    };
    for (i, (result, entry)) in missing.into_iter().zip(fresh) {
        cache.keep(&files[i].1, entry);
        results[i] = Some(result);
    }
    let mut out = Vec::with_capacity(files.len());
    for (lockfile, mut w) in results.into_iter().flatten() {
        warnings.append(&mut w);
        out.extend(lockfile);
    }
    out
}

/// Reads and parses one lockfile; `shown` is the path written to the manifest. The other paths
/// the result depends on are noted in `inputs`.
fn read_one(
    ctx: &Context,
    abs: &Path,
    shown: &str,
    inputs: &mut Inputs,
    warnings: &mut Vec<String>,
) -> Option<Lockfile> {
    let Some(format) = Format::detect_path(&abs.to_string_lossy().replace('\\', "/")) else {
        warnings.push(format!(
            "lockfile `{shown}`: not a lockfile format runprint reads"
        ));
        return None;
    };
    let bytes = match ctx.read(abs) {
        Ok(b) => b,
        Err(e) => {
            // Perhaps passing (permissions, a full disk): read again next time.
            inputs.reusable = false;
            warnings.push(format!("lockfile `{shown}` {}", why_not_read(abs, &e)));
            return None;
        }
    };
    let text = match crate::lockfile::decode(&bytes, shown) {
        Ok(t) => t,
        Err(e) => {
            warnings.push(format!("lockfile {e}"));
            return None;
        }
    };
    // A companion file (go.sum beside go.mod) is read with it; its hashes reach the packages.
    let mut source = DiskSource {
        ctx,
        read: &mut inputs.paths,
    };
    let companion = super::includes::companion(&mut source, &abs.to_path_buf(), format, warnings);
    let mut parsed = crate::lockfile::parse_or_warn(
        format,
        text,
        shown,
        companion.as_ref().map(|(t, p)| (t.as_str(), p.as_str())),
        warnings,
    )?;
    if !parsed.includes.is_empty() {
        let key = abs.canonicalize().unwrap_or_else(|_| abs.to_path_buf());
        super::includes::merge(&mut source, key, &mut parsed, warnings);
    }
    if format == Format::CargoLock {
        let beside = abs.with_file_name("Cargo.toml");
        inputs.paths.push(beside.clone());
        inputs.manifests = ctx.manifests_for(abs);
        match cargo_features::features(abs, &bytes, &ctx.cargo_manifests, ctx.cache_dir, ctx.rehash)
        {
            Ok(Some(map)) => cargo::apply_features(&mut parsed.packages, &map),
            // No `Cargo.toml`: nothing to ask. With one, `cargo` was missing: it may be
            // installed by the next stamp.
            Ok(None) => inputs.reusable &= !beside.is_file(),
            Err(e) => {
                // A lasting failure (a pinned toolchain not installed, crates missing from
                // cargo's cache) holds while the files it depends on stay the same.
                match &e.depends_on {
                    Some(paths) => inputs.paths.extend(paths.iter().cloned()),
                    None => inputs.reusable = false,
                }
                warnings.push(format!(
                    "lockfile `{shown}`: enabled features not recorded: {e}"
                ))
            }
        }
    }
    Some(Lockfile::from_parsed(
        shown, format, parsed, &bytes, warnings,
    ))
}

/// Why a lockfile was not read, as the rest of a sentence that starts with its name.
fn why_not_read(path: &Path, e: &std::io::Error) -> String {
    let dangling = e.kind() == std::io::ErrorKind::NotFound
        && std::fs::symlink_metadata(path).is_ok_and(|m| m.is_symlink());
    if dangling {
        "is a symbolic link to nothing (never read)".to_string()
    } else {
        crate::limits::refusal(e)
    }
}

/// The work tree (and files outside it named with `--lockfile`) as the place included files
/// are read from. Files are known by their canonical path; an include inside the repository
/// stays inside it, whatever links it follows. Every included path looked for is pushed to
/// `read` (the lockfile cache's inputs).
struct DiskSource<'c> {
    ctx: &'c Context<'c>,
    read: &'c mut Vec<PathBuf>,
}

impl super::includes::IncludeSource for DiskSource<'_> {
    type Key = PathBuf;

    fn locate(&mut self, from: &PathBuf, target: &str) -> Result<PathBuf, String> {
        let path = from.parent().unwrap_or(Path::new(".")).join(target);
        self.read.push(path.clone());
        path.canonicalize().map_err(|e| {
            format!(
                "cannot read included {}: {e}",
                super::includes::quoted(target)
            )
        })
    }

    fn load(&mut self, from: &PathBuf, key: &PathBuf) -> Result<String, String> {
        // Confined when the including file is the repository's: a committed include (or a
        // link it follows) that leads out of the repository is refused.
        let bytes = if self.ctx.read_confined(from) {
            self.ctx.confine.read(key)
        } else {
            crate::limits::read_regular_file(key)
        }
        .map_err(|e| why_not_read(key, &e))?;
        crate::lockfile::decode(&bytes, &self.shown(key))
            .map(str::to_string)
            .map_err(|e| e.message)
    }

    fn shown(&self, key: &PathBuf) -> String {
        shown_path(self.ctx.confine.root(), key)
    }

    fn beside(&mut self, of: &PathBuf, name: &str) -> Option<PathBuf> {
        let path = of.with_file_name(name);
        self.read.push(path.clone());
        std::fs::symlink_metadata(&path).ok()?;
        Some(path)
    }
}

/// A path as shown in warnings: relative to the root when inside it.
fn shown_path(root: &Path, path: &Path) -> String {
    let path = path.canonicalize().unwrap_or_else(|_| path.to_path_buf());
    path.strip_prefix(root)
        .unwrap_or(&path)
        .to_string_lossy()
        .replace('\\', "/")
}
