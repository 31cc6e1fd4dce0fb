//! Size limits on a model file, checked by the gate before the file is validated: a file past
//! them is refused (422 `model-too-large`, naming the limit and where it is passed) before
//! validation spends time on it, and no version that serving could not afford becomes live.
//!
//! ```text
//! terms                 256     each observation costs about terms² (the delta method's tᵀVt
//!                               and one gradient per effect); at 256 terms that is 65,536
//!                               units, so the request work budget still admits 381
//!                               observations at once. Credit and eligibility designs run to
//!                               tens of terms (common practice); 256 leaves room for large
//!                               level sets without letting a file make every request slow
//! covariates            256     the same bound: each covariate is at least one term
//! levels of a category  1,000   each level is a term and a discrete change per answer; more
//!                               levels than this is an identifier, not a category
//! covariance            256 × 256 rows of at most `terms` entries each: 65,536 numbers, 0.5 MiB
//! joint covariance      256 × 256 over the continuous covariates
//! check cases           1,000   each is scored at load, on every replica
//! histogram edges       1,000   per covariate and for the fitted probabilities
//! ```
//!
//! The check reads only the shape of the file (how many of each); a file that is not even
//! shaped like a model file passes here and is refused by validation with its own message.

use serde::de::IgnoredAny;
use serde::Deserialize;

/// Most terms of a model (the intercept included).
pub const MAX_TERMS: usize = 256;
/// Most covariates of a model.
pub const MAX_COVARIATES: usize = 256;
/// Most levels of one categorical covariate.
pub const MAX_LEVELS: usize = 1_000;
/// Most check cases in a model file.
pub const MAX_CHECK_CASES: usize = 1_000;
/// Most edges of one histogram.
pub const MAX_HISTOGRAM_EDGES: usize = 1_000;

/// A size limit a model file passes.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("{what} has {count} entries; the most a model may have is {limit}")]
pub struct TooLarge {
    /// What is too large, in words ("the term list", "the levels of covariate 'sector'").
    pub what: String,
    /// The JSON Pointer of the list in the file.
    pub pointer: String,
    /// How many it has.
    pub count: usize,
    pub limit: usize,
}

#[derive(Deserialize)]
struct Shape {
    #[serde(default)]
    covariates: Vec<CovariateShape>,
    #[serde(default)]
    terms: Vec<IgnoredAny>,
    #[serde(default)]
    covariance: Option<Vec<Vec<IgnoredAny>>>,
    #[serde(default)]
    joint: Option<JointShape>,
    #[serde(default)]
    check_cases: Vec<IgnoredAny>,
    #[serde(default)]
    fitted_probabilities: Option<HistogramShape>,
}

#[derive(Deserialize)]
struct CovariateShape {
    #[serde(default)]
    name: Option<String>,
    #[serde(default)]
    levels: Option<Vec<IgnoredAny>>,
    #[serde(default)]
    training: Option<TrainingShape>,
}

#[derive(Deserialize)]
struct TrainingShape {
    #[serde(default)]
    histogram: Option<HistogramShape>,
}

#[derive(Deserialize)]
struct HistogramShape {
    #[serde(default)]
    edges: Vec<IgnoredAny>,
}

#[derive(Deserialize)]
struct JointShape {
    #[serde(default)]
    covariance: Vec<Vec<IgnoredAny>>,
}

fn at_most(what: String, pointer: String, count: usize, limit: usize) -> Result<(), TooLarge> {
    if count > limit {
        return Err(TooLarge {
            what,
            pointer,
            count,
            limit,
        });
    }
    Ok(())
}

fn square(
    what: &str,
    pointer: &str,
    rows: &[Vec<IgnoredAny>],
    limit: usize,
) -> Result<(), TooLarge> {
    at_most(
        format!("{what} (rows)"),
        pointer.to_string(),
        rows.len(),
        limit,
    )?;
    for (i, row) in rows.iter().enumerate() {
        at_most(
            format!("row {i} of {what}"),
            format!("{pointer}/{i}"),
            row.len(),
            limit,
        )?;
    }
    Ok(())
}

