#!/usr/bin/env python3
"""Benchmark of the training job's scope (`stamp --entry`): the import closure of a
5,000-file Python repository, cold (empty cache) and warm (second stamp, cache filled).

The repository is generated (seeded): packages of modules that import each other with
absolute, relative and function-level imports, plus standard-library and third-party imports,
all reachable from one entry point, committed with git. Reported, medians of 7 runs:

* the extra time a stamp takes with `--entry` (cold and warm), against the same stamp
  without it, measured in the same run;
* the ratio against Python's own `modulefinder` computing the same closure (the reference
  the tests check against), also in the same run.

    python3 benches/scope.py [FILES]      (default 5000)
"""

import os
import random
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
BIN = ROOT / "target" / "release" / "runprint"


def make_repo(root: Path, files: int) -> None:
    rnd = random.Random(7)
    per_package = 50
    modules = []
    for i in range(files - 1):
        pkg, mod = divmod(i, per_package)
        modules.append((f"kelp/p{pkg:03d}", f"m{mod:02d}"))
    pkgs = sorted({p for p, _ in modules})
    (root / "kelp").mkdir()
    (root / "kelp" / "__init__.py").write_text("")
    for p in pkgs:
        (root / p).mkdir(parents=True, exist_ok=True)
        mods = [m for q, m in modules if q == p]
        (root / p / "__init__.py").write_text("".join(f"from . import {m}\n" for m in mods))
    for idx, (pkg, mod) in enumerate(modules):
        lines = ["import os", "import json", "import numpy as np"]
        # A few other modules (every one is reachable through its package's __init__).
        for _ in range(3):
            op, om = modules[rnd.randrange(len(modules))]
            if op == pkg and rnd.random() < 0.5:
                lines.append(f"from . import {om}")
            else:
                lines.append(f"import {op.replace('/', '.')}.{om}")
        lines.append("")
        lines.append("def step(x):")
        lines.append("    import math")
        lines.append("    return math.sqrt(x) + np.float32(1)")
        body = "\n".join(lines) + "\n" + "\n".join(f"CONST_{k} = {k}" for k in range(120)) + "\n"
        (root / pkg / f"{mod}.py").write_text(body)
    (root / "train.py").write_text("".join(f"import {p.replace('/', '.')}\n" for p in pkgs))
    env = dict(os.environ, GIT_AUTHOR_NAME="b", GIT_AUTHOR_EMAIL="b@x.invalid",
               GIT_COMMITTER_NAME="b", GIT_COMMITTER_EMAIL="b@x.invalid")
    for cmd in (["git", "init", "-q"], ["git", "add", "-A"], ["git", "commit", "-qm", "bench"]):
        subprocess.run(cmd, cwd=root, check=True, env=env)


def median_ms(cmd, runs=7, before=None):
    times = []
    for _ in range(runs):
        if before:
            before()
        t = time.perf_counter()
        subprocess.run(cmd, check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        times.append(time.perf_counter() - t)
    return statistics.median(times) * 1000


def main():
    files = int(sys.argv[1]) if len(sys.argv) > 1 else 5000
    subprocess.run(["cargo", "build", "--quiet", "--release", "--bin", "runprint"], cwd=ROOT, check=True)
    work = Path(tempfile.mkdtemp())
    try:
        repo = work / "repo"
        repo.mkdir()
        make_repo(repo, files)
        cache = work / "cache"
        base = [str(BIN), "stamp", "--quiet", "--no-lockfiles", "--repo", str(repo), "--cache", str(cache), "-o", str(work / "m.toml")]
        entry = base + ["--entry", "train.py"]
        clear = lambda: shutil.rmtree(cache, ignore_errors=True)
        subprocess.run(base, check=True)  # warm the stack cache and the page cache
        plain = median_ms(base)
        cold = median_ms(entry, before=lambda: [p.unlink() for p in cache.glob("scope-*")])
        subprocess.run(entry, check=True)
        warm = median_ms(entry)
        text = (work / "m.toml").read_text()
        closure = text.count('.py" = "')
        mf = median_ms([sys.executable, "-c",
                        "import modulefinder,sys; sys.setrecursionlimit(20000); f=modulefinder.ModuleFinder(path=[sys.argv[1]]); f.run_script(sys.argv[1]+'/train.py')",
                        str(repo)], runs=3)
        print(f"repository: {files} Python files, closure of {closure} files")
        print(f"stamp without --entry:      {plain:8.1f} ms")
        print(f"stamp with --entry, cold:   {cold:8.1f} ms  (closure adds {cold - plain:.1f} ms)")
        print(f"stamp with --entry, warm:   {warm:8.1f} ms  (closure adds {warm - plain:.1f} ms)")
        print(f"modulefinder, same closure: {mf:8.1f} ms  (ratio closure cold / modulefinder: {(cold - plain) / mf:.2f})")
    finally:
        shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    main()
