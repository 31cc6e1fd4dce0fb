//! Monitoring with known answers: drift (the PSI of known shifts, computed by hand here),
//! receipts and outcomes (models, ages, repeats, tampering), and live calibration against scikit-learn
//! and statsmodels fixtures made by `tests/reference/monitoring/make_fixtures.py`. Values are
//! read back through the Prometheus text exposition, as a scraper would see them.

use std::collections::BTreeMap;
use std::sync::Arc;

use ogive::model::{Model, Value};
use ogive::monitoring::calibration::{self, CalibrationMonitor, Figures};
use ogive::monitoring::drift::{DriftBand, DriftMonitor, SHARE_FLOOR};
use ogive::monitoring::outcomes::{OutcomeBook, OutcomeError, SeenReceipts};
use ogive::receipt::{ReceiptKeys, DEFAULT_MAX_AGE};
use prometheus::{Encoder, Registry, TextEncoder};
use serde_json::{json, Value as Json};

mod support;

use support::close::assert_relative;
use support::tolerances::monitoring as tolerance;

/// The model the drift tests watch. Its training summaries are test input, chosen so that the
/// training shares are round numbers:
///
/// ```text
/// amount     continuous, histogram [0,10) [10,20) [20,30) [30,40]: 100 200 300 400 → .1 .2 .3 .4
/// sector     categorical: retail 500, farming 300, transport 200               → .5 .3 .2
/// guarantor  binary, no histogram, mean 0.25                                    → .75 .25
/// visits     count, no histogram                                                → untracked
/// probability  fitted_probabilities [0,.25) [.25,.5) [.5,.75) [.75,1]: 400 300 200 100
/// ```
fn drift_model(version: &str) -> Arc<Model> {
    let bytes = drift_file(version);
    Arc::new(Model::from_json(&bytes).expect("the drift test model is valid"))
}

/// The file of [`drift_model`].
fn drift_file(version: &str) -> Vec<u8> {
    let file = json!({
        "format": "ogive-model",
        "format_version": 1,
        "name": "lease-test",
        "version": version,
        "outcome": { "name": "arrears", "meaning": "a test outcome" },
        "link": "logit",
        "covariates": [
            { "name": "amount", "kind": "continuous",
              "training": { "min": 0.0, "max": 40.0, "mean": 25.0,
                            "histogram": { "edges": [0.0, 10.0, 20.0, 30.0, 40.0],
                                           "counts": [100, 200, 300, 400] } } },
            { "name": "sector", "kind": "categorical",
              "levels": ["retail", "farming", "transport"], "reference": "retail",
              "training": { "level_counts": { "retail": 500, "farming": 300, "transport": 200 } } },
            { "name": "guarantor", "kind": "binary",
              "training": { "min": 0.0, "max": 1.0, "mean": 0.25 } },
            { "name": "visits", "kind": "count",
              "training": { "min": 0.0, "max": 9.0, "mean": 2.0 } }
        ],
        "terms": [
            { "term": "intercept", "coefficient": -1.0 },
            { "term": "amount", "coefficient": 0.05 },
            { "term": "sector=farming", "coefficient": 0.4 },
            { "term": "sector=transport", "coefficient": -0.3 },
            { "term": "guarantor", "coefficient": -0.5 },
            { "term": "visits", "coefficient": 0.1 }
        ],
        "fitted_probabilities": { "edges": [0.0, 0.25, 0.5, 0.75, 1.0],
                                  "counts": [400, 300, 200, 100] },
        "provenance": { "fitted_by": "tests/monitoring.rs", "fitted_at": "1970-01-01T00:00:00Z",
                        "observations": 1000 }
    });
    serde_json::to_vec(&file).expect("json")
}

fn values(model: &Model, amount: f64, sector: &str, guarantor: u8) -> Vec<Value> {
    let observation =
        json!({ "amount": amount, "sector": sector, "guarantor": guarantor, "visits": 1 });
    let mut values = Vec::new();
    model
        .parse_observation(observation.as_object().expect("object"), &mut values)
        .expect("a valid observation");
    values
}

/// One sample of the text exposition: its metric name, labels and value.
#[derive(Debug)]
struct Sample {
    name: String,
    labels: BTreeMap<String, String>,
    value: f64,
}

/// Scrape `registry` as Prometheus would and parse the text format.
fn scrape(registry: &Registry) -> Vec<Sample> {
    let mut out = Vec::new();
    TextEncoder::new()
        .encode(&registry.gather(), &mut out)
        .expect("encode");
    let text = String::from_utf8(out).expect("utf-8");
    text.lines()
        .filter(|l| !l.starts_with('#') && !l.is_empty())
        .map(|line| {
            let (series, value) = line.rsplit_once(' ').expect("a sample line");
            let (name, labels) = match series.split_once('{') {
                Some((name, rest)) => (name, rest.trim_end_matches('}')),
                None => (series, ""),
            };
            let labels = labels
                .split("\",")
                .filter(|p| !p.is_empty())
                .map(|pair| {
                    let (k, v) = pair.split_once('=').expect("label pair");
                    (k.to_string(), v.trim_matches('"').to_string())
                })
                .collect();
            Sample {
                name: name.to_string(),
                labels,
                value: value.parse().expect("a number"),
            }
        })
        .collect()
}

/// The value of the series `name` whose labels include `labels`, if exported.
fn series(samples: &[Sample], name: &str, labels: &[(&str, &str)]) -> Option<f64> {
    samples
        .iter()
        .find(|s| {
            s.name == name
                && labels
                    .iter()
                    .all(|(k, v)| s.labels.get(*k).map(String::as_str) == Some(*v))
        })
        .map(|s| s.value)
}

/// ((a − e) · ln(a / e)) for one bin, written out for the hand computations.
fn term(a: f64, e: f64) -> f64 {
    (a - e) * (a / e).ln()
}

// ---------------------------------------------------------------------------------------------
// Drift
// ---------------------------------------------------------------------------------------------

#[test]
fn input_psi_of_a_known_shift_matches_the_hand_computation() {
    let registry = Registry::new();
    let drift = DriftMonitor::new(1_000, 1, &registry).expect("monitor");
    let model = drift_model("1");
    // Window shares .4 .3 .2 .1 against training .1 .2 .3 .4. Values outside the training range
    // (-5 below, 55 above) count in the first and last bins; 40, the last edge, is in the last.
    let amounts = [
        (-5.0, 5),
        (3.0, 35),
        (10.0, 10),
        (15.0, 20),
        (25.0, 20),
        (40.0, 3),
        (55.0, 2),
        (35.0, 5),
    ];
    for (amount, n) in amounts {
        for _ in 0..n {
            drift.record(&model, &values(&model, amount, "retail", 0), 0.1);
        }
    }
    // Hand: 2 · 0.3 · ln 4 + 2 · 0.1 · ln 1.5 (the terms pair up symmetrically).
    let hand = 2.0 * 0.3 * 4.0_f64.ln() + 2.0 * 0.1 * 1.5_f64.ln();
    let report = drift.report("lease-test");
    assert_eq!(report.len(), 1);
    assert_eq!(report[0].window_observations, 100);
    let amount = &report[0].covariates[0];
    assert_eq!(amount.covariate.as_deref(), Some("amount"));
    assert_relative(
        amount.psi.expect("psi"),
        hand,
        tolerance::HAND,
        "PSI of amount (hand)",
    );
    // 0.91 is past the common-practice 0.25, but 100 observations are too few to read it.
    assert_eq!(DriftBand::of(hand), DriftBand::Major);
    assert_eq!(amount.band, Some(DriftBand::Insufficient));
    assert_eq!(report[0].minimum_observations, 1_000);
    let shares: Vec<f64> = amount.bins.iter().map(|b| b.window_share).collect();
    assert_eq!(shares, [0.4, 0.3, 0.2, 0.1]);

    let samples = scrape(&registry);
    let gauge = series(
        &samples,
        "ogive_input_psi",
        &[
            ("model", "lease-test"),
            ("version", "1"),
            ("covariate", "amount"),
        ],
    )
    .expect("ogive_input_psi for amount");
    assert_relative(
        gauge,
        hand,
        tolerance::HAND,
        "ogive_input_psi{covariate=amount} (hand)",
    );
    assert_eq!(
        series(
            &samples,
            "ogive_drift_window_observations",
            &[("version", "1")]
        ),
        Some(100.0)
    );
}

