//! The engine: probability, marginal effects, delta-method intervals, extrapolation warnings,
//! contributions and decision bands for one observation, and averages over many.
//!
//! Everything here takes a validated [`Model`] and already-checked covariate values, so nothing
//! can fail: the only errors are the caller's, caught at the edge by
//! [`Model::parse_observation`]. A [`Scorer`] owns every buffer it needs and reuses them, so
//! scoring a batch allocates nothing per observation once the first answer has sized them.
//!
//! The formulas, with t the term vector, β the coefficients, V their covariance,
//! z = βᵀt, and F, f, f′ the link's probability, density and density derivative:
//!
//! ```text
//! probability          p = F(z)                  ∂p/∂β = f(z)·t
//! interval for p       [F(z − q·s), F(z + q·s)]  s = √(tᵀVt), q = Φ⁻¹(½ + level/2)
//! derivative effect    m = f(z)·g,  g = βᵀd      ∂m/∂β = f′(z)·g·t + f(z)·d,  d = ∂t/∂xⱼ
//! discrete change      Δ = F(z_b) − F(z_a)       ∂Δ/∂β = f(z_b)·t_b − f(z_a)·t_a
//! standard error       √(∇ᵀV∇);  effect interval: effect ± q·se
//! elasticity           m·x/p  (continuous covariates)
//! contribution of j    z(x) − z(x with xⱼ alone at the training-mean profile: its training
//!                      mean, or for a categorical covariate its training shares)
//! ```

mod average;

pub use average::{Average, Averager};

use crate::link::{normal_quantile, LinkValues};
use crate::model::{CovariateKind, Factor, Model, Term, Value};

/// A two-sided interval at [`Options::level`], built on the index scale and mapped through
/// the link (for a probability) or from the delta-method standard error (for an effect).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Interval {
    /// The lower end: never above `upper`, and for a probability never below 0.
    pub lower: f64,
    /// The upper end: for a probability never above 1.
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
    /// The covariate's position in [`Model::covariates`], in the model file's order.
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
        /// The covariate's position in [`Model::covariates`], in the model file's order.
        covariate: usize,
        /// The value the observation gave, outside [min, max].
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

/// How far one covariate moves the linear index from the training-mean profile.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Contribution {
    /// The covariate's position in [`Model::covariates`], in the model file's order.
    pub covariate: usize,
    /// z(x) − z(x with this covariate alone at the training-mean profile: its training mean,
    /// or for a categorical covariate its training shares).
    pub contribution: f64,
}

/// What to compute. Build with [`Options::new`], which checks the level once.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Options {
    /// Compute a marginal effect per covariate (and per level), in [`effect_slots`] order.
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

/// The level nearly every request asks for, and the quantile [`normal_quantile`] gives for it
/// (Φ⁻¹(0.975), one unit in the last place below scipy.stats.norm.ppf(0.975) =
/// 1.959963984540054): kept so that the quantile's rational approximation does not run on
/// every request; a unit test holds it to the function's bits.
const COMMON_LEVEL: f64 = 0.95;
const COMMON_LEVEL_QUANTILE: f64 = 1.959_963_984_540_053_8;

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
            quantile: if level == COMMON_LEVEL {
                COMMON_LEVEL_QUANTILE
            } else {
                normal_quantile(0.5 + level / 2.0)
            },
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

    /// The confidence level of every interval, strictly between 0 and 1 (0.95 by default).
    pub fn level(&self) -> f64 {
        self.level
    }

    /// The normal quantile q for the level.
    pub fn quantile(&self) -> f64 {
        self.quantile
    }
}

