//! The Python environments named with `--python` (or the active one) and every distribution
//! installed in them, read from metadata files without importing anything.
//!
//! Locating an interpreter's folders is static where the layout says it all:
//! * a virtual environment (`<prefix>/pyvenv.cfg` beside `bin/`): version from `pyvenv.cfg`,
//!   site-packages at `<prefix>/lib/pythonX.Y/site-packages`, plus the base interpreter's when
//!   `include-system-site-packages = true` (Python docs, `venv` and `site`);
//! * a conda environment (`<prefix>/conda-meta/`): version from the `python` package record;
//!
//! Anything else (a system interpreter with distribution-specific folders, a pyenv shim…)
//! is asked once for `sys.path`, which is what `importlib.metadata` searches. The folders are
//! then scanned as `importlib.metadata` does: `*.dist-info` and `*.egg-info` entries directly
//! inside each folder, plus folders added by `.pth` path lines and `PYTHONPATH`.

use crate::collect::fsdeps;
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::Command;

use crate::manifest::{CondaPackage, Distribution, FrameworkBuild, PythonEnv};
use crate::redact::scrub_url_credentials;
use crate::stack::framework;
use crate::stack::python::{
    is_pure_wheel, parse_conda_record, parse_direct_url, parse_metadata, parse_pyvenv_cfg,
    record_compiled_paths,
};

/// Compiled files of one distribution, for the native-library collector.
#[derive(Debug, Clone, serde::Serialize, serde::Deserialize)]
pub struct DistFiles {
    /// Normalized distribution name.
    pub name: String,
    /// The site folder its RECORD paths are relative to.
    pub site: PathBuf,
    /// Compiled files listed in its RECORD, relative to `site`.
    pub compiled: Vec<String>,
}

/// What the Python collector found, with the absolute paths the other collectors need.
#[derive(Debug, Clone, Default, serde::Serialize, serde::Deserialize)]
pub struct PythonScan {
    /// The manifest section.
    pub env: PythonEnv,
    /// The environment's prefix (where `lib/` with shared libraries of conda or pip's `mkl`
    /// wheel lives).
    pub prefix: Option<PathBuf>,
    /// Folders scanned, absolute.
    pub sites: Vec<PathBuf>,
    /// Per-distribution compiled files.
    pub files: Vec<DistFiles>,
}

/// Where the interpreter's things are.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct Located {
    /// `venv`, `conda` or `system`.
    pub kind: String,
    /// `cpython`, `pypy`…
    pub implementation: Option<String>,
    /// Version.
    pub version: Option<String>,
    /// The environment's prefix.
    pub prefix: Option<PathBuf>,
    /// Folders to scan, in search order.
    pub sites: Vec<PathBuf>,
}

/// The interpreter used when none is named: the active virtual environment, then the active
/// conda environment, then `python3` on `PATH`.
pub fn default_interpreter(env: &BTreeMap<String, String>) -> Option<PathBuf> {
    for var in ["VIRTUAL_ENV", "CONDA_PREFIX"] {
        if let Some(prefix) = env.get(var).filter(|v| !v.is_empty()) {
            for name in ["bin/python", "bin/python3", "python.exe"] {
                let p = Path::new(prefix).join(name);
                if fsdeps::exists(&p) {
                    return Some(p);
                }
            }
        }
    }
    which("python3", env)
}

/// Finds a program on `PATH`.
pub fn which(name: &str, env: &BTreeMap<String, String>) -> Option<PathBuf> {
    let path = env.get("PATH")?;
    std::env::split_paths(path)
        .map(|d| d.join(name))
        .find(|p| fsdeps::is_file(p))
}

