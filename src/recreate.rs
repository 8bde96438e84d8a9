//! `runprint recreate`: the shell steps back to a manifest's environment, as far as a manifest
//! allows. The output is a bash script to read and run by hand; runprint never runs any of it.
//!
//! Sections of the script, in order:
//! 1. the code: check out the commit, the submodules' commits, and apply the stored
//!    uncommitted change (`stamp --keep-patch`) with `git apply`;
//! 2. the packages: exact pins for Python lockfiles (`pip install NAME==VERSION`), and each
//!    other ecosystem's own locked install, which reads the lockfile restored with the commit;
//! 3. the numerical environment variables, exported;
//! 4. what cannot be restored from a project: processor, operating system, C library, GPU
//!    driver and runtime; file data inputs get a `sha256sum --check` line.
//!
//! Every value from the manifest is shell-quoted ([`shlex`]) or, in comments, kept on one line,
//! so a label or a value with spaces, quotes or newlines cannot break out of its place. A value
//! that a command would read as an option cannot become one: folders and files starting with
//! `-` are written `./-x`, a commit must be a hexadecimal object id, and a Python package must
//! carry a valid name (PEP 508, "Names") and a version without spaces or a leading `-`, or it
//! is left out with a comment.

use std::collections::BTreeSet;
use std::fmt::Write;

use crate::manifest::{Lockfile, Manifest, Package};

/// Quotes a word for POSIX shells; `None` for text no quoting can carry (a NUL byte).
fn quote(s: &str) -> Option<String> {
    shlex::try_quote(s).ok().map(|q| q.into_owned())
}

/// Text made safe for a `#` comment: one line, no control, bidirectional or invisible
/// characters ([`crate::escape::is_unsafe`]).
fn comment(s: &str) -> String {
    s.chars()
        .map(|c| {
            if c.is_control() || crate::escape::is_unsafe(c) {
                ' '
            } else {
                c
            }
        })
        .collect()
}

/// A relative path that a command could take for an option (`-P`) gets `./` in front.
fn not_an_option(path: &str) -> String {
    if path.starts_with('-') {
        format!("./{path}")
    } else {
        path.to_string()
    }
}

/// A git object id: 40 (SHA-1) or 64 (SHA-256) hexadecimal digits.
fn is_object_id(s: &str) -> bool {
    matches!(s.len(), 40 | 64) && s.bytes().all(|b| b.is_ascii_hexdigit())
}

/// A valid Python distribution name (PEP 508, "Names":
/// `^([A-Z0-9]|[A-Z0-9][A-Z0-9._-]*[A-Z0-9])$`, case-insensitive).
fn is_python_name(name: &str) -> bool {
    let b = name.as_bytes();
    !b.is_empty()
        && b[0].is_ascii_alphanumeric()
        && b[b.len() - 1].is_ascii_alphanumeric()
        && b.iter()
            .all(|c| c.is_ascii_alphanumeric() || matches!(c, b'.' | b'_' | b'-'))
}

/// A portable shell variable name: letters, digits and `_`, not starting with a digit.
fn is_shell_name(name: &str) -> bool {
    let mut chars = name.chars();
    chars
        .next()
        .is_some_and(|c| c.is_ascii_alphabetic() || c == '_')
        && chars.all(|c| c.is_ascii_alphanumeric() || c == '_')
}

/// Variables set by activating an environment: exporting them by hand does not activate it.
const ACTIVATION_VARS: &[&str] = &["VIRTUAL_ENV", "CONDA_PREFIX", "CONDA_DEFAULT_ENV"];

