//! The reviewer's report on a model (`ogive describe`): identity and provenance, the link, the
//! coefficient table, training ranges, effects at the training means, and over a data file the
//! average marginal effects and the warnings its rows would raise; then the notes that say how
//! each number was computed, and the cautions of the README (its Cautions paragraph).
//!
//! ```text
//! mod.rs           the Report value and how it is built from a model (and a data pass)
//! coefficients.rs  estimate, standard error, z, p-value, interval per term
//! data.rs          one streaming pass over a CSV: averages and warning counts
//! text.rs          the plain-text rendering
//! svg.rs           one SVG plot per continuous covariate: probability and effect curves
//! frame.rs         what every SVG picture shares (describe's and evaluate's): the document's
//!                  opening, headings, legend entries, writing a folder of pictures
//! axis.rs          axis ranges, tick positions and number formatting for the plots and tables
//! cautions.rs      the cautions, worded once
//! ```
//!
//! A [`Report`] is plain data: [`render_text`] and [`render_json`] only present it, so the two
//! formats always carry the same numbers. Nothing here computes statistics of its own beyond
//! the coefficient table: effects come from the engine.

pub(crate) mod axis;
pub(crate) mod cautions;
pub(crate) mod coefficients;
pub(crate) mod data;
pub(crate) mod frame;
pub mod svg;
pub mod text;

use serde::Serialize;

pub use cautions::CAUTIONS;
pub use coefficients::{coefficient_table, CoefficientRow};
pub use data::{summarise_csv, DataSummary};
pub use text::render_text;

use crate::engine::{Average, Effect, EffectSlot, Options, Scorer};
use crate::model::{CovariateKind, Model};

/// Everything a reviewer reads about one model.
#[derive(Debug, Clone, Serialize)]
pub struct Report {
    /// Identity and provenance.
    pub model: Identity,
    /// The interval level used throughout.
    pub level: f64,
    /// The coefficient table.
    pub coefficients: Vec<CoefficientRow>,
    /// The covariates and what the training data looked like.
    pub covariates: Vec<CovariateRow>,
    /// The probability and effects at the training means.
    pub at_means: AtMeans,
    /// Averages and warnings over a data file, when one was given.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub data: Option<DataReport>,
    /// Plot files written, if any.
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub plots: Vec<String>,
    /// How the numbers were computed.
    pub notes: Vec<String>,
    /// The cautions of the README's Cautions paragraph.
    pub cautions: Vec<String>,
}

/// Who the model is and where it came from.
#[derive(Debug, Clone, Serialize)]
pub struct Identity {
    /// The model's name, as its file gives it (`name`), the same in every version.
    pub name: String,
    /// The version label the file gives (`version`), as the model directory stores it.
    pub version: String,
    /// What the model is for.
    pub description: String,
    /// The name of the outcome: the 0/1 column the model was fitted on.
    pub outcome: String,
    /// What an outcome of 1 means.
    pub outcome_meaning: String,
    /// The link function's name: `logit`, `probit`, `cloglog` or `cauchit`.
    pub link: String,
    /// The fitting software.
    pub fitted_by: String,
    /// When it was fitted.
    pub fitted_at: String,
    /// How many observations the model was fitted on, as its provenance records it.
    pub observations: u64,
    /// The training data's name.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub training_data: Option<String>,
    /// Free-form notes from the model file.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub notes: Option<String>,
    /// How the fit weighted its observations or corrected its intercept, if it did.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub weighting: Option<crate::model::file::Weighting>,
    /// The log-likelihood at the estimate.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub log_likelihood: Option<f64>,
    /// The intercept-only log-likelihood.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub null_log_likelihood: Option<f64>,
    /// McFadden's pseudo R², 1 − ℓ / ℓ₀, when both log-likelihoods are known.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub pseudo_r_squared: Option<f64>,
    /// Newton iterations to convergence.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub iterations: Option<u32>,
    /// How the covariance was estimated, or `none`.
    pub covariance: String,
    /// Check cases reproduced on load.
    pub check_cases: usize,
    /// The decision threshold, if the model has one.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub decision_threshold: Option<f64>,
}

/// One covariate and its training summary.
#[derive(Debug, Clone, Serialize)]
pub struct CovariateRow {
    /// The covariate's name: the column or JSON key an observation gives it by.
    pub name: String,
    /// continuous, count, binary or categorical.
    pub kind: String,
    /// The unit its values are in, as the model file states it; `None` when it states none.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub unit: Option<String>,
    /// What the covariate measures, in the model file's words; `None` when it gives none.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub description: Option<String>,
    /// Training minimum (numeric kinds).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub min: Option<f64>,
    /// Training maximum (numeric kinds).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub max: Option<f64>,
    /// Training mean (numeric kinds; for a binary covariate the share of ones).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub mean: Option<f64>,
    /// Training standard deviation, if the file has it.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub std_dev: Option<f64>,
    /// Levels of a categorical covariate with their training shares.
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub levels: Vec<LevelShare>,
    /// The reference level of a categorical covariate.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub reference: Option<String>,
}

