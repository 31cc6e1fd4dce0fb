//! Evaluation on labelled rows: how well a model's probabilities discriminate and how well
//! they are calibrated, and, beside a second model scored on the same rows, whether the
//! differences between the two are larger than their uncertainty.
//!
//! ```text
//! rows.rs         the per-model accumulator: streamed sums and the stored logits
//! auc.rs          placement values, the AUC and DeLong's variance (alone and paired)
//! calibration.rs  calibration intercept (logit(p) as offset) and slope, by Newton's method
//! bins.rs         the reliability table (Wilson intervals) and Murphy's Brier decomposition
//! hosmer.rs       the Hosmer–Lemeshow statistic over deciles of risk
//! rank.rs         one sort of each class: the placements and the deciles of risk
//! paired.rs       per-row Brier and log-loss differences, the paired AUC test, the verdict
//! plots.rs        the reliability diagram and the ROC curve, as SVG
//! report.rs       the report value, its text rendering and its JSON (the evidence)
//! evidence.rs     a report offered for a promotion: which model it evaluated, headline figures
//! labelled.rs     one pass over a labelled CSV: outcome and covariates read as `ogive score`
//!                 reads them, scored by one or two models, fed to the accumulators
//! ```
//!
//! Memory: each model keeps one `f64` a row (the logit of its probability, in two vectors by
//! outcome, in row order), so two models keep 16 bytes a row. Ranking a model (`evaluate::rank`) holds
//! its rows as (score, row) pairs, 16 bytes a row, while it sorts and walks them, and leaves
//! its placements, 4 bytes a row. Two models evaluated on two threads ([`evaluate_each`]) rank
//! at the same time, so the peak is 16 + 2 × (16 + 4) = 56 bytes a row (40 on one thread);
//! everything else is a fixed set of sums and the blocks in flight while reading
//! ([`read_labelled`]).
//!
//! The statistics files compute; they read nothing and print nothing, and are fed each row's
//! probability, its complement and the outcome. `labelled.rs` is the one reader, over any
//! `Read`; it opens no files (the command does).

mod auc;
mod bins;
mod calibration;
pub(crate) mod evidence;
mod hosmer;
pub(crate) mod labelled;
mod paired;
pub(crate) mod plots;
mod rank;
pub(crate) mod report;
mod rows;

pub use auc::{Auc, AucDifference};
pub use bins::{wilson, BrierDecomposition, ReliabilityBin, RELIABILITY_BINS};
pub use calibration::CalibrationFit;
pub use hosmer::{HosmerLemeshow, RiskGroup, RISK_GROUPS};
pub use labelled::{
    read_labelled, Labelled, LabelledError, LabelledRowError, LabelledSummary, ReadOptions,
};
pub use paired::{compare, Comparison, Favours, MeanDifference, Names, PairedRows, Verdict};
pub use rows::{Forecast, ModelRows, PROBABILITY_EDGE};

use serde::Serialize;

/// Why an evaluation cannot be computed.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum EvaluateError {
    /// The rows hold no event or no non-event, so neither the AUC nor the calibration
    /// fits exist.
    #[error("the outcome takes only one value ({events} events in {rows} rows); evaluation needs both 0 and 1")]
    OneClass {
        /// Rows evaluated.
        rows: u64,
        /// Rows with outcome 1.
        events: u64,
    },
    /// The interval level is not strictly between 0 and 1.
    #[error("the interval level must lie strictly between 0 and 1, got {0}")]
    Level(f64),
    /// More rows than a ranking counts.
    #[error("{rows} rows are more than the {limit} an evaluation ranks; evaluate a sample or split the file")]
    TooManyRows {
        /// Rows given.
        rows: u64,
        /// The most an evaluation takes.
        limit: u64,
    },
    /// Two models were compared on different rows.
    #[error("the two models were given different rows ({first} and {second})")]
    DifferentRows {
        /// Rows of the first model.
        first: u64,
        /// Rows of the second model.
        second: u64,
    },
}

/// A two-sided interval.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Bounds {
    /// The lower end, on the scale of the figure it bounds (not clipped to that figure's range).
    pub lower: f64,
    /// The upper end, at least `lower`.
    pub upper: f64,
}

impl Bounds {
    /// `estimate ± quantile · std_error`.
    pub fn normal(estimate: f64, std_error: f64, quantile: f64) -> Bounds {
        Bounds {
            lower: estimate - quantile * std_error,
            upper: estimate + quantile * std_error,
        }
    }

