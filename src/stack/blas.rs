//! Recognising BLAS/LAPACK and OpenMP libraries and reading their version and build options
//! from the library file.
//!
//! File names are matched the way threadpoolctl matches them (lower-cased base name starting
//! with `libopenblas`, `libscipy_openblas`, `openblas`, `libblis`, `libmkl_rt`, `mkl_rt`,
//! `libflexiblas`, `libgomp`, `libomp`, `libiomp`; threadpoolctl 3.8 `_ALL_CONTROLLERS`), so a
//! static result can be checked against it. System-wide `libblas.so.3`/`liblapack.so.3` are
//! named after the folder their link resolves into (Debian's alternatives layout:
//! `openblas-pthread`, `blis-openmp`, `atlas`, `blas`, `lapack`).
//!
//! Version strings (each documented where it is produced):
//! * OpenBLAS: `openblas_get_config()` returns `"OpenBLAS <version> <options>"` built from a
//!   compile-time string (OpenBLAS `driver/others/openblas_get_config.c`); the static part
//!   sits in `.rodata`. The version is the second whitespace token, as threadpoolctl reads it.
//!   Some compilers cut the constant into pieces, so the option list is best effort.
//! * MKL: `mkl_get_version_string` prints `Intel(R) oneAPI Math Kernel Library Version
//!   2024.2-Product Build 20240605 for Intel(R) 64 architecture applications` (oneMKL
//!   Developer Reference, "mkl_get_version_string"); the binary holds the pieces, among them
//!   the build date just before the product name.
//! * OpenMP runtimes: LLVM and Intel embed "what-strings" `@(#) LLVM OMP ...` /
//!   `@(#) Intel(R) OMP ...`; GNU libgomp has none, so its newest symbol version
//!   (`GOMP_5.0`…) and the `.comment` compiler line stand in.

use crate::stack::elf::{constant_return, string_return_target, ElfFile};

/// What a library is for.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Role {
    /// BLAS/LAPACK.
    Blas,
    /// OpenMP runtime.
    OpenMp,
}

impl Role {
    /// The manifest word.
    pub fn as_str(self) -> &'static str {
        match self {
            Role::Blas => "blas",
            Role::OpenMp => "openmp",
        }
    }
}

/// True for a file shipped beside an OpenMP runtime that is not one (see [`classify`]).
/// Manifests written before these were left out list them; the diff ignores them there.
pub fn is_beside_a_runtime(file_name: &str) -> bool {
    let f = file_name.to_ascii_lowercase();
    ["libiomp5_db", "libiompstubs", "libomptarget"]
        .iter()
        .any(|p| f.starts_with(p))
}

/// Classifies a library by its (real) file name; `dir` is the name of the folder it resolves
/// into, used for the generic `libblas`/`liblapack` names.
pub fn classify(file_name: &str, dir: &str) -> Option<(Role, &'static str)> {
    let f = file_name.to_ascii_lowercase();
    let is = |p: &str| f.starts_with(p);
    if is("libopenblas") || is("libscipy_openblas") || is("openblas") {
        return Some((Role::Blas, "openblas"));
    }
    if is("libblis") {
        return Some((Role::Blas, "blis"));
    }
    if is("libmkl_rt") || is("mkl_rt") {
        return Some((Role::Blas, "mkl"));
    }
    if is("libflexiblas") {
        return Some((Role::Blas, "flexiblas"));
    }
    if is("libatlas") || is("libsatlas") || is("libtatlas") {
        return Some((Role::Blas, "atlas"));
    }
    // Shipped beside the OpenMP runtimes but not one themselves, so never the runtime a
    // process threads with: Intel's debugger-support library (`libiomp5_db`) and serial stubs
    // (`libiompstubs5`), LLVM's device-offloading runtime and its plugins (`libomptarget*`).
    // (Value from memory of the Intel and LLVM OpenMP documentation; the file names are those
    // of the intel-openmp 2026.2.0 wheel.)
    if is_beside_a_runtime(&f) {
        return None;
    }
    if is("libiomp") {
        return Some((Role::OpenMp, "intel"));
    }
    if is("libgomp") {
        return Some((Role::OpenMp, "gnu"));
    }
    if is("libomp") {
        return Some((Role::OpenMp, "llvm"));
    }
    if is("libblas.so") || is("liblapack.so") || is("libcblas.so") {
        let d = dir.to_ascii_lowercase();
        let implementation = if d.starts_with("openblas") {
            "openblas"
        } else if d.starts_with("blis") {
            "blis"
        } else if d.starts_with("atlas") {
            "atlas"
        } else if d.contains("mkl") {
            "mkl"
        } else {
            // Debian's `blas`/`lapack` folders and a plain libblas hold the reference code.
            "reference"
        };
        return Some((Role::Blas, implementation));
    }
    None
}

