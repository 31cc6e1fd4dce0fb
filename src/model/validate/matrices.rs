//! Matrices: the coefficient covariance and the joint-extrapolation check.

use nalgebra::{DMatrix, SymmetricEigen};

use super::super::error::{err, finite, ModelError, ModelProblem};
use super::super::file::{CovariateKind, JointSpec};
use super::super::{Covariate, Joint};

/// Check a square matrix: size, finiteness, symmetry and (if asked) positive semi-definiteness.
/// Returns it row-major.
pub(in crate::model) fn covariance(
    field: &str,
    rows: &[Vec<f64>],
    k: usize,
    semi_definite: bool,
) -> Result<Vec<f64>, ModelError> {
    if rows.len() != k {
        return Err(err(
            field,
            ModelProblem::Size {
                expected: format!("{k} rows (one per term)"),
                found: format!("{} rows", rows.len()),
            },
        ));
    }
    let mut flat = Vec::with_capacity(k * k);
    for (r, row) in rows.iter().enumerate() {
        if row.len() != k {
            return Err(err(
                format!("{field}[{r}]"),
                ModelProblem::Size {
                    expected: format!("{k} columns"),
                    found: format!("{} columns", row.len()),
                },
            ));
        }
        for (c, &x) in row.iter().enumerate() {
            flat.push(finite(|| format!("{field}[{r}][{c}]"), x)?);
        }
    }
    let scale = (0..k)
        .map(|i| flat[i * k + i].abs())
        .fold(0.0_f64, f64::max)
        .max(f64::MIN_POSITIVE);
    for r in 0..k {
        for c in (r + 1)..k {
            let (a, b) = (flat[r * k + c], flat[c * k + r]);
            if (a - b).abs() > 1e-9 * scale {
                return Err(err(
                    field,
                    ModelProblem::NotSymmetric {
                        row: r,
                        col: c,
                        a,
                        b,
                    },
                ));
            }
            // Keep the symmetric part, the matrix a quadratic form means: the engine relies on
            // V = Vᵀ exactly (a fitted covariance is symmetric only up to its rounding).
            let symmetric = a + 0.5 * (b - a);
            flat[r * k + c] = symmetric;
            flat[c * k + r] = symmetric;
        }
    }
    let matrix = DMatrix::from_row_slice(k, k, &flat);
    let eigen = SymmetricEigen::new(matrix);
    let smallest = eigen
        .eigenvalues
        .iter()
        .copied()
        .fold(f64::INFINITY, f64::min);
    let largest = eigen
        .eigenvalues
        .iter()
        .copied()
        .fold(0.0_f64, |a, b| a.max(b.abs()));
    let tolerance = 1e-10 * largest.max(f64::MIN_POSITIVE);
    let bad = if semi_definite {
        smallest < -tolerance
    } else {
        smallest <= tolerance
    };
    if bad {
        return Err(err(field, ModelProblem::NotPositiveSemiDefinite(smallest)));
    }
    Ok(flat)
}

/// The joint-extrapolation check: numeric covariates of the model, once each, their means, a
/// positive-definite training covariance (inverted here) and a positive largest distance.
pub(in crate::model) fn joint(
    j: &JointSpec,
    covariates: &[Covariate],
) -> Result<Joint, ModelError> {
    let mut indices = Vec::with_capacity(j.covariates.len());
    for (i, name) in j.covariates.iter().enumerate() {
        let at = format!("joint.covariates[{i}]");
        let c = covariates
            .iter()
            .position(|c| &c.name == name)
            .ok_or_else(|| {
                err(
                    at.clone(),
                    ModelProblem::UnknownCovariate {
                        term: "joint".into(),
                        covariate: name.clone(),
                    },
                )
            })?;
        if covariates[c].kind == CovariateKind::Categorical {
            return Err(err(
                at,
                ModelProblem::OutOfRange(format!(
                    "'{name}' is categorical; the joint check takes numeric covariates"
                )),
            ));
        }
        if indices.contains(&c) {
            return Err(err(at, ModelProblem::Duplicate(name.clone())));
        }
        indices.push(c);
    }
    let n = indices.len();
    if n == 0 {
        return Err(err(
            "joint.covariates",
            ModelProblem::Missing("the joint check needs at least one covariate".into()),
        ));
    }
    if j.mean.len() != n {
        return Err(err(
            "joint.mean",
            ModelProblem::Size {
                expected: format!("{n} means"),
                found: format!("{}", j.mean.len()),
            },
        ));
    }
    for (i, &m) in j.mean.iter().enumerate() {
        finite(|| format!("joint.mean[{i}]"), m)?;
    }
    let flat = covariance("joint.covariance", &j.covariance, n, false)?;
    let max_distance = finite(|| "joint.max_distance".into(), j.max_distance)?;
    if max_distance <= 0.0 {
        return Err(err(
            "joint.max_distance",
            ModelProblem::OutOfRange(format!("must be > 0, got {max_distance}")),
        ));
    }
    let inverse = DMatrix::from_row_slice(n, n, &flat)
        .cholesky()
        .map(|c| c.inverse())
        .ok_or_else(|| {
            err(
                "joint.covariance",
                ModelProblem::NotPositiveSemiDefinite(0.0),
            )
        })?;
    let precision = (0..n)
        .flat_map(|r| (0..n).map(move |c| (r, c)))
        .map(|(r, c)| inverse[(r, c)])
        .collect();
    Ok(Joint {
        covariates: indices,
        mean: j.mean.clone(),
        precision,
        max_distance,
    })
}