#[test]
fn an_empty_bin_is_floored_at_the_documented_share() {
    let registry = Registry::new();
    let drift = DriftMonitor::new(1_000, 1, &registry).expect("monitor");
    let model = drift_model("1");
    // Every observation is retail: window shares 1, 0, 0 against training .5 .3 .2; the empty
    // bins count as 1e-4.
    for _ in 0..50 {
        drift.record(&model, &values(&model, 25.0, "retail", 0), 0.1);
    }
    assert_eq!(SHARE_FLOOR, 1e-4);
    let hand = term(1.0, 0.5) + term(1e-4, 0.3) + term(1e-4, 0.2);
    let report = drift.report("lease-test");
    let sector = &report[0].covariates[1];
    assert_eq!(sector.covariate.as_deref(), Some("sector"));
    assert_relative(
        sector.psi.expect("psi"),
        hand,
        tolerance::HAND,
        "PSI of sector (hand, floored)",
    );
    let samples = scrape(&registry);
    let gauge = series(&samples, "ogive_input_psi", &[("covariate", "sector")]).expect("sector");
    assert_relative(
        gauge,
        hand,
        tolerance::HAND,
        "ogive_input_psi{covariate=sector} (hand)",
    );
}

#[test]
fn a_binary_covariate_without_histogram_uses_its_training_share() {
    let registry = Registry::new();
    let drift = DriftMonitor::new(1_000, 1, &registry).expect("monitor");
    let model = drift_model("1");
    // The minimum a band is read at: 1,000 observations.
    for i in 0..1_000 {
        drift.record(
            &model,
            &values(&model, 25.0, "farming", u8::from(i % 5 < 2)),
            0.1,
        );
    }
    // Window .6 .4 against training .75 .25.
    let hand = term(0.6, 0.75) + term(0.4, 0.25);
    let report = drift.report("lease-test");
    let guarantor = &report[0].covariates[2];
    assert_eq!(guarantor.covariate.as_deref(), Some("guarantor"));
    assert_relative(
        guarantor.psi.expect("psi"),
        hand,
        tolerance::HAND,
        "PSI of guarantor (hand)",
    );
    assert_eq!(
        guarantor.band,
        Some(DriftBand::Moderate),
        "0.104 lies between 0.1 and 0.25"
    );
    assert_eq!(report[0].untracked.len(), 1);
    assert_eq!(report[0].untracked[0].covariate, "visits");
    assert!(report[0].untracked[0]
        .reason
        .contains("no training histogram"));
}

#[test]
fn prediction_psi_bins_probabilities_by_the_fitted_histogram() {
    let registry = Registry::new();
    let drift = DriftMonitor::new(1_000, 1, &registry).expect("monitor");
    let model = drift_model("1");
    // Window .1 .2 .3 .4 against training .4 .3 .2 .1; p = 1 falls in the closed last bin.
    for (p, n) in [(0.1, 10), (0.3, 20), (0.6, 30), (0.8, 20), (1.0, 20)] {
        for _ in 0..n {
            drift.record(&model, &values(&model, 25.0, "retail", 0), p);
        }
    }
    let hand = 2.0 * 0.3 * 4.0_f64.ln() + 2.0 * 0.1 * 1.5_f64.ln();
    let report = drift.report("lease-test");
    let prediction = report[0].prediction.as_ref().expect("prediction drift");
    assert_relative(
        prediction.psi.expect("psi"),
        hand,
        tolerance::HAND,
        "prediction PSI (hand)",
    );
    let samples = scrape(&registry);
    let gauge = series(
        &samples,
        "ogive_prediction_psi",
        &[("model", "lease-test"), ("version", "1")],
    )
    .expect("ogive_prediction_psi");
    assert_relative(gauge, hand, tolerance::HAND, "ogive_prediction_psi (hand)");
}

#[test]
fn the_window_forgets_the_oldest_observations() {
    let registry = Registry::new();
    let drift = DriftMonitor::new(100, 1, &registry).expect("monitor");
    let model = drift_model("1");
    // 100 shifted observations, then 100 in exactly the training shares: the shifted ones must
    // all have left the window, leaving a PSI of exactly 0.
    for _ in 0..100 {
        drift.record(&model, &values(&model, 5.0, "transport", 1), 0.9);
    }
    for (amount, n) in [(5.0, 10), (15.0, 20), (25.0, 30), (35.0, 40)] {
        for _ in 0..n {
            drift.record(&model, &values(&model, amount, "retail", 0), 0.1);
        }
    }
    let report = drift.report("lease-test");
    assert_eq!(report[0].window_observations, 100);
    assert_eq!(report[0].covariates[0].psi, Some(0.0));
    assert_eq!(
        report[0].covariates[0].band,
        Some(DriftBand::Insufficient),
        "a PSI of 0 over 100 observations still reads as too few"
    );
}

#[test]
fn one_observation_reads_insufficient_not_major_drift_and_a_full_minimum_reads_its_band() {
    let registry = Registry::new();
    let drift = DriftMonitor::new(1_000, 1, &registry).expect("monitor");
    let model = drift_model("1");
    drift.record(&model, &values(&model, 5.0, "retail", 0), 0.1);
    let report = drift.report("lease-test");
    let amount = &report[0].covariates[0];
    // One observation in the first bin: PSI (1 − 0.1)·ln 10 + Σ over the empty bins, far past
    // 0.25, and meaningless.
    assert!(amount.psi.expect("psi") > 0.25);
    assert_eq!(amount.band, Some(DriftBand::Insufficient));
    assert_eq!(report[0].minimum_observations, 1_000);
    // 1,000 observations in exactly the training shares (.1 .2 .3 .4): PSI 0, read as stable.
    let drift = DriftMonitor::new(1_000, 1, &Registry::new()).expect("monitor");
    for (amount, n) in [(5.0, 100), (15.0, 200), (25.0, 300), (35.0, 400)] {
        for _ in 0..n {
            drift.record(&model, &values(&model, amount, "retail", 0), 0.1);
        }
    }
    let report = drift.report("lease-test");
    assert_eq!(report[0].window_observations, 1_000);
    assert_eq!(report[0].covariates[0].psi, Some(0.0));
    assert_eq!(report[0].covariates[0].band, Some(DriftBand::Stable));
}

#[test]
fn a_calibration_window_under_its_minimum_reads_insufficient() {
    let registry = Registry::new();
    let calibration = CalibrationMonitor::new(10_000, &registry).expect("monitor");
    for i in 0..499 {
        calibration.record("lease-test", "1", 0.3, i % 3 == 0);
    }
    let report = calibration.report("lease-test");
    assert_eq!(report[0].reading, calibration::Reading::Insufficient);
    assert_eq!(report[0].minimum_outcomes, 500);
    assert!(report[0].figures.is_some(), "the figures are still given");
    calibration.record("lease-test", "1", 0.3, false);
    let report = calibration.report("lease-test");
    assert_eq!(report[0].reading, calibration::Reading::Enough);
}

