//! Scoring a checked probability request with the engine and writing the answer's JSON.
//!
//! The statistics are the engine's; this module only drives a [`crate::engine::Scorer`] over the
//! observations, records the scoring metrics once per request, refuses an answer that is not
//! finite (422 `not-computable`, never a `null` where a number is promised), and writes the
//! answer (`service::answer`). A batch sent with `"on_error": "keep"` instead answers each
//! faulty observation (one the reader set aside, or one whose answer is not finite) by its
//! fault, in its place; the others are scored exactly as alone and averaged without it. A batch
//! in which nothing can be scored is refused as without the option.
//!
//! ```text
//! one observation:  {request_id, model, version, link, level, <answer fields>, [receipt], notes, [average_effects], [at_means]}
//! a batch:          {request_id, model, version, link, level, count, results: [{index, <answer fields>, [receipt]}], notes, [average_effects], [at_means]}
//! a faulty one:     {index, error: {type, detail, pointer}}   (in results, "on_error": "keep")
//! notes             no_covariance (no intervals can be given), saturated_interval (a
//!                   probability interval of zero width: within rounding of 0 or 1), not_live
//!                   (a stored version asked for by label, not the live one: see [`NOT_LIVE`]),
//!                   announced_ignored (fields a stored version announces, accepted and not
//!                   used by the live version: see [`ANNOUNCED_IGNORED`]),
//!                   faulty_observations (observations answered by their faults: see
//!                   [`FAULTY_OBSERVATIONS`])
//! ```
//!
//! Receipts are sealed by monitoring ([`crate::monitoring::monitor::Monitor::record_scored`]) and
//! handed in with [`Scored::set_receipts`]; without monitoring an answer carries none.

use std::sync::Arc;

use super::answer::{Phrases, Shown, Writer};
use super::dto::{ProbabilityRequest, AT_MEANS, NO_COVARIANCE, SATURATED};
use super::observations::field_error;
use super::problem::{FieldError, Kind, Problem};
use super::scorers::{with_scratch, Scratch};
use crate::engine::{effect_slots, Answer, Average, Averager, Warning};
use crate::metrics::ScoringMetrics;
use crate::model::{Model, Value};

/// Whether every number in an answer is finite.
pub fn is_finite(answer: &Answer) -> bool {
    let interval_ok = |i: &Option<crate::engine::Interval>| {
        i.is_none_or(|i| i.lower.is_finite() && i.upper.is_finite())
    };
    answer.probability.is_finite()
        && answer.linear_index.is_finite()
        && answer.std_error.is_none_or(f64::is_finite)
        && interval_ok(&answer.interval)
        && answer.effects.iter().all(|e| {
            e.effect.is_finite()
                && e.std_error.is_none_or(f64::is_finite)
                && interval_ok(&e.interval)
                && e.elasticity.is_none_or(f64::is_finite)
        })
        && answer
            .contributions
            .iter()
            .all(|c| c.contribution.is_finite())
}

/// Leave out an elasticity m·x/p that is not a number: where p underflows to 0 far in the
/// lower tail it is 0/0. The effect itself is still answered.
pub fn drop_undefined_elasticities(answer: &mut Answer) {
    for effect in &mut answer.effects {
        if effect.elasticity.is_some_and(|e| !e.is_finite()) {
            effect.elasticity = None;
        }
    }
}

fn average_is_finite(a: &Average) -> bool {
    a.value.is_finite()
        && a.std_error.is_none_or(f64::is_finite)
        && a.interval
            .is_none_or(|i| i.lower.is_finite() && i.upper.is_finite())
}

/// Everything computed for one request, ready to serialize.
pub struct Scored<'a> {
    model: &'a Model,
    /// The model's answer phrases, kept by this thread (`service::scorers`).
    phrases: Arc<Phrases>,
    request: &'a ProbabilityRequest,
    request_id: &'a str,
    answers: Vec<Answer>,
    averages: Option<(Average, Vec<Average>)>,
    at_means: Option<Answer>,
    receipts: Vec<String>,
    /// Notes made for this request alone (not_live, announced_ignored, faulty_observations):
    /// code and sentence.
    request_notes: Vec<(&'static str, String)>,
    /// The observations answered by their faults (`"on_error": "keep"`), in index order;
    /// empty otherwise.
    faults: Vec<FieldError>,
    /// The positions, among the values scored, of the observations whose answer was not
    /// finite and which are answered by their faults instead (ascending).
    dropped: Vec<usize>,
}