/// The name auditwheel gave a vendored copy, with its content-hash tags removed
/// (`libgomp-e985bcbb.so.1.0.0` → `libgomp.so.1.0.0`). auditwheel `repair.py` appends
/// `-<8 hex digits>` to the part before the first dot.
pub fn unhashed_name(file_name: &str) -> String {
    let (base, ext) = match file_name.find('.') {
        Some(i) => file_name.split_at(i),
        None => (file_name, ""),
    };
    let mut parts: Vec<&str> = base.split('-').collect();
    while parts.len() > 1 {
        let last = parts[parts.len() - 1];
        if last.len() == 8 && last.bytes().all(|b| b.is_ascii_hexdigit()) {
            parts.pop();
        } else {
            break;
        }
    }
    format!("{}{}", parts.join("-"), ext)
}

/// Version and option list of an OpenBLAS build from its `.rodata`.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct OpenBlasConfig {
    /// The version token (`0.3.31.188.0`, `0.3.23.dev`).
    pub version: String,
    /// The options that follow, as found (best effort).
    pub options: String,
}

impl OpenBlasConfig {
    /// True when the options name the 64-bit integer interface.
    pub fn is_ilp64(&self) -> bool {
        self.options.split_whitespace().any(|o| o == "USE64BITINT")
    }
    /// True when built for run-time kernel selection.
    pub fn is_dynamic_arch(&self) -> bool {
        self.options.contains("DYNAMIC_ARCH")
    }
}

/// Finds `OpenBLAS <digit>…` in a block of constant data.
pub fn parse_openblas_config(rodata: &[u8]) -> Option<OpenBlasConfig> {
    let finder = memchr::memmem::Finder::new(b"OpenBLAS ");
    for pos in finder.find_iter(rodata) {
        let rest = &rodata[pos + 9..];
        if !rest.first().is_some_and(u8::is_ascii_digit) {
            continue;
        }
        let end = rest
            .iter()
            .position(|&b| b == 0)
            .unwrap_or(rest.len())
            .min(512);
        let text = String::from_utf8_lossy(&rest[..end]);
        let mut tokens = text.splitn(2, char::is_whitespace);
        let version = tokens.next().unwrap_or_default().to_string();
        if !version.contains('.') {
            continue;
        }
        let options = tokens
            .next()
            .unwrap_or_default()
            .split_whitespace()
            .collect::<Vec<_>>()
            .join(" ");
        return Some(OpenBlasConfig { version, options });
    }
    None
}

/// The words `openblas_get_config.c` (v0.3.28) can put in the constant part of the string,
/// after the version: build options, each followed by a space.
const OPENBLAS_OPTIONS: &[&str] = &[
    "USE64BITINT",
    "NO_CBLAS",
    "NO_LAPACK",
    "NO_LAPACKE",
    "DYNAMIC_ARCH",
    "DYNAMIC_OLDER",
    "NO_AFFINITY",
    "USE_OPENMP",
    "USE_TLS",
    "USE_LOCKING",
];

