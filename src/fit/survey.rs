//! The survey: one pass over the design before any iteration that gathers what the checks and
//! the first Newton step need, split by outcome (rows of weight 0 add nothing):
//!
//! ```text
//! Gₒ = Σ_{yᵢ=o} vᵢ xᵢ xᵢᵀ      Sₒ = Σ_{yᵢ=o} vᵢ xᵢ      Wₒ = Σ_{yᵢ=o} vᵢ      o ∈ {0, 1}
//! extremes: min and max of each term over the counted rows of each outcome
//! ```
//!
//! `G₀ + G₁ = XᵀVX` is the Gram matrix of the rank and collinearity checks
//! ([`super::rank`]); the extremes are the one-term separation check
//! ([`super::separation::check_single_terms`]). And the Newton start needs no pass of its own:
//! every row has the same index c there (every coefficient 0 but the intercept), so each row's
//! log-likelihood, score and information weight depend on its outcome only, and
//!
//! ```text
//! ℓ(c) = W₁ ℓ(c, 1) + W₀ ℓ(c, 0)      g(c) = s(c, 1) S₁ + s(c, 0) S₀
//! H(c) = w(c, 1) G₁ + w(c, 0) G₀
//! ```
//!
//! (the pointwise terms ℓ, s, w of [`super::likelihood`]).

use crate::link::Link;

use super::design::{reduce_rows, symmetrise, Design};
use super::kernel::{add_weighted_gram, dot};
use super::likelihood::{pointwise, Sums};

/// The least and largest value of one term among the counted rows of each outcome.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Extremes {
    /// Among outcome-0 rows.
    pub min0: f64,
    /// Among outcome-0 rows.
    pub max0: f64,
    /// Among outcome-1 rows.
    pub min1: f64,
    /// Among outcome-1 rows.
    pub max1: f64,
}

impl Extremes {
    fn new() -> Extremes {
        Extremes {
            min0: f64::INFINITY,
            max0: f64::NEG_INFINITY,
            min1: f64::INFINITY,
            max1: f64::NEG_INFINITY,
        }
    }

    fn merge(&mut self, o: Extremes) {
        self.min0 = self.min0.min(o.min0);
        self.max0 = self.max0.max(o.max0);
        self.min1 = self.min1.min(o.min1);
        self.max1 = self.max1.max(o.max1);
    }
}

/// The sums of one outcome's rows.
#[derive(Debug, Clone, PartialEq)]
struct Side {
    /// `Gₒ`, row-major `k × k` (lower triangle until the pass ends).
    gram: Vec<f64>,
    /// `Sₒ`.
    sums: Vec<f64>,
    /// `Wₒ`.
    weight: f64,
}

impl Side {
    fn new(k: usize) -> Side {
        Side {
            gram: vec![0.0; k * k],
            sums: vec![0.0; k],
            weight: 0.0,
        }
    }

    fn add(&mut self, part: Side) {
        self.gram
            .iter_mut()
            .zip(part.gram)
            .for_each(|(t, p)| *t += p);
        self.sums
            .iter_mut()
            .zip(part.sums)
            .for_each(|(t, p)| *t += p);
        self.weight += part.weight;
    }
}

/// What the survey pass found.
#[derive(Debug, Clone, PartialEq)]
pub struct Survey {
    zero: Side,
    one: Side,
    extremes: Vec<Extremes>,
}

/// `(min (xᵢ + bᵢ), max (xᵢ − bᵢ))` in four lanes (the result does not depend on the order).
fn biased_extremes(values: &[f64], bias: &[f64]) -> (f64, f64) {
    let mut low = [f64::INFINITY; 4];
    let mut high = [f64::NEG_INFINITY; 4];
    let body = values.len() - values.len() % 4;
    for (x, b) in values[..body]
        .chunks_exact(4)
        .zip(bias[..body].chunks_exact(4))
    {
        for l in 0..4 {
            let up = x[l] + b[l];
            let down = x[l] - b[l];
            low[l] = if up < low[l] { up } else { low[l] };
            high[l] = if down > high[l] { down } else { high[l] };
        }
    }
    for (x, b) in values[body..].iter().zip(&bias[body..]) {
        low[0] = low[0].min(x + b);
        high[0] = high[0].max(x - b);
    }
    (
        low.iter().copied().fold(f64::INFINITY, f64::min),
        high.iter().copied().fold(f64::NEG_INFINITY, f64::max),
    )
}

