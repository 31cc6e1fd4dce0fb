//! Validation refuses every kind of bad model file with an error naming the field at fault, and
//! `ogive check` reports it and exits 1.
//!
//! The base model here is invented: it is input to the validator, never a check value.

use std::process::Command;

use ogive::model::{Model, ModelError};
use serde_json::{json, Value};

/// A small valid model: the validation rules' own fixture (`src/model/validate/fixture.json`:
/// a continuous covariate with a log and a square term, a binary one and a categorical one)
/// with a second continuous covariate, `age`, in linear, square and product terms, and a
/// covariance; a check case is computed below.
fn base() -> Value {
    let mut v: Value = serde_json::from_str(include_str!("../src/model/validate/fixture.json"))
        .expect("fixture.json is JSON");
    v["name"] = json!("validation-base");
    let age = json!({"name": "age", "kind": "continuous",
        "training": {"min": 18.0, "max": 90.0, "mean": 45.0, "std_dev": 12.0}});
    v["covariates"]
        .as_array_mut()
        .expect("covariates")
        .insert(1, age);
    v["terms"] = json!([
        {"term": "intercept", "coefficient": -1.0},
        {"term": "log(income)", "coefficient": -0.3},
        {"term": "age", "coefficient": 0.02},
        {"term": "age^2", "coefficient": -0.0001},
        {"term": "guarantor", "coefficient": -0.5},
        {"term": "region=south", "coefficient": 0.2},
        {"term": "age*guarantor", "coefficient": 0.004}
    ]);
    v["covariance"] = diagonal(7, 0.01);
    v
}

fn diagonal(k: usize, d: f64) -> Value {
    let rows: Vec<Vec<f64>> = (0..k)
        .map(|r| (0..k).map(|c| if r == c { d } else { 0.0 }).collect())
        .collect();
    json!(rows)
}

fn load(v: &Value) -> Result<Model, ModelError> {
    Model::from_json(&serde_json::to_vec(v).expect("serialise"))
}

fn refused(v: &Value) -> ModelError {
    match load(v) {
        Ok(_) => panic!("the validator accepted a bad model"),
        Err(e) => e,
    }
}

fn with_check_case(mut v: Value) -> Value {
    let model = load(&v).expect("base model is valid");
    let observation = json!({"income": 80.0, "age": 40.0, "guarantor": 1, "region": "east"});
    let mut values = Vec::new();
    model
        .parse_observation(observation.as_object().expect("object"), &mut values)
        .expect("observation is valid");
    let p = model.link().probability(model.linear_index_of(&values));
    v["check_cases"] = json!([{"observation": observation, "probability": p}]);
    v
}

#[test]
fn the_base_model_is_valid_and_its_check_case_reproduces() {
    let v = with_check_case(base());
    load(&v).expect("valid");
}

#[test]
fn unknown_covariate_in_a_term() {
    let mut v = base();
    v["terms"][2]["term"] = json!("agee");
    let e = refused(&v);
    assert_eq!(e.field, "terms[2].term");
    assert!(
        e.to_string().contains("'agee', which is not a covariate"),
        "{e}"
    );
}

#[test]
fn duplicate_covariate_names() {
    let mut v = base();
    v["covariates"][1]["name"] = json!("income");
    let e = refused(&v);
    assert_eq!(e.field, "covariates[1].name");
    assert!(
        e.to_string().contains("'income' appears more than once"),
        "{e}"
    );
}

#[test]
fn a_term_listed_twice_even_if_spelt_differently() {
    let mut v = base();
    v["terms"][3]["term"] = json!(" age ");
    let e = refused(&v);
    assert_eq!(e.field, "terms[3].term");
    assert!(
        e.to_string().contains("'age' appears more than once"),
        "{e}"
    );
}

#[test]
fn a_number_too_large_for_a_double_is_refused() {
    let text = serde_json::to_string(&base())
        .expect("serialise")
        .replace("-0.3", "-1e999");
    let e = Model::from_json(text.as_bytes()).expect_err("refused");
    assert!(e.to_string().contains("not a valid model file"), "{e}");
}

#[test]
fn covariance_of_the_wrong_size() {
    let mut v = base();
    v["covariance"] = diagonal(6, 0.01);
    let e = refused(&v);
    assert_eq!(e.field, "covariance");
    assert!(
        e.to_string()
            .contains("expected 7 rows (one per term), got 6 rows"),
        "{e}"
    );
}

