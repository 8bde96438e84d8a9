#!/usr/bin/env bash
# Runs every fuzz target (or those named) for SECONDS each, two at a time, with libFuzzer via
# cargo fuzz on the nightly toolchain. Seeds come from the regression corpus in tests/corpus/;
# what libFuzzer learns goes to fuzz/corpus/TARGET (ignored by git), crashes to
# fuzz/artifacts/TARGET. The targets are built once, before any runs, so that editing the
# sources meanwhile changes nothing. A target that crashes is restarted until its time is used
# up, so one finding does not end the search. A summary line per target goes to
# fuzz/campaign.log.
#
#   fuzz/campaign.sh 600                 # every target, ten minutes each
#   fuzz/campaign.sh 60 cargo_lock uv_lock
set -euo pipefail
cd "$(dirname "$0")/.."
secs="${1:?usage: fuzz/campaign.sh SECONDS [TARGET...]}"
shift
jobs="${FUZZ_JOBS:-2}"
source fuzz/targets.sh
targets=("$@")
if [ ${#targets[@]} -eq 0 ]; then
  mapfile -t targets < <(all_targets)
fi
cargo +nightly fuzz build -O
export FUZZ_BIN="target/$(rustc -vV | sed -n 's/^host: //p')/release"

run_one() {
  local t="$1" secs="$2" start end left dirs
  mkdir -p "fuzz/corpus/$t" "fuzz/artifacts/$t" "fuzz/logs"
  # libFuzzer reads seed folders one level deep: gather good/bad/lenient cases in one place.
  local seed_dir="fuzz/corpus/.seeds-$t"
  rm -rf "$seed_dir" && mkdir -p "$seed_dir"
  for d in $(seeds "$t"); do
    find "$d" -type f -not -name '*.py' -exec sh -c 'for f; do cp "$f" "$0/$(echo "$f" | tr / _)"; done' "$seed_dir" {} +
  done
  start=$(date +%s)
  end=$((start + secs))
  local runs=0
  while left=$((end - $(date +%s))); [ "$left" -gt 0 ]; do
    runs=$((runs + 1))
    "$FUZZ_BIN/$t" "fuzz/corpus/$t" "$seed_dir" \
      -max_total_time="$left" -timeout=10 -rss_limit_mb=2048 -print_final_stats=1 \
      -artifact_prefix="fuzz/artifacts/$t/" >"fuzz/logs/$t.$runs.log" 2>&1 || true
  done
  local execs
  execs=$(grep -h 'stat::number_of_executed_units' fuzz/logs/"$t".*.log | awk '{s += $2} END {print s + 0}')
  printf '%s\t%s s\t%s executions\t%s corpus inputs\t%s findings\n' "$t" "$(( $(date +%s) - start ))" \
    "$execs" "$(ls "fuzz/corpus/$t" | wc -l)" "$(ls "fuzz/artifacts/$t" | wc -l)" | tee -a fuzz/campaign.log
}
export -f run_one seeds all_targets
printf '%s\n' "${targets[@]}" | xargs -P "$jobs" -I{} bash -c 'run_one "$@"' _ {} "$secs"
