//! Covariates: names, kinds, levels and the training summaries every check relies on.
//!
//! Rules, each refused with the field at fault:
//! - at least one covariate; names are identifiers, unique, and not `intercept`;
//! - a categorical covariate has at least two distinct levels (non-empty, without `*`, `,` or
//!   surrounding spaces, since terms write `name=level` and products join with `*`), a reference
//!   among them, and training counts only for its own levels;
//! - a numeric covariate has no levels, a finite training min ≤ mean ≤ max, a standard
//!   deviation ≥ 0 when given, a binary one a range inside [0, 1], and a valid histogram;
//! - each announced covariate (`announces`) is a covariate of the file, named once.

use std::collections::HashSet;

use super::super::error::{err, finite, ModelError, ModelProblem};
use super::super::file::{CovariateKind, CovariateSpec, ModelFile};
use super::super::term;
use super::super::Covariate;
use super::decision::histogram;

/// Every covariate of `file`, in file order.
pub(in crate::model) fn covariates(file: &ModelFile) -> Result<Vec<Covariate>, ModelError> {
    if file.covariates.is_empty() {
        return Err(err(
            "covariates",
            ModelProblem::Missing("a model needs at least one covariate".into()),
        ));
    }
    let mut seen = HashSet::new();
    let mut out = Vec::with_capacity(file.covariates.len());
    for (i, spec) in file.covariates.iter().enumerate() {
        let at = |f: &str| format!("covariates[{i}].{f}");
        if !term::is_covariate_name(&spec.name) || spec.name == "intercept" {
            return Err(err(
                at("name"),
                ModelProblem::BadName {
                    name: spec.name.clone(),
                    rule: "letters, digits and '_', not starting with a digit, and not 'intercept'",
                },
            ));
        }
        if !seen.insert(spec.name.as_str()) {
            return Err(err(at("name"), ModelProblem::Duplicate(spec.name.clone())));
        }
        out.push(if spec.kind == CovariateKind::Categorical {
            categorical(i, spec)?
        } else {
            numeric(i, spec)?
        });
    }
    announced(file, &seen)?;
    Ok(out)
}

/// The announced covariates: each one of the file's covariates, named once.
fn announced(file: &ModelFile, covariates: &HashSet<&str>) -> Result<(), ModelError> {
    let mut named = HashSet::new();
    for (i, name) in file.announces.iter().enumerate() {
        let at = format!("announces[{i}]");
        if !covariates.contains(name.as_str()) {
            return Err(err(
                at,
                ModelProblem::Missing(format!(
                    "'{name}' is announced but is not a covariate of this file; announce only covariates listed in 'covariates'"
                )),
            ));
        }
        if !named.insert(name.as_str()) {
            return Err(err(at, ModelProblem::Duplicate(name.clone())));
        }
    }
    Ok(())
}

/// A categorical covariate: its levels, reference and level counts.
fn categorical(i: usize, spec: &CovariateSpec) -> Result<Covariate, ModelError> {
    let at = |f: &str| format!("covariates[{i}].{f}");
    let levels = spec.levels.clone().unwrap_or_default();
    if levels.len() < 2 {
        return Err(err(
            at("levels"),
            ModelProblem::Missing("a categorical covariate needs at least two levels".into()),
        ));
    }
    let mut seen = HashSet::new();
    for (l, level) in levels.iter().enumerate() {
        if level.is_empty() || level.contains(['*', ',']) || level.trim() != level {
            return Err(err(
                format!("covariates[{i}].levels[{l}]"),
                ModelProblem::BadName {
                    name: level.clone(),
                    rule: "a level is non-empty text without '*', ',' or surrounding spaces",
                },
            ));
        }
        if !seen.insert(level) {
            return Err(err(
                format!("covariates[{i}].levels[{l}]"),
                ModelProblem::Duplicate(level.clone()),
            ));
        }
    }
    let unknown = |field: String, level: &str| {
        err(
            field,
            ModelProblem::UnknownLevel {
                covariate: spec.name.clone(),
                level: level.to_string(),
                levels: levels.join(", "),
            },
        )
    };
    let reference_name = spec.reference.as_deref().ok_or_else(|| {
        err(
            at("reference"),
            ModelProblem::Missing("a categorical covariate needs a reference level".into()),
        )
    })?;
    let reference = levels
        .iter()
        .position(|l| l == reference_name)
        .ok_or_else(|| unknown(at("reference"), reference_name))?;
    if let Some(counts) = &spec.training.level_counts {
        if let Some(level) = counts.keys().find(|level| !levels.contains(level)) {
            return Err(unknown(at("training.level_counts"), level));
        }
    }
    Ok(Covariate {
        name: spec.name.clone(),
        kind: spec.kind,
        unit: spec.unit.clone(),
        levels,
        reference,
        training_min: f64::NAN,
        training_max: f64::NAN,
        training_mean: f64::NAN,
    })
}

