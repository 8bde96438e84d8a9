//! The manifest: one versioned, typed record of everything outside the training code that can
//! change a run's results.
//!
//! The on-disk form is TOML (JSON on request) with kebab-case keys. Two parts matter for the
//! contract:
//!
//! * [`RunInfo`] (`[run]`) describes *this* stamping — time, label, host name, tool version,
//!   warnings. It never enters the fingerprint.
//! * Everything else is [`Content`]: facts that can change results. The [`Manifest::fingerprint`]
//!   is the SHA-256 of a canonical JSON serialization of the content, so two stamps of the same
//!   state share it and a hand edit of any content field is detectable on read.
//!
//! Version policy: adding an optional field keeps `schema-version`; changing the meaning or type
//! of a field bumps it. Unknown fields are tolerated on read (and ignored), empty fields are
//! omitted on write.

use std::collections::BTreeMap;
use std::path::Path;

use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};

use crate::error::ManifestError;

/// The schema version this build writes and the highest it reads.
pub const SCHEMA_VERSION: u32 = 1;

/// A whole manifest.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case", from = "ManifestFile")]
pub struct Manifest {
    /// Version of this file's structure (see the module docs for the policy).
    pub schema_version: u32,
    /// `sha256:` + hex digest of the canonical content (see [`Content::fingerprint`]).
    pub fingerprint: String,
    /// Facts about this stamping; not part of the fingerprint.
    pub run: RunInfo,
    /// The result-relevant facts.
    #[serde(flatten)]
    pub content: Content,
}

/// A manifest as read: every section at the top level, as the file has them. Reading through
/// [`Manifest`]'s flattened `content` would make serde buffer the whole file in a generic form
/// first and read it again, which doubled the time to read a large manifest. Building
/// [`Content`] below names every field, so a field added there must be added here too.
#[derive(Deserialize)]
#[serde(rename_all = "kebab-case")]
struct ManifestFile {
    schema_version: u32,
    fingerprint: String,
    run: RunInfo,
    #[serde(default)]
    git: GitInfo,
    #[serde(default)]
    system: SystemInfo,
    #[serde(default)]
    cpu: CpuInfo,
    #[serde(default)]
    env: EnvInfo,
    #[serde(default)]
    lockfiles: Vec<Lockfile>,
    #[serde(default)]
    data: Vec<DataInput>,
    #[serde(default)]
    python: Vec<PythonEnv>,
    #[serde(default)]
    native: NativeInfo,
    #[serde(default)]
    gpu: Option<GpuInfo>,
    #[serde(default)]
    scope: Option<Scope>,
    #[serde(default)]
    process: Option<ProcessInfo>,
}

impl From<ManifestFile> for Manifest {
    fn from(f: ManifestFile) -> Manifest {
        Manifest {
            schema_version: f.schema_version,
            fingerprint: f.fingerprint,
            run: f.run,
            content: Content {
                git: f.git,
                system: f.system,
                cpu: f.cpu,
                env: f.env,
                lockfiles: f.lockfiles,
                data: f.data,
                python: f.python,
                native: f.native,
                gpu: f.gpu,
                scope: f.scope,
                process: f.process,
            },
        }
    }
}

/// Facts about the act of stamping, excluded from the fingerprint.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct RunInfo {
    /// runprint's version.
    pub tool_version: String,
    /// UTC time of the stamp, RFC 3339.
    pub created: String,
    /// Free text given with `--label`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub label: Option<String>,
    /// The machine's host name (left out with `--private`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub hostname: Option<String>,
    /// Collectors that failed, one sentence each, naming the file where there is one.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub warnings: Vec<String>,
}

/// Everything that enters the fingerprint.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct Content {
    /// Source control state.
    #[serde(default)]
    pub git: GitInfo,
    /// Operating system, C library and memory.
    #[serde(default)]
    pub system: SystemInfo,
    /// Processor and the instruction-set features kernels dispatch on.
    #[serde(default)]
    pub cpu: CpuInfo,
    /// Environment variables that steer numerics or threading.
    #[serde(default)]
    pub env: EnvInfo,
    /// Every lockfile found, with its resolved packages.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub lockfiles: Vec<Lockfile>,
    /// Declared data inputs (`stamp --data`) and their digests.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub data: Vec<DataInput>,
    /// Python interpreters and what is installed in them (one entry per `--python`).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub python: Vec<PythonEnv>,
    /// BLAS/LAPACK and OpenMP libraries bundled in distributions or on the system, and
    /// compiled modules that switch the process to flush-to-zero.
    #[serde(default, skip_serializing_if = "NativeInfo::is_empty")]
    pub native: NativeInfo,
    /// The NVIDIA driver, CUDA toolkit and libraries, and the GPUs; `None` in manifests written
    /// before this section existed.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub gpu: Option<GpuInfo>,
    /// The training job's scope (`stamp --entry`, or `[scope]` in the policy file): its entry
    /// points, the repository files they import and the packages they can load.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub scope: Option<Scope>,
    /// A running training process as `/proc` shows it (`stamp --pid`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub process: Option<ProcessInfo>,
}

/// A running process read from `/proc` (`stamp --pid`): what it really runs.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct ProcessInfo {
    /// Its command line, credentials redacted (left out with `--private`).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub command: Vec<String>,
    /// Its executable (left out with `--private`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub executable: Option<String>,
    /// Its working folder (left out with `--private`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub cwd: Option<String>,
    /// The CPUs it may run on (`Cpus_allowed_list`, e.g. `0-7`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub cpus_allowed: Option<String>,
    /// How many CPUs that is (OpenMP runtimes and BLAS size their thread pools from it).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub cpu_count: Option<u32>,
    /// The numerical libraries it has mapped (BLAS, OpenMP, CUDA, cuDNN, NCCL, framework
    /// libraries), in the order it mapped them.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub libraries: Vec<LoadedLibrary>,
}

