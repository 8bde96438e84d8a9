//! The stack collectors on hand-made trees (see `fixtures/stack/README.md` for the layout each
//! follows) and on shared objects built here with the system C compiler.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::Command;

use runprint::collect::gpu::{self, GpuPaths};
use runprint::collect::native::{self, SystemPaths};
use runprint::collect::python;
use runprint::diff::Impact;
use runprint::manifest::{Content, Manifest, RunInfo};

fn fixture(rel: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("fixtures/stack")
        .join(rel)
}

fn no_system() -> SystemPaths {
    SystemPaths {
        ld_cache: None,
        dirs: vec![],
    }
}

#[test]
fn gpu_tree_versions_and_devices() {
    let paths = GpuPaths {
        proc_nvidia: fixture("gpu/proc/driver/nvidia"),
        toolkits: vec![fixture("gpu/cuda-12.4"), fixture("gpu/cuda-10.2")],
        include_dirs: vec![
            fixture("gpu/include"),
            fixture("gpu/include/x86_64-linux-gnu"),
        ],
        lib_dirs: vec![],
        nvidia_smi: None,
    };
    let mut warnings = Vec::new();
    let info = gpu::collect(&paths, &[], &mut warnings);
    assert!(warnings.is_empty(), "{warnings:?}");
    assert_eq!(info.nvidia_driver.as_deref(), Some("535.183.01"));
    let tks: Vec<(Option<&str>, Option<&str>, Option<&str>)> = info
        .cuda_toolkits
        .iter()
        .map(|t| {
            (
                t.version.as_deref(),
                t.runtime.as_deref(),
                t.nvcc.as_deref(),
            )
        })
        .collect();
    assert!(
        tks.contains(&(Some("12.4.1"), Some("12.4.127"), Some("12.4.131"))),
        "{tks:?}"
    );
    assert!(tks.contains(&(Some("10.2.89"), None, None)), "{tks:?}");
    let libs: Vec<(&str, &str, &str)> = info
        .libraries
        .iter()
        .map(|l| (l.name.as_str(), l.version.as_str(), l.owner.as_str()))
        .collect();
    for want in [
        ("cudnn", "9.1.0", "toolkit"),
        ("cublas", "12.4.5.8", "toolkit"),
        ("cudart", "12.4", "toolkit"),
        ("nccl", "2.21.5", "system"),
        ("cudnn", "8.9.7", "system"),
    ] {
        assert!(libs.contains(&want), "{want:?} not in {libs:?}");
    }
    assert_eq!(info.devices.len(), 1);
    assert_eq!(info.devices[0].model, "NVIDIA A100-SXM4-40GB");
    assert_eq!(info.devices[0].bus_id, "0000:01:00.0");

    // The open kernel modules' line gives the same kind of version.
    let open = GpuPaths {
        proc_nvidia: fixture("gpu/proc-open/driver/nvidia"),
        ..paths.clone()
    };
    let info2 = gpu::collect(&open, &[], &mut warnings);
    assert_eq!(info2.nvidia_driver.as_deref(), Some("550.90.07"));

    // A driver upgrade and a missing GPU, as `diff` explains them.
    let manifest = |g| {
        Manifest::new(
            RunInfo::default(),
            Content {
                gpu: Some(g),
                ..Content::default()
            },
        )
    };
    let mut cpu_only = info2.clone();
    cpu_only.devices.clear();
    let report = runprint::diff::compare("a", &manifest(info), "b", &manifest(cpu_only), None);
    assert_eq!(report.verdict, Impact::Retrain);
    assert!(report.changes.iter().any(|c| c.subject == "NVIDIA driver"
        && c.impact == Impact::Verify
        && c.old.as_deref() == Some("535.183.01")));
}

fn write(p: &Path, bytes: &[u8]) {
    std::fs::create_dir_all(p.parent().unwrap()).unwrap();
    std::fs::write(p, bytes).unwrap();
}

/// A virtual environment tree with one distribution whose RECORD lists `files`.
fn venv(root: &Path, dist: &str, version: &str, files: &[(&str, &[u8])]) -> PathBuf {
    write(&root.join("bin/python"), b"never run");
    write(
        &root.join("pyvenv.cfg"),
        b"home = /nonexistent\nversion = 3.11.7\n",
    );
    let site = root.join("lib/python3.11/site-packages");
    let info = site.join(format!("{dist}-{version}.dist-info"));
    write(
        &info.join("METADATA"),
        format!("Metadata-Version: 2.1\nName: {dist}\nVersion: {version}\n\n").as_bytes(),
    );
    let mut record = String::new();
    for (rel, bytes) in files {
        write(&site.join(rel), bytes);
        record.push_str(&format!("{rel},,\n"));
    }
    write(&info.join("RECORD"), record.as_bytes());
    root.join("bin/python")
}

