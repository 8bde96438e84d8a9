//! Declared data inputs (`stamp --data PATH`): the SHA-256, size and file count of each file or
//! folder.
//!
//! Files are hashed in parallel across the available cores (rayon), each one streamed in
//! blocks so memory stays flat ([`crate::hashing`]). Unchanged files are taken from the digest
//! cache ([`crate::cache`]). A progress bar appears on stderr only when hashing lasts more than
//! about a second and stderr is a terminal.

use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, Ordering};
use std::time::{Duration, Instant};

use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};
use rayon::prelude::*;
use sha2::{Digest, Sha256};

use crate::cache::{now_ns, DigestCache, FileStamp};
use crate::hashing::sha256_file;
use crate::manifest::{hex, DataEntry, DataInput, DATA_ENTRY_LIMIT};

/// How to collect data inputs.
#[derive(Debug, Clone, Default)]
pub struct DataOptions {
    /// Files or folders to digest.
    pub paths: Vec<PathBuf>,
    /// Where the digest cache lives (`None`: no cache).
    pub cache_dir: Option<PathBuf>,
    /// Ignore cached digests (new digests are still saved).
    pub rehash: bool,
    /// Allow a progress bar (stderr is a terminal and `--quiet` was not given).
    pub progress: bool,
}

/// One file to digest.
struct Job {
    input: usize,
    abs: PathBuf,
    rel: String,
    stamp: FileStamp,
    digest: Option<String>,
}

/// Digests every declared input. Problems (unreadable files, walk errors, cache trouble) are
/// pushed to `warnings`; an input that cannot be read at all is left out.
pub fn collect(
    opts: &DataOptions,
    root: &Path,
    private: bool,
    warnings: &mut Vec<String>,
) -> Vec<DataInput> {
    if opts.paths.is_empty() {
        return Vec::new();
    }
    let mut cache = match &opts.cache_dir {
        Some(dir) => DigestCache::open(dir, opts.rehash, warnings),
        None => DigestCache::disabled(),
    };

    let mut inputs: Vec<(String, bool)> = Vec::new(); // (shown path, is folder)
    let mut jobs: Vec<Job> = Vec::new();
    for path in &opts.paths {
        let shown = shown_path(path, root, private);
        let meta = match std::fs::metadata(path) {
            Ok(m) => m,
            Err(e) => {
                warnings.push(format!("data `{}`: cannot read: {e}", path.display()));
                continue;
            }
        };
        if !meta.is_dir() && !meta.is_file() {
            // A FIFO would block the stamp forever and a device could stream without end.
            warnings.push(format!(
                "data `{}`: not a regular file or folder; not read",
                path.display()
            ));
            continue;
        }
        let index = inputs.len();
        if meta.is_dir() {
            inputs.push((shown, true));
            walk_folder(path, index, &mut jobs, warnings);
        } else {
            inputs.push((shown, false));
            let abs = std::path::absolute(path).unwrap_or_else(|_| path.clone());
            jobs.push(Job {
                input: index,
                abs,
                rel: String::new(),
                stamp: FileStamp::of(&meta),
                digest: None,
            });
        }
    }

    for job in &mut jobs {
        job.digest = cache.get(&job.abs, &job.stamp);
    }
    hash_missing(&mut jobs, opts.progress, warnings);
    let hashed_at = now_ns();
    for job in &jobs {
        if let Some(d) = &job.digest {
            cache.put(&job.abs, job.stamp, d.clone(), hashed_at);
        }
    }
    if let Err(e) = cache.save() {
        warnings.push(format!("digest cache not saved: {e}"));
    }
    assemble(inputs, jobs)
}

/// The path written to the manifest: relative to the repository root when inside it; outside
/// it, as given, or a digest of it with `--private` when it is absolute.
fn shown_path(path: &Path, root: &Path, private: bool) -> String {
    let abs = std::path::absolute(path).unwrap_or_else(|_| path.to_path_buf());
    let root_abs = std::path::absolute(root).unwrap_or_else(|_| root.to_path_buf());
    if let Ok(rel) = abs.strip_prefix(&root_abs) {
        if !rel.as_os_str().is_empty() {
            return crate::redact::scrub_path(&rel.to_string_lossy().replace('\\', "/"));
        }
    }
    let given = path.to_string_lossy().into_owned();
    if private && path.is_absolute() {
        crate::privacy::digest(&given)
    } else {
        crate::redact::scrub_path(&given)
    }
}

/// Lists the files under a folder (following links, which `walkdir` checks for loops).
fn walk_folder(dir: &Path, input: usize, jobs: &mut Vec<Job>, warnings: &mut Vec<String>) {
    for entry in walkdir::WalkDir::new(dir)
        .follow_links(true)
        .sort_by_file_name()
    {
        let entry = match entry {
            Ok(e) => e,
            Err(e) => {
                warnings.push(format!("data `{}`: {e}", dir.display()));
                continue;
            }
        };
        if !entry.file_type().is_file() {
            continue;
        }
        let meta = match entry.metadata() {
            Ok(m) => m,
            Err(e) => {
                warnings.push(format!("data `{}`: {e}", entry.path().display()));
                continue;
            }
        };
        let rel = entry
            .path()
            .strip_prefix(dir)
            .unwrap_or(entry.path())
            .to_string_lossy()
            .replace('\\', "/");
        let abs = std::path::absolute(entry.path()).unwrap_or_else(|_| entry.path().to_path_buf());
        jobs.push(Job {
            input,
            abs,
            rel,
            stamp: FileStamp::of(&meta),
            digest: None,
        });
    }
}

