//! Reading a well-formed probability request straight into the model's value slots, without
//! building a JSON value tree first: the common case of the busiest route.
//!
//! This reader only ever accepts: it returns `None` at the first thing it would have to
//! explain (a syntax error, a repeated or unknown key, a value of the wrong type, an unknown
//! level, a value out of bounds, a batch over the limit, an announced field), and the route then
//! reads the same bytes the general way ([`super::body::parse_json`],
//! [`super::dto::parse_probability_request`], [`super::observations::parse_all`]), which
//! refuses with the problem that names the fault. So every refusal is the general reader's,
//! and what this reader accepts it reads to the same values and options (a property test
//! holds the two to that).
//!
//! ```text
//! accepted   {"observation": {...}} or {"observations": [{...}, ...]} with the request options,
//!            each observation holding exactly the model's covariates, each value of its kind,
//!            passing the model's checks and the service bounds
//! ```

use std::fmt;

use serde::de::{self, DeserializeSeed, Deserializer, IgnoredAny, MapAccess, SeqAccess, Visitor};

use super::dto::{parse_level, ProbabilityRequest, REQUEST_FIELDS};
use super::observations::check_bounds;
use crate::model::{CovariateKind, Model, Value};

/// A seed that is its own visitor: `seed!(Type, Value, deserialize_method)`.
macro_rules! seed {
    ($seed:ty, $value:ty, $method:ident) => {
        impl<'de> DeserializeSeed<'de> for $seed {
            type Value = $value;

            fn deserialize<D: Deserializer<'de>>(
                self,
                deserializer: D,
            ) -> Result<$value, D::Error> {
                deserializer.$method(self)
            }
        }
    };
}

/// A request read straight into values: its shape and options, and the values (`count ×
/// covariates`, in order).
#[derive(Debug, Clone, PartialEq)]
pub struct DirectRequest {
    /// The request's shape and options.
    pub request: ProbabilityRequest,
    /// Every observation's values.
    pub values: Vec<Value>,
}

/// Read `bytes` as a probability request for `model` with at most `max_batch` observations,
/// or `None` where the general reader must look (see the module comment).
pub fn read(model: &Model, bytes: &[u8], max_batch: usize) -> Option<DirectRequest> {
    let mut values = Vec::with_capacity(model.covariates.len());
    let mut deserializer = serde_json::Deserializer::from_slice(bytes);
    let top = Top {
        model,
        max_batch,
        values: &mut values,
    };
    let shape = top.deserialize(&mut deserializer).ok()?;
    deserializer.end().ok()?;
    let mut options = parse_level(shape.level?).ok()?;
    options.effects = shape.effects.unwrap_or(true);
    options.intervals = shape.intervals.unwrap_or(true);
    options.elasticities = shape.elasticities.unwrap_or(false);
    options.contributions = shape.contributions.unwrap_or(true);
    Some(DirectRequest {
        request: ProbabilityRequest {
            batch: shape.batch,
            count: shape.count,
            options,
            average_effects: shape.average_effects.unwrap_or(false),
            at_means: shape.at_means.unwrap_or(false),
            keep_faulty: shape.keep_faulty.unwrap_or(false),
        },
        values,
    })
}

/// The refusal this reader gives: none in words, since the general reader explains.
#[derive(Debug)]
struct Decline;

impl fmt::Display for Decline {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str("left to the general reader")
    }
}

impl std::error::Error for Decline {}

impl de::Error for Decline {
    fn custom<T: fmt::Display>(_: T) -> Decline {
        Decline
    }
}

fn decline<E: de::Error>() -> E {
    E::custom(Decline)
}

/// What the top-level object said, before the options are checked.
struct Shape {
    batch: bool,
    count: usize,
    level: Option<f64>,
    effects: Option<bool>,
    intervals: Option<bool>,
    elasticities: Option<bool>,
    contributions: Option<bool>,
    average_effects: Option<bool>,
    at_means: Option<bool>,
    keep_faulty: Option<bool>,
}

struct Top<'a> {
    model: &'a Model,
    max_batch: usize,
    values: &'a mut Vec<Value>,
}

