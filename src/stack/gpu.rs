//! NVIDIA driver and CUDA library versions, read from text files and headers.
//!
//! Layouts, each as documented by NVIDIA:
//! * `/proc/driver/nvidia/version`: first line `NVRM version: NVIDIA UNIX x86_64 Kernel Module
//!   <version> <date>` (or `... Open Kernel Module for x86_64 <version> Release Build ...`);
//!   NVIDIA Linux driver README, chapter "Using the /proc File System Interface".
//! * `/proc/driver/nvidia/gpus/<bus id>/information`: `Key: value` lines with `Model` and
//!   `Bus Location` (same chapter).
//! * `<toolkit>/version.json` (CUDA 11.1 and later): one object per component, with
//!   `cuda.version`, `cuda_cudart.version`, `cuda_nvcc.version`; older toolkits have
//!   `version.txt` with `CUDA Version X.Y.Z` (CUDA Installation Guide for Linux, "Verify the
//!   installation"/toolkit layout).
//! * `cudnn_version.h`: `CUDNN_MAJOR`, `CUDNN_MINOR`, `CUDNN_PATCHLEVEL` (cuDNN Installation
//!   Guide, "Verifying the install"); the combined `CUDNN_VERSION` changed its formula in 9, so
//!   only the three parts are used.
//! * `nccl.h`: `NCCL_MAJOR`, `NCCL_MINOR`, `NCCL_PATCH`, `NCCL_SUFFIX` (NCCL docs, "NCCL API"
//!   version macros).
//! * `cublas_api.h`: `CUBLAS_VER_MAJOR`, `_MINOR`, `_PATCH`, `_BUILD` (cuBLAS docs).
//! * `cuda_runtime_api.h`: `CUDART_VERSION` = major × 1000 + minor × 10 (CUDA Runtime API,
//!   "Version Management").
//! * `nvidia-smi --query-gpu=... --format=csv,noheader,nounits` (nvidia-smi manual page).

use crate::error::LockfileError;
use crate::manifest::GpuDevice;

/// The driver version from `/proc/driver/nvidia/version`.
pub fn parse_driver_version(text: &str) -> Option<String> {
    let first = text.lines().find(|l| l.starts_with("NVRM version:"))?;
    first
        .split_whitespace()
        .find(|t| {
            let parts: Vec<&str> = t.split('.').collect();
            (2..=3).contains(&parts.len())
                && parts
                    .iter()
                    .all(|p| !p.is_empty() && p.bytes().all(|b| b.is_ascii_digit()))
        })
        .map(str::to_string)
}

/// Versions of a toolkit: (toolkit, runtime, nvcc).
pub type ToolkitVersions = (Option<String>, Option<String>, Option<String>);

/// Versions in a toolkit's `version.json`: (toolkit, runtime, nvcc).
pub fn parse_cuda_version_json(text: &str, path: &str) -> Result<ToolkitVersions, LockfileError> {
    let v: serde_json::Value = serde_json::from_str(text)
        .map_err(|e| LockfileError::at(path, Some(e.line()), e.to_string()))?;
    if !v.is_object() {
        return Err(LockfileError::at(path, None, "expected a JSON object"));
    }
    let get = |k: &str| {
        v.get(k)
            .and_then(|c| c.get("version"))
            .and_then(|s| s.as_str())
            .map(str::to_string)
    };
    Ok((get("cuda"), get("cuda_cudart"), get("cuda_nvcc")))
}

/// The version in an old toolkit's `version.txt` (`CUDA Version 10.2.89`).
pub fn parse_cuda_version_txt(text: &str) -> Option<String> {
    text.lines()
        .find_map(|l| l.trim().strip_prefix("CUDA Version "))
        .map(|v| v.trim().to_string())
}

/// The value of `#define NAME value` in a C header.
pub fn define(text: &str, name: &str) -> Option<String> {
    text.lines().find_map(|l| {
        let rest = l.trim_start().strip_prefix('#')?.trim_start();
        let mut it = rest.strip_prefix("define")?.split_whitespace();
        (it.next()? == name).then(|| it.collect::<Vec<_>>().join(" "))
    })
}

fn define_num(text: &str, name: &str) -> Option<u32> {
    define(text, name)?
        .trim_matches(|c| c == '(' || c == ')')
        .parse()
        .ok()
}

/// cuDNN version from `cudnn_version.h` (or `cudnn.h` before 8).
pub fn parse_cudnn_header(text: &str) -> Option<String> {
    Some(format!(
        "{}.{}.{}",
        define_num(text, "CUDNN_MAJOR")?,
        define_num(text, "CUDNN_MINOR")?,
        define_num(text, "CUDNN_PATCHLEVEL")?
    ))
}

