//! The Python lockfile parsers against files written by the real tools.
//!
//! Each test writes a small project in a temporary folder, has the real package manager lock
//! it (network to PyPI), reads the result with runprint, and compares the package list with the
//! tool's own listing of the same lock: `uv export`, `pip install --dry-run --report`,
//! `poetry show --format json`, `pdm export`, `pipenv requirements`, and `importlib.metadata`
//! for `pip freeze`.
//!
//! The tools live in the virtual environment that `.ci/run` creates (`.ci-venv/bin`), named by
//! `RUNPRINT_TEST_PYTHON_TOOLS`. Without that variable and without the folder, each test prints
//! why it is skipped; with the variable set, a missing tool is a failure.

use std::collections::BTreeSet;
use std::path::{Path, PathBuf};
use std::process::Command;

use runprint::lockfile::{Format, Parsed};

const TOOLS_VAR: &str = "RUNPRINT_TEST_PYTHON_TOOLS";

/// The path of a tool from the test venv, or `None` (after saying so) when the venv is absent.
fn tool(name: &str) -> Option<PathBuf> {
    let (dir, required) = match std::env::var_os(TOOLS_VAR) {
        Some(dir) => (PathBuf::from(dir), true),
        None => (
            Path::new(env!("CARGO_MANIFEST_DIR")).join(".ci-venv/bin"),
            false,
        ),
    };
    let path = dir.join(name);
    if path.is_file() {
        return Some(path);
    }
    assert!(
        !required,
        "{TOOLS_VAR} is set to `{}` but `{name}` is not there; run .ci/run to install it",
        dir.display()
    );
    eprintln!(
        "skipping: `{name}` not found in {} (run .ci/run, or set {TOOLS_VAR} to a folder holding pip, uv, poetry, pdm and pipenv)",
        dir.display()
    );
    None
}

/// Runs a tool in `dir` with a quiet, non-interactive environment; panics with its stderr when
/// it fails. Returns stdout.
fn run(program: &Path, dir: &Path, args: &[&str]) -> String {
    let out = Command::new(program)
        .args(args)
        .current_dir(dir)
        .env("NO_COLOR", "1")
        .env("PIP_DISABLE_PIP_VERSION_CHECK", "1")
        .env("PDM_CHECK_UPDATE", "false")
        .env("PIPENV_VENV_IN_PROJECT", "1")
        .env("PIPENV_YES", "1")
        .env("PIPENV_NOSPIN", "1")
        .env_remove("VIRTUAL_ENV")
        .output()
        .unwrap_or_else(|e| panic!("cannot run {}: {e}", program.display()));
    assert!(
        out.status.success(),
        "{} {args:?} failed:\n{}\n{}",
        program.display(),
        String::from_utf8_lossy(&out.stdout),
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8(out.stdout).expect("tool output is UTF-8")
}

fn parse_file(format: Format, path: &Path) -> Parsed {
    let text = std::fs::read_to_string(path).unwrap();
    let parsed = format
        .parse(&text, &path.display().to_string())
        .unwrap_or_else(|e| panic!("{e}"));
    assert!(parsed.warnings.is_empty(), "{:?}", parsed.warnings);
    parsed
}

/// PEP 503 normalization, written here independently of the crate (PEP 503, "Normalized Names":
/// `re.sub(r"[-_.]+", "-", name).lower()`).
fn pep503(name: &str) -> String {
    let mut out = String::new();
    for c in name.chars() {
        if matches!(c, '-' | '_' | '.') {
            if !out.ends_with('-') {
                out.push('-');
            }
        } else {
            out.push(c.to_ascii_lowercase());
        }
    }
    out
}

/// `name==version` pins from a tool's requirements-format listing: comment, option and
/// indented `# via` lines are skipped, markers cut off.
fn pins_from_listing(listing: &str) -> BTreeSet<(String, String)> {
    listing
        .lines()
        .filter(|l| !l.starts_with(['#', '-', ' ']) && !l.trim().is_empty())
        .map(|l| {
            let req = l.split(';').next().unwrap().trim();
            let (name, version) = req
                .split_once("==")
                .unwrap_or_else(|| panic!("not a pin: {l}"));
            (pep503(name.trim()), version.trim().to_string())
        })
        .collect()
}

fn pins<'a>(
    parsed: &'a Parsed,
    keep: impl Fn(&runprint::manifest::Package) -> bool + 'a,
) -> BTreeSet<(String, String)> {
    parsed
        .packages
        .iter()
        .filter(|p| keep(p))
        .map(|p| (p.name.clone(), p.version.clone()))
        .collect()
}

/// A project with three runtime dependencies (two with dependencies of their own), an extra and
/// a development group; `tool` adds what one tool needs.
fn write_project(dir: &Path, requires_python: &str, tool: &str) {
    let text = format!(
        "[project]\nname = \"demo-trainer\"\nversion = \"0.1.0\"\nrequires-python = \"{requires_python}\"\ndependencies = [\"numpy\", \"packaging\", \"requests\"]\n\n[project.optional-dependencies]\nplot = [\"pyparsing\"]\n\n{tool}"
    );
    std::fs::write(dir.join("pyproject.toml"), text).unwrap();
}

