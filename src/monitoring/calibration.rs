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
//! Fleet-wide figures: a window's figures are one process's, and averaging them across
//! replicas is not the fleet's figure. So each version also exports running totals that add
//! across replicas exactly ([`OutcomeTotals`]): the outcome count n, Σyᵢ, Σpᵢ, Σ(pᵢ − yᵢ)², the
//! summed log loss, the predictions in [`OUTCOME_BINS`] bins of width 0.01 split by outcome, and
//! per tenth of the probability scale its count, positives and Σpᵢ. The recording rules in
//! `deploy/prometheus/ogive-rules.yml` sum them over the fleet and a time window and divide:
//! Brier score, log loss, calibration-in-the-large and the reliability curve come out exact;
//! the ROC AUC comes out binned, with pairs in the same bin counted half:
//!
//! ```text
//! AUC_binned = Σₖ posₖ · (neg₍<k₎ + ½ negₖ) / (n₁ n₀)
//! |AUC_binned − AUC| ≤ ½ Σₖ posₖ · negₖ / (n₁ n₀)          (the tie bound, also recorded)
//! ```
//!
//! On the demo models' data (20,000 rows each) the binned AUC is within 0.0002 of the exact one
//! (tests/monitoring.rs checks it against scikit-learn within 0.005); the tie bound there is
//! 0.016 (lease-arrears) and 0.008 (rebate-uptake), the worst case, which needs every
//! positive to sit below every negative inside each bin. PromQL cannot pair neighbouring
//! histogram buckets, so each bucket's count of predictions below it (`neg₍<k₎`) is exported
//! too, as `ogive_outcome_probability_below_total{bound}`, `bound` holding the bucket's `le`
//! (the exposition format keeps the label `le` for histograms).
//!
//! Cost: the figures are O(n log n) in the window (the AUC sorts), so they are computed when
//! scraped or reported, and only if an outcome arrived since the last computation; reporting an
//! outcome is O(1).
//!
//! This module does not know where outcomes come from (the answer store in
//! [`crate::monitoring::outcomes`] matches them to answers) and knows nothing of HTTP.

use std::collections::HashMap;
use std::sync::{Arc, Mutex, PoisonError};

use prometheus::core::{Collector, Desc};
use prometheus::proto::{MetricFamily, MetricType};
use prometheus::{GaugeVec, IntGaugeVec, Opts, Registry};

use super::families::{self, Family};
use schemars::JsonSchema;
use serde::Serialize;

/// The fewest outcomes in a window whose figures are read: below it a version's calibration
/// reads [`Reading::Insufficient`]. The standard error of a mean of 0/1 outcomes is then above
/// 0.5/√500 ≈ 0.022, which blurs differences of 0.05; the `ogive-fleet` recording rules and the
/// calibration alerts use the same number.
pub const MIN_OUTCOMES: usize = 500;

/// Whether a window holds enough to read its figures.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum Reading {
    /// Fewer outcomes than the minimum: the figures are given but mean little.
    Insufficient,
    /// At least the minimum.
    Enough,
}

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

/// Bins of the outcome histograms: bin k (from 0) holds k/100 < p ≤ (k + 1)/100, the first
/// also p = 0.
pub const OUTCOME_BINS: usize = 100;

/// Bins of the reliability curve: tenths of the probability scale, each ten outcome bins.
pub const RELIABILITY_BINS: usize = 10;

/// The finite upper bounds of the outcome histogram's buckets, 0.01 … 0.99; the last bin,
/// (0.99, 1], is the `+Inf` bucket, so no bound is a whole number (whose text form differs
/// between Prometheus versions, which would break the join of the `below` series).
pub fn outcome_bin_bounds() -> [f64; OUTCOME_BINS - 1] {
    std::array::from_fn(|k| (k + 1) as f64 / 100.0)
}

/// The outcome bin of a probability: the first k with p ≤ (k + 1)/100.
pub fn outcome_bin(p: f64) -> usize {
    outcome_bin_bounds().partition_point(|&upper| upper < p)
}

