//! Request and response types of the public routes.
//!
//! Requests are read from a parsed JSON value by hand rather than derived, so that every
//! mistake names its JSON Pointer (`/observations/3/sector`, `/level`). Responses are views
//! that borrow the model and the engine's answer and serialize straight to bytes: covariate and
//! level names are written from the model, never copied per answer.
//!
//! The probability request body:
//!
//! ```text
//! observation | observations   one object, or an array of objects (exactly one of the two)
//! effects         bool   true    marginal effects of every covariate
//! intervals       bool   true    standard errors and intervals (when the model has a covariance)
//! level           number 0.95    interval level, 0 < level ≤ 0.999999
//! elasticities    bool   false   m·x/p for continuous covariates (left out where p underflows to 0)
//! contributions   bool   true    each covariate's contribution to the index, ranked
//! average_effects bool   false   average marginal effects over the observations
//! at_means        bool   false   effects at the training means
//! ```

use serde::ser::{SerializeMap, SerializeSeq};
use serde::{Serialize, Serializer};
use serde_json::{Map, Value as Json};

use super::problem::{echo, echo_json, echo_number, Kind, Problem};
use crate::engine::{
    Answer, Average, Contribution, Effect, EffectSlot, Interval, Options, Warning,
};
use crate::model::Model;

/// The largest interval level accepted: beyond it the normal quantile is no longer a useful
/// finite number.
pub const MAX_LEVEL: f64 = 0.999_999;

/// The observations of a request: one, or a batch.
#[derive(Debug, Clone, Copy)]
pub enum Observations<'a> {
    /// `{"observation": {...}}`
    One(&'a Map<String, Json>),
    /// `{"observations": [...]}`
    Many(&'a [Json]),
}

impl Observations<'_> {
    /// How many observations.
    pub fn len(&self) -> usize {
        match self {
            Observations::One(_) => 1,
            Observations::Many(list) => list.len(),
        }
    }

    /// Whether there are none.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
}

/// A probability request's shape and options (its observations are read separately: as JSON
/// by [`parse_probability_request`], or straight into values by `service::direct`).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ProbabilityRequest {
    /// Whether the observations came as a batch (`observations`) rather than one
    /// (`observation`).
    pub batch: bool,
    /// How many observations.
    pub count: usize,
    /// What to compute per observation.
    pub options: Options,
    /// Average effects over the observations.
    pub average_effects: bool,
    /// Effects at the training means.
    pub at_means: bool,
}

/// The fields a probability request may carry.
pub const REQUEST_FIELDS: [&str; 9] = [
    "observation",
    "observations",
    "effects",
    "intervals",
    "level",
    "elasticities",
    "contributions",
    "average_effects",
    "at_means",
];

fn boolean(body: &Map<String, Json>, name: &str, default: bool) -> Result<bool, Problem> {
    match body.get(name) {
        None => Ok(default),
        Some(Json::Bool(b)) => Ok(*b),
        Some(other) => Err(Problem::new(
            Kind::InvalidOption,
            format!("'{name}' must be true or false, got {}", echo_json(other)),
        )
        .at(format!("/{name}"))),
    }
}

