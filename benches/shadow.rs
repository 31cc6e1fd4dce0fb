//! What shadow scoring adds to a request, in the same run: the engine's full answer for a
//! batch of observations (what the probability route computes before it answers) beside the
//! shadow comparison that follows it (`Shadowing::compare`: the candidate's probability-only
//! path, the difference histogram and the counters).
//!
//! ```text
//! live     Scorer::score with Options::default() for each observation (effects, intervals,
//!          contributions, warnings), answers kept as the route keeps them
//! same     compare with a candidate of the same covariates (values reused)
//! mapped   compare with a candidate whose covariates differ (values carried over by name)
//! ```
//!
//! A plain timing loop runs the three round-robin over many repetitions and prints each one's
//! median per-observation time and the ratio of each comparison to the live answer. The HTTP
//! and JSON work of a request comes on top of the live answer, so the ratios bound the share
//! of a request's time that shadowing adds from above. Goal: same ≤ 0.25.
//!
//! Run: `cargo bench --bench shadow`.

#[allow(dead_code)]
#[path = "../tests/support/models.rs"]
mod models;

use std::hint::black_box;
use std::sync::Arc;
use std::time::{Duration, Instant};

use models::{base, bytes_of, model_bytes, without_covariate};
use ogive::engine::{Answer, Options, Scorer};
use ogive::model::{Model, Value};
use ogive::monitoring::shadow::{Shadowing, Share};
use ogive::registry::Entry;
use serde_json::json;

/// Observations per request.
const BATCH: usize = 100;
/// Repetitions of each request in the timing loop.
const REPETITIONS: usize = 401;

fn model(bytes: &[u8]) -> Model {
    Model::from_json(bytes).expect("a valid model")
}

fn batch(live: &Model) -> Vec<Value> {
    let regions = ["north", "south", "east"];
    let mut values = Vec::with_capacity(BATCH * live.covariates().len());
    let mut one = Vec::new();
    for i in 0..BATCH {
        let observation = json!({
            "income": 10.0 + (i * 37 % 400) as f64,
            "tenure": (i * 7) % 30,
            "guarantor": i % 2,
            "region": regions[i % 3],
        });
        live.parse_observation(observation.as_object().expect("object"), &mut one)
            .expect("a valid observation");
        values.extend_from_slice(&one);
    }
    values
}

fn live_answers(live: &Model, values: &[Value]) -> Vec<Answer> {
    let mut scorer = Scorer::new(live);
    let options = Options::default();
    values
        .chunks(live.covariates().len())
        .map(|o| scorer.score(live, o, &options).clone())
        .collect()
}

fn median_per_observation(mut times: Vec<Duration>) -> f64 {
    times.sort();
    times[times.len() / 2].as_secs_f64() / BATCH as f64
}

fn main() {
    let live = Arc::new(model(&model_bytes("bench", "v1")));
    let same = Arc::new(model(&model_bytes("bench", "v2")));
    let mapped = Arc::new(model(&bytes_of(without_covariate(
        base("bench", "v3"),
        "guarantor",
    ))));
    let entry = |shadow: &Arc<Model>| Entry {
        shadow: Some(Arc::clone(shadow)),
        ..Entry::serving(Arc::clone(&live))
    };
    let (with_same, with_mapped) = (entry(&same), entry(&mapped));
    let registry = prometheus::Registry::new();
    let shadowing = Shadowing::new(Share::ALL, &registry).expect("shadow series");
    let values = batch(&live);
    let answers = live_answers(&live, &values);

    let mut times = [Vec::new(), Vec::new(), Vec::new()];
    for _ in 0..REPETITIONS {
        let started = Instant::now();
        black_box(live_answers(&live, black_box(&values)));
        times[0].push(started.elapsed());

        let started = Instant::now();
        shadowing.compare(black_box(&with_same), &values, &answers);
        times[1].push(started.elapsed());

        let started = Instant::now();
        shadowing.compare(black_box(&with_mapped), &values, &answers);
        times[2].push(started.elapsed());
    }
    let [live_t, same_t, mapped_t] = times.map(median_per_observation);
    println!("per observation, median of {REPETITIONS} requests of {BATCH}:");
    println!("  live answer        {:>9.1} ns", live_t * 1e9);
    println!(
        "  shadow, same       {:>9.1} ns   ratio to live {:.3}",
        same_t * 1e9,
        same_t / live_t
    );
    println!(
        "  shadow, mapped     {:>9.1} ns   ratio to live {:.3}",
        mapped_t * 1e9,
        mapped_t / live_t
    );
}
