//! The command line. Data goes to stdout, progress and warnings to stderr. Exit codes are
//! fixed and relied on by scripts:
//!
//! | code | meaning |
//! |---|---|
//! | 0 | verdict `none` (or a successful `stamp`) |
//! | 3 | verdict `verify` |
//! | 4 | verdict `retrain` |
//! | 2 | bad input: unreadable or malformed manifest, bad arguments, `--strict` failures |

use std::io::{IsTerminal, Write};
use std::path::PathBuf;
use std::process::ExitCode;

use clap::{Parser, Subcommand, ValueEnum};

use crate::atomic::write_atomic;
use crate::collect::{stamp, StampOptions};
use crate::diff::compare;
use crate::manifest::{Manifest, ManifestFormat};
use crate::report::{color_allowed, render, ReportFormat};

/// Exit code for bad input.
pub const EXIT_BAD_INPUT: u8 = 2;

const EXIT_CODES: &str = "Exit codes:
  0  verdict none: no effect on results expected (stamp: success)
  3  verdict verify: results may shift slightly; rerun and compare metrics
  4  verdict retrain: results are expected to change
  2  bad input: unreadable or malformed manifest (the file is named), bad arguments,
     a failed collector under `stamp --strict`, or a modified manifest under `diff --strict`";

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
}

#[derive(Debug, clap::Args)]
struct StampArgs {
    /// A folder inside the checkout to stamp.
    #[arg(long, value_name = "DIR", default_value = ".")]
    repo: PathBuf,
    /// A note stored with the manifest (not part of the fingerprint).
    #[arg(long, value_name = "TEXT")]
    label: Option<String>,
    /// Write the manifest to FILE (atomically) instead of stdout.
    #[arg(long, short, value_name = "FILE")]
    out: Option<PathBuf>,
    /// Manifest format.
    #[arg(long, value_enum, default_value_t = StampFormat::Toml)]
    format: StampFormat,
    /// Exit 2 and write nothing when any collector fails.
    #[arg(long)]
    strict: bool,
    /// Leave out the host name and the remote URL, and hash values that hold paths.
    #[arg(long)]
    private: bool,
    /// Also read this lockfile (repeatable), e.g. one outside the repository.
    #[arg(long, value_name = "PATH")]
    lockfile: Vec<PathBuf>,
    /// Do not look for or read lockfiles.
    #[arg(long, conflicts_with = "lockfile")]
    no_lockfiles: bool,
    /// A data input to digest: a file or a folder (repeatable).
    #[arg(long, value_name = "PATH")]
    data: Vec<PathBuf>,
    /// Folder of the digest cache (default: $XDG_CACHE_HOME/runprint or ~/.cache/runprint).
    #[arg(long, value_name = "DIR")]
    cache: Option<PathBuf>,
    /// Hash every data input again instead of trusting the digest cache.
    #[arg(long)]
    rehash: bool,
    /// No progress bar.
    #[arg(long, short)]
    quiet: bool,
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
    /// Also show a compact diff of each changed lockfile's package list.
    #[arg(long, short)]
    verbose: bool,
    /// Exit 2 when either manifest was modified after stamping (its fingerprint does not
    /// match its content).
    #[arg(long)]
    strict: bool,
}

#[derive(Debug, Clone, Copy, ValueEnum)]
enum DiffFormat {
    Text,
    Json,
    Markdown,
}

/// Parses the process's arguments and runs the command.
pub fn main() -> ExitCode {
    let cli = Cli::parse();
    match cli.command {
        Command::Stamp(args) => run_stamp(args),
        Command::Diff(args) => run_diff(args),
    }
}

fn fail(message: impl std::fmt::Display) -> ExitCode {
    // Errors may quote a line of a file the user did not write; never echo a credential.
    eprintln!(
        "error: {}",
        crate::redact::scrub_secrets(&message.to_string())
    );
    ExitCode::from(EXIT_BAD_INPUT)
}

/// Writes data to stdout; a closed pipe (`runprint stamp | head`) is not an error.
fn emit(text: &str) -> Result<(), std::io::Error> {
    let mut out = std::io::stdout().lock();
    match out.write_all(text.as_bytes()).and_then(|()| out.flush()) {
        Err(e) if e.kind() == std::io::ErrorKind::BrokenPipe => Ok(()),
        other => other,
    }
}

fn run_stamp(args: StampArgs) -> ExitCode {
    if !args.repo.is_dir() {
        return fail(format!("`{}` is not a folder", args.repo.display()));
    }
    let mut opts = StampOptions::new(&args.repo);
    opts.label = args.label;
    opts.private = args.private;
    opts.extra_lockfiles = args.lockfile;
    opts.no_lockfiles = args.no_lockfiles;
    opts.data = crate::collect::data::DataOptions {
        cache_dir: args
            .cache
            .or_else(|| crate::cache::DigestCache::default_dir(&opts.env)),
        paths: args.data,
        rehash: args.rehash,
        progress: !args.quiet && std::io::stderr().is_terminal(),
    };
    let manifest = stamp(&opts);
    for w in &manifest.run.warnings {
        eprintln!("warning: {w}");
    }
    if args.strict && !manifest.run.warnings.is_empty() {
        return fail(format!(
            "{} collector problem(s) and --strict was given; no manifest written",
            manifest.run.warnings.len()
        ));
    }
    let format = match args.format {
        StampFormat::Toml => ManifestFormat::Toml,
        StampFormat::Json => ManifestFormat::Json,
    };
    let text = manifest.render(format);
    match args.out {
        Some(path) => {
            if let Err(e) = write_atomic(&path, text.as_bytes()) {
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
    ExitCode::SUCCESS
}

fn run_diff(args: DiffArgs) -> ExitCode {
    let old = match Manifest::load(&args.old) {
        Ok(m) => m,
        Err(e) => return fail(e),
    };
    let new = match Manifest::load(&args.new) {
        Ok(m) => m,
        Err(e) => return fail(e),
    };
    if args.strict {
        for (path, m) in [(&args.old, &old), (&args.new, &new)] {
            if m.is_modified() {
                return fail(format!(
                    "`{}` was modified after stamping (its fingerprint does not match its \
                     content) and --strict was given",
                    path.display()
                ));
            }
        }
    }
    let mut report = compare(
        &args.old.display().to_string(),
        &old,
        &args.new.display().to_string(),
        &new,
        args.repo.as_deref(),
    );
    if args.verbose {
        report.details = crate::diff::package_list_diffs(&old, &new);
    }
    let format = match args.format {
        DiffFormat::Text => ReportFormat::Text,
        DiffFormat::Json => ReportFormat::Json,
        DiffFormat::Markdown => ReportFormat::Markdown,
    };
    let color = color_allowed(
        std::io::stdout().is_terminal(),
        std::env::var("NO_COLOR").ok().as_deref(),
        std::env::var("TERM").ok().as_deref(),
    );
    if let Err(e) = emit(&render(&report, format, color)) {
        return fail(format!("cannot write to stdout: {e}"));
    }
    ExitCode::from(report.verdict.exit_code())
}
