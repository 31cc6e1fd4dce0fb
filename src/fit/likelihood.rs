//! The Bernoulli log-likelihood of a binary-outcome model with any link, its score and its
//! observed and expected information, per observation and summed over the design.
//!
//! With z = xᵀβ, F, f, f′ the link's probability, density and density derivative, h = f′/f,
//! λ₁ = f/F and λ₀ = f/(1 − F):
//!
//! ```text
//! ℓ(z)            = y·log F + (1 − y)·log(1 − F)
//! ∂ℓ/∂z           = y·λ₁ − (1 − y)·λ₀
//! −∂²ℓ/∂z²        = y·λ₁(λ₁ − h) + (1 − y)·λ₀(λ₀ + h)        (observed information weight)
//! E[−∂²ℓ/∂z²]     = f²/(F(1 − F)) = λ₁·λ₀                      (expected information weight)
//! score           g = Σ (∂ℓ/∂z)ᵢ xᵢ
//! information     H = Σ wᵢ xᵢ xᵢᵀ
//! ```
//!
//! With observation weights vᵢ (a frequency weight counts the row vᵢ times; a sampling weight
//! is the inverse of its selection probability) every sum is weighted: ℓ = Σ vᵢ ℓᵢ,
//! g = Σ vᵢ sᵢ xᵢ, H = Σ vᵢ wᵢ xᵢ xᵢᵀ. The two weightings differ only in the meat of the
//! sandwich covariance:
//!
//! ```text
//! frequency   M = Σ vᵢ sᵢ² xᵢ xᵢᵀ        (vᵢ identical rows, each contributing sᵢ²)
//! sampling    M = Σ (vᵢ sᵢ)² xᵢ xᵢᵀ      (one row standing for vᵢ, its score scaled by vᵢ)
//! ```
//!
//! For logit λ₁ = 1 − F, λ₀ = F and both weights are F(1 − F) (Newton is then IRLS). The ratios
//! are computed in closed form where one exists (logit, the cloglog λ₀ = eᶻ) and otherwise
//! guarded by their asymptotes where F or 1 − F underflows, so a far-out observation gives a
//! large finite score rather than NaN.

use std::cell::RefCell;
use std::f64::consts::PI;

use crate::link::Link;

use super::design::{add_weighted_gram, dot, reduce_rows, symmetrise, Design, Rows};

/// `½·log(2π)`.
const HALF_LN_2PI: f64 = 0.918_938_533_204_672_8;

/// Below this, F or 1 − F is treated as underflowed and the asymptote is used.
const TINY: f64 = 1e-300;

/// `f′/f` for a link.
#[inline]
fn density_ratio(link: Link, z: f64) -> f64 {
    match link {
        Link::Logit => link.complement(z) - link.probability(z),
        Link::Probit => -z,
        Link::Cloglog => 1.0 - z.exp(),
        Link::Cauchit => -2.0 * z / (1.0 + z * z),
    }
}

/// `λ₁ = f/F`.
#[inline]
fn ratio_one(link: Link, z: f64) -> f64 {
    match link {
        Link::Logit => link.complement(z),
        _ => {
            let p = link.probability(z);
            if p > TINY {
                link.density(z) / p
            } else {
                match link {
                    // Mills ratio: φ(z)/Φ(z) → −z as z → −∞.
                    Link::Probit => -z,
                    // F ≈ f ≈ eᶻ as z → −∞.
                    Link::Cloglog => 1.0,
                    _ => 1.0 / z.abs(),
                }
            }
        }
    }
}

/// `λ₀ = f/(1 − F)`.
#[inline]
fn ratio_zero(link: Link, z: f64) -> f64 {
    match link {
        Link::Logit => link.probability(z),
        Link::Cloglog => z.exp(),
        _ => {
            let q = link.complement(z);
            if q > TINY {
                link.density(z) / q
            } else {
                match link {
                    Link::Probit => z,
                    _ => 1.0 / z.abs(),
                }
            }
        }
    }
}

