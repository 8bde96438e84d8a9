//! The GPU stack: NVIDIA driver, CUDA toolkits, cuDNN/cuBLAS/NCCL/CUDA runtime copies and
//! the GPUs, read from files (see [`crate::stack::gpu`] for each layout). No CUDA library is
//! loaded; `nvidia-smi` is run only when the driver's `/proc` folder exists and the program is
//! on `PATH`. A machine without a GPU gets an empty section, never a warning.

use std::collections::{BTreeMap, BTreeSet};
use std::path::{Path, PathBuf};
use std::process::Command;

use crate::collect::python::PythonScan;
use crate::manifest::{CudaToolkit, GpuDevice, GpuInfo, GpuLibrary};
use crate::stack::gpu as parse;

/// Where to look; [`GpuPaths::host`] gives this machine's standard places.
#[derive(Debug, Clone)]
pub struct GpuPaths {
    /// The driver's `/proc` folder (`/proc/driver/nvidia`).
    pub proc_nvidia: PathBuf,
    /// Candidate toolkit folders.
    pub toolkits: Vec<PathBuf>,
    /// System header folders.
    pub include_dirs: Vec<PathBuf>,
    /// System library folders (versioned file names give versions).
    pub lib_dirs: Vec<PathBuf>,
    /// `nvidia-smi`, when it should be asked.
    pub nvidia_smi: Option<PathBuf>,
}

impl GpuPaths {
    /// The standard places on this machine: `/usr/local/cuda*`, `/opt/cuda`, `CUDA_HOME`,
    /// `CUDA_PATH`, `/usr/include`, the multiarch folders.
    pub fn host(env: &BTreeMap<String, String>) -> GpuPaths {
        let mut toolkits: Vec<PathBuf> = ["CUDA_HOME", "CUDA_PATH"]
            .iter()
            .filter_map(|v| env.get(*v))
            .map(PathBuf::from)
            .collect();
        toolkits.push(PathBuf::from("/opt/cuda"));
        toolkits.extend(
            std::fs::read_dir("/usr/local")
                .into_iter()
                .flatten()
                .flatten()
                .map(|e| e.path())
                .filter(|p| {
                    p.file_name()
                        .is_some_and(|n| n.to_string_lossy().starts_with("cuda"))
                }),
        );
        let multiarch = format!("{}-linux-gnu", std::env::consts::ARCH);
        GpuPaths {
            proc_nvidia: PathBuf::from("/proc/driver/nvidia"),
            toolkits,
            include_dirs: vec![
                PathBuf::from("/usr/include"),
                Path::new("/usr/include").join(&multiarch),
            ],
            lib_dirs: vec![
                Path::new("/usr/lib").join(&multiarch),
                PathBuf::from("/usr/lib64"),
            ],
            nvidia_smi: crate::collect::python::which("nvidia-smi", env),
        }
    }
}

/// Collects the GPU section.
pub fn collect(paths: &GpuPaths, scans: &[PythonScan], warnings: &mut Vec<String>) -> GpuInfo {
    finish(probe(paths), scans, warnings)
}

/// What [`probe`] found on the machine itself: everything but the CUDA libraries that Python
/// environments installed as wheels, which [`finish`] adds. The two halves let the probe run
/// while the Python environments are read.
#[derive(Default)]
pub struct Probe {
    info: GpuInfo,
    libraries: BTreeSet<GpuLibrary>,
    warnings: Vec<String>,
}

