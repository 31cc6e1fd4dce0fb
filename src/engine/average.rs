//! Average marginal effects over a set of observations, with delta-method standard errors.
//!
//! ```text
//! AME  = (1/n) Σᵢ mᵢ          ∇AME = (1/n) Σᵢ ∇mᵢ          se = √(∇AMEᵀ V ∇AME)
//! ```
//!
//! The averager keeps running sums only, so its memory does not grow with n.

use super::{EffectSlot, Interval, Options};
use crate::model::Model;

/// Running sums for average effects and the average probability.
#[derive(Debug, Clone)]
pub struct Averager {
    count: u64,
    terms: usize,
    probability_sum: f64,
    probability_gradient_sum: Vec<f64>,
    effect_sums: Vec<f64>,
    effect_gradient_sums: Vec<f64>,
}

/// One averaged quantity with its standard error and interval.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Average {
    /// The effect slot (None for the average probability).
    pub slot: Option<EffectSlot>,
    /// The mean over the observations.
    pub value: f64,
    /// The delta-method standard error, when the model has a covariance.
    pub std_error: Option<f64>,
    /// The symmetric normal interval.
    pub interval: Option<Interval>,
}

impl Averager {
    /// An empty averager for `model` with `slots` effects.
    pub fn new(model: &Model, slots: usize) -> Averager {
        let k = model.terms.len();
        Averager {
            count: 0,
            terms: k,
            probability_sum: 0.0,
            probability_gradient_sum: vec![0.0; k],
            effect_sums: vec![0.0; slots],
            effect_gradient_sums: vec![0.0; slots * k],
        }
    }

    /// Observations added so far.
    pub fn count(&self) -> u64 {
        self.count
    }

    pub(super) fn add(
        &mut self,
        probability: f64,
        probability_gradient: &[f64],
        effect_values: &[f64],
        effect_gradients: &[f64],
        k: usize,
    ) {
        debug_assert_eq!(k, self.terms);
        self.count += 1;
        self.probability_sum += probability;
        for (s, g) in self
            .probability_gradient_sum
            .iter_mut()
            .zip(probability_gradient)
        {
            *s += g;
        }
        for (s, g) in self.effect_gradient_sums.iter_mut().zip(effect_gradients) {
            *s += g;
        }
        for (s, e) in self.effect_sums.iter_mut().zip(effect_values) {
            *s += e;
        }
    }

    /// The average probability and the average effects, in slot order.
    pub fn finish(
        &self,
        model: &Model,
        slots: &[EffectSlot],
        options: &Options,
    ) -> (Average, Vec<Average>) {
        let n = self.count.max(1) as f64;
        let k = self.terms;
        let q = options.quantile();
        let with_error = |value: f64, gradient_sum: &[f64]| -> (Option<f64>, Option<Interval>) {
            match &model.covariance {
                Some(v) if options.intervals => {
                    let mean_gradient: Vec<f64> = gradient_sum.iter().map(|g| g / n).collect();
                    let se = super::quadratic_form(v, &mean_gradient).sqrt();
                    (
                        Some(se),
                        Some(Interval {
                            lower: value - q * se,
                            upper: value + q * se,
                        }),
                    )
                }
                _ => (None, None),
            }
        };
        let p = self.probability_sum / n;
        let (se, interval) = with_error(p, &self.probability_gradient_sum);
        let probability = Average {
            slot: None,
            value: p,
            std_error: se,
            interval,
        };
        let effects = slots
            .iter()
            .enumerate()
            .map(|(s, slot)| {
                let value = self.effect_sums[s] / n;
                let (std_error, interval) =
                    with_error(value, &self.effect_gradient_sums[s * k..(s + 1) * k]);
                Average {
                    slot: Some(*slot),
                    value,
                    std_error,
                    interval,
                }
            })
            .collect();
        (probability, effects)
    }
}
