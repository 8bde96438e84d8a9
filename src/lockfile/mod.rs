//! Lockfile formats. Each submodule is a pure parser from text to [`Parsed`]; the file name
//! decides which one applies ([`Format::detect`]). Discovery on disk lives in
//! [`crate::collect::lockfiles`].
//!
//! To add a format: write `parse(text, path) -> Result<Parsed, LockfileError>` in a new module,
//! add a [`Format`] variant, teach [`Format::detect`] its file names and [`Format::parse`] to call
//! it. Comparison and rendering need nothing more.

pub mod cargo;
pub mod conda;
pub mod condalock;
pub mod dockerfile;
pub mod golang;
pub mod julia;
pub mod npm;
pub mod nuget;
pub mod pdm;
pub mod pipfile;
pub mod pnpm;
pub mod poetry;
pub mod pylock;
pub mod pyproject;
pub(crate) mod python;
pub mod renv;
pub mod requirements;
mod support;
pub mod toolchain;
pub mod uv;
pub mod yarn;

use crate::error::LockfileError;
use crate::manifest::{Lockfile, Package};

/// What a parser returns.
#[derive(Debug, Default)]
pub struct Parsed {
    /// The format's own version marker, where it has one.
    pub format_version: Option<String>,
    /// Packages, sorted.
    pub packages: Vec<Package>,
    /// Problems that did not stop the parse (an unknown format version, say).
    pub warnings: Vec<String>,
    /// Other files this one pulls in (`-r`/`-c` in requirements files), as written. Parsers
    /// never read them; [`crate::collect::lockfiles`] does.
    pub includes: Vec<Include>,
}

impl Parsed {
    /// A parse result with its packages sorted (and exact duplicates dropped), no includes.
    pub(crate) fn sorted(
        format_version: Option<String>,
        mut packages: Vec<Package>,
        warnings: Vec<String>,
    ) -> Parsed {
        support::sort_packages(&mut packages);
        Parsed {
            format_version,
            packages,
            warnings,
            includes: Vec::new(),
        }
    }
}

/// A file named inside another, whose packages belong to the includer.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Include {
    /// The target as written (a path relative to the including file, or a URL).
    pub target: String,
    /// True for constraints files (`-c`): their pins apply only to packages something else
    /// asks for, so their entries are recorded as optional.
    pub constraints_only: bool,
}

