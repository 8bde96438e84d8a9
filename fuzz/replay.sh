#!/usr/bin/env bash
# CI: builds every fuzz target on the stable toolchain (no coverage instrumentation, so no
# nightly needed) and runs each once over its whole regression corpus. A panic fails the run.
set -euo pipefail
cd "$(dirname "$0")/.."
source fuzz/targets.sh
cargo build --locked -p runprint-fuzz --bins
dir="${CARGO_TARGET_DIR:-target}/debug"
total=0
for t in $(all_targets); do
  mapfile -t files < <(find $(seeds "$t") -type f -not -name '*.py' | sort)
  [ ${#files[@]} -gt 0 ] || { echo "fuzz: target $t has no corpus" >&2; exit 1; }
  if ! out=$("$dir/$t" "${files[@]}" 2>&1); then
    printf '%s\n' "$out" | tail -40 >&2
    echo "fuzz: target $t failed on its corpus" >&2
    exit 1
  fi
  total=$((total + ${#files[@]}))
done
echo "fuzz: $(all_targets | wc -l) targets replayed $total corpus inputs without a failure"
