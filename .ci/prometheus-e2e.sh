#!/usr/bin/env bash
# A real Prometheus server scraping a real `ogive serve`: request, drift and calibration series
# must arrive in Prometheus with the values this script expects, and the recording rules of
# deploy/prometheus/ogive-rules.yml, evaluated by that Prometheus, must give the fleet figures.
#
#   0. run the rules' unit tests (promtool test rules deploy/prometheus/tests/*.yml)
#   1. install Debian's prometheus package if the binary is missing
#   2. start `ogive serve` on a free loopback port with a test model whose training histograms
#      make the expected PSI easy to compute, and Prometheus on another, scraping it every 1 s
#      and evaluating the rules every 1 s; wait for the first scrape, so that every counter
#      starts from zero inside Prometheus (increase() then needs no guess at the start)
#   3. send bounded traffic with curl (40 single requests, one batch of 60) and 50 outcomes
#   4. compute the expected figures here, in Python, from what the server answered: the PSI of
#      amount and of the predicted probabilities (floor 1e-4, as documented in
#      src/monitoring/drift.rs), the Brier score, log loss, calibration-in-the-large, the
#      Mann–Whitney AUC and the AUC over 100 bins with ties counted half (src/monitoring/
#      calibration.rs)
#   5. query Prometheus's HTTP API (/api/v1/query) until the scraped values match, then check
#      every series once more and stop both processes
#
# Bounded: every wait has a deadline and the whole script gives up after 300 s (the build
# included). Exits non-zero
# on any mismatch. Needs bash, curl, python3 and cargo; talks to 127.0.0.1 only.
set -euo pipefail
cd "$(dirname "$0")/.."

deadline=$((SECONDS + 300))
fail() { echo "prometheus-e2e: FAIL: $*" >&2; exit 1; }
note() { echo "prometheus-e2e: $*"; }

if ! command -v prometheus >/dev/null; then
  command -v apt-get >/dev/null || fail "prometheus is not installed and apt-get is not available"
  note "installing Debian's prometheus package"
  DEBIAN_FRONTEND=noninteractive apt-get install -y -qq prometheus >/dev/null
fi
for tool in curl python3 cargo promtool; do
  command -v "$tool" >/dev/null || fail "$tool is needed"
done

