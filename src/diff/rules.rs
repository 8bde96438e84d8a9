//! The built-in rule set: rules, each with what it matches, the impact, how likely it is to
//! explain a difference in results, a one-sentence reason written for practitioners, and its
//! source.
//!
//! Every [`Change`](super::Change) the comparison produces names the rule that decided it
//! (`rule`, `source`), so a verdict can always be traced to a documented fact. Each group of
//! rules is defined beside the conditions that fire it (packages, variables and paths here;
//! data in `diff/data.rs`; processor, system and run in `diff/host.rs`; interpreter, native
//! libraries and GPU in `diff/stack.rs`); [`RULE_GROUPS`] lists the groups and [`all`] every
//! rule; `runprint rules` prints them and `docs/rules.md` is generated from them.
//!
//! Matching is done by small functions below ([`package_rule`], [`env_rule`], [`path_class`]
//! and [`git_rule`]) and, for the fixed facts of the CPU, system, stack and GPU, by the
//! comparison code picking the rule directly. A repository's policy file
//! ([`crate::policy::Policy`]) can add packages, variables and paths to a class before these
//! functions run.
//!
//! Weights order changes of the same impact by how likely each is to explain a difference in
//! results (100: almost certainly, 0: not at all). They are judgements drawn from the sources,
//! not measurements.

use super::Impact;
use crate::classes::{EnvClass, PackageClass, PathClass};
use crate::policy::Policy;
use crate::version::{self, VersionChange};

/// One rule of the built-in table.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Rule {
    /// Stable identifier, e.g. `pkg.numeric.major`.
    pub id: &'static str,
    /// The manifest section it applies to.
    pub section: &'static str,
    /// What it matches, as a short noun phrase (also used for "Most likely cause").
    pub title: &'static str,
    /// The impact it assigns.
    pub impact: Impact,
    /// How likely a change matched by this rule explains a difference in results (0–100).
    pub weight: u8,
    /// Why, in one sentence for practitioners.
    pub reason: &'static str,
    /// Where the behaviour is stated (URLs), or "common practice".
    pub source: &'static str,
}

/// Every built-in rule by group, in the order of `docs/rules.md`. Each group is defined beside
/// the conditions that fire its rules.
pub static RULE_GROUPS: &[&[&Rule]] = &[
    GIT_RULES,
    super::data::DATA_RULES,
    PACKAGE_RULES,
    TOOLCHAIN_RULES,
    ENV_RULES,
    super::host::HOST_RULES,
    super::stack::PYTHON_RULES,
    super::stack::NATIVE_RULES,
    super::stack::GPU_RULES,
];

/// Every built-in rule, in the order of `docs/rules.md`.
pub fn all() -> impl Iterator<Item = &'static Rule> {
    RULE_GROUPS.iter().flat_map(|g| g.iter().copied())
}

/// The rule with this id.
pub fn by_id(id: &str) -> Option<&'static Rule> {
    all().find(|r| r.id == id)
}

/// Checks that every rule id the policy's acceptances name is a built-in rule: an unknown
/// id (a typo) would otherwise accept nothing, silently. The error names the file, the line
/// and the key, as the policy reader's own errors do.
pub fn check_policy(policy: &Policy) -> Result<(), crate::policy::PolicyError> {
    for (i, a) in policy.accept.iter().enumerate() {
        if let Some(rule) = a.rule.as_deref().filter(|r| by_id(r).is_none()) {
            return Err(crate::policy::PolicyError::Invalid {
                path: policy
                    .path
                    .clone()
                    .unwrap_or_else(|| crate::policy::POLICY_FILE.into()),
                line: a.rule_line,
                key: Some(format!("accept[{i}].rule")),
                message: format!("unknown rule `{rule}` (`runprint rules` lists them)"),
            });
        }
    }
    Ok(())
}

// ------------------------------------------------------------------------------------------------
// Packages

