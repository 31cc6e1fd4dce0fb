#!/usr/bin/env bash
# What monitoring costs: the load of the service's benchmark (benches/load/run.sh: its wrk
# script benches/load/post.lua, its bodies, its worker and thread counts) against
# `ogive serve --monitoring on` and `--monitoring off`, in the same run. Goal: at most
# 5% fewer requests per second with monitoring on.
#
#   loads     one observation with effects and intervals (the model's example observation),
#             and batches of 100 varied observations, each at 16 and 64 connections
#   servers   started at once from the same release binary and model directory, on their own
#             loopback ports with the same worker count: monitoring on, off, and a control with
#             monitoring on, whose difference from the first is this run's noise
#   rounds    ROUNDS (default 3) per load of two kinds:
#             alternating  on, then off (the order swapping each round), one server loaded at
#                          a time, as in the load benchmark
#             paired       two servers loaded at once by two wrk runs, so that whatever else the
#                          machine does falls on both alike: on against off, and on against the
#                          control; the throughput ratio of each round is kept
#             medians are compared
#   measures  requests per second and p99 (wrk, with a 10 s request timeout so that the paired
#             runs' queues are not counted as errors), and the server's CPU time per request
#             (user + system from /proc)
#
# The verdict uses the paired on/off ratio, the least disturbed by other work on the machine,
# and says so when that ratio is no further from 1 than the control's (the difference is then
# this run's noise, not monitoring). On a quiet machine the alternating figures agree with it.
#
# Then, for the single-observation load, the server CPU per request with monitoring on over
# off (on includes drift and sealing, so it bounds sealing from above), and the engine
# benchmark's time to seal one receipt (cargo bench --bench monitoring, run in the same script;
# SEAL_BENCH=0 skips it) as a share of off's CPU per request. Goal: sealing at most 5%.
#
# Also prints the share of drift samples the "on" server dropped (its window was busy) and
# both servers' peak RSS.
#
# Allocator: a batch of 100 allocates buffers above glibc's mmap threshold, which glibc maps and
# unmaps on every request unless long-lived memory sits above them in the heap, as the answer
# store's does. So with monitoring on, batches can run faster than with it off. To compare
# monitoring alone, take the allocator out of it for all three servers:
#   MALLOC_MMAP_THRESHOLD_=268435456 MALLOC_TRIM_THRESHOLD_=268435456 bash benches/monitoring_cost.sh
#
#   bash benches/monitoring_cost.sh
#   DURATION=5s ROUNDS=3 bash benches/monitoring_cost.sh
#
# Settings (environment): DURATION (per run, in seconds with an s, default 10s), ROUNDS (default 3), WORKERS (server
# workers, default 2), WRK_THREADS (default 2), OGIVE_BIN (a binary to use instead of building
# target/release/ogive), SEAL_BENCH (0 skips the seal benchmark). Needs wrk (Debian: apt-get install -y wrk), curl and python3.
set -euo pipefail
cd "$(dirname "$0")/.."

duration="${DURATION:-10s}"
rounds="${ROUNDS:-3}"
workers="${WORKERS:-2}"
threads="${WRK_THREADS:-2}"
source benches/load/common.sh
need wrk curl python3
if [ -n "${OGIVE_BIN:-}" ]; then
  ogive=$OGIVE_BIN
else
  cargo build -q --release --bin ogive
  ogive="${CARGO_TARGET_DIR:-target}/release/ogive"
fi
start_ogive "$ogive" on --workers "$workers" --monitoring on
url_on=$url pid_on=$pid
start_ogive "$ogive" off --workers "$workers" --monitoring off
url_off=$url pid_off=$pid
start_ogive "$ogive" control --workers "$workers" --monitoring on
url_control=$url pid_control=$pid

# The load benchmark's bodies: the model's example observation, and 100 variations of it.
write_bodies "$url_on" 100
path="/models/$model/probability"
for base in "$url_on" "$url_off" "$url_control"; do
  for body in full batch; do
    status="$(curl -s -o /dev/null -w '%{http_code}' -H 'Content-Type: application/json' \
      --data-binary "@$work/$body.json" "$base$path")"
    [ "$status" = 200 ] || { echo "monitoring_cost: $base answered $status to the $body body" >&2; exit 1; }
  done
done

