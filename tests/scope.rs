//! The training job's scope, checked against references outside runprint:
//!
//! * the import closure against Python's own `modulefinder` (standard library) on the source
//!   trees of two real code bases installed from PyPI by `.ci/run` (pdm and poetry, pure
//!   Python), copied into a fresh git repository;
//! * the packages the job can load against `importlib.metadata` (`packages_distributions` and
//!   `requires`) in the same environment;
//! * the standard-library list against the interpreter's `sys.stdlib_module_names`;
//! * the blob ids against `git rev-parse HEAD:path`.
//!
//! They need the Python tools venv of `.ci/run` (`RUNPRINT_TEST_PYTHON_TOOLS`) and skip
//! without it.

mod common;

use std::collections::BTreeSet;
use std::path::{Path, PathBuf};
use std::process::Command;

use common::{git, repo_with, runprint, write_files};

fn tools_python() -> Option<PathBuf> {
    let dir = std::env::var_os("RUNPRINT_TEST_PYTHON_TOOLS")?;
    let py = PathBuf::from(dir).join("python");
    assert!(py.exists(), "RUNPRINT_TEST_PYTHON_TOOLS has no python");
    Some(py)
}

fn python_out(py: &Path, script: &str, args: &[&str]) -> String {
    let out = Command::new(py)
        .arg("-c")
        .arg(script)
        .args(args)
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8(out.stdout).unwrap()
}

fn copy_tree(from: &Path, to: &Path) {
    for e in walkdir::WalkDir::new(from) {
        let e = e.unwrap();
        let rel = e.path().strip_prefix(from).unwrap();
        if rel.components().any(|c| c.as_os_str() == "__pycache__") {
            continue;
        }
        let dest = to.join(rel);
        if e.file_type().is_dir() {
            std::fs::create_dir_all(&dest).unwrap();
        } else if e.file_type().is_file() {
            std::fs::copy(e.path(), &dest).unwrap();
        }
    }
}

fn stamp_json(repo: &Path, args: &[&str]) -> serde_json::Value {
    let out = runprint()
        .args(["stamp", "--quiet", "--format", "json", "--repo"])
        .arg(repo)
        .args(args)
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    serde_json::from_slice(&out.stdout).unwrap()
}

fn strings(v: &serde_json::Value) -> BTreeSet<String> {
    v.as_array()
        .map(|a| a.iter().map(|s| s.as_str().unwrap().to_string()).collect())
        .unwrap_or_default()
}

/// `modulefinder.ModuleFinder(path=[repo]).run_script(main.py)`: the modules whose file lies
/// in the repository, as paths relative to it.
const MODULEFINDER: &str = r#"
import json, modulefinder, os, sys
repo = os.path.realpath(sys.argv[1])
f = modulefinder.ModuleFinder(path=[repo])
f.run_script(os.path.join(repo, "main.py"))
inside = lambda p: p and os.path.realpath(p).startswith(repo + os.sep)
print(json.dumps(sorted(os.path.relpath(os.path.realpath(m.__file__), repo)
                        for m in f.modules.values() if inside(m.__file__))))
"#;

/// The distributions a set of top-level modules belongs to (`packages_distributions`) and
/// every distribution they require, transitively (`importlib.metadata.requires`, leaving out
/// requirements limited to an extra), PEP 503 names.
const METADATA_CLOSURE: &str = r#"
import json, re, sys
from importlib import metadata
norm = lambda n: re.sub(r"[-_.]+", "-", n).lower()
dists = metadata.packages_distributions()
todo = [norm(d) for m in json.loads(sys.argv[1]) for d in dists.get(m, [])]
seen = set()
while todo:
    d = todo.pop()
    if d in seen:
        continue
    try:
        reqs = metadata.requires(d) or []
    except metadata.PackageNotFoundError:
        continue
    seen.add(d)
    for r in reqs:
        name, _, marker = r.partition(";")
        if re.search(r"extra\s*==", marker):
            continue
        todo.append(norm(re.match(r"[A-Za-z0-9._-]+", name.strip()).group(0)))
print(json.dumps(sorted(seen)))
"#;

