//! The words shared by the rules ([`crate::diff`]) and a repository's policy file
//! ([`crate::policy`]): the impact of a change and the classes of paths, packages and
//! environment variables. Both sides use these enums, so a class the policy names is the class
//! the rules judge, and neither module imports the other for them.

use serde::{Deserialize, Serialize};

/// How much a change matters, in increasing order.
#[derive(
    Debug, Clone, Copy, Default, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize,
)]
#[serde(rename_all = "lowercase")]
pub enum Impact {
    /// No effect on results is expected.
    #[default]
    None,
    /// Results may shift slightly: rerun and compare metrics.
    Verify,
    /// Results are expected to change: retrain.
    Retrain,
}

impl Impact {
    /// The verdict word.
    pub fn as_str(self) -> &'static str {
        match self {
            Impact::None => "none",
            Impact::Verify => "verify",
            Impact::Retrain => "retrain",
        }
    }

    /// The documented exit code for a verdict: 0 none, 3 verify, 4 retrain.
    pub fn exit_code(self) -> u8 {
        match self {
            Impact::None => 0,
            Impact::Verify => 3,
            Impact::Retrain => 4,
        }
    }
}

impl std::fmt::Display for Impact {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.as_str())
    }
}

/// The manifest section a change belongs to (`section` in the JSON report).
#[derive(
    Debug, Clone, Copy, Default, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize,
)]
#[serde(rename_all = "lowercase")]
pub enum Section {
    /// Source control.
    #[default]
    Git,
    /// Declared data inputs.
    Data,
    /// Lockfiles and their packages.
    Lockfiles,
    /// Python environments and framework builds.
    Python,
    /// BLAS, OpenMP and fast-math modules.
    Native,
    /// The GPU stack.
    Gpu,
    /// A running process (`stamp --pid`).
    Process,
    /// Environment variables.
    Env,
    /// The processor.
    Cpu,
    /// Operating system and C library.
    System,
    /// The stamping itself.
    Run,
}

impl Section {
    /// The word used in reports.
    pub fn as_str(self) -> &'static str {
        match self {
            Section::Git => "git",
            Section::Data => "data",
            Section::Lockfiles => "lockfiles",
            Section::Python => "python",
            Section::Native => "native",
            Section::Gpu => "gpu",
            Section::Process => "process",
            Section::Env => "env",
            Section::Cpu => "cpu",
            Section::System => "system",
            Section::Run => "run",
        }
    }
}

impl PartialEq<&str> for Section {
    fn eq(&self, other: &&str) -> bool {
        self.as_str() == *other
    }
}

impl std::fmt::Display for Section {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.as_str())
    }
}

