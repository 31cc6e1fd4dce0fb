//! Contributions (reason codes) are measured from the training-mean profile for every kind of
//! covariate: z(x) − z(x with covariate j alone moved to its training mean, or, for a
//! categorical covariate, to its training shares). Checked here on the committed test model
//! (tests/http/models/lease-test) without its product term, so that the linear index is a sum
//! of one part per covariate:
//!
//! - the categorical contribution equals Σₗ βₗ·(1[x = l] − shareₗ) written out by hand from
//!   the file's coefficients and level counts (the definition, to rounding: 1e-15 absolute);
//! - the contributions add up to z(x) − z(training-mean profile), the engine's own index at
//!   the means (to rounding: 1e-13 absolute);
//! - the same model coded with another reference level (intercept + β_b, every level
//!   coefficient − β_b: the identical fitted model) gives the same contributions (to 1e-13).

use ogive::engine::{Options, Scorer};
use ogive::model::Model;
use serde_json::{json, Value as Json};

fn additive_file() -> Json {
    let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/http/models/lease-test/versions/2026-01.json");
    let mut file: Json =
        serde_json::from_str(&std::fs::read_to_string(path).expect("fixture")).expect("json");
    let map = file.as_object_mut().expect("object");
    for key in ["covariance", "covariance_type", "joint"] {
        map.remove(key);
    }
    let terms = file["terms"].as_array_mut().expect("terms");
    terms.retain(|t| t["term"] != json!("years_trading*guarantor"));
    file
}

/// The same fitted model with `reference` as the categorical's reference level.
fn recoded(file: &Json, reference: &str) -> Json {
    let mut file = file.clone();
    let beta = |file: &Json, term: &str| {
        file["terms"]
            .as_array()
            .expect("terms")
            .iter()
            .find(|t| t["term"] == json!(term))
            .map_or(0.0, |t| t["coefficient"].as_f64().expect("number"))
    };
    let old = file["covariates"][4]["reference"]
        .as_str()
        .expect("reference")
        .to_string();
    let shift = beta(&file, &format!("sector={reference}"));
    let mut terms: Vec<Json> = Vec::new();
    for t in file["terms"].as_array().expect("terms") {
        let name = t["term"].as_str().expect("term");
        let b = t["coefficient"].as_f64().expect("number");
        if name == "intercept" {
            terms.push(json!({"term": name, "coefficient": b + shift}));
        } else if name == format!("sector={reference}") {
            terms.push(json!({"term": format!("sector={old}"), "coefficient": -shift}));
        } else if name.starts_with("sector=") {
            terms.push(json!({"term": name, "coefficient": b - shift}));
        } else {
            terms.push(t.clone());
        }
    }
    file["terms"] = Json::Array(terms);
    file["covariates"][4]["reference"] = json!(reference);
    file
}

fn model(file: &Json) -> Model {
    Model::from_json(file.to_string().as_bytes()).expect("a valid model")
}

/// Contributions by covariate index, and the answer's linear index.
fn contributions(model: &Model, observation: &Json) -> (Vec<f64>, f64) {
    let mut values = Vec::new();
    model
        .parse_observation(observation.as_object().expect("object"), &mut values)
        .expect("valid");
    let options = Options::new(0.95).expect("level");
    let mut scorer = Scorer::new(model);
    let answer = scorer.score(model, &values, &options);
    let mut by_covariate = vec![f64::NAN; model.covariates().len()];
    for c in &answer.contributions {
        by_covariate[c.covariate] = c.contribution;
    }
    (by_covariate, answer.linear_index)
}

fn observation(sector: &str) -> Json {
    json!({"annual_revenue": 1200.0, "years_trading": 3.0, "prior_arrears": 2,
           "guarantor": 0, "sector": sector})
}

#[test]
fn a_categorical_contribution_is_measured_from_its_training_shares() {
    let file = additive_file();
    let model = model(&file);
    let counts = &file["covariates"][4]["training"]["level_counts"];
    let total: f64 = ["retail", "construction", "transport", "services"]
        .iter()
        .map(|l| counts[*l].as_f64().expect("count"))
        .sum();
    let beta = |level: &str| {
        file["terms"]
            .as_array()
            .expect("terms")
            .iter()
            .find(|t| t["term"] == json!(format!("sector={level}")))
            .map_or(0.0, |t| t["coefficient"].as_f64().expect("number"))
    };
    for sector in ["retail", "construction", "transport", "services"] {
        let by_hand: f64 = ["retail", "construction", "transport", "services"]
            .iter()
            .map(|l| {
                let share = counts[*l].as_f64().expect("count") / total;
                let indicator = if *l == sector { 1.0 } else { 0.0 };
                beta(l) * (indicator - share)
            })
            .sum();
        let (c, _) = contributions(&model, &observation(sector));
        assert!(
            (c[4] - by_hand).abs() <= 1e-15,
            "{sector}: {} vs {by_hand}",
            c[4]
        );
    }
    // The reference level itself contributes too: retail sits below the average sector here.
    let (c, _) = contributions(&model, &observation("retail"));
    assert!(c[4] < 0.0, "{}", c[4]);
}

#[test]
fn contributions_add_up_to_the_distance_from_the_mean_profile() {
    let model = model(&additive_file());
    let options = Options::new(0.95).expect("level");
    let at_means = Scorer::new(&model)
        .score_at_means(&model, &options)
        .linear_index;
    for sector in ["retail", "transport"] {
        let (c, z) = contributions(&model, &observation(sector));
        let sum: f64 = c.iter().sum();
        assert!(
            (sum - (z - at_means)).abs() <= 1e-13,
            "{sector}: Σ {sum} vs {}",
            z - at_means
        );
    }
}

#[test]
fn contributions_do_not_depend_on_the_reference_level() {
    let file = additive_file();
    let original = model(&file);
    for reference in ["construction", "services"] {
        let other = model(&recoded(&file, reference));
        for sector in ["retail", "construction", "transport", "services"] {
            let (a, za) = contributions(&original, &observation(sector));
            let (b, zb) = contributions(&other, &observation(sector));
            assert!(
                (za - zb).abs() <= 1e-13,
                "the same fitted model: {za} vs {zb}"
            );
            for (j, (x, y)) in a.iter().zip(&b).enumerate() {
                assert!(
                    (x - y).abs() <= 1e-13,
                    "reference {reference}, sector {sector}, covariate {j}: {x} vs {y}"
                );
            }
        }
    }
}
