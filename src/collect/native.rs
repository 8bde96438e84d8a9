//! BLAS/LAPACK and OpenMP libraries bundled in Python distributions or installed on the
//! system, which distribution links which, and compiled modules with fast-math start-up code.
//!
//! Every compiled file a distribution's `RECORD` lists is memory-mapped and its ELF headers
//! read (see [`crate::stack::elf`]); nothing is loaded. A `DT_NEEDED` entry is resolved the
//! way the loader would for the cases that matter here: `DT_RPATH`/`DT_RUNPATH` folders with
//! `$ORIGIN` expanded, then the loader's cache, then the standard folders. Libraries are
//! recognised by file name (see [`crate::stack::blas::classify`]) and then read for version,
//! threading layer and build options.
//!
//! What decides thread counts and kernels is recorded beside each library: its threading
//! layer, `MAX_THREADS`, whether it picks kernels at run time (`DYNAMIC_ARCH`), the family
//! `OPENBLAS_CORETYPE` asks for and the kernel family it will really use on this CPU
//! ([`crate::stack::openblas_core`]). The variables themselves and the CPU count are in the
//! `env` and `cpu` sections.

use crate::collect::fsdeps;
use std::collections::{BTreeMap, BTreeSet};
use std::path::{Path, PathBuf};

use crate::collect::python::PythonScan;
use crate::manifest::{FastMathModule, NativeInfo, NativeLibrary};
use crate::stack::blas::{self, Role};
use crate::stack::elf::{is_elf, is_fast_math_constructor, ElfFile};
use crate::stack::ldcache;
use crate::stack::openblas_core;

/// Where system libraries are looked for.
#[derive(Debug, Clone)]
pub struct SystemPaths {
    /// The loader's cache (normally `/etc/ld.so.cache`).
    pub ld_cache: Option<PathBuf>,
    /// Standard library folders.
    pub dirs: Vec<PathBuf>,
}

impl SystemPaths {
    /// This machine's loader cache and standard folders (with Debian's multiarch folder).
    pub fn host() -> SystemPaths {
        let multiarch = format!("{}-linux-gnu", std::env::consts::ARCH);
        let mut dirs: Vec<PathBuf> = ["/lib", "/lib64", "/usr/lib", "/usr/lib64", "/usr/local/lib"]
            .iter()
            .map(PathBuf::from)
            .collect();
        dirs.push(Path::new("/lib").join(&multiarch));
        dirs.push(Path::new("/usr/lib").join(&multiarch));
        SystemPaths {
            ld_cache: Some(PathBuf::from("/etc/ld.so.cache")),
            dirs,
        }
    }
}

/// A memory-mapped file.
fn map(path: &Path) -> std::io::Result<memmap2::Mmap> {
    let f = fsdeps::open(path)?;
    // SAFETY: the map is read-only and only lives while one file is examined; a file that is
    // truncated meanwhile by another process could fault, which is the accepted risk of every
    // tool that maps binaries (readelf, ldd's helpers).
    unsafe { memmap2::Mmap::map(&f) }
}

/// One library to describe.
struct Candidate {
    role: Role,
    implementation: &'static str,
    owner: String,
    shown: String,
}

