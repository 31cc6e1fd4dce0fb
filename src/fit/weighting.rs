//! Weighted fits and outcome-stratified samples: which weights each observation gets, which
//! sandwich the covariance uses, and the prior correction of the logit intercept.
//!
//! ```text
//! --weights COL            frequency weights vᵢ: ℓ = Σ vᵢ ℓᵢ; classical V = H⁻¹, robust uses
//!                          the meat Σ vᵢ sᵢ² xᵢ xᵢᵀ
//! --sampling-weights COL   sampling weights vᵢ: the same estimate; V is always the HC0
//!                          sandwich with the meat Σ (vᵢ sᵢ)² xᵢ xᵢᵀ
//! --population-rate τ      an outcome-stratified sample with sample rate ȳ:
//!   intercept (logit)      fit unweighted, then β₀ ← β₀ − ln[((1 − τ)/τ)·(ȳ/(1 − ȳ))]
//!                          (prior correction, King and Zeng 2001); slopes and V unchanged
//!   weights (any link)     vᵢ = τ/ȳ when yᵢ = 1 and (1 − τ)/(1 − ȳ) when yᵢ = 0, treated
//!                          as sampling weights (weighted exogenous sampling)
//! ```
//!
//! Under population weights Σ vᵢ yᵢ / Σ vᵢ = τ, and for logit (the canonical link) the score
//! equation of the intercept makes the weighted mean of the fitted probabilities exactly τ.
//!
//! This module decides weights and shifts; it reads nothing and fits nothing.

use crate::link::Link;
use crate::model::file::{Weighting, WeightingMethod};

use super::error::FitError;

/// The two kinds of weight column.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum WeightKind {
    /// A row of weight v counts as v identical observations.
    Frequency,
    /// A row of weight v stands for v members of the population.
    Sampling,
}

/// A weight column and its kind.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct WeightColumn {
    /// The column's name as the header row spells it.
    pub column: String,
    /// Frequency or sampling weights.
    pub kind: WeightKind,
}

/// How a sample drawn by outcome is brought to the population's rate.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum PopulationMethod {
    /// Correct the logit intercept (prior correction).
    Intercept,
    /// Weight ones and zeros to their population shares.
    Weights,
}

/// The outcome's share in the population and how to use it.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PopulationRate {
    /// τ, strictly between 0 and 1.
    pub rate: f64,
    /// The method; `None` for the default (the intercept for logit, weights otherwise).
    pub method: Option<PopulationMethod>,
}

/// What the fit does with weights, decided from the request before reading.
#[derive(Debug, Clone, PartialEq)]
pub enum Plan {
    /// No weights, no correction.
    None,
    /// A weight column.
    Column(WeightColumn),
    /// Population weights from the outcome.
    PopulationWeights(f64),
    /// Prior correction of the logit intercept.
    PopulationIntercept(f64),
}

impl Plan {
    /// Check the request's weighting flags against each other, the link and the intercept.
    pub fn decide(
        weights: Option<&WeightColumn>,
        population: Option<PopulationRate>,
        link: Link,
        intercept: bool,
    ) -> Result<Plan, FitError> {
        let Some(population) = population else {
            return Ok(weights.map_or(Plan::None, |w| Plan::Column(w.clone())));
        };
        let rate = population.rate;
        if !(rate > 0.0 && rate < 1.0) {
            return Err(FitError::BadOption(format!(
                "--population-rate {rate}: the population's share of ones must lie strictly between 0 and 1"
            )));
        }
        if weights.is_some() {
            return Err(FitError::BadOption(
                "--population-rate cannot be combined with --weights or --sampling-weights: it sets the weights itself".into(),
            ));
        }
        let method = population.method.unwrap_or(if link == Link::Logit {
            PopulationMethod::Intercept
        } else {
            PopulationMethod::Weights
        });
        match method {
            PopulationMethod::Weights => Ok(Plan::PopulationWeights(rate)),
            PopulationMethod::Intercept if link != Link::Logit => Err(FitError::BadOption(format!(
                "--population-method intercept corrects a logit intercept only; with the {link} link use --population-method weights"
            ))),
            PopulationMethod::Intercept if !intercept => Err(FitError::BadOption(
                "--population-method intercept needs the intercept (drop --no-intercept)".into(),
            )),
            PopulationMethod::Intercept => Ok(Plan::PopulationIntercept(rate)),
        }
    }

    /// Whether the covariance must be the sampling-weight sandwich.
    pub fn sampling(&self) -> bool {
        matches!(
            self,
            Plan::PopulationWeights(_)
                | Plan::Column(WeightColumn {
                    kind: WeightKind::Sampling,
                    ..
                })
        )
    }

    /// The weight column to read, if any.
    pub fn column(&self) -> Option<&str> {
        match self {
            Plan::Column(w) => Some(&w.column),
            _ => None,
        }
    }
}

/// The outcome's share, weighted when there are weights.
pub fn sample_rate(outcome: &[f64], weights: Option<&[f64]>) -> f64 {
    match weights {
        Some(w) => {
            let total: f64 = w.iter().sum();
            outcome.iter().zip(w).map(|(y, v)| y * v).sum::<f64>() / total
        }
        None => outcome.iter().sum::<f64>() / outcome.len() as f64,
    }
}

/// Population weights: τ/ȳ for a one, (1 − τ)/(1 − ȳ) for a zero.
pub fn population_weights(outcome: &[f64], rate: f64) -> Vec<f64> {
    let share = sample_rate(outcome, None);
    let (one, zero) = (rate / share, (1.0 - rate) / (1.0 - share));
    outcome
        .iter()
        .map(|&y| if y > 0.5 { one } else { zero })
        .collect()
}

/// The amount the prior correction subtracts from the logit intercept,
/// ln[((1 − τ)/τ)·(ȳ/(1 − ȳ))].
pub fn intercept_shift(population_rate: f64, sample_rate: f64) -> f64 {
    ((1.0 - population_rate) / population_rate * (sample_rate / (1.0 - sample_rate))).ln()
}

/// The provenance record of a weighted or corrected fit (`None` for a plain fit).
pub fn record(plan: &Plan, outcome: &[f64], weights: Option<&[f64]>) -> Option<Weighting> {
    let weight_sum = weights.map_or(outcome.len() as f64, |w| w.iter().sum());
    let (method, column, population_rate, intercept_shift) = match plan {
        Plan::None => return None,
        Plan::Column(w) => (
            match w.kind {
                WeightKind::Frequency => WeightingMethod::Frequency,
                WeightKind::Sampling => WeightingMethod::Sampling,
            },
            Some(w.column.clone()),
            None,
            None,
        ),
        Plan::PopulationWeights(rate) => {
            (WeightingMethod::PopulationWeights, None, Some(*rate), None)
        }
        Plan::PopulationIntercept(rate) => (
            WeightingMethod::PopulationIntercept,
            None,
            Some(*rate),
            Some(intercept_shift(*rate, sample_rate(outcome, None))),
        ),
    };
    // The sample rate is the unweighted share for the population methods (the sample as
    // drawn), and the weighted share for a weight column.
    let sample = match plan {
        Plan::Column(_) => sample_rate(outcome, weights),
        _ => sample_rate(outcome, None),
    };
    Some(Weighting {
        method,
        column,
        weight_sum,
        sample_rate: sample,
        population_rate,
        intercept_shift,
    })
}