impl Default for Options {
    /// Everything on at the 0.95 level: the same options, to the bit, as `Options::new(0.95)`,
    /// which the HTTP routes and the command line build, so a library caller's intervals match
    /// the service's.
    fn default() -> Self {
        Options {
            effects: true,
            elasticities: false,
            intervals: true,
            contributions: true,
            level: COMMON_LEVEL,
            quantile: COMMON_LEVEL_QUANTILE,
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
    /// Why the answer extrapolates: each covariate outside its training range, and a
    /// combination of values far from the training data; empty when it does not.
    pub warnings: Vec<Warning>,
    /// Contributions, largest magnitude first (empty unless asked for).
    pub contributions: Vec<Contribution>,
    /// Index of the decision band p falls in, if the model has bands.
    pub band: Option<usize>,
    /// Whether p is at or above the decision threshold, if the model has one.
    pub above_threshold: Option<bool>,
}

/// How a term depends on one covariate x, for the shapes that are worth writing out inline;
/// every other term goes through [`Term::value`] and [`Term::derivative`]. Each inline form is
/// the same arithmetic as the general one, so the results are the same to the bit.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Shape {
    /// t = x, ∂t/∂x = 1.
    Linear,
    /// t = x², ∂t/∂x = 2x.
    Square,
    /// t = x·y for another numeric covariate y, ∂t/∂x = y.
    TimesOther(usize),
    /// Anything else.
    General,
}

impl Shape {
    fn of(term: &Term, j: usize) -> Shape {
        match term {
            Term::Covariate(c) if *c == j => Shape::Linear,
            Term::Power(c, 2) if *c == j => Shape::Square,
            Term::Product(factors) => match factors.as_slice() {
                [Factor::Value(a), Factor::Value(b)] if *a == j && *b != j => Shape::TimesOther(*b),
                [Factor::Value(a), Factor::Value(b)] if *b == j && *a != j => Shape::TimesOther(*a),
                _ => Shape::General,
            },
            _ => Shape::General,
        }
    }
}

/// Reusable buffers for scoring one model's observations. A scorer serves the model it was
/// built for (its buffers and term shapes follow that model's layout).
#[derive(Debug, Clone)]
pub struct Scorer {
    slots: Vec<EffectSlot>,
    /// The observation being scored, with one covariate changed at a time (discrete changes,
    /// contributions) and put back straight after.
    alternative: Vec<Value>,
    terms: Vec<f64>,
    /// V·t for the observation being scored, when intervals are computed.
    covariance_terms: Vec<f64>,
    /// The effect being computed: its gradient is c·t + e, with e nonzero only on the terms
    /// that involve the covariate; these are e's entries there, in `terms_of_covariate` order.
    sparse: Vec<f64>,
    /// t_b − t and t_a − t on the involved terms, for a discrete change from a to b.
    shift_high: Vec<f64>,
    shift_low: Vec<f64>,
    /// A full gradient, for the rare effect whose variance needs the direct quadratic form.
    gradient: Vec<f64>,
    /// x − mean of the joint-check covariates.
    deviations: Vec<f64>,
    /// For each covariate, the shape of each term that involves it (in `terms_of_covariate`
    /// order), so the common shapes are differentiated and re-evaluated inline.
    shapes: Vec<Vec<Shape>>,
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

/// `w = V·t` into `out` for a symmetric row-major `k × k` matrix, returning `tᵀVt`. Written
/// as a sum of rows scaled by tⱼ (row j of a symmetric V is its column j) so the inner loop
/// has no reduction and vectorises.
#[inline]
fn symmetric_product(covariance: &[f64], t: &[f64], out: &mut Vec<f64>) -> f64 {
    let k = t.len();
    out.clear();
    out.resize(k, 0.0);
    for (j, &tj) in t.iter().enumerate() {
        if tj == 0.0 {
            continue;
        }
        let row = &covariance[j * k..(j + 1) * k];
        for (w, v) in out.iter_mut().zip(row) {
            *w += tj * v;
        }
    }
    t.iter().zip(out.iter()).map(|(a, b)| a * b).sum()
}

/// Below this share of `c²·tᵀVt + eᵀVe`, the expanded variance below has cancelled too far to
/// trust its last digits, and the direct quadratic form is used instead.
const CANCELLATION: f64 = 1e-3;

/// What the interval of every effect of one observation shares: V, `w = V·t` and `a = tᵀVt`.
#[derive(Clone, Copy)]
struct IndexUncertainty<'a> {
    covariance: &'a [f64],
    covariance_terms: &'a [f64],
    index_variance: f64,
}

/// An effect's gradient in the form `∇ = c·t + e`, with e given on the `involved` terms only.
#[derive(Clone, Copy)]
struct SparseGradient<'a> {
    c: f64,
    involved: &'a [usize],
    e: &'a [f64],
}