#[test]
fn the_import_closure_agrees_with_modulefinder_on_real_code_bases() {
    let Some(py) = tools_python() else {
        eprintln!("skipped: RUNPRINT_TEST_PYTHON_TOOLS is not set");
        return;
    };
    let site = PathBuf::from(
        python_out(
            &py,
            "import sysconfig; print(sysconfig.get_paths()['purelib'])",
            &[],
        )
        .trim(),
    );
    // (package, what main.py imports, smallest closure expected)
    for (package, import, at_least) in [
        ("pdm", "pdm.core", 50),
        ("poetry", "poetry.console.application", 100),
    ] {
        let repo = tempfile::tempdir().unwrap();
        git(repo.path(), &["init", "-q", "-b", "main"]);
        copy_tree(&site.join(package), &repo.path().join(package));
        // poetry is a namespace package (no __init__.py, shared with poetry-core). Python 3.11's
        // modulefinder cannot import namespace packages (its _find_module calls
        // spec.loader.is_package on a spec without a loader and raises AttributeError), so
        // for the reference an empty __init__.py is added; runprint reads both forms.
        let init = repo.path().join(package).join("__init__.py");
        if !init.exists() {
            std::fs::write(&init, "").unwrap();
        }
        write_files(repo.path(), &[("main.py", &format!("import {import}\n"))]);
        git(repo.path(), &["add", "-A"]);
        git(repo.path(), &["commit", "-q", "-m", "copy"]);
        let reference: BTreeSet<String> = serde_json::from_str::<Vec<String>>(&python_out(
            &py,
            MODULEFINDER,
            &[repo.path().to_str().unwrap()],
        ))
        .unwrap()
        .into_iter()
        .collect();
        let m = stamp_json(
            repo.path(),
            &[
                "--entry",
                "main.py",
                "--no-lockfiles",
                "--python",
                py.to_str().unwrap(),
            ],
        );
        let scope = &m["scope"];
        let ours: BTreeSet<String> = scope["files"]
            .as_object()
            .unwrap()
            .keys()
            .cloned()
            .collect();
        let only_ours: Vec<_> = ours.difference(&reference).collect();
        let only_theirs: Vec<_> = reference.difference(&ours).collect();
        eprintln!(
            "{package}: runprint {} files, modulefinder {} files; only runprint {only_ours:?}, only modulefinder {only_theirs:?}",
            ours.len(),
            reference.len()
        );
        assert!(ours.len() >= at_least, "{package}: {} files", ours.len());
        // Every difference would be explained here; on these two code bases there is none.
        assert!(only_ours.is_empty() && only_theirs.is_empty());
        // git's own blob ids (git rev-parse HEAD:path).
        for (path, id) in scope["files"].as_object().unwrap().iter().take(5) {
            assert_eq!(
                id.as_str().unwrap(),
                git(repo.path(), &["rev-parse", &format!("HEAD:{path}")]),
                "{path}"
            );
        }
        // Both import a module by a computed name (a plugin or command loader), so the
        // closure is marked incomplete and the comparison will not judge files by it.
        assert_eq!(scope["complete"], false, "{package}");
        assert!(
            scope["notes"].to_string().contains("computed at run time"),
            "{}",
            scope["notes"]
        );
        // The packages the job can load, against importlib.metadata in the same environment.
        let modules = strings(&scope["modules"]);
        let reference: BTreeSet<String> = serde_json::from_str::<Vec<String>>(&python_out(
            &py,
            METADATA_CLOSURE,
            &[&serde_json::to_string(&modules).unwrap()],
        ))
        .unwrap()
        .into_iter()
        .collect();
        let packages = strings(&scope["packages"]);
        assert!(
            !packages.is_empty(),
            "{package}: no package list: {}",
            scope["notes"]
        );
        let missing: Vec<_> = reference.difference(&packages).collect();
        assert!(missing.is_empty(), "{package}: not followed: {missing:?}");
        // runprint also lists required distributions that are not installed (a marker such as
        // `python_version < "3.11"` or `sys_platform == "win32"` excludes them here), which
        // importlib.metadata cannot open; every extra one must be such a distribution.
        let extra: Vec<&String> = packages.difference(&reference).collect();
        eprintln!("{package}: runprint also lists {extra:?}");
        let installed = python_out(
            &py,
            "import json, sys\nfrom importlib import metadata\nout = []\nfor n in json.loads(sys.argv[1]):\n    try:\n        metadata.distribution(n); out.append(n)\n    except metadata.PackageNotFoundError:\n        pass\nprint(json.dumps(out))",
            &[&serde_json::to_string(&extra).unwrap()],
        );
        assert_eq!(
            installed.trim(),
            "[]",
            "{package}: installed yet not followed"
        );
    }
}

#[test]
fn the_standard_library_list_matches_the_interpreter() {
    let Some(py) = tools_python() else {
        eprintln!("skipped: RUNPRINT_TEST_PYTHON_TOOLS is not set");
        return;
    };
    let names = python_out(
        &py,
        "import sys; print('\\n'.join(sorted(set(sys.stdlib_module_names) | set(sys.builtin_module_names))))",
        &[],
    );
    let missing: Vec<&str> = names
        .lines()
        .filter(|n| !runprint::stdlib::contains(n))
        .collect();
    assert!(missing.is_empty(), "not in src/stdlib.rs: {missing:?}");
}

