//! Identities the engine must satisfy for any model and observation, checked on random ones
//! with proptest: random link; continuous, count, binary and categorical covariates; squares,
//! logs of positive covariates, products of covariates and of a covariate with a level
//! indicator; a random positive semi-definite covariance (full rank or not).
//!
//! * the analytic derivative effect equals a five-point central difference of the probability,
//!   and the elasticity equals a difference quotient of log p in log x;
//! * the delta-method standard errors equal those built from a numerical Jacobian of the
//!   probability and of each effect with respect to β (β perturbed directly on a copy of the
//!   model), both with the model's covariance and with a rank-one covariance uuᵀ (which turns
//!   the standard error into the directional derivative |uᵀ∇|);
//! * the probability lies in [0, 1] and inside its interval, which lies in [0, 1];
//! * a discrete change equals the difference of two probabilities computed separately;
//! * an average effect over a batch equals the mean of the per-observation effects, and its
//!   standard error the one built from the numerical Jacobian of that mean.
//!
//! And two facts of the trade (common practice): a logit effect at p = ½ is β/4; a probit
//! effect at p = ½ is β/√(2π) ≈ 0.3989·β.

mod support;

use ogive::engine::{Averager, EffectKind, Options, Scorer};
use ogive::link::{Link, ALL_LINKS};
use ogive::model::{CovariateKind, Model, Value};
use proptest::prelude::*;
use rand::rngs::StdRng;
use rand::{Rng, SeedableRng};
use support::close::assert_close;
use support::reference::{CovariatePart, ModelParts};
use support::tolerances::{
    CLOSED_FORM, EFFECT_SCALE, FINITE_DIFFERENCE, NUMERICAL_JACOBIAN, ROUNDING, STD_ERROR_SCALE,
};

/// The shape of a random model: which covariates and terms it has. The numbers (coefficients,
/// covariance, observations) are drawn from `seed`, so a failing case is reproducible from the
/// printed plan.
#[derive(Debug, Clone)]
struct Plan {
    link: Link,
    intercept: bool,
    /// One entry per continuous covariate: (strictly positive training range, square, log).
    continuous: Vec<(bool, bool, bool)>,
    /// One entry per count covariate: whether it also has a square.
    counts: Vec<bool>,
    binaries: usize,
    /// One entry per categorical covariate: (number of levels, reference level).
    categoricals: Vec<(usize, usize)>,
    /// Products, as pairs of indices into the pool of possible factors (taken modulo its size).
    products: Vec<(usize, usize)>,
    /// Rank of the covariance as a fraction of the number of terms (1 = full rank).
    covariance_rank: f64,
    seed: u64,
}

fn plan() -> impl Strategy<Value = Plan> {
    (
        prop::sample::select(ALL_LINKS.to_vec()),
        prop::bool::weighted(0.85),
        prop::collection::vec((any::<bool>(), any::<bool>(), any::<bool>()), 1..=3),
        prop::collection::vec(any::<bool>(), 0..=2),
        0usize..=2,
        prop::collection::vec((2usize..=4, 0usize..4), 0..=2),
        prop::collection::vec((0usize..64, 0usize..64), 0..=3),
        prop::sample::select(vec![1.0, 1.0, 0.5]),
        any::<u64>(),
    )
        .prop_map(
            |(
                link,
                intercept,
                continuous,
                counts,
                binaries,
                categoricals,
                products,
                rank,
                seed,
            )| {
                Plan {
                    link,
                    intercept,
                    continuous,
                    counts,
                    binaries,
                    categoricals: categoricals
                        .into_iter()
                        .map(|(levels, reference)| (levels, reference % levels))
                        .collect(),
                    products,
                    covariance_rank: rank,
                    seed,
                }
            },
        )
}

/// A random model and the means to draw observations for it.
struct Case {
    parts: ModelParts,
    model: Model,
    rng: StdRng,
}