/// The text of a reliability bin: `[0,0.1]`, then `(0.1,0.2]` … `(0.9,1]`.
pub fn reliability_bin_label(j: usize) -> String {
    let (lower, upper) = (j as f64 / 10.0, (j + 1) as f64 / 10.0);
    if j == 0 {
        format!("[{lower},{upper}]")
    } else {
        format!("({lower},{upper}]")
    }
}

/// Running totals of every outcome a version received since the process first saw it; they add
/// across processes exactly (see the module notes).
#[derive(Debug, Clone, PartialEq)]
pub struct OutcomeTotals {
    /// Outcomes received for the version, n: every term below sums over these.
    pub outcomes: u64,
    /// Outcomes that were 1, Σyᵢ.
    pub positives: u64,
    /// Σpᵢ.
    pub predicted: f64,
    /// Σ(pᵢ − yᵢ)².
    pub squared_error: f64,
    /// Σ −[yᵢ ln p̃ᵢ + (1 − yᵢ) ln(1 − p̃ᵢ)].
    pub log_loss: f64,
    /// Predictions per outcome bin, `[outcome 0, outcome 1]`.
    pub bins: [[u64; OUTCOME_BINS]; 2],
    /// Σpᵢ per outcome, `[outcome 0, outcome 1]`.
    pub predicted_by_outcome: [f64; 2],
    /// Σpᵢ per reliability bin.
    pub reliability_predicted: [f64; RELIABILITY_BINS],
}

impl Default for OutcomeTotals {
    fn default() -> OutcomeTotals {
        OutcomeTotals {
            outcomes: 0,
            positives: 0,
            predicted: 0.0,
            squared_error: 0.0,
            log_loss: 0.0,
            bins: [[0; OUTCOME_BINS]; 2],
            predicted_by_outcome: [0.0; 2],
            reliability_predicted: [0.0; RELIABILITY_BINS],
        }
    }
}

impl OutcomeTotals {
    /// Add outcome `y` of an answer that predicted `p` to every total.
    pub fn add(&mut self, p: f64, y: bool) {
        let outcome = usize::from(y);
        let bin = outcome_bin(p);
        self.outcomes += 1;
        self.positives += u64::from(y);
        self.predicted += p;
        self.squared_error += (p - outcome as f64).powi(2);
        self.log_loss += if y {
            -clip(p).ln()
        } else {
            -(-clip(p)).ln_1p()
        };
        self.bins[outcome][bin] += 1;
        self.predicted_by_outcome[outcome] += p;
        self.reliability_predicted[bin / (OUTCOME_BINS / RELIABILITY_BINS)] += p;
    }

    /// The binned ROC AUC of these totals and its tie bound (see the module notes), as the
    /// recording rules compute them; `None` unless both outcomes occur.
    pub fn binned_auc(&self) -> Option<(f64, f64)> {
        let n1 = self.positives as f64;
        let n0 = (self.outcomes - self.positives) as f64;
        if n1 == 0.0 || n0 == 0.0 {
            return None;
        }
        let (mut wins, mut ties, mut below) = (0.0, 0.0, 0.0);
        for (&pos, &neg) in self.bins[1].iter().zip(&self.bins[0]) {
            let (pos, neg) = (pos as f64, neg as f64);
            wins += pos * (below + neg / 2.0);
            ties += pos * neg / 2.0;
            below += neg;
        }
        Some((wins / (n1 * n0), ties / (n1 * n0)))
    }
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
    /// The share of the window's outcomes that were 1, Σyᵢ / n.
    pub mean_observed: f64,
    /// The mean of the predictions those outcomes answer, Σpᵢ / n.
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
    /// Every outcome recorded since the version was first seen, as running totals.
    totals: OutcomeTotals,
    /// The figures and the outcome count they were computed at.
    cached: Option<(u64, Option<Figures>)>,
}

impl Window {
    fn new(capacity: usize) -> Window {
        Window {
            capacity,
            predictions: Vec::new(),
            outcomes: Vec::new(),
            next: 0,
            totals: OutcomeTotals::default(),
            cached: None,
        }
    }