#[test]
fn versions_keep_separate_windows_and_empty_windows_export_no_psi() {
    let registry = Registry::new();
    let drift = DriftMonitor::new(1_000, 1, &registry).expect("monitor");
    assert!(series(&scrape(&registry), "ogive_input_psi", &[]).is_none());
    let (one, two) = (drift_model("1"), drift_model("2"));
    for _ in 0..10 {
        drift.record(&one, &values(&one, 5.0, "retail", 0), 0.1);
    }
    for _ in 0..30 {
        drift.record(&two, &values(&two, 35.0, "retail", 0), 0.1);
    }
    let report = drift.report("lease-test");
    let counts: Vec<(String, usize)> = report
        .iter()
        .map(|r| (r.version.clone(), r.window_observations))
        .collect();
    assert_eq!(counts, [("1".to_string(), 10), ("2".to_string(), 30)]);
    // All in the first bin against .1, and all in the last against .4: the floor decides the rest.
    let hand_one = term(1.0, 0.1) + term(1e-4, 0.2) + term(1e-4, 0.3) + term(1e-4, 0.4);
    let hand_two = term(1e-4, 0.1) + term(1e-4, 0.2) + term(1e-4, 0.3) + term(1.0, 0.4);
    let samples = scrape(&registry);
    for (version, hand) in [("1", hand_one), ("2", hand_two)] {
        let gauge = series(
            &samples,
            "ogive_input_psi",
            &[("version", version), ("covariate", "amount")],
        )
        .expect("amount PSI per version");
        assert_relative(
            gauge,
            hand,
            tolerance::HAND,
            "ogive_input_psi per version (hand)",
        );
    }
    assert!(drift.report("no-such-model").is_empty());
}

#[test]
fn concurrent_recorders_lose_no_sample_without_counting_it() {
    let registry = Registry::new();
    let drift = DriftMonitor::new(100_000, 4, &registry).expect("monitor");
    let model = drift_model("1");
    let threads = 4;
    let per_thread = 5_000;
    std::thread::scope(|scope| {
        for t in 0..threads {
            let (drift, model) = (&drift, &model);
            scope.spawn(move || {
                let v = values(model, 10.0 * t as f64 + 1.0, "farming", 1);
                for _ in 0..per_thread {
                    drift.record(model, &v, 0.4);
                }
            });
        }
    });
    let report = drift.report("lease-test");
    let r = &report[0];
    assert_eq!(
        r.window_observations as u64 + r.dropped_samples,
        (threads * per_thread) as u64,
        "every sample is either in the window or counted as dropped"
    );
    for d in r.covariates.iter().chain(&r.prediction) {
        let total: f64 = d.bins.iter().map(|b| b.window_share).sum();
        assert!(
            (total - 1.0).abs() < 1e-12,
            "window shares of {:?} sum to {total}",
            d.covariate
        );
    }
    let samples = scrape(&registry);
    let dropped = series(
        &samples,
        "ogive_drift_samples_dropped_total",
        &[("version", "1")],
    );
    assert_eq!(dropped.unwrap_or(0.0), r.dropped_samples as f64);
}

#[test]
fn a_lone_thread_fills_only_its_home_shard() {
    // Documented: each thread keeps to its own shard, so one busy thread sees window/shards.
    let registry = Registry::new();
    let drift = DriftMonitor::new(100, 4, &registry).expect("monitor");
    let model = drift_model("1");
    for i in 0..1_000 {
        drift.record(&model, &values(&model, f64::from(i % 40), "retail", 0), 0.1);
    }
    let report = drift.report("lease-test");
    assert_eq!(
        (report[0].window_observations, report[0].window_capacity),
        (25, 100)
    );
    assert_eq!(report[0].dropped_samples, 0);
}

// ---------------------------------------------------------------------------------------------
// Calibration
// ---------------------------------------------------------------------------------------------

struct Case {
    name: String,
    predictions: Vec<f64>,
    outcomes: Vec<bool>,
    reference: Json,
}

fn calibration_cases() -> Vec<Case> {
    let path = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/reference/monitoring/calibration.json"
    );
    let text =
        std::fs::read_to_string(path).expect("run tests/reference/monitoring/make_fixtures.py");
    let fixture: Json = serde_json::from_str(&text).expect("fixture JSON");
    fixture["cases"]
        .as_array()
        .expect("cases")
        .iter()
        .map(|c| Case {
            name: c["name"].as_str().expect("name").to_string(),
            predictions: c["predictions"]
                .as_array()
                .expect("predictions")
                .iter()
                .map(|p| p.as_f64().expect("a prediction"))
                .collect(),
            outcomes: c["outcomes"]
                .as_array()
                .expect("outcomes")
                .iter()
                .map(|y| y.as_u64() == Some(1))
                .collect(),
            reference: c.clone(),
        })
        .collect()
}

fn reference(case: &Case, key: &str) -> f64 {
    case.reference[key]
        .as_f64()
        .unwrap_or_else(|| panic!("{key} in {}", case.name))
}

#[test]
fn figures_match_scikit_learn_numpy_and_statsmodels() {
    let cases = calibration_cases();
    assert_eq!(cases.len(), 4);
    for case in &cases {
        let f = Figures::compute(&case.predictions, &case.outcomes).expect("figures");
        let what = |m: &str| format!("{m}, case '{}'", case.name);
        assert_eq!(f.count, case.predictions.len());
        // scikit-learn 1.9 brier_score_loss; relative 1e-12.
        assert_relative(
            f.brier_score,
            reference(case, "brier_score"),
            tolerance::SKLEARN,
            what("Brier score vs sklearn brier_score_loss"),
        );
        // scikit-learn 1.9 log_loss; relative 1e-12 (no prediction within 1e-15 of 0 or 1).
        assert_relative(
            f.log_loss,
            reference(case, "log_loss"),
            tolerance::SKLEARN,
            what("log loss vs sklearn log_loss"),
        );
        // scikit-learn 1.9 roc_auc_score; relative 1e-12.
        assert_relative(
            f.roc_auc.expect("auc"),
            reference(case, "roc_auc"),
            tolerance::SKLEARN,
            what("AUC vs sklearn roc_auc_score"),
        );
        // numpy mean(y) − mean(p); absolute 1e-13.
        let itl = reference(case, "in_the_large");
        assert!(
            (f.calibration_in_the_large - itl).abs() <= tolerance::NUMPY_ABSOLUTE,
            "{}: got {}, numpy {itl}",
            what("calibration-in-the-large"),
            f.calibration_in_the_large
        );
        // statsmodels 0.15 Logit(y, add_constant(logit(p))).fit(method="newton"); relative 1e-9.
        assert_relative(
            f.calibration_slope.expect("slope"),
            reference(case, "calibration_slope"),
            tolerance::STATSMODELS,
            what("slope vs statsmodels Logit"),
        );
        assert_relative(
            f.calibration_intercept.expect("intercept"),
            reference(case, "calibration_intercept"),
            tolerance::STATSMODELS,
            what("intercept vs statsmodels Logit"),
        );
    }
}

