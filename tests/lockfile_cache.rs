//! The parsed-lockfile cache (`src/collect/lockfile_cache.rs`): a stamp of an unchanged
//! repository takes its lockfiles from the cache and the result equals a fresh read
//! (`--rehash`); a change to any file a result was read from (the lockfile, an included
//! requirements file, a companion `go.sum`) or to git's index (the real `git add`) makes the
//! next stamp read again.
//!
//! The lockfiles are real ones: this crate's own `Cargo.lock` (written by cargo), a
//! requirements file pair in pip's format (`-r` includes, pip's "Requirements File Format"),
//! and the `go.mod`/`go.sum` fixture.

mod common;

use std::path::Path;

use common::{cache_file, crate_path, git, repo_with, stamp_cached, write_files};
use runprint::manifest::{Lockfile, Manifest};
use sha2::{Digest, Sha256};

/// `(reused, read, index listing reused)` as `RUNPRINT_TIMINGS` reports the cache's use.
type Use = (usize, usize, bool);

fn stamp(repo: &Path, cache: &Path, extra: &[&str]) -> (Manifest, Use) {
    let (manifest, stderr) = stamp_cached(repo, cache, extra, &[("RUNPRINT_TIMINGS", "1")]);
    let line = stderr
        .lines()
        .find_map(|l| l.strip_prefix("timing: lockfile cache: "))
        .unwrap_or_else(|| panic!("no lockfile cache line in:\n{stderr}"));
    let re = regex::Regex::new(r"^(\d+) reused, (\d+) read, index listing reused: (true|false)$")
        .unwrap();
    let c = re.captures(line).unwrap_or_else(|| panic!("{line}"));
    let used = (
        c[1].parse().unwrap(),
        c[2].parse().unwrap(),
        &c[3] == "true",
    );
    (manifest, used)
}

fn lockfiles(m: &Manifest) -> &[Lockfile] {
    &m.content.lockfiles
}

fn versions(m: &Manifest, path: &str) -> Vec<(String, String)> {
    lockfiles(m)
        .iter()
        .find(|l| l.path == path)
        .unwrap_or_else(|| panic!("no {path}"))
        .packages
        .iter()
        .map(|p| (p.name.clone(), p.version.clone()))
        .collect()
}

/// Lets every file written so far leave the two-second window in which the cache does not
/// trust metadata (the status-change time cannot be set back, so the test waits).
fn age() {
    std::thread::sleep(std::time::Duration::from_millis(2100));
}

fn repository() -> tempfile::TempDir {
    let cargo_lock = std::fs::read_to_string(crate_path("Cargo.lock")).unwrap();
    let go_mod = std::fs::read_to_string(crate_path("fixtures/lockfiles/go/go.mod")).unwrap();
    let go_sum = std::fs::read_to_string(crate_path("fixtures/lockfiles/go/go.sum")).unwrap();
    repo_with(&[
        ("service/Cargo.lock", &cargo_lock),
        ("ingest/go.mod", &go_mod),
        ("ingest/go.sum", &go_sum),
        ("trainer/requirements.txt", "-r base.txt\nnumpy==1.26.4\n"),
        ("trainer/base.txt", "requests==2.31.0\n"),
    ])
}

