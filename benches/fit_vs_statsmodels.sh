#!/usr/bin/env bash
# Benchmark: `ogive fit` (release build) against the Python pipeline pandas.read_csv +
# statsmodels Logit(...).fit() / Probit(...).fit(), both as whole processes, on the same
# generated CSV of ROWS rows × 10 covariates, in the same run. Prints for each link the wall
# times and their ratio, the CPU times (user + system) and their ratio, the peak resident memory
# of each process, and the largest relative coefficient difference. Goal: ≥ 15× faster (CPU and wall),
# coefficients equal to 1e-10 (relative), less peak memory; each line says whether the time
# ratios and the coefficients met those goals. Wall time counts ogive's use of every core;
# on a machine busy with other work the CPU-time ratio is the steadier of the two, and the
# load average is printed so a reader can judge.
#
# Usage: bash benches/fit_vs_statsmodels.sh [ROWS]     (default 1000000; needs python3 with
# numpy, pandas and statsmodels)
set -euo pipefail

root="$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)"
cd "$root"
rows="${1:-1000000}"
helper=benches/fit_vs_statsmodels.py
work="$(mktemp -d)"
trap 'rm -rf "$work"' EXIT

cargo build --release --quiet --bin ogive
ogive="$root/target/release/ogive"

echo "generating $rows rows × 10 covariates"
python3 "$helper" generate "$work/data.csv" "$rows"
ls -l "$work/data.csv" | awk '{printf "CSV size: %.1f MB\n", $5 / 1e6}'
terms="x1, x2, x3, x4, x5, x6, x7, b1, b2, b3"

field() { python3 -c "import json,sys; print(json.load(open(sys.argv[1]))[sys.argv[2]])" "$1" "$2"; }

uptime | sed 's/^.*load/load/'
printf '\n%-7s %9s %9s %7s %11s %11s %7s %10s %10s %12s\n' link "ogive s" "python s" ratio \
    "ogive cpu" "python cpu" ratio "ogive MiB" "python MiB" "max rel diff"
for link in logit probit; do
    python3 "$helper" measure "$work/ogive-$link.time" -- \
        "$ogive" fit --data "$work/data.csv" --outcome y --terms "$terms" --link "$link" \
        --name bench --version 1 --out "$work/$link.json"
    python3 "$helper" measure "$work/python-$link.time" -- \
        python3 "$helper" statsmodels "$work/data.csv" "$link" "$work/$link-statsmodels.json"
    ours_s=$(field "$work/ogive-$link.time" seconds)
    theirs_s=$(field "$work/python-$link.time" seconds)
    ours_cpu=$(field "$work/ogive-$link.time" cpu_seconds)
    theirs_cpu=$(field "$work/python-$link.time" cpu_seconds)
    ours_kib=$(field "$work/ogive-$link.time" peak_kib)
    theirs_kib=$(field "$work/python-$link.time" peak_kib)
    diff=$(python3 "$helper" compare "$work/$link.json" "$work/$link-statsmodels.json")
    python3 - "$link" "$ours_s" "$theirs_s" "$ours_cpu" "$theirs_cpu" "$ours_kib" "$theirs_kib" "$diff" <<'PY'
import sys
link, a, b, ca, cb, ma, mb, d = sys.argv[1:]
a, b, ca, cb = float(a), float(b), float(ca), float(cb)
ma, mb = float(ma) / 1024, float(mb) / 1024
print("%-7s %9.3f %9.3f %6.1fx %11.3f %11.3f %6.1fx %10.1f %10.1f %12s"
      % (link, a, b, b / a, ca, cb, cb / ca, ma, mb, d))
verdict = lambda ok: "met" if ok else "MISSED"
print("        goals: wall >= 15x %s, cpu >= 15x %s, coefficients within 1e-10 %s"
      % (verdict(b / a >= 15), verdict(cb / ca >= 15), verdict(float(d) <= 1e-10)))
PY
done