    /// Whether the interval holds `value`.
    pub fn contains(&self, value: f64) -> bool {
        self.lower <= value && value <= self.upper
    }
}

/// The standard error of a mean over rows and its normal interval.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Spread {
    /// Standard error of the mean: the rows' standard deviation over √N.
    pub std_error: f64,
    /// mean ± q · std_error.
    pub interval: Bounds,
}

impl Spread {
    fn of(running: &rows::Running, quantile: f64) -> Spread {
        let std_error = running.std_error();
        Spread {
            std_error,
            interval: Bounds::normal(running.mean(), std_error, quantile),
        }
    }
}

/// The two-sided normal quantile for `level`, checked.
pub fn quantile_for(level: f64) -> Result<f64, EvaluateError> {
    if !(level > 0.0 && level < 1.0) {
        return Err(EvaluateError::Level(level));
    }
    Ok(crate::link::normal_quantile(0.5 + level / 2.0))
}

/// The two-sided p-value of a standard normal statistic.
pub fn two_sided_p(z: f64) -> f64 {
    2.0 * crate::link::normal_cdf(-z.abs())
}

/// Every figure for one model on the labelled rows.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ModelEvaluation {
    /// Labelled rows every figure is computed over (skipped rows are not among them).
    pub rows: u64,
    /// Rows with outcome 1.
    pub events: u64,
    /// The mean of the model's predicted probabilities over those rows, Σp / N.
    pub mean_probability: f64,
    /// The share of those rows whose outcome is 1, events / N.
    pub event_rate: f64,
    /// Mean of (p − y)².
    pub brier: f64,
    /// Standard error of that mean over rows, and the normal interval.
    pub brier_interval: Spread,
    /// Murphy's decomposition of the Brier score over the reliability bins.
    pub brier_decomposition: BrierDecomposition,
    /// Mean of −[y ln p + (1 − y) ln(1 − p)].
    pub log_loss: f64,
    /// Standard error of that mean over rows, and the normal interval.
    pub log_loss_interval: Spread,
    /// Wilson interval of the observed event rate.
    pub event_rate_interval: Bounds,
    /// Area under the ROC curve with DeLong's standard error.
    pub auc: Auc,
    /// Calibration-in-the-large: the intercept a of logit P(y) = a + logit(p).
    pub calibration_intercept: CalibrationFit,
    /// Calibration slope: b of logit P(y) = a + b · logit(p).
    pub calibration_slope: CalibrationFit,
    /// Hosmer–Lemeshow over deciles of risk.
    pub hosmer_lemeshow: HosmerLemeshow,
    /// The reliability table: bins of predicted probability.
    pub reliability: Vec<ReliabilityBin>,
}

/// Evaluate one model's rows at interval `level`.
pub fn evaluate(rows: &ModelRows, level: f64) -> Result<ModelEvaluation, EvaluateError> {
    let quantile = quantile_for(level)?;
    rows.check_both_classes()?;
    let n = rows.rows() as f64;
    Ok(ModelEvaluation {
        rows: rows.rows(),
        events: rows.events(),
        mean_probability: rows.sum_probability() / n,
        event_rate: rows.events() as f64 / n,
        brier: rows.squared_error().mean(),
        brier_interval: Spread::of(rows.squared_error(), quantile),
        brier_decomposition: bins::decompose(rows),
        log_loss: rows.log_loss().mean(),
        log_loss_interval: Spread::of(rows.log_loss(), quantile),
        event_rate_interval: wilson(rows.events(), rows.rows(), quantile),
        auc: auc::auc(rows, quantile),
        calibration_intercept: calibration::intercept(rows, quantile),
        calibration_slope: calibration::slope(rows, quantile),
        hosmer_lemeshow: rows.ranking().hosmer_lemeshow.clone(),
        reliability: bins::reliability(rows, quantile),
    })
}

/// [`evaluate`] each model's rows, on a thread each when `threads` allows (the figures are
/// the same either way), in the order given.
pub fn evaluate_each(
    models: &[ModelRows],
    level: f64,
    threads: usize,
) -> Vec<Result<ModelEvaluation, EvaluateError>> {
    if threads < 2 || models.len() < 2 {
        return models.iter().map(|rows| evaluate(rows, level)).collect();
    }
    std::thread::scope(|scope| {
        let running: Vec<_> = models
            .iter()
            .map(|rows| scope.spawn(move || evaluate(rows, level)))
            .collect();
        running
            .into_iter()
            .map(|thread| {
                thread
                    .join()
                    .unwrap_or_else(|panic| std::panic::resume_unwind(panic))
            })
            .collect()
    })
}