/// True when an option list read from a library is whole: every word a known option, except
/// that a build for one CPU ends with its kernel name (`CHAR_CORENAME`, capitals). A list
/// glued from pieces (`DYNAMIC_ARCH NO_ SINGLE_THREADEDOPENBLAS_VERBOSE`) is not.
pub fn openblas_options_are_whole(options: &str) -> bool {
    let words: Vec<&str> = options.split_whitespace().collect();
    let dynamic = words.contains(&"DYNAMIC_ARCH");
    words.iter().enumerate().all(|(i, w)| {
        OPENBLAS_OPTIONS.contains(w)
            || (!dynamic
                && i + 1 == words.len()
                && w.bytes()
                    .all(|b| b.is_ascii_uppercase() || b.is_ascii_digit() || b == b'_'))
    })
}

/// What an OpenBLAS library file says about its build.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct OpenBlasBuild {
    /// Version and option list.
    pub config: OpenBlasConfig,
    /// The option list is whole ([`openblas_options_are_whole`]).
    pub whole: bool,
    /// `MAX_CPU_NUMBER`, the `%d` of `" MAX_THREADS=%d"` in `openblas_get_config`.
    pub max_threads: Option<u32>,
    /// The kernel tables it carries (exported `gotoblas_<FAMILY>` symbols).
    pub tables: std::collections::BTreeSet<crate::stack::openblas_core::Family>,
}

/// The exported name of an OpenBLAS function under the prefixes and suffixes the wheels use
/// (`scipy_`, `64_`, `_64`).
fn openblas_function<'a>(elf: &ElfFile<'a>, base: &str, max: usize) -> Option<(u64, &'a [u8])> {
    ["", "scipy_"].iter().find_map(|prefix| {
        ["", "64_", "_64"]
            .iter()
            .find_map(|suffix| elf.function(&format!("{prefix}{base}{suffix}"), max))
    })
}

/// Reads an OpenBLAS build. The configuration string is taken, in order of trust, from the
/// code of `openblas_get_config` (x86-64: the constant part is copied into a buffer with
/// immediate and vector stores before the kernel name is appended; [`crate::stack::x86`]),
/// else from `.rodata` (whole when the compiler kept the literal in one piece).
pub fn read_openblas(elf: Option<&ElfFile>, rodata: &[u8]) -> Option<OpenBlasBuild> {
    let code = elf
        .filter(|e| e.machine() == crate::stack::elf::Machine::X86_64)
        .and_then(|e| Some((e, openblas_function(e, "openblas_get_config", 1024)?)));
    let from_code = code.and_then(|(e, (addr, bytes))| {
        let built = crate::stack::x86::string_built_before_first_call(e, addr, bytes)?;
        parse_openblas_config(&built).filter(|c| openblas_options_are_whole(&c.options))
    });
    let config = match from_code {
        Some(c) => c,
        None => parse_openblas_config(rodata)?,
    };
    let max_threads = code
        .and_then(|(e, (addr, bytes))| {
            crate::stack::x86::integer_after_format(e, addr, bytes, "MAX_THREADS=%d")
        })
        .and_then(|n| u32::try_from(n).ok());
    let tables = elf
        .map(|e| {
            e.exported_with_prefix("gotoblas_")
                .iter()
                .filter_map(|n| {
                    crate::stack::openblas_core::Family::of_symbol_suffix(
                        n.strip_prefix("gotoblas_")?,
                    )
                })
                .collect()
        })
        .unwrap_or_default();
    Some(OpenBlasBuild {
        whole: openblas_options_are_whole(&config.options),
        config,
        max_threads,
        tables,
    })
}

/// The threading layer of an OpenBLAS build, decoded from `openblas_get_parallel` (with the
/// `scipy_` prefix and `64_`/`_64` suffixes the wheels use): 0 `disabled`, 1 `pthreads`,
/// 2 `openmp`, the words threadpoolctl reports.
pub fn openblas_threading(elf: &ElfFile) -> Option<&'static str> {
    for prefix in ["", "scipy_"] {
        for suffix in ["", "64_", "_64"] {
            let name = format!("{prefix}openblas_get_parallel{suffix}");
            if let Some(code) = elf.function_bytes(&name, 16) {
                return match constant_return(elf.machine(), code)? {
                    0 => Some("disabled"),
                    1 => Some("pthreads"),
                    2 => Some("openmp"),
                    _ => None,
                };
            }
        }
    }
    None
}

