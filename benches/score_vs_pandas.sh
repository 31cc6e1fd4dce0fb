#!/usr/bin/env bash
# Benchmark: `ogive score --effects` against a Python process doing the same job with pandas
# and numpy (read_csv, probabilities, intervals, derivative effects and their delta-method
# standard errors, to_csv), both whole processes, timed in the same run on the same file; ogive
# with its default threads (one per core) and with --threads 1. Then the peak memory of
# `ogive score` on a ten times larger file.
#
#   bash benches/score_vs_pandas.sh                 # 1,000,000 rows, then 10,000,000
#   ROWS=200000 BIG_ROWS=1000000 bash benches/score_vs_pandas.sh   # a quicker look
#
# Goals: ogive (default threads) at least 20× faster than the pandas process in wall time, and
# at most 50 MB peak resident memory whatever the file size. The script prints the figures, the
# machine's core count and load, and whether each goal was met; it fails only if a run fails,
# the two outputs disagree, or one thread and many write different bytes.
# Needs: cargo, python3 with numpy, pandas and scipy. Files go to bench-out/ (git-ignored).
set -euo pipefail
cd "$(dirname "$0")/.."

rows=${ROWS:-1000000}
big_rows=${BIG_ROWS:-10000000}
work=bench-out/score_vs_pandas
helper=benches/score_vs_pandas.py
mkdir -p "$work"

echo "building ogive (release)…"
cargo build --release --quiet
ogive=target/release/ogive

python3 "$helper" make-model "$work/model.json"
"$ogive" check "$work/model.json" >/dev/null
echo "generating $rows rows × 10 covariates…"
python3 "$helper" make-data "$rows" "$work/data.csv"

# Each line of a measurement: name, wall seconds, peak resident MiB, exit status.
measure() { python3 "$helper" measure "$@"; }

echo "timing both on the same file (ogive, ogive --threads 1, then pandas)…"
measure ogive -- "$ogive" score --model "$work/model.json" --data "$work/data.csv" \
  --out "$work/ogive.csv" --effects >"$work/ogive.tsv"
measure ogive-one -- "$ogive" score --model "$work/model.json" --data "$work/data.csv" \
  --out "$work/ogive-one.csv" --effects --threads 1 >"$work/ogive-one.tsv"
cmp "$work/ogive.csv" "$work/ogive-one.csv"
measure pandas -- python3 "$helper" pandas "$work/model.json" "$work/data.csv" \
  "$work/pandas.csv" >"$work/pandas.tsv"
python3 "$helper" compare "$work/ogive.csv" "$work/pandas.csv"
rm -f "$work/ogive.csv" "$work/ogive-one.csv" "$work/pandas.csv" "$work/data.csv"

echo "generating $big_rows rows (streamed to disk in chunks)…"
python3 "$helper" make-data "$big_rows" "$work/big.csv" 2
measure ogive-big --discard-output -- "$ogive" score --model "$work/model.json" \
  --data "$work/big.csv" --out - --effects >"$work/big.tsv"
rm -f "$work/big.csv"

python3 - "$rows" "$big_rows" "$work" <<'PY'
import os, sys
rows, big_rows, work = int(sys.argv[1]), int(sys.argv[2]), sys.argv[3]
def read(name):
    fields = open(f"{work}/{name}.tsv").read().split()
    return float(fields[1]), float(fields[2]), int(fields[3])
o_s, o_mb, o_rc = read("ogive")
one_s, one_mb, one_rc = read("ogive-one")
p_s, p_mb, p_rc = read("pandas")
b_s, b_mb, b_rc = read("big")
assert o_rc == 0 and one_rc == 0 and p_rc == 0 and b_rc == 0, "a run failed"
ratio = p_s / o_s
print()
print(f"{os.cpu_count()} cores, load average {os.getloadavg()[0]:.1f} at the end")
print(f"{rows:,} rows x 10 covariates, effects and standard errors for each:")
print(f"  ogive score --effects   {o_s:8.2f} s   peak {o_mb:7.1f} MiB   {rows / o_s:12,.0f} rows/s")
print(f"    with --threads 1      {one_s:8.2f} s   peak {one_mb:7.1f} MiB   {rows / one_s:12,.0f} rows/s")
print(f"  pandas + numpy          {p_s:8.2f} s   peak {p_mb:7.1f} MiB   {rows / p_s:12,.0f} rows/s")
print(f"  time ratio pandas / ogive: {ratio:.1f}x   (goal >= 20x: {'met' if ratio >= 20 else 'MISSED'})")
print(f"  time ratio pandas / ogive --threads 1: {p_s / one_s:.1f}x")
print(f"{big_rows:,} rows:")
print(f"  ogive score --effects   {b_s:8.2f} s   peak {b_mb:7.1f} MiB   {big_rows / b_s:12,.0f} rows/s")
worst = max(o_mb, b_mb)
print(f"  peak memory of ogive: {worst:.1f} MiB   (goal <= 50 MB: {'met' if worst * 1.048576 <= 50 else 'MISSED'})")
PY
