#!/usr/bin/env bash
# Benchmark of the Python section of `runprint stamp --python` against listing the same
# environment's distributions with importlib.metadata, in the same run.
#
#   benches/stack.sh [PYTHON]
#
# Without PYTHON it builds `.bench-venv-stack/` (ignored by git) with at least 150
# distributions from PyPI. Each side runs RUNS times; medians are compared. runprint prints
# its per-section durations to stderr when RUNPRINT_TIMINGS is set.
set -euo pipefail
cd "$(dirname "$0")/.."
RUNS="${RUNS:-15}"
PY="${1:-}"
if [ -z "$PY" ]; then
  VENV=.bench-venv-stack
  if [ ! -x "$VENV/bin/python" ]; then
    python3 -m venv "$VENV"
    "$VENV/bin/python" -m pip install -q --disable-pip-version-check --only-binary=:all: \
      -r benches/stack-requirements.txt
  fi
  PY="$VENV/bin/python"
fi
COUNT="$("$PY" -c 'import importlib.metadata as m; print(len(list(m.distributions())))')"
echo "environment: $PY ($COUNT distributions)"
[ "$COUNT" -ge 150 ] || echo "warning: fewer than 150 distributions"

cargo build --release --quiet
BIN=target/release/runprint
REPO="$(mktemp -d)"
trap 'rm -rf "$REPO"' EXIT

median() { sort -g | awk '{a[NR]=$1} END {print (NR%2) ? a[(NR+1)/2] : (a[NR/2]+a[NR/2+1])/2}'; }

ref=(); py=(); native=(); total=()
for _ in $(seq "$RUNS"); do
  # Reference: a fresh interpreter listing its distributions.
  s=$(date +%s%N)
  "$PY" -c "import importlib.metadata as m; list(m.distributions())"
  e=$(date +%s%N)
  ref+=("$(( (e - s) / 1000 ))")
  s=$(date +%s%N)
  # --rehash: the scan itself, not the stack cache (src/collect/stack_cache.rs).
  line="$(RUNPRINT_TIMINGS=1 "$BIN" stamp --rehash --repo "$REPO" --python "$PY" 2>&1 >/dev/null | grep '^timing: python ')"
  e=$(date +%s%N)
  total+=("$(( (e - s) / 1000 ))")
  py+=("$(echo "$line" | sed -E 's/.*python ([0-9.]+) ms.*/\1/')")
  native+=("$(echo "$line" | sed -E 's/.*native ([0-9.]+) ms.*/\1/')")
done
REF_MS=$(printf '%s\n' "${ref[@]}" | median | awk '{print $1/1000}')
PY_MS=$(printf '%s\n' "${py[@]}" | median)
NATIVE_MS=$(printf '%s\n' "${native[@]}" | median)
TOTAL_MS=$(printf '%s\n' "${total[@]}" | median | awk '{print $1/1000}')
RATIO=$(awk -v a="$PY_MS" -v b="$REF_MS" 'BEGIN {printf "%.3f", a/b}')
echo "importlib.metadata listing (whole python process): ${REF_MS} ms (median of $RUNS)"
echo "runprint python section: ${PY_MS} ms; native section: ${NATIVE_MS} ms; whole stamp: ${TOTAL_MS} ms"
echo "ratio python section / importlib.metadata: ${RATIO} (target < 0.2)"
awk -v r="$RATIO" 'BEGIN {exit !(r < 0.2)}' || { echo "FAIL: ratio not below 0.2"; exit 1; }