rule_group! {
    /// The rules of packages and lockfiles (the conditions: [`classify_package`], [`package_rule`] and `diff/lockfiles.rs`).
    PACKAGE_RULES;
    PKG_NUMPY_NEP50 = "pkg.numpy.nep50", "lockfiles", Retrain, 92,
        "numpy across 2.0 (NEP 50 promotion rules)",
        "NumPy 2.0 dropped value-based casting, so float32 arithmetic with Python scalars stays float32 and sums lose precision",
        "https://numpy.org/neps/nep-0050-scalar-promotion.html; https://github.com/numpy/numpy/pull/23912";
    PKG_TORCH_TF32 = "pkg.torch.tf32-default", "lockfiles", Retrain, 92,
        "torch across 1.12 (TF32 matmul default)",
        "PyTorch 1.12 turned TF32 for CUDA matrix products off by default, which changes GPU results by about 1e-3 relative",
        "https://github.com/pytorch/pytorch/issues/67384; https://pytorch.org/docs/stable/notes/cuda.html";
    PKG_SKLEARN_MODELS = "pkg.scikit-learn.changed-models", "lockfiles", Retrain, 91,
        "scikit-learn minor or major release",
        "every scikit-learn release lists \"changed models\" that fit differently on identical data and parameters, and defaults such as KMeans n_init changed",
        "https://scikit-learn.org/stable/whats_new/v0.22.html; https://github.com/scikit-learn/scikit-learn/issues/25022";
    PKG_PANDAS_2 = "pkg.pandas.2", "lockfiles", Retrain, 90,
        "pandas across 2.0",
        "pandas 2.0 changed groupby reductions to numeric_only=False and other defaults, so computed features can change",
        "https://github.com/pandas-dev/pandas/issues/46072";
    PKG_TF_DEFAULTS = "pkg.tensorflow.defaults", "lockfiles", Retrain, 90,
        "tensorflow across 2.4, 2.9 or 2.11",
        "TensorFlow turned on TF32 in 2.4, oneDNN on x86 in 2.9 and new Keras optimizers in 2.11, each changing results",
        "https://github.com/tensorflow/community/pull/287; https://github.com/tensorflow/tensorflow/issues/56697";
    PKG_OPENBLAS_BAD = "pkg.openblas.known-bad", "lockfiles", Retrain, 95,
        "OpenBLAS release known to compute wrong results",
        "this OpenBLAS release has a documented bug that returns wrong matrix products",
        "https://github.com/OpenMathLib/OpenBLAS/issues/2182; https://github.com/OpenMathLib/OpenBLAS/issues/2914; https://github.com/numpy/numpy/issues/29391";
    PKG_NUMERIC_MAJOR = "pkg.numeric.major", "lockfiles", Retrain, 86,
        "numerical library: major version change",
        "major releases change kernels, defaults and random streams, and frameworks disclaim reproducibility across releases",
        "https://pytorch.org/docs/stable/notes/randomness.html; https://numpy.org/neps/nep-0019-rng-policy.html";
    PKG_NUMERIC_MINOR = "pkg.numeric.minor", "lockfiles", Retrain, 82,
        "numerical library: minor version change",
        "minor releases of numerical libraries routinely change defaults and kernels (e.g. PyTorch 2.10 to 2.11 routed more products through cuBLASLt)",
        "https://github.com/pytorch/pytorch/issues/181737; https://pytorch.org/docs/stable/notes/randomness.html";
    PKG_NUMERIC_PRE = "pkg.numeric.pre-release", "lockfiles", Retrain, 82,
        "numerical library: to or from a pre-release",
        "a pre-release is unfinished code that may change anything before the release",
        "https://semver.org/spec/v2.0.0.html (item 9); https://peps.python.org/pep-0440/";
    PKG_NUMERIC_DOWNGRADE = "pkg.numeric.downgrade", "lockfiles", Retrain, 82,
        "numerical library: downgrade",
        "going back a release undoes its kernel, default and bug-fix changes",
        "https://pytorch.org/docs/stable/notes/randomness.html";
    PKG_NUMERIC_UNKNOWN = "pkg.numeric.unordered", "lockfiles", Retrain, 78,
        "numerical library: versions that cannot be ordered",
        "the versions cannot be compared, so a release change of a library doing the arithmetic cannot be ruled out",
        "common practice";
    PKG_NUMERIC_ADDED = "pkg.numeric.added-removed", "lockfiles", Retrain, 76,
        "numerical library added or removed",
        "optional numerical packages change results by their presence alone (pandas silently uses bottleneck for float32 reductions)",
        "https://github.com/pandas-dev/pandas/issues/25307";
    PKG_NUMERIC_SOURCE = "pkg.numeric.source", "lockfiles", Retrain, 75,
        "numerical library from another source (registry, URL, git revision)",
        "the same version from another source can be other code",
        "common practice";
    PKG_NUMERIC_FEATURES = "pkg.numeric.features", "lockfiles", Retrain, 72,
        "numerical library with other enabled features",
        "features select backends (BLAS, GPU, SIMD), which compute differently",
        "https://doc.rust-lang.org/cargo/reference/features.html";
    PKG_NUMERIC_LOCAL_DEVICE = "pkg.numeric.build-device", "lockfiles", Retrain, 85,
        "numerical library: CPU build against a GPU build (local label such as +cpu, +cu121)",
        "a build for another device family runs other kernels with other precision defaults",
        "https://peps.python.org/pep-0440/#local-version-identifiers; https://pytorch.org/docs/stable/notes/randomness.html";
    PKG_NUMERIC_LOCAL = "pkg.numeric.build-variant", "lockfiles", Verify, 60,
        "numerical library: another build variant (local label such as +cu118, +cu121)",
        "another build bundles other CUDA libraries, and cuBLAS promises identical bits only within one version",
        "https://peps.python.org/pep-0440/#local-version-identifiers; https://docs.nvidia.com/cuda/cublas/index.html#results-reproducibility";
    PKG_NUMERIC_PATCH = "pkg.numeric.patch", "lockfiles", Verify, 58,
        "numerical library: patch release",
        "patch releases only fix bugs, but bug fixes in numerical code are exactly what changes numbers; rerun and compare metrics",
        "https://semver.org/spec/v2.0.0.html (item 6); https://github.com/numpy/numpy/issues/18131";
    PKG_NUMERIC_POST = "pkg.numeric.post-release", "lockfiles", Verify, 30,
        "numerical library: post-release",
        "post-releases are meant for fixes outside the software, but are allowed for real fixes; rerun and compare metrics",
        "https://peps.python.org/pep-0440/#post-releases";
    PKG_NUMERIC_REBUILT = "pkg.numeric.rebuilt", "lockfiles", Verify, 50,
        "numerical library: rebuilt artifact with the same version (other hash)",
        "a rebuild can use another compiler, BLAS or CPU dispatch, which changes the last digits",
        "https://github.com/numpy/numpy/issues/23523";
    PKG_COMPILED = "pkg.compiled", "lockfiles", Verify, 35,
        "unknown package that ships compiled code: any change",
        "compiled code can do arithmetic, dispatch on the CPU or link native libraries even when the package is not known to; rerun and compare metrics",
        "common practice";
    PKG_PURE_CHANGE = "pkg.pure.change", "lockfiles", Verify, 22,
        "unknown pure-Python or script package: new, removed, major, minor, pre-release, downgrade or source change",
        "it is loaded with the training code and may change what it computes, though it is not known to do arithmetic",
        "common practice";
    PKG_PURE_PATCH = "pkg.pure.patch", "lockfiles", None, 4,
        "unknown pure-Python or script package: patch, post-release or rebuild",
        "patch releases only fix bugs, and pure-script code off the numerical path does not change arithmetic",
        "https://semver.org/spec/v2.0.0.html (item 6)";
    PKG_INFRASTRUCTURE = "pkg.infrastructure", "lockfiles", None, 3,
        "infrastructure package (networking, serialization, installers, logging, telemetry, profiling, metapackages)",
        "it moves bytes, installs packages, or reports on the run, and does not take part in the arithmetic",
        "common practice";
    PKG_OUT_OF_SCOPE = "pkg.out-of-scope", "lockfiles", None, 2,
        "package the training job cannot import",
        "the training entry points do not import it, directly or through a dependency",
        "runprint.toml or --entry of the repository";
    PKG_TOOLING = "pkg.tooling", "lockfiles", None, 2,
        "tooling package (tests, lint, notebooks, progress bars)",
        "it helps develop, test or display and does not take part in the arithmetic",
        "common practice";
    PKG_DEV = "pkg.dev", "lockfiles", None, 1,
        "development-only or test-only dependency",
        "dev-only dependencies are used for tests, examples and benchmarks and are not loaded by training",
        "https://doc.rust-lang.org/rust-by-example/testing/dev_dependencies.html";
    LOCK_NUMERIC = "lock.numeric", "lockfiles", Retrain, 76,
        "lockfile with numerical libraries added or removed",
        "the packages that do the arithmetic appear or disappear with it",
        "common practice";
    LOCK_OTHER = "lock.other", "lockfiles", Verify, 30,
        "lockfile with other packages added or removed",
        "training may load its packages",
        "common practice";
    LOCK_UNRECORDED = "lock.unrecorded", "lockfiles", Retrain, 70,
        "lockfile changed whose packages were not recorded (over the package limit)",
        "the manifest holds only its digest, so nothing shows that the change spares the packages that do the arithmetic",
        "common practice";
    LOCK_OUT_OF_SCOPE = "lock.out-of-scope", "lockfiles", None, 2,
        "lockfile the training job does not install from",
        "its packages are not installed for the job (a web front end, a serving image, another project of the repository)",
        "runprint.toml or --entry of the repository";
    LOCK_EMPTY = "lock.empty", "lockfiles", None, 0,
        "empty lockfile added or removed",
        "it lists no packages",
        "common practice";
    PKG_RANGE_SAME_NEWEST = "pkg.range.same-newest", "lockfiles", None, 3,
        "declared range changed, same newest version admitted",
        "an installer takes the newest version a range admits, which did not change (only the lower bound or an exclusion moved); an environment holding a version the range now excludes is compared under `python` once it is updated",
        "https://packaging.python.org/en/latest/specifications/version-specifiers/; pip's resolver prefers the newest version (common practice)";
    PKG_INPUT_LOCKED = "pkg.input.locked", "lockfiles", None, 2,
        "declared dependency changed where a lockfile decides",
        "a lockfile of the same ecosystem beside the input (or above it, for a workspace) decides what is installed, and it is compared package by package on its own",
        "common practice";
    PKG_INPUT_EXTRA = "pkg.input.extra", "lockfiles", None, 1,
        "dependency declared only in optional extras or non-default groups of a dependency input",
        "it is installed only when that extra or group is asked for (PEP 621 optional dependencies, PEP 735 groups); a numerical library keeps its own rules, and what an environment installed is compared under `python`",
        "https://packaging.python.org/en/latest/specifications/pyproject-toml/#dependencies-optional-dependencies; https://peps.python.org/pep-0735/";
    LOCK_INPUT_FIRST_RECORDED = "lock.input.first-recorded", "lockfiles", None, 1,
        "dependency input or toolchain pin recorded on one side only, the other side recording none",
        "the other manifest was stamped by a runprint that did not read dependency inputs or toolchain pins, and the file is not among the changed files; what it declares is compared as installed packages",
        "common practice";
}

// ------------------------------------------------------------------------------------------------
// Toolchain pins

rule_group! {
    /// The rules of toolchain pins (the conditions: `compare_toolchain` in `diff/lockfiles.rs`;
    /// a pinned Python version is judged by the `python` rules).
    TOOLCHAIN_RULES;
    TOOLCHAIN_GO = "toolchain.go", "lockfiles", Verify, 40,
        "Go toolchain changed (`go.mod` `go`/`toolchain` lines)",
        "the Go specification lets a compiler fuse floating-point operations (\"An implementation may combine multiple floating-point operations into a single fused operation\"), so another compiler release may round Go code differently",
        "https://go.dev/ref/spec#Floating_point_operators; https://go.dev/doc/toolchain";
    TOOLCHAIN_OTHER = "toolchain.other", "lockfiles", None, 3,
        "Rust or Node.js toolchain pin changed",
        "these pins build tools, front ends and extensions; what they build is compared as packages, and Rust does not contract floating-point operations without an explicit request",
        "https://doc.rust-lang.org/std/primitive.f64.html#method.mul_add; common practice";

}

/// Packages whose code does the arithmetic of training or preprocessing, by lower-case name in
/// each ecosystem (PEP 503 for Python). Matching is exact after lower-casing.
const NUMERIC_PACKAGES: &[&str] = &[
    // Python and conda
    "numpy",
    "scipy",
    "torch",
    "pytorch",
    "torchvision",
    "torchaudio",
    "torchtext",
    "tensorflow",
    "tensorflow-cpu",
    "tensorflow-gpu",
    "tensorflow-base",
    "tensorflow-probability",
    "tf-keras",
    "keras",
    "jax",
    "jaxlib",
    "flax",
    "optax",
    "equinox",
    "mlx",
    "scikit-learn",
    "scikit-image",
    "pandas",
    "polars",
    "xgboost",
    "lightgbm",
    "catboost",
    "statsmodels",
    "numba",
    "numexpr",
    "bottleneck",
    "cupy",
    "triton",
    "onnx",
    "onnxruntime",
    "onnxruntime-gpu",
    "transformers",
    "tokenizers",
    "sentencepiece",
    "accelerate",
    "deepspeed",
    "lightning",
    "pytorch-lightning",
    "timm",
    "diffusers",
    "peft",
    "bitsandbytes",
    "xformers",
    "flash-attn",
    "sentence-transformers",
    "pillow",
    "opencv-python",
    "opencv-python-headless",
    "opencv-contrib-python",
    "mkl",
    "mkl-service",
    "intel-openmp",
    "tbb",
    "openblas",
    "libopenblas",
    "scipy-openblas32",
    "scipy-openblas64",
    "paddlepaddle",
    "mxnet",
    "cudatoolkit",
    "cudnn",
    "nccl",
    "libtorch",
    // Rust
    "ndarray",
    "ndarray-linalg",
    "ndarray-rand",
    "nalgebra",
    "burn",
    "linfa",
    "faer",
    "tch",
    "ort",
    "smartcore",
    "rand",
    "rand_core",
    "rand_distr",
    "rand_chacha",
    "rand_pcg",
    "rand_xoshiro",
    "half",
    "matrixmultiply",
    "blas-src",
    "lapack-src",
    "openblas-src",
    "intel-mkl-src",
    "polars-core",
    "arrow",
    "libm",
    "rustfft",
    "realfft",
    "statrs",
    "dfdx",
    // JavaScript
    "@tensorflow/tfjs",
    "onnxruntime-node",
    "onnxruntime-web",
    "ml-matrix",
    "mathjs",
    "@xenova/transformers",
    "@huggingface/transformers",
    "brain.js",
    "numjs",
    "seedrandom",
    // Go
    "gonum.org/v1/gonum",
    "gorgonia.org/gorgonia",
    "gorgonia.org/tensor",
    // R
    "matrix",
    "glmnet",
    "randomforest",
    "ranger",
    "caret",
    "e1071",
    "mgcv",
    "lme4",
    "data.table",
    "rcppeigen",
    "rcpparmadillo",
    // Julia
    "flux",
    "lux",
    "zygote",
    "cuda",
    "linearalgebra",
    "distributions",
    "optim",
    "mlj",
    "statsbase",
    "random",
    // .NET
    "microsoft.ml",
    "torchsharp",
    "mathnet.numerics",
    "microsoft.ml.onnxruntime",
    "tensorflow.net",
];

