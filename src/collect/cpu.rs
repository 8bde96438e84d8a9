//! The processor: identity, cores, the CPUs this process may use, and the instruction-set
//! features numerical kernels dispatch on.
//!
//! On Linux the facts come from `/proc/cpuinfo` and `/proc/self/status` (parsed by the pure
//! functions [`parse_cpuinfo`] and [`parse_allowed_cpus`]); elsewhere from the standard
//! library's feature detection and `sysinfo`.

use crate::manifest::CpuInfo;

/// Parses `/proc/cpuinfo` text. Only the first processor block is read for identity; features
/// are the intersection over all blocks' flags would be stricter, but Linux reports the same
/// set on every core of a homogeneous system, and hybrid systems expose the common subset.
pub fn parse_cpuinfo(text: &str) -> CpuInfo {
    let mut info = CpuInfo::default();
    let mut logical = 0u32;
    let mut first_block = true;
    for line in text.lines() {
        if line.trim().is_empty() {
            if logical > 0 {
                first_block = false;
            }
            continue;
        }
        let Some((key, value)) = line.split_once(':') else {
            continue;
        };
        let (key, value) = (key.trim(), value.trim());
        if key == "processor" {
            logical += 1;
        }
        if !first_block {
            continue;
        }
        let value_owned = || Some(value.to_string()).filter(|v| !v.is_empty());
        match key {
            "vendor_id" | "CPU implementer" => info.vendor = value_owned(),
            "model name" => info.model_name = value_owned(),
            "cpu family" | "CPU architecture" => info.family = value_owned(),
            "model" | "CPU part" => info.model = value_owned(),
            "stepping" | "CPU revision" => info.stepping = value_owned(),
            "flags" | "Features" => {
                let mut features: Vec<String> = value
                    .split_whitespace()
                    .filter(|f| crate::classes::is_numeric_cpu_feature(f))
                    .map(str::to_string)
                    .collect();
                features.sort();
                features.dedup();
                info.features = features;
            }
            _ => {}
        }
    }
    info.logical_cores = logical;
    info
}

/// Parses the `Cpus_allowed_list` line of `/proc/self/status` into the list text and a count.
pub fn parse_allowed_cpus(status: &str) -> Option<(String, u32)> {
    let list = status
        .lines()
        .find_map(|l| l.strip_prefix("Cpus_allowed_list:"))?
        .trim()
        .to_string();
    let mut count = 0u32;
    for part in list.split(',').filter(|p| !p.is_empty()) {
        count += match part.split_once('-') {
            Some((a, b)) => {
                let (a, b): (u32, u32) = (a.trim().parse().ok()?, b.trim().parse().ok()?);
                b.checked_sub(a)? + 1
            }
            None => {
                part.trim().parse::<u32>().ok()?;
                1
            }
        };
    }
    Some((list, count))
}

/// Collects the CPU facts of this machine.
pub fn collect() -> Result<CpuInfo, String> {
    let mut info = match crate::limits::read_regular_text(std::path::Path::new("/proc/cpuinfo")) {
        Ok(text) => parse_cpuinfo(&text),
        Err(_) => fallback_features(),
    };
    info.arch = std::env::consts::ARCH.to_string();
    let mut sys = sysinfo::System::new();
    sys.refresh_cpu_list(sysinfo::CpuRefreshKind::nothing());
    if info.model_name.is_none() {
        info.model_name = sys
            .cpus()
            .first()
            .map(|c| c.brand().trim().to_string())
            .filter(|b| !b.is_empty());
    }
    if info.vendor.is_none() {
        info.vendor = sys
            .cpus()
            .first()
            .map(|c| c.vendor_id().to_string())
            .filter(|v| !v.is_empty());
    }
    if info.logical_cores == 0 {
        info.logical_cores = sys.cpus().len() as u32;
    }
    info.physical_cores = sys.physical_core_count().map(|n| n as u32);
    match crate::limits::read_regular_text(std::path::Path::new("/proc/self/status"))
        .ok()
        .and_then(|s| parse_allowed_cpus(&s))
    {
        Some((list, count)) => {
            info.allowed_cpus = Some(list);
            info.allowed_cpu_count = Some(count);
        }
        None => {
            info.allowed_cpu_count = std::thread::available_parallelism()
                .ok()
                .map(|n| n.get() as u32);
        }
    }
    if info.logical_cores == 0 {
        return Err("the number of processors could not be read".into());
    }
    Ok(info)
}