/// BLIS's version string through `bli_info_get_version_str` (a `lea rax; ret` function), and
/// its threading from `bli_info_get_enable_openmp` / `_pthreads`.
pub fn blis_facts(elf: &ElfFile) -> (Option<String>, Option<&'static str>) {
    let version = (|| {
        let code = elf.function_bytes("bli_info_get_version_str", 16)?;
        let addr = elf.symbol_address("bli_info_get_version_str")?;
        let target = string_return_target(elf.machine(), addr, code)?;
        elf.c_string_at(target).filter(|s| !s.is_empty())
    })();
    let flag = |name: &str| {
        elf.function_bytes(name, 16)
            .and_then(|c| constant_return(elf.machine(), c))
    };
    let threading = match (
        flag("bli_info_get_enable_openmp"),
        flag("bli_info_get_enable_pthreads"),
    ) {
        (Some(1), _) => Some("openmp"),
        (_, Some(1)) => Some("pthreads"),
        (Some(0), Some(0)) => Some("disabled"),
        _ => None,
    };
    (version, threading)
}

/// The build date MKL embeds before its product name (`20240605`), if the anchor is present.
pub fn mkl_build_date(data: &[u8]) -> Option<String> {
    for anchor in [
        &b"\0Intel(R) oneAPI Math Kernel Library Version "[..],
        &b"\0Intel(R) Math Kernel Library Version "[..],
    ] {
        if let Some(pos) = memchr::memmem::find(data, anchor) {
            let before = &data[..pos];
            let start = before.iter().rposition(|&b| b == 0).map_or(0, |p| p + 1);
            let date = &before[start..];
            if date.len() == 8 && date.iter().all(u8::is_ascii_digit) {
                return Some(String::from_utf8_lossy(date).into_owned());
            }
            return Some(String::new());
        }
    }
    None
}

/// The version from `mkl_version.h` (`__INTEL_MKL__`, `__INTEL_MKL_MINOR__`,
/// `__INTEL_MKL_UPDATE__`; macro names from memory, see the oneMKL Developer Reference
/// "Version Information").
pub fn parse_mkl_version_h(text: &str) -> Option<String> {
    let get = |name: &str| -> Option<u32> {
        text.lines().find_map(|l| {
            let mut it = l.split_whitespace();
            (it.next()? == "#define" && it.next()? == name)
                .then(|| it.next()?.parse().ok())
                .flatten()
        })
    };
    let major = get("__INTEL_MKL__")?;
    let minor = get("__INTEL_MKL_MINOR__").unwrap_or(0);
    let update = get("__INTEL_MKL_UPDATE__").unwrap_or(0);
    Some(format!("{major}.{minor}.{update}"))
}

/// A "what-string" (`@(#) <key>: <value>`) of an OpenMP runtime.
pub fn what_string(data: &[u8], key: &str) -> Option<String> {
    let needle = format!("@(#) {key}: ");
    let pos = memchr::memmem::find(data, needle.as_bytes())?;
    let rest = &data[pos + needle.len()..];
    let end = rest.iter().position(|&b| b == 0 || b == b'\n')?.min(200);
    Some(String::from_utf8_lossy(&rest[..end]).trim().to_string())
}