#[test]
fn log_loss_clips_predictions_at_1e_15() {
    // By hand: a prediction of 0 for an outcome of 1 costs −ln(1e-15) = 15 ln 10.
    assert_eq!(calibration::PROBABILITY_CLIP, 1e-15);
    assert_relative(
        calibration::log_loss(&[0.0], &[true]),
        15.0 * 10.0_f64.ln(),
        1e-15,
        "log loss at p = 0, y = 1 (hand)",
    );
    assert_relative(
        calibration::log_loss(&[1.0], &[false]),
        15.0 * 10.0_f64.ln(),
        1e-3,
        "log loss at p = 1, y = 0 (hand; 1 − 1e-15 is not exact in binary)",
    );
    assert!(calibration::log_loss(&[1.0], &[true]) < 2e-15);
}

#[test]
fn one_outcome_class_leaves_slope_and_auc_undefined() {
    let f = Figures::compute(&[0.2, 0.4, 0.9], &[true, true, true]).expect("figures");
    assert_eq!(f.roc_auc, None);
    assert_eq!(f.calibration_slope, None);
    // By hand: ((0.8)² + (0.6)² + (0.1)²)/3 and 1 − 0.5.
    assert_relative(
        f.brier_score,
        (0.64 + 0.36 + 0.01) / 3.0,
        1e-15,
        "Brier (hand)",
    );
    assert_relative(
        f.calibration_in_the_large,
        0.5,
        1e-15,
        "in the large (hand)",
    );
    assert!(Figures::compute(&[], &[]).is_none());

    let registry = Registry::new();
    let monitor = CalibrationMonitor::new(100, &registry).expect("monitor");
    monitor.record("lease-test", "1", 0.2, true);
    let samples = scrape(&registry);
    assert!(series(&samples, "ogive_brier_score", &[("version", "1")]).is_some());
    assert!(series(&samples, "ogive_roc_auc", &[("version", "1")]).is_none());
    assert!(series(&samples, "ogive_calibration_slope", &[("version", "1")]).is_none());
}

#[test]
fn the_calibration_window_keeps_the_most_recent_outcomes() {
    let cases = calibration_cases();
    let (older, newer) = (&cases[1], &cases[0]);
    let registry = Registry::new();
    let monitor = CalibrationMonitor::new(newer.predictions.len(), &registry).expect("monitor");
    for (p, y) in older.predictions.iter().zip(&older.outcomes) {
        monitor.record("lease-test", "1", *p, *y);
    }
    for (p, y) in newer.predictions.iter().zip(&newer.outcomes) {
        monitor.record("lease-test", "1", *p, *y);
    }
    let report = monitor.report("lease-test");
    assert_eq!(report.len(), 1);
    assert_eq!(
        report[0].outcomes_total,
        (older.predictions.len() + newer.predictions.len()) as u64
    );
    let f = report[0].figures.expect("figures");
    assert_eq!(f.count, newer.predictions.len());
    // scikit-learn 1.9 on the newer case alone; relative 1e-12.
    assert_relative(
        f.brier_score,
        reference(newer, "brier_score"),
        tolerance::SKLEARN,
        "windowed Brier vs sklearn",
    );
    assert_relative(
        f.roc_auc.expect("auc"),
        reference(newer, "roc_auc"),
        tolerance::SKLEARN,
        "windowed AUC vs sklearn",
    );
}

// ---------------------------------------------------------------------------------------------
// Receipts and outcomes
// ---------------------------------------------------------------------------------------------

const DAY_MS: u64 = 86_400_000;

/// An outcome book over `keys`, a fresh seen set of `seen` ids, `calibration`, and 400 days.
fn book<'a>(
    keys: &'a ReceiptKeys,
    seen: &'a SeenReceipts,
    calibration: &'a CalibrationMonitor,
) -> OutcomeBook<'a> {
    OutcomeBook {
        keys,
        seen,
        calibration,
        max_age: DEFAULT_MAX_AGE,
    }
}

#[test]
fn receipts_of_another_model_or_past_the_maximum_age_are_refused() {
    let registry = Registry::new();
    let calibration = CalibrationMonitor::new(100, &registry).expect("monitor");
    let keys = ReceiptKeys::ephemeral().expect("key");
    let seen = SeenReceipts::new(100);
    let book = book(&keys, &seen, &calibration);
    let scored_at = 1_700_000_000_000;
    let receipts = keys
        .seal_all("lease-test", "1", scored_at, [0.25, 0.5, 0.75].into_iter())
        .expect("sealed");
    assert_eq!(
        book.report("rebate-test", &receipts[0], true, scored_at),
        Err(OutcomeError::OtherModel {
            receipt_model: "lease-test".into(),
            route_model: "rebate-test".into(),
        })
    );
    // Exactly 400 days is still taken; 400 days and a second is not.
    let recorded = book
        .report("lease-test", &receipts[1], false, scored_at + 400 * DAY_MS)
        .expect("taken on the last day");
    assert_eq!((recorded.probability, recorded.outcome), (0.5, 0));
    assert_eq!(recorded.scored_at, "2023-11-14T22:13:20Z");
    let late = book.report(
        "lease-test",
        &receipts[2],
        true,
        scored_at + 400 * DAY_MS + 1_000,
    );
    assert!(
        matches!(&late, Err(OutcomeError::Expired { age_seconds, .. }) if *age_seconds == 400 * 86_400 + 1),
        "{late:?}"
    );
    // A refusal records nothing and remembers nothing: the receipt is still good for its model.
    assert_eq!(seen.len(), 1);
    assert!(book
        .report("lease-test", &receipts[0], true, scored_at)
        .is_ok());
    let report = calibration.report("lease-test");
    assert_eq!(report[0].outcomes_total, 2);
}

#[test]
fn a_repeat_is_refused_while_remembered_and_taken_once_forgotten() {
    let registry = Registry::new();
    let calibration = CalibrationMonitor::new(100, &registry).expect("monitor");
    let keys = ReceiptKeys::ephemeral().expect("key");
    let seen = SeenReceipts::new(2);
    let book = book(&keys, &seen, &calibration);
    let receipts = keys
        .seal_all("lease-test", "1", 0, [0.1, 0.2, 0.3].into_iter())
        .expect("sealed");
    book.report("lease-test", &receipts[0], true, 0)
        .expect("first report");
    assert!(matches!(
        book.report("lease-test", &receipts[0], true, 0),
        Err(OutcomeError::AlreadyReported { .. })
    ));
    book.report("lease-test", &receipts[1], true, 0)
        .expect("second");
    book.report("lease-test", &receipts[2], true, 0)
        .expect("third");
    // The set holds two ids, so the first has been forgotten: a replay past it is counted
    // again. This is the documented limit: callers report each outcome once.
    assert!(book.report("lease-test", &receipts[0], true, 0).is_ok());
    assert_eq!(calibration.report("lease-test")[0].outcomes_total, 4);
}