/// Finds version, implementation and folders of an interpreter.
pub fn locate(interpreter: &Path, env: &BTreeMap<String, String>) -> Result<Located, String> {
    let interpreter = if interpreter.components().count() == 1 {
        which(&interpreter.to_string_lossy(), env).unwrap_or_else(|| interpreter.to_path_buf())
    } else {
        interpreter.to_path_buf()
    };
    if !fsdeps::exists(&interpreter) {
        return Err(format!("`{}` does not exist", interpreter.display()));
    }
    let interpreter = resolve_pyenv_shim(&interpreter, env).unwrap_or(interpreter);
    if let Some(located) =
        locate_static(&interpreter).or_else(|| locate_prefix_install(&interpreter, env))
    {
        return Ok(located);
    }
    ask_interpreter(&interpreter)
}

/// The interpreter behind a pyenv shim (`<root>/shims/python3`), chosen as pyenv documents it
/// ("Choosing the Python version" in pyenv's README): `PYENV_VERSION` (its first entry), else
/// the nearest `.python-version` file from the current folder upwards, else
/// `<root>/version`. `None` for anything else, or for the `system` choice.
fn resolve_pyenv_shim(interpreter: &Path, env: &BTreeMap<String, String>) -> Option<PathBuf> {
    let shims = interpreter.parent()?;
    if shims.file_name()? != "shims" {
        return None;
    }
    let root = shims.parent()?;
    let first_word = |text: &str| -> Option<String> {
        text.split(|c: char| c.is_whitespace() || c == ':')
            .find(|w| !w.is_empty() && !w.starts_with('#'))
            .map(str::to_string)
    };
    let version = env
        .get("PYENV_VERSION")
        .and_then(|v| first_word(v))
        .or_else(|| {
            let cwd = std::env::current_dir().ok()?;
            cwd.ancestors()
                .find_map(|d| fsdeps::read_to_string(d.join(".python-version")).ok())
                .and_then(|t| first_word(&t))
        })
        .or_else(|| {
            fsdeps::read_to_string(root.join("version"))
                .ok()
                .and_then(|t| first_word(&t))
        })?;
    if version == "system" {
        return None;
    }
    let real = root
        .join("versions")
        .join(&version)
        .join("bin")
        .join(interpreter.file_name()?);
    fsdeps::is_file(&real).then_some(real)
}

/// A CPython installed under its own prefix (`<prefix>/bin/python3.X` with the standard library
/// in `<prefix>/lib/python3.X/`, as `make install`, pyenv and python.org builds lay it out):
/// `sys.path`'s package folders are the user site (unless `PYTHONNOUSERSITE`) and
/// `<prefix>/lib/python3.X/site-packages` (the `site` module's documentation). Distribution
/// layouts under `/usr`, with their own `dist-packages` rules, are left to the interpreter.
fn locate_prefix_install(interpreter: &Path, env: &BTreeMap<String, String>) -> Option<Located> {
    let prefix = interpreter.parent()?.parent()?.to_path_buf();
    if prefix == Path::new("/usr") || prefix == Path::new("/") {
        return None;
    }
    let (mm, lib) = lib_python_dirs(&prefix).pop()?;
    if !fsdeps::is_file(lib.join("os.py")) {
        return None;
    }
    // The full version from the installed header (`#define PY_VERSION "3.11.7"`).
    let version = fsdeps::read_to_string(
        prefix
            .join("include")
            .join(format!("python{mm}"))
            .join("patchlevel.h"),
    )
    .ok()
    .and_then(|h| {
        h.lines().find_map(|l| {
            let rest = l.trim().strip_prefix("#define PY_VERSION")?.trim();
            rest.starts_with('"')
                .then(|| rest.trim_matches('"').to_string())
        })
    })
    .unwrap_or_else(|| mm.clone());
    let mut sites = Vec::new();
    if env.get("PYTHONNOUSERSITE").is_none_or(|v| v.is_empty()) {
        let base = env
            .get("PYTHONUSERBASE")
            .map(PathBuf::from)
            .or_else(|| env.get("HOME").map(|h| Path::new(h).join(".local")));
        if let Some(base) = base {
            sites.push(
                base.join("lib")
                    .join(format!("python{mm}"))
                    .join("site-packages"),
            );
        }
    }
    sites.push(lib.join("site-packages"));
    Some(Located {
        kind: "system".into(),
        implementation: implementation_of(interpreter),
        version: Some(version),
        prefix: Some(prefix),
        sites: sites.into_iter().filter(|s| fsdeps::is_dir(s)).collect(),
    })
}

