//! The model: the file format, its validation, covariates, terms and their derivatives.
//!
//! A [`Model`] exists only if its file passed every check in [`Model::from_file`]: names are
//! unique and resolved, numbers are finite, the covariance is square, symmetric and positive
//! semi-definite, log terms stay inside their training domain, and the stored check cases
//! reproduce. The engine therefore never re-checks a model.
//!
//! This module reads bytes it is given; it does no file or network I/O of its own.

mod error;
pub mod file;
pub(crate) mod observation;
pub(crate) mod summary;
pub(crate) mod term;
mod validate;

pub use error::{ModelError, ModelProblem};
pub use file::{CovariateKind, ModelFile, FORMAT_NAME, FORMAT_VERSION};
pub use observation::ObservationError;
pub use term::{Factor, Term, TermText, Value};

use crate::link::Link;
use error::{err, finite};

/// Relative tolerance to which a check case must reproduce.
pub const CHECK_CASE_TOLERANCE: f64 = 1e-9;

/// A covariate of a validated model.
#[derive(Debug, Clone)]
pub struct Covariate {
    /// The field name.
    pub(crate) name: String,
    pub(crate) kind: CovariateKind,
    /// Its unit, if any.
    pub(crate) unit: Option<String>,
    /// Levels of a categorical covariate (empty otherwise).
    pub(crate) levels: Vec<String>,
    /// Index of the reference level in `levels` (0 for non-categorical covariates).
    pub(crate) reference: usize,
    /// Training minimum (numeric kinds; NaN for categorical).
    pub(crate) training_min: f64,
    /// Training maximum (numeric kinds; NaN for categorical).
    pub(crate) training_max: f64,
    /// Training mean (numeric kinds; NaN for categorical).
    pub(crate) training_mean: f64,
}

impl Covariate {
    /// Whether the covariate's marginal effect is a derivative (continuous and count kinds).
    pub fn is_numeric_derivative(&self) -> bool {
        matches!(self.kind, CovariateKind::Continuous | CovariateKind::Count)
    }

    /// The field name callers send.
    pub fn name(&self) -> &str {
        &self.name
    }

    /// Continuous, count, binary or categorical.
    pub fn kind(&self) -> CovariateKind {
        self.kind
    }

    /// The unit the covariate is stated in, if the file names one.
    pub fn unit(&self) -> Option<&str> {
        self.unit.as_deref()
    }

    /// Levels of a categorical covariate, in file order (empty for other kinds).
    pub fn levels(&self) -> &[String] {
        &self.levels
    }

    /// Index into [`Covariate::levels`] of the reference level (0 for other kinds).
    pub fn reference(&self) -> usize {
        self.reference
    }

    /// The training minimum of a numeric covariate (NaN for a categorical one).
    pub fn training_min(&self) -> f64 {
        self.training_min
    }

    /// The training maximum of a numeric covariate (NaN for a categorical one).
    pub fn training_max(&self) -> f64 {
        self.training_max
    }

    /// The training mean of a numeric covariate (NaN for a categorical one).
    pub fn training_mean(&self) -> f64 {
        self.training_mean
    }
}

/// The joint-extrapolation check: Mahalanobis distance of the continuous covariates.
#[derive(Debug, Clone)]
pub struct Joint {
    /// Covariate indices, in the order of `mean`.
    pub(crate) covariates: Vec<usize>,
    /// Training means.
    pub(crate) mean: Vec<f64>,
    /// The inverse of the training covariance, row-major.
    pub(crate) precision: Vec<f64>,
    /// The largest training distance.
    pub(crate) max_distance: f64,
}

