//! `runprint fleet` on manifests written by real, concurrent `runprint stamp` processes (one per
//! simulated node) into one folder, as a launcher would start them. References: the processes
//! themselves (each writes one file, none collides), the environments each was given, and the
//! `diff` contract for verdicts and exit codes.

mod common;

use std::path::Path;
use std::process::Stdio;

use common::{repo_with, runprint, stamp_to, write_files};
use serde::Deserialize;

#[derive(Debug, Deserialize)]
struct JsonFleet {
    verdict: String,
    changes: Vec<JsonChange>,
    manifests: usize,
    groups: Vec<JsonGroup>,
}

#[derive(Debug, Deserialize)]
struct JsonChange {
    impact: String,
    subject: String,
    reason: String,
}

#[derive(Debug, Deserialize)]
struct JsonGroup {
    size: usize,
    majority: bool,
    impact: String,
    nodes: Vec<JsonNode>,
}

#[derive(Debug, Deserialize)]
struct JsonNode {
    file: String,
}

fn fleet_json(args: &[&Path], cwd: &Path) -> (i32, JsonFleet) {
    let out = runprint()
        .arg("fleet")
        .args(args)
        .args(["--format", "json"])
        .current_dir(cwd)
        .output()
        .unwrap();
    let report = serde_json::from_slice(&out.stdout).unwrap_or_else(|e| {
        panic!(
            "{e}: {}\n{}",
            String::from_utf8_lossy(&out.stdout),
            String::from_utf8_lossy(&out.stderr)
        )
    });
    (out.status.code().unwrap(), report)
}

fn rank(impact: &str) -> u8 {
    match impact {
        "retrain" => 2,
        "verify" => 1,
        "none" => 0,
        other => panic!("unknown impact {other}"),
    }
}

#[test]
fn eight_concurrent_nodes_into_one_folder_and_the_odd_ones_out() {
    let repo = repo_with(&[("train.py", "\n"), ("requirements.txt", "tqdm==4.66.4\n")]);
    let extra = tempfile::tempdir().unwrap();
    write_files(extra.path(), &[("requirements-node.txt", "numpy==2.1.3\n")]);
    let out = tempfile::tempdir().unwrap();

    // Eight stamping processes at once, like `srun` starting one task per node. Every node has
    // its own GPU list (expected to differ); node 3 runs another thread count, node 6 reads an
    // extra requirements file with another numpy.
    let children: Vec<_> = (0..8)
        .map(|i| {
            let mut cmd = runprint();
            cmd.args(["stamp", "--quiet", "--repo"])
                .arg(repo.path())
                .arg("--out")
                .arg(out.path().join(format!("node-{i}.toml")))
                .env("CUDA_VISIBLE_DEVICES", i.to_string())
                .env("OMP_NUM_THREADS", if i == 3 { "16" } else { "8" })
                .env("SLURM_PROCID", i.to_string())
                .stdout(Stdio::null())
                .stderr(Stdio::piped());
            if i == 6 {
                cmd.arg("--lockfile")
                    .arg(extra.path().join("requirements-node.txt"));
            }
            cmd.spawn().unwrap()
        })
        .collect();
    for child in children {
        let result = child.wait_with_output().unwrap();
        assert!(
            result.status.success(),
            "{}",
            String::from_utf8_lossy(&result.stderr)
        );
    }
    // No write collided: eight complete manifests and no temporary file.
    let names: Vec<String> = std::fs::read_dir(out.path())
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    assert_eq!(names.len(), 8, "{names:?}");
    for i in 0..8 {
        let m =
            runprint::manifest::Manifest::load(&out.path().join(format!("node-{i}.toml"))).unwrap();
        assert!(!m.is_modified());
        assert_eq!(m.content.env.vars["CUDA_VISIBLE_DEVICES"], i.to_string());
    }

    let (code, report) = fleet_json(&[out.path()], repo.path());
    assert_eq!(report.manifests, 8);
    assert_eq!((code, report.verdict.as_str()), (4, "retrain"));
    // Six nodes share the environment although their GPU lists differ.
    assert_eq!(report.groups.len(), 3);
    assert!(report.groups[0].majority);
    assert_eq!(report.groups[0].size, 6);
    // The odd ones out, worst first.
    let odd: Vec<(&str, &str)> = report.groups[1..]
        .iter()
        .map(|g| {
            (
                g.nodes[0].file.rsplit('/').next().unwrap(),
                g.impact.as_str(),
            )
        })
        .collect();
    assert_eq!(odd, [("node-6.toml", "retrain"), ("node-3.toml", "verify")]);
    assert!(report.groups[1..].iter().all(|g| g.size == 1));
    // Changes name the node, most important first.
    let ranks: Vec<u8> = report.changes.iter().map(|c| rank(&c.impact)).collect();
    assert!(ranks.windows(2).all(|w| w[0] >= w[1]), "{ranks:?}");
    let first = &report.changes[0];
    assert!(first.subject.contains("node-6.toml"), "{}", first.subject);
    // The whole extra lockfile is new on that node, with a numerical library in it.
    assert!(
        first.subject.ends_with("requirements-node.txt (pypi)"),
        "{}",
        first.subject
    );
    assert!(first.reason.contains("numpy"), "{}", first.reason);
    assert!(report
        .changes
        .iter()
        .any(|c| c.subject.contains("node-3.toml")
            && c.subject.ends_with("env OMP_NUM_THREADS")
            && c.impact == "verify"
            && !c.reason.is_empty()));
    assert!(!report
        .changes
        .iter()
        .any(|c| c.subject.contains("CUDA_VISIBLE_DEVICES")));

    // Text and Markdown say the same.
    let text = runprint().arg("fleet").arg(out.path()).output().unwrap();
    assert_eq!(text.status.code(), Some(4));
    let text = String::from_utf8(text.stdout).unwrap();
    assert!(text.starts_with("verdict: RETRAIN"), "{text}");
    assert!(text.contains("majority: 6 of 8"), "{text}");
    let md = runprint()
        .arg("fleet")
        .arg(out.path())
        .args(["--format", "markdown"])
        .output()
        .unwrap();
    let md = String::from_utf8(md.stdout).unwrap();
    assert!(md.starts_with("### runprint fleet: **retrain**"), "{md}");
    assert!(md.contains("| 1 | 6 | majority |"), "{md}");
}

