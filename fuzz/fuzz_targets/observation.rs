//! Fuzz target: any JSON observation sent to the fuzz model (see `support/fuzz_model.rs`)
//! either is refused with a typed error or scores without panicking, with every option on, to
//! an answer whose numbers keep their promises:
//!
//! ```text
//! z finite                       ⇒ p ∈ [0, 1], 1 − p ∈ [0, 1], interval ∋ p
//! values within service bounds   ⇒ every number in the answer is finite (the bounds of
//!                                  ogive::service::observations exist for exactly this)
//! ```
#![no_main]

#[path = "../support/fuzz_model.rs"]
mod support;

use libfuzzer_sys::fuzz_target;
use ogive::engine::{Options, Scorer};
use ogive::service::observations::check_bounds;
use ogive::service::scoring::is_finite;

fuzz_target!(|data: &[u8]| {
    let model = support::fuzz_model();
    let Ok(serde_json::Value::Object(observation)) = serde_json::from_slice(data) else {
        return;
    };
    let mut values = Vec::new();
    if model.parse_observation(&observation, &mut values).is_err() {
        return;
    }
    let mut options = Options::new(0.95).expect("0.95 is a level");
    options.elasticities = true;
    let mut scorer = Scorer::new(model);
    let answer = scorer.score(model, &values, &options);
    if answer.linear_index.is_finite() {
        let p = answer.probability;
        assert!((0.0..=1.0).contains(&p), "p = {p}");
        assert!(
            (0.0..=1.0).contains(&answer.complement),
            "1 - p = {}",
            answer.complement
        );
        if let Some(i) = answer.interval {
            assert!(
                i.lower <= p && p <= i.upper,
                "{p} outside [{}, {}]",
                i.lower,
                i.upper
            );
        }
    }
    if check_bounds(model, &values).is_ok() {
        assert!(
            is_finite(answer),
            "a non-finite answer within the service bounds: {answer:?}"
        );
    }
});
