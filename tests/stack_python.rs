//! The numerical stack of a real Python environment, checked against the reference
//! libraries that import it: `importlib.metadata` (what is installed) and threadpoolctl
//! (which BLAS/OpenMP libraries load, their versions, threading layers and kernels).
//!
//! `.ci/run` creates the environments and exports their interpreters:
//! * `RUNPRINT_TEST_STACK_PYTHON`: numpy, scipy, scikit-learn, threadpoolctl from PyPI;
//! * `RUNPRINT_TEST_STACK_PYTHON_OLD`: numpy 1.26 and threadpoolctl.
//!
//! Unset: the tests print why and return. Set but unusable: they fail.

use std::path::{Path, PathBuf};
use std::process::Command;

use assert_cmd::cargo::CommandCargoExt;
use serde_json::Value;

fn interpreter(var: &str) -> Option<PathBuf> {
    match std::env::var_os(var) {
        Some(p) => {
            let p = PathBuf::from(p);
            assert!(
                p.exists(),
                "{var} is set to `{}`, which does not exist",
                p.display()
            );
            Some(p)
        }
        None => {
            eprintln!("skipped: {var} is not set (.ci/run sets it)");
            None
        }
    }
}

/// Runs Python code in the interpreter and parses its JSON output.
fn python_json(python: &Path, code: &str, coretype: Option<&str>) -> Value {
    let mut cmd = Command::new(python);
    cmd.args(["-c", code]);
    match coretype {
        Some(c) => cmd.env("OPENBLAS_CORETYPE", c),
        None => cmd.env_remove("OPENBLAS_CORETYPE"),
    };
    let out = cmd.output().expect("run the reference interpreter");
    assert!(
        out.status.success(),
        "reference interpreter failed: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    serde_json::from_slice(&out.stdout).expect("reference printed JSON")
}

/// `runprint stamp --python` as JSON.
fn stamp(python: &Path, coretype: Option<&str>) -> Value {
    stamp_in(python, coretype, &[])
}

/// As [`stamp`], with more variables set.
fn stamp_in(python: &Path, coretype: Option<&str>, vars: &[(&str, &str)]) -> Value {
    let repo = tempfile::tempdir().unwrap();
    let mut cmd = Command::cargo_bin("runprint").unwrap();
    cmd.args(["stamp", "--format", "json", "--python"])
        .arg(python)
        .arg("--repo")
        .arg(repo.path())
        .envs(vars.iter().copied());
    match coretype {
        Some(c) => cmd.env("OPENBLAS_CORETYPE", c),
        None => cmd.env_remove("OPENBLAS_CORETYPE"),
    };
    let out = cmd.output().unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let v: Value = serde_json::from_slice(&out.stdout).unwrap();
    let warnings = v["run"]["warnings"].as_array().cloned().unwrap_or_default();
    assert!(
        !warnings
            .iter()
            .any(|w| w.as_str().unwrap_or("").starts_with("python")
                || w.as_str().unwrap_or("").starts_with("native")),
        "stack warnings: {warnings:?}"
    );
    v
}

#[test]
fn distributions_equal_importlib_metadata() {
    let Some(python) = interpreter("RUNPRINT_TEST_STACK_PYTHON") else {
        return;
    };
    // Reference: importlib.metadata in the same interpreter; names normalized with the
    // regular expression PEP 503 gives (`re.sub(r"[-_.]+", "-", name).lower()`).
    let reference = python_json(
        &python,
        "import importlib.metadata as m, json, re\n\
         print(json.dumps(sorted([re.sub(r'[-_.]+', '-', d.metadata['Name']).lower(), d.version] for d in m.distributions())))",
        None,
    );
    let manifest = stamp(&python, None);
    let mut ours: Vec<Value> = manifest["python"][0]["distributions"]
        .as_array()
        .expect("a python section with distributions")
        .iter()
        .map(|d| serde_json::json!([d["name"], d["version"]]))
        .collect();
    ours.sort_by_key(|v| v.to_string());
    let mut theirs = reference.as_array().unwrap().clone();
    theirs.sort_by_key(|v| v.to_string());
    assert!(theirs.len() >= 5, "reference lists too little: {theirs:?}");
    assert_eq!(ours, theirs);
}

/// The manifest's entry for the library a reference found at `filepath`, and its file name.
fn library_at<'a>(ours: &'a [Value], filepath: &Value) -> (String, &'a Value) {
    let file = Path::new(filepath.as_str().unwrap())
        .file_name()
        .unwrap()
        .to_string_lossy()
        .into_owned();
    let lib = ours
        .iter()
        .find(|l| l["file"] == file.as_str())
        .unwrap_or_else(|| panic!("runprint did not find {file}; it found {ours:#?}"));
    (file, lib)
}

