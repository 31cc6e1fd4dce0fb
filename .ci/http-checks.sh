#!/usr/bin/env bash
# HTTP checks against a running `ogive serve` (called by .ci/run; runnable alone from the
# repository root): the OpenAPI document validates (openapi-spec-validator, both the committed
# file and the served one), schemathesis finds no failure with every check on (with the
# expectations in .ci/schemathesis.toml: a receipt the server did not seal, or a curve whose
# ends cross, is a 422), and the
# /metrics output passes `promtool check metrics`.
#
# The server serves the demo models in model-files/ when there are any, otherwise the HTTP
# test models in tests/http/models/. It listens on a free loopback port (it is started on port
# 0 and prints the address it got) and is stopped at the end, whatever happens.
set -euo pipefail
cd "$(dirname "$0")/.."
repo="$PWD"

examples="${OGIVE_SCHEMATHESIS_EXAMPLES:-100}"
seed="${OGIVE_SCHEMATHESIS_SEED:-20260101}"

need_pip=()
command -v schemathesis >/dev/null || need_pip+=(schemathesis)
command -v openapi-spec-validator >/dev/null || need_pip+=(openapi-spec-validator)
if [ "${#need_pip[@]}" -gt 0 ]; then
  python3 -m pip install -q --disable-pip-version-check "${need_pip[@]}" 2>&1 | grep -v "as the 'root' user" || true
fi
if ! command -v promtool >/dev/null; then
  export DEBIAN_FRONTEND=noninteractive
  apt-get update -qq >/dev/null
  apt-get install -y -qq prometheus >/dev/null
fi

cargo build -q --bin ogive
binary=target/debug/ogive

models=tests/http/models
if compgen -G "model-files/*/live" >/dev/null; then
  models=model-files
fi
echo "serving the models in $models"

work="$(mktemp -d)"
server_pid=""
cleanup() {
  if [ -n "$server_pid" ] && kill -0 "$server_pid" 2>/dev/null; then
    kill -TERM "$server_pid" 2>/dev/null || true
    for _ in $(seq 1 50); do
      kill -0 "$server_pid" 2>/dev/null || break
      sleep 0.1
    done
    kill -KILL "$server_pid" 2>/dev/null || true
  fi
  rm -rf "$work"
}
trap cleanup EXIT

RUST_LOG=warn "$binary" serve --models "$models" --listen 127.0.0.1:0 \
  --admin-listen 127.0.0.1:0 --drain-delay-ms 0 --shutdown-timeout-ms 5000 \
  >"$work/stdout" 2>"$work/stderr" &
server_pid=$!

base=""
for _ in $(seq 1 100); do
  base="$(sed -n 's/^ogive serving on \(http:[^ ]*\)$/\1/p' "$work/stdout" | head -n 1)"
  [ -n "$base" ] && break
  if ! kill -0 "$server_pid" 2>/dev/null; then
    echo "ogive serve exited early:"; cat "$work/stderr"; exit 1
  fi
  sleep 0.1
done
if [ -z "$base" ]; then
  echo "ogive serve printed no address"; cat "$work/stderr"; exit 1
fi
echo "ogive serve is listening on $base"
ready=""
for _ in $(seq 1 100); do
  if curl -fsS "$base/readyz" >/dev/null 2>&1; then ready=yes; break; fi
  sleep 0.1
done
if [ -z "$ready" ]; then
  echo "ogive serve never became ready:"; curl -sS "$base/readyz" || true; cat "$work/stderr"; exit 1
fi

echo "--- openapi-spec-validator: the committed document and the served one"
openapi-spec-validator src/service/openapi.json
curl -fsS "$base/openapi.json" >"$work/openapi.json"
openapi-spec-validator "$work/openapi.json"

echo "--- the printed example request works"
example="$(sed -n '3p' "$work/stdout")"
if [ -n "$example" ]; then
  answer="$(bash -c "$example")"
  echo "$answer" | python3 -c 'import json,sys; a=json.load(sys.stdin); assert "probability" in a and "effects" in a, a'
fi

echo "--- schemathesis: $examples examples per operation, every check, seed $seed"
(
  cd "$work"
  schemathesis --no-color --config-file "$repo/.ci/schemathesis.toml" \
    run "$base/openapi.json" --checks all --max-examples "$examples" \
    --seed "$seed" --workers 1 --request-timeout 20
)

echo "--- promtool check metrics"
curl -fsS "$base/metrics" >"$work/metrics.txt"
promtool check metrics <"$work/metrics.txt"
for name in ogive_http_requests_total ogive_http_request_duration_seconds_bucket \
  ogive_observations_scored_total ogive_out_of_range_total ogive_unusual_combination_total \
  ogive_predicted_probability_bucket ogive_live_version_info ogive_model_load_errors_total \
  ogive_ready; do
  grep -q "^$name" "$work/metrics.txt" || { echo "metric $name is missing"; exit 1; }
done
echo "http checks passed"
