//! Turning a caller's observation (a JSON object of covariate values) into the engine's values,
//! with a typed error naming the covariate for each thing that can be wrong.

use serde_json::{Map, Value as Json};

use super::file::CovariateKind;
use super::term::Value;
use super::Model;

/// What is wrong with one observation. Each variant names the covariate (the JSON field) at
/// fault; a batch adds the observation's index around it.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ObservationError {
    /// A covariate the model needs is absent.
    #[error("covariate '{0}' is missing")]
    Missing(String),
    /// A field the model does not know (a typo, or a covariate of another version).
    #[error("field '{0}' is not a covariate of this model")]
    UnknownField(String),
    /// A numeric covariate given something other than a number.
    #[error("covariate '{covariate}' must be a number, got {found}")]
    NotANumber {
        /// The covariate's name, as the observation gives it (a JSON key or a CSV column).
        covariate: String,
        /// A short description of what was sent.
        found: String,
    },
    /// A number that is NaN or infinite (possible from CSV input or overflowing literals).
    #[error("covariate '{covariate}' must be finite, got {value}")]
    NonFinite {
        /// The covariate's name, as the observation gives it (a JSON key or a CSV column).
        covariate: String,
        /// The value sent.
        value: f64,
    },
    /// A binary covariate given something other than 0, 1, true or false.
    #[error("covariate '{covariate}' is binary: send 0 or 1 (or false/true), got {found}")]
    NotBinary {
        /// The covariate's name, as the observation gives it (a JSON key or a CSV column).
        covariate: String,
        /// What was sent.
        found: String,
    },
    /// A count covariate given a negative or fractional number.
    #[error("covariate '{covariate}' is a count: send a whole number ≥ 0, got {value}")]
    NotCount {
        /// The covariate's name, as the observation gives it (a JSON key or a CSV column).
        covariate: String,
        /// The value sent.
        value: f64,
    },
    /// A categorical covariate given something other than a text level.
    #[error("covariate '{covariate}' is categorical: send one of its levels as text, got {found}")]
    NotALevel {
        /// The covariate's name, as the observation gives it (a JSON key or a CSV column).
        covariate: String,
        /// What was sent.
        found: String,
    },
    /// A level the model never saw in training: it cannot be scored.
    #[error("covariate '{covariate}' has no level '{level}' (levels: {levels})")]
    UnknownLevel {
        /// The covariate's name, as the observation gives it (a JSON key or a CSV column).
        covariate: String,
        /// The level sent.
        level: String,
        /// The model's levels, comma-separated.
        levels: String,
    },
    /// A value for which a log term is undefined.
    #[error("term '{term}' needs {covariate} > 0, got {value}")]
    LogOfNonPositive {
        /// The log term's label.
        term: String,
        /// The covariate's name, as the observation gives it (a JSON key or a CSV column).
        covariate: String,
        /// The value sent.
        value: f64,
    },
}

impl ObservationError {
    /// The field at fault: the covariate name (or the unknown field's name).
    pub fn field(&self) -> &str {
        match self {
            ObservationError::Missing(c) | ObservationError::UnknownField(c) => c,
            ObservationError::NotANumber { covariate, .. }
            | ObservationError::NonFinite { covariate, .. }
            | ObservationError::NotBinary { covariate, .. }
            | ObservationError::NotCount { covariate, .. }
            | ObservationError::NotALevel { covariate, .. }
            | ObservationError::UnknownLevel { covariate, .. }
            | ObservationError::LogOfNonPositive { covariate, .. } => covariate,
        }
    }
}

fn describe_json(v: &Json) -> String {
    match v {
        Json::Null => "null".into(),
        Json::Bool(b) => b.to_string(),
        Json::Number(n) => n.to_string(),
        Json::String(s) => format!("the text {s:?}"),
        Json::Array(_) => "an array".into(),
        Json::Object(_) => "an object".into(),
    }
}

impl Model {
    /// Parse a JSON observation into `values` (cleared and refilled; its capacity is reused).
    /// Fields other than the model's covariates are refused, so a typo never silently drops an
    /// input.
    pub fn parse_observation(
        &self,
        observation: &Map<String, Json>,
        values: &mut Vec<Value>,
    ) -> Result<(), ObservationError> {
        self.parse_observation_accepting(observation, values, &[])
    }

