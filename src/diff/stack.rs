//! Comparing the numerical stack: Python environments, native BLAS/OpenMP libraries,
//! fast-math modules and the GPU stack. Each difference becomes a [`Change`] in section
//! `python`, `native` or `gpu`, decided by a rule of the table in [`rules`] (listed with
//! sources in `docs/rules.md`).
//!
//! Rules, in short:
//! * a distribution's version or source: [`rules::package_rule`], with the installed copy's
//!   `compiled` flag deciding how much an unknown package weighs;
//! * Python minor version: retrain (the `random` module's methods other than `random()` may
//!   change their streams between minor releases, P2); micro version: verify;
//! * BLAS vendor, version, threading layer, integer width or kernel choice, OpenMP runtime:
//!   verify (bitwise differences that iterative training can amplify, B1–B4, B9–B13); a
//!   version known to compute wrong results: retrain (B27–B29);
//! * a fast-math module appearing or disappearing: retrain (flush-to-zero for the whole
//!   process, C9–C10);
//! * driver, toolkit, cuDNN/cuBLAS/NCCL versions, GPU model or count: verify (G1, G5, G10, G11,
//!   G26); GPUs present on one side only: retrain (different kernels and precision defaults,
//!   G8, G12–G16);
//! * a framework build with another CUDA/cuDNN/ROCm: verify; another source revision under the
//!   same version: retrain.

use std::collections::{BTreeMap, BTreeSet};

use super::rules::{self, PackageChange, Rule};
use super::{Change, Context, Section};
use crate::classes::Impact;
use crate::manifest::{
    Content, FrameworkBuild, GpuInfo, LoadedLibrary, NativeLibrary, ProcessInfo, PythonEnv,
};

rule_group! {
    /// The rules of the Python interpreter (the conditions: `compare_python` below).
    PYTHON_RULES;
    PY_IMPLEMENTATION = "python.implementation", "python", Retrain, 72,
        "Python implementation",
        "another implementation runs the code with its own numeric built-ins, hashing and random streams",
        "https://docs.python.org/3/library/random.html#notes-on-reproducibility";
    PY_MINOR = "python.minor", "python", Retrain, 70,
        "Python minor version",
        "a new minor release may change the streams of random's shuffle, sample and choice (only random() is kept stable), so data order changes",
        "https://docs.python.org/3/library/random.html#notes-on-reproducibility";
    PY_MICRO = "python.micro", "python", Verify, 30,
        "Python bug-fix version",
        "bug-fix releases keep random streams stable but can fix numeric code in the standard library",
        "https://docs.python.org/3/library/random.html#notes-on-reproducibility";
    PY_ONE_SIDE = "python.one-side", "python", Verify, 40,
        "Python environment recorded on one side only",
        "its packages cannot be compared",
        "common practice";
    PY_PATH = "python.path", "python", None, 0,
        "interpreter location",
        "the location does not change results; its version and packages are compared separately",
        "common practice";
    PY_SHADOWED = "python.shadowed", "python", None, 2,
        "another copy of a distribution installed behind the one imported",
        "a copy later on sys.path is never imported while the first one is there; the imported copies are compared",
        "https://docs.python.org/3/library/sys_path_init.html";
    PY_CONDA_BLAS = "python.conda-blas", "python", Verify, 58,
        "conda BLAS selector package (libblas, blas)",
        "its build names the BLAS every package in the environment uses, and vendors order floating-point operations differently",
        "https://github.com/mne-tools/mne-python/issues/4922";

}

rule_group! {
    /// The rules of native libraries and framework builds (the conditions: the comparisons below).
    NATIVE_RULES;
    BLAS_KNOWN_BAD = "native.blas.known-bad", "native", Retrain, 95,
        "BLAS release known to compute wrong results",
        "the new BLAS is a release with a documented wrong-result bug",
        "https://github.com/OpenMathLib/OpenBLAS/issues/2182; https://github.com/OpenMathLib/OpenBLAS/issues/2914; https://github.com/numpy/numpy/issues/29391";
    BLAS_VENDOR = "native.blas.vendor", "native", Verify, 62,
        "BLAS/LAPACK vendor",
        "vendors order floating-point operations differently, and iterative algorithms amplify that (ICA components flipped between MKL and OpenBLAS)",
        "https://github.com/mne-tools/mne-python/issues/4922; https://github.com/JuliaLinearAlgebra/MKL.jl/issues/141";
    BLAS_VERSION = "native.blas.version", "native", Verify, 56,
        "BLAS version or build (threading layer, integer width, thread limit, kernels)",
        "each changes blocking, kernels or how reductions are split (an ILP64 build gave other float32 results than LP64)",
        "https://github.com/OpenMathLib/OpenBLAS/issues/2779; https://github.com/OpenMathLib/OpenBLAS/issues/5735";
    BLAS_ONE_SIDE = "native.blas.one-side", "native", Verify, 50,
        "BLAS or OpenMP runtime present on one side only",
        "the code that does linear algebra or runs threads differs",
        "https://github.com/mne-tools/mne-python/issues/4922";
    PROCESS_LIBRARIES = "process.libraries", "process", Verify, 60,
        "numerical libraries a running process has loaded (stamp --pid)",
        "the code that ran differs: another BLAS, OpenMP runtime, CUDA library or framework build was in the process, whatever was installed",
        "https://github.com/numpy/numpy/issues/25100; https://github.com/mne-tools/mne-python/issues/4922";
    PROCESS_CPUS = "process.cpus", "process", Verify, 44,
        "CPUs a running process may use (its affinity)",
        "OpenMP runtimes and BLAS size their thread pools from the CPUs a process may run on, and the thread count changes how reductions are split",
        "https://www.openmp.org/spec-html/5.0/openmpse50.html; https://github.com/OpenMathLib/OpenBLAS/issues/2779";
    PROCESS_COMMAND = "process.command", "process", Verify, 42,
        "command line of a running process",
        "the arguments the training program was started with differ (options, configuration files, seeds)",
        "common practice";
    NOT_LOADED = "native.not-loaded", "native", None, 8,
        "library installed but loaded by neither stamped process",
        "both stamps read the running process, and it did not load this library",
        "common practice";
    OPENMP_RUNTIME = "native.openmp", "native", Verify, 46,
        "OpenMP runtime or its version",
        "each runtime reads its own variables, sizes its thread pool and splits parallel reductions its own way",
        "https://github.com/numpy/numpy/issues/25100";
    FAST_MATH = "native.fast-math", "native", Retrain, 88,
        "compiled module with fast-math start-up code appeared or disappeared",
        "loading it turns on flush-to-zero for the whole process, so numbers below 1.2e-38 (float32) become zero in every library",
        "https://github.com/llvm/llvm-project/issues/57589; https://github.com/numpy/numpy/issues/20895";
    BUILD_DEVICE = "build.device", "python", Retrain, 85,
        "framework built for another device family (CPU-only against CUDA)",
        "training runs on other kernels with other precision defaults",
        "https://pytorch.org/docs/stable/notes/randomness.html; https://github.com/pytorch/pytorch/issues/67384";
    BUILD_REVISION = "build.revision", "python", Retrain, 75,
        "framework built from another source revision under the same version",
        "different code computes under the same version number",
        "https://pytorch.org/docs/stable/notes/randomness.html";
    BUILD_GPU = "build.gpu-libraries", "python", Verify, 56,
        "framework built against another CUDA, cuDNN or ROCm",
        "it brings other GPU kernels, and cuBLAS and cuDNN promise identical bits only within one version",
        "https://docs.nvidia.com/cuda/cublas/index.html#results-reproducibility; https://github.com/pytorch/pytorch/issues/28197";
    BUILD_BLAS = "build.blas", "python", Verify, 52,
        "framework built against another BLAS or BLAS configuration",
        "BLAS vendors and builds order floating-point operations differently",
        "https://github.com/mne-tools/mne-python/issues/4922";

}