/// The script for a manifest; `path` names it in the header.
pub fn script(m: &Manifest, path: &str) -> String {
    let mut out = String::new();
    out.push_str("#!/usr/bin/env bash\n");
    let _ = writeln!(
        out,
        "# Steps back to the environment recorded in {}",
        comment(path)
    );
    let _ = writeln!(
        out,
        "#   fingerprint {}, stamped {}{}{}",
        comment(&m.fingerprint),
        comment(&m.run.created),
        m.run
            .hostname
            .as_deref()
            .map_or(String::new(), |h| format!(" on {}", comment(h))),
        m.run.label.as_deref().map_or(String::new(), |l| {
            format!(", label: {}", comment(&crate::redact::scrub_secrets(l)))
        }),
    );
    out.push_str(
        "# Printed by `runprint recreate`, which runs nothing: read it, then run it from the root\n\
         # of a clone of the repository.\n",
    );
    if m.is_modified() {
        out.push_str("# Warning: the manifest was modified after stamping (its fingerprint does not match).\n");
    }
    out.push_str("set -euo pipefail\n");
    code(m, &mut out);
    // Without a Python lockfile, the distributions installed when the run was stamped are
    // pinned: exact versions, where inputs only declare ranges.
    let pin_installed = !m
        .content
        .lockfiles
        .iter()
        .any(|l| l.ecosystem == "pypi" && !crate::lockfile::is_input_or_pin(l))
        && m.content.python.iter().any(|e| !e.distributions.is_empty());
    packages(&m.content.lockfiles, pin_installed, &mut out);
    if pin_installed {
        installed_distributions(&m.content.python, &mut out);
    }
    environment(m, &mut out);
    machine(m, &mut out);
    out
}

fn code(m: &Manifest, out: &mut String) {
    out.push_str("\n# 1. Code\n");
    let git = &m.content.git;
    if !git.present {
        out.push_str("# The run was not stamped inside a git repository: its code cannot be restored from the manifest.\n");
        return;
    }
    let Some(commit) = &git.commit else {
        out.push_str("# The repository had no commit yet when the run was stamped.\n");
        return;
    };
    if let Some(remote) = &git.remote {
        let _ = writeln!(out, "# The repository was cloned from {}", comment(remote));
    }
    if !is_object_id(commit) {
        let _ = writeln!(
            out,
            "# the recorded commit {} is not a git object id; check it out by hand",
            comment(commit)
        );
        return;
    }
    let Some(commit_q) = quote(commit) else {
        return;
    };
    let _ = writeln!(out, "git checkout --detach {commit_q}");
    if !git.submodules.is_empty() {
        out.push_str("git submodule update --init --recursive\n");
        for s in &git.submodules {
            let commit = s.commit.as_deref().filter(|c| is_object_id(c));
            match (quote(&not_an_option(&s.path)), commit.and_then(quote)) {
                (Some(p), Some(c)) => {
                    let _ = writeln!(out, "git -C {p} checkout --detach {c}");
                }
                _ => {
                    let _ = writeln!(out, "# submodule {}: no commit recorded", comment(&s.path));
                }
            }
        }
    }
    match &git.patch {
        Some(patch) => {
            out.push_str("# The uncommitted change stored with the run (`stamp --keep-patch`):\n");
            let mut end = "RUNPRINT_PATCH".to_string();
            while patch.lines().any(|l| l == end) {
                end.push('_');
            }
            let _ = writeln!(out, "git apply --whitespace=nowarn <<'{end}'");
            out.push_str(patch);
            if !patch.ends_with('\n') {
                out.push('\n');
            }
            let _ = writeln!(out, "{end}");
        }
        None if git.dirty => {
            let _ = writeln!(
                out,
                "# The run had uncommitted changes that were not stored ({} path(s): {}).\n\
                 # Stamp with --keep-patch to store them next time.",
                git.changed_paths.len(),
                comment(
                    &git.changed_paths
                        .iter()
                        .take(5)
                        .cloned()
                        .collect::<Vec<_>>()
                        .join(", ")
                )
            );
        }
        None => {}
    }
}

/// The folder of a lockfile, quoted, for `cd`.
fn folder(l: &Lockfile) -> Option<String> {
    let dir = l.path.rsplit_once('/').map_or(".", |(d, _)| d);
    quote(&not_an_option(if dir.is_empty() { "/" } else { dir }))
}