/// threadpoolctl's view after importing the packages that load BLAS and OpenMP.
const THREADPOOLCTL: &str =
    "import json, numpy, scipy.linalg, sklearn.utils._openmp_helpers, threadpoolctl\n\
                             print(json.dumps(threadpoolctl.threadpool_info()))";

fn check_against_threadpoolctl(python: &Path, coretype: Option<&str>) {
    let reference = python_json(python, THREADPOOLCTL, coretype);
    let manifest = stamp(python, coretype);
    let ours = manifest["native"]["libraries"]
        .as_array()
        .expect("native libraries");
    let entries = reference.as_array().unwrap();
    assert!(
        entries.len() >= 2,
        "threadpoolctl found too little: {reference}"
    );
    for entry in entries {
        let (file, lib) = library_at(ours, &entry["filepath"]);
        match entry["user_api"].as_str().unwrap() {
            "openmp" => assert_eq!(lib["role"], "openmp", "{file}"),
            _ => {
                assert_eq!(lib["role"], "blas", "{file}");
                assert_eq!(lib["implementation"], entry["internal_api"], "{file}");
            }
        }
        // threadpoolctl reports `null` for OpenMP versions; runprint leaves it out.
        assert_eq!(
            lib.get("version").unwrap_or(&Value::Null),
            &entry["version"],
            "version of {file}"
        );
        if let Some(layer) = entry.get("threading_layer") {
            assert_eq!(lib["threading-layer"], *layer, "threading layer of {file}");
        }
        if let Some(arch) = entry.get("architecture") {
            // Forced by the variable or chosen from the CPU at load time: runprint must say
            // which kernels run.
            assert_eq!(lib["kernel-family"], *arch, "kernel family of {file}");
        }
    }
}

#[test]
fn blas_and_openmp_equal_threadpoolctl() {
    let Some(python) = interpreter("RUNPRINT_TEST_STACK_PYTHON") else {
        return;
    };
    check_against_threadpoolctl(&python, Some("Haswell"));
    check_against_threadpoolctl(&python, Some("sandybridge"));
    check_against_threadpoolctl(&python, None);
}

#[test]
fn numpy_major_change_is_a_retrain_naming_numpy_and_its_blas() {
    let (Some(new), Some(old)) = (
        interpreter("RUNPRINT_TEST_STACK_PYTHON"),
        interpreter("RUNPRINT_TEST_STACK_PYTHON_OLD"),
    ) else {
        return;
    };
    // Reference versions: importlib.metadata for numpy, threadpoolctl for its BLAS.
    let facts = |python: &Path| {
        python_json(
            python,
            "import json, importlib.metadata as m, numpy, threadpoolctl\n\
             info = [i for i in threadpoolctl.threadpool_info() if '/numpy' in i['filepath']]\n\
             print(json.dumps([m.version('numpy'), info[0]['version']]))",
            None,
        )
    };
    let (of, nf) = (facts(&old), facts(&new));
    let dir = tempfile::tempdir().unwrap();
    for (name, python) in [("old.json", &old), ("new.json", &new)] {
        let v = stamp(python, None);
        std::fs::write(dir.path().join(name), v.to_string()).unwrap();
    }
    let out = Command::cargo_bin("runprint")
        .unwrap()
        .args(["diff", "old.json", "new.json"])
        .current_dir(dir.path())
        .output()
        .unwrap();
    let text = String::from_utf8_lossy(&out.stdout);
    assert_eq!(out.status.code(), Some(4), "{text}");
    let line = |needle: &str| {
        text.lines()
            .find(|l| l.contains(needle) && !l.starts_with("Most likely cause"))
            .unwrap_or_else(|| panic!("no `{needle}` line in:\n{text}"))
            .to_string()
    };
    let numpy = line("python: numpy ");
    assert!(numpy.starts_with("retrain"), "{numpy}");
    assert!(
        numpy.contains(of[0].as_str().unwrap()) && numpy.contains(nf[0].as_str().unwrap()),
        "{numpy}"
    );
    if of[1] != nf[1] {
        let blas = line("numpy BLAS ");
        assert!(
            blas.contains(of[1].as_str().unwrap()) && blas.contains(nf[1].as_str().unwrap()),
            "{blas}"
        );
    }
}

