//! Shadow scoring: when a model's entry has a shadow candidate, the observations of its
//! probability requests (all of them, or a configured share) are scored by the candidate too,
//! after the live answer is built, and only measured. The answer never changes.
//!
//! Per sampled observation, with p the live version's probability and q the candidate's:
//!
//! ```text
//! difference     |q − p|                                   into a histogram
//! disagreement   (p ≥ t_live) ≠ (q ≥ t_candidate)          counted
//!                t = the model file's decision threshold, 0.5 when it sets none
//! ```
//!
//! Each version decides by its own threshold, because that is the decision it would make if
//! it were live; when the two differ, the report's `notes` say so, since a disagreement may
//! then come from the thresholds alone. The candidate takes the probability-only path of the engine
//! ([`Scorer::probability`]): no effects, intervals or warnings, so the added cost per
//! observation is one term vector and one link evaluation.
//!
//! Sampling is deterministic. Counting every observation of a shadowed model from 0 across the
//! whole process, observation g is scored when
//!
//! ```text
//! ⌊(g + 1)·s⌋ > ⌊g·s⌋        (s the share, 0 ≤ s ≤ 1)
//! ```
//!
//! so after N observations exactly ⌊N·s⌋ have been scored, evenly spread.
//!
//! Which candidate may shadow, and how the live version's values are carried over to it, is
//! [`crate::registry::shadow`]'s; the shadow itself is held in the model directory, so every
//! replica scores it.
//!
//! The exported series, written at scrape time from this process's counts, which a request
//! adds to under one lock, once per request (only a shadowed model's requests take it):
//!
//! ```text
//! ogive_shadow_scored_total{model,version}          counter   version = the candidate's
//! ogive_shadow_unscored_total{model,version}        counter
//! ogive_shadow_abs_difference{model,version}        histogram, 0.001 … 1
//! ogive_shadow_disagreements_total{model,version}   counter
//! ```
//!
//! The mean |Δp| and the disagreement rate are ratios of these (sum over count, disagreements
//! over scored), so all four of one version are read together under that lock, as drift's and
//! calibration's are (`monitoring::families`): a scrape never pairs one request's disagreements
//! with another moment's count.
//!
//! The admin report ([`Shadowing::report`]) reads the same series, minus their values when this
//! process's directory follower began following the shadow ([`Shadowing::begin`]), so it covers
//! the current shadowing only. The figures are this process's own; replicas each keep theirs,
//! and the fleet's are the sums of the series. This module does no I/O and knows nothing of
//! HTTP.

use std::collections::HashMap;
use std::str::FromStr;
use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::{Arc, Mutex, PoisonError};
use std::time::SystemTime;

use prometheus::core::{Collector, Desc};
use prometheus::proto::{MetricFamily, MetricType};
use prometheus::Registry;
use serde::Serialize;

use super::families::{self, Family};

use crate::engine::{Answer, Scorer};
use crate::metrics::MetricsError;
use crate::model::{Model, Value};
pub use crate::registry::shadow::{
    check_shadowable, reads_announced, threshold, CannotShadow, DEFAULT_THRESHOLD,
};
use crate::registry::shadow::{translation, ShadowFigures};
use crate::registry::Entry;
use crate::timestamp::rfc3339_millis;

/// Upper bounds of the absolute-difference histogram: from a difference no caller would notice
/// to the largest possible one (a project choice).
pub const DIFFERENCE_BUCKETS: [f64; 10] =
    [0.001, 0.0025, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1.0];

/// The share of observations scored by a shadow, in [0, 1].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Share(f64);

/// A share outside [0, 1], or not a number.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("the shadow share must be a number from 0 to 1, got {0:?}")]
pub struct BadShare(pub String);

impl Share {
    /// Every observation.
    pub const ALL: Share = Share(1.0);

    /// A share, if `share` is in [0, 1].
    pub fn new(share: f64) -> Result<Share, BadShare> {
        if (0.0..=1.0).contains(&share) {
            Ok(Share(share))
        } else {
            Err(BadShare(share.to_string()))
        }
    }

