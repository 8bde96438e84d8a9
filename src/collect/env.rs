//! Environment variables that steer numerical results, threading or which libraries load.
//!
//! Only variables whose name matches [`RELEVANT_PREFIXES`] or [`RELEVANT_NAMES`] are kept; every
//! other variable is left out. A kept variable whose name or value looks secret is recorded by
//! name only (see [`crate::redact`]).

use std::collections::BTreeMap;

use crate::manifest::EnvInfo;
use crate::redact::{is_secret_name, looks_secret_value, scrub_url_credentials};

/// Prefixes of variables read by OpenMP runtimes, BLAS libraries, the CUDA/ROCm stacks and the
/// major ML frameworks (each library's documentation lists its own; see
/// `docs/manifest.md`).
pub const RELEVANT_PREFIXES: &[&str] = &[
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

/// Single variables that matter: Python's hashing and path, the dynamic loader, Rust code
/// generation flags, the active environment, thread pools of other libraries.
pub const RELEVANT_NAMES: &[&str] = &[
    "PYTHONHASHSEED",
    "PYTHONPATH",
    "PYTHONNOUSERSITE",
    "PYTHONOPTIMIZE",
    "LD_LIBRARY_PATH",
    "LD_PRELOAD",
    "DYLD_LIBRARY_PATH",
    "DYLD_INSERT_LIBRARIES",
    "RUSTFLAGS",
    "CARGO_BUILD_RUSTFLAGS",
    "RAYON_NUM_THREADS",
    "VIRTUAL_ENV",
    "CONDA_PREFIX",
    "CONDA_DEFAULT_ENV",
];

/// True when a variable is recorded.
pub fn is_relevant(name: &str) -> bool {
    RELEVANT_NAMES.contains(&name) || RELEVANT_PREFIXES.iter().any(|p| name.starts_with(p))
}

/// Picks the relevant variables out of an environment snapshot. With `private`, values that
/// contain absolute paths are replaced by a short digest so that two runs can still be compared
/// without revealing folder or user names.
pub fn collect(vars: &BTreeMap<String, String>, private: bool) -> EnvInfo {
    let mut info = EnvInfo::default();
    for (name, value) in vars {
        if !is_relevant(name) {
            continue;
        }
        if is_secret_name(name) || looks_secret_value(value) {
            info.redacted.push(name.clone());
            continue;
        }
        let value = scrub_url_credentials(value);
        let value = if private && value.contains('/') {
            crate::privacy::digest(&value)
        } else {
            value
        };
        info.vars.insert(name.clone(), value);
    }
    info
}

#[cfg(test)]
mod tests {
    use super::*;

    fn env(pairs: &[(&str, &str)]) -> BTreeMap<String, String> {
        pairs
            .iter()
            .map(|(k, v)| (k.to_string(), v.to_string()))
            .collect()
    }

    #[test]
    fn keeps_relevant_drops_the_rest_and_hides_secrets() {
        let info = collect(
            &env(&[
                ("OMP_NUM_THREADS", "4"),
                ("HOME", "/home/someone"),
                ("CUDA_TOKEN", "abc"),
                ("TF_SERVER", "https://u:p@host.invalid/x"),
                ("CUBLAS_WORKSPACE_CONFIG", ":4096:8"),
            ]),
            false,
        );
        assert_eq!(info.vars.get("OMP_NUM_THREADS").unwrap(), "4");
        assert_eq!(info.vars.get("CUBLAS_WORKSPACE_CONFIG").unwrap(), ":4096:8");
        assert!(!info.vars.contains_key("HOME"));
        assert_eq!(info.redacted, vec!["CUDA_TOKEN", "TF_SERVER"]);
    }

    #[test]
    fn private_hashes_paths() {
        let info = collect(&env(&[("VIRTUAL_ENV", "/home/someone/.venv")]), true);
        let v = info.vars.get("VIRTUAL_ENV").unwrap();
        assert!(v.starts_with("private:sha256:") && !v.contains("someone"));
    }
}
