//! Fuzz target: model-file parsing and validation never panic, whatever the bytes, and a model
//! that validates can score its own training-mean profile.
#![no_main]

use libfuzzer_sys::fuzz_target;
use ogive::engine::{Options, Scorer};
use ogive::model::Model;

fuzz_target!(|data: &[u8]| {
    if let Ok(model) = Model::from_json(data) {
        let mut scorer = Scorer::new(&model);
        let answer = scorer.score_at_means(&model, &Options::default());
        assert!(answer.probability.is_nan() || (0.0..=1.0).contains(&answer.probability));
    }
});
