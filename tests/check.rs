//! `runprint check` against the current environment and against git revisions, in real
//! repositories driven by the `git` executable: branches, tags, commit ids, a shallow clone made
//! by `git clone --depth 1`, and a repository that lacks the baseline commit. The reference for
//! "what a revision holds" is git itself (`git rev-parse`, `git status`, `git show`).

mod common;

use std::path::Path;

use common::{crate_path, git, repo_with, runprint, stamp_to, write_files};
use serde::Deserialize;

/// The JSON contract, declared independently of the library's types.
#[derive(Debug, Deserialize)]
struct JsonReport {
    verdict: String,
    changes: Vec<JsonChange>,
    new: JsonSide,
    #[serde(default)]
    notes: Vec<String>,
}

#[derive(Debug, Deserialize)]
struct JsonChange {
    impact: String,
    subject: String,
    reason: String,
    section: String,
}

#[derive(Debug, Deserialize)]
struct JsonSide {
    path: String,
}

fn check_json(args: &[&str], repo: &Path, vars: &[(&str, &str)]) -> (i32, JsonReport) {
    let mut cmd = runprint();
    cmd.arg("check")
        .args(args)
        .args(["--format", "json", "--repo"])
        .arg(repo)
        .current_dir(repo);
    for (k, v) in vars {
        cmd.env(k, v);
    }
    let out = cmd.output().unwrap();
    let report: JsonReport = serde_json::from_slice(&out.stdout).unwrap_or_else(|e| {
        panic!(
            "{e}: {}\n{}",
            String::from_utf8_lossy(&out.stdout),
            String::from_utf8_lossy(&out.stderr)
        )
    });
    (out.status.code().unwrap(), report)
}

fn baseline_of(repo: &Path, vars: &[(&str, &str)]) -> (tempfile::TempDir, String) {
    let out = tempfile::tempdir().unwrap();
    let path = out.path().join("baseline.toml");
    stamp_to(repo, &path, vars);
    let shown = path.display().to_string();
    (out, shown)
}

#[test]
fn current_environment_check_uses_diff_exit_codes_and_saves_atomically() {
    let repo = repo_with(&[("train.py", "\n"), ("requirements.txt", "numpy==1.26.4\n")]);
    let (dir, baseline) = baseline_of(repo.path(), &[("OMP_NUM_THREADS", "4")]);

    let (code, report) = check_json(
        &["--baseline", &baseline],
        repo.path(),
        &[("OMP_NUM_THREADS", "4")],
    );
    assert_eq!(
        (code, report.verdict.as_str()),
        (0, "none"),
        "{:?}",
        report
            .changes
            .iter()
            .map(|c| format!("{} {}", c.subject, c.reason))
            .collect::<Vec<_>>()
    );

    let saved = dir.path().join("now.toml");
    let (code, report) = check_json(
        &["--baseline", &baseline, "--save", saved.to_str().unwrap()],
        repo.path(),
        &[("OMP_NUM_THREADS", "8")],
    );
    assert_eq!((code, report.verdict.as_str()), (3, "verify"));
    assert_eq!(report.changes[0].subject, "env OMP_NUM_THREADS");
    assert_eq!(report.new.path, saved.display().to_string());
    // The saved manifest is complete and `diff` reaches the same verdict from it.
    let m = runprint::manifest::Manifest::load(&saved).unwrap();
    assert!(!m.is_modified());
    assert_eq!(m.content.env.vars["OMP_NUM_THREADS"], "8");
    let diff = runprint()
        .arg("diff")
        .arg(&baseline)
        .arg(&saved)
        .current_dir(repo.path())
        .output()
        .unwrap();
    assert_eq!(diff.status.code(), Some(3));
    // Only the manifests are in the folder: the atomic write left no temporary behind.
    assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 2);
}

