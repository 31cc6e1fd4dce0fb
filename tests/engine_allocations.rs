//! The batch path allocates nothing per observation: once a [`Scorer`] (and an [`Averager`])
//! exist and have scored one observation, scoring more — probability only, everything with
//! intervals, elasticities and contributions, into a running average, or at the means — makes
//! no heap allocation at all. Parsing a JSON observation into a reused value buffer allocates
//! nothing either.
//!
//! A counting global allocator is installed for this test binary only. It counts per thread,
//! so the test harness's own threads cannot disturb the count.

use std::alloc::{GlobalAlloc, Layout, System};
use std::cell::Cell;

use ogive::engine::{Averager, Options, Scorer};
use ogive::link::Link;
use ogive::model::{Model, Value};
use serde_json::json;

struct Counting;

thread_local! {
    static ALLOCATIONS: Cell<u64> = const { Cell::new(0) };
}

fn note_allocation() {
    // `try_with`: during thread teardown the counter may be gone; those allocations are not
    // ours to count.
    let _ = ALLOCATIONS.try_with(|n| n.set(n.get() + 1));
}

// SAFETY: every method forwards to the system allocator unchanged; counting touches only a
// const-initialised thread-local `Cell`, which never allocates.
unsafe impl GlobalAlloc for Counting {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        note_allocation();
        System.alloc(layout)
    }
    unsafe fn alloc_zeroed(&self, layout: Layout) -> *mut u8 {
        note_allocation();
        System.alloc_zeroed(layout)
    }
    unsafe fn realloc(&self, ptr: *mut u8, layout: Layout, new_size: usize) -> *mut u8 {
        note_allocation();
        System.realloc(ptr, layout, new_size)
    }
    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        System.dealloc(ptr, layout)
    }
}

#[global_allocator]
static GLOBAL: Counting = Counting;

fn allocations() -> u64 {
    ALLOCATIONS.with(Cell::get)
}

/// Allocations made on this thread while `f` runs.
fn allocations_during(f: impl FnOnce()) -> u64 {
    let before = allocations();
    f();
    allocations() - before
}

/// A model with every covariate kind and term kind, a covariance, a joint-extrapolation check
/// and decision bands, so that every branch of the engine runs.
fn model(link: Link) -> Model {
    let file = json!({
        "format": ogive::model::FORMAT_NAME,
        "format_version": ogive::model::FORMAT_VERSION,
        "name": "allocations",
        "version": "1",
        "outcome": { "name": "y", "meaning": "the outcome" },
        "link": link,
        "covariates": [
            { "name": "revenue", "kind": "continuous",
              "training": { "min": 1.0, "max": 50.0, "mean": 12.0 } },
            { "name": "years", "kind": "continuous",
              "training": { "min": 0.0, "max": 30.0, "mean": 8.0 } },
            { "name": "arrears", "kind": "count",
              "training": { "min": 0.0, "max": 9.0, "mean": 1.0 } },
            { "name": "guarantor", "kind": "binary",
              "training": { "min": 0.0, "max": 1.0, "mean": 0.3 } },
            { "name": "sector", "kind": "categorical", "levels": ["retail", "farm", "haulage"],
              "reference": "retail",
              "training": { "level_counts": { "retail": 50, "farm": 30, "haulage": 20 } } }
        ],
        "terms": [
            { "term": "intercept", "coefficient": -1.0 },
            { "term": "log(revenue)", "coefficient": -0.4 },
            { "term": "years", "coefficient": -0.05 },
            { "term": "years^2", "coefficient": 0.001 },
            { "term": "arrears", "coefficient": 0.3 },
            { "term": "guarantor", "coefficient": -0.6 },
            { "term": "sector=farm", "coefficient": 0.2 },
            { "term": "sector=haulage", "coefficient": 0.4 },
            { "term": "years*sector=haulage", "coefficient": -0.02 },
            { "term": "arrears*guarantor", "coefficient": 0.1 }
        ],
        "covariance": (0..10).map(|r| (0..10).map(|c| {
            if r == c { 0.02 } else { 0.001 }
        }).collect::<Vec<f64>>()).collect::<Vec<_>>(),
        "joint": {
            "covariates": ["revenue", "years"],
            "mean": [12.0, 8.0],
            "covariance": [[40.0, 3.0], [3.0, 25.0]],
            "max_distance": 3.5
        },
        "decision": { "threshold": 0.2,
                      "bands": [ { "name": "low", "below": 0.1 }, { "name": "high", "below": 1.0 } ] },
        "provenance": { "fitted_by": "tests/engine_allocations.rs", "fitted_at": "1970-01-01T00:00:00Z",
                        "observations": 100 }
    });
    let file = serde_json::from_value(file).expect("model file");
    Model::from_file(file).expect("valid model")
}

