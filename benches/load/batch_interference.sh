#!/usr/bin/env bash
# What concurrent large batches do to single-observation latency: the p99 of one-observation
# requests measured alone, then again while other clients keep sending 10,000-observation
# batches, against the same `ogive serve` (release build) in the same run, on loopback only.
#
#   bash benches/load/batch_interference.sh
#   DURATION=5s WORKERS=2 BATCH_CONNECTIONS=2 bash benches/load/batch_interference.sh
#   OGIVE=/path/to/an/earlier/ogive bash benches/load/batch_interference.sh   # another build
#
# Prints each run's p50 and p99 (medians of RUNS repetitions) and the ratio of the p99 beside
# batches to the p99 alone. A ratio near 1 means the batches ran off the I/O workers; before the
# scoring pool a batch held the worker that read it, and every single request queued behind it
# waited for the whole batch. Needs wrk (Debian: apt-get install -y wrk). This is a benchmark,
# not a test: it asserts nothing.
set -euo pipefail
cd "$(dirname "$0")/../.."

duration="${DURATION:-10s}"
workers="${WORKERS:-2}"
runs="${RUNS:-3}"
single_connections="${SINGLE_CONNECTIONS:-8}"
batch_connections="${BATCH_CONNECTIONS:-2}"
source benches/load/common.sh
need wrk curl

ogive="${OGIVE:-}"
if [ -z "$ogive" ]; then
  cargo build -q --release --bin ogive 2>/dev/null || cargo build --release --bin ogive
  ogive="${CARGO_TARGET_DIR:-target}/release/ogive"
fi
start_ogive "$ogive" ogive --workers "$workers" --max-batch 10000 ${OGIVE_FLAGS:-}
write_bodies "$url" 10000
path="/models/$model/probability"
for body in full batch; do
  status="$(curl -s -o /dev/null -w '%{http_code}' -H 'Content-Type: application/json' \
    --data-binary "@$work/$body.json" "$url$path")"
  [ "$status" = 200 ] || { echo "ogive answered $status to the $body body"; exit 1; }
done

single() { # -> RESULT line of the single-observation load
  OGIVE_BODY="$work/full.json" wrk -t1 -c"$single_connections" -d"$duration" \
    -s benches/load/post.lua "$url$path" | grep '^RESULT'
}
field() { sed -n "s/.*$2=\([0-9.]*\).*/\1/p" <<<"$1"; }
median() { python3 -c 'import statistics,sys; print(statistics.median(float(x) for x in sys.argv[1:]))' "$@"; }

echo "model $model from $models; $workers workers; singles on $single_connections connections;" \
  "10,000-observation batches on $batch_connections; $runs runs of $duration each"
alone_p50=(); alone_p99=(); beside_p50=(); beside_p99=(); batches=()
for run in $(seq 1 "$runs"); do
  line="$(single)"
  alone_p50+=("$(field "$line" p50_us)"); alone_p99+=("$(field "$line" p99_us)")
  OGIVE_BODY="$work/batch.json" wrk -t1 -c"$batch_connections" -d"$duration" \
    -s benches/load/post.lua "$url$path" >"$work/batch.$run" 2>&1 &
  batch_pid=$!
  sleep 1
  line="$(single)"
  wait "$batch_pid" || true
  beside_p50+=("$(field "$line" p50_us)"); beside_p99+=("$(field "$line" p99_us)")
  batches+=("$(field "$(grep '^RESULT' "$work/batch.$run")" rps)")
  echo "run $run: alone p99 ${alone_p99[-1]} us, beside batches p99 ${beside_p99[-1]} us"
done
a50="$(median "${alone_p50[@]}")"; a99="$(median "${alone_p99[@]}")"
b50="$(median "${beside_p50[@]}")"; b99="$(median "${beside_p99[@]}")"
printf '\n%-16s %10s %10s\n' "" "p50 (us)" "p99 (us)"
printf '%-16s %10.0f %10.0f\n' "alone" "$a50" "$a99"
printf '%-16s %10.0f %10.0f\n' "beside batches" "$b50" "$b99"
printf 'p99 ratio (beside / alone): %.2f; batches answered per second meanwhile: %s\n' \
  "$(python3 -c "print($b99 / max(1.0, $a99))")" "$(median "${batches[@]}")"
echo "peak RSS (VmHWM): $(peak_rss "$pid")"
