#!/usr/bin/env bash
# What monitoring costs in throughput: the same wrk load against `ogive serve --monitoring on`
# and `--monitoring off`, in the same run, alternating rounds so that drift in the machine's
# speed falls on both sides alike. Goal (issue 7): at most 5% fewer requests per second with
# monitoring on.
#
#   scenarios   one observation with effects and intervals (the default options), and a batch
#               of 100 observations, each at 16 and 64 connections
#   servers     both started at once from the same release binary and model directory, each on
#               its own loopback port with the same worker count; only one is loaded at a time
#   rounds      ROUNDS (default 5) of on and off per scenario, the order alternating; the
#               medians of each side are compared
#   measures    requests per second (wrk), and the server's CPU time per request (user +
#               system, from /proc), which a busy machine disturbs much less than throughput
#
# It also prints the share of drift samples the "on" server dropped (its window was busy) and
# both servers' peak RSS.
#
# Models: model-files/ when it holds versions (the demo models), otherwise the HTTP tests'
# lease model with training histograms added here (as `ogive fit` writes them), so that every
# covariate's drift is tracked. The request is each model's training-mean observation.
#
# Settings (environment): DURATION (seconds per run, default 8), ROUNDS (default 5), WORKERS
# (server workers, default 1, leaving a core to wrk), THREADS (wrk threads, default 1),
# OGIVE_BIN (a binary to use instead of building target/release/ogive).
# Needs wrk (Debian package `wrk`), curl and python3. Run: bash benches/monitoring_cost.sh
set -euo pipefail
cd "$(dirname "$0")/.."

DURATION=${DURATION:-8}
ROUNDS=${ROUNDS:-5}
WORKERS=${WORKERS:-1}
THREADS=${THREADS:-1}

for tool in wrk curl python3 cargo; do
  command -v "$tool" >/dev/null || { echo "monitoring_cost: $tool is needed" >&2; exit 1; }
done
if [ -n "${OGIVE_BIN:-}" ]; then
  ogive=$OGIVE_BIN
else
  cargo build --release --quiet --bin ogive
  ogive="$PWD/target/release/ogive"
fi

work=$(mktemp -d)
pids=()
cleanup() {
  for pid in "${pids[@]}"; do kill "$pid" 2>/dev/null || true; done
  for pid in "${pids[@]}"; do wait "$pid" 2>/dev/null || true; done
  rm -rf "$work"
}
trap cleanup EXIT

if compgen -G "model-files/*/versions/*.json" >/dev/null; then
  models="$PWD/model-files"
else
  models="$work/models"
  mkdir -p "$models/lease-test/versions"
  echo 2026-01 >"$models/lease-test/live"
  python3 - tests/http/models/lease-test/versions/2026-01.json \
    "$models/lease-test/versions/2026-01.json" <<'EOF'
import json, math, sys
model = json.load(open(sys.argv[1]))
for c in model["covariates"]:
    t = c["training"]
    if c["kind"] in ("continuous", "count") and "histogram" not in t:
        lo, hi, mean, sd = t["min"], t["max"], t["mean"], t.get("std_dev") or 1.0
        edges = [lo + (hi - lo) * i / 10 for i in range(11)]
        # Counts shaped like a normal around the training mean: benchmark input only.
        counts = [max(1, round(1000 * math.exp(-(((a + b) / 2 - mean) / sd) ** 2 / 2)))
                  for a, b in zip(edges, edges[1:])]
        t["histogram"] = {"edges": edges, "counts": counts}
model.setdefault("fitted_probabilities",
                 {"edges": [i / 10 for i in range(11)], "counts": [300, 250, 150, 100, 60, 50, 40, 25, 15, 10]})
json.dump(model, open(sys.argv[2], "w"))
EOF
fi

free_port() {
  python3 -c 'import socket; s = socket.socket(); s.bind(("127.0.0.1", 0)); print(s.getsockname()[1])'
}
start() { # on|off → sets started_port and started_pid
  started_port=$(free_port)
  "$ogive" serve --models "$models" --listen "127.0.0.1:$started_port" --workers "$WORKERS" \
    --monitoring "$1" --drain-delay-ms 0 --shutdown-timeout-ms 2000 \
    >"$work/serve-$1.log" 2>&1 &
  started_pid=$!
  pids+=("$started_pid")
  for _ in $(seq 100); do
    curl -fsS --max-time 1 "http://127.0.0.1:$started_port/readyz" >/dev/null 2>&1 && return
    sleep 0.1
  done
  echo "monitoring_cost: ogive --monitoring $1 did not start: $(tail -5 "$work/serve-$1.log")" >&2
  exit 1
}
start on
port_on=$started_port pid_on=$started_pid
start off
port_off=$started_port pid_off=$started_pid

