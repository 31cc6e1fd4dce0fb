//! Live calibration: for each model version, how its predicted probabilities compare with the
//! outcomes reported for them, over a window of the most recent outcomes.
//!
//! With n outcomes yᵢ ∈ {0, 1} and their predictions pᵢ, and p̃ᵢ = clip(pᵢ, 1e-15, 1 − 1e-15):
//!
//! ```text
//! Brier score                 (1/n) Σ (pᵢ − yᵢ)²
//! log loss                    −(1/n) Σ [yᵢ ln p̃ᵢ + (1 − yᵢ) ln(1 − p̃ᵢ)]
//! calibration-in-the-large    ȳ − p̄                       (mean observed − mean predicted)
//! calibration slope           b in  logit P(yᵢ = 1) = a + b · logit(p̃ᵢ),  fitted by maximum
//!                             likelihood (Newton–Raphson on (a, b), started at (0, 1))
//! ROC AUC                     (R₁ − n₁(n₁ + 1)/2) / (n₁ n₀),  R₁ the sum of the mid-ranks of
//!                             the positives among all pᵢ (Mann–Whitney, ties counted half)
//! ```
//!
//! The clip bound 1e-15 is the one scikit-learn's `log_loss` used by default before version 1.5
//! (it now clips at float64 machine epsilon, 2.2e-16); the two agree for every prediction inside
//! [1e-15, 1 − 1e-15], and a prediction of exactly 0 or 1 with the wrong outcome costs
//! ln(1e15) ≈ 34.5 here. A slope near 1 and an intercept near 0 mean the predictions are as
//! spread out as the outcomes warrant; a slope below 1 means they are too extreme. The slope and
//! the AUC need both outcomes in the window (and the slope a finite maximum, so not perfectly
//! separated data); they are absent otherwise.
//!
//! Cost: the figures are O(n log n) in the window (the AUC sorts), so they are computed when
//! scraped or reported, and only if an outcome arrived since the last computation; reporting an
//! outcome is O(1).
//!
//! This module does not know where outcomes come from (the answer store in
//! [`crate::metrics::outcomes`] matches them to answers) and knows nothing of HTTP.

use std::collections::HashMap;
use std::sync::{Arc, Mutex, PoisonError};

use prometheus::core::{Collector, Desc};
use prometheus::proto::MetricFamily;
use prometheus::{GaugeVec, IntCounter, IntCounterVec, IntGaugeVec, Opts, Registry};
use schemars::JsonSchema;
use serde::Serialize;

/// Outcomes kept per model version unless configured otherwise.
pub const DEFAULT_WINDOW: usize = 10_000;

/// Predictions are clipped to `[PROBABILITY_CLIP, 1 − PROBABILITY_CLIP]` for the log loss and
/// the logit of the calibration slope.
pub const PROBABILITY_CLIP: f64 = 1e-15;

/// Newton–Raphson iterations allowed for the calibration slope.
const MAX_ITERATIONS: usize = 100;

/// Convergence: the largest parameter step, relative to the parameter's size (at least 1).
const STEP_TOLERANCE: f64 = 1e-12;

/// A slope or intercept this large means the outcomes are (nearly) separated by the predictions:
/// the likelihood has no finite maximum, so no slope is reported.
const DIVERGED: f64 = 1e6;

fn clip(p: f64) -> f64 {
    p.clamp(PROBABILITY_CLIP, 1.0 - PROBABILITY_CLIP)
}

/// The mean squared difference between predictions and outcomes.
///
/// ```text
/// (1/n) Σ (pᵢ − yᵢ)²
/// ```
pub fn brier_score(predictions: &[f64], outcomes: &[bool]) -> f64 {
    let total: f64 = predictions
        .iter()
        .zip(outcomes)
        .map(|(&p, &y)| (p - f64::from(u8::from(y))).powi(2))
        .sum();
    total / predictions.len() as f64
}

/// The mean negative log-likelihood of the outcomes, predictions clipped to
/// `[1e-15, 1 − 1e-15]`.
///
/// ```text
/// −(1/n) Σ [yᵢ ln p̃ᵢ + (1 − yᵢ) ln(1 − p̃ᵢ)]
/// ```
pub fn log_loss(predictions: &[f64], outcomes: &[bool]) -> f64 {
    let total: f64 = predictions
        .iter()
        .zip(outcomes)
        .map(|(&p, &y)| {
            let p = clip(p);
            if y {
                -p.ln()
            } else {
                -(-p).ln_1p()
            }
        })
        .sum();
    total / predictions.len() as f64
}