/// A shared object a process has mapped.
#[derive(Debug, Clone, Default, PartialEq, Eq, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct LoadedLibrary {
    /// `blas`, `openmp`, `cuda`, `cudnn`, `nccl`, `framework`.
    pub kind: String,
    /// For BLAS and OpenMP: as in `[[native.libraries]]` (`openblas`, `gnu`…); else the
    /// library's name (`cudart`, `torch_cpu`).
    pub implementation: String,
    /// The distribution that ships it (from the numerical-stack scan, else the folder
    /// under `site-packages`), or `system`.
    pub owner: String,
    /// File name.
    pub file: String,
    /// Where it was mapped from (hashed with `--private`).
    pub path: String,
    /// Version read from this file, when it says.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub version: Option<String>,
    /// For BLAS: the kernel family it runs (see `[[native.libraries]]`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub kernel_family: Option<String>,
    /// Named in the process's `LD_PRELOAD`.
    #[serde(default, skip_serializing_if = "std::ops::Not::not")]
    pub preloaded: bool,
}

/// What the training job runs and reads. A change outside it cannot change the model; the
/// comparison uses it only when it is complete on both sides.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct Scope {
    /// Entry points as given: files (`train.py`) or Python modules (`kelp.train`).
    pub entry: Vec<String>,
    /// The lockfiles the job installs from (paths of recorded lockfiles); other lockfiles
    /// are listed by the comparison but cannot raise its verdict.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub lockfiles: Vec<String>,
    /// Globs of the configuration and data files the job reads.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub reads: Vec<String>,
    /// False when the import closure could not be computed exactly (see `notes`): the
    /// comparison then judges changed files as if no scope were declared.
    pub complete: bool,
    /// Why the closure or the package list is not complete.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub notes: Vec<String>,
    /// Imports inside functions, classes, `if` or `try` (counted into the closure).
    #[serde(default, deserialize_with = "toml_u64")]
    pub conditional_imports: u64,
    /// Top-level modules from outside the repository and the standard library it imports.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub modules: Vec<String>,
    /// Every package the job can load: the distributions of `modules` and their
    /// dependencies, followed through the recorded edges. Absent when they could not all be
    /// followed (then no package is judged out of scope).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub packages: Option<Vec<String>>,
    /// The repository files of the import closure, with their git blob ids.
    #[serde(default, skip_serializing_if = "BTreeMap::is_empty")]
    pub files: BTreeMap<String, String>,
}

/// One declared data input: a file or a folder.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct DataInput {
    /// The path as given (relative to the repository when inside it).
    pub path: String,
    /// `file` or `folder`.
    pub kind: String,
    /// `sha256:` + hex. A file's content digest; a folder's digest over the sorted lines
    /// `RELATIVE-PATH NUL HEX-DIGEST LF` of every file in it, so a rename, an added or a removed
    /// file changes it.
    pub sha256: String,
    /// Total size in bytes.
    #[serde(deserialize_with = "toml_u64")]
    pub size: u64,
    /// Number of files.
    #[serde(deserialize_with = "toml_u64")]
    pub files: u64,
    /// Per-file digests of a folder (omitted above [`DATA_ENTRY_LIMIT`] files), so that `diff`
    /// can name which files changed.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub entries: Vec<DataEntry>,
}

/// The most per-file entries a folder input records.
pub const DATA_ENTRY_LIMIT: usize = 2000;

/// One file inside a folder input.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct DataEntry {
    /// Path relative to the folder, `/`-separated.
    pub path: String,
    /// Hex SHA-256 of the content.
    pub sha256: String,
    /// Size in bytes.
    #[serde(deserialize_with = "toml_u64")]
    pub size: u64,
}

/// Source-control facts.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct GitInfo {
    /// False when the folder is not inside a git repository.
    pub present: bool,
    /// Full commit id of HEAD (absent in a repository with no commit yet).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub commit: Option<String>,
    /// Branch name; absent when HEAD is detached.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub branch: Option<String>,
    /// True when HEAD points at a commit rather than a branch.
    #[serde(default, skip_serializing_if = "is_false")]
    pub detached: bool,
    /// True when tracked files differ from HEAD or untracked, not-ignored files exist.
    #[serde(default, skip_serializing_if = "is_false")]
    pub dirty: bool,
    /// SHA-256 over the uncommitted change (paths, states and contents), so two dirty runs can
    /// be told apart.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub dirty_digest: Option<String>,
    /// Paths that differ from HEAD, relative to the repository root, sorted.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub changed_paths: Vec<String>,
    /// The `origin` remote (or the first one) with any credentials removed.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub remote: Option<String>,
    /// Submodules and the commit each is checked out at.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub submodules: Vec<Submodule>,
    /// The uncommitted change itself, as a git-style patch (tracked edits and untracked files'
    /// content), stored only with `stamp --keep-patch`; `runprint recreate` prints it.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub patch: Option<String>,
}

/// One submodule.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct Submodule {
    /// Path inside the superproject.
    pub path: String,
    /// Commit checked out in the submodule's work tree (or recorded in the index when it is
    /// not checked out).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub commit: Option<String>,
}

/// Operating-system facts.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct SystemInfo {
    /// `linux`, `macos`, `windows`…
    #[serde(default)]
    pub os: String,
    /// Distribution name and version where known.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub os_version: Option<String>,
    /// Kernel release.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub kernel: Option<String>,
    /// C library name (`glibc`, `musl`…).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub libc: Option<String>,
    /// C library version.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub libc_version: Option<String>,
    /// Total physical memory in bytes.
    #[serde(default, deserialize_with = "toml_u64")]
    pub memory_bytes: u64,
}

/// Processor facts.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct CpuInfo {
    /// `x86_64`, `aarch64`…
    #[serde(default)]
    pub arch: String,
    /// `GenuineIntel`, `AuthenticAMD`, an ARM implementer…
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub vendor: Option<String>,
    /// Marketing model name.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub model_name: Option<String>,
    /// CPU family number (x86).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub family: Option<String>,
    /// CPU model number.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub model: Option<String>,
    /// CPU stepping.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub stepping: Option<String>,
    /// Physical cores, where the OS tells.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub physical_cores: Option<u32>,
    /// Logical processors online.
    #[serde(default)]
    pub logical_cores: u32,
    /// The CPUs this process may run on, as a list such as `0-3,8`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub allowed_cpus: Option<String>,
    /// How many CPUs this process may run on.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub allowed_cpu_count: Option<u32>,
    /// Instruction-set features numerical kernels dispatch on, lower case, sorted.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub features: Vec<String>,
}

/// Environment variables.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct EnvInfo {
    /// Relevant variables and their values.
    #[serde(default, skip_serializing_if = "BTreeMap::is_empty")]
    pub vars: BTreeMap<String, String>,
    /// Relevant variables that are set but whose value looks secret: only the name is kept.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub redacted: Vec<String>,
}

