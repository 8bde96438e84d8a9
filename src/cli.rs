//! The command line. Data goes to stdout, progress and warnings to stderr. Exit codes are
//! fixed and relied on by scripts:
//!
//! | code | meaning |
//! |---|---|
//! | 0 | verdict `none` (or a successful `stamp`) |
//! | 3 | verdict `verify` |
//! | 4 | verdict `retrain` |
//! | 2 | bad input: unreadable or malformed manifest or policy, bad arguments, `--strict` failures |
//!
//! A policy file's `fail-on` can lower a verdict's exit code to 0 (see [`crate::policy`]); the
//! verdict word in the report never changes.

use std::io::{IsTerminal, Write};
use std::path::PathBuf;

use clap::{Parser, Subcommand, ValueEnum};

use crate::atomic::write_output;
use crate::collect::{stamp_prepared, StampOptions};
use crate::diff::rules::{render_table, TableFormat};
use crate::manifest::{Manifest, ManifestFormat, Prepared};
use crate::policy::{Policy, POLICY_FILE};
use crate::report::{color_allowed, ReportFormat};

/// Exit code for bad input.
pub const EXIT_BAD_INPUT: u8 = 2;

/// Exit code of a command that found nothing to report (`none`) or simply succeeded.
pub const EXIT_NONE: u8 = 0;

/// A command's exit code (see [`EXIT_CODES`]).
pub type ExitStatus = u8;

const EXIT_CODES: &str = "Exit codes:
  0  verdict none: no effect on results expected (stamp: success)
  3  verdict verify: results may shift slightly; rerun and compare metrics
  4  verdict retrain: results are expected to change
  2  bad input: unreadable or malformed manifest or policy (the file is named), bad
     arguments, a failed collector under `stamp --strict`, or a modified manifest under
     `diff --strict`
A policy file (runprint.toml at the repository root, or --policy) can set
fail-on = \"retrain\" (verify exits 0) or \"never\" (every verdict exits 0); the verdict
word in the report is unchanged.";

/// Record what can change a training run's results, and tell whether a difference needs a
/// retrain.
#[derive(Debug, Parser)]
#[command(name = "runprint", version, about, after_help = EXIT_CODES)]
pub struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Debug, Subcommand)]
enum Command {
    /// Record the current checkout and machine in a manifest.
    #[command(after_help = EXIT_CODES)]
    Stamp(StampArgs),
    /// Compare two manifests and explain which differences need a retrain.
    #[command(after_help = EXIT_CODES)]
    Diff(DiffArgs),
    /// Compare a baseline manifest with the current environment, or with a git revision.
    #[command(after_help = EXIT_CODES)]
    Check(CheckArgs),
    /// Compare the manifests of many nodes (or runs): groups, the majority, the odd ones out.
    #[command(after_help = EXIT_CODES)]
    Fleet(FleetArgs),
    /// Print the shell steps back to a manifest's environment (prints only, runs nothing).
    Recreate(RecreateArgs),
    /// List the built-in rules with their reasons and sources.
    Rules(RulesArgs),
    /// Work with a repository's policy file (runprint.toml).
    #[command(subcommand)]
    Policy(PolicyCommand),
}

#[derive(Debug, clap::Args)]
struct RulesArgs {
    /// Output format (`markdown` writes docs/rules.md).
    #[arg(long, value_enum, default_value_t = RulesFormat::Text)]
    format: RulesFormat,
}

#[derive(Debug, Clone, Copy, ValueEnum)]
enum RulesFormat {
    Text,
    Json,
    Markdown,
}

#[derive(Debug, Subcommand)]
enum PolicyCommand {
    /// Validate a policy file (default: runprint.toml at the repository root). Exit 0 when it
    /// is valid, 2 when it is not.
    Check {
        /// The policy file.
        file: Option<PathBuf>,
    },
}

#[derive(Debug, clap::Args)]
struct StampArgs {
    #[command(flatten)]
    collect: CollectArgs,
    /// Write the manifest to FILE (atomically) instead of stdout.
    #[arg(long, short, value_name = "FILE")]
    out: Option<PathBuf>,
    /// Manifest format.
    #[arg(long, value_enum, default_value_t = StampFormat::Toml)]
    format: StampFormat,
    /// Describe this running process as well, from /proc only: its command line, working
    /// folder, environment, allowed CPUs and the libraries it has loaded. Its environment
    /// replaces this one for the recorded variables and for finding its Python; --repo
    /// defaults to its working folder and --python to its executable when that is a Python.
    #[arg(long, value_name = "PID")]
    pid: Option<u32>,
}