/// Collects the native section for the scanned Python environments and the system.
pub fn collect(
    scans: &[PythonScan],
    env: &BTreeMap<String, String>,
    private: bool,
    system: &SystemPaths,
    warnings: &mut Vec<String>,
) -> NativeInfo {
    let cache: BTreeMap<String, String> = system
        .ld_cache
        .as_ref()
        .and_then(|p| fsdeps::read(p).ok())
        .and_then(|d| ldcache::parse(&d).ok())
        .map(|pairs| pairs.into_iter().rev().collect())
        .unwrap_or_default();

    let mut candidates: BTreeMap<PathBuf, Candidate> = BTreeMap::new();
    let mut used_by: BTreeMap<PathBuf, BTreeSet<String>> = BTreeMap::new();
    let mut fast_math = BTreeSet::new();
    let mut versions: BTreeMap<String, String> = BTreeMap::new();
    let mut blas_configs: BTreeMap<String, String> = BTreeMap::new();
    let mut through_scipy: BTreeSet<String> = BTreeSet::new();

    for scan in scans {
        for d in &scan.env.distributions {
            versions.insert(d.name.clone(), d.version.clone());
        }
        for b in &scan.env.builds {
            if let Some(c) = &b.blas_config {
                blas_configs.insert(b.name.clone(), c.clone());
            }
        }
        // Canonical path → (owner, path shown relative to its site folder).
        let mut owned: BTreeMap<PathBuf, (String, String)> = BTreeMap::new();
        for f in &scan.files {
            for rel in &f.compiled {
                if let Ok(real) = fsdeps::canonicalize(f.site.join(rel)) {
                    owned
                        .entry(real)
                        .or_insert((f.name.clone(), normalize_rel(rel)));
                }
            }
        }
        for (real, (owner, rel)) in &owned {
            let file = real.file_name().unwrap_or_default().to_string_lossy();
            let dir = parent_name(real);
            if let Some((role, implementation)) = blas::classify(&file, &dir) {
                candidates.entry(real.clone()).or_insert(Candidate {
                    role,
                    implementation,
                    owner: owner.clone(),
                    shown: rel.clone(),
                });
            }
            let Ok(data) = map(real) else { continue };
            if !is_elf(&data) {
                continue;
            }
            let Ok(elf) = ElfFile::parse(&data) else {
                continue;
            };
            // Compiled modules that take BLAS/LAPACK from SciPy through Python (the
            // `__pyx_capi__` of `scipy.linalg.cython_blas`/`cython_lapack`; jaxlib's CPU
            // LAPACK kernels and scikit-learn do): no DT_NEEDED entry shows it.
            if owner != "scipy" {
                let rodata = elf.section(".rodata").unwrap_or_default();
                if memchr::memmem::find(rodata, b"scipy.linalg.cython_").is_some() {
                    through_scipy.insert(owner.clone());
                }
            }
            if has_fast_math(&elf) {
                fast_math.insert(FastMathModule {
                    owner: owner.clone(),
                    path: rel.clone(),
                });
            }
            let dynamic = elf.dynamic();
            let origin = real.parent().unwrap_or(Path::new("/"));
            for needed in &dynamic.needed {
                let Some(target) = resolve(needed, origin, &dynamic, &cache, &system.dirs) else {
                    continue;
                };
                let tfile = target.file_name().unwrap_or_default().to_string_lossy();
                let Some((role, implementation)) = blas::classify(&tfile, &parent_name(&target))
                else {
                    continue;
                };
                used_by
                    .entry(target.clone())
                    .or_default()
                    .insert(owner.clone());
                candidates.entry(target.clone()).or_insert_with(|| {
                    let (owner, shown) = owned
                        .get(&target)
                        .cloned()
                        .unwrap_or_else(|| ("system".into(), system_path(&target, private)));
                    Candidate {
                        role,
                        implementation,
                        owner,
                        shown,
                    }
                });
            }
        }
        // Libraries installed into the environment's own lib/ (conda, pip's `mkl` wheel).
        if let Some(prefix) = &scan.prefix {
            let owner = if scan.env.kind == "conda" {
                "conda"
            } else {
                "environment"
            };
            for (real, role, implementation) in classified_files(&prefix.join("lib")) {
                let shown = real
                    .strip_prefix(prefix)
                    .map(|p| p.display().to_string())
                    .unwrap_or_else(|_| system_path(&real, private));
                candidates.entry(real).or_insert(Candidate {
                    role,
                    implementation,
                    owner: owner.into(),
                    shown,
                });
            }
        }
    }

    // The system's own BLAS/OpenMP libraries: the loader's cache and the standard folders
    // (with Debian's alternatives sub-folders).
    let mut system_files: Vec<PathBuf> = cache
        .iter()
        .filter(|(name, _)| blas::classify(name, "").is_some())
        .map(|(_, path)| PathBuf::from(path))
        .collect();
    for dir in &system.dirs {
        system_files.extend(list_dir(dir).into_iter().filter(|p| {
            let n = p.file_name().unwrap_or_default().to_string_lossy();
            blas::classify(&n, "").is_some() && n.contains(".so")
        }));
    }
    for p in system_files {
        let Ok(real) = fsdeps::canonicalize(&p) else {
            continue;
        };
        let file = real.file_name().unwrap_or_default().to_string_lossy();
        if let Some((role, implementation)) =
            blas::classify(&file, &parent_name(&real)).or_else(|| {
                blas::classify(
                    &p.file_name().unwrap_or_default().to_string_lossy(),
                    &parent_name(&real),
                )
            })
        {
            let shown = system_path(&real, private);
            candidates.entry(real).or_insert(Candidate {
                role,
                implementation,
                owner: "system".into(),
                shown,
            });
        }
    }

    // Libraries forced into every process through LD_PRELOAD (ld.so(8): paths, or names the
    // loader looks up; separated by colons or spaces). One the loader loads first wins
    // symbol lookups over a distribution's own copy.
    let mut preloaded = BTreeSet::new();
    for entry in env
        .get("LD_PRELOAD")
        .map(|v| {
            v.split([':', ' '])
                .filter(|e| !e.is_empty())
                .collect::<Vec<_>>()
        })
        .unwrap_or_default()
    {
        let path = if entry.contains('/') {
            Some(PathBuf::from(entry))
        } else {
            cache.get(entry).map(PathBuf::from)
        };
        let Some(real) = path.and_then(|p| fsdeps::canonicalize(p).ok()) else {
            continue;
        };
        let name = Path::new(entry)
            .file_name()
            .unwrap_or_default()
            .to_string_lossy();
        let file = real.file_name().unwrap_or_default().to_string_lossy();
        let Some((role, implementation)) = blas::classify(&file, &parent_name(&real))
            .or_else(|| blas::classify(&name, &parent_name(&real)))
        else {
            continue;
        };
        preloaded.insert(real.clone());
        let shown = system_path(&real, private);
        candidates.entry(real).or_insert(Candidate {
            role,
            implementation,
            owner: "system".into(),
            shown,
        });
    }

    let kernels = Kernels {
        coretype: env.get("OPENBLAS_CORETYPE").map(String::as_str),
        cpu: openblas_core::Cpu::this_machine(),
    };
    let mut libraries: Vec<NativeLibrary> = candidates
        .into_iter()
        .filter_map(|(real, c)| {
            let users = used_by.remove(&real).unwrap_or_default();
            match describe(&real, c, &versions, &blas_configs, &kernels) {
                Ok(mut lib) => {
                    lib.used_by = users.into_iter().collect();
                    lib.preloaded = preloaded.contains(&real);
                    if lib.implementation == "mkl" {
                        let (layer, problem) =
                            mkl_threading_layer(&real, env, &cache, &system.dirs);
                        lib.threading_layer = Some(layer.to_string());
                        warnings.extend(problem);
                    }
                    Some(lib)
                }
                Err(e) => {
                    warnings.push(format!("native: `{}`: {e}", real.display()));
                    None
                }
            }
        })
        .collect();
    for lib in libraries
        .iter_mut()
        .filter(|l| l.owner == "scipy" && l.role == "blas")
    {
        lib.used_by.extend(through_scipy.iter().cloned());
        lib.used_by.sort();
        lib.used_by.dedup();
    }
    libraries.sort_by(|a, b| (&a.owner, &a.role, &a.path).cmp(&(&b.owner, &b.role, &b.path)));
    libraries.dedup_by(|a, b| a.owner == b.owner && a.path == b.path);
    NativeInfo {
        libraries,
        fast_math: fast_math.into_iter().collect(),
    }
}

