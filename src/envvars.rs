//! The one table of environment variables: which are recorded by `stamp` and how the rules
//! class each. [`class_of`] answers both: a variable is recorded exactly when it has a class.
//!
//! Lookup order: exact names ([`NAMES`]) first, then Terraform's variables (never recorded:
//! they share TensorFlow's `TF_` prefix), then name patterns inside a known family
//! ([`PATTERNS`]: thread counts, caches, logging), then the families themselves
//! ([`FAMILIES`]: the prefixes each library documents for its own variables), whose other
//! members are classed [`EnvClass::Framework`]. Matching is exact and case-sensitive, as the
//! libraries read them.

use crate::classes::EnvClass;

/// Variables by exact name, with the library documentation that defines them.
pub const NAMES: &[(&str, EnvClass)] = &[
    // Precision. PyTorch CUDA semantics notes (TF32); oneDNN "floating-point math mode";
    // JAX "default matmul precision" and "64-bit precision"; ROCm hipBLASLt.
    ("NVIDIA_TF32_OVERRIDE", EnvClass::Precision),
    ("TORCH_ALLOW_TF32_CUBLAS_OVERRIDE", EnvClass::Precision),
    ("HIPBLASLT_ALLOW_TF32", EnvClass::Precision),
    ("ONEDNN_DEFAULT_FPMATH_MODE", EnvClass::Precision),
    ("DNNL_DEFAULT_FPMATH_MODE", EnvClass::Precision),
    ("JAX_DEFAULT_MATMUL_PRECISION", EnvClass::Precision),
    ("JAX_ENABLE_X64", EnvClass::Precision),
    // XLA's compiler flags, read one by one (see `xla_flag_class`).
    ("XLA_FLAGS", EnvClass::Flags),
    // Determinism and autotuning. PyTorch reproducibility notes; NVIDIA
    // framework-reproducibility; oneMKL conditional numerical reproducibility.
    ("CUBLAS_WORKSPACE_CONFIG", EnvClass::Determinism),
    ("CUBLASLT_WORKSPACE_SIZE", EnvClass::Determinism),
    ("TF_DETERMINISTIC_OPS", EnvClass::Determinism),
    ("TF_CUDNN_DETERMINISTIC", EnvClass::Determinism),
    ("TF_USE_CUDNN_AUTOTUNE", EnvClass::Determinism),
    ("TF_CUDNN_USE_AUTOTUNE", EnvClass::Determinism),
    ("TORCH_CUDNN_V8_API_DISABLED", EnvClass::Determinism),
    ("CUDA_LAUNCH_BLOCKING", EnvClass::Determinism),
    ("MKL_CBWR", EnvClass::Determinism),
    // Kernel choice. OpenBLAS README (runtime variables); oneMKL developer reference; ATen
    // CPU capability; oneDNN CPU ISA hints; TensorFlow oneDNN; BLIS configuration.
    ("OPENBLAS_CORETYPE", EnvClass::Kernels),
    ("OPENBLAS_BLOCK_FACTOR", EnvClass::Kernels),
    ("MKL_ENABLE_INSTRUCTIONS", EnvClass::Kernels),
    ("MKL_DEBUG_CPU_TYPE", EnvClass::Kernels),
    ("ATEN_CPU_CAPABILITY", EnvClass::Kernels),
    ("ONEDNN_MAX_CPU_ISA", EnvClass::Kernels),
    ("DNNL_MAX_CPU_ISA", EnvClass::Kernels),
    ("TF_ENABLE_ONEDNN_OPTS", EnvClass::Kernels),
    ("BLIS_ARCH_TYPE", EnvClass::Kernels),
    // NCCL environment variables reference.
    ("NCCL_ALGO", EnvClass::Collectives),
    ("NCCL_PROTO", EnvClass::Collectives),
    ("NCCL_MAX_NCHANNELS", EnvClass::Collectives),
    ("NCCL_MIN_NCHANNELS", EnvClass::Collectives),
    ("NCCL_TREE_THRESHOLD", EnvClass::Collectives),
    // Python command-line and environment docs.
    ("PYTHONHASHSEED", EnvClass::HashSeed),
    ("PYTHONPATH", EnvClass::Loader),
    ("PYTHONNOUSERSITE", EnvClass::Loader),
    ("PYTHONOPTIMIZE", EnvClass::Framework),
    // ld.so(8), dyld(1).
    ("LD_LIBRARY_PATH", EnvClass::Loader),
    ("LD_PRELOAD", EnvClass::Loader),
    ("DYLD_LIBRARY_PATH", EnvClass::Loader),
    ("DYLD_INSERT_LIBRARIES", EnvClass::Loader),
    // The active environment's folder: venv docs, conda docs. Its interpreter and packages
    // are compared in the python section.
    ("VIRTUAL_ENV", EnvClass::Location),
    ("CONDA_PREFIX", EnvClass::Location),
    ("CONDA_DEFAULT_ENV", EnvClass::Location),
    // Where the CUDA toolkit is and what a container image declares about it (NVIDIA
    // container images); the toolkit itself is compared in the gpu section.
    ("CUDA_HOME", EnvClass::Location),
    ("CUDA_PATH", EnvClass::Location),
    ("CUDA_VERSION", EnvClass::Location),
    ("NVIDIA_REQUIRE_CUDA", EnvClass::Location),
    ("NVIDIA_DRIVER_CAPABILITIES", EnvClass::Location),
    // Visible devices: CUDA programming guide, ROCm docs, NVIDIA container toolkit.
    ("CUDA_VISIBLE_DEVICES", EnvClass::Devices),
    ("CUDA_DEVICE_ORDER", EnvClass::Devices),
    ("HIP_VISIBLE_DEVICES", EnvClass::Devices),
    ("ROCR_VISIBLE_DEVICES", EnvClass::Devices),
    ("NVIDIA_VISIBLE_DEVICES", EnvClass::Devices),
    // The Cargo book, environment variables.
    ("RUSTFLAGS", EnvClass::Codegen),
    ("CARGO_BUILD_RUSTFLAGS", EnvClass::Codegen),
    ("RAYON_NUM_THREADS", EnvClass::Threads),
    // Cache and download folders: PyTorch hub docs (TORCH_HOME), Hugging Face hub docs
    // (HF_HOME, HF_HUB_CACHE), XDG Base Directory specification, CUDA JIT cache
    // (CUDA_CACHE_PATH and friends, CUDA programming guide), Keras (KERAS_HOME).
    ("TORCH_HOME", EnvClass::Cache),
    ("TORCH_EXTENSIONS_DIR", EnvClass::Cache),
    ("HF_HOME", EnvClass::Cache),
    ("HF_HUB_CACHE", EnvClass::Cache),
    ("HF_DATASETS_CACHE", EnvClass::Cache),
    ("XDG_CACHE_HOME", EnvClass::Cache),
    ("CUDA_CACHE_PATH", EnvClass::Cache),
    ("CUDA_CACHE_MAXSIZE", EnvClass::Cache),
    ("CUDA_CACHE_DISABLE", EnvClass::Cache),
    ("KERAS_HOME", EnvClass::Cache),
    // Messages only: PyTorch (C++ stack traces, TORCH_LOGS), TensorFlow's log levels.
    ("TORCH_SHOW_CPP_STACKTRACES", EnvClass::Logging),
    ("TORCH_LOGS", EnvClass::Logging),
    ("TF_CPP_MIN_LOG_LEVEL", EnvClass::Logging),
    ("TF_CPP_MAX_VLOG_LEVEL", EnvClass::Logging),
];

