//! The starting rule set: which packages, variables and paths matter, and why.
//!
//! Each reason is one sentence a practitioner would accept. The facts behind them are listed
//! with sources in `docs/rules.md`.

use super::Impact;
use crate::version::VersionChange;

/// Packages whose code does the arithmetic of training or preprocessing, by ecosystem-neutral
/// normalized name. A version change of one is a retrain.
const NUMERIC_PACKAGES: &[&str] = &[
    // Python (PEP 503 names)
    "numpy",
    "scipy",
    "torch",
    "torchvision",
    "torchaudio",
    "tensorflow",
    "tensorflow-cpu",
    "tensorflow-gpu",
    "tf-keras",
    "keras",
    "jax",
    "jaxlib",
    "flax",
    "optax",
    "scikit-learn",
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
    "pillow",
    "opencv-python",
    "opencv-python-headless",
    "mkl",
    "intel-openmp",
    "scipy-openblas32",
    "scipy-openblas64",
    "paddlepaddle",
    "mxnet",
    // Rust crates
    "ndarray",
    "ndarray-linalg",
    "nalgebra",
    "candle-core",
    "candle-nn",
    "burn",
    "burn-core",
    "burn-tensor",
    "linfa",
    "faer",
    "tch",
    "ort",
    "smartcore",
    "rand",
    "rand_distr",
    "rand_chacha",
    "half",
    "matrixmultiply",
    "blas-src",
    "lapack-src",
    "openblas-src",
    "intel-mkl-src",
    "polars-core",
    "arrow",
    "libm",
];

/// Name prefixes of numerical packages (CUDA runtime wheels, framework plug-ins).
const NUMERIC_PREFIXES: &[&str] = &[
    "nvidia-", "torch-", "jax-cuda", "candle-", "burn-", "linfa-", "faer-",
];

/// Packages that only help develop, test, lint or display: a change cannot alter results.
const TOOLING_PACKAGES: &[&str] = &[
    "pytest",
    "pytest-cov",
    "coverage",
    "black",
    "ruff",
    "flake8",
    "mypy",
    "isort",
    "pylint",
    "pre-commit",
    "ipython",
    "ipykernel",
    "jupyter",
    "jupyterlab",
    "notebook",
    "tqdm",
    "rich",
    "colorama",
    "tensorboard",
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
];

/// True when the package does numerical work.
pub fn is_numeric_package(name: &str) -> bool {
    let n = name.to_ascii_lowercase();
    NUMERIC_PACKAGES.contains(&n.as_str()) || NUMERIC_PREFIXES.iter().any(|p| n.starts_with(p))
}

/// True when the package is development tooling.
pub fn is_tooling_package(name: &str) -> bool {
    TOOLING_PACKAGES.contains(&name.to_ascii_lowercase().as_str())
}

/// Impact and reason of a package change: `what` is a short phrase such as "version changed".
pub fn package_impact(name: &str, dev: bool, what: &str) -> (Impact, String) {
    if is_numeric_package(name) {
        (
            Impact::Retrain,
            format!("{name} does numerical work in training; a {what} changes kernels, defaults or random streams, so results are expected to change"),
        )
    } else if dev {
        (
            Impact::None,
            format!("{name} is a development-only dependency and is not loaded by training"),
        )
    } else if is_tooling_package(name) {
        (
            Impact::None,
            format!(
                "{name} is tooling (tests, lint, display) and does not take part in the arithmetic"
            ),
        )
    } else {
        (
            Impact::Verify,
            format!("{name} is not a known numerical library, but it is loaded with the training code; rerun and compare metrics"),
        )
    }
}

/// Impact and reason of a version change of a package, by the kind of change.
pub fn version_change_impact(name: &str, dev: bool, kind: VersionChange) -> (Impact, String) {
    let (impact, reason) = package_impact(name, dev, kind.phrase());
    if impact == Impact::Verify && kind == VersionChange::Patch {
        return (
            Impact::None,
            format!("{name} is not a known numerical library and this is a patch-level release, which by convention only fixes bugs"),
        );
    }
    (impact, reason)
}

