//! The JSON of a probability answer, written by hand into one buffer sized from the answer's
//! shape: keys are fixed text, names are escaped as they are copied from the model, numbers
//! go through [`crate::json_text`] (serde_json's own writers, so the bytes are the ones a
//! serializer would write). The layout of the answer is [`super::scoring`]'s; this module only
//! writes it.
//!
//! ```text
//! answer fields   probability, [std_error, interval {lower, upper, level}], linear_index,
//!                 [effects], [warnings], [contributions], [band], [above_threshold]
//! effect          covariate, [level, reference], kind, effect, [std_error, interval], [elasticity]
//! average         covariate, [level, reference], kind, effect | probability, [std_error, interval]
//! warning         code, covariate, value, training_range {min, max}, message
//!                 | code, covariates, distance, max_distance, message
//! contribution    covariate, contribution
//! note            code, message
//! fault           index, error {type, detail, pointer}
//! ```
//!
//! Why by hand: in the load benchmark, serializing a batch's answers through serde_json (a
//! map per object, every key and name escaped byte by byte) took half of the server's CPU.
//!
//! The text that every answer of a model version repeats is written once ([`Phrases`], kept
//! per thread beside the scorer): each effect's opening (its covariate, level, reference and
//! kind, escaped, up to `"effect":`) and each contribution's opening; an interval's closing
//! with the level's number is formatted once per request rather than for every interval. An
//! answer then copies those phrases and formats only its own numbers.

use std::ops::Range;

use super::dto::warning_code;
use super::problem::{echo_number, FieldError};
use crate::engine::{effect_slots, Answer, Average, Effect, EffectSlot, Interval, Warning};
use crate::json_text::{push_f64, push_str, push_u64};
use crate::model::Model;

/// What a per-observation answer shows.
#[derive(Debug, Clone, Copy)]
pub struct Shown {
    /// Show the effects list.
    pub effects: bool,
    /// Show the contributions list.
    pub contributions: bool,
    /// Show warnings, band and threshold (not for the at-means profile).
    pub observation: bool,
}

/// The text every answer of a model version repeats, escaped and joined once into one
/// buffer: each effect's opening by slot and each contribution's opening by covariate. Each
/// thread keeps a model version's phrases beside its scorer (`service::scorers`).
///
/// ```text
/// effect opening        {"covariate":NAME,["level":LEVEL,"reference":REFERENCE,]"kind":KIND,"effect":
/// contribution opening  {"covariate":NAME,"contribution":
/// ```
#[derive(Debug)]
pub struct Phrases {
    text: String,
    /// By effect slot, in [`effect_slots`] order.
    effect_openings: Vec<Range<usize>>,
    /// The position in `effect_openings` of each covariate's first slot.
    first_slot: Vec<usize>,
    /// By covariate.
    contribution_openings: Vec<Range<usize>>,
}

impl Phrases {
    /// The phrases of `model`'s answers.
    pub fn new(model: &Model) -> Phrases {
        let slots = effect_slots(model);
        let mut text = String::with_capacity(96 * slots.len() + 48 * model.covariates.len());
        let mut effect_openings = Vec::with_capacity(slots.len());
        let mut first_slot = vec![0; model.covariates.len()];
        for (s, slot) in slots.iter().enumerate() {
            if s == 0 || slots[s - 1].covariate != slot.covariate {
                first_slot[slot.covariate] = s;
            }
            let start = text.len();
            let covariate = &model.covariates[slot.covariate];
            text.push_str("{\"covariate\":");
            push_str(&mut text, &covariate.name);
            if let Some(level) = slot.level {
                text.push_str(",\"level\":");
                push_str(&mut text, &covariate.levels[level]);
                text.push_str(",\"reference\":");
                push_str(&mut text, &covariate.levels[covariate.reference]);
            }
            text.push_str(",\"kind\":");
            push_str(&mut text, slot.kind.name());
            text.push_str(",\"effect\":");
            effect_openings.push(start..text.len());
        }
        let contribution_openings = model
            .covariates
            .iter()
            .map(|covariate| {
                let start = text.len();
                text.push_str("{\"covariate\":");
                push_str(&mut text, &covariate.name);
                text.push_str(",\"contribution\":");
                start..text.len()
            })
            .collect();
        Phrases {
            text,
            effect_openings,
            first_slot,
            contribution_openings,
        }
    }

    /// `{"covariate":...,"effect":` for `slot` of `model`.
    fn effect_opening(&self, model: &Model, slot: &EffectSlot) -> &str {
        // A categorical covariate's slots are its levels in order, the reference left out.
        let first = self.first_slot[slot.covariate];
        let index = match slot.level {
            Some(level) if level > model.covariates[slot.covariate].reference => first + level - 1,
            Some(level) => first + level,
            None => first,
        };
        &self.text[self.effect_openings[index].clone()]
    }