impl Survey {
    /// Survey the design, with each row weighted by `weights[i]` (1 without weights).
    pub fn of(design: &Design, outcome: &[f64], weights: Option<&[f64]>) -> Survey {
        let k = design.columns();
        let empty = || Survey {
            zero: Side::new(k),
            one: Side::new(k),
            extremes: vec![Extremes::new(); k],
        };
        let mut survey = reduce_rows(
            design.rows(),
            empty,
            |survey, range| {
                let rows = design.rows_of(range.clone());
                let outcome = &outcome[range.clone()];
                let block_weights = weights.map(|w| &w[range.clone()]);
                let mut weights_zero = Vec::with_capacity(range.len());
                let mut weights_one = Vec::with_capacity(range.len());
                for (r, &y) in outcome.iter().enumerate() {
                    let v = block_weights.map_or(1.0, |w| w[r]);
                    let one = y > 0.5;
                    weights_one.push(if one { v } else { 0.0 });
                    weights_zero.push(if one { 0.0 } else { v });
                }
                for (side, side_weights) in [
                    (&mut survey.zero, &weights_zero),
                    (&mut survey.one, &weights_one),
                ] {
                    add_weighted_gram(&mut side.gram, rows, side_weights);
                    for (j, s) in side.sums.iter_mut().enumerate() {
                        *s += dot(side_weights, rows.column(j));
                    }
                    side.weight += side_weights.iter().sum::<f64>();
                }
                // Each row's bias per outcome: 0 where the row counts for that outcome, +∞
                // where it does not, so `x + bias` and `x − bias` leave the row out of the
                // minimum and the maximum without a branch (the outcomes are as good as random).
                let bias = |v: &f64| if *v != 0.0 { 0.0 } else { f64::INFINITY };
                let one_bias: Vec<f64> = weights_one.iter().map(bias).collect();
                let zero_bias: Vec<f64> = weights_zero.iter().map(bias).collect();
                for (j, e) in survey.extremes.iter_mut().enumerate() {
                    let column = rows.column(j);
                    let (min1, max1) = biased_extremes(column, &one_bias);
                    let (min0, max0) = biased_extremes(column, &zero_bias);
                    e.merge(Extremes {
                        min0,
                        max0,
                        min1,
                        max1,
                    });
                }
            },
            |total, part| {
                total.zero.add(part.zero);
                total.one.add(part.one);
                total
                    .extremes
                    .iter_mut()
                    .zip(part.extremes)
                    .for_each(|(t, p)| t.merge(p));
            },
        );
        symmetrise(&mut survey.zero.gram, k);
        symmetrise(&mut survey.one.gram, k);
        survey
    }

    /// `XᵀVX = G₀ + G₁`, row-major `k × k`.
    pub fn gram(&self) -> Vec<f64> {
        self.zero
            .gram
            .iter()
            .zip(&self.one.gram)
            .map(|(a, b)| a + b)
            .collect()
    }

    /// Each term's extremes by outcome.
    pub fn extremes(&self) -> &[Extremes] {
        &self.extremes
    }

    /// The log-likelihood, score and observed information where every row's index is `index`.
    pub fn sums_at_constant_index(&self, link: Link, index: f64) -> Sums {
        let at_zero = pointwise(link, index, 0.0);
        let at_one = pointwise(link, index, 1.0);
        let combine = |zero: &[f64], one: &[f64], a: f64, b: f64| -> Vec<f64> {
            zero.iter().zip(one).map(|(z, o)| a * z + b * o).collect()
        };
        Sums {
            log_likelihood: self.zero.weight * at_zero.log_likelihood
                + self.one.weight * at_one.log_likelihood,
            gradient: combine(&self.zero.sums, &self.one.sums, at_zero.score, at_one.score),
            matrix: combine(
                &self.zero.gram,
                &self.one.gram,
                at_zero.observed_weight,
                at_one.observed_weight,
            ),
            index: Vec::new(),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::fit::likelihood::{accumulate, Matrix};
    use crate::link::ALL_LINKS;

    /// Identity: the sums at a constant index from the survey equal a full pass at that point
    /// (relative 1e-12), with and without weights, for every link.
    #[test]
    fn start_sums_equal_a_full_pass() {
        let rows = 40_000;
        let values: Vec<f64> = (0..rows)
            .flat_map(|i| {
                let t = i as f64;
                [1.0, (t * 0.37).sin() * 3.0, f64::from(i % 7 == 0)]
            })
            .collect();
        let design = Design::from_row_major(rows, 3, values).expect("sizes match");
        let outcome: Vec<f64> = (0..rows).map(|i| f64::from((i * 7919) % 11 < 4)).collect();
        let weights: Vec<f64> = (0..rows).map(|i| (i % 5) as f64 * 0.5).collect();
        for w in [None, Some(weights.as_slice())] {
            let survey = Survey::of(&design, &outcome, w);
            for link in ALL_LINKS {
                let c = -0.4;
                let full = accumulate(&design, &outcome, w, link, &[c, 0.0, 0.0], Matrix::Observed);
                let quick = survey.sums_at_constant_index(link, c);
                let close = |a: f64, b: f64| (a - b).abs() <= 1e-12 * (1.0 + b.abs());
                assert!(close(quick.log_likelihood, full.log_likelihood), "{link}");
                for (a, b) in quick.gradient.iter().zip(&full.gradient) {
                    assert!(close(*a, *b), "{link}: {a} vs {b}");
                }
                for (a, b) in quick.matrix.iter().zip(&full.matrix) {
                    assert!(close(*a, *b), "{link}: {a} vs {b}");
                }
            }
        }
    }
}