    /// The share as a number.
    pub fn get(self) -> f64 {
        self.0
    }

    /// Whether observation `g` (counted from 0) is scored.
    pub fn samples(self, g: u64) -> bool {
        if self.0 >= 1.0 {
            return true;
        }
        ((g + 1) as f64 * self.0).floor() > (g as f64 * self.0).floor()
    }
}

impl Default for Share {
    fn default() -> Share {
        Share::ALL
    }
}

impl FromStr for Share {
    type Err = BadShare;

    fn from_str(text: &str) -> Result<Share, BadShare> {
        let share: f64 = text
            .trim()
            .parse()
            .map_err(|_| BadShare(text.to_string()))?;
        Share::new(share).map_err(|_| BadShare(text.to_string()))
    }
}

/// The series' values for one model and candidate version at one instant.
#[derive(Debug, Clone, Default, PartialEq)]
struct Figures {
    scored: u64,
    unscored: u64,
    disagreements: u64,
    difference_sum: f64,
    /// Cumulative counts at each of [`DIFFERENCE_BUCKETS`].
    cumulative: [u64; DIFFERENCE_BUCKETS.len()],
}

/// The figures of every version that has shadowed, by model and then candidate version.
type Counts = HashMap<String, HashMap<String, Figures>>;

/// The series' names and help texts, in the order [`ShadowCollector`] writes them.
const SERIES: [(&str, &str); 4] = [
    (
        "ogive_shadow_scored_total",
        "Observations also scored by a shadow candidate, by model and candidate version.",
    ),
    (
        "ogive_shadow_unscored_total",
        "Sampled observations a shadow candidate could not score (a level or value it does not take), by model and candidate version.",
    ),
    (
        "ogive_shadow_abs_difference",
        "Absolute difference between a shadow candidate's probability and the live version's, by model and candidate version.",
    ),
    (
        "ogive_shadow_disagreements_total",
        "Observations on which a shadow candidate and the live version fall on different sides of their decision thresholds, by model and candidate version.",
    ),
];

/// Writes the shadow series from the counts at each scrape, all of one reading.
struct ShadowCollector {
    counts: Arc<Mutex<Counts>>,
    descs: Vec<Desc>,
}

impl Collector for ShadowCollector {
    fn desc(&self) -> Vec<&Desc> {
        self.descs.iter().collect()
    }

    fn collect(&self) -> Vec<MetricFamily> {
        let [scored, unscored, difference, disagreements] = SERIES;
        let mut scored = Family::new(scored.0, scored.1, MetricType::COUNTER);
        let mut unscored = Family::new(unscored.0, unscored.1, MetricType::COUNTER);
        let mut difference = Family::new(difference.0, difference.1, MetricType::HISTOGRAM);
        let mut disagreements = Family::new(disagreements.0, disagreements.1, MetricType::COUNTER);
        let counts = self.counts.lock().unwrap_or_else(PoisonError::into_inner);
        for (model, versions) in counts.iter() {
            for (version, f) in versions {
                let labels = [("model", model.as_str()), ("version", version.as_str())];
                scored.counter(&labels, f.scored as f64);
                unscored.counter(&labels, f.unscored as f64);
                difference.histogram(
                    &labels,
                    &DIFFERENCE_BUCKETS,
                    &f.cumulative,
                    f.scored,
                    f.difference_sum,
                );
                disagreements.counter(&labels, f.disagreements as f64);
            }
        }
        [scored, unscored, difference, disagreements]
            .into_iter()
            .map(Family::finish)
            .collect()
    }
}

/// A shadowing begun through the admin listener.
#[derive(Debug, Clone)]
struct Run {
    candidate: String,
    live_at_start: String,
    since: String,
    baseline: Figures,
}

/// Shadow scoring: the sampling share, the series, and the shadowings begun.
#[derive(Debug)]
pub struct Shadowing {
    share: Share,
    seen: AtomicU64,
    counts: Arc<Mutex<Counts>>,
    runs: Mutex<HashMap<String, Run>>,
}

