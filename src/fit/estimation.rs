//! Estimation: the design matrix and the checks it must pass before any iteration (rank,
//! collinearity, one-term separation; all from one survey pass, which also gives the first
//! Newton step its sums), Newton–Raphson from the starting intercept, a failed
//! maximisation named (separation, singular information, no convergence), and the coefficient
//! covariance:
//!
//! ```text
//! V_classical = H⁻¹          V_HC0 = H⁻¹ M H⁻¹     (M: the meat of super::likelihood)
//! ```
//!
//! Sampling weights always take the sandwich. This module reads no file and writes no model.

use crate::link::Link;

use super::design::{reduce_rows, Design};
use super::error::FitError;
use super::likelihood::{self, accumulate, Matrix};
use super::newton::{self, Estimate};
use super::options::{Checked, CovarianceType, FitRequest};
use super::sample::Sample;
use super::survey::Survey;
use super::terms::{self, CovariateShape};
use super::{rank, separation, weighting, Progress};

/// The design of a fit, checked.
#[derive(Debug)]
pub(crate) struct Prepared {
    /// The design matrix.
    pub design: Design,
    /// The term labels, in design order.
    pub labels: Vec<String>,
    /// The note of a nearly collinear design.
    pub collinearity: Option<String>,
    /// The survey of the design.
    pub survey: Survey,
}

/// Build the design from the terms and refuse one that cannot be estimated: collinear terms
/// (named with their combination) or a term that alone separates the outcome. A nearly
/// collinear design passes with a note.
pub(crate) fn prepare(
    request: &FitRequest,
    checked: &Checked,
    sample: &Sample,
    shapes: &[CovariateShape],
) -> Result<Prepared, FitError> {
    let design_terms = terms::expand(&checked.terms, shapes, request.intercept)?;
    let labels: Vec<String> = design_terms.iter().map(|t| t.label()).collect();
    let resolved: Vec<_> = design_terms.iter().map(|t| t.term.clone()).collect();
    let design = Design::build(&sample.table.columns, sample.rows(), &resolved);
    let survey = Survey::of(&design, sample.outcome(), sample.weights());
    let gram = survey.gram();
    rank::check_rank(&gram, &labels, sample.counted)?;
    let collinearity = rank::collinearity_note(&rank::collinearity(&gram, labels.len()), &labels);
    drop(gram);
    separation::check_single_terms(survey.extremes(), &labels)?;
    Ok(Prepared {
        design,
        labels,
        collinearity,
        survey,
    })
}

struct Iterations<'a>(&'a dyn Progress);

impl newton::IterationObserver for Iterations<'_> {
    fn iteration(&self, iteration: u32, log_likelihood: f64) {
        self.0.iteration(iteration, log_likelihood);
    }
}

/// The starting point: every coefficient 0 but the intercept, at the link's quantile of the
/// (weighted) share of ones, so the first step starts from the null model.
fn start(link: Link, labels: &[String], sample: &Sample) -> Vec<f64> {
    let share = weighting::sample_rate(sample.outcome(), sample.weights());
    labels
        .iter()
        .map(|l| {
            if l == "intercept" {
                likelihood::quantile(link, share)
            } else {
                0.0
            }
        })
        .collect()
}

/// Maximise the likelihood; a failure is named as separation when observations are fitted
/// exactly, else as singular information or no convergence.
pub(crate) fn estimate(
    request: &FitRequest,
    sample: &Sample,
    prepared: &Prepared,
    progress: &dyn Progress,
) -> Result<Estimate, FitError> {
    progress.start_fitting();
    let (design, labels) = (&prepared.design, &prepared.labels);
    let options = newton::NewtonOptions {
        max_iterations: request.max_iterations,
    };
    let start = start(request.link, labels, sample);
    // Every row's index at the start is the intercept's value (0 without one).
    let index = labels
        .iter()
        .zip(&start)
        .find(|(l, _)| *l == "intercept")
        .map_or(0.0, |(_, &b)| b);
    let at_start = prepared.survey.sums_at_constant_index(request.link, index);
    newton::maximise(
        design,
        sample.outcome(),
        sample.weights(),
        request.link,
        newton::Start {
            coefficients: start,
            sums: at_start,
        },
        options,
        &Iterations(progress),
    )
    .map_err(|stopped| {
        separation::diagnose(
            design,
            sample.outcome(),
            sample.weights(),
            request.link,
            &stopped.coefficients,
            labels,
        )
        .unwrap_or(if stopped.singular {
            FitError::SingularInformation(stopped.reason.clone())
        } else {
            FitError::NotConverged(stopped.reason.clone())
        })
    })
}

/// The coefficient covariance, row-major `k × k`, and the estimator it is.
pub(crate) fn covariance(
    request: &FitRequest,
    checked: &Checked,
    sample: &Sample,
    prepared: &Prepared,
    estimate: &Estimate,
) -> Result<(Vec<f64>, CovarianceType), FitError> {
    let k = prepared.labels.len();
    let bread = newton::inverse(&estimate.information, k).ok_or_else(|| {
        FitError::SingularInformation(format!(
            "after {} Newton–Raphson steps the observed information could not be inverted",
            estimate.iterations
        ))
    })?;
    // Sampling weights always take the sandwich: the inverse information would treat each
    // row as v observations, which a sampled row is not.
    let sampling = checked.weighting.sampling();
    let covariance_type = if sampling {
        CovarianceType::Robust
    } else {
        request.covariance
    };
    let covariance = match covariance_type {
        CovarianceType::Classical => bread,
        CovarianceType::Robust => {
            let meat_kind = if sampling {
                Matrix::WeightedScoreOuter
            } else {
                Matrix::ScoreOuter
            };
            let meat = accumulate(
                &prepared.design,
                sample.outcome(),
                sample.weights(),
                request.link,
                &estimate.coefficients,
                meat_kind,
            );
            sandwich(&bread, &meat.matrix, k)
        }
    };
    Ok((covariance, covariance_type))
}

/// The linear index of every row.
pub(crate) fn indices(design: &Design, beta: &[f64]) -> Vec<f64> {
    reduce_rows(
        design.rows(),
        Vec::new,
        |acc: &mut Vec<f64>, range| {
            let mut block = Vec::new();
            likelihood::indices_of(design.rows_of(range), beta, &mut block);
            acc.extend(block);
        },
        |total, part| total.extend(part),
    )
}

/// `A⁻¹ M A⁻¹` for row-major `k × k` matrices.
fn sandwich(bread: &[f64], meat: &[f64], k: usize) -> Vec<f64> {
    let product = |a: &[f64], b: &[f64]| {
        let mut out = vec![0.0; k * k];
        for r in 0..k {
            for m in 0..k {
                let x = a[r * k + m];
                for c in 0..k {
                    out[r * k + c] += x * b[m * k + c];
                }
            }
        }
        out
    };
    let mut v = product(&product(bread, meat), bread);
    for r in 0..k {
        for c in 0..r {
            let mean = 0.5 * (v[r * k + c] + v[c * k + r]);
            v[r * k + c] = mean;
            v[c * k + r] = mean;
        }
    }
    v
}