#[test]
fn uv_lock_agrees_with_uv_export() {
    let Some(uv) = tool("uv") else { return };
    let dir = tempfile::tempdir().unwrap();
    // `>=3.9` makes uv fork the resolution, so several versions of numpy are locked.
    write_project(
        dir.path(),
        ">=3.9",
        "[dependency-groups]\ndev = [\"pytest\"]\n",
    );
    run(&uv, dir.path(), &["lock", "--quiet"]);
    let parsed = parse_file(Format::UvLock, &dir.path().join("uv.lock"));
    assert!(parsed.format_version.as_deref().unwrap().starts_with("1"));
    let not_root = |p: &runprint::manifest::Package| p.name != "demo-trainer";

    let export = |extra: &[&str]| {
        let mut args = vec![
            "export",
            "--quiet",
            "--format",
            "requirements-txt",
            "--no-hashes",
            "--no-emit-project",
        ];
        args.extend_from_slice(extra);
        pins_from_listing(&run(&uv, dir.path(), &args))
    };
    // Every package and version, for every fork.
    let all = export(&["--all-extras", "--all-groups"]);
    assert!(
        all.iter().filter(|(n, _)| n == "numpy").count() > 1,
        "{all:?}"
    );
    assert_eq!(pins(&parsed, not_root), all);
    // Dev: what `--no-dev` leaves out.
    assert_eq!(
        pins(&parsed, |p| not_root(p) && !p.dev),
        export(&["--all-extras", "--no-dev"])
    );
    // Optional: what the plain export (no extras, no groups) leaves out of the non-dev set.
    assert_eq!(
        pins(&parsed, |p| not_root(p) && !p.dev && !p.optional),
        export(&["--no-dev"])
    );
    // Direct: exactly the names the pyproject above declares.
    let direct: BTreeSet<&str> = parsed
        .packages
        .iter()
        .filter(|p| p.direct == Some(true))
        .map(|p| p.name.as_str())
        .collect();
    assert_eq!(
        direct,
        BTreeSet::from(["numpy", "packaging", "pyparsing", "pytest", "requests"])
    );
    // Every registry package carries at least one hash, as `sha256:<64 hex>`.
    for p in parsed.packages.iter().filter(|p| not_root(p)) {
        assert!(!p.hashes.is_empty(), "{p:?}");
        assert!(p
            .hashes
            .iter()
            .all(|h| h.len() == 71 && h.starts_with("sha256:")));
    }
}

#[test]
fn pip_lock_agrees_with_pip_report() {
    let Some(pip) = tool("pip") else { return };
    let dir = tempfile::tempdir().unwrap();
    let reqs = ["numpy", "packaging", "requests"];
    let mut lock_args = vec!["lock", "--quiet", "-o", "pylock.toml"];
    lock_args.extend(reqs);
    run(&pip, dir.path(), &lock_args);
    let parsed = parse_file(Format::Pylock, &dir.path().join("pylock.toml"));
    assert_eq!(parsed.format_version.as_deref(), Some("1.0"));

    // pip's installation report ("Installation Report" in pip's docs) for the same request.
    let mut report_args = vec![
        "install",
        "--quiet",
        "--dry-run",
        "--ignore-installed",
        "--report",
        "report.json",
    ];
    report_args.extend(reqs);
    run(&pip, dir.path(), &report_args);
    let report: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.path().join("report.json")).unwrap())
            .unwrap();
    let install = report["install"].as_array().unwrap();
    let expected: BTreeSet<(String, String)> = install
        .iter()
        .map(|i| {
            (
                pep503(i["metadata"]["name"].as_str().unwrap()),
                i["metadata"]["version"].as_str().unwrap().to_string(),
            )
        })
        .collect();
    assert_eq!(pins(&parsed, |_| true), expected);
    // The artifact pip would download is among the hashes the lock records for it.
    for i in install {
        let name = pep503(i["metadata"]["name"].as_str().unwrap());
        let sha = i["download_info"]["archive_info"]["hashes"]["sha256"]
            .as_str()
            .unwrap();
        let p = parsed.packages.iter().find(|p| p.name == name).unwrap();
        assert!(
            p.hashes.contains(&format!("sha256:{sha}")),
            "{name}: {sha} not in {:?}",
            p.hashes
        );
    }
}

#[test]
fn pip_freeze_agrees_with_importlib_metadata() {
    let (Some(pip), Some(python)) = (tool("pip"), tool("python")) else {
        return;
    };
    let dir = tempfile::tempdir().unwrap();
    let frozen = run(&pip, dir.path(), &["freeze"]);
    std::fs::write(dir.path().join("requirements.txt"), &frozen).unwrap();
    let parsed = parse_file(Format::Requirements, &dir.path().join("requirements.txt"));
    // importlib.metadata lists what is installed; `pip freeze` leaves out pip's own tooling
    // (pip, setuptools, wheel, distribute: pip's `freeze` documentation).
    let listing = run(
        &python,
        dir.path(),
        &[
            "-c",
            "import importlib.metadata as m\nfor d in m.distributions(): print(d.metadata['Name'] + '==' + d.version)",
        ],
    );
    let skipped = ["pip", "setuptools", "wheel", "distribute"];
    let expected: BTreeSet<(String, String)> = pins_from_listing(&listing)
        .into_iter()
        .filter(|(n, _)| !skipped.contains(&n.as_str()))
        .collect();
    assert!(expected.len() > 20, "{expected:?}");
    assert_eq!(pins(&parsed, |_| true), expected);
}

#[test]
fn poetry_lock_agrees_with_poetry_show() {
    let Some(poetry) = tool("poetry") else { return };
    let dir = tempfile::tempdir().unwrap();
    write_project(
        dir.path(),
        ">=3.10",
        "[tool.poetry]\npackage-mode = false\n\n[tool.poetry.group.dev.dependencies]\npytest = \"*\"\n",
    );
    run(
        &poetry,
        dir.path(),
        &["lock", "--no-interaction", "--quiet"],
    );
    let parsed = parse_file(Format::PoetryLock, &dir.path().join("poetry.lock"));
    assert_eq!(parsed.format_version.as_deref(), Some("2.1"));
    let show = |extra: &[&str]| -> BTreeSet<(String, String)> {
        let mut args = vec!["show", "--no-ansi", "--no-interaction", "--format", "json"];
        args.extend_from_slice(extra);
        let listing: serde_json::Value =
            serde_json::from_str(&run(&poetry, dir.path(), &args)).unwrap();
        listing
            .as_array()
            .unwrap()
            .iter()
            .map(|p| {
                (
                    pep503(p["name"].as_str().unwrap()),
                    p["version"].as_str().unwrap().to_string(),
                )
            })
            .collect()
    };
    assert_eq!(pins(&parsed, |_| true), show(&["--all"]));
    // Dev: the packages outside the main group. (`--all`, which also lists packages for other
    // platforms, overrides `--only`; no main-group package here is platform-specific.)
    assert_eq!(pins(&parsed, |p| !p.dev), show(&["--only", "main"]));
    let pyparsing = parsed.packages.iter().find(|p| p.name == "pyparsing");
    assert!(pyparsing.unwrap().optional);
    assert!(parsed.packages.iter().all(|p| !p.hashes.is_empty()));
}

