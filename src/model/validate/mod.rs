//! The rules a model file must keep before it becomes a [`Model`](super::Model), one file per
//! part of the file: covariates, terms, matrices (covariance and joint check), and the decision
//! rule with the histograms. Each rule refuses with the JSON path of the field at fault; the
//! unit tests beside each rule break one field of a small valid file at a time.

mod covariates;
mod decision;
mod matrices;
mod terms;

pub(super) use covariates::{covariates, level_shares};
pub(super) use decision::{decision, histogram};
pub(super) use matrices::{covariance, joint};
pub(super) use terms::{terms, Terms};

#[cfg(test)]
pub(super) mod fixture {
    //! A small valid model file for the rule tests: a continuous covariate with log, square and
    //! product terms, a binary one and a categorical one. Its numbers are validator input, never
    //! check values.

    use serde_json::{json, Value};

    use crate::model::{Model, ModelError};

    /// The fixture (`fixture.json`, which the integration tests of validation extend) with
    /// its 6 × 6 covariance.
    pub fn base() -> Value {
        let mut file: Value =
            serde_json::from_str(include_str!("fixture.json")).expect("fixture.json is JSON");
        file["covariance"] = diagonal(6, 0.01);
        file
    }

    /// A `k × k` diagonal matrix with `d` on the diagonal, as JSON rows.
    pub fn diagonal(k: usize, d: f64) -> Value {
        let rows: Vec<Vec<f64>> = (0..k)
            .map(|r| (0..k).map(|c| if r == c { d } else { 0.0 }).collect())
            .collect();
        json!(rows)
    }

    fn load(change: impl FnOnce(&mut Value)) -> Result<Model, ModelError> {
        let mut file = base();
        change(&mut file);
        Model::from_json(&serde_json::to_vec(&file).expect("serialise"))
    }

    /// The fixture with `change` made, which must be accepted.
    pub fn accepted(change: impl FnOnce(&mut Value)) -> Model {
        load(change).unwrap_or_else(|e| panic!("the changed fixture was refused: {e}"))
    }

    /// The fixture with `change` made, which must be refused.
    pub fn refused(change: impl FnOnce(&mut Value)) -> ModelError {
        match load(change) {
            Ok(_) => panic!("the validator accepted a broken file"),
            Err(e) => e,
        }
    }
}
