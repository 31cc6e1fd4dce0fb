#!/usr/bin/env bash
# Regenerate the demo data and fit the two demo models into model-files/, laid out as
#
#   model-files/NAME/versions/VERSION.json   the fitted model file
#   model-files/NAME/live                    the live version's name
#   model-files/NAME/history.jsonl           the upload (with the file's SHA-256) and the promotion
#                                            of that version, stamped with the fit time
#
# Usage (from anywhere):  bash demo-data/fit-demo-models.sh
# Uses $OGIVE if set, otherwise builds the release binary (under $CARGO_TARGET_DIR when set).
# MODEL_FILES=DIR writes the model directory there instead of model-files/, and
# SKIP_GENERATE=1 fits the committed CSVs without running the generator (tests/fit_demo.rs
# does both, to refit the demo models and compare them with the committed ones).
# The fit time recorded in the files is fixed (SOURCE_DATE_EPOCH), so a rerun reproduces the
# committed files byte for byte. Both models are fitted and checked in a scratch directory
# first: if anything fails, model-files/ is left exactly as it was.
set -euo pipefail

root="$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)"
cd "$root"

if [[ -z "${SKIP_GENERATE:-}" ]]; then
    python3 demo-data/generate.py
fi
models="${MODEL_FILES:-model-files}"

if [[ -z "${OGIVE:-}" ]]; then
    cargo build --release --quiet --bin ogive
    OGIVE="${CARGO_TARGET_DIR:-$root/target}/release/ogive"
fi
export SOURCE_DATE_EPOCH=1767225600 # 2026-01-01T00:00:00Z
VERSION=1.0.0

scratch="$(mktemp -d)"
trap 'rm -rf "$scratch"' EXIT

"$OGIVE" fit \
    --data demo-data/lease-arrears.csv \
    --outcome arrears_60d \
    --outcome-meaning "the lease fell 60 or more days behind within a year of signing" \
    --terms "log(annual_revenue), years_trading, years_trading^2, prior_arrears, guarantor, years_trading*guarantor, sector" \
    --categorical sector \
    --unit annual_revenue="thousand EUR" --unit years_trading=years --unit prior_arrears=leases \
    --link logit \
    --threshold 0.3 --band low=0.08 --band medium=0.2 --band high=1 \
    --name lease-arrears --version "$VERSION" \
    --description "Invented demo: a fictional equipment lessor's probability that a small-business lease falls 60+ days behind within a year." \
    --out "$scratch/lease-arrears.json"

"$OGIVE" fit \
    --data demo-data/rebate-uptake.csv \
    --outcome took_rebate \
    --outcome-meaning "the household took up the offered energy-efficiency rebate" \
    --terms "household_income, dwelling_age, occupants, owner_occupied, energy_audit, heating" \
    --categorical heating=gas --count occupants --continuous dwelling_age \
    --unit household_income="thousand EUR" --unit dwelling_age=years --unit occupants=people \
    --link probit \
    --name rebate-uptake --version "$VERSION" \
    --description "Invented demo: a fictional energy office's probability that a household takes up an offered rebate." \
    --out "$scratch/rebate-uptake.json"

"$OGIVE" check "$scratch/lease-arrears.json" "$scratch/rebate-uptake.json" >/dev/null

# The records ogive itself writes for an upload and a promotion (see
# src/registry/store/history.rs), so that `ogive history` shows how the version went live and
# every load checks the file against its digest.
WHEN=2026-01-01T00:00:00.000Z
WHO=script:fit-demo-models
install_model() {
    local name="$1" digest
    digest="$(sha256sum "$scratch/$name.json" | cut -d' ' -f1)"
    mkdir -p "$models/$name/versions"
    mv "$scratch/$name.json" "$models/$name/versions/$VERSION.json"
    printf '%s\n' "$VERSION" >"$models/$name/live"
    {
        printf '{"when":"%s","action":"upload","from":null,"to":"%s","who":"%s","reason":"the demo model","sha256":"%s"}\n' \
            "$WHEN" "$VERSION" "$WHO" "$digest"
        printf '{"when":"%s","action":"promote","from":null,"to":"%s","who":"%s","reason":"the demo model"}\n' \
            "$WHEN" "$VERSION" "$WHO"
    } >"$models/$name/history.jsonl"
}
install_model lease-arrears
install_model rebate-uptake
echo "demo models written to $models and checked"
