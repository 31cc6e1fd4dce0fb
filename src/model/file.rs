//! The model file as it is written on disk: plain serde types, one-to-one with the JSON, and the
//! JSON Schema generated from them.
//!
//! These types accept anything that is well-formed JSON of the right shape; they promise nothing
//! about consistency. [`crate::model::Model::from_file`] turns one into a validated model.
//!
//! Format version 1. A later format that adds optional fields keeps the version; one that
//! changes the meaning of a field raises it, and readers refuse versions they do not know.

use std::collections::BTreeMap;

use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

use crate::link::Link;

/// The value of the `format` field in every ogive model file.
pub const FORMAT_NAME: &str = "ogive-model";
/// The newest format version this build reads and the one it writes.
pub const FORMAT_VERSION: u32 = 1;

/// A binary-outcome regression model, ready to be validated and served.
#[derive(Debug, Clone, Serialize, Deserialize, JsonSchema, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct ModelFile {
    /// Always `"ogive-model"`.
    pub format: String,
    /// The format version; this build reads version 1.
    pub format_version: u32,
    /// The model's name: lower-case letters, digits and `-`, as used in routes and directories.
    pub name: String,
    /// The version label, unique within the model: letters, digits, `.`, `_` and `-`.
    pub version: String,
    /// What the model is for, in a sentence or two.
    #[serde(default)]
    pub description: String,
    /// What a probability from this model is the probability of.
    pub outcome: Outcome,
    /// The link between the linear index and the probability.
    pub link: Link,
    /// The raw inputs of an observation.
    pub covariates: Vec<CovariateSpec>,
    /// The columns of the design, each with its coefficient, in the order of `covariance`.
    pub terms: Vec<TermSpec>,
    /// The coefficient covariance matrix, rows and columns in the order of `terms`. Without it
    /// the model gives no standard errors or intervals, and every answer says so.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub covariance: Option<Vec<Vec<f64>>>,
    /// How the covariance was estimated (for example `classical` or `robust`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub covariance_type: Option<String>,
    /// The training mean and covariance of the continuous covariates, for the joint
    /// extrapolation warning.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub joint: Option<JointSpec>,
    /// The distribution of fitted probabilities over the training data (for prediction drift).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub fitted_probabilities: Option<Histogram>,
    /// Observations with the probability the fitting software computed; loading refuses a file
    /// whose check cases do not reproduce to relative 1e-9.
    #[serde(default)]
    pub check_cases: Vec<CheckCase>,
    /// An optional decision threshold and named probability bands.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub decision: Option<DecisionSpec>,
    /// Covariates of this version that it announces while it is a stored candidate: from the
    /// moment it is stored, the live version accepts these fields in requests, ignores them
    /// for scoring and says so in the answer's `notes`, so callers can start sending them
    /// before this version goes live; a shadow of this version is scored on the calls that
    /// send them; and promoting it is not refused for adding them. Each names a covariate of
    /// this file, once.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub announces: Vec<String>,
    /// What fitted the model, when, and on how much data.
    pub provenance: Provenance,
}

/// What the probability is the probability of.
#[derive(Debug, Clone, Serialize, Deserialize, JsonSchema, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct Outcome {
    /// The outcome column's name in the training data.
    pub name: String,
    /// A plain sentence: what `1` means.
    pub meaning: String,
}

/// The kind of a covariate.
#[derive(Debug, Clone, Copy, Serialize, Deserialize, JsonSchema, PartialEq, Eq, Hash)]
#[serde(rename_all = "lowercase")]
pub enum CovariateKind {
    /// A real number; its effect is the derivative dP/dx.
    Continuous,
    /// A non-negative whole number; its effect is the derivative dP/dx.
    Count,
    /// 0 or 1; its effect is the discrete change P(x=1) − P(x=0).
    Binary,
    /// One of a fixed set of text levels; each level's effect is P(level) − P(reference).
    Categorical,
}

impl CovariateKind {
    /// The name used in files and answers.
    pub fn name(self) -> &'static str {
        match self {
            CovariateKind::Continuous => "continuous",
            CovariateKind::Count => "count",
            CovariateKind::Binary => "binary",
            CovariateKind::Categorical => "categorical",
        }
    }
}

/// One raw input of an observation.
#[derive(Debug, Clone, Serialize, Deserialize, JsonSchema, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct CovariateSpec {
    /// The field name callers send.
    pub name: String,
    /// What kind of value it takes.
    pub kind: CovariateKind,
    /// The unit of a numeric covariate (for example `thousand EUR` or `years`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub unit: Option<String>,
    /// A plain description for callers and reviewers.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub description: Option<String>,
    /// The levels of a categorical covariate, reference level included.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub levels: Option<Vec<String>>,
    /// The reference level of a categorical covariate: effects compare each level with it.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub reference: Option<String>,
    /// What the training data looked like.
    pub training: TrainingSummary,
}