    /// `{"covariate":NAME,"contribution":` for covariate `covariate`.
    fn contribution_opening(&self, covariate: usize) -> &str {
        &self.text[self.contribution_openings[covariate].clone()]
    }
}

/// An answer being written: the buffer, the model whose names it copies, its phrases, and an
/// interval's closing with the request's level (`,"level":LEVEL}`), formatted once.
pub struct Writer<'a> {
    out: String,
    model: &'a Model,
    phrases: &'a Phrases,
    interval_closing: String,
}

impl<'a> Writer<'a> {
    /// A writer with room for `capacity` bytes, for answers at interval level `level`;
    /// `phrases` are `model`'s.
    pub fn new(model: &'a Model, phrases: &'a Phrases, level: f64, capacity: usize) -> Writer<'a> {
        let mut interval_closing = String::with_capacity(32);
        interval_closing.push_str(",\"level\":");
        push_f64(&mut interval_closing, level);
        interval_closing.push('}');
        Writer {
            out: String::with_capacity(capacity),
            model,
            phrases,
            interval_closing,
        }
    }

    /// The bytes written.
    pub fn finish(self) -> Vec<u8> {
        self.out.into_bytes()
    }

    /// Fixed text: punctuation and keys (`,"key":`).
    pub fn raw(&mut self, text: &str) {
        self.out.push_str(text);
    }

    /// A string value.
    pub fn text(&mut self, text: &str) {
        push_str(&mut self.out, text);
    }

    /// A number value.
    pub fn number(&mut self, value: f64) {
        push_f64(&mut self.out, value);
    }

    /// A count value.
    pub fn count(&mut self, value: usize) {
        push_u64(&mut self.out, value as u64);
    }

    /// A boolean value.
    pub fn boolean(&mut self, value: bool) {
        self.raw(if value { "true" } else { "false" });
    }

    /// `"key":` after `,` unless the object has just been opened.
    fn key(&mut self, key: &str) {
        if !self.out.ends_with('{') {
            self.out.push(',');
        }
        self.out.push('"');
        self.out.push_str(key);
        self.out.push_str("\":");
    }

    /// A string member.
    pub fn text_member(&mut self, key: &str, text: &str) {
        self.key(key);
        self.text(text);
    }

    /// A number member.
    pub fn number_member(&mut self, key: &str, value: f64) {
        self.key(key);
        self.number(value);
    }

    /// A count member.
    pub fn count_member(&mut self, key: &str, value: usize) {
        self.key(key);
        self.count(value);
    }

    /// `"key":[` then each item written by `item`, comma-separated, then `]`.
    pub fn list<T>(&mut self, key: &str, items: &[T], mut item: impl FnMut(&mut Self, &T)) {
        self.key(key);
        self.out.push('[');
        for (i, each) in items.iter().enumerate() {
            if i > 0 {
                self.out.push(',');
            }
            item(self, each);
        }
        self.out.push(']');
    }

    /// `,"std_error":SE,"interval":{...}` for what is given.
    fn error(&mut self, std_error: Option<f64>, interval: Option<Interval>) {
        if let Some(se) = std_error {
            self.raw(",\"std_error\":");
            self.number(se);
        }
        if let Some(interval) = interval {
            self.raw(",\"interval\":{\"lower\":");
            self.number(interval.lower);
            self.raw(",\"upper\":");
            self.number(interval.upper);
            self.out.push_str(&self.interval_closing);
        }
    }

    /// The opening of an effect's object, up to `"effect":`.
    fn effect_opening(&mut self, slot: &EffectSlot) {
        self.out
            .push_str(self.phrases.effect_opening(self.model, slot));
    }

    fn effect(&mut self, effect: &Effect) {
        self.effect_opening(&effect.slot);
        self.number(effect.effect);
        self.error(effect.std_error, effect.interval);
        if let Some(e) = effect.elasticity {
            self.raw(",\"elasticity\":");
            self.number(e);
        }
        self.raw("}");
    }

    /// One averaged effect, or the averaged probability (no slot), as an object.
    pub fn average(&mut self, average: &Average) {
        if let Some(slot) = &average.slot {
            self.effect_opening(slot);
        } else {
            self.raw("{\"probability\":");
        }
        self.number(average.value);
        self.error(average.std_error, average.interval);
        self.raw("}");
    }

    fn warning(&mut self, warning: &Warning) {
        let model = self.model;
        self.raw("{");
        self.text_member("code", warning_code(warning));
        match *warning {
            Warning::OutOfRange {
                covariate,
                value,
                min,
                max,
            } => {
                let name = &model.covariates[covariate].name;
                self.text_member("covariate", name);
                self.number_member("value", value);
                self.key("training_range");
                self.raw("{\"min\":");
                self.number(min);
                self.raw(",\"max\":");
                self.number(max);
                self.raw("}");
                self.text_member(
                    "message",
                    &format!(
                        "{name} = {} lies outside the training range [{}, {}]: the model is extrapolating",
                        echo_number(value),
                        echo_number(min),
                        echo_number(max)
                    ),
                );
            }
            Warning::UnusualCombination {
                distance,
                max_distance,
            } => {
                let names: Vec<&str> = model
                    .joint
                    .iter()
                    .flat_map(|j| j.covariates.iter())
                    .map(|&c| model.covariates[c].name.as_str())
                    .collect();
                self.list("covariates", &names, |w, name| w.text(name));
                self.number_member("distance", distance);
                self.number_member("max_distance", max_distance);
                self.text_member(
                    "message",
                    &format!(
                        "the combination of {} is unlike the training data (Mahalanobis distance {distance:.3}, largest in training {max_distance:.3}): the model is extrapolating",
                        names.join(", ")
                    ),
                );
            }
        }
        self.raw("}");
    }

    /// The fields of one answer, into the object being written.
    pub fn answer_fields(&mut self, answer: &Answer, shown: Shown) {
        let model = self.model;
        self.number_member("probability", answer.probability);
        self.error(answer.std_error, answer.interval);
        self.raw(",\"linear_index\":");
        self.number(answer.linear_index);
        if shown.effects {
            self.list("effects", &answer.effects, Self::effect);
        }
        if shown.observation {
            self.list("warnings", &answer.warnings, Self::warning);
        }
        if shown.contributions {
            self.list("contributions", &answer.contributions, |w, c| {
                w.out.push_str(w.phrases.contribution_opening(c.covariate));
                w.number(c.contribution);
                w.raw("}");
            });
        }
        if shown.observation {
            if let (Some(band), Some(decision)) = (answer.band, &model.file.decision) {
                self.text_member("band", &decision.bands[band].name);
            }
            if let Some(above) = answer.above_threshold {
                self.key("above_threshold");
                self.boolean(above);
            }
        }
    }

    /// A faulty observation of a batch answered by its fault, in its place in `results`
    /// (`first`: it opens the list, so no comma before it).
    pub fn fault(&mut self, fault: &FieldError, first: bool) {
        self.raw(if first { "{" } else { ",{" });
        self.count_member("index", fault.index);
        self.key("error");
        self.raw("{");
        self.text_member("type", &fault.type_uri);
        self.text_member("detail", &fault.detail);
        self.text_member("pointer", &fault.pointer);
        self.raw("}}");
    }

    /// `"key":` for a member whose value the caller writes.
    pub fn member(&mut self, key: &str) {
        self.key(key);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The lease test model with the reference level of its categorical covariate moved from
    /// the first level to the third, so that slots fall on both sides of it.
    fn middle_reference_model() -> Model {
        let text = include_str!("../../tests/http/models/lease-test/versions/2026-01.json");
        let mut file: serde_json::Value = serde_json::from_str(text).expect("the test model");
        file["covariates"][4]["reference"] = serde_json::json!("transport");
        for term in file["terms"].as_array_mut().expect("terms") {
            if term["term"] == "sector=transport" {
                term["term"] = serde_json::json!("sector=retail");
            }
        }
        Model::from_json(file.to_string().as_bytes()).expect("a valid model")
    }

    /// Reference: serde_json's serializer writing each slot's members, the way every other
    /// object of the service is written.
    #[test]
    fn each_effect_opening_names_its_own_slot_as_a_serializer_writes_it() {
        let model = middle_reference_model();
        let phrases = Phrases::new(&model);
        let slots = effect_slots(&model);
        assert!(
            slots.iter().any(|s| s.level == Some(0)) && slots.iter().any(|s| s.level == Some(3))
        );
        for slot in &slots {
            let covariate = &model.covariates[slot.covariate];
            let mut expected =
                serde_json::to_string(&serde_json::json!({ "covariate": covariate.name }))
                    .expect("serialize");
            expected.pop();
            if let Some(level) = slot.level {
                let members = serde_json::json!({
                    "level": covariate.levels[level],
                    "reference": covariate.levels[covariate.reference],
                });
                let text = serde_json::to_string(&members).expect("serialize");
                expected.push(',');
                expected.push_str(&text[1..text.len() - 1]);
            }
            expected.push_str(&format!(",\"kind\":\"{}\",\"effect\":", slot.kind.name()));
            assert_eq!(phrases.effect_opening(&model, slot), expected, "{slot:?}");
        }
        for (j, covariate) in model.covariates.iter().enumerate() {
            let text = serde_json::to_string(&serde_json::json!({ "covariate": covariate.name }))
                .expect("serialize");
            let expected = format!("{},\"contribution\":", &text[..text.len() - 1]);
            assert_eq!(phrases.contribution_opening(j), expected);
        }
    }
}