seed!(Top<'_>, Shape, deserialize_map);

/// A bool option: a second occurrence or anything but a boolean declines.
fn set_bool<'de, A: MapAccess<'de>>(map: &mut A, slot: &mut Option<bool>) -> Result<(), A::Error> {
    if slot.is_some() {
        return Err(decline());
    }
    *slot = Some(map.next_value::<bool>()?);
    Ok(())
}

impl<'de> Visitor<'de> for Top<'_> {
    type Value = Shape;

    fn expecting(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str("a probability request")
    }

    fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> Result<Shape, A::Error> {
        let mut shape = Shape {
            batch: false,
            count: 0,
            level: None,
            effects: None,
            intervals: None,
            elasticities: None,
            contributions: None,
            average_effects: None,
            at_means: None,
            keep_faulty: None,
        };
        let mut observations_seen = false;
        let mut level_seen = false;
        while let Some(field) = map.next_key::<Field>()? {
            match field {
                Field::Observation | Field::Observations if observations_seen => {
                    return Err(decline())
                }
                Field::Observation => {
                    observations_seen = true;
                    map.next_value_seed(Observation {
                        model: self.model,
                        values: self.values,
                    })?;
                    shape.count = 1;
                }
                Field::Observations => {
                    observations_seen = true;
                    shape.batch = true;
                    shape.count = map.next_value_seed(Batch {
                        model: self.model,
                        max_batch: self.max_batch,
                        values: self.values,
                    })?;
                }
                Field::Level if level_seen => return Err(decline()),
                Field::Level => {
                    level_seen = true;
                    shape.level = Some(map.next_value_seed(Number)?);
                }
                Field::Effects => set_bool(&mut map, &mut shape.effects)?,
                Field::Intervals => set_bool(&mut map, &mut shape.intervals)?,
                Field::Elasticities => set_bool(&mut map, &mut shape.elasticities)?,
                Field::Contributions => set_bool(&mut map, &mut shape.contributions)?,
                Field::AverageEffects => set_bool(&mut map, &mut shape.average_effects)?,
                Field::AtMeans => set_bool(&mut map, &mut shape.at_means)?,
                Field::OnError if shape.keep_faulty.is_some() => return Err(decline()),
                Field::OnError => shape.keep_faulty = Some(map.next_value_seed(OnError)?),
            }
        }
        if !observations_seen {
            return Err(decline());
        }
        if !level_seen {
            shape.level = Some(0.95);
        }
        Ok(shape)
    }
}

/// A field of the request (anything else declines).
enum Field {
    Observation,
    Observations,
    Effects,
    Intervals,
    Level,
    Elasticities,
    Contributions,
    AverageEffects,
    AtMeans,
    OnError,
}

impl<'de> de::Deserialize<'de> for Field {
    fn deserialize<D: Deserializer<'de>>(deserializer: D) -> Result<Field, D::Error> {
        struct Name;
        impl Visitor<'_> for Name {
            type Value = Field;

            fn expecting(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
                f.write_str("a request field")
            }

            fn visit_str<E: de::Error>(self, name: &str) -> Result<Field, E> {
                debug_assert_eq!(REQUEST_FIELDS.len(), 10);
                Ok(match name {
                    "observation" => Field::Observation,
                    "observations" => Field::Observations,
                    "effects" => Field::Effects,
                    "intervals" => Field::Intervals,
                    "level" => Field::Level,
                    "elasticities" => Field::Elasticities,
                    "contributions" => Field::Contributions,
                    "average_effects" => Field::AverageEffects,
                    "at_means" => Field::AtMeans,
                    "on_error" => Field::OnError,
                    _ => return Err(decline()),
                })
            }
        }
        deserializer.deserialize_str(Name)
    }
}

/// `on_error`: whether faulty observations are kept (`"keep"`) or refuse the batch
/// (`"stop"`); anything else declines. Only a request without faults is read here, so
/// `"keep"` changes nothing the reader does.
struct OnError;

seed!(OnError, bool, deserialize_str);

impl Visitor<'_> for OnError {
    type Value = bool;

    fn expecting(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str("\"stop\" or \"keep\"")
    }

    fn visit_str<E: de::Error>(self, v: &str) -> Result<bool, E> {
        match v {
            "stop" => Ok(false),
            "keep" => Ok(true),
            _ => Err(decline()),
        }
    }
}

/// A JSON number as a double, the way `serde_json::Value::as_f64` reads it.
struct Number;

seed!(Number, f64, deserialize_any);

impl Visitor<'_> for Number {
    type Value = f64;

    fn expecting(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str("a number")
    }

    fn visit_u64<E: de::Error>(self, v: u64) -> Result<f64, E> {
        Ok(v as f64)
    }

    fn visit_i64<E: de::Error>(self, v: i64) -> Result<f64, E> {
        Ok(v as f64)
    }

    fn visit_f64<E: de::Error>(self, v: f64) -> Result<f64, E> {
        Ok(v)
    }
}

/// One observation's value for a covariate of `kind` with `levels`.
struct Slot<'a> {
    kind: CovariateKind,
    levels: &'a [String],
}