/// Read a probability request from a parsed body: its shape and options, and its observations
/// as sent (not yet checked against a model).
pub fn parse_probability_request(
    body: &Json,
    max_batch: usize,
) -> Result<(ProbabilityRequest, Observations<'_>), Problem> {
    let Json::Object(body) = body else {
        return Err(Problem::new(
            Kind::InvalidBody,
            "the body must be a JSON object with 'observation' or 'observations'",
        )
        .at(""));
    };
    if let Some(key) = body.keys().find(|k| !REQUEST_FIELDS.contains(&k.as_str())) {
        return Err(Problem::new(
            Kind::UnknownField,
            format!(
                "{} is not a field of a probability request (fields: {})",
                echo(key),
                REQUEST_FIELDS.join(", ")
            ),
        )
        .at(format!("/{}", super::problem::escape_pointer_token(key))));
    }
    let observations = match (body.get("observation"), body.get("observations")) {
        (Some(_), Some(_)) => {
            return Err(Problem::new(
                Kind::ConflictingFields,
                "send 'observation' (one object) or 'observations' (an array), not both",
            )
            .at("/observations"))
        }
        (None, None) => {
            return Err(Problem::new(
                Kind::MissingObservation,
                "send 'observation' (one object) or 'observations' (an array of objects)",
            )
            .at(""))
        }
        (Some(Json::Object(one)), None) => Observations::One(one),
        (Some(other), None) => {
            return Err(Problem::new(
                Kind::InvalidBody,
                format!(
                    "'observation' must be an object of covariate values, got {}",
                    json_kind(other)
                ),
            )
            .at("/observation"))
        }
        (None, Some(Json::Array(list))) => {
            if list.is_empty() {
                return Err(
                    Problem::new(Kind::EmptyBatch, "'observations' is an empty array")
                        .at("/observations"),
                );
            }
            if list.len() > max_batch {
                return Err(Problem::new(
                    Kind::TooManyObservations,
                    format!(
                        "the batch has {} observations; the limit is {max_batch}",
                        list.len()
                    ),
                )
                .at("/observations")
                .limit(max_batch as u64));
            }
            Observations::Many(list)
        }
        (None, Some(other)) => {
            return Err(Problem::new(
                Kind::InvalidBody,
                format!(
                    "'observations' must be an array of objects, got {}",
                    json_kind(other)
                ),
            )
            .at("/observations"))
        }
    };
    let level = match body.get("level") {
        None => 0.95,
        Some(Json::Number(n)) => n.as_f64().unwrap_or(f64::NAN),
        Some(other) => {
            return Err(Problem::new(
                Kind::InvalidOption,
                format!("'level' must be a number, got {}", echo_json(other)),
            )
            .at("/level"))
        }
    };
    let mut options = parse_level(level).map_err(|p| p.at("/level"))?;
    options.effects = boolean(body, "effects", true)?;
    options.intervals = boolean(body, "intervals", true)?;
    options.elasticities = boolean(body, "elasticities", false)?;
    options.contributions = boolean(body, "contributions", true)?;
    let request = ProbabilityRequest {
        batch: matches!(observations, Observations::Many(_)),
        count: observations.len(),
        options,
        average_effects: boolean(body, "average_effects", false)?,
        at_means: boolean(body, "at_means", false)?,
    };
    Ok((request, observations))
}

/// Engine options for an interval level, refused outside `(0, MAX_LEVEL]`.
pub fn parse_level(level: f64) -> Result<Options, Problem> {
    if level > MAX_LEVEL {
        return Err(Problem::new(
            Kind::InvalidOption,
            format!(
                "the interval level must be at most {MAX_LEVEL}, got {}",
                echo_number(level)
            ),
        ));
    }
    Options::new(level).map_err(|e| {
        Problem::new(
            Kind::InvalidOption,
            format!(
                "the interval level must lie strictly between 0 and 1, got {}",
                echo_number(e.0)
            ),
        )
    })
}

/// A short description of a JSON value's type, for messages.
pub fn json_kind(value: &Json) -> &'static str {
    match value {
        Json::Null => "null",
        Json::Bool(_) => "a boolean",
        Json::Number(_) => "a number",
        Json::String(_) => "text",
        Json::Array(_) => "an array",
        Json::Object(_) => "an object",
    }
}

/// An interval with its level, as answered.
#[derive(Debug, Clone, Copy, Serialize)]
pub struct IntervalView {
    /// Lower bound.
    pub lower: f64,
    /// Upper bound.
    pub upper: f64,
    /// Its level.
    pub level: f64,
}

impl IntervalView {
    /// An engine interval at `level`.
    pub fn new(interval: Interval, level: f64) -> IntervalView {
        IntervalView {
            lower: interval.lower,
            upper: interval.upper,
            level,
        }
    }
}

fn put_slot<M: SerializeMap>(
    map: &mut M,
    model: &Model,
    slot: &EffectSlot,
) -> Result<(), M::Error> {
    let covariate = &model.covariates[slot.covariate];
    map.serialize_entry("covariate", &covariate.name)?;
    if let Some(level) = slot.level {
        map.serialize_entry("level", &covariate.levels[level])?;
        map.serialize_entry("reference", &covariate.levels[covariate.reference])?;
    }
    map.serialize_entry("kind", slot.kind.name())
}