/// Name prefixes of numerical packages (CUDA runtime wheels, framework plug-ins, scoped
/// packages).
const NUMERIC_PREFIXES: &[&str] = &[
    "nvidia-",
    "torch-",
    "jax-cuda",
    "cupy-",
    "candle-",
    "burn-",
    "linfa-",
    "faer-",
    "tract-",
    "@tensorflow/tfjs",
    "gonum.org/",
    "gorgonia.org/",
    "microsoft.ml.",
    "libblas",
    "libcblas",
    "liblapack",
    "cuda-",
    "libcublas",
    "libcudnn",
    "libnccl",
    "mkl-",
    "openblas_",
];

/// Packages that only help develop, test, lint or display.
const TOOLING_PACKAGES: &[&str] = &[
    "pytest",
    "coverage",
    "black",
    "ruff",
    "flake8",
    "mypy",
    "isort",
    "pylint",
    "pre-commit",
    "hypothesis",
    "tox",
    "nox",
    "ipython",
    "ipykernel",
    "ipywidgets",
    "jupyter",
    "jupyterlab",
    "notebook",
    "tqdm",
    "rich",
    "colorama",
    "tensorboard",
    "tensorboardx",
    "wandb",
    "sphinx",
    "mkdocs",
    "clap",
    "clap_builder",
    "clap_derive",
    "anstream",
    "anstyle",
    "env_logger",
    "log",
    "tracing",
    "tracing-subscriber",
    "indicatif",
    "criterion",
    "insta",
    "assert_cmd",
    "proptest",
    "eslint",
    "prettier",
    "jest",
    "mocha",
    "vitest",
    "typescript",
    "testthat",
    "roxygen2",
    "devtools",
    "xunit",
    "nunit",
    "moq",
];

const TOOLING_PREFIXES: &[&str] = &[
    "pytest-", "flake8-", "sphinx-", "mkdocs-", "types-", "@types/", "eslint-", "@eslint/",
    "xunit.", "nunit", "coverlet",
];

/// Packages that move bytes, install packages or report on a run, and take no part in the
/// arithmetic: networking and HTTP stacks, RPC, serialization of messages, certificates,
/// installers and build back-ends, file locks, logging and telemetry, profilers and GPU
/// annotation libraries (NVTX, CUPTI, cuFile: they time and trace kernels, not change them).
/// Common practice; each package's own description says what it does.
const INFRASTRUCTURE_PACKAGES: &[&str] = &[
    // Python: installers and build back-ends (PyPA docs)
    "pip",
    "setuptools",
    "wheel",
    "packaging",
    "distlib",
    "uv",
    "hatchling",
    "flit-core",
    "poetry-core",
    "setuptools-scm",
    "pdm-backend",
    "build",
    "virtualenv",
    // networking, RPC, certificates
    // (model hub download accelerators: they fetch the same files faster)
    "hf-transfer",
    "hf-xet",
    "certifi",
    "idna",
    "charset-normalizer",
    "chardet",
    "urllib3",
    "requests",
    "requests-oauthlib",
    "oauthlib",
    "httpx",
    "httpcore",
    "h11",
    "h2",
    "anyio",
    "sniffio",
    "aiohttp",
    "aiohappyeyeballs",
    "aiosignal",
    "frozenlist",
    "multidict",
    "yarl",
    "propcache",
    "async-timeout",
    "websockets",
    "websocket-client",
    "grpcio",
    "grpcio-status",
    "grpcio-tools",
    "googleapis-common-protos",
    "protobuf",
    "cryptography",
    "pyopenssl",
    "rsa",
    "pyasn1",
    "pyasn1-modules",
    "google-auth",
    "cachetools",
    "boto3",
    "botocore",
    "s3transfer",
    "jmespath",
    // files, locks, small runtime helpers
    "filelock",
    "platformdirs",
    "attrs",
    "typing-extensions",
    "typing-inspection",
    "six",
    "wrapt",
    "deprecated",
    "zipp",
    "importlib-metadata",
    "importlib-resources",
    "psutil",
    "py-cpuinfo",
    // logging, telemetry, monitoring
    "loguru",
    "structlog",
    "python-json-logger",
    "coloredlogs",
    "sentry-sdk",
    "prometheus-client",
    "nvidia-ml-py",
    "pynvml",
    // profiling and GPU annotation (NVIDIA Nsight docs: NVTX ranges, CUPTI, cuFile I/O)
    "nvtx",
    "py-spy",
    "memray",
    "scalene",
    "line-profiler",
    "pyinstrument",
    "torch-tb-profiler",
    // metapackages: they install other packages, which are compared one by one
    "cuda-toolkit",
    "nvidia-cuda-toolkit",
    // Rust: async runtimes, HTTP, TLS (each crate's own description)
    "tokio",
    "tokio-util",
    "tokio-rustls",
    "mio",
    "socket2",
    "hyper",
    "hyper-util",
    "hyper-rustls",
    "http",
    "http-body",
    "reqwest",
    "rustls",
    "rustls-webpki",
    "ring",
    "openssl",
    "openssl-sys",
    "native-tls",
    "tower",
    "tower-service",
    "tonic",
    "prost",
    // JavaScript
    "axios",
    "node-fetch",
    "undici",
    "ws",
    "express",
];

/// Name prefixes of infrastructure packages (OpenTelemetry's packages, CUDA's profiling and
/// file-I/O wheels, which share the numerical `nvidia-` prefix).
const INFRASTRUCTURE_PREFIXES: &[&str] = &[
    "opentelemetry-",
    "opentelemetry_",
    "nvidia-nvtx-",
    "nvidia-cuda-cupti-",
    "nvidia-cufile-",
    "nvidia-cuda-nvcc-",
    "grpcio-",
    "google-cloud-",
    "azure-",
    "botocore-",
    "tokio-",
    "hyper-",
    "aws-",
    "@opentelemetry/",
];

/// Name fragments that suggest a package ships compiled code, for lockfile entries without a
/// recorded installation (a heuristic, named as such in reasons).
const COMPILED_HINTS: &[&str] = &[
    "-sys",
    "_sys",
    "cffi",
    "cython",
    "-cuda",
    "-gpu",
    "-cu1",
    "-native",
    "native-",
    "-bindings",
    "napi",
    "node-gyp",
    "prebuild",
    "blas",
    "lapack",
    "fftw",
    "-ext",
    "simd",
    "-accel",
];

/// When a package is installed, as its lockfile or input declares it.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Installed {
    /// With the project.
    Always,
    /// Only for development or tests.
    ForDevelopment,
    /// Only when an optional extra or a non-default group of a dependency input asks for it.
    OnRequest,
}

/// A package's class and how it was decided, as a phrase for reasons.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Classified {
    /// The class.
    pub class: PackageClass,
    /// E.g. "a numerical library", "judged by a heuristic on its name (`-sys`)".
    pub how: String,
}

/// The name tables as sets: a comparison looks up every changed package in three tables.
type NameSet = std::sync::LazyLock<std::collections::HashSet<&'static str>>;
static NUMERIC_SET: NameSet = NameSet::new(|| NUMERIC_PACKAGES.iter().copied().collect());
static INFRASTRUCTURE_SET: NameSet =
    NameSet::new(|| INFRASTRUCTURE_PACKAGES.iter().copied().collect());
static TOOLING_SET: NameSet = NameSet::new(|| TOOLING_PACKAGES.iter().copied().collect());

/// True when the package does numerical work by the built-in tables.
pub fn is_numeric_package(name: &str) -> bool {
    let n = name.to_ascii_lowercase();
    // A container image (`nvidia/cuda`, `pytorch/pytorch`) by its last path segment.
    let image = n.contains('/') && !n.starts_with('@') && {
        let last = n.rsplit('/').next().unwrap_or("");
        NUMERIC_SET.contains(last) || last.contains("cuda") || last.contains("rocm")
    };
    !is_infrastructure_package(&n)
        && (image
            || NUMERIC_SET.contains(n.as_str())
            || NUMERIC_PREFIXES.iter().any(|p| n.starts_with(p)))
}

/// True when the package is infrastructure by the built-in tables.
pub fn is_infrastructure_package(name: &str) -> bool {
    let n = name.to_ascii_lowercase();
    INFRASTRUCTURE_SET.contains(n.as_str())
        || INFRASTRUCTURE_PREFIXES.iter().any(|p| n.starts_with(p))
}

/// True when the package is development tooling by the built-in tables.
pub fn is_tooling_package(name: &str) -> bool {
    let n = name.to_ascii_lowercase();
    TOOLING_SET.contains(n.as_str()) || TOOLING_PREFIXES.iter().any(|p| n.starts_with(p))
}

