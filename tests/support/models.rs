//! Valid model files built in code, for tests of the model directory, the gate and the
//! watcher.
//!
//! The models are invented inputs (never check values): four covariates of every kind, terms
//! that use each of them, a diagonal covariance, and check cases whose probabilities the
//! engine computes at the end, so that every variant a test derives stays valid.

use std::collections::BTreeMap;
use std::path::Path;

use ogive::link::Link;
use ogive::model::file::{
    CheckCase, CovariateSpec, Outcome, Provenance, TermSpec, TrainingSummary,
};
use ogive::model::{CovariateKind, Model, ModelFile, FORMAT_NAME, FORMAT_VERSION};
use ogive::registry::lifecycle;
use serde_json::{json, Map, Value};

/// The base model file (without check cases): `income` (continuous, thousand EUR, with a log
/// term), `tenure` (count, with a square), `guarantor` (binary) and `region` (categorical:
/// north, south, east; reference north), and a product term. The coefficients shift a little
/// with the version label, so two versions give different probabilities.
pub fn base(name: &str, version: &str) -> ModelFile {
    let shift = version.bytes().map(f64::from).sum::<f64>() % 97.0 / 1000.0;
    let numeric = |min: f64, max: f64, mean: f64, sd: f64| TrainingSummary {
        min: Some(min),
        max: Some(max),
        mean: Some(mean),
        std_dev: Some(sd),
        ..TrainingSummary::default()
    };
    let covariates = vec![
        CovariateSpec {
            name: "income".into(),
            kind: CovariateKind::Continuous,
            unit: Some("thousand EUR".into()),
            description: None,
            levels: None,
            reference: None,
            training: numeric(5.0, 500.0, 60.0, 30.0),
        },
        CovariateSpec {
            name: "tenure".into(),
            kind: CovariateKind::Count,
            unit: Some("years".into()),
            description: None,
            levels: None,
            reference: None,
            training: numeric(0.0, 40.0, 6.0, 4.0),
        },
        CovariateSpec {
            name: "guarantor".into(),
            kind: CovariateKind::Binary,
            unit: None,
            description: None,
            levels: None,
            reference: None,
            training: numeric(0.0, 1.0, 0.3, 0.46),
        },
        categorical("region", &["north", "south", "east"], "north"),
    ];
    let terms = [
        ("intercept", -1.0),
        ("log(income)", -0.3),
        ("tenure", 0.05),
        ("tenure^2", -0.001),
        ("guarantor", -0.5),
        ("region=south", 0.2),
        ("region=east", -0.1),
        ("income*guarantor", 0.002),
    ]
    .into_iter()
    .map(|(term, coefficient)| TermSpec {
        term: term.into(),
        coefficient: coefficient + shift,
    })
    .collect();
    ModelFile {
        format: FORMAT_NAME.into(),
        format_version: FORMAT_VERSION,
        name: name.into(),
        version: version.into(),
        description: "test model".into(),
        outcome: Outcome {
            name: "event".into(),
            meaning: "the event happened".into(),
        },
        link: Link::Logit,
        covariates,
        terms,
        covariance: None,
        covariance_type: Some("classical".into()),
        joint: None,
        fitted_probabilities: None,
        check_cases: Vec::new(),
        decision: None,
        announces: Vec::new(),
        provenance: Provenance {
            fitted_by: "tests/support/models.rs".into(),
            fitted_at: "2026-01-01T00:00:00Z".into(),
            observations: 100,
            ..Provenance::default()
        },
    }
}

/// A categorical covariate with equal training counts.
pub fn categorical(name: &str, levels: &[&str], reference: &str) -> CovariateSpec {
    let level_counts: BTreeMap<String, u64> = levels.iter().map(|l| (l.to_string(), 10)).collect();
    CovariateSpec {
        name: name.into(),
        kind: CovariateKind::Categorical,
        unit: None,
        description: None,
        levels: Some(levels.iter().map(|l| l.to_string()).collect()),
        reference: Some(reference.into()),
        training: TrainingSummary {
            level_counts: Some(level_counts),
            ..TrainingSummary::default()
        },
    }
}

/// A numeric covariate of `kind` with a plausible training summary.
pub fn numeric(name: &str, kind: CovariateKind) -> CovariateSpec {
    let (min, max, mean) = match kind {
        CovariateKind::Binary => (0.0, 1.0, 0.5),
        _ => (0.0, 10.0, 4.0),
    };
    CovariateSpec {
        name: name.into(),
        kind,
        unit: None,
        description: None,
        levels: None,
        reference: None,
        training: TrainingSummary {
            min: Some(min),
            max: Some(max),
            mean: Some(mean),
            std_dev: Some(1.0),
            ..TrainingSummary::default()
        },
    }
}

fn mentions(term: &str, covariate: &str) -> bool {
    term.split(|c: char| !(c.is_ascii_alphanumeric() || c == '_'))
        .any(|token| token == covariate)
}

