//! An example observation for a model, one training standard deviation above its training
//! means (numbers rounded to three significant digits and kept inside the training range;
//! counts rounded to whole numbers; a binary covariate at its less common value; a categorical
//! covariate at its most frequent level other than the reference), and the `curl` command that
//! `ogive serve` prints at start-up. Away from the means on purpose: contributions are measured
//! from the training-mean profile, so at the means they would all be zero and show nothing.

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

/// A valid observation for `model`, inside its training data but away from its means.
pub fn example_observation(model: &Model) -> Map<String, Json> {
    model
        .covariates
        .iter()
        .map(|c| {
            let training = model
                .file
                .covariates
                .iter()
                .find(|spec| spec.name == c.name)
                .map(|spec| &spec.training);
            let spread = training
                .and_then(|t| t.std_dev)
                .filter(|s| s.is_finite() && *s > 0.0)
                .unwrap_or((c.training_max - c.training_min) / 4.0);
            let value = match c.kind {
                CovariateKind::Categorical => {
                    let counts = training.and_then(|t| t.level_counts.as_ref());
                    let level = c
                        .levels
                        .iter()
                        .enumerate()
                        .filter(|(i, _)| *i != c.reference)
                        .max_by_key(|(i, level)| {
                            // Most frequent; among equals, the first in order.
                            let count = counts.and_then(|m| m.get(*level)).copied().unwrap_or(0);
                            (count, std::cmp::Reverse(*i))
                        })
                        .map_or(&c.levels[c.reference], |(_, level)| level);
                    json!(level)
                }
                CovariateKind::Binary => json!(i64::from(c.training_mean < 0.5)),
                CovariateKind::Count => json!((c.training_mean + spread)
                    .round()
                    .clamp(c.training_min.ceil(), c.training_max.floor())
                    as i64),
                CovariateKind::Continuous => json!(round_significant(c.training_mean + spread, 3)
                    .clamp(c.training_min, c.training_max)),
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

#[cfg(test)]
mod tests {
    use super::*;

    fn demo_model() -> Model {
        let path = concat!(
            env!("CARGO_MANIFEST_DIR"),
            "/model-files/lease-arrears/versions/1.0.0.json"
        );
        Model::from_json(&std::fs::read(path).expect("read")).expect("valid")
    }

    #[test]
    fn the_example_applicant_is_away_from_every_training_mean() {
        let model = demo_model();
        let example = example_observation(&model);
        // The demo's training summaries: revenue mean 620.3, sd 583.8; years 9.252, sd 8.862;
        // prior arrears mean 0.61, sd 0.78; guarantor mean 0.35; retail the most frequent
        // non-reference sector (4,624 of 20,000).
        assert_eq!(
            serde_json::Value::Object(example),
            json!({"annual_revenue": 1200.0, "years_trading": 18.1, "prior_arrears": 1,
                   "guarantor": 1, "sector": "retail"})
        );
    }

    #[test]
    fn the_example_applicant_has_a_reason_code_from_every_covariate() {
        // At the training-mean profile every contribution is zero by construction, so an
        // example there would demonstrate no reason codes; this one moves each covariate.
        let model = demo_model();
        let mut values = Vec::new();
        model
            .parse_observation(&example_observation(&model), &mut values)
            .expect("the example is a valid observation");
        let mut scorer = crate::engine::Scorer::new(&model);
        let answer = scorer.score(&model, &values, &crate::engine::Options::default());
        assert_eq!(answer.contributions.len(), model.covariates.len());
        for contribution in &answer.contributions {
            let name = &model.covariates[contribution.covariate].name;
            assert!(
                contribution.contribution.abs() > 0.01,
                "{name} contributes {} to the index: nothing to show as a reason",
                contribution.contribution
            );
        }
    }
}