/// A local version label that marks a compiled build for a device or a framework ABI
/// (`+cu121`, `+cpu`, `+rocm6.1`, `+cu123torch2.5`, `+pt25cu124`): PEP 440 local version
/// identifiers as the PyTorch and extension-kernel indexes publish them.
pub fn build_label(version: &str) -> Option<&str> {
    let label = version::local_label(version)?;
    let l = label.to_ascii_lowercase();
    let marks = l.starts_with("cu")
        || l.starts_with("cpu")
        || l.starts_with("rocm")
        || l.starts_with("pt")
        || l.contains("torch")
        || l.contains("cuda");
    marks.then_some(label)
}

/// Classifies a package. `compiled` is what an installed copy says (the python section's
/// `compiled` flag), when one was recorded; `versions` are its versions on both sides (a
/// build label there marks compiled code).
pub fn classify_package(
    name: &str,
    dev: bool,
    compiled: Option<bool>,
    versions: &[&str],
    policy: &Policy,
) -> Classified {
    if let Some(class) = policy.package_class(name) {
        return Classified {
            class,
            how: format!("classed as {} by the policy file", class.as_str()),
        };
    }
    let classified = |class, how: &str| Classified {
        class,
        how: how.to_string(),
    };
    if is_numeric_package(name) {
        return classified(PackageClass::Numeric, "a numerical library");
    }
    if dev {
        return classified(PackageClass::Dev, "a development-only dependency");
    }
    if is_tooling_package(name) {
        return classified(PackageClass::Tooling, "tooling");
    }
    if is_infrastructure_package(name) {
        return classified(
            PackageClass::Infrastructure,
            "infrastructure (networking, installing, logging, telemetry or profiling)",
        );
    }
    if let Some(label) = versions.iter().find_map(|v| build_label(v)) {
        return Classified {
            class: PackageClass::Compiled,
            how: format!("not in runprint's tables; its version's build label `+{label}` marks a compiled build for a device or framework"),
        };
    }
    match compiled {
        Some(true) => classified(
            PackageClass::Compiled,
            "not in runprint's tables; its installed copy or its locked wheels hold compiled code",
        ),
        Some(false) => classified(
            PackageClass::Pure,
            "not in runprint's tables; its installed copy or its locked wheels are pure Python",
        ),
        None => {
            let n = name.to_ascii_lowercase();
            match COMPILED_HINTS.iter().find(|h| n.contains(*h)) {
                Some(hint) => Classified {
                    class: PackageClass::Compiled,
                    how: format!("not in runprint's tables; judged by a heuristic, its name (`{hint}`) suggests compiled code"),
                },
                None => classified(
                    PackageClass::Pure,
                    "not in runprint's tables; judged by a heuristic, nothing recorded or in its name suggests compiled code",
                ),
            }
        }
    }
}

/// Releases at which a library changed a default that changes results: (names, the first
/// release with the new behaviour, the rule that states it with its source). A version change
/// across one of them is decided by that rule. (scikit-learn's "changed models" come with every
/// minor release and are matched in [`package_rule`].)
pub static RELEASE_BOUNDARIES: &[(&[&str], &[&str], &Rule)] = &[
    (&["numpy"], &["2.0.0"], &PKG_NUMPY_NEP50),
    (&["torch", "pytorch"], &["1.12.0"], &PKG_TORCH_TF32),
    (&["pandas"], &["2.0.0"], &PKG_PANDAS_2),
    (
        &["tensorflow", "tensorflow-cpu", "tensorflow-gpu"],
        &["2.4.0", "2.9.0", "2.11.0"],
        &PKG_TF_DEFAULTS,
    ),
];

/// What happened to a package between two manifests.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum PackageChange<'a> {
    /// New dependency.
    Added,
    /// Removed dependency.
    Removed,
    /// Version change, with the ecosystem and the highest old and new versions.
    Version {
        /// Ecosystem (`pypi`, `cargo`...), for version ordering.
        ecosystem: &'a str,
        /// Highest old version.
        old: &'a str,
        /// Highest new version.
        new: &'a str,
    },
    /// A declared range moved: stand-ins for the newest version each side admits
    /// ([`version::newest_stand_in`]), judged like a version change between them.
    Range {
        /// Ecosystem, for version ordering.
        ecosystem: &'a str,
        /// Newest version the old range admits (a stand-in).
        old: &'a str,
        /// Newest version the new range admits (a stand-in).
        new: &'a str,
    },
    /// Same versions from another source.
    Source,
    /// Same version and source, other artifact hash.
    Rebuilt,
    /// Other enabled features.
    Features,
}

fn device_of(label: Option<&str>) -> Option<&'static str> {
    let l = label?.to_ascii_lowercase();
    if l.starts_with("cpu") {
        Some("cpu")
    } else if l.starts_with("cu") {
        Some("cuda")
    } else if l.starts_with("rocm") {
        Some("rocm")
    } else {
        None
    }
}

/// True when `old` and `new` lie on different sides of `boundary` (a version string).
fn crosses(ecosystem: &str, old: &str, new: &str, boundary: &str) -> bool {
    use std::cmp::Ordering::Less;
    let (a, b) = (
        version::compare(ecosystem, version::public_part(old), boundary),
        version::compare(ecosystem, version::public_part(new), boundary),
    );
    matches!((a, b), (Some(x), Some(y)) if (x == Less) != (y == Less))
}

/// A release of a version known to compute wrong results, with the reason (OpenBLAS; the
/// version may carry wheel build numbers such as `0.3.28.0.2`).
pub fn known_bad_openblas(version: &str) -> Option<&'static str> {
    let base: Vec<u32> = version
        .split('.')
        .take(3)
        .map(|p| {
            p.chars()
                .take_while(char::is_ascii_digit)
                .collect::<String>()
                .parse()
                .unwrap_or(0)
        })
        .collect();
    match base.as_slice() {
        [0, 3, 4..=6] => Some("OpenBLAS 0.3.4–0.3.6 have an AVX-512 DGEMM kernel that returns wrong results on AVX-512 processors"),
        [0, 3, 11] => Some("OpenBLAS 0.3.11's SkylakeX sgemm_direct could compile to an empty function and return garbage"),
        [0, 3, 28..=29] => Some("OpenBLAS 0.3.28–0.3.29 can return another thread's GEMM result when called from several threads"),
        _ => None,
    }
}

fn is_openblas_package(name: &str) -> bool {
    let n = name.to_ascii_lowercase();
    n.starts_with("scipy-openblas") || n == "openblas" || n == "libopenblas"
}

/// The rule for a package change and a lead naming the package and how it was classed.
pub fn package_rule(
    name: &str,
    class: &Classified,
    change: PackageChange<'_>,
) -> (&'static Rule, String) {
    let what = match change {
        PackageChange::Range {
            ecosystem,
            old,
            new,
        } => format!(
            "declared range; the newest version it admits moved: {}",
            version::classify(ecosystem, old, new).phrase()
        ),
        PackageChange::Added => "new dependency".to_string(),
        PackageChange::Removed => "removed dependency".to_string(),
        PackageChange::Version {
            ecosystem,
            old,
            new,
        } => version::classify(ecosystem, old, new).phrase().to_string(),
        PackageChange::Source => "same version from another source".into(),
        PackageChange::Rebuilt => "rebuilt artifact with the same version".into(),
        PackageChange::Features => "other enabled features".into(),
    };
    let lead = |what: &str| format!("{name} ({what}) is {}", class.how);
    // A range is judged as the step between the newest versions it admits.
    let change = match change {
        PackageChange::Range {
            ecosystem,
            old,
            new,
        } => PackageChange::Version {
            ecosystem,
            old,
            new,
        },
        other => other,
    };
    // A Python base image changes the interpreter: judged as the python section judges it.
    if let PackageChange::Version {
        ecosystem: "oci",
        old,
        new,
    } = change
    {
        let n = name.to_ascii_lowercase();
        if (n == "python" || n.ends_with("/python"))
            && matches!(class.class, PackageClass::Pure | PackageClass::Compiled)
        {
            let rule = match version::classify("oci", old, new) {
                VersionChange::Patch => &super::stack::PY_MICRO,
                _ => &super::stack::PY_MINOR,
            };
            return (rule, format!("{name} ({what}) is the base image's Python"));
        }
    }
    match class.class {
        PackageClass::Tooling => return (&PKG_TOOLING, lead(&what)),
        PackageClass::Infrastructure => return (&PKG_INFRASTRUCTURE, lead(&what)),
        PackageClass::OutOfScope => return (&PKG_OUT_OF_SCOPE, lead(&what)),
        PackageClass::Dev => return (&PKG_DEV, lead(&what)),
        PackageClass::Compiled => return (&PKG_COMPILED, lead(&what)),
        PackageClass::Pure => {
            let minor_step = match change {
                PackageChange::Version {
                    ecosystem,
                    old,
                    new,
                } => {
                    version::public_part(old) == version::public_part(new)
                        || version::is_post_release_step(ecosystem, old, new)
                        || version::classify(ecosystem, old, new) == VersionChange::Patch
                }
                PackageChange::Rebuilt => true,
                _ => false,
            };
            let rule = if minor_step {
                &PKG_PURE_PATCH
            } else {
                &PKG_PURE_CHANGE
            };
            return (rule, lead(&what));
        }
        PackageClass::Numeric => {}
    }
    let PackageChange::Version {
        ecosystem,
        old,
        new,
    } = change
    else {
        let rule = match change {
            PackageChange::Added | PackageChange::Removed => &PKG_NUMERIC_ADDED,
            PackageChange::Source => &PKG_NUMERIC_SOURCE,
            PackageChange::Rebuilt => &PKG_NUMERIC_REBUILT,
            _ => &PKG_NUMERIC_FEATURES,
        };
        return (rule, lead(&what));
    };
    let n = name.to_ascii_lowercase();
    if is_openblas_package(&n) {
        if let Some(bad) = known_bad_openblas(new) {
            return (&PKG_OPENBLAS_BAD, format!("{name} {new}: {bad}"));
        }
    }
    let kind = version::classify(ecosystem, old, new);
    // Documented default changes at known releases come first: they name the real cause.
    let boundary = RELEASE_BOUNDARIES.iter().find(|(names, releases, _)| {
        names.contains(&n.as_str()) && releases.iter().any(|b| crosses(ecosystem, old, new, b))
    });
    let specific = match boundary {
        Some((_, _, rule)) => Some(*rule),
        None if n == "scikit-learn"
            && matches!(kind, VersionChange::Major | VersionChange::Minor) =>
        {
            Some(&PKG_SKLEARN_MODELS)
        }
        None => None,
    };
    if let Some(rule) = specific {
        return (rule, lead(&what));
    }
    let (la, lb) = (version::local_label(old), version::local_label(new));
    if version::public_part(old) == version::public_part(new) && la != lb {
        let what = format!(
            "build {} against {}",
            la.unwrap_or("without a label"),
            lb.unwrap_or("without a label")
        );
        let rule = match (device_of(la), device_of(lb)) {
            (Some(x), Some(y)) if x != y => &PKG_NUMERIC_LOCAL_DEVICE,
            _ => &PKG_NUMERIC_LOCAL,
        };
        return (rule, lead(&what));
    }
    if version::is_post_release_step(ecosystem, old, new) {
        return (&PKG_NUMERIC_POST, lead("post-release"));
    }
    let rule = match kind {
        VersionChange::Major => &PKG_NUMERIC_MAJOR,
        VersionChange::Minor | VersionChange::Calendar => &PKG_NUMERIC_MINOR,
        VersionChange::Patch => &PKG_NUMERIC_PATCH,
        VersionChange::PreRelease => &PKG_NUMERIC_PRE,
        VersionChange::Downgrade => &PKG_NUMERIC_DOWNGRADE,
        VersionChange::Unknown => &PKG_NUMERIC_UNKNOWN,
    };
    (rule, lead(&what))
}

