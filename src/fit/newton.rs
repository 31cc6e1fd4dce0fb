//! Newton–Raphson maximisation of the log-likelihood, with the analytic score and observed
//! information of [`super::likelihood`], step-halving, and a Fisher-scoring fallback.
//!
//! ```text
//! step     Δ = H(β)⁻¹ g(β)          H = observed information (negative Hessian), by Cholesky
//! accept   β + t·Δ with the first t in 1, ½, ¼, … (at most 50 halvings) that does not lower ℓ
//! stop     |Δℓ| ≤ 1e-11·(1 + |ℓ|)                        relative change of the log-likelihood
//!          max |t·Δⱼ| / (1 + |βⱼ|) ≤ 1e-8                  relative change of the coefficients
//!          gᵀ H⁻¹ g ≤ 1e-10                               the gradient, in the Hessian's metric
//! ```
//!
//! For logit the observed and expected information coincide and this is IRLS. For the other
//! links the observed information can fail to be positive definite far from the estimate; that
//! step is then taken with the expected information (Fisher scoring) instead, and counted. The
//! coefficient step test is what keeps a fit under separation, where ℓ and g flatten while a
//! coefficient grows without bound, from being reported as converged.
//!
//! This module knows the design and the outcome, not the terms: naming a failure is the
//! caller's job (see [`super::separation`]).

use nalgebra::{DMatrix, DVector};

use crate::link::Link;

use super::design::Design;
use super::likelihood::{accumulate, accumulate_keeping_index, Matrix, Sums};

/// Settings of the maximisation.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct NewtonOptions {
    /// The iteration cap.
    pub max_iterations: u32,
}

impl Default for NewtonOptions {
    fn default() -> Self {
        NewtonOptions {
            max_iterations: 100,
        }
    }
}

const LOG_LIKELIHOOD_TOLERANCE: f64 = 1e-11;
const STEP_TOLERANCE: f64 = 1e-8;
const DECREMENT_TOLERANCE: f64 = 1e-10;
const MAX_HALVINGS: u32 = 50;

/// A converged estimate.
#[derive(Debug, Clone, PartialEq)]
pub struct Estimate {
    /// β̂.
    pub coefficients: Vec<f64>,
    /// ℓ(β̂).
    pub log_likelihood: f64,
    /// Newton steps taken.
    pub iterations: u32,
    /// The observed information at β̂, row-major `k × k`; positive definite.
    pub information: Vec<f64>,
    /// Steps taken with the expected information because the observed was not positive
    /// definite.
    pub fisher_steps: u32,
    /// Step halvings, over all iterations.
    pub halvings: u32,
    /// Every row's index `xᵢᵀβ̂`, kept from the last pass (empty if no step was taken).
    pub index: Vec<f64>,
}

/// Why the maximisation stopped without an estimate.
#[derive(Debug, Clone, PartialEq)]
pub struct Stopped {
    /// What happened, in words.
    pub reason: String,
    /// Where it stopped.
    pub coefficients: Vec<f64>,
    /// Steps taken.
    pub iterations: u32,
    /// The information matrix at the last point was singular (a sign of separation or of a
    /// degenerate design).
    pub singular: bool,
}

/// Called after each accepted step with the iteration number and the log-likelihood.
pub trait IterationObserver {
    /// One step done.
    fn iteration(&self, iteration: u32, log_likelihood: f64);
}

impl IterationObserver for () {
    fn iteration(&self, _: u32, _: f64) {}
}

fn cholesky(matrix: &[f64], k: usize) -> Option<nalgebra::Cholesky<f64, nalgebra::Dyn>> {
    if matrix.iter().any(|x| !x.is_finite()) {
        return None;
    }
    DMatrix::from_row_slice(k, k, matrix).cholesky()
}

fn estimate(
    beta: Vec<f64>,
    at: Sums,
    iterations: u32,
    fisher_steps: u32,
    halvings: u32,
) -> Estimate {
    Estimate {
        coefficients: beta,
        log_likelihood: at.log_likelihood,
        iterations,
        information: at.matrix,
        fisher_steps,
        halvings,
        index: at.index,
    }
}

/// Where the maximisation starts: the coefficients, and the log-likelihood, score and observed
/// information there (which the caller may have without a pass of its own).
#[derive(Debug, Clone, PartialEq)]
pub struct Start {
    /// β₀.
    pub coefficients: Vec<f64>,
    /// The sums at β₀ with [`Matrix::Observed`].
    pub sums: Sums,
}