/// `log F(z)`, with the asymptote where F underflows.
#[inline]
pub fn log_probability(link: Link, z: f64) -> f64 {
    let value = link.log_probability(z);
    if value.is_finite() {
        return value;
    }
    match link {
        Link::Probit => -0.5 * z * z - (-z).ln() - HALF_LN_2PI,
        Link::Cloglog => z,
        Link::Cauchit => -(PI * z.abs()).ln(),
        Link::Logit => value,
    }
}

/// `log(1 − F(z))`, with the asymptote where 1 − F underflows.
#[inline]
pub fn log_complement(link: Link, z: f64) -> f64 {
    let value = link.log_complement(z);
    if value.is_finite() {
        return value;
    }
    match link {
        Link::Probit => -0.5 * z * z - z.ln() - HALF_LN_2PI,
        Link::Cauchit => -(PI * z.abs()).ln(),
        Link::Logit | Link::Cloglog => value,
    }
}

/// One observation's contribution.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Pointwise {
    /// ℓ.
    pub log_likelihood: f64,
    /// ∂ℓ/∂z.
    pub score: f64,
    /// −∂²ℓ/∂z².
    pub observed_weight: f64,
    /// E[−∂²ℓ/∂z²].
    pub expected_weight: f64,
}

/// `log(1 + x)` for `0 ≤ x ≤ 1` from one `ln`: with u = 1 + x rounded, the correction
/// `((u − 1) − x)/u` removes the rounding of u (accurate to a few ulps, and cheaper than
/// `ln_1p`).
#[inline]
fn log_one_plus(x: f64) -> f64 {
    let u = 1.0 + x;
    if u == 1.0 {
        x
    } else {
        u.ln() - ((u - 1.0) - x) / u
    }
}

/// The logit contribution from one exponential and one `log1p`: with e = exp(−|z|),
///
/// ```text
/// F(|z|) = 1/(1+e)   1 − F(|z|) = e/(1+e)   log F = min(z, 0) − log1p(e)
/// log(1 − F) = −max(z, 0) − log1p(e)        w = F(1 − F)    s = y − F
/// ```
///
/// written with selects rather than branches: the signs of z and the outcomes are as good as
/// random over a data set, so branches on them would be mispredicted half the time.
#[inline]
fn logit_pointwise(z: f64, y: f64) -> Pointwise {
    let e = (-z.abs()).exp();
    let near = 1.0 / (1.0 + e);
    let far = e * near;
    let positive = z >= 0.0;
    let p = if positive { near } else { far };
    let q = if positive { far } else { near };
    let one = y > 0.5;
    let beyond = if one { (-z).max(0.0) } else { z.max(0.0) };
    let w = p * q;
    Pointwise {
        log_likelihood: -log_one_plus(e) - beyond,
        score: if one { q } else { -p },
        observed_weight: w,
        expected_weight: w,
    }
}

/// The contribution of one observation with index `z` and outcome `y` (0 or 1).
#[inline]
pub fn pointwise(link: Link, z: f64, y: f64) -> Pointwise {
    if link == Link::Logit {
        return logit_pointwise(z, y);
    }
    let one = ratio_one(link, z);
    let zero = ratio_zero(link, z);
    let h = density_ratio(link, z);
    if y > 0.5 {
        Pointwise {
            log_likelihood: log_probability(link, z),
            score: one,
            observed_weight: one * (one - h),
            expected_weight: one * zero,
        }
    } else {
        Pointwise {
            log_likelihood: log_complement(link, z),
            score: -zero,
            observed_weight: zero * (zero + h),
            expected_weight: one * zero,
        }
    }
}

/// Which matrix a pass accumulates beside the log-likelihood and the score.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Matrix {
    /// None: the log-likelihood and score only.
    None,
    /// The observed information `Σ wᵢ xᵢ xᵢᵀ` (the negative Hessian).
    Observed,
    /// The expected (Fisher) information.
    Expected,
    /// The outer product of the scores `Σ vᵢ sᵢ² xᵢ xᵢᵀ` (the meat of the HC0 sandwich,
    /// with frequency weights vᵢ or none).
    ScoreOuter,
    /// The outer product of the weighted scores `Σ (vᵢ sᵢ)² xᵢ xᵢᵀ` (the meat of the HC0
    /// sandwich with sampling weights vᵢ).
    WeightedScoreOuter,
}