/// What to collect: shared by `stamp` and `check`.
#[derive(Debug, clap::Args)]
struct CollectArgs {
    /// A folder inside the checkout to stamp (default: the current folder; with --pid, the
    /// process's working folder).
    #[arg(long, value_name = "DIR")]
    repo: Option<PathBuf>,
    /// A note stored with the manifest (not part of the fingerprint).
    #[arg(long, value_name = "TEXT")]
    label: Option<String>,
    /// Exit 2 and write nothing when any collector fails.
    #[arg(long)]
    strict: bool,
    /// Leave out the host name and the remote URL, and hash values that hold paths.
    #[arg(long)]
    private: bool,
    /// Also read this lockfile (repeatable), e.g. one outside the repository; with
    /// --no-lockfiles, read exactly these.
    #[arg(long, value_name = "PATH")]
    lockfile: Vec<PathBuf>,
    /// Do not look for lockfiles (only those named with --lockfile are read).
    #[arg(long)]
    no_lockfiles: bool,
    /// A data input to digest: a file or a folder (repeatable).
    #[arg(long, value_name = "PATH")]
    data: Vec<PathBuf>,
    /// Folder of the caches: data digests and the numerical-stack scan (default:
    /// $XDG_CACHE_HOME/runprint or ~/.cache/runprint).
    #[arg(long, value_name = "DIR")]
    cache: Option<PathBuf>,
    /// Hash every data input and scan the numerical stack again instead of trusting the caches.
    #[arg(long)]
    rehash: bool,
    /// No progress bar.
    #[arg(long, short)]
    quiet: bool,
    /// A Python interpreter whose installed distributions and native libraries to record
    /// (repeatable; default: the active virtual or conda environment, else `python3` on PATH).
    #[arg(long, value_name = "PATH")]
    python: Vec<PathBuf>,
    /// Also store the uncommitted change itself (a git-style patch of tracked edits and
    /// untracked files), so that `runprint recreate` can print it. Off by default: the patch
    /// is code and goes into the manifest. Files above BYTES (default 1 MiB) are left out, and
    /// a patch that looks like it holds a credential is not stored.
    #[arg(long, value_name = "BYTES", num_args = 0..=1, default_missing_value = "1048576")]
    keep_patch: Option<u64>,
    /// A training entry point: a file (`train.py`) or a Python module (`kelp.train`)
    /// (repeatable). Records the job's scope: the files it imports and the packages it can
    /// load, so that `diff` judges changes outside it as harmless. Default: the `[scope]` of
    /// the repository's runprint.toml, if any.
    #[arg(long, value_name = "PATH_OR_MODULE")]
    entry: Vec<String>,
}

#[derive(Debug, Clone, Copy, ValueEnum)]
enum StampFormat {
    Toml,
    Json,
}

#[derive(Debug, clap::Args)]
struct DiffArgs {
    /// The baseline manifest.
    old: PathBuf,
    /// The manifest to compare with it.
    new: PathBuf,
    /// Report format.
    #[arg(long, value_enum, default_value_t = DiffFormat::Text)]
    format: DiffFormat,
    /// A git repository holding both commits, to list the files changed between them
    /// (default: the current folder's repository).
    #[arg(long, value_name = "DIR")]
    repo: Option<PathBuf>,
    /// Also show each change's rule and source, a word diff of its values, and a compact
    /// diff of each changed lockfile's package list.
    #[arg(long, short)]
    verbose: bool,
    /// List every harmless (`none`) change in the text report, not a count per kind.
    #[arg(long)]
    all: bool,
    /// The policy file (default: runprint.toml at the root of the repository named by --repo
    /// or of the current folder's repository, when there is one).
    #[arg(long, value_name = "FILE")]
    policy: Option<PathBuf>,
    /// Exit 2 when either manifest was modified after stamping (its fingerprint does not
    /// match its content).
    #[arg(long)]
    strict: bool,
}