/// A pip requirement that installs exactly this entry, or `None` when the entry cannot be
/// pinned (an editable install, a local path).
fn pip_requirement(p: &Package) -> Option<String> {
    if !is_python_name(&p.name) {
        return None;
    }
    let direct = p.source.as_deref().filter(|s| {
        s.contains("://") && !s.starts_with("registry+") && !s.starts_with("editable+")
    });
    let base = match direct {
        Some(url) => format!("{} @ {url}", p.name),
        None if !p.version.is_empty()
            && !p.version.starts_with('-')
            && !p.version.contains(char::is_whitespace) =>
        {
            // A requirements file's range (`<3.1.0`, `>=6.1.3,<7`) is kept as written: a
            // PEP 440 specifier list; an exact version is pinned with `==`.
            if crate::version::is_range(&p.version) {
                format!("{}{}", p.name, p.version)
            } else {
                format!("{}=={}", p.name, p.version)
            }
        }
        None => return None,
    };
    // Environment markers (PEP 508) keep platform-specific pins to their platform; a direct
    // wheel URL for one platform, recorded without a marker, gets the marker its platform tag
    // means, so that pip skips it elsewhere instead of failing the script.
    let marker = p
        .platform
        .clone()
        .or_else(|| direct.and_then(wheel_platform_marker));
    let req = match marker {
        Some(marker) => format!("{base} ; {marker}"),
        None => base,
    };
    quote(&req)
}

/// The PEP 508 marker for the platform tag of a wheel URL (PEP 427 file name, platform tags of
/// PEP 600 `manylinux_X_Y_ARCH`, `linux_ARCH`, `macosx_X_Y_ARCH`, `win_amd64`); `None` for
/// `any` and for tags it does not know.
fn wheel_platform_marker(url: &str) -> Option<String> {
    let file = url.split(['?', '#']).next()?.rsplit('/').next()?;
    let stem = file.strip_suffix(".whl")?;
    let platform = stem.rsplit('-').next()?;
    // Compressed tag sets (`manylinux_2_17_x86_64.manylinux2014_x86_64`) share one platform.
    let tag = platform.split('.').next()?;
    let system = if tag.starts_with("manylinux")
        || tag.starts_with("musllinux")
        || tag.starts_with("linux_")
    {
        "linux"
    } else if tag.starts_with("macosx_") {
        "darwin"
    } else if tag == "win_amd64" {
        return Some("sys_platform == \"win32\"".into());
    } else {
        return None;
    };
    let arch = ["x86_64", "aarch64", "arm64"]
        .into_iter()
        .find(|a| tag.ends_with(a))?;
    Some(format!(
        "sys_platform == \"{system}\" and platform_machine == \"{arch}\""
    ))
}

/// Toolchain pins: the Rust toolchain installed where rustup is; the others said, for the
/// reader to choose the interpreter or runtime.
fn toolchain_pins(l: &Lockfile, out: &mut String) {
    for p in &l.packages {
        if p.optional {
            continue;
        }
        match (p.name.as_str(), quote(&p.version)) {
            ("rust", Some(v)) if !p.version.starts_with("path:") => {
                let _ = writeln!(
                    out,
                    "if command -v rustup >/dev/null; then rustup toolchain install {v}; fi"
                );
            }
            (name, _) => {
                let _ = writeln!(
                    out,
                    "# use {} {} for this folder",
                    comment(name),
                    comment(&p.version)
                );
            }
        }
    }
}