/// Sums over the design at one β.
#[derive(Debug, Clone, PartialEq)]
pub struct Sums {
    /// Σ ℓᵢ.
    pub log_likelihood: f64,
    /// The score vector.
    pub gradient: Vec<f64>,
    /// The requested matrix, row-major `k × k` (empty for [`Matrix::None`]).
    pub matrix: Vec<f64>,
}

/// One thread's working runs for a pass: the index, score and matrix weight of each row of a
/// block, and the weighted run the information matrix is summed from.
#[derive(Default)]
struct PassScratch {
    index: Vec<f64>,
    scores: Vec<f64>,
    weights: Vec<f64>,
    run: Vec<f64>,
}

thread_local! {
    static PASS_SCRATCH: RefCell<PassScratch> = RefCell::new(PassScratch::default());
}

/// The linear indices `xᵢᵀβ` of some rows, into `out`, the terms added in order.
pub fn indices_of(rows: Rows<'_>, beta: &[f64], out: &mut Vec<f64>) {
    out.clear();
    out.resize(rows.len(), 0.0);
    for (j, &b) in beta.iter().enumerate() {
        for (z, &x) in out.iter_mut().zip(rows.column(j)) {
            *z += x * b;
        }
    }
}

/// Accumulate the log-likelihood, the score and the requested matrix at `beta`, with each
/// observation weighted by `weights[i]` (1 without weights), in one pass over the design.
pub fn accumulate(
    design: &Design,
    outcome: &[f64],
    weights: Option<&[f64]>,
    link: Link,
    beta: &[f64],
    matrix: Matrix,
) -> Sums {
    let k = design.columns();
    let size = if matrix == Matrix::None { 0 } else { k * k };
    let mut sums = reduce_rows(
        design.rows(),
        || Sums {
            log_likelihood: 0.0,
            gradient: vec![0.0; k],
            matrix: vec![0.0; size],
        },
        |acc, range| {
            PASS_SCRATCH.with(|scratch| {
                let scratch = &mut *scratch.borrow_mut();
                let rows = design.rows_of(range.clone());
                indices_of(rows, beta, &mut scratch.index);
                scratch.scores.clear();
                scratch.weights.clear();
                let outcome = &outcome[range.clone()];
                let block_weights = weights.map(|w| &w[range.clone()]);
                for (r, (&z, &y)) in scratch.index.iter().zip(outcome).enumerate() {
                    let v = block_weights.map_or(1.0, |w| w[r]);
                    if v == 0.0 {
                        // A zero weight removes the row, even where its terms are extreme.
                        scratch.scores.push(0.0);
                        scratch.weights.push(0.0);
                        continue;
                    }
                    let p = pointwise(link, z, y);
                    acc.log_likelihood += v * p.log_likelihood;
                    let score = v * p.score;
                    scratch.scores.push(score);
                    scratch.weights.push(match matrix {
                        Matrix::None => 0.0,
                        Matrix::Observed => v * p.observed_weight,
                        Matrix::Expected => v * p.expected_weight,
                        Matrix::ScoreOuter => v * p.score * p.score,
                        Matrix::WeightedScoreOuter => score * score,
                    });
                }
                for (j, g) in acc.gradient.iter_mut().enumerate() {
                    *g += dot(&scratch.scores, rows.column(j));
                }
                if size > 0 {
                    add_weighted_gram(
                        &mut acc.matrix,
                        rows,
                        Some(&scratch.weights),
                        &mut scratch.run,
                    );
                }
            })
        },
        |total, part| {
            total.log_likelihood += part.log_likelihood;
            total
                .gradient
                .iter_mut()
                .zip(part.gradient)
                .for_each(|(t, p)| *t += p);
            total
                .matrix
                .iter_mut()
                .zip(part.matrix)
                .for_each(|(t, p)| *t += p);
        },
    );
    if size > 0 {
        symmetrise(&mut sums.matrix, k);
    }
    sums
}

