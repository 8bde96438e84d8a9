//! Operating system, kernel, C library and memory.

use crate::manifest::SystemInfo;

/// Collects the facts of this machine. Never fails: what cannot be read is left out.
pub fn collect() -> SystemInfo {
    let mut sys = sysinfo::System::new();
    sys.refresh_memory();
    let (libc, libc_version) = libc_name_version();
    SystemInfo {
        os: std::env::consts::OS.to_string(),
        os_version: match (sysinfo::System::name(), sysinfo::System::os_version()) {
            (Some(n), Some(v)) => Some(format!("{n} {v}")),
            (Some(n), None) => Some(n),
            _ => None,
        },
        kernel: sysinfo::System::kernel_version(),
        libc,
        libc_version,
        memory_bytes: sys.total_memory(),
    }
}

/// The host name, for `[run]`.
pub fn hostname() -> Option<String> {
    sysinfo::System::host_name()
}

/// The C library this process runs with. For glibc this is the library actually loaded, asked
/// through `gnu_get_libc_version` (glibc's documented API), so it is the system's glibc.
fn libc_name_version() -> (Option<String>, Option<String>) {
    #[cfg(all(target_os = "linux", target_env = "gnu"))]
    {
        // SAFETY: gnu_get_libc_version returns a pointer to a static NUL-terminated string.
        let version = unsafe { std::ffi::CStr::from_ptr(libc::gnu_get_libc_version()) };
        (
            Some("glibc".into()),
            Some(version.to_string_lossy().into_owned()),
        )
    }
    #[cfg(all(target_os = "linux", target_env = "musl"))]
    {
        (Some("musl".into()), None)
    }
    #[cfg(target_os = "macos")]
    {
        (Some("libSystem".into()), sysinfo::System::os_version())
    }
    #[cfg(not(any(target_os = "linux", target_os = "macos")))]
    {
        (None, None)
    }
}
