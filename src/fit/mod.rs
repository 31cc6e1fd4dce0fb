//! Fitting: maximum-likelihood estimation of a binary-outcome model from a CSV file, and the
//! complete model file it writes (training summaries, joint block, fitted-probability
//! histogram, coefficient covariance, check cases, provenance).
//!
//! The steps, one file each:
//!
//! ```text
//! terms        parse --terms, expand categorical covariates into level indicators
//! reader       CSV → outcome and covariate columns (parallel, bounded, row-numbered errors)
//! kinds        binary / count / continuous for numeric columns
//! design       the design matrix (row-major f64) and the blocked parallel reduction
//! rank         collinear terms, named with their combination
//! separation   complete and quasi-complete separation, named with term and direction
//! likelihood   ℓ, score, observed and expected information for every link
//! newton       Newton–Raphson with step-halving and a Fisher-scoring fallback
//! weighting    frequency and sampling weights, population rates, the intercept correction
//! summaries    ranges, moments, histograms, level counts, joint block
//! check_cases  observations spread over the index, scored by the engine
//! report       the printed summary
//! write        crash-safe writing of the model file
//! ```
//!
//! Covariance: `classical` is the inverse of the observed information (the negative Hessian)
//! at the estimate; `robust` is the HC0 sandwich:
//!
//! ```text
//! V_classical = H⁻¹          V_HC0 = H⁻¹ (Σ sᵢ² xᵢ xᵢᵀ) H⁻¹,   sᵢ = ∂ℓᵢ/∂zᵢ
//! ```
//!
//! Memory: the design matrix and the covariate columns, one `f64` (or one `u32` level code) per
//! cell, plus two `f64` per observation for the fitted index and probability. No per-row text is
//! kept. This module depends on nothing of the service; progress is reported through the
//! [`Progress`] trait so the command line can draw a bar.

pub(crate) mod check_cases;
pub(crate) mod design;
pub(crate) mod error;
pub(crate) mod kinds;
pub(crate) mod likelihood;
pub(crate) mod newton;
pub(crate) mod rank;
pub mod reader;
pub(crate) mod report;
pub(crate) mod separation;
pub(crate) mod summaries;
pub(crate) mod terms;
pub(crate) mod weighting;
pub(crate) mod write;

use std::path::PathBuf;

use crate::link::Link;
use crate::model::file::{
    CovariateKind, CovariateSpec, DecisionSpec, ModelFile, Outcome, Provenance, TermSpec,
};
use crate::model::{TermText, FORMAT_NAME, FORMAT_VERSION};

pub use error::FitError;
pub use report::{Counting, FitReport};
pub use weighting::{PopulationMethod, PopulationRate, WeightColumn, WeightKind};
pub use write::write_model_file;

use design::{reduce_rows, Design};
use likelihood::{accumulate, Matrix};
use reader::{ColumnData, ColumnRequest, ReadRequest};
use terms::CovariateShape;

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
    /// The column.
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
    /// The outcome column.
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
    /// The link.
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
    /// Covariates the model file announces (see [`ModelFile::announces`]).
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

/// Progress of a fit, for a progress bar. Every method does nothing by default.
pub trait Progress: Sync {
    /// Reading starts; the file has this many bytes.
    fn start_reading(&self, _total_bytes: u64) {}
    /// Bytes handed to the parser so far.
    fn bytes_read(&self, _bytes: u64) {}
    /// Rows parsed so far.
    fn rows_read(&self, _rows: u64) {}
    /// Estimation starts.
    fn start_fitting(&self) {}
    /// One Newton step done.
    fn iteration(&self, _iteration: u32, _log_likelihood: f64) {}
}

/// Reports nothing.
#[derive(Debug, Clone, Copy, Default)]
pub struct Silent;

impl Progress for Silent {}

struct Iterations<'a>(&'a dyn Progress);

impl newton::IterationObserver for Iterations<'_> {
    fn iteration(&self, iteration: u32, log_likelihood: f64) {
        self.0.iteration(iteration, log_likelihood);
    }
}