#[test]
fn mkl_from_the_pip_wheel_layout() {
    // pip's `mkl` wheel installs its libraries into <prefix>/lib, listed in RECORD as
    // `../../../lib/...` (wheel `.data/data/lib` scheme). The file carries the pieces that
    // mkl_get_version_string assembles (oneMKL Developer Reference): a build date before the
    // product name.
    let dir = tempfile::tempdir().unwrap();
    let mut lib = b"\x00\x01junk\0Product\0".to_vec();
    lib.extend_from_slice(
        b"20240605\0Intel(R) oneAPI Math Kernel Library Version \0 Build \0 for \0",
    );
    let py = venv(
        dir.path(),
        "mkl",
        "2024.2.1",
        &[("../../../lib/libmkl_rt.so.2", &lib)],
    );
    let mut warnings = Vec::new();
    let scan = python::collect(&py, &BTreeMap::new(), false, &mut warnings).unwrap();
    let info = native::collect(
        &[scan],
        &BTreeMap::new(),
        false,
        &no_system(),
        &mut warnings,
    );
    let mkl = info
        .libraries
        .iter()
        .find(|l| l.implementation == "mkl")
        .unwrap_or_else(|| panic!("{info:#?} {warnings:?}"));
    assert_eq!(mkl.owner, "mkl");
    assert_eq!(mkl.version.as_deref(), Some("2024.2.1"));
    assert_eq!(mkl.version_source.as_deref(), Some("metadata"));
    assert_eq!(mkl.build_config.as_deref(), Some("build 20240605"));
}

/// Builds a shared object with the system C compiler, or explains why not.
fn cc(dir: &Path, name: &str, source: &str, extra: &[&str]) -> Option<Vec<u8>> {
    let src = dir.join(format!("{name}.c"));
    std::fs::write(&src, source).unwrap();
    let out = dir.join(name);
    let status = Command::new("cc")
        .args(["-shared", "-fPIC", "-O2", "-o"])
        .arg(&out)
        .arg(&src)
        .args(extra)
        .status();
    match status {
        Ok(s) if s.success() => Some(std::fs::read(out).unwrap()),
        other => {
            eprintln!("skipped: the C compiler could not build {name}: {other:?}");
            None
        }
    }
}

#[test]
fn fast_math_modules_are_found_and_are_a_retrain() {
    let dir = tempfile::tempdir().unwrap();
    // GCC's own start-up object for -ffast-math (`gcc -print-file-name` names it).
    let crt = Command::new("cc")
        .arg("-print-file-name=crtfastmath.o")
        .output()
        .ok()
        .map(|o| String::from_utf8_lossy(&o.stdout).trim().to_string())
        .filter(|p| Path::new(p).is_file());
    let Some(crt) = crt else {
        eprintln!("skipped: this C compiler has no crtfastmath.o");
        return;
    };
    let code = "double scale(double x) { return x * 0.5; }\n";
    let (Some(fast), Some(plain)) = (
        cc(dir.path(), "fast.so", code, &[&crt]),
        cc(dir.path(), "plain.so", code, &[]),
    ) else {
        return;
    };
    let files: [(&str, &[u8]); 2] = [
        ("speedy/_fast.cpython-311-x86_64-linux-gnu.so", &fast),
        ("speedy/_plain.cpython-311-x86_64-linux-gnu.so", &plain),
    ];
    let with = venv(&dir.path().join("a"), "speedy", "1.0", &files);
    let without = venv(&dir.path().join("b"), "speedy", "1.0", &files[1..]);
    let stack = |py: &Path| {
        let mut w = Vec::new();
        let scan = python::collect(py, &BTreeMap::new(), false, &mut w).unwrap();
        native::collect(&[scan], &BTreeMap::new(), false, &no_system(), &mut w)
    };
    let (a, b) = (stack(&with), stack(&without));
    assert_eq!(a.fast_math.len(), 1, "{a:#?}");
    assert_eq!(a.fast_math[0].owner, "speedy");
    assert_eq!(
        a.fast_math[0].path,
        "speedy/_fast.cpython-311-x86_64-linux-gnu.so"
    );
    assert!(b.fast_math.is_empty());
    let manifest = |native| {
        Manifest::new(
            RunInfo::default(),
            Content {
                native,
                ..Content::default()
            },
        )
    };
    let report = runprint::diff::compare("b", &manifest(b), "a", &manifest(a), None);
    assert_eq!(report.verdict, Impact::Retrain);
    assert_eq!(report.changes[0].section, "native");
}