/// One lockfile (or pinned requirements file) and its resolved packages.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct Lockfile {
    /// Path relative to the repository root (or as given, for files outside it).
    pub path: String,
    /// Which ecosystem: `cargo`, `pypi`…
    pub ecosystem: String,
    /// The format's own version marker, where it has one.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub format_version: Option<String>,
    /// SHA-256 of the file's bytes.
    pub sha256: String,
    /// Packages, sorted by name then version.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub packages: Vec<Package>,
    /// How many packages the file holds when they were left out of the manifest (over the
    /// package limit, [`crate::limits::max_packages`], or to keep the manifest under the size
    /// that runprint reads); the file is then known by its digest alone.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub packages_omitted: Option<u64>,
}

impl Lockfile {
    /// The entry for a lockfile at `path` (as shown) of `format`, parsed from `bytes`: its
    /// digest, and its packages unless there are more than [`crate::limits::max_packages`].
    pub fn from_parsed(
        path: &str,
        format: crate::lockfile::Format,
        parsed: crate::lockfile::Parsed,
        bytes: &[u8],
        warnings: &mut Vec<String>,
    ) -> Lockfile {
        Lockfile {
            path: path.to_string(),
            ecosystem: format.ecosystem().to_string(),
            format_version: parsed.format_version,
            sha256: hex(&Sha256::digest(bytes)),
            packages: parsed.packages,
            packages_omitted: None,
        }
        .limit_packages(crate::limits::max_packages(), warnings)
    }

    /// Leaves the packages out (keeping their count) when there are more than `limit`, with a
    /// warning naming the file and the limit.
    pub fn limit_packages(mut self, limit: usize, warnings: &mut Vec<String>) -> Lockfile {
        if self.packages.len() > limit {
            warnings.push(format!(
                "lockfile `{}`: {} packages, over the {limit}-package limit; recorded by its \
                 digest alone (set {} to raise the limit)",
                self.path,
                self.packages.len(),
                crate::limits::MAX_PACKAGES_VAR
            ));
            self.omit_packages();
        }
        self
    }

    /// Leaves the packages out, keeping their count in `packages_omitted`.
    pub fn omit_packages(&mut self) {
        let n = self.packages.len() as u64 + self.packages_omitted.unwrap_or(0);
        self.packages = Vec::new();
        self.packages_omitted = Some(n);
    }
}

/// One resolved package.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct Package {
    /// Name normalized by the ecosystem's own rule (PEP 503 for Python).
    pub name: String,
    /// Exact version as written.
    pub version: String,
    /// Where it comes from: `registry+…`, `git+URL#rev`, `path+…`, a URL (credentials removed).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub source: Option<String>,
    /// Integrity hashes as written (`sha256:…`), sorted.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub hashes: Vec<String>,
    /// Enabled features (Cargo), sorted.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub features: Vec<String>,
    /// Only needed for development or tests.
    #[serde(default, skip_serializing_if = "is_false")]
    pub dev: bool,
    /// Installed only when an optional feature or extra asks for it.
    #[serde(default, skip_serializing_if = "is_false")]
    pub optional: bool,
    /// Direct dependency of the project (`Some(false)` for transitive) where the format says.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub direct: Option<bool>,
    /// The platform, target framework or environment marker the entry is limited to, where
    /// the format says.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub platform: Option<String>,
    /// Whether its wheels hold compiled code, from the wheel file names the format lists
    /// (PEP 427 tags: any ABI other than `none` or platform other than `any`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub compiled: Option<bool>,
    /// Names of the packages it depends on, where the format records the edges (sorted,
    /// without duplicates).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub requires: Vec<String>,
}

/// One Python interpreter and the distributions installed for it.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct PythonEnv {
    /// The interpreter as given (hashed with `--private`).
    pub interpreter: String,
    /// `cpython`, `pypy`…, where it could be told.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub implementation: Option<String>,
    /// The interpreter's version (`3.11.7`, or `3.11` where only that is known).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub version: Option<String>,
    /// `venv`, `conda` or `system`.
    pub kind: String,
    /// The folders scanned for distributions, in search order (hashed with `--private`).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub site_packages: Vec<String>,
    /// Installed distributions, sorted by name then version.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub distributions: Vec<Distribution>,
    /// Packages of a conda environment (`conda-meta/`), including non-Python ones such as
    /// `libblas` or `cuda-cudart`, sorted by name.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub conda_packages: Vec<CondaPackage>,
    /// Build facts of numerical frameworks read from their generated files, sorted by name.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub builds: Vec<FrameworkBuild>,
}

/// One installed Python distribution.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct Distribution {
    /// PEP 503-normalized name.
    pub name: String,
    /// Version as in its metadata.
    pub version: String,
    /// The tool that installed it (`pip`, `uv`, `conda`…), from `INSTALLER`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub installer: Option<String>,
    /// Where it was installed from when not from an index (PEP 610): `path`, `url+URL`,
    /// `git+URL@COMMIT`…, credentials removed; hashed with `--private` when it holds a path.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub source: Option<String>,
    /// Installed in editable (development) mode.
    #[serde(default, skip_serializing_if = "is_false")]
    pub editable: bool,
    /// Ships compiled code (extension modules or bundled shared libraries).
    #[serde(default, skip_serializing_if = "is_false")]
    pub compiled: bool,
    /// Another copy of the same name sits earlier on `sys.path` (`PYTHONPATH`, the virtual
    /// environment before the base one, `.pth` folders after their site), so this one is
    /// installed but not what `import` finds.
    #[serde(default, skip_serializing_if = "std::ops::Not::not")]
    pub shadowed: bool,
    /// The distributions it needs (`Requires-Dist`, extras left out), normalized, sorted.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub requires: Vec<String>,
}

/// One package of a conda environment.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct CondaPackage {
    /// Package name.
    pub name: String,
    /// Version.
    pub version: String,
    /// Build string (for `libblas` it names the BLAS implementation).
    #[serde(default, skip_serializing_if = "String::is_empty")]
    pub build: String,
    /// Channel it came from, credentials removed.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub channel: Option<String>,
}