/// A continuous, count or binary covariate: its training range, mean and spread.
fn numeric(i: usize, spec: &CovariateSpec) -> Result<Covariate, ModelError> {
    let at = |f: &str| format!("covariates[{i}].{f}");
    if spec.levels.is_some() || spec.reference.is_some() {
        return Err(err(
            at("levels"),
            ModelProblem::OutOfRange(format!(
                "only a categorical covariate has levels; '{}' is {}",
                spec.name,
                spec.kind.name()
            )),
        ));
    }
    let t = &spec.training;
    let need = |v: Option<f64>, f: &str| -> Result<f64, ModelError> {
        let field = at(&format!("training.{f}"));
        let x = v.ok_or_else(|| {
            err(
                field.clone(),
                ModelProblem::Missing(format!(
                    "a {} covariate needs its training {f}",
                    spec.kind.name()
                )),
            )
        })?;
        finite(|| field.clone(), x)
    };
    let min = need(t.min, "min")?;
    let max = need(t.max, "max")?;
    let mean = need(t.mean, "mean")?;
    if let Some(sd) = t.std_dev {
        finite(|| at("training.std_dev"), sd)?;
        if sd < 0.0 {
            return Err(err(
                at("training.std_dev"),
                ModelProblem::OutOfRange(format!("must be ≥ 0, got {sd}")),
            ));
        }
    }
    if !(min <= mean && mean <= max) {
        return Err(err(
            at("training"),
            ModelProblem::OutOfRange(format!(
                "needs min ≤ mean ≤ max, got min {min}, mean {mean}, max {max}"
            )),
        ));
    }
    if spec.kind == CovariateKind::Binary && (min < 0.0 || max > 1.0) {
        return Err(err(
            at("training"),
            ModelProblem::OutOfRange(format!(
                "a binary covariate's training range lies in [0, 1], got [{min}, {max}]"
            )),
        ));
    }
    if let Some(h) = &t.histogram {
        histogram(&at("training.histogram"), h)?;
    }
    Ok(Covariate {
        name: spec.name.clone(),
        kind: spec.kind,
        unit: spec.unit.clone(),
        levels: Vec::new(),
        reference: 0,
        training_min: min,
        training_max: max,
        training_mean: mean,
    })
}

/// The training share of each level of a categorical covariate (empty for other kinds).
/// Without counts every level gets an equal share; `describe` says so.
pub(in crate::model) fn level_shares(spec: &CovariateSpec, c: &Covariate) -> Vec<f64> {
    if c.kind != CovariateKind::Categorical {
        return Vec::new();
    }
    let counts: Vec<f64> = c
        .levels
        .iter()
        .map(|l| {
            spec.training
                .level_counts
                .as_ref()
                .and_then(|m| m.get(l))
                .copied()
                .unwrap_or(0) as f64
        })
        .collect();
    let total: f64 = counts.iter().sum();
    if total > 0.0 {
        counts.iter().map(|n| n / total).collect()
    } else {
        vec![1.0 / c.levels.len() as f64; c.levels.len()]
    }
}

#[cfg(test)]
mod tests {
    use serde_json::json;

    use super::super::fixture::{accepted, refused};
    use crate::model::ModelProblem;

    #[test]
    fn an_announced_covariate_is_one_of_the_file_named_once() {
        let model = accepted(|m| m["announces"] = json!(["region"]));
        assert_eq!(model.file().announces, ["region"]);
        let e = refused(|m| m["announces"] = json!(["sector"]));
        assert_eq!(e.field, "announces[0]");
        assert!(e.to_string().contains("'sector'"), "{e}");
        let e = refused(|m| m["announces"] = json!(["region", "region"]));
        assert_eq!(e.field, "announces[1]");
        assert!(matches!(e.problem, ModelProblem::Duplicate(_)));
    }