/// Declares [`Format`] with [`Format::ALL`] and [`Format::example_name`] from one list, so
/// that a new format is added in one place and every table that iterates formats (the tests,
/// the fuzz targets' check, the corpus) sees it.
macro_rules! formats {
    ($($(#[$doc:meta])* $variant:ident => $example:literal,)*) => {
        /// Supported lockfile, dependency-input and toolchain-pin formats.
        #[derive(Debug, Clone, Copy, PartialEq, Eq)]
        pub enum Format {
            $($(#[$doc])* $variant,)*
        }

        impl Format {
            /// Every format, in declaration order.
            pub const ALL: &'static [Format] = &[$(Format::$variant,)*];

            /// A file name the format is detected from (`Cargo.lock`, `.python-version`…).
            pub fn example_name(self) -> &'static str {
                match self {
                    $(Format::$variant => $example,)*
                }
            }
        }
    };
}

formats! {
    /// Rust's `Cargo.lock`.
    CargoLock => "Cargo.lock",
    /// pip's `requirements*.txt`.
    Requirements => "requirements.txt",
    /// npm's `package-lock.json` or `npm-shrinkwrap.json`.
    NpmLock => "package-lock.json",
    /// `yarn.lock`, Yarn classic (v1) or Yarn 2 and later.
    YarnLock => "yarn.lock",
    /// `pnpm-lock.yaml`.
    PnpmLock => "pnpm-lock.yaml",
    /// Go's `go.mod`, read with the `go.sum` beside it (see [`Format::companion`]).
    GoMod => "go.mod",
    /// NuGet's `packages.lock.json`.
    NugetLock => "packages.lock.json",
    /// R's `renv.lock`.
    RenvLock => "renv.lock",
    /// Julia's `Manifest.toml` (and `Manifest-vX.Y.toml`).
    JuliaManifest => "Manifest.toml",
    /// PEP 751 `pylock.toml` and `pylock.NAME.toml`.
    Pylock => "pylock.toml",
    /// Poetry's `poetry.lock`.
    PoetryLock => "poetry.lock",
    /// pipenv's `Pipfile.lock`.
    PipfileLock => "Pipfile.lock",
    /// uv's `uv.lock`.
    UvLock => "uv.lock",
    /// PDM's `pdm.lock`.
    PdmLock => "pdm.lock",
    /// conda's `environment.yml` (or `.yaml`).
    CondaEnvironment => "environment.yml",
    /// conda's explicit spec files (`@EXPLICIT`), as `conda list --explicit` writes them.
    CondaExplicit => "spec-file.txt",
    /// Container recipes (`Dockerfile`, `Containerfile`): their base images.
    Dockerfile => "Dockerfile",
    /// pip-tools' inputs, `requirements*.in`: requirements-file syntax, declared ranges.
    RequirementsIn => "requirements.in",
    /// `pyproject.toml`: PEP 621 and PEP 735 dependency lists, Poetry's tables.
    Pyproject => "pyproject.toml",
    /// setuptools' `setup.cfg`: `install_requires` and `extras_require`.
    SetupCfg => "setup.cfg",
    /// `.python-version`.
    PythonVersion => ".python-version",
    /// `rust-toolchain.toml` and the legacy `rust-toolchain`.
    RustToolchain => "rust-toolchain.toml",
    /// `.nvmrc` and `.node-version`.
    NodeVersion => ".nvmrc",
    /// conda-lock's unified `conda-lock.yml`.
    CondaLock => "conda-lock.yml",
    /// pixi's `pixi.lock`.
    PixiLock => "pixi.lock",
}

/// A pip requirements or constraints file by its name: `*requirements*.txt`
/// (`requirements-dev.txt`, `test-requirements.txt`, `nvidia-requirements.txt`) and
/// `*constraints*.txt`, the names projects give the files pip reads with `-r` and `-c`
/// (common practice; pip's "Requirements File Format" and "Constraints Files").
fn is_requirements_name(file_name: &str) -> bool {
    let lower = file_name.to_ascii_lowercase();
    lower.ends_with(".txt") && (lower.contains("requirements") || lower.contains("constraints"))
}

/// pip-tools' input files by name: `requirements.in`, `dev-requirements.in`,
/// `requirements-gpu.in` (pip-tools README, "Example usage for pip-compile"; common practice).
fn is_requirements_input_name(file_name: &str) -> bool {
    let lower = file_name.to_ascii_lowercase();
    lower.ends_with(".in") && (lower.contains("requirements") || lower.contains("constraints"))
}

impl Format {
    /// The format of the file at `path` (relative, `/`-separated): by its name ([`detect`]),
    /// and any `.txt` file in a `requirements/` folder (`requirements/base.txt`,
    /// `requirements/gpu/cuda12.txt`), as projects split their pip requirements.
    ///
    /// [`detect`]: Format::detect
    pub fn detect_path(path: &str) -> Option<Format> {
        let mut segments = path.rsplit('/');
        let name = segments.next().unwrap_or(path);
        Format::detect(name).or_else(|| {
            let in_requirements = segments.any(|d| d == "requirements");
            if name.ends_with(".txt") && in_requirements {
                Some(Format::Requirements)
            } else if name.ends_with(".in") && in_requirements {
                Some(Format::RequirementsIn)
            } else {
                None
            }
        })
    }

    /// The format of a file, judged by its name.
    pub fn detect(file_name: &str) -> Option<Format> {
        if file_name == "Cargo.lock" {
            Some(Format::CargoLock)
        } else if is_requirements_name(file_name) {
            Some(Format::Requirements)
        } else if is_requirements_input_name(file_name) {
            Some(Format::RequirementsIn)
        } else if pylock::is_pylock_name(file_name) {
            Some(Format::Pylock)
        } else {
            match file_name {
                "package-lock.json" | "npm-shrinkwrap.json" => Some(Format::NpmLock),
                "yarn.lock" => Some(Format::YarnLock),
                "pnpm-lock.yaml" => Some(Format::PnpmLock),
                "go.mod" => Some(Format::GoMod),
                "packages.lock.json" => Some(Format::NugetLock),
                "renv.lock" => Some(Format::RenvLock),
                "Manifest.toml" => Some(Format::JuliaManifest),
                // Version-specific manifests, `Manifest-v1.11.toml` (Pkg.jl documentation,
                // "Project.toml and Manifest.toml").
                n if n.starts_with("Manifest-v") && n.ends_with(".toml") => {
                    Some(Format::JuliaManifest)
                }
                "poetry.lock" => Some(Format::PoetryLock),
                "Pipfile.lock" => Some(Format::PipfileLock),
                "uv.lock" => Some(Format::UvLock),
                "pdm.lock" => Some(Format::PdmLock),
                "pyproject.toml" => Some(Format::Pyproject),
                "pixi.lock" => Some(Format::PixiLock),
                _ if condalock::is_conda_lock_name(file_name) => Some(Format::CondaLock),
                "setup.cfg" => Some(Format::SetupCfg),
                ".python-version" => Some(Format::PythonVersion),
                "rust-toolchain" | "rust-toolchain.toml" => Some(Format::RustToolchain),
                ".nvmrc" | ".node-version" => Some(Format::NodeVersion),
                _ if conda::is_environment_name(file_name) => Some(Format::CondaEnvironment),
                _ if conda::is_explicit_name(file_name) => Some(Format::CondaExplicit),
                _ if dockerfile::is_dockerfile_name(file_name) => Some(Format::Dockerfile),
                _ => None,
            }
        }
    }

    /// The ecosystem's name as written in manifests.
    pub fn ecosystem(self) -> &'static str {
        match self {
            Format::CargoLock => "cargo",
            Format::NpmLock | Format::YarnLock | Format::PnpmLock => "npm",
            Format::GoMod => "go",
            Format::NugetLock => "nuget",
            Format::RenvLock => "cran",
            Format::JuliaManifest => "julia",
            Format::Requirements
            | Format::Pylock
            | Format::PoetryLock
            | Format::PipfileLock
            | Format::UvLock
            | Format::PdmLock
            | Format::RequirementsIn
            | Format::Pyproject
            | Format::SetupCfg => "pypi",
            Format::PythonVersion | Format::RustToolchain | Format::NodeVersion => "toolchain",
            Format::CondaEnvironment
            | Format::CondaExplicit
            | Format::CondaLock
            | Format::PixiLock => "conda",
            Format::Dockerfile => "oci",
        }
    }

    /// Parses a file of this format.
    pub fn parse(self, text: &str, path: &str) -> Result<Parsed, LockfileError> {
        if matches!(
            self,
            Format::PnpmLock
                | Format::YarnLock
                | Format::CondaEnvironment
                | Format::CondaLock
                | Format::PixiLock
        ) {
            support::check_yaml_depth(text, path)?;
        }
        let parsed = match self {
            Format::CargoLock => cargo::parse(text, path),
            Format::Requirements => requirements::parse(text, path),
            Format::NpmLock => npm::parse(text, path),
            Format::YarnLock => yarn::parse(text, path),
            Format::PnpmLock => pnpm::parse(text, path),
            Format::GoMod => golang::parse(text, path, None),
            Format::NugetLock => nuget::parse(text, path),
            Format::RenvLock => renv::parse(text, path),
            Format::JuliaManifest => julia::parse(text, path),
            Format::Pylock => pylock::parse(text, path),
            Format::PoetryLock => poetry::parse(text, path),
            Format::PipfileLock => pipfile::parse(text, path),
            Format::UvLock => uv::parse(text, path),
            Format::PdmLock => pdm::parse(text, path),
            Format::CondaEnvironment => conda::parse_environment(text, path),
            Format::CondaExplicit => conda::parse_explicit(text, path),
            Format::Dockerfile => dockerfile::parse(text, path),
            Format::RequirementsIn => requirements::parse(text, path),
            Format::Pyproject => pyproject::parse_pyproject(text, path),
            Format::SetupCfg => pyproject::parse_setup_cfg(text, path),
            Format::PythonVersion => toolchain::parse_python_version(text, path),
            Format::RustToolchain => toolchain::parse_rust_toolchain(text, path),
            Format::NodeVersion => toolchain::parse_node_version(text, path),
            Format::CondaLock => condalock::parse_conda_lock(text, path),
            Format::PixiLock => condalock::parse_pixi(text, path),
        };
        parsed.map(|p| without_nameless(p, path))
    }

    /// A dependency input: the ranges a project declares, which a locker or an installer
    /// resolves. A lockfile of the same ecosystem beside it (or above it, for a workspace)
    /// decides what is installed.
    pub fn is_input(self) -> bool {
        matches!(
            self,
            Format::RequirementsIn | Format::Pyproject | Format::SetupCfg
        )
    }

    /// A second file, in the same folder, that this format reads together with the first:
    /// `go.sum` beside `go.mod`.
    pub fn companion(self) -> Option<&'static str> {
        match self {
            Format::GoMod => Some("go.sum"),
            _ => None,
        }
    }

    /// Parses a file of this format together with its [`companion`](Format::companion), given
    /// as `(text, path)` when it exists. Formats without a companion ignore it.
    pub fn parse_with_companion(
        self,
        text: &str,
        path: &str,
        companion: Option<(&str, &str)>,
    ) -> Result<Parsed, LockfileError> {
        match self {
            Format::GoMod => {
                golang::parse(text, path, companion).map(|p| without_nameless(p, path))
            }
            _ => self.parse(text, path),
        }
    }
}

/// Is this entry a dependency input or a toolchain pin rather than a lockfile?
pub fn is_input_or_pin(l: &Lockfile) -> bool {
    l.ecosystem == "toolchain" || Format::detect_path(&l.path).is_some_and(|f| f.is_input())
}

/// The lockfile that decides what an input installs: one of the same ecosystem, not itself
/// an input, in the input's folder or a folder above it (a workspace's root), whose packages
/// are all pinned. The nearest one wins.
pub fn deciding_lockfile<'a>(input: &Lockfile, all: &'a [Lockfile]) -> Option<&'a Lockfile> {
    if !Format::detect_path(&input.path).is_some_and(|f| f.is_input()) {
        return None;
    }
    let folder = |p: &str| p.rsplit_once('/').map_or("", |(d, _)| d).to_string();
    let dir = folder(&input.path);
    all.iter()
        .filter(|l| l.ecosystem == input.ecosystem && !is_input_or_pin(l))
        .filter(|l| {
            l.packages_omitted.is_some()
                || l.packages
                    .iter()
                    .all(|p| !crate::version::is_range(&p.version) || p.source.is_some())
        })
        .filter(|l| {
            let d = folder(&l.path);
            d.is_empty() || dir == d || dir.starts_with(&format!("{d}/"))
        })
        .max_by_key(|l| folder(&l.path).len())
}

