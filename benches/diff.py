#!/usr/bin/env python3
"""Benchmark of `runprint diff` on two manifests of 10,000 packages each.

The manifests are written by `examples/synth_manifests.rs` (four lockfiles, a tenth of the
packages bumped; about 2 MB of TOML each). Timed in the same run, interleaved so that every
command sees the same machine:

* `runprint diff OLD NEW --format json` (reading, comparing and printing);
* the baseline: Python's `tomllib` reading the same two files (interpreter start included);
* optionally another runprint build (`--against PATH`), e.g. the previous commit's binary.

Prints medians and the ratio to the baseline, and exits non-zero when the median of the
diff is not under TARGET_MS (default 30).

    python3 benches/diff.py [--runs N] [--against /path/to/old/runprint]
"""

import argparse
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
BIN = ROOT / "target" / "release" / "runprint"
SYNTH = ROOT / "target" / "release" / "examples" / "synth_manifests"
TARGET_MS = 30.0


def once(cmd):
    t = time.perf_counter()
    subprocess.run(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    return (time.perf_counter() - t) * 1000


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--runs", type=int, default=21)
    ap.add_argument("--against", help="another runprint binary, timed in the same run")
    args = ap.parse_args()
    subprocess.run(["cargo", "build", "--quiet", "--release", "--bin", "runprint",
                    "--example", "synth_manifests"], cwd=ROOT, check=True)
    with tempfile.TemporaryDirectory() as d:
        d = Path(d)
        subprocess.run([str(SYNTH), "10000", str(d)], check=True)
        old, new = str(d / "old.toml"), str(d / "new.toml")
        commands = {
            "runprint diff": [str(BIN), "diff", old, new, "--format", "json"],
            "tomllib reads both": [sys.executable, "-c",
                                   "import sys, tomllib\n"
                                   "for p in sys.argv[1:]:\n"
                                   "    tomllib.load(open(p, 'rb'))", old, new],
        }
        if args.against:
            commands["other build's diff"] = [args.against, "diff", old, new, "--format", "json"]
        for cmd in commands.values():  # page cache, binaries
            once(cmd)
        times = {name: [] for name in commands}
        for _ in range(args.runs):
            for name, cmd in commands.items():
                times[name].append(once(cmd))
        med = {name: statistics.median(ts) for name, ts in times.items()}
        for name, ts in times.items():
            print(f"{name:22} median {med[name]:7.1f} ms   fastest {min(ts):7.1f} ms")
        base = med["tomllib reads both"]
        print(f"diff / tomllib: {med['runprint diff'] / base:.3f}")
        if args.against:
            other = med["other build's diff"]
            print(f"diff / other build: {med['runprint diff'] / other:.2f}")
        ok = med["runprint diff"] < TARGET_MS
        print(f"target: median under {TARGET_MS:.0f} ms: {'met' if ok else 'NOT met'}")
        return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