/// `<prefix>/lib/python<X.Y>` folders under a prefix, newest last.
fn lib_python_dirs(prefix: &Path) -> Vec<(String, PathBuf)> {
    let mut out: Vec<(String, PathBuf)> = fsdeps::read_dir(prefix.join("lib"))
        .into_iter()
        .flatten()
        .flatten()
        .filter_map(|e| {
            let name = e.file_name().to_string_lossy().into_owned();
            let v = name.strip_prefix("python")?;
            (v.contains('.') && v.bytes().all(|b| b.is_ascii_digit() || b == b'.'))
                .then(|| (v.to_string(), e.path()))
        })
        .collect();
    out.sort();
    out
}

fn major_minor(version: &str) -> String {
    version.split('.').take(2).collect::<Vec<_>>().join(".")
}

/// The implementation, from the name of the real executable (`pypy3.10`, `python3.11`).
fn implementation_of(executable: &Path) -> Option<String> {
    let real = fsdeps::canonicalize(executable).ok()?;
    let name = real.file_name()?.to_string_lossy().to_ascii_lowercase();
    if name.starts_with("pypy") {
        Some("pypy".into())
    } else if name.starts_with("graalpy") {
        Some("graalpy".into())
    } else if name.starts_with("python") {
        Some("cpython".into())
    } else {
        None
    }
}

fn locate_static(interpreter: &Path) -> Option<Located> {
    let prefix = interpreter.parent()?.parent()?.to_path_buf();
    let cfg_path = prefix.join("pyvenv.cfg");
    if let Ok(text) = fsdeps::read_to_string(&cfg_path) {
        let cfg = parse_pyvenv_cfg(&text);
        let version = cfg
            .get("version")
            .or_else(|| cfg.get("version_info"))
            .cloned();
        let mm = version.as_deref().map(major_minor);
        let site_of = |p: &Path| -> Option<PathBuf> {
            let dirs = lib_python_dirs(p);
            let dir = match &mm {
                Some(mm) => dirs.into_iter().find(|(v, _)| v == mm)?.1,
                None => dirs.into_iter().last()?.1,
            };
            Some(dir.join("site-packages"))
        };
        let mut sites = vec![site_of(&prefix)?];
        let home = cfg.get("home").map(PathBuf::from);
        if cfg
            .get("include-system-site-packages")
            .is_some_and(|v| v.eq_ignore_ascii_case("true"))
        {
            // Base interpreters with distribution-specific folders need asking.
            let base = home.as_ref()?.parent()?.to_path_buf();
            let base_site = site_of(&base)?;
            if !fsdeps::is_dir(&base_site) {
                return None;
            }
            sites.push(base_site);
        }
        let implementation = cfg
            .get("implementation")
            .map(|s| s.to_ascii_lowercase())
            .or_else(|| implementation_of(interpreter));
        return Some(Located {
            kind: "venv".into(),
            implementation,
            version: version.or(mm),
            prefix: Some(prefix),
            sites: sites.into_iter().filter(|s| fsdeps::is_dir(s)).collect(),
        });
    }
    if fsdeps::is_dir(prefix.join("conda-meta")) {
        let version = fsdeps::read_dir(prefix.join("conda-meta"))
            .ok()?
            .flatten()
            .find_map(|e| {
                let n = e.file_name().to_string_lossy().into_owned();
                let rest = n.strip_prefix("python-")?;
                let v = rest.split('-').next()?;
                v.starts_with(|c: char| c.is_ascii_digit())
                    .then(|| v.to_string())
            });
        let dir = match &version {
            Some(v) => prefix.join("lib").join(format!("python{}", major_minor(v))),
            None => lib_python_dirs(&prefix).pop()?.1,
        };
        return Some(Located {
            kind: "conda".into(),
            implementation: implementation_of(interpreter),
            version,
            prefix: Some(prefix),
            sites: vec![dir.join("site-packages")]
                .into_iter()
                .filter(|s| fsdeps::is_dir(s))
                .collect(),
        });
    }
    None
}