#[test]
fn covariance_not_symmetric() {
    let mut v = base();
    v["covariance"][0][1] = json!(0.001);
    let e = refused(&v);
    assert_eq!(e.field, "covariance");
    assert!(
        e.to_string()
            .contains("not symmetric: [0][1] = 0.001 but [1][0] = 0"),
        "{e}"
    );
}

#[test]
fn covariance_not_positive_semi_definite() {
    let mut v = base();
    // A 2×2 block [[0.01, 0.02], [0.02, 0.01]] has eigenvalues 0.03 and −0.01.
    v["covariance"][0][1] = json!(0.02);
    v["covariance"][1][0] = json!(0.02);
    let e = refused(&v);
    assert_eq!(e.field, "covariance");
    assert!(e.to_string().contains("not positive semi-definite"), "{e}");
}

#[test]
fn log_of_a_covariate_whose_training_range_reaches_zero() {
    let mut v = base();
    v["covariates"][0]["training"]["min"] = json!(0.0);
    v["covariates"][0]["training"]["histogram"]["edges"][0] = json!(0.0);
    let e = refused(&v);
    assert_eq!(e.field, "terms[1].term");
    assert!(
        e.to_string()
            .contains("takes the log of 'income', whose training minimum is 0"),
        "{e}"
    );
}

#[test]
fn reference_level_not_among_the_levels() {
    let mut v = base();
    v["covariates"][3]["reference"] = json!("west");
    let e = refused(&v);
    assert_eq!(e.field, "covariates[3].reference");
    assert!(
        e.to_string().contains("'west' is not a level of 'region'"),
        "{e}"
    );
}

#[test]
fn a_level_indicator_of_an_unknown_level() {
    let mut v = base();
    v["terms"][5]["term"] = json!("region=west");
    let e = refused(&v);
    assert_eq!(e.field, "terms[5].term");
    assert!(
        e.to_string().contains("'west' is not a level of 'region'"),
        "{e}"
    );
}

#[test]
fn a_categorical_covariate_used_as_a_number() {
    let mut v = base();
    v["terms"][5]["term"] = json!("region");
    let e = refused(&v);
    assert!(
        e.to_string()
            .contains("'region' is categorical and cannot be used as a number"),
        "{e}"
    );
}

#[test]
fn check_case_that_does_not_reproduce() {
    let mut v = with_check_case(base());
    let p = v["check_cases"][0]["probability"].as_f64().expect("number");
    v["check_cases"][0]["probability"] = json!(p * (1.0 + 1e-8));
    let e = refused(&v);
    assert_eq!(e.field, "check_cases[0].probability");
    assert!(e.to_string().contains("relative difference"), "{e}");
    // Within the tolerance of 1e-9 it is accepted.
    v["check_cases"][0]["probability"] = json!(p * (1.0 + 1e-10));
    load(&v).expect("a difference of 1e-10 is within tolerance");
}

#[test]
fn check_case_with_an_unseen_level() {
    let mut v = with_check_case(base());
    v["check_cases"][0]["observation"]["region"] = json!("west");
    let e = refused(&v);
    assert_eq!(e.field, "check_cases[0].observation");
    assert!(e.to_string().contains("has no level 'west'"), "{e}");
}

#[test]
fn unknown_format_version_and_unknown_fields() {
    let mut v = base();
    v["format_version"] = json!(2);
    assert_eq!(refused(&v).field, "format_version");
    let mut v = base();
    v["coefficients"] = json!([]);
    assert!(refused(&v)
        .to_string()
        .contains("unknown field `coefficients`"));
}

#[test]
fn model_and_version_names_cannot_escape_a_directory() {
    let mut v = base();
    v["version"] = json!("../live");
    assert_eq!(refused(&v).field, "version");
    let mut v = base();
    v["name"] = json!("Lease Arrears");
    assert_eq!(refused(&v).field, "name");
}

#[test]
fn bands_must_increase_and_reach_one() {
    let mut v = base();
    v["decision"] = json!({"threshold": 0.2, "bands": [{"name": "low", "below": 0.1}, {"name": "high", "below": 0.9}]});
    let e = refused(&v);
    assert_eq!(e.field, "decision.bands[1].below");
    v["decision"]["bands"][1]["below"] = json!(1.0);
    load(&v).expect("valid bands");
}

