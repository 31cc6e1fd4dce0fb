//! The engine: probability, marginal effects, delta-method intervals, extrapolation warnings,
//! contributions and decision bands for one observation, and averages over many.
//!
//! Everything here takes a validated [`Model`] and already-checked covariate values, so nothing
//! can fail: the only errors are the caller's, caught at the edge by
//! [`Model::parse_observation`]. A [`Scorer`] owns every buffer it needs and reuses them, so
//! scoring a batch allocates nothing per observation once the first answer has sized them.
//!
//! The formulas (design brief §4), with t the term vector, β the coefficients, V their covariance,
//! z = βᵀt, and F, f, f′ the link's probability, density and density derivative:
//!
//! ```text
//! probability          p = F(z)                  ∂p/∂β = f(z)·t
//! interval for p       [F(z − q·s), F(z + q·s)]  s = √(tᵀVt), q = Φ⁻¹(½ + level/2)
//! derivative effect    m = f(z)·g,  g = βᵀd      ∂m/∂β = f′(z)·g·t + f(z)·d,  d = ∂t/∂xⱼ
//! discrete change      Δ = F(z_b) − F(z_a)       ∂Δ/∂β = f(z_b)·t_b − f(z_a)·t_a
//! standard error       √(∇ᵀV∇);  effect interval: effect ± q·se
//! elasticity           m·x/p  (continuous covariates)
//! contribution of j    z(x) − z(x with xⱼ at its reference: training mean, or reference level)
//! ```

mod average;

pub use average::{Average, Averager};

use crate::link::normal_quantile;
use crate::model::{CovariateKind, Model, Value};

/// A two-sided interval.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Interval {
    /// The lower bound.
    pub lower: f64,
    /// The upper bound.
    pub upper: f64,
}

/// How an effect is defined.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum EffectKind {
    /// dP/dx, for continuous and count covariates.
    Derivative,
    /// P(x = 1) − P(x = 0), for binary covariates.
    DiscreteChange,
    /// P(level) − P(reference), for each non-reference level of a categorical covariate.
    LevelChange,
}

impl EffectKind {
    /// The name used in answers and CSV output.
    pub fn name(self) -> &'static str {
        match self {
            EffectKind::Derivative => "derivative",
            EffectKind::DiscreteChange => "discrete_change",
            EffectKind::LevelChange => "level_change",
        }
    }
}

/// Which effect a slot holds: a covariate, and for a categorical one a non-reference level.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct EffectSlot {
    /// The covariate's index.
    pub covariate: usize,
    /// The level compared with the reference, for a categorical covariate.
    pub level: Option<usize>,
    /// How the effect is defined.
    pub kind: EffectKind,
}

/// Every effect a model reports, in covariate order: one per numeric or binary covariate, one
/// per non-reference level of each categorical covariate.
pub fn effect_slots(model: &Model) -> Vec<EffectSlot> {
    let mut slots = Vec::new();
    for (j, c) in model.covariates.iter().enumerate() {
        match c.kind {
            CovariateKind::Continuous | CovariateKind::Count => slots.push(EffectSlot {
                covariate: j,
                level: None,
                kind: EffectKind::Derivative,
            }),
            CovariateKind::Binary => slots.push(EffectSlot {
                covariate: j,
                level: None,
                kind: EffectKind::DiscreteChange,
            }),
            CovariateKind::Categorical => {
                for l in (0..c.levels.len()).filter(|&l| l != c.reference) {
                    slots.push(EffectSlot {
                        covariate: j,
                        level: Some(l),
                        kind: EffectKind::LevelChange,
                    });
                }
            }
        }
    }
    slots
}

/// One marginal effect at an observation.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Effect {
    /// Which covariate (and level).
    pub slot: EffectSlot,
    /// The effect on the probability.
    pub effect: f64,
    /// Its delta-method standard error, when the model has a covariance.
    pub std_error: Option<f64>,
    /// The symmetric normal interval, when the model has a covariance.
    pub interval: Option<Interval>,
    /// m·x/p, for continuous covariates when asked for.
    pub elasticity: Option<f64>,
}