/// A stand-in for the version of an OpenMP runtime, which has no version query
/// (threadpoolctl reports `null`): the LLVM/Intel build compiler what-string, or for GNU the
/// newest `GOMP_` symbol version plus the GCC that built it (`.comment`).
pub fn openmp_hint(elf: &ElfFile, data: &[u8], implementation: &str) -> Option<String> {
    match implementation {
        "llvm" => what_string(data, "LLVM OMP build compiler"),
        "intel" => what_string(data, "Intel(R) OMP version")
            .map(|v| format!("Intel OMP {v}"))
            .or_else(|| what_string(data, "Intel(R) OMP build compiler")),
        _ => {
            let mut nodes: Vec<String> = elf
                .version_definitions()
                .into_iter()
                .filter(|v| v.starts_with("GOMP_") && !v.starts_with("GOMP_PLUGIN"))
                .collect();
            nodes.sort_by_key(|a| version_key(a));
            let gcc = elf.section(".comment").and_then(|c| {
                String::from_utf8_lossy(c)
                    .split('\0')
                    .find(|s| s.starts_with("GCC: "))
                    .map(|s| s.trim_start_matches("GCC: ").to_string())
            });
            match (nodes.pop(), gcc) {
                (Some(n), Some(g)) => Some(format!("{n}, GCC {g}")),
                (Some(n), None) => Some(n),
                (None, Some(g)) => Some(format!("GCC {g}")),
                (None, None) => None,
            }
        }
    }
}

/// True when a file named like libgomp is really LLVM's runtime (conda-forge can install
/// `libgomp.so.1` as a link to libomp).
pub fn is_llvm_openmp(data: &[u8]) -> bool {
    memchr::memmem::find(data, b"@(#) LLVM OMP").is_some()
}

/// Numeric sort key of `GOMP_4.5`-style names.
fn version_key(name: &str) -> Vec<u32> {
    name.rsplit('_')
        .next()
        .unwrap_or_default()
        .split('.')
        .map(|p| p.parse().unwrap_or(0))
        .collect()
}

