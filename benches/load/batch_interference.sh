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
command -v wrk >/dev/null || { echo "wrk is needed: apt-get install -y wrk"; exit 1; }

ogive="${OGIVE:-}"
if [ -z "$ogive" ]; then
  cargo build -q --release --bin ogive 2>/dev/null || cargo build --release --bin ogive
  ogive="${CARGO_TARGET_DIR:-target}/release/ogive"
fi
models=tests/http/models
if compgen -G "model-files/*/live" >/dev/null; then models=model-files; fi

work="$(mktemp -d)"
pids=()
cleanup() {
  for pid in "${pids[@]}"; do kill "$pid" 2>/dev/null || true; done
  wait 2>/dev/null || true
  rm -rf "$work"
}
trap cleanup EXIT

"$ogive" serve --models "$models" --listen 127.0.0.1:0 --admin-listen 127.0.0.1:0 \
  --workers "$workers" --drain-delay-ms 0 --max-batch 10000 ${OGIVE_FLAGS:-} \
  >"$work/ogive.out" 2>/dev/null &
pids+=("$!")
for _ in $(seq 1 100); do grep -q "^ogive serving on" "$work/ogive.out" 2>/dev/null && break; sleep 0.1; done
url="$(sed -n 's/^ogive serving on //p' "$work/ogive.out" | head -n 1)"
[ -n "$url" ] || { echo "ogive serve did not start"; cat "$work/ogive.out"; exit 1; }

model="$(curl -fsS "$url/models" | python3 -c 'import json,sys; print(json.load(sys.stdin)["models"][0]["name"])')"
curl -fsS "$url/models/$model" | python3 -c '
import json, sys
detail = json.load(sys.stdin)
example = detail["example"]
numeric = [c["name"] for c in detail["covariates"] if c["kind"] == "continuous"]
def varied(i):
    o = dict(example)
    for name in numeric:
        o[name] = example[name] * (0.8 + 0.00004 * i)
    return o
json.dump({"observation": example}, open(sys.argv[1], "w"))
json.dump({"observations": [varied(i) for i in range(10000)]}, open(sys.argv[2], "w"))
' "$work/single.json" "$work/batch.json"
path="/models/$model/probability"
for body in single batch; do
  status="$(curl -s -o /dev/null -w '%{http_code}' -H 'Content-Type: application/json' \
    --data-binary "@$work/$body.json" "$url$path")"
  [ "$status" = 200 ] || { echo "ogive answered $status to the $body body"; exit 1; }
done

single() { # -> RESULT line of the single-observation load
  OGIVE_BODY="$work/single.json" wrk -t1 -c"$single_connections" -d"$duration" \
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
echo "peak RSS (VmHWM): $(awk '/VmHWM/ {print $2, $3}' "/proc/${pids[0]}/status")"