/// threadpoolctl's `architecture` and the whole `openblas_get_config()` (called through
/// ctypes under every prefix and suffix the wheels use) of each OpenBLAS the packages load.
const OPENBLAS_REFERENCE: &str = r#"
import ctypes, json, importlib, threadpoolctl
for m in ('numpy', 'scipy.linalg'):
    try:
        importlib.import_module(m)
    except ImportError:
        pass
out = []
for i in threadpoolctl.threadpool_info():
    if i['internal_api'] != 'openblas':
        continue
    lib = ctypes.CDLL(i['filepath'])
    config = None
    for p in ('', 'scipy_'):
        for s in ('', '64_', '_64'):
            f = getattr(lib, p + 'openblas_get_config' + s, None)
            if f is not None and config is None:
                f.restype = ctypes.c_char_p
                config = f().decode()
    out.append([i['filepath'], i['architecture'], config])
print(json.dumps(out))
"#;

/// Every spelling OpenBLAS's `force_coretype` (driver/others/dynamic.c) treats in its own way:
/// each of the names it accepts (compared without case), names it does not accept or that
/// carry spaces (ignored: the CPU decides through the feature fallback), empty, and unset.
fn coretype_values() -> Vec<Option<String>> {
    let names = [
        "Katmai",
        "Coppermine",
        "Northwood",
        "Prescott",
        "Banias",
        "Atom",
        "Core2",
        "Penryn",
        "Dunnington",
        "Nehalem",
        "Athlon",
        "Opteron",
        "Opteron_SSE3",
        "Barcelona",
        "Nano",
        "Sandybridge",
        "Bobcat",
        "Bulldozer",
        "Piledriver",
        "Haswell",
        "Steamroller",
        "Excavator",
        "Zen",
        "SkylakeX",
        "Cooperlake",
        "SapphireRapids",
    ];
    let mut v: Vec<Option<String>> = names.iter().map(|n| Some(n.to_string())).collect();
    for odd in ["HASWELL", "skylakex", "Haswell ", " Zen", "", "Pentium9"] {
        v.push(Some(odd.to_string()));
    }
    v.push(None);
    v
}

/// For every value: the kernel family runprint records for each OpenBLAS equals the
/// `architecture` threadpoolctl reads from the loaded library, and runprint's
/// version, option list, kernel family and thread limit put together give back the string
/// the library's own `openblas_get_config()` returns.
fn kernel_families_equal_the_loaded_libraries(python: &Path) {
    let values = coretype_values();
    let results: Vec<(Option<String>, Value, Value)> = std::thread::scope(|scope| {
        let handles: Vec<_> = values
            .chunks(values.len().div_ceil(4))
            .map(|chunk| {
                scope.spawn(move || {
                    chunk
                        .iter()
                        .map(|v| {
                            let v_ref = v.as_deref();
                            (
                                v.clone(),
                                python_json(python, OPENBLAS_REFERENCE, v_ref),
                                stamp(python, v_ref),
                            )
                        })
                        .collect::<Vec<_>>()
                })
            })
            .collect();
        handles
            .into_iter()
            .flat_map(|h| h.join().unwrap())
            .collect()
    });
    for (value, reference, manifest) in results {
        let ours = manifest["native"]["libraries"].as_array().unwrap();
        let entries = reference.as_array().unwrap();
        assert!(!entries.is_empty(), "no OpenBLAS loaded: {reference}");
        for entry in entries {
            let (file, lib) = library_at(ours, &entry[0]);
            assert_eq!(
                lib["kernel-family"], entry[1],
                "OPENBLAS_CORETYPE={value:?}: kernel family of {file}"
            );
            assert_eq!(
                lib.get("requested-kernel-family").and_then(Value::as_str),
                value.as_deref(),
                "{file}"
            );
            let mut rebuilt = format!(
                "OpenBLAS {} {} {}",
                lib["version"].as_str().unwrap(),
                lib["build-config"].as_str().expect("a whole option list"),
                lib["kernel-family"].as_str().unwrap()
            );
            match lib.get("max-threads") {
                Some(n) => rebuilt.push_str(&format!(" MAX_THREADS={n}")),
                None => rebuilt.push_str(" SINGLE_THREADED"),
            }
            let words = |s: &str| s.split_whitespace().map(str::to_string).collect::<Vec<_>>();
            assert_eq!(
                words(&rebuilt),
                words(entry[2].as_str().unwrap()),
                "OPENBLAS_CORETYPE={value:?}: configuration of {file}"
            );
        }
    }
}