#[test]
fn a_branch_with_a_numpy_bump_is_retrain_without_touching_the_work_tree() {
    let repo = repo_with(&[
        ("train.py", "\n"),
        ("requirements.txt", "numpy==1.26.4\ntqdm==4.66.4\n"),
    ]);
    let (_dir, baseline) = baseline_of(repo.path(), &[("OMP_NUM_THREADS", "4")]);
    git(repo.path(), &["checkout", "-q", "-b", "deps/numpy-2"]);
    write_files(
        repo.path(),
        &[("requirements.txt", "numpy==2.1.3\ntqdm==4.66.4\n")],
    );
    git(repo.path(), &["commit", "-qam", "bump numpy"]);
    let bumped = git(repo.path(), &["rev-parse", "HEAD"]);
    git(repo.path(), &["checkout", "-q", "main"]);

    // A different thread count on this machine must not matter: machine sections are not
    // compared against a revision.
    let (code, report) = check_json(
        &["--baseline", &baseline, "--rev", "deps/numpy-2"],
        repo.path(),
        &[("OMP_NUM_THREADS", "64")],
    );
    assert_eq!((code, report.verdict.as_str()), (4, "retrain"));
    let numpy = report
        .changes
        .iter()
        .find(|c| c.subject == "requirements.txt: numpy")
        .unwrap();
    assert_eq!(numpy.impact, "retrain");
    assert!(report.changes.iter().all(|c| c.section != "env"));
    assert!(report.notes.iter().any(|n| n.contains("machine sections")));
    // The commit changed only requirements.txt, a lockfile judged package by package, so the
    // commit itself adds nothing beyond the numpy change.
    let commit = report
        .changes
        .iter()
        .find(|c| c.subject == "commit")
        .unwrap();
    assert_eq!(commit.impact, "none", "{}", commit.reason);
    assert!(
        commit.reason.contains("requirements.txt"),
        "{}",
        commit.reason
    );
    // Reference: git names the same commit, and nothing was checked out.
    assert!(
        report.new.path.contains(&bumped[..12]),
        "{}",
        report.new.path
    );
    assert_eq!(
        git(repo.path(), &["rev-parse", "--abbrev-ref", "HEAD"]),
        "main"
    );
    assert_eq!(git(repo.path(), &["status", "--porcelain"]), "");
    assert_eq!(
        std::fs::read_to_string(repo.path().join("requirements.txt")).unwrap(),
        git(repo.path(), &["show", "main:requirements.txt"]) + "\n"
    );
}

#[test]
fn a_documentation_only_tag_is_none_and_a_commit_id_works() {
    let repo = repo_with(&[("train.py", "\n"), ("requirements.txt", "numpy==1.26.4\n")]);
    let (_dir, baseline) = baseline_of(repo.path(), &[]);
    write_files(
        repo.path(),
        &[("README.md", "# kelp\n"), ("docs/usage.txt", "x\n")],
    );
    git(repo.path(), &["add", "-A"]);
    git(repo.path(), &["commit", "-qm", "docs"]);
    git(repo.path(), &["tag", "v2"]);

    let (code, report) = check_json(&["--baseline", &baseline, "--rev", "v2"], repo.path(), &[]);
    assert_eq!((code, report.verdict.as_str()), (0, "none"));
    let commit = report
        .changes
        .iter()
        .find(|c| c.subject == "commit")
        .unwrap();
    assert_eq!(commit.impact, "none");
    assert!(commit.reason.contains("README.md"), "{}", commit.reason);

    let id = git(repo.path(), &["rev-parse", "v2"]);
    let (code, report) = check_json(&["--baseline", &baseline, "--rev", &id], repo.path(), &[]);
    assert_eq!(code, 0);
    assert!(report.new.path.contains(&id[..12]));
}

#[test]
fn lockfiles_read_from_git_objects_equal_those_read_from_disk() {
    // The same commit stamped from disk and read at a revision must give identical lockfiles:
    // a requirements include, go.mod with its go.sum companion, a NuGet lockfile. The Go and
    // NuGet files are the project's fixtures (see their README.md for their sources).
    let read = |p: &str| std::fs::read_to_string(crate_path(p)).unwrap();
    let (gomod, gosum, nuget) = (
        read("fixtures/lockfiles/go/go.mod"),
        read("fixtures/lockfiles/go/go.sum"),
        read("fixtures/lockfiles/nuget/packages.lock.json"),
    );
    let repo = repo_with(&[
        ("train.py", "\n"),
        (
            "py/requirements.txt",
            "-r base.txt\n-c ../constraints.txt\ntorch==2.5.1\n",
        ),
        ("py/base.txt", "numpy==1.26.4\n"),
        ("constraints.txt", "scipy==1.14.1\n"),
        ("svc/go.mod", &gomod),
        ("svc/go.sum", &gosum),
        ("dotnet/packages.lock.json", &nuget),
        ("node_modules/pkg/requirements.txt", "ignored==1.0\n"),
    ]);
    let (_dir, baseline) = baseline_of(repo.path(), &[]);
    let base = runprint::manifest::Manifest::load(Path::new(&baseline)).unwrap();
    let go = base
        .content
        .lockfiles
        .iter()
        .find(|l| l.path == "svc/go.mod")
        .unwrap();
    assert!(
        go.packages.iter().any(|p| !p.hashes.is_empty()),
        "go.sum was read"
    );

    let (code, report) = check_json(
        &["--baseline", &baseline, "--rev", "main"],
        repo.path(),
        &[],
    );
    assert_eq!(code, 0, "{:?}", report.changes);
    assert!(
        report.changes.iter().all(|c| c.section != "lockfiles"),
        "{:?}",
        report.changes
    );
    // And a change in the included file is seen at the next revision.
    write_files(repo.path(), &[("py/base.txt", "numpy==2.1.3\n")]);
    git(repo.path(), &["commit", "-qam", "bump included numpy"]);
    let (code, report) = check_json(
        &["--baseline", &baseline, "--rev", "HEAD"],
        repo.path(),
        &[],
    );
    assert_eq!(code, 4);
    assert!(report
        .changes
        .iter()
        .any(|c| c.subject == "py/requirements.txt: numpy" && c.impact == "retrain"));
}