/// Hashes every job without a digest, in parallel, with a delayed progress bar.
fn hash_missing(jobs: &mut [Job], progress: bool, warnings: &mut Vec<String>) {
    let total: u64 = jobs
        .iter()
        .filter(|j| j.digest.is_none())
        .map(|j| j.stamp.size)
        .sum();
    if total == 0 && jobs.iter().all(|j| j.digest.is_some()) {
        return;
    }
    let bar = ProgressBar::with_draw_target(Some(total), ProgressDrawTarget::hidden());
    bar.set_style(
        ProgressStyle::with_template(
            "hashing data {bar:30} {bytes}/{total_bytes} {bytes_per_sec} eta {eta}",
        )
        .unwrap_or_else(|_| ProgressStyle::default_bar()),
    );
    let start = Instant::now();
    let shown = AtomicBool::new(false);
    let on_bytes = |n: u64| {
        bar.inc(n);
        if progress
            && !shown.load(Ordering::Relaxed)
            && start.elapsed() > Duration::from_secs(1)
            && !shown.swap(true, Ordering::Relaxed)
        {
            bar.set_draw_target(ProgressDrawTarget::stderr());
        }
    };
    let errors: Vec<String> = jobs
        .par_iter_mut()
        .filter(|j| j.digest.is_none())
        .filter_map(|j| match sha256_file(&j.abs, &on_bytes) {
            Ok((digest, _)) => {
                j.digest = Some(digest);
                None
            }
            Err(e) => Some(format!("data `{}`: cannot read: {e}", j.abs.display())),
        })
        .collect();
    bar.finish_and_clear();
    warnings.extend(errors);
}

/// Builds the manifest entries from hashed jobs.
fn assemble(inputs: Vec<(String, bool)>, jobs: Vec<Job>) -> Vec<DataInput> {
    let mut out: Vec<DataInput> = inputs
        .into_iter()
        .map(|(path, folder)| DataInput {
            path,
            kind: if folder { "folder" } else { "file" }.into(),
            ..DataInput::default()
        })
        .collect();
    let mut listings: Vec<Vec<DataEntry>> = vec![Vec::new(); out.len()];
    for job in jobs {
        let Some(digest) = job.digest else { continue };
        let input = &mut out[job.input];
        input.size += job.stamp.size;
        input.files += 1;
        if input.kind == "file" {
            input.sha256 = format!("sha256:{digest}");
        } else {
            listings[job.input].push(DataEntry {
                path: job.rel,
                sha256: digest,
                size: job.stamp.size,
            });
        }
    }
    for (input, mut entries) in out.iter_mut().zip(listings) {
        if input.kind != "folder" {
            continue;
        }
        entries.sort_by(|a, b| a.path.cmp(&b.path));
        let mut h = Sha256::new();
        for e in &entries {
            h.update(e.path.as_bytes());
            h.update([0]);
            h.update(e.sha256.as_bytes());
            h.update(b"\n");
        }
        input.sha256 = format!("sha256:{}", hex(&h.finalize()));
        // The digest covers the real names; the names shown lose any token-like segment.
        for e in &mut entries {
            e.path = crate::redact::scrub_path(&e.path);
        }
        if entries.len() <= DATA_ENTRY_LIMIT {
            input.entries = entries;
        }
    }
    out.sort_by(|a, b| a.path.cmp(&b.path));
    out.dedup_by(|a, b| a.path == b.path);
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    fn opts(paths: &[&Path], cache: Option<&Path>) -> DataOptions {
        DataOptions {
            paths: paths.iter().map(|p| p.to_path_buf()).collect(),
            cache_dir: cache.map(Path::to_path_buf),
            rehash: false,
            progress: false,
        }
    }

    #[test]
    fn folder_digest_changes_on_rename_add_and_edit() {
        let root = tempfile::tempdir().unwrap();
        let d = root.path().join("train");
        std::fs::create_dir_all(d.join("sub")).unwrap();
        std::fs::write(d.join("a.csv"), "1,2\n").unwrap();
        std::fs::write(d.join("sub/b.csv"), "3,4\n").unwrap();
        let digest = || {
            let mut w = Vec::new();
            let v = collect(&opts(&[&d], None), root.path(), false, &mut w);
            assert!(w.is_empty(), "{w:?}");
            v[0].clone()
        };
        let first = digest();
        assert_eq!(first.path, "train");
        assert_eq!(first.files, 2);
        assert_eq!(first.size, 8);
        assert_eq!(first.entries[1].path, "sub/b.csv");
        std::fs::rename(d.join("a.csv"), d.join("c.csv")).unwrap();
        let renamed = digest();
        assert_ne!(first.sha256, renamed.sha256);
        std::fs::write(d.join("d.csv"), "").unwrap();
        let added = digest();
        assert_ne!(renamed.sha256, added.sha256);
        std::fs::write(d.join("d.csv"), "x").unwrap();
        assert_ne!(added.sha256, digest().sha256);
    }

    #[test]
    fn missing_input_is_a_warning() {
        let root = tempfile::tempdir().unwrap();
        let mut w = Vec::new();
        let v = collect(
            &opts(&[&root.path().join("nope")], None),
            root.path(),
            false,
            &mut w,
        );
        assert!(v.is_empty());
        assert!(w[0].contains("nope"));
    }
}