#[test]
fn kernel_families_and_build_strings_equal_the_loaded_openblas() {
    for var in [
        "RUNPRINT_TEST_STACK_PYTHON",
        "RUNPRINT_TEST_STACK_PYTHON_OLD",
    ] {
        if let Some(python) = interpreter(var) {
            kernel_families_equal_the_loaded_libraries(&python);
        }
    }
}

/// A Python child that loads numpy, scipy and scikit-learn (OpenBLAS twice, GNU OpenMP),
/// prints what threadpoolctl sees in it, its CPU affinity and the native id of a second
/// thread, then waits for its standard input to close.
const CHILD: &str = r#"
import json, os, sys, threading
import numpy, scipy.linalg, sklearn.utils._openmp_helpers, threadpoolctl
done = threading.Event()
t = threading.Thread(target=done.wait)
t.start()
info = [[os.path.realpath(i['filepath']), i.get('version'), i.get('architecture'), i['user_api']]
        for i in threadpoolctl.threadpool_info()]
print(json.dumps({'libraries': info, 'cpus': len(os.sched_getaffinity(0)), 'thread': t.native_id}), flush=True)
sys.stdin.read()
done.set()
"#;

/// `stamp --pid` of that child, with a second OpenMP runtime preloaded when the system has
/// GNU's: every BLAS and OpenMP library threadpoolctl reports in the process is in
/// `[process]` with the same file, version and kernel family, the preloaded one marked, the
/// scanned copies marked loaded; the allowed CPUs equal `os.sched_getaffinity`. A thread id,
/// a finished process and PID 0 are refused with exit 2 and a sentence naming the PID.
#[test]
fn a_running_process_is_read_as_threadpoolctl_sees_it() {
    use std::io::{BufRead, BufReader};
    let Some(python) = interpreter("RUNPRINT_TEST_STACK_PYTHON") else {
        return;
    };
    // Debian's and Ubuntu's GNU OpenMP runtime (libgomp1), when installed.
    let gomp = [
        "/usr/lib/x86_64-linux-gnu/libgomp.so.1",
        "/usr/lib/aarch64-linux-gnu/libgomp.so.1",
    ]
    .into_iter()
    .find(|p| Path::new(p).exists());
    let mut cmd = Command::new(&python);
    cmd.args(["-c", CHILD])
        .env_remove("OPENBLAS_CORETYPE")
        .stdin(std::process::Stdio::piped())
        .stdout(std::process::Stdio::piped());
    if let Some(g) = gomp {
        cmd.env("LD_PRELOAD", g);
    }
    let mut child = cmd.spawn().expect("start the Python child");
    let mut line = String::new();
    BufReader::new(child.stdout.take().unwrap())
        .read_line(&mut line)
        .unwrap();
    let reference: Value = serde_json::from_str(&line).expect("the child printed JSON");
    let repo = tempfile::tempdir().unwrap();
    let run = |pid: String| {
        Command::cargo_bin("runprint")
            .unwrap()
            .args(["stamp", "--format", "json", "--pid", &pid, "--repo"])
            .arg(repo.path())
            .arg("--cache")
            .arg(repo.path().join("cache"))
            .output()
            .unwrap()
    };
    let out = run(child.id().to_string());
    let thread_out = run(reference["thread"].to_string());
    drop(child.stdin.take());
    child.wait().unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let manifest: Value = serde_json::from_slice(&out.stdout).unwrap();
    let process = &manifest["process"];
    let loaded = process["libraries"].as_array().expect("loaded libraries");
    let expected = reference["libraries"].as_array().unwrap();
    assert!(expected.len() >= 3, "{reference}");
    for entry in expected {
        let path = entry[0].as_str().unwrap();
        let lib = loaded
            .iter()
            .find(|l| l["path"] == path)
            .unwrap_or_else(|| panic!("{path} not in {loaded:#?}"));
        // threadpoolctl's `user_api` is runprint's `kind` (`blas`, `openmp`); it reports no
        // version for OpenMP runtimes.
        assert_eq!(lib["kind"], entry[3], "{path}");
        if entry[3] == "blas" {
            assert_eq!(lib["version"], entry[1], "{path}");
            assert_eq!(lib["kernel-family"], entry[2], "{path}");
        }
        let preloaded = gomp.is_some_and(|g| std::fs::canonicalize(g).unwrap() == Path::new(path));
        assert_eq!(lib.get("preloaded").is_some(), preloaded, "{path}");
        let file = Path::new(path)
            .file_name()
            .unwrap()
            .to_string_lossy()
            .into_owned();
        let scanned = manifest["native"]["libraries"]
            .as_array()
            .unwrap()
            .iter()
            .find(|l| l["file"] == file.as_str())
            .unwrap_or_else(|| panic!("{file} not scanned"));
        assert_eq!(scanned["loaded"], true, "{file}");
    }
    if gomp.is_some() {
        let openmp = loaded.iter().filter(|l| l["kind"] == "openmp").count();
        assert!(openmp >= 2, "two OpenMP runtimes expected: {loaded:#?}");
    }
    assert_eq!(process["cpu-count"], reference["cpus"]);
    assert_eq!(process["command"][1], "-c");
    // A thread of the child is not a process.
    assert_eq!(thread_out.status.code(), Some(2));
    let text = String::from_utf8_lossy(&thread_out.stderr);
    assert!(text.contains("a thread of process"), "{text}");
    // The child has ended: no such process.
    let gone = run(child.id().to_string());
    assert_eq!(gone.status.code(), Some(2));
    let text = String::from_utf8_lossy(&gone.stderr);
    assert!(
        text.contains(&format!("process {}", child.id())) && text.contains("no such process"),
        "{text}"
    );
    let zero = run("0".into());
    assert_eq!(zero.status.code(), Some(2));
}