/// A reason to distrust an answer: the observation lies outside the training data.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Warning {
    /// A covariate's value lies outside its training range.
    OutOfRange {
        /// The covariate's index.
        covariate: usize,
        /// The value.
        value: f64,
        /// Training minimum.
        min: f64,
        /// Training maximum.
        max: f64,
    },
    /// The combination of continuous covariates is further from the training mean (in
    /// Mahalanobis distance) than any training observation.
    UnusualCombination {
        /// This observation's distance.
        distance: f64,
        /// The largest training distance.
        max_distance: f64,
    },
}

/// How far one covariate moves the linear index from the reference profile.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Contribution {
    /// The covariate's index.
    pub covariate: usize,
    /// z(x) − z(x with this covariate at its reference value).
    pub contribution: f64,
}

/// What to compute. Build with [`Options::new`], which checks the level once.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Options {
    /// Compute marginal effects.
    pub effects: bool,
    /// Compute elasticities of continuous covariates (needs `effects`).
    pub elasticities: bool,
    /// Compute standard errors and intervals (when the model has a covariance).
    pub intervals: bool,
    /// Compute and rank contributions.
    pub contributions: bool,
    level: f64,
    quantile: f64,
}

/// The interval level is not strictly between 0 and 1.
#[derive(Debug, Clone, Copy, PartialEq, thiserror::Error)]
#[error("the interval level must lie strictly between 0 and 1, got {0}")]
pub struct BadLevel(pub f64);

impl Options {
    /// Everything on, at the given interval level (for example 0.95).
    pub fn new(level: f64) -> Result<Options, BadLevel> {
        if !(level > 0.0 && level < 1.0) {
            return Err(BadLevel(level));
        }
        Ok(Options {
            effects: true,
            elasticities: false,
            intervals: true,
            contributions: true,
            level,
            quantile: normal_quantile(0.5 + level / 2.0),
        })
    }

    /// Only the probability and its index: the fastest path.
    pub fn probability_only() -> Options {
        Options {
            effects: false,
            intervals: false,
            contributions: false,
            ..Options::default()
        }
    }

    /// The interval level.
    pub fn level(&self) -> f64 {
        self.level
    }

    /// The normal quantile q for the level.
    pub fn quantile(&self) -> f64 {
        self.quantile
    }
}

impl Default for Options {
    /// Everything on at the 0.95 level.
    fn default() -> Self {
        Options {
            effects: true,
            elasticities: false,
            intervals: true,
            contributions: true,
            level: 0.95,
            quantile: 1.959_963_984_540_054,
        }
    }
}

/// The full answer for one observation. Its vectors are reused between calls.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Answer {
    /// z = βᵀt.
    pub linear_index: f64,
    /// p = F(z).
    pub probability: f64,
    /// 1 − p, computed directly (accurate when p is near 1).
    pub complement: f64,
    /// Delta-method standard error of p, when intervals were computed.
    pub std_error: Option<f64>,
    /// The interval for p, built on the index scale.
    pub interval: Option<Interval>,
    /// Effects, in [`effect_slots`] order (empty unless asked for).
    pub effects: Vec<Effect>,
    /// Extrapolation warnings.
    pub warnings: Vec<Warning>,
    /// Contributions, largest magnitude first (empty unless asked for).
    pub contributions: Vec<Contribution>,
    /// Index of the decision band p falls in, if the model has bands.
    pub band: Option<usize>,
    /// Whether p is at or above the decision threshold, if the model has one.
    pub above_threshold: Option<bool>,
}