/// One bin of the difference histogram: differences in (`above`, `up_to`] (the first bin
/// includes 0).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Bin {
    /// The lower bound (exclusive, except 0 for the first bin).
    pub above: f64,
    /// The upper bound (inclusive).
    pub up_to: f64,
    /// Observations whose difference falls in the bin.
    pub count: u64,
}

/// The decision thresholds the disagreement rate is counted with.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Thresholds {
    /// The live version's decision threshold: its file's, or [`DEFAULT_THRESHOLD`] when it
    /// sets none.
    pub live: f64,
    /// The shadow version's decision threshold, chosen the same way.
    pub shadow: f64,
}

/// What shadow scoring has measured for one model's current shadow.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ShadowReport {
    /// The model's name, as its requests and the model directory give it.
    pub model: String,
    /// The live version now.
    pub live_version: String,
    /// The version `NAME/shadow` names: the candidate scored beside the live version.
    pub shadow_version: String,
    /// The share of observations sampled.
    pub share: f64,
    /// When this process began following the shadow from the model directory (RFC 3339,
    /// UTC); `null` when the figures count from the start of the process.
    pub since: Option<String>,
    /// The live version when this process began following the shadow (the figures compare
    /// against whichever version was live at each request).
    pub live_version_at_start: Option<String>,
    /// Observations scored by the candidate.
    pub scored: u64,
    /// Sampled observations the candidate could not score.
    pub unscored: u64,
    /// The mean of |q − p| over the scored observations; `null` before the first.
    pub mean_abs_difference: Option<f64>,
    /// The distribution of |q − p|.
    pub difference_histogram: Vec<Bin>,
    /// Observations on which the two versions decide differently.
    pub disagreements: u64,
    /// `disagreements / scored`; `null` before the first.
    pub disagreement_rate: Option<f64>,
    /// The thresholds of each version's decision.
    pub thresholds: Thresholds,
    /// What to keep in mind reading these figures (different thresholds, for one).
    pub notes: Vec<String>,
}

impl Shadowing {
    /// Shadow scoring of `share` of the observations, its series registered in `registry`.
    pub fn new(share: Share, registry: &Registry) -> Result<Shadowing, MetricsError> {
        let counts = Arc::new(Mutex::new(Counts::new()));
        let descs = SERIES
            .iter()
            .map(|(name, help)| families::desc(name, help, &["model", "version"]))
            .collect::<Result<_, _>>()?;
        registry.register(Box::new(ShadowCollector {
            counts: Arc::clone(&counts),
            descs,
        }))?;
        Ok(Shadowing {
            share,
            seen: AtomicU64::new(0),
            counts,
            runs: Mutex::new(HashMap::new()),
        })
    }

    /// The share of observations sampled.
    pub fn share(&self) -> Share {
        self.share
    }

    /// Score the sampled observations of one answered request with `entry`'s shadow, if it has
    /// one, and record the comparison. `values` are the request's observations as the live
    /// version parsed them (`answers.len()` × its covariates), `answers` the live answers.
    /// Call it after the live answer is built; it changes nothing the caller sees.
    pub fn compare(&self, entry: &Entry, values: &[Value], answers: &[Answer]) {
        let Some(candidate) = entry.shadow.as_deref() else {
            return;
        };
        let live = &*entry.live;
        let width = live.covariates.len();
        if values.len() != answers.len() * width {
            return;
        }
        let translation = translation(live, candidate);
        let mut buffer = Vec::new();
        self.record(live, candidate, answers, |i| {
            // Refused when the shadow is set; a live version swapped in since may no longer
            // carry what the candidate needs: then nothing is scored.
            let observation = &values[i * width..(i + 1) * width];
            match &translation {
                Ok(t) => t.probability(candidate, observation, &mut buffer),
                Err(_) => None,
            }
        });
    }

    /// Score `entry`'s shadow on the observations as it parsed them itself (`rows[i]` is
    /// `None` where observation `i` does not send what it needs, such as an announced
    /// covariate), and record the comparison with the live `answers`.
    pub fn compare_parsed(&self, entry: &Entry, rows: &[Option<Vec<Value>>], answers: &[Answer]) {
        let Some(candidate) = entry.shadow.as_deref() else {
            return;
        };
        if rows.len() != answers.len() {
            return;
        }
        self.record(&entry.live, candidate, answers, |i| {
            let values = rows[i].as_deref()?;
            let p = Scorer::probability(candidate, values);
            p.is_finite().then_some(p)
        });
    }

