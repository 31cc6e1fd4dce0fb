//! The Prometheus registry of the service and the request and scoring metrics it exports at
//! `GET /metrics`.
//!
//! Every metric is created once, at start-up, in [`Metrics::new`]; recording is an atomic add
//! (prometheus counters and histograms are lock-free once a label set's child exists), so
//! nothing here blocks the request path. Label sets are bounded: routes are route templates,
//! models and covariates come from loaded model files, never from what a client sends.
//!
//! This module does not know about HTTP or actix; the service calls it. Monitoring
//! ([`crate::monitoring`]: drift, calibration, the shadow comparison) registers its series in
//! the same [`Registry`].
//!
//! The exported names are a contract with alert rules and dashboards:
//!
//! ```text
//! ogive_http_requests_total{route,method,status}      counter
//! ogive_http_request_duration_seconds{route}          histogram, 50 µs … 1 s
//! ogive_observations_scored_total{model,version}      counter
//! ogive_out_of_range_total{model,covariate}           counter
//! ogive_unusual_combination_total{model}              counter
//! ogive_predicted_probability{model}                  histogram, 0.05 … 1
//! ogive_live_version_info{model,version,link}         gauge, always 1
//! ogive_model_load_errors_total{model}                counter
//! ogive_ready                                         gauge, 1 when ready
//! ```
//!
//! and, with monitoring on, the drift and calibration series of
//! [`crate::monitoring::drift::DriftMonitor::new`] and
//! [`crate::monitoring::calibration::CalibrationMonitor::new`], among them the fleet counters
//! that add up across replicas exactly.

use std::sync::{Arc, RwLock, Weak};

use prometheus::{
    Encoder, Histogram, HistogramOpts, HistogramVec, IntCounter, IntCounterVec, IntGauge,
    IntGaugeVec, Opts, Registry, TextEncoder,
};

use crate::model::Model;
use crate::registry::Snapshot;

/// Upper bounds of the request-latency buckets, in seconds: sub-millisecond resolution where
/// scoring lives, up to one second.
pub const DURATION_BUCKETS_SECONDS: [f64; 15] = [
    0.000_05, 0.000_1, 0.000_25, 0.000_5, 0.001, 0.002_5, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5,
    0.75, 1.0,
];

/// The content type of the Prometheus text exposition format.
pub const TEXT_CONTENT_TYPE: &str = "text/plain; version=0.0.4; charset=utf-8";

