//! The numerical-stack cache (`src/collect/stack_cache.rs`): a stamp that finds nothing
//! changed takes the Python and native sections from the cache, and they equal a fresh scan;
//! a real installer's change (pip uninstalling and installing, in a virtual environment made
//! by `python3 -m venv`) or a changed variable makes the next stamp scan again. The reference
//! for what is installed is `importlib.metadata`, asked in the environment itself.

mod common;

use std::collections::BTreeSet;
use std::path::{Path, PathBuf};
use std::process::Command;

use common::runprint;
use runprint::manifest::Manifest;

/// Stamps with the cache in `cache`, returning the manifest and whether the stack came from
/// the cache (as `RUNPRINT_TIMINGS` reports it).
fn stamp(python: &Path, cache: &Path, env: &[(&str, &str)]) -> (Manifest, bool) {
    let repo = tempfile::tempdir().unwrap();
    let out = repo.path().join("m.toml");
    let result = runprint()
        .args(["stamp", "--quiet", "--repo"])
        .arg(repo.path())
        .arg("--python")
        .arg(python)
        .arg("--cache")
        .arg(cache)
        .arg("--out")
        .arg(&out)
        .env("RUNPRINT_TIMINGS", "1")
        .envs(env.iter().copied())
        .output()
        .unwrap();
    let stderr = String::from_utf8_lossy(&result.stderr);
    assert!(result.status.success(), "{stderr}");
    let from_cache = stderr.contains("(from the cache: true)");
    // With --quiet, only the requested timings and the closing line reach stderr.
    for line in stderr.lines() {
        assert!(
            line.starts_with("timing:") || line.starts_with("stamped "),
            "unexpected stderr line: {line}"
        );
    }
    (Manifest::load(&out).unwrap(), from_cache)
}

/// Distribution names as `importlib.metadata` lists them (PEP 503 normalized).
fn importlib_names(python: &Path) -> BTreeSet<String> {
    let out = Command::new(python)
        .args([
            "-c",
            "import importlib.metadata as m, re\nfor d in m.distributions(): print(re.sub(r'[-_.]+', '-', d.metadata['Name']).lower())",
        ])
        .output()
        .unwrap();
    assert!(out.status.success());
    String::from_utf8(out.stdout)
        .unwrap()
        .lines()
        .map(str::to_string)
        .collect()
}

fn names(m: &Manifest) -> BTreeSet<String> {
    m.content.python[0]
        .distributions
        .iter()
        .map(|d| d.name.clone())
        .collect()
}

fn make_venv(dir: &Path) -> Option<PathBuf> {
    let ok = Command::new("python3")
        .args(["-m", "venv"])
        .arg(dir)
        .status()
        .is_ok_and(|s| s.success());
    if !ok {
        // CI installs python3-venv (.ci/run); a machine without it cannot run this test.
        eprintln!("skipped: `python3 -m venv` is not available");
        return None;
    }
    Some(dir.join("bin/python"))
}

/// Waits out the cache's racy window (2 s, `runprint::cache::RACY_WINDOW_NS`): files written
/// just before a scan are never trusted, so without the wait the cache would not be used.
fn settle() {
    std::thread::sleep(std::time::Duration::from_millis(2100));
}

#[test]
fn the_stack_cache_follows_a_real_installer_and_the_environment() {
    let dir = tempfile::tempdir().unwrap();
    let Some(python) = make_venv(&dir.path().join("venv")) else {
        return;
    };
    let cache = dir.path().join("cache");
    settle();

    let (first, cached) = stamp(&python, &cache, &[]);
    assert!(!cached, "nothing to reuse yet");
    let (second, cached) = stamp(&python, &cache, &[]);
    assert!(cached, "an unchanged environment comes from the cache");
    assert_eq!(second.content.python, first.content.python);
    assert_eq!(second.content.native, first.content.native);
    assert_eq!(names(&second), importlib_names(&python));
    assert!(names(&second).contains("pip"));

    // A variable the scan reads makes it scan again.
    let (_, cached) = stamp(&python, &cache, &[("OPENBLAS_CORETYPE", "Zen")]);
    assert!(!cached);

    // pip removes itself the way installers do (its dist-info folder and files go).
    let status = Command::new(&python)
        .args(["-m", "pip", "uninstall", "--yes", "--quiet", "pip"])
        .status()
        .unwrap();
    assert!(status.success());
    let (after, cached) = stamp(&python, &cache, &[]);
    assert!(!cached, "an uninstall is noticed");
    assert!(!names(&after).contains("pip"));
    assert_eq!(names(&after), importlib_names(&python));

    // ensurepip puts it back.
    let status = Command::new(&python)
        .args(["-m", "ensurepip", "--default-pip"])
        .stdout(std::process::Stdio::null())
        .status()
        .unwrap();
    assert!(status.success());
    let (back, cached) = stamp(&python, &cache, &[]);
    assert!(!cached, "an install is noticed");
    assert_eq!(names(&back), importlib_names(&python));
    assert!(names(&back).contains("pip"));
}

/// With the CI environment of numpy, scipy and scikit-learn (compiled libraries, OpenBLAS,
/// OpenMP), the cached sections equal a fresh scan (`--rehash`), which `tests/stack_python.rs`
/// checks against `importlib.metadata` and `threadpoolctl`.
#[test]
fn cached_sections_equal_a_fresh_scan_of_a_real_numerical_stack() {
    let Some(python) = std::env::var_os("RUNPRINT_TEST_STACK_PYTHON").map(PathBuf::from) else {
        eprintln!("skipped: RUNPRINT_TEST_STACK_PYTHON is not set (.ci/run sets it)");
        return;
    };
    let cache = tempfile::tempdir().unwrap();
    let (fresh, _) = stamp(&python, cache.path(), &[]);
    let (cached, from_cache) = stamp(&python, cache.path(), &[]);
    // The environment was installed before the tests started, so nothing is too recent.
    assert!(from_cache);
    assert_eq!(cached.content.python, fresh.content.python);
    assert_eq!(cached.content.native, fresh.content.native);
    assert!(!cached.content.native.libraries.is_empty());
}
