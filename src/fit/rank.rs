//! The rank check: before any iteration, find the terms that are (to rounding) linear
//! combinations of earlier terms, and name them with the combination.
//!
//! The Gram matrix G = XᵀX is scaled to unit diagonal, C = D^−½ G D^−½, and factorised by
//! Cholesky one term at a time, in the order of `--terms`. Term j's squared residual after
//! projecting on the earlier kept terms is
//!
//! ```text
//! rⱼ = Cⱼⱼ − yᵀy,   L y = C[kept, j]          (the share of its length the others miss)
//! ```
//!
//! and rⱼ < 1e-10 means term j adds nothing: its combination b = L⁻ᵀ y is reported in the
//! original units, `xⱼ ≈ Σ bₗ·√(Gⱼⱼ/Gₗₗ)·xₗ`. Later terms are named, earlier ones kept, so the
//! message reads in the order the user wrote the terms.
//!
//! A design of full rank may still be nearly collinear. [`collinearity`] gives the condition
//! number of the design with each column scaled to unit length, κ = √(λmax/λmin) of C (the
//! scaled condition number of Belsley, Kuh and Welsch, *Regression Diagnostics*, 1980, who read
//! condition indexes above 30 as moderate to strong dependencies); a fit whose κ exceeds
//! [`CONDITION_WARNING`] goes ahead with a note naming the terms involved (those whose
//! variance-decomposition proportion on a dimension of such an index exceeds one half) and that
//! their standard errors are inflated.

use super::error::FitError;

/// A term whose residual share is below this is collinear with the terms before it.
pub const COLLINEAR_TOLERANCE: f64 = 1e-10;

/// A design whose unit-scaled condition number exceeds this is reported as nearly collinear.
pub const CONDITION_WARNING: f64 = 30.0;

/// A term whose variance-decomposition proportion on a dimension of high condition index
/// exceeds this is named as involved in that dependency (Belsley, Kuh and Welsch's reading).
pub const INVOLVED_PROPORTION: f64 = 0.5;

/// How nearly collinear a design of full rank is: Belsley, Kuh and Welsch's diagnostics of the
/// design with unit-length columns, from the eigen decomposition C = V Λ Vᵀ of its scaled
/// Gram matrix.
///
/// ```text
/// condition index of dimension j     ηⱼ = √(λmax / λⱼ)
/// condition number                   κ = maxⱼ ηⱼ
/// variance proportion of term k      πₖⱼ = (vₖⱼ² / λⱼ) / Σᵢ (vₖᵢ² / λᵢ)
/// ```
///
/// πₖⱼ is the share of the variance of term k's coefficient that dimension j carries; a
/// dimension with ηⱼ above [`CONDITION_WARNING`] on which two or more terms have πₖⱼ above
/// [`INVOLVED_PROPORTION`] is a dependency among those terms.
#[derive(Debug, Clone, PartialEq)]
pub struct Collinearity {
    /// κ, infinite when the scaled Gram matrix has an eigenvalue at or below zero.
    pub condition: f64,
    /// The terms (by index) involved in a dependency of index above [`CONDITION_WARNING`],
    /// each with its largest variance proportion on such a dimension; in term order.
    pub involved: Vec<(usize, f64)>,
}

/// The collinearity diagnostics of the design, from `gram` = `XᵀX` (row-major `k × k`, every
/// diagonal entry positive: the rank check has passed).
pub fn collinearity(gram: &[f64], k: usize) -> Collinearity {
    let diagonal: Vec<f64> = (0..k).map(|j| gram[j * k + j]).collect();
    let scaled = nalgebra::DMatrix::from_fn(k, k, |a, b| {
        gram[a * k + b] / (diagonal[a] * diagonal[b]).sqrt()
    });
    let eigen = nalgebra::SymmetricEigen::new(scaled);
    let values = &eigen.eigenvalues;
    let largest = values.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    let smallest = values.iter().copied().fold(f64::INFINITY, f64::min);
    if smallest <= 0.0 {
        return Collinearity {
            condition: f64::INFINITY,
            involved: Vec::new(),
        };
    }
    let dependencies: Vec<usize> = (0..k)
        .filter(|&j| (largest / values[j]).sqrt() > CONDITION_WARNING)
        .collect();
    let mut involved = Vec::new();
    for term in 0..k {
        let share = |j: usize| eigen.eigenvectors[(term, j)].powi(2) / values[j];
        let total: f64 = (0..k).map(share).sum();
        let proportion = dependencies
            .iter()
            .map(|&j| share(j) / total)
            .fold(0.0, f64::max);
        if proportion > INVOLVED_PROPORTION {
            involved.push((term, proportion));
        }
    }
    Collinearity {
        condition: (largest / smallest).sqrt(),
        involved,
    }
}