// ------------------------------------------------------------------------------------------------
// Environment variables

rule_group! {
    /// The rules of environment variables (the conditions: [`env_rule`] over the classes of `crate::envvars`).
    ENV_RULES;
    ENV_PRECISION = "env.precision", "env", Retrain, 90,
        "precision-mode variable (TF32, bf16 math, XLA fast-math, JAX x64)",
        "it changes the floating-point precision of the arithmetic (TF32 keeps 10 mantissa bits, about 1e-3 relative error)",
        "https://pytorch.org/docs/stable/notes/cuda.html; https://github.com/pytorch/pytorch/pull/77114; https://github.com/jax-ml/jax/issues/276";
    ENV_THREADS = "env.threads", "env", Verify, 62,
        "thread-count and thread-placement variable",
        "the number of threads changes how reductions are split, so sums differ in the last digits and iterative training can drift",
        "https://github.com/pytorch/pytorch/issues/88718; https://github.com/numpy/numpy/issues/25100; https://github.com/scikit-learn/scikit-learn/issues/18790";
    ENV_COLLECTIVES = "env.collectives", "env", Verify, 58,
        "NCCL algorithm, protocol or channel variable",
        "all-reduce algorithms and channel counts sum in another order, which has changed convergence",
        "https://github.com/NVIDIA/nccl/issues/1055";
    ENV_DETERMINISM = "env.determinism", "env", Verify, 55,
        "determinism and autotuning variable",
        "it switches deterministic algorithms or autotuning on or off, so run-to-run agreement changes",
        "https://github.com/pytorch/pytorch/pull/41377; https://github.com/NVIDIA/framework-reproducibility; https://docs.nvidia.com/cuda/cublas/index.html#results-reproducibility";
    ENV_KERNELS = "env.kernels", "env", Verify, 52,
        "kernel-choice variable (CPU ISA caps, core types, oneDNN)",
        "it selects which CPU kernels BLAS or the framework dispatch to, and different kernels round differently",
        "https://github.com/OpenMathLib/OpenBLAS/issues/4510; https://github.com/pytorch/pytorch/issues/155423; https://github.com/tensorflow/tensorflow/issues/56697";
    ENV_HASHSEED = "env.hash-seed", "env", Verify, 50,
        "PYTHONHASHSEED",
        "it fixes or randomizes string hashing, which decides the iteration order of sets that code may turn into vocabularies or label orders",
        "https://docs.python.org/3/using/cmdline.html#envvar-PYTHONHASHSEED";
    ENV_LOADER = "env.loader", "env", Verify, 45,
        "library and package search path variable",
        "it changes which libraries or packages are loaded, which can swap a numerical library without any lockfile change",
        "common practice";
    ENV_DEVICES = "env.devices", "env", Verify, 45,
        "visible GPU selection",
        "another GPU or GPU count changes kernels and the split of work",
        "https://docs.nvidia.com/cuda/cublas/index.html#results-reproducibility";
    ENV_CODEGEN = "env.codegen", "env", Verify, 40,
        "code-generation flags (RUSTFLAGS)",
        "target-CPU flags change which SIMD code paths are compiled in, which rounds differently",
        "https://github.com/llvm/llvm-project/issues/91824";
    ENV_OTHER = "env.other", "env", Verify, 30,
        "other variable of a numerical library or framework",
        "it configures a library that takes part in the arithmetic",
        "common practice";
    ENV_LOCATION = "env.location", "env", None, 3,
        "location of the active environment or toolkit (VIRTUAL_ENV, CONDA_PREFIX, CUDA_HOME)",
        "a folder name does not compute; the interpreter, its packages and the CUDA stack are compared in their own sections",
        "https://docs.python.org/3/library/venv.html";
    ENV_CACHE = "env.cache", "env", None, 2,
        "cache or download folder (TORCH_HOME, HF_HOME, XDG_CACHE_HOME...)",
        "where downloads and compiled kernels are kept does not change them; the data and packages themselves are compared",
        "https://pytorch.org/docs/stable/hub.html#where-are-my-downloaded-models-saved; https://specifications.freedesktop.org/basedir-spec/latest/";
    ENV_NOT_NUMERIC = "env.not-numerical", "env", None, 1,
        "variable no numerical library reads (recorded by an older runprint)",
        "runprint records only variables of numerical libraries; this one (Terraform's TF_CLI_*, for one) is not",
        "https://developer.hashicorp.com/terraform/cli/config/environment-variables";
    ENV_LOGGING = "env.logging", "env", None, 2,
        "logging and verbosity variable",
        "it only changes messages",
        "common practice";
    ENV_IRRELEVANT = "env.irrelevant", "env", None, 1,
        "variable the policy marks irrelevant",
        "the repository's policy file says it does not affect results",
        "runprint.toml of the repository";
    ENV_CREDENTIAL = "env.credential", "env", None, 0,
        "credential variable set or unset",
        "a credential's presence does not change results (its value is never recorded)",
        "common practice";

}

/// The rule for a variable of a class.
pub fn env_class_rule(class: EnvClass) -> &'static Rule {
    match class {
        EnvClass::Precision => &ENV_PRECISION,
        EnvClass::Determinism => &ENV_DETERMINISM,
        EnvClass::Kernels => &ENV_KERNELS,
        EnvClass::Collectives => &ENV_COLLECTIVES,
        EnvClass::Threads => &ENV_THREADS,
        EnvClass::HashSeed => &ENV_HASHSEED,
        EnvClass::Loader => &ENV_LOADER,
        EnvClass::Devices => &ENV_DEVICES,
        EnvClass::Codegen => &ENV_CODEGEN,
        EnvClass::Flags | EnvClass::Framework => &ENV_OTHER,
        EnvClass::Location => &ENV_LOCATION,
        EnvClass::Cache => &ENV_CACHE,
        EnvClass::Logging => &ENV_LOGGING,
        EnvClass::Irrelevant => &ENV_IRRELEVANT,
    }
}

/// The class of a changed variable: the policy's classes first, then the one table of
/// variables ([`crate::envvars`]). `None` for a variable runprint does not record (an older
/// manifest may hold one).
pub fn env_class(name: &str, policy: &Policy) -> Option<EnvClass> {
    policy
        .env_class(name)
        .or_else(|| crate::envvars::class_of(name))
}

/// The rule for a changed environment variable whose flags are not read one by one.
pub fn env_rule(name: &str, policy: &Policy) -> &'static Rule {
    env_class(name, policy).map_or(&ENV_NOT_NUMERIC, env_class_rule)
}

// ------------------------------------------------------------------------------------------------
// Paths

