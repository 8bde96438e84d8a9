//! Comparing the numerical stack: Python environments, native BLAS/OpenMP libraries,
//! fast-math modules and the GPU stack. Each difference becomes a [`Change`] in section
//! `python`, `native` or `gpu`, with an impact grounded in the facts listed (with sources) in
//! `/docs/rules.md` and the numeric-facts notes (ids such as B1, C9, G10 refer to those).
//!
//! Rules, in short:
//! * a distribution's version or source: [`rules::package_impact`] (numerical packages are
//!   retrain-level);
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

use super::{rules, Change, Impact};
use crate::manifest::{Content, FrameworkBuild, GpuInfo, NativeLibrary, PythonEnv};

fn change(
    impact: Impact,
    section: &str,
    subject: String,
    reason: String,
    old: Option<String>,
    new: Option<String>,
) -> Change {
    Change {
        impact,
        subject,
        reason,
        section: section.into(),
        old,
        new,
    }
}

/// Adds the stack's changes between two manifests' contents.
pub fn compare(old: &Content, new: &Content, out: &mut Vec<Change>) {
    compare_python(&old.python, &new.python, out);
    compare_native(old, new, out);
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

fn compare_python(old: &[PythonEnv], new: &[PythonEnv], out: &mut Vec<Change>) {
    let count = old.len().max(new.len());
    for i in 0..count {
        let label = env_label(i, count);
        match (old.get(i), new.get(i)) {
            (Some(o), Some(n)) => compare_env(&label, o, n, out),
            (o, n) => out.push(change(
                Impact::Verify,
                "python",
                format!("{label} environment"),
                "a Python environment was recorded on one side only, so its packages cannot be compared".into(),
                o.map(|e| e.interpreter.clone()),
                n.map(|e| e.interpreter.clone()),
            )),
        }
    }
}

fn minor(v: &str) -> String {
    v.split('.').take(2).collect::<Vec<_>>().join(".")
}

fn compare_env(label: &str, o: &PythonEnv, n: &PythonEnv, out: &mut Vec<Change>) {
    if o.implementation != n.implementation {
        out.push(change(
            Impact::Retrain,
            "python",
            format!("{label} implementation"),
            "another Python implementation runs the code, with its own numeric built-ins, hashing and random streams".into(),
            o.implementation.clone(),
            n.implementation.clone(),
        ));
    }
    if o.version != n.version {
        let (a, b) = (
            o.version.as_deref().unwrap_or(""),
            n.version.as_deref().unwrap_or(""),
        );
        let (impact, reason) = if minor(a) != minor(b) {
            (Impact::Retrain, "a new Python minor release may change the streams of `random` (shuffle, sample, choice…; only `random()` is kept stable) and the standard library's numeric code, so data order and results are expected to change")
        } else {
            (Impact::Verify, "a Python bug-fix release keeps `random` streams stable but can still fix numeric code in the standard library; rerun and compare metrics")
        };
        out.push(change(
            impact,
            "python",
            format!("{label} version"),
            reason.into(),
            o.version.clone(),
            n.version.clone(),
        ));
    }
    if o.interpreter != n.interpreter {
        out.push(change(
            Impact::None,
            "python",
            format!("{label} interpreter path"),
            "the interpreter's location does not change results; its version and packages are compared separately".into(),
            Some(o.interpreter.clone()),
            Some(n.interpreter.clone()),
        ));
    }
    compare_distributions(label, o, n, out);
    compare_conda(label, o, n, out);
    compare_builds(label, &o.builds, &n.builds, out);
}

fn compare_distributions<'a>(
    label: &str,
    o: &'a PythonEnv,
    n: &'a PythonEnv,
    out: &mut Vec<Change>,
) {
    type Keyed<'a> = BTreeMap<&'a str, Vec<(String, Option<String>)>>;
    let group = |e: &'a PythonEnv| -> Keyed<'a> {
        let mut m: Keyed = BTreeMap::new();
        for d in &e.distributions {
            m.entry(&d.name)
                .or_default()
                .push((d.version.clone(), d.source.clone()));
        }
        m
    };
    let (og, ng) = (group(o), group(n));
    let versions = |v: Option<&Vec<(String, Option<String>)>>| {
        v.map(|v| {
            v.iter()
                .map(|(ver, _)| ver.clone())
                .collect::<Vec<_>>()
                .join(", ")
        })
    };
    for name in og.keys().chain(ng.keys()).collect::<BTreeSet<_>>() {
        let (a, b) = (og.get(name), ng.get(name));
        if a == b {
            continue;
        }
        let what = match (a, b) {
            (None, _) => "newly installed package",
            (_, None) => "removed package",
            (Some(a), Some(b))
                if a.iter().map(|x| &x.0).collect::<Vec<_>>()
                    == b.iter().map(|x| &x.0).collect::<Vec<_>>() =>
            {
                "change of source (index, URL, path or VCS revision)"
            }
            _ => "version change",
        };
        let (impact, reason) = rules::package_impact(name, false, what);
        out.push(change(
            impact,
            "python",
            format!("{label}: {name}"),
            reason,
            versions(a),
            versions(b),
        ));
    }
}

