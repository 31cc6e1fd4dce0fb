//! The area under the ROC curve and DeLong, DeLong and Clarke-Pearson's (1988) variance,
//! computed by the placement values of Sun and Xu (2014).
//!
//! ```text
//! V₁₀(xᵢ) = (#{non-events < xᵢ} + ½ #{non-events = xᵢ}) / n    for each of the m events
//! V₀₁(yⱼ) = (#{events > yⱼ} + ½ #{events = yⱼ}) / m            for each of the n non-events
//! AUC     = mean V₁₀ = mean V₀₁
//! Var     = S₁₀ / m + S₀₁ / n      S = sample variance (divisor m − 1, n − 1)
//! paired:  Cov(A, B) = S₁₀(A, B) / m + S₀₁(A, B) / n
//!          Var(A − B) = Var A + Var B − 2 Cov(A, B)
//! ```
//!
//! Sun and Xu obtain V₁₀ from midranks (the midrank of xᵢ among all rows less its midrank among
//! the events); the counts above are the same numbers, found here in one walk over both classes
//! sorted ([`super::rank`]), so the work is O(N log N), done once per model for the AUC, the
//! paired test and the deciles of risk.
//! Scores are logits of the probabilities: the logit is strictly increasing, so the AUC and
//! every placement are those of the probabilities.

use serde::Serialize;

use super::rank::Ranking;
use super::rows::ModelRows;
use super::{two_sided_p, Bounds};

/// The AUC of one model with DeLong's standard error.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Auc {
    /// The area under the ROC curve: the probability that a random event scores above a
    /// random non-event (ties count half).
    pub estimate: f64,
    /// DeLong's standard error.
    pub std_error: f64,
    /// estimate ± q · std_error, held inside [0, 1].
    pub interval: Bounds,
}

/// The paired comparison of two models' AUCs on the same rows.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct AucDifference {
    /// AUC of the first model minus AUC of the second.
    pub difference: f64,
    /// DeLong's standard error of the difference.
    pub std_error: f64,
    /// difference ± q · std_error.
    pub interval: Bounds,
    /// The correlation of the two AUC estimates.
    pub correlation: f64,
    /// difference / std_error.
    pub z: f64,
    /// Two-sided p-value of z.
    pub p_value: f64,
}

/// The placement values of one model, V₁₀ for the events and V₀₁ for the non-events, each in
/// row order: the counts of its [`Ranking`] over twice the size of the other class.
struct Placements<'r> {
    events: &'r [u32],
    event_scale: f64,
    non_events: &'r [u32],
    non_event_scale: f64,
}

impl Placements<'_> {
    fn of(ranking: &Ranking) -> Placements<'_> {
        let (m, n) = (
            ranking.event_counts.len() as f64,
            ranking.non_event_counts.len() as f64,
        );
        Placements {
            events: &ranking.event_counts,
            event_scale: 2.0 * n,
            non_events: &ranking.non_event_counts,
            non_event_scale: 2.0 * m,
        }
    }
}

fn mean(counts: &[u32], scale: f64) -> f64 {
    counts.iter().map(|&c| c as f64 / scale).sum::<f64>() / counts.len() as f64
}

/// The sample covariance of two placement vectors of one class (divisor len − 1; 0 for fewer
/// than two values).
fn covariance(a: &[u32], a_scale: f64, b: &[u32], b_scale: f64) -> f64 {
    if a.len() < 2 {
        return 0.0;
    }
    let (mean_a, mean_b) = (mean(a, a_scale), mean(b, b_scale));
    let sum: f64 = a
        .iter()
        .zip(b)
        .map(|(&x, &y)| (x as f64 / a_scale - mean_a) * (y as f64 / b_scale - mean_b))
        .sum();
    sum / (a.len() - 1) as f64
}

fn variance_terms(a: &Placements, b: &Placements) -> f64 {
    covariance(a.events, a.event_scale, b.events, b.event_scale) / a.events.len() as f64
        + covariance(
            a.non_events,
            a.non_event_scale,
            b.non_events,
            b.non_event_scale,
        ) / a.non_events.len() as f64
}

fn auc_of(placements: &Placements, quantile: f64) -> Auc {
    let estimate = mean(placements.events, placements.event_scale);
    let std_error = variance_terms(placements, placements).max(0.0).sqrt();
    let interval = Bounds::normal(estimate, std_error, quantile);
    Auc {
        estimate,
        std_error,
        interval: Bounds {
            lower: interval.lower.max(0.0),
            upper: interval.upper.min(1.0),
        },
    }
}

pub(super) fn auc(rows: &ModelRows, quantile: f64) -> Auc {
    auc_of(&Placements::of(rows.ranking()), quantile)
}

/// DeLong's paired test of two models on the same rows (the caller checks the rows agree).
pub(super) fn paired(first: &ModelRows, second: &ModelRows, quantile: f64) -> AucDifference {
    let (a, b) = (
        Placements::of(first.ranking()),
        Placements::of(second.ranking()),
    );
    let (var_a, var_b, cov) = (
        variance_terms(&a, &a),
        variance_terms(&b, &b),
        variance_terms(&a, &b),
    );
    let difference = mean(a.events, a.event_scale) - mean(b.events, b.event_scale);
    let std_error = (var_a + var_b - 2.0 * cov).max(0.0).sqrt();
    let z = if std_error > 0.0 {
        difference / std_error
    } else {
        0.0
    };
    AucDifference {
        difference,
        std_error,
        interval: Bounds::normal(difference, std_error, quantile),
        correlation: if var_a > 0.0 && var_b > 0.0 {
            cov / (var_a * var_b).sqrt()
        } else {
            0.0
        },
        z,
        p_value: two_sided_p(z),
    }
}