/// Why the metrics could not be registered or encoded (a programming error, never a client's).
#[derive(Debug, thiserror::Error)]
#[error("metrics: {0}")]
pub struct MetricsError(#[from] prometheus::Error);

/// The service's metrics and the registry that exports them.
#[derive(Clone, Debug)]
pub struct Metrics {
    /// The registry every ogive metric is registered in.
    pub registry: Registry,
    /// Requests by route template, method and status code.
    pub http_requests: IntCounterVec,
    /// Request latency by route template.
    pub http_duration: HistogramVec,
    /// Observations scored by model and version.
    pub observations_scored: IntCounterVec,
    /// Out-of-range warnings by model and covariate.
    pub out_of_range: IntCounterVec,
    /// Unusual-combination warnings by model.
    pub unusual_combination: IntCounterVec,
    /// Predicted probabilities by model.
    pub predicted_probability: HistogramVec,
    /// One series per live version, value 1.
    pub live_version_info: IntGaugeVec,
    /// Model directory entries that failed to load, by model.
    pub model_load_errors: IntCounterVec,
    /// 1 while the service is ready, 0 otherwise.
    pub ready: IntGauge,
    /// The scoring handles of each model version scored so far, resolved once (see
    /// [`Metrics::scoring`]).
    scoring_handles: Arc<RwLock<Vec<VersionHandles>>>,
}

fn predicted_probability_buckets() -> Vec<f64> {
    (1..=20).map(|i| f64::from(i) * 0.05).collect()
}

impl Metrics {
    /// Create and register every metric in a fresh registry.
    pub fn new() -> Result<Metrics, MetricsError> {
        let registry = Registry::new();
        let http_requests = IntCounterVec::new(
            Opts::new(
                "ogive_http_requests_total",
                "HTTP requests answered, by route template, method and status code.",
            ),
            &["route", "method", "status"],
        )?;
        let http_duration = HistogramVec::new(
            HistogramOpts::new(
                "ogive_http_request_duration_seconds",
                "Time from receiving a request to having its answer, by route template.",
            )
            .buckets(DURATION_BUCKETS_SECONDS.to_vec()),
            &["route"],
        )?;
        let observations_scored = IntCounterVec::new(
            Opts::new(
                "ogive_observations_scored_total",
                "Observations scored, by model and version.",
            ),
            &["model", "version"],
        )?;
        let out_of_range = IntCounterVec::new(
            Opts::new(
                "ogive_out_of_range_total",
                "Observations with a covariate outside its training range, by model and covariate.",
            ),
            &["model", "covariate"],
        )?;
        let unusual_combination = IntCounterVec::new(
            Opts::new(
                "ogive_unusual_combination_total",
                "Observations whose continuous covariates lie further from the training mean than any training observation, by model.",
            ),
            &["model"],
        )?;
        let predicted_probability = HistogramVec::new(
            HistogramOpts::new(
                "ogive_predicted_probability",
                "Predicted probabilities, by model.",
            )
            .buckets(predicted_probability_buckets()),
            &["model"],
        )?;
        let live_version_info = IntGaugeVec::new(
            Opts::new(
                "ogive_live_version_info",
                "The live version of each model and its link; always 1.",
            ),
            &["model", "version", "link"],
        )?;
        let model_load_errors = IntCounterVec::new(
            Opts::new(
                "ogive_model_load_errors_total",
                "Model directory entries that failed to load, by model.",
            ),
            &["model"],
        )?;
        let ready = IntGauge::new(
            "ogive_ready",
            "1 while every model is loaded and the service is not draining.",
        )?;
        registry.register(Box::new(http_requests.clone()))?;
        registry.register(Box::new(http_duration.clone()))?;
        registry.register(Box::new(observations_scored.clone()))?;
        registry.register(Box::new(out_of_range.clone()))?;
        registry.register(Box::new(unusual_combination.clone()))?;
        registry.register(Box::new(predicted_probability.clone()))?;
        registry.register(Box::new(live_version_info.clone()))?;
        registry.register(Box::new(model_load_errors.clone()))?;
        registry.register(Box::new(ready.clone()))?;
        Ok(Metrics {
            registry,
            http_requests,
            http_duration,
            observations_scored,
            out_of_range,
            unusual_combination,
            predicted_probability,
            live_version_info,
            model_load_errors,
            ready,
            scoring_handles: Arc::default(),
        })
    }

    /// Create the per-model series at zero for every model in `snapshot`, so that rates and
    /// ratios exist before the first request, and set the live-version info.
    pub fn prepare(&self, snapshot: &Snapshot) {
        for entry in snapshot.models.values() {
            let model = &entry.live;
            let _ = self.scoring(model);
            self.observations_scored
                .with_label_values(&[model.name(), model.version()]);
            self.model_load_errors.with_label_values(&[model.name()]);
        }
        self.set_live_versions(snapshot);
    }

    /// Replace the live-version info series with the versions in `snapshot` (called at every
    /// scrape, so a hot swap shows at once and a retired version's series disappears).
    pub fn set_live_versions(&self, snapshot: &Snapshot) {
        self.live_version_info.reset();
        for entry in snapshot.models.values() {
            let model = &entry.live;
            self.live_version_info
                .with_label_values(&[model.name(), model.version(), model.link.name()])
                .set(1);
        }
    }

    /// The handles a request needs to record scoring for one model version: resolved from the
    /// label sets the first time the version is scored, then found by the version's identity
    /// (the loaded model, not its labels), so a request hashes no label.
    pub fn scoring(&self, model: &Arc<Model>) -> Arc<ScoringMetrics> {
        let same = |(kept, _): &&VersionHandles| std::ptr::eq(kept.as_ptr(), Arc::as_ptr(model));
        let handles = self
            .scoring_handles
            .read()
            .unwrap_or_else(|e| e.into_inner());
        if let Some((_, found)) = handles.iter().find(same) {
            return Arc::clone(found);
        }
        drop(handles);
        let resolved = Arc::new(self.resolve_scoring(model));
        let mut handles = self
            .scoring_handles
            .write()
            .unwrap_or_else(|e| e.into_inner());
        // A version no longer loaded gives up its place (its series stay in the registry).
        handles.retain(|(kept, _)| kept.strong_count() > 0);
        if let Some((_, found)) = handles.iter().find(same) {
            return Arc::clone(found);
        }
        handles.push((Arc::downgrade(model), Arc::clone(&resolved)));
        resolved
    }

    fn resolve_scoring(&self, model: &Model) -> ScoringMetrics {
        let name = model.name();
        ScoringMetrics {
            scored: self
                .observations_scored
                .with_label_values(&[name, model.version()]),
            probability: self.predicted_probability.with_label_values(&[name]),
            unusual: self.unusual_combination.with_label_values(&[name]),
            out_of_range: model
                .covariates
                .iter()
                .map(|c| {
                    self.out_of_range
                        .with_label_values(&[name, c.name.as_str()])
                })
                .collect(),
        }
    }

    /// The handles for scoring with a stored version that is not live: its observations count
    /// in `ogive_observations_scored_total` under its own version label, while the model-wide
    /// series (predicted probabilities, warnings) stay the live version's, so the handles for
    /// those are detached from the registry.
    pub fn scoring_not_live(&self, model: &Model) -> prometheus::Result<ScoringMetrics> {
        let detached =
            |what: &str| IntCounter::new(format!("ogive_not_live_{what}"), "not exported");
        Ok(ScoringMetrics {
            scored: self
                .observations_scored
                .with_label_values(&[model.name(), model.version()]),
            probability: Histogram::with_opts(HistogramOpts::new(
                "ogive_not_live_probability",
                "not exported",
            ))?,
            unusual: detached("unusual")?,
            out_of_range: (0..model.covariates.len())
                .map(|_| detached("out_of_range"))
                .collect::<prometheus::Result<_>>()?,
        })
    }

    /// Record one answered request.
    pub fn record_request(&self, route: &str, method: &str, status: u16, seconds: f64) {
        let mut code = itoa::Buffer::new();
        self.http_requests
            .with_label_values(&[route, method, code.format(status)])
            .inc();
        self.http_duration
            .with_label_values(&[route])
            .observe(seconds);
    }

    /// The Prometheus text exposition of every registered metric.
    pub fn encode(&self) -> Result<Vec<u8>, MetricsError> {
        let mut out = Vec::with_capacity(16 * 1024);
        TextEncoder::new().encode(&self.registry.gather(), &mut out)?;
        Ok(out)
    }
}

/// A loaded model version (held weakly, so that its address is not reused while it is kept
/// here) and its scoring handles.
type VersionHandles = (Weak<Model>, Arc<ScoringMetrics>);

/// Counters and histograms for one model version, resolved once per version.
#[derive(Debug, Clone)]
pub struct ScoringMetrics {
    /// `ogive_observations_scored_total` of this version: one per observation answered.
    pub scored: IntCounter,
    /// `ogive_predicted_probability` of this version: every probability answered.
    pub probability: Histogram,
    /// `ogive_unusual_combination_total` of this version: observations whose continuous
    /// covariates together lie beyond every training observation.
    pub unusual: IntCounter,
    /// Out-of-range warnings, by covariate index.
    pub out_of_range: Vec<IntCounter>,
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_contract_name_is_exported_in_the_text_format() {
        let metrics = Metrics::new().expect("metrics register");
        metrics.record_request("/models/{name}/probability", "POST", 200, 0.0003);
        metrics
            .model_load_errors
            .with_label_values(&["broken"])
            .inc();
        metrics.ready.set(1);
        let text = String::from_utf8(metrics.encode().expect("encode")).expect("utf-8");
        for name in [
            "ogive_http_requests_total{method=\"POST\",route=\"/models/{name}/probability\",status=\"200\"} 1",
            "ogive_http_request_duration_seconds_bucket{route=\"/models/{name}/probability\",le=\"0.0005\"} 1",
            "ogive_http_request_duration_seconds_bucket{route=\"/models/{name}/probability\",le=\"0.00025\"} 0",
            "ogive_model_load_errors_total{model=\"broken\"} 1",
            "ogive_ready 1",
        ] {
            assert!(text.contains(name), "missing {name} in\n{text}");
        }
    }
}
