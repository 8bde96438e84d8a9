//! A labelled corpus of situations: each is built from real inputs (git repositories made with
//! the `git` executable, manifests written by `runprint stamp` with environment variables set
//! per stamp, lockfiles written by pip, uv, npm and cargo where the test environment has them,
//! and the Python environments of `.ci/run`), compared, and its verdict checked against a label
//! whose source is named beside it.
//!
//! Situations a single machine cannot produce (another CPU, C library, GPU stack or BLAS) are
//! made by editing one section of a real stamp and fingerprinting it again; the comment says so.
//!
//! The test asserts that every case labelled `retrain` is reported as `retrain` and that the
//! overall agreement is at least 95%; it prints the counts. Cases needing a tool are skipped
//! (and counted) only when the variable naming the tool is unset:
//! `RUNPRINT_TEST_STACK_PYTHON` / `_OLD`, `RUNPRINT_TEST_PYTHON_TOOLS`, `RUNPRINT_TEST_NODE_TOOLS`.

mod common;

use std::path::{Path, PathBuf};
use std::process::Command;

use common::{git, repo_with, runprint, write_files};
use runprint::diff::{Impact, Report};
use runprint::manifest::{Content, Manifest};
use runprint::policy::Policy;

struct Lab {
    out: tempfile::TempDir,
    n: usize,
    results: Vec<(String, Impact, Option<Impact>, String)>,
    skipped: Vec<(String, String)>,
}

impl Lab {
    fn new() -> Lab {
        Lab {
            out: tempfile::tempdir().unwrap(),
            n: 0,
            results: Vec::new(),
            skipped: Vec::new(),
        }
    }

    /// Stamps `dir` with the given variables and extra arguments.
    fn stamp(&mut self, dir: &Path, vars: &[(&str, &str)], args: &[&str]) -> Manifest {
        self.n += 1;
        let path = self.out.path().join(format!("{}.toml", self.n));
        let mut cmd = runprint();
        cmd.args(["stamp", "--quiet", "--repo"])
            .arg(dir)
            .arg("--out")
            .arg(&path)
            .args(args);
        for (k, v) in vars {
            cmd.env(k, v);
        }
        let r = cmd.output().unwrap();
        assert!(r.status.success(), "{}", String::from_utf8_lossy(&r.stderr));
        Manifest::load(&path).unwrap()
    }

    fn check(&mut self, name: &str, expected: Impact, old: &Manifest, new: &Manifest, repo: &Path) {
        let report = runprint::check::compare_in_repo(
            "old",
            old,
            "new",
            new,
            Some(repo),
            &Policy::default(),
        );
        self.record(name, expected, report);
    }

    fn record(&mut self, name: &str, expected: Impact, report: Report) {
        let top = report
            .changes
            .first()
            .map(|c| format!("{} [{}] {}", c.subject, c.rule.id, c.impact))
            .unwrap_or_default();
        self.results
            .push((name.into(), expected, Some(report.verdict), top));
    }

    fn skip(&mut self, name: &str, why: &str) {
        self.skipped.push((name.into(), why.into()));
    }
}

/// A copy of `base` with its content edited and its fingerprint computed again.
fn edited(base: &Manifest, f: impl FnOnce(&mut Content)) -> Manifest {
    let mut content = base.content.clone();
    f(&mut content);
    Manifest::new(base.run.clone(), content)
}

fn env_path(var: &str) -> Option<PathBuf> {
    std::env::var_os(var).map(PathBuf::from)
}