#[test]
fn reported_outcomes_reach_the_calibration_gauges() {
    let cases = calibration_cases();
    let case = &cases[2];
    let registry = Registry::new();
    let monitor = CalibrationMonitor::new(10_000, &registry).expect("monitor");
    let keys = ReceiptKeys::ephemeral().expect("key");
    let seen = SeenReceipts::new(10_000);
    let book = book(&keys, &seen, &monitor);
    let receipts = keys
        .seal_all("lease-test", "7", 0, case.predictions.iter().copied())
        .expect("sealed");
    for (receipt, y) in receipts.iter().zip(&case.outcomes) {
        book.report("lease-test", receipt, *y, 0)
            .expect("a good receipt");
    }
    assert!(matches!(
        book.report("lease-test", &receipts[0], true, 0),
        Err(OutcomeError::AlreadyReported { .. })
    ));
    let samples = scrape(&registry);
    let labels = [("model", "lease-test"), ("version", "7")];
    assert_eq!(
        series(&samples, "ogive_outcomes_total", &labels),
        Some(case.outcomes.len() as f64)
    );
    let gauge = |name: &str| series(&samples, name, &labels).unwrap_or_else(|| panic!("{name}"));
    // Prometheus prints values with enough digits to round-trip, so the tolerances hold.
    assert_relative(
        gauge("ogive_brier_score"),
        reference(case, "brier_score"),
        tolerance::SKLEARN,
        "ogive_brier_score vs sklearn brier_score_loss",
    );
    assert_relative(
        gauge("ogive_log_loss"),
        reference(case, "log_loss"),
        tolerance::SKLEARN,
        "ogive_log_loss vs sklearn log_loss",
    );
    assert_relative(
        gauge("ogive_roc_auc"),
        reference(case, "roc_auc"),
        tolerance::SKLEARN,
        "ogive_roc_auc vs sklearn roc_auc_score",
    );
    assert_relative(
        gauge("ogive_calibration_slope"),
        reference(case, "calibration_slope"),
        tolerance::STATSMODELS,
        "ogive_calibration_slope vs statsmodels Logit",
    );
    assert!(
        (gauge("ogive_calibration_in_the_large") - reference(case, "in_the_large")).abs()
            <= tolerance::NUMPY_ABSOLUTE,
        "ogive_calibration_in_the_large vs numpy"
    );
    assert_eq!(
        series(&samples, "ogive_calibration_window_outcomes", &labels),
        Some(case.outcomes.len() as f64)
    );
}

// ---------------------------------------------------------------------------------------------
// Fleet counters: running totals that add across replicas
// ---------------------------------------------------------------------------------------------

/// The demo models' probabilities on their demo data, as `ogive score` computes them, with
/// each row's outcome.
fn demo_scored(model: &str, outcome: &str) -> Vec<(f64, bool)> {
    let root = env!("CARGO_MANIFEST_DIR");
    let out = std::process::Command::new(env!("CARGO_BIN_EXE_ogive"))
        .args(["score", "--model"])
        .arg(format!("{root}/model-files/{model}/versions/1.0.0.json"))
        .arg("--data")
        .arg(format!("{root}/demo-data/{model}.csv"))
        .args(["--out", "-"])
        .output()
        .expect("ogive score runs");
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let text = String::from_utf8(out.stdout).expect("utf-8");
    let mut lines = text.lines();
    let header: Vec<&str> = lines.next().expect("a header").split(',').collect();
    let column = |name: &str| header.iter().position(|h| *h == name).expect(name);
    let (y, p) = (column(outcome), column("probability"));
    lines
        .map(|line| {
            let fields: Vec<&str> = line.split(',').collect();
            (fields[p].parse().expect("a probability"), fields[y] == "1")
        })
        .collect()
}

/// The sum over `scrapes` of every sample named `name` with these labels.
fn fleet_sum(scrapes: &[Vec<Sample>], name: &str, labels: &[(&str, &str)]) -> f64 {
    scrapes
        .iter()
        .map(|samples| series(samples, name, labels).unwrap_or(0.0))
        .sum()
}

/// Each demo model's rows reported as outcomes to three replicas in turn; the figures the
/// recording rules take from the summed counters match scikit-learn on all the rows.
#[test]
fn fleet_counters_summed_over_replicas_give_the_figures_of_all_outcomes() {
    let path = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/reference/monitoring/fleet.json"
    );
    let text = std::fs::read_to_string(path)
        .expect("run tests/reference/monitoring/make_fleet_fixture.py");
    let fixture: Json = serde_json::from_str(&text).expect("fixture JSON");
    for case in fixture["cases"].as_array().expect("cases") {
        let model = case["model"].as_str().expect("model");
        let rows = demo_scored(model, case["outcome"].as_str().expect("outcome"));
        assert_eq!(rows.len() as u64, case["rows"].as_u64().expect("rows"));
        let registries: Vec<Registry> = (0..3).map(|_| Registry::new()).collect();
        let monitors: Vec<Arc<CalibrationMonitor>> = registries
            .iter()
            .map(|r| CalibrationMonitor::new(1_000, r).expect("monitor"))
            .collect();
        for (i, &(p, y)) in rows.iter().enumerate() {
            monitors[i % 3].record(model, "1.0.0", p, y);
        }
        let scrapes: Vec<Vec<Sample>> = registries.iter().map(scrape).collect();
        let labels = [("model", model), ("version", "1.0.0")];
        let total = |name: &str| fleet_sum(&scrapes, name, &labels);
        let n = total("ogive_outcomes_total");
        assert_eq!(n, rows.len() as f64);
        let expected = |key: &str| case[key].as_f64().unwrap_or_else(|| panic!("{key}"));
        let what = |m: &str| format!("{model}: {m}");
        // scikit-learn 1.9 brier_score_loss and log_loss on all 20,000 rows; relative 1e-12
        // (numpy's probabilities and ogive's agree to about 1e-15).
        assert_relative(
            total("ogive_outcome_squared_error_total") / n,
            expected("brier_score"),
            tolerance::SKLEARN,
            what("Brier score from the counters vs sklearn"),
        );
        assert_relative(
            total("ogive_outcome_log_loss_total") / n,
            expected("log_loss"),
            tolerance::SKLEARN,
            what("log loss from the counters vs sklearn"),
        );
        // numpy mean(y) − mean(p); absolute 1e-12 (a difference of means of 20,000 terms).
        let in_the_large =
            (total("ogive_outcome_positives_total") - total("ogive_outcome_predicted_total")) / n;
        assert!(
            (in_the_large - expected("in_the_large")).abs() <= 1e-12,
            "{}: {in_the_large} vs {}",
            what("calibration-in-the-large"),
            expected("in_the_large")
        );
        // The binned AUC as the recording rule computes it: per bucket bound le, the
        // positives in the bin times twice the negatives below plus in it, halved.
        let bounds: Vec<String> = calibration::outcome_bin_bounds()
            .iter()
            .map(f64::to_string)
            .chain(["+Inf".to_string()])
            .collect();
        let at = |name: &str, outcome: &str, label: &str, le: &str| {
            fleet_sum(
                &scrapes,
                name,
                &[
                    ("model", model),
                    ("version", "1.0.0"),
                    ("outcome", outcome),
                    (label, le),
                ],
            )
        };
        let (mut wins, mut ties) = (0.0, 0.0);
        for le in &bounds {
            let bucket = |o| at("ogive_outcome_probability_bucket", o, "le", le);
            // The bucket before: its bound is in `bound`, as `le` is kept for histograms.
            let below = |o| at("ogive_outcome_probability_below_total", o, "bound", le);
            wins += (bucket("1") - below("1")) * (bucket("0") + below("0")) / 2.0;
            ties += (bucket("1") - below("1")) * (bucket("0") - below("0")) / 2.0;
        }
        let pairs = at("ogive_outcome_probability_bucket", "1", "le", "+Inf")
            * at("ogive_outcome_probability_bucket", "0", "le", "+Inf");
        let (binned, bound) = (wins / pairs, ties / pairs);
        // The same binning in numpy (make_fleet_fixture.py): relative 1e-12, the same counts
        // summed in another order.
        assert_relative(
            binned,
            expected("binned_auc"),
            1e-12,
            what("binned AUC vs numpy"),
        );
        assert_relative(
            bound,
            expected("tie_bound"),
            1e-12,
            what("tie bound vs numpy"),
        );
        // Against sklearn roc_auc_score: within the tie bound (a theorem), and within 0.005,
        // the resolution the bins were chosen for.
        let exact = expected("exact_auc");
        assert!(
            (binned - exact).abs() <= bound.min(0.005),
            "{}: binned {binned}, sklearn {exact}, bound {bound}",
            what("binned AUC")
        );
        // sklearn.calibration.calibration_curve(n_bins=10): each non-empty tenth's mean
        // outcome and mean prediction; counts exact, means relative 1e-12.
        for bin in case["reliability"].as_array().expect("reliability") {
            let tenth = bin["tenth"].as_u64().expect("tenth") as usize;
            let label = calibration::reliability_bin_label(tenth);
            let labels = [
                ("model", model),
                ("version", "1.0.0"),
                ("bin", label.as_str()),
            ];
            let count = fleet_sum(&scrapes, "ogive_reliability_outcomes_total", &labels);
            assert_eq!(
                count,
                bin["count"].as_f64().expect("count"),
                "{model} {label}"
            );
            assert_relative(
                fleet_sum(&scrapes, "ogive_reliability_positives_total", &labels) / count,
                bin["prob_true"].as_f64().expect("prob_true"),
                1e-12,
                what(&format!(
                    "observed share in {label} vs sklearn calibration_curve"
                )),
            );
            assert_relative(
                fleet_sum(&scrapes, "ogive_reliability_predicted_total", &labels) / count,
                bin["prob_pred"].as_f64().expect("prob_pred"),
                1e-12,
                what(&format!(
                    "mean prediction in {label} vs sklearn calibration_curve"
                )),
            );
        }
    }
}