/// A factor a product may use: a numeric covariate's name or a level indicator.
fn factor_pool(covariates: &[CovariatePart]) -> Vec<String> {
    let mut pool = Vec::new();
    for c in covariates {
        match c.kind {
            CovariateKind::Categorical => {
                let reference = c.reference.as_deref().unwrap_or_default();
                for l in c.levels.iter().filter(|l| l.as_str() != reference) {
                    pool.push(format!("{}={l}", c.name));
                }
            }
            _ => pool.push(c.name.clone()),
        }
    }
    pool
}

fn build(plan: &Plan) -> Case {
    let mut rng = StdRng::seed_from_u64(plan.seed);
    let mut covariates = Vec::new();
    let mut terms: Vec<(String, f64)> = Vec::new();
    let coefficient = |rng: &mut StdRng, scale: f64| rng.gen_range(-1.0..1.0) * scale;
    if plan.intercept {
        terms.push(("intercept".into(), coefficient(&mut rng, 1.0)));
    }
    for (i, &(positive, square, log)) in plan.continuous.iter().enumerate() {
        let name = format!("c{i}");
        let (min, max, mean) = if positive {
            (0.2, 5.0, 1.5)
        } else {
            (-2.0, 3.0, 0.3)
        };
        covariates.push(CovariatePart::numeric(
            &name,
            CovariateKind::Continuous,
            min,
            max,
            mean,
        ));
        terms.push((name.clone(), coefficient(&mut rng, 0.8)));
        if square {
            terms.push((format!("{name}^2"), coefficient(&mut rng, 0.2)));
        }
        if positive && log {
            terms.push((format!("log({name})"), coefficient(&mut rng, 0.8)));
        }
    }
    for (i, &square) in plan.counts.iter().enumerate() {
        let name = format!("n{i}");
        covariates.push(CovariatePart::numeric(
            &name,
            CovariateKind::Count,
            0.0,
            8.0,
            2.0,
        ));
        terms.push((name.clone(), coefficient(&mut rng, 0.3)));
        if square {
            terms.push((format!("{name}^2"), coefficient(&mut rng, 0.05)));
        }
    }
    for i in 0..plan.binaries {
        let name = format!("b{i}");
        covariates.push(CovariatePart::numeric(
            &name,
            CovariateKind::Binary,
            0.0,
            1.0,
            0.4,
        ));
        terms.push((name, coefficient(&mut rng, 1.0)));
    }
    for (i, &(levels, reference)) in plan.categoricals.iter().enumerate() {
        let name = format!("g{i}");
        let names: Vec<String> = (0..levels).map(|l| format!("l{l}")).collect();
        let refs: Vec<&str> = names.iter().map(String::as_str).collect();
        let counts: Vec<u64> = (0..levels).map(|_| rng.gen_range(1..50)).collect();
        let part = CovariatePart::categorical(&name, &refs, refs[reference], &counts);
        for l in names.iter().filter(|l| **l != names[reference]) {
            terms.push((format!("{name}={l}"), coefficient(&mut rng, 1.0)));
        }
        covariates.push(part);
    }
    let pool = factor_pool(&covariates);
    for &(a, b) in &plan.products {
        let (a, b) = (&pool[a % pool.len()], &pool[b % pool.len()]);
        let base = |f: &str| f.split('[').next().unwrap_or_default().to_string();
        let label = format!("{a}*{b}");
        if base(a) != base(b) && !terms.iter().any(|(t, _)| *t == label) {
            terms.push((label, coefficient(&mut rng, 0.3)));
        }
    }
    let k = terms.len();
    let rank = ((k as f64 * plan.covariance_rank).ceil() as usize).max(1);
    let factor: Vec<Vec<f64>> = (0..k)
        .map(|_| (0..rank).map(|_| rng.gen_range(-0.3..0.3)).collect())
        .collect();
    let covariance = (0..k)
        .map(|r| {
            (0..k)
                .map(|c| (0..rank).map(|i| factor[r][i] * factor[c][i]).sum())
                .collect()
        })
        .collect();
    let parts = ModelParts {
        name: "property".into(),
        link: plan.link,
        covariates,
        terms,
        covariance: Some(covariance),
        check_cases: Vec::new(),
        provenance: format!("{plan:?}"),
    };
    Case {
        model: parts.model(),
        parts,
        rng,
    }
}