impl SparseGradient<'_> {
    /// `∇ = c·t + e` as a full vector, into `out`.
    #[inline]
    fn expand(&self, terms: &[f64], out: &mut [f64]) {
        full_gradient(self.c, terms, self.involved, self.e, out);
    }
}

/// The delta-method variance `∇ᵀV∇` of an effect whose gradient is `∇ = c·t + e`, where e is
/// nonzero only on the `involved` terms, from the already computed `w = V·t`, `a = tᵀVt` of `u`:
///
/// ```text
/// ∇ᵀV∇ = c²·a + 2c·eᵀw + eᵀVe          (V symmetric; e has a handful of entries)
/// ```
///
/// That costs a few operations per involved term instead of k² per effect. Its rounding error
/// is about ε·(c²a + eᵀVe); when the result is smaller than [`CANCELLATION`] times that, the
/// gradient is formed and its quadratic form taken directly, which keeps the error relative to
/// the result.
#[inline]
fn effect_variance(
    u: IndexUncertainty<'_>,
    terms: &[f64],
    g: SparseGradient<'_>,
    scratch: &mut [f64],
) -> f64 {
    let k = terms.len();
    let SparseGradient { c, involved, e } = g;
    let mut cross = 0.0;
    let mut own = 0.0;
    for (m, &i) in involved.iter().enumerate() {
        let ei = e[m];
        if ei == 0.0 {
            continue;
        }
        cross += ei * u.covariance_terms[i];
        let row = &u.covariance[i * k..(i + 1) * k];
        let inner: f64 = involved.iter().zip(e).map(|(&i2, e2)| row[i2] * e2).sum();
        own += ei * inner;
    }
    let scale = c * c * u.index_variance + own;
    let variance = c * c * u.index_variance + 2.0 * c * cross + own;
    if variance >= CANCELLATION * scale {
        return variance.max(0.0);
    }
    g.expand(terms, scratch);
    quadratic_form(u.covariance, scratch)
}

/// `∇ = c·t + e` into `out`, with e given on the involved terms.
#[inline]
fn full_gradient(c: f64, terms: &[f64], involved: &[usize], e: &[f64], out: &mut [f64]) {
    for (g, t) in out.iter_mut().zip(terms) {
        *g = c * t;
    }
    for (&i, ei) in involved.iter().zip(e) {
        out[i] += ei;
    }
}

/// The observation's linear index and its link values.
#[derive(Debug, Clone, Copy)]
struct Evaluated {
    z: f64,
    link: LinkValues,
}

/// What a change of one covariate reads of the observation being scored.
struct Observation<'a> {
    model: &'a Model,
    values: &'a [Value],
    terms: &'a [f64],
    index: Evaluated,
}

impl Observation<'_> {
    /// The index and link values with covariate `j` set to `value`, and t(x′) − t(x) on the
    /// terms that involve `j` into `shift`. `alternative` holds the observation's values and is
    /// put back before returning. When `value` is what the observation already has, that is the
    /// observation itself: its index and link values are reused.
    #[inline]
    fn shifted(
        &self,
        j: usize,
        shapes: &[Shape],
        value: Value,
        alternative: &mut [Value],
        shift: &mut Vec<f64>,
    ) -> Evaluated {
        let model = self.model;
        let involved = model.terms_of_covariate[j].as_slice();
        shift.clear();
        if self.values[j] == value {
            shift.resize(involved.len(), 0.0);
            return self.index;
        }
        alternative[j] = value;
        let mut z = self.index.z;
        for (&i, &shape) in involved.iter().zip(shapes) {
            let t = match (shape, value) {
                (Shape::Linear, Value::Number(x)) => x,
                (Shape::Square, Value::Number(x)) => x * x,
                (Shape::TimesOther(other), Value::Number(x)) => x * self.values[other].number(),
                _ => model.terms[i].value(alternative, &model.level_shares),
            };
            let d = t - self.terms[i];
            z += model.coefficients[i] * d;
            shift.push(d);
        }
        alternative[j] = self.values[j];
        Evaluated {
            z,
            link: model.link.evaluate(z),
        }
    }
}

