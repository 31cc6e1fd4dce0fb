//! The monitoring a serving process does beside scoring, in one handle: the drift windows, the
//! receipt keys and the recently reported receipts, the calibration windows, their sizes, and
//! the report that combines them.
//!
//! The service holds one [`Monitor`] (or none, when started with monitoring off) and makes two
//! calls: [`Monitor::record_scored`] after scoring a request (it records drift and seals one
//! receipt per answer), and [`Monitor::report_outcome`] when an outcome arrives. Everything here
//! is bounded in memory by [`MonitorSettings`]; nothing here knows HTTP.
//!
//! Cost: `cargo bench --bench monitoring` measures recording drift and sealing receipts per
//! observation; `benches/monitoring_cost.sh` compares throughput with monitoring on and off.

use std::collections::BTreeSet;
use std::sync::Arc;

use prometheus::Registry;
use schemars::JsonSchema;
use serde::Serialize;

use super::calibration::{
    self, CalibrationMonitor, CalibrationSetupError, VersionCalibrationReport,
};
use super::drift::{self, DriftMonitor, DriftSetupError, VersionDriftReport};
use super::outcomes::{self, OutcomeBook, OutcomeError, RecordedOutcome, SeenReceipts};
use crate::model::{Model, Value};
use crate::receipt::{self, RandomError, ReceiptKeys};
use crate::registry::Snapshot;

/// How much each monitoring window keeps, and how old a receipt may be.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct MonitorSettings {
    /// Observations per model version in the drift window.
    pub drift_window: usize,
    /// Shards of each drift window: one per thread that records keeps threads apart.
    pub drift_shards: usize,
    /// Outcomes per model version in the calibration window.
    pub calibration_window: usize,
    /// Receipt ids remembered to refuse a repeated outcome, across all models.
    pub seen_receipts: usize,
    /// The oldest receipt whose outcome is taken.
    pub receipt_max_age: std::time::Duration,
}

impl Default for MonitorSettings {
    fn default() -> MonitorSettings {
        MonitorSettings {
            drift_window: drift::DEFAULT_WINDOW,
            drift_shards: std::thread::available_parallelism().map_or(1, |n| n.get()),
            calibration_window: calibration::DEFAULT_WINDOW,
            seen_receipts: outcomes::DEFAULT_SEEN_CAPACITY,
            receipt_max_age: receipt::DEFAULT_MAX_AGE,
        }
    }
}

/// Why monitoring could not be set up.
#[derive(Debug, thiserror::Error)]
pub enum MonitorSetupError {
    /// The drift monitor.
    #[error(transparent)]
    Drift(#[from] DriftSetupError),
    /// The calibration monitor.
    #[error(transparent)]
    Calibration(#[from] CalibrationSetupError),
}

/// Drift, receipts and calibration of a serving process.
#[derive(Debug, Clone)]
pub struct Monitor {
    /// Input and prediction drift windows.
    pub drift: Arc<DriftMonitor>,
    /// The keys that seal and open receipts.
    pub keys: Arc<ReceiptKeys>,
    /// Receipts recently reported to this process.
    pub seen: Arc<SeenReceipts>,
    /// Calibration per version: the window of recent outcomes and the additive totals that
    /// outcome reports feed.
    pub calibration: Arc<CalibrationMonitor>,
    max_age: std::time::Duration,
}

/// This process's outcome bookkeeping, as the report shows it.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct ReceiptSummary {
    /// Receipt ids remembered to refuse repeats.
    pub seen: usize,
    /// The most remembered.
    pub seen_capacity: usize,
    /// The oldest receipt taken, in days.
    pub max_age_days: f64,
    /// Whether receipts are sealed with an ephemeral key (they stop opening on restart).
    pub ephemeral_key: bool,
}

/// One version's monitoring, as the report shows it.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct VersionReport {
    /// The version's label, as the model directory stores it.
    pub version: String,
    /// Whether this is the live version now.
    pub live: bool,
    /// Input and prediction drift (absent before the version scored anything).
    pub drift: Option<VersionDriftReport>,
    /// Calibration (absent before the first outcome for this version).
    pub calibration: Option<VersionCalibrationReport>,
}

/// Everything monitoring knows about one model.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct MonitorReport {
    /// The model's name, as its requests and the model directory give it.
    pub model: String,
    /// Its versions seen by monitoring (and the live one), in label order.
    pub versions: Vec<VersionReport>,
    /// Receipts and repeated outcomes, shared by all models.
    pub receipts: ReceiptSummary,
    /// How to read the figures.
    pub notes: Vec<&'static str>,
}

