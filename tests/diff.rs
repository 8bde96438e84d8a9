//! `runprint diff` on manifests stamped from real git repositories: each impact level, each
//! exit code, bad input, edited manifests and the JSON contract.

mod common;

use std::path::Path;

use common::{git, repo_with, runprint, stamp_to, write_files};

fn diff_json(old: &Path, new: &Path, cwd: &Path, extra: &[&str]) -> (i32, JsonReport) {
    common::diff_json(old, new, cwd, extra)
}
use serde::Deserialize;

/// The JSON contract relied on by users' scripts, declared independently of the library's
/// types so that an accidental schema change fails here.
#[derive(Debug, Deserialize)]
struct JsonReport {
    verdict: String,
    changes: Vec<JsonChange>,
    old: JsonSide,
}

#[derive(Debug, Deserialize)]
struct JsonChange {
    impact: String,
    subject: String,
    reason: String,
}

#[derive(Debug, Deserialize)]
struct JsonSide {
    modified: bool,
}

fn assert_most_important_first(r: &JsonReport) {
    let rank = |i: &str| match i {
        "retrain" => 2,
        "verify" => 1,
        "none" => 0,
        other => panic!("unknown impact {other}"),
    };
    let ranks: Vec<i32> = r.changes.iter().map(|c| rank(&c.impact)).collect();
    let mut sorted = ranks.clone();
    sorted.sort_by(|a, b| b.cmp(a));
    assert_eq!(ranks, sorted);
    assert_eq!(rank(&r.verdict), ranks.first().copied().unwrap_or(0));
    assert!(r
        .changes
        .iter()
        .all(|c| !c.reason.is_empty() && !c.subject.is_empty()));
}

#[test]
fn same_state_different_label_is_none_and_exits_0() {
    let repo = repo_with(&[("train.py", "\n")]);
    let out = tempfile::tempdir().unwrap();
    let (a, b) = (out.path().join("a.toml"), out.path().join("b.toml"));
    stamp_to(repo.path(), &a, &[("OMP_NUM_THREADS", "4")]);
    let result = runprint()
        .args(["stamp", "--label", "second run", "--out"])
        .arg(&b)
        .arg("--repo")
        .arg(repo.path())
        .env("OMP_NUM_THREADS", "4")
        .output()
        .unwrap();
    assert!(result.status.success());
    let (code, report) = diff_json(&a, &b, repo.path(), &[]);
    assert_eq!(code, 0);
    assert_eq!(report.verdict, "none");
    assert!(report.changes.iter().all(|c| c.impact == "none"));
    assert!(report.changes.iter().any(|c| c.subject == "label"));
}

#[test]
fn thread_count_change_is_verify_and_exits_3() {
    let repo = repo_with(&[("train.py", "\n")]);
    let out = tempfile::tempdir().unwrap();
    let (a, b) = (out.path().join("a.toml"), out.path().join("b.toml"));
    stamp_to(repo.path(), &a, &[("OMP_NUM_THREADS", "4")]);
    stamp_to(repo.path(), &b, &[("OMP_NUM_THREADS", "8")]);
    let (code, report) = diff_json(&a, &b, repo.path(), &[]);
    assert_eq!(code, 3);
    assert_eq!(report.verdict, "verify");
    assert_eq!(report.changes[0].subject, "env OMP_NUM_THREADS");
    // Common practice (numeric-facts B20-B25): thread counts change reduction order.
    assert!(report.changes[0].reason.contains("reductions"));
}

#[test]
fn numerical_package_bump_is_retrain_and_exits_4() {
    let repo = repo_with(&[("requirements.txt", "numpy==1.26.4\ntqdm==4.66.4\n")]);
    let out = tempfile::tempdir().unwrap();
    let (a, b) = (out.path().join("a.toml"), out.path().join("b.toml"));
    stamp_to(repo.path(), &a, &[]);
    write_files(
        repo.path(),
        &[("requirements.txt", "numpy==2.1.3\ntqdm==4.66.5\n")],
    );
    git(repo.path(), &["commit", "-qam", "bump numpy"]);
    stamp_to(repo.path(), &b, &[]);
    let (code, report) = diff_json(&a, &b, repo.path(), &[]);
    assert_eq!(code, 4);
    assert_eq!(report.verdict, "retrain");
    assert_most_important_first(&report);
    let numpy = report
        .changes
        .iter()
        .find(|c| c.subject == "requirements.txt: numpy")
        .unwrap();
    assert_eq!(numpy.impact, "retrain");
    assert!(numpy.reason.contains("major"), "{}", numpy.reason);
    let tqdm = report
        .changes
        .iter()
        .find(|c| c.subject == "requirements.txt: tqdm")
        .unwrap();
    assert_eq!(tqdm.impact, "none");
}