fn compare_conda(label: &str, o: &PythonEnv, n: &PythonEnv, out: &mut Vec<Change>) {
    let m = |e: &PythonEnv| -> BTreeMap<String, String> {
        e.conda_packages
            .iter()
            .map(|p| (p.name.clone(), format!("{} ({})", p.version, p.build)))
            .collect()
    };
    let (om, nm) = (m(o), m(n));
    for name in om.keys().chain(nm.keys()).collect::<BTreeSet<_>>() {
        let (a, b) = (om.get(name), nm.get(name));
        if a == b {
            continue;
        }
        let (impact, reason) = if matches!(
            name.as_str(),
            "libblas" | "libcblas" | "liblapack" | "blas"
        ) {
            (Impact::Verify, format!("conda's {name} build names the BLAS every package in the environment uses; another vendor or version orders floating-point operations differently (last digits, amplified by iterative training)"))
        } else {
            rules::package_impact(name, false, "conda package change")
        };
        out.push(change(
            impact,
            "python",
            format!("{label}: conda {name}"),
            reason,
            a.cloned(),
            b.cloned(),
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
                format!(
                    "cuda {}, cudnn {}, rocm {}",
                    x.cuda.as_deref().unwrap_or("none"),
                    x.cudnn.as_deref().unwrap_or("none"),
                    x.rocm.as_deref().unwrap_or("none")
                )
            };
            let (impact, reason) = if a.cuda.is_some() != b.cuda.is_some() {
                (Impact::Retrain, format!("{name} was built for another device family (CPU-only against CUDA): training runs on different kernels with different precision defaults"))
            } else {
                (Impact::Verify, format!("{name} was built against another CUDA/cuDNN/ROCm, which brings other GPU kernels (cuBLAS and cuDNN guarantee identical bits only within one version); rerun and compare metrics"))
            };
            out.push(change(
                impact,
                "python",
                format!("{label}: {name} build"),
                reason,
                Some(show(a)),
                Some(show(b)),
            ));
        }
        if a.git_revision != b.git_revision && a.version == b.version {
            out.push(change(
                Impact::Retrain,
                "python",
                format!("{label}: {name} source revision"),
                format!("{name} reports the same version but was built from another source revision, so different code computes"),
                a.git_revision.clone(),
                b.git_revision.clone(),
            ));
        }
        if (&a.blas, &a.blas_config) != (&b.blas, &b.blas_config) {
            out.push(change(
                Impact::Verify,
                "python",
                format!("{label}: {name} BLAS build"),
                format!("{name} was built against another BLAS or BLAS configuration; BLAS vendors and builds order floating-point operations differently, which iterative training can amplify"),
                a.blas.clone().or(a.blas_config.clone()),
                b.blas.clone().or(b.blas_config.clone()),
            ));
        }
    }
}

/// OpenBLAS releases known to compute wrong results, with the reason (numeric-facts B27–B29).
fn known_bad_openblas(version: &str) -> Option<&'static str> {
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
        [0, 3, 4..=6] => Some("OpenBLAS 0.3.4–0.3.6 have an AVX-512 DGEMM kernel that returns wrong results on AVX-512 processors (OpenBLAS issues 1955, 2029, 2182)"),
        [0, 3, 11] => Some("OpenBLAS 0.3.11's SkylakeX sgemm_direct could compile to an empty function and return garbage (OpenBLAS issue 2914)"),
        [0, 3, 28..=29] => Some("OpenBLAS 0.3.28–0.3.29 can return another thread's GEMM result when called from several threads (numpy issue 29391)"),
        _ => None,
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
    if let Some(a) = &l.architecture {
        extra.push(format!("{a} kernels"));
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
        for l in &c.native.libraries {
            m.entry(key(l)).or_default().push(l);
        }
        m
    };
    let (og, ng) = (group(old), group(new));
    for k in og.keys().chain(ng.keys()).collect::<BTreeSet<_>>() {
        let (owner, role, place) = k;
        let a = og.get(k).cloned().unwrap_or_default();
        let b = ng.get(k).cloned().unwrap_or_default();
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
        let facts = |ls: &[&NativeLibrary]| -> Vec<String> {
            ls.iter()
                .map(|l| format!("{}|{:?}|{:?}", describe(l), l.dynamic_arch, l.build_config))
                .collect()
        };
        if facts(&a) == facts(&b) {
            continue;
        }
        let bad = b
            .iter()
            .filter(|l| l.implementation == "openblas")
            .find_map(|l| known_bad_openblas(l.version.as_deref()?));
        let (impact, reason) = if let Some(bad) = bad {
            (
                Impact::Retrain,
                format!("the new {what} is a release known to compute wrong results: {bad}"),
            )
        } else if a.is_empty() || b.is_empty() {
            (Impact::Verify, format!("{} {what} is present on one side only ({owner}); the code that does linear algebra or runs threads differs, so results can differ in the last digits and iterative training can drift", if role == "blas" { "a" } else { "an" }))
        } else if a.iter().map(|l| &l.implementation).collect::<Vec<_>>()
            != b.iter().map(|l| &l.implementation).collect::<Vec<_>>()
        {
            if role == "blas" {
                (Impact::Verify, format!("{owner} uses another BLAS vendor; vendors order floating-point operations differently, so matrix products differ in the last digits and iterative algorithms can amplify that to visibly different models (e.g. ICA signs flipped between MKL and OpenBLAS)"))
            } else {
                (Impact::Verify, format!("{owner} uses another OpenMP runtime, which reads its own variables, sizes its thread pool and splits parallel reductions its own way; sums can differ in the last digits"))
            }
        } else {
            (Impact::Verify, format!("{owner}'s {what} changed version or build (threading, integer width, thread limit or kernel choice); each changes blocking, kernels or how reductions are split, so results differ in the last digits and iterative training can drift; rerun and compare metrics"))
        };
        out.push(change(
            impact,
            "native",
            subject,
            reason,
            show(&a),
            show(&b),
        ));
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
            Impact::Retrain,
            "native",
            format!("fast-math module {path}"),
            format!("{owner} now ships a compiled module with fast-math start-up code: loading it turns on flush-to-zero and denormals-are-zero for the whole process, so numbers below 1.2e-38 (float32) or 2.2e-308 (float64) become zero in every library"),
            None,
            Some(owner.clone()),
        ));
    }
    for (owner, path) in of.difference(&nf) {
        out.push(change(
            Impact::Retrain,
            "native",
            format!("fast-math module {path}"),
            format!("the fast-math module of {owner} is gone: subnormal numbers are no longer flushed to zero for the whole process, so results in that range change"),
            Some(owner.clone()),
            None,
        ));
    }
}

