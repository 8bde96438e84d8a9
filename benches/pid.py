#!/usr/bin/env python3
"""Benchmark of `runprint stamp --pid` against a process with at least 300 shared objects
mapped, and of the warm stamp without `--pid` (which must not get slower).

A Python child (the interpreter given with --python; it needs numpy and scipy, as the test
environments of .ci/run have) imports numpy, every scipy subpackage and, with ctypes, system
libraries until /proc/PID/maps names at least 300 distinct shared objects; then it waits.
Timed in one run, interleaved, warm (the same cache folder as a first stamp), on an empty git
repository:

* `runprint stamp --pid PID` (target: median under 30 ms);
* `runprint stamp --python PY` (the same interpreter without --pid);
* with --against BIN, that build's `stamp --python PY`: this build / that build should stay
  about 1.0 (no change to the warm stamp without --pid).

    python3 benches/pid.py --python PATH [--runs N] [--against /path/to/other/runprint]
"""

import argparse
import glob
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
BIN = ROOT / "target" / "release" / "runprint"
TARGET_MS = 30.0

CHILD = r"""
import ctypes, glob, importlib, os, pkgutil, sys
import numpy, scipy
for m in pkgutil.walk_packages(scipy.__path__, 'scipy.'):
    if '.tests' in m.name or '_test' in m.name:
        continue
    try:
        importlib.import_module(m.name)
    except Exception:
        pass
def mapped():
    names = set()
    with open('/proc/self/maps') as f:
        for line in f:
            parts = line.split(None, 5)
            if len(parts) == 6 and '.so' in parts[5]:
                names.add(parts[5].strip())
    return names
for path in sorted(glob.glob('/usr/lib/x86_64-linux-gnu/lib*.so.*') + glob.glob('/usr/lib/aarch64-linux-gnu/lib*.so.*')):
    if len(mapped()) >= 300:
        break
    try:
        ctypes.CDLL(path)
    except OSError:
        pass
print(len(mapped()), flush=True)
sys.stdin.read()
"""


def once(cmd, cwd):
    t = time.perf_counter()
    subprocess.run(cmd, cwd=cwd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    return (time.perf_counter() - t) * 1000


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--python", required=True, help="an interpreter with numpy and scipy")
    ap.add_argument("--runs", type=int, default=31)
    ap.add_argument("--against", help="another runprint binary, timed in the same run")
    args = ap.parse_args()
    subprocess.run(["cargo", "build", "--quiet", "--release", "--bin", "runprint"], cwd=ROOT,
                   check=True)
    child = subprocess.Popen([args.python, "-c", CHILD], stdin=subprocess.PIPE,
                             stdout=subprocess.PIPE, text=True)
    try:
        count = int(child.stdout.readline())
        print(f"child {child.pid}: {count} shared objects mapped")
        with tempfile.TemporaryDirectory() as d:
            d = Path(d)
            repo = d / "repo"
            repo.mkdir()
            subprocess.run(["git", "init", "-q"], cwd=repo, check=True)
            time.sleep(2.5)  # past the racy window of the caches
            cache = str(d / "cache")
            commands = {
                "stamp --pid": [str(BIN), "stamp", "--pid", str(child.pid), "--repo",
                                str(repo), "--cache", cache, "-o", str(d / "pid.toml")],
                "stamp --python": [str(BIN), "stamp", "--python", args.python, "--cache",
                                   cache, "-o", str(d / "plain.toml")],
            }
            if args.against:
                commands["other build"] = [args.against, "stamp", "--python", args.python,
                                           "--cache", str(d / "other-cache"), "-o",
                                           str(d / "other.toml")]
            for cmd in commands.values():
                once(cmd, repo)
                once(cmd, repo)
            times = {name: [] for name in commands}
            for _ in range(args.runs):
                for name, cmd in commands.items():
                    times[name].append(once(cmd, repo))
            med = {name: statistics.median(ts) for name, ts in times.items()}
            for name, ts in times.items():
                print(f"{name:15} median {med[name]:6.2f} ms   fastest {min(ts):6.2f} ms")
            if args.against:
                print(f"stamp without --pid, this build / other build: "
                      f"{med['stamp --python'] / med['other build']:.2f}")
            ok = med["stamp --pid"] < TARGET_MS and count >= 300
            print(f"stamp --pid of {count} mapped objects: {med['stamp --pid']:.2f} ms "
                  f"(target: under {TARGET_MS:.0f} ms): {'met' if ok else 'NOT met'}")
            return 0 if ok else 1
    finally:
        child.stdin.close()
        child.wait()


if __name__ == "__main__":
    sys.exit(main())