    /// [`parse_observation`](Model::parse_observation), also accepting (and ignoring) the
    /// fields named in `accepted`: covariates that a stored version announces
    /// (`registry::announce`).
    pub fn parse_observation_accepting(
        &self,
        observation: &Map<String, Json>,
        values: &mut Vec<Value>,
        accepted: &[&str],
    ) -> Result<(), ObservationError> {
        for key in observation.keys() {
            if self.covariate_index(key).is_none() && !accepted.contains(&key.as_str()) {
                return Err(ObservationError::UnknownField(key.clone()));
            }
        }
        values.clear();
        for covariate in &self.covariates {
            let name = &covariate.name;
            let raw = observation
                .get(name)
                .ok_or_else(|| ObservationError::Missing(name.clone()))?;
            let value = match covariate.kind {
                CovariateKind::Categorical => match raw {
                    Json::String(s) => Value::Level(self.level_index(covariate, s)?),
                    other => {
                        return Err(ObservationError::NotALevel {
                            covariate: name.clone(),
                            found: describe_json(other),
                        })
                    }
                },
                CovariateKind::Binary => match raw {
                    Json::Bool(b) => Value::Number(f64::from(u8::from(*b))),
                    Json::Number(n) if n.as_f64() == Some(0.0) || n.as_f64() == Some(1.0) => {
                        Value::Number(n.as_f64().unwrap_or_default())
                    }
                    other => {
                        return Err(ObservationError::NotBinary {
                            covariate: name.clone(),
                            found: describe_json(other),
                        })
                    }
                },
                CovariateKind::Continuous | CovariateKind::Count => match raw {
                    Json::Number(n) => Value::Number(n.as_f64().unwrap_or(f64::NAN)),
                    other => {
                        return Err(ObservationError::NotANumber {
                            covariate: name.clone(),
                            found: describe_json(other),
                        })
                    }
                },
            };
            values.push(value);
        }
        self.check_values(values)
    }

    /// Parse one text field (from a CSV cell, say) as covariate `index`'s value.
    pub fn parse_text_value(&self, index: usize, text: &str) -> Result<Value, ObservationError> {
        let covariate = &self.covariates[index];
        let text = text.trim();
        match covariate.kind {
            CovariateKind::Categorical => Ok(Value::Level(self.level_index(covariate, text)?)),
            CovariateKind::Binary => match text {
                "0" | "false" => Ok(Value::Number(0.0)),
                "1" | "true" => Ok(Value::Number(1.0)),
                _ => match text.parse::<f64>() {
                    Ok(x) if x == 0.0 || x == 1.0 => Ok(Value::Number(x)),
                    _ => Err(ObservationError::NotBinary {
                        covariate: covariate.name.clone(),
                        found: format!("{text:?}"),
                    }),
                },
            },
            CovariateKind::Continuous | CovariateKind::Count => text
                .parse::<f64>()
                .map(Value::Number)
                .map_err(|_| ObservationError::NotANumber {
                    covariate: covariate.name.clone(),
                    found: format!("the text {text:?}"),
                }),
        }
    }

    /// Check already-parsed values: finiteness, counts, log domains. Every entry point that
    /// builds values (JSON, CSV, at-means) goes through here.
    pub fn check_values(&self, values: &[Value]) -> Result<(), ObservationError> {
        for (covariate, value) in self.covariates.iter().zip(values) {
            let Value::Number(x) = *value else { continue };
            if !x.is_finite() {
                return Err(ObservationError::NonFinite {
                    covariate: covariate.name.clone(),
                    value: x,
                });
            }
            if covariate.kind == CovariateKind::Count && (x < 0.0 || x.fract() != 0.0) {
                return Err(ObservationError::NotCount {
                    covariate: covariate.name.clone(),
                    value: x,
                });
            }
        }
        for &(term, covariate) in &self.log_terms {
            let x = values[covariate].number();
            if x <= 0.0 {
                return Err(ObservationError::LogOfNonPositive {
                    term: self.term_labels[term].clone(),
                    covariate: self.covariates[covariate].name.clone(),
                    value: x,
                });
            }
        }
        Ok(())
    }

    fn level_index(
        &self,
        covariate: &super::Covariate,
        level: &str,
    ) -> Result<usize, ObservationError> {
        covariate
            .levels
            .iter()
            .position(|l| l == level)
            .ok_or_else(|| ObservationError::UnknownLevel {
                covariate: covariate.name.clone(),
                level: level.to_string(),
                levels: covariate.levels.join(", "),
            })
    }
}
