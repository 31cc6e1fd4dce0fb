//! The engine's scratch for a request, kept between requests: each thread that scores (an I/O
//! worker or a scoring-pool thread) keeps a [`Scorer`] for each of the last few model versions
//! it served, so a request reuses buffers already shaped for its model instead of building and
//! dropping a dozen vectors (the effect slots, the term shapes) every time.
//!
//! A scorer is taken out of the thread's list while it is used and put back afterwards, so a
//! request that panics drops its scorer with it and the next one builds a fresh one. A kept
//! scorer is known by a weak reference to its model: while that reference lives, no other model
//! can take the same address, and once the version is dropped everywhere else its scorer is
//! dropped at the next put-back.

use std::cell::RefCell;
use std::sync::{Arc, Weak};

use crate::engine::Scorer;
use crate::model::Model;

/// How many model versions a thread keeps a scorer for (the least recently used goes first).
const KEPT_PER_THREAD: usize = 4;

thread_local! {
    static KEPT: RefCell<Vec<(Weak<Model>, Scorer)>> = const { RefCell::new(Vec::new()) };
}

/// Run `work` with this thread's scorer for `model`, built on first use.
pub fn with_scorer<R>(model: &Arc<Model>, work: impl FnOnce(&mut Scorer) -> R) -> R {
    let kept = KEPT.with_borrow_mut(|kept| {
        let position = kept
            .iter()
            .position(|(served, _)| std::ptr::eq(served.as_ptr(), Arc::as_ptr(model)))?;
        Some(kept.remove(position).1)
    });
    let mut scorer = kept.unwrap_or_else(|| Scorer::new(model));
    let result = work(&mut scorer);
    KEPT.with_borrow_mut(|kept| {
        kept.retain(|(served, _)| served.strong_count() > 0);
        if kept.len() >= KEPT_PER_THREAD {
            kept.remove(0);
        }
        kept.push((Arc::downgrade(model), scorer));
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
            let kept = with_scorer(model, |s| s.score(model, &values, &options).clone());
            let fresh = Scorer::new(model).score(model, &values, &options).clone();
            assert_eq!(kept, fresh);
        }
        assert_eq!(kept_count(), 2);
        drop(first);
        with_scorer(&second, |_| ());
        assert_eq!(kept_count(), 1, "a dropped version's scorer is let go");
    }

    #[test]
    fn a_panic_while_scoring_drops_that_scorer() {
        let only = model("1", 0.5);
        with_scorer(&only, |_| ());
        assert_eq!(kept_count(), 1);
        let caught = std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| {
            with_scorer(&only, |_| panic!("deliberate"))
        }));
        assert!(caught.is_err());
        assert_eq!(kept_count(), 0);
    }
}