/// The code of the note on a batch some of whose observations are answered by their faults.
pub const FAULTY_OBSERVATIONS: &str = "faulty_observations";

/// The code of the note on an answer from a stored version that is not live.
pub const NOT_LIVE: &str = "not_live";

/// The code of the note on an answer whose observations sent fields that a stored version
/// announces and the answering version does not use.
pub const ANNOUNCED_IGNORED: &str = "announced_ignored";

/// The note's sentence for announced fields `fields` (each with the version announcing it).
pub fn announced_message(model: &Model, fields: &[(&str, &str)]) -> String {
    let listed: Vec<String> = fields
        .iter()
        .map(|(field, version)| format!("'{field}' (announced by stored version '{version}')"))
        .collect();
    format!(
        "version '{}' does not use {}: the field is accepted and ignored for scoring until the announcing version goes live",
        model.version(),
        listed.join(", ")
    )
}

/// The note's sentence: which version answered, that it is not live, and what that means for
/// its receipts and the monitoring series.
pub fn not_live_message(model: &Model, live_version: &str) -> String {
    format!(
        "version '{}' of model '{}' is stored but not live (the live version is '{live_version}'):          callers of /models/{}/probability get the live version's answers, not these;          receipts name '{}', so outcomes reported with them count toward its calibration only,          and these calls enter no drift window and no model-wide series",
        model.version(),
        model.name(),
        model.name(),
        model.version()
    )
}

/// The note's sentence for a batch of `total` observations of which `faulty` are answered by
/// their faults.
pub fn faulty_message(faulty: usize, total: usize) -> String {
    format!(
        "{faulty} of {total} observations were not scored (on_error: keep): each is answered in its place in results by its error, naming the field at fault; the other {} are scored as if sent alone, and average effects, when asked for, are over them only",
        total - faulty
    )
}

/// The index in the request of the `position`-th observation scored, when the observations of
/// `faults` (in index order) were set aside.
fn request_index(faults: &[FieldError], position: usize) -> usize {
    let mut index = position;
    for fault in faults {
        if fault.index > index {
            break;
        }
        index += 1;
    }
    index
}

/// The fault of an observation whose answer is not finite; `index` is its place in the batch.
fn not_computable(index: usize, batch: bool) -> Problem {
    let problem = Problem::new(
        Kind::NotComputable,
        "at these covariate values the answer overflows to a non-finite number",
    );
    if batch {
        problem.at(format!("/observations/{index}")).index(index)
    } else {
        problem.at("/observation")
    }
}

/// Score every observation (`values` is `n × covariates`, already checked); `faults` are the
/// observations of a batch set aside by the reader (`"on_error": "keep"`: they are answered by
/// their faults in their places, and an observation whose answer is not finite joins them).
/// The engine's scratch is this thread's kept scorer for `model` (`service::scorers`).
pub fn score<'a>(
    model: &'a Arc<Model>,
    request: &'a ProbabilityRequest,
    values: &[Value],
    faults: Vec<FieldError>,
    request_id: &'a str,
    metrics: &ScoringMetrics,
) -> Result<Scored<'a>, Problem> {
    with_scratch(model, |scratch| {
        score_with(scratch, model, request, values, faults, request_id, metrics)
    })
}