#[test]
fn an_unchanged_repository_reuses_every_result_and_it_equals_a_fresh_read() {
    let repo = repository();
    let scratch = tempfile::tempdir().unwrap();
    let cache = scratch.path().join("cache");
    age();
    let (first, used) = stamp(repo.path(), &cache, &[]);
    assert_eq!(used, (0, 3, false), "a cold cache reads everything");
    assert_eq!(lockfiles(&first).len(), 3);
    let (second, used) = stamp(repo.path(), &cache, &[]);
    assert_eq!(
        used,
        (3, 0, true),
        "nothing changed: everything comes from the cache"
    );
    assert_eq!(lockfiles(&second), lockfiles(&first));
    // --rehash reads everything again, and finds the same.
    let (fresh, used) = stamp(repo.path(), &cache, &["--rehash"]);
    assert_eq!(used, (0, 3, false));
    assert_eq!(lockfiles(&fresh), lockfiles(&first));

    // An included file changes: only the file including it is read again.
    write_files(repo.path(), &[("trainer/base.txt", "requests==2.32.3\n")]);
    let (after, used) = stamp(repo.path(), &cache, &[]);
    assert_eq!((used.0, used.1), (2, 1));
    assert!(versions(&after, "trainer/requirements.txt")
        .contains(&("requests".to_string(), "2.32.3".to_string())));

    // The companion go.sum disappears: go.mod is read again and its hashes go.
    let hashed = |m: &Manifest| {
        lockfiles(m)
            .iter()
            .find(|l| l.path == "ingest/go.mod")
            .unwrap()
            .packages
            .iter()
            .any(|p| !p.hashes.is_empty())
    };
    assert!(hashed(&after));
    std::fs::remove_file(repo.path().join("ingest/go.sum")).unwrap();
    let (after, used) = stamp(repo.path(), &cache, &[]);
    assert!(used.1 >= 1);
    assert!(!hashed(&after));
}

#[test]
fn the_stored_result_is_what_a_warm_stamp_records_until_the_lockfile_changes() {
    let repo = repository();
    let scratch = tempfile::tempdir().unwrap();
    let cache = scratch.path().join("cache");
    age();
    stamp(repo.path(), &cache, &[]);
    // Edit the stored result (keeping its length: the file stores serialized lockfiles by
    // byte range): a warm stamp must report the edit, which shows the result is taken from
    // the cache rather than only written to it.
    let file = cache_file(&cache, "lockfiles-");
    let text = common::unsealed(&file);
    let (header, blobs) = text.split_once('\n').unwrap();
    assert!(blobs.contains("\"1.26.4\""));
    let edited = blobs.replace("\"1.26.4\"", "\"9.99.9\"");
    // A stored record edited without its checksum is damage: read over, not trusted.
    std::fs::write(&file, format!("{header}\n{edited}")).unwrap();
    let (read_over, used) = stamp(repo.path(), &cache, &[]);
    assert_eq!(used.0, 0);
    assert!(versions(&read_over, "trainer/requirements.txt")
        .contains(&("numpy".to_string(), "1.26.4".to_string())));
    // Edited with its checksum (the file's own layout: a JSON header line naming the SHA-256
    // of the stored lockfiles that follow it) and sealed again as runprint seals.
    let text = common::unsealed(&file);
    let (header, blobs) = text.split_once('\n').unwrap();
    let edited = blobs.replace("\"1.26.4\"", "\"9.99.9\"");
    let sha = |b: &str| runprint::manifest::hex(&Sha256::digest(b.as_bytes()));
    let header = header.replace(&sha(blobs), &sha(&edited));
    common::reseal(&file, format!("{header}\n{edited}").as_bytes());
    let (warm, _) = stamp(repo.path(), &cache, &[]);
    assert!(versions(&warm, "trainer/requirements.txt")
        .contains(&("numpy".to_string(), "9.99.9".to_string())));
    // The manifest's fingerprint still matches its content: the stored text and the stored
    // record agree.
    assert!(!warm.is_modified());
    // The lockfile itself changes (same size, so only its times and content differ).
    write_files(
        repo.path(),
        &[("trainer/requirements.txt", "-r base.txt\nnumpy==1.26.5\n")],
    );
    let (changed, _) = stamp(repo.path(), &cache, &[]);
    assert!(versions(&changed, "trainer/requirements.txt")
        .contains(&("numpy".to_string(), "1.26.5".to_string())));
    // A damaged cache file is read over, never trusted, and reported (its seal breaks).
    std::fs::write(&file, "{\"kind\": ").unwrap();
    let (after, used) = stamp(repo.path(), &cache, &[]);
    assert_eq!(used.0, 0);
    assert_eq!(lockfiles(&after), lockfiles(&changed));
    assert!(
        after
            .run
            .warnings
            .iter()
            .all(|w| w.contains("does not match its seal")),
        "{:?}",
        after.run.warnings
    );
    assert_eq!(after.run.warnings.len(), 1, "{:?}", after.run.warnings);
}

