# What the load benchmarks share (benches/load/run.sh, benches/load/batch_interference.sh,
# benches/monitoring_cost.sh). Sourced, from the repository root, by a script that has set
# `set -euo pipefail`; it defines:
#
#   work              a temporary folder, removed on exit
#   pids              the servers started, killed on exit (start_ogive adds to it)
#   models            the model directory served: model-files/ when it holds a live model,
#                     else the committed HTTP test models
#   start_ogive       BINARY NAME FLAGS...: `BINARY serve` on loopback port 0 for both
#                     listeners with --drain-delay-ms 0 and FLAGS, its output in $work/NAME.out;
#                     sets pid and url once it says where it serves
#   wait_for_line     FILE PATTERN: waits up to 10 s for a line of FILE matching PATTERN
#   cpu_ticks         PID: the process's user + system CPU time (/proc/PID/stat), clock ticks
#   write_bodies      URL SIZE: sets model (the first model URL serves) and writes the bodies
#                     from its example observation: $work/full.json (the observation, full
#                     answer), $work/lean.json (the probability only) and $work/batch.json
#                     (SIZE variations, each continuous covariate times 0.8 + 0.4 i / SIZE)
#   peak_rss          PID: the process's peak resident set (VmHWM), as "N kB"
#   need              TOOL...: stops with the install hint when a tool is missing

work="$(mktemp -d)"
pids=()
cleanup() {
  local started
  for started in "${pids[@]}"; do kill "$started" 2>/dev/null || true; done
  wait 2>/dev/null || true
  rm -rf "$work"
}
trap cleanup EXIT

models=tests/http/models
if compgen -G "model-files/*/live" >/dev/null; then models=model-files; fi

need() {
  for tool in "$@"; do
    command -v "$tool" >/dev/null || { echo "$tool is needed (Debian: apt-get install -y $tool)" >&2; exit 1; }
  done
}

wait_for_line() { # file pattern
  for _ in $(seq 1 100); do
    if grep -q "$2" "$1" 2>/dev/null; then return 0; fi
    sleep 0.1
  done
  echo "no '$2' in $1" >&2
  cat "$1" >&2
  exit 1
}

start_ogive() { # binary name flags... -> sets pid and url
  local binary=$1 name=$2
  shift 2
  "$binary" serve --models "$models" --listen 127.0.0.1:0 --admin-listen 127.0.0.1:0 \
    --drain-delay-ms 0 "$@" >"$work/$name.out" 2>"$work/$name.err" &
  pid=$!
  pids+=("$pid")
  wait_for_line "$work/$name.out" "^ogive serving on"
  url="$(sed -n 's/^ogive serving on //p' "$work/$name.out" | head -n 1)"
}

cpu_ticks() { # pid -> utime + stime, in clock ticks
  awk '{print $14 + $15}' "/proc/$1/stat"
}

peak_rss() { # pid -> "N kB"
  awk '/VmHWM/ {print $2, $3}' "/proc/$1/status"
}

write_bodies() { # url size -> sets model; writes $work/full.json, lean.json, batch.json
  model="$(curl -fsS "$1/models" | python3 -c 'import json,sys; print(json.load(sys.stdin)["models"][0]["name"])')"
  curl -fsS "$1/models/$model" | python3 -c '
import json, sys
out, size = sys.argv[1], int(sys.argv[2])
detail = json.load(sys.stdin)
example = detail["example"]
numeric = [c["name"] for c in detail["covariates"] if c["kind"] == "continuous"]
def varied(i):
    o = dict(example)
    for name in numeric:
        o[name] = example[name] * (0.8 + 0.4 * i / size)
    return o
json.dump({"observation": example}, open(f"{out}/full.json", "w"))
json.dump({"observation": example, "effects": False, "intervals": False}, open(f"{out}/lean.json", "w"))
json.dump({"observations": [varied(i) for i in range(size)]}, open(f"{out}/batch.json", "w"))
' "$work" "$2"
}
