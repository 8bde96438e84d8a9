//! Data inputs: digests checked against `sha256sum`, the digest cache, and `diff` naming the
//! changed files.

mod common;

use std::path::Path;
use std::process::Command;

use common::{runprint, write_files};
use sha2::{Digest, Sha256};

/// Reference: the `sha256sum` executable (GNU coreutils).
fn sha256sum(path: &Path) -> String {
    let out = Command::new("sha256sum").arg(path).output().unwrap();
    String::from_utf8(out.stdout)
        .unwrap()
        .split_whitespace()
        .next()
        .unwrap()
        .to_string()
}

fn stamp_data(root: &Path, out: &Path, extra: &[&str]) -> runprint::manifest::Manifest {
    let result = runprint()
        .args(["stamp", "--no-lockfiles", "--repo"])
        .arg(root)
        .arg("--out")
        .arg(out)
        .args(extra)
        .output()
        .unwrap();
    assert!(
        result.status.success(),
        "{}",
        String::from_utf8_lossy(&result.stderr)
    );
    runprint::manifest::Manifest::load(out).unwrap()
}

#[test]
fn file_and_folder_digests_agree_with_sha256sum() {
    let root = tempfile::tempdir().unwrap();
    write_files(
        root.path(),
        &[
            ("data/buoys/2026-10.csv", "t,temp\n1,12.5\n"),
            ("data/buoys/2026-11.csv", "t,temp\n1,11.0\n"),
            ("data/labels.json", "{}\n"),
        ],
    );
    let big: Vec<u8> = (0..3_000_000u32).map(|i| (i * 7 % 256) as u8).collect();
    std::fs::write(root.path().join("weights.bin"), &big).unwrap();
    let cache = tempfile::tempdir().unwrap();
    let out = tempfile::tempdir().unwrap();
    let m = stamp_data(
        root.path(),
        &out.path().join("m.toml"),
        &[
            "--data",
            root.path().join("weights.bin").to_str().unwrap(),
            "--data",
            root.path().join("data").to_str().unwrap(),
            "--cache",
            cache.path().to_str().unwrap(),
        ],
    );
    assert_eq!(m.content.data.len(), 2);
    let folder = &m.content.data[0];
    assert_eq!(
        (folder.path.as_str(), folder.kind.as_str(), folder.files),
        ("data", "folder", 3)
    );
    let file = &m.content.data[1];
    assert_eq!(file.path, "weights.bin");
    assert_eq!(file.size, 3_000_000);
    assert_eq!(
        file.sha256,
        format!("sha256:{}", sha256sum(&root.path().join("weights.bin")))
    );

    // The folder digest, recomputed from `sha256sum` of each file and the documented listing
    // (`RELATIVE-PATH NUL HEX LF`, sorted by path; docs/manifest.md).
    let mut listing = Sha256::new();
    for rel in ["buoys/2026-10.csv", "buoys/2026-11.csv", "labels.json"] {
        let hexd = sha256sum(&root.path().join("data").join(rel));
        let entry = folder.entries.iter().find(|e| e.path == rel).unwrap();
        assert_eq!(entry.sha256, hexd);
        listing.update(rel.as_bytes());
        listing.update([0]);
        listing.update(hexd.as_bytes());
        listing.update(b"\n");
    }
    let expected: String = listing
        .finalize()
        .iter()
        .map(|b| format!("{b:02x}"))
        .collect();
    assert_eq!(folder.sha256, format!("sha256:{expected}"));
    assert_eq!(
        folder.size,
        std::fs::metadata(root.path().join("data/labels.json"))
            .unwrap()
            .len()
            + 28
    );
}