/// numpy installed twice: numpy 1.26's folder put first on `sys.path` through `PYTHONPATH`
/// in front of an environment with numpy 2. The copy runprint marks as imported is the one
/// the interpreter imports (`numpy.__version__`, and `importlib.metadata.version`, which
/// searches `sys.path` in the same order); the other is marked shadowed.
#[test]
fn the_imported_copy_of_a_distribution_installed_twice_is_marked() {
    let (Some(new), Some(old)) = (
        interpreter("RUNPRINT_TEST_STACK_PYTHON"),
        interpreter("RUNPRINT_TEST_STACK_PYTHON_OLD"),
    ) else {
        return;
    };
    let site = python_json(&old, "import json, numpy, os; print(json.dumps(os.path.dirname(os.path.dirname(numpy.__file__))))", None);
    let site = site.as_str().unwrap().to_string();
    let mut cmd = Command::new(&new);
    cmd.args([
        "-c",
        "import json, numpy, importlib.metadata as m; print(json.dumps([numpy.__version__, m.version('numpy')]))",
    ])
    .env("PYTHONPATH", &site);
    let out = cmd.output().unwrap();
    let reference: Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(reference[0], reference[1]);
    let manifest = stamp_in(&new, None, &[("PYTHONPATH", &site)]);
    let numpys: Vec<&Value> = manifest["python"][0]["distributions"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|d| d["name"] == "numpy")
        .collect();
    assert_eq!(numpys.len(), 2, "{numpys:?}");
    let imported: Vec<&&Value> = numpys
        .iter()
        .filter(|d| d.get("shadowed").is_none())
        .collect();
    assert_eq!(imported.len(), 1, "{numpys:?}");
    assert_eq!(imported[0]["version"], reference[0]);
}