#[test]
fn the_outcome_bins_put_a_probability_on_an_edge_in_the_lower_bin() {
    // Prometheus buckets count p <= le, so an edge belongs to the bin below it (common
    // practice of the exposition format); 0.07 must not drift into the next bin through
    // 0.07 * 100 = 7.000000000000001.
    assert_eq!(calibration::outcome_bin(0.0), 0);
    assert_eq!(calibration::outcome_bin(0.01), 0);
    assert_eq!(calibration::outcome_bin(0.010_000_000_000_000_2), 1);
    assert_eq!(calibration::outcome_bin(0.07), 6);
    assert_eq!(calibration::outcome_bin(0.99), 98);
    assert_eq!(calibration::outcome_bin(0.995), 99);
    assert_eq!(calibration::outcome_bin(1.0), 99);
    assert_eq!(calibration::reliability_bin_label(0), "[0,0.1]");
    assert_eq!(calibration::reliability_bin_label(9), "(0.9,1]");
}

/// The drift bin counters of three replicas, summed, give the PSI of all the observations: the
/// hand computation of the shares test input below, as the recording rule takes it.
#[test]
fn drift_bin_counters_summed_over_replicas_give_the_psi_of_all_observations() {
    let model = drift_model("1");
    let registries: Vec<Registry> = (0..3).map(|_| Registry::new()).collect();
    let monitors: Vec<Arc<DriftMonitor>> = registries
        .iter()
        .map(|r| DriftMonitor::new(1_000, 1, r).expect("monitor"))
        .collect();
    // 100 observations in turn over the replicas: amounts 5, 15, 25, 35 in the proportions
    // 40 : 30 : 20 : 10 (training .1 .2 .3 .4).
    let amounts = [(5.0, 40), (15.0, 30), (25.0, 20), (35.0, 10)];
    let mut i = 0;
    for (amount, count) in amounts {
        for _ in 0..count {
            monitors[i % 3].record(&model, &values(&model, amount, "retail", 0), 0.1);
            i += 1;
        }
    }
    let scrapes: Vec<Vec<Sample>> = registries.iter().map(scrape).collect();
    let bins = ["[0,10)", "[10,20)", "[20,30)", "[30,40]"];
    let training = [0.1, 0.2, 0.3, 0.4];
    let mut psi = 0.0;
    for (bin, e) in bins.iter().zip(training) {
        let labels = [
            ("model", "lease-test"),
            ("version", "1"),
            ("covariate", "amount"),
            ("bin", *bin),
        ];
        let hits = fleet_sum(&scrapes, "ogive_input_bin_observations_total", &labels);
        // Every replica exports the same training share, from the model file.
        for samples in &scrapes {
            assert_eq!(
                series(samples, "ogive_input_training_share", &labels),
                Some(e)
            );
        }
        let a = hits / 100.0;
        psi += (a.max(SHARE_FLOOR) - e) * (a.max(SHARE_FLOOR) / e).ln();
    }
    // By hand: shares .4 .3 .2 .1 against .1 .2 .3 .4.
    let hand = term(0.4, 0.1) + term(0.3, 0.2) + term(0.2, 0.3) + term(0.1, 0.4);
    assert_relative(psi, hand, tolerance::HAND, "fleet PSI of amount vs hand");
    // The prediction's bins: every probability was 0.1, in [0,0.25).
    let labels = [
        ("model", "lease-test"),
        ("version", "1"),
        ("bin", "[0,0.25)"),
    ];
    assert_eq!(
        fleet_sum(&scrapes, "ogive_prediction_bin_observations_total", &labels),
        100.0
    );
    assert_eq!(
        series(&scrapes[0], "ogive_prediction_training_share", &labels),
        Some(0.4)
    );
}

// ---------------------------------------------------------------------------------------------
// Over real HTTP: the outcome and report routes, and the series in /metrics
// ---------------------------------------------------------------------------------------------

mod http {
    use std::sync::Arc;
    use std::time::Duration;

    use ogive::monitoring::monitor::MonitorSettings;
    use ogive::receipt::ReceiptKeys;
    use ogive::service::{Config, Monitoring};
    use serde_json::{json, Value as Json};

    use super::drift_file;
    use crate::support::contract::Contract;
    use crate::support::server::{seed, test_config, TestServer, TOKEN};

    /// A real server on 127.0.0.1:0 (public and admin listeners) serving the drift test model,
    /// monitoring on (with an ephemeral receipt key) or off.
    fn server(monitoring: bool) -> TestServer {
        let keys = ReceiptKeys::ephemeral().expect("key");
        server_with(monitoring.then(|| Arc::new(keys)))
    }

    /// As [`server`], monitoring on when given receipt keys.
    fn server_with(keys: Option<Arc<ReceiptKeys>>) -> TestServer {
        let models = tempfile::tempdir().expect("tempdir");
        seed(
            models.path(),
            "lease-test",
            &[("1", drift_file("1"))],
            Some("1"),
        );
        let mut settings = crate::support::server::test_settings();
        settings.shutdown_timeout_ms = 2_000;
        let monitoring = keys.map(|keys| Monitoring {
            windows: MonitorSettings {
                seen_receipts: 1_000,
                ..MonitorSettings::default()
            },
            keys,
        });
        let config = Config {
            monitoring,
            ..test_config(models.path(), settings)
        };
        TestServer::launch(models, config)
    }

    fn agent() -> ureq::Agent {
        ureq::AgentBuilder::new()
            .timeout(Duration::from_secs(10))
            .build()
    }

    /// POST a JSON body; returns the status and the parsed body (problem details included).
    fn post(server: &TestServer, path: &str, request_id: Option<&str>, body: &Json) -> (u16, Json) {
        let url = format!("http://{}{path}", server.addr);
        let mut request = agent().post(&url).set("Content-Type", "application/json");
        if let Some(id) = request_id {
            request = request.set("X-Request-Id", id);
        }
        let response = match request.send_string(&body.to_string()) {
            Ok(r) => r,
            Err(ureq::Error::Status(_, r)) => r,
            Err(e) => panic!("POST {path}: {e}"),
        };
        let status = response.status();
        let body = response.into_json().expect("a JSON body");
        (status, body)
    }