fn packages(lockfiles: &[Lockfile], pin_installed: bool, out: &mut String) {
    out.push_str("\n# 2. Packages\n");
    if lockfiles.is_empty() {
        out.push_str("# No lockfiles were recorded.\n");
        return;
    }
    for l in lockfiles {
        let name = l.path.rsplit('/').next().unwrap_or(&l.path);
        let outside = l.path.starts_with('/') || l.path.starts_with("../");
        let _ = writeln!(
            out,
            "# {} ({}, {}{})",
            comment(&l.path),
            comment(&l.ecosystem),
            match l.packages_omitted {
                Some(n) => format!("{n} package(s), not recorded in the manifest"),
                None => format!("{} package(s)", l.packages.len()),
            },
            if outside {
                "; outside the repository, so not restored by the checkout"
            } else {
                ""
            }
        );
        if l.ecosystem == "toolchain" {
            toolchain_pins(l, out);
            continue;
        }
        if crate::lockfile::is_input_or_pin(l) {
            if let Some(lock) = crate::lockfile::deciding_lockfile(l, lockfiles) {
                let _ = writeln!(
                    out,
                    "# declared ranges: {} decides what is installed",
                    comment(&lock.path)
                );
                continue;
            }
            if pin_installed {
                let _ = writeln!(
                    out,
                    "# declared ranges only: the distributions installed when the run was stamped are pinned below instead"
                );
                continue;
            }
        }
        if l.ecosystem == "pypi" && l.packages_omitted.is_none() {
            pip_pins(l, out);
            continue;
        }
        if l.ecosystem == "pypi" && !name.starts_with("requirements") {
            // Its pins are only in the file, which the checkout restores; the other Python
            // formats are each installed by their own tool.
            let _ = writeln!(
                out,
                "# install from the file itself with the tool that wrote it (its packages were not recorded)"
            );
            continue;
        }
        let Some(dir) = folder(l) else { continue };
        // `(cd DIR && TOOL)`, or the tool alone for the repository's root.
        let in_dir = |cmd: &str| {
            if dir == "." {
                cmd.to_string()
            } else {
                format!("(cd {dir} && {cmd})")
            }
        };
        let Some(file) = quote(&not_an_option(&l.path)) else {
            continue;
        };
        // Each tool's locked install, which installs exactly what the lockfile lists (from
        // memory: the npm, Yarn, pnpm, Cargo, Go, NuGet, renv, Pkg.jl and conda manuals).
        let step = match (l.ecosystem.as_str(), name) {
            ("npm", "yarn.lock") if l.format_version.as_deref() == Some("1") => {
                in_dir("yarn install --frozen-lockfile")
            }
            ("npm", "yarn.lock") => in_dir("yarn install --immutable"),
            ("npm", "pnpm-lock.yaml") => in_dir("pnpm install --frozen-lockfile"),
            ("npm", _) => in_dir("npm ci"),
            ("cargo", _) => in_dir("cargo fetch --locked && cargo build --locked"),
            ("go", _) => in_dir("go mod download"),
            ("nuget", _) => in_dir("dotnet restore --locked-mode"),
            ("cran", _) => in_dir("Rscript -e 'renv::restore(prompt = FALSE)'"),
            ("julia", _) => {
                format!("julia --project={dir} -e 'using Pkg; Pkg.instantiate()'")
            }
            // pixi and conda-lock install the platform's own entries of their lockfiles.
            ("conda", "pixi.lock") => in_dir("pixi install --frozen"),
            ("conda", n) if crate::lockfile::condalock::is_conda_lock_name(n) => {
                format!("conda-lock install --name runprint-recreated {file}")
            }
            ("conda", n) if n.ends_with(".yml") || n.ends_with(".yaml") => {
                format!("conda env create --file {file}")
            }
            // An explicit spec file lists one platform's package files: run where it applies.
            ("conda", _) => guard_platform(
                l,
                format!("conda create --yes --name runprint-recreated --file {file}"),
            ),
            // A requirements file whose pins were not recorded: the checkout restores it.
            ("pypi", _) => format!("python -m pip install -r {file}"),
            // A container recipe: its base images, pinned by digest where one was recorded.
            ("oci", _) => l
                .packages
                .iter()
                .filter_map(|p| {
                    let reference = match p.hashes.first() {
                        Some(d) if p.version.is_empty() => format!("{}@{d}", p.name),
                        Some(d) => format!("{}:{}@{d}", p.name, p.version),
                        None => format!("{}:{}", p.name, p.version),
                    };
                    quote(&reference).map(|r| format!("docker pull {r}"))
                })
                .collect::<Vec<_>>()
                .join("\n"),
            (other, _) => format!("# no locked install known for ecosystem {}", comment(other)),
        };
        let _ = writeln!(out, "{step}");
    }
}