rule_group! {
    /// The rules of the GPU stack (the conditions: `compare_gpu` below).
    GPU_RULES;
    GPU_PRESENCE = "gpu.presence", "gpu", Retrain, 88,
        "GPUs present on one side only",
        "training runs on other kernels with other precision defaults (TF32 on Ampere and later, nondeterministic atomics)",
        "https://pytorch.org/docs/stable/notes/randomness.html; https://github.com/pytorch/pytorch/issues/67384";
    GPU_TOOLKIT = "gpu.toolkit", "gpu", Verify, 56,
        "CUDA toolkit or runtime version",
        "another toolkit brings other compilers and libraries; cuBLAS promises identical bits only within one toolkit version",
        "https://docs.nvidia.com/cuda/cublas/index.html#results-reproducibility; https://github.com/E3SM-Project/E3SM/issues/5314";
    GPU_CUDNN = "gpu.cudnn", "gpu", Verify, 56,
        "cuDNN version",
        "cuDNN picks convolution algorithms by version and heuristics; identical bits are promised only for one version on one architecture",
        "https://github.com/davidsandberg/facenet/issues/3; https://github.com/allenai/allennlp/issues/387";
    GPU_CUBLAS = "gpu.cublas", "gpu", Verify, 55,
        "cuBLAS version",
        "cuBLAS promises identical bits only for one version on GPUs of one architecture and SM count",
        "https://docs.nvidia.com/cuda/cublas/index.html#results-reproducibility";
    GPU_NCCL = "gpu.nccl", "gpu", Verify, 52,
        "NCCL version",
        "NCCL's choice of all-reduce algorithm, protocol and channels depends on its version, and each sums in another order",
        "https://github.com/NVIDIA/nccl/issues/1055; https://github.com/NVIDIA/nccl/issues/1304";
    GPU_MODEL = "gpu.model", "gpu", Verify, 50,
        "GPU model",
        "another architecture or SM count changes kernels and their order of operations",
        "https://docs.nvidia.com/cuda/cublas/index.html#results-reproducibility";
    GPU_COUNT = "gpu.count", "gpu", Verify, 50,
        "number of GPUs",
        "the split of work, the collective algorithms and the order of sums change with the GPU count",
        "https://github.com/NVIDIA/nccl/issues/1304";
    GPU_DRIVER = "gpu.driver", "gpu", Verify, 40,
        "NVIDIA driver version",
        "the driver compiles and schedules GPU kernels, and a driver upgrade alone has changed solver convergence",
        "https://github.com/NVIDIA/AMGX/issues/60";
}

fn change(
    rule: &'static Rule,
    section: Section,
    subject: String,
    lead: String,
    old: Option<String>,
    new: Option<String>,
) -> Change {
    Change::from_rule(rule, section, subject, lead, old, new)
}

/// Adds the stack's changes between two manifests' contents.
pub fn compare(old: &Content, new: &Content, ctx: &Context<'_>, out: &mut Vec<Change>) {
    compare_python(&old.python, &new.python, ctx, out);
    compare_native(old, new, out);
    if let (Some(o), Some(n)) = (&old.process, &new.process) {
        compare_process(o, n, out);
    }
    if let (Some(o), Some(n)) = (&old.gpu, &new.gpu) {
        compare_gpu(o, n, out);
    }
}

fn env_label(i: usize, count: usize) -> String {
    if count > 1 {
        format!("python[{i}]")
    } else {
        "python".into()
    }
}