#[test]
fn a_shallow_clone_without_the_baseline_commit_compares_lockfiles_only() {
    let origin = repo_with(&[("train.py", "\n"), ("requirements.txt", "numpy==1.26.4\n")]);
    let (_dir, baseline) = baseline_of(origin.path(), &[]);
    write_files(origin.path(), &[("requirements.txt", "numpy==2.0.0\n")]);
    git(origin.path(), &["commit", "-qam", "major bump"]);

    let parent = tempfile::tempdir().unwrap();
    let url = format!("file://{}", origin.path().display());
    git(
        parent.path(),
        &["clone", "-q", "--depth", "1", &url, "shallow"],
    );
    let shallow = parent.path().join("shallow");
    // Reference: git agrees the clone is shallow.
    assert_eq!(
        git(&shallow, &["rev-parse", "--is-shallow-repository"]),
        "true"
    );

    let (code, report) = check_json(&["--baseline", &baseline, "--rev", "HEAD"], &shallow, &[]);
    assert!(
        report.notes.iter().any(|n| n.contains("shallow clone")),
        "{:?}",
        report.notes
    );
    assert!(report.changes.iter().all(|c| c.section != "git"));
    let numpy = report
        .changes
        .iter()
        .find(|c| c.subject == "requirements.txt: numpy")
        .unwrap();
    assert_eq!(numpy.impact, "retrain");
    assert_eq!(code, 4);
}

#[test]
fn a_repository_without_the_baseline_commit_or_a_baseline_without_one() {
    let files = [("train.py", "\n"), ("requirements.txt", "numpy==1.26.4\n")];
    let first = repo_with(&files);
    let (_dir, baseline) = baseline_of(first.path(), &[]);
    // An unrelated repository with the same lockfile and other code, so no commit is shared.
    let other = repo_with(&[("train.py", "# another\n"), files[1]]);
    let (code, report) = check_json(
        &["--baseline", &baseline, "--rev", "HEAD"],
        other.path(),
        &[],
    );
    assert_eq!((code, report.verdict.as_str()), (0, "none"));
    assert!(report
        .notes
        .iter()
        .any(|n| n.contains("is not in this repository")));

    // A baseline stamped outside any repository.
    let plain = tempfile::tempdir().unwrap();
    write_files(plain.path(), &files);
    let (_d2, outside) = baseline_of(plain.path(), &[]);
    let (code, report) = check_json(
        &["--baseline", &outside, "--rev", "HEAD"],
        other.path(),
        &[],
    );
    assert_eq!(code, 0, "{:?}", report.changes);
    assert!(report.notes.iter().any(|n| n.contains("records no commit")));
}

