#!/usr/bin/env bash
# Benchmark: `ogive evaluate --against` against a Python process computing the same figures
# with pandas, scikit-learn, statsmodels, scipy and numpy (see evaluate_vs_python.py), both
# whole processes on the same labelled file of two models, in the same run, three times each;
# the medians are compared, and ogive's peak resident memory is reported.
#
#   bash benches/evaluate_vs_python.sh            # 1,000,000 rows
#   ROWS=200000 bash benches/evaluate_vs_python.sh   # a quicker look
#
# Goals: ogive at least 10x faster than the Python process; memory bounded by 56 bytes a row
# above the fixed cost of the process: the 8 bytes a row each model keeps (16 for two), and
# while the two models are ranked on two threads, each one's (score, row) pairs (16 bytes a
# row) and placements (4). The script prints the figures and
# whether each goal was met; it fails only if a run fails or the two disagree on a figure.
# Needs: cargo, python3 with numpy, pandas, scipy, scikit-learn and statsmodels. Files go to
# bench-out/ (git-ignored).
set -euo pipefail
cd "$(dirname "$0")/.."

rows=${ROWS:-1000000}
work=bench-out/evaluate_vs_python
helper=benches/evaluate_vs_python.py
mkdir -p "$work"

echo "building ogive (release)…"
cargo build --release --quiet --bin ogive
ogive="${CARGO_TARGET_DIR:-target}/release/ogive"

python3 "$helper" make-models "$work/a.json" "$work/b.json"
"$ogive" check "$work/a.json" "$work/b.json" >/dev/null
echo "generating $rows labelled rows × 10 covariates…"
python3 "$helper" make-data "$rows" "$work/data.csv"

# Each line of a measurement: name, wall seconds, peak resident MiB, exit status.
measure() { python3 "$helper" measure "$@"; }

: >"$work/runs.tsv"
for run in 1 2 3; do
  echo "run $run of 3: ogive, then python…"
  measure ogive -- sh -c "\"$ogive\" evaluate --data $work/data.csv --outcome y \
    --model $work/a.json --against $work/b.json --format json >$work/ogive.json" >>"$work/runs.tsv"
  measure python -- python3 "$helper" python "$work/a.json" "$work/b.json" "$work/data.csv" \
    "$work/python.json" >>"$work/runs.tsv"
done
python3 "$helper" compare "$work/ogive.json" "$work/python.json"
# The peak memory of ogive alone (the measurement above includes the shell that redirects).
measure ogive-alone -- "$ogive" evaluate --data "$work/data.csv" --outcome y \
  --model "$work/a.json" --against "$work/b.json" --format json >"$work/alone.tsv"

python3 - "$rows" "$work" <<'PY'
import statistics, sys
rows, work = int(sys.argv[1]), sys.argv[2]
runs = [line.split() for line in open(f"{work}/runs.tsv")]
assert all(r[3] == "0" for r in runs), "a run failed"
median = lambda name: statistics.median(float(r[1]) for r in runs if r[0] == name)
o, p = median("ogive"), median("python")
alone = open(f"{work}/alone.tsv").read().split()
mib = float(alone[2])
ratio = p / o
print()
print(f"{rows:,} labelled rows, two models (10 and 5 covariates), every figure and the paired comparison:")
print(f"  ogive evaluate --against      median {o:8.2f} s of 3")
print(f"  pandas + sklearn + statsmodels median {p:8.2f} s of 3")
print(f"  time ratio python / ogive: {ratio:.1f}x   (goal >= 10x: {'met' if ratio >= 10 else 'MISSED'})")
print(f"  peak resident memory of ogive: {mib:.1f} MiB = {mib * 1048576 / rows:.1f} bytes a row "
      f"(bound: 56 bytes a row above the process's fixed cost)")
PY
