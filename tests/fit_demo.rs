//! The committed demo models (`model-files/lease-arrears`, `model-files/rebate-uptake`), fitted
//! by `demo-data/fit-demo-models.sh`, against the true coefficients stated in
//! `demo-data/generate.py` (and written by it to `demo-data/true-coefficients.json`).
//!
//! The truth is the generator's input; what is checked is that `ogive fit` recovers it. Each
//! coefficient must lie within its Bonferroni-adjusted 95% interval (level 1 − 0.05/k per
//! coefficient, so that the family of k intervals holds jointly at 95%: common practice), and
//! the Wald statistic (β̂ − β)ᵀ V⁻¹ (β̂ − β) must stay below the 99% point of χ²ₖ.
//!
//! And the committed models are what fitting gives today: the committed fit script
//! (`demo-data/fit-demo-models.sh`, with the binary under test, on the committed CSVs, into a
//! temporary model directory) must write the committed files again, every string and count
//! exactly and every number to `REFIT_RELATIVE` (tests/support/tolerances.rs), so that a change to fitting that moves an
//! estimate fails here until the demo models are refitted and committed with it.

mod support;

use std::path::PathBuf;

use nalgebra::{DMatrix, DVector};
use ogive::link::normal_quantile;
use ogive::model::Model;
use statrs::distribution::{ChiSquared, ContinuousCDF};
use support::process::{copy_tree, succeeded, write_executable};
use support::tolerances::fit::REFIT_RELATIVE;

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

fn read(path: PathBuf) -> String {
    std::fs::read_to_string(&path).unwrap_or_else(|e| panic!("cannot read {}: {e}", path.display()))
}

fn check_demo(name: &str) {
    let truth: serde_json::Value =
        serde_json::from_str(&read(root().join("demo-data/true-coefficients.json"))).expect("JSON");
    let truth = &truth[name];
    let folder = root().join("model-files").join(name);
    let version = read(folder.join("live")).trim().to_string();
    assert!(
        folder.join("history.jsonl").exists(),
        "{name}: history.jsonl"
    );
    let bytes = read(folder.join("versions").join(format!("{version}.json")));
    let model = Model::from_json(bytes.as_bytes()).unwrap_or_else(|e| panic!("{name}: {e}"));
    assert_eq!(model.link().name(), truth["link"].as_str().expect("link"));
    let coefficients = truth["coefficients"].as_object().expect("coefficients");
    let k = model.terms().len();
    assert_eq!(
        k,
        coefficients.len(),
        "{name}: the model's terms are the generator's"
    );
    let covariance = model.covariance().expect("covariance");
    let q = normal_quantile(1.0 - 0.025 / k as f64);
    let mut difference = DVector::zeros(k);
    for (j, label) in model.term_labels().iter().enumerate() {
        let true_value = coefficients[label.as_str()]
            .as_f64()
            .unwrap_or_else(|| panic!("{label}"));
        let estimate = model.coefficients()[j];
        let se = covariance[j * k + j].sqrt();
        assert!(
            (estimate - true_value).abs() <= q * se,
            "{name} {label}: estimate {estimate}, truth {true_value}, interval ±{}",
            q * se
        );
        difference[j] = estimate - true_value;
    }
    let v = DMatrix::from_row_slice(k, k, covariance);
    let wald = difference.dot(&(v.cholesky().expect("positive definite").solve(&difference)));
    let limit = ChiSquared::new(k as f64).expect("χ²").inverse_cdf(0.99);
    assert!(
        wald <= limit,
        "{name}: Wald statistic {wald} > χ²({k}) 99% point {limit}"
    );
}

#[test]
fn lease_arrears_recovers_the_generators_coefficients() {
    check_demo("lease-arrears");
}

#[test]
fn rebate_uptake_recovers_the_generators_coefficients() {
    check_demo("rebate-uptake");
}

#[test]
fn the_demo_history_accounts_for_the_live_version_without_warnings() {
    let models = root().join("model-files");
    for name in ["lease-arrears", "rebate-uptake"] {
        let view = ogive::registry::lifecycle::history(&models, name).expect("history");
        assert!(view.warnings.is_empty(), "{name}: {:?}", view.warnings);
        let live = view.live.clone().expect("a live version");
        let actions: Vec<(&str, &str)> = view
            .records
            .iter()
            .map(|r| (r.action.name(), r.to.as_str()))
            .collect();
        assert_eq!(
            actions,
            [("upload", live.as_str()), ("promote", live.as_str())]
        );
        // The upload's digest is the file's: the loader checks it.
        ogive::registry::load::load_live(&models.join(name), name)
            .unwrap_or_else(|e| panic!("{name}: {e}"));
    }
}

/// Every value of `ours` equals the one at the same place in `committed`: numbers to
/// `REFIT_RELATIVE`, everything else exactly. `at` is the JSON Pointer of the value.
fn assert_same_json(ours: &serde_json::Value, committed: &serde_json::Value, at: &str) {
    use serde_json::Value;
    match (ours, committed) {
        (Value::Number(a), Value::Number(b)) => {
            let (a, b) = (a.as_f64().expect("f64"), b.as_f64().expect("f64"));
            let scale = a.abs().max(b.abs()).max(f64::MIN_POSITIVE);
            assert!(
                (a - b).abs() <= REFIT_RELATIVE * scale,
                "{at}: refitted {a:e}, committed {b:e}"
            );
        }
        (Value::Array(a), Value::Array(b)) => {
            assert_eq!(a.len(), b.len(), "{at}: length");
            for (i, (x, y)) in a.iter().zip(b).enumerate() {
                assert_same_json(x, y, &format!("{at}/{i}"));
            }
        }
        (Value::Object(a), Value::Object(b)) => {
            let keys = |o: &serde_json::Map<String, Value>| o.keys().cloned().collect::<Vec<_>>();
            assert_eq!(keys(a), keys(b), "{at}: members");
            for (key, x) in a {
                assert_same_json(x, &b[key], &format!("{at}/{key}"));
            }
        }
        _ => assert_eq!(ours, committed, "{at}"),
    }
}