impl Scorer {
    /// Buffers sized for `model`.
    pub fn new(model: &Model) -> Scorer {
        let k = model.terms.len();
        let slots = effect_slots(model);
        let n_slots = slots.len();
        let most_involved = model
            .terms_of_covariate
            .iter()
            .map(Vec::len)
            .max()
            .unwrap_or(0);
        Scorer {
            alternative: Vec::with_capacity(model.covariates.len()),
            terms: Vec::with_capacity(k),
            covariance_terms: Vec::with_capacity(k),
            sparse: Vec::with_capacity(most_involved),
            shift_high: Vec::with_capacity(most_involved),
            shift_low: Vec::with_capacity(most_involved),
            gradient: vec![0.0; k],
            deviations: Vec::with_capacity(model.joint.as_ref().map_or(0, |j| j.mean.len())),
            shapes: model
                .terms_of_covariate
                .iter()
                .enumerate()
                .map(|(j, involved)| {
                    involved
                        .iter()
                        .map(|&i| Shape::of(&model.terms[i], j))
                        .collect()
                })
                .collect(),
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
        self.score_inner(model, &model.mean_profile, options, None, false);
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
        let at = link.evaluate(z);
        let a = &mut self.answer;
        a.linear_index = z;
        a.probability = at.probability;
        a.complement = at.complement;
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
        let mut index_variance = 0.0;
        if let Some(v) = covariance {
            index_variance = symmetric_product(v, &self.terms, &mut self.covariance_terms);
            let index_se = index_variance.max(0.0).sqrt();
            let q = options.quantile;
            a.std_error = Some(at.density * index_se);
            a.interval = Some(Interval {
                lower: link.probability(z - q * index_se),
                upper: link.probability(z + q * index_se),
            });
        }
        let averaging = averager.is_some();
        if options.effects || averaging || options.contributions {
            self.alternative.clear();
            self.alternative.extend_from_slice(values);
        }
        if options.effects || averaging {
            let index = Evaluated { z, link: at };
            let covariance = covariance.map(|v| (v, index_variance));
            self.compute_effects(model, values, index, options, covariance, averaging);
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
                *g = at.density * t;
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

    /// Every effect of the observation. Each effect's gradient is kept in the form c·t + e
    /// (e on the involved terms only); it is expanded to a full vector only for averaging.
    /// `covariance` is V with the index variance tᵀVt when intervals are asked for.
    fn compute_effects(
        &mut self,
        model: &Model,
        values: &[Value],
        index: Evaluated,
        options: &Options,
        covariance: Option<(&[f64], f64)>,
        keep_gradients: bool,
    ) {
        let uncertainty = covariance.map(|(v, index_variance)| IndexUncertainty {
            covariance: v,
            covariance_terms: &self.covariance_terms,
            index_variance,
        });
        let link = model.link;
        let k = self.terms.len();
        let Evaluated { z, link: at } = index;
        let density = at.density;
        let need_gradient = uncertainty.is_some() || keep_gradients;
        let density_slope = if need_gradient {
            link.density_derivative_from(z, density)
        } else {
            0.0
        };
        let q = options.quantile;
        for s in 0..self.slots.len() {
            let slot = self.slots[s];
            let j = slot.covariate;
            let involved = model.terms_of_covariate[j].as_slice();
            self.sparse.clear();
            let (effect, c) = match slot.kind {
                EffectKind::Derivative => {
                    let mut g = 0.0;
                    for (&i, &shape) in involved.iter().zip(&self.shapes[j]) {
                        let d = match shape {
                            Shape::Linear => 1.0,
                            Shape::Square => 2.0 * values[j].number(),
                            Shape::TimesOther(other) => values[other].number(),
                            Shape::General => {
                                model.terms[i].derivative(j, values, &model.level_shares)
                            }
                        };
                        if need_gradient {
                            self.sparse.push(density * d);
                        }
                        g += model.coefficients[i] * d;
                    }
                    // ∇ = f′(z)·g·t + f(z)·d
                    (density * g, density_slope * g)
                }
                EffectKind::DiscreteChange | EffectKind::LevelChange => {
                    let (to, from) = match slot.level {
                        Some(l) => (Value::Level(l), Value::Level(model.covariates[j].reference)),
                        None => (Value::Number(1.0), Value::Number(0.0)),
                    };
                    let observation = Observation {
                        model,
                        values,
                        terms: &self.terms,
                        index,
                    };
                    let shapes = self.shapes[j].as_slice();
                    let Evaluated {
                        z: z_high,
                        link: high,
                    } = observation.shifted(
                        j,
                        shapes,
                        to,
                        &mut self.alternative,
                        &mut self.shift_high,
                    );
                    let Evaluated {
                        z: z_low,
                        link: low,
                    } = observation.shifted(
                        j,
                        shapes,
                        from,
                        &mut self.alternative,
                        &mut self.shift_low,
                    );
                    // ∇ = f(z_b)·t_b − f(z_a)·t_a = (f_b − f_a)·t + f_b·(t_b − t) − f_a·(t_a − t)
                    if need_gradient {
                        for (b, a) in self.shift_high.iter().zip(&self.shift_low) {
                            self.sparse.push(high.density * b - low.density * a);
                        }
                    }
                    let effect = if z_low > 0.0 && z_high > 0.0 {
                        // Both near 1: the difference of the complements keeps its digits.
                        low.complement - high.complement
                    } else {
                        high.probability - low.probability
                    };
                    (effect, high.density - low.density)
                }
            };
            let gradient = SparseGradient {
                c,
                involved,
                e: &self.sparse,
            };
            if keep_gradients {
                self.effect_values[s] = effect;
                gradient.expand(&self.terms, &mut self.effect_gradients[s * k..(s + 1) * k]);
            }
            if !options.effects {
                continue;
            }
            let (std_error, interval) = match uncertainty {
                Some(u) => {
                    let variance = effect_variance(u, &self.terms, gradient, &mut self.gradient);
                    let se = variance.sqrt();
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
                slot,
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
            self.deviations.clear();
            self.deviations.extend(
                joint
                    .covariates
                    .iter()
                    .zip(&joint.mean)
                    .map(|(&c, m)| values[c].number() - m),
            );
            let mut squared = 0.0;
            for (r, dr) in self.deviations.iter().enumerate() {
                let row = &joint.precision[r * n..(r + 1) * n];
                let inner: f64 = row.iter().zip(&self.deviations).map(|(p, d)| p * d).sum();
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

    /// Each covariate's contribution, measured from the training-mean profile for every kind:
    /// a categorical covariate moves to its training shares, not to its reference level, so
    /// its contribution does not depend on which level the fit took as reference (a choice of
    /// coding, not of data), and without product terms the contributions add up to
    /// z(x) − z(training-mean profile).
    fn compute_contributions(&mut self, model: &Model, values: &[Value]) {
        for (j, (&value, &profile_value)) in values.iter().zip(&model.mean_profile).enumerate() {
            let mut c = 0.0;
            if value != profile_value {
                self.alternative[j] = profile_value;
                for &i in &model.terms_of_covariate[j] {
                    let reference = model.terms[i].value(&self.alternative, &model.level_shares);
                    c += model.coefficients[i] * (self.terms[i] - reference);
                }
                self.alternative[j] = value;
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

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_common_level_keeps_the_quantile_the_approximation_gives() {
        assert_eq!(
            normal_quantile(0.5 + COMMON_LEVEL / 2.0).to_bits(),
            COMMON_LEVEL_QUANTILE.to_bits()
        );
        // scipy.stats.norm.ppf(0.975) = 1.959963984540054; the approximation is within an ulp.
        assert!((COMMON_LEVEL_QUANTILE - 1.959963984540054).abs() <= 4.0 * f64::EPSILON);
        let common = Options::new(COMMON_LEVEL).expect("a valid level");
        assert_eq!(common.quantile().to_bits(), COMMON_LEVEL_QUANTILE.to_bits());
        let other = Options::new(0.9).expect("a valid level");
        assert_eq!(other.quantile().to_bits(), normal_quantile(0.95).to_bits());
    }

    /// The direct quadratic form of the gradient c·t + e (e on `involved`), for comparison.
    fn direct(v: &[f64], t: &[f64], c: f64, involved: &[usize], e: &[f64]) -> f64 {
        let mut g = vec![0.0; t.len()];
        full_gradient(c, t, involved, e, &mut g);
        quadratic_form(v, &g)
    }

    #[test]
    fn expanded_effect_variance_equals_the_direct_quadratic_form() {
        let v = [4.0, 1.0, 0.5, 1.0, 3.0, -0.2, 0.5, -0.2, 2.0];
        let t = [1.0, 2.5, -0.7];
        let mut w = Vec::new();
        let a = symmetric_product(&v, &t, &mut w);
        assert!((a - quadratic_form(&v, &t)).abs() <= 1e-14 * a);
        let mut scratch = [0.0; 3];
        for (c, involved, e) in [
            (0.3, vec![1], vec![0.8]),
            (-1.2, vec![0, 2], vec![0.1, -0.4]),
            (0.0, vec![2], vec![0.25]),
        ] {
            let u = IndexUncertainty {
                covariance: &v,
                covariance_terms: &w,
                index_variance: a,
            };
            let g = SparseGradient {
                c,
                involved: &involved,
                e: &e,
            };
            let fast = effect_variance(u, &t, g, &mut scratch);
            let expected = direct(&v, &t, c, &involved, &e);
            assert!(
                (fast - expected).abs() <= 1e-14 * expected,
                "{fast} vs {expected}"
            );
        }
    }

    #[test]
    fn a_cancelling_effect_variance_falls_back_to_the_direct_form() {
        // ∇ = c·t + e = (1e-9, 0): the expanded form would cancel 1 − 2 + 1 to nothing.
        let v = [1.0, 0.0, 0.0, 1.0];
        let t = [1.0, 0.0];
        let mut w = Vec::new();
        let a = symmetric_product(&v, &t, &mut w);
        let e = [-1.0 + 1e-9];
        let mut scratch = [0.0; 2];
        let u = IndexUncertainty {
            covariance: &v,
            covariance_terms: &w,
            index_variance: a,
        };
        let g = SparseGradient {
            c: 1.0,
            involved: &[0],
            e: &e,
        };
        let variance = effect_variance(u, &t, g, &mut scratch);
        let expected = direct(&v, &t, 1.0, &[0], &e);
        assert!(
            (variance - expected).abs() <= 1e-12 * expected,
            "{variance} vs {expected}"
        );
    }

    #[test]
    fn inline_shapes_give_the_general_term_arithmetic_to_the_bit() {
        let terms = [
            Term::Covariate(0),
            Term::Power(0, 2),
            Term::Product(vec![Factor::Value(0), Factor::Value(1)]),
            Term::Product(vec![Factor::Value(1), Factor::Value(0)]),
        ];
        for x in [-2.7, 0.1, 3.3e-5, 17.25] {
            let values = [Value::Number(x), Value::Number(0.37)];
            for term in &terms {
                let (value, derivative) = match Shape::of(term, 0) {
                    Shape::Linear => (x, 1.0),
                    Shape::Square => (x * x, 2.0 * x),
                    Shape::TimesOther(other) => {
                        (x * values[other].number(), values[other].number())
                    }
                    Shape::General => panic!("{term:?} has an inline shape"),
                };
                assert_eq!(
                    value.to_bits(),
                    term.value(&values, &[]).to_bits(),
                    "{term:?}"
                );
                let general = term.derivative(0, &values, &[]);
                assert_eq!(derivative.to_bits(), general.to_bits(), "{term:?}");
            }
        }
        assert_eq!(Shape::of(&Term::Power(0, 3), 0), Shape::General);
    }

    #[test]
    fn default_quantile_is_the_95_percent_normal_quantile() {
        let fresh = Options::new(0.95).unwrap();
        assert_eq!(fresh, Options::default());
        assert_eq!(
            fresh.quantile().to_bits(),
            Options::default().quantile().to_bits()
        );
        assert!(Options::new(1.0).is_err());
        assert!(Options::new(f64::NAN).is_err());
    }
}