fn compare_gpu(o: &GpuInfo, n: &GpuInfo, out: &mut Vec<Change>) {
    if o.nvidia_driver != n.nvidia_driver {
        out.push(change(
            Impact::Verify,
            "gpu",
            "NVIDIA driver".into(),
            "the driver compiles and schedules GPU kernels; a driver upgrade alone has changed solver convergence before; rerun and compare metrics".into(),
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
            Impact::Verify,
            "gpu",
            "CUDA toolkit".into(),
            "another CUDA toolkit brings other compiler and library versions; cuBLAS promises identical bits only within one toolkit version".into(),
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
    for k in ol.keys().chain(nl.keys()).collect::<BTreeSet<_>>() {
        let (a, b) = (ol.get(k), nl.get(k));
        if a == b {
            continue;
        }
        let why = match k.0.as_str() {
            "cudnn" => "cuDNN picks convolution algorithms by version and heuristics; identical bits are promised only for the same version on the same architecture",
            "cublas" => "cuBLAS promises identical bits only for the same version on GPUs of the same architecture and SM count",
            "nccl" => "NCCL's choice of all-reduce algorithm, protocol and channels depends on its version, and each sums in another order",
            _ => "another CUDA runtime brings other GPU math and library versions",
        };
        let join = |s: Option<&BTreeSet<String>>| {
            s.map(|s| s.iter().cloned().collect::<Vec<_>>().join(", "))
        };
        out.push(change(
            Impact::Verify,
            "gpu",
            format!("{} ({})", k.0, k.1),
            format!("{why}; rerun and compare metrics"),
            join(a),
            join(b),
        ));
    }
    let devs = |g: &GpuInfo| -> Vec<String> { g.devices.iter().map(|d| d.model.clone()).collect() };
    let (od, nd) = (devs(o), devs(n));
    if od != nd {
        let (impact, reason) = if od.is_empty() || nd.is_empty() {
            (Impact::Retrain, "GPUs are present on one side only: training runs on other kernels with other precision defaults (TF32 on Ampere and later, nondeterministic atomics), which changes results")
        } else if od.len() != nd.len() {
            (Impact::Verify, "the number of GPUs changed: the split of work, the collective algorithms and the order of sums change with it")
        } else {
            (Impact::Verify, "another GPU model has another architecture or SM count, so kernels and their order of operations change; rerun and compare metrics")
        };
        out.push(change(
            impact,
            "gpu",
            "GPUs".into(),
            reason.into(),
            Some(od.join(", ")).filter(|s| !s.is_empty()),
            Some(nd.join(", ")).filter(|s| !s.is_empty()),
        ));
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::manifest::{Distribution, FastMathModule};

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
        compare(&a, &b, &mut out);
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
        compare(&a, &b, &mut out);
        assert_eq!(out.len(), 2);
        assert!(out.iter().all(|c| c.impact == Impact::Retrain), "{out:#?}");
        // Same content: nothing.
        let mut none = Vec::new();
        compare(&b, &b, &mut none);
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
            compare_python(&[env(a)], &[env(b)], &mut out);
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