/// The note of a nearly collinear design naming the terms involved (`labels` in term order),
/// or `None` when κ is at most [`CONDITION_WARNING`].
pub fn collinearity_note(diagnostics: &Collinearity, labels: &[String]) -> Option<String> {
    let condition = diagnostics.condition;
    (condition > CONDITION_WARNING).then(|| {
        let terms = if diagnostics.involved.is_empty() {
            "the standard errors of the terms involved are inflated".to_string()
        } else {
            let named: Vec<String> = diagnostics
                .involved
                .iter()
                .map(|&(term, proportion)| format!("'{}' ({proportion:.2})", labels[term]))
                .collect();
            format!(
                "the terms involved, with the share of their coefficient's variance the \
                 dependency carries (Belsley-Kuh-Welsch variance proportions above \
                 {INVOLVED_PROPORTION}), are {}; their standard errors are inflated",
                named.join(", ")
            )
        };
        format!(
            "the design is nearly collinear: its condition number (columns scaled to unit \
             length) is {condition:.1}, above {CONDITION_WARNING}; {terms} and their \
             coefficients unstable; consider dropping or combining terms that carry the same \
             information"
        )
    })
}

/// Below this (in the scaled units) a coefficient of the combination is not listed.
const NEGLIGIBLE: f64 = 1e-7;

fn format_coefficient(x: f64) -> String {
    let rounded = format!("{x:.6}");
    let trimmed = rounded.trim_end_matches('0').trim_end_matches('.');
    trimmed.to_string()
}

/// Check that the design has full column rank; `gram` is `XᵀX` row-major `k × k`.
pub fn check_rank(gram: &[f64], labels: &[String], rows: usize) -> Result<(), FitError> {
    let k = labels.len();
    let diagonal: Vec<f64> = (0..k).map(|j| gram[j * k + j]).collect();
    let mut problems = Vec::new();
    // Rows of L for the kept terms, and which terms they are.
    let mut kept: Vec<usize> = Vec::new();
    let mut lower: Vec<Vec<f64>> = Vec::new();
    for j in 0..k {
        if diagonal[j].partial_cmp(&0.0) != Some(std::cmp::Ordering::Greater) {
            problems.push(format!("term '{}' is zero in every observation", labels[j]));
            continue;
        }
        let scaled = |a: usize| gram[a * k + j] / (diagonal[a] * diagonal[j]).sqrt();
        let mut y = Vec::with_capacity(kept.len());
        for (m, row) in lower.iter().enumerate() {
            let partial: f64 = row[..m].iter().zip(&y).map(|(l, yv)| l * yv).sum();
            y.push((scaled(kept[m]) - partial) / row[m]);
        }
        let residual = 1.0 - y.iter().map(|v| v * v).sum::<f64>();
        if residual < COLLINEAR_TOLERANCE {
            // Back-substitute Lᵀ b = y for the combination in scaled units.
            let mut b = vec![0.0; kept.len()];
            for m in (0..kept.len()).rev() {
                let later: f64 = (m + 1..kept.len()).map(|n| lower[n][m] * b[n]).sum();
                b[m] = (y[m] - later) / lower[m][m];
            }
            let parts: Vec<String> = kept
                .iter()
                .zip(&b)
                .filter(|(_, &coef)| coef.abs() > NEGLIGIBLE)
                .map(|(&l, &coef)| {
                    let original = coef * (diagonal[j] / diagonal[l]).sqrt();
                    format!("{}·{}", format_coefficient(original), labels[l])
                })
                .collect();
            problems.push(format!(
                "term '{}' is a linear combination of earlier terms: {} = {}",
                labels[j],
                labels[j],
                if parts.is_empty() {
                    "0".to_string()
                } else {
                    parts.join(" + ")
                }
            ));
            continue;
        }
        let mut row = y;
        row.push(residual.sqrt());
        lower.push(row);
        kept.push(j);
    }
    if problems.is_empty() {
        return Ok(());
    }
    let mut message = problems.join("; ");
    if rows < k {
        message.push_str(&format!(" ({rows} observations for {k} terms)"));
    }
    Err(FitError::RankDeficient(message))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::fit::design::Design;
    use crate::fit::survey::Survey;

    fn design(rows: &[[f64; 3]]) -> Design {
        Design::from_row_major(rows.len(), 3, rows.iter().flatten().copied().collect())
            .expect("sizes match")
    }

    /// `XᵀX` (the outcomes only split the sum).
    fn gram(d: &Design) -> Vec<f64> {
        let outcome: Vec<f64> = (0..d.rows()).map(|i| (i % 2) as f64).collect();
        Survey::of(d, &outcome, None).gram()
    }

    #[test]
    fn names_the_later_term_and_its_combination() {
        // third = 1 + 2·second
        let d = design(&[
            [1.0, 0.0, 1.0],
            [1.0, 1.0, 3.0],
            [1.0, 2.0, 5.0],
            [1.0, 5.0, 11.0],
        ]);
        let labels = ["intercept".to_string(), "a".into(), "b".into()];
        let e = check_rank(&gram(&d), &labels, 4).unwrap_err();
        assert_eq!(
            e.to_string(),
            "the design is rank-deficient: term 'b' is a linear combination of earlier terms: b = 1·intercept + 2·a"
        );
    }

    #[test]
    fn full_rank_passes() {
        let d = design(&[
            [1.0, 0.0, 1.0],
            [1.0, 1.0, 0.0],
            [1.0, 2.0, 5.0],
            [1.0, 5.0, 1.0],
        ]);
        let labels = ["intercept".to_string(), "a".into(), "b".into()];
        assert!(check_rank(&gram(&d), &labels, 4).is_ok());
    }
}