ticks_per_second=$(getconf CLK_TCK)
run() { # url pid body connections duration → "rps p99_us cpu_us_per_request"
  local before after result requests
  before=$(cpu_ticks "$2")
  result="$(OGIVE_BODY="$work/$3.json" wrk -t"$threads" -c"$4" -d"$5" --timeout 10s -s benches/load/post.lua \
    "$1$path" | grep '^RESULT')"
  after=$(cpu_ticks "$2")
  python3 - "$result" "$((after - before))" "$ticks_per_second" "${5%s}" <<'EOF'
import re, sys
fields = dict(re.findall(r"(\w+)=([0-9.]+)", sys.argv[1]))
if float(fields["non2xx"]):
    sys.exit("monitoring_cost: non-2xx answers under load: " + sys.argv[1])
if float(fields["socket_errors"]):
    print("monitoring_cost: socket errors under load: " + sys.argv[1], file=sys.stderr)
rps = float(fields["rps"])
cpu_per_request = int(sys.argv[2]) / int(sys.argv[3]) / (rps * float(sys.argv[4])) * 1e6
print(fields["rps"], fields["p99_us"], "%.2f" % cpu_per_request)
EOF
}
median() { # field runs… → the median of that field over the runs
  printf '%s\n' "${@:2}" | awk -v k="$1" '{ print $k }' | sort -g |
    awk '{ v[NR] = $1 } END { print v[int((NR + 1) / 2)] }'
}
paired() { # url-a pid-a url-b pid-b body connections duration → "a/b-throughput-ratio a-CPU b-CPU"
  run "$1" "$2" "$5" "$6" "$7" >"$work/paired-a" &
  local a_job=$!
  run "$3" "$4" "$5" "$6" "$7" >"$work/paired-b" &
  local b_job=$!
  wait "$a_job"
  wait "$b_job"
  read -r rate_a _ cpu_a <"$work/paired-a"
  read -r rate_b _ cpu_b <"$work/paired-b"
  python3 -c "print('%.4f' % ($rate_a / $rate_b), $cpu_a, $cpu_b)"
}
change() { python3 -c "import sys; print('%+.1f%%' % ((float(sys.argv[1]) / float(sys.argv[2]) - 1) * 100))" "$1" "$2"; }

echo "model $model from $models; $workers workers per server; wrk $threads threads; $rounds rounds of $duration per side"
for body in full batch; do # warm both up
  run "$url_on" "$pid_on" "$body" 16 2s >/dev/null
  run "$url_off" "$pid_off" "$body" 16 2s >/dev/null
done
printf '\n%-7s %5s | %9s %9s %7s | %8s %8s | %9s %9s %7s\n' \
  load conns "on rps" "off rps" change "on p99" "off p99" "on CPU" "off CPU" change
worst_rate=0
worst_cpu=0
declare -A cpu_alternating cpu_paired # "load connections" → "on-CPU off-CPU" (µs per request)
for body in full batch; do
  for connections in 16 64; do
    on=() off=()
    for round in $(seq "$rounds"); do
      if [ $((round % 2)) -eq 1 ]; then
        on+=("$(run "$url_on" "$pid_on" "$body" "$connections" "$duration")")
        off+=("$(run "$url_off" "$pid_off" "$body" "$connections" "$duration")")
      else
        off+=("$(run "$url_off" "$pid_off" "$body" "$connections" "$duration")")
        on+=("$(run "$url_on" "$pid_on" "$body" "$connections" "$duration")")
      fi
    done
    rate_on=$(median 1 "${on[@]}") rate_off=$(median 1 "${off[@]}")
    p99_on=$(median 2 "${on[@]}") p99_off=$(median 2 "${off[@]}")
    cpu_on=$(median 3 "${on[@]}") cpu_off=$(median 3 "${off[@]}")
    cpu_alternating["$body $connections"]="$cpu_on $cpu_off"
    printf '%-7s %5s | %9.0f %9.0f %7s | %6dus %6dus | %7.1fus %7.1fus %7s\n' "$body" "$connections" \
      "$rate_on" "$rate_off" "$(change "$rate_on" "$rate_off")" "$p99_on" "$p99_off" \
      "$cpu_on" "$cpu_off" "$(change "$cpu_on" "$cpu_off")"
  done
done

noise=0
printf '\n%-7s %5s | %-22s %7s | %9s %9s %7s | %-22s %7s\n' load conns "paired on/off ratios" median \
  "on CPU" "off CPU" change "control: on/on ratios" median