#[derive(Debug, clap::Args)]
struct CheckArgs {
    /// The baseline manifest, e.g. the one stored beside the production model.
    #[arg(long, value_name = "FILE")]
    baseline: PathBuf,
    /// Compare with this git revision (branch, tag or commit) of the repository at `--repo`,
    /// read from git without a checkout: commit, submodules and lockfiles only.
    #[arg(long, value_name = "REV")]
    rev: Option<String>,
    /// Also write the new manifest to FILE (atomically).
    #[arg(long, value_name = "FILE", conflicts_with = "rev")]
    save: Option<PathBuf>,
    /// Report format.
    #[arg(long, value_enum, default_value_t = DiffFormat::Text)]
    format: DiffFormat,
    /// Also show a compact diff of each changed lockfile's package list.
    #[arg(long, short)]
    verbose: bool,
    /// List every harmless (`none`) change in the text report, not a count per kind.
    #[arg(long)]
    all: bool,
    /// The policy file (default: runprint.toml at the root of the repository at `--repo`).
    #[arg(long, value_name = "FILE")]
    policy: Option<PathBuf>,
    #[command(flatten)]
    collect: CollectArgs,
}

#[derive(Debug, clap::Args)]
struct FleetArgs {
    /// Manifest files, or folders whose `.toml` and `.json` files are read.
    #[arg(required = true, value_name = "FILE|DIR")]
    inputs: Vec<PathBuf>,
    /// Report format.
    #[arg(long, value_enum, default_value_t = DiffFormat::Text)]
    format: DiffFormat,
    /// A git repository holding the nodes' commits, to list the files changed between them
    /// (default: the current folder's repository).
    #[arg(long, value_name = "DIR")]
    repo: Option<PathBuf>,
}

#[derive(Debug, clap::Args)]
struct RecreateArgs {
    /// The manifest whose environment to describe.
    manifest: PathBuf,
}

#[derive(Debug, Clone, Copy, ValueEnum)]
enum DiffFormat {
    Text,
    Json,
    Markdown,
}

/// Parses the process's arguments and runs the command.
pub fn main() -> ExitStatus {
    let cli = Cli::parse();
    match cli.command {
        Command::Stamp(args) => run_stamp(args),
        Command::Diff(args) => run_diff(args),
        Command::Check(args) => run_check(args),
        Command::Fleet(args) => run_fleet(args),
        Command::Recreate(args) => run_recreate(args),
        Command::Rules(args) => {
            let format = match args.format {
                RulesFormat::Text => TableFormat::Text,
                RulesFormat::Json => TableFormat::Json,
                RulesFormat::Markdown => TableFormat::Markdown,
            };
            match emit(&render_table(format)) {
                Ok(()) => EXIT_NONE,
                Err(e) => fail(format!("cannot write to stdout: {e}")),
            }
        }
        Command::Policy(PolicyCommand::Check { file }) => run_policy_check(file),
    }
}

fn fail(message: impl std::fmt::Display) -> ExitStatus {
    // Errors may quote a line of a file the user did not write; never echo a credential.
    eprintln!(
        "error: {}",
        crate::escape::printable_lines(&crate::redact::scrub_secrets(&message.to_string()))
    );
    EXIT_BAD_INPUT
}

/// Writes data to stdout; a closed pipe (`runprint stamp | head`) is not an error.
fn emit(text: &str) -> Result<(), std::io::Error> {
    let mut out = std::io::stdout().lock();
    match out.write_all(text.as_bytes()).and_then(|()| out.flush()) {
        Err(e) if e.kind() == std::io::ErrorKind::BrokenPipe => Ok(()),
        other => other,
    }
}

impl CollectArgs {
    /// The folder to stamp: `--repo`, else the current folder.
    fn repo_dir(&self) -> PathBuf {
        self.repo.clone().unwrap_or_else(|| PathBuf::from("."))
    }

