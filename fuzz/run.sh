#!/usr/bin/env bash
# Runs every fuzz target for SECONDS (default 600) each, all at once, and prints a
# line per target: executions, corpus size, crashes found. Stable toolchain:
# `--sanitizer none` (cargo-fuzz's default sanitizer needs nightly; logstrip itself
# forbids `unsafe`, so the sanitizer would only watch dependencies), with debug
# assertions on (`-a`), so that integer overflow panics too.
#
#   cargo install cargo-fuzz --locked     # 0.13.2 here
#   bash fuzz/run.sh [SECONDS]
set -euo pipefail
cd "$(dirname "$0")"
seconds=${1:-600}
python3 seeds.py
cargo fuzz build -O -a -s none
mkdir -p logs
pids=()
for target in snapshot_json snapshot_csv analyze_numbers; do
  dict=()
  case $target in
    snapshot_json) dict=(-dict=json.dict) ;;
    snapshot_csv) dict=(-dict=csv.dict) ;;
  esac
  cargo fuzz run -O -a -s none "$target" -- -max_total_time="$seconds" -max_len=8192 \
    -timeout=10 -report_slow_units=1 -rss_limit_mb=2048 -print_final_stats=1 "${dict[@]}" \
    > "logs/$target.log" 2>&1 &
  pids+=($!)
done
status=0
for pid in "${pids[@]}"; do wait "$pid" || status=1; done
for target in snapshot_json snapshot_csv analyze_numbers; do
  runs=$(grep -o 'stat::number_of_executed_units: *[0-9]*' "logs/$target.log" | grep -o '[0-9]*$' || echo "?")
  corpus=$(ls "corpus/$target" | wc -l)
  slowest=$(grep -o 'stat::slowest_unit_time_sec: *[0-9]*' "logs/$target.log" | grep -o '[0-9]*$' || echo "?")
  crashes=$(ls "artifacts/$target" 2>/dev/null | wc -l)
  echo "$target: $runs executions in ${seconds} s, corpus $corpus inputs, slowest input ${slowest} s, $crashes artifacts (crashes or inputs over 1 s)"
done
exit $status