/// The driver, toolkits, headers, libraries in the system's folders, and the devices.
pub fn probe(paths: &GpuPaths) -> Probe {
    let mut warnings = Vec::new();
    let mut info = GpuInfo {
        nvidia_driver: crate::limits::read_regular_text(&paths.proc_nvidia.join("version"))
            .ok()
            .and_then(|t| parse::parse_driver_version(&t)),
        ..GpuInfo::default()
    };
    let mut libraries = BTreeSet::new();

    // Toolkits, each once even when reached through several links.
    let mut seen = BTreeSet::new();
    for dir in &paths.toolkits {
        let Ok(real) = std::fs::canonicalize(dir) else {
            continue;
        };
        if !seen.insert(real.clone()) {
            continue;
        }
        let mut tk = CudaToolkit {
            path: real.display().to_string(),
            ..CudaToolkit::default()
        };
        let json = real.join("version.json");
        if let Ok(text) = crate::limits::read_regular_text(&json) {
            match parse::parse_cuda_version_json(&text, &json.display().to_string()) {
                Ok((cuda, runtime, nvcc)) => {
                    tk.version = cuda;
                    tk.runtime = runtime;
                    tk.nvcc = nvcc;
                }
                Err(e) => warnings.push(format!("gpu: {e}")),
            }
        } else if let Ok(text) = crate::limits::read_regular_text(&real.join("version.txt")) {
            tk.version = parse::parse_cuda_version_txt(&text);
        }
        let include = real.join("include");
        headers(&include, "toolkit", &mut libraries);
        if tk.version.is_some() || tk.runtime.is_some() || include.join("cuda.h").exists() {
            info.cuda_toolkits.push(tk);
        }
    }
    for dir in &paths.include_dirs {
        headers(dir, "system", &mut libraries);
    }
    for dir in &paths.lib_dirs {
        for entry in std::fs::read_dir(dir).into_iter().flatten().flatten() {
            let name = entry.file_name().to_string_lossy().into_owned();
            for (lib, stem) in [
                ("cudart", "libcudart"),
                ("cudnn", "libcudnn"),
                ("cublas", "libcublas"),
                ("nccl", "libnccl"),
            ] {
                if let Some(v) = parse::version_from_soname(&name, stem) {
                    if v.matches('.').count() >= 1 {
                        libraries.insert(GpuLibrary {
                            name: lib.into(),
                            version: v,
                            owner: "system".into(),
                            from: name.clone(),
                        });
                    }
                }
            }
        }
    }

    // GPUs: the driver's per-device files, completed by nvidia-smi where it answers.
    let mut devices: BTreeMap<String, GpuDevice> = BTreeMap::new();
    for entry in std::fs::read_dir(paths.proc_nvidia.join("gpus"))
        .into_iter()
        .flatten()
        .flatten()
    {
        let bus = entry.file_name().to_string_lossy().into_owned();
        if let Ok(text) = crate::limits::read_regular_text(&entry.path().join("information")) {
            if let Some(d) = parse::parse_gpu_information(&text, &bus) {
                devices.insert(normalize_bus(&d.bus_id), d);
            }
        }
    }
    if paths.proc_nvidia.exists() {
        if let Some(smi) = &paths.nvidia_smi {
            for d in query_smi(smi) {
                let key = normalize_bus(&d.bus_id);
                let slot = devices.entry(key).or_insert_with(|| d.clone());
                slot.memory_mib = d.memory_mib;
                slot.compute_capability = d.compute_capability.clone();
            }
        }
    }
    info.devices = devices.into_values().collect();
    Probe {
        info,
        libraries,
        warnings,
    }
}

impl Probe {
    /// What is left of a probe that stopped unexpectedly: nothing but the warning.
    pub fn stopped() -> Probe {
        Probe {
            warnings: vec!["gpu: the probe stopped unexpectedly".into()],
            ..Probe::default()
        }
    }
}

/// The GPU section: `probe`'s findings with the CUDA libraries of the Python environments'
/// wheels; the probe's warnings join `warnings`.
pub fn finish(probe: Probe, scans: &[PythonScan], warnings: &mut Vec<String>) -> GpuInfo {
    let Probe {
        mut info,
        mut libraries,
        warnings: found,
    } = probe;
    warnings.extend(found);
    // NVIDIA's CUDA wheels: the distribution's version is the library's.
    for scan in scans {
        for d in &scan.env.distributions {
            let lib = match d.name.as_str() {
                n if n.starts_with("nvidia-cudnn-") || n == "nvidia-cudnn" => "cudnn",
                n if n.starts_with("nvidia-cublas-") || n == "nvidia-cublas" => "cublas",
                n if n.starts_with("nvidia-nccl-") || n == "nvidia-nccl" => "nccl",
                n if n.starts_with("nvidia-cuda-runtime") => "cudart",
                _ => continue,
            };
            libraries.insert(GpuLibrary {
                name: lib.into(),
                version: d.version.clone(),
                owner: d.name.clone(),
                from: "metadata".into(),
            });
        }
    }
    info.libraries = libraries.into_iter().collect();
    info
}