#[test]
fn a_scope_from_the_policy_and_one_from_entry_points_agree() {
    let repo = repo_with(&[
        ("train.py", "from kelp import model\n"),
        ("kelp/__init__.py", ""),
        ("kelp/model.py", "import math\n"),
        ("serve.py", "import kelp.model\n"),
        (
            "runprint.toml",
            "[scope]\nentry = [\"train.py\"]\nreads = [\"configs/**\"]\n",
        ),
    ]);
    let from_policy = stamp_json(repo.path(), &[]);
    let from_flag = stamp_json(repo.path(), &["--entry", "train.py"]);
    assert_eq!(from_policy["scope"]["files"], from_flag["scope"]["files"]);
    assert_eq!(
        strings(&from_policy["scope"]["reads"]),
        BTreeSet::from(["configs/**".to_string()])
    );
    let files: Vec<&String> = from_flag["scope"]["files"]
        .as_object()
        .unwrap()
        .keys()
        .collect();
    assert_eq!(files, ["kelp/__init__.py", "kelp/model.py", "train.py"]);
    assert_eq!(from_flag["scope"]["complete"], true);
    // A missing entry point is a warning (and fails --strict).
    let out = runprint()
        .args([
            "stamp", "--quiet", "--strict", "--entry", "nope.py", "--repo",
        ])
        .arg(repo.path())
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("entry point `nope.py` was not found"));
}

/// A warm stamp reuses the last scope only while the tree it was computed from is unchanged:
/// each step below (an uncommitted edit, the same edit staged, a new untracked module, the
/// edit reverted) gives the closure a cold stamp computes, and the blob ids `git hash-object`
/// gives for the files as they are on disk.
#[test]
fn a_remembered_scope_follows_edits_staging_and_reverts() {
    let repo = repo_with(&[
        ("train.py", "from kelp import model\n"),
        ("kelp/__init__.py", ""),
        ("kelp/model.py", "import math\n"),
        ("kelp/extra.py", "X = 1\n"),
    ]);
    let cache = tempfile::tempdir().unwrap();
    let cache_arg = cache.path().to_str().unwrap();
    let files = |warm: bool| -> serde_json::Map<String, serde_json::Value> {
        let cold = tempfile::tempdir().unwrap();
        let dir = if warm {
            cache_arg
        } else {
            cold.path().to_str().unwrap()
        };
        let m = stamp_json(repo.path(), &["--entry", "train.py", "--cache", dir]);
        m["scope"]["files"].as_object().unwrap().clone()
    };
    let check = |expected: &[&str]| {
        // Twice warm (the second one takes the remembered result), once cold.
        let (first, second, cold) = (files(true), files(true), files(false));
        assert_eq!(first, cold);
        assert_eq!(second, cold);
        let names: Vec<&String> = cold.keys().collect();
        assert_eq!(names, expected);
        for (path, blob) in &cold {
            let on_disk = git(repo.path(), &["hash-object", path]);
            assert_eq!(blob.as_str(), Some(on_disk.trim()), "{path}");
        }
    };
    check(&["kelp/__init__.py", "kelp/model.py", "train.py"]);
    // Uncommitted: the model now imports another module.
    write_files(
        repo.path(),
        &[("kelp/model.py", "import math\nfrom . import extra\n")],
    );
    check(&[
        "kelp/__init__.py",
        "kelp/extra.py",
        "kelp/model.py",
        "train.py",
    ]);
    // The same edit staged: the index changes, the tree does not.
    git(repo.path(), &["add", "kelp/model.py"]);
    check(&[
        "kelp/__init__.py",
        "kelp/extra.py",
        "kelp/model.py",
        "train.py",
    ]);
    // A new untracked module imported by the entry point.
    write_files(
        repo.path(),
        &[
            ("kelp/new.py", "Y = 2\n"),
            ("train.py", "from kelp import model, new\n"),
        ],
    );
    check(&[
        "kelp/__init__.py",
        "kelp/extra.py",
        "kelp/model.py",
        "kelp/new.py",
        "train.py",
    ]);
    // Everything reverted.
    git(repo.path(), &["reset", "-q", "--hard"]);
    std::fs::remove_file(repo.path().join("kelp/new.py")).unwrap();
    check(&["kelp/__init__.py", "kelp/model.py", "train.py"]);
}
