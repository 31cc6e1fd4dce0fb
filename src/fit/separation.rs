//! Separation: when the outcome is perfectly (complete) or perfectly-but-for-ties
//! (quasi-complete) predicted by the terms, the likelihood keeps rising as a coefficient runs to
//! infinity and no maximum-likelihood estimate exists.
//!
//! Two checks, both naming a term and a direction:
//!
//! - **Before the fit, exactly, one term at a time.** With an intercept, term j separates when
//!   a threshold c puts every outcome-0 observation on one side and every outcome-1 on the
//!   other: `max(xⱼ | y=0) ≤ min(xⱼ | y=1)` (larger values predict 1) or the mirror image;
//!   strict inequality is complete separation, equality quasi-complete. Without an intercept
//!   the threshold must be 0. One separating term is enough for the whole model to separate
//!   (move along that coefficient and the intercept alone), so this check has no false alarms.
//! - **After a failed fit, for combinations of terms.** If observations are fitted within
//!   1e-10 of their outcome, the fit is reported as separated, naming the term with the
//!   largest scaled coefficient |βⱼ|·sd(xⱼ) and its sign.
//!
//! With weights both checks look only at the rows that count: a row of weight 0 neither
//! breaks a separation nor is counted as fitted, and sd(xⱼ) is the weighted one.

use crate::link::Link;

use super::design::{reduce_rows, Design};
use super::error::FitError;
use super::likelihood::indices_of;
use super::survey::Extremes;

/// Fitted probabilities closer than this to the outcome count as perfectly predicted.
pub const PERFECT_FIT: f64 = 1e-10;

fn format_value(x: f64) -> String {
    format!("{}", (x * 1e9).round() / 1e9)
}

/// Describe a single term's separation, if any. `larger_predicts_one` tells the direction.
fn describe(label: &str, e: &Extremes, intercept: bool) -> Option<(&'static str, String)> {
    let overall_min = e.min0.min(e.min1);
    let overall_max = e.max0.max(e.max1);
    let candidates = [(e.max0, e.min1, 1u8, "+∞"), (e.max1, e.min0, 0u8, "−∞")];
    for (below, above, outcome_above, infinity) in candidates {
        let threshold = if below < above {
            Some(0.5 * (below + above))
        } else if below == above {
            Some(below)
        } else {
            None
        };
        let Some(threshold) = threshold else { continue };
        let zero_separates = below <= 0.0 && 0.0 <= above;
        if !intercept && !zero_separates {
            continue;
        }
        let outcome_below = 1 - outcome_above;
        let kind = if below < above {
            "complete"
        } else {
            "quasi-complete"
        };
        let mut sides = Vec::new();
        if below < above {
            sides.push(format!(
                "every observation with {label} ≤ {} has outcome {outcome_below} and every one with {label} ≥ {} has outcome {outcome_above}",
                format_value(below),
                format_value(above)
            ));
        } else {
            if overall_max > threshold {
                sides.push(format!(
                    "every observation with {label} > {} has outcome {outcome_above}",
                    format_value(threshold)
                ));
            }
            if overall_min < threshold {
                sides.push(format!(
                    "every observation with {label} < {} has outcome {outcome_below}",
                    format_value(threshold)
                ));
            }
        }
        return Some((
            kind,
            format!(
                "term '{label}' predicts the outcome: {} (its coefficient runs to {infinity})",
                sides.join(" and ")
            ),
        ));
    }
    None
}

/// The exact one-term check, run before the fit, from each term's extremes by outcome (the
/// survey's). `labels[j] == "intercept"` marks the intercept column.
pub fn check_single_terms(extremes: &[Extremes], labels: &[String]) -> Result<(), FitError> {
    let intercept = labels.iter().any(|l| l == "intercept");
    for (j, e) in extremes.iter().enumerate() {
        if labels[j] == "intercept" {
            continue;
        }
        if let Some((kind, detail)) = describe(&labels[j], e, intercept) {
            return Err(FitError::Separation { kind, detail });
        }
    }
    Ok(())
}

/// After a fit that stopped without converging: is it separation? Returns the error to report
/// if observations are fitted (within [`PERFECT_FIT`]) exactly at their outcome.
pub fn diagnose(
    design: &Design,
    outcome: &[f64],
    weights: Option<&[f64]>,
    link: Link,
    beta: &[f64],
    labels: &[String],
) -> Option<FitError> {
    let k = design.columns();
    let (perfect, counted, total_weight, sums, squares) = reduce_rows(
        design.rows(),
        || (0u64, 0u64, 0.0, vec![0.0; k], vec![0.0; k]),
        |acc, range| {
            let rows = design.rows_of(range.clone());
            let mut index = Vec::new();
            indices_of(rows, beta, &mut index);
            let row_weight = |r: usize| weights.map_or(1.0, |w| w[range.start + r]);
            for (r, &z) in index.iter().enumerate() {
                let v = row_weight(r);
                if v == 0.0 {
                    continue;
                }
                acc.1 += 1;
                acc.2 += v;
                let miss = if outcome[range.start + r] > 0.5 {
                    link.complement(z)
                } else {
                    link.probability(z)
                };
                if miss < PERFECT_FIT {
                    acc.0 += 1;
                }
            }
            for (j, (sum, square)) in acc.3.iter_mut().zip(acc.4.iter_mut()).enumerate() {
                for (r, &x) in rows.column(j).iter().enumerate() {
                    let v = row_weight(r);
                    *sum += v * x;
                    *square += v * x * x;
                }
            }
        },
        |total, part| {
            total.0 += part.0;
            total.1 += part.1;
            total.2 += part.2;
            total.3.iter_mut().zip(part.3).for_each(|(t, p)| *t += p);
            total.4.iter_mut().zip(part.4).for_each(|(t, p)| *t += p);
        },
    );
    if perfect == 0 {
        return None;
    }
    let n = counted;
    let nf = total_weight;
    let (term, scaled) = (0..k)
        .filter(|&j| labels[j] != "intercept")
        .map(|j| {
            let mean = sums[j] / nf;
            let sd = (squares[j] / nf - mean * mean).max(0.0).sqrt();
            (j, beta[j] * sd)
        })
        .max_by(|a, b| a.1.abs().total_cmp(&b.1.abs()))?;
    let kind = if perfect == n {
        "complete"
    } else {
        "quasi-complete"
    };
    let (direction, outcome) = if scaled > 0.0 {
        ("+∞", 1)
    } else {
        ("−∞", 0)
    };
    Some(FitError::Separation {
        kind,
        detail: format!(
            "{perfect} of {n} observations are fitted within {PERFECT_FIT:e} of their outcome; the coefficient of term '{}' is {:.4} and still running to {direction} (larger values of it predict outcome {outcome})",
            labels[term], beta[term]
        ),
    })
}