/// Feature detection through the standard library, for systems without `/proc/cpuinfo`.
fn fallback_features() -> CpuInfo {
    #[allow(unused_mut)]
    let mut features: Vec<String> = Vec::new();
    #[cfg(any(target_arch = "x86", target_arch = "x86_64"))]
    {
        macro_rules! probe {
            ($($feat:tt => $name:expr),* $(,)?) => {
                $( if std::is_x86_feature_detected!($feat) { features.push($name.to_string()); } )*
            };
        }
        probe!(
            "sse" => "sse", "sse2" => "sse2", "sse3" => "pni", "ssse3" => "ssse3",
            "sse4.1" => "sse4_1", "sse4.2" => "sse4_2", "popcnt" => "popcnt", "avx" => "avx",
            "avx2" => "avx2", "fma" => "fma", "f16c" => "f16c", "bmi1" => "bmi1", "bmi2" => "bmi2",
            "avx512f" => "avx512f", "avx512dq" => "avx512dq", "avx512cd" => "avx512cd",
            "avx512bw" => "avx512bw", "avx512vl" => "avx512vl", "sha" => "sha_ni", "aes" => "aes",
        );
    }
    #[cfg(target_arch = "aarch64")]
    {
        macro_rules! probe {
            ($($feat:tt => $name:expr),* $(,)?) => {
                $( if std::arch::is_aarch64_feature_detected!($feat) { features.push($name.to_string()); } )*
            };
        }
        probe!("neon" => "asimd", "fp16" => "fphp", "sve" => "sve", "sve2" => "sve2",
               "bf16" => "bf16", "i8mm" => "i8mm", "dotprod" => "asimddp");
    }
    features.sort();
    CpuInfo {
        features,
        ..CpuInfo::default()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // Shape of /proc/cpuinfo on x86 Linux (fields as printed by arch/x86/kernel/cpu/proc.c).
    const X86: &str = "processor\t: 0\nvendor_id\t: GenuineIntel\ncpu family\t: 6\nmodel\t\t: 143\nmodel name\t: Example CPU @ 2.00GHz\nstepping\t: 8\nflags\t\t: fpu sse sse2 pni avx avx2 fma avx512f avx512_bf16 amx_tile hypervisor\n\nprocessor\t: 1\nvendor_id\t: GenuineIntel\nflags\t\t: fpu sse\n\n";

    #[test]
    fn x86_block() {
        let info = parse_cpuinfo(X86);
        assert_eq!(info.vendor.as_deref(), Some("GenuineIntel"));
        assert_eq!(info.family.as_deref(), Some("6"));
        assert_eq!(info.model.as_deref(), Some("143"));
        assert_eq!(info.stepping.as_deref(), Some("8"));
        assert_eq!(info.logical_cores, 2);
        assert_eq!(
            info.features,
            [
                "amx_tile",
                "avx",
                "avx2",
                "avx512_bf16",
                "avx512f",
                "fma",
                "pni",
                "sse",
                "sse2"
            ]
        );
    }

    #[test]
    fn allowed_list() {
        assert_eq!(
            parse_allowed_cpus("Name:\tx\nCpus_allowed_list:\t0-3,8,10-11\n"),
            Some(("0-3,8,10-11".to_string(), 7))
        );
        assert_eq!(parse_allowed_cpus("Name:\tx\n"), None);
    }
}