/// Observations in and out of the training ranges, every level.
fn batch() -> Vec<Vec<Value>> {
    (0..200)
        .map(|i| {
            let i = f64::from(i);
            vec![
                Value::Number(0.5 + i * 0.3),
                Value::Number((i * 0.37) % 35.0),
                Value::Number((i % 11.0).floor()),
                Value::Number(i % 2.0),
                Value::Level((i as usize) % 3),
            ]
        })
        .collect()
}

#[test]
fn scoring_a_batch_allocates_nothing_per_observation() {
    for link in ogive::link::ALL_LINKS {
        let model = model(link);
        let batch = batch();
        let mut everything = Options::new(0.95).expect("level");
        everything.elasticities = true;
        let option_sets = [Options::probability_only(), Options::default(), everything];
        let mut scorer = Scorer::new(&model);
        let mut averager = Averager::new(&model, scorer.slots().len());
        // Warm-up: the first answer sizes the scorer's buffers.
        scorer.score_and_average(&model, &batch[0], &everything, &mut averager);
        scorer.score_at_means(&model, &everything);
        let mut warnings = 0;
        let mut checksum = 0.0;
        for options in &option_sets {
            let n = allocations_during(|| {
                for values in &batch {
                    let a = scorer.score(&model, values, options);
                    warnings += a.warnings.len();
                    checksum += a.probability + a.effects.iter().map(|e| e.effect).sum::<f64>();
                }
            });
            assert_eq!(
                n, 0,
                "{link}: Scorer::score with {options:?} allocated {n} times"
            );
        }
        let n = allocations_during(|| {
            for values in &batch {
                checksum += Scorer::probability(&model, values);
                scorer.score_and_average(&model, values, &everything, &mut averager);
            }
        });
        assert_eq!(n, 0, "{link}: averaging allocated {n} times");
        assert!(
            warnings > 0,
            "the batch should reach the out-of-range branch"
        );
        assert!(checksum.is_finite());
        assert_eq!(averager.count(), batch.len() as u64 + 1);
    }
}

/// `Scorer::score_at_means` cloned the model's mean profile on every call.
#[test]
fn regression_score_at_means_copied_the_mean_profile() {
    let model = model(Link::Probit);
    let options = Options::default();
    let mut scorer = Scorer::new(&model);
    scorer.score_at_means(&model, &options);
    let n = allocations_during(|| {
        for _ in 0..10 {
            scorer.score_at_means(&model, &options);
        }
    });
    assert_eq!(n, 0, "score_at_means allocated {n} times");
}

#[test]
fn parsing_an_observation_into_a_reused_buffer_allocates_nothing() {
    let model = model(Link::Logit);
    let observation = json!({
        "revenue": 14.5, "years": 3.0, "arrears": 2, "guarantor": true, "sector": "haulage"
    });
    let observation = observation.as_object().expect("object").clone();
    let mut values = Vec::new();
    model
        .parse_observation(&observation, &mut values)
        .expect("valid observation");
    let n = allocations_during(|| {
        for _ in 0..100 {
            model
                .parse_observation(&observation, &mut values)
                .expect("valid observation");
        }
    });
    assert_eq!(n, 0, "parse_observation allocated {n} times");
}

#[test]
fn the_counter_sees_allocations() {
    // Guards the guard: if counting were broken, the tests above would pass vacuously.
    let n = allocations_during(|| {
        let v: Vec<u64> = std::hint::black_box(vec![1, 2, 3]);
        assert_eq!(v.len(), 3);
    });
    assert!(n >= 1);
}