#[test]
fn refitting_the_demo_data_gives_the_committed_models() {
    let scratch = tempfile::tempdir().expect("tempdir");
    succeeded(
        std::process::Command::new("bash")
            .arg(root().join("demo-data/fit-demo-models.sh"))
            .env("OGIVE", env!("CARGO_BIN_EXE_ogive"))
            .env("MODEL_FILES", scratch.path())
            .env("SKIP_GENERATE", "1"),
    );
    for name in ["lease-arrears", "rebate-uptake"] {
        let committed = root().join("model-files").join(name);
        let refitted = scratch.path().join(name);
        assert_eq!(
            read(refitted.join("live")),
            read(committed.join("live")),
            "{name}: live"
        );
        let version = read(committed.join("live")).trim().to_string();
        let file = |folder: &PathBuf| -> serde_json::Value {
            let path = folder.join("versions").join(format!("{version}.json"));
            serde_json::from_str(&read(path)).expect("JSON")
        };
        assert_same_json(&file(&refitted), &file(&committed), name);
        // The history records, but for the digest of bytes that may differ in rounding.
        let history = |folder: &PathBuf| -> Vec<serde_json::Value> {
            read(folder.join("history.jsonl"))
                .lines()
                .map(|line| {
                    let mut record: serde_json::Value = serde_json::from_str(line).expect("JSON");
                    record.as_object_mut().expect("record").remove("sha256");
                    record
                })
                .collect()
        };
        assert_eq!(history(&refitted), history(&committed), "{name}: history");
    }
}

/// Every file under `folder`, by path relative to it, with its bytes.
fn files_of(folder: &std::path::Path) -> std::collections::BTreeMap<PathBuf, Vec<u8>> {
    let mut files = std::collections::BTreeMap::new();
    let mut stack = vec![folder.to_path_buf()];
    while let Some(dir) = stack.pop() {
        for entry in std::fs::read_dir(&dir).expect("list") {
            let path = entry.expect("entry").path();
            if path.is_dir() {
                stack.push(path);
            } else {
                let bytes = std::fs::read(&path).expect("read");
                files.insert(
                    path.strip_prefix(folder).expect("inside").to_path_buf(),
                    bytes,
                );
            }
        }
    }
    files
}

#[test]
fn the_demo_script_without_ogive_builds_under_cargo_target_dir() {
    let work = tempfile::tempdir().expect("temporary folder");
    // A stand-in cargo: the build it is asked for "produces" the binary under test where a
    // build under CARGO_TARGET_DIR would put it, and nowhere else.
    let tools = work.path().join("tools");
    let target = work.path().join("elsewhere");
    let models = work.path().join("models");
    std::fs::create_dir_all(&tools).expect("mkdir");
    write_executable(
        &tools.join("cargo"),
        &format!(
            "#!/bin/sh\n\
             [ \"$*\" = 'build --release --quiet --bin ogive' ] || {{ echo \"unexpected: cargo $*\" >&2; exit 1; }}\n\
             mkdir -p \"$CARGO_TARGET_DIR/release\" && ln -sf '{}' \"$CARGO_TARGET_DIR/release/ogive\"\n",
            env!("CARGO_BIN_EXE_ogive")
        ),
    );
    let path = std::env::var_os("PATH").unwrap_or_default();
    let mut search = vec![tools];
    search.extend(std::env::split_paths(&path));
    succeeded(
        std::process::Command::new("bash")
            .arg(root().join("demo-data/fit-demo-models.sh"))
            .env_remove("OGIVE")
            .env("CARGO_TARGET_DIR", &target)
            .env("MODEL_FILES", &models)
            .env("SKIP_GENERATE", "1")
            .env("PATH", std::env::join_paths(search).expect("PATH")),
    );
    for name in ["lease-arrears", "rebate-uptake"] {
        assert!(models.join(name).join("live").is_file(), "{name}: live");
    }
}

#[test]
fn a_failing_demo_fit_leaves_model_files_and_their_histories_as_they_were() {
    let work = tempfile::tempdir().expect("temporary folder");
    let models = work.path().join("models");
    copy_tree(&root().join("model-files"), &models);
    let before = files_of(&models);
    // An ogive whose fit fails, as one given bad data or flags would.
    let failing = work.path().join("failing-ogive");
    write_executable(
        &failing,
        "#!/bin/sh\necho 'error: the fit failed' >&2\nexit 1\n",
    );
    let run = std::process::Command::new("bash")
        .arg(root().join("demo-data/fit-demo-models.sh"))
        .env("OGIVE", &failing)
        .env("MODEL_FILES", &models)
        .env("SKIP_GENERATE", "1")
        .output()
        .expect("run the demo script");
    assert!(!run.status.success(), "the script reports the failure");
    assert_eq!(
        files_of(&models),
        before,
        "a failed run changed the model files"
    );
}