    fn record(&mut self, prediction: f64, outcome: bool) {
        if self.predictions.len() < self.capacity {
            self.predictions.push(prediction);
            self.outcomes.push(outcome);
        } else {
            self.predictions[self.next] = prediction;
            self.outcomes[self.next] = outcome;
            self.next = (self.next + 1) % self.capacity;
        }
        self.totals.add(prediction, outcome);
    }

    fn figures(&mut self) -> Option<Figures> {
        let recorded = self.totals.outcomes;
        match self.cached {
            Some((at, figures)) if at == recorded => figures,
            _ => {
                let figures = Figures::compute(&self.predictions, &self.outcomes);
                self.cached = Some((recorded, figures));
                figures
            }
        }
    }
}

#[derive(Debug)]
struct VersionCalibration {
    window: Mutex<Window>,
}

/// Calibration of one model version, for the report.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct VersionCalibrationReport {
    /// The version's label, as the model directory stores it.
    pub version: String,
    /// Outcomes reported for this version since the process started.
    pub outcomes_total: u64,
    /// The most outcomes the window holds (`--calibration-window`); older ones leave it.
    pub window_capacity: usize,
    /// The figures over the window (absent before the first outcome).
    pub figures: Option<Figures>,
    /// `insufficient` while the window holds fewer than `minimum_outcomes`.
    pub reading: Reading,
    /// The fewest outcomes whose figures are read ([`MIN_OUTCOMES`]).
    pub minimum_outcomes: usize,
}

#[derive(Debug, Clone)]
struct CalibrationMetrics {
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
    /// ogive_calibration_window_outcomes{model,version}    gauge
    /// ogive_brier_score, ogive_log_loss, ogive_calibration_in_the_large,
    /// ogive_calibration_slope, ogive_roc_auc              gauges {model,version}, the window's
    /// ```
    ///
    /// and the running totals that add across replicas (all {model,version}):
    ///
    /// ```text
    /// ogive_outcomes_total                                counter, n
    /// ogive_outcome_positives_total                       counter, Σy
    /// ogive_outcome_predicted_total                       counter, Σp
    /// ogive_outcome_squared_error_total                   counter, Σ(p − y)²
    /// ogive_outcome_log_loss_total                        counter, Σ log loss
    /// ogive_outcome_probability{outcome}                  histogram, le 0.01 … 0.99, +Inf
    /// ogive_outcome_probability_below_total{outcome,bound}  counter, the bucket before le=bound
    /// ogive_reliability_outcomes_total{bin}               counter, per tenth
    /// ogive_reliability_positives_total{bin}              counter
    /// ogive_reliability_predicted_total{bin}              counter, Σp
    /// ```
    ///
    /// A gauge is absent while its figure is undefined (an empty window; the slope and AUC with
    /// one outcome only). The totals of a version appear with its first outcome, or at zero
    /// once [`CalibrationMonitor::prepare`] named it.
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
        let collector = CalibrationCollector::new(Arc::clone(&monitor))?;
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
                window: Mutex::new(Window::new(self.window)),
            })
        }))
    }

    /// Create `model` version `version`'s totals at zero if they do not exist yet, so that its
    /// counters are exported (and a rate over them is defined) before the first outcome.
    pub fn prepare(&self, model: &str, version: &str) {
        let _ = self.version_state(model, version);
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
    }

    /// The running totals of `model` version `version`, if it has any.
    pub fn totals(&self, model: &str, version: &str) -> Option<OutcomeTotals> {
        let versions = self.versions.lock().unwrap_or_else(PoisonError::into_inner);
        let state = versions.get(&(model.to_string(), version.to_string()))?;
        let window = state.window.lock().unwrap_or_else(PoisonError::into_inner);
        Some(window.totals.clone())
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
                let mut window = state.window.lock().unwrap_or_else(PoisonError::into_inner);
                let figures = window.figures();
                let in_window = figures.as_ref().map_or(0, |f| f.count);
                VersionCalibrationReport {
                    version,
                    outcomes_total: window.totals.outcomes,
                    window_capacity: self.window,
                    figures,
                    reading: if in_window < MIN_OUTCOMES {
                        Reading::Insufficient
                    } else {
                        Reading::Enough
                    },
                    minimum_outcomes: MIN_OUTCOMES,
                }
            })
            .filter(|r| r.outcomes_total > 0)
            .collect();
        reports.sort_by(|a, b| a.version.cmp(&b.version));
        reports
    }

    /// Reset the gauges and fill them from the windows; returns every version's totals, read
    /// under the same lock as its figures.
    fn refresh_gauges(&self) -> Vec<((String, String), OutcomeTotals)> {
        let m = &self.metrics;
        for g in m.gauges() {
            g.reset();
        }
        m.window_outcomes.reset();
        let mut totals = Vec::new();
        for ((model, version), state) in self.states() {
            let (figures, version_totals) = {
                let mut window = state.window.lock().unwrap_or_else(PoisonError::into_inner);
                (window.figures(), window.totals.clone())
            };
            let labels = [model.as_str(), version.as_str()];
            totals.push(((model.clone(), version.clone()), version_totals));
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
        totals.sort_by(|a, b| a.0.cmp(&b.0));
        totals
    }
}