promtool test rules deploy/prometheus/tests/*.yml >/dev/null || fail "promtool test rules failed:
$(promtool test rules deploy/prometheus/tests/*.yml 2>&1 | tail -20)"
note "promtool test rules: every rule's unit tests pass"

cargo build --quiet --bin ogive
ogive="$PWD/target/debug/ogive"

work=$(mktemp -d)
ogive_pid=""
prometheus_pid=""
cleanup() {
  for pid in $prometheus_pid $ogive_pid; do
    kill "$pid" 2>/dev/null || true
  done
  for pid in $prometheus_pid $ogive_pid; do
    wait "$pid" 2>/dev/null || true
  done
  rm -rf "$work"
}
trap cleanup EXIT

free_port() {
  python3 -c 'import socket; s = socket.socket(); s.bind(("127.0.0.1", 0)); print(s.getsockname()[1])'
}
ogive_port=$(free_port)
prometheus_port=$(free_port)

# The test model: training shares amount .1 .2 .3 .4, sector .5 .3 .2, guarantor .75 .25,
# fitted probabilities .4 .3 .2 .1. Invented input for an identity check, not a reference.
mkdir -p "$work/models/e2e-lease/versions"
cat >"$work/models/e2e-lease/versions/1.json" <<'EOF'
{"format": "ogive-model", "format_version": 1, "name": "e2e-lease", "version": "1",
 "outcome": {"name": "arrears", "meaning": "a test outcome of the Prometheus check"},
 "link": "logit",
 "covariates": [
  {"name": "amount", "kind": "continuous",
   "training": {"min": 0, "max": 40, "mean": 25,
                "histogram": {"edges": [0, 10, 20, 30, 40], "counts": [100, 200, 300, 400]}}},
  {"name": "sector", "kind": "categorical", "levels": ["retail", "farming", "transport"],
   "reference": "retail",
   "training": {"level_counts": {"retail": 500, "farming": 300, "transport": 200}}},
  {"name": "guarantor", "kind": "binary", "training": {"min": 0, "max": 1, "mean": 0.25}}],
 "terms": [{"term": "intercept", "coefficient": -1.0}, {"term": "amount", "coefficient": 0.05},
           {"term": "sector=farming", "coefficient": 0.4},
           {"term": "sector=transport", "coefficient": -0.3},
           {"term": "guarantor", "coefficient": -0.5}],
 "fitted_probabilities": {"edges": [0, 0.25, 0.5, 0.75, 1], "counts": [400, 300, 200, 100]},
 "provenance": {"fitted_by": ".ci/prometheus-e2e.sh", "fitted_at": "1970-01-01T00:00:00Z",
                "observations": 1000}}
EOF
echo 1 >"$work/models/e2e-lease/live"

"$ogive" serve --models "$work/models" --listen "127.0.0.1:$ogive_port" \
  --drain-delay-ms 0 --shutdown-timeout-ms 2000 --monitoring on >"$work/ogive.log" 2>&1 &
ogive_pid=$!

cp deploy/prometheus/ogive-rules.yml "$work/ogive-rules.yml"
cat >"$work/prometheus.yml" <<EOF
global:
  scrape_interval: 1s
  evaluation_interval: 1s
rule_files:
  - ogive-rules.yml
scrape_configs:
  - job_name: ogive
    scrape_interval: 1s
    scrape_timeout: 1s
    static_configs:
      - targets: ["127.0.0.1:$ogive_port"]
EOF
prometheus --config.file="$work/prometheus.yml" --storage.tsdb.path="$work/tsdb" \
  --web.listen-address="127.0.0.1:$prometheus_port" >"$work/prometheus.log" 2>&1 &
prometheus_pid=$!

wait_for() { # URL WHAT
  until curl -fsS --max-time 2 "$1" >/dev/null 2>&1; do
    [ "$SECONDS" -lt "$deadline" ] || fail "$2 did not come up (see logs below)
$(tail -20 "$work/ogive.log" "$work/prometheus.log")"
    kill -0 "$ogive_pid" 2>/dev/null || fail "ogive exited: $(tail -20 "$work/ogive.log")"
    kill -0 "$prometheus_pid" 2>/dev/null || fail "prometheus exited: $(tail -20 "$work/prometheus.log")"
    sleep 0.2
  done
}
base="http://127.0.0.1:$ogive_port"
wait_for "$base/readyz" "ogive"
wait_for "http://127.0.0.1:$prometheus_port/-/ready" "prometheus"
note "ogive on $base, prometheus on 127.0.0.1:$prometheus_port"
# The first scrape creates the live version's counters at zero; traffic waits for it.
until curl -fsS --max-time 2 -G "http://127.0.0.1:$prometheus_port/api/v1/query" \
  --data-urlencode 'query=ogive_outcomes_total{model="e2e-lease"} == 0' | grep -q '"value"'; do
  [ "$SECONDS" -lt "$deadline" ] || fail "Prometheus never scraped the zero counters"
  sleep 0.2
done

# Traffic: 40 single observations, amounts 5, 15, 25, 35 in turn, then one batch of 60 with
# amounts in the first bin. Each answer's probability is kept for the expected figures, and its
# receipt for the outcome report.
sectors=(retail farming transport retail)
: >"$work/answers.tsv"
for i in $(seq 0 39); do
  amount=$((i % 4 * 10 + 5))
  body="{\"observation\": {\"amount\": $amount, \"sector\": \"${sectors[i % 4]}\", \"guarantor\": $((i % 2))}}"
  answer=$(curl -fsS --max-time 5 -H 'Content-Type: application/json' -H "X-Request-Id: e2e-$i" \
    -d "$body" "$base/models/e2e-lease/probability") || fail "probability request $i"
  printf 'e2e-%s\t%s\n' "$i" "$(python3 -c 'import json, sys; a = json.load(sys.stdin); print("%r\t%s" % (a["probability"], a["receipt"]))' <<<"$answer")" \
    >>"$work/answers.tsv"
done
batch=$(python3 -c '
import json
print(json.dumps({"observations": [
    {"amount": 1 + (i % 9), "sector": "farming", "guarantor": 0} for i in range(60)]}))')
answer=$(curl -fsS --max-time 10 -H 'Content-Type: application/json' -H 'X-Request-Id: e2e-batch' \
  -d "$batch" "$base/models/e2e-lease/probability") || fail "batch request"
python3 -c '
import json, sys
for r in json.load(sys.stdin)["results"]:
    print("e2e-batch/%d\t%r\t%s" % (r["index"], r["probability"], r["receipt"]))' <<<"$answer" >>"$work/answers.tsv"

# Outcomes: 30 single answers one report each (outcome i mod 2, skipping i ≡ 3 mod 4) and the
# first 20 batch answers in one list (outcome 1 when i is a multiple of 3).
receipt_of() { awk -F'\t' -v k="$1" '$1 == k { print $3 }' "$work/answers.tsv"; }
: >"$work/outcomes.tsv"
for i in $(seq 0 39); do
  [ $((i % 4)) -eq 3 ] && continue
  outcome=$((i % 2))
  receipt=$(receipt_of "e2e-$i")
  curl -fsS --max-time 5 -o /dev/null -H 'Content-Type: application/json' \
    -d "{\"receipt\": \"$receipt\", \"outcome\": $outcome}" "$base/models/e2e-lease/outcomes" \
    || fail "outcome report for e2e-$i"
  printf 'e2e-%s\t%s\n' "$i" "$outcome" >>"$work/outcomes.tsv"
done
reports=$(python3 -c '
import json, sys
receipts = {k: r for k, _, r in (line.split("\t") for line in open(sys.argv[1]).read().splitlines())}
print(json.dumps({"outcomes": [
    {"receipt": receipts["e2e-batch/%d" % i], "outcome": int(i % 3 == 0)} for i in range(20)]}))' \
  "$work/answers.tsv")
recorded=$(curl -fsS --max-time 5 -H 'Content-Type: application/json' -d "$reports" \
  "$base/models/e2e-lease/outcomes" | python3 -c 'import json, sys; print(json.load(sys.stdin)["recorded"])') \
  || fail "batch outcome report"
[ "$recorded" = 20 ] || fail "the batch outcome report recorded $recorded of 20"
for i in $(seq 0 19); do
  printf 'e2e-batch/%s\t%s\n' "$i" "$((i % 3 == 0 ? 1 : 0))" >>"$work/outcomes.tsv"
done
# A second outcome for an answer is refused with 409, a receipt that does not open with 422.
status=$(curl -sS --max-time 5 -o /dev/null -w '%{http_code}' -H 'Content-Type: application/json' \
  -d "{\"receipt\": \"$(receipt_of e2e-0)\", \"outcome\": 1}" "$base/models/e2e-lease/outcomes")
[ "$status" = 409 ] || fail "a second outcome for e2e-0 answered $status, expected 409"
status=$(curl -sS --max-time 5 -o /dev/null -w '%{http_code}' -H 'Content-Type: application/json' \
  -d '{"receipt": "not-a-receipt", "outcome": 1}' "$base/models/e2e-lease/outcomes")
[ "$status" = 422 ] || fail "a receipt that does not open answered $status, expected 422"

# The expected values, computed here from the answers and outcomes above.
python3 - "$work/answers.tsv" "$work/outcomes.tsv" >"$work/expected.tsv" <<'EOF'
import bisect, math, sys

answers = {k: p for k, p, _ in (line.split("\t") for line in open(sys.argv[1]).read().splitlines())}
outcomes = dict(line.split("\t") for line in open(sys.argv[2]).read().splitlines())
floor = 1e-4

def psi(expected, actual):
    return sum((max(a, floor) - max(e, floor)) * math.log(max(a, floor) / max(e, floor))
               for e, a in zip(expected, actual))

def shares(values, edges):
    counts = [0] * (len(edges) - 1)
    for v in values:
        counts[min(max(bisect.bisect_right(edges, v) - 1, 0), len(counts) - 1)] += 1
    return [c / len(values) for c in counts]

amounts = [i % 4 * 10 + 5 for i in range(40)] + [1 + i % 9 for i in range(60)]
print("input_psi_amount\t%r" % psi([0.1, 0.2, 0.3, 0.4], shares(amounts, [0, 10, 20, 30, 40])))
probabilities = [float(answers["e2e-%d" % i]) for i in range(40)] + \
                [float(answers["e2e-batch/%d" % i]) for i in range(60)]
print("prediction_psi\t%r" % psi([0.4, 0.3, 0.2, 0.1], shares(probabilities, [0, 0.25, 0.5, 0.75, 1])))
pairs = [(float(answers[k]), int(y)) for k, y in outcomes.items()]
n = len(pairs)
print("outcomes_total\t%d" % n)
print("brier_score\t%r" % (sum((p - y) ** 2 for p, y in pairs) / n))
print("log_loss\t%r" % (-sum(math.log(p) if y else math.log1p(-p) for p, y in pairs) / n))
print("calibration_in_the_large\t%r" % (sum(y for _, y in pairs) / n - sum(p for p, _ in pairs) / n))
positives = [p for p, y in pairs if y == 1]
negatives = [p for p, y in pairs if y == 0]
wins = sum(1.0 if a > b else 0.5 if a == b else 0.0 for a in positives for b in negatives)
print("roc_auc\t%r" % (wins / (len(positives) * len(negatives))))
# The same pairs over 100 bins, bin k holding k/100 < p <= (k+1)/100, ties in a bin half.
edges = [k / 100 for k in range(1, 100)]
pos, neg = [0] * 100, [0] * 100
for p, y in pairs:
    (pos if y else neg)[bisect.bisect_left(edges, p)] += 1
below, binned = 0, 0.0
for k in range(100):
    binned += pos[k] * (below + neg[k] / 2)
    below += neg[k]
print("roc_auc_binned\t%r" % (binned / (len(positives) * len(negatives))))
print("observations_scored\t%d" % len(probabilities))
EOF
expected() { awk -F'\t' -v k="$1" '$1 == k { print $2 }' "$work/expected.tsv"; }

query() { # PROMQL → the value of its single sample, or nothing
  curl -fsS --max-time 5 -G "http://127.0.0.1:$prometheus_port/api/v1/query" \
    --data-urlencode "query=$1" |
    python3 -c '
import json, sys
result = json.load(sys.stdin)["data"]["result"]
print(result[0]["value"][1] if len(result) == 1 else "")'
}
matches() { # ACTUAL EXPECTED RELATIVE-TOLERANCE
  python3 -c '
import sys
a, e, tol = (float(x) for x in sys.argv[1:])
sys.exit(0 if abs(a - e) <= tol * max(abs(e), 1e-300) else 1)' "$1" "$2" "$3"
}

model='model="e2e-lease",version="1"'
# Counts must be exact; figures match to 1e-12 relative (Prometheus carries float64 and prints
# the shortest round-trip form; both sides compute the same sums in a different order).
checks=(
  "sum(ogive_http_requests_total{route=\"/models/{name}/probability\",status=\"200\"})|41|0"
  "sum(ogive_http_requests_total{route=\"/models/{name}/outcomes\",status=\"200\"})|31|0"
  "sum(ogive_http_requests_total{route=\"/models/{name}/outcomes\",status=\"409\"})|1|0"
  "sum(ogive_http_requests_total{route=\"/models/{name}/outcomes\",status=\"422\"})|1|0"
  "ogive_observations_scored_total{$model}|$(expected observations_scored)|0"
  "ogive_drift_window_observations{$model}|$(expected observations_scored)|0"
  "ogive_input_psi{$model,covariate=\"amount\"}|$(expected input_psi_amount)|1e-12"
  "ogive_prediction_psi{$model}|$(expected prediction_psi)|1e-12"
  "ogive_outcomes_total{$model}|$(expected outcomes_total)|0"
  "ogive_calibration_window_outcomes{$model}|$(expected outcomes_total)|0"
  "ogive_brier_score{$model}|$(expected brier_score)|1e-12"
  "ogive_calibration_in_the_large{$model}|$(expected calibration_in_the_large)|1e-12"
  "ogive_roc_auc{$model}|$(expected roc_auc)|1e-12"
  # The fleet recording rules over this one replica: increase() scales every counter of the
  # target by the same extrapolation factor, which cancels in each ratio; 1e-9 relative.
  "namespace_model_version:ogive_outcomes_insufficient:1d{$model}|1|0"
  "namespace_model_version:ogive_brier_score:ratio1d{$model}|$(expected brier_score)|1e-9"
  "namespace_model_version:ogive_log_loss:ratio1d{$model}|$(expected log_loss)|1e-9"
  "namespace_model_version:ogive_calibration_in_the_large:1d{$model}|$(expected calibration_in_the_large)|1e-9"
  "namespace_model_version:ogive_roc_auc_binned:1d{$model}|$(expected roc_auc_binned)|1e-9"
  "namespace_model_version_covariate:ogive_input_psi:1h{$model,covariate=\"amount\"}|$(expected input_psi_amount)|1e-9"
  "namespace_model_version:ogive_prediction_psi:1h{$model}|$(expected prediction_psi)|1e-9"
  "namespace_model_version:ogive_drift_insufficient:1h{$model}|1|0"
)

check_all() { # prints the first mismatch and returns 1, or returns 0
  local entry promql want tolerance got
  for entry in "${checks[@]}"; do
    IFS='|' read -r promql want tolerance <<<"$entry"
    got=$(query "$promql" || true)
    if [ -z "$got" ] || ! matches "$got" "$want" "$tolerance"; then
      echo "$promql: Prometheus has '${got}', expected $want"
      return 1
    fi
  done
}

note "waiting for the scrapes to carry every series"
until mismatch=$(check_all); do
  [ "$SECONDS" -lt "$deadline" ] || fail "$mismatch"
  sleep 1
done
for entry in "${checks[@]}"; do
  IFS='|' read -r promql want _ <<<"$entry"
  note "ok  $promql = $want"
done
slope=$(query "ogive_calibration_slope{$model}")
[ -n "$slope" ] || fail "ogive_calibration_slope is missing"
note "ok  ogive_calibration_slope{$model} present ($slope)"
note "passed in ${SECONDS} s"