fn compare_python(old: &[PythonEnv], new: &[PythonEnv], ctx: &Context<'_>, out: &mut Vec<Change>) {
    let count = old.len().max(new.len());
    for i in 0..count {
        let label = env_label(i, count);
        match (old.get(i), new.get(i)) {
            (Some(o), Some(n)) => compare_env(&label, o, n, ctx, out),
            (o, n) => out.push(change(
                &PY_ONE_SIDE,
                Section::Python,
                format!("{label} environment"),
                String::new(),
                o.map(|e| e.interpreter.clone()),
                n.map(|e| e.interpreter.clone()),
            )),
        }
    }
}

fn minor(v: &str) -> String {
    v.split('.').take(2).collect::<Vec<_>>().join(".")
}

fn compare_env(
    label: &str,
    o: &PythonEnv,
    n: &PythonEnv,
    ctx: &Context<'_>,
    out: &mut Vec<Change>,
) {
    if o.implementation != n.implementation {
        out.push(change(
            &PY_IMPLEMENTATION,
            Section::Python,
            format!("{label} implementation"),
            String::new(),
            o.implementation.clone(),
            n.implementation.clone(),
        ));
    }
    if o.version != n.version {
        let (a, b) = (
            o.version.as_deref().unwrap_or(""),
            n.version.as_deref().unwrap_or(""),
        );
        let rule = if minor(a) != minor(b) {
            &PY_MINOR
        } else {
            &PY_MICRO
        };
        out.push(change(
            rule,
            Section::Python,
            format!("{label} version"),
            String::new(),
            o.version.clone(),
            n.version.clone(),
        ));
    }
    if o.interpreter != n.interpreter {
        out.push(change(
            &PY_PATH,
            Section::Python,
            format!("{label} interpreter path"),
            String::new(),
            Some(o.interpreter.clone()),
            Some(n.interpreter.clone()),
        ));
    }
    compare_distributions(label, o, n, ctx, out);
    compare_conda(label, o, n, ctx, out);
    compare_builds(label, &o.builds, &n.builds, out);
}

/// The copy of a distribution `import` finds: the first not marked shadowed.
fn imported_copy(
    copies: &[(String, Option<String>, bool, bool)],
) -> &(String, Option<String>, bool, bool) {
    copies.iter().find(|c| !c.3).unwrap_or(&copies[0])
}

fn compare_distributions<'a>(
    label: &str,
    o: &'a PythonEnv,
    n: &'a PythonEnv,
    ctx: &Context<'_>,
    out: &mut Vec<Change>,
) {
    /// Each copy: version, source, compiled, shadowed.
    type Copy = (String, Option<String>, bool, bool);
    type Keyed<'a> = BTreeMap<&'a str, Vec<Copy>>;
    let group = |e: &'a PythonEnv| -> Keyed<'a> {
        let mut m: Keyed = BTreeMap::new();
        for d in &e.distributions {
            m.entry(&d.name).or_default().push((
                d.version.clone(),
                d.source.clone(),
                d.compiled,
                d.shadowed,
            ));
        }
        m
    };
    let (og, ng) = (group(o), group(n));
    // Shown: the imported copy, then any shadowed one.
    let versions = |v: Option<&Vec<Copy>>| {
        v.map(|v| {
            let imported: Vec<&str> = v.iter().filter(|c| !c.3).map(|c| c.0.as_str()).collect();
            let shadowed: Vec<&str> = v.iter().filter(|c| c.3).map(|c| c.0.as_str()).collect();
            if shadowed.is_empty() {
                imported.join(", ")
            } else {
                format!(
                    "{} (shadowed: {})",
                    imported.join(", "),
                    shadowed.join(", ")
                )
            }
        })
    };
    // Compared: the copies `import` finds.
    let key = |v: Option<&Vec<Copy>>| {
        v.map(|v| {
            v.iter()
                .filter(|c| !c.3)
                .map(|c| (c.0.clone(), c.1.clone()))
                .collect::<Vec<_>>()
        })
    };
    let all = |v: Option<&Vec<Copy>>| {
        v.map(|v| {
            let mut all: Vec<_> = v.iter().map(|c| (c.0.clone(), c.1.clone())).collect();
            all.sort();
            all
        })
    };
    // A manifest from before shadowing was recorded lists every copy unmarked.
    let unmarked = |v: Option<&Vec<Copy>>| v.is_some_and(|v| v.len() > 1 && v.iter().all(|c| !c.3));
    for (name, a, b) in super::outer_join(&og, &ng) {
        if (unmarked(a) || unmarked(b)) && all(a) == all(b) {
            continue;
        }
        if key(a) == key(b) {
            // The same copy is imported; only the copies behind it changed.
            if versions(a) != versions(b) && !unmarked(a) && !unmarked(b) {
                out.push(change(
                    &PY_SHADOWED,
                    Section::Python,
                    format!("{label}: {name}"),
                    format!("{name}: the imported copy is the same"),
                    versions(a),
                    versions(b),
                ));
            }
            continue;
        }
        // The installed copies say exactly whether the distribution ships compiled code.
        let compiled = a.into_iter().chain(b).flatten().any(|c| c.2);
        let change = match (a, b) {
            (None, _) => PackageChange::Added,
            (_, None) => PackageChange::Removed,
            (Some(a), Some(b)) => {
                let (x, y) = (&imported_copy(a).0, &imported_copy(b).0);
                if x == y {
                    PackageChange::Source
                } else {
                    PackageChange::Version {
                        ecosystem: "pypi",
                        old: x,
                        new: y,
                    }
                }
            }
        };
        out.push(ctx.package_change(
            None,
            Section::Python,
            format!("{label}: {name}"),
            name,
            rules::Installed::Always,
            Some(compiled),
            change,
            (versions(a), versions(b)),
        ));
    }
}

