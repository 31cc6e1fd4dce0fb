//! The model: the file format, its validation, covariates, terms and their derivatives.
//!
//! A [`Model`] exists only if its file passed every check in [`Model::from_file`]: names are
//! unique and resolved, numbers are finite, the covariance is square, symmetric and positive
//! semi-definite, log terms stay inside their training domain, and the stored check cases
//! reproduce. The engine therefore never re-checks a model.
//!
//! This module reads bytes it is given; it does no file or network I/O of its own.

pub mod file;
pub mod observation;
pub mod summary;
pub mod term;

use std::collections::HashSet;

use nalgebra::{DMatrix, SymmetricEigen};

pub use file::{CovariateKind, ModelFile, FORMAT_NAME, FORMAT_VERSION};
pub use observation::ObservationError;
pub use term::{Factor, Term, TermText, Value};

use crate::link::Link;

/// Relative tolerance to which a check case must reproduce.
pub const CHECK_CASE_TOLERANCE: f64 = 1e-9;

/// A covariate of a validated model.
#[derive(Debug, Clone)]
pub struct Covariate {
    /// The field name.
    pub name: String,
    /// Its kind.
    pub kind: CovariateKind,
    /// Its unit, if any.
    pub unit: Option<String>,
    /// Levels of a categorical covariate (empty otherwise).
    pub levels: Vec<String>,
    /// Index of the reference level in `levels` (0 for non-categorical covariates).
    pub reference: usize,
    /// Training minimum (numeric kinds; NaN for categorical).
    pub training_min: f64,
    /// Training maximum (numeric kinds; NaN for categorical).
    pub training_max: f64,
    /// Training mean (numeric kinds; NaN for categorical).
    pub training_mean: f64,
}

impl Covariate {
    /// Whether the covariate's marginal effect is a derivative (continuous and count kinds).
    pub fn is_numeric_derivative(&self) -> bool {
        matches!(self.kind, CovariateKind::Continuous | CovariateKind::Count)
    }
}

/// The joint-extrapolation check: Mahalanobis distance of the continuous covariates.
#[derive(Debug, Clone)]
pub struct Joint {
    /// Covariate indices, in the order of `mean`.
    pub covariates: Vec<usize>,
    /// Training means.
    pub mean: Vec<f64>,
    /// The inverse of the training covariance, row-major.
    pub precision: Vec<f64>,
    /// The largest training distance.
    pub max_distance: f64,
}