seed!(Slot<'_>, Value, deserialize_any);

impl Visitor<'_> for Slot<'_> {
    type Value = Value;

    fn expecting(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str("a covariate value")
    }

    fn visit_bool<E: de::Error>(self, v: bool) -> Result<Value, E> {
        match self.kind {
            CovariateKind::Binary => Ok(Value::Number(f64::from(u8::from(v)))),
            _ => Err(decline()),
        }
    }

    fn visit_u64<E: de::Error>(self, v: u64) -> Result<Value, E> {
        self.number(v as f64)
    }

    fn visit_i64<E: de::Error>(self, v: i64) -> Result<Value, E> {
        self.number(v as f64)
    }

    fn visit_f64<E: de::Error>(self, v: f64) -> Result<Value, E> {
        self.number(v)
    }

    fn visit_str<E: de::Error>(self, v: &str) -> Result<Value, E> {
        match self.kind {
            CovariateKind::Categorical => self
                .levels
                .iter()
                .position(|l| l == v)
                .map(Value::Level)
                .ok_or_else(decline),
            _ => Err(decline()),
        }
    }
}

impl Slot<'_> {
    fn number<E: de::Error>(&self, x: f64) -> Result<Value, E> {
        match self.kind {
            CovariateKind::Continuous | CovariateKind::Count => Ok(Value::Number(x)),
            CovariateKind::Binary if x == 0.0 || x == 1.0 => Ok(Value::Number(x)),
            _ => Err(decline()),
        }
    }
}

/// One observation object, appended to `values` in covariate order.
struct Observation<'a> {
    model: &'a Model,
    values: &'a mut Vec<Value>,
}

seed!(Observation<'_>, (), deserialize_map);

/// A key of an observation, as the covariate's index.
struct CovariateName<'a>(&'a Model);

seed!(CovariateName<'_>, usize, deserialize_str);

impl Visitor<'_> for CovariateName<'_> {
    type Value = usize;

    fn expecting(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str("a covariate name")
    }

    fn visit_str<E: de::Error>(self, name: &str) -> Result<usize, E> {
        self.0.covariate_index(name).ok_or_else(decline)
    }
}

impl<'de> Visitor<'de> for Observation<'_> {
    type Value = ();

    fn expecting(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str("an observation")
    }

    fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> Result<(), A::Error> {
        let covariates = &self.model.covariates;
        let start = self.values.len();
        // `Shares` is never read from a request, so it marks a slot not yet filled.
        self.values
            .extend(std::iter::repeat_n(Value::Shares, covariates.len()));
        let slots = &mut self.values[start..];
        let mut filled = 0;
        while let Some(j) = map.next_key_seed(CovariateName(self.model))? {
            if slots[j] != Value::Shares {
                return Err(decline());
            }
            let covariate = &covariates[j];
            slots[j] = map.next_value_seed(Slot {
                kind: covariate.kind,
                levels: &covariate.levels,
            })?;
            filled += 1;
        }
        if filled != covariates.len() {
            return Err(decline());
        }
        if self.model.check_values(slots).is_err() || check_bounds(self.model, slots).is_err() {
            return Err(decline());
        }
        Ok(())
    }
}

/// An array of observations; its length.
struct Batch<'a> {
    model: &'a Model,
    max_batch: usize,
    values: &'a mut Vec<Value>,
}

