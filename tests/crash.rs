//! Crashes and concurrency: `stamp --out` killed with SIGKILL at random moments never leaves a
//! broken manifest behind, many stamps writing into one folder at once lose nothing, and a
//! digest cache shared by concurrent processes never gives a wrong digest. Digests are checked
//! against `sha256sum` (GNU coreutils).

mod common;

use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

use common::runprint;
use runprint::manifest::Manifest;

/// A small deterministic generator (64-bit LCG, Knuth's MMIX constants), seeded from the clock
/// so every run tries other moments; the seed is printed for reproduction.
struct Lcg(u64);
impl Lcg {
    fn next(&mut self) -> u64 {
        self.0 = self
            .0
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        self.0 >> 33
    }
}

fn write_data(path: &Path, len: usize, salt: u8) {
    let bytes: Vec<u8> = (0..len)
        .map(|i| (i as u8).wrapping_mul(31).wrapping_add(salt) ^ (i >> 11) as u8)
        .collect();
    std::fs::write(path, bytes).unwrap();
}

fn sha256sum(path: &Path) -> String {
    let out = Command::new("sha256sum").arg(path).output().unwrap();
    String::from_utf8(out.stdout).unwrap()[..64].to_string()
}

fn stamp_cmd(dir: &Path, out: &Path, data: &[&Path], cache: &Path, label: &str) -> Command {
    let mut cmd = runprint();
    cmd.args(["stamp", "--quiet", "--no-lockfiles", "--rehash", "--repo"])
        .arg(dir)
        .arg("--out")
        .arg(out)
        .arg("--cache")
        .arg(cache)
        .args(["--label", label]);
    for d in data {
        cmd.arg("--data").arg(d);
    }
    cmd.stdout(Stdio::null()).stderr(Stdio::null());
    cmd
}

#[test]
fn sigkill_during_stamp_leaves_the_old_or_the_new_manifest() {
    let dir = tempfile::tempdir().unwrap();
    let data = dir.path().join("train.bin");
    write_data(&data, 4 << 20, 1);
    let cache = dir.path().join("cache");
    let out = dir.path().join("run.toml");
    // The manifest being replaced.
    let t = Instant::now();
    let status = stamp_cmd(dir.path(), &out, &[&data], &cache, "old")
        .status()
        .unwrap();
    assert!(status.success());
    let one_stamp = t.elapsed();

    let seed = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .unwrap()
        .as_nanos() as u64;
    println!("seed {seed}, one stamp takes {one_stamp:?}");
    let mut rng = Lcg(seed);
    let span = one_stamp.as_micros() as u64 * 12 / 10 + 1;
    let (mut killed, mut finished) = (0, 0);
    for i in 0..100 {
        let mut child = stamp_cmd(dir.path(), &out, &[&data], &cache, &format!("new-{i}"))
            .spawn()
            .unwrap();
        std::thread::sleep(Duration::from_micros(rng.next() % span));
        match child.try_wait().unwrap() {
            Some(_) => finished += 1,
            None => {
                child.kill().unwrap(); // SIGKILL on Unix
                killed += 1;
            }
        }
        child.wait().unwrap();
        let m = Manifest::load(&out).unwrap_or_else(|e| panic!("after kill {i}: {e}"));
        assert!(
            !m.is_modified(),
            "after kill {i}: fingerprint does not match"
        );
        let label = m.run.label.as_deref().unwrap();
        assert!(
            label == "old"
                || label
                    .strip_prefix("new-")
                    .and_then(|n| n.parse::<usize>().ok())
                    .is_some_and(|n| n <= i),
            "{label}"
        );
        // A complete manifest: its data digest is the file's.
        assert_eq!(
            m.content.data[0].sha256,
            format!("sha256:{}", sha256sum(&data))
        );
    }
    println!("{killed} killed, {finished} finished on their own");
    assert!(
        killed >= 50,
        "only {killed} of 100 runs were killed mid-way"
    );

    // Killed writers leave temporary files; once older than the stale age, the next write into
    // the folder removes them (age them here rather than wait).
    let temporaries = |dir: &Path| -> Vec<std::path::PathBuf> {
        std::fs::read_dir(dir)
            .unwrap()
            .map(|e| e.unwrap().path())
            .filter(|p| {
                let n = p.file_name().unwrap().to_string_lossy();
                n.starts_with(".runprint-") && n.ends_with(".tmp")
            })
            .collect()
    };
    let left = temporaries(dir.path());
    println!("{} temporary files left by the kills", left.len());
    let old = std::time::SystemTime::now() - runprint::atomic::STALE_TEMPORARY * 2;
    for p in &left {
        let f = std::fs::File::options().write(true).open(p).unwrap();
        f.set_modified(old).unwrap();
    }
    assert!(stamp_cmd(dir.path(), &out, &[&data], &cache, "after")
        .status()
        .unwrap()
        .success());
    assert_eq!(temporaries(dir.path()), Vec::<std::path::PathBuf>::new());
}