#[test]
fn ogive_check_accepts_a_good_file_and_rejects_a_broken_one_with_exit_status_1() {
    let dir = tempfile::tempdir().expect("temp dir");
    let good = dir.path().join("good.json");
    let bad = dir.path().join("bad.json");
    let v = with_check_case(base());
    std::fs::write(&good, serde_json::to_vec_pretty(&v).expect("json")).expect("write");
    let mut broken = v.clone();
    broken["terms"][2]["term"] = json!("agee");
    std::fs::write(&bad, serde_json::to_vec_pretty(&broken).expect("json")).expect("write");

    let ok = Command::new(env!("CARGO_BIN_EXE_ogive"))
        .arg("check")
        .arg(&good)
        .output()
        .expect("run");
    assert_eq!(
        ok.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&ok.stdout)
    );
    let out = String::from_utf8_lossy(&ok.stdout);
    assert!(
        out.contains("validation-base 1 (logit link, 7 terms, 4 covariates)"),
        "{out}"
    );

    let both = Command::new(env!("CARGO_BIN_EXE_ogive"))
        .arg("check")
        .arg(&good)
        .arg(&bad)
        .output()
        .expect("run");
    assert_eq!(both.status.code(), Some(1));
    let out = String::from_utf8_lossy(&both.stdout);
    assert!(
        out.contains("FAIL")
            && out.contains("terms[2].term")
            && out.contains("1 of 2 file(s) failed"),
        "{out}"
    );
}

// Observation validation: each bad input is a typed error naming the covariate.

fn observe(model: &Model, observation: Value) -> Result<(), ogive::model::ObservationError> {
    let mut values = Vec::new();
    model.parse_observation(observation.as_object().expect("object"), &mut values)
}

fn good_observation() -> Value {
    json!({"income": 80.0, "age": 40.0, "guarantor": 1, "region": "east"})
}

#[test]
fn observation_errors_name_the_covariate() {
    use ogive::model::ObservationError as E;
    let model = load(&base()).expect("valid");
    observe(&model, good_observation()).expect("good observation");

    let mut o = good_observation();
    o.as_object_mut().expect("object").remove("age");
    assert_eq!(observe(&model, o), Err(E::Missing("age".into())));

    let mut o = good_observation();
    o["agee"] = json!(3);
    let e = observe(&model, o).expect_err("unknown field");
    assert_eq!(e, E::UnknownField("agee".into()));
    assert_eq!(e.field(), "agee");

    let mut o = good_observation();
    o["age"] = json!("40");
    let e = observe(&model, o).expect_err("text for a number");
    assert_eq!(e.field(), "age");
    assert_eq!(
        e.to_string(),
        "covariate 'age' must be a number, got the text \"40\""
    );

    let mut o = good_observation();
    o["guarantor"] = json!(2);
    assert!(matches!(observe(&model, o), Err(E::NotBinary { .. })));

    let mut o = good_observation();
    o["region"] = json!("west");
    let e = observe(&model, o).expect_err("unseen level");
    assert_eq!(
        e.to_string(),
        "covariate 'region' has no level 'west' (levels: north, south, east)"
    );

    let mut o = good_observation();
    o["income"] = json!(-3.0);
    let e = observe(&model, o).expect_err("log of a negative value");
    assert_eq!(e.to_string(), "term 'log(income)' needs income > 0, got -3");

    let mut o = good_observation();
    o["age"] = json!(null);
    assert_eq!(observe(&model, o).expect_err("null").field(), "age");
}

#[test]
fn non_finite_text_values_are_refused() {
    let model = load(&base()).expect("valid");
    let age = model.covariate_index("age").expect("age");
    for text in ["NaN", "inf", "-inf"] {
        let value = model
            .parse_text_value(age, text)
            .expect("parses as a float");
        let mut values: Vec<_> = model.mean_profile().to_vec();
        values[age] = value;
        values[model.covariate_index("region").expect("region")] = ogive::model::Value::Level(0);
        let e = model.check_values(&values).expect_err("non-finite");
        assert_eq!(e.field(), "age", "{text}");
    }
}
