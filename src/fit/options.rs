//! What a fit is asked to do: the request and its flags, checked against each other before
//! any data are read, then applied to the columns as read (kinds, levels, references).
//!
//! This module reads nothing and estimates nothing.

use std::path::PathBuf;

use crate::link::Link;
use crate::model::file::{CovariateKind, DecisionSpec};
use crate::model::TermText;

use super::error::FitError;
use super::reader::{ColumnData, ColumnRequest, ReadRequest};
use super::terms::{self, CovariateShape};
use super::weighting::{self, PopulationRate, WeightColumn};
use super::{kinds, newton};

/// How the coefficient covariance is estimated.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum CovarianceType {
    /// The inverse of the observed information at the estimate.
    #[default]
    Classical,
    /// The HC0 sandwich (heteroskedasticity-consistent, no small-sample correction).
    Robust,
}

impl CovarianceType {
    /// The name written to `covariance_type`.
    pub fn name(self) -> &'static str {
        match self {
            CovarianceType::Classical => "classical",
            CovarianceType::Robust => "robust",
        }
    }
}

/// A categorical covariate named with `--categorical COL[=REF]`.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct CategoricalSpec {
    /// The column's name as the header row spells it.
    pub column: String,
    /// The reference level; by default the first level in sorted (byte) order.
    pub reference: Option<String>,
}

impl std::str::FromStr for CategoricalSpec {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        let (column, reference) = match s.split_once('=') {
            Some((c, r)) => (c.trim(), Some(r.trim().to_string())),
            None => (s.trim(), None),
        };
        if column.is_empty() || reference.as_deref() == Some("") {
            return Err(format!("expected COLUMN or COLUMN=REFERENCE, got '{s}'"));
        }
        Ok(CategoricalSpec {
            column: column.to_string(),
            reference,
        })
    }
}

/// Everything a fit needs.
#[derive(Debug, Clone)]
pub struct FitRequest {
    /// The CSV file, with a header line.
    pub data: PathBuf,
    /// The outcome column's name as the header row spells it (its cells are 0/1 or false/true).
    pub outcome: String,
    /// What outcome = 1 means, for the model file.
    pub outcome_meaning: Option<String>,
    /// The `--terms` list.
    pub terms: String,
    /// Categorical covariates and their reference levels.
    pub categorical: Vec<CategoricalSpec>,
    /// Columns to treat as counts whatever the inference says.
    pub count: Vec<String>,
    /// Columns to treat as continuous whatever the inference says.
    pub continuous: Vec<String>,
    /// Units of covariates, `(column, unit)`.
    pub units: Vec<(String, String)>,
    /// The link the model is fitted with (`--link`; by default logit, or the `--like` file's).
    pub link: Link,
    /// The covariance estimator.
    pub covariance: CovarianceType,
    /// Include the intercept.
    pub intercept: bool,
    /// Drop rows with missing values instead of failing.
    pub drop_missing: bool,
    /// The Newton iteration cap.
    pub max_iterations: u32,
    /// Model name.
    pub name: String,
    /// Version label.
    pub version: String,
    /// Model description.
    pub description: String,
    /// An optional decision threshold and bands.
    pub decision: Option<DecisionSpec>,
    /// Seconds since the Unix epoch to record as the fit time (default: now).
    pub fitted_at_unix: Option<u64>,
    /// Threads for reading and for every pass over the data (at least 1); `None` for one per
    /// core. The fit is the same, bit for bit, whatever the number.
    pub threads: Option<usize>,
    /// A column of frequency or sampling weights.
    pub weights: Option<WeightColumn>,
    /// The outcome's share in the population, for a sample drawn by outcome.
    pub population: Option<PopulationRate>,
    /// Covariates the model file announces (see [`crate::model::ModelFile::announces`]).
    pub announces: Vec<String>,
}

impl FitRequest {
    /// A request with the defaults of `ogive fit` (logit, classical covariance, intercept).
    pub fn new(data: impl Into<PathBuf>, outcome: &str, terms: &str) -> FitRequest {
        FitRequest {
            data: data.into(),
            outcome: outcome.to_string(),
            outcome_meaning: None,
            terms: terms.to_string(),
            categorical: Vec::new(),
            count: Vec::new(),
            continuous: Vec::new(),
            units: Vec::new(),
            link: Link::Logit,
            covariance: CovarianceType::Classical,
            intercept: true,
            drop_missing: false,
            max_iterations: newton::NewtonOptions::default().max_iterations,
            name: "model".to_string(),
            version: "1".to_string(),
            description: String::new(),
            decision: None,
            fitted_at_unix: None,
            threads: None,
            weights: None,
            population: None,
            announces: Vec::new(),
        }
    }
}

/// A request whose flags agree with each other and with its terms.
#[derive(Debug, Clone)]
pub(crate) struct Checked {
    /// The `--terms` list, parsed.
    pub terms: Vec<TermText>,
    /// The covariates the terms use, in order of first use.
    pub names: Vec<String>,
    /// What the fit does with weights.
    pub weighting: weighting::Plan,
}

