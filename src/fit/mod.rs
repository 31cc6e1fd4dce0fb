//! Fitting: maximum-likelihood estimation of a binary-outcome model from a CSV file, and the
//! complete model file it writes (training summaries, joint block, fitted-probability
//! histogram, coefficient covariance, check cases, provenance).
//!
//! [`fit`] is a list of steps, one file each:
//!
//! ```text
//! options      the request; its flags checked before reading; kinds, levels and references
//! sample       the table as read, each row's weight, the rows that count
//! estimation   the design and its checks, Newton–Raphson, a failure named, the covariance
//! assembly     the served coefficients, summaries, report, notes, provenance, check cases
//! ```
//!
//! and the parts they use:
//!
//! ```text
//! terms        parse --terms, expand categorical covariates into level indicators
//! reader       CSV → outcome and covariate columns (parallel, bounded, row-numbered errors)
//! kinds        binary / count / continuous for numeric columns
//! design       the design matrix (column-major blocks of f64) and the blocked parallel reduction
//! kernel       the sums of a pass: sixteen lanes, chunks in cache, AVX2 chosen at run time
//! survey       one pass before the fit: Gram matrices and extremes by outcome, the start's sums
//! rank         collinear terms, named with their combination
//! separation   complete and quasi-complete separation, named with term and direction
//! likelihood   ℓ, score, observed and expected information for every link
//! newton       Newton–Raphson with step-halving and a Fisher-scoring fallback
//! weighting    frequency and sampling weights, population rates, the intercept correction
//! summaries    ranges, moments, histograms, level counts, joint block
//! check_cases  observations spread over the index, scored by the engine
//! report       the printed summary
//! write        crash-safe writing of the model file
//! ```
//!
//! Covariance (in `estimation`): `classical` is the inverse of the observed information (the
//! negative Hessian) at the estimate; `robust` is the HC0 sandwich:
//!
//! ```text
//! V_classical = H⁻¹          V_HC0 = H⁻¹ (Σ sᵢ² xᵢ xᵢᵀ) H⁻¹,   sᵢ = ∂ℓᵢ/∂zᵢ
//! ```
//!
//! Memory: the design matrix and the covariate columns, one `f64` (or one `u32` level code) per
//! cell, plus two `f64` per observation for the fitted index and probability. No per-row text is
//! kept. This module depends on nothing of the service; progress is reported through the
//! [`Progress`] trait so the command line can draw a bar.

pub(crate) mod assembly;
pub(crate) mod check_cases;
pub(crate) mod design;
pub(crate) mod error;
pub(crate) mod estimation;
pub(crate) mod kernel;
pub(crate) mod kinds;
pub(crate) mod likelihood;
pub(crate) mod newton;
pub(crate) mod options;
pub(crate) mod rank;
pub mod reader;
pub(crate) mod report;
pub(crate) mod sample;
pub(crate) mod separation;
pub(crate) mod summaries;
pub(crate) mod survey;
pub(crate) mod terms;
pub(crate) mod weighting;
pub(crate) mod write;

use crate::model::file::ModelFile;

pub use error::FitError;
pub use options::{CategoricalSpec, CovarianceType, FitRequest};
pub use report::{Counting, FitReport};
pub use weighting::{PopulationMethod, PopulationRate, WeightColumn, WeightKind};
pub use write::write_model_file;

/// Progress of a fit, for a progress bar. Every method does nothing by default.
pub trait Progress: Sync {
    /// Reading starts; the file has this many bytes.
    fn start_reading(&self, _total_bytes: u64) {}
    /// Bytes handed to the parser so far.
    fn bytes_read(&self, _bytes: u64) {}
    /// Rows parsed so far.
    fn rows_read(&self, _rows: u64) {}
    /// Estimation starts.
    fn start_fitting(&self) {}
    /// One Newton step done.
    fn iteration(&self, _iteration: u32, _log_likelihood: f64) {}
}

/// A [`Progress`] that reports nothing: for a library caller that needs no progress lines.
#[derive(Debug, Clone, Copy, Default)]
pub struct Silent;

impl Progress for Silent {}

/// A finished fit: the validated model file and the summary to print.
#[derive(Debug, Clone)]
pub struct Fitted {
    /// The model file, already validated by [`crate::model::Model::from_file`].
    pub file: ModelFile,
    /// What `ogive fit` prints after fitting: the coefficients and standard errors, the
    /// likelihoods, the Newton iterations and the remarks.
    pub report: FitReport,
}

/// Fit the model a request describes.
pub fn fit(request: &FitRequest, progress: &dyn Progress) -> Result<Fitted, FitError> {
    match request.threads {
        Some(threads) => design::with_threads(threads, || fit_here(request, progress)),
        None => fit_here(request, progress),
    }
}

/// [`fit`], with passes over the data on this thread's thread setting.
fn fit_here(request: &FitRequest, progress: &dyn Progress) -> Result<Fitted, FitError> {
    let checked = options::check(request)?;
    let sample = sample::read(request, &checked, progress)?;
    let shapes = options::shapes(request, &checked.names, &sample.table.columns)?;
    let prepared = estimation::prepare(request, &checked, &sample, &shapes)?;
    let estimate = estimation::estimate(request, &sample, &prepared, progress)?;
    let (covariance, covariance_type) =
        estimation::covariance(request, &checked, &sample, &prepared, &estimate)?;
    assembly::assemble(assembly::Parts {
        request,
        checked: &checked,
        sample,
        shapes,
        prepared,
        estimate,
        covariance,
        covariance_type,
    })
}