    /// Record the comparison of the live `answers` with the candidate's probabilities
    /// `candidate_probability(i)` (`None`: not scored) over the sampled share.
    fn record(
        &self,
        live: &Model,
        candidate: &Model,
        answers: &[Answer],
        mut candidate_probability: impl FnMut(usize) -> Option<f64>,
    ) {
        if candidate.version() == live.version() || answers.is_empty() || self.share.get() <= 0.0 {
            return;
        }
        let first = self.seen.fetch_add(answers.len() as u64, Ordering::Relaxed);
        let (live_threshold, candidate_threshold) = (threshold(live), threshold(candidate));
        let mut added = Figures::default();
        // Observations per bucket (not yet cumulative): the first bound at or above |q − p|.
        let mut per_bucket = [0u64; DIFFERENCE_BUCKETS.len()];
        for (i, answer) in answers.iter().enumerate() {
            if !self.share.samples(first + i as u64) {
                continue;
            }
            let Some(q) = candidate_probability(i) else {
                added.unscored += 1;
                continue;
            };
            let p = answer.probability;
            let difference = (q - p).abs();
            added.difference_sum += difference;
            if let Some(bucket) =
                per_bucket.get_mut(DIFFERENCE_BUCKETS.partition_point(|&b| b < difference))
            {
                *bucket += 1;
            }
            added.scored += 1;
            if (p >= live_threshold) != (q >= candidate_threshold) {
                added.disagreements += 1;
            }
        }
        let mut counts = self.counts.lock().unwrap_or_else(PoisonError::into_inner);
        let versions = match counts.get_mut(live.name()) {
            Some(versions) => versions,
            None => counts.entry(live.name().to_string()).or_default(),
        };
        let figures = match versions.get_mut(candidate.version()) {
            Some(figures) => figures,
            None => versions.entry(candidate.version().to_string()).or_default(),
        };
        figures.scored += added.scored;
        figures.unscored += added.unscored;
        figures.disagreements += added.disagreements;
        figures.difference_sum += added.difference_sum;
        let mut running = 0;
        for (cumulative, in_bucket) in figures.cumulative.iter_mut().zip(per_bucket) {
            running += in_bucket;
            *cumulative += running;
        }
    }

    fn figures(&self, model: &str, candidate: &str) -> Figures {
        let counts = self.counts.lock().unwrap_or_else(PoisonError::into_inner);
        counts
            .get(model)
            .and_then(|versions| versions.get(candidate))
            .cloned()
            .unwrap_or_default()
    }

    /// Note that `candidate` now shadows version `live` of `model` (the directory follower
    /// calls this when it begins following a shadow), so that the report counts from here.
    pub fn begin(&self, model: &str, live: &str, candidate: &str) {
        let run = Run {
            candidate: candidate.to_string(),
            live_at_start: live.to_string(),
            since: rfc3339_millis(SystemTime::now()),
            baseline: self.figures(model, candidate),
        };
        self.runs
            .lock()
            .unwrap_or_else(PoisonError::into_inner)
            .insert(model.to_string(), run);
    }

    /// Forget the shadowing of `model` (its shadow was cleared).
    pub fn end(&self, model: &str) {
        self.runs
            .lock()
            .unwrap_or_else(PoisonError::into_inner)
            .remove(model);
    }