#[test]
fn a_lockfile_added_to_the_index_or_left_untracked_is_found() {
    let repo = repository();
    let scratch = tempfile::tempdir().unwrap();
    let cache = scratch.path().join("cache");
    age();
    stamp(repo.path(), &cache, &[]);
    let (_, used) = stamp(repo.path(), &cache, &[]);
    assert!(
        used.2,
        "the index listing is reused while the index is unchanged"
    );
    // Untracked: found through git's status, not the index.
    write_files(repo.path(), &[("eval/requirements.txt", "scipy==1.13.1\n")]);
    let (m, _) = stamp(repo.path(), &cache, &[]);
    assert_eq!(versions(&m, "eval/requirements.txt").len(), 1);
    // Added to the index with the real git: the index file changes, the listing is read again.
    git(repo.path(), &["add", "eval/requirements.txt"]);
    let (m, used) = stamp(repo.path(), &cache, &[]);
    assert!(!used.2);
    assert_eq!(versions(&m, "eval/requirements.txt").len(), 1);
    // Removed from the work tree while still tracked: no longer recorded.
    std::fs::remove_file(repo.path().join("eval/requirements.txt")).unwrap();
    let (m, _) = stamp(repo.path(), &cache, &[]);
    assert!(lockfiles(&m)
        .iter()
        .all(|l| l.path != "eval/requirements.txt"));
}

/// Cache files left unused for 30 days are removed when a cache file is next written; the
/// files a stamp uses are marked as used (their modification time), so they stay.
#[test]
fn cache_files_left_unused_are_removed_and_used_ones_kept() {
    let repo = repository();
    let scratch = tempfile::tempdir().unwrap();
    let cache = scratch.path().join("cache");
    std::fs::create_dir_all(&cache).unwrap();
    let long_ago = std::time::SystemTime::now() - std::time::Duration::from_secs(40 * 24 * 3600);
    let set_old = |p: &Path| {
        let f = std::fs::File::options().append(true).open(p).unwrap();
        f.set_modified(long_ago).unwrap();
    };
    // A stack cache of an older build, another repository's lockfiles, and files that are
    // not per-key caches (kept whatever their age).
    for name in [
        "stack-0123456789abcdef.json",
        "lockfiles-0123456789abcdef.json",
        "digests-v1.json",
        "notes.txt",
    ] {
        std::fs::write(cache.join(name), "{}").unwrap();
        set_old(&cache.join(name));
    }
    age();
    stamp(repo.path(), &cache, &[]);
    let names = |dir: &Path| -> Vec<String> {
        let mut v: Vec<String> = std::fs::read_dir(dir)
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
            .collect();
        v.sort();
        v
    };
    let after = names(&cache);
    assert!(
        !after.contains(&"stack-0123456789abcdef.json".to_string()),
        "{after:?}"
    );
    assert!(!after.contains(&"lockfiles-0123456789abcdef.json".to_string()));
    assert!(after.contains(&"digests-v1.json".to_string()));
    assert!(after.contains(&"notes.txt".to_string()));
    // This stamp's own files, made to look old, are marked used again by a warm stamp (which
    // writes nothing), so the next pruning keeps them.
    let own: Vec<String> = after
        .iter()
        .filter(|n| n.starts_with("lockfiles-") || n.starts_with("stack-"))
        .cloned()
        .collect();
    assert_eq!(own.len(), 2, "{after:?}");
    for n in &own {
        set_old(&cache.join(n));
    }
    let (_, used) = stamp(repo.path(), &cache, &[]);
    assert_eq!(used, (3, 0, true));
    for n in &own {
        let age = cache
            .join(n)
            .metadata()
            .unwrap()
            .modified()
            .unwrap()
            .elapsed();
        assert!(
            age.unwrap_or_default() < std::time::Duration::from_secs(3600),
            "{n}"
        );
    }
}