fn score_with<'a>(
    scratch: &mut Scratch,
    model: &'a Model,
    request: &'a ProbabilityRequest,
    values: &[Value],
    mut faults: Vec<FieldError>,
    request_id: &'a str,
    metrics: &ScoringMetrics,
) -> Result<Scored<'a>, Problem> {
    let phrases = scratch.phrases(model);
    let scorer = &mut scratch.scorer;
    let width = model.covariates.len().max(1);
    let n = values.len() / width;
    let keep = request.keep_faulty && request.batch;
    let mut averager = request
        .average_effects
        .then(|| Averager::new(model, scorer.slots().len()));
    let mut answers = Vec::with_capacity(n);
    let mut dropped = Vec::new();
    let mut out_of_range = vec![0u64; model.covariates.len()];
    let mut unusual = 0u64;
    for (i, observation) in values.chunks(width).enumerate() {
        let answer = match averager.as_mut() {
            Some(a) => scorer.score_and_average(model, observation, &request.options, a),
            None => scorer.score(model, observation, &request.options),
        };
        let mut answer = answer.clone();
        drop_undefined_elasticities(&mut answer);
        if !is_finite(&answer) {
            if keep {
                dropped.push(i);
                continue;
            }
            return Err(not_computable(i, request.batch));
        }
        metrics.probability.observe(answer.probability);
        for w in &answer.warnings {
            match w {
                Warning::OutOfRange { covariate, .. } => out_of_range[*covariate] += 1,
                Warning::UnusualCombination { .. } => unusual += 1,
            }
        }
        answers.push(answer);
    }
    if !dropped.is_empty() {
        if answers.is_empty() {
            // Nothing can be scored: refused as without "keep".
            return Err(not_computable(request_index(&faults, dropped[0]), true));
        }
        for &position in &dropped {
            let index = request_index(&faults, position);
            faults.push(field_error(&not_computable(index, true), index));
        }
        faults.sort_by_key(|f| f.index);
        // The averages were taken over every observation scored: take them again over the
        // finite ones alone.
        if let Some(averager) = averager.as_mut() {
            *averager = Averager::new(model, scorer.slots().len());
            for (i, observation) in values.chunks(width).enumerate() {
                if dropped.binary_search(&i).is_err() {
                    scorer.score_and_average(model, observation, &request.options, averager);
                }
            }
        }
    }
    metrics.scored.inc_by(answers.len() as u64);
    for (counter, count) in metrics.out_of_range.iter().zip(&out_of_range) {
        if *count > 0 {
            counter.inc_by(*count);
        }
    }
    if unusual > 0 {
        metrics.unusual.inc_by(unusual);
    }
    let averages = averager.map(|a| {
        let slots = effect_slots(model);
        a.finish(model, &slots, &request.options)
    });
    if let Some((p, effects)) = &averages {
        if !average_is_finite(p) || !effects.iter().all(average_is_finite) {
            return Err(Problem::new(
                Kind::NotComputable,
                "the average effects overflow to a non-finite number",
            )
            .at("/average_effects"));
        }
    }
    let at_means = request.at_means.then(|| {
        let mut options = request.options;
        options.effects = true;
        options.contributions = false;
        scorer.score_at_means(model, &options).clone()
    });
    if at_means.as_ref().is_some_and(|a| !is_finite(a)) {
        return Err(Problem::new(
            Kind::NotComputable,
            "the effects at the training means overflow to a non-finite number",
        )
        .at("/at_means"));
    }
    let mut request_notes = Vec::new();
    if !faults.is_empty() {
        let total = answers.len() + faults.len();
        request_notes.push((FAULTY_OBSERVATIONS, faulty_message(faults.len(), total)));
    }
    Ok(Scored {
        model,
        phrases,
        request,
        request_id,
        answers,
        averages,
        at_means,
        receipts: Vec::new(),
        request_notes,
        faults,
        dropped,
    })
}