#[test]
fn pdm_lock_agrees_with_pdm_export() {
    let Some(pdm) = tool("pdm") else { return };
    let dir = tempfile::tempdir().unwrap();
    write_project(
        dir.path(),
        ">=3.10",
        "[dependency-groups]\ndev = [\"pytest\"]\n\n[tool.pdm]\ndistribution = false\n",
    );
    run(&pdm, dir.path(), &["lock", "--quiet", "-G", ":all"]);
    let parsed = parse_file(Format::PdmLock, &dir.path().join("pdm.lock"));
    assert!(parsed.format_version.as_deref().unwrap().starts_with("4."));
    let export = |extra: &[&str]| {
        let mut args = vec!["export", "-f", "requirements", "--without-hashes"];
        args.extend_from_slice(extra);
        pins_from_listing(&run(&pdm, dir.path(), &args))
    };
    assert_eq!(pins(&parsed, |_| true), export(&["-G", ":all"]));
    // Optional: outside what a production export of the default group holds.
    assert_eq!(pins(&parsed, |p| !p.optional), export(&["--prod"]));
    assert!(parsed.packages.iter().any(|p| p.name == "pytest" && p.dev));
    assert!(parsed.packages.iter().all(|p| !p.hashes.is_empty()));
}

#[test]
fn pipfile_lock_agrees_with_pipenv_requirements() {
    let Some(pipenv) = tool("pipenv") else { return };
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(
        dir.path().join("Pipfile"),
        "[[source]]\nurl = \"https://pypi.org/simple\"\nverify_ssl = true\nname = \"pypi\"\n\n[packages]\nnumpy = \"*\"\npackaging = \"*\"\nrequests = \"*\"\n\n[dev-packages]\npytest = \"*\"\n",
    )
    .unwrap();
    run(&pipenv, dir.path(), &["lock"]);
    let parsed = parse_file(Format::PipfileLock, &dir.path().join("Pipfile.lock"));
    assert_eq!(parsed.format_version.as_deref(), Some("6"));
    let default = pins_from_listing(&run(&pipenv, dir.path(), &["requirements"]));
    let develop = pins_from_listing(&run(&pipenv, dir.path(), &["requirements", "--dev-only"]));
    assert_eq!(pins(&parsed, |p| !p.dev), default);
    assert_eq!(
        pins(&parsed, |_| true),
        default.union(&develop).cloned().collect()
    );
    assert!(parsed.packages.iter().all(|p| !p.hashes.is_empty()));
}

#[test]
fn requirements_includes_are_merged_once() {
    // pip's "Requirements File Format": `-r`/`-c` paths are relative to the including file.
    let dir = tempfile::tempdir().unwrap();
    let root = dir.path();
    std::fs::create_dir(root.join("reqs")).unwrap();
    std::fs::write(
        root.join("requirements.txt"),
        "-r reqs/base.txt\n-c reqs/pins.txt\nnumpy==2.0.0\n",
    )
    .unwrap();
    // base.txt includes the top file again: the cycle must end.
    std::fs::write(
        root.join("reqs/base.txt"),
        "-r ../requirements.txt\npackaging==24.0\n",
    )
    .unwrap();
    std::fs::write(root.join("reqs/pins.txt"), "urllib3==2.2.1\n").unwrap();
    let mut warnings = Vec::new();
    let lockfiles = runprint::collect::lockfiles::collect(root, &[], &mut warnings);
    assert!(warnings.is_empty(), "{warnings:?}");
    assert_eq!(lockfiles.len(), 1);
    let got: Vec<(&str, &str, bool)> = lockfiles[0]
        .packages
        .iter()
        .map(|p| (p.name.as_str(), p.version.as_str(), p.optional))
        .collect();
    assert_eq!(
        got,
        [
            ("numpy", "2.0.0", false),
            ("packaging", "24.0", false),
            ("urllib3", "2.2.1", true)
        ]
    );

    std::fs::write(
        root.join("requirements.txt"),
        "-r missing.txt\nnumpy==2.0.0\n",
    )
    .unwrap();
    let mut warnings = Vec::new();
    let lockfiles = runprint::collect::lockfiles::collect(root, &[], &mut warnings);
    assert_eq!(lockfiles[0].packages.len(), 1);
    assert!(
        warnings.len() == 1 && warnings[0].contains("missing.txt"),
        "{warnings:?}"
    );
}

