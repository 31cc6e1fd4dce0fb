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

use std::f64::consts::PI;

use crate::link::{Link, LinkValues};

use super::design::{reduce_rows, symmetrise, Design, Rows};
use super::kernel::{add_gram_chunk, add_packed_to, add_products, total, wide, CHUNK, LANES};

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

/// `λ₁ = f/F`, from the link's values at z.
#[inline]
fn ratio_one(link: Link, z: f64, values: &LinkValues) -> f64 {
    match link {
        Link::Logit => values.complement,
        _ => {
            let p = values.probability;
            if p > TINY {
                values.density / p
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

/// `λ₀ = f/(1 − F)`, from the link's values at z.
#[inline]
fn ratio_zero(link: Link, z: f64, values: &LinkValues) -> f64 {
    match link {
        Link::Logit => values.probability,
        Link::Cloglog => z.exp(),
        _ => {
            let q = values.complement;
            if q > TINY {
                values.density / q
            } else {
                match link {
                    Link::Probit => z,
                    _ => 1.0 / z.abs(),
                }
            }
        }
    }
}

/// The asymptote of `log F(z)` where `value`, the link's own, is not finite.
#[inline]
fn log_probability_from(link: Link, z: f64, value: f64) -> f64 {
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

/// The asymptote of `log(1 − F(z))` where `value`, the link's own, is not finite.
#[inline]
fn log_complement_from(link: Link, z: f64, value: f64) -> f64 {
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
    // One evaluation of the link gives F, 1 − F and f for every term below (the link's own
    // log F is log of its F, and log(1 − F) that of its 1 − F but for cloglog's −eᶻ).
    let values = link.evaluate(z);
    let one = ratio_one(link, z, &values);
    let zero = ratio_zero(link, z, &values);
    let h = density_ratio(link, z);
    if y > 0.5 {
        Pointwise {
            log_likelihood: log_probability_from(link, z, values.probability.ln()),
            score: one,
            observed_weight: one * (one - h),
            expected_weight: one * zero,
        }
    } else {
        Pointwise {
            log_likelihood: log_complement_from(
                link,
                z,
                match link {
                    Link::Cloglog => -z.exp(),
                    _ => values.complement.ln(),
                },
            ),
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
    /// Every row's index `xᵢᵀβ`, in row order, when the pass keeps it (else empty).
    pub index: Vec<f64>,
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

/// What one pass computes, and where.
#[derive(Clone, Copy)]
struct Pass<'a> {
    outcome: &'a [f64],
    weights: Option<&'a [f64]>,
    link: Link,
    beta: &'a [f64],
    matrix: Matrix,
    keep_index: bool,
}

/// One block of a pass, chunk by chunk (see [`super::kernel`]): the index, the pointwise terms,
/// the score and the lower triangle of the matrix of each chunk while its rows are in cache.
#[inline(always)]
fn block_body(pass: &Pass<'_>, rows: Rows<'_>, first: usize, out: &mut Sums) {
    let k = rows.terms();
    let mut gradient_lanes = vec![[0.0; LANES]; k];
    let triangle = if pass.matrix == Matrix::None {
        0
    } else {
        k * (k + 1) / 2
    };
    let mut matrix_lanes = vec![[0.0; LANES]; triangle];
    let mut index = [0.0; CHUNK];
    let mut scores = [0.0; CHUNK];
    let mut row_weights = [0.0; CHUNK];
    let mut run = [0.0; CHUNK];
    let mut start = 0;
    while start < rows.len() {
        let n = CHUNK.min(rows.len() - start);
        let z = &mut index[..n];
        z.fill(0.0);
        for (j, &b) in pass.beta.iter().enumerate() {
            for (z, &x) in z.iter_mut().zip(&rows.column(j)[start..start + n]) {
                *z += x * b;
            }
        }
        if pass.keep_index {
            out.index.extend_from_slice(z);
        }
        let outcome = &pass.outcome[first + start..first + start + n];
        let chunk_weights = pass.weights.map(|w| &w[first + start..first + start + n]);
        for r in 0..n {
            let v = chunk_weights.map_or(1.0, |w| w[r]);
            if v == 0.0 {
                // A zero weight removes the row, even where its terms are extreme.
                scores[r] = 0.0;
                row_weights[r] = 0.0;
                continue;
            }
            let p = pointwise(pass.link, z[r], outcome[r]);
            out.log_likelihood += v * p.log_likelihood;
            let score = v * p.score;
            scores[r] = score;
            row_weights[r] = match pass.matrix {
                Matrix::None => 0.0,
                Matrix::Observed => v * p.observed_weight,
                Matrix::Expected => v * p.expected_weight,
                Matrix::ScoreOuter => v * p.score * p.score,
                Matrix::WeightedScoreOuter => score * score,
            };
        }
        for (j, lanes) in gradient_lanes.iter_mut().enumerate() {
            add_products(lanes, &scores[..n], &rows.column(j)[start..start + n]);
        }
        if triangle > 0 {
            add_gram_chunk(&mut matrix_lanes, rows, start, &row_weights[..n], &mut run);
        }
        start += n;
    }
    for (g, lanes) in out.gradient.iter_mut().zip(&gradient_lanes) {
        *g += total(lanes);
    }
    if triangle > 0 {
        add_packed_to(&mut out.matrix, &matrix_lanes, k);
    }
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
fn block_wide(pass: &Pass<'_>, rows: Rows<'_>, first: usize, out: &mut Sums) {
    block_body(pass, rows, first, out)
}

/// [`block_body`] in the code chosen at run time (the same bits either way).
fn block(pass: &Pass<'_>, rows: Rows<'_>, first: usize, out: &mut Sums) {
    #[cfg(target_arch = "x86_64")]
    if wide() {
        // SAFETY: the processor has AVX2 (checked by `wide`).
        return unsafe { block_wide(pass, rows, first, out) };
    }
    block_body(pass, rows, first, out)
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
    pass(design, outcome, weights, link, beta, matrix, false)
}

/// The sums with [`Matrix::Observed`] at `beta`, also keeping every row's index `xᵢᵀβ` in
/// [`Sums::index`] (a Newton step's pass, whose index is the fitted one if it is the last).
pub fn accumulate_keeping_index(
    design: &Design,
    outcome: &[f64],
    weights: Option<&[f64]>,
    link: Link,
    beta: &[f64],
) -> Sums {
    pass(design, outcome, weights, link, beta, Matrix::Observed, true)
}

fn pass(
    design: &Design,
    outcome: &[f64],
    weights: Option<&[f64]>,
    link: Link,
    beta: &[f64],
    matrix: Matrix,
    keep_index: bool,
) -> Sums {
    let k = design.columns();
    let size = if matrix == Matrix::None { 0 } else { k * k };
    let pass = Pass {
        outcome,
        weights,
        link,
        beta,
        matrix,
        keep_index,
    };
    let empty = || Sums {
        log_likelihood: 0.0,
        gradient: vec![0.0; k],
        matrix: vec![0.0; size],
        index: Vec::new(),
    };
    let mut total = reduce_rows(
        design.rows(),
        empty,
        |acc, range| {
            acc.index.reserve(range.len());
            block(&pass, design.rows_of(range.clone()), range.start, acc);
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
            if keep_index {
                if total.index.is_empty() {
                    total.index.reserve(design.rows());
                }
                total.index.extend(part.index);
            }
        },
    );
    if size > 0 {
        symmetrise(&mut total.matrix, k);
    }
    total
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
