#!/usr/bin/env bash
# Benchmark of `runprint fleet`: 1,000 node manifests of realistic size (examples/synth_fleet.rs),
# compared in one call. Reports the best of 3 wall-clock times and the ratio against reading the
# same files with `cat`, measured in the same run, so the figure travels between machines.
#
#   benches/fleet.sh [N]        (default N = 1000)
set -euo pipefail
cd "$(dirname "$0")/.."
n="${1:-1000}"
work="$(mktemp -d)"
trap 'rm -rf "$work"' EXIT

cargo build --quiet --release --bin runprint --example synth_fleet
./target/release/examples/synth_fleet "$n" "$work/nodes"
bytes=$(cat "$work"/nodes/*.toml | wc -c)

# Best of three, in seconds, of a command run with its output discarded.
best_of_3() {
  local best=""
  for _ in 1 2 3; do
    local start end t
    start=$(date +%s.%N)
    "$@" >/dev/null 2>&1 || true
    end=$(date +%s.%N)
    t=$(echo "$end - $start" | bc -l)
    if [ -z "$best" ] || [ "$(echo "$t < $best" | bc -l)" = 1 ]; then best=$t; fi
  done
  printf '%.3f' "$best"
}

cat_all() { cat "$work"/nodes/*.toml; }
baseline=$(best_of_3 cat_all)
fleet=$(best_of_3 ./target/release/runprint fleet "$work/nodes" --format json)
./target/release/runprint fleet "$work/nodes" | head -n 3 || true

echo "manifests: $n ($((bytes / 1024)) KiB in all)"
echo "cat of all files: ${baseline} s"
echo "runprint fleet:   ${fleet} s"
echo "ratio fleet/cat:  $(echo "$fleet / ($baseline + 0.0005)" | bc -l | xargs printf '%.0f')x"