#[test]
fn the_cache_is_used_and_rehash_ignores_it() {
    let root = tempfile::tempdir().unwrap();
    let file = root.path().join("train.parquet");
    std::fs::write(&file, b"columnar bytes").unwrap();
    let meta = std::fs::metadata(&file).unwrap();
    let stamp = runprint::cache::FileStamp::of(&meta);
    // A cache entry written by hand with the file's exact metadata but a made-up digest: if
    // stamp reports it, the cache was consulted instead of the file.
    let cache = tempfile::tempdir().unwrap();
    let key = std::path::absolute(&file).unwrap();
    let body = serde_json::json!({
        "kind": "runprint-digest-cache",
        "version": 1,
        "entries": { key.to_str().unwrap(): { "stamp": stamp, "sha256": "feedface" } }
    });
    common::reseal(
        &cache.path().join("digests-v1.json"),
        body.to_string().as_bytes(),
    );
    let out = tempfile::tempdir().unwrap();
    let args = [
        "--data",
        file.to_str().unwrap(),
        "--cache",
        cache.path().to_str().unwrap(),
    ];
    let m = stamp_data(root.path(), &out.path().join("a.toml"), &args);
    assert_eq!(m.content.data[0].sha256, "sha256:feedface");
    let mut rehash = args.to_vec();
    rehash.push("--rehash");
    let m = stamp_data(root.path(), &out.path().join("b.toml"), &rehash);
    assert_eq!(
        m.content.data[0].sha256,
        format!("sha256:{}", sha256sum(&file))
    );
}

#[test]
fn an_edit_with_the_same_size_and_restored_mtime_is_detected() {
    let root = tempfile::tempdir().unwrap();
    let file = root.path().join("labels.csv");
    std::fs::write(&file, b"a,1\n").unwrap();
    let cache = tempfile::tempdir().unwrap();
    let out = tempfile::tempdir().unwrap();
    // Files changed in the last two seconds are never cached (racy timestamps): wait that out.
    std::thread::sleep(std::time::Duration::from_millis(2100));
    let args = [
        "--data",
        file.to_str().unwrap(),
        "--cache",
        cache.path().to_str().unwrap(),
    ];
    let first = stamp_data(root.path(), &out.path().join("a.toml"), &args);
    let cached = std::fs::read_to_string(cache.path().join("digests-v1.json")).unwrap();
    assert!(cached.contains("labels.csv"), "the digest was cached");
    let mtime = std::fs::metadata(&file).unwrap().modified().unwrap();
    std::fs::write(&file, b"a,2\n").unwrap();
    std::fs::File::options()
        .write(true)
        .open(&file)
        .unwrap()
        .set_modified(mtime)
        .unwrap();
    let second = stamp_data(root.path(), &out.path().join("b.toml"), &args);
    assert_ne!(first.content.data[0].sha256, second.content.data[0].sha256);
    assert_eq!(
        second.content.data[0].sha256,
        format!("sha256:{}", sha256sum(&file))
    );
}

#[test]
fn a_corrupt_cache_is_discarded_with_a_warning() {
    let root = tempfile::tempdir().unwrap();
    let file = root.path().join("x.bin");
    std::fs::write(&file, b"x").unwrap();
    let cache = tempfile::tempdir().unwrap();
    std::fs::write(cache.path().join("digests-v1.json"), b"\x00garbage").unwrap();
    let out = tempfile::tempdir().unwrap();
    let m = stamp_data(
        root.path(),
        &out.path().join("m.toml"),
        &[
            "--data",
            file.to_str().unwrap(),
            "--cache",
            cache.path().to_str().unwrap(),
        ],
    );
    assert!(
        m.run
            .warnings
            .iter()
            .any(|w| w.contains("does not match its seal")),
        "{:?}",
        m.run.warnings
    );
    assert_eq!(
        m.content.data[0].sha256,
        format!("sha256:{}", sha256sum(&file))
    );
}

#[test]
fn diff_names_the_changed_files_and_asks_for_a_retrain() {
    let root = tempfile::tempdir().unwrap();
    write_files(root.path(), &[("data/a.csv", "1\n"), ("data/b.csv", "2\n")]);
    let out = tempfile::tempdir().unwrap();
    let data = root.path().join("data");
    let args = [
        "--data",
        data.to_str().unwrap(),
        "--cache",
        out.path().to_str().unwrap(),
    ];
    stamp_data(root.path(), &out.path().join("a.toml"), &args);
    write_files(root.path(), &[("data/b.csv", "3\n"), ("data/c.csv", "4\n")]);
    stamp_data(root.path(), &out.path().join("b.toml"), &args);
    let result = runprint()
        .arg("diff")
        .arg(out.path().join("a.toml"))
        .arg(out.path().join("b.toml"))
        .output()
        .unwrap();
    assert_eq!(result.status.code(), Some(4));
    let text = String::from_utf8(result.stdout).unwrap();
    assert!(text.contains("changed: b.csv; added: c.csv"), "{text}");
}
