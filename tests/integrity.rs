//! Integrity: the fingerprint is checked on every read and `diff --strict` refuses a modified
//! manifest; no path written in a manifest is ever opened; `--private` leaves out or hashes
//! everything that names the user, the host or a folder outside the repository; real stamps
//! validate against the published JSON Schema (`docs/manifest.schema.json`, checked with the
//! `jsonschema` crate as an independent validator).

mod common;

use std::path::Path;
use std::process::Stdio;
use std::time::{Duration, Instant};

use common::{crate_path, git, repo_with, runprint};
use runprint::manifest::Manifest;

fn stamp(dir: &Path, out: &Path, args: &[&str], env: &[(&str, &str)]) -> Manifest {
    let result = runprint()
        .args(["stamp", "--quiet", "--repo"])
        .arg(dir)
        .arg("--out")
        .arg(out)
        .args(args)
        .envs(env.iter().copied())
        .output()
        .unwrap();
    assert!(
        result.status.success(),
        "{}",
        String::from_utf8_lossy(&result.stderr)
    );
    Manifest::load(out).unwrap()
}

#[test]
fn a_modified_manifest_is_reported_everywhere_and_refused_with_strict() {
    let repo = repo_with(&[("requirements.txt", "numpy==1.26.4\n")]);
    let dir = tempfile::tempdir().unwrap();
    let a = dir.path().join("a.toml");
    stamp(repo.path(), &a, &[], &[("OMP_NUM_THREADS", "4")]);
    let b = dir.path().join("b.toml");
    let text = std::fs::read_to_string(&a).unwrap();
    std::fs::write(
        &b,
        text.replace("OMP_NUM_THREADS = \"4\"", "OMP_NUM_THREADS = \"8\""),
    )
    .unwrap();
    assert!(Manifest::load(&b).unwrap().is_modified());
    for format in ["text", "json", "markdown"] {
        let out = runprint()
            .args(["diff", "--format", format])
            .arg(&a)
            .arg(&b)
            .output()
            .unwrap();
        let stdout = String::from_utf8_lossy(&out.stdout);
        assert!(stdout.contains("modified"), "{format}: {stdout}");
        assert_ne!(out.status.code(), Some(2));
    }
    let out = runprint()
        .args(["diff", "--strict"])
        .arg(&a)
        .arg(&b)
        .output()
        .unwrap();
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{stderr}");
    assert!(stderr.contains(&b.display().to_string()), "{stderr}");
    // Unmodified manifests compare normally under --strict.
    let out = runprint()
        .args(["diff", "--strict"])
        .arg(&a)
        .arg(&a)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0));
}

#[test]
fn no_path_in_a_manifest_is_ever_opened() {
    // Every lockfile and data path of the manifests is a FIFO: opening one for reading would
    // block until a writer appears, so a diff that opened any would never finish.
    let dir = tempfile::tempdir().unwrap();
    let fifo = |p: &Path| {
        std::fs::create_dir_all(p.parent().unwrap()).unwrap();
        let c = std::ffi::CString::new(p.to_str().unwrap()).unwrap();
        // SAFETY: a valid NUL-terminated path.
        assert_eq!(unsafe { libc::mkfifo(c.as_ptr(), 0o600) }, 0);
    };
    let sentinel = dir.path().join("sentinel");
    fifo(&sentinel);
    for rel in ["requirements.txt", "data/train", "Cargo.lock"] {
        fifo(&dir.path().join(rel));
    }
    let manifest = |label: &str, version: &str| {
        let mut content = runprint::manifest::Content::default();
        for path in [sentinel.to_str().unwrap(), "requirements.txt", "Cargo.lock"] {
            content.lockfiles.push(runprint::manifest::Lockfile {
                packages_omitted: None,
                path: path.into(),
                ecosystem: "pypi".into(),
                sha256: "00".into(),
                packages: vec![runprint::manifest::Package {
                    name: "numpy".into(),
                    version: version.into(),
                    ..Default::default()
                }],
                ..Default::default()
            });
        }
        for path in [sentinel.to_str().unwrap(), "data/train"] {
            content.data.push(runprint::manifest::DataInput {
                path: path.into(),
                kind: "folder".into(),
                sha256: format!("sha256:{}", &version.replace('.', "").repeat(64)[..64]),
                ..Default::default()
            });
        }
        Manifest::new(
            runprint::manifest::RunInfo {
                label: Some(label.into()),
                ..Default::default()
            },
            content,
        )
    };
    let old = dir.path().join("old.toml");
    let new = dir.path().join("new.json");
    std::fs::write(
        &old,
        manifest("old", "1.26.4").render(runprint::manifest::ManifestFormat::Toml),
    )
    .unwrap();
    std::fs::write(
        &new,
        manifest("new", "2.1.3").render(runprint::manifest::ManifestFormat::Json),
    )
    .unwrap();
    for format in ["text", "json", "markdown"] {
        let mut child = runprint()
            .current_dir(dir.path())
            .args(["diff", "--verbose", "--format", format])
            .arg(&old)
            .arg(&new)
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .spawn()
            .unwrap();
        let start = Instant::now();
        let status = loop {
            if let Some(s) = child.try_wait().unwrap() {
                break s;
            }
            if start.elapsed() > Duration::from_secs(30) {
                child.kill().unwrap();
                panic!("diff --format {format} blocked: it opened a path from a manifest");
            }
            std::thread::sleep(Duration::from_millis(20));
        };
        assert_eq!(status.code(), Some(4), "{format}");
    }
}

