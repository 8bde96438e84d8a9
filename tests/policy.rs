//! `runprint rules`, `runprint policy check` and `diff` under a policy file: valid files, every
//! kind of invalid file (each error names the file, line and key), `fail-on`, acceptances and
//! their expiry, and classes added by the policy. Manifests are stamped from real git
//! repositories made with the `git` executable.

mod common;

use std::path::Path;

use common::{crate_path, git, repo_with, runprint, stamp_to, write_files};
use serde::Deserialize;

#[derive(Debug, Deserialize)]
struct JsonReport {
    verdict: String,
    most_likely_cause: Option<String>,
    changes: Vec<JsonChange>,
    #[serde(default)]
    expired_acceptances: Vec<serde_json::Value>,
    #[serde(default)]
    notes: Vec<String>,
}

#[derive(Debug, Deserialize)]
struct JsonChange {
    impact: String,
    subject: String,
    reason: String,
    rule: String,
    source: String,
    accepted: Option<serde_json::Value>,
}

fn diff(old: &Path, new: &Path, cwd: &Path, extra: &[&str]) -> (i32, JsonReport) {
    common::diff_json(old, new, cwd, extra)
}

#[test]
fn docs_rules_md_is_generated_from_the_table() {
    let out = runprint()
        .args(["rules", "--format", "markdown"])
        .output()
        .unwrap();
    assert!(out.status.success());
    let generated = String::from_utf8(out.stdout).unwrap();
    let stored = std::fs::read_to_string(crate_path("docs/rules.md")).unwrap();
    assert!(
        generated == stored,
        "docs/rules.md is stale: run `cargo run -- rules --format markdown > docs/rules.md`"
    );
}

#[test]
fn rules_lists_every_rule_as_json_with_a_source() {
    let out = runprint()
        .args(["rules", "--format", "json"])
        .output()
        .unwrap();
    let rows: Vec<serde_json::Value> = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(rows.len(), runprint::diff::rules::all().count());
    assert!(rows.len() >= 60);
    for r in &rows {
        for key in ["id", "impact", "reason", "source", "title"] {
            assert!(r[key].as_str().is_some_and(|s| !s.is_empty()), "{key}: {r}");
        }
    }
    let text = runprint().arg("rules").output().unwrap();
    assert!(String::from_utf8_lossy(&text.stdout).contains("pkg.numpy.nep50"));
}

#[test]
fn policy_check_accepts_valid_files_and_rejects_each_kind_of_invalid_file() {
    let dir = tempfile::tempdir().unwrap();
    let write = |name: &str, text: &str| {
        let p = dir.path().join(name);
        std::fs::write(&p, text).unwrap();
        p
    };
    let good = write(
        "good.toml",
        "fail-on = \"retrain\"\n[paths]\nirrelevant = [\"notebooks/**\"]\n[packages]\ntooling = [\"kelp-logger\"]\n\
         [env]\nirrelevant = [\"TORCH_HOME\"]\n[[accept]]\nsubject = \"env OMP_NUM_THREADS\"\nreason = \"checked\"\nexpires = 2999-01-31\n",
    );
    let out = runprint()
        .args(["policy", "check"])
        .arg(&good)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0), "{out:?}");
    assert!(String::from_utf8_lossy(&out.stdout).contains("1 acceptance(s) (0 expired)"));
    // An empty file is the built-in behaviour and valid.
    let empty = write("empty.toml", "");
    let out = runprint()
        .args(["policy", "check"])
        .arg(&empty)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0));
    // (file, text, line, key, words in the message)
    let cases: &[(&str, &str, &str, &str, &str)] = &[
        ("syntax.toml", "[paths\ncode = []\n", "line 1", "", "invalid"),
        ("type.toml", "[paths]\ncode = \"src/**\"\n", "line 2", "paths.code", "invalid type"),
        ("unknown.toml", "[paths]\ncode = []\n\n[colours]\nred = 1\n", "line 4", "colours", "unknown field"),
        ("unknown-inner.toml", "[env]\nprecision = []\nspeed = [\"X\"]\n", "line 3", "env.speed", "unknown field"),
        ("glob.toml", "[packages]\nnumeric = [\"kelp-{a\"]\n", "line 2", "packages.numeric", "bad glob"),
        ("date.toml", "[[accept]]\nsubject = \"x\"\nreason = \"r\"\nexpires = \"2027-02-30\"\n", "line 4", "accept[0].expires", "not a date"),
        ("fail.toml", "fail-on = \"sometimes\"\n", "line 1", "fail-on", "unknown variant"),
        ("rule.toml", "[[accept]]\nsubject = \"x\"\nrule = \"no.such.rule\"\nreason = \"r\"\nexpires = 2030-01-01\n", "line 3", "accept[0].rule", "unknown rule"),
        ("noreason.toml", "[[accept]]\nsubject = \"x\"\nexpires = 2030-01-01\n", "line 1", "accept", "missing field"),
    ];
    for (name, text, line, key, words) in cases {
        let p = write(name, text);
        let out = runprint()
            .args(["policy", "check"])
            .arg(&p)
            .output()
            .unwrap();
        assert_eq!(out.status.code(), Some(2), "{name}");
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(err.contains(name), "{name}: {err}");
        assert!(err.contains(line), "{name}: {err}");
        assert!(err.contains(key), "{name}: {err}");
        assert!(err.contains(words), "{name}: {err}");
        assert!(!err.contains("panicked"));
    }
    // A missing file is bad input too.
    let out = runprint()
        .args(["policy", "check"])
        .arg(dir.path().join("absent.toml"))
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
}

