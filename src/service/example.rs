//! An example observation for a model, at its training means (numbers rounded to four
//! significant digits and kept inside the training range; counts and binary covariates rounded
//! to whole numbers; categorical covariates at their reference level), and the `curl` command
//! that `ogive serve` prints at start-up.

use serde_json::{json, Map, Value as Json};

use crate::model::{CovariateKind, Model};

fn round_significant(x: f64, digits: i32) -> f64 {
    if x == 0.0 || !x.is_finite() {
        return x;
    }
    let magnitude = x.abs().log10().floor() as i32;
    let scale = 10f64.powi(digits - 1 - magnitude);
    (x * scale).round() / scale
}

/// A valid observation for `model` near the middle of its training data.
pub fn example_observation(model: &Model) -> Map<String, Json> {
    model
        .covariates
        .iter()
        .map(|c| {
            let value = match c.kind {
                CovariateKind::Categorical => json!(c.levels[c.reference]),
                CovariateKind::Count | CovariateKind::Binary => {
                    json!(c
                        .training_mean
                        .round()
                        .clamp(c.training_min.ceil(), c.training_max.floor())
                        as i64)
                }
                CovariateKind::Continuous => json!(
                    round_significant(c.training_mean, 4).clamp(c.training_min, c.training_max)
                ),
            };
            (c.name.clone(), value)
        })
        .collect()
}

/// A shell command that scores the example observation against a server at `base_url`.
pub fn example_curl(model: &Model, base_url: &str) -> String {
    let body = json!({ "observation": example_observation(model) });
    // Single-quoted for a POSIX shell: a quote inside becomes '\''.
    let quoted = body.to_string().replace('\'', "'\\''");
    format!(
        "curl -s -H 'Content-Type: application/json' -d '{quoted}' {base_url}/models/{}/probability",
        model.name()
    )
}