fn put_error<M: SerializeMap>(
    map: &mut M,
    std_error: Option<f64>,
    interval: Option<Interval>,
    level: f64,
) -> Result<(), M::Error> {
    if let Some(se) = std_error {
        map.serialize_entry("std_error", &se)?;
    }
    if let Some(interval) = interval {
        map.serialize_entry("interval", &IntervalView::new(interval, level))?;
    }
    Ok(())
}

/// One marginal effect.
pub struct EffectView<'a> {
    /// The model.
    pub model: &'a Model,
    /// The effect.
    pub effect: &'a Effect,
    /// The interval level.
    pub level: f64,
}

impl Serialize for EffectView<'_> {
    fn serialize<S: Serializer>(&self, serializer: S) -> Result<S::Ok, S::Error> {
        let mut map = serializer.serialize_map(None)?;
        put_slot(&mut map, self.model, &self.effect.slot)?;
        map.serialize_entry("effect", &self.effect.effect)?;
        put_error(
            &mut map,
            self.effect.std_error,
            self.effect.interval,
            self.level,
        )?;
        if let Some(e) = self.effect.elasticity {
            map.serialize_entry("elasticity", &e)?;
        }
        map.end()
    }
}

/// One averaged effect.
pub struct AverageView<'a> {
    /// The model.
    pub model: &'a Model,
    /// The average.
    pub average: &'a Average,
    /// The interval level.
    pub level: f64,
}

impl Serialize for AverageView<'_> {
    fn serialize<S: Serializer>(&self, serializer: S) -> Result<S::Ok, S::Error> {
        let mut map = serializer.serialize_map(None)?;
        if let Some(slot) = &self.average.slot {
            put_slot(&mut map, self.model, slot)?;
            map.serialize_entry("effect", &self.average.value)?;
        } else {
            map.serialize_entry("probability", &self.average.value)?;
        }
        put_error(
            &mut map,
            self.average.std_error,
            self.average.interval,
            self.level,
        )?;
        map.end()
    }
}

/// The stable code of a warning.
pub fn warning_code(warning: &Warning) -> &'static str {
    match warning {
        Warning::OutOfRange { .. } => "out_of_range",
        Warning::UnusualCombination { .. } => "unusual_combination",
    }
}

/// One extrapolation warning.
pub struct WarningView<'a> {
    /// The model.
    pub model: &'a Model,
    /// The warning.
    pub warning: &'a Warning,
}

#[derive(Serialize)]
struct Range {
    min: f64,
    max: f64,
}

impl Serialize for WarningView<'_> {
    fn serialize<S: Serializer>(&self, serializer: S) -> Result<S::Ok, S::Error> {
        let mut map = serializer.serialize_map(None)?;
        map.serialize_entry("code", warning_code(self.warning))?;
        match *self.warning {
            Warning::OutOfRange {
                covariate,
                value,
                min,
                max,
            } => {
                let name = &self.model.covariates[covariate].name;
                map.serialize_entry("covariate", name)?;
                map.serialize_entry("value", &value)?;
                map.serialize_entry("training_range", &Range { min, max })?;
                map.serialize_entry(
                    "message",
                    &format!(
                        "{name} = {} lies outside the training range [{}, {}]: the model is extrapolating",
                        echo_number(value),
                        echo_number(min),
                        echo_number(max)
                    ),
                )?;
            }
            Warning::UnusualCombination {
                distance,
                max_distance,
            } => {
                let names: Vec<&str> = self
                    .model
                    .joint
                    .iter()
                    .flat_map(|j| j.covariates.iter())
                    .map(|&c| self.model.covariates[c].name.as_str())
                    .collect();
                map.serialize_entry("covariates", &names)?;
                map.serialize_entry("distance", &distance)?;
                map.serialize_entry("max_distance", &max_distance)?;
                map.serialize_entry(
                    "message",
                    &format!(
                        "the combination of {} is unlike the training data (Mahalanobis distance {distance:.3}, largest in training {max_distance:.3}): the model is extrapolating",
                        names.join(", ")
                    ),
                )?;
            }
        }
        map.end()
    }
}

/// One covariate's contribution to the linear index.
pub struct ContributionView<'a> {
    /// The model.
    pub model: &'a Model,
    /// The contribution.
    pub contribution: &'a Contribution,
}