/// How a framework was built, read from files it generates at build time.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct FrameworkBuild {
    /// Distribution name (`torch`, `tensorflow`, `jaxlib`, `numpy`, `scipy`).
    pub name: String,
    /// The version the build reports (may carry a local label such as `+cu121`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub version: Option<String>,
    /// CUDA version it was built with; absent for CPU builds.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub cuda: Option<String>,
    /// cuDNN version it was built with.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub cudnn: Option<String>,
    /// ROCm/HIP version it was built with.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub rocm: Option<String>,
    /// Source revision of the build.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub git_revision: Option<String>,
    /// BLAS it was built against (`scipy-openblas 0.3.27`, `accelerate`…).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub blas: Option<String>,
    /// The BLAS build configuration as recorded by the build (target core, integer width,
    /// maximum threads).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub blas_config: Option<String>,
    /// The file the facts were read from, relative to its site-packages folder.
    pub from: String,
}

/// Native numerical libraries and process-wide floating-point switches.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct NativeInfo {
    /// BLAS/LAPACK and OpenMP libraries, sorted by owner, role and file.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub libraries: Vec<NativeLibrary>,
    /// Compiled modules whose load-time constructor turns on flush-to-zero and
    /// denormals-are-zero, sorted.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub fast_math: Vec<FastMathModule>,
}

impl NativeInfo {
    /// True when nothing was found.
    pub fn is_empty(&self) -> bool {
        self.libraries.is_empty() && self.fast_math.is_empty()
    }
}

/// One BLAS/LAPACK or OpenMP library file.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct NativeLibrary {
    /// `blas` or `openmp`.
    pub role: String,
    /// `openblas`, `mkl`, `blis`, `flexiblas`, `reference`, `atlas`, `accelerate` for BLAS;
    /// `gnu`, `llvm`, `intel` for OpenMP.
    pub implementation: String,
    /// The distribution that ships it, or `system`.
    pub owner: String,
    /// Where it is: relative to site-packages for a bundled copy, absolute on the system.
    pub path: String,
    /// The file's own name after symbolic links are followed.
    pub file: String,
    /// Version, when the file or its package says.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub version: Option<String>,
    /// Where the version came from: `binary`, `file-name`, `metadata`, `header`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub version_source: Option<String>,
    /// How it runs threads: `pthreads`, `openmp`, `disabled`, `intel`, `gnu`, `tbb`,
    /// `sequential`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub threading_layer: Option<String>,
    /// Build options read from the library (e.g. OpenBLAS `USE64BITINT DYNAMIC_ARCH`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub build_config: Option<String>,
    /// 64-bit integer interface (ILP64).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub ilp64: Option<bool>,
    /// Built to pick its kernels for the CPU it finds at load time.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub dynamic_arch: Option<bool>,
    /// Largest thread count it was built for.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub max_threads: Option<u32>,
    /// Written by earlier versions: the family `OPENBLAS_CORETYPE` named, which is not always
    /// the one that runs. Read for old manifests, no longer written nor compared.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub architecture: Option<String>,
    /// The kernel family it runs, spelled as the library reports it: for a
    /// dynamic-architecture OpenBLAS, the one its dispatcher picks on this CPU with
    /// `OPENBLAS_CORETYPE` as set ([`crate::stack::openblas_core`]); for a build for one CPU,
    /// that CPU's.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub kernel_family: Option<String>,
    /// `OPENBLAS_CORETYPE` as set: the family asked for (the library may run another).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub requested_kernel_family: Option<String>,
    /// With `stamp --pid`: whether the process has this file mapped (`false`: installed
    /// only). Absent without `--pid`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub loaded: Option<bool>,
    /// Named in `LD_PRELOAD`: loaded into every process before anything else, so its
    /// symbols win over a distribution's own copy.
    #[serde(default, skip_serializing_if = "std::ops::Not::not")]
    pub preloaded: bool,
    /// Compiler or symbol-version facts that stand in for a version (OpenMP runtimes).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub build_hint: Option<String>,
    /// Distributions whose compiled modules link this file, sorted.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub used_by: Vec<String>,
}

/// A compiled module built with fast-math start-up code.
#[derive(Debug, Clone, Default, PartialEq, Eq, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct FastMathModule {
    /// The distribution that ships it.
    pub owner: String,
    /// Path relative to site-packages.
    pub path: String,
}

/// The GPU stack. Every field is optional: a machine without a GPU records an empty section.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct GpuInfo {
    /// NVIDIA kernel driver version; absent when no driver is loaded.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub nvidia_driver: Option<String>,
    /// CUDA toolkits found, sorted by path.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub cuda_toolkits: Vec<CudaToolkit>,
    /// cuDNN, cuBLAS, NCCL and CUDA runtime copies found (toolkit, system and wheels), sorted.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub libraries: Vec<GpuLibrary>,
    /// The GPUs, sorted by bus id.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub devices: Vec<GpuDevice>,
}

/// One CUDA toolkit installation.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct CudaToolkit {
    /// Its folder.
    pub path: String,
    /// The toolkit version (`cuda` in `version.json`, or `version.txt`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub version: Option<String>,
    /// The runtime (cudart) version.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub runtime: Option<String>,
    /// The compiler (nvcc) version.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub nvcc: Option<String>,
}

/// One copy of a CUDA library.
#[derive(Debug, Clone, Default, PartialEq, Eq, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct GpuLibrary {
    /// `cudart`, `cudnn`, `cublas` or `nccl`.
    pub name: String,
    /// Version.
    pub version: String,
    /// The distribution that ships it, `toolkit` or `system`.
    pub owner: String,
    /// Where the version was read (header, file name, metadata, binary).
    pub from: String,
}

/// One GPU.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct GpuDevice {
    /// PCI bus id.
    pub bus_id: String,
    /// Model name.
    pub model: String,
    /// Memory in MiB, when known.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub memory_mib: Option<u64>,
    /// Compute capability (`9.0`), when known.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub compute_capability: Option<String>,
}

fn is_false(b: &bool) -> bool {
    !*b
}

/// The largest integer a manifest holds: TOML integers are signed 64-bit (TOML 1.0.0,
/// "Integer"), so a larger value read from JSON could never be written back as TOML.
pub const MAX_INTEGER: u64 = i64::MAX as u64;

/// Reads a `u64` that TOML can represent, refusing larger values with a clear message.
fn toml_u64<'de, D: serde::Deserializer<'de>>(d: D) -> Result<u64, D::Error> {
    let n = u64::deserialize(d)?;
    if n > MAX_INTEGER {
        return Err(serde::de::Error::custom(format!(
            "integer {n} is larger than a manifest holds (at most {MAX_INTEGER})"
        )));
    }
    Ok(n)
}