/// Maximise the log-likelihood from `start`.
pub fn maximise(
    design: &Design,
    outcome: &[f64],
    weights: Option<&[f64]>,
    link: Link,
    start: Start,
    options: NewtonOptions,
    observer: &dyn IterationObserver,
) -> Result<Estimate, Stopped> {
    let k = design.columns();
    let mut beta = start.coefficients;
    let mut at = start.sums;
    let mut previous_change: Option<(f64, f64)> = None;
    let mut fisher_steps = 0;
    let mut halvings = 0;
    let stopped = |reason: String, beta: &[f64], iterations: u32, singular: bool| Stopped {
        reason,
        coefficients: beta.to_vec(),
        iterations,
        singular,
    };
    let mut iteration = 0u32;
    loop {
        let (factor, observed) = match cholesky(&at.matrix, k) {
            Some(c) => (c, true),
            None => {
                let expected = accumulate(design, outcome, weights, link, &beta, Matrix::Expected);
                match cholesky(&expected.matrix, k) {
                    Some(c) => (c, false),
                    None => {
                        return Err(stopped(
                            format!(
                                "both the observed and the expected information were singular after {iteration} Newton steps"
                            ),
                            &beta,
                            iteration,
                            true,
                        ))
                    }
                }
            }
        };
        let gradient = DVector::from_column_slice(&at.gradient);
        let step = factor.solve(&gradient);
        let decrement = gradient.dot(&step);
        if let Some((ll_change, beta_change)) = previous_change {
            if observed
                && ll_change <= LOG_LIKELIHOOD_TOLERANCE
                && beta_change <= STEP_TOLERANCE
                && decrement <= DECREMENT_TOLERANCE
            {
                return Ok(estimate(beta, at, iteration, fisher_steps, halvings));
            }
        }
        if iteration == options.max_iterations {
            let (ll_change, beta_change) = previous_change.unwrap_or((f64::NAN, f64::NAN));
            return Err(stopped(
                format!(
                    "no convergence in {} Newton–Raphson steps ({fisher_steps} of them Fisher-scoring steps, {halvings} step halvings); at the last step the relative change of the log-likelihood was {ll_change:.3e}, of the coefficients {beta_change:.3e}, and gᵀH⁻¹g was {decrement:.3e} (tolerances {LOG_LIKELIHOOD_TOLERANCE:e}, {STEP_TOLERANCE:e}, {DECREMENT_TOLERANCE:e}); raise --max-iterations or rescale the covariates",
                    options.max_iterations
                ),
                &beta,
                iteration,
                false,
            ));
        }
        if !observed {
            fisher_steps += 1;
        }
        let mut scale = 1.0;
        let mut accepted = None;
        for _ in 0..=MAX_HALVINGS {
            let trial: Vec<f64> = beta
                .iter()
                .zip(step.iter())
                .map(|(b, s)| b + scale * s)
                .collect();
            let sums = accumulate_keeping_index(design, outcome, weights, link, &trial);
            let tolerance = 1e-12 * at.log_likelihood.abs();
            if sums.log_likelihood.is_finite()
                && sums.log_likelihood >= at.log_likelihood - tolerance
            {
                accepted = Some((trial, sums));
                break;
            }
            scale *= 0.5;
            halvings += 1;
        }
        let Some((trial, sums)) = accepted else {
            if observed && decrement <= DECREMENT_TOLERANCE {
                // Already at the maximum to within rounding: no step can raise ℓ further.
                return Ok(estimate(beta, at, iteration, fisher_steps, halvings));
            }
            return Err(stopped(
                format!(
                    "after {iteration} Newton–Raphson steps, {MAX_HALVINGS} step halvings found no point with a higher log-likelihood (gᵀH⁻¹g = {decrement:.3e})"
                ),
                &beta,
                iteration,
                false,
            ));
        };
        let ll_change =
            (sums.log_likelihood - at.log_likelihood).abs() / (1.0 + sums.log_likelihood.abs());
        let beta_change = trial
            .iter()
            .zip(&beta)
            .map(|(new, old)| (new - old).abs() / (1.0 + new.abs()))
            .fold(0.0, f64::max);
        previous_change = Some((ll_change, beta_change));
        beta = trial;
        at = sums;
        iteration += 1;
        observer.iteration(iteration, at.log_likelihood);
    }
}

/// The inverse of a symmetric positive definite matrix (row-major), or `None` if it is not
/// positive definite.
pub fn inverse(matrix: &[f64], k: usize) -> Option<Vec<f64>> {
    let inverse = cholesky(matrix, k)?.inverse();
    let mut out = vec![0.0; k * k];
    for r in 0..k {
        for c in 0..k {
            // Average the two triangles so the result is exactly symmetric.
            out[r * k + c] = 0.5 * (inverse[(r, c)] + inverse[(c, r)]);
        }
    }
    Some(out)
}