impl Serialize for ContributionView<'_> {
    fn serialize<S: Serializer>(&self, serializer: S) -> Result<S::Ok, S::Error> {
        let mut map = serializer.serialize_map(Some(2))?;
        map.serialize_entry(
            "covariate",
            &self.model.covariates[self.contribution.covariate].name,
        )?;
        map.serialize_entry("contribution", &self.contribution.contribution)?;
        map.end()
    }
}

/// A list of views built on the fly from a slice.
pub struct ListView<'a, T, F> {
    /// The items.
    pub items: &'a [T],
    /// How to view each.
    pub view: F,
}

impl<'a, T, V: Serialize, F: Fn(&'a T) -> V> Serialize for ListView<'a, T, F> {
    fn serialize<S: Serializer>(&self, serializer: S) -> Result<S::Ok, S::Error> {
        let mut seq = serializer.serialize_seq(Some(self.items.len()))?;
        for item in self.items {
            seq.serialize_element(&(self.view)(item))?;
        }
        seq.end()
    }
}

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

/// Write the fields of one answer into an open map.
pub fn put_answer<M: SerializeMap>(
    map: &mut M,
    model: &Model,
    answer: &Answer,
    level: f64,
    shown: Shown,
) -> Result<(), M::Error> {
    map.serialize_entry("probability", &answer.probability)?;
    put_error(map, answer.std_error, answer.interval, level)?;
    map.serialize_entry("linear_index", &answer.linear_index)?;
    if shown.effects {
        map.serialize_entry(
            "effects",
            &ListView {
                items: &answer.effects,
                view: |effect| EffectView {
                    model,
                    effect,
                    level,
                },
            },
        )?;
    }
    if shown.observation {
        map.serialize_entry(
            "warnings",
            &ListView {
                items: &answer.warnings,
                view: |warning| WarningView { model, warning },
            },
        )?;
    }
    if shown.contributions {
        map.serialize_entry(
            "contributions",
            &ListView {
                items: &answer.contributions,
                view: |contribution| ContributionView {
                    model,
                    contribution,
                },
            },
        )?;
    }
    if shown.observation {
        if let (Some(band), Some(decision)) = (answer.band, &model.file.decision) {
            map.serialize_entry("band", &decision.bands[band].name)?;
        }
        if let Some(above) = answer.above_threshold {
            map.serialize_entry("above_threshold", &above)?;
        }
    }
    Ok(())
}

/// One answer as its own object (an element of a batch's `results`).
pub struct AnswerView<'a> {
    /// The model.
    pub model: &'a Model,
    /// The answer.
    pub answer: &'a Answer,
    /// The interval level.
    pub level: f64,
    /// What to show.
    pub shown: Shown,
    /// The observation's index in the batch.
    pub index: Option<usize>,
    /// The answer's receipt, when monitoring sealed one.
    pub receipt: Option<&'a str>,
}

impl Serialize for AnswerView<'_> {
    fn serialize<S: Serializer>(&self, serializer: S) -> Result<S::Ok, S::Error> {
        let mut map = serializer.serialize_map(None)?;
        if let Some(i) = self.index {
            map.serialize_entry("index", &i)?;
        }
        put_answer(&mut map, self.model, self.answer, self.level, self.shown)?;
        if let Some(receipt) = self.receipt {
            map.serialize_entry("receipt", receipt)?;
        }
        map.end()
    }
}

/// A note on the whole answer (for example: no covariance, so no intervals).
#[derive(Debug, Clone, Copy, Serialize)]
pub struct Note {
    /// A stable code.
    pub code: &'static str,
    /// A plain sentence.
    pub message: &'static str,
}

/// The note given when a model has no covariance and intervals were asked for.
pub const NO_COVARIANCE: Note = Note {
    code: "no_covariance",
    message: "this model version has no coefficient covariance, so answers carry no standard errors or intervals",
};

/// The note given when a probability interval has zero width: the probability is within
/// rounding of 0 or 1, and so are both ends of its interval.
pub const SATURATED: Note = Note {
    code: "saturated_interval",
    message: "a probability here is so close to 0 or 1 that both ends of its interval round to the same double: the zero width comes from the number format, not from certainty; the linear index and its standard error still show the uncertainty",
};

/// The note given with effects at the training means.
pub const AT_MEANS: Note = Note {
    code: "at_means_profile",
    message: "effects at means are evaluated at the training-mean observation: numeric covariates at their means, categorical covariates at their training shares; terms are built from that profile, so a square term is the square of the mean",
};
