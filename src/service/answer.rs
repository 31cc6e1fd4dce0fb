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

use super::dto::warning_code;
use super::problem::{echo_number, FieldError};
use crate::engine::{Answer, Average, Effect, EffectSlot, Interval, Warning};
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

/// An answer being written: the buffer, the model whose names it copies and the interval
/// level of its intervals.
pub struct Writer<'a> {
    out: String,
    model: &'a Model,
    level: f64,
}

impl<'a> Writer<'a> {
    /// A writer with room for `capacity` bytes.
    pub fn new(model: &'a Model, level: f64, capacity: usize) -> Writer<'a> {
        Writer {
            out: String::with_capacity(capacity),
            model,
            level,
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

    fn error(&mut self, std_error: Option<f64>, interval: Option<Interval>) {
        if let Some(se) = std_error {
            self.number_member("std_error", se);
        }
        if let Some(interval) = interval {
            self.key("interval");
            self.raw("{\"lower\":");
            self.number(interval.lower);
            self.raw(",\"upper\":");
            self.number(interval.upper);
            self.raw(",\"level\":");
            self.number(self.level);
            self.raw("}");
        }
    }

    fn slot(&mut self, slot: &EffectSlot) {
        let model = self.model;
        let covariate = &model.covariates[slot.covariate];
        self.text_member("covariate", &covariate.name);
        if let Some(level) = slot.level {
            self.text_member("level", &covariate.levels[level]);
            self.text_member("reference", &covariate.levels[covariate.reference]);
        }
        self.text_member("kind", slot.kind.name());
    }

    fn effect(&mut self, effect: &Effect) {
        self.raw("{");
        self.slot(&effect.slot);
        self.number_member("effect", effect.effect);
        self.error(effect.std_error, effect.interval);
        if let Some(e) = effect.elasticity {
            self.number_member("elasticity", e);
        }
        self.raw("}");
    }

    /// One averaged effect, or the averaged probability (no slot), as an object.
    pub fn average(&mut self, average: &Average) {
        self.raw("{");
        if let Some(slot) = &average.slot {
            self.slot(slot);
            self.number_member("effect", average.value);
        } else {
            self.number_member("probability", average.value);
        }
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
        self.number_member("linear_index", answer.linear_index);
        if shown.effects {
            self.list("effects", &answer.effects, Self::effect);
        }
        if shown.observation {
            self.list("warnings", &answer.warnings, Self::warning);
        }
        if shown.contributions {
            self.list("contributions", &answer.contributions, |w, c| {
                w.raw("{");
                w.text_member("covariate", &model.covariates[c.covariate].name);
                w.number_member("contribution", c.contribution);
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
