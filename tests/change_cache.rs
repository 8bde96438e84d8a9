//! The digests of the work tree's changed files (`src/collect/change_cache.rs`): a warm stamp
//! reuses them while a file's metadata is unchanged, and the uncommitted-change digest always
//! equals one computed from `git status` (the changed paths) and `sha256sum` (their content),
//! following the definition in `src/collect/git.rs`: SHA-256 over, per changed path in byte
//! order, the path, a zero byte, the content's hex SHA-256, a newline.

mod common;

use std::path::Path;
use std::process::Command;

use common::{cache_file, git, repo_with, stamp_cached, write_files};
use sha2::{Digest, Sha256};

fn stamp(repo: &Path, cache: &Path, extra: &[&str]) -> Option<String> {
    stamp_cached(repo, cache, extra, &[])
        .0
        .content
        .git
        .dirty_digest
}

/// The digest from the references: git's list of changed paths and sha256sum's digests.
fn expected(repo: &Path) -> String {
    let porcelain = git(repo, &["status", "--porcelain", "-uall", "-z"]);
    let mut paths: Vec<&str> = porcelain
        .split('\0')
        .filter(|l| l.len() > 3)
        .map(|l| &l[3..])
        .collect();
    paths.sort();
    let mut h = Sha256::new();
    for p in paths {
        let out = Command::new("sha256sum")
            .arg(p)
            .current_dir(repo)
            .output()
            .unwrap();
        assert!(out.status.success());
        let text = String::from_utf8(out.stdout).unwrap();
        let digest = text.split_whitespace().next().unwrap();
        h.update(p.as_bytes());
        h.update([0]);
        h.update(digest.as_bytes());
        h.update(b"\n");
    }
    format!("sha256:{}", runprint::manifest::hex(&h.finalize()))
}

#[test]
fn a_warm_stamp_reuses_file_digests_only_while_their_metadata_is_unchanged() {
    let repo = repo_with(&[("train.py", "lr = 0.1\n"), ("conf.yaml", "epochs: 3\n")]);
    write_files(
        repo.path(),
        &[
            ("train.py", "lr = 0.2\n"),
            ("conf.yaml", "epochs: 4\n"),
            ("notes.md", "try a lower rate\n"),
        ],
    );
    let scratch = tempfile::tempdir().unwrap();
    let cache = scratch.path().join("cache");
    // Past the two seconds in which fresh metadata is not trusted.
    std::thread::sleep(std::time::Duration::from_millis(2100));
    let want = expected(repo.path());
    assert_eq!(stamp(repo.path(), &cache, &[]).as_deref(), Some(&*want));
    assert_eq!(stamp(repo.path(), &cache, &[]).as_deref(), Some(&*want));

    // Replace one stored digest and seal the file again as runprint would: the warm stamp's
    // result changes, so the digests are reused.
    let file = cache_file(&cache, "worktree-");
    let text = common::unsealed(&file);
    let out = Command::new("sha256sum")
        .arg("train.py")
        .current_dir(repo.path())
        .output()
        .unwrap();
    let real = String::from_utf8(out.stdout).unwrap();
    let real = real.split_whitespace().next().unwrap().to_string();
    assert!(text.contains(&real));
    common::reseal(&file, text.replace(&real, &"0".repeat(64)).as_bytes());
    assert_ne!(stamp(repo.path(), &cache, &[]).as_deref(), Some(&*want));
    // The same edit without a new seal is not believed.
    let sealed = std::fs::read_to_string(&file).unwrap();
    let (_, body) = sealed.split_once('\n').unwrap();
    let seal = sealed.lines().next().unwrap();
    std::fs::write(
        &file,
        format!("{seal}\n{}", body.replace(&"0".repeat(64), &"1".repeat(64))),
    )
    .unwrap();
    assert_eq!(stamp(repo.path(), &cache, &[]).as_deref(), Some(&*want));
    // --rehash reads every file again.
    assert_eq!(
        stamp(repo.path(), &cache, &["--rehash"]).as_deref(),
        Some(&*want)
    );

    // An edit of the same size: the times and content change, and the digest follows.
    common::reseal(&file, text.replace(&real, &"0".repeat(64)).as_bytes());
    write_files(repo.path(), &[("train.py", "lr = 0.3\n")]);
    let want = expected(repo.path());
    assert_eq!(stamp(repo.path(), &cache, &[]).as_deref(), Some(&*want));
}