seed!(Batch<'_>, usize, deserialize_seq);

impl<'de> Visitor<'de> for Batch<'_> {
    type Value = usize;

    fn expecting(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str("an array of observations")
    }

    fn visit_seq<A: SeqAccess<'de>>(self, mut seq: A) -> Result<usize, A::Error> {
        let values = self.values;
        let mut count = 0;
        loop {
            if count == self.max_batch {
                // One more element would be over the limit; none more is the end.
                return match seq.next_element::<IgnoredAny>()? {
                    None if count > 0 => Ok(count),
                    _ => Err(decline()),
                };
            }
            let observation = Observation {
                model: self.model,
                values: &mut *values,
            };
            match seq.next_element_seed(observation)? {
                Some(()) => count += 1,
                None if count > 0 => return Ok(count),
                None => return Err(decline()),
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use proptest::prelude::*;

    use super::*;
    use crate::model::ModelFile;
    use crate::service::body::parse_json;
    use crate::service::dto::parse_probability_request;
    use crate::service::observations::parse;

    fn lease_model() -> Model {
        let text = include_str!("../../tests/http/models/lease-test/versions/2026-01.json");
        let file: ModelFile = serde_json::from_str(text).expect("the test model file parses");
        Model::from_file(file).expect("the test model is valid")
    }

    /// The general reader's outcome: the request, its values and how many observations it set
    /// aside as faulty (`"on_error": "keep"`), or a refusal.
    fn general(model: &Model, bytes: &[u8], max_batch: usize) -> Option<(DirectRequest, usize)> {
        let body = parse_json(bytes).ok()?;
        let (request, observations) = parse_probability_request(&body, max_batch).ok()?;
        let parsed = parse(model, observations, &[], request.keep_faulty).ok()?;
        let faulty = parsed.faults.len();
        let values = parsed.values;
        Some((DirectRequest { request, values }, faulty))
    }

    /// Candidate values per covariate of the lease model, good and bad; the first of each is
    /// good.
    const CANDIDATES: [(&str, &[&str]); 5] = [
        (
            "annual_revenue",
            &[
                "620.5", "1200", "1e3", "0", "-5", "\"620\"", "null", "1e13", "1e400",
            ],
        ),
        (
            "years_trading",
            &["4.5", "0", "-2.25", "true", "[1]", "1e12"],
        ),
        ("prior_arrears", &["2", "0", "1.5", "-1", "2.0", "\"2\""]),
        (
            "guarantor",
            &["1", "true", "false", "0", "0.0", "2", "\"yes\""],
        ),
        (
            "sector",
            &[
                "\"retail\"",
                "\"services\"",
                "\"Retail\"",
                "\"retai\\u006c\"",
                "3",
                "{}",
            ],
        ),
    ];

    const OPTIONS: [(&str, &[&str]); 8] = [
        ("effects", &["true", "false", "1", "null"]),
        ("intervals", &["false", "true", "\"no\""]),
        (
            "level",
            &["0.9", "0.95", "1", "0", "0.9999999", "\"0.9\"", "95e-2"],
        ),
        ("elasticities", &["true", "false", "0"]),
        ("contributions", &["false", "true"]),
        ("average_effects", &["true", "false"]),
        ("at_means", &["true", "false", "[]"]),
        (
            "on_error",
            &[
                "\"keep\"",
                "\"stop\"",
                "\"ke\\u0065p\"",
                "\"Keep\"",
                "true",
                "null",
            ],
        ),
    ];

    /// How an observation is built: a (candidate, how it is sent) pick per covariate, and
    /// whether an unknown field is added.
    type Sketch = (Vec<(usize, u8)>, bool);

    /// An observation: each covariate's candidate (by index, modulo), some left out, some sent
    /// twice, perhaps an unknown field.
    fn observation(picks: &[(usize, u8)], unknown: bool) -> String {
        let mut fields = Vec::new();
        for ((name, candidates), &(pick, how)) in CANDIDATES.iter().zip(picks) {
            let value = candidates[pick % candidates.len()];
            match how % 8 {
                0 => {}
                1 => {
                    fields.push(format!("\"{name}\":{value}"));
                    fields.push(format!("\"{name}\":{value}"));
                }
                _ => fields.push(format!("\"{name}\":{value}")),
            }
        }
        if unknown {
            fields.push("\"colour\":\"red\"".to_string());
        }
        format!("{{{}}}", fields.join(","))
    }

    fn body(batch: Option<Vec<Sketch>>, one: Sketch, options: &[(usize, u8)], tail: u8) -> String {
        let mut fields = match batch {
            Some(list) => {
                let items: Vec<String> = list.iter().map(|(p, u)| observation(p, *u)).collect();
                vec![format!("\"observations\":[{}]", items.join(","))]
            }
            None => vec![format!("\"observation\":{}", observation(&one.0, one.1))],
        };
        for ((name, candidates), &(pick, how)) in OPTIONS.iter().zip(options) {
            let value = candidates[pick % candidates.len()];
            match how % 6 {
                0 => fields.push(format!("\"{name}\":{value}")),
                1 => {
                    fields.push(format!("\"{name}\":{value}"));
                    fields.push(format!("\"{name}\":{value}"));
                }
                _ => {}
            }
        }
        let text = format!("{{{}}}", fields.join(", "));
        match tail % 10 {
            0 => format!("{text} x"),
            1 => format!(" {text}\n"),
            2 => text[..text.len() - 1].to_string(),
            3 => format!("{text},"),
            _ => text,
        }
    }

    fn picks() -> impl Strategy<Value = Vec<(usize, u8)>> {
        prop::collection::vec((0usize..12, 0u8..40), 5..=5)
    }

    fn one_observation() -> impl Strategy<Value = Sketch> {
        (picks(), prop::bool::weighted(0.1))
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(2000))]

        /// What the direct reader accepts, the general reader accepts and reads to the same
        /// request and values.
        #[test]
        fn what_the_direct_reader_accepts_the_general_reader_reads_the_same(
            batch in prop::option::of(prop::collection::vec(one_observation(), 0..4)),
            one in one_observation(),
            options in prop::collection::vec((0usize..8, 0u8..12), 8..=8),
            tail in 0u8..40,
        ) {
            let model = lease_model();
            let text = body(batch, one, &options, tail);
            if let Some(direct) = read(&model, text.as_bytes(), 2) {
                prop_assert_eq!(Some((direct, 0)), general(&model, text.as_bytes(), 2), "{}", text);
            }
        }

        /// With `"on_error": "keep"`, the general reader reads each observation of a batch as
        /// it reads that observation alone: the good ones to the same values, in order, and each
        /// faulty one to the fault its refusal names (type and detail, the pointer under the
        /// observation's place in the batch), set aside at its index.
        #[test]
        fn kept_faults_are_the_refusals_of_each_observation_alone(
            batch in prop::collection::vec(one_observation(), 1..6),
        ) {
            let model = lease_model();
            // No key sent twice and no number beyond a double: either refuses the whole body
            // before any observation is read.
            let once = |picks: &[(usize, u8)]| -> Vec<(usize, u8)> {
                picks
                    .iter()
                    .zip(CANDIDATES)
                    .map(|(&(pick, how), (_, candidates))| {
                        let finite = candidates[pick % candidates.len()] != "1e400";
                        (if finite { pick } else { 0 }, if how % 8 == 1 { 2 } else { how })
                    })
                    .collect()
            };
            let items: Vec<String> =
                batch.iter().map(|(p, u)| observation(&once(p), *u)).collect();
            let text = format!(r#"{{"observations": [{}], "on_error": "keep"}}"#, items.join(","));
            let body = parse_json(text.as_bytes()).expect("well-formed JSON");
            let (request, observations) =
                parse_probability_request(&body, 10).expect("a well-formed request");
            prop_assert!(request.keep_faulty);
            let kept = parse(&model, observations, &[], true);
            let mut values = Vec::new();
            let mut faults = Vec::new();
            for (i, item) in items.iter().enumerate() {
                let alone = parse_json(format!(r#"{{"observation": {item}}}"#).as_bytes())
                    .expect("well-formed JSON");
                let (_, one) = parse_probability_request(&alone, 10).expect("a request");
                match parse(&model, one, &[], false) {
                    Ok(parsed) => values.extend(parsed.values),
                    Err(problem) => {
                        let pointer = problem.pointer.clone().unwrap_or_default();
                        let under = pointer.strip_prefix("/observation").expect("under it");
                        faults.push((i, problem.kind.type_uri(), problem.detail.clone(), format!("/observations/{i}{under}")));
                    }
                }
            }
            if faults.len() == items.len() {
                let refused = kept.expect_err("a batch of faults alone is refused");
                prop_assert_eq!(refused.index, Some(0));
                prop_assert_eq!(refused.errors.len(), items.len());
            } else {
                let kept = kept.expect("kept");
                prop_assert_eq!(kept.values, values);
                let got: Vec<_> = kept
                    .faults
                    .into_iter()
                    .map(|f| (f.index, f.type_uri, f.detail, f.pointer))
                    .collect();
                prop_assert_eq!(got, faults);
            }
        }
    }

    /// The reader is not vacuous: a well-formed request of each shape is read directly, to the
    /// general reader's values.
    #[test]
    fn well_formed_requests_are_read_directly() {
        let model = lease_model();
        let good = r#"{"annual_revenue": 620.5, "years_trading": 4.5, "prior_arrears": 2, "guarantor": true, "sector": "services"}"#;
        for text in [
            format!(r#"{{"observation": {good}}}"#),
            format!(r#"{{"observation": {good}, "effects": false, "intervals": false}}"#),
            format!(
                r#"{{"level": 0.9, "observations": [{good}, {good}], "average_effects": true}}"#
            ),
            format!(r#"{{"observations": [{good}], "on_error": "keep"}}"#),
            format!(r#"{{"on_error": "stop", "observation": {good}}}"#),
        ] {
            let direct = read(&model, text.as_bytes(), 2).expect("read directly");
            assert_eq!(
                Some((direct, 0)),
                general(&model, text.as_bytes(), 2),
                "{text}"
            );
        }
        let three = format!(r#"{{"observations": [{good}, {good}, {good}]}}"#);
        assert_eq!(
            read(&model, three.as_bytes(), 2),
            None,
            "over the batch limit"
        );
        assert!(read(&model, three.as_bytes(), 3).is_some());
    }
}