rule_group! {
    /// The rules of changed files and the commit (the conditions: [`path_class`], [`git_rule`] and `diff/git.rs`).
    GIT_RULES;
    GIT_DATA = "git.data", "git", Retrain, 98,
        "data files tracked in the repository changed",
        "the training data changed, and a model trained on different data is a different model",
        "common practice";
    GIT_CODE = "git.code", "git", Retrain, 95,
        "training code changed",
        "the program that computes the model changed",
        "common practice";
    GIT_CONFIG = "git.config", "git", Retrain, 93,
        "training configuration changed",
        "configuration files set hyperparameters, seeds and data splits, so the computation changed",
        "common practice";
    GIT_UNLISTED = "git.unlisted", "git", Retrain, 90,
        "commit changed and the changed files cannot be listed",
        "without the list of changed files a change to training code cannot be ruled out",
        "common practice";
    GIT_SUBMODULE = "git.submodule", "git", Retrain, 80,
        "submodule commit changed",
        "a submodule holds vendored code built or imported by training, so other code runs",
        "common practice";
    GIT_PRESENCE = "git.presence", "git", Verify, 40,
        "source control recorded on one side only",
        "only one side was stamped inside a git repository, so the code cannot be compared",
        "common practice";
    GIT_DEPENDENCIES = "git.dependencies", "git", None, 4,
        "only lockfiles, dependency manifests and dependency inputs changed in the code",
        "what they resolve to is compared package by package under `lockfiles` and `python`, which decides the impact",
        "common practice";
    GIT_OUT_OF_SCOPE = "git.out-of-scope", "git", None, 3,
        "only files outside the training job's scope changed",
        "they are not imported by the training entry points and are not configuration or data the job reads",
        "runprint.toml or --entry of the repository";
    GIT_BUILD = "git.build", "git", None, 3,
        "only container, build or environment recipes changed (Dockerfile, Makefile, Nix)",
        "they install and launch the job: what they install is compared as packages, base images and the numerical stack, and the variables they set under `env`",
        "common practice";
    GIT_TESTS = "git.tests", "git", None, 3,
        "only tests or benchmarks changed",
        "the training job does not import its test suite or benchmarks",
        "https://docs.pytest.org/en/stable/explanation/goodpractices.html#conventions-for-python-test-discovery; https://pkg.go.dev/cmd/go#hdr-Test_packages";
    GIT_CI = "git.ci", "git", None, 3,
        "only continuous-integration workflows changed",
        "workflows run checks on the repository; the training job does not read them",
        "https://docs.github.com/en/actions/writing-workflows/workflow-syntax-for-github-actions";
    GIT_NOTEBOOKS = "git.notebooks", "git", None, 2,
        "only notebooks changed",
        "notebooks are run by hand and not imported by the training job (name one as an entry point or under paths.code when it is)",
        "common practice";
    GIT_METADATA = "git.metadata", "git", None, 2,
        "only repository metadata or developer-tool settings changed",
        "attributes, editor, linter, ownership and template files do not change what the job computes",
        "https://git-scm.com/docs/gitattributes; https://editorconfig.org/";
    GIT_UNCHANGED = "git.unchanged", "git", None, 1,
        "only renames or mode changes with identical content",
        "the same bytes under another name or mode compute the same thing",
        "https://git-scm.com/docs/git-diff#Documentation/git-diff.txt---find-renamesltngt";
    GIT_DOCS = "git.docs", "git", None, 2,
        "only documentation changed",
        "training does not read documentation, licences or changelogs",
        "common practice";
    GIT_IRRELEVANT = "git.irrelevant", "git", None, 1,
        "only paths the policy marks irrelevant changed",
        "the repository's policy file says training does not read these paths",
        "runprint.toml of the repository";
    GIT_EMPTY = "git.empty", "git", None, 0,
        "commit changed without changing any file",
        "the two commits hold the same files, so the same code runs",
        "common practice";
    GIT_BRANCH = "git.branch", "git", None, 0,
        "branch name changed",
        "a branch name does not change the code that runs; the commit does",
        "common practice";
    GIT_REMOTE = "git.remote", "git", None, 0,
        "remote URL changed",
        "where the repository was cloned from does not change the code that runs",
        "common practice";
}

/// Paths whose change cannot alter training: documentation and licences. Common practice.
pub fn is_documentation_path(path: &str) -> bool {
    let lower = path.to_ascii_lowercase();
    let file = lower.rsplit('/').next().unwrap_or(&lower);
    let in_docs_folder = lower
        .split('/')
        .rev()
        .skip(1)
        .any(|d| matches!(d, "docs" | "doc" | "documentation"));
    in_docs_folder
        || [".md", ".markdown", ".rst", ".adoc"]
            .iter()
            .any(|ext| file.ends_with(ext))
        || file.starts_with("license")
        || file.starts_with("licence")
        || file.starts_with("copying")
        || file.starts_with("authors")
        || file.starts_with("changelog")
        || file.starts_with("citation")
        || file == "notice"
}

const DATA_EXTENSIONS: &[&str] = &[
    ".csv",
    ".tsv",
    ".parquet",
    ".npy",
    ".npz",
    ".h5",
    ".hdf5",
    ".pkl",
    ".pickle",
    ".arrow",
    ".feather",
    ".tfrecord",
    ".jsonl",
    ".avro",
    ".orc",
];
const CONFIG_EXTENSIONS: &[&str] = &[
    ".yaml", ".yml", ".json", ".toml", ".ini", ".cfg", ".conf", ".gin", ".jsonnet", ".env",
];
/// Source-code extensions: a program under a `data/` folder is code, not data.
const SOURCE_EXTENSIONS: &[&str] = &[
    ".py", ".pyx", ".pxd", ".rs", ".js", ".mjs", ".cjs", ".ts", ".go", ".jl", ".r", ".sh", ".c",
    ".cc", ".cpp", ".cxx", ".h", ".hpp", ".cu", ".cuh", ".java", ".scala", ".kt", ".rb", ".cs",
    ".fs", ".swift", ".m", ".lua", ".sql",
];
/// Dependency manifests and dependency inputs: what they resolve to is compared as packages
/// (lockfiles, the installed environment). pip's requirements-file format and pip-tools'
/// `.in` inputs; PEP 621 `pyproject.toml`; setuptools' `setup.cfg`/`setup.py`; `go.sum`
/// (Go modules reference); the others' own manifests.
const DEPENDENCY_FILES: &[&str] = &[
    "pyproject.toml",
    "setup.cfg",
    "setup.py",
    "manifest.in",
    "cargo.toml",
    "package.json",
    "pipfile",
    "environment.yml",
    "environment.yaml",
    "go.mod",
    "go.sum",
    "go.work",
    "go.work.sum",
    "description",
    "project.toml",
    "gemfile",
    "renv.lock",
    "conda-lock.yml",
    "pixi.toml",
    "pixi.lock",
];
/// Container, build and environment recipes (Docker/OCI, Make, Just, Nix, Compose), and
/// infrastructure definitions (Terraform).
const BUILD_FILES: &[&str] = &[
    "dockerfile",
    "containerfile",
    ".dockerignore",
    "makefile",
    "gnumakefile",
    "justfile",
    "taskfile.yml",
    "taskfile.yaml",
    "docker-compose.yml",
    "docker-compose.yaml",
    "compose.yml",
    "compose.yaml",
    "flake.nix",
    "flake.lock",
    "shell.nix",
    "default.nix",
    "vagrantfile",
    "procfile",
    ".terraform.lock.hcl",
];
/// Repository metadata and developer-tool settings (gitattributes(5), EditorConfig, linters,
/// formatters, editors, code owners, issue templates).
const METADATA_FILES: &[&str] = &[
    ".gitignore",
    ".gitattributes",
    ".gitmodules",
    ".mailmap",
    ".git-blame-ignore-revs",
    ".editorconfig",
    "codeowners",
    ".pre-commit-config.yaml",
    ".pre-commit-hooks.yaml",
    ".flake8",
    ".pylintrc",
    "pylintrc",
    "mypy.ini",
    ".mypy.ini",
    "ruff.toml",
    ".ruff.toml",
    ".isort.cfg",
    ".coveragerc",
    "pytest.ini",
    "tox.ini",
    "noxfile.py",
    ".clang-format",
    ".clang-tidy",
    "rustfmt.toml",
    ".rustfmt.toml",
    "clippy.toml",
    ".prettierrc",
    ".prettierignore",
    ".eslintrc",
    ".eslintrc.json",
    ".eslintrc.js",
    ".eslintignore",
    ".yamllint",
    ".markdownlint.json",
    ".readthedocs.yaml",
    ".readthedocs.yml",
    "mkdocs.yml",
    ".style.yapf",
    "codecov.yml",
    ".codecov.yml",
    "renovate.json",
    ".nvmrc",
];
/// Folders of repository metadata and editor settings.
const METADATA_FOLDERS: &[&str] = &[".github", ".vscode", ".idea", ".devcontainer", ".gitlab"];
/// Continuous-integration files and folders (GitHub Actions, GitLab CI, CircleCI, Travis,
/// Azure Pipelines, Jenkins, Buildkite, Drone, Bitbucket, AppVeyor, Woodpecker).
const CI_FILES: &[&str] = &[
    ".gitlab-ci.yml",
    ".travis.yml",
    "azure-pipelines.yml",
    "jenkinsfile",
    ".drone.yml",
    "bitbucket-pipelines.yml",
    "appveyor.yml",
    ".appveyor.yml",
    ".woodpecker.yml",
    "cloudbuild.yaml",
];
const CI_FOLDERS: &[&str] = &[".circleci", ".buildkite", ".woodpecker", ".ci"];
/// Test and benchmark folders (pytest, Cargo, Jest, Go and common layouts).
const TEST_FOLDERS: &[&str] = &[
    "tests",
    "test",
    "testing",
    "__tests__",
    "spec",
    "benches",
    "benchmarks",
    "benchmark",
];

