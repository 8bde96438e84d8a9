//! Shared harness for the integration tests: temporary git repositories driven by the real
//! `git` executable (the reference the collector is checked against) and a hermetic
//! `runprint` command.

#![allow(dead_code)]

use std::path::{Path, PathBuf};
use std::process::Command;

use assert_cmd::cargo::CommandCargoExt;

/// Runs `git` in `dir` and returns its trimmed stdout; panics with stderr on failure.
pub fn git(dir: &Path, args: &[&str]) -> String {
    let out = Command::new("git")
        .args(args)
        .current_dir(dir)
        .env("GIT_AUTHOR_NAME", "Test")
        .env("GIT_AUTHOR_EMAIL", "test@example.invalid")
        .env("GIT_COMMITTER_NAME", "Test")
        .env("GIT_COMMITTER_EMAIL", "test@example.invalid")
        .output()
        .expect("git is installed");
    assert!(
        out.status.success(),
        "git {args:?} failed: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8(out.stdout)
        .unwrap()
        .trim_end()
        .to_string()
}

/// A fresh repository with one commit holding `files`.
pub fn repo_with(files: &[(&str, &str)]) -> tempfile::TempDir {
    let dir = tempfile::tempdir().unwrap();
    git(dir.path(), &["init", "-q", "-b", "main"]);
    write_files(dir.path(), files);
    git(dir.path(), &["add", "-A"]);
    git(dir.path(), &["commit", "-q", "-m", "initial"]);
    dir
}

/// Writes files, creating folders.
pub fn write_files(root: &Path, files: &[(&str, &str)]) {
    for (path, text) in files {
        let p = root.join(path);
        std::fs::create_dir_all(p.parent().unwrap()).unwrap();
        std::fs::write(p, text).unwrap();
    }
}

/// `runprint` with an empty environment apart from what it needs to find tools, so that the
/// manifest's environment section holds only what a test sets.
pub fn runprint() -> Command {
    let mut cmd = Command::cargo_bin("runprint").unwrap();
    cmd.env_clear();
    for keep in ["PATH", "HOME", "CARGO_HOME", "RUSTUP_HOME"] {
        if let Some(v) = std::env::var_os(keep) {
            cmd.env(keep, v);
        }
    }
    // The default cache folder is one per test binary run, never the user's: results cached
    // by other runs (another build, another test's environment) cannot leak into a test.
    cmd.env(
        "XDG_CACHE_HOME",
        std::env::temp_dir().join(format!("runprint-test-cache-{}", std::process::id())),
    );
    cmd
}

/// Stamps `dir` into `out` with extra environment variables; returns the parsed manifest.
pub fn stamp_to(dir: &Path, out: &Path, vars: &[(&str, &str)]) -> runprint::manifest::Manifest {
    let mut cmd = runprint();
    cmd.args(["stamp", "--repo"]).arg(dir).arg("--out").arg(out);
    for (k, v) in vars {
        cmd.env(k, v);
    }
    let result = cmd.output().unwrap();
    assert!(
        result.status.success(),
        "stamp failed: {}",
        String::from_utf8_lossy(&result.stderr)
    );
    runprint::manifest::Manifest::load(out).unwrap()
}

/// Stamps `dir` quietly with extra arguments and variables; asserts exit 0 and returns the
/// manifest, its text and stderr.
pub fn stamp_quiet(
    dir: &Path,
    args: &[&str],
    env: &[(&str, &str)],
) -> (runprint::manifest::Manifest, String, String) {
    let out_dir = tempfile::tempdir().unwrap();
    let out_file = out_dir.path().join("m.toml");
    let out = runprint()
        .args(["stamp", "--quiet", "--repo"])
        .arg(dir)
        .args(args)
        .arg("--out")
        .arg(&out_file)
        .envs(env.iter().copied())
        .output()
        .unwrap();
    let stderr = String::from_utf8_lossy(&out.stderr).into_owned();
    assert_eq!(out.status.code(), Some(0), "{stderr}");
    let text = std::fs::read_to_string(&out_file).unwrap();
    let m = runprint::manifest::Manifest::load(&out_file).unwrap();
    (m, text, stderr)
}

/// Makes a FIFO at `path`.
pub fn mkfifo(path: &Path) {
    let c = std::ffi::CString::new(path.to_str().unwrap()).unwrap();
    // SAFETY: a valid NUL-terminated path.
    assert_eq!(unsafe { libc::mkfifo(c.as_ptr(), 0o600) }, 0);
}

/// Path of a file in the crate's folder.
pub fn crate_path(rel: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join(rel)
}

/// One file name per format runprint reads (each is detected from its name), from the
/// library's own list of formats.
pub fn lockfile_names() -> Vec<&'static str> {
    runprint::lockfile::Format::ALL
        .iter()
        .map(|f| f.example_name())
        .collect()
}