fn compare_conda(
    label: &str,
    o: &PythonEnv,
    n: &PythonEnv,
    ctx: &Context<'_>,
    out: &mut Vec<Change>,
) {
    let m = |e: &PythonEnv| -> BTreeMap<String, (String, String)> {
        e.conda_packages
            .iter()
            .map(|p| (p.name.clone(), (p.version.clone(), p.build.clone())))
            .collect()
    };
    let show = |v: Option<&(String, String)>| v.map(|(ver, build)| format!("{ver} ({build})"));
    let (om, nm) = (m(o), m(n));
    for (name, a, b) in super::outer_join(&om, &nm) {
        if a == b {
            continue;
        }
        let subject = format!("{label}: conda {name}");
        if matches!(name.as_str(), "libblas" | "libcblas" | "liblapack" | "blas") {
            out.push(change(
                &PY_CONDA_BLAS,
                Section::Python,
                subject,
                String::new(),
                show(a),
                show(b),
            ));
            continue;
        }
        let change = match (a, b) {
            (None, _) => PackageChange::Added,
            (_, None) => PackageChange::Removed,
            (Some(x), Some(y)) if x.0 == y.0 => PackageChange::Rebuilt,
            (Some(x), Some(y)) => PackageChange::Version {
                ecosystem: "conda",
                old: &x.0,
                new: &y.0,
            },
        };
        // conda packages are mostly compiled; the name heuristics decide for unknown ones.
        out.push(ctx.package_change(
            None,
            Section::Python,
            subject,
            name,
            rules::Installed::Always,
            None,
            change,
            (show(a), show(b)),
        ));
    }
}

fn compare_builds<'a>(
    label: &str,
    old: &'a [FrameworkBuild],
    new: &'a [FrameworkBuild],
    out: &mut Vec<Change>,
) {
    let m = |bs: &'a [FrameworkBuild]| -> BTreeMap<&'a str, &'a FrameworkBuild> {
        bs.iter().map(|b| (b.name.as_str(), b)).collect()
    };
    let (om, nm) = (m(old), m(new));
    for (name, a) in &om {
        let Some(b) = nm.get(name) else { continue };
        let gpu = |x: &FrameworkBuild| (x.cuda.clone(), x.cudnn.clone(), x.rocm.clone());
        if gpu(a) != gpu(b) {
            let show = |x: &FrameworkBuild| {
                // A CUDA build whose files do not say its cuDNN (torch's `version.py` does not)
                // has one, of a version not recorded: not "none".
                let cudnn = match (&x.cudnn, &x.cuda) {
                    (Some(v), _) => v.as_str(),
                    (None, Some(_)) => "not recorded",
                    (None, None) => "none",
                };
                format!(
                    "cuda {}, cudnn {cudnn}, rocm {}",
                    x.cuda.as_deref().unwrap_or("none"),
                    x.rocm.as_deref().unwrap_or("none")
                )
            };
            let rule = if a.cuda.is_some() != b.cuda.is_some() {
                &BUILD_DEVICE
            } else {
                &BUILD_GPU
            };
            out.push(change(
                rule,
                Section::Python,
                format!("{label}: {name} build"),
                String::new(),
                Some(show(a)),
                Some(show(b)),
            ));
        }
        if a.git_revision != b.git_revision && a.version == b.version {
            out.push(change(
                &BUILD_REVISION,
                Section::Python,
                format!("{label}: {name} source revision"),
                String::new(),
                a.git_revision.clone(),
                b.git_revision.clone(),
            ));
        }
        if (&a.blas, &a.blas_config) != (&b.blas, &b.blas_config) {
            out.push(change(
                &BUILD_BLAS,
                Section::Python,
                format!("{label}: {name} BLAS build"),
                String::new(),
                a.blas.clone().or(a.blas_config.clone()),
                b.blas.clone().or(b.blas_config.clone()),
            ));
        }
    }
}

fn describe(l: &NativeLibrary) -> String {
    let version = l
        .version
        .as_deref()
        .or(l.build_hint.as_deref())
        .unwrap_or("version unknown");
    let mut s = format!("{} {version}", l.implementation);
    let mut extra = Vec::new();
    if let Some(t) = &l.threading_layer {
        extra.push(t.clone());
    }
    if l.ilp64 == Some(true) {
        extra.push("ilp64".into());
    }
    if let Some(m) = l.max_threads {
        extra.push(format!("max {m} threads"));
    }
    if let Some(a) = &l.kernel_family {
        extra.push(format!("{a} kernels"));
    }
    if l.preloaded {
        extra.push("LD_PRELOAD".into());
    }
    if !extra.is_empty() {
        s.push_str(&format!(" ({})", extra.join(", ")));
    }
    s
}