/// How long the interpreter may take to answer: a cold start with site hooks on a network
/// file system takes seconds, a hang never ends.
const INTERPRETER_TIMEOUT: std::time::Duration = std::time::Duration::from_secs(30);

/// The most the interpreter may print: `sys.path` as JSON is a few kilobytes.
const INTERPRETER_OUTPUT: usize = 4 << 20;

/// The one call of the interpreter: it prints its version, implementation, prefix and
/// `sys.path` as JSON. `-E`-free on purpose: the environment that shapes a training run's
/// `sys.path` (PYTHONPATH, user site) shapes this answer too.
fn ask_interpreter(interpreter: &Path) -> Result<Located, String> {
    const SCRIPT: &str = "import sys, json, platform; print(json.dumps({'version': platform.python_version(), 'implementation': sys.implementation.name, 'prefix': sys.prefix, 'base': sys.base_prefix, 'path': [p for p in sys.path if p]}))";
    let mut cmd = Command::new(interpreter);
    cmd.args(["-c", SCRIPT]);
    // An interpreter whose site hooks sleep or print without end must not hold up the stamp.
    let out = crate::child::run(
        cmd,
        crate::child::timeout(INTERPRETER_TIMEOUT),
        INTERPRETER_OUTPUT,
    )
    .map_err(|e| format!("`{}` {e}", interpreter.display()))?;
    if !out.status.success() {
        return Err(format!(
            "`{}` failed ({}): {}",
            interpreter.display(),
            out.status,
            crate::child::first_line(&out.stderr)
        ));
    }
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).map_err(|e| {
        format!(
            "`{}` printed something other than the expected JSON: {e}",
            interpreter.display()
        )
    })?;
    let s = |k: &str| v.get(k).and_then(|x| x.as_str()).map(str::to_string);
    let prefix = s("prefix").map(PathBuf::from);
    let kind = match (&prefix, s("base")) {
        (Some(p), _) if fsdeps::is_dir(p.join("conda-meta")) => "conda",
        (Some(p), Some(b)) if p != Path::new(&b) => "venv",
        _ => "system",
    };
    Ok(Located {
        kind: kind.into(),
        implementation: s("implementation"),
        version: s("version"),
        prefix,
        sites: v
            .get("path")
            .and_then(|p| p.as_array())
            .into_iter()
            .flatten()
            .filter_map(|p| p.as_str())
            .map(PathBuf::from)
            .filter(|p| fsdeps::is_dir(p))
            .collect(),
    })
}

/// Adds folders named by `.pth` path lines (site docs: lines starting with `import` are
/// executed, `#` lines are comments, other lines are paths relative to the site folder).
fn with_pth_paths(sites: Vec<PathBuf>) -> Vec<PathBuf> {
    let mut out = Vec::new();
    for site in sites {
        let mut extra = Vec::new();
        let mut pths: Vec<PathBuf> = fsdeps::read_dir(&site)
            .into_iter()
            .flatten()
            .flatten()
            .map(|e| e.path())
            .filter(|p| p.extension().is_some_and(|x| x == "pth"))
            .collect();
        pths.sort();
        for pth in pths {
            let Ok(text) = fsdeps::read_to_string(&pth) else {
                continue;
            };
            for line in text.lines() {
                let line = line.trim();
                if line.is_empty() || line.starts_with('#') || line.starts_with("import") {
                    continue;
                }
                let dir = site.join(line);
                if fsdeps::is_dir(&dir) {
                    extra.push(dir);
                }
            }
        }
        out.push(site);
        out.extend(extra);
    }
    let mut seen = std::collections::BTreeSet::new();
    out.retain(|p| seen.insert(p.clone()));
    out
}

