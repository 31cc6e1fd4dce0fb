#!/usr/bin/env bash
# Load benchmark of the public listener: `ogive serve` (release build, default logging) against
# a bare actix-web server that only parses the same JSON body (benches/load/bare_actix.rs),
# measured in the same run with the same worker count, on loopback only.
#
#   bash benches/load/run.sh            # 10 s per measurement
#   DURATION=5s WORKERS=2 bash benches/load/run.sh
#
# Loads: one observation with effects and intervals (the defaults), and batches of 100
# observations, each at 16 and 64 connections. Prints per load the throughput of both servers
# and their ratio, p50 and p99 latency and the p99 ratio, each server's CPU time per request
# (from /proc/PID/stat: steadier than throughput on a machine shared with other work), and
# each server's peak resident memory (VmHWM from /proc). Needs wrk (Debian: apt-get install -y
# wrk). Extra `ogive serve` flags can be given in OGIVE_FLAGS (say, "--monitoring off").
set -euo pipefail
cd "$(dirname "$0")/../.."

duration="${DURATION:-10s}"
workers="${WORKERS:-2}"
threads="${WRK_THREADS:-2}"
command -v wrk >/dev/null || { echo "wrk is needed: apt-get install -y wrk"; exit 1; }

cargo build -q --release --bin ogive --example bare_actix 2>/dev/null || cargo build --release --bin ogive --example bare_actix
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

wait_for_line() { # file pattern
  for _ in $(seq 1 100); do
    if grep -q "$2" "$1" 2>/dev/null; then return 0; fi
    sleep 0.1
  done
  echo "no '$2' in $1"; cat "$1"; exit 1
}

target/release/ogive serve --models "$models" --listen 127.0.0.1:0 --admin-listen 127.0.0.1:0 \
  --workers "$workers" --drain-delay-ms 0 ${OGIVE_FLAGS:-} >"$work/ogive.out" 2>/dev/null &
ogive_pid=$!; pids+=("$ogive_pid")
target/release/examples/bare_actix 127.0.0.1:0 "$workers" >"$work/bare.out" 2>/dev/null &
bare_pid=$!; pids+=("$bare_pid")
wait_for_line "$work/ogive.out" "^ogive serving on"
wait_for_line "$work/bare.out" "^listening on"
ogive_url="$(sed -n 's/^ogive serving on //p' "$work/ogive.out" | head -n 1)"
bare_url="http://$(sed -n 's/^listening on //p' "$work/bare.out" | head -n 1)"

model="$(curl -fsS "$ogive_url/models" | python3 -c 'import json,sys; print(json.load(sys.stdin)["models"][0]["name"])')"
curl -fsS "$ogive_url/models/$model" | python3 -c '
import json, sys
detail = json.load(sys.stdin)
example = detail["example"]
numeric = [c["name"] for c in detail["covariates"] if c["kind"] == "continuous"]
def varied(i):
    o = dict(example)
    for name in numeric:
        o[name] = example[name] * (0.8 + 0.004 * i)
    return o
json.dump({"observation": example}, open(sys.argv[1], "w"))
json.dump({"observations": [varied(i) for i in range(100)]}, open(sys.argv[2], "w"))
' "$work/single.json" "$work/batch.json"
path="/models/$model/probability"
for body in single batch; do
  status="$(curl -s -o /dev/null -w '%{http_code}' -H 'Content-Type: application/json' \
    --data-binary "@$work/$body.json" "$ogive_url$path")"
  [ "$status" = 200 ] || { echo "ogive answered $status to the $body body"; exit 1; }
done

cpu_ticks() { # pid -> utime + stime, in clock ticks
  awk '{print $14 + $15}' "/proc/$1/stat"
}
measure() { # url body connections seconds pid -> RESULT line with the server's CPU µs per request
  local before after line
  before="$(cpu_ticks "$5")"
  line="$(OGIVE_BODY="$work/$2.json" wrk -t"$threads" -c"$3" -d"$4" -s benches/load/post.lua "$1$path" \
    | grep '^RESULT')"
  after="$(cpu_ticks "$5")"
  python3 - "$line" "$before" "$after" "$4" "$(getconf CLK_TCK)" <<'PY'
import re, sys
line, before, after, duration, tick = sys.argv[1:]
rps = float(re.search(r"rps=([0-9.]+)", line).group(1))
seconds = float(duration.rstrip("s"))
cpu_us = (int(after) - int(before)) / int(tick) * 1e6 / max(1.0, rps * seconds)
print(f"{line} cpu_us={cpu_us:.1f}")
PY
}
field() { sed -n "s/.*$2=\([0-9.]*\).*/\1/p" <<<"$1"; }

echo "model $model from $models; $workers workers per server; wrk $threads threads; $duration per run"
for body in single batch; do
  measure "$bare_url" "$body" 16 2s "$bare_pid" >/dev/null
  measure "$ogive_url" "$body" 16 2s "$ogive_pid" >/dev/null
done
printf '\n%-7s %5s | %10s %10s %6s | %8s %8s | %8s %8s %6s | %13s | %s\n' \
  load conns "bare rps" "ogive rps" ratio "bare p50" "ogive" "bare p99" "ogive" ratio \
  "CPU µs/req" "errors"
for body in single batch; do
  for connections in 16 64; do
    bare="$(measure "$bare_url" "$body" "$connections" "$duration" "$bare_pid")"
    ours="$(measure "$ogive_url" "$body" "$connections" "$duration" "$ogive_pid")"
    printf '%-7s %5s | %10.0f %10.0f %6.3f | %6dus %6dus | %6dus %6dus %6.3f | %5.1f / %5.1f | %s\n' \
      "$body" "$connections" "$(field "$bare" rps)" "$(field "$ours" rps)" \
      "$(python3 -c "print($(field "$ours" rps) / $(field "$bare" rps))")" \
      "$(field "$bare" p50_us)" "$(field "$ours" p50_us)" \
      "$(field "$bare" p99_us)" "$(field "$ours" p99_us)" \
      "$(python3 -c "print($(field "$ours" p99_us) / max(1, $(field "$bare" p99_us)))")" \
      "$(field "$bare" cpu_us)" "$(field "$ours" cpu_us)" \
      "bare non2xx=$(field "$bare" non2xx) ogive non2xx=$(field "$ours" non2xx) socket=$(field "$ours" socket_errors)"
  done
done
echo
echo "peak RSS (VmHWM): ogive $(awk '/VmHWM/ {print $2, $3}' "/proc/$ogive_pid/status"), bare actix-web $(awk '/VmHWM/ {print $2, $3}' "/proc/$bare_pid/status")"