macro_rules! named_enum {
    ($(#[$m:meta])* $name:ident { $( $(#[$vm:meta])* $variant:ident = $word:literal, )* }) => {
        $(#[$m])*
        #[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
        pub enum $name {
            $( $(#[$vm])* $variant, )*
        }

        impl $name {
            /// Every class, in declaration order.
            pub const ALL: &'static [$name] = &[$($name::$variant),*];

            /// The word used in reports and in the policy file.
            pub fn as_str(self) -> &'static str {
                match self {
                    $( $name::$variant => $word, )*
                }
            }

            /// The class a word names.
            pub fn from_word(word: &str) -> Option<$name> {
                match word {
                    $( $word => Some($name::$variant), )*
                    _ => None,
                }
            }
        }
    };
}

named_enum! {
    /// The class of a changed file. Declaration order is the order of precedence when a
    /// commit changes files of several classes: the first class present decides the rule.
    PathClass {
        /// Training data stored in the repository.
        Data = "data",
        /// Training code (any file not otherwise classed).
        Code = "code",
        /// Configuration.
        Config = "config",
        /// Lockfiles, dependency manifests and dependency inputs.
        Dependencies = "dependencies",
        /// Container, build and environment recipes (Dockerfile, Makefile, Nix).
        Build = "build",
        /// Tests and benchmarks.
        Tests = "tests",
        /// Continuous-integration workflows.
        Ci = "ci",
        /// Notebooks.
        Notebooks = "notebooks",
        /// Repository metadata and developer-tool settings.
        Metadata = "metadata",
        /// Renamed or re-moded files whose content did not change.
        Unchanged = "unchanged",
        /// Documentation.
        Docs = "docs",
        /// Outside the training job's scope (not imported by its entry points).
        OutOfScope = "out-of-scope",
        /// Marked irrelevant by the policy.
        Irrelevant = "irrelevant",
    }
}

named_enum! {
    /// The class a package belongs to for the rules.
    PackageClass {
        /// Does the arithmetic of training or preprocessing.
        Numeric = "numeric",
        /// Not known, ships compiled code.
        Compiled = "compiled",
        /// Not known, pure Python or pure script code.
        Pure = "pure",
        /// Networking, serialization, installers, logging, telemetry, profiling: takes no
        /// part in the arithmetic.
        Infrastructure = "infrastructure",
        /// Helps develop, test or display.
        Tooling = "tooling",
        /// Only needed for development or tests.
        Dev = "dev",
        /// Outside the training job's scope (not reachable from its imports).
        OutOfScope = "out-of-scope",
    }
}

named_enum! {
    /// The class of an environment variable.
    EnvClass {
        /// Changes floating-point precision: retrain.
        Precision = "precision",
        /// Determinism switches and autotuning.
        Determinism = "determinism",
        /// Kernel choice (CPU ISA caps, core types).
        Kernels = "kernels",
        /// Collective-communication algorithms.
        Collectives = "collectives",
        /// Thread counts and placement.
        Threads = "threads",
        /// Python's string hashing.
        HashSeed = "hash-seed",
        /// Library and package search paths.
        Loader = "loader",
        /// Visible accelerators.
        Devices = "devices",
        /// Compiler code-generation flags.
        Codegen = "codegen",
        /// A compiler flag list read flag by flag (XLA_FLAGS).
        Flags = "flags",
        /// Another setting of a numerical library or framework.
        Framework = "framework",
        /// The location of the active environment (its content is compared on its own).
        Location = "location",
        /// Cache and download folders.
        Cache = "cache",
        /// Logging, verbosity and diagnostics.
        Logging = "logging",
        /// Does not affect results (named by the policy).
        Irrelevant = "irrelevant",
    }
}

/// x86 flags (as `/proc/cpuinfo` spells them) that BLAS, oneDNN, ATen, SVML and friends
/// dispatch on. Any flag starting with `avx512` or `amx` is kept as well.
const X86_FEATURES: &[&str] = &[
    "sse",
    "sse2",
    "pni",
    "ssse3",
    "sse4_1",
    "sse4_2",
    "popcnt",
    "avx",
    "avx2",
    "fma",
    "fma4",
    "f16c",
    "bmi1",
    "bmi2",
    "avx_vnni",
    "avx_vnni_int8",
    "avx_ifma",
    "avx_ne_convert",
    "xop",
];

/// ARM flags (as `/proc/cpuinfo`'s `Features` line spells them). Any flag starting with `sve`,
/// `sme` or `asimd` is kept as well.
const ARM_FEATURES: &[&str] = &["fp", "fphp", "bf16", "i8mm", "fcma", "atomics", "ebf16"];

/// True when a CPU flag from `/proc/cpuinfo` is one numerical kernels dispatch on: the class of
/// flags the `[cpu]` section records and the rules compare. Cryptography instructions (AES,
/// SHA, carry-less multiply, GFNI) and kernel-security flags are not: x86's `smep`
/// (supervisor-mode execution prevention, Intel SDM vol. 3, 4.6) shares its first letters with
/// ARM's `sme` (Scalable Matrix Extension) and is excluded by name.
pub fn is_numeric_cpu_feature(flag: &str) -> bool {
    X86_FEATURES.contains(&flag)
        || ARM_FEATURES.contains(&flag)
        || (flag.starts_with("sme") && flag != "smep")
        || ["avx512", "amx", "sve", "asimd"]
            .iter()
            .any(|p| flag.starts_with(p))
}
