//! What monitoring adds to scoring one observation, measured beside the scoring itself in the
//! same run, and how often the drift window drops a sample when threads contend for it.
//!
//! ```text
//! score     Scorer::score with Options::default() (effects, intervals, contributions,
//!           warnings): the engine's work for one observation of a request
//! drift     DriftMonitor::record: find the version, try the lock, bin 4 values, move counts
//! seal      ReceiptKeys::seal_all for one observation: random id, HMAC-SHA-256, base64
//! request   Monitor::record_scored for a single-observation request: drift + seal
//! batch     Monitor::record_scored for requests of 100 observations, per observation
//! open      ReceiptKeys::open of one receipt: base64, key lookup, HMAC check, fields
//! outcome   OutcomeBook::report of one outcome: open, model and age checks, the seen set,
//!           the calibration window
//! ```
//!
//! A plain timing loop runs them round-robin over many repetitions and prints each one's
//! median time per observation and its ratio to `score`. Then 1, 2 and 4 threads each score
//! and record as fast as they can into one version's window (one shard per thread, as the
//! service has one per worker) and the share of dropped samples is printed (the request path
//! never waits; a sample finding every shard busy is dropped and counted).
//!
//! Run: `cargo bench --bench monitoring`. The end-to-end cost over HTTP is
//! `benches/monitoring_cost.sh`.

use std::hint::black_box;
use std::sync::Arc;
use std::time::{Duration, Instant};

use ogive::engine::{Options, Scorer};
use ogive::model::{Model, Value};
use ogive::monitoring::calibration::CalibrationMonitor;
use ogive::monitoring::drift::DriftMonitor;
use ogive::monitoring::monitor::{Monitor, MonitorSettings};
use ogive::monitoring::outcomes::{OutcomeBook, SeenReceipts};
use ogive::receipt::{now_ms, ReceiptKeys, DEFAULT_MAX_AGE};
use prometheus::Registry;
use serde_json::json;

/// Observations per timed batch.
const BATCH: usize = 1024;
/// Repetitions of each batch.
const REPETITIONS: usize = 201;
/// Observations per thread in the contention run.
const CONTENDED: usize = 400_000;

fn model() -> Arc<Model> {
    let file = json!({
        "format": "ogive-model", "format_version": 1, "name": "bench-lease", "version": "1",
        "outcome": {"name": "arrears", "meaning": "a benchmark outcome"}, "link": "logit",
        "covariates": [
            {"name": "amount", "kind": "continuous",
             "training": {"min": 0.0, "max": 40.0, "mean": 25.0, "std_dev": 9.0,
                          "histogram": {"edges": [0.0, 4.0, 8.0, 12.0, 16.0, 20.0, 24.0, 28.0, 32.0, 36.0, 40.0],
                                        "counts": [10, 20, 30, 40, 50, 60, 70, 80, 90, 100]}}},
            {"name": "years", "kind": "continuous",
             "training": {"min": 0.0, "max": 30.0, "mean": 8.0, "std_dev": 6.0,
                          "histogram": {"edges": [0.0, 3.0, 6.0, 9.0, 12.0, 15.0, 18.0, 21.0, 24.0, 27.0, 30.0],
                                        "counts": [100, 90, 80, 70, 60, 50, 40, 30, 20, 10]}}},
            {"name": "sector", "kind": "categorical",
             "levels": ["retail", "farming", "transport", "services"], "reference": "retail",
             "training": {"level_counts": {"retail": 400, "farming": 300, "transport": 200, "services": 100}}},
            {"name": "guarantor", "kind": "binary", "training": {"min": 0.0, "max": 1.0, "mean": 0.3}}
        ],
        "terms": [
            {"term": "intercept", "coefficient": -1.0}, {"term": "amount", "coefficient": 0.03},
            {"term": "years", "coefficient": -0.05}, {"term": "years^2", "coefficient": 0.001},
            {"term": "sector=farming", "coefficient": 0.4}, {"term": "sector=transport", "coefficient": -0.3},
            {"term": "sector=services", "coefficient": 0.1}, {"term": "guarantor", "coefficient": -0.5}
        ],
        "covariance": (0..8).map(|r| (0..8).map(|c| if r == c { 0.01 } else { 0.001 }).collect::<Vec<f64>>()).collect::<Vec<_>>(),
        "fitted_probabilities": {"edges": [0.0, 0.2, 0.4, 0.6, 0.8, 1.0], "counts": [300, 300, 200, 150, 50]},
        "provenance": {"fitted_by": "benches/monitoring.rs", "fitted_at": "1970-01-01T00:00:00Z", "observations": 1000}
    });
    let bytes = serde_json::to_vec(&file).expect("json");
    Arc::new(Model::from_json(&bytes).expect("the benchmark model is valid"))
}

fn batch(model: &Model) -> Vec<Vec<Value>> {
    let sectors = ["retail", "farming", "transport", "services"];
    (0..BATCH)
        .map(|i| {
            let observation = json!({
                "amount": (i * 37 % 400) as f64 / 10.0,
                "years": (i * 11 % 300) as f64 / 10.0,
                "sector": sectors[i % 4],
                "guarantor": i % 3 == 0,
            });
            let mut values = Vec::new();
            model
                .parse_observation(observation.as_object().expect("object"), &mut values)
                .expect("a valid observation");
            values
        })
        .collect()
}