/// Reusable buffers for scoring one model's observations.
#[derive(Debug, Clone)]
pub struct Scorer {
    slots: Vec<EffectSlot>,
    alternative: Vec<Value>,
    terms: Vec<f64>,
    terms_a: Vec<f64>,
    terms_b: Vec<f64>,
    derivative: Vec<f64>,
    gradient: Vec<f64>,
    /// The answer for the last observation scored.
    pub answer: Answer,
    /// The gradient of each effect with respect to β for the last observation, row-major
    /// (slots × terms); filled only when averaging.
    effect_gradients: Vec<f64>,
    /// Each effect's value for the last observation; filled only when averaging.
    effect_values: Vec<f64>,
    probability_gradient: Vec<f64>,
}

/// The quadratic form `gᵀVg` for a row-major `k × k` matrix.
#[inline]
pub fn quadratic_form(covariance: &[f64], g: &[f64]) -> f64 {
    let k = g.len();
    let mut total = 0.0;
    for r in 0..k {
        if g[r] == 0.0 {
            continue;
        }
        let row = &covariance[r * k..(r + 1) * k];
        let mut inner = 0.0;
        for c in 0..k {
            inner += row[c] * g[c];
        }
        total += g[r] * inner;
    }
    total.max(0.0)
}

impl Scorer {
    /// Buffers sized for `model`.
    pub fn new(model: &Model) -> Scorer {
        let k = model.terms.len();
        let slots = effect_slots(model);
        let n_slots = slots.len();
        Scorer {
            alternative: Vec::with_capacity(model.covariates.len()),
            terms: Vec::with_capacity(k),
            terms_a: Vec::with_capacity(k),
            terms_b: Vec::with_capacity(k),
            derivative: vec![0.0; k],
            gradient: vec![0.0; k],
            answer: Answer {
                effects: Vec::with_capacity(n_slots),
                warnings: Vec::with_capacity(model.covariates.len() + 1),
                contributions: Vec::with_capacity(model.covariates.len()),
                ..Answer::default()
            },
            effect_gradients: vec![0.0; n_slots * k],
            effect_values: vec![0.0; n_slots],
            probability_gradient: vec![0.0; k],
            slots,
        }
    }

    /// The effect slots of the model this scorer was built for.
    pub fn slots(&self) -> &[EffectSlot] {
        &self.slots
    }

    /// The probability alone: the term vector, the index, the link.
    #[inline]
    pub fn probability(model: &Model, values: &[Value]) -> f64 {
        model.link.probability(model.linear_index_of(values))
    }

    /// Score one observation; the answer is in `self.answer`.
    pub fn score(&mut self, model: &Model, values: &[Value], options: &Options) -> &Answer {
        self.score_inner(model, values, options, None, true);
        &self.answer
    }

    /// Score one observation and add it to a running average of effects.
    pub fn score_and_average(
        &mut self,
        model: &Model,
        values: &[Value],
        options: &Options,
        averager: &mut Averager,
    ) -> &Answer {
        self.score_inner(model, values, options, Some(averager), true);
        &self.answer
    }

    /// Effects at the training means (numeric covariates at their means, categorical at their
    /// training shares; the terms are built from that mean profile, so a square term is the
    /// square of the mean). No extrapolation warnings are raised for the profile itself.
    pub fn score_at_means(&mut self, model: &Model, options: &Options) -> &Answer {
        let profile = model.mean_profile.clone();
        self.score_inner(model, &profile, options, None, false);
        &self.answer
    }