/// Output format of a manifest.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ManifestFormat {
    /// TOML, the default.
    Toml,
    /// JSON, one object.
    Json,
}

impl Content {
    /// `sha256:` + the hex SHA-256 of this content's canonical JSON: struct fields in declaration
    /// order, maps sorted by key, lists sorted by the collectors, no whitespace.
    pub fn fingerprint(&self) -> String {
        // Streamed into the hash through a small buffer: a large manifest's canonical JSON
        // (megabytes) is never held whole.
        // (sha2's hash is itself an `io::Write`.)
        let mut w = std::io::BufWriter::with_capacity(64 * 1024, Sha256::new());
        serde_json::to_writer(&mut w, self).expect("manifest content always serializes");
        let h = w
            .into_inner()
            .unwrap_or_else(|_| unreachable!("writing to a hash cannot fail"));
        format!("sha256:{}", hex(&h.finalize()))
    }
}

/// The parts of a manifest that do not depend on its `[run]` and `[git]` sections, made ahead
/// of time: a stamp prepares them while git's status is still running, and then only the
/// small head is left to serialize.
///
/// Both parts are cut from serializations of the content with a placeholder `git` section
/// whose branch is a string unique to the call: the canonical JSON after the `git` field
/// (`{"git":…,` + the rest, since `git` is the content's first field), and the TOML text after
/// the `[git]` table. [`Manifest::new_prepared`] and [`Manifest::render_prepared`] put a
/// manifest together from them byte for byte as [`Manifest::new`] and [`Manifest::render`]
/// would (a test compares the two on many manifests).
#[derive(Debug, Clone)]
pub struct Prepared {
    /// Canonical JSON of the content after the `git` field, from its leading comma.
    json_tail: Vec<u8>,
    /// TOML from the end of the `[git]` table to the end of the document.
    toml_tail: String,
}

impl Prepared {
    /// Adds the `[scope]` section, the content's last field, to a prepared content that had
    /// none (it is collected after the rest was serialized). `false` when it cannot be
    /// spliced; the manifest is then rendered in full.
    pub fn append_scope(&mut self, scope: &Scope) -> bool {
        RenderedScope::of(scope).is_some_and(|r| self.append_rendered_scope(&r))
    }

    /// As [`Prepared::append_scope`], with the scope already rendered.
    pub fn append_rendered_scope(&mut self, rendered: &RenderedScope) -> bool {
        if self.json_tail.pop() != Some(b'}') {
            return false;
        }
        self.json_tail.extend_from_slice(b",\"scope\":");
        self.json_tail.extend_from_slice(&rendered.json);
        self.json_tail.push(b'}');
        if !self.toml_tail.ends_with('\n') {
            self.toml_tail.push('\n');
        }
        self.toml_tail.push('\n');
        self.toml_tail.push_str(&rendered.toml);
        true
    }
}

/// A scope's canonical JSON and its TOML table, as the last section of a manifest: a warm
/// stamp renders the remembered scope while git's status runs.
#[derive(Debug, Clone)]
pub struct RenderedScope {
    json: Vec<u8>,
    toml: String,
}

impl RenderedScope {
    /// Renders `scope`; `None` if it cannot be serialized.
    pub fn of(scope: &Scope) -> Option<RenderedScope> {
        #[derive(Serialize)]
        struct Last<'a> {
            scope: &'a Scope,
        }
        Some(RenderedScope {
            json: serde_json::to_vec(scope).ok()?,
            toml: toml::to_string_pretty(&Last { scope }).ok()?,
        })
    }
}

/// The start of a manifest as TOML: what comes before the content's second field.
#[derive(Serialize)]
#[serde(rename_all = "kebab-case")]
struct Head<'a> {
    schema_version: u32,
    fingerprint: &'a str,
    run: &'a RunInfo,
    git: &'a GitInfo,
}

/// A manifest by reference, for serializing one whose parts are borrowed.
#[derive(Serialize)]
#[serde(rename_all = "kebab-case")]
struct ManifestRef<'a> {
    schema_version: u32,
    fingerprint: &'a str,
    run: &'a RunInfo,
    #[serde(flatten)]
    content: &'a Content,
}

/// One lockfile's part of a manifest, serialized on its own: its canonical JSON (an element of
/// the content's `lockfiles` list) and its TOML (`[[lockfiles]]` with its packages).
/// [`Content::prepare`] splices these into the rest of the manifest, so a lockfile taken
/// unchanged from the lockfile cache, which keeps them, is not serialized again.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct LockfileText {
    /// Canonical JSON of the lockfile.
    pub json: String,
    /// The lockfile's tables as a manifest holds them.
    pub toml: String,
}

/// A list of lockfiles alone, serialized as in a manifest.
#[derive(Serialize)]
struct LockfilesRef<'a> {
    lockfiles: [&'a Lockfile; 1],
}

impl LockfileText {
    /// Serializes one lockfile.
    pub fn of(lockfile: &Lockfile) -> Option<LockfileText> {
        Some(LockfileText {
            json: serde_json::to_string(lockfile).ok()?,
            toml: toml::to_string_pretty(&LockfilesRef {
                lockfiles: [lockfile],
            })
            .ok()?,
        })
    }
}

/// `text` with the one occurrence of `from` replaced by `to`; `None` unless it occurs exactly
/// once.
fn replace_once(text: &str, from: &str, to: &str) -> Option<String> {
    let at = text.find(from)?;
    if text[at + from.len()..].contains(from) {
        return None;
    }
    let mut out = String::with_capacity(text.len() - from.len() + to.len());
    out.push_str(&text[..at]);
    out.push_str(to);
    out.push_str(&text[at + from.len()..]);
    Some(out)
}

impl Content {
    /// Prepares the serializations of everything after `git` (see [`Prepared`]); `self.git`
    /// is left as it was. `texts` may hold the serialized form of some lockfiles (by position
    /// in `self.lockfiles`; see [`LockfileText`]); the others are serialized here. `None` when
    /// the output does not have the expected layout.
    pub fn prepare(&mut self, texts: &[Option<LockfileText>]) -> Option<Prepared> {
        static CALLS: std::sync::atomic::AtomicU64 = std::sync::atomic::AtomicU64::new(0);
        let unique = format!(
            "runprint-placeholder-{}-{}-{}",
            std::process::id(),
            CALLS.fetch_add(1, std::sync::atomic::Ordering::Relaxed),
            crate::cache::now_ns()
        );
        let placeholder = GitInfo {
            branch: Some(unique.clone()),
            ..GitInfo::default()
        };
        let real = std::mem::replace(&mut self.git, placeholder);
        let result = self.prepare_with_placeholder(&unique, texts);
        self.git = real;
        result
    }

