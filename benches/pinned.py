#!/usr/bin/env python3
"""Benchmark of a warm stamp of a small repository that pins a Rust toolchain this machine
does not have.

The repository is generated: one crate with no dependencies (its `Cargo.lock` written by
`cargo generate-lockfile`), a `rust-toolchain.toml` pinning a toolchain that is not
installed (1.70.0 unless it is, then another), committed with git. The stamp is warm: the
same cache folder as a first stamp. Timed in the same run, interleaved:

* `runprint stamp` (the whole stamp, the manifest written);
* the baseline: `git status --porcelain` plus reading the repository's dependency files
  (`cat Cargo.lock Cargo.toml rust-toolchain.toml`), one after the other.

Prints medians of RUNS (default 31) and the ratio; exits non-zero when the ratio is above
the target (1.5).

    python3 benches/pinned.py [--runs N] [--against /path/to/other/runprint]
"""

import argparse
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
BIN = ROOT / "target" / "release" / "runprint"
TARGET = 1.5


def missing_toolchain() -> str:
    installed = ""
    if shutil.which("rustup"):
        installed = subprocess.run(["rustup", "toolchain", "list"], capture_output=True,
                                   text=True).stdout
    for candidate in ["1.70.0", "1.69.0", "1.68.2"]:
        if candidate not in installed:
            return candidate
    sys.exit("every candidate toolchain is installed")


def make_repo(root: Path) -> None:
    (root / "src").mkdir(parents=True)
    (root / "Cargo.toml").write_text(
        '[package]\nname = "pinned"\nversion = "0.1.0"\nedition = "2021"\n')
    (root / "src" / "main.rs").write_text("fn main() {}\n")
    # Written by cargo itself (no dependencies: no registry needed); the pin is written
    # afterwards so that cargo runs with the installed toolchain.
    subprocess.run(["cargo", "generate-lockfile", "--offline"], cwd=root, check=True,
                   stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    (root / "rust-toolchain.toml").write_text(
        f'[toolchain]\nchannel = "{missing_toolchain()}"\n')
    git = ["git", "-c", "user.name=bench", "-c", "user.email=bench@example.invalid"]
    subprocess.run(git + ["init", "-q"], cwd=root, check=True)
    subprocess.run(git + ["add", "-A"], cwd=root, check=True)
    subprocess.run(git + ["commit", "-qm", "pinned"], cwd=root, check=True)


def once(cmds, cwd, env):
    t = time.perf_counter()
    for cmd in cmds:
        subprocess.run(cmd, cwd=cwd, env=env, stdout=subprocess.DEVNULL,
                       stderr=subprocess.DEVNULL)
    return (time.perf_counter() - t) * 1000


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--runs", type=int, default=31)
    ap.add_argument("--against", help="another runprint binary, timed in the same run")
    args = ap.parse_args()
    subprocess.run(["cargo", "build", "--quiet", "--release", "--bin", "runprint"], cwd=ROOT,
                   check=True)
    with tempfile.TemporaryDirectory() as d:
        d = Path(d)
        repo, cache, out = d / "repo", d / "cache", d / "out.toml"
        make_repo(repo)
        # Files changed less than two seconds before a stamp are not trusted to keep their
        # answers in the cache (the racy window); a checkout being stamped is older.
        time.sleep(2.5)
        env = dict(os.environ)
        env.pop("RUNPRINT_TIMINGS", None)
        commands = {
            "runprint stamp": [[str(BIN), "stamp", "--cache", str(cache), "-o", str(out)]],
            "git status + cat": [["git", "status", "--porcelain"],
                                 ["cat", "Cargo.lock", "Cargo.toml", "rust-toolchain.toml"]],
        }
        if args.against:
            other_cache = d / "other-cache"
            commands["other build's stamp"] = [[args.against, "stamp", "--cache",
                                                str(other_cache), "-o", str(d / "other.toml")]]
        for cmds in commands.values():  # the cache, the page cache
            once(cmds, repo, env)
            once(cmds, repo, env)
        times = {name: [] for name in commands}
        for _ in range(args.runs):
            for name, cmds in commands.items():
                times[name].append(once(cmds, repo, env))
        med = {name: statistics.median(ts) for name, ts in times.items()}
        for name, ts in times.items():
            print(f"{name:18} median {med[name]:6.2f} ms   fastest {min(ts):6.2f} ms")
        if args.against:
            other = med["other build's stamp"]
            print(f"stamp / other build: {med['runprint stamp'] / other:.2f}")
        ratio = med["runprint stamp"] / med["git status + cat"]
        ok = ratio <= TARGET
        print(f"ratio: {ratio:.2f}x (target: at most {TARGET}x): {'met' if ok else 'NOT met'}")
        return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