impl Case {
    /// A random observation, sometimes outside the training ranges (positive covariates stay
    /// positive, counts whole).
    fn observation(&mut self) -> Vec<Value> {
        let rng = &mut self.rng;
        self.model
            .covariates()
            .iter()
            .map(|c| match c.kind() {
                CovariateKind::Continuous if c.training_min() > 0.0 => {
                    Value::Number(rng.gen_range(0.1..6.0))
                }
                CovariateKind::Continuous => Value::Number(rng.gen_range(-3.0..4.0)),
                CovariateKind::Count => Value::Number(f64::from(rng.gen_range(0u8..=10))),
                CovariateKind::Binary => Value::Number(f64::from(rng.gen_range(0u8..=1))),
                CovariateKind::Categorical => Value::Level(rng.gen_range(0..c.levels().len())),
            })
            .collect()
    }
}

fn options() -> Options {
    let mut options = Options::new(0.9).expect("level");
    options.elasticities = true;
    options
}

/// F, or −(1 − F) (same slope) when the index at the centre of the stencil is positive: the
/// side where the difference quotient keeps its digits. The side is chosen once per stencil,
/// never per point, so a stencil that straddles z = 0 stays on one curve.
fn smooth_probability(model: &Model, values: &[Value], upper_side: bool) -> f64 {
    let z = model.linear_index_of(values);
    if upper_side {
        -model.link().complement(z)
    } else {
        model.link().probability(z)
    }
}

/// Five-point central difference of `f` at `x` with step `h`.
fn five_point(f: impl Fn(f64) -> f64, x: f64, h: f64) -> f64 {
    (f(x - 2.0 * h) - 8.0 * f(x - h) + 8.0 * f(x + h) - f(x + 2.0 * h)) / (12.0 * h)
}

/// √(gᵀVg) for a row-major covariance.
fn std_error_of(covariance: &[f64], gradient: &[f64]) -> f64 {
    let k = gradient.len();
    let mut total = 0.0;
    for r in 0..k {
        for c in 0..k {
            total += gradient[r] * covariance[r * k + c] * gradient[c];
        }
    }
    total.max(0.0).sqrt()
}

/// The numerical Jacobian, with respect to each coefficient, of the vector `quantities(model)`,
/// each perturbed model rebuilt from its parts through `Model::from_file`. Row `i` is ∂/∂βᵢ.
///
/// βᵢ moves the index by tᵢ per unit, so its step is scaled down by the largest |tᵢ| among
/// the observations (a count squared reaches 100): the stencil's truncation error depends on
/// h·tᵢ, not on h.
fn numerical_jacobian(
    parts: &ModelParts,
    observations: &[Vec<Value>],
    quantities: impl Fn(&Model) -> Vec<f64>,
) -> Vec<Vec<f64>> {
    let model = parts.model();
    let mut t = Vec::new();
    let mut largest = vec![1.0_f64; parts.terms.len()];
    for values in observations {
        model.term_vector(values, &mut t);
        for (l, ti) in largest.iter_mut().zip(&t) {
            *l = l.max(ti.abs());
        }
    }
    (0..parts.terms.len())
        .map(|i| {
            let beta = parts.terms[i].1;
            let h = 1e-4 * beta.abs().max(1.0) / largest[i];
            let at = |step: f64| {
                let mut perturbed = parts.clone();
                perturbed.terms[i].1 = beta + step;
                quantities(&perturbed.model())
            };
            let (m2, m1, p1, p2) = (at(-2.0 * h), at(-h), at(h), at(2.0 * h));
            (0..m1.len())
                .map(|q| (m2[q] - 8.0 * m1[q] + 8.0 * p1[q] - p2[q]) / (12.0 * h))
                .collect()
        })
        .collect()
}