/// The area under the ROC curve, by the Mann–Whitney statistic with tied predictions counted
/// half; `None` unless both outcomes occur.
///
/// ```text
/// AUC = (R₁ − n₁(n₁ + 1)/2) / (n₁ n₀)
/// ```
pub fn roc_auc(predictions: &[f64], outcomes: &[bool]) -> Option<f64> {
    let positives = outcomes.iter().filter(|&&y| y).count();
    let negatives = outcomes.len() - positives;
    if positives == 0 || negatives == 0 {
        return None;
    }
    let mut order: Vec<(f64, bool)> = predictions
        .iter()
        .copied()
        .zip(outcomes.iter().copied())
        .collect();
    order.sort_unstable_by(|a, b| a.0.total_cmp(&b.0));
    let mut positive_rank_sum = 0.0;
    let mut start = 0;
    while start < order.len() {
        let mut end = start + 1;
        while end < order.len() && order[end].0 == order[start].0 {
            end += 1;
        }
        // Ranks start + 1 ..= end share their mean.
        let mid_rank = (start + 1 + end) as f64 / 2.0;
        let tied_positives = order[start..end].iter().filter(|o| o.1).count();
        positive_rank_sum += mid_rank * tied_positives as f64;
        start = end;
    }
    let (n1, n0) = (positives as f64, negatives as f64);
    Some((positive_rank_sum - n1 * (n1 + 1.0) / 2.0) / (n1 * n0))
}

/// The logit of a clipped prediction, ln p̃ − ln(1 − p̃).
fn logit(p: f64) -> f64 {
    let p = clip(p);
    p.ln() - (-p).ln_1p()
}

/// The logistic recalibration fit: intercept a and slope b of
///
/// ```text
/// logit P(yᵢ = 1) = a + b · xᵢ,      xᵢ = logit(p̃ᵢ)
/// ```
///
/// by Newton–Raphson on the log-likelihood, started at (0, 1):
///
/// ```text
/// μᵢ = 1/(1 + e^−(a + b xᵢ)),  wᵢ = μᵢ(1 − μᵢ)
/// score  g = [Σ (yᵢ − μᵢ),  Σ (yᵢ − μᵢ) xᵢ]
/// info   H = [[Σ wᵢ, Σ wᵢ xᵢ], [Σ wᵢ xᵢ, Σ wᵢ xᵢ²]]
/// step   (a, b) ← (a, b) + H⁻¹ g
/// ```
///
/// Returns `(intercept, slope)`, or `None` when both outcomes do not occur, the predictions
/// are all equal (H is singular), or the outcomes are separated (no finite maximum).
pub fn logistic_recalibration(predictions: &[f64], outcomes: &[bool]) -> Option<(f64, f64)> {
    let positives = outcomes.iter().filter(|&&y| y).count();
    if positives == 0 || positives == outcomes.len() {
        return None;
    }
    let x: Vec<f64> = predictions.iter().map(|&p| logit(p)).collect();
    let (mut a, mut b) = (0.0_f64, 1.0_f64);
    for _ in 0..MAX_ITERATIONS {
        let (mut g0, mut g1, mut h00, mut h01, mut h11) = (0.0, 0.0, 0.0, 0.0, 0.0);
        for (&xi, &yi) in x.iter().zip(outcomes) {
            let mu = 1.0 / (1.0 + (-(a + b * xi)).exp());
            let residual = f64::from(u8::from(yi)) - mu;
            let w = mu * (1.0 - mu);
            g0 += residual;
            g1 += residual * xi;
            h00 += w;
            h01 += w * xi;
            h11 += w * xi * xi;
        }
        let det = h00 * h11 - h01 * h01;
        if !(det.is_finite() && det > 0.0) || det <= 1e-300 {
            return None;
        }
        let step_a = (h11 * g0 - h01 * g1) / det;
        let step_b = (h00 * g1 - h01 * g0) / det;
        a += step_a;
        b += step_b;
        if !(a.is_finite() && b.is_finite()) || a.abs() > DIVERGED || b.abs() > DIVERGED {
            return None;
        }
        let scale_a = a.abs().max(1.0);
        let scale_b = b.abs().max(1.0);
        if step_a.abs() <= STEP_TOLERANCE * scale_a && step_b.abs() <= STEP_TOLERANCE * scale_b {
            return Some((a, b));
        }
    }
    None
}

