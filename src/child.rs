//! Child processes with a time limit and bounded output. Every program runprint starts while
//! stamping (an interpreter, `cargo`, `nvidia-smi`) goes through [`run`]: an interpreter whose
//! `sitecustomize.py` sleeps, or one that prints forever, must not hold up or exhaust a
//! training job.
//!
//! The child gets no standard input, runs in a process group of its own (so that whatever it
//! starts can be stopped with it), and is killed, with its group, when it runs past the time
//! limit or prints more than the output limit on either stream.

use std::io::Read;
use std::process::{Command, ExitStatus, Stdio};
use std::time::{Duration, Instant};

/// The variable that sets the time limit, in seconds, for every child process (an advanced
/// setting; the tests use it to exercise the limit quickly).
pub const TIMEOUT_VAR: &str = "RUNPRINT_CHILD_TIMEOUT_SECS";

/// The time limit for a child: [`TIMEOUT_VAR`] when it holds a positive number, else
/// `default`.
pub fn timeout(default: Duration) -> Duration {
    std::env::var(TIMEOUT_VAR)
        .ok()
        .and_then(|v| v.trim().parse::<f64>().ok())
        .filter(|s| s.is_finite() && *s > 0.0)
        .map_or(default, Duration::from_secs_f64)
}

/// The first line of what a child printed on standard error, short and with no quoted
/// content ([`crate::redact::content_free`]), for a warning.
pub fn first_line(stderr: &[u8]) -> String {
    let text = String::from_utf8_lossy(stderr);
    let line = text
        .lines()
        .map(str::trim)
        .find(|l| !l.is_empty())
        .unwrap_or("");
    let short: String = line.chars().take(200).collect();
    crate::redact::content_free(&short)
}

/// What a finished child left.
#[derive(Debug)]
pub struct Output {
    /// Its exit status.
    pub status: ExitStatus,
    /// Standard output, at most the limit.
    pub stdout: Vec<u8>,
    /// Standard error, at most the limit.
    pub stderr: Vec<u8>,
}

/// Why a child gave no [`Output`].
#[derive(Debug)]
pub enum Failure {
    /// It could not be started.
    Start(std::io::Error),
    /// It ran past the time limit and was killed.
    Timeout(Duration),
    /// It printed more than the output limit and was killed.
    TooMuchOutput(usize),
    /// Waiting for it failed.
    Wait(std::io::Error),
}

impl Failure {
    /// True when the program was not found (not on `PATH`).
    pub fn is_not_found(&self) -> bool {
        matches!(self, Failure::Start(e) if e.kind() == std::io::ErrorKind::NotFound)
    }
}

impl std::fmt::Display for Failure {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Failure::Start(e) => write!(f, "cannot be started: {e}"),
            Failure::Timeout(t) => write!(
                f,
                "gave no answer within {:.0} s and was stopped",
                t.as_secs_f64()
            ),
            Failure::TooMuchOutput(n) => {
                write!(f, "printed more than {n} bytes and was stopped")
            }
            Failure::Wait(e) => write!(f, "could not be waited for: {e}"),
        }
    }
}

/// Reads a stream to its end, keeping at most `limit` bytes; `true` when there was more.
fn drain(mut r: impl Read, limit: usize) -> (Vec<u8>, bool) {
    let mut kept = Vec::new();
    let mut buf = [0u8; 8192];
    loop {
        match r.read(&mut buf) {
            Ok(0) => return (kept, false),
            Ok(n) => {
                if kept.len() + n > limit {
                    let room = limit - kept.len();
                    kept.extend_from_slice(&buf[..room]);
                    return (kept, true);
                }
                kept.extend_from_slice(&buf[..n]);
            }
            Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
            Err(_) => return (kept, false),
        }
    }
}

#[cfg(unix)]
fn kill_group(child: &mut std::process::Child) {
    // The child leads its own process group (see `run`): the negative id reaches everything
    // it started that kept the group.
    if let Ok(pid) = i32::try_from(child.id()) {
        // SAFETY: kill(2) with a process group id has no memory-safety preconditions.
        unsafe {
            libc::kill(-pid, libc::SIGKILL);
        }
    }
    let _ = child.kill();
}

#[cfg(not(unix))]
fn kill_group(child: &mut std::process::Child) {
    let _ = child.kill();
}