/// True when a constructor of this object is fast-math start-up code, or (unstripped files)
/// the object still names GCC's `set_fast_math`.
pub fn has_fast_math(elf: &ElfFile) -> bool {
    elf.constructors().into_iter().any(|addr| {
        elf.bytes_at(addr, 48)
            .is_some_and(|code| is_fast_math_constructor(elf.machine(), code))
    }) || elf.has_local_symbol("set_fast_math")
}

/// `a/./b/../c` → `a/c`, for RECORD paths such as `../../lib/libmkl_rt.so.2`.
fn normalize_rel(rel: &str) -> String {
    let mut parts: Vec<&str> = Vec::new();
    for p in rel.split('/') {
        match p {
            "" | "." => {}
            ".." if parts.last().is_some_and(|l| *l != "..") => {
                parts.pop();
            }
            _ => parts.push(p),
        }
    }
    parts.join("/")
}

/// Reads one BLAS or OpenMP file the way [`collect`] reads those it finds, for a library a
/// running process has mapped (`stamp --pid`); `env` is that process's environment. `None`
/// for a file that is neither, or cannot be read as one.
pub fn describe_mapped(
    real: &Path,
    owner: &str,
    env: &BTreeMap<String, String>,
    private: bool,
) -> Option<NativeLibrary> {
    let name = real.file_name()?.to_string_lossy().into_owned();
    let (role, implementation) = blas::classify(&name, &parent_name(real))?;
    let kernels = Kernels {
        coretype: env.get("OPENBLAS_CORETYPE").map(String::as_str),
        cpu: openblas_core::Cpu::this_machine(),
    };
    let candidate = Candidate {
        role,
        implementation,
        owner: owner.to_string(),
        shown: system_path(real, private),
    };
    describe(
        real,
        candidate,
        &BTreeMap::new(),
        &BTreeMap::new(),
        &kernels,
    )
    .ok()
}