/// Every format names each package; an entry whose name is empty is damage, whatever the
/// format (fuzzing found such entries read from `pdm.lock`, `package-lock.json`, conda and
/// `go.mod` files). It is left out with a warning rather than recorded as a nameless package.
fn without_nameless(mut parsed: Parsed, path: &str) -> Parsed {
    let before = parsed.packages.len();
    parsed.packages.retain(|p| !p.name.trim().is_empty());
    match before - parsed.packages.len() {
        0 => {}
        1 => parsed.warnings.push(format!(
            "`{path}`: a package entry without a name was skipped"
        )),
        n => parsed.warnings.push(format!(
            "`{path}`: {n} package entries without a name were skipped"
        )),
    }
    parsed
}

/// A lockfile's bytes as text: UTF-8, with a leading byte-order mark dropped (editors on
/// Windows add one; every format here is UTF-8 and none gives the mark a meaning). Anything
/// else is an error naming the file and the line of the first invalid byte.
pub fn decode<'a>(bytes: &'a [u8], path: &str) -> Result<&'a str, LockfileError> {
    let bytes = bytes.strip_prefix(b"\xef\xbb\xbf").unwrap_or(bytes);
    let text = std::str::from_utf8(bytes).map_err(|e| {
        let valid = e.valid_up_to();
        let line = bytes[..valid].iter().filter(|&&b| b == b'\n').count() + 1;
        LockfileError::at(
            path,
            Some(line),
            format!("not UTF-8 text (invalid byte at offset {valid})"),
        )
    })?;
    match find_control_character(text) {
        Some((offset, c)) => Err(LockfileError::at(
            path,
            Some(line_of(text, offset)),
            format!(
                "control character U+{:04X} at offset {offset}: not a text file (binary or damaged?)",
                c as u32
            ),
        )),
        None => Ok(text),
    }
}