#[cfg(test)]
mod tests {
    use serde_json::json;

    use super::super::fixture::{accepted, diagonal, refused};
    use crate::model::ModelProblem;

    #[test]
    fn a_covariance_row_of_the_wrong_length() {
        let e = refused(|m| m["covariance"][2] = json!([0.01, 0.0]));
        assert_eq!(e.field, "covariance[2]");
        assert!(matches!(e.problem, ModelProblem::Size { .. }));
    }

    #[test]
    fn a_nearly_symmetric_covariance_is_made_exactly_symmetric() {
        let model = accepted(|m| {
            m["covariance"][0][1] = json!(1e-13);
            m["covariance"][1][0] = json!(2e-13);
        });
        let v = model.covariance.expect("covariance");
        assert_eq!(v[1], v[6]);
        assert!(
            (v[1] - 1.5e-13).abs() < 1e-27,
            "the mean of the two, got {}",
            v[1]
        );
    }

    #[test]
    fn a_covariance_that_is_not_positive_semi_definite() {
        // [[1, 2], [2, 1]] has eigenvalues 3 and −1.
        let e = refused(|m| {
            m["covariance"][0][0] = json!(1.0);
            m["covariance"][1][1] = json!(1.0);
            m["covariance"][0][1] = json!(2.0);
            m["covariance"][1][0] = json!(2.0);
        });
        assert_eq!(e.field, "covariance");
        assert!(
            matches!(e.problem, ModelProblem::NotPositiveSemiDefinite(x) if (x + 1.0).abs() < 1e-12)
        );
    }

    fn with_joint(m: &mut serde_json::Value) {
        m["joint"] = json!({
            "covariates": ["income", "guarantor"],
            "mean": [60.0, 0.3],
            "covariance": diagonal(2, 4.0),
            "max_distance": 3.5
        });
    }

    #[test]
    fn the_joint_check_is_inverted_once() {
        let model = accepted(with_joint);
        let joint = model.joint.expect("joint check");
        assert_eq!(joint.covariates, vec![0, 1]);
        assert_eq!(joint.precision, vec![0.25, 0.0, 0.0, 0.25]);
    }

    #[test]
    fn the_joint_check_takes_only_numeric_covariates_once_each() {
        let e = refused(|m| {
            with_joint(m);
            m["joint"]["covariates"][1] = json!("region");
        });
        assert_eq!(e.field, "joint.covariates[1]");
        let e = refused(|m| {
            with_joint(m);
            m["joint"]["covariates"][1] = json!("income");
        });
        assert!(matches!(e.problem, ModelProblem::Duplicate(_)));
    }

    #[test]
    fn the_joint_check_needs_one_mean_per_covariate_and_a_positive_distance() {
        let e = refused(|m| {
            with_joint(m);
            m["joint"]["mean"] = json!([60.0]);
        });
        assert_eq!(e.field, "joint.mean");
        let e = refused(|m| {
            with_joint(m);
            m["joint"]["max_distance"] = json!(0.0);
        });
        assert_eq!(e.field, "joint.max_distance");
    }

    #[test]
    fn a_singular_joint_covariance_is_refused() {
        let e = refused(|m| {
            with_joint(m);
            m["joint"]["covariance"] = json!([[1.0, 1.0], [1.0, 1.0]]);
        });
        assert_eq!(e.field, "joint.covariance");
    }
}
