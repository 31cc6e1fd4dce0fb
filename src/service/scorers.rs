//! The engine's scratch for a request, kept between requests: each thread that scores (an I/O
//! worker or a scoring-pool thread) keeps a [`Scorer`] for each of the last few model versions
//! it served, so a request reuses buffers already shaped for its model instead of building and
//! dropping a dozen vectors (the effect slots, the term shapes) every time; beside it, the
//! version's answer [`Phrases`] (the escaped text its answers repeat), built on first use.
//!
//! A scorer is taken out of the thread's list while it is used and put back afterwards, so a
//! request that panics drops its scorer with it and the next one builds a fresh one. A kept
//! scorer is known by a weak reference to its model: while that reference lives, no other model
//! can take the same address, and once the version is dropped everywhere else its scorer is
//! dropped at the next put-back.

use std::cell::RefCell;
use std::sync::{Arc, Weak};

use super::answer::Phrases;
use crate::engine::Scorer;
use crate::model::Model;

/// How many model versions a thread keeps a scorer for (the least recently used goes first).
const KEPT_PER_THREAD: usize = 4;

/// What a thread keeps for one model version: its scorer, and its answer phrases once a
/// request has written an answer.
pub struct Scratch {
    model: Weak<Model>,
    /// The engine's buffers for this version.
    pub scorer: Scorer,
    phrases: Option<Arc<Phrases>>,
}

impl Scratch {
    /// The answer phrases of `model` (this scratch's version), built on first use.
    pub fn phrases(&mut self, model: &Model) -> Arc<Phrases> {
        Arc::clone(
            self.phrases
                .get_or_insert_with(|| Arc::new(Phrases::new(model))),
        )
    }
}

thread_local! {
    static KEPT: RefCell<Vec<Scratch>> = const { RefCell::new(Vec::new()) };
}

/// Run `work` with everything this thread keeps for `model`, built on first use.
pub fn with_scratch<R>(model: &Arc<Model>, work: impl FnOnce(&mut Scratch) -> R) -> R {
    let kept = KEPT.with_borrow_mut(|kept| {
        let position = kept
            .iter()
            .position(|k| std::ptr::eq(k.model.as_ptr(), Arc::as_ptr(model)))?;
        Some(kept.remove(position))
    });
    let mut scratch = kept.unwrap_or_else(|| Scratch {
        model: Arc::downgrade(model),
        scorer: Scorer::new(model),
        phrases: None,
    });
    let result = work(&mut scratch);
    KEPT.with_borrow_mut(|kept| {
        kept.retain(|k| k.model.strong_count() > 0);
        if kept.len() >= KEPT_PER_THREAD {
            kept.remove(0);
        }
        kept.push(scratch);
    });
    result
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::engine::Options;
    use crate::model::Value;

    fn model(version: &str, slope: f64) -> Arc<Model> {
        let file = serde_json::json!({
            "format": "ogive-model",
            "format_version": 1,
            "name": "scorer-reuse",
            "version": version,
            "description": "two versions that differ in their slope",
            "outcome": {"name": "y", "meaning": "the event happened"},
            "link": "logit",
            "covariates": [{"name": "x", "kind": "continuous",
                            "training": {"min": 0.0, "max": 10.0, "mean": 4.0}}],
            "terms": [{"term": "intercept", "coefficient": -1.0},
                      {"term": "x", "coefficient": slope}],
            "covariance": [[0.04, 0.0], [0.0, 0.01]],
            "provenance": {"fitted_by": "hand", "fitted_at": "2026-12-01T00:00:00Z",
                           "observations": 10}
        });
        let bytes = serde_json::to_vec(&file).expect("serialise");
        Arc::new(Model::from_json(&bytes).expect("a valid model"))
    }

    fn kept_count() -> usize {
        KEPT.with_borrow(Vec::len)
    }

    #[test]
    fn a_kept_scorer_answers_as_a_fresh_one_and_follows_its_model() {
        let first = model("1", 0.5);
        let second = model("2", -0.25);
        let values = [Value::Number(2.0)];
        let options = Options::default();
        for model in [&first, &second, &first, &second] {
            let kept = with_scratch(model, |s| s.scorer.score(model, &values, &options).clone());
            let fresh = Scorer::new(model).score(model, &values, &options).clone();
            assert_eq!(kept, fresh);
        }
        assert_eq!(kept_count(), 2);
        let phrases = |model: &Arc<Model>| with_scratch(model, |s| s.phrases(model));
        assert!(
            Arc::ptr_eq(&phrases(&first), &phrases(&first)),
            "phrases are kept"
        );
        assert!(!Arc::ptr_eq(&phrases(&first), &phrases(&second)));
        drop(first);
        with_scratch(&second, |_| ());
        assert_eq!(kept_count(), 1, "a dropped version's scorer is let go");
    }

    #[test]
    fn a_panic_while_scoring_drops_that_scorer() {
        let only = model("1", 0.5);
        with_scratch(&only, |_| ());
        assert_eq!(kept_count(), 1);
        let caught = std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| {
            with_scratch(&only, |_| panic!("deliberate"))
        }));
        assert!(caught.is_err());
        assert_eq!(kept_count(), 0);
    }
}