fn parent_name(p: &Path) -> String {
    p.parent()
        .and_then(|d| d.file_name())
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default()
}

fn system_path(p: &Path, private: bool) -> String {
    let s = p.display().to_string();
    let public = ["/usr/", "/lib", "/opt/", "/etc/"]
        .iter()
        .any(|r| s.starts_with(r));
    if private && !public {
        crate::privacy::digest(&s)
    } else {
        s
    }
}

fn list_dir(dir: &Path) -> Vec<PathBuf> {
    let mut out: Vec<PathBuf> = fsdeps::read_dir(dir)
        .into_iter()
        .flatten()
        .flatten()
        .map(|e| e.path())
        .collect();
    // Debian's alternatives keep each BLAS in a folder named after it.
    let subdirs: Vec<PathBuf> = out
        .iter()
        .filter(|p| {
            let n = p.file_name().unwrap_or_default().to_string_lossy();
            ["openblas", "blis", "atlas", "blas", "lapack"]
                .iter()
                .any(|k| n.starts_with(k))
                && fsdeps::is_dir(p)
        })
        .cloned()
        .collect();
    for d in subdirs {
        out.extend(
            fsdeps::read_dir(d)
                .into_iter()
                .flatten()
                .flatten()
                .map(|e| e.path()),
        );
    }
    out
}

fn classified_files(dir: &Path) -> Vec<(PathBuf, Role, &'static str)> {
    list_dir(dir)
        .into_iter()
        .filter_map(|p| {
            let real = fsdeps::canonicalize(&p).ok()?;
            let n = real.file_name()?.to_string_lossy().into_owned();
            if !n.contains(".so") && !n.ends_with(".dylib") {
                return None;
            }
            let (role, implementation) = blas::classify(&n, &parent_name(&real))?;
            Some((real, (role, implementation)))
        })
        .collect::<BTreeMap<_, _>>()
        .into_iter()
        .map(|(p, (r, i))| (p, r, i))
        .collect()
}