impl Scored<'_> {
    /// The answers, in observation order.
    pub fn answers(&self) -> &[Answer] {
        &self.answers
    }

    /// Drop from `values` (the values scored, `n × covariates`) the observations whose answer
    /// was not finite and which are answered by their faults, so that they align with
    /// [`Scored::answers`] for monitoring. Nothing moves when every answer was finite.
    pub fn align_values(&self, values: &mut Vec<Value>) {
        if self.dropped.is_empty() {
            return;
        }
        let width = self.model.covariates.len().max(1);
        let mut kept = 0;
        for position in 0..values.len() / width {
            if self.dropped.binary_search(&position).is_err() {
                values.copy_within(position * width..(position + 1) * width, kept * width);
                kept += 1;
            }
        }
        values.truncate(kept * width);
    }

    /// The index in the request of each observation answered by its fault, in order.
    pub fn faulty_indices(&self) -> impl Iterator<Item = usize> + '_ {
        self.faults.iter().map(|f| f.index)
    }

    /// Give the answers their receipts, one per answer in order.
    pub fn set_receipts(&mut self, receipts: Vec<String>) {
        self.receipts = receipts;
    }

    /// Mark the answer as coming from a stored version that is not live, `live_version` being
    /// the live one (a `not_live` note says so).
    pub fn set_not_live(&mut self, live_version: &str) {
        let message = not_live_message(self.model, live_version);
        self.request_notes.push((NOT_LIVE, message));
    }

    /// Add a note made for this request alone.
    pub fn add_note(&mut self, code: &'static str, message: String) {
        self.request_notes.push((code, message));
    }

    /// The answer's JSON bytes (the layout of the module comment, written by
    /// `service::answer::Writer`).
    pub fn to_json(&self) -> Vec<u8> {
        // Sized from the answer's shape (about 220 bytes per effect, 64 per contribution and
        // 160 per warning), so that a large batch is written without regrowing the buffer.
        let per_answer = self.answers.first().map_or(512, |a| {
            440 + 220 * a.effects.len() + 64 * a.contributions.len() + 160 * a.warnings.len()
        });
        let model = self.model;
        let options = &self.request.options;
        let level = options.level();
        let shown = Shown {
            effects: options.effects,
            contributions: options.contributions,
            observation: true,
        };
        let capacity = 1024 + per_answer * self.answers.len() + 320 * self.faults.len();
        let mut w = Writer::new(model, &self.phrases, level, capacity);
        w.raw("{");
        w.text_member("request_id", self.request_id);
        w.text_member("model", model.name());
        w.text_member("version", model.version());
        w.text_member("link", model.link.name());
        w.number_member("level", level);
        if self.request.batch {
            w.count_member("count", self.answers.len() + self.faults.len());
            w.member("results");
            w.raw("[");
            // Each answer at its index in the request; the faults (none without "keep") in
            // the places between.
            let mut faults = self.faults.iter().peekable();
            let mut index = 0;
            for (i, answer) in self.answers.iter().enumerate() {
                while let Some(fault) = faults.next_if(|f| f.index == index) {
                    w.fault(fault, index == 0);
                    index += 1;
                }
                w.raw(if index == 0 { "{" } else { ",{" });
                w.count_member("index", index);
                w.answer_fields(answer, shown);
                if let Some(receipt) = self.receipts.get(i) {
                    w.text_member("receipt", receipt);
                }
                w.raw("}");
                index += 1;
            }
            for fault in faults {
                w.fault(fault, index == 0);
                index += 1;
            }
            w.raw("]");
        } else {
            if let Some(answer) = self.answers.first() {
                w.answer_fields(answer, shown);
            }
            if let Some(receipt) = self.receipts.first() {
                w.text_member("receipt", receipt);
            }
        }
        let mut notes: Vec<(&str, &str)> = Vec::new();
        if model.covariance.is_none() && options.intervals {
            notes.push((NO_COVARIANCE.code, NO_COVARIANCE.message));
        }
        let zero_width = |a: &Answer| a.interval.is_some_and(|i| i.lower == i.upper);
        if self.answers.iter().any(zero_width) {
            notes.push((SATURATED.code, SATURATED.message));
        }
        notes.extend(
            self.request_notes
                .iter()
                .map(|(code, message)| (*code, message.as_str())),
        );
        w.list("notes", &notes, |w, (code, message)| {
            w.raw("{");
            w.text_member("code", code);
            w.text_member("message", message);
            w.raw("}");
        });
        if let Some((probability, effects)) = &self.averages {
            w.member("average_effects");
            w.raw("{");
            w.count_member("count", self.answers.len());
            w.member("probability");
            w.average(probability);
            w.list("effects", effects, Writer::average);
            w.raw("}");
        }
        if let Some(answer) = &self.at_means {
            w.member("at_means");
            w.raw("{");
            let profile = Shown {
                effects: true,
                contributions: false,
                observation: false,
            };
            w.answer_fields(answer, profile);
            w.text_member("note", AT_MEANS.message);
            w.raw("}");
        }
        w.raw("}");
        w.finish()
    }
}

#[cfg(test)]
mod tests {
    use std::sync::Arc;

    use super::*;
    use crate::metrics::Metrics;
    use crate::service::dto::parse_level;

    /// A probit model whose income coefficient is so large that an income of 1e12 overflows
    /// the linear index (while ±10 and 20 saturate the probability at 1 or 0, finitely).
    fn overflowing_model() -> Arc<Model> {
        let text = include_str!("../../tests/http/models/plain-test/versions/v1.json");
        let mut file: serde_json::Value = serde_json::from_str(text).expect("the test model");
        file["terms"][1]["coefficient"] = serde_json::json!(1e300);
        Arc::new(Model::from_json(file.to_string().as_bytes()).expect("a valid model"))
    }

