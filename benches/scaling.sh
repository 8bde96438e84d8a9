#!/usr/bin/env bash
# Instruction counts of every lockfile parser at N and 10N entries, under valgrind's callgrind
# (counts, not seconds: the same for the same binary and input whatever else the machine is
# doing). A linear parser costs about 10x the instructions for 10x the entries, whatever the
# caches do to wall time; `examples/scaling_bench.rs` gives the wall times.
#
#   benches/scaling.sh          # N = 300
#   benches/scaling.sh 1000
set -euo pipefail
cd "$(dirname "$0")/.."
n="${1:-300}"
cargo build --release --quiet --example scaling_bench
bin=target/release/examples/scaling_bench
names=$(sed -n 's/^    ("\([^"]*\)", |n| {$/\1/p' examples/scaling_bench.rs)
count() { # format, entries, [function pattern] -> instructions inside the parser
  local out
  out=$(mktemp)
  SCALING_ONLY="$1" valgrind --tool=callgrind --callgrind-out-file="$out" \
    --toggle-collect="${3:-runprint::lockfile::*}" "$bin" "$2" 2>&1 >/dev/null |
    sed -n 's/.*Collected : \([0-9]*\).*/\1/p'
  rm -f "$out"
}
echo "| format | instructions at $n | at $((n * 10)) | ratio |"
echo "|---|---|---|---|"
row() { # shown name, SCALING_ONLY value, [function pattern]
  local a b
  a=$(count "$2" "$n" "${3:-}")
  b=$(count "$2" $((n * 10)) "${3:-}")
  awk -v f="$1" -v a="$a" -v b="$b" 'BEGIN { printf "| `%s` | %.0f | %.0f | %.1fx |\n", f, a, b, b / a }'
}
for f in $names; do
  row "$f" "$f"
done
row "manifest (TOML)" manifest 'runprint::manifest::Manifest::parse*'
row "runprint.toml [[accept]]" policy 'runprint::policy::Policy::parse*'