/// A validated model, ready for the engine.
#[derive(Debug, Clone)]
pub struct Model {
    /// The file it was built from, kept for describing and re-serialising it.
    pub file: ModelFile,
    /// The link.
    pub link: Link,
    /// Covariates, in file order.
    pub covariates: Vec<Covariate>,
    /// Terms, in file order.
    pub terms: Vec<Term>,
    /// Canonical text of each term.
    pub term_labels: Vec<String>,
    /// Coefficient of each term.
    pub coefficients: Vec<f64>,
    /// Coefficient covariance, row-major `k × k`, if the file has one.
    pub covariance: Option<Vec<f64>>,
    /// The joint-extrapolation check, if the file has one.
    pub joint: Option<Joint>,
    /// Training share of each level, per covariate (empty for non-categorical covariates).
    pub level_shares: Vec<Vec<f64>>,
    /// The training-mean profile: numeric covariates at their means, categorical at their
    /// shares. Effects at means are evaluated here.
    pub mean_profile: Vec<Value>,
    /// The reference profile for contributions: numeric covariates at their means, categorical
    /// at their reference level.
    pub reference_profile: Vec<Value>,
    /// `(term index, covariate index)` of every log term, for the domain check.
    pub log_terms: Vec<(usize, usize)>,
    /// For each covariate, the indices of the terms that involve it.
    pub terms_of_covariate: Vec<Vec<usize>>,
}

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
        /// The term.
        term: String,
        /// The unknown name.
        covariate: String,
    },
    /// A categorical covariate used as a number, or a numeric one with a level.
    #[error("term '{term}': {problem}")]
    TermKind {
        /// The term.
        term: String,
        /// What is wrong.
        problem: String,
    },
    /// A level that is not among the covariate's levels.
    #[error("'{level}' is not a level of '{covariate}' (levels: {levels})")]
    UnknownLevel {
        /// The covariate.
        covariate: String,
        /// The level.
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
        /// The term.
        term: String,
        /// The covariate.
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

fn err(field: impl Into<String>, problem: ModelProblem) -> ModelError {
    ModelError {
        field: field.into(),
        problem,
    }
}

fn finite(field: impl Fn() -> String, x: f64) -> Result<f64, ModelError> {
    if x.is_finite() {
        Ok(x)
    } else {
        Err(err(field(), ModelProblem::NonFinite(x)))
    }
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
        let covariates = validate_covariates(&file)?;
        let (terms, term_labels, coefficients) = validate_terms(&file, &covariates)?;
        let k = terms.len();
        let covariance = match &file.covariance {
            Some(rows) => Some(validate_covariance("covariance", rows, k, true)?),
            None => None,
        };
        let joint = match &file.joint {
            Some(j) => Some(validate_joint(j, &covariates)?),
            None => None,
        };
        if let Some(h) = &file.fitted_probabilities {
            validate_histogram("fitted_probabilities", h)?;
        }
        validate_decision(&file)?;

        let level_shares: Vec<Vec<f64>> = file
            .covariates
            .iter()
            .zip(&covariates)
            .map(|(spec, c)| level_shares(spec, c))
            .collect();
        let mean_profile = covariates
            .iter()
            .map(|c| match c.kind {
                CovariateKind::Categorical => Value::Shares,
                _ => Value::Number(c.training_mean),
            })
            .collect();
        let reference_profile = covariates
            .iter()
            .map(|c| match c.kind {
                CovariateKind::Categorical => Value::Level(c.reference),
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
            reference_profile,
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

    /// The model's name.
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

fn validate_covariates(file: &ModelFile) -> Result<Vec<Covariate>, ModelError> {
    let mut seen = HashSet::new();
    let mut out = Vec::with_capacity(file.covariates.len());
    if file.covariates.is_empty() {
        return Err(err(
            "covariates",
            ModelProblem::Missing("a model needs at least one covariate".into()),
        ));
    }
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
        let t = &spec.training;
        let (levels, reference, min, max, mean) = if spec.kind == CovariateKind::Categorical {
            let levels = spec.levels.clone().unwrap_or_default();
            if levels.len() < 2 {
                return Err(err(
                    at("levels"),
                    ModelProblem::Missing(
                        "a categorical covariate needs at least two levels".into(),
                    ),
                ));
            }
            let mut seen_levels = HashSet::new();
            for (l, level) in levels.iter().enumerate() {
                if level.is_empty() || level.contains(['*', ',']) || level.trim() != level {
                    return Err(err(
                        format!("covariates[{i}].levels[{l}]"),
                        ModelProblem::BadName {
                            name: level.clone(),
                            rule:
                                "a level is non-empty text without '*', ',' or surrounding spaces",
                        },
                    ));
                }
                if !seen_levels.insert(level) {
                    return Err(err(
                        format!("covariates[{i}].levels[{l}]"),
                        ModelProblem::Duplicate(level.clone()),
                    ));
                }
            }
            let reference_name = spec.reference.as_deref().ok_or_else(|| {
                err(
                    at("reference"),
                    ModelProblem::Missing("a categorical covariate needs a reference level".into()),
                )
            })?;
            let reference = levels
                .iter()
                .position(|l| l == reference_name)
                .ok_or_else(|| {
                    err(
                        at("reference"),
                        ModelProblem::UnknownLevel {
                            covariate: spec.name.clone(),
                            level: reference_name.to_string(),
                            levels: levels.join(", "),
                        },
                    )
                })?;
            if let Some(counts) = &t.level_counts {
                for level in counts.keys() {
                    if !levels.contains(level) {
                        return Err(err(
                            at("training.level_counts"),
                            ModelProblem::UnknownLevel {
                                covariate: spec.name.clone(),
                                level: level.clone(),
                                levels: levels.join(", "),
                            },
                        ));
                    }
                }
            }
            (levels, reference, f64::NAN, f64::NAN, f64::NAN)
        } else {
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
            let need = |v: Option<f64>, f: &str| -> Result<f64, ModelError> {
                let x = v.ok_or_else(|| {
                    err(
                        at(&format!("training.{f}")),
                        ModelProblem::Missing(format!(
                            "a {} covariate needs its training {f}",
                            spec.kind.name()
                        )),
                    )
                })?;
                finite(|| at(&format!("training.{f}")), x)
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
                validate_histogram(&at("training.histogram"), h)?;
            }
            (Vec::new(), 0, min, max, mean)
        };
        out.push(Covariate {
            name: spec.name.clone(),
            kind: spec.kind,
            unit: spec.unit.clone(),
            levels,
            reference,
            training_min: min,
            training_max: max,
            training_mean: mean,
        });
    }
    Ok(out)
}

fn level_shares(spec: &file::CovariateSpec, c: &Covariate) -> Vec<f64> {
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
        // Without counts, at-means puts equal weight on every level; `describe` says so.
        vec![1.0 / c.levels.len() as f64; c.levels.len()]
    }
}

fn resolve_factor(
    text: &TermText,
    label: &str,
    covariates: &[Covariate],
) -> Result<Factor, ModelProblem> {
    let find = |name: &str| {
        covariates
            .iter()
            .position(|c| c.name == name)
            .ok_or_else(|| ModelProblem::UnknownCovariate {
                term: label.to_string(),
                covariate: name.to_string(),
            })
    };
    match text {
        TermText::Name(n) => {
            let c = find(n)?;
            if covariates[c].kind == CovariateKind::Categorical {
                return Err(ModelProblem::TermKind {
                    term: label.to_string(),
                    problem: format!(
                        "'{n}' is categorical and cannot be used as a number; name a level, as in {n}={}",
                        covariates[c].levels.get(1).map(String::as_str).unwrap_or("level")
                    ),
                });
            }
            Ok(Factor::Value(c))
        }
        TermText::Level(n, level) => {
            let c = find(n)?;
            let cov = &covariates[c];
            if cov.kind != CovariateKind::Categorical {
                return Err(ModelProblem::TermKind {
                    term: label.to_string(),
                    problem: format!(
                        "'{n}' is {}, not categorical, so it has no levels",
                        cov.kind.name()
                    ),
                });
            }
            let l = cov.levels.iter().position(|x| x == level).ok_or_else(|| {
                ModelProblem::UnknownLevel {
                    covariate: n.clone(),
                    level: level.clone(),
                    levels: cov.levels.join(", "),
                }
            })?;
            Ok(Factor::Level(c, l))
        }
        _ => Err(ModelProblem::TermKind {
            term: label.to_string(),
            problem: "a product's factors are covariates or level indicators".into(),
        }),
    }
}

type ValidatedTerms = (Vec<Term>, Vec<String>, Vec<f64>);

fn validate_terms(
    file: &ModelFile,
    covariates: &[Covariate],
) -> Result<ValidatedTerms, ModelError> {
    if file.terms.is_empty() {
        return Err(err(
            "terms",
            ModelProblem::Missing("a model needs at least one term".into()),
        ));
    }
    let mut terms = Vec::with_capacity(file.terms.len());
    let mut labels: Vec<String> = Vec::with_capacity(file.terms.len());
    let mut coefficients = Vec::with_capacity(file.terms.len());
    for (i, spec) in file.terms.iter().enumerate() {
        let at = |f: &str| format!("terms[{i}].{f}");
        let text = TermText::parse(&spec.term).map_err(|e| err(at("term"), e.into()))?;
        let label = text.to_string();
        let resolved = match &text {
            TermText::Intercept => Term::Intercept,
            TermText::Name(_) | TermText::Level(..) => {
                match resolve_factor(&text, &label, covariates) {
                    Ok(Factor::Value(c)) => Term::Covariate(c),
                    Ok(Factor::Level(c, l)) => Term::Level(c, l),
                    Err(p) => return Err(err(at("term"), p)),
                }
            }
            TermText::Power(n, k) => {
                match resolve_factor(&TermText::Name(n.clone()), &label, covariates) {
                    Ok(Factor::Value(c)) => Term::Power(c, *k),
                    Ok(Factor::Level(..)) => unreachable!("a plain name resolves to a value"),
                    Err(p) => return Err(err(at("term"), p)),
                }
            }
            TermText::Log(n) => {
                let c = match resolve_factor(&TermText::Name(n.clone()), &label, covariates) {
                    Ok(Factor::Value(c)) => c,
                    Ok(Factor::Level(..)) => unreachable!("a plain name resolves to a value"),
                    Err(p) => return Err(err(at("term"), p)),
                };
                let min = covariates[c].training_min;
                if min.is_nan() || min <= 0.0 {
                    return Err(err(
                        at("term"),
                        ModelProblem::LogDomain {
                            term: label.clone(),
                            covariate: n.clone(),
                            min,
                        },
                    ));
                }
                Term::Log(c)
            }
            TermText::Product(factors) => {
                let resolved = factors
                    .iter()
                    .map(|f| resolve_factor(f, &label, covariates))
                    .collect::<Result<Vec<_>, _>>()
                    .map_err(|p| err(at("term"), p))?;
                Term::Product(resolved)
            }
        };
        if labels.contains(&label) {
            return Err(err(at("term"), ModelProblem::Duplicate(label)));
        }
        coefficients.push(finite(|| at("coefficient"), spec.coefficient)?);
        terms.push(resolved);
        labels.push(label);
    }
    Ok((terms, labels, coefficients))
}

/// Check a square matrix: size, finiteness, symmetry and (if asked) positive semi-definiteness.
/// Returns it row-major.
fn validate_covariance(
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

fn validate_joint(j: &file::JointSpec, covariates: &[Covariate]) -> Result<Joint, ModelError> {
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
    let flat = validate_covariance("joint.covariance", &j.covariance, n, false)?;
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

fn validate_histogram(field: &str, h: &file::Histogram) -> Result<(), ModelError> {
    if h.edges.len() != h.counts.len() + 1 || h.counts.is_empty() {
        return Err(err(
            field,
            ModelProblem::Size {
                expected: "at least one bin and one more edge than counts".into(),
                found: format!("{} edges and {} counts", h.edges.len(), h.counts.len()),
            },
        ));
    }
    for (i, &e) in h.edges.iter().enumerate() {
        finite(|| format!("{field}.edges[{i}]"), e)?;
        if i > 0 && e <= h.edges[i - 1] {
            return Err(err(
                format!("{field}.edges[{i}]"),
                ModelProblem::OutOfRange(format!(
                    "edges must increase strictly, got {} then {e}",
                    h.edges[i - 1]
                )),
            ));
        }
    }
    Ok(())
}

fn validate_decision(file: &ModelFile) -> Result<(), ModelError> {
    let Some(d) = &file.decision else {
        return Ok(());
    };
    if let Some(t) = d.threshold {
        if !(t > 0.0 && t < 1.0) {
            return Err(err(
                "decision.threshold",
                ModelProblem::OutOfRange(format!("must lie strictly between 0 and 1, got {t}")),
            ));
        }
    }
    let mut previous = 0.0;
    let mut names = HashSet::new();
    for (i, band) in d.bands.iter().enumerate() {
        if band.name.trim().is_empty() {
            return Err(err(
                format!("decision.bands[{i}].name"),
                ModelProblem::Missing("a band needs a name".into()),
            ));
        }
        if !names.insert(band.name.as_str()) {
            return Err(err(
                format!("decision.bands[{i}].name"),
                ModelProblem::Duplicate(band.name.clone()),
            ));
        }
        if !(band.below > previous && band.below <= 1.0) {
            return Err(err(
                format!("decision.bands[{i}].below"),
                ModelProblem::OutOfRange(format!(
                    "bands must increase within (0, 1]; got {} after {previous}",
                    band.below
                )),
            ));
        }
        previous = band.below;
    }
    if !d.bands.is_empty() && previous != 1.0 {
        return Err(err(
            format!("decision.bands[{}].below", d.bands.len() - 1),
            ModelProblem::OutOfRange("the last band must reach 1".into()),
        ));
    }
    Ok(())
}