fn median(samples: &mut [Duration]) -> f64 {
    samples.sort();
    samples[samples.len() / 2].as_secs_f64() / BATCH as f64
}

fn main() {
    let model = model();
    let batch = batch(&model);
    let options = Options::default();
    let mut scorer = Scorer::new(&model);
    let registry = Registry::new();
    let drift = DriftMonitor::new(10_000, 1, &registry).expect("drift");
    let keys = Arc::new(ReceiptKeys::ephemeral().expect("a random key"));
    let monitor = Monitor::new(
        MonitorSettings::default(),
        Arc::clone(&keys),
        &Registry::new(),
    )
    .expect("monitor");
    let probabilities: Vec<f64> = batch
        .iter()
        .map(|v| scorer.score(&model, v, &options).probability)
        .collect();
    // Fill the windows first.
    for (i, values) in batch.iter().cycle().take(20_000).enumerate() {
        let p = probabilities[i % BATCH];
        let _ = monitor.record_scored(&model, values, [p].into_iter());
        drift.record(&model, values, p);
    }
    // The receipts each repetition reports outcomes for: fresh ones, so none is a repeat.
    let receipts: Vec<String> = keys
        .seal_all(
            model.name(),
            model.version(),
            now_ms(),
            (0..REPETITIONS * BATCH).map(|i| probabilities[i % BATCH]),
        )
        .expect("sealed");
    let calibration = CalibrationMonitor::new(10_000, &Registry::new()).expect("calibration");
    let seen = SeenReceipts::new(REPETITIONS * BATCH);
    let book = OutcomeBook {
        keys: &keys,
        seen: &seen,
        calibration: &calibration,
        max_age: DEFAULT_MAX_AGE,
    };

    let names = [
        "score", "drift", "seal", "request", "batch", "open", "outcome",
    ];
    // The batch rows, flat, as the service hands them over: 1024 observations in requests of 100
    // (and one of 24).
    let flat: Vec<Value> = batch.iter().flatten().copied().collect();
    let width = model.covariates().len();
    let now = now_ms();
    let mut samples: Vec<Vec<Duration>> = vec![Vec::with_capacity(REPETITIONS); names.len()];
    for repetition in 0..REPETITIONS {
        let receipts = &receipts[repetition * BATCH..(repetition + 1) * BATCH];
        let started = Instant::now();
        for values in &batch {
            black_box(
                scorer
                    .score(&model, black_box(values), &options)
                    .probability,
            );
        }
        samples[0].push(started.elapsed());
        let started = Instant::now();
        for (values, &p) in batch.iter().zip(&probabilities) {
            drift.record(&model, black_box(values), p);
        }
        samples[1].push(started.elapsed());
        let started = Instant::now();
        for &p in &probabilities {
            let sealed = keys.seal_all(
                model.name(),
                model.version(),
                now,
                [black_box(p)].into_iter(),
            );
            black_box(sealed.expect("sealed"));
        }
        samples[2].push(started.elapsed());
        let started = Instant::now();
        for (values, &p) in batch.iter().zip(&probabilities) {
            let sealed = monitor.record_scored(&model, black_box(values), [p].into_iter());
            black_box(sealed.expect("sealed"));
        }
        samples[3].push(started.elapsed());
        let started = Instant::now();
        for (rows, ps) in flat.chunks(100 * width).zip(probabilities.chunks(100)) {
            let sealed = monitor.record_scored(&model, black_box(rows), ps.iter().copied());
            black_box(sealed.expect("sealed"));
        }
        samples[4].push(started.elapsed());
        let started = Instant::now();
        for receipt in receipts {
            black_box(keys.open(black_box(receipt)).expect("opens"));
        }
        samples[5].push(started.elapsed());
        let started = Instant::now();
        for (i, receipt) in receipts.iter().enumerate() {
            let recorded = book.report(model.name(), black_box(receipt), i % 3 == 0, now);
            black_box(recorded.expect("recorded"));
        }
        samples[6].push(started.elapsed());
    }
    let medians: Vec<f64> = samples.iter_mut().map(|s| median(s)).collect();
    println!("per observation (median of {REPETITIONS} batches of {BATCH}):");
    for (name, m) in names.iter().zip(&medians) {
        println!(
            "  {name:<8} {:>8.1} ns   ×{:.3} of score",
            m * 1e9,
            m / medians[0]
        );
    }

    println!("contention: threads scoring and recording into one window ({CONTENDED} each):");
    for threads in [1, 2, 4] {
        let registry = Registry::new();
        // One shard per thread, as `ogive serve` gives one per worker.
        let drift = DriftMonitor::new(10_000, threads, &registry).expect("drift");
        std::thread::scope(|scope| {
            for t in 0..threads {
                let (drift, model, batch) = (&drift, &model, &batch);
                scope.spawn(move || {
                    let mut scorer = Scorer::new(model);
                    for i in 0..CONTENDED {
                        let values = &batch[(i + t * 97) % BATCH];
                        let p = scorer.score(model, values, &Options::default()).probability;
                        drift.record(model, values, p);
                    }
                });
            }
        });
        let report = drift.report("bench-lease");
        let dropped = report.first().map_or(0, |r| r.dropped_samples);
        let total = (threads * CONTENDED) as f64;
        println!(
            "  {threads} thread(s): {dropped} of {total} samples dropped ({:.4}%)",
            dropped as f64 / total * 100.0
        );
    }
}