/// `00000000:01:00.0` and `0000:01:00.0` name the same device.
fn normalize_bus(bus: &str) -> String {
    let b = bus.to_ascii_lowercase();
    match b.split_once(':') {
        Some((domain, rest)) if domain.len() > 4 => {
            format!("{}:{rest}", &domain[domain.len() - 4..])
        }
        _ => b,
    }
}

fn query_smi(smi: &Path) -> Vec<GpuDevice> {
    for fields in [
        "pci.bus_id,name,memory.total,compute_cap",
        "pci.bus_id,name,memory.total",
    ] {
        let mut cmd = Command::new(smi);
        cmd.args([
            &format!("--query-gpu={fields}"),
            "--format=csv,noheader,nounits",
        ]);
        // A driver in a bad state can make nvidia-smi hang; a stamp must not.
        let out = crate::child::run(
            cmd,
            crate::child::timeout(std::time::Duration::from_secs(20)),
            1 << 20,
        );
        if let Ok(out) = out {
            if out.status.success() {
                return parse::parse_nvidia_smi_csv(&String::from_utf8_lossy(&out.stdout));
            }
        }
    }
    Vec::new()
}

/// Library versions from the headers in a folder.
fn headers(dir: &Path, owner: &str, out: &mut BTreeSet<GpuLibrary>) {
    let read = |name: &str| crate::limits::read_regular_text(&dir.join(name)).ok();
    let mut add = |lib: &str, version: Option<String>, file: &str| {
        if let Some(version) = version {
            out.insert(GpuLibrary {
                name: lib.into(),
                version,
                owner: owner.into(),
                from: file.into(),
            });
        }
    };
    if let Some(t) = read("cudnn_version.h") {
        add("cudnn", parse::parse_cudnn_header(&t), "cudnn_version.h");
    } else if let Some(t) = read("cudnn.h") {
        add("cudnn", parse::parse_cudnn_header(&t), "cudnn.h");
    }
    // Debian/Ubuntu packages: cudnn_version_v8.h, cudnn_version_v9.h.
    for entry in std::fs::read_dir(dir).into_iter().flatten().flatten() {
        let name = entry.file_name().to_string_lossy().into_owned();
        if name.starts_with("cudnn_version_v") && name.ends_with(".h") {
            if let Ok(t) = crate::limits::read_regular_text(&entry.path()) {
                add("cudnn", parse::parse_cudnn_header(&t), &name);
            }
        }
    }
    if let Some(t) = read("nccl.h") {
        add("nccl", parse::parse_nccl_header(&t), "nccl.h");
    }
    if let Some(t) = read("cublas_api.h") {
        add("cublas", parse::parse_cublas_header(&t), "cublas_api.h");
    }
    if let Some(t) = read("cuda_runtime_api.h") {
        add(
            "cudart",
            parse::parse_cudart_header(&t),
            "cuda_runtime_api.h",
        );
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn bus_ids_compare_across_sources() {
        assert_eq!(normalize_bus("00000000:01:00.0"), "0000:01:00.0");
        assert_eq!(normalize_bus("0000:01:00.0"), "0000:01:00.0");
    }

    #[test]
    fn nothing_present_is_an_empty_section_without_warnings() {
        let paths = GpuPaths {
            proc_nvidia: PathBuf::from("/nonexistent/proc"),
            toolkits: vec![PathBuf::from("/nonexistent/cuda")],
            include_dirs: vec![],
            lib_dirs: vec![],
            nvidia_smi: None,
        };
        let mut warnings = Vec::new();
        let info = collect(&paths, &[], &mut warnings);
        assert_eq!(info, GpuInfo::default());
        assert!(warnings.is_empty());
    }
}