#[test]
fn fail_on_changes_only_the_exit_code() {
    let repo = repo_with(&[("train.py", "\n")]);
    let out = tempfile::tempdir().unwrap();
    let (a, b) = (out.path().join("a.toml"), out.path().join("b.toml"));
    stamp_to(repo.path(), &a, &[("OMP_NUM_THREADS", "4")]);
    stamp_to(repo.path(), &b, &[("OMP_NUM_THREADS", "8")]);
    let (code, report) = diff(&a, &b, repo.path(), &[]);
    assert_eq!((code, report.verdict.as_str()), (3, "verify"));
    // The policy at the repository root is found without --policy.
    write_files(repo.path(), &[("runprint.toml", "fail-on = \"retrain\"\n")]);
    let (code, report) = diff(&a, &b, repo.path(), &[]);
    assert_eq!((code, report.verdict.as_str()), (0, "verify"));
    let never = out.path().join("never.toml");
    std::fs::write(&never, "fail-on = \"never\"\n").unwrap();
    let (code, _) = diff(&a, &b, repo.path(), &["--policy", never.to_str().unwrap()]);
    assert_eq!(code, 0);
    // An invalid policy is bad input, naming the file.
    let bad = out.path().join("bad.toml");
    std::fs::write(&bad, "fail-on = 1\n").unwrap();
    let result = runprint()
        .arg("diff")
        .arg(&a)
        .arg(&b)
        .args(["--policy", bad.to_str().unwrap()])
        .output()
        .unwrap();
    assert_eq!(result.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&result.stderr).contains("bad.toml"));
}