/// True for a test file by its name: pytest's discovery rules (`test_*.py`, `*_test.py`,
/// `conftest.py`), Go's `*_test.go`, Jest's `*.test.*` and `*.spec.*`, RSpec's `*_spec.rb`.
fn is_test_file(file: &str) -> bool {
    let (stem, ext) = file.rsplit_once('.').unwrap_or((file, ""));
    (ext == "py" && (stem.starts_with("test_") || stem.ends_with("_test") || stem == "conftest"))
        || file.ends_with("_test.go")
        || file.ends_with("_spec.rb")
        || stem.ends_with(".test")
        || stem.ends_with(".spec")
}

/// True for a container recipe by its name: `Dockerfile`, `Dockerfile.gpu`, `gpu.Dockerfile`,
/// `Containerfile`.
fn is_container_file(file: &str) -> bool {
    file.starts_with("dockerfile")
        || file.ends_with(".dockerfile")
        || file.starts_with("containerfile")
}

/// Classifies a changed path: the policy's globs first, then the defaults. `lockfiles` are the
/// lockfile paths recorded in both manifests (their packages are compared one by one).
pub fn path_class(path: &str, policy: &Policy, lockfiles: &[&str]) -> PathClass {
    if let Some(class) = policy.path_class(path) {
        return class;
    }
    if lockfiles.contains(&path) {
        return PathClass::Dependencies;
    }
    let lower = path.to_ascii_lowercase();
    let (folders, file): (Vec<&str>, &str) = match lower.rsplit_once('/') {
        Some((d, f)) => (d.split('/').collect(), f),
        None => (Vec::new(), lower.as_str()),
    };
    let in_folder = |names: &[&str]| folders.iter().any(|d| names.contains(d));
    let is_source = SOURCE_EXTENSIONS.iter().any(|e| file.ends_with(e));
    if lower.starts_with(".github/workflows/") || lower.starts_with(".github/actions/") {
        return PathClass::Ci;
    }
    if CI_FILES.contains(&file) || folders.first().is_some_and(|d| CI_FOLDERS.contains(d)) {
        return PathClass::Ci;
    }
    // Every format runprint reads but container recipes (their own class, below), then the
    // dependency manifests it does not read.
    let read_format = crate::lockfile::Format::detect_path(path)
        .is_some_and(|f| f != crate::lockfile::Format::Dockerfile);
    if read_format
        || DEPENDENCY_FILES.contains(&file)
        || ((file.ends_with(".in") || file.ends_with(".txt"))
            && folders.last() == Some(&"requirements"))
    {
        return PathClass::Dependencies;
    }
    if is_documentation_path(path) {
        return PathClass::Docs;
    }
    if METADATA_FILES.contains(&file)
        || folders
            .first()
            .is_some_and(|d| METADATA_FOLDERS.contains(d))
    {
        return PathClass::Metadata;
    }
    if is_container_file(file)
        || BUILD_FILES.contains(&file)
        || file.ends_with(".tf")
        || file.ends_with(".tfvars")
    {
        return PathClass::Build;
    }
    if is_test_file(file) || in_folder(TEST_FOLDERS) {
        return PathClass::Tests;
    }
    if file.ends_with(".ipynb") {
        return PathClass::Notebooks;
    }
    if DATA_EXTENSIONS.iter().any(|e| file.ends_with(e))
        || (in_folder(&["data", "datasets"]) && !is_source)
    {
        return PathClass::Data;
    }
    if CONFIG_EXTENSIONS.iter().any(|e| file.ends_with(e))
        || in_folder(&["config", "configs", "conf"])
    {
        return PathClass::Config;
    }
    PathClass::Code
}

/// Sources a Python job may compile and load at run time (C, C++, CUDA, Rust extensions,
/// `torch.utils.cpp_extension.load`, pyo3): never judged out of scope by the import closure.
const NATIVE_SOURCES: &[&str] = &[
    ".c", ".cc", ".cpp", ".cxx", ".h", ".hpp", ".cu", ".cuh", ".rs", ".pyx", ".pxd",
];

/// True when a changed file lies outside the training job's scope: not in the import closure
/// of either side, and not configuration or data the job reads (when the scope declares what
/// it reads; otherwise configuration and data stay in scope).
pub fn outside_scope(path: &str, class: PathClass, scope: &super::ScopeView) -> bool {
    if scope.files.contains(path) {
        return false;
    }
    let lower = path.to_ascii_lowercase();
    match class {
        PathClass::Code | PathClass::Notebooks => {
            !NATIVE_SOURCES.iter().any(|e| lower.ends_with(e))
        }
        PathClass::Config | PathClass::Data => scope
            .reads
            .as_ref()
            .is_some_and(|reads| !reads.is_match(path)),
        _ => false,
    }
}

/// The rule for a class of changed files.
pub fn path_class_rule(class: PathClass) -> &'static Rule {
    match class {
        PathClass::Data => &GIT_DATA,
        PathClass::Code => &GIT_CODE,
        PathClass::Config => &GIT_CONFIG,
        PathClass::Dependencies => &GIT_DEPENDENCIES,
        PathClass::Build => &GIT_BUILD,
        PathClass::Tests => &GIT_TESTS,
        PathClass::Ci => &GIT_CI,
        PathClass::Notebooks => &GIT_NOTEBOOKS,
        PathClass::Metadata => &GIT_METADATA,
        PathClass::Unchanged => &GIT_UNCHANGED,
        PathClass::Docs => &GIT_DOCS,
        PathClass::OutOfScope => &GIT_OUT_OF_SCOPE,
        PathClass::Irrelevant => &GIT_IRRELEVANT,
    }
}

/// The rule for a set of changed-file classes: the most result-relevant class decides (the
/// highest impact, then the highest weight).
pub fn git_rule(classes: &[PathClass]) -> &'static Rule {
    classes
        .iter()
        .map(|c| path_class_rule(*c))
        .max_by_key(|r| (r.impact, r.weight))
        .unwrap_or(&GIT_EMPTY)
}

// ------------------------------------------------------------------------------------------------
// Rendering the table

/// Output formats of `runprint rules`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum TableFormat {
    /// One block per rule.
    Text,
    /// A JSON array.
    Json,
    /// The whole of `docs/rules.md`.
    Markdown,
}

/// Renders the built-in table.
pub fn render_table(format: TableFormat) -> String {
    use std::fmt::Write;
    let mut out = String::new();
    match format {
        TableFormat::Text => {
            for r in all() {
                let _ = writeln!(out, "{:<7}  {}  ({})", r.impact.as_str(), r.id, r.title);
                let _ = writeln!(out, "         {}", r.reason);
                let _ = writeln!(out, "         source: {}", r.source);
            }
        }
        TableFormat::Json => {
            let rows: Vec<serde_json::Value> = all()
                .map(|r| {
                    serde_json::json!({
                        "id": r.id, "section": r.section, "title": r.title,
                        "impact": r.impact, "weight": r.weight,
                        "reason": r.reason, "source": r.source,
                    })
                })
                .collect();
            out = serde_json::to_string_pretty(&rows).expect("rules serialize");
            out.push('\n');
        }
        TableFormat::Markdown => {
            out.push_str(MARKDOWN_HEAD);
            out.push_str("\n| rule | what changed | impact | weight | why | source |\n|---|---|---|---|---|---|\n");
            let cell = |s: &str| s.replace('|', "\\|");
            for r in all() {
                let sources = r
                    .source
                    .split("; ")
                    .map(|s| match s.split_once(' ') {
                        Some((url, rest)) if url.starts_with("https://") => {
                            format!("<{url}> {rest}")
                        }
                        _ if s.starts_with("https://") => format!("<{s}>"),
                        _ => s.to_string(),
                    })
                    .collect::<Vec<_>>()
                    .join("; ");
                let _ = writeln!(
                    out,
                    "| `{}` | {} | {} | {} | {} | {} |",
                    r.id,
                    cell(r.title),
                    r.impact,
                    r.weight,
                    cell(r.reason),
                    cell(&sources)
                );
            }
            out.push_str(MARKDOWN_TAIL);
        }
    }
    out
}

const MARKDOWN_HEAD: &str = "# Why a difference gets its verdict

<!-- Generated by `runprint rules --format markdown > docs/rules.md`; a test checks that it is
current. Edit the table in src/diff/rules.rs, not this file. -->

Every change `runprint diff` reports names the rule below that decided it (`rule` and `source`
in the JSON report, shown with `--verbose`). *Common practice* marks a fact of the trade with no
single source. The weight orders changes of one impact by how likely each is to explain a
difference in results; the highest-weighted change of the verdict's impact is the report's
\"Most likely cause\".

