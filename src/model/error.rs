//! What a refused model file is told: the JSON path of the field at fault and what is wrong there.

use super::file::FORMAT_VERSION;
use super::observation::ObservationError;
use super::term;
use super::CHECK_CASE_TOLERANCE;

/// Why a model file was refused: the JSON path of the field at fault and what is wrong there.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("{field}: {problem}")]
pub struct ModelError {
    /// JSON path of the field at fault, for example `terms[3].term`.
    pub field: String,
    /// What is wrong there.
    pub problem: ModelProblem,
}

/// The kinds of problem a model file can have.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ModelProblem {
    /// The bytes are not JSON of the model-file shape.
    #[error("not a valid model file: {0}")]
    Json(String),
    /// The `format` field is not `ogive-model`.
    #[error("format is '{0}', expected 'ogive-model'")]
    Format(String),
    /// A format version this build does not read.
    #[error("format version {0} is not supported (this build reads version {FORMAT_VERSION})")]
    FormatVersion(u32),
    /// A name that breaks its naming rule.
    #[error("'{name}' is not a valid name: {rule}")]
    BadName {
        /// The name.
        name: String,
        /// The rule it breaks.
        rule: &'static str,
    },
    /// A name used twice.
    #[error("'{0}' appears more than once")]
    Duplicate(String),
    /// A number that is NaN or infinite.
    #[error("must be a finite number, got {0}")]
    NonFinite(f64),
    /// A term that does not parse.
    #[error("{0}")]
    TermSyntax(#[from] term::TermSyntaxError),
    /// A term that names no covariate of the model.
    #[error("term '{term}' uses '{covariate}', which is not a covariate of this model")]
    UnknownCovariate {
        /// The term's label as the model file writes it, such as `log(income)`.
        term: String,
        /// The unknown name.
        covariate: String,
    },
    /// A categorical covariate used as a number, or a numeric one with a level.
    #[error("term '{term}': {problem}")]
    TermKind {
        /// The term's label as the model file writes it, such as `log(income)`.
        term: String,
        /// What is wrong.
        problem: String,
    },
    /// A level that is not among the covariate's levels.
    #[error("'{level}' is not a level of '{covariate}' (levels: {levels})")]
    UnknownLevel {
        /// The covariate's name, as the model file gives it.
        covariate: String,
        /// The level the term names, which the covariate does not have.
        level: String,
        /// Its levels.
        levels: String,
    },
    /// A required value is absent.
    #[error("{0}")]
    Missing(String),
    /// A log term whose covariate's training range is not strictly positive.
    #[error("term '{term}' takes the log of '{covariate}', whose training minimum is {min} (must be > 0)")]
    LogDomain {
        /// The term's label as the model file writes it, such as `log(income)`.
        term: String,
        /// The covariate's name, as the model file gives it.
        covariate: String,
        /// Its training minimum.
        min: f64,
    },
    /// A matrix or vector of the wrong size.
    #[error("expected {expected}, got {found}")]
    Size {
        /// What was expected.
        expected: String,
        /// What was found.
        found: String,
    },
    /// A matrix that is not symmetric.
    #[error("not symmetric: [{row}][{col}] = {a} but [{col}][{row}] = {b}")]
    NotSymmetric {
        /// Row.
        row: usize,
        /// Column.
        col: usize,
        /// The value at (row, col).
        a: f64,
        /// The value at (col, row).
        b: f64,
    },
    /// A covariance matrix with a negative eigenvalue.
    #[error("not positive semi-definite: smallest eigenvalue {0:e}")]
    NotPositiveSemiDefinite(f64),
    /// A value outside its allowed range.
    #[error("{0}")]
    OutOfRange(String),
    /// A check case that does not parse as an observation.
    #[error("check case is not a valid observation: {0}")]
    CheckCaseObservation(ObservationError),
    /// A check case whose probability does not reproduce.
    #[error("stored probability {stored} but the model computes {computed} (relative difference {relative:e} > {CHECK_CASE_TOLERANCE:e})")]
    CheckCaseMismatch {
        /// The stored probability.
        stored: f64,
        /// What this model computes.
        computed: f64,
        /// Their relative difference.
        relative: f64,
    },
}

/// A [`ModelError`] at `field`.
pub(crate) fn err(field: impl Into<String>, problem: ModelProblem) -> ModelError {
    ModelError {
        field: field.into(),
        problem,
    }
}

/// `x` itself if finite, else a [`ModelProblem::NonFinite`] at the field `field` names.
pub(crate) fn finite(field: impl Fn() -> String, x: f64) -> Result<f64, ModelError> {
    if x.is_finite() {
        Ok(x)
    } else {
        Err(err(field(), ModelProblem::NonFinite(x)))
    }
}