fn compare_native<'a>(old: &'a Content, new: &'a Content, out: &mut Vec<Change>) {
    type Key = (String, String, String);
    let key = |l: &NativeLibrary| -> Key {
        // A distribution's copy is compared with that distribution's copy whatever its file
        // is called (wheels rename vendored libraries); system copies by path.
        let place = if l.owner == "system" {
            l.path.clone()
        } else {
            String::new()
        };
        (l.owner.clone(), l.role.clone(), place)
    };
    let group = |c: &'a Content| -> BTreeMap<Key, Vec<&'a NativeLibrary>> {
        let mut m: BTreeMap<Key, Vec<&NativeLibrary>> = BTreeMap::new();
        // Older manifests list files that ship beside an OpenMP runtime without being one:
        // not compared, so that a new stamp against such a baseline raises nothing.
        let runtimes = c
            .native
            .libraries
            .iter()
            .filter(|l| !crate::stack::blas::is_beside_a_runtime(&l.file));
        for l in runtimes {
            m.entry(key(l)).or_default().push(l);
        }
        m
    };
    let (og, ng) = (group(old), group(new));
    for (k, a, b) in super::outer_join(&og, &ng) {
        let (owner, role, place) = k;
        let a = a.cloned().unwrap_or_default();
        let b = b.cloned().unwrap_or_default();
        let show = |ls: &[&NativeLibrary]| {
            Some(
                ls.iter()
                    .map(|l| describe(l))
                    .collect::<Vec<_>>()
                    .join("; "),
            )
            .filter(|s| !s.is_empty())
        };
        let what = if role == "blas" {
            "BLAS"
        } else {
            "OpenMP runtime"
        };
        let subject = if place.is_empty() {
            format!("{owner} {what}")
        } else {
            format!("system {what} {place}")
        };
        // A fact recorded on one side only (a manifest from an earlier version, a library
        // that could not be read as far) is left out of the comparison, so that reading more
        // never looks like a change; an OpenBLAS option list glued from pieces is never
        // compared.
        let all = |f: &dyn Fn(&NativeLibrary) -> bool| a.iter().chain(&b).all(|l| f(l));
        let kernels = all(&|l| l.kernel_family.is_some());
        let threads = all(&|l| l.max_threads.is_some());
        let config = all(&|l| {
            l.build_config.as_deref().is_some_and(|c| {
                l.implementation != "openblas" || crate::stack::blas::openblas_options_are_whole(c)
            })
        });
        let facts = |ls: &[&NativeLibrary]| -> Vec<String> {
            ls.iter()
                .map(|l| {
                    let mut l = (*l).clone();
                    if !kernels {
                        l.kernel_family = None;
                    }
                    if !threads {
                        l.max_threads = None;
                    }
                    if !config {
                        l.build_config = None;
                    }
                    format!("{}|{:?}|{:?}", describe(&l), l.dynamic_arch, l.build_config)
                })
                .collect()
        };
        if facts(&a) == facts(&b) {
            continue;
        }
        let bad = b
            .iter()
            .filter(|l| l.implementation == "openblas")
            .find_map(|l| rules::known_bad_openblas(l.version.as_deref()?));
        let (rule, lead) = if let Some(bad) = bad {
            (&BLAS_KNOWN_BAD, bad.to_string())
        } else if a.is_empty() || b.is_empty() {
            (&BLAS_ONE_SIDE, format!("{what} of {owner}"))
        } else if role != "blas" {
            (&OPENMP_RUNTIME, format!("{what} of {owner}"))
        } else if a.iter().map(|l| &l.implementation).collect::<Vec<_>>()
            != b.iter().map(|l| &l.implementation).collect::<Vec<_>>()
        {
            (&BLAS_VENDOR, format!("{owner} uses another BLAS vendor"))
        } else {
            let family = |ls: &[&NativeLibrary]| -> Vec<Option<String>> {
                ls.iter().map(|l| l.kernel_family.clone()).collect()
            };
            let version = |ls: &[&NativeLibrary]| -> Vec<Option<String>> {
                ls.iter().map(|l| l.version.clone()).collect()
            };
            let lead = match (family(&a).as_slice(), family(&b).as_slice()) {
                ([Some(x)], [Some(y)]) if kernels && x != y && version(&a) == version(&b) => {
                    format!("{owner}'s {what} runs {y} kernels instead of {x}")
                }
                _ => format!("{owner}'s {what} changed version or build"),
            };
            (&BLAS_VERSION, lead)
        };
        // Both stamps read the running process and neither had these files loaded: the
        // change could not have reached the run.
        let unused =
            !a.is_empty() && !b.is_empty() && a.iter().chain(&b).all(|l| l.loaded == Some(false));
        let (rule, lead) = if unused && rule.impact != Impact::None {
            (&NOT_LOADED, format!("{lead} (was {})", rule.id))
        } else {
            (rule, lead)
        };
        let mut c = change(rule, Section::Native, subject, lead, show(&a), show(&b));
        if owner != "system" {
            c.shipped_by = Some(owner.clone());
        }
        out.push(c);
    }

    let fm = |c: &Content| -> BTreeSet<(String, String)> {
        c.native
            .fast_math
            .iter()
            .map(|f| (f.owner.clone(), f.path.clone()))
            .collect()
    };
    let (of, nf) = (fm(old), fm(new));
    for (owner, path) in nf.difference(&of) {
        out.push(change(
            &FAST_MATH,
            Section::Native,
            format!("fast-math module {path}"),
            format!("{owner} now ships a compiled module with fast-math start-up code"),
            None,
            Some(owner.clone()),
        ));
    }
    for (owner, path) in of.difference(&nf) {
        out.push(change(
            &FAST_MATH,
            Section::Native,
            format!("fast-math module {path}"),
            format!("the fast-math module of {owner} is gone, so subnormals are no longer flushed"),
            Some(owner.clone()),
            None,
        ));
    }
}

/// One loaded library in a report: what it is, its version and kernels, where it came from.
fn describe_loaded(l: &LoadedLibrary) -> String {
    let mut s = format!(
        "{} {}",
        l.implementation,
        l.version.as_deref().unwrap_or("version unknown")
    );
    if let Some(k) = &l.kernel_family {
        s.push_str(&format!(" ({k} kernels)"));
    }
    if l.preloaded {
        s.push_str(", preloaded");
    }
    s
}