/// The counters of the running totals: name and help.
const TOTAL_FAMILIES: [(&str, &str); 5] = [
    (
        "ogive_outcomes_total",
        "Observed outcomes reported for a model version's answers.",
    ),
    (
        "ogive_outcome_positives_total",
        "Reported outcomes that were 1, by model version.",
    ),
    (
        "ogive_outcome_predicted_total",
        "Sum of the predicted probabilities of the answers whose outcome was reported.",
    ),
    (
        "ogive_outcome_squared_error_total",
        "Sum of (probability - outcome)^2 over reported outcomes; over ogive_outcomes_total it is the Brier score.",
    ),
    (
        "ogive_outcome_log_loss_total",
        "Sum of the log loss (predictions clipped to [1e-15, 1-1e-15]) over reported outcomes.",
    ),
];
const HISTOGRAM_FAMILY: (&str, &str) = (
    "ogive_outcome_probability",
    "Predicted probabilities of the answers whose outcome was reported, by outcome.",
);
const BELOW_FAMILY: (&str, &str) = (
    "ogive_outcome_probability_below_total",
    "Predicted probabilities at most the bucket bound before the bucket le=bound of ogive_outcome_probability, by outcome (the previous bucket, for PromQL).",
);
const RELIABILITY_FAMILIES: [(&str, &str); 3] = [
    (
        "ogive_reliability_outcomes_total",
        "Reported outcomes whose prediction falls in a tenth of the probability scale.",
    ),
    (
        "ogive_reliability_positives_total",
        "Reported outcomes that were 1, per tenth of the probability scale.",
    ),
    (
        "ogive_reliability_predicted_total",
        "Sum of the predicted probabilities per tenth of the probability scale.",
    ),
];

fn total_descs() -> Result<Vec<Desc>, prometheus::Error> {
    let mut descs = Vec::new();
    for (name, help) in TOTAL_FAMILIES {
        descs.push(families::desc(name, help, &["model", "version"])?);
    }
    let (name, help) = HISTOGRAM_FAMILY;
    descs.push(families::desc(
        name,
        help,
        &["model", "version", "outcome"],
    )?);
    let (name, help) = BELOW_FAMILY;
    descs.push(families::desc(
        name,
        help,
        &["model", "version", "outcome", "bound"],
    )?);
    for (name, help) in RELIABILITY_FAMILIES {
        descs.push(families::desc(name, help, &["model", "version", "bin"])?);
    }
    Ok(descs)
}