/// A validated model, ready for the engine.
#[derive(Debug, Clone)]
pub struct Model {
    /// The file it was built from, kept for describing and re-serialising it.
    pub(crate) file: ModelFile,
    pub(crate) link: Link,
    /// Covariates, in file order.
    pub(crate) covariates: Vec<Covariate>,
    /// Terms, in file order.
    pub(crate) terms: Vec<Term>,
    /// Canonical text of each term.
    pub(crate) term_labels: Vec<String>,
    /// Coefficient of each term.
    pub(crate) coefficients: Vec<f64>,
    /// Coefficient covariance, row-major `k × k`, if the file has one.
    pub(crate) covariance: Option<Vec<f64>>,
    /// The joint-extrapolation check, if the file has one.
    pub(crate) joint: Option<Joint>,
    /// Training share of each level, per covariate (empty for non-categorical covariates).
    pub(crate) level_shares: Vec<Vec<f64>>,
    /// The training-mean profile: numeric covariates at their means, categorical at their
    /// shares. Effects at means are evaluated here, and contributions are measured from it.
    pub(crate) mean_profile: Vec<Value>,
    /// `(term index, covariate index)` of every log term, for the domain check.
    pub(crate) log_terms: Vec<(usize, usize)>,
    /// For each covariate, the indices of the terms that involve it.
    pub(crate) terms_of_covariate: Vec<Vec<usize>>,
}

/// Model names: lower-case letters, digits and `-`, starting with a letter; at most 64.
pub fn is_model_name(s: &str) -> bool {
    s.len() <= 64
        && s.starts_with(|c: char| c.is_ascii_lowercase())
        && s.chars()
            .all(|c| c.is_ascii_lowercase() || c.is_ascii_digit() || c == '-')
}

/// Version labels: letters, digits, `.`, `_`, `-`, starting with a letter or digit; at most 64.
/// (They become file names, so nothing that could climb out of a directory.)
pub fn is_version_label(s: &str) -> bool {
    s.len() <= 64
        && s.starts_with(|c: char| c.is_ascii_alphanumeric())
        && s.chars()
            .all(|c| c.is_ascii_alphanumeric() || matches!(c, '.' | '_' | '-'))
}

impl Model {
    /// The model file this model was validated from (for describing and re-serialising it).
    pub fn file(&self) -> &ModelFile {
        &self.file
    }

    /// The link F that maps the linear index to the probability, p = F(βᵀt).
    pub fn link(&self) -> Link {
        self.link
    }

    /// Covariates, in file order; observations are parsed into this order.
    pub fn covariates(&self) -> &[Covariate] {
        &self.covariates
    }

    /// Terms, in file order (the order of [`Model::coefficients`]).
    pub fn terms(&self) -> &[Term] {
        &self.terms
    }

    /// The canonical text of each term, as reports and answers print it.
    pub fn term_labels(&self) -> &[String] {
        &self.term_labels
    }

    /// The coefficient of each term.
    pub fn coefficients(&self) -> &[f64] {
        &self.coefficients
    }

    /// The coefficients' covariance, row-major `k × k`, when the file carries one.
    pub fn covariance(&self) -> Option<&[f64]> {
        self.covariance.as_deref()
    }

    /// The training-mean profile: numeric covariates at their means, categorical ones at their
    /// training shares (where effects at the means are evaluated).
    pub fn mean_profile(&self) -> &[Value] {
        &self.mean_profile
    }

    /// Parse and validate a model file from its bytes.
    pub fn from_json(bytes: &[u8]) -> Result<Model, ModelError> {
        let file: ModelFile = serde_json::from_slice(bytes).map_err(|e| {
            err(
                format!("(line {}, column {})", e.line(), e.column()),
                ModelProblem::Json(e.to_string()),
            )
        })?;
        Model::from_file(file)
    }