/// NCCL version from `nccl.h`.
pub fn parse_nccl_header(text: &str) -> Option<String> {
    let suffix = define(text, "NCCL_SUFFIX")
        .map(|s| s.trim_matches('"').to_string())
        .unwrap_or_default();
    Some(format!(
        "{}.{}.{}{}",
        define_num(text, "NCCL_MAJOR")?,
        define_num(text, "NCCL_MINOR")?,
        define_num(text, "NCCL_PATCH")?,
        suffix
    ))
}

/// cuBLAS version from `cublas_api.h`.
pub fn parse_cublas_header(text: &str) -> Option<String> {
    let mut v = format!(
        "{}.{}.{}",
        define_num(text, "CUBLAS_VER_MAJOR")?,
        define_num(text, "CUBLAS_VER_MINOR")?,
        define_num(text, "CUBLAS_VER_PATCH")?
    );
    if let Some(b) = define_num(text, "CUBLAS_VER_BUILD") {
        v.push_str(&format!(".{b}"));
    }
    Some(v)
}

/// CUDA runtime major.minor from `cuda_runtime_api.h`'s `CUDART_VERSION`.
pub fn parse_cudart_header(text: &str) -> Option<String> {
    let v = define_num(text, "CUDART_VERSION")?;
    Some(format!("{}.{}", v / 1000, (v % 1000) / 10))
}

/// One GPU from `/proc/driver/nvidia/gpus/<bus>/information`.
pub fn parse_gpu_information(text: &str, bus_dir: &str) -> Option<GpuDevice> {
    let field = |key: &str| {
        text.lines().find_map(|l| {
            let (k, v) = l.split_once(':')?;
            (k.trim() == key).then(|| v.trim().to_string())
        })
    };
    Some(GpuDevice {
        bus_id: field("Bus Location").unwrap_or_else(|| bus_dir.to_string()),
        model: field("Model")?,
        memory_mib: None,
        compute_capability: None,
    })
}

/// GPUs from `nvidia-smi --query-gpu=pci.bus_id,name,memory.total,compute_cap
/// --format=csv,noheader,nounits`.
pub fn parse_nvidia_smi_csv(text: &str) -> Vec<GpuDevice> {
    text.lines()
        .filter_map(|l| {
            let cols: Vec<&str> = l.split(',').map(str::trim).collect();
            if cols.len() < 2 || cols[1].is_empty() {
                return None;
            }
            Some(GpuDevice {
                bus_id: cols[0].to_string(),
                model: cols[1].to_string(),
                memory_mib: cols.get(2).and_then(|m| m.parse().ok()),
                compute_capability: cols
                    .get(3)
                    .filter(|c| c.contains('.') && !c.contains('['))
                    .map(|c| c.to_string()),
            })
        })
        .collect()
}

/// The version in a versioned library file name (`libcudart.so.12.4.127` → `12.4.127`).
pub fn version_from_soname(file: &str, stem: &str) -> Option<String> {
    let rest = file.strip_prefix(stem)?.strip_prefix(".so.")?;
    (!rest.is_empty() && rest.bytes().all(|b| b.is_ascii_digit() || b == b'.'))
        .then(|| rest.to_string())
}

/// NCCL's version and the CUDA it was built for from the `NCCL version 2.21.5+cuda12.4`
/// string in `libnccl.so`.
pub fn nccl_binary_version(data: &[u8]) -> Option<String> {
    let pos = memchr::memmem::find(data, b"NCCL version ")?;
    let rest = &data[pos + 13..];
    let end = rest
        .iter()
        .position(|&b| b == 0 || b.is_ascii_whitespace())
        .unwrap_or(rest.len())
        .min(64);
    let v = String::from_utf8_lossy(&rest[..end]).into_owned();
    v.starts_with(|c: char| c.is_ascii_digit()).then_some(v)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn header_formulas() {
        assert_eq!(
            parse_cudart_header("#define CUDART_VERSION  12090\n").as_deref(),
            Some("12.9")
        );
        assert_eq!(
            version_from_soname("libcudart.so.12.4.127", "libcudart").as_deref(),
            Some("12.4.127")
        );
        assert_eq!(version_from_soname("libcudart.so", "libcudart"), None);
        assert_eq!(
            nccl_binary_version(b"\0NCCL version 2.32.3+cuda12.9\0").as_deref(),
            Some("2.32.3+cuda12.9")
        );
    }

    #[test]
    fn smi_csv() {
        let gpus = parse_nvidia_smi_csv("00000000:01:00.0, NVIDIA A100-SXM4-40GB, 40960, 8.0\n");
        assert_eq!(gpus[0].memory_mib, Some(40960));
        assert_eq!(gpus[0].compute_capability.as_deref(), Some("8.0"));
        assert!(parse_nvidia_smi_csv("").is_empty());
    }
}