/// The running totals as metric families.
fn total_families(totals: &[((String, String), OutcomeTotals)]) -> Vec<MetricFamily> {
    let mut scalars: Vec<Family> = TOTAL_FAMILIES
        .iter()
        .map(|(name, help)| Family::new(name, help, MetricType::COUNTER))
        .collect();
    let mut histogram = Family::new(
        HISTOGRAM_FAMILY.0,
        HISTOGRAM_FAMILY.1,
        MetricType::HISTOGRAM,
    );
    let mut below = Family::new(BELOW_FAMILY.0, BELOW_FAMILY.1, MetricType::COUNTER);
    let mut reliability: Vec<Family> = RELIABILITY_FAMILIES
        .iter()
        .map(|(name, help)| Family::new(name, help, MetricType::COUNTER))
        .collect();
    let bounds = outcome_bin_bounds();
    let le_labels: Vec<String> = bounds
        .iter()
        .map(f64::to_string)
        .chain(std::iter::once("+Inf".to_string()))
        .collect();
    let bin_labels: Vec<String> = (0..RELIABILITY_BINS).map(reliability_bin_label).collect();
    let per_tenth = OUTCOME_BINS / RELIABILITY_BINS;
    for ((model, version), t) in totals {
        let labels = [("model", model.as_str()), ("version", version.as_str())];
        let values = [
            t.outcomes as f64,
            t.positives as f64,
            t.predicted,
            t.squared_error,
            t.log_loss,
        ];
        for (family, value) in scalars.iter_mut().zip(values) {
            family.counter(&labels, value);
        }
        for (outcome, outcome_label) in ["0", "1"].into_iter().enumerate() {
            let counts = &t.bins[outcome];
            let mut cumulative = Vec::with_capacity(OUTCOME_BINS);
            let mut running = 0;
            for &c in counts {
                running += c;
                cumulative.push(running);
            }
            let labels = [
                ("model", model.as_str()),
                ("version", version.as_str()),
                ("outcome", outcome_label),
            ];
            histogram.histogram(
                &labels,
                &bounds,
                &cumulative[..OUTCOME_BINS - 1],
                running,
                t.predicted_by_outcome[outcome],
            );
            for (k, le) in le_labels.iter().enumerate() {
                let before = if k == 0 { 0 } else { cumulative[k - 1] };
                below.counter(
                    &[
                        ("model", model.as_str()),
                        ("version", version.as_str()),
                        ("outcome", outcome_label),
                        ("bound", le.as_str()),
                    ],
                    before as f64,
                );
            }
        }
        for (j, bin) in bin_labels.iter().enumerate() {
            let tenth = j * per_tenth..(j + 1) * per_tenth;
            let negatives: u64 = t.bins[0][tenth.clone()].iter().sum();
            let positives: u64 = t.bins[1][tenth].iter().sum();
            let labels = [
                ("model", model.as_str()),
                ("version", version.as_str()),
                ("bin", bin.as_str()),
            ];
            let values = [
                (negatives + positives) as f64,
                positives as f64,
                t.reliability_predicted[j],
            ];
            for (family, value) in reliability.iter_mut().zip(values) {
                family.counter(&labels, value);
            }
        }
    }
    scalars
        .into_iter()
        .chain([histogram, below])
        .chain(reliability)
        .map(Family::finish)
        .collect()
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
    fn new(monitor: Arc<CalibrationMonitor>) -> Result<CalibrationCollector, prometheus::Error> {
        let m = &monitor.metrics;
        let descs = m
            .gauges()
            .into_iter()
            .flat_map(|g| g.desc())
            .chain(m.window_outcomes.desc())
            .cloned()
            .chain(total_descs()?)
            .collect();
        Ok(CalibrationCollector {
            monitor,
            descs,
            scrape: Mutex::new(()),
        })
    }
}

impl Collector for CalibrationCollector {
    fn desc(&self) -> Vec<&Desc> {
        self.descs.iter().collect()
    }

    fn collect(&self) -> Vec<MetricFamily> {
        let _scrape = self.scrape.lock().unwrap_or_else(PoisonError::into_inner);
        let totals = self.monitor.refresh_gauges();
        let m = &self.monitor.metrics;
        m.window_outcomes
            .collect()
            .into_iter()
            .chain(m.gauges().into_iter().flat_map(|g| g.collect()))
            .chain(total_families(&totals))
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
        let mut w = Window::new(2);
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