#[test]
fn identical_nodes_are_one_group_and_exit_0() {
    let repo = repo_with(&[("train.py", "\n")]);
    let out = tempfile::tempdir().unwrap();
    let files: Vec<_> = (0..3)
        .map(|i| out.path().join(format!("n{i}.toml")))
        .collect();
    for (i, f) in files.iter().enumerate() {
        stamp_to(
            repo.path(),
            f,
            &[
                ("OMP_NUM_THREADS", "4"),
                ("CUDA_VISIBLE_DEVICES", &i.to_string()),
            ],
        );
    }
    let paths: Vec<&Path> = files.iter().map(|p| p.as_path()).collect();
    let (code, report) = fleet_json(&paths, repo.path());
    assert_eq!((code, report.verdict.as_str()), (0, "none"));
    assert_eq!(report.groups.len(), 1);
    assert!(report.changes.is_empty());
}

#[test]
fn a_node_seeing_fewer_gpus_is_flagged() {
    let repo = repo_with(&[("train.py", "\n")]);
    let out = tempfile::tempdir().unwrap();
    for (i, devices) in ["0,1", "2,3", "4"].iter().enumerate() {
        stamp_to(
            repo.path(),
            &out.path().join(format!("n{i}.toml")),
            &[("CUDA_VISIBLE_DEVICES", devices)],
        );
    }
    let (code, report) = fleet_json(&[out.path()], repo.path());
    assert_eq!(code, 3);
    let c = &report.changes[0];
    assert!(c.subject.contains("n2.toml") && c.subject.ends_with("env CUDA_VISIBLE_DEVICES"));
}

#[test]
fn a_broken_manifest_is_bad_input_naming_the_file() {
    let repo = repo_with(&[("train.py", "\n")]);
    let out = tempfile::tempdir().unwrap();
    stamp_to(repo.path(), &out.path().join("good.toml"), &[]);
    std::fs::write(
        out.path().join("bad.toml"),
        "schema-version = 1\nfingerprint = \n",
    )
    .unwrap();
    let result = runprint().arg("fleet").arg(out.path()).output().unwrap();
    assert_eq!(result.status.code(), Some(2));
    let err = String::from_utf8_lossy(&result.stderr);
    assert!(err.contains("bad.toml") && err.contains("line 2"), "{err}");

    let empty = tempfile::tempdir().unwrap();
    let result = runprint().arg("fleet").arg(empty.path()).output().unwrap();
    assert_eq!(result.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&result.stderr).contains("no manifests"));
}