#[test]
fn documentation_only_commit_is_none_and_code_commit_is_retrain() {
    let repo = repo_with(&[
        ("train.py", "lr = 0.1\n"),
        ("README.md", "# model\n"),
        ("docs/howto.txt", "a\n"),
    ]);
    let out = tempfile::tempdir().unwrap();
    let (a, b, c) = (
        out.path().join("a.toml"),
        out.path().join("b.toml"),
        out.path().join("c.toml"),
    );
    stamp_to(repo.path(), &a, &[]);
    write_files(
        repo.path(),
        &[
            ("README.md", "# model\nMore words.\n"),
            ("docs/howto.txt", "b\n"),
        ],
    );
    git(repo.path(), &["commit", "-qam", "docs"]);
    stamp_to(repo.path(), &b, &[]);
    // Run outside the repository, naming it with --repo.
    let (code, report) = diff_json(
        &a,
        &b,
        out.path(),
        &["--repo", repo.path().to_str().unwrap()],
    );
    assert_eq!(code, 0, "{report:?}");
    let commit = report
        .changes
        .iter()
        .find(|ch| ch.subject == "commit")
        .unwrap();
    assert_eq!(commit.impact, "none");
    assert!(commit.reason.contains("README.md"));

    write_files(repo.path(), &[("train.py", "lr = 0.2\n")]);
    git(repo.path(), &["commit", "-qam", "tune"]);
    stamp_to(repo.path(), &c, &[]);
    // Inside the repository the commits are found without --repo.
    let (code, report) = diff_json(&a, &c, repo.path(), &[]);
    assert_eq!(code, 4);
    assert!(report.changes[0].reason.contains("train.py"));
}

#[test]
fn commits_that_cannot_be_listed_count_as_code_changes() {
    let repo = repo_with(&[("train.py", "lr = 0.1\n")]);
    let out = tempfile::tempdir().unwrap();
    let (a, b) = (out.path().join("a.toml"), out.path().join("b.toml"));
    stamp_to(repo.path(), &a, &[]);
    write_files(repo.path(), &[("README.md", "x\n")]);
    git(repo.path(), &["add", "-A"]);
    git(repo.path(), &["commit", "-qm", "docs"]);
    stamp_to(repo.path(), &b, &[]);
    let elsewhere = tempfile::tempdir().unwrap();
    let out = runprint()
        .arg("diff")
        .arg(&a)
        .arg(&b)
        .current_dir(elsewhere.path())
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(4));
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(text.contains("could not be listed"), "{text}");
}

#[test]
fn malformed_missing_and_newer_manifests_exit_2_naming_the_file() {
    let dir = tempfile::tempdir().unwrap();
    let good = dir.path().join("good.toml");
    stamp_to(dir.path(), &good, &[]);
    let text = std::fs::read_to_string(&good).unwrap();
    let cases = [
        (
            "truncated.toml",
            text[..text.len() / 2].to_string() + "\n[cpu\n",
        ),
        ("garbage.toml", "this is = = not toml\n".to_string()),
        ("empty.toml", String::new()),
        (
            "newer.toml",
            text.replace("schema-version = 1", "schema-version = 7"),
        ),
        (
            "wrongtype.toml",
            text.replace("schema-version = 1", "schema-version = \"one\""),
        ),
    ];
    for (name, body) in cases {
        let bad = dir.path().join(name);
        std::fs::write(&bad, body).unwrap();
        for args in [[&good, &bad], [&bad, &good]] {
            let out = runprint().arg("diff").args(args).output().unwrap();
            assert_eq!(out.status.code(), Some(2), "{name}");
            let stderr = String::from_utf8_lossy(&out.stderr);
            assert!(stderr.contains(name), "{name}: {stderr}");
            assert!(!stderr.contains("panicked"));
        }
    }
    let out = runprint()
        .arg("diff")
        .arg(&good)
        .arg(dir.path().join("absent.toml"))
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("absent.toml"));
    // A syntax error reports its line.
    let out = runprint()
        .arg("diff")
        .arg(&good)
        .arg(dir.path().join("garbage.toml"))
        .output()
        .unwrap();
    assert!(String::from_utf8_lossy(&out.stderr).contains("line 1"));
}

#[test]
fn a_hand_edited_manifest_still_compares_but_is_reported() {
    let dir = tempfile::tempdir().unwrap();
    let a = dir.path().join("a.toml");
    stamp_to(dir.path(), &a, &[("OMP_NUM_THREADS", "4")]);
    let edited = dir.path().join("edited.toml");
    std::fs::write(
        &edited,
        std::fs::read_to_string(&a)
            .unwrap()
            .replace("OMP_NUM_THREADS = \"4\"", "OMP_NUM_THREADS = \"16\""),
    )
    .unwrap();
    let (code, report) = diff_json(&edited, &a, dir.path(), &[]);
    assert_eq!(code, 3);
    assert!(report.old.modified);
    let text = runprint()
        .arg("diff")
        .arg(&edited)
        .arg(&a)
        .output()
        .unwrap();
    assert!(String::from_utf8_lossy(&text.stdout).contains("modified after stamping"));
}

