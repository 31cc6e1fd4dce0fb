//! Helpers and tolerances shared by the `tests/fit_*.rs` binaries: the committed fixtures of
//! `tests/reference/fit/`, temporary CSV files, and fitting through the library exactly as
//! `ogive fit` does.
//!
//! Every tolerance of the fit tests is a constant here, with the reason it has its value.
#![allow(dead_code)]

use std::path::{Path, PathBuf};

use ogive::fit::{self, FitRequest, Fitted, Silent};
use serde_json::Value as Json;

/// Coefficients against statsmodels: relative (the project's 1e-6). Both sides iterate to a
/// gradient far below this, so the agreement is usually near 1e-10.
pub const COEFFICIENT_VS_STATSMODELS: f64 = 1e-6;

/// Classical and HC0 standard errors against statsmodels: relative (the project's 1e-5).
pub const STD_ERROR_VS_STATSMODELS: f64 = 1e-5;

/// Log-likelihoods against statsmodels: relative. The same sum over the same data in a
/// different order, at an estimate equal to ~1e-10.
pub const LOG_LIKELIHOOD_VS_STATSMODELS: f64 = 1e-9;

/// A number printed to three decimals (Greene's tables, the Newton-vs-IRLS check):
/// half a unit in the third decimal, absolute.
pub const PRINTED_THREE_DECIMALS: f64 = 5e-4;

/// Estimates in a simulation: within this many standard errors of the truth (the project's 4).
pub const SIMULATION_STANDARD_ERRORS: f64 = 4.0;

/// Coverage of nominal 95% intervals over 200 simulated datasets: the project's band.
pub const COVERAGE_BAND: (f64, f64) = (0.92, 0.98);

/// Amemiya (1981): logit coefficients are about 1.6 times probit ones; the loose band used
/// here for every coefficient of the Spector fit.
pub const AMEMIYA_RATIO_BAND: (f64, f64) = (1.4, 1.9);

/// The path of a file under `tests/reference/fit/`.
pub fn reference_file(name: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("tests/reference/fit")
        .join(name)
}

/// A committed JSON fixture.
pub fn fixture(name: &str) -> Json {
    let path = reference_file(name);
    let text = std::fs::read_to_string(&path)
        .unwrap_or_else(|e| panic!("cannot read fixture {}: {e}", path.display()));
    serde_json::from_str(&text).unwrap_or_else(|e| panic!("{} is not JSON: {e}", path.display()))
}

/// A JSON array of numbers.
pub fn numbers(value: &Json) -> Vec<f64> {
    value
        .as_array()
        .unwrap_or_else(|| panic!("expected an array, got {value}"))
        .iter()
        .map(|x| x.as_f64().unwrap_or_else(|| panic!("not a number: {x}")))
        .collect()
}

/// A JSON array of strings.
pub fn strings(value: &Json) -> Vec<String> {
    value
        .as_array()
        .unwrap_or_else(|| panic!("expected an array, got {value}"))
        .iter()
        .map(|x| {
            x.as_str()
                .unwrap_or_else(|| panic!("not text: {x}"))
                .to_string()
        })
        .collect()
}

/// `|a − b| / max(|a|, |b|)` (0 when equal).
pub fn relative_difference(a: f64, b: f64) -> f64 {
    if a == b {
        0.0
    } else {
        (a - b).abs() / a.abs().max(b.abs())
    }
}

/// Assert a relative agreement, naming the source and the quantity.
pub fn assert_relative(ours: f64, reference: f64, tolerance: f64, what: &str) {
    let d = relative_difference(ours, reference);
    assert!(
        d <= tolerance,
        "{what}: ogive {ours:.15e} vs reference {reference:.15e} (relative {d:.2e} > {tolerance:e})"
    );
}

/// A temporary folder holding one CSV file.
pub struct TempCsv {
    /// The folder (removed on drop).
    pub dir: tempfile::TempDir,
    /// The CSV file.
    pub path: PathBuf,
}

/// Write `text` to a fresh temporary `data.csv`.
pub fn temp_csv(text: &str) -> TempCsv {
    let dir = tempfile::tempdir().expect("temporary folder");
    let path = dir.path().join("data.csv");
    std::fs::write(&path, text).expect("write CSV");
    TempCsv { dir, path }
}

/// Fit with the library, no progress output.
pub fn fit_request(request: &FitRequest) -> Result<Fitted, fit::FitError> {
    fit::fit(request, &Silent)
}

/// A request for `data`, `outcome`, `terms` with every other setting at its default.
pub fn request(data: &Path, outcome: &str, terms: &str) -> FitRequest {
    let mut r = FitRequest::new(data, outcome, terms);
    r.name = "test-model".into();
    r.version = "1".into();
    r.fitted_at_unix = Some(1_700_000_000);
    r
}

/// The coefficient of a term in a fitted model file.
pub fn coefficient(fitted: &Fitted, term: &str) -> f64 {
    fitted
        .file
        .terms
        .iter()
        .find(|t| t.term == term)
        .unwrap_or_else(|| panic!("no term '{term}'"))
        .coefficient
}

/// The standard error of a term in a fitted model file.
pub fn std_error(fitted: &Fitted, term: &str) -> f64 {
    let k = fitted
        .file
        .terms
        .iter()
        .position(|t| t.term == term)
        .unwrap_or_else(|| panic!("no term '{term}'"));
    let covariance = fitted.file.covariance.as_ref().expect("a covariance");
    covariance[k][k].sqrt()
}
