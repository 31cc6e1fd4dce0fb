//! Turning a request's observations into engine values, with the service's numeric bounds on
//! top of the model's own checks, and every fault located by JSON Pointer.
//!
//! The bounds exist so that any value a caller may send gives a finite answer:
//!
//! ```text
//! every numeric covariate      |x| ≤ 1e12
//! a covariate in a log term    x ≥ 1e-12      (so 1/x, the derivative of log x, stays modest)
//! ```
//!
//! A batch is checked in full before anything is scored: the first fault is the problem's
//! pointer, and up to [`MAX_LISTED_ERRORS`] faults are listed in its `errors` member. Asked to
//! keep faulty observations (`"on_error": "keep"`), [`parse`] instead sets each faulty
//! observation aside with that same fault and reads the others.

use serde_json::{Map, Value as Json};

use super::dto::{json_kind, Observations};
use super::problem::{echo, echo_number, escape_pointer_token, FieldError, Kind, Problem};
use crate::model::{Model, ObservationError, Value};

/// The largest magnitude of a numeric covariate.
pub const MAX_MAGNITUDE: f64 = 1e12;
/// The smallest value of a covariate that enters a log term.
pub const MIN_LOG_ARGUMENT: f64 = 1e-12;
/// The most faults listed in one problem.
pub const MAX_LISTED_ERRORS: usize = 100;

/// A fault in one observation: its problem, relative to the observation.
fn bound_error(model: &Model, values: &[Value]) -> Option<(Kind, String, usize)> {
    for (j, (covariate, value)) in model.covariates.iter().zip(values).enumerate() {
        if let Value::Number(x) = *value {
            if x.abs() > MAX_MAGNITUDE {
                return Some((
                    Kind::OutsideDomain,
                    format!(
                        "covariate {} is {}; the service takes numbers within ±{MAX_MAGNITUDE:e}",
                        echo(&covariate.name),
                        echo_number(x)
                    ),
                    j,
                ));
            }
        }
    }
    for &(term, j) in &model.log_terms {
        let x = values[j].number();
        if x < MIN_LOG_ARGUMENT {
            return Some((
                Kind::OutsideDomain,
                format!(
                    "term '{}' needs {} ≥ {MIN_LOG_ARGUMENT:e}, got {}",
                    model.term_labels[term],
                    model.covariates[j].name,
                    echo_number(x)
                ),
                j,
            ));
        }
    }
    None
}

/// Parse one observation (a JSON value that must be an object) into `values`; the problem's
/// pointer is under `base`.
pub fn parse_one(
    model: &Model,
    observation: &Json,
    base: &str,
    values: &mut Vec<Value>,
    accepted: &[&str],
) -> Result<(), Problem> {
    let Json::Object(object) = observation else {
        return Err(Problem::new(
            Kind::InvalidBody,
            format!(
                "an observation must be an object of covariate values, got {}",
                json_kind(observation)
            ),
        )
        .at(base));
    };
    parse_object(model, object, base, values, accepted)
}

/// Parse one observation object into `values`: the model's checks, then the service bounds.
pub fn parse_object(
    model: &Model,
    object: &Map<String, Json>,
    base: &str,
    values: &mut Vec<Value>,
    accepted: &[&str],
) -> Result<(), Problem> {
    model
        .parse_observation_accepting(object, values, accepted)
        .map_err(|e| observation_problem(model, object, &e, base))?;
    if let Some((kind, detail, j)) = bound_error(model, values) {
        return Err(Problem::new(kind, detail).at(format!(
            "{base}/{}",
            escape_pointer_token(&model.covariates[j].name)
        )));
    }
    Ok(())
}

/// The problem of an observation error, echoing the value sent for the field; a missing
/// covariate is reported with every other covariate the observation lacks, so that a caller
/// fixes them in one round (the pointer names the first, `missing` lists them all).
fn observation_problem(
    model: &Model,
    object: &Map<String, Json>,
    error: &ObservationError,
    base: &str,
) -> Problem {
    let ObservationError::Missing(_) = error else {
        return Problem::observation(error, base, object.get(error.field()));
    };
    let missing: Vec<&str> = model
        .covariates
        .iter()
        .map(|c| c.name.as_str())
        .filter(|name| !object.contains_key(*name))
        .collect();
    let mut problem = Problem::observation(error, base, None);
    if missing.len() > 1 {
        let names: Vec<String> = missing.iter().map(|name| echo(name)).collect();
        problem.detail = format!(
            "{} covariates are missing: {}",
            missing.len(),
            names.join(", ")
        );
    }
    problem.extension("missing", serde_json::json!(missing))
}