/// Drop a covariate and every term that uses it.
pub fn without_covariate(mut file: ModelFile, covariate: &str) -> ModelFile {
    file.covariates.retain(|c| c.name != covariate);
    file.terms.retain(|t| !mentions(&t.term, covariate));
    file
}

/// Add a covariate with a linear term (for numeric kinds) or one level term (categorical).
pub fn with_covariate(mut file: ModelFile, spec: CovariateSpec) -> ModelFile {
    let term = match &spec.levels {
        Some(levels) => format!("{}={}", spec.name, levels[levels.len() - 1]),
        None => spec.name.clone(),
    };
    file.terms.push(TermSpec {
        term,
        coefficient: 0.01,
    });
    file.covariates.push(spec);
    file
}

/// Replace a covariate's specification, dropping the terms that used it and adding one plain
/// term for the new one.
pub fn replaced_covariate(file: ModelFile, spec: CovariateSpec) -> ModelFile {
    let name = spec.name.clone();
    let position = file
        .covariates
        .iter()
        .position(|c| c.name == name)
        .expect("the covariate exists");
    let mut file = with_covariate(without_covariate(file, &name), spec);
    let moved = file.covariates.pop().expect("just added");
    file.covariates.insert(position, moved);
    file
}

/// One observation per level of the last categorical covariate (or one), each covariate at a
/// typical value.
fn observations(file: &ModelFile) -> Vec<Map<String, Value>> {
    let variants = file
        .covariates
        .iter()
        .filter_map(|c| c.levels.as_ref().map(Vec::len))
        .max()
        .unwrap_or(1);
    (0..variants)
        .map(|v| {
            file.covariates
                .iter()
                .map(|c| {
                    let t = &c.training;
                    let value = match c.kind {
                        CovariateKind::Continuous => json!(t.mean.unwrap_or(1.0) + v as f64),
                        CovariateKind::Count => {
                            json!((t.mean.unwrap_or(1.0).round() as u64) + v as u64)
                        }
                        CovariateKind::Binary => json!(v % 2),
                        CovariateKind::Categorical => {
                            let levels = c.levels.as_ref().expect("levels");
                            json!(levels[v % levels.len()])
                        }
                    };
                    (c.name.clone(), value)
                })
                .collect()
        })
        .collect()
}

/// Finish a file: a diagonal covariance sized to its terms and check cases computed by the
/// engine.
pub fn finished(mut file: ModelFile) -> ModelFile {
    let k = file.terms.len();
    file.covariance = Some(
        (0..k)
            .map(|r| (0..k).map(|c| if r == c { 0.01 } else { 0.0 }).collect())
            .collect(),
    );
    file.check_cases.clear();
    let model = Model::from_file(file.clone()).expect("the test model is valid");
    let mut values = Vec::new();
    file.check_cases = observations(&file)
        .into_iter()
        .map(|observation| {
            model
                .parse_observation(&observation, &mut values)
                .expect("the check observation is valid");
            CheckCase {
                probability: model.link().probability(model.linear_index_of(&values)),
                observation,
            }
        })
        .collect();
    file
}

/// The bytes of a finished file, as an upload would send them.
pub fn bytes_of(file: ModelFile) -> Vec<u8> {
    let mut bytes = serde_json::to_vec_pretty(&finished(file)).expect("encode");
    bytes.push(b'\n');
    bytes
}

/// The bytes of the base model `name`, version `version`.
pub fn model_bytes(name: &str, version: &str) -> Vec<u8> {
    bytes_of(base(name, version))
}

/// Put a version file in place directly (as a deploy would), bypassing the gate.
pub fn place_version(root: &Path, name: &str, version: &str, bytes: &[u8]) {
    let dir = root.join(name).join("versions");
    std::fs::create_dir_all(&dir).expect("create the versions folder");
    std::fs::write(dir.join(format!("{version}.json")), bytes).expect("write the version");
}

/// Point `live` at `version` directly (as a deploy would), bypassing the lifecycle.
pub fn place_live(root: &Path, name: &str, version: &str) {
    std::fs::write(root.join(name).join("live"), format!("{version}\n")).expect("write live");
}

/// The base model's bytes with the first check case's probability altered, so that it no
/// longer reproduces.
pub fn tampered_bytes(name: &str, version: &str) -> Vec<u8> {
    let mut file = finished(base(name, version));
    file.check_cases[0].probability *= 1.01;
    serde_json::to_vec_pretty(&file).expect("encode")
}

/// Store the base model `name` at `version` in the model directory `root` through the gate,
/// as `who` (no reason given).
pub fn store(root: &Path, name: &str, version: &str, who: &str) {
    lifecycle::upload(
        root,
        name,
        version,
        &model_bytes(name, version),
        false,
        who,
        None,
    )
    .unwrap_or_else(|e| panic!("store {name} {version}: {e}"));
}