#[test]
fn conda_fixtures_are_found_and_read() {
    // No conda writer installs from PyPI, so these two files are hand-written after CEP 23 and
    // CEP 24 (see the comments at their top).
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("fixtures/lockfiles/python/conda");
    let mut warnings = Vec::new();
    let lockfiles = runprint::collect::lockfiles::collect(&root, &[], &mut warnings);
    assert!(warnings.is_empty(), "{warnings:?}");
    let paths: Vec<(&str, &str)> = lockfiles
        .iter()
        .map(|l| (l.path.as_str(), l.ecosystem.as_str()))
        .collect();
    assert_eq!(
        paths,
        [("environment.yml", "conda"), ("spec-file.txt", "conda")]
    );
    let env: Vec<(&str, &str, Option<&str>)> = lockfiles[0]
        .packages
        .iter()
        .map(|p| (p.name.as_str(), p.version.as_str(), p.source.as_deref()))
        .collect();
    assert_eq!(
        env,
        [
            (
                "_libgcc_mutex",
                "0.1",
                Some("_libgcc_mutex=0.1=conda_forge")
            ),
            (
                "demo-metrics",
                "0.3.1",
                Some("pypi+https://files.invalid/demo_metrics-0.3.1-py3-none-any.whl")
            ),
            (
                "libblas",
                "3.9.0",
                Some("libblas=3.9.0=20_linux64_openblas")
            ),
            ("numpy", "1.26.4", Some("numpy=1.26.4=py311h64a7726_0")),
            ("pip", "24.0", Some("conda-forge::pip=24.0=pyhd8ed1ab_0")),
            ("python", "3.11.7", Some("python=3.11.7=hab00c5b_1_cpython")),
            ("tqdm", "4.66.2", Some("pypi")),
        ]
    );
    let explicit: Vec<(&str, &str, Option<&str>, usize)> = lockfiles[1]
        .packages
        .iter()
        .map(|p| {
            (
                p.name.as_str(),
                p.version.as_str(),
                p.platform.as_deref(),
                p.hashes.len(),
            )
        })
        .collect();
    assert_eq!(
        explicit,
        [
            ("_libgcc_mutex", "0.1", Some("linux-64"), 1),
            ("libblas", "3.9.0", Some("linux-64"), 1),
            ("numpy", "1.26.4", Some("linux-64"), 1),
            ("pip", "24.0", Some("noarch"), 0),
        ]
    );
    assert_eq!(
        lockfiles[1].packages[2].hashes,
        ["sha256:3f4365e11b28e244c95ba8579942b0802761ba7bb31c026f50d1a9ea9c728149"]
    );
}