    fn values(incomes: &[f64]) -> Vec<Value> {
        incomes
            .iter()
            .flat_map(|&x| [Value::Number(x), Value::Number(1.0)])
            .collect()
    }

    fn request(keep_faulty: bool, count: usize) -> ProbabilityRequest {
        ProbabilityRequest {
            batch: true,
            count,
            options: parse_level(0.95).expect("a level"),
            average_effects: true,
            at_means: false,
            keep_faulty,
        }
    }

    fn fault(index: usize) -> FieldError {
        FieldError {
            type_uri: Kind::UnknownField.type_uri(),
            detail: "a fault found by the reader".to_string(),
            pointer: format!("/observations/{index}/colour"),
            index,
        }
    }

    #[test]
    fn a_non_finite_answer_kept_is_answered_by_its_fault_at_its_place_in_the_request() {
        let model = overflowing_model();
        let metrics = Metrics::new().expect("metrics").scoring(&model);
        // The request: 0 set aside by the reader, 1 = 10, 2 = 1e12 (overflows), 3 = -10.
        let mut scored_values = values(&[10.0, 1e12, -10.0]);
        let keep = request(true, 4);
        let scored = score(&model, &keep, &scored_values, vec![fault(0)], "r", &metrics)
            .expect("kept, not refused");
        assert_eq!(scored.answers().len(), 2);
        assert_eq!(scored.faulty_indices().collect::<Vec<_>>(), [0, 2]);
        scored.align_values(&mut scored_values);
        assert_eq!(scored_values, values(&[10.0, -10.0]));
        let json: serde_json::Value = serde_json::from_slice(&scored.to_json()).expect("JSON");
        assert_eq!(json["count"], 4);
        let results = json["results"].as_array().expect("results");
        let indices: Vec<_> = results.iter().map(|r| r["index"].clone()).collect();
        assert_eq!(indices, [0, 1, 2, 3]);
        assert_eq!(results[0]["error"]["pointer"], "/observations/0/colour");
        assert_eq!(results[2]["error"]["pointer"], "/observations/2");
        assert_eq!(
            results[2]["error"]["type"],
            Kind::NotComputable.type_uri().as_str()
        );
        assert_eq!(results[1]["probability"], 1.0);
        assert_eq!(results[3]["probability"], 0.0);
        // The averages are over the two finite answers alone: those of the same two sent as a
        // batch without faults.
        let alone_values = values(&[10.0, -10.0]);
        let alone_request = request(false, 2);
        let alone = score(
            &model,
            &alone_request,
            &alone_values,
            Vec::new(),
            "r",
            &metrics,
        )
        .expect("scored");
        let alone: serde_json::Value = serde_json::from_slice(&alone.to_json()).expect("JSON");
        assert_eq!(json["average_effects"], alone["average_effects"]);
        assert_eq!(json["average_effects"]["probability"]["probability"], 0.5);
        let note = &json["notes"].as_array().expect("notes")[1];
        assert_eq!(note["code"], FAULTY_OBSERVATIONS);
    }

    #[test]
    fn without_keep_or_with_nothing_finite_the_first_overflow_refuses_the_batch() {
        let model = overflowing_model();
        let metrics = Metrics::new().expect("metrics").scoring(&model);
        let stop = request(false, 3);
        let refused = score(
            &model,
            &stop,
            &values(&[10.0, 1e12, 1e12]),
            Vec::new(),
            "r",
            &metrics,
        )
        .err()
        .expect("refused");
        assert_eq!(
            (refused.kind, refused.index),
            (Kind::NotComputable, Some(1))
        );
        let keep = request(true, 3);
        let refused = score(
            &model,
            &keep,
            &values(&[1e12, -1e12]),
            vec![fault(0)],
            "r",
            &metrics,
        )
        .err()
        .expect("nothing to answer");
        assert_eq!(refused.kind, Kind::NotComputable);
        assert_eq!(refused.index, Some(1));
        assert_eq!(refused.pointer.as_deref(), Some("/observations/1"));
    }
}