/// The training distribution of one covariate. Numeric kinds carry `min`, `max`, `mean` and
/// `std_dev` (and usually a histogram); a categorical covariate carries `level_counts`.
#[derive(Debug, Clone, Default, Serialize, Deserialize, JsonSchema, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct TrainingSummary {
    /// The smallest training value.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub min: Option<f64>,
    /// The largest training value.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub max: Option<f64>,
    /// The training mean (for a binary covariate, the share of ones).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub mean: Option<f64>,
    /// The training standard deviation (divisor n − 1).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub std_dev: Option<f64>,
    /// A histogram of the training values.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub histogram: Option<Histogram>,
    /// Training count of each level of a categorical covariate.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub level_counts: Option<BTreeMap<String, u64>>,
}

/// A histogram: `counts[i]` values fell in `[edges[i], edges[i+1])` (the last bin is closed).
#[derive(Debug, Clone, Serialize, Deserialize, JsonSchema, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct Histogram {
    /// Bin edges, strictly increasing; one more than `counts`.
    pub edges: Vec<f64>,
    /// Training values per bin.
    pub counts: Vec<u64>,
}

/// One term of the design and its coefficient.
#[derive(Debug, Clone, Serialize, Deserialize, JsonSchema, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct TermSpec {
    /// The term in the syntax of `ogive fit --terms`: `intercept`, `x`, `x^2`, `log(x)`,
    /// `sector=retail` or a product such as `x*sector=retail`.
    pub term: String,
    /// Its coefficient β.
    pub coefficient: f64,
}

/// Training mean and covariance of the continuous covariates, for the Mahalanobis warning.
#[derive(Debug, Clone, Serialize, Deserialize, JsonSchema, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct JointSpec {
    /// The continuous covariates, in the order of `mean` and `covariance`.
    pub covariates: Vec<String>,
    /// Their training means.
    pub mean: Vec<f64>,
    /// Their training covariance (divisor n − 1); must be positive definite.
    pub covariance: Vec<Vec<f64>>,
    /// The largest Mahalanobis distance (not squared) of any training observation.
    pub max_distance: f64,
}

/// A stored observation and the probability the fitting software computed for it.
#[derive(Debug, Clone, Serialize, Deserialize, JsonSchema, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct CheckCase {
    /// The covariate values, as a caller would send them.
    pub observation: serde_json::Map<String, serde_json::Value>,
    /// The probability the fitting software computed for `observation`, which a load must
    /// reproduce to relative 1e-9.
    pub probability: f64,
}

/// An optional decision rule on the probability.
#[derive(Debug, Clone, Serialize, Deserialize, JsonSchema, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct DecisionSpec {
    /// Probabilities at or above this are flagged (for example, referred for review).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub threshold: Option<f64>,
    /// Named bands in increasing order: a probability falls in the first band whose `below`
    /// exceeds it; the last band's `below` must be 1 (it then also holds p = 1).
    #[serde(default)]
    pub bands: Vec<Band>,
}

/// One named probability band.
#[derive(Debug, Clone, Serialize, Deserialize, JsonSchema, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct Band {
    /// The band's name (for example `low`).
    pub name: String,
    /// The exclusive upper bound of the band.
    pub below: f64,
}

/// Where the model came from.
#[derive(Debug, Clone, Default, Serialize, Deserialize, JsonSchema, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct Provenance {
    /// The software that fitted it, with its version (for example `ogive 0.1.0`).
    pub fitted_by: String,
    /// When, as an RFC 3339 timestamp.
    pub fitted_at: String,
    /// Observations used in the fit.
    pub observations: u64,
    /// The log-likelihood at the estimate.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub log_likelihood: Option<f64>,
    /// The log-likelihood of the intercept-only model.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub null_log_likelihood: Option<f64>,
    /// Newton iterations to convergence.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub iterations: Option<u32>,
    /// The training data: a file name, a query, or a data-set name.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub data: Option<String>,
    /// Free-form notes (for example, how a hand-written demo model was made).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub notes: Option<String>,
    /// How the observations were weighted, or the intercept corrected, when they were.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub weighting: Option<Weighting>,
}