/// The first C0 control character other than tab, line feed, carriage return and form feed,
/// with its byte offset. None of the formats read here allows one outside escapes: TOML 1.0.0
/// ("Control characters other than tab are not permitted"), RFC 8259 section 7 for JSON
/// strings, YAML 1.2 section 5.1 (printable characters only), and the PEP 508 grammar.
pub fn find_control_character(text: &str) -> Option<(usize, char)> {
    text.char_indices()
        .find(|&(_, c)| c < ' ' && !matches!(c, '\t' | '\n' | '\r' | '\x0c'))
}

/// Parses a lockfile for a collector: a parse error and the parser's own warnings go to
/// `warnings` (a broken lockfile never stops a stamp), and `None` stands for a file left out.
pub fn parse_or_warn(
    format: Format,
    text: &str,
    path: &str,
    companion: Option<(&str, &str)>,
    warnings: &mut Vec<String>,
) -> Option<Parsed> {
    match format.parse_with_companion(text, path, companion) {
        Ok(mut parsed) => {
            warnings.extend(
                parsed
                    .warnings
                    .drain(..)
                    .map(|w| crate::redact::content_free(&w)),
            );
            Some(parsed)
        }
        Err(e) => {
            warnings.push(format!("lockfile {e}"));
            None
        }
    }
}