/// Two stamps of running processes: the libraries each had loaded (by kind and owner, so a
/// wheel's renamed copy compares with its predecessor), the CPUs each could use, and the
/// command lines.
fn compare_process(o: &ProcessInfo, n: &ProcessInfo, out: &mut Vec<Change>) {
    type Key = (String, String, String);
    let group = |p: &ProcessInfo| -> BTreeMap<Key, Vec<String>> {
        let mut m: BTreeMap<Key, Vec<String>> = BTreeMap::new();
        for l in &p.libraries {
            m.entry((l.kind.clone(), l.implementation.clone(), l.owner.clone()))
                .or_default()
                .push(describe_loaded(l));
        }
        m
    };
    let (og, ng) = (group(o), group(n));
    for (k, a, b) in super::outer_join(&og, &ng) {
        if a == b {
            continue;
        }
        let (kind, implementation, owner) = k;
        let join = |v: Option<&Vec<String>>| v.map(|v| v.join("; "));
        let lead = match (a, b) {
            (None, _) => format!("the process now loads {implementation} from {owner}"),
            (_, None) => format!("the process no longer loads {implementation} from {owner}"),
            _ => format!("the {implementation} the process loads from {owner} changed"),
        };
        out.push(change(
            &PROCESS_LIBRARIES,
            Section::Process,
            format!("loaded {kind}: {implementation} ({owner})"),
            lead,
            join(a),
            join(b),
        ));
    }
    if o.cpu_count.is_some() && n.cpu_count.is_some() && o.cpu_count != n.cpu_count {
        let show = |p: &ProcessInfo| {
            Some(format!(
                "{} CPUs ({})",
                p.cpu_count.unwrap_or_default(),
                p.cpus_allowed.as_deref().unwrap_or("?")
            ))
        };
        out.push(change(
            &PROCESS_CPUS,
            Section::Process,
            "CPUs the process may use".into(),
            String::new(),
            show(o),
            show(n),
        ));
    }
    // Compared only when both were recorded (`--private` leaves the command out).
    if !o.command.is_empty() && !n.command.is_empty() && o.command != n.command {
        let show = |p: &ProcessInfo| Some(p.command.join(" "));
        out.push(change(
            &PROCESS_COMMAND,
            Section::Process,
            "command line of the process".into(),
            String::new(),
            show(o),
            show(n),
        ));
    }
}

