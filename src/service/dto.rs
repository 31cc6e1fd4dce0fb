//! Request and response types of the public routes.
//!
//! Requests are read from a parsed JSON value by hand rather than derived, so that every
//! mistake names its JSON Pointer (`/observations/3/sector`, `/level`). Answers are written by
//! `service::answer`; this file holds the notes they carry.
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
//! on_error        text   "stop"  in a batch: "stop" refuses it when any observation is faulty;
//!                                "keep" answers each faulty one by its error, in its place
//! ```

use serde::Serialize;
use serde_json::{Map, Value as Json};

use super::problem::{echo, echo_json, echo_number, Kind, Problem};
use crate::engine::{Interval, Options, Warning};

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
    /// In a batch, answer each faulty observation by its error in its place rather than
    /// refuse the batch (`"on_error": "keep"`).
    pub keep_faulty: bool,
}

/// The fields a probability request may carry.
pub const REQUEST_FIELDS: [&str; 10] = [
    "observation",
    "observations",
    "effects",
    "intervals",
    "level",
    "elasticities",
    "contributions",
    "average_effects",
    "at_means",
    "on_error",
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
        keep_faulty: on_error(body)?,
    };
    Ok((request, observations))
}

/// `on_error`: whether a faulty observation of a batch is answered by its error (`"keep"`)
/// rather than refusing the batch (`"stop"`, the default).
fn on_error(body: &Map<String, Json>) -> Result<bool, Problem> {
    match body.get("on_error") {
        None => Ok(false),
        Some(Json::String(s)) if s == "stop" => Ok(false),
        Some(Json::String(s)) if s == "keep" => Ok(true),
        Some(other) => Err(Problem::new(
            Kind::InvalidOption,
            format!(
                "'on_error' must be \"stop\" (refuse a batch that has a faulty observation) or \"keep\" (answer each faulty observation by its error, in its place), got {}",
                echo_json(other)
            ),
        )
        .at("/on_error")),
    }
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

/// An interval with its level, as a curve answers it.
#[derive(Debug, Clone, Copy, Serialize)]
pub struct IntervalView {
    /// The lower end, a probability or an effect as the curve's quantity is.
    pub lower: f64,
    /// The upper end, at least `lower`.
    pub upper: f64,
    /// The confidence level the interval was built at, between 0 and 1 (the request's, 0.95
    /// by default).
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

/// The stable code of a warning.
pub fn warning_code(warning: &Warning) -> &'static str {
    match warning {
        Warning::OutOfRange { .. } => "out_of_range",
        Warning::UnusualCombination { .. } => "unusual_combination",
    }
}

/// A note on the whole answer (for example: no covariance, so no intervals).
#[derive(Debug, Clone, Copy)]
pub struct Note {
    /// A code that does not change between releases, for a client to match on (snake case).
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