/// Reads one distribution's metadata folder (or `*.egg-info` file).
fn read_distribution(
    site: &Path,
    entry: &Path,
    private: bool,
    warnings: &mut Vec<String>,
) -> Option<(Distribution, DistFiles)> {
    let name = entry.file_name()?.to_string_lossy().into_owned();
    let is_dist_info = name.ends_with(".dist-info");
    let meta_path = if fsdeps::is_dir(entry) {
        entry.join(if is_dist_info { "METADATA" } else { "PKG-INFO" })
    } else {
        entry.to_path_buf()
    };
    let shown = meta_path.display().to_string();
    let text = match read_head(&meta_path) {
        Ok(t) => t,
        Err(e) => {
            warnings.push(format!("python: cannot read `{shown}`: {e}"));
            return None;
        }
    };
    let (dist_name, version) = match parse_metadata(&text, &shown) {
        Ok(nv) => nv,
        Err(e) => {
            warnings.push(format!("python: {e}"));
            return None;
        }
    };
    let mut d = Distribution {
        name: dist_name.clone(),
        version,
        requires: crate::stack::python::parse_requires_dist(&text),
        ..Distribution::default()
    };
    let mut files = DistFiles {
        name: dist_name,
        site: site.to_path_buf(),
        compiled: Vec::new(),
    };
    if fsdeps::is_dir(entry) {
        d.installer = fsdeps::read_to_string(entry.join("INSTALLER"))
            .ok()
            .map(|s| s.trim().to_string())
            .filter(|s| !s.is_empty());
        let direct = entry.join("direct_url.json");
        if let Ok(text) = fsdeps::read_to_string(&direct) {
            match parse_direct_url(&text, &direct.display().to_string()) {
                Ok(u) => {
                    d.editable = u.editable;
                    d.source = Some(if private && u.is_local {
                        crate::privacy::digest(&u.source)
                    } else {
                        scrub_url_credentials(&u.source)
                    });
                }
                Err(e) => warnings.push(format!("python: {e}")),
            }
        }
        // A wheel whose every tag is for any platform (`py3-none-any`; PEP 425 tags in the
        // `WHEEL` file, PEP 427) holds no compiled code, so its RECORD, which can run to
        // hundreds of kilobytes, need not be read.
        let pure = fsdeps::read_to_string(entry.join("WHEEL"))
            .ok()
            .is_some_and(|w| is_pure_wheel(&w));
        if !pure {
            if let Ok(record) = fsdeps::read_to_string(entry.join("RECORD")) {
                files.compiled = record_compiled_paths(&record);
                files.compiled.sort();
            }
        }
        d.compiled = !files.compiled.is_empty();
    }
    Some((d, files))
}

/// The metadata headers: the file up to its first blank line (descriptions can be long).
fn read_head(path: &Path) -> std::io::Result<String> {
    use std::io::Read;
    let mut f = fsdeps::open(path)?;
    let mut buf = vec![0u8; 8192];
    let mut len = 0;
    loop {
        let n = f.read(&mut buf[len..])?;
        len += n;
        // Headers end at the first blank line (core metadata, RFC 822 layout); real ones are a
        // few kilobytes, so a file with none in its first MiB is read no further.
        if n == 0 || memchr::memmem::find(&buf[..len], b"\n\n").is_some() || len >= 1 << 20 {
            break;
        }
        if len == buf.len() {
            buf.resize(buf.len() * 2, 0);
        }
    }
    Ok(String::from_utf8_lossy(&buf[..len]).into_owned())
}