#[test]
fn openblas_and_blis_query_functions_are_decoded() {
    // Shared objects exporting the query functions threadpoolctl calls, compiled here: the
    // values the C code returns are the reference.
    let dir = tempfile::tempdir().unwrap();
    // The shape of OpenBLAS's `driver/others/openblas_get_config.c` (v0.3.28): the constant
    // part copied into a static buffer (compilers inline the copy as immediate and vector
    // stores), the kernel name appended at run time, then " MAX_THREADS=%d" with
    // MAX_CPU_NUMBER; the kernel tables of a DYNAMIC_LIST build exported as `gotoblas_*`.
    let openblas = "#include <stdio.h>\n#include <string.h>\n\
                    typedef struct { int dtb_entries; } gotoblas_t;\n\
                    gotoblas_t gotoblas_PRESCOTT, gotoblas_NEHALEM, gotoblas_SANDYBRIDGE, gotoblas_HASWELL, gotoblas_SKYLAKEX;\n\
                    char *gotoblas_corename(void);\n\
                    int openblas_get_parallel(void) { return 2; }\n\
                    static char tmp_config_str[256];\n\
                    char *openblas_get_config(void) {\n\
                      char tmpstr[20];\n\
                      strcpy(tmp_config_str, \"OpenBLAS 0.3.99 DYNAMIC_ARCH NO_AFFINITY USE_OPENMP \");\n\
                      strcat(tmp_config_str, gotoblas_corename());\n\
                      if (openblas_get_parallel() == 0) sprintf(tmpstr, \" SINGLE_THREADED\");\n\
                      else snprintf(tmpstr, 19, \" MAX_THREADS=%d\", 128);\n\
                      strcat(tmp_config_str, tmpstr);\n\
                      return tmp_config_str;\n\
                    }\n\
                    char *gotoblas_corename(void) { return \"Haswell\"; }\n";
    let blis = "const char *bli_info_get_version_str(void) { return \"1.2.3\"; }\n\
                int bli_info_get_enable_openmp(void) { return 0; }\n\
                int bli_info_get_enable_pthreads(void) { return 1; }\n";
    let (Some(o), Some(b)) = (
        cc(dir.path(), "libopenblas.so.0", openblas, &[]),
        cc(dir.path(), "libblis.so.4", blis, &[]),
    ) else {
        return;
    };
    let py = venv(
        &dir.path().join("env"),
        "fakeblas",
        "1.0",
        &[
            ("fakeblas.libs/libopenblas.so.0", &o),
            ("fakeblas.libs/libblis.so.4", &b),
        ],
    );
    let mut w = Vec::new();
    let scan = python::collect(&py, &BTreeMap::new(), false, &mut w).unwrap();
    let env: BTreeMap<String, String> =
        [("OPENBLAS_CORETYPE".to_string(), "zen".to_string())].into();
    let info = native::collect(&[scan], &env, false, &no_system(), &mut w);
    let get = |i: &str| {
        info.libraries
            .iter()
            .find(|l| l.implementation == i)
            .unwrap()
    };
    let ob = get("openblas");
    assert_eq!(ob.version.as_deref(), Some("0.3.99"));
    assert_eq!(ob.threading_layer.as_deref(), Some("openmp"));
    assert_eq!(ob.dynamic_arch, Some(true));
    assert_eq!(
        ob.build_config.as_deref(),
        Some("DYNAMIC_ARCH NO_AFFINITY USE_OPENMP")
    );
    assert_eq!(ob.max_threads, Some(128));
    // Asked for Zen; a build without Zen tables runs Haswell's (dynamic.c's
    // `#define gotoblas_ZEN gotoblas_HASWELL` for DYNAMIC_LIST builds), on any x86-64 CPU.
    assert_eq!(ob.requested_kernel_family.as_deref(), Some("zen"));
    if cfg!(target_arch = "x86_64") {
        assert_eq!(ob.kernel_family.as_deref(), Some("Haswell"));
    }
    // The same OpenBLAS named in LD_PRELOAD (ld.so(8)) from a folder outside every scanned
    // place: listed as the system's, marked preloaded.
    let outside = tempfile::tempdir().unwrap();
    let preload = outside.path().join("libopenblas.so.0");
    std::fs::write(&preload, &o).unwrap();
    let env: BTreeMap<String, String> =
        [("LD_PRELOAD".to_string(), preload.display().to_string())].into();
    let with_preload = native::collect(&[], &env, false, &no_system(), &mut w);
    let pre = with_preload
        .libraries
        .iter()
        .find(|l| l.preloaded)
        .expect("the preloaded library is listed");
    assert_eq!(
        (pre.owner.as_str(), pre.implementation.as_str()),
        ("system", "openblas")
    );
    let bl = get("blis");
    assert_eq!(bl.version.as_deref(), Some("1.2.3"));
    assert_eq!(bl.threading_layer.as_deref(), Some("pthreads"));
}

#[test]
fn stamping_twice_gives_identical_content() {
    let dir = tempfile::tempdir().unwrap();
    let py = venv(dir.path(), "pkg", "2.0", &[("pkg/__init__.py", b"")]);
    let repo = tempfile::tempdir().unwrap();
    let once = || {
        let mut o = runprint::collect::StampOptions::new(repo.path());
        o.python = vec![py.clone()];
        runprint::collect::stamp(&o).content
    };
    let (a, b) = (once(), once());
    assert_eq!(a.python, b.python);
    assert_eq!(a.native, b.native);
    assert_eq!(a.fingerprint(), b.fingerprint());
    assert_eq!(a.python[0].distributions[0].name, "pkg");
}