fn compare_gpu(o: &GpuInfo, n: &GpuInfo, out: &mut Vec<Change>) {
    if o.nvidia_driver != n.nvidia_driver {
        out.push(change(
            &GPU_DRIVER,
            Section::Gpu,
            "NVIDIA driver".into(),
            String::new(),
            o.nvidia_driver.clone(),
            n.nvidia_driver.clone(),
        ));
    }
    let tk = |g: &GpuInfo| -> Vec<String> {
        g.cuda_toolkits
            .iter()
            .map(|t| {
                t.runtime
                    .clone()
                    .or(t.version.clone())
                    .unwrap_or_else(|| "?".into())
            })
            .collect()
    };
    if tk(o) != tk(n) {
        out.push(change(
            &GPU_TOOLKIT,
            Section::Gpu,
            "CUDA toolkit".into(),
            String::new(),
            Some(tk(o).join(", ")),
            Some(tk(n).join(", ")),
        ));
    }
    let libs = |g: &GpuInfo| -> BTreeMap<(String, String), BTreeSet<String>> {
        let mut m: BTreeMap<(String, String), BTreeSet<String>> = BTreeMap::new();
        for l in &g.libraries {
            m.entry((l.name.clone(), l.owner.clone()))
                .or_default()
                .insert(l.version.clone());
        }
        m
    };
    let (ol, nl) = (libs(o), libs(n));
    for (k, a, b) in super::outer_join(&ol, &nl) {
        if a == b {
            continue;
        }
        let rule = match k.0.as_str() {
            "cudnn" => &GPU_CUDNN,
            "cublas" => &GPU_CUBLAS,
            "nccl" => &GPU_NCCL,
            _ => &GPU_TOOLKIT,
        };
        let join = |s: Option<&BTreeSet<String>>| {
            s.map(|s| s.iter().cloned().collect::<Vec<_>>().join(", "))
        };
        let mut c = change(
            rule,
            Section::Gpu,
            format!("{} ({})", k.0, k.1),
            String::new(),
            join(a),
            join(b),
        );
        if k.1 != "system" {
            c.shipped_by = Some(k.1.clone());
        }
        out.push(c);
    }
    let devs = |g: &GpuInfo| -> Vec<String> { g.devices.iter().map(|d| d.model.clone()).collect() };
    let (od, nd) = (devs(o), devs(n));
    if od != nd {
        let rule = if od.is_empty() || nd.is_empty() {
            &GPU_PRESENCE
        } else if od.len() != nd.len() {
            &GPU_COUNT
        } else {
            &GPU_MODEL
        };
        out.push(change(
            rule,
            Section::Gpu,
            "GPUs".into(),
            String::new(),
            Some(od.join(", ")).filter(|s| !s.is_empty()),
            Some(nd.join(", ")).filter(|s| !s.is_empty()),
        ));
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::diff::Impact;
    use crate::manifest::{Distribution, FastMathModule};

    fn ctx() -> Context<'static> {
        static POLICY: std::sync::OnceLock<crate::policy::Policy> = std::sync::OnceLock::new();
        let c = Box::leak(Box::new(Content::default()));
        Context::new(c, c, POLICY.get_or_init(crate::policy::Policy::default))
    }

    fn lib(owner: &str, version: &str) -> NativeLibrary {
        NativeLibrary {
            role: "blas".into(),
            implementation: "openblas".into(),
            owner: owner.into(),
            path: format!("{owner}.libs/libopenblas.so"),
            file: "libopenblas.so".into(),
            version: Some(version.into()),
            ..NativeLibrary::default()
        }
    }

    /// A baseline stamped before the files beside an OpenMP runtime were left out (the
    /// intel-openmp wheel's `libomptarget.so`, `libiomp5_db.so`) against a new stamp of the
    /// same environment: nothing to report. A runtime that really changed still is.
    #[test]
    fn files_beside_an_openmp_runtime_in_old_manifests_are_not_compared() {
        let omp = |file: &str, implementation: &str, version: Option<&str>| NativeLibrary {
            role: "openmp".into(),
            implementation: implementation.into(),
            owner: "intel-openmp".into(),
            path: format!("../../{file}"),
            file: file.into(),
            version: version.map(str::to_string),
            ..NativeLibrary::default()
        };
        let runtime = omp("libiomp5.so", "intel", Some("5.0.20260828"));
        let mut old = Content::default();
        old.native.libraries = vec![
            runtime.clone(),
            omp("libiomp5_db.so", "intel", None),
            omp("libomptarget.so", "llvm", None),
        ];
        let mut new = Content::default();
        new.native.libraries = vec![runtime.clone()];
        let mut out = Vec::new();
        compare(&old, &new, &ctx(), &mut out);
        assert!(out.is_empty(), "{out:?}");
        new.native.libraries[0].version = Some("5.0.20270101".into());
        compare(&old, &new, &ctx(), &mut out);
        assert_eq!(out.len(), 1, "{out:?}");
    }

    /// A baseline written before OpenBLAS's configuration was read whole (scipy 1.17's
    /// OpenBLAS 0.3.30 then gave `DYNAMIC_ARCH NO_ SINGLE_THREADEDOPENBLAS_VERBOSE`, no thread
    /// limit, and the forced family under `architecture`) against a new stamp of the same
    /// library: nothing to report. Two new stamps whose libraries run other kernels are a
    /// row that names both families.
    #[test]
    fn facts_read_on_one_side_only_are_not_a_change() {
        let mut old_lib = lib("scipy", "0.3.30");
        old_lib.build_config = Some("DYNAMIC_ARCH NO_ SINGLE_THREADEDOPENBLAS_VERBOSE".into());
        old_lib.architecture = Some("Zen".into());
        let mut new_lib = lib("scipy", "0.3.30");
        new_lib.build_config = Some("DYNAMIC_ARCH NO_AFFINITY".into());
        new_lib.max_threads = Some(64);
        new_lib.kernel_family = Some("Haswell".into());
        new_lib.requested_kernel_family = Some("Zen".into());
        let (mut old, mut new) = (Content::default(), Content::default());
        old.native.libraries = vec![old_lib];
        new.native.libraries = vec![new_lib.clone()];
        let mut out = Vec::new();
        compare(&old, &new, &ctx(), &mut out);
        assert!(out.is_empty(), "{out:?}");
        let mut other = new_lib;
        other.kernel_family = Some("SkylakeX".into());
        other.requested_kernel_family = None;
        old.native.libraries = vec![other];
        compare(&old, &new, &ctx(), &mut out);
        assert_eq!(out.len(), 1, "{out:?}");
        assert_eq!(out[0].impact, Impact::Verify);
        assert!(
            out[0]
                .reason
                .starts_with("scipy's BLAS runs Haswell kernels instead of SkylakeX"),
            "{}",
            out[0].reason
        );
    }

    /// Two stamps of running processes: a library the process loads from another owner, a
    /// new kernel family, a narrower CPU set and other arguments each make a row; a BLAS
    /// that is installed but loaded by neither process changes nothing.
    #[test]
    fn running_processes_are_compared_by_what_they_loaded() {
        let loaded = |implementation: &str, owner: &str, kernels: &str| LoadedLibrary {
            kind: "blas".into(),
            implementation: implementation.into(),
            owner: owner.into(),
            file: format!("lib{implementation}.so"),
            path: format!("/venv/{owner}.libs/lib{implementation}.so"),
            version: Some("0.3.30".into()),
            kernel_family: Some(kernels.into()),
            preloaded: false,
        };
        let process = |libs: Vec<LoadedLibrary>, cpus: u32, arg: &str| ProcessInfo {
            command: vec!["python".into(), "train.py".into(), arg.into()],
            cpu_count: Some(cpus),
            cpus_allowed: Some(format!("0-{}", cpus - 1)),
            libraries: libs,
            ..ProcessInfo::default()
        };
        let (mut old, mut new) = (Content::default(), Content::default());
        old.process = Some(process(
            vec![loaded("openblas", "numpy", "Haswell")],
            8,
            "--seed=1",
        ));
        new.process = Some(process(
            vec![loaded("openblas", "numpy", "Haswell")],
            8,
            "--seed=1",
        ));
        let mut out = Vec::new();
        compare(&old, &new, &ctx(), &mut out);
        assert!(out.is_empty(), "{out:?}");
        new.process = Some(process(
            vec![
                loaded("openblas", "numpy", "SkylakeX"),
                loaded("openblas", "scipy", "SkylakeX"),
            ],
            4,
            "--seed=2",
        ));
        compare(&old, &new, &ctx(), &mut out);
        let rules: Vec<&str> = out.iter().map(|c| c.rule.id).collect();
        assert_eq!(
            rules,
            [
                "process.libraries",
                "process.libraries",
                "process.cpus",
                "process.command"
            ],
            "{out:?}"
        );
        assert!(out.iter().all(|c| c.impact == Impact::Verify));
        // An MKL both processes left unloaded: reported as harmless.
        let mut mkl = lib("mkl", "2024.1");
        mkl.implementation = "mkl".into();
        mkl.loaded = Some(false);
        let (mut a, mut b) = (Content::default(), Content::default());
        a.native.libraries = vec![mkl.clone()];
        mkl.version = Some("2025.0".into());
        b.native.libraries = vec![mkl.clone()];
        let mut out = Vec::new();
        compare(&a, &b, &ctx(), &mut out);
        assert_eq!(out.len(), 1, "{out:?}");
        assert_eq!(out[0].impact, Impact::None, "{out:?}");
        mkl.loaded = Some(true);
        b.native.libraries = vec![mkl];
        let mut out = Vec::new();
        compare(&a, &b, &ctx(), &mut out);
        assert_eq!(out[0].impact, Impact::Verify, "{out:?}");
    }

    /// numpy twice: the copy `import` finds is compared, the one behind it is named.
    #[test]
    fn shadowed_copies_are_named_and_the_imported_one_compared() {
        let numpy = |version: &str, shadowed: bool| Distribution {
            name: "numpy".into(),
            version: version.into(),
            compiled: true,
            shadowed,
            ..Distribution::default()
        };
        let env = |d: Vec<Distribution>| {
            let mut c = Content::default();
            c.python.push(PythonEnv {
                interpreter: "p".into(),
                distributions: d,
                ..PythonEnv::default()
            });
            c
        };
        let rules = |a: &Content, b: &Content| {
            let mut out = Vec::new();
            compare(a, b, &ctx(), &mut out);
            out.iter()
                .map(|c| (c.rule.id, c.impact, c.new.clone()))
                .collect::<Vec<_>>()
        };
        let one = env(vec![numpy("2.4.6", false)]);
        let behind = env(vec![numpy("2.4.6", false), numpy("1.26.4", true)]);
        assert_eq!(
            rules(&one, &behind),
            [(
                "python.shadowed",
                Impact::None,
                Some("2.4.6 (shadowed: 1.26.4)".into())
            )]
        );
        // PYTHONPATH puts 1.26.4 first: the imported numpy went back a major release.
        let front = env(vec![numpy("1.26.4", false), numpy("2.4.6", true)]);
        let r = rules(&one, &front);
        assert_eq!(r.len(), 1, "{r:?}");
        assert_eq!(r[0].1, Impact::Retrain, "{r:?}");
        // A baseline from before copies were marked, with the same two copies: nothing.
        let unmarked = env(vec![numpy("1.26.4", false), numpy("2.4.6", false)]);
        assert!(rules(&unmarked, &front).is_empty());
    }

    /// torch's `version.py` names its CUDA but not its cuDNN: the report says the cuDNN of a
    /// CUDA build is not recorded, not that there is none.
    #[test]
    fn an_unrecorded_cudnn_is_not_shown_as_none() {
        let torch = |cuda: Option<&str>| FrameworkBuild {
            name: "torch".into(),
            version: Some("2.5.1".into()),
            cuda: cuda.map(str::to_string),
            ..FrameworkBuild::default()
        };
        let (mut a, mut b) = (Content::default(), Content::default());
        a.python.push(PythonEnv {
            interpreter: "p".into(),
            builds: vec![torch(Some("12.4"))],
            ..PythonEnv::default()
        });
        b.python.push(PythonEnv {
            interpreter: "p".into(),
            builds: vec![torch(None)],
            ..PythonEnv::default()
        });
        let mut out = Vec::new();
        compare(&a, &b, &ctx(), &mut out);
        let row = out
            .iter()
            .find(|c| c.old.as_deref().is_some_and(|o| o.contains("cuda 12.4")))
            .unwrap_or_else(|| panic!("{out:?}"));
        assert_eq!(
            row.old.as_deref(),
            Some("cuda 12.4, cudnn not recorded, rocm none")
        );
        assert_eq!(row.new.as_deref(), Some("cuda none, cudnn none, rocm none"));
    }

    #[test]
    fn numpy_major_and_blas_version() {
        let mut a = Content::default();
        let mut b = Content::default();
        a.python.push(PythonEnv {
            interpreter: "p".into(),
            kind: "venv".into(),
            distributions: vec![Distribution {
                name: "numpy".into(),
                version: "1.26.4".into(),
                ..Distribution::default()
            }],
            ..PythonEnv::default()
        });
        b.python = a.python.clone();
        b.python[0].distributions[0].version = "2.4.6".into();
        a.native.libraries.push(lib("numpy", "0.3.23.dev"));
        b.native.libraries.push(lib("numpy", "0.3.31.188.0"));
        let mut out = Vec::new();
        compare(&a, &b, &ctx(), &mut out);
        assert!(out
            .iter()
            .any(|c| c.subject == "python: numpy" && c.impact == Impact::Retrain));
        assert!(out
            .iter()
            .any(|c| c.subject == "numpy BLAS" && c.impact == Impact::Verify));
    }

    #[test]
    fn known_bad_versions_and_fast_math_are_retrain() {
        let mut a = Content::default();
        let mut b = Content::default();
        a.native.libraries.push(lib("numpy", "0.3.27"));
        b.native.libraries.push(lib("numpy", "0.3.28"));
        b.native.fast_math.push(FastMathModule {
            owner: "fastpkg".into(),
            path: "fastpkg/_x.so".into(),
        });
        let mut out = Vec::new();
        compare(&a, &b, &ctx(), &mut out);
        assert_eq!(out.len(), 2);
        assert!(out.iter().all(|c| c.impact == Impact::Retrain), "{out:#?}");
        // Same content: nothing.
        let mut none = Vec::new();
        compare(&b, &b, &ctx(), &mut none);
        assert!(none.is_empty());
    }

    #[test]
    fn python_minor_is_retrain_micro_is_verify() {
        let env = |v: &str| PythonEnv {
            interpreter: "p".into(),
            kind: "venv".into(),
            version: Some(v.into()),
            ..PythonEnv::default()
        };
        for (a, b, want) in [
            ("3.11.7", "3.12.1", Impact::Retrain),
            ("3.11.7", "3.11.9", Impact::Verify),
        ] {
            let mut out = Vec::new();
            compare_python(&[env(a)], &[env(b)], &ctx(), &mut out);
            assert_eq!(out[0].impact, want);
        }
    }

    #[test]
    fn gpu_driver_and_presence() {
        let a = GpuInfo::default();
        let mut b = GpuInfo {
            nvidia_driver: Some("550.90.07".into()),
            ..GpuInfo::default()
        };
        b.devices.push(crate::manifest::GpuDevice {
            bus_id: "0000:01:00.0".into(),
            model: "GPU A".into(),
            ..Default::default()
        });
        let mut out = Vec::new();
        compare_gpu(&a, &b, &mut out);
        assert!(out
            .iter()
            .any(|c| c.subject == "NVIDIA driver" && c.impact == Impact::Verify));
        assert!(out
            .iter()
            .any(|c| c.subject == "GPUs" && c.impact == Impact::Retrain));
    }
}