/// One level of a categorical covariate and its share of the training data.
#[derive(Debug, Clone, Serialize)]
pub struct LevelShare {
    /// The level's name, as an observation sends it.
    pub level: String,
    /// The share of training observations at this level, from 0 to 1.
    pub share: f64,
}

/// A probability with its interval.
#[derive(Debug, Clone, Copy, Serialize)]
pub struct ProbabilityRow {
    /// The probability of the outcome, from 0 to 1.
    pub probability: f64,
    /// Its delta-method standard error.
    pub std_error: Option<f64>,
    /// Lower end of its interval.
    pub lower: Option<f64>,
    /// Upper end of its interval.
    pub upper: Option<f64>,
}

/// One effect (at means, or averaged) with its uncertainty.
#[derive(Debug, Clone, Serialize)]
pub struct EffectRow {
    /// The name of the covariate whose effect this is.
    pub covariate: String,
    /// The level compared with the reference, for a categorical covariate.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub level: Option<String>,
    /// derivative, discrete_change or level_change.
    pub kind: String,
    /// The effect on the probability.
    pub effect: f64,
    /// Its delta-method standard error.
    pub std_error: Option<f64>,
    /// Lower end of its interval.
    pub lower: Option<f64>,
    /// Upper end of its interval.
    pub upper: Option<f64>,
}

/// The probability and the effects at the training means.
#[derive(Debug, Clone, Serialize)]
pub struct AtMeans {
    /// The probability at the mean observation.
    pub probability: ProbabilityRow,
    /// Every covariate's effect on the probability at the mean observation.
    pub effects: Vec<EffectRow>,
}

/// What a data file showed.
#[derive(Debug, Clone, Serialize)]
pub struct DataReport {
    /// Where the rows came from.
    pub source: String,
    /// Rows of the data file, every one scored (a row with a bad value stops the pass, naming
    /// the row).
    pub rows: u64,
    /// The mean of the rows' probabilities, with its delta-method interval.
    pub average_probability: ProbabilityRow,
    /// The average marginal effects.
    pub average_effects: Vec<EffectRow>,
    /// The warnings the rows raised.
    pub warnings: WarningCounts,
}

/// Warning counts over a data file.
#[derive(Debug, Clone, Serialize)]
pub struct WarningCounts {
    /// Rows with at least one warning.
    pub rows_with_warnings: u64,
    /// Per covariate with any row outside its training range.
    pub out_of_range: Vec<OutOfRangeCount>,
    /// Rows whose continuous covariates together lay beyond every training observation.
    pub unusual_combination: u64,
}

/// Rows outside one covariate's training range.
#[derive(Debug, Clone, Serialize)]
pub struct OutOfRangeCount {
    /// The name of the covariate whose training range the rows left.
    pub covariate: String,
    /// Rows below the training minimum.
    pub below: u64,
    /// Rows above the training maximum.
    pub above: u64,
    /// The training minimum.
    pub min: f64,
    /// The training maximum.
    pub max: f64,
}

fn slot_names(model: &Model, slot: &EffectSlot) -> (String, Option<String>) {
    let c = &model.covariates[slot.covariate];
    (c.name.clone(), slot.level.map(|l| c.levels[l].clone()))
}

fn effect_row(model: &Model, effect: &Effect) -> EffectRow {
    let (covariate, level) = slot_names(model, &effect.slot);
    EffectRow {
        covariate,
        level,
        kind: effect.slot.kind.name().to_string(),
        effect: effect.effect,
        std_error: effect.std_error,
        lower: effect.interval.map(|i| i.lower),
        upper: effect.interval.map(|i| i.upper),
    }
}

fn average_row(model: &Model, average: &Average) -> Option<EffectRow> {
    let slot = average.slot?;
    let (covariate, level) = slot_names(model, &slot);
    Some(EffectRow {
        covariate,
        level,
        kind: slot.kind.name().to_string(),
        effect: average.value,
        std_error: average.std_error,
        lower: average.interval.map(|i| i.lower),
        upper: average.interval.map(|i| i.upper),
    })
}

fn identity(model: &Model) -> Identity {
    let f = &model.file;
    let p = &f.provenance;
    Identity {
        name: f.name.clone(),
        version: f.version.clone(),
        description: f.description.clone(),
        outcome: f.outcome.name.clone(),
        outcome_meaning: f.outcome.meaning.clone(),
        link: f.link.name().to_string(),
        fitted_by: p.fitted_by.clone(),
        fitted_at: p.fitted_at.clone(),
        observations: p.observations,
        training_data: p.data.clone(),
        notes: p.notes.clone(),
        weighting: p.weighting.clone(),
        log_likelihood: p.log_likelihood,
        null_log_likelihood: p.null_log_likelihood,
        pseudo_r_squared: match (p.log_likelihood, p.null_log_likelihood) {
            (Some(l), Some(l0)) if l0 != 0.0 => Some(1.0 - l / l0),
            _ => None,
        },
        iterations: p.iterations,
        covariance: match (&model.covariance, &f.covariance_type) {
            (None, _) => "none".to_string(),
            (Some(_), Some(t)) => t.clone(),
            (Some(_), None) => "given (estimator not stated)".to_string(),
        },
        check_cases: f.check_cases.len(),
        decision_threshold: f.decision.as_ref().and_then(|d| d.threshold),
    }
}