    /// The stamping options these arguments ask for.
    fn options(self) -> StampOptions {
        let repo = self.repo_dir();
        let mut opts = StampOptions::new(&repo);
        opts.label = self.label;
        opts.private = self.private;
        opts.extra_lockfiles = self.lockfile;
        opts.no_lockfiles = self.no_lockfiles;
        opts.keep_patch = self.keep_patch;
        opts.python = self.python;
        // The policy's [scope] gives the lockfiles and reads; --entry replaces its entries.
        let declared = match crate::policy::Policy::discover(None, &repo) {
            Ok(p) => p.scope,
            Err(e) => {
                eprintln!(
                    "warning: {}; its [scope] is not used",
                    crate::escape::printable(&e.to_string())
                );
                None
            }
        };
        opts.scope = match (declared, self.entry.is_empty()) {
            (Some(mut s), false) => {
                s.entry = self.entry;
                Some(s)
            }
            (Some(s), true) => Some(s),
            (None, false) => Some(crate::collect::scope::Request {
                entry: self.entry,
                ..Default::default()
            }),
            (None, true) => None,
        };
        opts.data = crate::collect::data::DataOptions {
            cache_dir: self
                .cache
                .or_else(|| crate::cache::DigestCache::default_dir(&opts.env)),
            paths: self.data,
            rehash: self.rehash,
            progress: !self.quiet && std::io::stderr().is_terminal(),
        };
        opts
    }

    /// Stamps, printing warnings; `Err` carries the exit code when `--strict` refuses.
    fn stamp(self) -> Result<Manifest, ExitStatus> {
        self.stamp_prepared(false, None).map(|(m, _)| m)
    }

    /// As [`CollectArgs::stamp`]; with `prepare`, also the parts of the TOML text serialized
    /// while git's status ran ([`stamp_prepared`]).
    fn stamp_prepared(
        mut self,
        prepare: bool,
        process: Option<crate::collect::process::ProcessFacts>,
    ) -> Result<(Manifest, Option<Prepared>), ExitStatus> {
        if let Some(facts) = &process {
            // The process's working folder and interpreter, unless named.
            if self.repo.is_none() {
                self.repo = facts.cwd.clone();
            }
            if self.python.is_empty() {
                self.python = crate::collect::process::python_interpreter(facts)
                    .into_iter()
                    .collect();
            }
        }
        if !self.repo_dir().is_dir() {
            return Err(fail(format!(
                "`{}` is not a folder",
                self.repo_dir().display()
            )));
        }
        let strict = self.strict;
        let mut opts = self.options();
        if let Some(facts) = process {
            // runprint's own settings (RUNPRINT_*) stay this shell's.
            let own: Vec<(String, String)> = opts
                .env
                .iter()
                .filter(|(k, _)| k.starts_with("RUNPRINT_"))
                .map(|(k, v)| (k.clone(), v.clone()))
                .collect();
            opts.env = facts.environ.clone();
            opts.env.extend(own);
            opts.process = Some(facts);
        }
        let (manifest, prepared) = stamp_prepared(&opts, prepare);
        for w in &manifest.run.warnings {
            eprintln!("warning: {}", crate::escape::printable(w));
        }
        if strict && !manifest.run.warnings.is_empty() {
            return Err(fail(format!(
                "{} collector problem(s) and --strict was given; no manifest written",
                manifest.run.warnings.len()
            )));
        }
        Ok((manifest, prepared))
    }
}

fn run_stamp(args: StampArgs) -> ExitStatus {
    small_pages_from_now_on();
    let format = match args.format {
        StampFormat::Toml => ManifestFormat::Toml,
        StampFormat::Json => ManifestFormat::Json,
    };
    let strict = args.collect.strict;
    let process = match args.pid.map(crate::collect::process::read).transpose() {
        Ok(p) => p,
        Err(e) => return fail(e.to_string()),
    };
    let (manifest, prepared) = match args
        .collect
        .stamp_prepared(format == ManifestFormat::Toml, process)
    {
        Ok(m) => m,
        Err(code) => return code,
    };
    let (manifest, text, added) = fit_for_reading(manifest, format, prepared.as_ref());
    if strict && !added.is_empty() {
        return fail(
            "packages were left out of the manifest and --strict was given; no manifest written",
        );
    }
    match args.out {
        Some(path) => {
            if let Err(e) = write_output(&path, text.as_bytes()) {
                return fail(e);
            }
            eprintln!(
                "stamped {} -> {}",
                manifest.short_fingerprint(),
                path.display()
            );
        }
        None => {
            if let Err(e) = emit(&text) {
                return fail(format!("cannot write to stdout: {e}"));
            }
        }
    }
    EXIT_NONE
}

