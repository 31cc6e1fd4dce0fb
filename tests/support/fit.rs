//! What the `tests/fit_*.rs` binaries share: the committed fixtures of `tests/reference/fit/`,
//! temporary CSV files, and fitting through the library exactly as `ogive fit` does. A fit test
//! takes `use support::fit::*;`, which also brings the fit tolerances and the comparisons.

use std::path::{Path, PathBuf};

use ogive::fit::{self, FitRequest, Fitted, Silent};
use serde_json::Value as Json;

// Re-exported for `use support::fit::*;`; a binary that does not take them leaves them unused.
#[allow(unused_imports)]
pub use super::close::{assert_relative, relative_difference};
#[allow(unused_imports)]
pub use super::reference::{numbers, strings};
#[allow(unused_imports)]
pub use super::tolerances::fit::*;

/// The path of a file under `tests/reference/fit/`.
pub fn reference_file(name: &str) -> PathBuf {
    super::reference::reference_path(&format!("fit/{name}"))
}

/// A committed JSON fixture of `tests/reference/fit/`.
pub fn fixture(name: &str) -> Json {
    super::reference::fixture(&format!("fit/{name}"))
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