fn run_tool(program: &Path, dir: &Path, args: &[&str]) -> String {
    let out = Command::new(program)
        .args(args)
        .current_dir(dir)
        .env("NO_COLOR", "1")
        .env("PIP_DISABLE_PIP_VERSION_CHECK", "1")
        .env_remove("VIRTUAL_ENV")
        .output()
        .unwrap_or_else(|e| panic!("cannot run {}: {e}", program.display()));
    assert!(
        out.status.success(),
        "{} {args:?}: {}",
        program.display(),
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8(out.stdout).unwrap()
}

use Impact::{None as NONE, Retrain as RETRAIN, Verify as VERIFY};

/// A case: its name, the files or variables it sets, and its label.
type Step = (
    &'static str,
    &'static [(&'static str, &'static str)],
    Impact,
);

/// Environment variables, one stamp each, against a stamp without them.
fn env_cases(lab: &mut Lab) {
    let repo = repo_with(&[("train.py", "print(1)\n")]);
    let base = lab.stamp(repo.path(), &[], &[]);
    let cases: &[Step] = &[
        // numeric-facts B23; https://github.com/pytorch/pytorch/issues/88718
        ("OMP_NUM_THREADS set", &[("OMP_NUM_THREADS", "16")], VERIFY),
        // B20; https://github.com/OpenFAST/openfast/issues/29
        ("MKL_NUM_THREADS set", &[("MKL_NUM_THREADS", "4")], VERIFY),
        // B22; https://github.com/scikit-learn/scikit-learn/issues/18790
        (
            "OPENBLAS_NUM_THREADS set",
            &[("OPENBLAS_NUM_THREADS", "2")],
            VERIFY,
        ),
        // B15: oneMKL reproducibility conditions need a fixed thread count
        ("OMP_DYNAMIC set", &[("OMP_DYNAMIC", "true")], VERIFY),
        // common practice: placement variables steer the OpenMP pool
        ("KMP_AFFINITY set", &[("KMP_AFFINITY", "compact")], VERIFY),
        // G15; https://github.com/pytorch/pytorch/pull/77114
        (
            "NVIDIA_TF32_OVERRIDE=0",
            &[("NVIDIA_TF32_OVERRIDE", "0")],
            RETRAIN,
        ),
        // G15; PyTorch CUDA semantics notes on TF32
        (
            "TORCH_ALLOW_TF32_CUBLAS_OVERRIDE=1",
            &[("TORCH_ALLOW_TF32_CUBLAS_OVERRIDE", "1")],
            RETRAIN,
        ),
        // C5; oneDNN developer guide, floating-point math mode
        (
            "ONEDNN_DEFAULT_FPMATH_MODE=bf16",
            &[("ONEDNN_DEFAULT_FPMATH_MODE", "bf16")],
            RETRAIN,
        ),
        // G20; https://github.com/jax-ml/jax/issues/276
        (
            "XLA_FLAGS fast math",
            &[("XLA_FLAGS", "--xla_cpu_enable_fast_math=true")],
            RETRAIN,
        ),
        // G17; JAX docs "Matmul precision"
        (
            "JAX_DEFAULT_MATMUL_PRECISION=bfloat16",
            &[("JAX_DEFAULT_MATMUL_PRECISION", "bfloat16")],
            RETRAIN,
        ),
        // JAX docs on 64-bit precision: the default dtype changes from float32 (from memory)
        ("JAX_ENABLE_X64=1", &[("JAX_ENABLE_X64", "1")], RETRAIN),
        // ROCm counterpart of G15 (numeric-facts G15: ROCm/pytorch PR#1838)
        (
            "HIPBLASLT_ALLOW_TF32=1",
            &[("HIPBLASLT_ALLOW_TF32", "1")],
            RETRAIN,
        ),
        // G3; https://github.com/pytorch/pytorch/pull/41377
        (
            "CUBLAS_WORKSPACE_CONFIG",
            &[("CUBLAS_WORKSPACE_CONFIG", ":4096:8")],
            VERIFY,
        ),
        // G18; NVIDIA/framework-reproducibility
        (
            "TF_DETERMINISTIC_OPS=1",
            &[("TF_DETERMINISTIC_OPS", "1")],
            VERIFY,
        ),
        // G18: autotuning off
        (
            "TF_USE_CUDNN_AUTOTUNE=0",
            &[("TF_USE_CUDNN_AUTOTUNE", "0")],
            VERIFY,
        ),
        // P1; Python docs, PYTHONHASHSEED
        ("PYTHONHASHSEED=0", &[("PYTHONHASHSEED", "0")], VERIFY),
        // B10; https://github.com/OpenMathLib/OpenBLAS/issues/4510
        (
            "OPENBLAS_CORETYPE=HASWELL",
            &[("OPENBLAS_CORETYPE", "HASWELL")],
            VERIFY,
        ),
        // B19; oneMKL mkl_enable_instructions
        (
            "MKL_ENABLE_INSTRUCTIONS=AVX2",
            &[("MKL_ENABLE_INSTRUCTIONS", "AVX2")],
            VERIFY,
        ),
        // B14; oneMKL CNR guide
        ("MKL_CBWR=AVX2", &[("MKL_CBWR", "AVX2")], VERIFY),
        // C2; https://github.com/pytorch/pytorch/issues/82881
        (
            "ATEN_CPU_CAPABILITY=avx512",
            &[("ATEN_CPU_CAPABILITY", "avx512")],
            VERIFY,
        ),
        // C3; https://github.com/uxlfoundation/oneDNN/issues/829
        (
            "ONEDNN_MAX_CPU_ISA=AVX2",
            &[("ONEDNN_MAX_CPU_ISA", "AVX2")],
            VERIFY,
        ),
        // G22; https://github.com/tensorflow/tensorflow/issues/56697
        (
            "TF_ENABLE_ONEDNN_OPTS=0",
            &[("TF_ENABLE_ONEDNN_OPTS", "0")],
            VERIFY,
        ),
        // G23; https://github.com/NVIDIA/nccl/issues/1055
        ("NCCL_ALGO=Ring", &[("NCCL_ALGO", "Ring")], VERIFY),
        // G24; https://github.com/NVIDIA/nccl/issues/1055
        (
            "NCCL_MAX_NCHANNELS=16",
            &[("NCCL_MAX_NCHANNELS", "16")],
            VERIFY,
        ),
        // G1; cuBLAS "Results reproducibility"
        (
            "CUDA_VISIBLE_DEVICES=0,1",
            &[("CUDA_VISIBLE_DEVICES", "0,1")],
            VERIFY,
        ),
        // common practice: a preloaded library can replace BLAS
        (
            "LD_PRELOAD set",
            &[("LD_PRELOAD", "/opt/blas/libblas.so.3")],
            VERIFY,
        ),
        // H5 (verbosity variables have no numeric effect)
        ("NCCL_DEBUG=INFO", &[("NCCL_DEBUG", "INFO")], NONE),
        // H5
        ("OPENBLAS_VERBOSE=2", &[("OPENBLAS_VERBOSE", "2")], NONE),
        // H5 (TensorFlow's log level)
        (
            "TF_CPP_MIN_LOG_LEVEL=3",
            &[("TF_CPP_MIN_LOG_LEVEL", "3")],
            NONE,
        ),
        // common practice: a credential's presence does not change arithmetic
        (
            "credential variable",
            &[("TORCH_HUB_TOKEN", "hf_abcdefghijklmnopqrstuvwxyz0123")],
            NONE,
        ),
    ];
    for (name, vars, expected) in cases {
        let new = lab.stamp(repo.path(), vars, &[]);
        lab.check(name, *expected, &base, &new, repo.path());
    }
    // The same variable with the same value on both sides: nothing changed.
    let a = lab.stamp(repo.path(), &[("OMP_NUM_THREADS", "8")], &[]);
    let b = lab.stamp(repo.path(), &[("OMP_NUM_THREADS", "8")], &[]);
    // common practice: identical state
    lab.check("same variables twice", NONE, &a, &b, repo.path());
}

/// Variables that only name folders, print messages or belong to other tools, and a few that
/// do steer the arithmetic, one stamp each against a stamp without them.
fn more_env_cases(lab: &mut Lab) {
    let repo = repo_with(&[("train.py", "print(1)\n")]);
    let base = lab.stamp(repo.path(), &[], &[]);
    let cases: &[Step] = &[
        // PyTorch hub docs: TORCH_HOME is where downloaded weights are kept
        (
            "TORCH_HOME set",
            &[("TORCH_HOME", "/srv/cache/torch")],
            NONE,
        ),
        // Hugging Face hub docs: HF_HOME is the cache folder
        ("HF_HOME set", &[("HF_HOME", "/srv/cache/hf")], NONE),
        // XDG Base Directory specification: a cache location
        (
            "XDG_CACHE_HOME set",
            &[("XDG_CACHE_HOME", "/srv/cache")],
            NONE,
        ),
        // CUDA programming guide, JIT cache: where compiled kernels are kept
        (
            "CUDA_CACHE_PATH set",
            &[("CUDA_CACHE_PATH", "/srv/cache/nv")],
            NONE,
        ),
        // PyTorch inductor config: the compile cache folder
        (
            "TORCHINDUCTOR_CACHE_DIR set",
            &[("TORCHINDUCTOR_CACHE_DIR", "/srv/cache/inductor")],
            NONE,
        ),
        // PyTorch docs: C++ stack traces in error messages only
        (
            "TORCH_SHOW_CPP_STACKTRACES=1",
            &[("TORCH_SHOW_CPP_STACKTRACES", "1")],
            NONE,
        ),
        // PyTorch logging docs: TORCH_LOGS selects log output
        ("TORCH_LOGS=+dynamo", &[("TORCH_LOGS", "+dynamo")], NONE),
        // NCCL environment variables: NCCL_DEBUG_SUBSYS filters debug output
        (
            "NCCL_DEBUG_SUBSYS=ALL",
            &[("NCCL_DEBUG_SUBSYS", "ALL")],
            NONE,
        ),
        // XLA flags (debug_options_flags.cc): --xla_dump_to writes HLO dumps only
        (
            "XLA_FLAGS dump only",
            &[("XLA_FLAGS", "--xla_dump_to=/tmp/xla")],
            NONE,
        ),
        // XLA flags: deterministic GPU ops switch kernels
        (
            "XLA_FLAGS deterministic ops",
            &[("XLA_FLAGS", "--xla_gpu_deterministic_ops=true")],
            VERIFY,
        ),
        // Terraform CLI environment variables reference: not TensorFlow's
        (
            "TF_CLI_CONFIG_FILE set",
            &[("TF_CLI_CONFIG_FILE", "/home/ops/.terraformrc")],
            NONE,
        ),
        // Terraform: input variables
        ("TF_VAR_region set", &[("TF_VAR_region", "north-1")], NONE),
        // Python docs: PYTHONHASHSEED=random is the default behaviour
        (
            "PYTHONHASHSEED=random",
            &[("PYTHONHASHSEED", "random")],
            NONE,
        ),
        // OpenMP 5.2 spec, OMP_PLACES: thread placement
        ("OMP_PLACES=cores", &[("OMP_PLACES", "cores")], VERIFY),
        // oneMKL developer guide: MKL_THREADING_LAYER picks the threading runtime
        (
            "MKL_THREADING_LAYER=GNU",
            &[("MKL_THREADING_LAYER", "GNU")],
            VERIFY,
        ),
    ];
    for (name, vars, expected) in cases {
        let new = lab.stamp(repo.path(), vars, &[]);
        lab.check(name, *expected, &base, &new, repo.path());
    }
    // Python docs: PYTHONHASHSEED=random and unset behave the same.
    let random = lab.stamp(repo.path(), &[("PYTHONHASHSEED", "random")], &[]);
    let fixed = lab.stamp(repo.path(), &[("PYTHONHASHSEED", "0")], &[]);
    lab.check(
        "PYTHONHASHSEED random -> 0",
        VERIFY,
        &random,
        &fixed,
        repo.path(),
    );
}

/// Packages the tables know as infrastructure, profiling or metapackages, build labels and
/// calendar versions: requirements-file commits in one repository (pip's requirements-file
/// format), each against the commit before.
fn package_cases(lab: &mut Lab) {
    let pins = |extra: &str| format!("numpy==2.1.3\n{extra}");
    let repo = repo_with(&[
        ("train.py", "import numpy\n"),
        ("requirements.txt", "numpy==2.1.3\n"),
    ]);
    let dir = repo.path().to_path_buf();
    let mut prev = lab.stamp(&dir, &[], &[]);
    // (name, requirements after the commit, label); each line's source is on the line above.
    let steps: &[(&str, &str, Impact)] = &[
        // grpcio's PyPI description: an RPC framework (moves bytes)
        ("pkg: add grpcio", "grpcio==1.66.1\n", NONE),
        ("pkg: grpcio minor", "grpcio==1.67.0\n", NONE),
        // OpenTelemetry Python docs: telemetry API and SDK
        ("pkg: add opentelemetry-sdk", "grpcio==1.67.0\nopentelemetry-sdk==1.27.0\n", NONE),
        ("pkg: opentelemetry-sdk minor", "grpcio==1.67.0\nopentelemetry-sdk==1.28.0\n", NONE),
        // certifi's PyPI description: a CA bundle; calver.org: 2024 -> 2025 is not a major change
        ("pkg: certifi calendar release", "grpcio==1.67.0\nopentelemetry-sdk==1.28.0\ncertifi==2024.8.30\n", NONE),
        ("pkg: certifi next year", "grpcio==1.67.0\nopentelemetry-sdk==1.28.0\ncertifi==2025.1.31\n", NONE),
        // filelock's PyPI description: a platform-independent file lock
        ("pkg: add filelock", "grpcio==1.67.0\nopentelemetry-sdk==1.28.0\ncertifi==2025.1.31\nfilelock==3.16.1\n", NONE),
        // PyPA: pip, setuptools and wheel install and build packages
        ("pkg: pip, setuptools, wheel pinned", "grpcio==1.67.0\nopentelemetry-sdk==1.28.0\ncertifi==2025.1.31\nfilelock==3.16.1\npip==24.2\nsetuptools==75.1.0\nwheel==0.44.0\n", NONE),
        ("pkg: setuptools major", "grpcio==1.67.0\nopentelemetry-sdk==1.28.0\ncertifi==2025.1.31\nfilelock==3.16.1\npip==24.2\nsetuptools==80.9.0\nwheel==0.44.0\n", NONE),
        // loguru's PyPI description: logging
        ("pkg: add loguru", "loguru==0.7.2\n", NONE),
        // NVIDIA Nsight docs: NVTX annotates ranges, CUPTI profiles, cuFile does GPU I/O
        ("pkg: add nvidia-nvtx-cu12", "loguru==0.7.2\nnvidia-nvtx-cu12==12.4.127\n", NONE),
        ("pkg: nvidia-nvtx-cu12 minor", "loguru==0.7.2\nnvidia-nvtx-cu12==12.6.77\n", NONE),
        ("pkg: nvidia-cuda-cupti-cu12 minor", "loguru==0.7.2\nnvidia-nvtx-cu12==12.6.77\nnvidia-cuda-cupti-cu12==12.6.80\n", NONE),
        ("pkg: add nvidia-cufile-cu12", "loguru==0.7.2\nnvidia-nvtx-cu12==12.6.77\nnvidia-cuda-cupti-cu12==12.6.80\nnvidia-cufile-cu12==1.11.1.6\n", NONE),
        // NVIDIA's cuda-toolkit metapackage installs the component wheels, compared one by one
        ("pkg: add cuda-toolkit metapackage", "loguru==0.7.2\ncuda-toolkit==12.6.3\n", NONE),
        // cuDNN "Reproducibility": identical bits only within one version (numerical library)
        ("pkg: nvidia-cudnn-cu12 minor", "loguru==0.7.2\ncuda-toolkit==12.6.3\nnvidia-cudnn-cu12==9.1.0.70\n", RETRAIN),
        ("pkg: nvidia-cudnn-cu12 9.1 -> 9.5", "loguru==0.7.2\ncuda-toolkit==12.6.3\nnvidia-cudnn-cu12==9.5.1.17\n", RETRAIN),
        // PEP 440 local labels: a kernel wheel built for CUDA 12.3 and torch 2.5 is compiled code
        ("pkg: add a +cu123torch2.5 kernel wheel", "loguru==0.7.2\ncuda-toolkit==12.6.3\nnvidia-cudnn-cu12==9.5.1.17\nkelp-attention==2.7.3+cu123torch2.5\n", VERIFY),
        ("pkg: +cu123torch2.5 kernel wheel patch", "loguru==0.7.2\ncuda-toolkit==12.6.3\nnvidia-cudnn-cu12==9.5.1.17\nkelp-attention==2.7.4+cu123torch2.5\n", VERIFY),
    ];
    for (name, extra, expected) in steps {
        write_files(&dir, &[("requirements.txt", &pins(extra))]);
        git(&dir, &["commit", "-qam", name]);
        let next = lab.stamp(&dir, &[], &[]);
        lab.check(name, *expected, &prev, &next, &dir);
        prev = next;
    }
}

/// A realistic monorepo: a training package, a serving package, a web dashboard, CI
/// workflows, tests, container and build recipes. Every commit is stamped without a declared
/// scope: harmless files are recognised by their path class alone.
fn monorepo_cases(lab: &mut Lab) {
    let repo = repo_with(MONOREPO);
    let dir = repo.path().to_path_buf();
    let mut prev = lab.stamp(&dir, &[], &[]);
    let steps: &[Step] = &[
        // pytest good practices: tests live in tests/ and test_*.py
        (
            "mono: tests/ file",
            &[(
                "training/tests/test_model.py",
                "def test_x():\n    assert 2\n",
            )],
            NONE,
        ),
        (
            "mono: test_*.py beside the code",
            &[("serving/test_api.py", "def test_api():\n    pass\n")],
            NONE,
        ),
        // pytest: conftest.py holds fixtures
        (
            "mono: conftest.py",
            &[("conftest.py", "import pytest\n")],
            NONE,
        ),
        // Go: *_test.go files are built only by `go test`
        (
            "mono: Go test file",
            &[("tools/sync/sync_test.go", "package main\n")],
            NONE,
        ),
        // GitHub Actions workflow syntax: workflows run in CI only
        (
            "mono: CI workflow",
            &[(".github/workflows/ci.yml", "on: [push, pull_request]\n")],
            NONE,
        ),
        // Jenkins pipeline docs
        (
            "mono: Jenkinsfile",
            &[("Jenkinsfile", "pipeline { agent any }\n")],
            NONE,
        ),
        // Dockerfile reference: a build recipe; what it installs is compared as packages
        (
            "mono: Dockerfile",
            &[("Dockerfile", "FROM python:3.12-slim\nRUN pip install uv\n")],
            NONE,
        ),
        (
            "mono: docker-compose.yml",
            &[("docker-compose.yml", "services:\n  web: {}\n")],
            NONE,
        ),
        (
            "mono: .dockerignore",
            &[(".dockerignore", ".git\n.venv\n")],
            NONE,
        ),
        // GNU make manual: a Makefile builds targets
        (
            "mono: Makefile",
            &[("Makefile", "test:\n\tpytest -q\n")],
            NONE,
        ),
        // Nix flakes: flake.lock pins the development shell's inputs
        (
            "mono: flake.lock",
            &[("flake.lock", "{\"version\": 7, \"nodes\": {}}\n")],
            NONE,
        ),
        // gitattributes(5), EditorConfig, pre-commit: repository metadata and tool settings
        (
            "mono: .gitattributes",
            &[(".gitattributes", "*.parquet filter=lfs\n")],
            NONE,
        ),
        (
            "mono: .editorconfig",
            &[(".editorconfig", "root = true\n[*]\nindent_size = 2\n")],
            NONE,
        ),
        (
            "mono: .pre-commit-config.yaml",
            &[(".pre-commit-config.yaml", "repos: []\n")],
            NONE,
        ),
        (
            "mono: CODEOWNERS",
            &[(".github/CODEOWNERS", "* @kelp-team\n")],
            NONE,
        ),
        // pip-tools: requirements.in is the input pip-compile resolves into requirements.txt
        (
            "mono: requirements.in",
            &[("training/requirements.in", "numpy\ntorch\n")],
            NONE,
        ),
        // Go modules reference: go.sum holds checksums of module versions
        (
            "mono: go.sum",
            &[("tools/sync/go.sum", "example.invalid/x v1.0.0 h1:abc=\n")],
            NONE,
        ),
        // setuptools: setup.cfg declares metadata and dependencies
        (
            "mono: setup.cfg",
            &[(
                "serving/setup.cfg",
                "[metadata]\nname = kelp-serving\nversion = 0.2\n",
            )],
            NONE,
        ),
        // Jupyter: notebooks are run by hand
        (
            "mono: notebook",
            &[(
                "notebooks/explore.ipynb",
                "{\"cells\": [], \"nbformat\": 4, \"nbformat_minor\": 5}\n",
            )],
            NONE,
        ),
        // common practice: benchmarks are not training
        (
            "mono: benchmark",
            &[("benchmarks/bench_loader.py", "print(2)\n")],
            NONE,
        ),
        // Dockerfile reference, FROM: the base image is a dependency. Python docs, random:
        // a new minor release may change random's streams (runprint's python.minor rule)
        (
            "mono: base image python 3.12 -> 3.13",
            &[("Dockerfile", "FROM python:3.13-slim\nRUN pip install uv\n")],
            RETRAIN,
        ),
        // Python docs, random: bug-fix releases keep the streams (python.micro)
        (
            "mono: base image python 3.13 -> 3.13.1",
            &[(
                "Dockerfile",
                "FROM python:3.13.1-slim\nRUN pip install uv\n",
            )],
            VERIFY,
        ),
        // cuBLAS "Results reproducibility": identical bits only within one toolkit version
        (
            "mono: serving image from a CUDA base",
            &[(
                "serving/Dockerfile",
                "FROM nvidia/cuda:12.4.1-runtime-ubuntu22.04\n",
            )],
            RETRAIN,
        ),
        (
            "mono: CUDA base image 12.4 -> 12.8",
            &[(
                "serving/Dockerfile",
                "FROM nvidia/cuda:12.8.0-runtime-ubuntu22.04\n",
            )],
            RETRAIN,
        ),
        // Dockerfile reference: a RUN line changes no base image
        (
            "mono: Dockerfile RUN line only",
            &[(
                "serving/Dockerfile",
                "FROM nvidia/cuda:12.8.0-runtime-ubuntu22.04\nRUN echo ready\n",
            )],
            NONE,
        ),
        // common practice: a program under a data folder is code, not data
        (
            "mono: Python module under data/",
            &[(
                "training/src/kelp_train/data/loader.py",
                "import numpy\nBATCH = 64\n",
            )],
            RETRAIN,
        ),
        // common practice: the training program changed
        (
            "mono: training code",
            &[("training/src/kelp_train/model.py", "LAYERS = 4\n")],
            RETRAIN,
        ),
        // common practice: tracked data
        (
            "mono: data table",
            &[("training/data/labels.csv", "id,label\n1,b\n")],
            RETRAIN,
        ),
    ];
    for (name, files, expected) in steps {
        write_files(&dir, files);
        git(&dir, &["add", "-A"]);
        git(&dir, &["commit", "-qm", name]);
        let next = lab.stamp(&dir, &[], &[]);
        lab.check(name, *expected, &prev, &next, &dir);
        prev = next;
    }
    // git-diff(1) --find-renames: a rename with identical content
    git(&dir, &["mv", "serving/app.py", "serving/server.py"]);
    git(&dir, &["commit", "-qm", "rename"]);
    let next = lab.stamp(&dir, &[], &[]);
    lab.check("mono: rename, same content", NONE, &prev, &next, &dir);
    prev = next;
    // The same rename in training code, but edited too: code changed.
    git(
        &dir,
        &[
            "mv",
            "training/src/kelp_train/layers.py",
            "training/src/kelp_train/blocks.py",
        ],
    );
    write_files(
        &dir,
        &[("training/src/kelp_train/blocks.py", "WIDTH = 256\n")],
    );
    git(&dir, &["commit", "-qam", "rename and edit"]);
    let next = lab.stamp(&dir, &[], &[]);
    lab.check("mono: rename with an edit", RETRAIN, &prev, &next, &dir);
}

/// A scope stamped with a real interpreter (the numpy/scipy/scikit-learn environment of
/// `.ci/run`): the packages the job can load come from the installed `Requires-Dist`, so a
/// package pinned beside them that the job never imports is out of scope, and one it imports
/// through scikit-learn is not.
fn scope_with_interpreter_cases(lab: &mut Lab, python: &Path) {
    let freeze = run_tool(python, Path::new("."), &["-m", "pip", "freeze"]);
    let pins: String = freeze
        .lines()
        .filter(|l| l.contains("=="))
        .map(|l| format!("{l}\n"))
        .collect();
    let repo = repo_with(&[
        (
            "train.py",
            "from sklearn.linear_model import LogisticRegression\n",
        ),
        ("requirements.txt", &format!("{pins}fastapi==0.115.0\n")),
    ]);
    let dir = repo.path();
    let py = python.to_str().unwrap();
    let args = ["--python", py, "--entry", "train.py"];
    let a = lab.stamp(dir, &[], &args);
    assert!(
        a.content
            .scope
            .as_ref()
            .is_some_and(|s| s.packages.is_some()),
        "{:?}",
        a.content.scope
    );
    write_files(
        dir,
        &[("requirements.txt", &format!("{pins}fastapi==0.115.6\n"))],
    );
    git(dir, &["commit", "-qam", "fastapi"]);
    let b = lab.stamp(dir, &[], &args);
    // runprint.toml [scope]: the job does not import fastapi, directly or through a dependency
    // (importlib.metadata.requires of what it imports, checked in tests/scope.rs)
    lab.check("scope+python: unimported package bumped", NONE, &a, &b, dir);
    let threadpool = pins
        .lines()
        .find(|l| l.starts_with("threadpoolctl=="))
        .unwrap_or("threadpoolctl==3.5.0")
        .to_string();
    let bumped = pins.replace(&threadpool, "threadpoolctl==1.0.0");
    write_files(
        dir,
        &[("requirements.txt", &format!("{bumped}fastapi==0.115.6\n"))],
    );
    git(dir, &["commit", "-qam", "threadpoolctl"]);
    let c = lab.stamp(dir, &[], &args);
    // scikit-learn requires threadpoolctl (its Requires-Dist): reached through a dependency, a
    // pure-Python package's downgrade keeps its verdict
    lab.check(
        "scope+python: dependency of an imported package",
        VERIFY,
        &b,
        &c,
        dir,
    );
}

/// The monorepo's files (an invented scenario).
const MONOREPO: &[(&str, &str)] = &[
    ("README.md", "# kelp\n"),
    (
        "training/pyproject.toml",
        "[project]\nname = \"kelp-train\"\nversion = \"0.1\"\n",
    ),
    (
        "training/train.py",
        "from kelp_train import model\nfrom kelp_train.data import loader\nimport yaml\n",
    ),
    ("training/src/kelp_train/__init__.py", ""),
    (
        "training/src/kelp_train/model.py",
        "from .layers import WIDTH\nLAYERS = 3\n",
    ),
    ("training/src/kelp_train/layers.py", "WIDTH = 128\n"),
    ("training/src/kelp_train/export.py", "import json\n"),
    ("training/src/kelp_train/data/__init__.py", ""),
    (
        "training/src/kelp_train/data/loader.py",
        "import numpy\nBATCH = 32\n",
    ),
    ("training/requirements.txt", "numpy==2.1.3\npyyaml==6.0.2\n"),
    ("training/data/labels.csv", "id,label\n1,a\n"),
    (
        "training/tests/test_model.py",
        "def test_x():\n    assert 1\n",
    ),
    ("configs/model.yaml", "lr: 0.1\n"),
    ("deploy/values.yaml", "replicas: 2\n"),
    ("serving/app.py", "import fastapi\n"),
    (
        "serving/requirements.txt",
        "fastapi==0.115.0\nuvicorn==0.30.6\n",
    ),
    (
        "dashboard/package.json",
        "{\"name\": \"kelp-dashboard\", \"private\": true}\n",
    ),
    ("dashboard/src/app.ts", "export const x = 1;\n"),
    ("scripts/export_onnx.py", "import kelp_train.export\n"),
    ("kernels/fused.cu", "__global__ void k() {}\n"),
    ("tools/sync/main.go", "package main\n"),
    ("Dockerfile", "FROM python:3.12-slim\n"),
    ("Makefile", "train:\n\tpython training/train.py\n"),
    (".github/workflows/ci.yml", "on: push\n"),
];

/// The same monorepo with the training job's scope declared in runprint.toml: changes the
/// job cannot see are `none`, and everything it imports, reads or installs keeps its verdict.
fn scope_cases(lab: &mut Lab) {
    let mut files = MONOREPO.to_vec();
    files.push((
        "runprint.toml",
        "[scope]\nentry = [\"training/train.py\"]\nlockfiles = [\"training/requirements.txt\"]\nreads = [\"configs/**\", \"training/data/**\"]\n",
    ));
    let repo = repo_with(&files);
    let dir = repo.path().to_path_buf();
    let mut prev = lab.stamp(&dir, &[], &[]);
    assert!(
        prev.content.scope.as_ref().is_some_and(|s| s.complete),
        "{:?}",
        prev.content.scope
    );
    let steps: &[Step] = &[
        // runprint.toml [scope]: not imported by the entry point
        (
            "scope: serving code",
            &[("serving/app.py", "import fastapi\nimport uvicorn\n")],
            NONE,
        ),
        (
            "scope: dashboard code",
            &[("dashboard/src/app.ts", "export const x = 2;\n")],
            NONE,
        ),
        (
            "scope: serving lockfile bump",
            &[(
                "serving/requirements.txt",
                "fastapi==0.115.6\nuvicorn==0.32.1\n",
            )],
            NONE,
        ),
        (
            "scope: script outside the closure",
            &[(
                "scripts/export_onnx.py",
                "import kelp_train.export\nprint(1)\n",
            )],
            NONE,
        ),
        (
            "scope: unimported training module",
            &[(
                "training/src/kelp_train/export.py",
                "import json\nimport csv\n",
            )],
            NONE,
        ),
        (
            "scope: configuration it does not read",
            &[("deploy/values.yaml", "replicas: 3\n")],
            NONE,
        ),
        // runprint.toml [scope] reads configs/**: configuration sets hyperparameters
        (
            "scope: configuration it reads",
            &[("configs/model.yaml", "lr: 0.2\n")],
            RETRAIN,
        ),
        (
            "scope: data it reads",
            &[("training/data/labels.csv", "id,label\n1,c\n")],
            RETRAIN,
        ),
        // common practice: in the closure
        (
            "scope: imported module",
            &[("training/src/kelp_train/layers.py", "WIDTH = 512\n")],
            RETRAIN,
        ),
        (
            "scope: module under data/ in the closure",
            &[(
                "training/src/kelp_train/data/loader.py",
                "import numpy\nBATCH = 16\n",
            )],
            RETRAIN,
        ),
        // common practice: a newly imported module and the importer both change
        (
            "scope: new module imported",
            &[
                ("training/src/kelp_train/aug.py", "FLIP = True\n"),
                (
                    "training/src/kelp_train/model.py",
                    "from .layers import WIDTH\nfrom . import aug\nLAYERS = 3\n",
                ),
            ],
            RETRAIN,
        ),
        // NEP 50: numpy 2.x in the lockfile the job installs from
        (
            "scope: its lockfile bumps numpy",
            &[("training/requirements.txt", "numpy==2.2.0\npyyaml==6.0.2\n")],
            RETRAIN,
        ),
        // runprint.toml [scope] lockfiles: the serving image is not what the job runs in
        (
            "scope: serving base image",
            &[(
                "serving/Dockerfile",
                "FROM nvidia/cuda:12.8.0-runtime-ubuntu22.04\n",
            )],
            NONE,
        ),
        // torch.utils.cpp_extension.load compiles sources at run time: kept conservative
        (
            "scope: CUDA kernel source",
            &[("kernels/fused.cu", "__global__ void k() { }\n")],
            RETRAIN,
        ),
    ];
    for (name, files, expected) in steps {
        write_files(&dir, files);
        git(&dir, &["add", "-A"]);
        git(&dir, &["commit", "-qm", name]);
        let next = lab.stamp(&dir, &[], &[]);
        lab.check(name, *expected, &prev, &next, &dir);
        prev = next;
    }
    // A dynamic import makes the closure incomplete: an unimported module's change is then
    // judged as code again (the scope must never hide a real retrain).
    write_files(
        &dir,
        &[(
            "training/train.py",
            "import importlib, sys\nfrom kelp_train import model\nfrom kelp_train.data import loader\nimport yaml\nplugin = importlib.import_module(sys.argv[1])\n",
        )],
    );
    git(&dir, &["commit", "-qam", "plugins"]);
    let dynamic = lab.stamp(&dir, &[], &[]);
    write_files(
        &dir,
        &[(
            "training/src/kelp_train/export.py",
            "import json\nimport csv\nimport io\n",
        )],
    );
    git(&dir, &["commit", "-qam", "export"]);
    let next = lab.stamp(&dir, &[], &[]);
    lab.check(
        "scope: incomplete closure keeps code changes",
        RETRAIN,
        &dynamic,
        &next,
        &dir,
    );
    // Without a scope on one side the comparison judges by path classes alone.
    let unscoped = {
        let mut m = next.clone();
        m.content.scope = None;
        m
    };
    write_files(&dir, &[("serving/app.py", "import fastapi\nprint(3)\n")]);
    git(&dir, &["commit", "-qam", "serving"]);
    let scoped = lab.stamp(&dir, &[], &[]);
    lab.check(
        "scope: one side without a scope",
        RETRAIN,
        &unscoped,
        &scoped,
        &dir,
    );
}

/// Commits and uncommitted changes in one repository, stamped after each step.
fn git_cases(lab: &mut Lab) {
    let repo = repo_with(&[
        ("train.py", "lr = 0.1\n"),
        ("model/net.py", "layers = 3\n"),
        ("configs/base.yaml", "batch: 32\n"),
        ("README.md", "# kelp\n"),
        ("docs/guide.txt", "a\n"),
        ("data/labels.csv", "id,label\n1,a\n"),
        ("LICENSE", "MIT\n"),
        (
            "requirements.txt",
            "numpy==1.26.4\ntqdm==4.66.4\nattrs==23.1.0\n",
        ),
    ]);
    let dir = repo.path().to_path_buf();
    let mut prev = lab.stamp(&dir, &[], &[]);
    // (name, files to write, expected, source)
    let steps: &[Step] = &[
        // common practice: documentation is not read by training
        ("commit: README only", &[("README.md", "# kelp\nMore.\n")], NONE),
        // common practice
        ("commit: docs folder only", &[("docs/guide.txt", "b\n")], NONE),
        // common practice: licence text
        ("commit: LICENSE only", &[("LICENSE", "MIT or Apache-2.0\n")], NONE),
        // common practice: the training program changed
        ("commit: training script", &[("train.py", "lr = 0.2\n")], RETRAIN),
        // common practice
        ("commit: model module", &[("model/net.py", "layers = 4\n")], RETRAIN),
        // common practice: configuration sets hyperparameters
        ("commit: configuration", &[("configs/base.yaml", "batch: 64\n")], RETRAIN),
        // common practice: tracked data
        ("commit: data file", &[("data/labels.csv", "id,label\n1,b\n")], RETRAIN),
        // common practice: code and docs together, code decides
        ("commit: code and docs", &[("train.py", "lr = 0.3\n"), ("README.md", "# kelp v2\n")], RETRAIN),
        // numeric-facts P5 (NEP 50): numpy 2.0
        ("commit: requirements numpy 1.26.4 -> 2.1.3", &[("requirements.txt", "numpy==2.1.3\ntqdm==4.66.4\nattrs==23.1.0\n")], RETRAIN),
        // H1: patch release on the numeric path, rerun and compare
        ("commit: requirements numpy 2.1.3 -> 2.1.4", &[("requirements.txt", "numpy==2.1.4\ntqdm==4.66.4\nattrs==23.1.0\n")], VERIFY),
        // H5: progress bars are not arithmetic
        ("commit: requirements tqdm minor", &[("requirements.txt", "numpy==2.1.4\ntqdm==4.67.1\nattrs==23.1.0\n")], NONE),
        // SemVer 2.0.0 item 6: patch of a pure-Python utility
        ("commit: requirements attrs patch", &[("requirements.txt", "numpy==2.1.4\ntqdm==4.67.1\nattrs==23.1.1\n")], NONE),
        // common practice: attrs writes class boilerplate and validators (its own PyPI
        // description) and computes nothing
        ("commit: requirements attrs major", &[("requirements.txt", "numpy==2.1.4\ntqdm==4.67.1\nattrs==24.1.0\n")], NONE),
        // P22: https://github.com/pandas-dev/pandas/issues/25307 (optional package changes numerics)
        ("commit: requirements add bottleneck", &[("requirements.txt", "numpy==2.1.4\ntqdm==4.67.1\nattrs==24.1.0\nbottleneck==1.3.8\n")], RETRAIN),
        // P12: scikit-learn "changed models" in every minor release
        ("commit: requirements add then bump scikit-learn 1.3 -> 1.4 (add)", &[("requirements.txt", "numpy==2.1.4\ntqdm==4.67.1\nattrs==24.1.0\nbottleneck==1.3.8\nscikit-learn==1.3.2\n")], RETRAIN),
        // P10/P12: https://github.com/scikit-learn/scikit-learn/issues/25022
        ("commit: requirements scikit-learn 1.3.2 -> 1.4.0", &[("requirements.txt", "numpy==2.1.4\ntqdm==4.67.1\nattrs==24.1.0\nbottleneck==1.3.8\nscikit-learn==1.4.0\n")], RETRAIN),
        // P23: https://github.com/pandas-dev/pandas/issues/46072
        ("commit: requirements pandas 1.5.3 (added) ", &[("requirements.txt", "numpy==2.1.4\ntqdm==4.67.1\nattrs==24.1.0\nbottleneck==1.3.8\nscikit-learn==1.4.0\npandas==1.5.3\n")], RETRAIN),
        ("commit: requirements pandas 1.5.3 -> 2.0.0", &[("requirements.txt", "numpy==2.1.4\ntqdm==4.67.1\nattrs==24.1.0\nbottleneck==1.3.8\nscikit-learn==1.4.0\npandas==2.0.0\n")], RETRAIN),
        // G12: https://github.com/pytorch/pytorch/issues/67384 (torch 1.12 TF32 default)
        ("commit: requirements torch 1.11.0 (added)", &[("requirements.txt", "numpy==2.1.4\ntqdm==4.67.1\nattrs==24.1.0\nbottleneck==1.3.8\nscikit-learn==1.4.0\npandas==2.0.0\ntorch==1.11.0\n")], RETRAIN),
        ("commit: requirements torch 1.11.0 -> 1.12.0", &[("requirements.txt", "numpy==2.1.4\ntqdm==4.67.1\nattrs==24.1.0\nbottleneck==1.3.8\nscikit-learn==1.4.0\npandas==2.0.0\ntorch==1.12.0\n")], RETRAIN),
        // H3 and G1: another CUDA build of the same version
        ("commit: requirements torch 1.12.0 -> 1.12.0+cu121", &[("requirements.txt", "numpy==2.1.4\ntqdm==4.67.1\nattrs==24.1.0\nbottleneck==1.3.8\nscikit-learn==1.4.0\npandas==2.0.0\ntorch==1.12.0+cu121\n")], VERIFY),
        // H3 and G8: CPU build against a CUDA build
        ("commit: requirements torch +cu121 -> +cpu", &[("requirements.txt", "numpy==2.1.4\ntqdm==4.67.1\nattrs==24.1.0\nbottleneck==1.3.8\nscikit-learn==1.4.0\npandas==2.0.0\ntorch==1.12.0+cpu\n")], RETRAIN),
        // PEP 440 / SemVer item 9: a pre-release of a numerical library
        ("commit: requirements numpy pre-release", &[("requirements.txt", "numpy==2.2.0rc1\ntqdm==4.67.1\nattrs==24.1.0\nbottleneck==1.3.8\nscikit-learn==1.4.0\npandas==2.0.0\ntorch==1.12.0+cpu\n")], RETRAIN),
        // G8: a downgrade undoes release changes
        ("commit: requirements numpy downgrade", &[("requirements.txt", "numpy==2.0.2\ntqdm==4.67.1\nattrs==24.1.0\nbottleneck==1.3.8\nscikit-learn==1.4.0\npandas==2.0.0\ntorch==1.12.0+cpu\n")], RETRAIN),
        // common practice: removing attrs can make an import fail, not change a result
        ("commit: requirements remove attrs", &[("requirements.txt", "numpy==2.0.2\ntqdm==4.67.1\nbottleneck==1.3.8\nscikit-learn==1.4.0\npandas==2.0.0\ntorch==1.12.0+cpu\n")], NONE),
        // H5 and PEP 440 post-releases: a progress bar's post-release
        ("commit: requirements tqdm post-release", &[("requirements.txt", "numpy==2.0.2\ntqdm==4.67.1.post1\nbottleneck==1.3.8\nscikit-learn==1.4.0\npandas==2.0.0\ntorch==1.12.0+cpu\n")], NONE),
    ];
    for (name, files, expected) in steps {
        write_files(&dir, files);
        git(&dir, &["commit", "-qam", name]);
        let next = lab.stamp(&dir, &[], &[]);
        lab.check(name, *expected, &prev, &next, &dir);
        prev = next;
    }
    // A commit changing no file (common practice: the same files run).
    git(&dir, &["commit", "-q", "--allow-empty", "-m", "empty"]);
    let next = lab.stamp(&dir, &[], &[]);
    lab.check("commit: no file changed", NONE, &prev, &next, &dir);
    prev = next;
    // Another branch at the same commit (common practice: the commit decides).
    git(&dir, &["checkout", "-q", "-b", "experiment"]);
    let next = lab.stamp(&dir, &[], &[]);
    lab.check("branch name only", NONE, &prev, &next, &dir);
    prev = next;
    // Commits that cannot be listed (common practice: cannot rule out a code change).
    let elsewhere = tempfile::tempdir().unwrap();
    write_files(&dir, &[("README.md", "# kelp v3\n")]);
    git(&dir, &["commit", "-qam", "docs"]);
    let next = lab.stamp(&dir, &[], &[]);
    lab.check(
        "commit: files not listable",
        RETRAIN,
        &prev,
        &next,
        elsewhere.path(),
    );
    prev = next;
    // Uncommitted changes, against the clean state.
    let dirty: &[Step] = &[
        // common practice
        (
            "uncommitted: training script",
            &[("train.py", "lr = 0.9\n")],
            RETRAIN,
        ),
        // common practice
        ("uncommitted: README", &[("README.md", "# draft\n")], NONE),
        // common practice: an untracked new module can be imported
        (
            "untracked: new module",
            &[("model/extra.py", "x = 1\n")],
            RETRAIN,
        ),
        // common practice
        ("untracked: new notes", &[("NOTES.md", "todo\n")], NONE),
        // common practice
        (
            "uncommitted: configuration",
            &[("configs/base.yaml", "batch: 128\n")],
            RETRAIN,
        ),
    ];
    for (name, files, expected) in dirty {
        write_files(&dir, files);
        let next = lab.stamp(&dir, &[], &[]);
        lab.check(name, *expected, &prev, &next, &dir);
        git(&dir, &["checkout", "-q", "--", "."]);
        git(&dir, &["clean", "-qfd"]);
    }
    // A submodule's commit (common practice: vendored code).
    let sub = repo_with(&[("lib.py", "k = 1\n")]);
    let main = repo_with(&[("train.py", "\n")]);
    git(
        main.path(),
        &[
            "-c",
            "protocol.file.allow=always",
            "submodule",
            "add",
            "-q",
            sub.path().to_str().unwrap(),
            "vendor/lib",
        ],
    );
    git(main.path(), &["commit", "-qm", "add submodule"]);
    let before = lab.stamp(main.path(), &[], &[]);
    let inner = main.path().join("vendor/lib");
    write_files(&inner, &[("lib.py", "k = 2\n")]);
    git(&inner, &["commit", "-qam", "bump"]);
    let after = lab.stamp(main.path(), &[], &[]);
    lab.check("submodule commit", RETRAIN, &before, &after, main.path());
}

/// Declared data inputs (`stamp --data`).
fn data_cases(lab: &mut Lab) {
    let repo = repo_with(&[("train.py", "\n")]);
    let data = tempfile::tempdir().unwrap();
    write_files(data.path(), &[("a.csv", "1,2\n"), ("b.csv", "3,4\n")]);
    let d = data.path().to_str().unwrap();
    let cache = ["--data", d, "--rehash"];
    let a = lab.stamp(repo.path(), &[], &cache);
    write_files(data.path(), &[("a.csv", "1,2\n")]);
    let same = lab.stamp(repo.path(), &[], &cache);
    // common practice (and sha256sum): rewriting the same bytes is the same data
    lab.check("data: rewritten, same bytes", NONE, &a, &same, repo.path());
    write_files(data.path(), &[("b.csv", "3,5\n")]);
    let changed = lab.stamp(repo.path(), &[], &cache);
    // common practice: other data, other model
    lab.check(
        "data: file content changed",
        RETRAIN,
        &same,
        &changed,
        repo.path(),
    );
    write_files(data.path(), &[("c.csv", "5,6\n")]);
    let added = lab.stamp(repo.path(), &[], &cache);
    // common practice
    lab.check("data: file added", RETRAIN, &changed, &added, repo.path());
    let undeclared = lab.stamp(repo.path(), &[], &[]);
    // common practice: cannot be compared
    lab.check(
        "data: declared on one side only",
        VERIFY,
        &added,
        &undeclared,
        repo.path(),
    );
}

/// Sections one machine cannot vary, edited from a real stamp.
fn edited_cases(lab: &mut Lab) {
    let repo = repo_with(&[("train.py", "\n")]);
    let base = lab.stamp(repo.path(), &[], &[]);
    let r = repo.path();
    type Edit = fn(&mut Content);
    let cases: &[(&str, Edit, Impact)] = &[
        // C13, C14: https://github.com/llvm/llvm-project/issues/91824
        (
            "cpu: x86_64 -> aarch64",
            |c| {
                c.cpu.arch = if c.cpu.arch == "aarch64" {
                    "x86_64".into()
                } else {
                    "aarch64".into()
                }
            },
            RETRAIN,
        ),
        // B9: https://github.com/OpenMathLib/OpenBLAS/issues/4510
        (
            "cpu: another model",
            |c| c.cpu.model_name = Some("Example CPU 9000".into()),
            VERIFY,
        ),
        // B22: thread pools follow the CPU count
        (
            "cpu: twice the cores",
            |c| {
                c.cpu.logical_cores *= 2;
                c.cpu.allowed_cpu_count = c.cpu.allowed_cpu_count.map(|n| n * 2);
            },
            VERIFY,
        ),
        // common practice: same count, other placement
        (
            "cpu: same count, other CPUs",
            |c| c.cpu.allowed_cpus = Some("64-127".into()),
            NONE,
        ),
        // L1: https://github.com/openmc-dev/openmc/issues/1214
        (
            "system: glibc 2.27 -> this machine's C library",
            |c| {
                c.system.libc = Some("glibc".into());
                c.system.libc_version = Some("2.27".into());
            },
            VERIFY,
        ),
        // common practice
        (
            "system: OS release only",
            |c| c.system.os_version = Some("Example OS 1.0".into()),
            NONE,
        ),
        // common practice
        (
            "system: kernel only",
            |c| c.system.kernel = Some("1.2.3-example".into()),
            NONE,
        ),
        // common practice
        (
            "system: memory only",
            |c| c.system.memory_bytes += 1 << 30,
            NONE,
        ),
    ];
    for (name, edit, expected) in cases {
        let new = edited(&base, *edit);
        // Old is the edit for "gains": the real machine may or may not have the feature.
        lab.check(name, *expected, &new, &base, r);
    }
    // C1, C6: https://github.com/pytorch/pytorch/issues/155423 (AVX-512 kernels)
    let without = edited(&base, |c| c.cpu.features.retain(|f| f != "avx512f"));
    let with = edited(&base, |c| {
        if !c.cpu.features.iter().any(|f| f == "avx512f") {
            c.cpu.features.push("avx512f".into());
            c.cpu.features.sort();
        }
    });
    lab.check("cpu: gains avx512f", VERIFY, &without, &with, r);
    use runprint::manifest::{
        FastMathModule, GpuDevice, GpuInfo, GpuLibrary, NativeLibrary, PythonEnv,
    };
    let blas = |implementation: &str, version: &str| NativeLibrary {
        role: "blas".into(),
        implementation: implementation.into(),
        owner: "numpy".into(),
        path: "numpy.libs/libblas.so".into(),
        file: "libblas.so".into(),
        version: Some(version.into()),
        ..NativeLibrary::default()
    };
    let gpu = |driver: &str, cudnn: &str, model: &str, n: usize| GpuInfo {
        nvidia_driver: Some(driver.into()),
        libraries: vec![GpuLibrary {
            name: "cudnn".into(),
            version: cudnn.into(),
            owner: "torch".into(),
            from: "header".into(),
        }],
        devices: (0..n)
            .map(|i| GpuDevice {
                bus_id: format!("0000:0{i}:00.0"),
                model: model.into(),
                ..GpuDevice::default()
            })
            .collect(),
        ..GpuInfo::default()
    };
    let py = |v: &str| PythonEnv {
        interpreter: "/venv/bin/python".into(),
        kind: "venv".into(),
        version: Some(v.into()),
        ..PythonEnv::default()
    };
    let pairs: Vec<(&str, Content, Content, Impact)> = vec![
        // B2: https://github.com/mne-tools/mne-python/issues/4922
        (
            "native: OpenBLAS -> MKL",
            Content {
                native: runprint::manifest::NativeInfo {
                    libraries: vec![blas("openblas", "0.3.27")],
                    ..Default::default()
                },
                ..Default::default()
            },
            Content {
                native: runprint::manifest::NativeInfo {
                    libraries: vec![blas("mkl", "2024.2")],
                    ..Default::default()
                },
                ..Default::default()
            },
            VERIFY,
        ),
        // B29: https://github.com/numpy/numpy/issues/29391
        (
            "native: OpenBLAS 0.3.27 -> 0.3.28",
            Content {
                native: runprint::manifest::NativeInfo {
                    libraries: vec![blas("openblas", "0.3.27")],
                    ..Default::default()
                },
                ..Default::default()
            },
            Content {
                native: runprint::manifest::NativeInfo {
                    libraries: vec![blas("openblas", "0.3.28")],
                    ..Default::default()
                },
                ..Default::default()
            },
            RETRAIN,
        ),
        // B13: https://github.com/OpenMathLib/OpenBLAS/issues/5735 (point release changed sums)
        (
            "native: OpenBLAS 0.3.26 -> 0.3.27",
            Content {
                native: runprint::manifest::NativeInfo {
                    libraries: vec![blas("openblas", "0.3.26")],
                    ..Default::default()
                },
                ..Default::default()
            },
            Content {
                native: runprint::manifest::NativeInfo {
                    libraries: vec![blas("openblas", "0.3.27")],
                    ..Default::default()
                },
                ..Default::default()
            },
            VERIFY,
        ),
        // C9: https://github.com/llvm/llvm-project/issues/57589
        (
            "native: fast-math module appears",
            Content::default(),
            Content {
                native: runprint::manifest::NativeInfo {
                    fast_math: vec![FastMathModule {
                        owner: "fastpkg".into(),
                        path: "fastpkg/_x.so".into(),
                    }],
                    ..Default::default()
                },
                ..Default::default()
            },
            RETRAIN,
        ),
        // G5: cuDNN identical bits only within one version
        (
            "gpu: cuDNN 8.9 -> 9.1",
            Content {
                gpu: Some(gpu("550.54", "8.9.7", "GPU A", 1)),
                ..Default::default()
            },
            Content {
                gpu: Some(gpu("550.54", "9.1.0", "GPU A", 1)),
                ..Default::default()
            },
            VERIFY,
        ),
        // G11: https://github.com/NVIDIA/AMGX/issues/60
        (
            "gpu: driver upgrade",
            Content {
                gpu: Some(gpu("535.104", "8.9.7", "GPU A", 1)),
                ..Default::default()
            },
            Content {
                gpu: Some(gpu("550.54", "8.9.7", "GPU A", 1)),
                ..Default::default()
            },
            VERIFY,
        ),
        // G26: collectives depend on GPU count
        (
            "gpu: 1 -> 8 GPUs",
            Content {
                gpu: Some(gpu("550.54", "8.9.7", "GPU A", 1)),
                ..Default::default()
            },
            Content {
                gpu: Some(gpu("550.54", "8.9.7", "GPU A", 8)),
                ..Default::default()
            },
            VERIFY,
        ),
        // G8, G12: CPU-only against GPU training
        (
            "gpu: none -> one GPU",
            Content {
                gpu: Some(GpuInfo::default()),
                ..Default::default()
            },
            Content {
                gpu: Some(gpu("550.54", "8.9.7", "GPU A", 1)),
                ..Default::default()
            },
            RETRAIN,
        ),
        // P2: https://docs.python.org/3/library/random.html#notes-on-reproducibility
        (
            "python: 3.11 -> 3.12",
            Content {
                python: vec![py("3.11.9")],
                ..Default::default()
            },
            Content {
                python: vec![py("3.12.4")],
                ..Default::default()
            },
            RETRAIN,
        ),
        // P2: micro releases keep random streams
        (
            "python: 3.11.7 -> 3.11.9",
            Content {
                python: vec![py("3.11.7")],
                ..Default::default()
            },
            Content {
                python: vec![py("3.11.9")],
                ..Default::default()
            },
            VERIFY,
        ),
    ];
    for (name, a, b, expected) in pairs {
        let (old, new) = (
            edited(&base, |c| {
                c.native = a.native;
                c.gpu = a.gpu;
                c.python = a.python;
            }),
            edited(&base, |c| {
                c.native = b.native;
                c.gpu = b.gpu;
                c.python = b.python;
            }),
        );
        lab.check(name, expected, &old, &new, r);
    }
}

/// Lockfiles and environments written by real package managers.
fn tool_cases(lab: &mut Lab) {
    let (stack, stack_old) = (
        env_path("RUNPRINT_TEST_STACK_PYTHON"),
        env_path("RUNPRINT_TEST_STACK_PYTHON_OLD"),
    );
    let names = [
        "pip freeze: numpy 1.26 env -> 2.x env",
        "python section: numpy 1.26 env -> 2.x env",
        "python section: same env twice",
    ];
    match (&stack, &stack_old) {
        (Some(new_py), Some(old_py)) => {
            let repo = repo_with(&[("train.py", "\n")]);
            let dir = repo.path();
            let freeze = |py: &Path| run_tool(py, dir, &["-m", "pip", "freeze"]);
            std::fs::write(dir.join("requirements.txt"), freeze(old_py)).unwrap();
            git(dir, &["add", "-A"]);
            git(dir, &["commit", "-qm", "old env"]);
            let a = lab.stamp(dir, &[], &[]);
            std::fs::write(dir.join("requirements.txt"), freeze(new_py)).unwrap();
            git(dir, &["commit", "-qam", "new env"]);
            let b = lab.stamp(dir, &[], &[]);
            // P5 (NEP 50): numpy 1.26 -> 2.x, files written by real pip
            lab.check(names[0], RETRAIN, &a, &b, dir);
            let (o, n) = (old_py.to_str().unwrap(), new_py.to_str().unwrap());
            let x = lab.stamp(dir, &[], &["--python", o]);
            let y = lab.stamp(dir, &[], &["--python", n]);
            // P5: the installed numpy, read from the real environments
            lab.check(names[1], RETRAIN, &x, &y, dir);
            let z = lab.stamp(dir, &[], &["--python", n]);
            // common practice: the same environment
            lab.check(names[2], NONE, &y, &z, dir);
            scope_with_interpreter_cases(lab, new_py);
        }
        _ => {
            for n in names {
                lab.skip(n, "RUNPRINT_TEST_STACK_PYTHON(_OLD) unset");
            }
        }
    }
    let uv_name = "uv pip freeze: numpy 1.26 env -> 2.x env";
    match (env_path("RUNPRINT_TEST_PYTHON_TOOLS"), &stack, &stack_old) {
        (Some(tools), Some(new_py), Some(old_py)) => {
            let uv = tools.join("uv");
            let repo = repo_with(&[("train.py", "\n")]);
            let dir = repo.path();
            let freeze = |py: &Path| {
                run_tool(
                    &uv,
                    dir,
                    &["pip", "freeze", "--python", py.to_str().unwrap()],
                )
            };
            std::fs::write(dir.join("requirements.txt"), freeze(old_py)).unwrap();
            git(dir, &["add", "-A"]);
            git(dir, &["commit", "-qm", "old"]);
            let a = lab.stamp(dir, &[], &[]);
            std::fs::write(dir.join("requirements.txt"), freeze(new_py)).unwrap();
            git(dir, &["commit", "-qam", "new"]);
            let b = lab.stamp(dir, &[], &[]);
            // P5 (NEP 50), file written by real uv
            lab.check(uv_name, RETRAIN, &a, &b, dir);
        }
        _ => lab.skip(
            uv_name,
            "RUNPRINT_TEST_PYTHON_TOOLS or the stack pythons unset",
        ),
    }
    let npm_names = [
        "npm: seedrandom 3.0.5 -> 2.4.4",
        "npm: dev-only dependency bump",
    ];
    match env_path("RUNPRINT_TEST_NODE_TOOLS") {
        Some(_) => {
            let repo = repo_with(&[("train.js", "\n")]);
            let dir = repo.path();
            let npm = Path::new("npm");
            let lock = |deps: &str, dev: &str| {
                std::fs::write(
                    dir.join("package.json"),
                    format!("{{\"name\":\"kelp\",\"version\":\"1.0.0\",\"dependencies\":{{{deps}}},\"devDependencies\":{{{dev}}}}}"),
                )
                .unwrap();
                run_tool(
                    npm,
                    dir,
                    &[
                        "install",
                        "--package-lock-only",
                        "--ignore-scripts",
                        "--no-audit",
                        "--no-fund",
                    ],
                );
                git(dir, &["add", "-A"]);
                git(dir, &["commit", "-qm", "lock"]);
            };
            lock("\"seedrandom\":\"3.0.5\"", "\"is-number\":\"7.0.0\"");
            let a = lab.stamp(dir, &[], &[]);
            lock("\"seedrandom\":\"2.4.4\"", "\"is-number\":\"7.0.0\"");
            let b = lab.stamp(dir, &[], &[]);
            // G8/common practice: a random-number library's downgrade changes streams
            lab.check(npm_names[0], RETRAIN, &a, &b, dir);
            lock("\"seedrandom\":\"2.4.4\"", "\"is-number\":\"6.0.0\"");
            let c = lab.stamp(dir, &[], &[]);
            // H4: dev-only dependencies are not loaded by training
            lab.check(npm_names[1], NONE, &b, &c, dir);
        }
        None => {
            for n in npm_names {
                lab.skip(n, "RUNPRINT_TEST_NODE_TOOLS unset");
            }
        }
    }
    // Cargo is always here (it builds this test). Path dependencies outside the repository
    // keep it offline; only the lockfile changes inside the repository.
    let repo = repo_with(&[("train.rs", "\n")]);
    let dir = repo.path();
    let crates = tempfile::tempdir().unwrap();
    let cargo = std::env::var_os("CARGO").map_or_else(|| PathBuf::from("cargo"), PathBuf::from);
    let krate = |name: &str, version: &str, deps: &str| {
        let d = if name == "app" {
            dir.join(name)
        } else {
            crates.path().join(name)
        };
        std::fs::create_dir_all(d.join("src")).unwrap();
        std::fs::write(
            d.join("Cargo.toml"),
            format!("[package]\nname = \"{name}\"\nversion = \"{version}\"\nedition = \"2021\"\n\n[dependencies]\n{deps}"),
        )
        .unwrap();
        std::fs::write(d.join("src/lib.rs"), "").unwrap();
    };
    let relock = |lab: &mut Lab, kelp: &str, rand: &str| {
        krate("kelp-util", kelp, "");
        krate("rand", rand, "");
        let c = crates.path().display();
        krate(
            "app",
            "0.1.0",
            &format!(
                "kelp-util = {{ path = \"{c}/kelp-util\" }}\nrand = {{ path = \"{c}/rand\" }}\n"
            ),
        );
        let out = Command::new(&cargo)
            .args(["generate-lockfile", "--offline", "--manifest-path"])
            .arg(dir.join("app/Cargo.toml"))
            .output()
            .unwrap();
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        git(dir, &["add", "-A"]);
        git(dir, &["commit", "-qm", "lock"]);
        lab.stamp(dir, &[], &[])
    };
    let a = relock(lab, "0.1.0", "0.8.5");
    let b = relock(lab, "0.2.0", "0.8.5");
    // SemVer item 4 (0.x minor may break); an unknown pure crate: verify
    lab.check("cargo: unknown crate 0.1 -> 0.2", VERIFY, &a, &b, dir);
    let c = relock(lab, "0.2.0", "0.9.0");
    // SemVer item 4; rand's streams are part of its API (common practice)
    lab.check("cargo: rand 0.8 -> 0.9", RETRAIN, &b, &c, dir);
    let d = relock(lab, "0.2.1", "0.9.0");
    // SemVer item 6: patch of an unknown pure crate
    lab.check("cargo: unknown crate patch", NONE, &c, &d, dir);
}

#[test]
fn labelled_corpus_agrees_with_the_rules() {
    let mut lab = Lab::new();
    env_cases(&mut lab);
    more_env_cases(&mut lab);
    git_cases(&mut lab);
    package_cases(&mut lab);
    monorepo_cases(&mut lab);
    scope_cases(&mut lab);
    data_cases(&mut lab);
    edited_cases(&mut lab);
    tool_cases(&mut lab);
    let total = lab.results.len();
    let agree = lab
        .results
        .iter()
        .filter(|(_, want, got, _)| Some(*want) == *got)
        .count();
    let mut missed_retrain = Vec::new();
    for (name, want, got, top) in &lab.results {
        let mark = if Some(*want) == *got { "ok  " } else { "DIFF" };
        eprintln!(
            "{mark} {name}: label {want}, got {}  ({top})",
            got.map_or("-".into(), |g| g.to_string())
        );
        if *want == Impact::Retrain && *got != Some(Impact::Retrain) {
            missed_retrain.push(name.clone());
        }
    }
    for (name, why) in &lab.skipped {
        eprintln!("skip {name}: {why}");
    }
    let share = agree as f64 / total as f64;
    eprintln!(
        "corpus: {total} run, {agree} agree ({:.1}%), {} skipped",
        share * 100.0,
        lab.skipped.len()
    );
    assert!(total >= 150, "only {total} cases ran");
    assert!(
        missed_retrain.is_empty(),
        "retrain cases not reported as retrain: {missed_retrain:?}"
    );
    assert!(
        share >= 0.95,
        "agreement {:.1}% is below 95%",
        share * 100.0
    );
}