#[test]
fn markdown_for_a_pull_request_and_bad_revisions_exit_2() {
    let repo = repo_with(&[("requirements.txt", "numpy==1.26.4\n")]);
    let (_dir, baseline) = baseline_of(repo.path(), &[]);
    git(repo.path(), &["checkout", "-q", "-b", "bump"]);
    write_files(repo.path(), &[("requirements.txt", "numpy==2.1.3\n")]);
    git(repo.path(), &["commit", "-qam", "bump"]);
    let out = runprint()
        .args([
            "check",
            "--baseline",
            &baseline,
            "--rev",
            "bump",
            "--format",
            "markdown",
        ])
        .arg("--repo")
        .arg(repo.path())
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(4));
    let md = String::from_utf8(out.stdout).unwrap();
    assert!(md.starts_with("### runprint: **retrain**"), "{md}");
    assert!(
        md.contains("| retrain | `requirements.txt: numpy` | 1.26.4 → 2.1.3 |"),
        "{md}"
    );
    assert!(md.contains("> **Note:**"));

    let out = runprint()
        .args(["check", "--baseline", &baseline, "--rev", "no-such-branch"])
        .arg("--repo")
        .arg(repo.path())
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("`no-such-branch`"));

    let out = runprint()
        .args(["check", "--baseline", "/nonexistent/base.toml"])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("/nonexistent/base.toml"));
}

/// pip files found by pattern (`*requirements*.txt`, `*constraints*.txt`, a `requirements/`
/// folder; common practice for the files pip reads with `-r` and `-c`) are compared, from the
/// work tree and from a revision alike; a bare VCS URL keeps its file, so switching it to a
/// release is seen (pip's "VCS Support": `git+URL@REF`).
#[test]
fn pip_files_found_by_pattern_and_vcs_lines_are_compared_at_a_revision() {
    let repo = repo_with(&[
        ("train.py", "\n"),
        (
            "requirements/gpu.txt",
            "git+https://git.invalid/org/transformers@v4.40.0\ntorch==2.5.1\n",
        ),
        ("test-requirements.txt", "pytest==8.2.0\n"),
        ("constraints.txt", "numpy==1.26.4\n"),
    ]);
    let (_dir, baseline) = baseline_of(repo.path(), &[]);
    let m = std::fs::read_to_string(&baseline).unwrap();
    for path in [
        "requirements/gpu.txt",
        "test-requirements.txt",
        "constraints.txt",
    ] {
        assert!(
            m.contains(&format!("path = \"{path}\"")),
            "{path} not recorded:\n{m}"
        );
    }
    assert!(!m.contains("warnings"), "{m}");
    git(repo.path(), &["checkout", "-q", "-b", "deps"]);
    write_files(
        repo.path(),
        &[
            (
                "requirements/gpu.txt",
                "transformers==4.41.0\ntorch==2.5.1\n",
            ),
            ("constraints.txt", "numpy==2.1.3\n"),
        ],
    );
    git(repo.path(), &["commit", "-qam", "deps"]);
    git(repo.path(), &["checkout", "-q", "main"]);
    let (code, report) = check_json(
        &["--baseline", &baseline, "--rev", "deps"],
        repo.path(),
        &[],
    );
    assert_eq!((code, report.verdict.as_str()), (4, "retrain"));
    for subject in [
        "requirements/gpu.txt: transformers",
        "constraints.txt: numpy",
    ] {
        let c = report.changes.iter().find(|c| c.subject == subject);
        assert_eq!(
            c.map(|c| c.impact.as_str()),
            Some("retrain"),
            "{subject}: {report:?}"
        );
    }
}

/// A baseline stamped with `--repo trainer` (a folder of a monorepo) holds the trainer's
/// lockfiles only; `check --rev` with the same `--repo` compares those, so a bump in another
/// project's lockfile is not the trainer's (no lockfile "added"), and a bump in its own is.
#[test]
fn a_subfolder_baseline_is_checked_against_the_same_subfolder_at_a_revision() {
    let repo = repo_with(&[
        ("serving/requirements.txt", "numpy==1.26.4\n"),
        ("trainer/train.py", "\n"),
        ("trainer/requirements.txt", "torch==2.5.1\n"),
    ]);
    let trainer = repo.path().join("trainer");
    let (_dir, baseline) = baseline_of(&trainer, &[]);
    let m = std::fs::read_to_string(&baseline).unwrap();
    assert!(!m.contains("serving/requirements.txt"), "{m}");
    git(repo.path(), &["checkout", "-q", "-b", "serving-bump"]);
    write_files(
        repo.path(),
        &[("serving/requirements.txt", "numpy==2.1.3\n")],
    );
    git(repo.path(), &["commit", "-qam", "serving: numpy 2"]);
    git(repo.path(), &["checkout", "-q", "-b", "trainer-bump"]);
    write_files(
        repo.path(),
        &[("trainer/requirements.txt", "torch==2.6.0\n")],
    );
    git(repo.path(), &["commit", "-qam", "trainer: torch 2.6"]);
    git(repo.path(), &["checkout", "-q", "main"]);
    let (_, report) = check_json(
        &["--baseline", &baseline, "--rev", "serving-bump"],
        &trainer,
        &[],
    );
    assert!(
        report.changes.iter().all(|c| c.section != "lockfiles"),
        "{report:?}"
    );
    assert!(report
        .notes
        .iter()
        .any(|n| n.contains("under `trainer/` only")));
    let (code, report) = check_json(
        &["--baseline", &baseline, "--rev", "trainer-bump"],
        &trainer,
        &[],
    );
    assert_eq!(
        (code, report.verdict.as_str()),
        (4, "retrain"),
        "{report:?}"
    );
    assert!(report
        .changes
        .iter()
        .any(|c| c.subject == "trainer/requirements.txt: torch"));
}