/// The log-likelihood of the constant-probability model: with n the sum of the weights (the
/// number of rows without weights) and ȳ the weighted share of ones,
///
/// ```text
/// ℓ₀ = n·(ȳ·log ȳ + (1 − ȳ)·log(1 − ȳ))
/// ```
///
/// the maximum over a single intercept whatever the link (every link reaches every p).
pub fn null_log_likelihood(outcome: &[f64], weights: Option<&[f64]>) -> f64 {
    let (n, ones) = match weights {
        Some(w) => (
            w.iter().sum::<f64>(),
            outcome.iter().zip(w).map(|(y, v)| y * v).sum::<f64>(),
        ),
        None => (outcome.len() as f64, outcome.iter().sum()),
    };
    let zeros = n - ones;
    let term = |count: f64| {
        if count > 0.0 {
            count * (count / n).ln()
        } else {
            0.0
        }
    };
    term(ones) + term(zeros)
}

/// The index `F⁻¹(p)` at which the link gives probability `p` (for the starting intercept).
pub fn quantile(link: Link, p: f64) -> f64 {
    match link {
        Link::Logit => (p / (1.0 - p)).ln(),
        Link::Probit => crate::link::normal_quantile(p),
        Link::Cloglog => (-(-p).ln_1p()).ln(),
        Link::Cauchit => (PI * (p - 0.5)).tan(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::link::ALL_LINKS;

    /// Identity: the score is the derivative of ℓ and the observed weight minus its derivative,
    /// checked by central differences (step 1e-5, relative 1e-6).
    #[test]
    fn score_and_weight_are_derivatives_of_the_log_likelihood() {
        for link in ALL_LINKS {
            for &z in &[-4.0, -1.3, -0.2, 0.0, 0.7, 2.5, 5.0] {
                for &y in &[0.0, 1.0] {
                    let step = 1e-5;
                    let p = pointwise(link, z, y);
                    let up = pointwise(link, z + step, y);
                    let down = pointwise(link, z - step, y);
                    let score = (up.log_likelihood - down.log_likelihood) / (2.0 * step);
                    let weight = -(up.score - down.score) / (2.0 * step);
                    let close = |a: f64, b: f64| (a - b).abs() <= 1e-6 * (1.0 + b.abs());
                    assert!(
                        close(p.score, score),
                        "{link} z={z} y={y}: {} vs {score}",
                        p.score
                    );
                    assert!(
                        close(p.observed_weight, weight),
                        "{link} z={z} y={y}: {} vs {weight}",
                        p.observed_weight
                    );
                }
            }
        }
    }

    /// The cheap `log(1 + x)` against `ln_1p` (relative 1e-15) over (0, 1].
    #[test]
    fn log_one_plus_matches_ln_1p() {
        for i in 0..=10_000 {
            let x = if i == 0 {
                1e-300
            } else {
                (f64::from(i) / 10_000.0).powi(3)
            };
            let (ours, std) = (log_one_plus(x), x.ln_1p());
            assert!(
                (ours - std).abs() <= 1e-15 * std,
                "x = {x}: {ours} vs {std}"
            );
        }
    }

    #[test]
    fn far_tails_stay_finite() {
        for link in ALL_LINKS {
            for &z in &[-60.0, -800.0, 60.0, 800.0] {
                for &y in &[0.0, 1.0] {
                    let p = pointwise(link, z, y);
                    // cloglog's 1 − F = exp(−eᶻ) is genuinely beyond f64 there.
                    if link == Link::Cloglog && z > 700.0 && y == 0.0 {
                        continue;
                    }
                    assert!(p.log_likelihood.is_finite(), "{link} z={z} y={y}: {p:?}");
                    assert!(p.score.is_finite(), "{link} z={z} y={y}: {p:?}");
                }
            }
        }
    }

    #[test]
    fn quantile_inverts_each_link() {
        for link in ALL_LINKS {
            for &p in &[0.05, 0.3, 0.5, 0.9] {
                assert!((link.probability(quantile(link, p)) - p).abs() < 1e-12);
            }
        }
    }
}