/// Runs a Python `script` that reads `input` as JSON on its standard input and prints JSON.
fn python_json<T: serde::de::DeserializeOwned>(
    python: &Path,
    script: &str,
    input: &[&str],
    cwd: Option<&Path>,
) -> T {
    use std::io::Write;
    let mut cmd = Command::new(python);
    cmd.args(["-c", script])
        .stdin(std::process::Stdio::piped())
        .stdout(std::process::Stdio::piped())
        .stderr(std::process::Stdio::piped());
    if let Some(dir) = cwd {
        cmd.current_dir(dir);
    }
    let mut child = cmd.spawn().unwrap();
    child
        .stdin
        .take()
        .unwrap()
        .write_all(serde_json::to_string(input).unwrap().as_bytes())
        .unwrap();
    let out = child.wait_with_output().unwrap();
    assert!(
        out.status.success(),
        "the Python reference failed: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    serde_json::from_slice(&out.stdout).unwrap()
}

/// Which requirement lines are whole requirements is decided as pip decides it: pip's own copy
/// of the `packaging` library (`pip._vendor.packaging.requirements.Requirement`, the PEP 508
/// parser pip uses for requirements files) is the reference. A line it refuses is a warning
/// for that line alone, and the file's other pins are kept; a line it accepts is recorded.
#[test]
fn requirement_lines_are_accepted_as_pips_parser_accepts_them() {
    let Some(python) = tool("python") else {
        return;
    };
    let lines = [
        "numpy==1.26.4 scipy==1.11.0",
        "numpy == 1.26.4",
        "requests (>=2.31, <3)",
        "foo ==1.0 bar",
        "torch>=2.1,<2.4",
        "numpy==1 0",
        "pkg===arbitrary",
        "scipy ~= 1.11.0",
        "tqdm >=4.66 <5",
        "Demo_Pkg[extra]==0.3.1 ; python_version >= \"3.10\"",
    ];
    let script = "import sys, json\n\
                  from pip._vendor.packaging.requirements import Requirement\n\
                  out = []\n\
                  for line in json.load(sys.stdin):\n\
                  \x20   try:\n\
                  \x20       Requirement(line); out.append(True)\n\
                  \x20   except Exception:\n\
                  \x20       out.append(False)\n\
                  print(json.dumps(out))\n";
    let pip_accepts: Vec<bool> = python_json(&python, script, &lines, None);
    // Both kinds occur, so the comparison is not trivial.
    assert!(pip_accepts.contains(&true) && pip_accepts.contains(&false));
    for (line, accepted) in lines.iter().zip(pip_accepts) {
        let text = format!("{line}\nkept==1.0\n");
        let parsed = Format::Requirements
            .parse(&text, "requirements.txt")
            .unwrap_or_else(|e| panic!("{line}: the whole file was refused: {e}"));
        let recorded = parsed.packages.len() == 2;
        assert_eq!(recorded, accepted, "{line}: {:?}", parsed.warnings);
        assert_eq!(parsed.warnings.is_empty(), accepted, "{line}");
        assert!(parsed.packages.iter().any(|p| p.name == "kept"), "{line}");
    }
}

/// Lines pip reads that are not `NAME SPECIFIER` (local projects with and without extras, a
/// bare VCS URL with `@ref`, a VCS URL with `#egg=` and `#subdirectory=`, a percent-encoded
/// wheel URL, `-e`): pip's own requirement-line reader (`install_req_from_line` and
/// `install_req_from_editable` of pip 26.3, the version `.ci/run` installs) is the reference.
/// Every line pip accepts keeps the file; where pip knows the name runprint records the same
/// (PEP 503 normalized), the version of a wheel is the one pip reads from its file name
/// (`Wheel(link.filename).version`), and the source is the location as written.
#[test]
fn lines_pip_reads_keep_the_file_and_agree_with_pip() {
    let Some(python) = tool("python") else {
        return;
    };
    let dir = tempfile::tempdir().unwrap();
    // Local projects, as pip requires them to exist (a `pyproject.toml` each).
    for project in ["", "libs/mylib", "libs/gpu_ops"] {
        let folder = dir.path().join(project);
        std::fs::create_dir_all(&folder).unwrap();
        std::fs::write(
            folder.join("pyproject.toml"),
            "[project]\nname = \"kelp-local\"\nversion = \"0.1\"\n",
        )
        .unwrap();
    }
    let lines = [
        ".",
        ".[ci]",
        "./libs/mylib",
        "./libs/gpu_ops[cuda]",
        "-e ./libs/mylib",
        "git+https://git.invalid/org/transformers@v4.40.0",
        "git+https://git.invalid/org/kernels.git@0123abc#egg=kelp-kernels&subdirectory=py",
        "https://files.invalid/whl/torch-2.3.1%2Bcpu-cp311-cp311-linux_x86_64.whl",
        "kelp-tools @ git+https://git.invalid/org/tools@v2 ; python_version >= \"3.10\"",
    ];
    let script = r#"
import json, sys
from pip._internal.req.constructors import install_req_from_line, install_req_from_editable
from pip._internal.models.wheel import Wheel
out = []
for line in json.load(sys.stdin):
    if line.startswith("-e "):
        r = install_req_from_editable(line[3:])
    else:
        r = install_req_from_line(line)
    name = r.name
    version = None
    if r.link is not None and r.link.filename.endswith(".whl"):
        w = Wheel(r.link.filename)
        name, version = w.name, str(w.version)
    out.append({"name": name, "version": version})
print(json.dumps(out))
"#;
    let pip: Vec<serde_json::Value> = python_json(&python, script, &lines, Some(dir.path()));
    let normalize = runprint::lockfile::requirements::normalize_name;
    for (line, pip) in lines.iter().zip(&pip) {
        let text = format!("{line}\nkept==1.0\n");
        let parsed = Format::Requirements
            .parse(&text, "requirements.txt")
            .unwrap_or_else(|e| panic!("{line}: the whole file was refused: {e}"));
        assert!(parsed.packages.iter().any(|p| p.name == "kept"), "{line}");
        let mine: Vec<_> = parsed
            .packages
            .iter()
            .filter(|p| p.name != "kept")
            .collect();
        match pip["name"].as_str() {
            Some(name) => {
                assert_eq!(mine.len(), 1, "{line}: {:?}", parsed.warnings);
                assert_eq!(mine[0].name, normalize(name), "{line}");
                if let Some(v) = pip["version"].as_str() {
                    assert_eq!(mine[0].version, v, "{line}");
                }
            }
            // pip reads the name from the project's metadata: runprint records the location
            // under the name it suggests, or warns for that line when it suggests none (`.`).
            // The file's own folder (`.`, `.[ci]`) is the repository's code, which the git
            // section records: nothing is added for it, and nothing is warned.
            None => {
                let written = line.trim_start_matches("-e ");
                if written == "." || written.starts_with(".[") {
                    assert!(mine.is_empty() && parsed.warnings.is_empty(), "{line}");
                    continue;
                }
                assert!(mine.len() == 1 || parsed.warnings.len() == 1, "{line}");
                if let Some(p) = mine.first() {
                    let source = p.source.as_deref().unwrap_or_default();
                    assert!(source.ends_with(written), "{line}: {source}");
                }
            }
        }
    }
}

/// A recorded Python version as the specifier clauses `packaging` prints for it, sorted: a
/// pinned version (`1.26.4`) as `==1.26.4`, a range as its clauses (the form the references
/// below compare with: `",".join(sorted(str(s) for s in SpecifierSet))`).
fn sorted_clauses(version: &str) -> String {
    let spec = if runprint::version::is_range(version) {
        version.to_string()
    } else {
        format!("=={version}")
    };
    let mut parts: Vec<&str> = spec.split(',').filter(|s| !s.is_empty()).collect();
    parts.sort_unstable();
    parts.join(",")
}

/// The declared dependencies of a `pyproject.toml` written by uv itself (`uv init`, `uv add
/// --frozen`, which edits the file without resolving): PEP 621 dependencies and extras and
/// PEP 735 groups. Reference: Python's `tomllib` and pip's copy of `packaging` (its PEP 508
/// `Requirement` and `SpecifierSet`, whose string form sorts the clauses), compared as sets
/// of (name, specifier clauses, marker, dev, optional).
#[test]
fn pyproject_written_by_uv_agrees_with_packaging() {
    let (Some(uv), Some(python)) = (tool("uv"), tool("python")) else {
        return;
    };
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    run(
        &uv,
        d,
        &[
            "init",
            "--quiet",
            "--bare",
            "--name",
            "kelp",
            "--no-workspace",
        ],
    );
    for args in [
        vec![
            "torch>=2.1,<2.4",
            "transformers[torch]>=4.40",
            "numpy<2; python_version < '3.12'",
        ],
        vec!["--dev", "pytest>=8", "ruff"],
        vec!["--optional", "gpu", "cupy-cuda12x==13.3.0"],
        vec!["--group", "train", "accelerate~=1.2"],
    ] {
        let mut all = vec!["add", "--frozen", "--quiet"];
        all.extend(args);
        run(&uv, d, &all);
    }
    let path = d.join("pyproject.toml");
    let parsed = parse_file(Format::Pyproject, &path);
    assert!(parsed.warnings.is_empty(), "{:?}", parsed.warnings);
    // (name, sorted clauses, marker, dev, optional), as runprint records them.
    type Row = (String, String, Option<String>, bool, bool);
    let ours: BTreeSet<Row> = parsed
        .packages
        .iter()
        .map(|p| {
            (
                p.name.clone(),
                sorted_clauses(&p.version),
                p.platform.clone().map(|m| m.replace(' ', "")),
                p.dev,
                p.optional,
            )
        })
        .collect();
    let script = r#"
import json, sys, tomllib
from pip._vendor.packaging.requirements import Requirement
from pip._vendor.packaging.utils import canonicalize_name
doc = tomllib.load(open(json.load(sys.stdin)[0], "rb"))
rows = []
def add(spec, dev, optional):
    r = Requirement(spec)
    clauses = ",".join(sorted(str(s) for s in r.specifier))
    marker = str(r.marker).replace(" ", "").replace('"', "'") if r.marker else None
    rows.append([canonicalize_name(r.name), clauses, marker, dev, optional])
for s in doc["project"].get("dependencies", []):
    add(s, False, False)
for extra, specs in doc["project"].get("optional-dependencies", {}).items():
    for s in specs:
        add(s, False, True)
for group, specs in doc.get("dependency-groups", {}).items():
    for s in specs:
        add(s, group == "dev", group != "dev")
print(json.dumps(rows))
"#;
    let rows: Vec<(String, String, Option<String>, bool, bool)> =
        python_json(&python, script, &[path.to_str().unwrap()], None);
    let reference: BTreeSet<Row> = rows.into_iter().collect();
    let ours: BTreeSet<Row> = ours
        .into_iter()
        .map(|(n, c, m, dev, opt)| (n, c, m.map(|m| m.replace('"', "'")), dev, opt))
        .collect();
    assert_eq!(ours, reference);
    assert_eq!(ours.len(), 7);
}

/// Poetry's own tables: the caret, tilde, wildcard and exact constraints of the Poetry
/// documentation ("Dependency specification"), with the reference being poetry-core itself
/// (`Factory().create_poetry(…)`, each dependency's `to_pep_508()`), read back with
/// `packaging` and compared as sorted specifier clauses.
#[test]
fn poetry_tables_agree_with_poetry_core() {
    let (Some(_), Some(python)) = (tool("poetry"), tool("python")) else {
        return;
    };
    let dir = tempfile::tempdir().unwrap();
    let text = r#"[tool.poetry]
name = "kelp"
version = "0.1.0"
description = ""
authors = ["Kelp Team <team@kelp.invalid>"]

[tool.poetry.dependencies]
python = "^3.10"
torch = "^2.1.0"
numpy = "~1.26"
scipy = "^0.19"
pandas = "2.2.*"
einops = "0.8.0"
tqdm = ">=4.60,<5"
safetensors = { version = "^0.4.2", optional = true }

[tool.poetry.group.dev.dependencies]
pytest = "^8.0"
"#;
    std::fs::write(dir.path().join("pyproject.toml"), text).unwrap();
    let parsed = parse_file(Format::Pyproject, &dir.path().join("pyproject.toml"));
    assert!(parsed.warnings.is_empty(), "{:?}", parsed.warnings);
    let ours: BTreeSet<(String, String)> = parsed
        .packages
        .iter()
        .map(|p| (p.name.clone(), sorted_clauses(&p.version)))
        .collect();
    let script = r#"
import json, sys
from pathlib import Path
from poetry.core.factory import Factory
from pip._vendor.packaging.requirements import Requirement
from pip._vendor.packaging.utils import canonicalize_name
poetry = Factory().create_poetry(Path(json.load(sys.stdin)[0]))
rows = []
for dep in poetry.package.all_requires:
    r = Requirement(dep.to_pep_508())
    rows.append([canonicalize_name(r.name), ",".join(sorted(str(s) for s in r.specifier))])
print(json.dumps(rows))
"#;
    let rows: Vec<(String, String)> =
        python_json(&python, script, &[dir.path().to_str().unwrap()], None);
    let reference: BTreeSet<(String, String)> = rows.into_iter().collect();
    assert_eq!(ours, reference);
}

/// `setup.cfg` as setuptools itself reads it (`setuptools.config.setupcfg.read_configuration`):
/// a dangling `install_requires` list with a marker and a comment, and one-line
/// `extras_require` values split at `;`, as setuptools' documentation example writes them.
#[test]
fn setup_cfg_agrees_with_setuptools() {
    let Some(python) = tool("python") else {
        return;
    };
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("setup.cfg");
    std::fs::write(
        &path,
        "[metadata]\nname = kelp\nversion = 0.1\n\n[options]\ninstall_requires =\n    requests\n    importlib-metadata; python_version<\"3.8\"\n    # pinned for the kernels\n    numpy>=1.20,<2\n\n[options.extras_require]\npdf = ReportLab>=1.2; RXP\nrest = docutils>=0.3; pack ==1.1, ==1.3\n",
    )
    .unwrap();
    let parsed = parse_file(Format::SetupCfg, &path);
    assert!(parsed.warnings.is_empty(), "{:?}", parsed.warnings);
    let ours: BTreeSet<(String, String, bool)> = parsed
        .packages
        .iter()
        .map(|p| (p.name.clone(), sorted_clauses(&p.version), p.optional))
        .collect();
    let script = r#"
import json, sys
from setuptools.config.setupcfg import read_configuration
from pip._vendor.packaging.requirements import Requirement
from pip._vendor.packaging.utils import canonicalize_name
opts = read_configuration(json.load(sys.stdin)[0])["options"]
rows = []
def add(spec, optional):
    r = Requirement(spec)
    rows.append([canonicalize_name(r.name), ",".join(sorted(str(s) for s in r.specifier)), optional])
for s in opts.get("install_requires", []):
    add(s, False)
for specs in opts.get("extras_require", {}).values():
    for s in specs:
        add(s, True)
print(json.dumps(rows))
"#;
    let rows: Vec<(String, String, bool)> =
        python_json(&python, script, &[path.to_str().unwrap()], None);
    assert_eq!(ours, rows.into_iter().collect::<BTreeSet<_>>());
    assert_eq!(ours.len(), 7);
}

/// The Python with conda-lock and py-rattler (`RUNPRINT_TEST_CONDA_TOOLS`, set by `.ci/run`),
/// or `None` after saying so.
fn conda_tools() -> Option<PathBuf> {
    match std::env::var_os("RUNPRINT_TEST_CONDA_TOOLS") {
        Some(p) => Some(PathBuf::from(p)),
        None => {
            eprintln!("skipping: RUNPRINT_TEST_CONDA_TOOLS is not set (run .ci/run)");
            None
        }
    }
}

/// `conda-lock.yml` and `pixi.lock` written by the tools' own writers (conda-lock 4.0's
/// `write_conda_lock_file`, py-rattler's `LockFile.to_path`, the rattler-lock code pixi
/// writes with) for a torch set locked for two platforms (a CUDA build on linux-64, a CPU
/// build on osx-arm64), a PyPI package beside them, and a test-only package. Reference: the
/// same libraries' readers (`parse_conda_lock_file`, `LockFile.from_path`), compared as sets of
/// (name, version, platform, URL).
#[test]
fn conda_lock_and_pixi_lock_agree_with_their_own_readers() {
    let Some(python) = conda_tools() else {
        return;
    };
    let dir = tempfile::tempdir().unwrap();
    let script = r#"
import json, sys
from pathlib import Path
d = Path(json.load(sys.stdin)[0])
from conda_lock.lockfile import write_conda_lock_file, parse_conda_lock_file
from conda_lock.lockfile.v2prelim.models import LockedDependency, Lockfile, LockMeta
from conda_lock.lockfile.v1.models import HashModel
from rattler import LockFile, PackageRecord, RepoDataRecord, LockPlatform, BuildString
CF = "https://conda.anaconda.org/conda-forge/"
conda = [
    ("pytorch", "2.5.1", "cuda126_py312h1763f6d_303", "linux-64", "linux-64", "main"),
    ("pytorch", "2.5.1", "cpu_generic_py312h1e1d7bd_3", "osx-arm64", "osx-arm64", "main"),
    ("numpy", "2.1.3", "py312h58c1407_0", "linux-64", "linux-64", "main"),
    ("numpy", "2.1.3", "py312h94ee1e1_0", "osx-arm64", "osx-arm64", "main"),
    ("pytest", "8.3.4", "pyhd8ed1ab_1", "noarch", "linux-64", "dev"),
]
pip = ("transformers", "4.46.3",
       "https://files.pythonhosted.org/packages/transformers-4.46.3-py3-none-any.whl", "linux-64")
deps = []
for i, (n, v, b, sub, plat, cat) in enumerate(conda):
    url = f"{CF}{sub}/{n}-{v}-{b}.conda"
    deps.append(LockedDependency(name=n, version=v, manager="conda", platform=plat, url=url,
        hash=HashModel(md5=f"{i:032x}", sha256=f"{i:064x}"), build=b, categories={cat}))
deps.append(LockedDependency(name=pip[0], version=pip[1], manager="pip", platform=pip[3],
    url=pip[2], hash=HashModel(sha256="f" * 64), categories={"main"}))
meta = LockMeta(content_hash={"linux-64": "a" * 64, "osx-arm64": "b" * 64},
    channels=[{"url": "conda-forge", "used_env_vars": []}], platforms=["linux-64", "osx-arm64"],
    sources=["environment.yml"])
write_conda_lock_file(Lockfile(package=deps, metadata=meta), d / "conda-lock.yml", metadata_choices=None)
platforms = {p: LockPlatform(p) for p in ["linux-64", "osx-arm64"]}
lf = LockFile(list(platforms.values()))
for i, (n, v, b, sub, plat, cat) in enumerate(conda):
    rec = PackageRecord(n, v, BuildString(b), 0, sub, sha256=bytes.fromhex(f"{i:064x}"),
        md5=bytes.fromhex(f"{i:032x}"))
    fn = f"{n}-{v}-{b}.conda"
    lf.add_conda_package("default" if cat == "main" else "test", platforms[plat],
        RepoDataRecord(rec, fn, f"{CF}{sub}/{fn}", CF))
lf.add_pypi_package("default", platforms[pip[3]], pip[0], pip[1], pip[2])
lf.to_path(str(d / "pixi.lock"))
rows = {"conda-lock.yml": [], "pixi.lock": []}
for p in parse_conda_lock_file(d / "conda-lock.yml").package:
    rows["conda-lock.yml"].append([p.name, p.version, p.platform, p.url])
for env_name, env in LockFile.from_path(str(d / "pixi.lock")).environments():
    for plat, pkgs in env.packages_by_platform().items():
        for p in pkgs:
            rows["pixi.lock"].append([p.name, str(p.version), str(plat), str(p.location)])
print(json.dumps(rows))
"#;
    let reference: std::collections::BTreeMap<String, Vec<(String, String, String, String)>> =
        python_json(&python, script, &[dir.path().to_str().unwrap()], None);
    for (file, format) in [
        ("conda-lock.yml", Format::CondaLock),
        ("pixi.lock", Format::PixiLock),
    ] {
        assert_eq!(Format::detect(file), Some(format));
        let parsed = parse_file(format, &dir.path().join(file));
        assert!(parsed.warnings.is_empty(), "{file}: {:?}", parsed.warnings);
        let ours: BTreeSet<(String, String, String, String)> = parsed
            .packages
            .iter()
            .map(|p| {
                (
                    p.name.clone(),
                    p.version.clone(),
                    p.platform.clone().unwrap(),
                    p.source.clone().unwrap(),
                )
            })
            .collect();
        let theirs: BTreeSet<_> = reference[file].iter().cloned().collect();
        assert_eq!(ours, theirs, "{file}");
        assert_eq!(ours.len(), 6, "{file}");
        // The test-only package is marked, the CUDA and CPU builds of torch stay apart.
        let pytest = parsed.packages.iter().find(|p| p.name == "pytest").unwrap();
        assert!(pytest.dev || pytest.optional, "{file}");
        let torch: Vec<_> = parsed
            .packages
            .iter()
            .filter(|p| p.name == "pytorch")
            .collect();
        assert_eq!(torch.len(), 2, "{file}");
        assert!(torch.iter().all(|p| !p.hashes.is_empty()), "{file}");
    }
}

/// A pinned file written by `uv pip compile --generate-hashes` for a torch + transformers set
/// resolved for Linux x86_64 (so torch's CUDA libraries, `nvidia-*-cu12`, are among the pins),
/// with its `via` comments and hash continuation lines. Reference: pip's own requirements-file
/// parser (`pip._internal.req.req_file.parse_requirements`), each pin as name, version and
/// hash set.
#[test]
fn uv_pip_compile_with_hashes_agrees_with_pips_parser() {
    let (Some(uv), Some(python)) = (tool("uv"), tool("python")) else {
        return;
    };
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(
        dir.path().join("requirements.in"),
        "torch==2.5.1\ntransformers[torch]>=4.46,<4.47\n",
    )
    .unwrap();
    run(
        &uv,
        dir.path(),
        &[
            "pip",
            "compile",
            "--quiet",
            "--generate-hashes",
            "--python-version",
            "3.11",
            "--python-platform",
            "x86_64-manylinux_2_28",
            "requirements.in",
            "-o",
            "requirements.txt",
        ],
    );
    let path = dir.path().join("requirements.txt");
    let parsed = parse_file(Format::Requirements, &path);
    assert!(parsed.warnings.is_empty(), "{:?}", parsed.warnings);
    let script = r#"
import json, sys
from pip._internal.req.req_file import parse_requirements
from pip._internal.network.session import PipSession
from pip._vendor.packaging.requirements import Requirement
from pip._vendor.packaging.utils import canonicalize_name
rows = []
for pr in parse_requirements(json.load(sys.stdin)[0], session=PipSession()):
    r = Requirement(pr.requirement)
    (spec,) = list(r.specifier)
    hashes = sorted(f"{algo}:{h}" for algo, hs in (pr.options or {}).get("hashes", {}).items() for h in hs)
    rows.append([canonicalize_name(r.name), spec.version, hashes])
print(json.dumps(rows))
"#;
    let rows: Vec<(String, String, Vec<String>)> =
        python_json(&python, script, &[path.to_str().unwrap()], None);
    let reference: BTreeSet<(String, String, Vec<String>)> = rows.into_iter().collect();
    let ours: BTreeSet<(String, String, Vec<String>)> = parsed
        .packages
        .iter()
        .map(|p| (p.name.clone(), p.version.clone(), p.hashes.clone()))
        .collect();
    assert_eq!(ours, reference);
    for name in [
        "torch",
        "transformers",
        "nvidia-cudnn-cu12",
        "nvidia-nccl-cu12",
    ] {
        assert!(
            ours.iter().any(|(n, _, h)| n == name && !h.is_empty()),
            "{name}"
        );
    }
    // The input it was compiled from is read as an input, and the pins decide.
    let input = parse_file(Format::RequirementsIn, &dir.path().join("requirements.in"));
    assert_eq!(input.packages.len(), 2);
    assert!(Format::RequirementsIn.is_input() && !Format::Requirements.is_input());
}

/// A uv workspace (uv documentation, "Workspaces": a root `pyproject.toml` with
/// `[tool.uv.workspace] members`, one `uv.lock` at the root for every member). Reference: uv's
/// own export of the whole workspace (`uv export --all-packages`), as name/version pins; and
/// each member's `pyproject.toml` is an input decided by the root lockfile.
#[test]
fn uv_workspace_lock_agrees_with_uv_export() {
    let Some(uv) = tool("uv") else { return };
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let write = |rel: &str, text: &str| {
        let p = d.join(rel);
        std::fs::create_dir_all(p.parent().unwrap()).unwrap();
        std::fs::write(p, text).unwrap();
    };
    write(
        "pyproject.toml",
        "[project]\nname = \"kelp\"\nversion = \"0.1.0\"\nrequires-python = \">=3.10\"\ndependencies = [\"kelp-train\", \"kelp-serve\"]\n\n[tool.uv.sources]\nkelp-train = { workspace = true }\nkelp-serve = { workspace = true }\n\n[tool.uv.workspace]\nmembers = [\"packages/*\"]\n",
    );
    write(
        "packages/train/pyproject.toml",
        "[project]\nname = \"kelp-train\"\nversion = \"0.1.0\"\nrequires-python = \">=3.10\"\ndependencies = [\"numpy>=1.26,<2.2\", \"scipy>=1.11\"]\n\n[build-system]\nrequires = [\"hatchling\"]\nbuild-backend = \"hatchling.build\"\n",
    );
    write(
        "packages/serve/pyproject.toml",
        "[project]\nname = \"kelp-serve\"\nversion = \"0.1.0\"\nrequires-python = \">=3.10\"\ndependencies = [\"requests>=2.31\"]\n\n[build-system]\nrequires = [\"hatchling\"]\nbuild-backend = \"hatchling.build\"\n",
    );
    run(&uv, d, &["lock", "--quiet"]);
    let parsed = parse_file(Format::UvLock, &d.join("uv.lock"));
    let export = run(
        &uv,
        d,
        &[
            "export",
            "--all-packages",
            "--frozen",
            "--no-hashes",
            "--no-emit-workspace",
            "--no-header",
            "--no-annotate",
        ],
    );
    let reference = pins_from_listing(&export);
    assert!(reference.iter().any(|(n, _)| n == "numpy"), "{export}");
    let ours: BTreeSet<(String, String)> = parsed
        .packages
        .iter()
        .filter(|p| !p.name.starts_with("kelp"))
        .map(|p| (p.name.clone(), p.version.clone()))
        .collect();
    assert_eq!(ours, reference);
    // Every member's pyproject.toml is found, and the root lockfile decides for it.
    let mut warnings = Vec::new();
    let lockfiles = runprint::collect::lockfiles::collect(d, &[], &mut warnings);
    let root_lock = lockfiles.iter().find(|l| l.path == "uv.lock").unwrap();
    for member in [
        "packages/train/pyproject.toml",
        "packages/serve/pyproject.toml",
    ] {
        let input = lockfiles
            .iter()
            .find(|l| l.path == member)
            .unwrap_or_else(|| panic!("{member} not read: {warnings:?}"));
        let decides = runprint::lockfile::deciding_lockfile(input, &lockfiles);
        assert_eq!(decides.map(|l| &l.path), Some(&root_lock.path), "{member}");
    }
}