/// Commits `files` on a new branch `name` made from `main`, then goes back to `main`.
fn commit_on_branch(repo: &Path, name: &str, files: &[(&str, &str)]) {
    git(repo, &["checkout", "-q", "-b", name, "main"]);
    write_files(repo, files);
    git(repo, &["commit", "-qam", name]);
    git(repo, &["checkout", "-q", "main"]);
}

/// `check --baseline BASELINE --rev REV` as JSON.
fn check_rev(repo: &Path, baseline: &str, rev: &str) -> (i32, JsonReport) {
    check_json(&["--baseline", baseline, "--rev", rev], repo, &[])
}

/// The change about `subject`; the report is shown when there is none.
fn change<'r>(report: &'r JsonReport, subject: &str) -> &'r JsonChange {
    report
        .changes
        .iter()
        .find(|c| c.subject == subject)
        .unwrap_or_else(|| panic!("no change `{subject}`: {report:?}"))
}

/// Dependency inputs and toolchain pins at a revision. The expectations are PEP 440's
/// (`<2.2` → `<2.4` admits new minor releases; raising a lower bound leaves the newest
/// admitted version alone), PEP 621 / PEP 735 (where `pyproject.toml` declares dependencies),
/// setuptools' `setup.cfg` format, pyenv's `.python-version`, the rustup book's
/// `rust-toolchain.toml` and the Go Modules Reference's `toolchain` line.
#[test]
fn declared_ranges_and_toolchain_pins_are_compared_at_a_revision() {
    let repo = repo_with(&[
        ("train.py", "\n"),
        (
            "pyproject.toml",
            "[project]\nname = \"kelp\"\nversion = \"0.1\"\ndependencies = [\"torch>=2.1,<2.2\", \"requests>=2.30\", \"scipy>=1.11\"]\n[dependency-groups]\ndev = [\"pytest>=8\"]\n",
        ),
        (
            "features/setup.cfg",
            "[metadata]\nname = feats\n[options]\ninstall_requires =\n    numpy>=1.26,<2\n",
        ),
        (".python-version", "3.11\n"),
        ("tools/rust-toolchain.toml", "[toolchain]\nchannel = \"1.85.0\"\n"),
        (
            "tools/go.mod",
            "module example.com/tools\n\ngo 1.22\n\ntoolchain go1.22.4\n",
        ),
    ]);
    let (_dir, baseline) = baseline_of(repo.path(), &[]);
    let m = std::fs::read_to_string(&baseline).unwrap();
    for path in [
        "pyproject.toml",
        "features/setup.cfg",
        ".python-version",
        "tools/rust-toolchain.toml",
    ] {
        assert!(m.contains(&format!("path = \"{path}\"")), "{path}:\n{m}");
    }
    commit_on_branch(
        repo.path(),
        "bump",
        &[
            (
                "pyproject.toml",
                "[project]\nname = \"kelp\"\nversion = \"0.1\"\ndependencies = [\"torch>=2.1,<2.4\", \"requests>=2.31\", \"scipy>=1.11\"]\n[project.optional-dependencies]\nsparse = [\"scipy\"]\nreport = [\"kelp-report-kit>=1.0\"]\n[dependency-groups]\ndev = [\"pytest>=8\"]\n",
            ),
            (
                "features/setup.cfg",
                "[metadata]\nname = feats\n[options]\ninstall_requires =\n    numpy>=1.26,<2.2\n",
            ),
            (".python-version", "3.11.9\n"),
            ("tools/rust-toolchain.toml", "[toolchain]\nchannel = \"1.86.0\"\n"),
            (
                "tools/go.mod",
                "module example.com/tools\n\ngo 1.22\n\ntoolchain go1.23.0\n",
            ),
        ],
    );
    let (code, report) = check_rev(repo.path(), &baseline, "bump");
    assert_eq!(
        (code, report.verdict.as_str()),
        (4, "retrain"),
        "{report:?}"
    );
    let impact = |subject: &str| change(&report, subject).impact.clone();
    // torch's range now admits 2.2 and 2.3: new minor releases of a numerical library.
    assert_eq!(impact("pyproject.toml: torch"), "retrain");
    // The newest requests admitted is unchanged.
    assert_eq!(impact("pyproject.toml: requests"), "none");
    // scipy named again, without a version, in a new extra: no new constraint.
    assert_eq!(impact("pyproject.toml: scipy"), "none");
    // A new package only in an optional extra (PEP 621): installed when asked for.
    assert_eq!(impact("pyproject.toml: kelp-report-kit"), "none");
    // numpy's range now admits 2.0 and 2.1 (NumPy 2's promotion rules).
    assert_eq!(impact("features/setup.cfg: numpy"), "retrain");
    // A Python bug-fix release; a compiler for tools; Go may fuse operations differently.
    assert_eq!(impact(".python-version: python"), "verify");
    assert_eq!(impact("tools/rust-toolchain.toml: rust"), "none");
    assert_eq!(impact("tools/go.mod: go"), "verify");
    let torch = change(&report, "pyproject.toml: torch");
    assert!(torch.reason.contains("declared range"), "{}", torch.reason);
}