/// Probability followed by every effect, from a fresh score. With `upper_side` the first
/// entry is −(1 − p) instead of p: the same slope in β, without the rounding of p near 1
/// (where p's last bit is worth more than its whole change over a difference step). The side
/// is fixed from the unperturbed model, so every point of a stencil uses the same one.
fn probability_and_effects(model: &Model, values: &[Value], upper_side: bool) -> Vec<f64> {
    let mut scorer = Scorer::new(model);
    let mut no_intervals = options();
    no_intervals.intervals = false;
    let answer = scorer.score(model, values, &no_intervals);
    let probability = if upper_side {
        -answer.complement
    } else {
        answer.probability
    };
    std::iter::once(probability)
        .chain(answer.effects.iter().map(|e| e.effect))
        .collect()
}

/// Compare engine standard errors with those of a numerical Jacobian (column q of `jacobian`
/// is the gradient of quantity q), under the model's covariance.
///
/// The difference quotients carry an error relative to each gradient entry, so the comparison
/// is relative to the size the standard error would have without cancellation between entries,
/// √(|∇|ᵀ|V||∇|) (entrywise absolute values), when that is the larger: under a rank-one V the
/// standard error |uᵀ∇| can be far smaller than its terms.
fn check_std_errors(model: &Model, jacobian: &[Vec<f64>], engine: &[f64], what: &str) {
    let covariance = model.covariance().expect("covariance");
    let absolute: Vec<f64> = covariance.iter().map(|v| v.abs()).collect();
    for (q, &se) in engine.iter().enumerate() {
        let gradient: Vec<f64> = jacobian.iter().map(|row| row[q]).collect();
        let numeric = std_error_of(covariance, &gradient);
        let magnitudes: Vec<f64> = gradient.iter().map(|g| g.abs()).collect();
        let scale = std_error_of(&absolute, &magnitudes).max(STD_ERROR_SCALE);
        let what = format!("{what}, quantity {q}: delta-method se vs numerical Jacobian");
        assert_close(se, numeric, NUMERICAL_JACOBIAN, scale, what);
    }
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(128))]

    #[test]
    fn derivative_effect_is_the_slope_of_the_probability(plan in plan()) {
        let mut case = build(&plan);
        let model = case.model.clone();
        let mut scorer = Scorer::new(&model);
        for _ in 0..4 {
            let values = case.observation();
            let answer = scorer.score(&model, &values, &options()).clone();
            for effect in &answer.effects {
                if effect.slot.kind != EffectKind::Derivative {
                    continue;
                }
                let j = effect.slot.covariate;
                let x = values[j].number();
                let h = 1e-4 * x.abs().max(1.0);
                let upper_side = answer.linear_index > 0.0;
                let at = |v: f64| {
                    let mut shifted = values.clone();
                    shifted[j] = Value::Number(v);
                    smooth_probability(&model, &shifted, upper_side)
                };
                let slope = five_point(at, x, h);
                let what = format!("d p / d {} at {values:?}", model.covariates()[j].name());
                assert_close(effect.effect, slope, FINITE_DIFFERENCE, EFFECT_SCALE, what);
                if model.covariates()[j].kind() == CovariateKind::Continuous {
                    // d log p / d log x = x·(dp/dx)/p. Turned back into a slope it must match
                    // the difference quotient as the effect does: compared as an elasticity, the
                    // factor x/p (hundreds where p is small) would magnify the quotient's own
                    // truncation error past the tolerance.
                    let elasticity = effect.elasticity.expect("elasticity asked for");
                    if x != 0.0 {
                        let as_slope = elasticity * answer.probability / x;
                        let what = "elasticity·p/x vs the difference quotient";
                        assert_close(as_slope, slope, FINITE_DIFFERENCE, EFFECT_SCALE, what);
                    }
                    let what = "elasticity vs effect·x/p";
                    let definition = effect.effect * x / answer.probability;
                    assert_close(elasticity, definition, ROUNDING, EFFECT_SCALE, what);
                } else {
                    prop_assert!(effect.elasticity.is_none());
                }
            }
        }
    }

    #[test]
    fn delta_method_errors_match_a_numerical_jacobian(plan in plan()) {
        let mut case = build(&plan);
        let model = case.model.clone();
        let values = case.observation();
        let mut scorer = Scorer::new(&model);
        let answer = scorer.score(&model, &values, &options()).clone();
        let engine: Vec<f64> = std::iter::once(answer.std_error)
            .chain(answer.effects.iter().map(|e| e.std_error))
            .map(|se| se.expect("the model has a covariance"))
            .collect();
        let observation = std::slice::from_ref(&values);
        let jacobian =
            numerical_jacobian(&case.parts, observation, |m| {
                probability_and_effects(m, &values, answer.linear_index > 0.0)
            });
        check_std_errors(&model, &jacobian, &engine, "full covariance");

        // A rank-one covariance uuᵀ makes each standard error the directional derivative
        // |uᵀ∇| of its quantity, so the gradient itself is checked along u, not only its norm.
        let k = model.coefficients().len();
        let u: Vec<f64> = (0..k).map(|_| case.rng.gen_range(-1.0..1.0)).collect();
        let mut parts = case.parts.clone();
        parts.covariance = Some(u.iter().map(|a| u.iter().map(|b| a * b).collect()).collect());
        let rank_one = parts.model();
        let answer = Scorer::new(&rank_one).score(&rank_one, &values, &options()).clone();
        let engine: Vec<f64> = std::iter::once(answer.std_error)
            .chain(answer.effects.iter().map(|e| e.std_error))
            .map(|se| se.expect("covariance"))
            .collect();
        check_std_errors(&rank_one, &jacobian, &engine, "rank-one covariance");
    }

    #[test]
    fn probability_lies_in_its_interval_and_in_the_unit_interval(plan in plan()) {
        let mut case = build(&plan);
        let model = case.model.clone();
        let mut scorer = Scorer::new(&model);
        for _ in 0..8 {
            let values = case.observation();
            let a = scorer.score(&model, &values, &options());
            let p = a.probability;
            let interval = a.interval.expect("interval");
            prop_assert!((0.0..=1.0).contains(&p), "p = {p}");
            prop_assert!(0.0 <= interval.lower && interval.upper <= 1.0, "{interval:?}");
            prop_assert!(interval.lower <= p && p <= interval.upper, "{p} not in {interval:?}");
            prop_assert!(a.std_error.expect("se") >= 0.0);
            assert_close(p + a.complement, 1.0, ROUNDING, 1.0, "p + (1 − p)");
            for e in &a.effects {
                let i = e.interval.expect("effect interval");
                prop_assert!(i.lower <= e.effect && e.effect <= i.upper);
                prop_assert!(e.effect.abs() <= 1.0 + ROUNDING || e.slot.kind == EffectKind::Derivative);
            }
        }
    }

    #[test]
    fn discrete_change_is_a_difference_of_two_probabilities(plan in plan()) {
        let mut case = build(&plan);
        let model = case.model.clone();
        let mut scorer = Scorer::new(&model);
        for _ in 0..4 {
            let values = case.observation();
            let a = scorer.score(&model, &values, &options());
            for e in &a.effects {
                let j = e.slot.covariate;
                let (to, from) = match e.slot.kind {
                    EffectKind::Derivative => continue,
                    EffectKind::DiscreteChange => (Value::Number(1.0), Value::Number(0.0)),
                    EffectKind::LevelChange => (
                        Value::Level(e.slot.level.expect("level")),
                        Value::Level(model.covariates()[j].reference()),
                    ),
                };
                let probability_with = |v: Value| {
                    let mut changed = values.clone();
                    changed[j] = v;
                    Scorer::probability(&model, &changed)
                };
                let (high, low) = (probability_with(to), probability_with(from));
                let what = format!("change in {}: F(to) − F(from)", model.covariates()[j].name());
                assert_close(e.effect, high - low, ROUNDING, high.max(low), what);
            }
        }
    }

    #[test]
    fn average_effect_is_the_mean_of_the_effects(plan in plan(), n in 1usize..=12) {
        let mut case = build(&plan);
        let model = case.model.clone();
        let batch: Vec<Vec<Value>> = (0..n).map(|_| case.observation()).collect();
        let options = options();
        let mut scorer = Scorer::new(&model);
        let mut averager = Averager::new(&model, scorer.slots().len());
        let mut sums = vec![0.0; scorer.slots().len() + 1];
        for values in &batch {
            let a = scorer.score_and_average(&model, values, &options, &mut averager);
            sums[0] += a.probability;
            for (s, e) in sums[1..].iter_mut().zip(&a.effects) {
                *s += e.effect;
            }
        }
        prop_assert_eq!(averager.count(), n as u64);
        let (probability, effects) = averager.finish(&model, scorer.slots(), &options);
        let means: Vec<f64> = sums.iter().map(|s| s / n as f64).collect();
        assert_close(probability.value, means[0], ROUNDING, EFFECT_SCALE, "average p");
        for (a, mean) in effects.iter().zip(&means[1..]) {
            let what = "average effect vs mean of effects";
            assert_close(a.value, *mean, ROUNDING, EFFECT_SCALE, what);
        }
        let jacobian = numerical_jacobian(&case.parts, &batch, |m| {
            let mut total = vec![0.0; means.len()];
            for values in &batch {
                let upper_side = model.linear_index_of(values) > 0.0;
                for (t, q) in total.iter_mut().zip(probability_and_effects(m, values, upper_side)) {
                    *t += q / n as f64;
                }
            }
            total
        });
        let engine: Vec<f64> = std::iter::once(&probability)
            .chain(&effects)
            .map(|a| a.std_error.expect("se"))
            .collect();
        check_std_errors(&model, &jacobian, &engine, "average over the batch");
    }

    #[test]
    fn logit_effect_at_even_odds_is_a_quarter_of_the_coefficient(
        beta in -5.0f64..5.0,
        intercept in -3.0f64..3.0,
    ) {
        // Common practice: the logistic density peaks at 1/4, so at p = 1/2 a logit effect is
        // β/4; and a probit effect there is β·φ(0) = β/√(2π) ≈ 0.3989·β.
        prop_assume!(beta.abs() > 1e-3);
        for (link, peak) in [
            (Link::Logit, 0.25),
            (Link::Probit, 1.0 / (2.0 * std::f64::consts::PI).sqrt()),
        ] {
            let model = ModelParts {
                name: "even-odds".into(),
                link,
                covariates: vec![CovariatePart::numeric("x", CovariateKind::Continuous, -10.0, 10.0, 0.0)],
                terms: vec![("intercept".into(), intercept), ("x".into(), beta)],
                covariance: None,
                check_cases: Vec::new(),
                provenance: "common practice".into(),
            }
            .model();
            // x = −β₀/β puts the index at 0 up to one rounding.
            let values = [Value::Number(-intercept / beta)];
            let a = Scorer::new(&model).score(&model, &values, &options()).clone();
            assert_close(a.probability, 0.5, ROUNDING, 1.0, "p at z = 0");
            prop_assert!(a.std_error.is_none() && a.effects[0].std_error.is_none());
            let what = "β·f(0) [common practice]";
            assert_close(a.effects[0].effect, peak * beta, CLOSED_FORM, 0.0, what);
        }
    }
}