#[test]
fn acceptances_apply_until_their_date_and_expired_ones_are_reported() {
    let repo = repo_with(&[("train.py", "\n")]);
    let out = tempfile::tempdir().unwrap();
    let (a, b) = (out.path().join("a.toml"), out.path().join("b.toml"));
    stamp_to(
        repo.path(),
        &a,
        &[("OMP_NUM_THREADS", "8"), ("MKL_NUM_THREADS", "8")],
    );
    stamp_to(
        repo.path(),
        &b,
        &[("OMP_NUM_THREADS", "16"), ("MKL_NUM_THREADS", "16")],
    );
    let policy = out.path().join("p.toml");
    std::fs::write(
        &policy,
        "[[accept]]\nsubject = \"env OMP_NUM_THREADS\"\nrule = \"env.threads\"\nnew = \"16\"\n\
         reason = \"16-core nodes, metrics checked\"\nexpires = 2999-12-31\n\
         [[accept]]\nsubject = \"env MKL_*\"\nreason = \"old decision\"\nexpires = 2001-01-01\n",
    )
    .unwrap();
    let (code, report) = diff(&a, &b, repo.path(), &["--policy", policy.to_str().unwrap()]);
    // MKL's acceptance expired, so it still asks for verification.
    assert_eq!((code, report.verdict.as_str()), (3, "verify"));
    let omp = report
        .changes
        .iter()
        .find(|c| c.subject == "env OMP_NUM_THREADS")
        .unwrap();
    assert_eq!(omp.impact, "none");
    assert!(omp.accepted.is_some());
    assert!(omp.reason.contains("16-core nodes"), "{}", omp.reason);
    assert_eq!(omp.rule, "env.threads");
    let mkl = report
        .changes
        .iter()
        .find(|c| c.subject == "env MKL_NUM_THREADS")
        .unwrap();
    assert_eq!(mkl.impact, "verify");
    assert!(mkl.accepted.is_none());
    assert_eq!(report.expired_acceptances.len(), 1);
    assert!(report
        .notes
        .iter()
        .any(|n| n.contains("expired on 2001-01-01") && n.contains("env MKL_NUM_THREADS")));
    // With both accepted (MKL's renewed), the verdict is none and exits 0.
    std::fs::write(
        &policy,
        "[[accept]]\nsubject = \"env *_NUM_THREADS\"\nreason = \"renewed\"\nexpires = 2999-12-31\n",
    )
    .unwrap();
    let (code, report) = diff(&a, &b, repo.path(), &["--policy", policy.to_str().unwrap()]);
    assert_eq!((code, report.verdict.as_str()), (0, "none"));
    assert!(report.most_likely_cause.is_none());
    // policy check warns about an expired acceptance but the file is valid.
    std::fs::write(
        &policy,
        "[[accept]]\nsubject = \"x\"\nreason = \"r\"\nexpires = \"2001-01-01\"\n",
    )
    .unwrap();
    let check = runprint()
        .args(["policy", "check"])
        .arg(&policy)
        .output()
        .unwrap();
    assert_eq!(check.status.code(), Some(0));
    assert!(String::from_utf8_lossy(&check.stderr).contains("expired on 2001-01-01"));
}

#[test]
fn policy_classes_for_paths_packages_and_variables() {
    let repo = repo_with(&[
        ("train.py", "lr = 0.1\n"),
        ("notebooks/explore.py", "print(1)\n"),
        ("requirements.txt", "kelp-kernels==1.0.0\n"),
    ]);
    let out = tempfile::tempdir().unwrap();
    let (a, b) = (out.path().join("a.toml"), out.path().join("b.toml"));
    stamp_to(repo.path(), &a, &[("KELP_MATMUL_MODE", "fp32")]);
    write_files(
        repo.path(),
        &[
            ("notebooks/explore.py", "print(2)\n"),
            ("requirements.txt", "kelp-kernels==1.0.1\n"),
        ],
    );
    git(repo.path(), &["commit", "-qam", "notebook and patch"]);
    stamp_to(repo.path(), &b, &[]);
    // Without a policy: the notebook is code (retrain) and the unknown package's patch is none.
    let (code, report) = diff(&a, &b, repo.path(), &[]);
    assert_eq!(code, 4);
    let commit = report
        .changes
        .iter()
        .find(|c| c.subject == "commit")
        .unwrap();
    assert_eq!(commit.rule, "git.code");
    assert!(commit.reason.contains("notebooks/explore.py"));
    assert!(
        commit.reason.contains("dependencies requirements.txt"),
        "{}",
        commit.reason
    );
    let pkg = report
        .changes
        .iter()
        .find(|c| c.subject == "requirements.txt: kelp-kernels")
        .unwrap();
    assert_eq!(
        (pkg.impact.as_str(), pkg.rule.as_str()),
        ("none", "pkg.pure.patch")
    );
    assert!(pkg.reason.contains("heuristic"));
    // With the policy: notebooks are irrelevant, the package is numerical (patch: verify).
    std::fs::write(
        repo.path().join("runprint.toml"),
        "[paths]\nirrelevant = [\"notebooks/**\"]\n[packages]\nnumeric = [\"kelp-*\"]\n",
    )
    .unwrap();
    let (code, report) = diff(&a, &b, repo.path(), &[]);
    assert_eq!(code, 3, "{report:#?}");
    let commit = report
        .changes
        .iter()
        .find(|c| c.subject == "commit")
        .unwrap();
    assert_eq!(commit.impact, "none");
    let pkg = report
        .changes
        .iter()
        .find(|c| c.subject == "requirements.txt: kelp-kernels")
        .unwrap();
    assert_eq!(pkg.rule, "pkg.numeric.patch");
    assert!(pkg.reason.contains("policy file"));
    assert!(!pkg.source.is_empty());
    assert!(report.most_likely_cause.unwrap().contains("kelp-kernels"));
}