/// Resolves a `DT_NEEDED` name for an object in `origin`.
/// The threading layer oneMKL's single dynamic library (`libmkl_rt`) will load:
/// `MKL_THREADING_LAYER` (`INTEL`, `GNU`, `TBB`, `SEQUENTIAL`, any case; unset or any other
/// value: `INTEL`; oneMKL Developer Guide, "Setting the Threading Layer at Run Time"; the
/// unknown-value case checked with threadpoolctl's `threading_layer` on mkl 2026.2.1), and a
/// warning when the layer's library is missing beside it or needs a library the loader will
/// not find (mkl 2026.2.1's `libmkl_tbb_thread.so.3` needs `libtbb.so.12` without a run path:
/// MKL then stops the process with "Cannot load libmkl_tbb_thread.so.3").
fn mkl_threading_layer(
    real: &Path,
    env: &BTreeMap<String, String>,
    cache: &BTreeMap<String, String>,
    dirs: &[PathBuf],
) -> (&'static str, Option<String>) {
    let requested = env
        .get("MKL_THREADING_LAYER")
        .map(|v| v.trim().to_ascii_lowercase());
    let (layer, stem) = match requested.as_deref() {
        Some("gnu") => ("gnu", "libmkl_gnu_thread.so"),
        Some("tbb") => ("tbb", "libmkl_tbb_thread.so"),
        Some("sequential") => ("sequential", "libmkl_sequential.so"),
        _ => ("intel", "libmkl_intel_thread.so"),
    };
    let dir = real.parent().unwrap_or(Path::new("/"));
    let Some(layer_lib) = list_dir(dir).into_iter().find(|p| {
        p.file_name()
            .is_some_and(|n| n.to_string_lossy().starts_with(stem))
    }) else {
        return (
            layer,
            Some(format!(
                "native: oneMKL's {layer} threading layer needs {stem}*, which is not beside `{}`: MKL stops the process when it loads",
                real.display()
            )),
        );
    };
    let Ok(data) = map(&layer_lib) else {
        return (layer, None);
    };
    let Ok(elf) = ElfFile::parse(&data) else {
        return (layer, None);
    };
    let dynamic = elf.dynamic();
    // LD_LIBRARY_PATH folders are searched too (ld.so(8)).
    let mut search: Vec<PathBuf> = env
        .get("LD_LIBRARY_PATH")
        .map(|v| std::env::split_paths(v).collect())
        .unwrap_or_default();
    search.extend(dirs.iter().cloned());
    let missing: Vec<&String> = dynamic
        .needed
        .iter()
        .filter(|n| resolve(n, dir, &dynamic, cache, &search).is_none())
        .collect();
    let problem = (!missing.is_empty()).then(|| {
        format!(
            "native: oneMKL's {layer} threading layer `{}` needs {}, which the loader will not find (no run path, not in LD_LIBRARY_PATH or the system folders): MKL stops the process when it loads",
            layer_lib.display(),
            missing.iter().map(|m| format!("`{m}`")).collect::<Vec<_>>().join(", ")
        )
    });
    (layer, problem)
}

fn resolve(
    needed: &str,
    origin: &Path,
    dynamic: &crate::stack::elf::DynamicInfo,
    cache: &BTreeMap<String, String>,
    dirs: &[PathBuf],
) -> Option<PathBuf> {
    if needed.contains('/') {
        return fsdeps::canonicalize(needed).ok();
    }
    let origin_s = origin.to_string_lossy();
    for entry in dynamic.rpath.iter().chain(&dynamic.runpath) {
        let dir = entry
            .replace("$ORIGIN", &origin_s)
            .replace("${ORIGIN}", &origin_s);
        let p = Path::new(&dir).join(needed);
        if fsdeps::exists(&p) {
            return fsdeps::canonicalize(p).ok();
        }
    }
    if let Some(p) = cache.get(needed) {
        return fsdeps::canonicalize(p).ok();
    }
    dirs.iter()
        .map(|d| d.join(needed))
        .find(|p| fsdeps::exists(p))
        .and_then(|p| fsdeps::canonicalize(p).ok())
}

/// What decides which kernels a dynamic-architecture BLAS runs: the variable that forces a
/// family (`None`: unset) and this machine's CPU.
struct Kernels<'a> {
    coretype: Option<&'a str>,
    cpu: Option<openblas_core::Cpu>,
}