/// Terraform's variables, which share TensorFlow's `TF_` prefix: input variables
/// (`TF_VAR_name`), extra arguments (`TF_CLI_ARGS`, `TF_CLI_ARGS_name`), host credentials
/// (`TF_TOKEN_host`) and the CLI's settings (Terraform CLI environment variables reference,
/// developer.hashicorp.com/terraform/cli/config/environment-variables). They hold
/// infrastructure inputs and credentials, never a numerical setting, and are not recorded. A
/// name ending in `_` is a prefix; any other matches itself and `NAME_…`.
pub const TERRAFORM: &[&str] = &[
    "TF_VAR_",
    "TF_CLI_",
    "TF_TOKEN_",
    "TF_LOG",
    "TF_INPUT",
    "TF_WORKSPACE",
    "TF_DATA_DIR",
    "TF_IN_AUTOMATION",
    "TF_PLUGIN_CACHE_DIR",
    "TF_PLUGIN_CACHE_MAY_BREAK_DEPENDENCY_LOCK_FILE",
    "TF_REGISTRY_",
    "TF_IGNORE",
    "TF_STATE_PERSIST_INTERVAL",
    "TF_APPEND_USER_AGENT",
    "TF_REATTACH_PROVIDERS",
    "TF_ACC",
    "TF_MODULE_DEPTH",
    "TF_WARN_OUTPUT_ERRORS",
];