#[test]
fn concurrent_stamps_into_one_folder_lose_and_corrupt_nothing() {
    let dir = tempfile::tempdir().unwrap();
    let inputs: Vec<PathBuf> = (0..3)
        .map(|i| {
            let p = dir.path().join(format!("part-{i}.bin"));
            write_data(&p, 1 << 20, i as u8);
            p
        })
        .collect();
    let refs: Vec<&Path> = inputs.iter().map(PathBuf::as_path).collect();
    let cache = dir.path().join("cache");
    let outs = dir.path().join("runs");
    std::fs::create_dir(&outs).unwrap();
    let expected: Vec<String> = inputs
        .iter()
        .map(|p| format!("sha256:{}", sha256sum(p)))
        .collect();

    let run_round = |round: usize| {
        let children: Vec<_> = (0..12)
            .map(|i| {
                let mut cmd = runprint();
                cmd.args(["stamp", "--quiet", "--no-lockfiles", "--repo"])
                    .arg(dir.path())
                    .arg("--out")
                    .arg(outs.join(format!("r{round}-{i}.toml")))
                    .arg("--cache")
                    .arg(&cache);
                for d in &refs {
                    cmd.arg("--data").arg(d);
                }
                cmd.stdout(Stdio::null()).stderr(Stdio::piped());
                cmd.spawn().unwrap()
            })
            .collect();
        for c in children {
            let out = c.wait_with_output().unwrap();
            assert!(
                out.status.success(),
                "{}",
                String::from_utf8_lossy(&out.stderr)
            );
        }
    };
    let check_round = |round: usize, expected: &[String]| {
        for i in 0..12 {
            let m = Manifest::load(&outs.join(format!("r{round}-{i}.toml"))).unwrap();
            assert!(!m.is_modified());
            let digests: Vec<&str> = m.content.data.iter().map(|d| d.sha256.as_str()).collect();
            assert_eq!(digests, expected, "round {round}, stamp {i}");
            // Concurrent first stamps agree on one seal key: no cache file is ever taken
            // for an edited one.
            assert!(
                !m.run.warnings.iter().any(|w| w.contains("seal")),
                "{:?}",
                m.run.warnings
            );
        }
        // The shared cache is always a seal line and one valid JSON document.
        let text = std::fs::read_to_string(cache.join("digests-v1.json")).unwrap();
        let (seal, body) = text.split_once('\n').unwrap();
        assert!(seal.starts_with("runprint-seal "));
        serde_json::from_str::<serde_json::Value>(body).unwrap();
    };

    // Round 0 fills the cache; the files must be older than the racy window to be cached.
    std::thread::sleep(Duration::from_millis(2100));
    run_round(0);
    check_round(0, &expected);
    // Round 1 reads from the cache.
    run_round(1);
    check_round(1, &expected);

    // Change one byte of each file, keep the size and put the modification time back: the
    // status-change time still moves, so every stamp must see the new content.
    let mut changed = Vec::new();
    for p in &inputs {
        let meta = std::fs::metadata(p).unwrap();
        let mtime = meta.modified().unwrap();
        let mut bytes = std::fs::read(p).unwrap();
        bytes[1000] ^= 0xff;
        std::fs::write(p, &bytes).unwrap();
        std::fs::File::options()
            .write(true)
            .open(p)
            .unwrap()
            .set_modified(mtime)
            .unwrap();
        assert_eq!(std::fs::metadata(p).unwrap().modified().unwrap(), mtime);
        changed.push(format!("sha256:{}", sha256sum(p)));
    }
    assert_ne!(changed, expected);
    run_round(2);
    check_round(2, &changed);
    assert_eq!(std::fs::read_dir(&outs).unwrap().count(), 36);
}
