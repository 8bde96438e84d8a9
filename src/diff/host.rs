//! The machine: `cpu`, `system` and `run`.

use super::*;

rule_group! {
    /// The rules of the processor, the system and the run (the conditions: the comparisons below).
    HOST_RULES;
    CPU_ARCH = "cpu.arch", "cpu", Retrain, 80,
        "CPU architecture",
        "another instruction-set architecture uses other kernels, fused multiply-add contraction and math libraries",
        "https://github.com/llvm/llvm-project/issues/91824; https://github.com/microsoft/onnxruntime/issues/13638";
    CPU_FEATURES = "cpu.features", "cpu", Verify, 50,
        "CPU instruction-set features (AVX2, AVX-512, FMA, AMX, SVE...)",
        "libraries dispatch to other code paths on other features (NumPy's AVX-512 math, PyTorch and oneDNN kernels), which changes the last digits",
        "https://github.com/pytorch/pytorch/issues/155423; https://github.com/numpy/numpy/issues/23523";
    CPU_MODEL = "cpu.model", "cpu", Verify, 45,
        "CPU model",
        "BLAS and frameworks pick kernels for the processor they find (OpenBLAS core types), and different kernels round differently",
        "https://github.com/OpenMathLib/OpenBLAS/issues/4510";
    CPU_COUNT = "cpu.count", "cpu", Verify, 42,
        "CPU core or allowed-CPU count",
        "libraries size their thread pools from the CPU count unless told otherwise, and another thread count splits reductions differently",
        "https://github.com/scikit-learn/scikit-learn/issues/18790; https://github.com/pytorch/pytorch/issues/88718";
    CPU_AFFINITY = "cpu.affinity", "cpu", None, 5,
        "same number of allowed CPUs in another placement",
        "the thread count, and so the order of reductions, stays the same; only where threads run changes",
        "common practice";
    SYS_LIBC = "system.libc", "system", Verify, 38,
        "C library or its version",
        "libm's exp, log, pow and sin can differ in the last bit between versions (glibc 2.28 rewrote them)",
        "https://github.com/openmc-dev/openmc/issues/1214";
    SYS_OTHER = "system.other", "system", None, 0,
        "OS release, kernel or memory",
        "it does not do the arithmetic (the C library and drivers are compared separately)",
        "common practice";
    RUN_INFO = "run.info", "run", None, 0,
        "host name, label or runprint version",
        "it describes the stamping, not the computation (the host's processor and libraries are compared separately)",
        "common practice";
}

pub(super) fn compare_cpu(old: &Content, new: &Content, out: &mut Vec<Change>) {
    let (o, n) = (&old.cpu, &new.cpu);
    if o.arch != n.arch {
        out.push(Change::from_rule(
            &CPU_ARCH,
            Section::Cpu,
            "cpu architecture",
            "",
            Some(o.arch.clone()),
            Some(n.arch.clone()),
        ));
    }
    let ident = |c: &crate::manifest::CpuInfo| {
        (
            c.vendor.clone(),
            c.model_name.clone(),
            c.family.clone(),
            c.model.clone(),
            c.stepping.clone(),
        )
    };
    if ident(o) != ident(n) {
        out.push(Change::from_rule(
            &CPU_MODEL,
            Section::Cpu,
            "cpu model",
            "",
            Some(opt(&o.model_name)),
            Some(opt(&n.model_name)),
        ));
    }
    // Manifests of older runprint versions may hold flags that are not numerical (`smep`).
    fn numeric(c: &crate::manifest::CpuInfo) -> BTreeSet<&String> {
        c.features
            .iter()
            .filter(|f| crate::classes::is_numeric_cpu_feature(f))
            .collect()
    }
    let (of, nf) = (numeric(o), numeric(n));
    if of != nf {
        let gone: Vec<&str> = of.difference(&nf).map(|s| s.as_str()).collect();
        let came: Vec<&str> = nf.difference(&of).map(|s| s.as_str()).collect();
        let mut parts = Vec::new();
        if !came.is_empty() {
            parts.push(format!("gained {}", came.join(" ")));
        }
        if !gone.is_empty() {
            parts.push(format!("lost {}", gone.join(" ")));
        }
        let summary = came
            .iter()
            .map(|f| format!("+{f}"))
            .chain(gone.iter().map(|f| format!("-{f}")))
            .collect::<Vec<_>>()
            .join(" ");
        out.push(Change::from_rule(
            &CPU_FEATURES,
            Section::Cpu,
            "cpu features",
            format!("the processor {}", parts.join(" and ")),
            Some(format!("{} features", of.len())),
            Some(format!("{} features ({summary})", nf.len())),
        ));
    }
    let counts =
        |c: &crate::manifest::CpuInfo| (c.logical_cores, c.physical_cores, c.allowed_cpu_count);
    let fmt = |c: &crate::manifest::CpuInfo| {
        format!(
            "{} logical, {} allowed",
            c.logical_cores,
            c.allowed_cpu_count.map_or("?".into(), |n| n.to_string())
        )
    };
    if counts(o) != counts(n) {
        out.push(Change::from_rule(
            &CPU_COUNT,
            Section::Cpu,
            "cpu count",
            "",
            Some(fmt(o)),
            Some(fmt(n)),
        ));
    } else if o.allowed_cpus != n.allowed_cpus {
        out.push(Change::from_rule(
            &CPU_AFFINITY,
            Section::Cpu,
            "cpu affinity",
            "",
            o.allowed_cpus.clone(),
            n.allowed_cpus.clone(),
        ));
    }
}

pub(super) fn compare_run(old: &Manifest, new: &Manifest, out: &mut Vec<Change>) {
    let (o, n) = (&old.run, &new.run);
    let mut push = |subject: &str, a: Option<String>, b: Option<String>| {
        if a != b {
            out.push(Change::from_rule(
                &RUN_INFO,
                Section::Run,
                subject,
                "",
                a,
                b,
            ));
        }
    };
    push("host name", o.hostname.clone(), n.hostname.clone());
    push("label", o.label.clone(), n.label.clone());
    push(
        "runprint version",
        Some(o.tool_version.clone()),
        Some(n.tool_version.clone()),
    );
}

pub(super) fn compare_system(old: &Content, new: &Content, out: &mut Vec<Change>) {
    let (o, n) = (&old.system, &new.system);
    if (&o.libc, &o.libc_version) != (&n.libc, &n.libc_version) {
        let f =
            |s: &crate::manifest::SystemInfo| format!("{} {}", opt(&s.libc), opt(&s.libc_version));
        out.push(Change::from_rule(
            &SYS_LIBC,
            Section::System,
            "libc",
            "",
            Some(f(o)),
            Some(f(n)),
        ));
    }
    let mut push = |subject: &str, a: Option<String>, b: Option<String>| {
        if a != b {
            out.push(Change::from_rule(
                &SYS_OTHER,
                Section::System,
                subject,
                "",
                a,
                b,
            ));
        }
    };
    push(
        "operating system",
        Some(format!("{} {}", o.os, opt(&o.os_version))),
        Some(format!("{} {}", n.os, opt(&n.os_version))),
    );
    push("kernel", o.kernel.clone(), n.kernel.clone());
    push(
        "memory",
        Some(o.memory_bytes.to_string()),
        Some(n.memory_bytes.to_string()),
    );
}