/// `step` run only on the machine kind a conda explicit file was written for: its packages'
/// subdirectory (`linux-64`…; `noarch` fits anywhere) as `uname -s`-`uname -m` prints it
/// (conda's platform names, common practice). Several platforms, or one unknown, leave the
/// step as it is.
fn guard_platform(l: &Lockfile, step: String) -> String {
    let subdirs: BTreeSet<&str> = l
        .packages
        .iter()
        .filter_map(|p| p.platform.as_deref())
        .filter(|s| *s != "noarch")
        .collect();
    let uname = match subdirs.iter().collect::<Vec<_>>().as_slice() {
        [one] => match **one {
            "linux-64" => Some("Linux-x86_64"),
            "linux-aarch64" => Some("Linux-aarch64"),
            "linux-ppc64le" => Some("Linux-ppc64le"),
            "osx-64" => Some("Darwin-x86_64"),
            "osx-arm64" => Some("Darwin-arm64"),
            _ => None,
        },
        _ => None,
    };
    let Some(u) = uname else {
        return step;
    };
    match quote(&format!("skipped: {} is for {u}", l.path)) {
        Some(msg) => format!(
            "if [ \"$(uname -s)-$(uname -m)\" = {u} ]; then {step}; else echo {msg} >&2; fi"
        ),
        None => format!("if [ \"$(uname -s)-$(uname -m)\" = {u} ]; then {step}; fi"),
    }
}

fn pip_pins(l: &Lockfile, out: &mut String) {
    let mut pins = Vec::new();
    let mut left_out = Vec::new();
    for p in &l.packages {
        if p.dev || p.optional {
            continue;
        }
        match pip_requirement(p) {
            Some(r) => pins.push(r),
            None => left_out.push(p.name.as_str()),
        }
    }
    let skipped = l.packages.iter().filter(|p| p.dev || p.optional).count();
    if skipped > 0 {
        let _ = writeln!(
            out,
            "# {skipped} development-only or optional entries left out"
        );
    }
    if !left_out.is_empty() {
        let _ = writeln!(
            out,
            "# cannot be pinned (local paths, editable installs or names pip would not read as a package): {}",
            comment(&left_out.join(", "))
        );
    }
    if pins.is_empty() {
        return;
    }
    // One environment per lockfile: installed one after another into one environment, a
    // later file's pins would replace an earlier one's (torch 2.6.0, then 2.7.0).
    let venv = format!(".venv-recreated/{}", slug(&l.path));
    let _ = writeln!(out, "python3 -m venv {venv}");
    let _ = write!(out, "{venv}/bin/python -m pip install");
    for pin in pins {
        let _ = write!(out, " \\\n  {pin}");
    }
    out.push('\n');
}

/// Without a Python lockfile, the distributions each stamped interpreter had installed, pinned
/// in an environment of their own (editable and local installs cannot be pinned and are
/// named instead).
fn installed_distributions(envs: &[crate::manifest::PythonEnv], out: &mut String) {
    for (i, env) in envs.iter().enumerate() {
        let pins: Vec<Package> = env
            .distributions
            .iter()
            .filter(|d| !d.editable)
            .map(|d| Package {
                name: d.name.clone(),
                version: d.version.clone(),
                source: d.source.clone().filter(|s| !s.starts_with("file:")),
                ..Package::default()
            })
            .collect();
        if pins.is_empty() {
            continue;
        }
        let _ = writeln!(
            out,
            "# the distributions installed in {} (Python {}), as recorded; no Python lockfile was",
            comment(&env.interpreter),
            comment(env.version.as_deref().unwrap_or("?"))
        );
        let l = Lockfile {
            path: format!("python-{}", i + 1),
            ecosystem: "pypi".into(),
            packages: pins,
            ..Lockfile::default()
        };
        pip_pins(&l, out);
    }
}