#[test]
fn text_has_no_colour_off_a_terminal_and_markdown_is_a_table() {
    let dir = tempfile::tempdir().unwrap();
    let (a, b) = (dir.path().join("a.toml"), dir.path().join("b.toml"));
    stamp_to(dir.path(), &a, &[("MKL_NUM_THREADS", "1")]);
    stamp_to(dir.path(), &b, &[("MKL_NUM_THREADS", "2")]);
    let text = runprint().arg("diff").arg(&a).arg(&b).output().unwrap();
    let stdout = String::from_utf8(text.stdout).unwrap();
    assert!(!stdout.contains('\u{1b}'));
    assert!(stdout.starts_with("verdict: VERIFY"));
    let md = runprint()
        .arg("diff")
        .arg(&a)
        .arg(&b)
        .args(["--format", "markdown"])
        .output()
        .unwrap();
    let md = String::from_utf8(md.stdout).unwrap();
    assert!(md.contains("| Impact | Subject | Change | Reason |"));
    assert!(md.contains("| verify | `env MKL_NUM_THREADS` | 1 → 2 |"));
}

#[test]
fn help_documents_exit_codes() {
    let out = runprint().args(["diff", "--help"]).output().unwrap();
    let help = String::from_utf8(out.stdout).unwrap();
    for needle in [
        "0  verdict none",
        "3  verdict verify",
        "4  verdict retrain",
        "2  bad input",
    ] {
        assert!(help.contains(needle), "{needle}");
    }
    // Usage errors are bad input too.
    let out = runprint().args(["diff", "only-one.toml"]).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
}

/// A bump of 300 packages in each of five lockfiles (torch pulling in the rest): the Markdown
/// report fits a pull-request comment (GitHub refuses comments above 65,536 characters; from
/// memory) and still names torch as the cause. Package names besides torch are placeholders:
/// what is checked is the size.
#[test]
fn a_large_bump_fits_a_pull_request_comment_and_names_the_parent() {
    use runprint::manifest::{Content, Lockfile, Manifest, Package, RunInfo};
    use runprint::report::{render, ReportFormat};
    let side = |torch: &str, others: &str| {
        let names: Vec<String> = (0..299).map(|i| format!("dependency-{i:03}")).collect();
        let mut packages: Vec<Package> = names
            .iter()
            .map(|n| Package {
                name: n.clone(),
                version: others.into(),
                ..Package::default()
            })
            .collect();
        packages.push(Package {
            name: "torch".into(),
            version: torch.into(),
            requires: names.clone(),
            ..Package::default()
        });
        let lockfiles = (0..5)
            .map(|i| Lockfile {
                path: format!("project-{i}/uv.lock"),
                ecosystem: "pypi".into(),
                sha256: format!(
                    "sha256:{}",
                    format!("{i}{torch}")
                        .repeat(64)
                        .chars()
                        .filter(char::is_ascii_hexdigit)
                        .take(64)
                        .collect::<String>()
                ),
                packages: packages.clone(),
                ..Lockfile::default()
            })
            .collect();
        Manifest::new(
            RunInfo::default(),
            Content {
                lockfiles,
                ..Content::default()
            },
        )
    };
    let (old, new) = (side("2.6.0", "1.0.0"), side("2.7.0", "1.1.0"));
    let report = runprint::diff::compare("old.toml", &old, "new.toml", &new, None);
    let md = render(&report, ReportFormat::Markdown, false);
    assert!(
        md.chars().count() < 60_000,
        "{} characters",
        md.chars().count()
    );
    let cause = report.most_likely_cause.clone().unwrap();
    assert!(
        cause.starts_with("torch (in 5 lockfiles) 2.6.0 → 2.7.0, with"),
        "{cause}"
    );
    assert!(
        md.contains("**Most likely cause:** torch"),
        "{}",
        &md[..300]
    );
    // One row per package, every lockfile listed on it.
    assert_eq!(report.changes.len(), 300);
    assert!(report.changes.iter().all(|c| c.lockfiles.len() == 5));
    // JSON keeps every change and shows the grouping.
    let json: serde_json::Value =
        serde_json::from_str(&render(&report, ReportFormat::Json, false)).unwrap();
    let grouped = json["changes"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|c| c["group"] == "torch (in 5 lockfiles)")
        .count();
    assert_eq!(grouped, 299);
}