/// oneMKL's threading layer and ONNX Runtime's build commit, in an environment with the
/// `mkl` and `onnxruntime` wheels (`RUNPRINT_TEST_FRAMEWORK_PYTHON`). References:
/// threadpoolctl's `threading_layer` for MKL loaded through ctypes under each
/// `MKL_THREADING_LAYER` value, and `onnxruntime.get_build_info()`. A layer MKL cannot load
/// (the process dies) must come with runprint's warning, and only then.
#[test]
fn mkl_threading_layers_and_onnxruntime_commit_equal_the_libraries() {
    let Some(python) = interpreter("RUNPRINT_TEST_FRAMEWORK_PYTHON") else {
        return;
    };
    const MKL: &str = r#"
import ctypes, glob, json, sys, threadpoolctl
ctypes.CDLL(glob.glob(sys.prefix + '/lib/libmkl_rt.so*')[0])
print(json.dumps([i.get('threading_layer') for i in threadpoolctl.threadpool_info() if i['internal_api'] == 'mkl']))
"#;
    for value in [
        None,
        Some("INTEL"),
        Some("gnu"),
        Some("SEQUENTIAL"),
        Some("TBB"),
        Some("bogus"),
    ] {
        let mut cmd = Command::new(&python);
        cmd.args(["-c", MKL]);
        match value {
            Some(v) => cmd.env("MKL_THREADING_LAYER", v),
            None => cmd.env_remove("MKL_THREADING_LAYER"),
        };
        let out = cmd.output().unwrap();
        let repo = tempfile::tempdir().unwrap();
        let mut stamp = Command::cargo_bin("runprint").unwrap();
        stamp
            .args(["stamp", "--format", "json", "--python"])
            .arg(&python)
            .arg("--repo")
            .arg(repo.path());
        match value {
            Some(v) => stamp.env("MKL_THREADING_LAYER", v),
            None => stamp.env_remove("MKL_THREADING_LAYER"),
        };
        let stamped = stamp.output().unwrap();
        assert!(
            stamped.status.success(),
            "{}",
            String::from_utf8_lossy(&stamped.stderr)
        );
        let manifest: Value = serde_json::from_slice(&stamped.stdout).unwrap();
        let mkl = manifest["native"]["libraries"]
            .as_array()
            .unwrap()
            .iter()
            .find(|l| l["implementation"] == "mkl")
            .expect("runprint found MKL");
        let warned = manifest["run"]["warnings"]
            .as_array()
            .into_iter()
            .flatten()
            .any(|w| w.as_str().unwrap_or("").contains("threading layer"));
        if out.status.success() {
            let reference: Value = serde_json::from_slice(&out.stdout).unwrap();
            assert_eq!(
                mkl["threading-layer"], reference[0],
                "MKL_THREADING_LAYER={value:?}"
            );
            assert!(
                !warned,
                "MKL_THREADING_LAYER={value:?}: a warning for a layer that loads"
            );
        } else {
            // MKL could not load the layer ("Intel oneMKL FATAL ERROR: Cannot load
            // libmkl_tbb_thread.so.3.", printed on standard output).
            let err = String::from_utf8_lossy(&out.stdout).to_string()
                + &String::from_utf8_lossy(&out.stderr);
            assert!(err.contains("Cannot load"), "{err}");
            assert!(
                warned,
                "MKL_THREADING_LAYER={value:?}: no warning, but MKL stops: {err}"
            );
        }
    }
    let reference = python_json(
        &python,
        "import json, onnxruntime as o; print(json.dumps([o.__version__, o.get_build_info()]))",
        None,
    );
    let manifest = stamp(&python, None);
    let build = manifest["python"][0]["builds"]
        .as_array()
        .unwrap()
        .iter()
        .find(|b| b["name"] == "onnxruntime")
        .expect("an onnxruntime build entry");
    assert_eq!(build["version"], reference[0]);
    let info = reference[1].as_str().unwrap();
    let commit = build["git-revision"].as_str().unwrap();
    assert!(
        info.contains(&format!("git-commit-id={commit},")),
        "{info} vs {commit}"
    );
}

/// jaxlib's CPU LAPACK kernels come from SciPy through Python, with no DT_NEEDED entry:
/// after a decomposition on the CPU, the process has `scipy.linalg.cython_lapack` imported
/// and SciPy's OpenBLAS mapped (`/proc/self/maps`), so runprint names jaxlib among the users
/// of SciPy's BLAS.
#[test]
fn jaxlib_is_a_user_of_scipys_blas() {
    let Some(python) = interpreter("RUNPRINT_TEST_FRAMEWORK_PYTHON") else {
        return;
    };
    let reference = python_json(
        &python,
        "import json, os, sys\nimport jax.numpy as jnp\njnp.linalg.eigh(jnp.eye(3) * 2.0)\n\
         maps = {l.split()[-1] for l in open('/proc/self/maps') if '/' in l}\n\
         print(json.dumps(['scipy.linalg.cython_lapack' in sys.modules, sorted(os.path.basename(p) for p in maps if '/scipy.libs/' in p and 'openblas' in p)]))",
        None,
    );
    assert_eq!(reference[0], true, "{reference}");
    let loaded = reference[1].as_array().unwrap();
    assert_eq!(loaded.len(), 1, "{reference}");
    let manifest = stamp(&python, None);
    let scipy_blas = manifest["native"]["libraries"]
        .as_array()
        .unwrap()
        .iter()
        .find(|l| l["file"] == loaded[0])
        .expect("SciPy's OpenBLAS");
    let users: Vec<&str> = scipy_blas["used-by"]
        .as_array()
        .unwrap()
        .iter()
        .filter_map(Value::as_str)
        .collect();
    assert!(users.contains(&"jaxlib"), "{users:?}");
}