Packages the tables do not know are judged by facts where there are some (a build label such as
`+cu121` or `+cu123torch2.5`, a platform wheel in the lockfile, an installed copy with extension
modules mark compiled code) and otherwise by a heuristic on the name, and the reason says which:
compiled code weighs more than pure-Python or pure-script code; infrastructure (networking,
installers, logging, telemetry, profiling, metapackages), development-only and tooling packages
never raise the verdict. Changed files are classed as data, code, config, dependencies, build,
tests, ci, notebooks, metadata, unchanged (identical renames), docs or irrelevant, by the policy
file's globs first and then by name; the most result-relevant class decides the commit's rule.
When both manifests record the training job's scope (`stamp --entry`), files outside its import
closure, packages it cannot load and lockfiles it does not install from are out of scope.
Environment variables are classed by exact name (`src/envvars.rs`), and `XLA_FLAGS` flag by flag.
A package changed the same way in several lockfiles is one row, and the changes a bump pulled in
are grouped under it (`group` in JSON), the group's row taking its highest impact.
";

const MARKDOWN_TAIL: &str = "
A repository can adjust these rules with a `runprint.toml` policy file (see the README): add
paths, packages or variables to a class, accept a known change until a date, and choose which
verdict makes `diff` exit non-zero.
";

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ids_are_unique_and_every_rule_has_a_source_and_a_sentence() {
        let mut ids: Vec<&str> = all().map(|r| r.id).collect();
        ids.sort_unstable();
        let before = ids.len();
        ids.dedup();
        assert_eq!(before, ids.len(), "duplicate rule ids");
        for r in all() {
            assert!(!r.reason.is_empty() && !r.source.is_empty() && !r.title.is_empty());
            assert!(r.weight <= 100, "{}", r.id);
            assert!(
                r.source == "common practice"
                    || r.source.contains("https://")
                    || r.source.contains("runprint.toml"),
                "{}: {}",
                r.id,
                r.source
            );
            assert!(by_id(r.id).is_some());
        }
    }

    #[test]
    fn doc_paths() {
        for p in [
            "README.md",
            "docs/train.py",
            "LICENSE",
            "sub/CHANGELOG",
            "a/b/guide.rst",
            "COPYING",
        ] {
            assert!(is_documentation_path(p), "{p}");
        }
        for p in [
            "train.py",
            "config/model.yaml",
            "docs.py",
            "src/markdown.rs",
        ] {
            assert!(!is_documentation_path(p), "{p}");
        }
    }

    #[test]
    fn path_classes_by_default() {
        let p = Policy::default();
        let locks = ["requirements.txt", "trainer/uv.lock"];
        for (path, want) in [
            ("train.py", PathClass::Code),
            ("configs/base.yaml", PathClass::Config),
            ("data/train.csv", PathClass::Data),
            ("README.md", PathClass::Docs),
            ("requirements.txt", PathClass::Dependencies),
            ("trainer/pyproject.toml", PathClass::Dependencies),
            ("pyproject.toml", PathClass::Dependencies),
            ("tools/pyproject.toml", PathClass::Dependencies),
            // pytest discovery conventions, Go's `go test`, Jest.
            ("tests/test_model.py", PathClass::Tests),
            ("kelp/test_utils.py", PathClass::Tests),
            ("kelp/utils_test.py", PathClass::Tests),
            ("conftest.py", PathClass::Tests),
            ("pkg/loader_test.go", PathClass::Tests),
            ("web/src/app.test.ts", PathClass::Tests),
            ("benchmarks/speed.py", PathClass::Tests),
            // GitHub Actions workflow syntax, GitLab CI.
            (".github/workflows/ci.yml", PathClass::Ci),
            (".gitlab-ci.yml", PathClass::Ci),
            (".github/CODEOWNERS", PathClass::Metadata),
            (".gitattributes", PathClass::Metadata),
            (".editorconfig", PathClass::Metadata),
            (".pre-commit-config.yaml", PathClass::Metadata),
            ("Dockerfile", PathClass::Build),
            ("docker/Dockerfile.gpu", PathClass::Build),
            ("Makefile", PathClass::Build),
            ("flake.lock", PathClass::Build),
            ("infra/main.tf", PathClass::Build),
            ("notebooks/explore.ipynb", PathClass::Notebooks),
            ("requirements.in", PathClass::Dependencies),
            ("requirements/dev.txt", PathClass::Dependencies),
            ("go.sum", PathClass::Dependencies),
            ("setup.cfg", PathClass::Dependencies),
            ("setup.py", PathClass::Dependencies),
            // A program under a data folder is code; a table there is data.
            ("kelp/data/loader.py", PathClass::Code),
            ("datasets/tides.parquet", PathClass::Data),
            ("data/README.txt", PathClass::Data),
            ("scripts/preprocess.py", PathClass::Code),
        ] {
            assert_eq!(path_class(path, &p, &locks), want, "{path}");
        }
    }

    #[test]
    fn env_classes() {
        let p = Policy::default();
        assert_eq!(env_rule("OMP_NUM_THREADS", &p).impact, Impact::Verify);
        assert_eq!(env_rule("NVIDIA_TF32_OVERRIDE", &p).impact, Impact::Retrain);
        assert_eq!(env_rule("TF_CPP_MIN_LOG_LEVEL", &p).impact, Impact::None);
        assert_eq!(env_rule("NCCL_ALGO", &p).id, "env.collectives");
        assert_eq!(env_rule("PYTHONHASHSEED", &p).id, "env.hash-seed");
        // Cache folders, messages and folder locations do not compute.
        for name in [
            "TORCH_HOME",
            "HF_HOME",
            "XDG_CACHE_HOME",
            "TORCH_SHOW_CPP_STACKTRACES",
            "VIRTUAL_ENV",
        ] {
            assert_eq!(env_rule(name, &p).impact, Impact::None, "{name}");
        }
        // Terraform's TF_CLI_CONFIG_FILE is not TensorFlow's.
        assert_eq!(env_rule("TF_CLI_CONFIG_FILE", &p).id, "env.not-numerical");
    }

    #[test]
    fn package_rules_by_kind() {
        let p = Policy::default();
        let numeric = classify_package("numpy", false, None, &[], &p);
        let v = |o, n| PackageChange::Version {
            ecosystem: "pypi",
            old: o,
            new: n,
        };
        assert_eq!(
            package_rule("numpy", &numeric, v("1.26.4", "2.1.3")).0.id,
            "pkg.numpy.nep50"
        );
        assert_eq!(
            package_rule("numpy", &numeric, v("2.0.0", "2.1.3")).0.id,
            "pkg.numeric.minor"
        );
        assert_eq!(
            package_rule("numpy", &numeric, v("2.1.2", "2.1.3")).0.id,
            "pkg.numeric.patch"
        );
        let torch = classify_package("torch", false, None, &[], &p);
        assert_eq!(
            package_rule("torch", &torch, v("2.1.0+cpu", "2.1.0+cu121"))
                .0
                .id,
            "pkg.numeric.build-device"
        );
        assert_eq!(
            package_rule("torch", &torch, v("2.1.0+cu118", "2.1.0+cu121"))
                .0
                .id,
            "pkg.numeric.build-variant"
        );
        let pure = classify_package("kelp-utils", false, None, &[], &p);
        assert_eq!(pure.class, PackageClass::Pure);
        assert!(pure.how.contains("heuristic"));
        assert_eq!(
            package_rule("kelp-utils", &pure, v("23.1.0", "23.1.1"))
                .0
                .impact,
            Impact::None
        );
        // calver.org: a year as the first number is a calendar release, not a major one.
        assert_eq!(
            package_rule("kelp-utils", &pure, v("2023.11.17", "2024.2.2")).1,
            "kelp-utils (calendar-versioned release) is not in runprint's tables; judged by a heuristic, nothing recorded or in its name suggests compiled code"
        );
        // Infrastructure, profiling and metapackages never raise the verdict.
        for name in [
            "grpcio",
            "opentelemetry-sdk",
            "certifi",
            "filelock",
            "attrs",
            "pip",
            "setuptools",
            "wheel",
            "loguru",
            "nvidia-nvtx-cu12",
            "nvidia-cuda-cupti-cu12",
            "nvidia-cufile-cu12",
            "cuda-toolkit",
        ] {
            let c = classify_package(name, false, None, &[], &p);
            assert_eq!(c.class, PackageClass::Infrastructure, "{name}");
            assert_eq!(
                package_rule(name, &c, v("1.0.0", "2.0.0")).0.impact,
                Impact::None,
                "{name}"
            );
        }
        // CUDA libraries stay numerical.
        for name in [
            "nvidia-cudnn-cu12",
            "nvidia-cublas-cu12",
            "nvidia-nccl-cu12",
        ] {
            assert_eq!(
                classify_package(name, false, None, &[], &p).class,
                PackageClass::Numeric
            );
        }
        // PEP 440 local labels of extension-kernel wheels mark compiled builds.
        let kernel = classify_package(
            "kelp-attention",
            false,
            None,
            &["2.7.3+cu123torch2.5", "2.7.4+cu123torch2.5"],
            &p,
        );
        assert_eq!(kernel.class, PackageClass::Compiled);
        assert!(kernel.how.contains("+cu123torch2.5"), "{}", kernel.how);
        let sys = classify_package("zstd-sys", false, None, &[], &p);
        assert_eq!(sys.class, PackageClass::Compiled);
        assert_eq!(
            classify_package("left-pad", true, None, &[], &p).class,
            PackageClass::Dev
        );
        let blas = classify_package("scipy-openblas64", false, None, &[], &p);
        assert_eq!(
            package_rule("scipy-openblas64", &blas, v("0.3.27.44.3", "0.3.28.0.2"))
                .0
                .id,
            "pkg.openblas.known-bad"
        );
    }
}