#[test]
fn private_leaves_out_user_host_and_outside_paths() {
    let repo = repo_with(&[("requirements.txt", "numpy==1.26.4\n")]);
    git(
        repo.path(),
        &[
            "remote",
            "add",
            "origin",
            "https://git.example.invalid/team/kelp.git",
        ],
    );
    // Files outside the repository, under a folder named after the (invented) user.
    let home = tempfile::tempdir().unwrap();
    let outside = home.path().join("zanthea-quill");
    std::fs::create_dir_all(&outside).unwrap();
    std::fs::write(outside.join("requirements.txt"), "scipy==1.11.4\n").unwrap();
    std::fs::write(outside.join("train.csv"), "1,2\n").unwrap();
    let out_dir = tempfile::tempdir().unwrap();
    let out = out_dir.path().join("m.toml");
    let args = [
        "--private",
        "--lockfile",
        outside.join("requirements.txt").to_str().unwrap(),
        "--data",
        outside.join("train.csv").to_str().unwrap(),
        "--data",
        outside.join("missing.csv").to_str().unwrap(),
    ]
    .map(str::to_string);
    let args: Vec<&str> = args.iter().map(String::as_str).collect();
    let m = stamp(
        repo.path(),
        &out,
        &args,
        &[
            ("USER", "zanthea"),
            ("VIRTUAL_ENV", outside.join(".venv").to_str().unwrap()),
            ("CONDA_DEFAULT_ENV", "zanthea-gpu"),
            ("OMP_NUM_THREADS", "4"),
        ],
    );
    let text = std::fs::read_to_string(&out).unwrap();
    assert!(!text.contains("zanthea"), "{text}");
    assert!(!text.contains(home.path().to_str().unwrap()), "{text}");
    assert!(m.run.hostname.is_none());
    assert!(m.content.git.remote.is_none());
    // What is kept still compares: relative paths, the thread count, hashed paths.
    assert!(m
        .content
        .lockfiles
        .iter()
        .any(|l| l.path == "requirements.txt"));
    assert!(m
        .content
        .lockfiles
        .iter()
        .any(|l| l.path.starts_with("private:sha256:")));
    assert_eq!(m.content.env.vars["OMP_NUM_THREADS"], "4");
    assert!(m.content.data[0].path.starts_with("private:sha256:"));
    assert!(m
        .run
        .warnings
        .iter()
        .any(|w| w.contains("missing.csv") || w.contains("private:sha256:")));
    // Two private stamps of the same state share the fingerprint.
    let out2 = out_dir.path().join("m2.toml");
    let m2 = stamp(
        repo.path(),
        &out2,
        &args,
        &[
            ("USER", "zanthea"),
            ("VIRTUAL_ENV", outside.join(".venv").to_str().unwrap()),
            ("CONDA_DEFAULT_ENV", "zanthea-gpu"),
            ("OMP_NUM_THREADS", "4"),
        ],
    );
    assert_eq!(m.fingerprint, m2.fingerprint);
}

#[test]
fn real_stamps_validate_against_the_published_json_schema() {
    let schema: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string(crate_path("docs/manifest.schema.json")).unwrap(),
    )
    .unwrap();
    let validator = jsonschema::validator_for(&schema).unwrap();
    let repo = repo_with(&[
        ("requirements.txt", "numpy==1.26.4 --hash=sha256:0f1f2a3b4c5d6e7f8091a2b3c4d5e6f708192a3b4c5d6e7f8091a2b3c4d5e6f7\n"),
        ("data/a.csv", "1\n"),
        ("requirements-bad.txt", "bad name!!\n"),
    ]);
    std::fs::write(repo.path().join("dirty.txt"), "x").unwrap();
    let dir = tempfile::tempdir().unwrap();
    let mut documents = Vec::new();
    for (name, args) in [
        ("a.json", vec!["--format", "json", "--data", "data"]),
        ("b.json", vec!["--format", "json", "--private"]),
    ] {
        let out = dir.path().join(name);
        let mut full = args.clone();
        if full.contains(&"data") {
            full.pop();
            full.push(repo.path().join("data").to_str().unwrap().to_owned().leak());
        }
        stamp(repo.path(), &out, &full, &[("OMP_NUM_THREADS", "4")]);
        documents.push((
            name.to_string(),
            serde_json::from_str::<serde_json::Value>(&std::fs::read_to_string(&out).unwrap())
                .unwrap(),
        ));
    }
    // The TOML form has the same structure.
    for demo in [
        "fixtures/demo/baseline.toml",
        "fixtures/demo/candidate.toml",
    ] {
        let m = Manifest::load(&crate_path(demo)).unwrap();
        documents.push((demo.to_string(), serde_json::to_value(&m).unwrap()));
    }
    for (name, doc) in &documents {
        let errors: Vec<String> = validator
            .iter_errors(doc)
            .map(|e| format!("{} at {}", e, e.instance_path()))
            .collect();
        assert!(errors.is_empty(), "{name}: {}", errors.join("\n"));
    }
    // The schema is not vacuous: a wrong type and an unknown field are caught.
    let mut bad = documents[0].1.clone();
    bad["schema-version"] = serde_json::json!("one");
    assert!(!validator.is_valid(&bad));
    let mut bad = documents[0].1.clone();
    bad["cpu"]["unknown-field"] = serde_json::json!(1);
    assert!(!validator.is_valid(&bad));
}
