#!/usr/bin/env bash
# Run every fuzz target (or the ones named) for RUNS executions each, one after another, at low
# priority, with a time guard. Usage, from anywhere:
#   fuzz/run.sh                      every target, 1,000,000 runs each
#   RUNS=50000 fuzz/run.sh observation
# Needs cargo-fuzz (`cargo install cargo-fuzz`). On a stable toolchain RUSTC_BOOTSTRAP=1 lets
# cargo-fuzz use the sanitizer flags it needs; on nightly it is harmless. Set SANITIZER=none if
# the address-sanitizer build fails on this machine.
set -euo pipefail
cd "$(dirname "$0")"
runs="${RUNS:-1000000}"
guard_seconds="${MAX_TOTAL_TIME:-3600}"
sanitizer="${SANITIZER:-address}"
if [ "$#" -gt 0 ]; then targets=("$@"); else mapfile -t targets < <(RUSTC_BOOTSTRAP=1 cargo fuzz list); fi
for target in "${targets[@]}"; do
  mkdir -p "corpus/$target" "artifacts/$target"
  echo "=== $target: $runs runs (at most $guard_seconds s)"
  log="artifacts/$target/last-run.log"
  status=0
  # libFuzzer grows the first directory only; the others are read as seeds. The committed
  # demo models seed the model-file target too.
  dirs=("corpus/$target" "seeds/$target")
  if [ "$target" = model_file ]; then
    for versions in ../model-files/*/versions; do [ -d "$versions" ] && dirs+=("$versions"); done
  fi
  RUSTC_BOOTSTRAP=1 nice -n 10 cargo fuzz run --sanitizer "$sanitizer" "$target" "${dirs[@]}" -- \
    -runs="$runs" -max_total_time="$guard_seconds" -print_final_stats=1 >"$log" 2>&1 || status=$?
  grep -E '^(Done|stat::number_of_executed_units|SUMMARY|Test unit written)|panicked' "$log" || true
  if [ "$status" -ne 0 ]; then
    echo "$target failed (exit $status): see $log; the input that broke it is in artifacts/$target/"
    exit "$status"
  fi
done