    fn score_inner(
        &mut self,
        model: &Model,
        values: &[Value],
        options: &Options,
        averager: Option<&mut Averager>,
        warn: bool,
    ) {
        let link = model.link;
        model.term_vector(values, &mut self.terms);
        let z = model.linear_index(&self.terms);
        let density = link.density(z);
        let a = &mut self.answer;
        a.linear_index = z;
        a.probability = link.probability(z);
        a.complement = link.complement(z);
        a.effects.clear();
        a.warnings.clear();
        a.contributions.clear();
        let covariance = if options.intervals {
            model.covariance.as_deref()
        } else {
            None
        };
        a.std_error = None;
        a.interval = None;
        if let Some(v) = covariance {
            let index_se = quadratic_form(v, &self.terms).sqrt();
            let q = options.quantile;
            a.std_error = Some(density * index_se);
            a.interval = Some(Interval {
                lower: link.probability(z - q * index_se),
                upper: link.probability(z + q * index_se),
            });
        }
        let averaging = averager.is_some();
        if options.effects || averaging {
            self.compute_effects(model, values, z, options, covariance, averaging);
        }
        if warn {
            self.compute_warnings(model, values);
        }
        if options.contributions {
            self.compute_contributions(model, values);
        }
        let a = &mut self.answer;
        if let Some(d) = &model.file.decision {
            a.above_threshold = d.threshold.map(|t| a.probability >= t);
            a.band = if d.bands.is_empty() {
                None
            } else {
                Some(
                    d.bands
                        .iter()
                        .position(|b| a.probability < b.below)
                        .unwrap_or(d.bands.len() - 1),
                )
            };
        } else {
            a.above_threshold = None;
            a.band = None;
        }
        if let Some(averager) = averager {
            let k = self.terms.len();
            for (g, t) in self.probability_gradient.iter_mut().zip(&self.terms) {
                *g = density * t;
            }
            averager.add(
                self.answer.probability,
                &self.probability_gradient,
                &self.effect_values,
                &self.effect_gradients,
                k,
            );
        }
    }

    fn compute_effects(
        &mut self,
        model: &Model,
        values: &[Value],
        z: f64,
        options: &Options,
        covariance: Option<&[f64]>,
        keep_gradients: bool,
    ) {
        let link = model.link;
        let k = self.terms.len();
        let density = link.density(z);
        let density_slope = link.density_derivative(z);
        let q = options.quantile;
        for (s, slot) in self.slots.iter().enumerate() {
            let j = slot.covariate;
            let involved = &model.terms_of_covariate[j];
            let effect = match slot.kind {
                EffectKind::Derivative => {
                    self.derivative.iter_mut().for_each(|d| *d = 0.0);
                    let mut g = 0.0;
                    for &i in involved {
                        let d = model.terms[i].derivative(j, values, &model.level_shares);
                        self.derivative[i] = d;
                        g += model.coefficients[i] * d;
                    }
                    for i in 0..k {
                        self.gradient[i] =
                            density_slope * g * self.terms[i] + density * self.derivative[i];
                    }
                    density * g
                }
                EffectKind::DiscreteChange | EffectKind::LevelChange => {
                    let (to, from) = match slot.level {
                        Some(l) => (Value::Level(l), Value::Level(model.covariates[j].reference)),
                        None => (Value::Number(1.0), Value::Number(0.0)),
                    };
                    self.alternative.clear();
                    self.alternative.extend_from_slice(values);
                    self.alternative[j] = to;
                    let z_b = shifted_terms(
                        model,
                        &self.alternative,
                        involved,
                        &self.terms,
                        &mut self.terms_b,
                        z,
                    );
                    self.alternative[j] = from;
                    let z_a = shifted_terms(
                        model,
                        &self.alternative,
                        involved,
                        &self.terms,
                        &mut self.terms_a,
                        z,
                    );
                    let (f_b, f_a) = (link.density(z_b), link.density(z_a));
                    for i in 0..k {
                        self.gradient[i] = f_b * self.terms_b[i] - f_a * self.terms_a[i];
                    }
                    probability_difference(link, z_b, z_a)
                }
            };
            if keep_gradients {
                self.effect_values[s] = effect;
                self.effect_gradients[s * k..(s + 1) * k].copy_from_slice(&self.gradient);
            }
            if !options.effects {
                continue;
            }
            let (std_error, interval) = match covariance {
                Some(v) => {
                    let se = quadratic_form(v, &self.gradient).sqrt();
                    (
                        Some(se),
                        Some(Interval {
                            lower: effect - q * se,
                            upper: effect + q * se,
                        }),
                    )
                }
                None => (None, None),
            };
            let elasticity = (options.elasticities
                && model.covariates[j].kind == CovariateKind::Continuous)
                .then(|| effect * values[j].number() / self.answer.probability);
            self.answer.effects.push(Effect {
                slot: *slot,
                effect,
                std_error,
                interval,
                elasticity,
            });
        }
    }

