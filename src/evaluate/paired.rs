//! Two models on the same rows: per-row differences of the Brier score and the log loss
//! (their mean and standard error), DeLong's paired AUC test, and a one-line verdict.
//!
//! ```text
//! dᵢ = loss_first(i) − loss_second(i)      mean d̄, SE = s_d / √N, interval d̄ ± q · SE
//! ```
//!
//! A difference counts as shown only when its interval leaves out 0; the verdict states each
//! figure's direction only then, and otherwise says that the rows do not show a difference.

use serde::Serialize;

use super::auc::{self, AucDifference};
use super::rows::{Forecast, ModelRows, Running, Scored};
use super::{quantile_for, two_sided_p, Bounds, EvaluateError};

/// The mean of per-row differences with its standard error.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct MeanDifference {
    /// Mean of first − second.
    pub mean: f64,
    /// Standard error of the mean.
    pub std_error: f64,
    /// mean ± q · std_error.
    pub interval: Bounds,
    /// Two-sided p-value of mean / std_error.
    pub p_value: f64,
}

fn summary(running: &Running, quantile: f64) -> MeanDifference {
    let std_error = running.std_error();
    MeanDifference {
        mean: running.mean(),
        std_error,
        interval: Bounds::normal(running.mean(), std_error, quantile),
        p_value: two_sided_p(running.mean() / std_error),
    }
}

/// The paired accumulator: per-row loss differences, fed with both models' forecasts.
#[derive(Debug, Clone, Default)]
pub struct PairedRows {
    brier: Running,
    log_loss: Running,
}

impl PairedRows {
    /// Nothing yet.
    pub fn new() -> PairedRows {
        PairedRows::default()
    }

    /// Add one row's two forecasts.
    #[inline]
    pub fn push(&mut self, first: Forecast, second: Forecast, event: bool) {
        self.push_scored(&Scored::of(first, event), &Scored::of(second, event));
    }

    /// Add one row's two forecasts, worked out already.
    #[inline]
    pub(super) fn push_scored(&mut self, first: &Scored, second: &Scored) {
        self.brier.add(first.squared_error - second.squared_error);
        self.log_loss.add(first.log_loss - second.log_loss);
    }
}

/// The comparison of a first model with a second on the same rows.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Comparison {
    /// AUC first − second, DeLong's paired test.
    pub auc: AucDifference,
    /// Brier first − second (negative: the first is closer to the outcomes).
    pub brier: MeanDifference,
    /// Log loss first − second (negative: the first is closer).
    pub log_loss: MeanDifference,
    /// The one-line verdict.
    pub verdict: Verdict,
}

/// What the intervals show, figure by figure, and the sentence that says it.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Verdict {
    /// Which way each figure points where its interval leaves out 0: `first`, `second`, or
    /// `not_shown`, for AUC, Brier and log loss in that order.
    pub favours: [Favours; 3],
    /// The sentence.
    pub text: String,
}

/// Which model a figure favours.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Favours {
    /// The first model, and the interval leaves out 0.
    First,
    /// The second model, and the interval leaves out 0.
    Second,
    /// The interval holds 0.
    NotShown,
}

fn favours(interval: &Bounds, higher_is_better: bool) -> Favours {
    if interval.contains(0.0) || !(interval.lower.is_finite() && interval.upper.is_finite()) {
        return Favours::NotShown;
    }
    if (interval.lower > 0.0) == higher_is_better {
        Favours::First
    } else {
        Favours::Second
    }
}

/// Names used in the verdict's sentence.
#[derive(Debug, Clone, Copy)]
pub struct Names<'a> {
    /// The first model, e.g. "candidate 1.1.0".
    pub first: &'a str,
    /// The second, e.g. "live 1.0.0".
    pub second: &'a str,
}

fn verdict(
    auc: &AucDifference,
    brier: &MeanDifference,
    log_loss: &MeanDifference,
    level: f64,
    names: Names<'_>,
) -> Verdict {
    let favours = [
        favours(&auc.interval, true),
        favours(&brier.interval, false),
        favours(&log_loss.interval, false),
    ];
    let figures = [
        format!(
            "AUC {:+.4} [{:+.4}, {:+.4}]",
            auc.difference, auc.interval.lower, auc.interval.upper
        ),
        format!(
            "Brier {:+.5} [{:+.5}, {:+.5}]",
            brier.mean, brier.interval.lower, brier.interval.upper
        ),
        format!(
            "log loss {:+.5} [{:+.5}, {:+.5}]",
            log_loss.mean, log_loss.interval.lower, log_loss.interval.upper
        ),
    ];
    let labels = ["AUC", "Brier", "log loss"];
    let pick = |side: Favours| -> Vec<&str> {
        labels
            .iter()
            .zip(&favours)
            .filter(|(_, f)| **f == side)
            .map(|(l, _)| *l)
            .collect()
    };
    let (first, second, unshown) = (
        pick(Favours::First),
        pick(Favours::Second),
        pick(Favours::NotShown),
    );
    let mut parts = Vec::new();
    if !first.is_empty() {
        parts.push(format!(
            "{} does better on {}",
            names.first,
            first.join(", ")
        ));
    }
    if !second.is_empty() {
        parts.push(format!(
            "{} does better on {}",
            names.second,
            second.join(", ")
        ));
    }
    if !unshown.is_empty() {
        parts.push(format!("no difference shown on {}", unshown.join(", ")));
    }
    let percent = level * 100.0;
    let text = format!(
        "{} at {percent}% ({} − {}: {})",
        parts.join("; "),
        names.first,
        names.second,
        figures.join(", ")
    );
    Verdict { favours, text }
}

/// Compare `first` with `second`, fed the same rows in the same order.
pub fn compare(
    first: &ModelRows,
    second: &ModelRows,
    differences: &PairedRows,
    level: f64,
    names: Names<'_>,
) -> Result<Comparison, EvaluateError> {
    let quantile = quantile_for(level)?;
    if first.rows() != second.rows() || first.events() != second.events() {
        return Err(EvaluateError::DifferentRows {
            first: first.rows(),
            second: second.rows(),
        });
    }
    first.check_both_classes()?;
    let auc = auc::paired(first, second, quantile);
    let brier = summary(&differences.brier, quantile);
    let log_loss = summary(&differences.log_loss, quantile);
    let verdict = verdict(&auc, &brier, &log_loss, level, names);
    Ok(Comparison {
        auc,
        brier,
        log_loss,
        verdict,
    })
}