/// Runs `runprint diff OLD NEW --format json EXTRA...` in `cwd` and decodes the report into the
/// caller's own type (each test declares the JSON contract it relies on). Returns the exit
/// code and the report.
pub fn diff_json<T: serde::de::DeserializeOwned>(
    old: &Path,
    new: &Path,
    cwd: &Path,
    extra: &[&str],
) -> (i32, T) {
    let out = runprint()
        .arg("diff")
        .arg(old)
        .arg(new)
        .args(["--format", "json"])
        .args(extra)
        .current_dir(cwd)
        .output()
        .unwrap();
    let report = serde_json::from_slice(&out.stdout).unwrap_or_else(|e| {
        panic!(
            "{e}: {} {}",
            String::from_utf8_lossy(&out.stdout),
            String::from_utf8_lossy(&out.stderr)
        )
    });
    (out.status.code().unwrap(), report)
}

/// `runprint stamp --quiet` of `repo` with the cache folder `cache`, extra arguments and
/// variables, written beside `cache`; returns the manifest and stderr. Panics when it fails.
pub fn stamp_cached(
    repo: &Path,
    cache: &Path,
    extra: &[&str],
    vars: &[(&str, &str)],
) -> (runprint::manifest::Manifest, String) {
    let out = cache.parent().unwrap().join("m.toml");
    let result = runprint()
        .args(["stamp", "--quiet", "--repo"])
        .arg(repo)
        .arg("--cache")
        .arg(cache)
        .arg("--out")
        .arg(&out)
        .args(extra)
        .envs(vars.iter().copied())
        .output()
        .unwrap();
    let stderr = String::from_utf8_lossy(&result.stderr).into_owned();
    assert!(result.status.success(), "{stderr}");
    (runprint::manifest::Manifest::load(&out).unwrap(), stderr)
}

/// The file in the cache folder `cache` whose name starts with `prefix` (`lockfiles-`,
/// `worktree-`, `stack-`); panics when there is none.
pub fn cache_file(cache: &Path, prefix: &str) -> PathBuf {
    std::fs::read_dir(cache)
        .unwrap()
        .map(|e| e.unwrap().path())
        .find(|p| p.file_name().unwrap().to_string_lossy().starts_with(prefix))
        .unwrap_or_else(|| panic!("no {prefix}* file in {}", cache.display()))
}

/// Rewrites a cache file with `body` and a seal made by Python's `hmac` module (RFC 2104
/// HMAC-SHA256, the reference for runprint's seal: the name's length as 8 little-endian
/// bytes, the file name, then the body, under the folder's `seal-key`, made when missing as
/// runprint makes it: 32 random bytes, owner-only). Lets a test plant a
/// cache entry that runprint must believe, to show that it is reused.
#[allow(dead_code)]
pub fn reseal(file: &Path, body: &[u8]) {
    let script = r#"
import hmac, hashlib, os, struct, sys
path = sys.argv[1]
body = sys.stdin.buffer.read()
key_path = os.path.join(os.path.dirname(path), "seal-key")
if not os.path.exists(key_path):
    fd = os.open(key_path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
    os.write(fd, os.urandom(32))
    os.close(fd)
key = open(key_path, "rb").read()
name = os.path.basename(path).encode()
tag = hmac.new(key, struct.pack("<Q", len(name)) + name + body, hashlib.sha256).hexdigest()
open(path, "wb").write(b"runprint-seal " + tag.encode() + b"\n" + body)
"#;
    let mut child = Command::new("python3")
        .args(["-c", script])
        .arg(file)
        .stdin(std::process::Stdio::piped())
        .spawn()
        .unwrap();
    std::io::Write::write_all(child.stdin.as_mut().unwrap(), body).unwrap();
    assert!(child.wait().unwrap().success());
}

/// The content of a sealed cache file after its seal line.
#[allow(dead_code)]
pub fn unsealed(file: &Path) -> String {
    let text = std::fs::read_to_string(file).unwrap();
    let (seal, body) = text.split_once('\n').unwrap();
    assert!(seal.starts_with("runprint-seal "), "{seal}");
    body.to_string()
}