model=$(curl -fsS "http://127.0.0.1:$port_on/models" | python3 -c '
import json, sys
body = json.load(sys.stdin)
models = body["models"] if isinstance(body, dict) else body
print(models[0]["name"])')
curl -fsS "http://127.0.0.1:$port_on/models/$model" >"$work/model.json"
python3 - "$work/model.json" "$work" <<'EOF'
import json, sys
described = json.load(open(sys.argv[1]))
observation = {}
for c in described["covariates"]:
    if c["kind"] == "categorical":
        observation[c["name"]] = c["reference"]
    elif c["kind"] == "binary":
        observation[c["name"]] = 0
    else:
        mean = c["training"]["mean"] if "training" in c else (c["min"] + c["max"]) / 2
        observation[c["name"]] = round(mean) if c["kind"] == "count" else mean
for name, body in (("single", {"observation": observation}),
                   ("batch", {"observations": [observation] * 100})):
    text = json.dumps(body)
    with open(f"{sys.argv[2]}/{name}.lua", "w") as f:
        f.write('wrk.method = "POST"\n')
        f.write('wrk.headers["Content-Type"] = "application/json"\n')
        f.write("wrk.body = %s\n" % json.dumps(text))
EOF
for port in "$port_on" "$port_off"; do
  status=$(curl -sS -o /dev/null -w '%{http_code}' -H 'Content-Type: application/json' \
    -d "$(sed -n 's/^wrk.body = //p' "$work/single.lua" | python3 -c 'import json, sys; print(json.loads(sys.stdin.read()))')" \
    "http://127.0.0.1:$port/models/$model/probability")
  [ "$status" = 200 ] || { echo "monitoring_cost: the benchmark request answered $status" >&2; exit 1; }
done

ticks_per_second=$(getconf CLK_TCK)
cpu_ticks() { awk '{ print $14 + $15 }' "/proc/$1/stat"; } # user + system time of a process
run() { # PORT PID CONNECTIONS SCENARIO → "requests/s server-CPU-µs/request"
  local before after output
  before=$(cpu_ticks "$2")
  output=$(wrk -t"$THREADS" -c"$3" -d"${DURATION}s" -s "$work/$4.lua" \
    "http://127.0.0.1:$1/models/$model/probability" 2>&1)
  after=$(cpu_ticks "$2")
  if grep -q "Non-2xx" <<<"$output"; then
    echo "monitoring_cost: wrk saw non-2xx answers ($4, $3 connections)" >&2
    exit 1
  fi
  awk -v ticks=$((after - before)) -v hz="$ticks_per_second" '
    / requests in / { requests = $1 }
    /^Requests\/sec:/ { rate = $2 }
    END { printf "%s %.1f\n", rate, ticks / hz / requests * 1e6 }' <<<"$output"
}
median() { tr ' ' '\n' | sort -g | awk '{ v[NR] = $1 } END { print v[int((NR + 1) / 2)] }'; }
percent() { python3 -c "import sys; print('%+.1f%%' % ((float(sys.argv[1]) / float(sys.argv[2]) - 1) * 100))" "$1" "$2"; }

echo "model $model from $models; $ROUNDS rounds of ${DURATION} s per side; $WORKERS server worker(s), $THREADS wrk thread(s)"
echo "throughput is requests per second; CPU is the server's user + system time per request"
printf '%-8s %5s  %10s %10s %8s   %9s %9s %8s\n' scenario conns "on req/s" "off req/s" change "on CPU" "off CPU" change
worst_rate=0
worst_cpu=0
for scenario in single batch; do
  for connections in 16 64; do
    rate_on=() rate_off=() cpu_on=() cpu_off=()
    for round in $(seq "$ROUNDS"); do
      # Alternate which side goes first, so a trend in the machine's speed hits both alike.
      if [ $((round % 2)) -eq 1 ]; then
        read -r r c < <(run "$port_on" "$pid_on" "$connections" "$scenario"); rate_on+=("$r"); cpu_on+=("$c")
        read -r r c < <(run "$port_off" "$pid_off" "$connections" "$scenario"); rate_off+=("$r"); cpu_off+=("$c")
      else
        read -r r c < <(run "$port_off" "$pid_off" "$connections" "$scenario"); rate_off+=("$r"); cpu_off+=("$c")
        read -r r c < <(run "$port_on" "$pid_on" "$connections" "$scenario"); rate_on+=("$r"); cpu_on+=("$c")
      fi
    done
    m_rate_on=$(echo "${rate_on[*]}" | median) m_rate_off=$(echo "${rate_off[*]}" | median)
    m_cpu_on=$(echo "${cpu_on[*]}" | median) m_cpu_off=$(echo "${cpu_off[*]}" | median)
    printf '%-8s %5s  %10.0f %10.0f %8s   %7.1fµs %7.1fµs %8s\n' "$scenario" "$connections" \
      "$m_rate_on" "$m_rate_off" "$(percent "$m_rate_on" "$m_rate_off")" \
      "$m_cpu_on" "$m_cpu_off" "$(percent "$m_cpu_on" "$m_cpu_off")"
    worst_rate=$(python3 -c "print(max($worst_rate, (1 - $m_rate_on / $m_rate_off) * 100))")
    worst_cpu=$(python3 -c "print(max($worst_cpu, ($m_cpu_on / $m_cpu_off - 1) * 100))")
  done
done

curl -fsS "http://127.0.0.1:$port_on/metrics" | python3 -c '
import sys
kept = dropped = 0.0
for line in sys.stdin:
    if line.startswith("ogive_drift_samples_dropped_total{"):
        dropped += float(line.rsplit(" ", 1)[1])
    if line.startswith("ogive_observations_scored_total{"):
        kept += float(line.rsplit(" ", 1)[1])
print("drift samples dropped by the busy window: %.0f of %.0f observations (%.3f%%)"
      % (dropped, kept, 100 * dropped / kept if kept else 0))'
for side in on off; do
  pid=$([ "$side" = on ] && echo "$pid_on" || echo "$pid_off")
  echo "peak RSS, monitoring $side: $(awk '/^VmHWM/ { printf "%.1f MB", $2 / 1024 }' "/proc/$pid/status")"
done
python3 -c "
rate, cpu = $worst_rate, $worst_cpu
print('largest cost of monitoring: %.1f%% fewer requests per second, %.1f%% more server CPU per request'
      % (max(rate, 0), max(cpu, 0)))
print('goal: at most 5%% fewer requests per second: %s' % ('met' if rate <= 5 else 'NOT met'))"
