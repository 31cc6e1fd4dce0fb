//! Scoring a checked probability request with the engine and writing the answer's JSON.
//!
//! The statistics are the engine's; this module only drives a [`Scorer`] over the
//! observations, records the scoring metrics once per request, refuses an answer that is not
//! finite (422 `not-computable`, never a `null` where a number is promised), and writes the
//! answer ([`super::answer`]).
//!
//! ```text
//! one observation:  {request_id, model, version, link, level, <answer fields>, [receipt], notes, [average_effects], [at_means]}
//! a batch:          {request_id, model, version, link, level, count, results: [{index, <answer fields>, [receipt]}], notes, [average_effects], [at_means]}
//! notes             no_covariance (no intervals can be given), saturated_interval (a
//!                   probability interval of zero width: within rounding of 0 or 1), not_live
//!                   (a stored version asked for by label, not the live one: see [`NOT_LIVE`]),
//!                   announced_ignored (fields a stored version announces, accepted and not
//!                   used by the live version: see [`ANNOUNCED_IGNORED`])
//! ```
//!
//! Receipts are sealed by monitoring ([`crate::monitoring::monitor::Monitor::record_scored`]) and
//! handed in with [`Scored::set_receipts`]; without monitoring an answer carries none.

use super::answer::{Shown, Writer};
use super::dto::{ProbabilityRequest, AT_MEANS, NO_COVARIANCE, SATURATED};
use super::problem::{Kind, Problem};
use crate::engine::{effect_slots, Answer, Average, Averager, Scorer, Warning};
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
    request: &'a ProbabilityRequest,
    request_id: &'a str,
    answers: Vec<Answer>,
    averages: Option<(Average, Vec<Average>)>,
    at_means: Option<Answer>,
    receipts: Vec<String>,
    /// Notes made for this request alone (not_live, announced_ignored): code and sentence.
    request_notes: Vec<(&'static str, String)>,
}

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

/// Score every observation (`values` is `n × covariates`, already checked).
pub fn score<'a>(
    model: &'a Model,
    request: &'a ProbabilityRequest,
    values: &[Value],
    request_id: &'a str,
    metrics: &ScoringMetrics,
) -> Result<Scored<'a>, Problem> {
    let width = model.covariates.len().max(1);
    let n = values.len() / width;
    let mut scorer = Scorer::new(model);
    let mut averager = request
        .average_effects
        .then(|| Averager::new(model, scorer.slots().len()));
    let mut answers = Vec::with_capacity(n);
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
            let base = if request.batch {
                format!("/observations/{i}")
            } else {
                "/observation".to_string()
            };
            let problem = Problem::new(
                Kind::NotComputable,
                "at these covariate values the answer overflows to a non-finite number",
            )
            .at(base);
            return Err(if request.batch {
                problem.index(i)
            } else {
                problem
            });
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
    metrics.scored.inc_by(n as u64);
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
    Ok(Scored {
        model,
        request,
        request_id,
        answers,
        averages,
        at_means,
        receipts: Vec::new(),
        request_notes: Vec::new(),
    })
}

impl Scored<'_> {
    /// The answers, in observation order.
    pub fn answers(&self) -> &[Answer] {
        &self.answers
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
    /// [`super::answer::Writer`]).
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
        let mut w = Writer::new(model, level, 1024 + per_answer * self.answers.len());
        w.raw("{");
        w.text_member("request_id", self.request_id);
        w.text_member("model", model.name());
        w.text_member("version", model.version());
        w.text_member("link", model.link.name());
        w.number_member("level", level);
        if self.request.batch {
            w.count_member("count", self.answers.len());
            w.member("results");
            w.raw("[");
            for (i, answer) in self.answers.iter().enumerate() {
                w.raw(if i == 0 { "{" } else { ",{" });
                w.count_member("index", i);
                w.answer_fields(answer, shown);
                if let Some(receipt) = self.receipts.get(i) {
                    w.text_member("receipt", receipt);
                }
                w.raw("}");
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