    /// The JSON and TOML of this content, with the lockfiles serialized one by one and
    /// spliced in where a placeholder lockfile stood.
    fn serialize_spliced(
        &mut self,
        unique: &str,
        texts: &[Option<LockfileText>],
    ) -> Option<(String, String)> {
        let render = |content: &Content| -> Option<(String, String)> {
            let json = serde_json::to_string(content).ok()?;
            let toml = toml::to_string_pretty(&ManifestRef {
                schema_version: SCHEMA_VERSION,
                fingerprint: "",
                run: &RunInfo::default(),
                content,
            })
            .ok()?;
            Some((json, toml))
        };
        if self.lockfiles.is_empty() {
            return render(self);
        }
        let mut parts = Vec::with_capacity(self.lockfiles.len());
        for (i, l) in self.lockfiles.iter().enumerate() {
            match texts.get(i).and_then(Option::as_ref) {
                Some(t) => parts.push(std::borrow::Cow::Borrowed(t)),
                None => parts.push(std::borrow::Cow::Owned(LockfileText::of(l)?)),
            }
        }
        let placeholder = Lockfile {
            packages_omitted: None,
            path: unique.to_string(),
            ..Lockfile::default()
        };
        let own = LockfileText::of(&placeholder)?;
        let lockfiles = std::mem::replace(&mut self.lockfiles, vec![placeholder]);
        let rendered = render(self);
        self.lockfiles = lockfiles;
        let (json, toml) = rendered?;
        let joined_json = parts.iter().map(|t| t.json.as_str()).collect::<Vec<_>>();
        let joined_toml = parts.iter().map(|t| t.toml.as_str()).collect::<Vec<_>>();
        Some((
            replace_once(&json, &own.json, &joined_json.join(","))?,
            replace_once(&toml, &own.toml, &joined_toml.join("\n"))?,
        ))
    }

    fn prepare_with_placeholder(
        &mut self,
        unique: &str,
        texts: &[Option<LockfileText>],
    ) -> Option<Prepared> {
        let (json, mut toml) = self.serialize_spliced(unique, texts)?;
        let mut head = b"{\"git\":".to_vec();
        head.extend(serde_json::to_vec(&self.git).ok()?);
        head.push(b',');
        let mut json_tail = json.into_bytes();
        if !json_tail.starts_with(&head) {
            return None;
        }
        json_tail.drain(..head.len());
        // The placeholder's only key after `present`; the next line ends the table.
        let line = format!("\nbranch = \"{unique}\"\n");
        let at = toml.find(&line)? + line.len();
        let toml_tail = toml.split_off(at);
        toml_tail.starts_with("\n[").then_some(Prepared {
            json_tail,
            toml_tail,
        })
    }

    /// As [`Content::fingerprint`], from this content's `git` and the rest as `prepared`.
    fn fingerprint_prepared(&self, prepared: &Prepared) -> String {
        let mut h = Sha256::new();
        h.update(b"{\"git\":");
        h.update(serde_json::to_vec(&self.git).expect("git facts always serialize"));
        h.update(b",");
        h.update(&prepared.json_tail);
        format!("sha256:{}", hex(&h.finalize()))
    }
}

impl Manifest {
    /// Builds a manifest and computes its fingerprint.
    pub fn new(run: RunInfo, content: Content) -> Manifest {
        Manifest {
            schema_version: SCHEMA_VERSION,
            fingerprint: content.fingerprint(),
            run,
            content,
        }
    }

    /// As [`Manifest::new`], with the fingerprint computed from `prepared`, which must have
    /// been made by [`Content::prepare`] from this content (any `git`).
    pub fn new_prepared(run: RunInfo, content: Content, prepared: Option<&Prepared>) -> Manifest {
        match prepared {
            Some(p) => Manifest {
                schema_version: SCHEMA_VERSION,
                fingerprint: content.fingerprint_prepared(p),
                run,
                content,
            },
            None => Manifest::new(run, content),
        }
    }

    /// As [`Manifest::render`], taking everything after `[git]` from `prepared`, which must
    /// have been made from this manifest's content. JSON is always rendered in full.
    pub fn render_prepared(&self, format: ManifestFormat, prepared: Option<&Prepared>) -> String {
        match (format, prepared) {
            (ManifestFormat::Toml, Some(p)) => {
                let head = toml::to_string_pretty(&Head {
                    schema_version: self.schema_version,
                    fingerprint: &self.fingerprint,
                    run: &self.run,
                    git: &self.content.git,
                })
                .expect("manifest always serializes to TOML");
                head + &p.toml_tail
            }
            _ => self.render(format),
        }
    }

    /// Renders the manifest (as [`Manifest::render_prepared`]) so that runprint can read it
    /// back: while the text is larger than `limit` bytes (the size runprint reads,
    /// [`crate::limits::max_file_bytes`]) and a lockfile still lists packages, the one with the
    /// most packages is recorded by its digest alone, with a warning, and the fingerprint is
    /// computed again. Returns the manifest as written, its text, and the warnings added.
    pub fn fit_within(
        mut self,
        format: ManifestFormat,
        prepared: Option<&Prepared>,
        limit: u64,
    ) -> (Manifest, String, Vec<String>) {
        let mut text = self.render_prepared(format, prepared);
        let mut added = Vec::new();
        while text.len() as u64 > limit {
            let biggest = (0..self.content.lockfiles.len())
                .filter(|&i| !self.content.lockfiles[i].packages.is_empty())
                .max_by_key(|&i| self.content.lockfiles[i].packages.len());
            let Some(i) = biggest else { break };
            let l = &mut self.content.lockfiles[i];
            let warning = format!(
                "lockfile `{}`: its {} packages were left out to keep the manifest under the \
                 {limit}-byte limit for files runprint reads; recorded by its digest alone",
                l.path,
                l.packages.len()
            );
            l.omit_packages();
            self.run.warnings.push(warning.clone());
            added.push(warning);
            self.fingerprint = self.content.fingerprint();
            text = self.render(format);
        }
        (self, text, added)
    }