    #[test]
    fn no_covariates_at_all() {
        let e = refused(|m| m["covariates"] = json!([]));
        assert_eq!(e.field, "covariates");
        assert!(matches!(e.problem, ModelProblem::Missing(_)));
    }

    #[test]
    fn a_covariate_called_intercept() {
        let e = refused(|m| m["covariates"][0]["name"] = json!("intercept"));
        assert_eq!(e.field, "covariates[0].name");
        assert!(matches!(e.problem, ModelProblem::BadName { .. }));
    }

    #[test]
    fn a_name_that_is_not_an_identifier() {
        let e = refused(|m| m["covariates"][1]["name"] = json!("2nd age"));
        assert_eq!(e.field, "covariates[1].name");
    }

    #[test]
    fn a_level_that_a_term_could_not_spell() {
        for bad in ["", "a*b", "a,b", " padded"] {
            let e = refused(|m| m["covariates"][2]["levels"][1] = json!(bad));
            assert_eq!(e.field, "covariates[2].levels[1]", "level {bad:?}");
            assert!(matches!(e.problem, ModelProblem::BadName { .. }));
        }
    }

    #[test]
    fn a_level_listed_twice() {
        let e = refused(|m| m["covariates"][2]["levels"] = json!(["north", "south", "north"]));
        assert_eq!(e.field, "covariates[2].levels[2]");
        assert!(matches!(e.problem, ModelProblem::Duplicate(ref l) if l == "north"));
    }

    #[test]
    fn a_categorical_covariate_with_one_level() {
        let e = refused(|m| m["covariates"][2]["levels"] = json!(["north"]));
        assert_eq!(e.field, "covariates[2].levels");
    }

    #[test]
    fn a_categorical_covariate_without_a_reference() {
        let e = refused(|m| {
            m["covariates"][2]
                .as_object_mut()
                .expect("object")
                .remove("reference");
        });
        assert_eq!(e.field, "covariates[2].reference");
        assert!(matches!(e.problem, ModelProblem::Missing(_)));
    }

    #[test]
    fn counts_for_a_level_the_covariate_does_not_have() {
        let e = refused(|m| m["covariates"][2]["training"]["level_counts"]["west"] = json!(4));
        assert_eq!(e.field, "covariates[2].training.level_counts");
        assert!(
            matches!(e.problem, ModelProblem::UnknownLevel { ref level, .. } if level == "west")
        );
    }

    #[test]
    fn levels_on_a_numeric_covariate() {
        let e = refused(|m| m["covariates"][0]["levels"] = json!(["low", "high"]));
        assert_eq!(e.field, "covariates[0].levels");
    }

    #[test]
    fn a_numeric_covariate_without_its_training_mean() {
        let e = refused(|m| {
            m["covariates"][0]["training"]
                .as_object_mut()
                .expect("object")
                .remove("mean");
        });
        assert_eq!(e.field, "covariates[0].training.mean");
        assert!(matches!(e.problem, ModelProblem::Missing(_)));
    }

    #[test]
    fn a_mean_outside_the_training_range() {
        let e = refused(|m| m["covariates"][0]["training"]["mean"] = json!(900.0));
        assert_eq!(e.field, "covariates[0].training");
        assert!(matches!(e.problem, ModelProblem::OutOfRange(_)));
    }

    #[test]
    fn a_negative_standard_deviation() {
        let e = refused(|m| m["covariates"][0]["training"]["std_dev"] = json!(-1.0));
        assert_eq!(e.field, "covariates[0].training.std_dev");
    }

    #[test]
    fn a_binary_covariate_whose_range_leaves_zero_to_one() {
        let e = refused(|m| m["covariates"][1]["training"]["max"] = json!(2.0));
        assert_eq!(e.field, "covariates[1].training");
    }

    #[test]
    fn level_shares_follow_the_training_counts_or_are_equal_without_them() {
        let model = accepted(|_| {});
        assert_eq!(model.level_shares[2], vec![0.5, 0.3, 0.2]);
        assert!(model.level_shares[0].is_empty());
        let model = accepted(|m| {
            m["covariates"][2]["training"]
                .as_object_mut()
                .expect("object")
                .remove("level_counts");
        });
        assert_eq!(model.level_shares[2], vec![1.0 / 3.0; 3]);
    }
}