/// Check the sizes of a model file's lists against the limits above.
pub fn check_model_size(bytes: &[u8]) -> Result<(), TooLarge> {
    let Ok(shape) = serde_json::from_slice::<Shape>(bytes) else {
        return Ok(());
    };
    at_most(
        "the covariate list".into(),
        "/covariates".into(),
        shape.covariates.len(),
        MAX_COVARIATES,
    )?;
    at_most(
        "the term list".into(),
        "/terms".into(),
        shape.terms.len(),
        MAX_TERMS,
    )?;
    for (j, covariate) in shape.covariates.iter().enumerate() {
        let name = match &covariate.name {
            Some(name) => format!("covariate '{}'", name.chars().take(64).collect::<String>()),
            None => format!("covariate {j}"),
        };
        if let Some(levels) = &covariate.levels {
            at_most(
                format!("the level list of {name}"),
                format!("/covariates/{j}/levels"),
                levels.len(),
                MAX_LEVELS,
            )?;
        }
        if let Some(histogram) = covariate
            .training
            .as_ref()
            .and_then(|t| t.histogram.as_ref())
        {
            at_most(
                format!("the training histogram of {name}"),
                format!("/covariates/{j}/training/histogram/edges"),
                histogram.edges.len(),
                MAX_HISTOGRAM_EDGES,
            )?;
        }
    }
    if let Some(rows) = &shape.covariance {
        square("the covariance", "/covariance", rows, MAX_TERMS)?;
    }
    if let Some(joint) = &shape.joint {
        square(
            "the joint covariance",
            "/joint/covariance",
            &joint.covariance,
            MAX_COVARIATES,
        )?;
    }
    at_most(
        "the check-case list".into(),
        "/check_cases".into(),
        shape.check_cases.len(),
        MAX_CHECK_CASES,
    )?;
    if let Some(histogram) = &shape.fitted_probabilities {
        at_most(
            "the fitted-probability histogram".into(),
            "/fitted_probabilities/edges".into(),
            histogram.edges.len(),
            MAX_HISTOGRAM_EDGES,
        )?;
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn each_list_is_refused_one_past_its_limit_naming_where() {
        let ok = serde_json::json!({"terms": vec![0; MAX_TERMS]});
        assert_eq!(check_model_size(ok.to_string().as_bytes()), Ok(()));
        let cases = [
            (
                serde_json::json!({"terms": vec![0; MAX_TERMS + 1]}),
                "/terms",
            ),
            (
                serde_json::json!({"covariates": vec![serde_json::json!({}); MAX_COVARIATES + 1]}),
                "/covariates",
            ),
            (
                serde_json::json!({"covariates": [{}, {"levels": vec!["a"; MAX_LEVELS + 1]}]}),
                "/covariates/1/levels",
            ),
            (
                serde_json::json!({"covariance": vec![vec![0; 2]; MAX_TERMS + 1]}),
                "/covariance",
            ),
            (
                serde_json::json!({"covariance": [[0], vec![0; MAX_TERMS + 1]]}),
                "/covariance/1",
            ),
            (
                serde_json::json!({"joint": {"covariance": [vec![0; MAX_COVARIATES + 1]]}}),
                "/joint/covariance/0",
            ),
            (
                serde_json::json!({"check_cases": vec![0; MAX_CHECK_CASES + 1]}),
                "/check_cases",
            ),
        ];
        for (file, pointer) in cases {
            let error = check_model_size(file.to_string().as_bytes()).expect_err(pointer);
            assert_eq!(error.pointer, pointer);
            assert_eq!(error.count, error.limit + 1);
        }
    }

    #[test]
    fn a_file_not_shaped_like_a_model_is_left_to_validation() {
        assert_eq!(check_model_size(b"{"), Ok(()));
        assert_eq!(check_model_size(br#"{"terms": 3}"#), Ok(()));
    }
}