    /// Validate a parsed model file.
    pub fn from_file(file: ModelFile) -> Result<Model, ModelError> {
        if file.format != FORMAT_NAME {
            return Err(err("format", ModelProblem::Format(file.format.clone())));
        }
        if file.format_version != FORMAT_VERSION {
            return Err(err(
                "format_version",
                ModelProblem::FormatVersion(file.format_version),
            ));
        }
        if !is_model_name(&file.name) {
            return Err(err(
                "name",
                ModelProblem::BadName {
                    name: file.name.clone(),
                    rule: "lower-case letters, digits and '-', starting with a letter, at most 64",
                },
            ));
        }
        if !is_version_label(&file.version) {
            return Err(err(
                "version",
                ModelProblem::BadName {
                    name: file.version.clone(),
                    rule: "letters, digits, '.', '_' and '-', starting with a letter or digit, at most 64",
                },
            ));
        }
        let covariates = validate::covariates(&file)?;
        let validate::Terms {
            terms,
            labels: term_labels,
            coefficients,
        } = validate::terms(&file, &covariates)?;
        let k = terms.len();
        let covariance = match &file.covariance {
            Some(rows) => Some(validate::covariance("covariance", rows, k, true)?),
            None => None,
        };
        let joint = match &file.joint {
            Some(j) => Some(validate::joint(j, &covariates)?),
            None => None,
        };
        if let Some(h) = &file.fitted_probabilities {
            validate::histogram("fitted_probabilities", h)?;
        }
        validate::decision(&file)?;

        let level_shares: Vec<Vec<f64>> = file
            .covariates
            .iter()
            .zip(&covariates)
            .map(|(spec, c)| validate::level_shares(spec, c))
            .collect();
        let mean_profile = covariates
            .iter()
            .map(|c| match c.kind {
                CovariateKind::Categorical => Value::Shares,
                _ => Value::Number(c.training_mean),
            })
            .collect();
        let log_terms = terms
            .iter()
            .enumerate()
            .filter_map(|(i, t)| match t {
                Term::Log(c) => Some((i, *c)),
                _ => None,
            })
            .collect();
        let terms_of_covariate = (0..covariates.len())
            .map(|j| (0..k).filter(|&i| terms[i].involves(j)).collect())
            .collect();
        let model = Model {
            file,
            link: Link::Logit,
            covariates,
            terms,
            term_labels,
            coefficients,
            covariance,
            joint,
            level_shares,
            mean_profile,
            log_terms,
            terms_of_covariate,
        };
        let model = Model {
            link: model.file.link,
            ..model
        };
        model.verify_check_cases()?;
        Ok(model)
    }

    /// The model's name from its file: its folder in a model directory and the `NAME` of its
    /// routes.
    pub fn name(&self) -> &str {
        &self.file.name
    }

    /// The model's version label.
    pub fn version(&self) -> &str {
        &self.file.version
    }

    /// Index of the covariate called `name`.
    pub fn covariate_index(&self, name: &str) -> Option<usize> {
        self.covariates.iter().position(|c| c.name == name)
    }

    /// The term vector `t(x)` into `out` (cleared first).
    #[inline]
    pub fn term_vector(&self, values: &[Value], out: &mut Vec<f64>) {
        out.clear();
        out.extend(
            self.terms
                .iter()
                .map(|t| t.value(values, &self.level_shares)),
        );
    }

    /// The linear index `z = Σ βₖ tₖ` for a term vector.
    #[inline]
    pub fn linear_index(&self, term_vector: &[f64]) -> f64 {
        self.coefficients
            .iter()
            .zip(term_vector)
            .map(|(b, t)| b * t)
            .sum()
    }

    /// The linear index straight from covariate values, without keeping the term vector.
    #[inline]
    pub fn linear_index_of(&self, values: &[Value]) -> f64 {
        self.coefficients
            .iter()
            .zip(&self.terms)
            .map(|(b, t)| b * t.value(values, &self.level_shares))
            .sum()
    }

    fn verify_check_cases(&self) -> Result<(), ModelError> {
        let mut values = Vec::with_capacity(self.covariates.len());
        for (i, case) in self.file.check_cases.iter().enumerate() {
            let field = || format!("check_cases[{i}]");
            finite(|| format!("{}.probability", field()), case.probability)?;
            self.parse_observation(&case.observation, &mut values)
                .map_err(|e| {
                    err(
                        format!("{}.observation", field()),
                        ModelProblem::CheckCaseObservation(e),
                    )
                })?;
            let computed = self.link.probability(self.linear_index_of(&values));
            let relative =
                (computed - case.probability).abs() / case.probability.abs().max(f64::MIN_POSITIVE);
            if relative > CHECK_CASE_TOLERANCE {
                return Err(err(
                    format!("{}.probability", field()),
                    ModelProblem::CheckCaseMismatch {
                        stored: case.probability,
                        computed,
                        relative,
                    },
                ));
            }
        }
        Ok(())
    }
}