/// The class of a relevant environment variable.
pub fn env_var_impact(name: &str) -> (Impact, &'static str) {
    const PRECISION: &[&str] = &[
        "NVIDIA_TF32_OVERRIDE",
        "TORCH_ALLOW_TF32_CUBLAS_OVERRIDE",
        "HIPBLASLT_ALLOW_TF32",
        "ONEDNN_DEFAULT_FPMATH_MODE",
        "XLA_FLAGS",
        "JAX_DEFAULT_MATMUL_PRECISION",
        "JAX_ENABLE_X64",
        "TF_ENABLE_ONEDNN_OPTS",
        "RUSTFLAGS",
        "CARGO_BUILD_RUSTFLAGS",
    ];
    const DETERMINISM: &[&str] = &[
        "CUBLAS_WORKSPACE_CONFIG",
        "TF_DETERMINISTIC_OPS",
        "TF_CUDNN_DETERMINISTIC",
        "TF_USE_CUDNN_AUTOTUNE",
        "TF_CUDNN_USE_AUTOTUNE",
        "PYTHONHASHSEED",
        "CUDA_LAUNCH_BLOCKING",
        "MKL_CBWR",
    ];
    const KERNEL_CHOICE: &[&str] = &[
        "OPENBLAS_CORETYPE",
        "OPENBLAS_BLOCK_FACTOR",
        "MKL_ENABLE_INSTRUCTIONS",
        "MKL_DEBUG_CPU_TYPE",
        "ATEN_CPU_CAPABILITY",
        "ONEDNN_MAX_CPU_ISA",
        "DNNL_MAX_CPU_ISA",
    ];
    if PRECISION.contains(&name) {
        return (Impact::Retrain, "it changes the floating-point precision or code generation used for the arithmetic (TF32/bf16 math modes, fast-math or target-CPU flags), which moves results well beyond the last digit");
    }
    if DETERMINISM.contains(&name) {
        return (Impact::Verify, "it switches deterministic algorithms, hashing or reproducibility modes on or off, so run-to-run agreement changes; rerun and compare metrics");
    }
    if KERNEL_CHOICE.contains(&name) {
        return (Impact::Verify, "it selects which CPU kernels BLAS or the framework dispatch to, and different kernels round differently");
    }
    if name.ends_with("_NUM_THREADS")
        || name.ends_with("_MAX_THREADS")
        || name.ends_with("_DYNAMIC")
        || name.ends_with("_THREAD_LIMIT")
        || name.contains("AFFINITY")
        || name.starts_with("OMP_P")
    {
        return (Impact::Verify, "the number or placement of threads changes how reductions are split, so sums can differ in the last digits and iterative training can drift; rerun and compare metrics");
    }
    if name.contains("VERBOSE") || name.contains("DEBUG") || name.contains("LOG") {
        return (Impact::None, "it only controls logging");
    }
    if matches!(
        name,
        "LD_LIBRARY_PATH"
            | "LD_PRELOAD"
            | "DYLD_LIBRARY_PATH"
            | "DYLD_INSERT_LIBRARIES"
            | "PYTHONPATH"
            | "VIRTUAL_ENV"
            | "CONDA_PREFIX"
            | "CONDA_DEFAULT_ENV"
            | "PYTHONNOUSERSITE"
    ) {
        return (Impact::Verify, "it changes which libraries or packages are loaded, which can swap a numerical library without any lockfile change");
    }
    if name == "CUDA_VISIBLE_DEVICES" {
        return (Impact::Verify, "it changes which or how many GPUs the run uses, which changes kernels and the split of work");
    }
    (
        Impact::Verify,
        "it belongs to a numerical library or framework whose behaviour it configures",
    )
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
        || file == "notice"
        || file == ".gitignore"
        || file == ".mailmap"
}

#[cfg(test)]
mod tests {
    use super::*;

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
    fn env_classes() {
        assert_eq!(env_var_impact("OMP_NUM_THREADS").0, Impact::Verify);
        assert_eq!(env_var_impact("NVIDIA_TF32_OVERRIDE").0, Impact::Retrain);
        assert_eq!(env_var_impact("TF_CPP_MIN_LOG_LEVEL").0, Impact::None);
        assert_eq!(env_var_impact("CUBLAS_WORKSPACE_CONFIG").0, Impact::Verify);
    }
}