    /// The first 12 hex digits of the fingerprint, for people.
    pub fn short_fingerprint(&self) -> &str {
        let hexpart = self
            .fingerprint
            .strip_prefix("sha256:")
            .unwrap_or(&self.fingerprint);
        &hexpart[..hexpart.len().min(12)]
    }

    /// True when the stored fingerprint no longer matches the content: the file was edited
    /// after stamping.
    pub fn is_modified(&self) -> bool {
        self.fingerprint != self.content.fingerprint()
    }

    /// Serializes in the given format, with a trailing newline.
    pub fn render(&self, format: ManifestFormat) -> String {
        match format {
            ManifestFormat::Toml => {
                toml::to_string_pretty(self).expect("manifest always serializes to TOML")
            }
            ManifestFormat::Json => {
                let mut s = serde_json::to_string_pretty(self).expect("manifest always serializes");
                s.push('\n');
                s
            }
        }
    }

    /// Parses a manifest from text; `path` only names the file in errors. JSON is recognised by
    /// a leading `{`, anything else is read as TOML.
    pub fn parse(text: &str, path: &Path) -> Result<Manifest, ManifestError> {
        let text = text.strip_prefix('\u{feff}').unwrap_or(text);
        let parsed: Result<Manifest, ManifestError> = if text.trim_start().starts_with('{') {
            serde_json::from_str(text).map_err(|e| ManifestError::Syntax {
                path: path.to_path_buf(),
                line: Some(e.line()),
                message: e.to_string(),
            })
        } else if let Some(m) = crate::toml_events::from_str::<Manifest>(text) {
            // A manifest as runprint writes it, read without building the document first.
            Ok(m)
        } else {
            toml::from_str(text).map_err(|e| {
                let line = e
                    .span()
                    .map(|span| text[..span.start.min(text.len())].matches('\n').count() + 1);
                ManifestError::Syntax {
                    path: path.to_path_buf(),
                    line,
                    message: e.message().to_string(),
                }
            })
        };
        // Neither TOML nor JSON admits a control character other than tab and line ends, so
        // only a text that did not parse is searched for one: it then explains the failure.
        let manifest = parsed.map_err(|e| match crate::lockfile::find_control_character(text) {
            Some((offset, c)) => ManifestError::Syntax {
                path: path.to_path_buf(),
                line: Some(crate::lockfile::line_of(text, offset)),
                message: format!(
                    "control character U+{:04X}: not a text file (binary or damaged?)",
                    c as u32
                ),
            },
            None => e,
        })?;
        if manifest.schema_version == 0 || manifest.schema_version > SCHEMA_VERSION {
            return Err(ManifestError::UnsupportedVersion {
                path: path.to_path_buf(),
                found: manifest.schema_version,
                supported: SCHEMA_VERSION,
            });
        }
        Ok(manifest)
    }

    /// Reads and parses a manifest file.
    pub fn load(path: &Path) -> Result<Manifest, ManifestError> {
        let bytes = crate::limits::read_named_file(path).map_err(|source| ManifestError::Read {
            path: path.to_path_buf(),
            source,
        })?;
        let text = String::from_utf8(bytes).map_err(|e| ManifestError::Syntax {
            path: path.to_path_buf(),
            line: Some(
                e.as_bytes()[..e.utf8_error().valid_up_to()]
                    .iter()
                    .filter(|&&b| b == b'\n')
                    .count()
                    + 1,
            ),
            message: format!(
                "not UTF-8 text (invalid byte at offset {})",
                e.utf8_error().valid_up_to()
            ),
        })?;
        Manifest::parse(&text, path)
    }
}