fn covariate_rows(model: &Model) -> Vec<CovariateRow> {
    model
        .covariates
        .iter()
        .zip(&model.file.covariates)
        .zip(&model.level_shares)
        .map(|((c, spec), shares)| {
            let numeric = c.kind != CovariateKind::Categorical;
            CovariateRow {
                name: c.name.clone(),
                kind: c.kind.name().to_string(),
                unit: c.unit.clone(),
                description: spec.description.clone(),
                min: numeric.then_some(c.training_min),
                max: numeric.then_some(c.training_max),
                mean: numeric.then_some(c.training_mean),
                std_dev: spec.training.std_dev,
                levels: c
                    .levels
                    .iter()
                    .zip(shares)
                    .map(|(level, &share)| LevelShare {
                        level: level.clone(),
                        share,
                    })
                    .collect(),
                reference: (!numeric).then(|| c.levels[c.reference].clone()),
            }
        })
        .collect()
}

fn notes(model: &Model, data: Option<&DataSummary>) -> Vec<String> {
    let mut notes = vec![
        "p-values are two-sided, from the standard normal distribution of z = estimate / \
         standard error."
            .to_string(),
        "Effects at means are evaluated at the mean observation: numeric covariates at their \
         training means with every term built from those means (a square term is the square of \
         the mean, not the mean of the squares), and categorical covariates at their training \
         shares of each level. A derivative effect is dP/dx; a binary covariate's effect is \
         P(x = 1) − P(x = 0); a level's effect is P(level) − P(reference)."
            .to_string(),
        "Standard errors of probabilities and effects are by the delta method with the \
         coefficient covariance; probability intervals are built on the linear-index scale and \
         mapped through the link, so they stay inside [0, 1]; effect intervals are symmetric \
         normal intervals."
            .to_string(),
    ];
    for (c, spec) in model.covariates.iter().zip(&model.file.covariates) {
        if c.kind == CovariateKind::Categorical && spec.training.level_counts.is_none() {
            notes.push(format!(
                "The model file has no training level counts for '{}', so effects at means give \
                 each of its levels equal weight.",
                c.name
            ));
        }
    }
    if model.covariance.is_none() {
        notes.push(
            "The model file has no coefficient covariance: there are no standard errors, z \
             statistics, p-values or intervals."
                .to_string(),
        );
    }
    if let Some(d) = data {
        notes.push(format!(
            "Average marginal effects over {} are the mean of each row's effect over its {} \
             rows; their standard errors take the rows as fixed and the coefficients as \
             uncertain.",
            d.source, d.rows
        ));
    }
    notes
}

/// Build the report for `model`, with the averages of a data pass if there was one.
pub fn build(model: &Model, options: &Options, data: Option<&DataSummary>) -> Report {
    let mut scorer = Scorer::new(model);
    let mut at_means_options = *options;
    at_means_options.effects = true;
    at_means_options.intervals = true;
    at_means_options.contributions = false;
    let answer = scorer.score_at_means(model, &at_means_options);
    let at_means = AtMeans {
        probability: ProbabilityRow {
            probability: answer.probability,
            std_error: answer.std_error,
            lower: answer.interval.map(|i| i.lower),
            upper: answer.interval.map(|i| i.upper),
        },
        effects: answer
            .effects
            .iter()
            .map(|e| effect_row(model, e))
            .collect(),
    };
    let data_report = data.map(|d| DataReport {
        source: d.source.clone(),
        rows: d.rows,
        average_probability: ProbabilityRow {
            probability: d.probability.value,
            std_error: d.probability.std_error,
            lower: d.probability.interval.map(|i| i.lower),
            upper: d.probability.interval.map(|i| i.upper),
        },
        average_effects: d
            .effects
            .iter()
            .filter_map(|a| average_row(model, a))
            .collect(),
        warnings: WarningCounts {
            rows_with_warnings: d.warnings.rows_with_warnings(),
            out_of_range: d
                .warnings
                .out_of_range()
                .map(|counts| {
                    let c = &model.covariates[counts.covariate];
                    OutOfRangeCount {
                        covariate: c.name.clone(),
                        below: counts.below,
                        above: counts.above,
                        min: c.training_min,
                        max: c.training_max,
                    }
                })
                .collect(),
            unusual_combination: d.warnings.unusual_combination(),
        },
    });
    Report {
        model: identity(model),
        level: options.level(),
        coefficients: coefficient_table(model, options),
        covariates: covariate_rows(model),
        at_means,
        data: data_report,
        plots: Vec::new(),
        notes: notes(model, data),
        cautions: CAUTIONS.iter().map(|c| c.to_string()).collect(),
    }
}

/// The report as pretty-printed JSON.
pub fn render_json(report: &Report) -> String {
    // Serialising plain structs of strings, numbers and options cannot fail.
    serde_json::to_string_pretty(report).unwrap_or_default()
}
