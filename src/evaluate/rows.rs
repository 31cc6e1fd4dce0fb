//! The per-model accumulator: what one model said about each labelled row, kept as a few
//! running sums and one `f64` a row (the logit of the probability, which the AUC, the
//! calibration fits and the deciles of risk need again at the end).
//!
//! The logits are kept in two vectors, events and non-events, each in row order, so a second
//! model fed the same rows has its vectors aligned with the first's, which the paired AUC test
//! needs. This module does not compute any figure beyond the sums.

use std::sync::OnceLock;

use super::bins::BinSums;
use super::rank::{self, Ranking};
use super::EvaluateError;

/// How far from 0 and 1 a probability is held for the log loss and the logit, so that a row
/// the model calls certain gives a large finite penalty rather than an infinite one.
pub const PROBABILITY_EDGE: f64 = 1e-15;

/// One model's answer for one row: the probability and its complement, each accurate in its
/// own tail.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Forecast {
    /// p.
    pub probability: f64,
    /// 1 − p, computed separately.
    pub complement: f64,
}

impl Forecast {
    /// A forecast from p alone (the complement is then `1 − p`).
    pub fn from_probability(probability: f64) -> Forecast {
        Forecast {
            probability,
            complement: 1.0 - probability,
        }
    }

    fn held_probability(&self) -> f64 {
        self.probability
            .clamp(PROBABILITY_EDGE, 1.0 - PROBABILITY_EDGE)
    }

    fn held_complement(&self) -> f64 {
        self.complement
            .clamp(PROBABILITY_EDGE, 1.0 - PROBABILITY_EDGE)
    }

    /// ln p − ln(1 − p), with p held inside [`PROBABILITY_EDGE`].
    pub fn logit(&self) -> f64 {
        self.held_probability().ln() - self.held_complement().ln()
    }

    /// −ln p for an event, −ln(1 − p) otherwise, with p held inside [`PROBABILITY_EDGE`].
    pub fn log_loss(&self, event: bool) -> f64 {
        if event {
            -self.held_probability().ln()
        } else {
            -self.held_complement().ln()
        }
    }

    /// (p − y)².
    pub fn squared_error(&self, event: bool) -> f64 {
        let residual = if event {
            self.complement
        } else {
            self.probability
        };
        residual * residual
    }
}

/// What one model said about the labelled rows so far.
#[derive(Debug, Clone, Default)]
pub struct ModelRows {
    event_logits: Vec<f64>,
    non_event_logits: Vec<f64>,
    sum_probability: f64,
    squared_error: Running,
    log_loss: Running,
    bins: BinSums,
    /// The rows ranked, made on first use by the figures and dropped by the next push.
    ranking: OnceLock<Ranking>,
}

impl ModelRows {
    /// No rows yet.
    pub fn new() -> ModelRows {
        ModelRows::default()
    }

    /// Room for `rows` rows, so the vectors do not grow by doubling.
    pub fn with_capacity(rows: usize) -> ModelRows {
        ModelRows {
            event_logits: Vec::with_capacity(rows / 2),
            non_event_logits: Vec::with_capacity(rows / 2),
            ..ModelRows::default()
        }
    }

    /// Add one row.
    #[inline]
    pub fn push(&mut self, forecast: Forecast, event: bool) {
        self.push_scored(&Scored::of(forecast, event));
    }

    /// Add one row whose figures were worked out already (on another thread).
    #[inline]
    pub(super) fn push_scored(&mut self, row: &Scored) {
        if row.event {
            self.event_logits.push(row.logit);
        } else {
            self.non_event_logits.push(row.logit);
        }
        self.sum_probability += row.probability;
        self.squared_error.add(row.squared_error);
        self.log_loss.add(row.log_loss);
        self.bins.add(row.probability, row.event);
        self.ranking.take();
    }

    /// Rows added.
    pub fn rows(&self) -> u64 {
        (self.event_logits.len() + self.non_event_logits.len()) as u64
    }

    /// Rows with outcome 1.
    pub fn events(&self) -> u64 {
        self.event_logits.len() as u64
    }

    pub(super) fn check_both_classes(&self) -> Result<(), EvaluateError> {
        rank::check_size(self.rows())?;
        if self.event_logits.is_empty() || self.non_event_logits.is_empty() {
            return Err(EvaluateError::OneClass {
                rows: self.rows(),
                events: self.events(),
            });
        }
        Ok(())
    }

    /// The logits of the events, in row order.
    pub fn event_logits(&self) -> &[f64] {
        &self.event_logits
    }

    /// The logits of the non-events, in row order.
    pub fn non_event_logits(&self) -> &[f64] {
        &self.non_event_logits
    }

    /// The rows ranked ([`super::rank`]), made once however many figures ask.
    pub(super) fn ranking(&self) -> &Ranking {
        self.ranking.get_or_init(|| rank::rank(self))
    }

    pub(super) fn sum_probability(&self) -> f64 {
        self.sum_probability
    }

    /// The rows' squared errors (p − y)²: mean and spread.
    pub(super) fn squared_error(&self) -> &Running {
        &self.squared_error
    }

    /// The rows' log losses: mean and spread.
    pub(super) fn log_loss(&self) -> &Running {
        &self.log_loss
    }

    pub(super) fn bins(&self) -> &BinSums {
        &self.bins
    }
}

/// What one row adds to a model's accumulator, worked out from its forecast and outcome.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(super) struct Scored {
    pub(super) probability: f64,
    pub(super) logit: f64,
    pub(super) squared_error: f64,
    pub(super) log_loss: f64,
    pub(super) event: bool,
}

impl Scored {
    #[inline]
    pub(super) fn of(forecast: Forecast, event: bool) -> Scored {
        Scored {
            probability: forecast.probability,
            logit: forecast.logit(),
            squared_error: forecast.squared_error(event),
            log_loss: forecast.log_loss(event),
            event,
        }
    }
}

/// Running mean and sum of squared deviations (Welford), so a million near-equal terms keep
/// their digits and the standard error of their mean needs no second pass.
///
/// ```text
/// SE = √( Σ (xᵢ − x̄)² / (N − 1) / N )
/// ```
#[derive(Debug, Clone, Copy, Default)]
pub(super) struct Running {
    count: u64,
    mean: f64,
    squares: f64,
}

impl Running {
    #[inline]
    pub(super) fn add(&mut self, x: f64) {
        self.count += 1;
        let delta = x - self.mean;
        self.mean += delta / self.count as f64;
        self.squares += delta * (x - self.mean);
    }

    pub(super) fn mean(&self) -> f64 {
        self.mean
    }

    /// The standard error of the mean (NaN for fewer than two terms).
    pub(super) fn std_error(&self) -> f64 {
        if self.count < 2 {
            return f64::NAN;
        }
        let n = self.count as f64;
        (self.squares / (n - 1.0) / n).sqrt()
    }
}

/// The logistic function, split by sign so neither side overflows.
pub(super) fn logistic(x: f64) -> f64 {
    if x >= 0.0 {
        1.0 / (1.0 + (-x).exp())
    } else {
        let e = x.exp();
        e / (1.0 + e)
    }
}