/// Collects one interpreter's section.
pub fn collect(
    interpreter: &Path,
    env: &BTreeMap<String, String>,
    private: bool,
    warnings: &mut Vec<String>,
) -> Result<PythonScan, String> {
    let located = locate(interpreter, env)?;
    let mut sites: Vec<PathBuf> = env
        .get("PYTHONPATH")
        .map(|p| {
            std::env::split_paths(p)
                .filter(|d| fsdeps::is_dir(d))
                .collect()
        })
        .unwrap_or_default();
    sites.extend(located.sites.iter().cloned());
    let sites = with_pth_paths(sites);

    // Metadata folders of every site, in search order.
    let mut entries: Vec<(&PathBuf, PathBuf)> = Vec::new();
    for site in &sites {
        let mut found: Vec<PathBuf> = fsdeps::read_dir(site)
            .into_iter()
            .flatten()
            .flatten()
            .map(|e| e.path())
            .filter(|p| {
                p.file_name().is_some_and(|n| {
                    let n = n.to_string_lossy();
                    n.ends_with(".dist-info") || n.ends_with(".egg-info")
                })
            })
            .collect();
        found.sort();
        entries.extend(found.into_iter().map(|e| (site, e)));
    }
    // Reading them is many small system calls; a few threads overlap them.
    let threads = std::thread::available_parallelism()
        .map_or(2, |n| n.get())
        .clamp(2, 8);
    let chunk = entries.len().div_ceil(threads).max(1);
    type Found = (Vec<(Distribution, DistFiles)>, Vec<String>);
    let recorder = fsdeps::current();
    let results: Vec<Found> = std::thread::scope(|s| {
        let handles: Vec<_> = entries
            .chunks(chunk)
            .map(|part| {
                let recorder = recorder.clone();
                s.spawn(move || {
                    fsdeps::inherit(recorder, || {
                        let mut w = Vec::new();
                        let found: Vec<_> = part
                            .iter()
                            .filter_map(|(site, e)| read_distribution(site, e, private, &mut w))
                            .collect();
                        (found, w)
                    })
                })
            })
            .collect();
        handles
            .into_iter()
            .map(|h| h.join().unwrap_or_default())
            .collect()
    });
    let mut distributions = Vec::new();
    let mut files = Vec::new();
    // In search order: the first copy of a name is the one imported, later ones are shadowed.
    let mut seen = std::collections::BTreeSet::new();
    for (found, w) in results {
        warnings.extend(w);
        for (mut d, f) in found {
            d.shadowed = !seen.insert(d.name.clone());
            distributions.push(d);
            files.push(f);
        }
    }
    distributions
        .sort_by(|a, b| (&a.name, &a.version, &a.source).cmp(&(&b.name, &b.version, &b.source)));

    let conda_packages = located
        .prefix
        .as_ref()
        .map(|p| conda_packages(&p.join("conda-meta"), warnings))
        .unwrap_or_default();
    let builds = framework_builds(&files);

    let show = |p: &Path| {
        let s = p.display().to_string();
        if private {
            crate::privacy::digest(&s)
        } else {
            s
        }
    };
    Ok(PythonScan {
        env: PythonEnv {
            interpreter: show(interpreter),
            implementation: located.implementation.clone(),
            version: located.version.clone(),
            kind: located.kind.clone(),
            site_packages: sites.iter().map(|s| show(s)).collect(),
            distributions,
            conda_packages,
            builds,
        },
        prefix: located.prefix,
        sites,
        files,
    })
}

fn conda_packages(dir: &Path, warnings: &mut Vec<String>) -> Vec<CondaPackage> {
    let mut out: Vec<CondaPackage> = fsdeps::read_dir(dir)
        .into_iter()
        .flatten()
        .flatten()
        .map(|e| e.path())
        .filter(|p| p.extension().is_some_and(|x| x == "json"))
        .filter_map(|p| {
            let shown = p.display().to_string();
            let text = fsdeps::read_to_string(&p)
                .map_err(|e| warnings.push(format!("python: cannot read `{shown}`: {e}")))
                .ok()?;
            match parse_conda_record(&text, &shown) {
                Ok(r) => Some(CondaPackage {
                    name: r.name,
                    version: r.version,
                    build: r.build,
                    channel: r.channel,
                }),
                Err(e) => {
                    warnings.push(format!("python: {e}"));
                    None
                }
            }
        })
        .collect();
    out.sort_by(|a, b| (&a.name, &a.version).cmp(&(&b.name, &b.version)));
    out
}