/// A lockfile's path as a folder name: letters, digits, `.` and `_` kept, the rest `-`.
fn slug(path: &str) -> String {
    let s: String = path
        .trim_start_matches(['/', '.'])
        .chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() || matches!(c, '.' | '_') {
                c
            } else {
                '-'
            }
        })
        .collect();
    if s.is_empty() {
        "lockfile".into()
    } else {
        s
    }
}

fn environment(m: &Manifest, out: &mut String) {
    out.push_str("\n# 3. Environment variables that steer numerics\n");
    let env = &m.content.env;
    if env.vars.is_empty() && env.redacted.is_empty() {
        out.push_str("# None were set.\n");
    }
    for (name, value) in &env.vars {
        if !is_shell_name(name) {
            let _ = writeln!(
                out,
                "# {} cannot be set from a shell (not a valid name)",
                comment(name)
            );
        } else if ACTIVATION_VARS.contains(&name.as_str()) {
            let _ = writeln!(
                out,
                "# {name} was {}: activate that environment rather than exporting it",
                comment(value)
            );
        } else if value.starts_with("private:sha256:") {
            let _ = writeln!(
                out,
                "# {name}: its value was hashed by `stamp --private`; set it by hand"
            );
        } else if crate::redact::is_replaced(value) {
            let _ = writeln!(
                out,
                "# {name}: its value was recorded as a digest (its form is not one runprint records as text, or part of it looked secret); set it by hand"
            );
        } else if let Some(q) = quote(value) {
            let _ = writeln!(out, "export {name}={q}");
        } else {
            let _ = writeln!(
                out,
                "# {name}: the value holds a NUL byte and cannot be exported"
            );
        }
    }
    for name in &env.redacted {
        let _ = writeln!(
            out,
            "# {}: set by hand (it looked secret, so its value was never recorded)",
            comment(name)
        );
    }
}