/// How a fit weighted its observations or corrected its intercept for an outcome-stratified
/// sample.
#[derive(Debug, Clone, Serialize, Deserialize, JsonSchema, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct Weighting {
    /// What was done.
    pub method: WeightingMethod,
    /// The weight column, for frequency and sampling weights.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub column: Option<String>,
    /// The sum of the weights over the observations used.
    pub weight_sum: f64,
    /// The outcome's share in the sample (weighted by the weight column, if any).
    pub sample_rate: f64,
    /// The outcome's share in the population, for the two population methods.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub population_rate: Option<f64>,
    /// For the intercept correction: the amount subtracted from the fitted intercept,
    /// ln[((1 − τ)/τ)·(ȳ/(1 − ȳ))] with τ the population and ȳ the sample rate.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub intercept_shift: Option<f64>,
}

impl Weighting {
    /// One sentence on how the fit was weighted, for the fit's notes and `describe`.
    pub fn summary(&self) -> String {
        use WeightingMethod as M;
        match self.method {
            M::Frequency => format!(
                "frequency weights from column '{}' (sum {}, weighted outcome rate {:.6})",
                self.column.as_deref().unwrap_or(""),
                weight_sum_text(self.weight_sum),
                self.sample_rate
            ),
            M::Sampling => format!(
                "sampling weights from column '{}' (sum {}, weighted outcome rate {:.6}); HC0 sandwich covariance",
                self.column.as_deref().unwrap_or(""),
                weight_sum_text(self.weight_sum),
                self.sample_rate
            ),
            M::PopulationIntercept => format!(
                "outcome-stratified sample (outcome rate {:.6}) brought to the population rate {} by subtracting {:.6} from the intercept (prior correction); slopes unchanged",
                self.sample_rate,
                self.population_rate.unwrap_or(f64::NAN),
                self.intercept_shift.unwrap_or(f64::NAN)
            ),
            M::PopulationWeights => format!(
                "outcome-stratified sample (outcome rate {:.6}) weighted to the population rate {} (ones τ/ȳ, zeros (1 − τ)/(1 − ȳ)); HC0 sandwich covariance",
                self.sample_rate,
                self.population_rate.unwrap_or(f64::NAN)
            ),
        }
    }
}

/// A sum of weights as the summary prints it: rounded to 12 significant digits, then written
/// in the shortest form that reads back to that, so that the rounding of the summation
/// (…000000001) does not reach the reader while any real fraction does. The model file keeps
/// the exact sum.
fn weight_sum_text(sum: f64) -> String {
    let rounded: f64 = format!("{sum:.11e}").parse().unwrap_or(sum);
    format!("{rounded}")
}

/// The ways a fit can weight its observations.
#[derive(Debug, Clone, Copy, Serialize, Deserialize, JsonSchema, PartialEq, Eq)]
#[serde(rename_all = "snake_case")]
pub enum WeightingMethod {
    /// Frequency weights: a row of weight v counts as v identical observations.
    Frequency,
    /// Sampling weights: a row of weight v stands for v members of the population (inverse
    /// selection probability); the covariance is the HC0 sandwich.
    Sampling,
    /// An outcome-stratified sample, fitted unweighted, whose logit intercept is corrected to
    /// the population rate (prior correction, King and Zeng 2001); the slopes are unchanged.
    PopulationIntercept,
    /// An outcome-stratified sample weighted so that ones and zeros take their population
    /// shares (w₁ = τ/ȳ, w₀ = (1 − τ)/(1 − ȳ)); the covariance is the HC0 sandwich.
    PopulationWeights,
}

impl WeightingMethod {
    /// The name written in files and shown by `describe`.
    pub fn name(self) -> &'static str {
        match self {
            WeightingMethod::Frequency => "frequency",
            WeightingMethod::Sampling => "sampling",
            WeightingMethod::PopulationIntercept => "population_intercept",
            WeightingMethod::PopulationWeights => "population_weights",
        }
    }
}

/// The JSON Schema of the model file, as committed in `model-files/model.schema.json`.
pub fn json_schema() -> serde_json::Value {
    let settings = schemars::gen::SchemaSettings::draft2019_09();
    let schema = settings
        .into_generator()
        .into_root_schema_for::<ModelFile>();
    serde_json::to_value(schema).unwrap_or_default()
}

#[cfg(test)]
mod tests {
    use super::weight_sum_text;

    #[test]
    fn weight_sums_print_without_summation_noise() {
        assert_eq!(weight_sum_text(300.0), "300");
        assert_eq!(weight_sum_text(0.1 + 0.2), "0.3");
        let tenths: f64 = std::iter::repeat_n(0.1, 10).sum();
        assert_eq!(tenths.to_string(), "0.9999999999999999");
        assert_eq!(weight_sum_text(tenths), "1");
        assert_eq!(weight_sum_text(12_345.678_9), "12345.6789");
        assert_eq!(weight_sum_text(2.5e-7), "0.00000025");
        assert_eq!(weight_sum_text(1e16 + 0.5), "10000000000000000");
    }
}