    /// The report on `entry`'s shadow, or `None` when it has none.
    pub fn report(&self, entry: &Entry) -> Option<ShadowReport> {
        let candidate = entry.shadow.as_deref()?;
        let live = &*entry.live;
        let model = live.name();
        let run = self
            .runs
            .lock()
            .unwrap_or_else(PoisonError::into_inner)
            .get(model)
            .filter(|run| run.candidate == candidate.version())
            .cloned();
        let now = self.figures(model, candidate.version());
        let zero = Figures::default();
        let base = run.as_ref().map_or(&zero, |run| &run.baseline);
        let scored = now.scored.saturating_sub(base.scored);
        let disagreements = now.disagreements.saturating_sub(base.disagreements);
        let cumulative: Vec<u64> = now
            .cumulative
            .iter()
            .enumerate()
            .map(|(i, c)| c.saturating_sub(base.cumulative.get(i).copied().unwrap_or(0)))
            .collect();
        let mut lower = 0.0;
        let mut below = 0;
        let difference_histogram = DIFFERENCE_BUCKETS
            .iter()
            .zip(&cumulative)
            .map(|(&up_to, &at_most)| {
                let bin = Bin {
                    above: lower,
                    up_to,
                    count: at_most.saturating_sub(below),
                };
                (lower, below) = (up_to, at_most);
                bin
            })
            .collect();
        let rate = |count: u64| (scored > 0).then(|| count as f64 / scored as f64);
        Some(ShadowReport {
            model: model.to_string(),
            live_version: live.version().to_string(),
            shadow_version: candidate.version().to_string(),
            share: self.share.get(),
            since: run.as_ref().map(|r| r.since.clone()),
            live_version_at_start: run.as_ref().map(|r| r.live_at_start.clone()),
            scored,
            unscored: now.unscored.saturating_sub(base.unscored),
            mean_abs_difference: (scored > 0)
                .then(|| (now.difference_sum - base.difference_sum).max(0.0) / scored as f64),
            difference_histogram,
            disagreements,
            disagreement_rate: rate(disagreements),
            thresholds: Thresholds {
                live: threshold(live),
                shadow: threshold(candidate),
            },
            notes: threshold_note(live, candidate).into_iter().collect(),
        })
    }
}

impl ShadowReport {
    /// The figures the history keeps of this report when the shadowing ends.
    pub fn figures(&self) -> ShadowFigures {
        ShadowFigures {
            since: self.since.clone(),
            scored: self.scored,
            unscored: self.unscored,
            mean_abs_difference: self.mean_abs_difference,
            disagreements: self.disagreements,
            disagreement_rate: self.disagreement_rate,
        }
    }
}

/// A sentence for the report when the two versions decide by different thresholds: then a
/// disagreement may come from the thresholds alone, with both probabilities close.
pub fn threshold_note(live: &Model, candidate: &Model) -> Option<String> {
    let (t_live, t_candidate) = (threshold(live), threshold(candidate));
    (t_live != t_candidate).then(|| {
        format!(
            "the versions decide by different thresholds (live '{}' at {t_live}, shadow '{}' at {t_candidate}): a probability between the two counts as a disagreement even when both versions agree on it, so read the disagreement rate beside mean_abs_difference",
            live.version(),
            candidate.version()
        )
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_share_is_kept_over_every_prefix_and_spread_evenly() {
        for s in [0.0, 0.1, 0.25, 1.0 / 3.0, 0.5, 0.9, 1.0] {
            let share = Share::new(s).expect("a share");
            let picks: Vec<bool> = (0..10_000u64).map(|g| share.samples(g)).collect();
            let mut scored = 0.0;
            for (n, &pick) in picks.iter().enumerate() {
                scored += f64::from(u8::from(pick));
                let expected = (n + 1) as f64 * s;
                assert!(
                    (scored - expected).abs() < 1.0,
                    "share {s}: {scored} of {}",
                    n + 1
                );
            }
            for window in picks.windows(10) {
                let count = window.iter().filter(|&&p| p).count() as f64;
                let (low, high) = ((10.0 * s).floor(), (10.0 * s).ceil());
                assert!(
                    count >= low && count <= high,
                    "share {s}: {count} in a window of 10"
                );
            }
        }
    }

    #[test]
    fn shares_outside_zero_to_one_are_refused() {
        for text in ["-0.1", "1.5", "NaN", "half", ""] {
            assert!(text.parse::<Share>().is_err(), "{text}");
        }
        assert_eq!("0.25".parse::<Share>(), Ok(Share(0.25)));
        assert_eq!(" 1 ".parse::<Share>(), Ok(Share::ALL));
    }
}