/// The calibration figures of one window.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, JsonSchema)]
pub struct Figures {
    /// Outcomes in the window.
    pub count: usize,
    /// How many of them were 1.
    pub positives: usize,
    /// Mean outcome.
    pub mean_observed: f64,
    /// Mean prediction.
    pub mean_predicted: f64,
    /// Mean observed minus mean predicted.
    pub calibration_in_the_large: f64,
    /// Mean squared difference of prediction and outcome.
    pub brier_score: f64,
    /// Mean negative log-likelihood, predictions clipped to [1e-15, 1 − 1e-15].
    pub log_loss: f64,
    /// Intercept a of the logistic recalibration fit (absent when it has no finite estimate).
    pub calibration_intercept: Option<f64>,
    /// Slope b of the logistic recalibration fit (absent when it has no finite estimate).
    pub calibration_slope: Option<f64>,
    /// Area under the ROC curve (absent unless both outcomes occur).
    pub roc_auc: Option<f64>,
}

impl Figures {
    /// Every figure for predictions and their outcomes (same length); `None` when empty.
    pub fn compute(predictions: &[f64], outcomes: &[bool]) -> Option<Figures> {
        let n = predictions.len().min(outcomes.len());
        if n == 0 {
            return None;
        }
        let (predictions, outcomes) = (&predictions[..n], &outcomes[..n]);
        let positives = outcomes.iter().filter(|&&y| y).count();
        let mean_observed = positives as f64 / n as f64;
        let mean_predicted = predictions.iter().sum::<f64>() / n as f64;
        let recalibration = logistic_recalibration(predictions, outcomes);
        Some(Figures {
            count: n,
            positives,
            mean_observed,
            mean_predicted,
            calibration_in_the_large: mean_observed - mean_predicted,
            brier_score: brier_score(predictions, outcomes),
            log_loss: log_loss(predictions, outcomes),
            calibration_intercept: recalibration.map(|(a, _)| a),
            calibration_slope: recalibration.map(|(_, b)| b),
            roc_auc: roc_auc(predictions, outcomes),
        })
    }
}

/// The most recent outcomes of one version, oldest overwritten first, and the figures of the
/// last computation.
#[derive(Debug)]
struct Window {
    capacity: usize,
    predictions: Vec<f64>,
    outcomes: Vec<bool>,
    next: usize,
    /// Outcomes recorded since the version was first seen.
    recorded: u64,
    /// The figures and the value of `recorded` they were computed at.
    cached: Option<(u64, Option<Figures>)>,
}

impl Window {
    fn record(&mut self, prediction: f64, outcome: bool) {
        if self.predictions.len() < self.capacity {
            self.predictions.push(prediction);
            self.outcomes.push(outcome);
        } else {
            self.predictions[self.next] = prediction;
            self.outcomes[self.next] = outcome;
            self.next = (self.next + 1) % self.capacity;
        }
        self.recorded += 1;
    }

    fn figures(&mut self) -> Option<Figures> {
        match self.cached {
            Some((at, figures)) if at == self.recorded => figures,
            _ => {
                let figures = Figures::compute(&self.predictions, &self.outcomes);
                self.cached = Some((self.recorded, figures));
                figures
            }
        }
    }
}

#[derive(Debug)]
struct VersionCalibration {
    window: Mutex<Window>,
    outcomes_total: IntCounter,
}

/// Calibration of one model version, for the report.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct VersionCalibrationReport {
    /// The version label.
    pub version: String,
    /// Outcomes reported for this version since the process started.
    pub outcomes_total: u64,
    /// The window's size.
    pub window_capacity: usize,
    /// The figures over the window (absent before the first outcome).
    pub figures: Option<Figures>,
}

#[derive(Debug, Clone)]
struct CalibrationMetrics {
    outcomes_total: IntCounterVec,
    window_outcomes: IntGaugeVec,
    brier_score: GaugeVec,
    log_loss: GaugeVec,
    in_the_large: GaugeVec,
    slope: GaugeVec,
    roc_auc: GaugeVec,
}