/// Lower-case hex of bytes.
pub fn hex(bytes: &[u8]) -> String {
    use std::fmt::Write;
    bytes
        .iter()
        .fold(String::with_capacity(bytes.len() * 2), |mut s, b| {
            let _ = write!(s, "{b:02x}");
            s
        })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Manifests built from prepared parts equal those built in full, byte for byte: the
    /// demo manifests, the manifest corpus, and variations of them whose git and run
    /// sections hold what could confuse the cut (multi-line text with table headers in it,
    /// quotes, submodules, a section missing).
    #[test]
    fn prepared_parts_give_the_same_manifest_as_a_full_rendering() {
        let mut bases = written_samples();
        // Several lockfiles, one without packages, one whose path needs quoting.
        let mut many = bases[1].clone();
        let first = many.content.lockfiles[0].clone();
        for (i, path) in ["b/\"odd\" path.lock", "c/empty.lock", "d/uv.lock"]
            .iter()
            .enumerate()
        {
            let mut l = first.clone();
            l.path = path.to_string();
            if i == 1 {
                l.packages.clear();
            }
            many.content.lockfiles.push(l);
        }
        bases.push(many);
        let gits = |base: &GitInfo| {
            let mut out = vec![base.clone(), GitInfo::default()];
            out.push(GitInfo {
                present: true,
                branch: Some("feat/\"quoted\"\n[system]".into()),
                detached: true,
                dirty: true,
                dirty_digest: Some("sha256:00".into()),
                changed_paths: vec!["a".into(), "[system]".into()],
                remote: Some("https://example.invalid/r.git".into()),
                submodules: vec![Submodule {
                    path: "vendor/lib".into(),
                    commit: Some("ab".into()),
                }],
                patch: Some("--- a/x\n+++ b/x\n\n[system]\nos = \"x\"\n\n[[lockfiles]]\n".into()),
                ..base.clone()
            });
            out
        };
        let mut checked = 0;
        for base in &bases {
            let mut variants = vec![base.content.clone()];
            let mut bare = base.content.clone();
            bare.lockfiles.clear();
            bare.python.clear();
            bare.native = NativeInfo::default();
            bare.gpu = None;
            variants.push(bare);
            for content in variants {
                for git in gits(&content.git) {
                    let mut run = base.run.clone();
                    run.label = Some("line one\n\n[git]\nbranch = \"x\"".into());
                    run.warnings.push("a \"warning\"".into());
                    let mut full_content = content.clone();
                    full_content.git = git.clone();
                    let full = Manifest::new(run.clone(), full_content.clone());
                    // Prepared with another git section, as a stamp does before git answers.
                    let mut early = full_content.clone();
                    early.git = GitInfo::default();
                    // Without serialized lockfiles, with all of them, with every other one.
                    let all: Vec<Option<LockfileText>> =
                        early.lockfiles.iter().map(LockfileText::of).collect();
                    let some: Vec<Option<LockfileText>> = all
                        .iter()
                        .enumerate()
                        .map(|(i, t)| t.clone().filter(|_| i % 2 == 0))
                        .collect();
                    for texts in [Vec::new(), all, some] {
                        let prepared = early.prepare(&texts).expect("the expected layout");
                        assert_eq!(early.git, GitInfo::default(), "prepare restores git");
                        let mut content = early.clone();
                        content.git = git.clone();
                        let fast = Manifest::new_prepared(run.clone(), content, Some(&prepared));
                        assert_eq!(fast, full);
                        assert_eq!(
                            fast.render_prepared(ManifestFormat::Toml, Some(&prepared)),
                            full.render(ManifestFormat::Toml)
                        );
                        assert_eq!(
                            fast.render_prepared(ManifestFormat::Json, Some(&prepared)),
                            full.render(ManifestFormat::Json)
                        );
                    }
                    checked += 1;
                }
            }
        }
        assert_eq!(checked, bases.len() * 2 * 3);
    }

    /// Manifests as runprint writes them are read by the event reader (the fast path is
    /// taken), and it gives what the `toml` crate gives: the demo manifests, the corpus seeds
    /// and a sample with every section, a scope and keys that need quoting and escapes.
    #[test]
    fn written_manifests_take_the_event_reader_and_read_as_toml_reads_them() {
        let mut all = written_samples();
        let mut scoped = sample();
        scoped.content.scope = Some(Scope {
            entry: vec!["train.py".into()],
            complete: true,
            files: [
                ("kelp/\"odd\" name.py".to_string(), "ab".to_string()),
                ("train.py".to_string(), "cd".to_string()),
            ]
            .into_iter()
            .collect(),
            notes: vec!["tab\there, unicode é, newline\n".into()],
            ..Scope::default()
        });
        all.push(scoped);
        for m in all {
            let text = m.render(ManifestFormat::Toml);
            let fast: Manifest = crate::toml_events::from_str(&text)
                .unwrap_or_else(|| panic!("the event reader gave up on\n{text}"));
            let full: Manifest = toml::from_str(&text).unwrap();
            assert_eq!(fast, full);
            assert_eq!(fast, m);
        }
    }

    /// A control character (not a text file) is named with its line, in TOML and in JSON, as
    /// neither format admits one (TOML v1.0.0 and RFC 8259: only tab and line ends).
    #[test]
    fn a_control_character_is_named_with_its_line() {
        let toml = sample().render(ManifestFormat::Toml);
        let json = sample().render(ManifestFormat::Json);
        for text in [toml, json] {
            let second = text.find('\n').unwrap() + 1;
            let mut damaged = text.clone();
            damaged.insert(second + 2, '\0');
            let e = Manifest::parse(&damaged, Path::new("m.toml")).unwrap_err();
            let shown = e.to_string();
            assert!(
                shown.contains("U+0000") && shown.contains("line 2"),
                "{shown}"
            );
        }
    }

    /// [`sample`], the demo manifests and the corpus seeds.
    fn written_samples() -> Vec<Manifest> {
        let root = Path::new(env!("CARGO_MANIFEST_DIR"));
        let mut all = vec![sample()];
        for rel in [
            "fixtures/demo/baseline.toml",
            "fixtures/demo/candidate.toml",
            "tests/corpus/manifest/good/seed",
            "tests/corpus/manifest/good/crlf",
            "tests/corpus/manifest/good/bom",
        ] {
            all.push(Manifest::load(&root.join(rel)).unwrap());
        }
        all
    }

    fn sample() -> Manifest {
        let mut content = Content::default();
        content.git.present = true;
        content.git.commit = Some("0123456789abcdef0123456789abcdef01234567".into());
        content.cpu.arch = "x86_64".into();
        content.cpu.features = vec!["avx2".into(), "fma".into()];
        content
            .env
            .vars
            .insert("OMP_NUM_THREADS".into(), "4".into());
        content.lockfiles.push(Lockfile {
            packages_omitted: None,
            path: "Cargo.lock".into(),
            ecosystem: "cargo".into(),
            format_version: Some("4".into()),
            sha256: "ab".into(),
            packages: vec![Package {
                name: "ndarray".into(),
                version: "0.16.1".into(),
                features: vec!["std".into()],
                ..Package::default()
            }],
        });
        Manifest::new(
            RunInfo {
                tool_version: "0.1.0".into(),
                created: "2026-01-01T00:00:00Z".into(),
                label: Some("demo".into()),
                hostname: Some("node-1".into()),
                warnings: vec![],
            },
            content,
        )
    }

    #[test]
    fn toml_and_json_round_trip_keep_the_fingerprint_valid() {
        let m = sample();
        for format in [ManifestFormat::Toml, ManifestFormat::Json] {
            let text = m.render(format);
            let back = Manifest::parse(&text, Path::new("m")).unwrap();
            assert_eq!(back, m);
            assert!(!back.is_modified());
        }
    }

    #[test]
    fn run_info_does_not_enter_the_fingerprint() {
        let a = sample();
        let mut b = sample();
        b.run.created = "2027-01-01T00:00:00Z".into();
        b.run.hostname = Some("other".into());
        b.run.label = None;
        b = Manifest::new(b.run, b.content);
        assert_eq!(a.fingerprint, b.fingerprint);
    }

    #[test]
    fn an_edited_value_is_detected() {
        let text = sample()
            .render(ManifestFormat::Toml)
            .replace("\"4\"", "\"8\"");
        let back = Manifest::parse(&text, Path::new("m")).unwrap();
        assert!(back.is_modified());
    }

    #[test]
    fn syntax_errors_name_file_and_line() {
        let err = Manifest::parse(
            "schema-version = 1\nfingerprint = \n",
            Path::new("bad.toml"),
        )
        .unwrap_err()
        .to_string();
        assert!(err.contains("bad.toml"), "{err}");
        assert!(err.contains("line 2"), "{err}");
    }

    #[test]
    fn newer_schema_is_refused() {
        let text = sample()
            .render(ManifestFormat::Toml)
            .replace("schema-version = 1", "schema-version = 99");
        let err = Manifest::parse(&text, Path::new("m.toml")).unwrap_err();
        assert!(err.to_string().contains("99"));
    }
}