/// A finished fit: the validated model file and the summary to print.
#[derive(Debug, Clone)]
pub struct Fitted {
    /// The model file, already validated by [`crate::model::Model::from_file`].
    pub file: ModelFile,
    /// The summary.
    pub report: FitReport,
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
fn shapes(
    request: &FitRequest,
    names: &[String],
    columns: &[ColumnData],
) -> Result<Vec<CovariateShape>, FitError> {
    let mut out = Vec::with_capacity(names.len());
    for (name, column) in names.iter().zip(columns) {
        let shape = match column {
            ColumnData::Numeric(values) => {
                let kind = if request.count.contains(name) {
                    kinds::overridden_kind(name, values, CovariateKind::Count)?
                } else if request.continuous.contains(name) {
                    CovariateKind::Continuous
                } else {
                    kinds::infer_kind(values)
                };
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

/// The linear index of every row.
fn indices(design: &Design, beta: &[f64]) -> Vec<f64> {
    reduce_rows(
        design.rows(),
        Vec::new,
        |acc: &mut Vec<f64>, range| {
            acc.extend(range.map(|i| likelihood::index(design.row(i), beta)));
        },
        |total, part| total.extend(part),
    )
}

fn square(flat: &[f64], k: usize) -> Vec<Vec<f64>> {
    flat.chunks(k).map(<[f64]>::to_vec).collect()
}

/// `A⁻¹ M A⁻¹` for row-major `k × k` matrices.
fn sandwich(bread: &[f64], meat: &[f64], k: usize) -> Vec<f64> {
    let product = |a: &[f64], b: &[f64]| {
        let mut out = vec![0.0; k * k];
        for r in 0..k {
            for m in 0..k {
                let x = a[r * k + m];
                for c in 0..k {
                    out[r * k + c] += x * b[m * k + c];
                }
            }
        }
        out
    };
    let mut v = product(&product(bread, meat), bread);
    for r in 0..k {
        for c in 0..r {
            let mean = 0.5 * (v[r * k + c] + v[c * k + r]);
            v[r * k + c] = mean;
            v[c * k + r] = mean;
        }
    }
    v
}

/// Fit the model a request describes.
pub fn fit(request: &FitRequest, progress: &dyn Progress) -> Result<Fitted, FitError> {
    match request.threads {
        Some(threads) => design::with_threads(threads, || fit_here(request, progress)),
        None => fit_here(request, progress),
    }
}

/// [`fit`], with passes over the data on this thread's thread setting.
fn fit_here(request: &FitRequest, progress: &dyn Progress) -> Result<Fitted, FitError> {
    // Refuse a bad name or version before reading what may be a large file.
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
    let weighting_plan = weighting::Plan::decide(
        request.weights.as_ref(),
        request.population,
        request.link,
        request.intercept,
    )?;
    if let Some(column) = weighting_plan.column() {
        if names.iter().any(|n| n == column) || *column == request.outcome {
            return Err(FitError::BadOption(format!(
                "the weight column '{column}' cannot also be the outcome or a covariate"
            )));
        }
    }

    let read = ReadRequest {
        path: request.data.clone(),
        outcome: request.outcome.clone(),
        columns: names
            .iter()
            .map(|n| ColumnRequest {
                name: n.clone(),
                categorical: request.categorical.iter().any(|c| &c.column == n),
                log_term: terms::log_term_of(&parsed, n),
            })
            .collect(),
        drop_missing: request.drop_missing,
        threads: request.threads,
        weight: weighting_plan.column().map(str::to_string),
    };
    let table = reader::read_table(&read, progress)?;
    let n = table.rows();
    if n == 0 {
        return Err(FitError::NoRows(if table.dropped > 0 {
            format!(
                " (all {} rows had a missing value and were dropped)",
                table.dropped
            )
        } else {
            String::new()
        }));
    }
    let weights: Option<Vec<f64>> = match &weighting_plan {
        weighting::Plan::PopulationWeights(rate) => {
            Some(weighting::population_weights(&table.outcome, *rate))
        }
        _ => table.weights.clone(),
    };
    if let (Some(w), Some(column)) = (&weights, weighting_plan.column()) {
        if w.iter().all(|&v| v == 0.0) {
            return Err(FitError::WeightsAllZero {
                column: column.to_string(),
                rows: n as u64,
            });
        }
    }
    let weights = weights.as_deref();
    // A row of weight 0 is no observation: it counts for neither outcome.
    let counts = |i: usize| weights.is_none_or(|w| w[i] > 0.0);
    let counted = (0..n).filter(|&i| counts(i)).count();
    let ones = (0..n)
        .filter(|&i| counts(i) && table.outcome[i] > 0.5)
        .count();
    if ones == 0 || ones == counted {
        return Err(FitError::OutcomeConstant {
            column: request.outcome.clone(),
            value: u8::from(ones == counted),
            rows: counted as u64,
        });
    }

    let shapes = shapes(request, &names, &table.columns)?;
    let design_terms = terms::expand(&parsed, &shapes, request.intercept)?;
    let labels: Vec<String> = design_terms.iter().map(|t| t.label()).collect();
    let resolved: Vec<_> = design_terms.iter().map(|t| t.term.clone()).collect();
    let k = labels.len();
    let design = Design::build(&table.columns, n, &resolved);
    let gram = design::gram(&design, weights);
    rank::check_rank(&gram, &labels, counted)?;
    let collinearity = rank::collinearity_note(rank::condition_number(&gram, k));
    drop(gram);
    separation::check_single_terms(&design, &table.outcome, weights, &labels)?;

    progress.start_fitting();
    let share = weighting::sample_rate(&table.outcome, weights);
    let start: Vec<f64> = labels
        .iter()
        .map(|l| {
            if l == "intercept" {
                likelihood::quantile(request.link, share)
            } else {
                0.0
            }
        })
        .collect();
    let options = newton::NewtonOptions {
        max_iterations: request.max_iterations,
    };
    let estimate = newton::maximise(
        &design,
        &table.outcome,
        weights,
        request.link,
        &start,
        options,
        &Iterations(progress),
    )
    .map_err(|stopped| {
        separation::diagnose(
            &design,
            &table.outcome,
            weights,
            request.link,
            &stopped.coefficients,
            &labels,
        )
        .unwrap_or(if stopped.singular {
            FitError::SingularInformation(stopped.reason.clone())
        } else {
            FitError::NotConverged(stopped.reason.clone())
        })
    })?;
    let mut beta = estimate.coefficients.clone();
    let bread = newton::inverse(&estimate.information, k).ok_or_else(|| {
        FitError::SingularInformation(format!(
            "after {} Newton–Raphson steps the observed information could not be inverted",
            estimate.iterations
        ))
    })?;
    // Sampling weights always take the sandwich: the inverse information would treat each
    // row as v observations, which a sampled row is not.
    let covariance_type = if weighting_plan.sampling() {
        CovarianceType::Robust
    } else {
        request.covariance
    };
    let covariance = match covariance_type {
        CovarianceType::Classical => bread,
        CovarianceType::Robust => {
            let meat_kind = if weighting_plan.sampling() {
                Matrix::WeightedScoreOuter
            } else {
                Matrix::ScoreOuter
            };
            let meat = accumulate(
                &design,
                &table.outcome,
                weights,
                request.link,
                &beta,
                meat_kind,
            );
            sandwich(&bread, &meat.matrix, k)
        }
    };
    let null_log_likelihood = likelihood::null_log_likelihood(&table.outcome, weights);
    let weighting_record = weighting::record(&weighting_plan, &table.outcome, weights);
    if let Some(shift) = weighting_record.as_ref().and_then(|w| w.intercept_shift) {
        // The served model gives probabilities at the population's rate.
        if let Some(j) = labels.iter().position(|l| l == "intercept") {
            beta[j] -= shift;
        }
    }
    let beta = &beta;

    // Fitted index and probabilities, then the design is no longer needed.
    let index = indices(&design, beta);
    drop(design);
    let probabilities: Vec<f64> = index.iter().map(|&z| request.link.probability(z)).collect();

    let kinds: Vec<CovariateKind> = shapes.iter().map(|s| s.kind).collect();
    let mut remarks: Vec<String> = collinearity.into_iter().collect();
    if let Some(w) = &weighting_record {
        remarks.push(w.summary());
    }
    let mut covariates = Vec::with_capacity(names.len());
    let mut joint_names = Vec::new();
    let mut joint_columns: Vec<&[f64]> = Vec::new();
    let mut joint_means = Vec::new();
    for (shape, column) in shapes.iter().zip(&table.columns) {
        let training = match column {
            ColumnData::Numeric(values) => summaries::numeric_summary(values),
            ColumnData::Categorical { codes, levels } => summaries::level_summary(codes, levels),
        };
        if let (ColumnData::Numeric(values), true) = (column, summaries::in_joint(shape.kind)) {
            joint_names.push(shape.name.clone());
            joint_columns.push(values);
            joint_means.push(training.mean.unwrap_or(0.0));
        }
        let categorical = shape.kind == CovariateKind::Categorical;
        covariates.push(CovariateSpec {
            name: shape.name.clone(),
            kind: shape.kind,
            unit: request
                .units
                .iter()
                .find(|(c, _)| *c == shape.name)
                .map(|(_, u)| u.clone()),
            description: None,
            levels: categorical.then(|| shape.levels.clone()),
            reference: categorical.then(|| shape.levels[shape.reference].clone()),
            training,
        });
    }
    let joint = if joint_columns.is_empty() {
        None
    } else {
        let joint = summaries::joint(&joint_names, &joint_columns, &joint_means);
        if joint.is_none() {
            remarks.push(
                "the continuous covariates' training covariance is singular, so the file has no joint extrapolation check".to_string(),
            );
        }
        joint
    };

    let std_errors: Vec<f64> = (0..k)
        .map(|j| covariance[j * k + j].max(0.0).sqrt())
        .collect();
    let report = FitReport {
        link: request.link,
        covariance_type: covariance_type.name().to_string(),
        observations: n as u64,
        counting: match &weighting_plan {
            _ if weighting_plan.sampling() => report::Counting::Sampling,
            weighting::Plan::Column(_) => report::Counting::Frequency {
                observations: weights.map_or(n as f64, |w| w.iter().sum()),
            },
            _ => report::Counting::Rows,
        },
        dropped: table.dropped,
        iterations: estimate.iterations,
        fisher_steps: estimate.fisher_steps,
        halvings: estimate.halvings,
        log_likelihood: estimate.log_likelihood,
        null_log_likelihood,
        terms: labels.clone(),
        coefficients: beta.clone(),
        std_errors,
        remarks,
    };
    let references: Vec<String> = shapes
        .iter()
        .filter(|s| s.kind == CovariateKind::Categorical)
        .map(|s| format!("{} = {}", s.name, s.levels[s.reference]))
        .collect();
    let weighting_note = match &weighting_record {
        None => String::new(),
        Some(w) => format!("; {}", w.summary()),
    };
    let notes = format!(
        "{} link; {} covariance ({}); {}; {} rows in the file, {} dropped for missing values{}{weighting_note}",
        request.link,
        covariance_type.name(),
        match covariance_type {
            CovarianceType::Classical => "inverse of the observed information",
            CovarianceType::Robust => "HC0 sandwich",
        },
        report.figures(),
        table.rows_in_file,
        table.dropped,
        if references.is_empty() {
            String::new()
        } else {
            format!("; reference levels: {}", references.join(", "))
        }
    );
    let file = ModelFile {
        format: FORMAT_NAME.to_string(),
        format_version: FORMAT_VERSION,
        name: request.name.clone(),
        version: request.version.clone(),
        description: request.description.clone(),
        outcome: Outcome {
            name: request.outcome.clone(),
            meaning: request
                .outcome_meaning
                .clone()
                .unwrap_or_else(|| format!("{} = 1", request.outcome)),
        },
        link: request.link,
        covariates,
        terms: labels
            .iter()
            .zip(beta)
            .map(|(term, &coefficient)| TermSpec {
                term: term.clone(),
                coefficient,
            })
            .collect(),
        covariance: Some(square(&covariance, k)),
        covariance_type: Some(covariance_type.name().to_string()),
        joint,
        fitted_probabilities: Some(summaries::probability_histogram(&probabilities)),
        check_cases: Vec::new(),
        decision: request.decision.clone(),
        announces: request.announces.clone(),
        provenance: Provenance {
            fitted_by: format!("ogive {}", env!("CARGO_PKG_VERSION")),
            fitted_at: match request.fitted_at_unix {
                Some(s) => crate::timestamp::rfc3339_seconds(s),
                None => crate::timestamp::now_rfc3339_seconds(),
            },
            observations: n as u64,
            log_likelihood: Some(estimate.log_likelihood),
            null_log_likelihood: Some(null_log_likelihood),
            iterations: Some(estimate.iterations),
            data: Some(request.data.display().to_string()),
            notes: Some(notes),
            weighting: weighting_record.clone(),
        },
    };
    let observations = check_cases::spread_rows(&index, check_cases::CHECK_CASES)
        .into_iter()
        .map(|i| check_cases::observation(&names, &kinds, &table.columns, i))
        .collect();
    let file = check_cases::attach(file, observations)?;
    Ok(Fitted { file, report })
}