/// Build facts of the frameworks present, read from their generated files.
/// Up to 512 bytes after the first occurrence of `prefix` in a (memory-mapped) file.
fn constant_after(path: &Path, prefix: &[u8]) -> Option<Vec<u8>> {
    let f = fsdeps::open(path).ok()?;
    // SAFETY: read-only map of a library file for the length of this search (the same
    // accepted risk as the native collector's maps).
    let map = unsafe { memmap2::Mmap::map(&f) }.ok()?;
    let at = memchr::memmem::find(&map, prefix)? + prefix.len();
    Some(map[at..map.len().min(at + 512)].to_vec())
}

fn framework_builds(files: &[DistFiles]) -> Vec<FrameworkBuild> {
    let mut out = Vec::new();
    for f in files {
        let read = |rel: &str| fsdeps::read_to_string(f.site.join(rel)).ok();
        match f.name.as_str() {
            "torch" => {
                if let Some(t) = read("torch/version.py") {
                    out.push(framework::parse_torch_version(&t, "torch/version.py"));
                }
            }
            "tensorflow" | "tensorflow-cpu" | "tensorflow-gpu" | "tf-nightly" => {
                let rel = "tensorflow/python/platform/build_info.py";
                if let Some(t) = read(rel) {
                    let mut b = framework::parse_tf_build_info(&t, rel);
                    b.name = f.name.clone();
                    out.push(b);
                }
            }
            "jaxlib" => {
                if let Some(t) = read("jaxlib/version.py") {
                    out.push(framework::parse_jaxlib_version(
                        &t,
                        "jaxlib",
                        "jaxlib/version.py",
                    ));
                }
            }
            "numpy" | "scipy" => {
                let rel = format!("{}/__config__.py", f.name);
                if let Some(b) =
                    read(&rel).and_then(|t| framework::parse_numpy_config(&t, &f.name, &rel))
                {
                    out.push(b);
                }
            }
            "onnxruntime" | "onnxruntime-gpu" => {
                let version = read("onnxruntime/capi/build_and_package_info.py")
                    .and_then(|t| framework::parse_assignment(&t, "__version__"));
                let module = f
                    .compiled
                    .iter()
                    .find(|r| r.contains("onnxruntime_pybind11_state"));
                if let Some(rel) = module {
                    let found = constant_after(&f.site.join(rel), framework::ORT_BUILD_INFO)
                        .and_then(|bytes| framework::parse_ort_build_info(&bytes, version, rel));
                    if let Some(mut b) = found {
                        b.name = f.name.clone();
                        out.push(b);
                    }
                }
            }
            n if n.starts_with("jax-cuda") && n.ends_with("-plugin") => {
                let module = n.replace('-', "_");
                let rel = format!("{module}/version.py");
                if let Some(t) = read(&rel) {
                    let mut b = framework::parse_jaxlib_version(&t, n, &rel);
                    b.cuda = n
                        .trim_start_matches("jax-cuda")
                        .split('-')
                        .next()
                        .map(str::to_string);
                    out.push(b);
                }
            }
            _ => {}
        }
    }
    out.sort_by(|a, b| (&a.name, &a.from).cmp(&(&b.name, &b.from)));
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    fn write(p: &Path, text: &str) {
        std::fs::create_dir_all(p.parent().unwrap()).unwrap();
        std::fs::write(p, text).unwrap();
    }

    #[test]
    fn a_pyenv_shim_resolves_to_its_prefix_install_without_running_anything() {
        // Layout as pyenv creates it: `<root>/shims/python3` and
        // `<root>/versions/<v>/{bin,lib/python3.X,include/python3.X}` (pyenv README).
        let root = tempfile::tempdir().unwrap();
        let r = root.path();
        write(&r.join("shims/python3"), "#!/bin/sh\nexit 1\n");
        let prefix = r.join("versions/3.11.7");
        write(&prefix.join("bin/python3"), "");
        write(&prefix.join("lib/python3.11/os.py"), "");
        write(
            &prefix.join("lib/python3.11/site-packages/pkg-1.0.dist-info/METADATA"),
            "Name: pkg\nVersion: 1.0\n",
        );
        write(
            &prefix.join("include/python3.11/patchlevel.h"),
            "#define PY_VERSION              \"3.11.7\"\n",
        );
        let mut env = BTreeMap::new();
        env.insert("PYENV_VERSION".to_string(), "3.11.7:3.10.13".to_string());
        env.insert(
            "HOME".to_string(),
            r.join("home").to_string_lossy().into_owned(),
        );
        let located = locate(&r.join("shims/python3"), &env).unwrap();
        assert_eq!(located.version.as_deref(), Some("3.11.7"));
        assert_eq!(located.kind, "system");
        assert_eq!(
            located.sites,
            vec![prefix.join("lib/python3.11/site-packages")]
        );
        env.insert("PYENV_VERSION".to_string(), "system".to_string());
        assert!(resolve_pyenv_shim(&r.join("shims/python3"), &env).is_none());
    }

    #[test]
    fn a_venv_layout_is_read_without_running_anything() {
        let dir = tempfile::tempdir().unwrap();
        let root = dir.path();
        // The interpreter file is never run: it is not even executable.
        write(&root.join("bin/python"), "not a program");
        write(
            &root.join("pyvenv.cfg"),
            "home = /nonexistent/bin\ninclude-system-site-packages = false\nversion = 3.11.7\n",
        );
        let site = root.join("lib/python3.11/site-packages");
        write(
            &site.join("Foo_Bar-1.0.dist-info/METADATA"),
            "Metadata-Version: 2.1\nName: Foo_Bar\nVersion: 1.0\n\nlong text\n",
        );
        write(&site.join("Foo_Bar-1.0.dist-info/INSTALLER"), "uv\n");
        write(
            &site.join("Foo_Bar-1.0.dist-info/RECORD"),
            "foo/_x.cpython-311-x86_64-linux-gnu.so,,\nfoo/__init__.py,,\n",
        );
        write(
            &site.join("old.egg-info"),
            "Metadata-Version: 1.0\nName: old\nVersion: 0.1\n",
        );
        write(&site.join("broken-1.dist-info/METADATA"), "Name: broken\n");
        let mut warnings = Vec::new();
        let scan = collect(
            &root.join("bin/python"),
            &BTreeMap::new(),
            false,
            &mut warnings,
        )
        .unwrap();
        assert_eq!(scan.env.kind, "venv");
        assert_eq!(scan.env.version.as_deref(), Some("3.11.7"));
        let names: Vec<(&str, &str)> = scan
            .env
            .distributions
            .iter()
            .map(|d| (d.name.as_str(), d.version.as_str()))
            .collect();
        assert_eq!(names, vec![("foo-bar", "1.0"), ("old", "0.1")]);
        assert!(scan.env.distributions[0].compiled);
        assert_eq!(scan.env.distributions[0].installer.as_deref(), Some("uv"));
        assert_eq!(warnings.len(), 1);
        assert!(warnings[0].contains("broken-1.dist-info"), "{warnings:?}");

        let private = collect(
            &root.join("bin/python"),
            &BTreeMap::new(),
            true,
            &mut Vec::new(),
        )
        .unwrap();
        assert!(private.env.interpreter.starts_with("private:sha256:"));
        assert!(private
            .env
            .site_packages
            .iter()
            .all(|s| s.starts_with("private:")));
    }

    #[test]
    fn a_missing_interpreter_is_an_error_naming_it() {
        let err = locate(Path::new("/nonexistent/bin/python"), &BTreeMap::new()).unwrap_err();
        assert!(err.contains("/nonexistent/bin/python"), "{err}");
    }
}