/// `MAX_THREADS=n` from an OpenBLAS configuration line.
pub fn max_threads(config: &str) -> Option<u32> {
    config
        .split_whitespace()
        .find_map(|t| t.strip_prefix("MAX_THREADS=")?.parse().ok())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_are_classified_like_threadpoolctl() {
        // Prefixes from threadpoolctl 3.8 `_ALL_CONTROLLERS`; file names from real wheels.
        assert_eq!(
            classify("libscipy_openblas64_-32a4b2a6.so", "numpy.libs"),
            Some((Role::Blas, "openblas"))
        );
        assert_eq!(
            classify("libopenblas64_p-r0-0cf96a72.3.23.dev.so", "numpy.libs"),
            Some((Role::Blas, "openblas"))
        );
        assert_eq!(
            classify("libgomp-e985bcbb.so.1.0.0", "scikit_learn.libs"),
            Some((Role::OpenMp, "gnu"))
        );
        assert_eq!(classify("libomp.so.5", "lib"), Some((Role::OpenMp, "llvm")));
        assert_eq!(
            classify("libiomp5.so", "lib"),
            Some((Role::OpenMp, "intel"))
        );
        assert_eq!(classify("libmkl_rt.so.2", "lib"), Some((Role::Blas, "mkl")));
        // Debian alternatives folders (native-detection notes §1.2, measured there).
        assert_eq!(
            classify("libblas.so.3", "openblas-pthread"),
            Some((Role::Blas, "openblas"))
        );
        assert_eq!(
            classify("libblas.so.3", "blas"),
            Some((Role::Blas, "reference"))
        );
        assert_eq!(
            classify("libgfortran-040039e1.so.5.0.0", "numpy.libs"),
            None
        );
    }

    /// The shared objects of PyPI's intel-openmp 2026.2.0 wheel (its file list, read
    /// 2026-12-03): only `libiomp5.so` is an OpenMP runtime a process threads with.
    #[test]
    fn only_the_runtime_of_an_openmp_package_is_one() {
        let wheel = [
            "libarcher.so",
            "libiomp5.so",
            "libiomp5_db.so",
            "libiompstubs5.so",
            "libomptarget.so",
            "libomptarget.sycl.wrap.so",
        ];
        let runtimes: Vec<&str> = wheel
            .into_iter()
            .filter(|f| classify(f, "lib").is_some())
            .collect();
        assert_eq!(runtimes, ["libiomp5.so"]);
        // LLVM's offloading plugins, as Debian's libomp packages name them.
        assert_eq!(classify("libomptarget.rtl.x86_64.so", "lib"), None);
        assert_eq!(classify("libomp.so.5", "lib"), Some((Role::OpenMp, "llvm")));
    }

    #[test]
    fn auditwheel_hashes_are_removed() {
        // auditwheel repair.py naming; double hash measured in the notes §1.2.
        assert_eq!(
            unhashed_name("libgomp-e985bcbb.so.1.0.0"),
            "libgomp.so.1.0.0"
        );
        assert_eq!(
            unhashed_name("libgfortran-040039e1-0352e75f.so.5.0.0"),
            "libgfortran.so.5.0.0"
        );
        assert_eq!(
            unhashed_name("libscipy_openblas64_-32a4b2a6.so"),
            "libscipy_openblas64_.so"
        );
        assert_eq!(unhashed_name("libomp.so.5"), "libomp.so.5");
    }

    #[test]
    fn openblas_config_strings() {
        // Strings measured in numpy/scipy wheels (native-detection notes §1.4).
        let c = parse_openblas_config(
            b"xx\0OpenBLAS : Program will terminate\0OpenBLAS 0.3.31.188.0  USE64BITINT DYNAMIC_ARCH NO_AFFINITY \0",
        )
        .unwrap();
        assert_eq!(c.version, "0.3.31.188.0");
        assert!(c.is_ilp64() && c.is_dynamic_arch());
        let c = parse_openblas_config(
            b"OpenBLAS 0.3.30 DYNAMIC_ARCH NO_ SINGLE_THREADEDOPENBLAS_VERBOSE\0",
        )
        .unwrap();
        assert_eq!(c.version, "0.3.30");
        assert!(!c.is_ilp64());
        // The pieces of scipy 1.17's OpenBLAS as `.rodata` holds them (the rest of the
        // string is in the code): not a whole option list.
        assert!(!openblas_options_are_whole(&c.options));
        assert!(openblas_options_are_whole(
            "USE64BITINT DYNAMIC_ARCH NO_AFFINITY"
        ));
        // A build for one CPU ends with its kernel name (`CHAR_CORENAME`).
        assert!(openblas_options_are_whole("NO_AFFINITY USE_OPENMP HASWELL"));
        assert!(!openblas_options_are_whole("DYNAMIC_ARCH HASWELL"));
        let c = parse_openblas_config(b"OpenBLAS 0.3.23.dev DYNAMIC_ARCH\0").unwrap();
        assert_eq!(c.version, "0.3.23.dev");
        assert_eq!(parse_openblas_config(b"OpenBLAS is great\0"), None);
    }

    #[test]
    fn mkl_pieces() {
        // Layout of the pieces measured in libmkl_core.so.3 (notes §3.1).
        let data =
            b"..\0Product\x0020240605\0Intel(R) oneAPI Math Kernel Library Version \0 Build \0";
        assert_eq!(mkl_build_date(data).as_deref(), Some("20240605"));
        assert_eq!(mkl_build_date(b"nothing"), None);
        let h = "#define __INTEL_MKL__ 2024\n#define __INTEL_MKL_MINOR__ 2\n#define __INTEL_MKL_UPDATE__ 1\n";
        assert_eq!(parse_mkl_version_h(h).as_deref(), Some("2024.2.1"));
    }

    #[test]
    fn what_strings_and_cores() {
        // What-strings measured in Debian's libomp5-14 (notes §5).
        let data =
            b"\0@(#) LLVM OMP version: 5.0.20140926\0@(#) LLVM OMP build compiler: Clang 14.0\0";
        assert_eq!(
            what_string(data, "LLVM OMP build compiler").as_deref(),
            Some("Clang 14.0")
        );
        assert!(is_llvm_openmp(data));
        assert_eq!(
            max_threads("OpenBLAS 0.3.30 DYNAMIC_ARCH Haswell MAX_THREADS=64"),
            Some(64)
        );
    }
}