/// Check a request before reading what may be a large file: the name and version, the term
/// list, every flag that names a column, and the weighting flags.
pub(crate) fn check(request: &FitRequest) -> Result<Checked, FitError> {
    if !crate::model::is_model_name(&request.name) {
        return Err(FitError::BadOption(format!(
            "--name '{}': a model name is lower-case letters, digits and '-', starting with a letter, at most 64",
            request.name
        )));
    }
    if !crate::model::is_version_label(&request.version) {
        return Err(FitError::BadOption(format!(
            "--version '{}': a version is letters, digits, '.', '_' and '-', starting with a letter or digit, at most 64",
            request.version
        )));
    }
    let parsed = terms::parse_term_list(&request.terms)?;
    let names = terms::covariate_names(&parsed);
    if names.is_empty() {
        return Err(FitError::BadOption(
            "--terms names no covariate: a model needs at least one".into(),
        ));
    }
    check_flag_columns(request, &names)?;
    let weighting = weighting::Plan::decide(
        request.weights.as_ref(),
        request.population,
        request.link,
        request.intercept,
    )?;
    if let Some(column) = weighting.column() {
        if names.iter().any(|n| n == column) || *column == request.outcome {
            return Err(FitError::BadOption(format!(
                "the weight column '{column}' cannot also be the outcome or a covariate"
            )));
        }
    }
    Ok(Checked {
        terms: parsed,
        names,
        weighting,
    })
}

/// What the reader must read for a checked request.
pub(crate) fn read_request(request: &FitRequest, checked: &Checked) -> ReadRequest {
    ReadRequest {
        path: request.data.clone(),
        outcome: request.outcome.clone(),
        columns: checked
            .names
            .iter()
            .map(|n| ColumnRequest {
                name: n.clone(),
                categorical: request.categorical.iter().any(|c| &c.column == n),
                log_term: terms::log_term_of(&checked.terms, n),
            })
            .collect(),
        drop_missing: request.drop_missing,
        threads: request.threads,
        weight: checked.weighting.column().map(str::to_string),
    }
}

fn check_flag_columns(request: &FitRequest, names: &[String]) -> Result<(), FitError> {
    let known = |flag: &str, column: &str| {
        if names.iter().any(|n| n == column) {
            Ok(())
        } else {
            Err(FitError::BadOption(format!(
                "{flag} {column}: no term uses '{column}' (covariates in --terms: {})",
                names.join(", ")
            )))
        }
    };
    for c in &request.categorical {
        known("--categorical", &c.column)?;
    }
    for c in &request.count {
        known("--count", c)?;
        if request.continuous.contains(c) {
            return Err(FitError::BadOption(format!(
                "'{c}' is named by both --count and --continuous"
            )));
        }
    }
    for c in &request.continuous {
        known("--continuous", c)?;
    }
    for (c, _) in &request.units {
        known("--unit", c)?;
    }
    for c in request.count.iter().chain(&request.continuous) {
        if request.categorical.iter().any(|s| &s.column == c) {
            return Err(FitError::BadOption(format!(
                "'{c}' is named by --categorical and by --count or --continuous"
            )));
        }
    }
    if names.contains(&request.outcome) {
        return Err(FitError::BadOption(format!(
            "the outcome '{}' cannot also be a covariate",
            request.outcome
        )));
    }
    Ok(())
}

/// A level must survive being written as `name=level` and read back, alone and in a product.
fn check_level_nameable(column: &str, level: &str) -> Result<(), FitError> {
    let written = format!("{column}={level}");
    let round_trip = TermText::parse(&written);
    let fine = level.trim() == level
        && !level.contains(['*', ','])
        && round_trip == Ok(TermText::Level(column.to_string(), level.to_string()));
    if fine {
        Ok(())
    } else {
        Err(FitError::LevelNotNameable {
            column: column.to_string(),
            level: level.to_string(),
        })
    }
}

/// Covariate shapes from the table: kinds, levels, references.
pub(crate) fn shapes(
    request: &FitRequest,
    names: &[String],
    columns: &[ColumnData],
) -> Result<Vec<CovariateShape>, FitError> {
    // Each numeric column's kind reads every value: one column per worker thread.
    let numeric_kinds = super::design::each_parallel(columns.len(), |c| match &columns[c] {
        ColumnData::Numeric(values) => Some(if request.count.contains(&names[c]) {
            kinds::overridden_kind(&names[c], values, CovariateKind::Count)
        } else if request.continuous.contains(&names[c]) {
            Ok(CovariateKind::Continuous)
        } else {
            Ok(kinds::infer_kind(values))
        }),
        ColumnData::Categorical { .. } => None,
    });
    let mut out = Vec::with_capacity(names.len());
    for ((name, column), numeric_kind) in names.iter().zip(columns).zip(numeric_kinds) {
        let shape = match column {
            ColumnData::Numeric(_) => {
                let kind = numeric_kind.unwrap_or(Ok(CovariateKind::Continuous))?;
                CovariateShape {
                    name: name.clone(),
                    kind,
                    levels: Vec::new(),
                    reference: 0,
                }
            }
            ColumnData::Categorical { levels, .. } => {
                for level in levels {
                    check_level_nameable(name, level)?;
                }
                let asked = request
                    .categorical
                    .iter()
                    .find(|c| &c.column == name)
                    .and_then(|c| c.reference.clone());
                let reference = match asked {
                    Some(r) => levels.iter().position(|l| *l == r).ok_or_else(|| {
                        FitError::LevelNotObserved {
                            covariate: name.clone(),
                            level: r.clone(),
                            levels: levels.join(", "),
                        }
                    })?,
                    None => 0,
                };
                if levels.len() < 2 {
                    return Err(FitError::SingleLevel {
                        covariate: name.clone(),
                        level: levels.first().cloned().unwrap_or_default(),
                    });
                }
                CovariateShape {
                    name: name.clone(),
                    kind: CovariateKind::Categorical,
                    levels: levels.clone(),
                    reference,
                }
            }
        };
        out.push(shape);
    }
    Ok(out)
}