/// Check a whole value vector against the service bounds (for values that did not come from
/// JSON, such as curve query parameters). Returns the covariate index at fault.
pub fn check_bounds(model: &Model, values: &[Value]) -> Result<(), (usize, Problem)> {
    match bound_error(model, values) {
        Some((kind, detail, j)) => Err((j, Problem::new(kind, detail))),
        None => Ok(()),
    }
}

/// A request's observations read against a model.
#[derive(Debug, Clone, PartialEq)]
pub struct Parsed {
    /// The observations to score, one flat vector (`scored × covariates`), in request order.
    pub values: Vec<Value>,
    /// Each faulty observation set aside with its fault, in index order (only when faulty
    /// observations are kept; otherwise a fault refuses the request and this is empty).
    pub faults: Vec<FieldError>,
}

/// Parse every observation of a request into one flat vector (`n × covariates`), accepting
/// and ignoring the fields named in `accepted` (announced covariates).
pub fn parse_all(
    model: &Model,
    observations: Observations<'_>,
    accepted: &[&str],
) -> Result<Vec<Value>, Problem> {
    parse(model, observations, accepted, false).map(|parsed| parsed.values)
}

/// Parse every observation of a request; with `keep` (`"on_error": "keep"`), each faulty
/// observation of a batch is set aside with the fault the refusal would have listed for it, and
/// the others are read as alone. A single observation that is faulty, or a batch of which every
/// observation is, is refused either way, with the refusal `keep` = false gives: there is
/// nothing to answer.
pub fn parse(
    model: &Model,
    observations: Observations<'_>,
    accepted: &[&str],
    keep: bool,
) -> Result<Parsed, Problem> {
    let width = model.covariates.len();
    let mut values = Vec::with_capacity(width * observations.len());
    let mut one = Vec::with_capacity(width);
    let mut faults = Vec::new();
    match observations {
        Observations::One(object) => {
            parse_object(model, object, "/observation", &mut one, accepted)?;
            values.extend_from_slice(&one);
        }
        Observations::Many(list) => {
            let mut first: Option<Problem> = None;
            for (i, observation) in list.iter().enumerate() {
                let base = format!("/observations/{i}");
                match parse_one(model, observation, &base, &mut one, accepted) {
                    Ok(()) if keep || first.is_none() => values.extend_from_slice(&one),
                    Ok(()) => {}
                    Err(problem) => {
                        if keep || faults.len() < MAX_LISTED_ERRORS {
                            faults.push(field_error(&problem, i));
                        }
                        if first.is_none() {
                            first = Some(problem.index(i));
                        }
                    }
                }
            }
            if let Some(problem) = first.filter(|_| !keep || faults.len() == list.len()) {
                return Err(refusal(problem, faults));
            }
        }
    }
    Ok(Parsed { values, faults })
}

/// The fault of observation `index` of a batch, as a refusal lists it and as an answer kept
/// with `"on_error": "keep"` gives it in its place.
pub fn field_error(problem: &Problem, index: usize) -> FieldError {
    FieldError {
        type_uri: problem.kind.type_uri(),
        detail: problem.detail.clone(),
        pointer: problem.pointer.clone().unwrap_or_default(),
        index,
    }
}

/// The refusal of a batch: its first fault, naming how many more there are and listing up to
/// [`MAX_LISTED_ERRORS`] of them.
fn refusal(mut problem: Problem, mut errors: Vec<FieldError>) -> Problem {
    errors.truncate(MAX_LISTED_ERRORS);
    if errors.len() > 1 {
        problem.detail = format!(
            "{} (and {} more faulty observation{}; see 'errors')",
            problem.detail,
            errors.len() - 1,
            if errors.len() == 2 { "" } else { "s" }
        );
    }
    problem.errors = errors;
    problem
}