    fn get(server: &TestServer, path: &str) -> (u16, String) {
        fetch(agent().get(&format!("http://{}{path}", server.addr)), path)
    }

    /// GET from the admin listener, with the token unless `token` is false.
    fn admin_get(server: &TestServer, path: &str, token: bool) -> (u16, String) {
        let request = agent().get(&format!(
            "http://{}{path}",
            server.admin_addr.expect("an admin listener")
        ));
        let request = if token {
            request.set("Authorization", &format!("Bearer {TOKEN}"))
        } else {
            request
        };
        fetch(request, path)
    }

    fn fetch(request: ureq::Request, path: &str) -> (u16, String) {
        let response = match request.call() {
            Ok(r) => r,
            Err(ureq::Error::Status(_, r)) => r,
            Err(e) => panic!("GET {path}: {e}"),
        };
        let status = response.status();
        (status, response.into_string().expect("a body"))
    }

    fn observation(amount: f64) -> Json {
        json!({"amount": amount, "sector": "retail", "guarantor": 0, "visits": 1})
    }

    #[test]
    fn outcomes_are_matched_to_answers_and_move_the_series() {
        let server = server(true);
        let probability = "/models/lease-test/probability";
        let (status, single) = post(
            &server,
            probability,
            Some("one"),
            &json!({"observation": observation(5.0)}),
        );
        assert_eq!(status, 200);
        let observations: Vec<Json> = [5.0, 15.0, 25.0, 35.0].map(observation).to_vec();
        let (status, batch) = post(
            &server,
            probability,
            Some("many"),
            &json!({"observations": observations}),
        );
        assert_eq!(status, 200);

        let receipt = |answer: &Json| answer["receipt"].as_str().expect("a receipt").to_string();
        let outcomes = "/models/lease-test/outcomes";
        let (status, matched) = post(
            &server,
            outcomes,
            None,
            &json!({"receipt": receipt(&single), "outcome": 1}),
        );
        assert_eq!(status, 200, "{matched}");
        assert_eq!(matched["probability"], single["probability"]);
        assert_eq!(matched["version"], "1");
        assert_eq!(matched["receipt_id"].as_str().map(str::len), Some(32));
        let (status, problem) = post(
            &server,
            outcomes,
            None,
            &json!({"receipt": receipt(&single), "outcome": 0}),
        );
        assert_eq!(
            (status, problem["type"].as_str()),
            (409, Some("urn:ogive:problem:outcome-already-reported"))
        );
        // The caller's request id decides nothing: a second answer under the same id has its
        // own receipt.
        let (_, again) = post(
            &server,
            probability,
            Some("one"),
            &json!({"observation": observation(6.0)}),
        );
        assert_eq!(again["request_id"], "one");
        assert_ne!(again["receipt"], single["receipt"]);

        let mut altered = receipt(&batch["results"][2]).into_bytes();
        altered[10] = if altered[10] == b'A' { b'B' } else { b'A' };
        let altered = String::from_utf8(altered).expect("ascii");
        let reports = json!({"outcomes": [
            {"receipt": receipt(&batch["results"][0]), "outcome": 0},
            {"receipt": receipt(&batch["results"][1]), "outcome": true},
            {"receipt": receipt(&batch["results"][3]), "outcome": 1},
            {"receipt": altered, "outcome": 1},
        ]});
        let (status, results) = post(&server, outcomes, None, &reports);
        assert_eq!(status, 200, "{results}");
        assert_eq!(results["recorded"], 3);
        let statuses: Vec<u64> = results["results"]
            .as_array()
            .expect("results")
            .iter()
            .map(|r| r["status"].as_u64().expect("status"))
            .collect();
        assert_eq!(statuses, [200, 200, 200, 422]);
        assert_eq!(
            results["results"][3]["type"],
            "urn:ogive:problem:invalid-receipt"
        );
        assert_eq!(
            results["results"][2]["probability"],
            batch["results"][3]["probability"]
        );

        // The Brier score the server exports, against the same formula over what it answered.
        let predicted = [
            (&single["probability"], 1.0),
            (&batch["results"][0]["probability"], 0.0),
            (&batch["results"][1]["probability"], 1.0),
            (&batch["results"][3]["probability"], 1.0),
        ];
        let brier = predicted
            .iter()
            .map(|(p, y)| (p.as_f64().expect("p") - y).powi(2))
            .sum::<f64>()
            / 4.0;
        let (status, text) = get(&server, "/metrics");
        assert_eq!(status, 200);
        let line = |name: &str| {
            text.lines()
                .find(|l| l.starts_with(name))
                .and_then(|l| l.rsplit_once(' '))
                .map(|(_, v)| v.parse::<f64>().expect("a number"))
                .unwrap_or_else(|| panic!("{name} missing from /metrics"))
        };
        assert_eq!(line("ogive_outcomes_total{"), 4.0);
        assert!((line("ogive_brier_score{") - brier).abs() <= 1e-15);
        assert_eq!(line("ogive_drift_window_observations{"), 6.0);
        assert!(line("ogive_input_psi{covariate=\"amount\"") > 0.0);

        let (status, report) = admin_get(&server, "/models/lease-test/monitoring", true);
        assert_eq!(status, 200);
        let report: Json = serde_json::from_str(&report).expect("JSON");
        let version = &report["versions"][0];
        assert_eq!(
            (version["version"].as_str(), version["live"].as_bool()),
            (Some("1"), Some(true))
        );
        assert_eq!(version["drift"]["window_observations"], 6);
        assert_eq!(version["calibration"]["figures"]["count"], 4);
        assert_eq!(version["calibration"]["outcomes_total"], 4);
        let reported_brier = version["calibration"]["figures"]["brier_score"]
            .as_f64()
            .expect("brier");
        assert!((reported_brier - brier).abs() <= 1e-15);
        assert_eq!(report["receipts"]["seen"], 4);
        assert_eq!(report["receipts"]["ephemeral_key"], true);
        server.stop();
    }

    #[test]
    fn the_served_document_describes_the_monitoring_routes_truly() {
        let server = server(true);
        let public = Contract::public(&server);
        let admin = Contract::admin(&server);
        let (doc, admin_doc) = (public.document(), admin.document());
        assert!(doc["paths"]["/models/{name}/outcomes"]["post"].is_object());
        assert!(admin_doc["paths"]["/models/{name}/monitoring"]["get"].is_object());
        assert!(
            doc["paths"]["/models/{name}/monitoring"].is_null(),
            "an admin route"
        );
        let probability = "/models/lease-test/probability";
        let (_, one) = post(
            &server,
            probability,
            Some("doc-1"),
            &json!({"observation": observation(5.0)}),
        );
        let (_, two) = post(
            &server,
            probability,
            Some("doc-2"),
            &json!({"observations": [observation(1.0), observation(39.0)]}),
        );
        let single = json!({"receipt": one["receipt"], "outcome": 1});
        let batch = json!({"outcomes": [
            {"receipt": two["results"][0]["receipt"], "outcome": 0},
            {"receipt": "not-a-receipt", "outcome": 1},
        ]});
        public.check("OutcomeReport", &single, "OutcomeReport");
        public.check("OutcomeReports", &batch, "OutcomeReports");
        for bad in [
            json!({"receipt": "x", "outcome": 2}),
            json!({"receipt": "x"}),
            json!({"receipt": "x", "outcome": 1, "extra": 0}),
        ] {
            assert!(
                !public.validator("OutcomeReport").is_valid(&bad),
                "{bad} must be invalid"
            );
        }
        let (status, matched) = post(&server, "/models/lease-test/outcomes", None, &single);
        assert_eq!(status, 200);
        public.check("RecordedOutcome", &matched, "RecordedOutcome");
        let (status, results) = post(&server, "/models/lease-test/outcomes", None, &batch);
        assert_eq!(status, 200);
        public.check("OutcomeBatchResponse", &results, "OutcomeBatchResponse");
        let (status, problem) = post(&server, "/models/lease-test/outcomes", None, &single);
        assert_eq!(status, 409);
        public.check("Problem", &problem, "Problem");
        let (status, report) = admin_get(&server, "/models/lease-test/monitoring", true);
        assert_eq!(status, 200);
        let report: Json = serde_json::from_str(&report).expect("JSON");
        admin.check("MonitorReport", &report, "MonitorReport");
        // The report is the admin listener's: the public one has no such route, and the admin
        // one wants the token.
        assert_eq!(get(&server, "/models/lease-test/monitoring").0, 404);
        assert_eq!(
            admin_get(&server, "/models/lease-test/monitoring", false).0,
            401
        );
        server.stop();
    }