for body in full batch; do
  for connections in 16 64; do
    pairs=() controls=()
    for _ in $(seq "$rounds"); do
      pairs+=("$(paired "$url_on" "$pid_on" "$url_off" "$pid_off" "$body" "$connections" "$duration")")
      controls+=("$(paired "$url_on" "$pid_on" "$url_control" "$pid_control" "$body" "$connections" "$duration")")
    done
    ratio=$(median 1 "${pairs[@]}")
    cpu_on=$(median 2 "${pairs[@]}") cpu_off=$(median 3 "${pairs[@]}")
    cpu_paired["$body $connections"]="$cpu_on $cpu_off"
    control=$(median 1 "${controls[@]}")
    printf '%-7s %5s | %-22s %7s | %7.1fus %7.1fus %7s | %-22s %7s\n' "$body" "$connections" \
      "$(printf '%s\n' "${pairs[@]}" | awk '{ printf "%s ", $1 }')" "$ratio" \
      "$cpu_on" "$cpu_off" "$(change "$cpu_on" "$cpu_off")" \
      "$(printf '%s\n' "${controls[@]}" | awk '{ printf "%s ", $1 }')" "$control"
    worst_rate=$(python3 -c "print(max($worst_rate, (1 - $ratio) * 100))")
    worst_cpu=$(python3 -c "print(max($worst_cpu, ($cpu_on / $cpu_off - 1) * 100))")
    noise=$(python3 -c "print(max($noise, abs(1 - $control) * 100))")
  done
done

echo
curl -fsS "$url_on/metrics" | python3 -c '
import sys
scored = dropped = 0.0
for line in sys.stdin:
    if line.startswith("ogive_drift_samples_dropped_total{"):
        dropped += float(line.rsplit(" ", 1)[1])
    if line.startswith("ogive_observations_scored_total{"):
        scored += float(line.rsplit(" ", 1)[1])
print("drift samples dropped by a busy window: %.0f of %.0f observations (%.3f%%)"
      % (dropped, scored, 100 * dropped / scored if scored else 0))'
echo "peak RSS (VmHWM): monitoring on $(peak_rss "$pid_on"), off $(peak_rss "$pid_off")"
python3 -c "
rate, cpu, noise = $worst_rate, $worst_cpu, $noise
print('largest cost of monitoring (paired): %.1f%% fewer requests per second; %.1f%% more server CPU per request'
      % (max(rate, 0), max(cpu, 0)))
print('noise of this run (two identical servers, paired): up to %.1f%% apart' % noise)
verdict = 'met' if rate <= 5 else ('not shown: the difference is within this run\'s noise' if rate <= noise else 'NOT met')
print('goal, at most 5%% fewer requests per second: %s' % verdict)"

# Sealing's share of a single-observation answer's server CPU. Monitoring on includes drift
# and sealing, so its CPU per request over off's bounds sealing's from above; and the engine
# benchmark's seal time (benches/monitoring.rs, run now, on this machine) over off's CPU per
# request is sealing's own share.
echo
echo "single observation, server CPU per request (medians of $rounds rounds; on includes drift and sealing):"
for connections in 16 64; do
  for kind in alternating paired; do
    if [ "$kind" = alternating ]; then
      read -r cpu_on cpu_off <<<"${cpu_alternating["full $connections"]}"
    else
      read -r cpu_on cpu_off <<<"${cpu_paired["full $connections"]}"
    fi
    python3 -c "print('  %2d connections, %-11s on %6.1f us, off %6.1f us: on/off %.3f (%+.1f%%)'
      % ($connections, '$kind', $cpu_on, $cpu_off, $cpu_on / $cpu_off, ($cpu_on / $cpu_off - 1) * 100))"
  done
done
if [ "${SEAL_BENCH:-1}" = 1 ]; then
  seal_ns="$(cargo bench -q --bench monitoring 2>/dev/null | awk '$1 == "seal" { print $2 }')"
  if [ -n "$seal_ns" ]; then
    for connections in 16 64; do
      read -r _ cpu_off <<<"${cpu_paired["full $connections"]}"
      python3 -c "print('sealing one receipt: %.0f ns (cargo bench --bench monitoring), %.2f%% of the server CPU of a single-observation answer with monitoring off (%.1f us, paired, %d connections); goal at most 5%%: %s'
        % ($seal_ns, $seal_ns / 10 / $cpu_off, $cpu_off, $connections, 'met' if $seal_ns / 10 / $cpu_off <= 5 else 'NOT met'))"
    done
  else
    echo "sealing: the monitoring benchmark printed no seal figure" >&2
  fi
fi
echo "load average: $(cut -d ' ' -f 1-3 /proc/loadavg)"
