#!/usr/bin/env bash
# Load benchmark of the public listener: `ogive serve` (release build, default logging, monitoring
# on) against the same-bytes floor, a bare actix-web server that parses the same JSON body and
# answers the very bytes ogive answered to that load (benches/load/bare_actix.rs), measured in
# the same run with the same worker count, on loopback only.
#
#   bash benches/load/run.sh                    # 5 s per measurement, 3 rounds, medians
#   DURATION=10s ROUNDS=5 WORKERS=2 bash benches/load/run.sh
#
# Loads: one observation with the full answer (effects and intervals, the defaults), one
# observation with `"effects": false, "intervals": false` (the probability-only answer), and a
# batch of 100 observations, each at 16 and 64 connections. The two servers are measured in
# turn, ROUNDS times, and each figure is the median over rounds. Per load it prints first each
# server's CPU time per request (utime + stime from /proc/PID/stat over the run, divided by the
# requests answered: what an operator pays for, and free of the load generator's share of the
# cores) and their ratio, then throughput, p50 and p99 latency and their ratios; at the end each
# server's peak resident memory (VmHWM). Needs wrk (Debian: apt-get install -y wrk) and curl.
# Extra `ogive serve` flags can be given in OGIVE_FLAGS (say, "--monitoring off"). BEFORE=PATH
# names a second ogive binary (an earlier build, say) that is measured in the same rounds
# against the same floor, so that a change's before and after ratios come from one run.
set -euo pipefail
cd "$(dirname "$0")/../.."

duration="${DURATION:-5s}"
rounds="${ROUNDS:-3}"
workers="${WORKERS:-2}"
threads="${WRK_THREADS:-1}"
source benches/load/common.sh
need wrk curl

cargo build -q --release --bin ogive --example bare_actix 2>/dev/null || cargo build --release --bin ogive --example bare_actix
target="${CARGO_TARGET_DIR:-target}"

start_ogive "$target/release/ogive" ogive --workers "$workers" ${OGIVE_FLAGS:-}
ogive_pid=$pid ogive_url=$url
servers=(ogive)
if [ -n "${BEFORE:-}" ]; then
  start_ogive "$BEFORE" before --workers "$workers" ${OGIVE_FLAGS:-}
  before_pid=$pid before_url=$url
  servers+=(before)
fi

write_bodies "$ogive_url" 100
path="/models/$model/probability"
loads=(full lean batch)
floor_args=()
for load in "${loads[@]}"; do
  mkdir -p "$work/answer-$load"
  status="$(curl -s -D "$work/answer-$load/headers" -o "$work/answer-$load/body" -w '%{http_code}' \
    -H 'Content-Type: application/json' --data-binary "@$work/$load.json" "$ogive_url$path")"
  [ "$status" = 200 ] || { echo "ogive answered $status to the $load body"; cat "$work/answer-$load/body"; exit 1; }
  floor_args+=("$load=$work/answer-$load")
done

"$target/release/examples/bare_actix" 127.0.0.1:0 "$workers" "${floor_args[@]}" >"$work/bare.out" 2>/dev/null &
bare_pid=$!; pids+=("$bare_pid")
wait_for_line "$work/bare.out" "^listening on"
bare_url="http://$(sed -n 's/^listening on //p' "$work/bare.out" | head -n 1)"
for load in "${loads[@]}"; do
  curl -fsS -H 'Content-Type: application/json' --data-binary "@$work/$load.json" "$bare_url/$load" \
    | cmp -s - "$work/answer-$load/body" || { echo "the floor does not answer ogive's bytes for $load"; exit 1; }
done

measure() { # url load connections seconds pid -> RESULT line with the server's CPU µs per request
  local before after line
  before="$(cpu_ticks "$5")"
  line="$(OGIVE_BODY="$work/$2.json" wrk -t"$threads" -c"$3" -d"$4" -s benches/load/post.lua "$1" \
    | grep '^RESULT')"
  after="$(cpu_ticks "$5")"
  echo "$line ticks=$((after - before)) seconds=${4%s}"
}

bytes() { wc -c <"$work/answer-$1/body" | tr -d ' '; }
echo "model $model from $models; $workers workers per server; wrk $threads thread(s); $duration per run; $rounds rounds, medians"
echo "answer sizes: full $(bytes full) B, lean $(bytes lean) B, batch $(bytes batch) B"
for load in "${loads[@]}"; do # warm each server
  measure "$bare_url/$load" "$load" 16 1s "$bare_pid" >/dev/null
  measure "$ogive_url$path" "$load" 16 1s "$ogive_pid" >/dev/null
  if [ -n "${BEFORE:-}" ]; then measure "$before_url$path" "$load" 16 1s "$before_pid" >/dev/null; fi
done
results="$work/results"
for round in $(seq 1 "$rounds"); do
  for load in "${loads[@]}"; do
    for connections in 16 64; do
      echo "$load $connections bare $(measure "$bare_url/$load" "$load" "$connections" "$duration" "$bare_pid")" >>"$results"
      echo "$load $connections ogive $(measure "$ogive_url$path" "$load" "$connections" "$duration" "$ogive_pid")" >>"$results"
      if [ -n "${BEFORE:-}" ]; then
        echo "$load $connections before $(measure "$before_url$path" "$load" "$connections" "$duration" "$before_pid")" >>"$results"
      fi
    done
  done
done
python3 - "$results" "$(getconf CLK_TCK)" "${servers[@]}" <<'PY'
import re, statistics, sys
from collections import defaultdict
path, tick, servers = sys.argv[1], int(sys.argv[2]), sys.argv[3:]
runs = defaultdict(list)
for line in open(path):
    load, conns, server = line.split()[:3]
    f = {k: float(v) for k, v in re.findall(r"(\w+)=([0-9.]+)", line)}
    f["cpu_us"] = f["ticks"] / tick * 1e6 / max(1.0, f["rps"] * f["seconds"])
    runs[(load, int(conns), server)].append(f)
med = lambda key, name: statistics.median(r[name] for r in runs[key])
for server in servers:
    print()
    print(f"{server}: {'load':<6} {'conns':>5} | {'CPU µs/req floor':>16} {server:>7} {'ratio':>6} | "
          f"{'rps floor':>9} {server:>8} {'ratio':>6} | {'p50 floor':>9} {server:>7} | "
          f"{'p99 floor':>9} {server:>7} {'ratio':>6} | errors")
    for load in ("full", "lean", "batch"):
        for conns in (16, 64):
            b, o = (load, conns, "bare"), (load, conns, server)
            errors = sum(r["non2xx"] + r["socket_errors"] for r in runs[b] + runs[o])
            print(f"{server}: {load:<6} {conns:>5} | {med(b,'cpu_us'):>16.1f} {med(o,'cpu_us'):>7.1f} "
                  f"{med(o,'cpu_us')/med(b,'cpu_us'):>6.2f} | {med(b,'rps'):>9.0f} {med(o,'rps'):>8.0f} "
                  f"{med(o,'rps')/med(b,'rps'):>6.2f} | {med(b,'p50_us'):>7.0f}us {med(o,'p50_us'):>5.0f}us | "
                  f"{med(b,'p99_us'):>7.0f}us {med(o,'p99_us'):>5.0f}us "
                  f"{med(o,'p99_us')/max(1.0, med(b,'p99_us')):>6.2f} | {errors:.0f}")
PY
echo
echo "peak RSS (VmHWM): ogive $(peak_rss "$ogive_pid"), floor $(peak_rss "$bare_pid")"
if [ -n "${BEFORE:-}" ]; then echo "peak RSS (VmHWM): before $(peak_rss "$before_pid")"; fi