    #[test]
    fn malformed_outcome_reports_name_the_field() {
        let server = server(true);
        let outcomes = "/models/lease-test/outcomes";
        let cases = [
            (
                json!({"receipt": "x", "outcome": 2}),
                422,
                "invalid-body",
                "/outcome",
            ),
            (
                json!({"receipt": "x", "outcome": "1"}),
                422,
                "invalid-body",
                "/outcome",
            ),
            (json!({"receipt": "x"}), 422, "invalid-body", ""),
            (json!({"outcome": 1}), 422, "invalid-body", ""),
            (
                json!({"receipt": 7, "outcome": 1}),
                422,
                "invalid-body",
                "/receipt",
            ),
            (
                json!({"receipt": "", "outcome": 1}),
                422,
                "invalid-receipt",
                "/receipt",
            ),
            (
                json!({"receipt": "x", "outcome": 1}),
                422,
                "invalid-receipt",
                "/receipt",
            ),
            (
                json!({"receipt": "x".repeat(2_000), "outcome": 1}),
                422,
                "invalid-receipt",
                "/receipt",
            ),
            (
                json!({"receipt": "x", "outcome": 1, "note": "late"}),
                422,
                "unknown-field",
                "/note",
            ),
            (json!({"outcomes": []}), 422, "empty-batch", "/outcomes"),
            (
                json!({"outcomes": {"receipt": "x"}}),
                422,
                "invalid-body",
                "/outcomes",
            ),
            (
                json!({"outcomes": [{"receipt": "x", "outcome": 1}, {"receipt": "y", "outcome": -1}]}),
                422,
                "invalid-body",
                "/outcomes/1/outcome",
            ),
            // Text outside the receipt alphabet is a malformed report: the whole batch is
            // refused, not answered item by item.
            (
                json!({"outcomes": [{"receipt": "x", "outcome": 1}, {"receipt": "a+b", "outcome": 0}]}),
                422,
                "invalid-receipt",
                "/outcomes/1/receipt",
            ),
            (
                json!({"receipt": "abc=", "outcome": 1}),
                422,
                "invalid-receipt",
                "/receipt",
            ),
            (
                json!({"outcomes": [], "receipt": "x"}),
                422,
                "conflicting-fields",
                "",
            ),
            (json!([1, 2]), 422, "invalid-body", ""),
        ];
        for (body, status, kind, pointer) in cases {
            let (got, problem) = post(&server, outcomes, None, &body);
            assert_eq!(got, status, "{body} → {problem}");
            assert_eq!(
                problem["type"],
                format!("urn:ogive:problem:{kind}"),
                "{body}"
            );
            assert_eq!(problem["pointer"].as_str().unwrap_or(""), pointer, "{body}");
        }
        let (status, problem) = post(
            &server,
            "/models/no-such/outcomes",
            None,
            &json!({"receipt": "x", "outcome": 1}),
        );
        assert_eq!(
            (status, problem["type"].as_str()),
            (404, Some("urn:ogive:problem:unknown-model"))
        );
        let (status, _) = get(&server, "/models/lease-test/outcomes");
        assert_eq!(status, 405);
        let (status, _) = admin_get(&server, "/models/no-such/monitoring", true);
        assert_eq!(status, 404);
        server.stop();
    }

    /// A key file of `lines` in `dir`, readable by its owner only.
    fn key_file(dir: &std::path::Path, name: &str, lines: &[&str]) -> Arc<ReceiptKeys> {
        use std::os::unix::fs::PermissionsExt;
        let path = dir.join(name);
        std::fs::write(&path, lines.join("\n")).expect("written");
        std::fs::set_permissions(&path, std::fs::Permissions::from_mode(0o600)).expect("chmod");
        Arc::new(ReceiptKeys::from_file(&path).expect("keys"))
    }

    #[test]
    fn a_receipt_opens_on_any_replica_with_the_key_and_survives_rotation_until_retired() {
        let dir = tempfile::tempdir().expect("tempdir");
        let old_key = "old-key-0123456789abcdef0123456789abcdef";
        let new_key = "new-key-0123456789abcdef0123456789abcdef";
        let scoring = server_with(Some(key_file(dir.path(), "before", &[old_key])));
        let (_, answer) = post(
            &scoring,
            "/models/lease-test/probability",
            None,
            &json!({"observation": observation(12.0)}),
        );
        scoring.stop();
        let report = json!({"receipt": answer["receipt"], "outcome": 1});
        // A replica that has rotated (new key first, old one kept) takes it.
        let rotated = server_with(Some(key_file(dir.path(), "rotated", &[new_key, old_key])));
        let (status, recorded) = post(&rotated, "/models/lease-test/outcomes", None, &report);
        assert_eq!(status, 200, "{recorded}");
        assert_eq!(recorded["probability"], answer["probability"]);
        rotated.stop();
        // Once the old key is retired, its receipts no longer open.
        let retired = server_with(Some(key_file(dir.path(), "retired", &[new_key])));
        let (status, problem) = post(&retired, "/models/lease-test/outcomes", None, &report);
        assert_eq!(
            (
                status,
                problem["type"].as_str(),
                problem["pointer"].as_str()
            ),
            (
                422,
                Some("urn:ogive:problem:invalid-receipt"),
                Some("/receipt")
            )
        );
        assert!(
            problem["detail"]
                .as_str()
                .is_some_and(|d| d.contains("key this server does not hold")),
            "{problem}"
        );
        retired.stop();
    }

    #[test]
    fn with_monitoring_off_the_routes_say_so_and_export_nothing() {
        let server = server(false);
        let (status, answer) = post(
            &server,
            "/models/lease-test/probability",
            None,
            &json!({"observation": observation(5.0)}),
        );
        assert_eq!(status, 200);
        assert!(answer.get("receipt").is_none(), "{answer}");
        let (status, problem) = post(
            &server,
            "/models/lease-test/outcomes",
            None,
            &json!({"receipt": "x", "outcome": 1}),
        );
        assert_eq!(
            (status, problem["type"].as_str()),
            (404, Some("urn:ogive:problem:monitoring-off"))
        );
        let (status, body) = admin_get(&server, "/models/lease-test/monitoring", true);
        assert_eq!(status, 404);
        assert!(body.contains("monitoring-off"));
        let (_, metrics) = get(&server, "/metrics");
        assert!(!metrics.contains("ogive_input_psi"));
        assert!(!metrics.contains("ogive_outcomes_total"));
        server.stop();
    }
}