/// How a pattern matches a name.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Pattern {
    /// The name ends with it.
    Suffix(&'static str),
    /// The name contains it.
    Contains(&'static str),
}

/// Patterns inside the families (checked after [`NAMES`]): thread pools (OpenMP, OpenBLAS,
/// MKL, numexpr, TBB docs: `*_NUM_THREADS`, `OMP_PLACES`…), cache folders, messages.
pub const PATTERNS: &[(Pattern, EnvClass)] = &[
    (Pattern::Suffix("_NUM_THREADS"), EnvClass::Threads),
    (Pattern::Suffix("_MAX_THREADS"), EnvClass::Threads),
    (Pattern::Suffix("_DYNAMIC"), EnvClass::Threads),
    (Pattern::Suffix("_THREAD_LIMIT"), EnvClass::Threads),
    (Pattern::Suffix("_THREADING_LAYER"), EnvClass::Threads),
    (Pattern::Contains("AFFINITY"), EnvClass::Threads),
    (Pattern::Suffix("_PLACES"), EnvClass::Threads),
    (Pattern::Suffix("_PROC_BIND"), EnvClass::Threads),
    (Pattern::Suffix("_CACHE_DIR"), EnvClass::Cache),
    (Pattern::Suffix("_CACHE_PATH"), EnvClass::Cache),
    (Pattern::Contains("VERBOSE"), EnvClass::Logging),
    (Pattern::Contains("DEBUG"), EnvClass::Logging),
    (Pattern::Contains("LOG_LEVEL"), EnvClass::Logging),
    (Pattern::Suffix("_LOG"), EnvClass::Logging),
    (Pattern::Suffix("_LOGS"), EnvClass::Logging),
];

/// Prefixes of variables read by OpenMP runtimes, BLAS libraries, the CUDA/ROCm stacks and the
/// major ML frameworks (each library's documentation lists its own; see `docs/manifest.md`).
pub const FAMILIES: &[&str] = &[
    "OMP_",
    "GOMP_",
    "KMP_",
    "MKL_",
    "OPENBLAS_",
    "GOTO_",
    "BLIS_",
    "VECLIB_",
    "CUDA_",
    "CUBLAS_",
    "CUBLASLT_",
    "CUDNN_",
    "NCCL_",
    "NVIDIA_",
    "HIP_",
    "HIPBLASLT_",
    "ROCM_",
    "MIOPEN_",
    "TF_",
    "XLA_",
    "JAX_",
    "TORCH_",
    "PYTORCH_",
    "TORCHINDUCTOR_",
    "ATEN_",
    "ONEDNN_",
    "DNNL_",
    "KERAS_",
    "NUMEXPR_",
    "NUMBA_",
    "TBB_",
    "JULIA_",
];

fn is_terraform(name: &str) -> bool {
    TERRAFORM.iter().any(|t| {
        name == *t
            || (t.ends_with('_') && name.starts_with(t))
            || (name.starts_with(t) && name.as_bytes().get(t.len()) == Some(&b'_'))
    })
}

/// The class of a variable, or `None` when runprint does not record it.
pub fn class_of(name: &str) -> Option<EnvClass> {
    if let Some((_, class)) = NAMES.iter().find(|(n, _)| *n == name) {
        return Some(*class);
    }
    if is_terraform(name) || !FAMILIES.iter().any(|p| name.starts_with(p)) {
        return None;
    }
    let by_pattern = PATTERNS.iter().find(|(p, _)| match p {
        Pattern::Suffix(s) => name.ends_with(s),
        Pattern::Contains(s) => name.contains(s),
    });
    Some(by_pattern.map_or(EnvClass::Framework, |(_, c)| *c))
}

/// True when `stamp` records the variable.
pub fn is_recorded(name: &str) -> bool {
    class_of(name).is_some()
}

/// The class of one XLA flag (`--name=value` without the dashes and value), from the flag
/// names XLA documents (`xla/debug_options_flags.cc`): dumps, profiles and logs are messages
/// only; fast-math, precision and excess-precision flags change arithmetic; determinism and
/// autotuning flags change which kernels run; the rest configure the compiler.
pub fn xla_flag_class(flag: &str) -> EnvClass {
    let f = flag.trim_start_matches('-');
    let f = f.split_once('=').map_or(f, |(n, _)| n);
    const DIAGNOSTIC: &[&str] = &[
        "xla_dump",
        "xla_gpu_dump",
        "xla_hlo_graph",
        "xla_hlo_profile",
        "xla_log",
        "xla_enable_dumping",
        "xla_gpu_enable_nvtx",
        "xla_embed_ir_in_executable",
    ];
    if DIAGNOSTIC.iter().any(|d| f.starts_with(d)) {
        EnvClass::Logging
    } else if [
        "fast_math",
        "fast_min_max",
        "precision",
        "tf32",
        "fp8",
        "bf16",
    ]
    .iter()
    .any(|w| f.contains(w))
    {
        EnvClass::Precision
    } else if f.contains("deterministic") || f.contains("autotune") {
        EnvClass::Determinism
    } else if f.contains("device_count") {
        EnvClass::Devices
    } else {
        EnvClass::Framework
    }
}

/// Splits an `XLA_FLAGS` value into its flags (whitespace-separated, as XLA parses them).
pub fn xla_flags(value: &str) -> Vec<&str> {
    value.split_whitespace().collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_named_variable_is_recorded_with_its_class() {
        for (name, class) in NAMES {
            assert_eq!(class_of(name), Some(*class), "{name}");
        }
        // No name is listed twice.
        let mut names: Vec<&str> = NAMES.iter().map(|(n, _)| *n).collect();
        names.sort();
        let len = names.len();
        names.dedup();
        assert_eq!(names.len(), len);
    }

    #[test]
    fn families_patterns_and_terraform() {
        // OpenMP spec, environment variables (OMP_NUM_THREADS, OMP_PLACES).
        assert_eq!(class_of("OMP_NUM_THREADS"), Some(EnvClass::Threads));
        assert_eq!(class_of("OMP_PLACES"), Some(EnvClass::Threads));
        assert_eq!(class_of("MKL_THREADING_LAYER"), Some(EnvClass::Threads));
        assert_eq!(class_of("NCCL_DEBUG"), Some(EnvClass::Logging));
        assert_eq!(class_of("OPENBLAS_VERBOSE"), Some(EnvClass::Logging));
        // MKL_DEBUG_CPU_TYPE picks kernels although its name says DEBUG: exact names first.
        assert_eq!(class_of("MKL_DEBUG_CPU_TYPE"), Some(EnvClass::Kernels));
        assert_eq!(class_of("TORCHINDUCTOR_CACHE_DIR"), Some(EnvClass::Cache));
        assert_eq!(class_of("TF_CONFIG"), Some(EnvClass::Framework));
        // Terraform CLI environment variables reference.
        for t in [
            "TF_CLI_CONFIG_FILE",
            "TF_VAR_region",
            "TF_LOG",
            "TF_LOG_PATH",
            "TF_INPUT",
        ] {
            assert_eq!(class_of(t), None, "{t}");
        }
        assert_eq!(class_of("HOME"), None);
        assert_eq!(class_of("TF_INPUTS_DIR"), Some(EnvClass::Framework));
    }

    #[test]
    fn xla_flags_by_kind() {
        // Flag names from XLA's debug_options_flags.cc (from memory).
        assert_eq!(xla_flag_class("--xla_dump_to=/tmp/x"), EnvClass::Logging);
        assert_eq!(
            xla_flag_class("--xla_cpu_enable_fast_math=true"),
            EnvClass::Precision
        );
        assert_eq!(
            xla_flag_class("--xla_gpu_deterministic_ops=true"),
            EnvClass::Determinism
        );
        assert_eq!(
            xla_flag_class("--xla_force_host_platform_device_count=8"),
            EnvClass::Devices
        );
        assert_eq!(
            xla_flag_class("--xla_gpu_enable_latency_hiding_scheduler=true"),
            EnvClass::Framework
        );
    }
}