/// pip-tools' `requirements.in` beside the `requirements.txt` it compiles to (pip-tools
/// README): the input's ranges are information, the pins decide. A baseline that recorded no
/// inputs at all (stamped before runprint read them; here, stamped with only the pinned file)
/// does not turn an unchanged input into an added dependency.
#[test]
fn an_input_beside_its_lockfile_is_information_and_an_older_baseline_is_not_an_addition() {
    let repo = repo_with(&[
        ("train.py", "\n"),
        ("requirements.in", "torch>=2.1,<2.2\n"),
        ("requirements.txt", "torch==2.1.2\n"),
        (
            "serving/pyproject.toml",
            "[project]\nname = \"s\"\nversion = \"1\"\ndependencies = [\"numpy>=1.26\"]\n",
        ),
    ]);
    let (_dir, baseline) = baseline_of(repo.path(), &[]);
    commit_on_branch(
        repo.path(),
        "range",
        &[("requirements.in", "torch>=2.1,<2.4\n")],
    );
    let (code, report) = check_rev(repo.path(), &baseline, "range");
    assert_eq!((code, report.verdict.as_str()), (0, "none"), "{report:?}");
    let c = change(&report, "requirements.in: torch");
    assert!(
        c.reason.contains("`requirements.txt` decides"),
        "{}",
        c.reason
    );

    // An input bumped past what its lockfile pins, without compiling again: the next
    // `pip-compile` (or `uv sync`, `poetry install`) resolves again, so torch moves to 2.3 at
    // least (PEP 440: `>=2.3` excludes 2.1.2).
    commit_on_branch(repo.path(), "stale", &[("requirements.in", "torch>=2.3\n")]);
    let (code, report) = check_rev(repo.path(), &baseline, "stale");
    assert_eq!(
        (code, report.verdict.as_str()),
        (4, "retrain"),
        "{report:?}"
    );
    let c = change(&report, "requirements.in: torch");
    assert!(c.reason.contains("locks torch 2.1.2"), "{}", c.reason);

    // The same revision against a baseline that read only the pinned file.
    let old = tempfile::tempdir().unwrap();
    let only_pins = old.path().join("old.toml");
    let out = runprint()
        .args([
            "stamp",
            "--no-lockfiles",
            "--lockfile",
            "requirements.txt",
            "-o",
        ])
        .arg(&only_pins)
        .current_dir(repo.path())
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let only_pins = only_pins.display().to_string();
    commit_on_branch(repo.path(), "same", &[("train.py", "# comment\n")]);
    let (_, report) = check_rev(repo.path(), &only_pins, "same");
    let first = report
        .changes
        .iter()
        .find(|c| c.subject.starts_with("serving/pyproject.toml"))
        .expect("the input read now is listed");
    assert_eq!(first.impact, "none", "{report:?}");
    assert!(!report
        .changes
        .iter()
        .any(|c| c.subject.contains("numpy") && c.impact != "none"));
}