    fn compute_warnings(&mut self, model: &Model, values: &[Value]) {
        for (j, c) in model.covariates.iter().enumerate() {
            if c.kind == CovariateKind::Categorical {
                continue;
            }
            let x = values[j].number();
            if x < c.training_min || x > c.training_max {
                self.answer.warnings.push(Warning::OutOfRange {
                    covariate: j,
                    value: x,
                    min: c.training_min,
                    max: c.training_max,
                });
            }
        }
        if let Some(joint) = &model.joint {
            let n = joint.covariates.len();
            let mut squared = 0.0;
            for r in 0..n {
                let dr = values[joint.covariates[r]].number() - joint.mean[r];
                let mut inner = 0.0;
                for c in 0..n {
                    inner += joint.precision[r * n + c]
                        * (values[joint.covariates[c]].number() - joint.mean[c]);
                }
                squared += dr * inner;
            }
            let distance = squared.max(0.0).sqrt();
            if distance > joint.max_distance {
                self.answer.warnings.push(Warning::UnusualCombination {
                    distance,
                    max_distance: joint.max_distance,
                });
            }
        }
    }

    fn compute_contributions(&mut self, model: &Model, values: &[Value]) {
        for j in 0..model.covariates.len() {
            let mut c = 0.0;
            if values[j] != model.reference_profile[j] {
                self.alternative.clear();
                self.alternative.extend_from_slice(values);
                self.alternative[j] = model.reference_profile[j];
                for &i in &model.terms_of_covariate[j] {
                    let reference = model.terms[i].value(&self.alternative, &model.level_shares);
                    c += model.coefficients[i] * (self.terms[i] - reference);
                }
            }
            self.answer.contributions.push(Contribution {
                covariate: j,
                contribution: c,
            });
        }
        self.answer.contributions.sort_unstable_by(|a, b| {
            b.contribution
                .abs()
                .total_cmp(&a.contribution.abs())
                .then(a.covariate.cmp(&b.covariate))
        });
    }
}

/// Terms and index at an alternative observation that differs from the scored one only in the
/// covariate whose terms are `involved`: copy the base terms, recompute just those.
#[inline]
fn shifted_terms(
    model: &Model,
    alternative: &[Value],
    involved: &[usize],
    base: &[f64],
    out: &mut Vec<f64>,
    base_index: f64,
) -> f64 {
    out.clear();
    out.extend_from_slice(base);
    let mut z = base_index;
    for &i in involved {
        let t = model.terms[i].value(alternative, &model.level_shares);
        z += model.coefficients[i] * (t - base[i]);
        out[i] = t;
    }
    z
}

/// F(z_b) − F(z_a), taken on whichever side of the distribution keeps its digits: when both
/// probabilities are near 1, the difference of the complements is exact where the difference
/// of the probabilities would cancel.
#[inline]
fn probability_difference(link: crate::link::Link, z_b: f64, z_a: f64) -> f64 {
    if z_a > 0.0 && z_b > 0.0 {
        link.complement(z_a) - link.complement(z_b)
    } else {
        link.probability(z_b) - link.probability(z_a)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn default_quantile_is_the_95_percent_normal_quantile() {
        let fresh = Options::new(0.95).unwrap();
        assert!((fresh.quantile() - Options::default().quantile()).abs() < 1e-14);
        assert!(Options::new(1.0).is_err());
        assert!(Options::new(f64::NAN).is_err());
    }
}