fn machine(m: &Manifest, out: &mut String) {
    let c = &m.content;
    out.push_str("\n# 4. Not restorable from the project: match these by choosing or setting up the machine\n");
    let cpu = &c.cpu;
    if !cpu.arch.is_empty() {
        let _ = writeln!(
            out,
            "# - processor: {} {}, {} logical core(s){}",
            comment(&cpu.arch),
            comment(cpu.model_name.as_deref().unwrap_or("(model unknown)")),
            cpu.logical_cores,
            cpu.allowed_cpu_count
                .map_or(String::new(), |n| format!(", {n} allowed to the run"))
        );
        if !cpu.features.is_empty() {
            let _ = writeln!(
                out,
                "#   instruction-set features: {}",
                comment(&cpu.features.join(" "))
            );
        }
    }
    let s = &c.system;
    if !s.os.is_empty() {
        let _ = writeln!(
            out,
            "# - operating system: {} {}, kernel {}, C library {} {}",
            comment(&s.os),
            comment(s.os_version.as_deref().unwrap_or("")),
            comment(s.kernel.as_deref().unwrap_or("unknown")),
            comment(s.libc.as_deref().unwrap_or("unknown")),
            comment(s.libc_version.as_deref().unwrap_or(""))
        );
    }
    out.push_str("# - GPU model, driver and CUDA/ROCm runtime: installed on the machine, not in the project\n");
    for d in &c.data {
        if d.kind == "file" {
            let hexd = d.sha256.strip_prefix("sha256:").unwrap_or(&d.sha256);
            match quote(&format!("{hexd}  {}", d.path)) {
                Some(line) if !d.path.contains('\n') => {
                    let _ = writeln!(out, "# data input {}:", comment(&d.path));
                    let _ = writeln!(out, "printf '%s\\n' {line} | sha256sum --check -");
                }
                _ => {
                    let _ = writeln!(
                        out,
                        "# data input {}: sha256 {}",
                        comment(&d.path),
                        comment(hexd)
                    );
                }
            }
        } else {
            let _ = writeln!(
                out,
                "# - data folder {}: {} file(s), {} bytes, digest {} (restore it from where it is kept)",
                comment(&d.path),
                d.files,
                d.size,
                comment(&d.sha256)
            );
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A wheel for one platform (PEP 427 names; tags as PEP 600 and pip write them) is kept to
    /// that platform by a marker; a pure wheel or a marked entry is left as it is.
    #[test]
    fn platform_wheels_get_the_marker_of_their_tag() {
        let wheel = |url: &str, marker: Option<&str>| Package {
            name: "torch".into(),
            source: Some(url.into()),
            platform: marker.map(str::to_string),
            ..Package::default()
        };
        let cases = [
            ("https://download.pytorch.org/whl/cu121/torch-2.5.1%2Bcu121-cp311-cp311-linux_x86_64.whl", "sys_platform == \"linux\" and platform_machine == \"x86_64\""),
            ("https://f.invalid/torch-2.5.1-cp311-cp311-manylinux_2_17_aarch64.manylinux2014_aarch64.whl", "sys_platform == \"linux\" and platform_machine == \"aarch64\""),
            ("https://f.invalid/torch-2.5.1-cp311-none-macosx_11_0_arm64.whl", "sys_platform == \"darwin\" and platform_machine == \"arm64\""),
            ("https://f.invalid/torch-2.5.1-cp311-cp311-win_amd64.whl", "sys_platform == \"win32\""),
        ];
        for (url, marker) in cases {
            let req = pip_requirement(&wheel(url, None)).unwrap();
            assert!(req.contains(&format!(" ; {marker}")), "{req}");
        }
        let pure = pip_requirement(&wheel(
            "https://f.invalid/six-1.16.0-py2.py3-none-any.whl",
            None,
        ))
        .unwrap();
        assert!(!pure.contains(';'), "{pure}");
        let marked =
            pip_requirement(&wheel(cases[0].0, Some("python_version >= \"3.11\""))).unwrap();
        assert!(
            marked.ends_with("; python_version >= \"3.11\"'"),
            "{marked}"
        );
    }

    /// A conda explicit file of one platform runs only there (`uname` names: Linux-x86_64 for
    /// conda's linux-64, Darwin-arm64 for osx-arm64; common practice), and the script stays
    /// valid bash.
    #[test]
    fn explicit_conda_files_are_guarded_by_platform() {
        let pkg = |subdir: &str| Package {
            name: "numpy".into(),
            version: "2.1.3".into(),
            platform: Some(subdir.into()),
            ..Package::default()
        };
        let l = Lockfile {
            path: "spec-file.txt".into(),
            ecosystem: "conda".into(),
            packages: vec![pkg("linux-64"), pkg("noarch")],
            ..Lockfile::default()
        };
        let step = guard_platform(&l, "conda create --file spec-file.txt".into());
        assert!(
            step.starts_with(
                "if [ \"$(uname -s)-$(uname -m)\" = Linux-x86_64 ]; then conda create"
            ),
            "{step}"
        );
        let syntax = std::process::Command::new("bash")
            .args(["-n", "-c", &step])
            .status()
            .unwrap();
        assert!(syntax.success());
        let mixed = Lockfile {
            packages: vec![pkg("linux-64"), pkg("osx-arm64")],
            ..l
        };
        assert_eq!(guard_platform(&mixed, "x".into()), "x");
    }

    #[test]
    fn comments_stay_on_one_line_and_names_are_checked() {
        assert_eq!(comment("a\nb\r\tc"), "a b  c");
        assert!(is_shell_name("OMP_NUM_THREADS"));
        assert!(!is_shell_name("1X"));
        assert!(!is_shell_name("A-B"));
    }

    #[test]
    fn option_looking_values_never_become_options() {
        // PEP 508 names start and end with a letter or digit; `-e/srv/evil` is none.
        let evil = Package {
            name: "-e/srv/evil".into(),
            version: "1.0".into(),
            ..Package::default()
        };
        assert_eq!(pip_requirement(&evil), None);
        let bad_version = Package {
            name: "numpy".into(),
            version: "--index-url=x".into(),
            ..Package::default()
        };
        assert_eq!(pip_requirement(&bad_version), None);
        assert_eq!(not_an_option("-P"), "./-P");
        assert_eq!(not_an_option("sub/dir"), "sub/dir");
        let l = Lockfile {
            packages_omitted: None,
            path: "-P/Cargo.lock".into(),
            ..Lockfile::default()
        };
        assert_eq!(folder(&l).unwrap(), "./-P");
        assert!(is_object_id(&"a".repeat(40)));
        assert!(!is_object_id("--orphan"));
        assert_eq!(comment("to\u{200b}rch\u{202e}x"), "to rch x");
    }

    #[test]
    fn pip_requirements_pin_versions_or_urls() {
        let p = Package {
            name: "numpy".into(),
            version: "1.26.4".into(),
            ..Package::default()
        };
        assert_eq!(pip_requirement(&p).unwrap(), "'numpy==1.26.4'");
        let marked = Package {
            platform: Some("sys_platform == \"linux\"".into()),
            ..p.clone()
        };
        assert_eq!(
            pip_requirement(&marked).unwrap(),
            "'numpy==1.26.4 ; sys_platform == \"linux\"'"
        );
        let url = Package {
            version: String::new(),
            source: Some("git+https://example.invalid/lib.git@v1".into()),
            ..p
        };
        assert_eq!(
            pip_requirement(&url).unwrap(),
            "'numpy @ git+https://example.invalid/lib.git@v1'"
        );
    }

    #[test]
    fn a_lockfile_without_recorded_packages_is_installed_from_the_file() {
        let l = |path: &str, eco: &str| Lockfile {
            path: path.into(),
            ecosystem: eco.into(),
            packages_omitted: Some(150_000),
            ..Lockfile::default()
        };
        let mut out = String::new();
        packages(
            &[
                l("requirements.txt", "pypi"),
                l("uv.lock", "pypi"),
                l("web/package-lock.json", "npm"),
            ],
            false,
            &mut out,
        );
        assert!(out.contains("150000 package(s), not recorded"), "{out}");
        assert!(
            out.contains("python -m pip install -r requirements.txt\n"),
            "{out}"
        );
        assert!(out.contains("(cd web && npm ci)"), "{out}");
        assert!(!out.contains("=="), "{out}");
    }

    /// Without a Python lockfile the recorded distributions are pinned, in their own
    /// environment; an editable install is left out.
    #[test]
    fn without_a_python_lockfile_the_recorded_distributions_are_pinned() {
        let d = |name: &str, version: &str, editable: bool| crate::manifest::Distribution {
            name: name.into(),
            version: version.into(),
            editable,
            ..Default::default()
        };
        let env = crate::manifest::PythonEnv {
            interpreter: "/opt/venv/bin/python".into(),
            version: Some("3.11.7".into()),
            distributions: vec![d("numpy", "1.26.4", false), d("kelp-train", "0.1.0", true)],
            ..Default::default()
        };
        let mut out = String::new();
        installed_distributions(&[env], &mut out);
        assert!(
            out.contains("python3 -m venv .venv-recreated/python-1"),
            "{out}"
        );
        assert!(out.contains("'numpy==1.26.4'"), "{out}");
        assert!(!out.contains("kelp-train"), "{out}");
    }
}