/// A stamp allocates little: memory it touches from now on comes in 4 KiB pages instead of
/// the allocator's 2 MiB transparent huge pages, each of which the kernel zeroes whole on first
/// touch (about a millisecond of a warm stamp). A large `diff` keeps them (fewer faults).
/// Linux prctl(2) `PR_SET_THP_DISABLE`; inherited by child processes, which are small too.
fn small_pages_from_now_on() {
    #[cfg(target_os = "linux")]
    // SAFETY: plain integer arguments; the call only sets a flag of this process.
    unsafe {
        libc::prctl(libc::PR_SET_THP_DISABLE, 1, 0, 0, 0);
    }
}

/// The manifest's text within the size runprint reads ([`Manifest::fit_within`]), printing a
/// warning for each package list left out; returns those warnings too.
fn fit_for_reading(
    manifest: Manifest,
    format: ManifestFormat,
    prepared: Option<&Prepared>,
) -> (Manifest, String, Vec<String>) {
    let fitted = manifest.fit_within(format, prepared, crate::limits::max_file_bytes());
    for w in &fitted.2 {
        eprintln!("warning: {}", crate::escape::printable(w));
    }
    fitted
}

/// A policy whose acceptances name only built-in rules (see [`crate::diff::rules::check_policy`]).
fn known_rules(p: Policy) -> Result<Policy, crate::policy::PolicyError> {
    crate::diff::rules::check_policy(&p).map(|()| p)
}

fn run_policy_check(file: Option<PathBuf>) -> ExitStatus {
    let policy = match &file {
        Some(path) => Policy::load(path).and_then(known_rules),
        None => {
            let cwd = std::env::current_dir().unwrap_or_else(|_| PathBuf::from("."));
            match Policy::discover(None, &cwd) {
                Ok(p) if p.path.is_none() => {
                    return fail(format!(
                        "no {POLICY_FILE} at the repository root; name a file to check"
                    ))
                }
                other => other.and_then(known_rules),
            }
        }
    };
    match policy {
        Ok(p) => {
            let today = p.today();
            for a in p.accept.iter().filter(|a| a.is_expired(&today)) {
                eprintln!(
                    "warning: the acceptance of `{}` (line {}) expired on {} and no longer applies",
                    a.subject, a.line, a.expires
                );
            }
            let path = p.path.as_deref().map(|p| p.display().to_string());
            println!("ok: {}: {}", path.unwrap_or_default(), p.summary());
            EXIT_NONE
        }
        Err(e) => fail(e),
    }
}

fn run_diff(args: DiffArgs) -> ExitStatus {
    // The two files are parsed on two threads: parsing dominates the time of a large diff.
    let (old, new) = std::thread::scope(|s| {
        let old = s.spawn(|| Manifest::load(&args.old));
        let new = Manifest::load(&args.new);
        (old.join().expect("manifest parsing does not panic"), new)
    });
    let (old, new) = match (old, new) {
        (Ok(o), Ok(n)) => (o, n),
        (Err(e), _) | (_, Err(e)) => return fail(e),
    };
    let here = std::env::current_dir().unwrap_or_else(|_| PathBuf::from("."));
    let policy = match Policy::discover(
        args.policy.as_deref(),
        args.repo.as_deref().unwrap_or(&here),
    )
    .and_then(known_rules)
    {
        Ok(p) => p,
        Err(e) => return fail(e),
    };
    let mut report = crate::check::compare_in_repo(
        &args.old.display().to_string(),
        &old,
        &args.new.display().to_string(),
        &new,
        args.repo.as_deref(),
        &policy,
    );
    // The comparison already checked both fingerprints; --strict reuses its answer.
    if args.strict {
        if let Some(side) = [&report.old, &report.new].into_iter().find(|s| s.modified) {
            return fail(format!(
                "`{}` was modified after stamping (its fingerprint does not match its content) \
                 and --strict was given",
                side.path
            ));
        }
    }
    if args.verbose {
        report.details = crate::diff::package_list_diffs(&old, &new);
        crate::diff::explain_values(&mut report);
    }
    report.all = args.all;
    let exit = policy.exit_code(report.verdict);
    let status = emit_report(&report, args.format, exit);
    // The process ends next (`main` exits without running destructors): freeing two large
    // manifests string by string would only cost time.
    std::mem::forget((old, new, report));
    status
}