/// Reads one library's facts.
fn describe(
    real: &Path,
    c: Candidate,
    versions: &BTreeMap<String, String>,
    blas_configs: &BTreeMap<String, String>,
    kernels: &Kernels,
) -> Result<NativeLibrary, String> {
    let data = map(real).map_err(|e| e.to_string())?;
    let file = real
        .file_name()
        .unwrap_or_default()
        .to_string_lossy()
        .into_owned();
    let mut lib = NativeLibrary {
        role: c.role.as_str().into(),
        implementation: c.implementation.into(),
        owner: c.owner.clone(),
        path: c.shown,
        file: file.clone(),
        ..NativeLibrary::default()
    };
    let elf = if is_elf(&data) {
        Some(ElfFile::parse(&data)?)
    } else {
        None
    };
    let rodata = elf
        .as_ref()
        .and_then(|e| e.section(".rodata"))
        .unwrap_or(&data[..]);
    match (c.role, c.implementation) {
        (Role::Blas, "openblas") => {
            if let Some(build) = blas::read_openblas(elf.as_ref(), rodata) {
                let cfg = &build.config;
                lib.version = Some(cfg.version.clone());
                lib.version_source = Some("binary".into());
                lib.ilp64 = Some(cfg.is_ilp64());
                lib.dynamic_arch = Some(cfg.is_dynamic_arch());
                // An option list glued from pieces is left out rather than recorded wrong.
                lib.build_config =
                    Some(cfg.options.clone()).filter(|o| build.whole && !o.is_empty());
                // MAX_THREADS is appended at run time from a constant in the code; without
                // it, the owning package's build record keeps the whole line when it
                // describes this same version.
                lib.max_threads = build.max_threads.or_else(|| {
                    let full = blas_configs.get(&c.owner)?;
                    (full.split_whitespace().nth(1) == Some(cfg.version.as_str()))
                        .then(|| blas::max_threads(full))
                        .flatten()
                });
                if cfg.is_dynamic_arch() {
                    lib.requested_kernel_family = kernels.coretype.map(str::to_string);
                    let model = openblas_core::release(&cfg.version)
                        .and_then(|r| openblas_core::Build::new(r, build.tables.clone()));
                    if let (Some(model), Some(cpu)) = (model, kernels.cpu) {
                        let (_, name) = openblas_core::chosen(&model, &cpu, kernels.coretype);
                        lib.kernel_family = Some(name.to_string());
                    }
                } else if build.whole {
                    // A build for one CPU names its only kernel last (`CHAR_CORENAME`).
                    lib.kernel_family = cfg
                        .options
                        .split_whitespace()
                        .last()
                        .filter(|w| !w.starts_with("NO_") && !w.starts_with("USE"))
                        .map(str::to_string);
                }
            } else if let Some(v) = openblas_version_from_name(&blas::unhashed_name(&file)) {
                lib.version = Some(v);
                lib.version_source = Some("file-name".into());
            }
            lib.threading_layer = elf
                .as_ref()
                .and_then(blas::openblas_threading)
                .map(str::to_string);
        }
        (Role::Blas, "blis") => {
            if let Some(e) = &elf {
                let (v, t) = blas::blis_facts(e);
                lib.version_source = v.as_ref().map(|_| "binary".into());
                lib.version = v;
                lib.threading_layer = t.map(str::to_string);
            }
        }
        (Role::Blas, "mkl") => {
            if let Some(v) = versions.get("mkl").filter(|_| c.owner != "system") {
                lib.version = Some(v.clone());
                lib.version_source = Some("metadata".into());
            }
            if let Some(date) = blas::mkl_build_date(&data).filter(|d| !d.is_empty()) {
                lib.build_config = Some(format!("build {date}"));
            }
        }
        (Role::Blas, _) => {
            if let Some(v) = version_from_file_name(&file) {
                lib.version = Some(v);
                lib.version_source = Some("file-name".into());
            }
        }
        (Role::OpenMp, implementation) => {
            let implementation = if implementation == "gnu" && blas::is_llvm_openmp(&data) {
                "llvm"
            } else {
                implementation
            };
            lib.implementation = implementation.into();
            if let Some(e) = &elf {
                lib.build_hint = blas::openmp_hint(e, &data, implementation);
            }
        }
    }
    Ok(lib)
}

/// `libopenblasp-r0.3.21.so` → `0.3.21`; `libopenblas64_p-r0.3.23.dev.so` → `0.3.23.dev`.
fn openblas_version_from_name(name: &str) -> Option<String> {
    let rest = &name[name.find("-r")? + 2..];
    let v = rest.strip_suffix(".so").unwrap_or(rest);
    v.starts_with(|c: char| c.is_ascii_digit())
        .then(|| v.to_string())
}

/// `libblas.so.3.11.0` → `3.11.0` (Debian's reference BLAS names the LAPACK release).
fn version_from_file_name(name: &str) -> Option<String> {
    let rest = &name[name.find(".so.")? + 4..];
    (rest.matches('.').count() >= 1).then(|| rest.to_string())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_and_paths() {
        assert_eq!(
            normalize_rel("../../lib/libmkl_rt.so.2"),
            "../../lib/libmkl_rt.so.2"
        );
        assert_eq!(normalize_rel("a/./b/../c.so"), "a/c.so");
        assert_eq!(
            openblas_version_from_name("libopenblasp-r0.3.21.so").as_deref(),
            Some("0.3.21")
        );
        assert_eq!(
            version_from_file_name("libblas.so.3.11.0").as_deref(),
            Some("3.11.0")
        );
        assert_eq!(version_from_file_name("libblas.so.3"), None);
    }
}