const REPORT_NOTES: [&str; 3] = [
    "psi: population stability index of the window against training, each bin's share floored at 1e-4; \
     bands (common practice): stable below 0.1, moderate from 0.1, major from 0.25; a window of fewer than \
     minimum_observations (1,000) reads insufficient, since with no drift at all its PSI is about (bins - 1) / n",
    "values outside the training histogram count in its first or last bin",
    "log_loss clips predictions to [1e-15, 1 - 1e-15]; calibration_slope is the slope of a logistic \
     regression of the outcome on the logit of the prediction (1 is ideal); a calibration window of fewer \
     than minimum_outcomes (500) reads insufficient: the standard error of a mean outcome is then above 0.022",
];

impl Monitor {
    /// Monitoring with these window sizes, sealing and opening receipts with `keys`, its series
    /// registered in `registry`.
    pub fn new(
        settings: MonitorSettings,
        keys: Arc<ReceiptKeys>,
        registry: &Registry,
    ) -> Result<Monitor, MonitorSetupError> {
        Ok(Monitor {
            drift: DriftMonitor::new(settings.drift_window, settings.drift_shards, registry)?,
            keys,
            seen: Arc::new(SeenReceipts::new(settings.seen_receipts)),
            calibration: CalibrationMonitor::new(settings.calibration_window, registry)?,
            max_age: settings.receipt_max_age,
        })
    }

    /// Create the drift and outcome counters of every live version in `snapshot` at zero if
    /// they do not exist yet (called at every scrape, so a promoted version's counters start
    /// from zero in the first scrape after the swap and a rate over them misses nothing).
    pub fn prepare(&self, snapshot: &Snapshot) {
        for entry in snapshot.models.values() {
            let model = &entry.live;
            self.drift.prepare(model);
            self.calibration.prepare(model.name(), model.version());
        }
    }

    /// Record a scored request: each observation's values (`values` is `n × covariates`, in
    /// order) and probability go into `model`'s drift window; returns one receipt per
    /// probability, sealed now.
    pub fn record_scored(
        &self,
        model: &Model,
        values: &[Value],
        probabilities: impl ExactSizeIterator<Item = f64> + Clone,
    ) -> Result<Vec<String>, RandomError> {
        let width = model.covariates.len().max(1);
        self.drift
            .record_many(model, values.chunks(width).zip(probabilities.clone()));
        self.keys.seal_all(
            model.name(),
            model.version(),
            receipt::now_ms(),
            probabilities,
        )
    }

    /// Seal one receipt per probability of a version that answered without being live: its
    /// receipts name it, so outcomes reported with them count toward its own calibration, and
    /// nothing enters a drift window (such calls are not the live traffic).
    pub fn seal_not_live(
        &self,
        model: &Model,
        probabilities: impl ExactSizeIterator<Item = f64>,
    ) -> Result<Vec<String>, RandomError> {
        self.keys.seal_all(
            model.name(),
            model.version(),
            receipt::now_ms(),
            probabilities,
        )
    }

    /// Check the receipt `token` for `model_name` and record `outcome` for the version it
    /// names.
    pub fn report_outcome(
        &self,
        model_name: &str,
        token: &str,
        outcome: bool,
    ) -> Result<RecordedOutcome, OutcomeError> {
        OutcomeBook {
            keys: &self.keys,
            seen: &self.seen,
            calibration: &self.calibration,
            max_age: self.max_age,
        }
        .report(model_name, token, outcome, receipt::now_ms())
    }

    /// This process's receipt bookkeeping now.
    pub fn receipt_summary(&self) -> ReceiptSummary {
        ReceiptSummary {
            seen: self.seen.len(),
            seen_capacity: self.seen.capacity(),
            max_age_days: self.max_age.as_secs_f64() / 86_400.0,
            ephemeral_key: *self.keys.source() == receipt::KeySource::Ephemeral,
        }
    }

    /// The report for `model_name`, marking `live_version` live.
    pub fn report(&self, model_name: &str, live_version: Option<&str>) -> MonitorReport {
        let mut drift = self.drift.report(model_name);
        let mut calibration = self.calibration.report(model_name);
        let labels: BTreeSet<String> = drift
            .iter()
            .map(|d| d.version.clone())
            .chain(calibration.iter().map(|c| c.version.clone()))
            .chain(live_version.map(str::to_string))
            .collect();
        let versions = labels
            .into_iter()
            .map(|version| {
                let take_drift = drift.iter().position(|d| d.version == version);
                let take_calibration = calibration.iter().position(|c| c.version == version);
                VersionReport {
                    live: live_version == Some(version.as_str()),
                    drift: take_drift.map(|i| drift.swap_remove(i)),
                    calibration: take_calibration.map(|i| calibration.swap_remove(i)),
                    version,
                }
            })
            .collect();
        MonitorReport {
            model: model_name.to_string(),
            versions,
            receipts: self.receipt_summary(),
            notes: REPORT_NOTES.to_vec(),
        }
    }
}
