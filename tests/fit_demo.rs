//! The committed demo models (`model-files/lease-arrears`, `model-files/rebate-uptake`), fitted
//! by `demo-data/fit-demo-models.sh`, against the true coefficients stated in
//! `demo-data/generate.py` (and written by it to `demo-data/true-coefficients.json`).
//!
//! The truth is the generator's input; what is checked is that `ogive fit` recovers it. Each
//! coefficient must lie within its Bonferroni-adjusted 95% interval (level 1 − 0.05/k per
//! coefficient, so that the family of k intervals holds jointly at 95%: common practice), and
//! the Wald statistic (β̂ − β)ᵀ V⁻¹ (β̂ − β) must stay below the 99% point of χ²ₖ.

use std::path::PathBuf;

use nalgebra::{DMatrix, DVector};
use ogive::link::normal_quantile;
use ogive::model::Model;
use statrs::distribution::{ChiSquared, ContinuousCDF};

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