impl CalibrationMetrics {
    fn new() -> Result<CalibrationMetrics, prometheus::Error> {
        let labels = ["model", "version"];
        let gauge = |name: &str, help: &str| GaugeVec::new(Opts::new(name, help), &labels);
        Ok(CalibrationMetrics {
            outcomes_total: IntCounterVec::new(
                Opts::new(
                    "ogive_outcomes_total",
                    "Observed outcomes reported for a model version's answers.",
                ),
                &labels,
            )?,
            window_outcomes: IntGaugeVec::new(
                Opts::new(
                    "ogive_calibration_window_outcomes",
                    "Outcomes in a model version's calibration window.",
                ),
                &labels,
            )?,
            brier_score: gauge(
                "ogive_brier_score",
                "Brier score over the calibration window.",
            )?,
            log_loss: gauge(
                "ogive_log_loss",
                "Log loss over the calibration window (predictions clipped to [1e-15, 1-1e-15]).",
            )?,
            in_the_large: gauge(
                "ogive_calibration_in_the_large",
                "Mean observed outcome minus mean predicted probability over the calibration window.",
            )?,
            slope: gauge(
                "ogive_calibration_slope",
                "Slope of a logistic regression of the outcome on the logit of the prediction, over the calibration window.",
            )?,
            roc_auc: gauge(
                "ogive_roc_auc",
                "Area under the ROC curve over the calibration window.",
            )?,
        })
    }

    fn gauges(&self) -> [&GaugeVec; 5] {
        [
            &self.brier_score,
            &self.log_loss,
            &self.in_the_large,
            &self.slope,
            &self.roc_auc,
        ]
    }
}

/// Calibration windows of every model version that has received an outcome, with their
/// Prometheus series.
#[derive(Debug)]
pub struct CalibrationMonitor {
    window: usize,
    versions: Mutex<HashMap<(String, String), Arc<VersionCalibration>>>,
    metrics: CalibrationMetrics,
}

/// Why the calibration monitor could not be set up.
#[derive(Debug, thiserror::Error)]
pub enum CalibrationSetupError {
    /// The window size is zero.
    #[error("a calibration window must hold at least one outcome, got {0}")]
    EmptyWindow(usize),
    /// The metrics could not be registered (a name already taken in the registry).
    #[error("registering the calibration metrics: {0}")]
    Metrics(#[from] prometheus::Error),
}

impl CalibrationMonitor {
    /// A monitor keeping the last `window` outcomes per model version, its series registered in
    /// `registry`:
    ///
    /// ```text
    /// ogive_outcomes_total{model,version}                 counter
    /// ogive_calibration_window_outcomes{model,version}    gauge
    /// ogive_brier_score, ogive_log_loss, ogive_calibration_in_the_large,
    /// ogive_calibration_slope, ogive_roc_auc              gauges {model,version}
    /// ```
    ///
    /// A gauge is absent while its figure is undefined (an empty window; the slope and AUC with
    /// one outcome only).
    pub fn new(
        window: usize,
        registry: &Registry,
    ) -> Result<Arc<CalibrationMonitor>, CalibrationSetupError> {
        if window == 0 {
            return Err(CalibrationSetupError::EmptyWindow(window));
        }
        let monitor = Arc::new(CalibrationMonitor {
            window,
            versions: Mutex::new(HashMap::new()),
            metrics: CalibrationMetrics::new()?,
        });
        let collector = CalibrationCollector::new(Arc::clone(&monitor));
        registry.register(Box::new(collector))?;
        Ok(monitor)
    }

    /// The window size per model version.
    pub fn window(&self) -> usize {
        self.window
    }

    fn version_state(&self, model: &str, version: &str) -> Arc<VersionCalibration> {
        let mut versions = self.versions.lock().unwrap_or_else(PoisonError::into_inner);
        let key = (model.to_string(), version.to_string());
        Arc::clone(versions.entry(key).or_insert_with(|| {
            Arc::new(VersionCalibration {
                window: Mutex::new(Window {
                    capacity: self.window,
                    predictions: Vec::new(),
                    outcomes: Vec::new(),
                    next: 0,
                    recorded: 0,
                    cached: None,
                }),
                outcomes_total: self
                    .metrics
                    .outcomes_total
                    .with_label_values(&[model, version]),
            })
        }))
    }

    /// Record the outcome of an answer `model` version `version` gave with probability
    /// `prediction`. O(1): the figures wait for the next scrape or report.
    pub fn record(&self, model: &str, version: &str, prediction: f64, outcome: bool) {
        let state = self.version_state(model, version);
        state
            .window
            .lock()
            .unwrap_or_else(PoisonError::into_inner)
            .record(prediction, outcome);
        state.outcomes_total.inc();
    }

    fn states(&self) -> Vec<((String, String), Arc<VersionCalibration>)> {
        let versions = self.versions.lock().unwrap_or_else(PoisonError::into_inner);
        versions
            .iter()
            .map(|(k, v)| (k.clone(), Arc::clone(v)))
            .collect()
    }