impl DiffFormat {
    fn report_format(self) -> ReportFormat {
        match self {
            DiffFormat::Text => ReportFormat::Text,
            DiffFormat::Json => ReportFormat::Json,
            DiffFormat::Markdown => ReportFormat::Markdown,
        }
    }
}

fn stdout_color() -> bool {
    color_allowed(
        std::io::stdout().is_terminal(),
        std::env::var("NO_COLOR").ok().as_deref(),
        std::env::var("TERM").ok().as_deref(),
    )
}

/// Prints a report and returns `exit` (the verdict's code under the policy).
fn emit_report(report: &crate::diff::Report, format: DiffFormat, exit: u8) -> ExitStatus {
    let mut out = std::io::BufWriter::with_capacity(64 * 1024, std::io::stdout().lock());
    let written = crate::report::write(report, format.report_format(), stdout_color(), &mut out)
        .and_then(|()| out.flush());
    match written {
        Err(e) if e.kind() != std::io::ErrorKind::BrokenPipe => {
            fail(format!("cannot write to stdout: {e}"))
        }
        _ => exit,
    }
}

fn run_check(args: CheckArgs) -> ExitStatus {
    let baseline = match Manifest::load(&args.baseline) {
        Ok(m) => m,
        Err(e) => return fail(e),
    };
    let policy = match Policy::discover(args.policy.as_deref(), &args.collect.repo_dir())
        .and_then(known_rules)
    {
        Ok(p) => p,
        Err(e) => return fail(e),
    };
    let baseline_name = args.baseline.display().to_string();
    let mut report = if let Some(rev) = &args.rev {
        match crate::check::against_revision(
            &baseline_name,
            &baseline,
            &args.collect.repo_dir(),
            rev,
            &policy,
        ) {
            Ok(r) => r,
            Err(e) => return fail(e),
        }
    } else {
        let repo = args.collect.repo_dir();
        let mut current = match args.collect.stamp() {
            Ok(m) => m,
            Err(code) => return code,
        };
        let current_name = match &args.save {
            Some(path) => {
                // What is saved is what is compared.
                let (fitted, text, _) = fit_for_reading(current, ManifestFormat::Toml, None);
                current = fitted;
                if let Err(e) = write_output(path, text.as_bytes()) {
                    return fail(e);
                }
                eprintln!(
                    "stamped {} -> {}",
                    current.short_fingerprint(),
                    path.display()
                );
                path.display().to_string()
            }
            None => crate::check::CURRENT.to_string(),
        };
        let mut report = crate::check::against_current(
            &baseline_name,
            &baseline,
            &current_name,
            &current,
            &repo,
            &policy,
        );
        if args.verbose {
            report.details = crate::diff::package_list_diffs(&baseline, &current);
        }
        report
    };
    report.all = args.all;
    if args.verbose && report.details.is_empty() && args.rev.is_some() {
        report.notes.push(
            "--verbose package lists are shown only when comparing with the current environment"
                .into(),
        );
    }
    let exit = policy.exit_code(report.verdict);
    emit_report(&report, args.format, exit)
}

fn run_fleet(args: FleetArgs) -> ExitStatus {
    let paths = match crate::fleet::expand_inputs(&args.inputs) {
        Ok(p) => p,
        Err(e) => return fail(e),
    };
    let report = match crate::fleet::analyse(&paths, args.repo.as_deref()) {
        Ok(r) => r,
        Err(e) => return fail(e),
    };
    let text = match args.format {
        DiffFormat::Text => crate::fleet::render_text(&report, stdout_color()),
        DiffFormat::Json => crate::fleet::render_json(&report),
        DiffFormat::Markdown => crate::fleet::render_markdown(&report),
    };
    if let Err(e) = emit(&text) {
        return fail(format!("cannot write to stdout: {e}"));
    }
    report.verdict.exit_code()
}

fn run_recreate(args: RecreateArgs) -> ExitStatus {
    let manifest = match Manifest::load(&args.manifest) {
        Ok(m) => m,
        Err(e) => return fail(e),
    };
    let script = crate::recreate::script(&manifest, &args.manifest.display().to_string());
    if let Err(e) = emit(&script) {
        return fail(format!("cannot write to stdout: {e}"));
    }
    EXIT_NONE
}