/// Line numbers of byte offsets in one text, each found by binary search over the offsets of
/// its line feeds (counted once), so that numbering every entry of a large file stays linear.
#[derive(Debug, Clone)]
pub struct LineIndex {
    newlines: Vec<usize>,
}

impl LineIndex {
    /// The index of a text.
    pub fn new(text: &str) -> LineIndex {
        LineIndex {
            newlines: memchr::memchr_iter(b'\n', text.as_bytes()).collect(),
        }
    }

    /// 1-based line of a byte offset (as [`line_of`]).
    pub fn line(&self, offset: usize) -> usize {
        self.newlines.partition_point(|&n| n < offset) + 1
    }
}

/// 1-based line number of a byte offset.
pub fn line_of(text: &str, offset: usize) -> usize {
    let offset = offset.min(text.len());
    text.as_bytes()[..offset]
        .iter()
        .filter(|&&b| b == b'\n')
        .count()
        + 1
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Every format is detected from its example name (and only one format claims it).
    #[test]
    fn every_format_is_detected_from_its_example_name() {
        for &f in Format::ALL {
            assert_eq!(Format::detect(f.example_name()), Some(f), "{f:?}");
        }
        let mut names: Vec<&str> = Format::ALL.iter().map(|f| f.example_name()).collect();
        names.sort_unstable();
        names.dedup();
        assert_eq!(names.len(), Format::ALL.len());
    }

    #[test]
    fn python_file_names() {
        for (name, format) in [
            ("requirements-dev.txt", Format::Requirements),
            ("pylock.toml", Format::Pylock),
            ("pylock.gpu.toml", Format::Pylock),
            ("poetry.lock", Format::PoetryLock),
            ("Pipfile.lock", Format::PipfileLock),
            ("uv.lock", Format::UvLock),
            ("pdm.lock", Format::PdmLock),
            ("environment.yml", Format::CondaEnvironment),
            ("spec-file.txt", Format::CondaExplicit),
        ] {
            assert_eq!(Format::detect(name), Some(format), "{name}");
        }
        assert_eq!(Format::detect("Pipfile"), None);
        assert_eq!(Format::detect("pyproject.toml"), Some(Format::Pyproject));
        assert_eq!(
            Format::detect("requirements-dev.in"),
            Some(Format::RequirementsIn)
        );
        assert_eq!(
            Format::detect_path("requirements/gpu.in"),
            Some(Format::RequirementsIn)
        );
        assert_eq!(
            Format::detect(".python-version"),
            Some(Format::PythonVersion)
        );
        assert_eq!(Format::detect("setup.in"), None);
        assert_eq!(Format::UvLock.ecosystem(), "pypi");
        assert_eq!(Format::CondaExplicit.ecosystem(), "conda");
    }

    /// The names projects give the files pip reads with `-r` and `-c` (common practice), and
    /// a `requirements/` folder of them.
    #[test]
    fn pip_files_by_pattern() {
        for path in [
            "test-requirements.txt",
            "build-requirements.txt",
            "nvidia-requirements.txt",
            "docker/requirements_gpu.txt",
            "constraints.txt",
            "ci/pip-constraints.txt",
            "requirements/base.txt",
            "requirements/gpu/cuda12.txt",
        ] {
            assert_eq!(
                Format::detect_path(path),
                Some(Format::Requirements),
                "{path}"
            );
        }
        for path in [
            "notes.txt",
            "docs/requirements.md",
            "requirements/README.md",
        ] {
            assert_eq!(Format::detect_path(path), None, "{path}");
        }
    }
}