    /// Calibration of every version of `model_name` that has outcomes, in version-label order.
    pub fn report(&self, model_name: &str) -> Vec<VersionCalibrationReport> {
        let mut reports: Vec<VersionCalibrationReport> = self
            .states()
            .into_iter()
            .filter(|((model, _), _)| model == model_name)
            .map(|((_, version), state)| {
                let figures = state
                    .window
                    .lock()
                    .unwrap_or_else(PoisonError::into_inner)
                    .figures();
                VersionCalibrationReport {
                    version,
                    outcomes_total: state.outcomes_total.get(),
                    window_capacity: self.window,
                    figures,
                }
            })
            .collect();
        reports.sort_by(|a, b| a.version.cmp(&b.version));
        reports
    }

    fn refresh_gauges(&self) {
        let m = &self.metrics;
        for g in m.gauges() {
            g.reset();
        }
        m.window_outcomes.reset();
        for ((model, version), state) in self.states() {
            let figures = state
                .window
                .lock()
                .unwrap_or_else(PoisonError::into_inner)
                .figures();
            let labels = [model.as_str(), version.as_str()];
            let count = figures.map_or(0, |f| f.count);
            m.window_outcomes
                .with_label_values(&labels)
                .set(i64::try_from(count).unwrap_or(i64::MAX));
            let Some(f) = figures else { continue };
            let values = [
                Some(f.brier_score),
                Some(f.log_loss),
                Some(f.calibration_in_the_large),
                f.calibration_slope,
                f.roc_auc,
            ];
            for (gauge, value) in m.gauges().into_iter().zip(values) {
                if let Some(v) = value {
                    gauge.with_label_values(&labels).set(v);
                }
            }
        }
    }
}

/// Exposes a [`CalibrationMonitor`]'s series to a Prometheus registry, refreshing the gauges on
/// each scrape.
struct CalibrationCollector {
    monitor: Arc<CalibrationMonitor>,
    descs: Vec<Desc>,
    /// Scrapes reset and refill the gauges; two at once must not interleave.
    scrape: Mutex<()>,
}

impl CalibrationCollector {
    fn new(monitor: Arc<CalibrationMonitor>) -> CalibrationCollector {
        let m = &monitor.metrics;
        let descs = m
            .gauges()
            .into_iter()
            .flat_map(|g| g.desc())
            .chain(m.outcomes_total.desc())
            .chain(m.window_outcomes.desc())
            .cloned()
            .collect();
        CalibrationCollector {
            monitor,
            descs,
            scrape: Mutex::new(()),
        }
    }
}

impl Collector for CalibrationCollector {
    fn desc(&self) -> Vec<&Desc> {
        self.descs.iter().collect()
    }

    fn collect(&self) -> Vec<MetricFamily> {
        let _scrape = self.scrape.lock().unwrap_or_else(PoisonError::into_inner);
        self.monitor.refresh_gauges();
        let m = &self.monitor.metrics;
        m.outcomes_total
            .collect()
            .into_iter()
            .chain(m.window_outcomes.collect())
            .chain(m.gauges().into_iter().flat_map(|g| g.collect()))
            .collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn auc_counts_ties_half() {
        // One positive and one negative at the same prediction: every pair is a tie.
        assert_eq!(roc_auc(&[0.3, 0.3], &[true, false]), Some(0.5));
        assert_eq!(roc_auc(&[0.1, 0.9], &[false, true]), Some(1.0));
        assert_eq!(roc_auc(&[0.1, 0.9], &[true, false]), Some(0.0));
        assert_eq!(roc_auc(&[0.1, 0.9], &[true, true]), None);
    }

    #[test]
    fn window_overwrites_the_oldest_outcome() {
        let mut w = Window {
            capacity: 2,
            predictions: Vec::new(),
            outcomes: Vec::new(),
            next: 0,
            recorded: 0,
            cached: None,
        };
        w.record(0.9, false);
        w.record(0.2, false);
        w.record(0.4, true);
        let f = w.figures().expect("two outcomes");
        assert_eq!(f.count, 2);
        assert_eq!(f.positives, 1);
        assert!((f.mean_predicted - 0.3).abs() < 1e-15);
    }

    #[test]
    fn separated_outcomes_have_no_slope() {
        assert_eq!(
            logistic_recalibration(&[0.1, 0.2, 0.8, 0.9], &[false, false, true, true]),
            None
        );
    }
}