/// Runs `cmd` to its end, within `timeout`, keeping at most `max_output` bytes of each stream.
pub fn run(mut cmd: Command, timeout: Duration, max_output: usize) -> Result<Output, Failure> {
    cmd.stdin(Stdio::null())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped());
    #[cfg(unix)]
    {
        use std::os::unix::process::CommandExt;
        cmd.process_group(0);
    }
    let mut child = cmd.spawn().map_err(Failure::Start)?;
    let (Some(out), Some(err)) = (child.stdout.take(), child.stderr.take()) else {
        kill_group(&mut child);
        let _ = child.wait();
        return Err(Failure::Wait(std::io::Error::other("no pipes")));
    };
    let (tx, rx) = std::sync::mpsc::channel();
    for (stream, r) in [
        (0u8, Box::new(out) as Box<dyn Read + Send>),
        (1, Box::new(err)),
    ] {
        let tx = tx.clone();
        std::thread::spawn(move || {
            let _ = tx.send((stream, drain(r, max_output)));
        });
    }
    drop(tx);
    let deadline = Instant::now() + timeout;
    let mut streams: [Option<Vec<u8>>; 2] = [None, None];
    // Both streams end when the child (and whatever holds its pipes) exits.
    while streams.iter().any(Option::is_none) {
        let left = deadline.saturating_duration_since(Instant::now());
        match rx.recv_timeout(left) {
            Ok((i, (bytes, more))) => {
                if more {
                    kill_group(&mut child);
                    let _ = child.wait();
                    return Err(Failure::TooMuchOutput(max_output));
                }
                streams[usize::from(i)] = Some(bytes);
            }
            Err(std::sync::mpsc::RecvTimeoutError::Timeout) => {
                kill_group(&mut child);
                let _ = child.wait();
                return Err(Failure::Timeout(timeout));
            }
            Err(std::sync::mpsc::RecvTimeoutError::Disconnected) => break,
        }
    }
    // The pipes are closed; the child has exited or is about to.
    loop {
        match child.try_wait() {
            Ok(Some(status)) => {
                let [stdout, stderr] = streams;
                return Ok(Output {
                    status,
                    stdout: stdout.unwrap_or_default(),
                    stderr: stderr.unwrap_or_default(),
                });
            }
            Ok(None) if Instant::now() < deadline => {
                std::thread::sleep(Duration::from_millis(1));
            }
            Ok(None) => {
                kill_group(&mut child);
                let _ = child.wait();
                return Err(Failure::Timeout(timeout));
            }
            Err(e) => {
                kill_group(&mut child);
                return Err(Failure::Wait(e));
            }
        }
    }
}

#[cfg(all(test, unix))]
mod tests {
    use super::*;

    fn sh(script: &str) -> Command {
        let mut c = Command::new("sh");
        c.args(["-c", script]);
        c
    }

    #[test]
    fn output_and_status_come_back() {
        let out = run(
            sh("echo out; echo err >&2; exit 3"),
            Duration::from_secs(10),
            1024,
        )
        .unwrap();
        assert_eq!(out.stdout, b"out\n");
        assert_eq!(out.stderr, b"err\n");
        assert_eq!(out.status.code(), Some(3));
    }

    #[test]
    fn a_child_that_hangs_is_stopped_with_what_it_started() {
        let started = Instant::now();
        // The grandchild `sleep` keeps the pipe open: only killing the group ends it.
        let err = run(sh("sleep 30 & sleep 30"), Duration::from_millis(300), 1024).unwrap_err();
        assert!(matches!(err, Failure::Timeout(_)), "{err}");
        assert!(started.elapsed() < Duration::from_secs(10));
    }

    #[test]
    fn a_child_that_prints_forever_is_stopped() {
        let err = run(sh("yes"), Duration::from_secs(30), 64 * 1024).unwrap_err();
        assert!(matches!(err, Failure::TooMuchOutput(_)), "{err}");
    }

    #[test]
    fn a_missing_program_is_a_start_failure() {
        let err = run(
            Command::new("/nonexistent/runprint-no-such-program"),
            Duration::from_secs(1),
            16,
        )
        .unwrap_err();
        assert!(matches!(err, Failure::Start(_)));
    }
}
