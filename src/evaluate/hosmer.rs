//! The Hosmer–Lemeshow (1980) goodness-of-fit statistic over deciles of risk.
//!
//! ```text
//! rows sorted by p (a non-event before an event at equal p), cut into G groups,
//! group g holding sorted rows ⌊gN/G⌋ … ⌊(g+1)N/G⌋ − 1
//! Oᵍ = events in g,  Eᵍ = Σ p in g,  nᵍ = rows in g
//! H  = Σ_g (Oᵍ − Eᵍ)² / (Eᵍ (1 − Eᵍ/nᵍ))     ~ χ² with G − 2 degrees of freedom
//! ```
//!
//! A small p-value says the observed events depart from the predicted ones somewhere along
//! the range of risk; with very many rows even a slight miscalibration earns one, so the
//! reliability table and the calibration slope say how large the departure is.

use serde::Serialize;
use statrs::distribution::{ChiSquared, ContinuousCDF};

use super::rows::{logistic, ModelRows};

/// Groups of the statistic (deciles of risk).
pub const RISK_GROUPS: usize = 10;

/// The Hosmer–Lemeshow statistic.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct HosmerLemeshow {
    /// H.
    pub statistic: f64,
    /// Degrees of freedom, G − 2.
    pub degrees_of_freedom: usize,
    /// P(χ² > H).
    pub p_value: f64,
    /// The groups: rows, events observed, events expected (Σp), in order of risk.
    pub groups: Vec<RiskGroup>,
}

/// One group of the statistic.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct RiskGroup {
    /// Rows in the group.
    pub rows: u64,
    /// Events observed.
    pub observed: u64,
    /// Events expected, Σp.
    pub expected: f64,
}

/// The rows' probabilities sorted by risk, each with its outcome.
fn by_risk(rows: &ModelRows) -> impl Iterator<Item = (f64, bool)> {
    let mut events = rows.event_logits().to_vec();
    let mut non_events = rows.non_event_logits().to_vec();
    events.sort_unstable_by(f64::total_cmp);
    non_events.sort_unstable_by(f64::total_cmp);
    let (mut i, mut j) = (0, 0);
    std::iter::from_fn(move || {
        let take_event = match (events.get(i), non_events.get(j)) {
            (Some(&e), Some(&n)) => e < n,
            (Some(_), None) => true,
            (None, Some(_)) => false,
            (None, None) => return None,
        };
        if take_event {
            i += 1;
            Some((logistic(events[i - 1]), true))
        } else {
            j += 1;
            Some((logistic(non_events[j - 1]), false))
        }
    })
}

pub(super) fn hosmer_lemeshow(rows: &ModelRows) -> HosmerLemeshow {
    let total = rows.rows() as usize;
    let mut groups = vec![
        RiskGroup {
            rows: 0,
            observed: 0,
            expected: 0.0,
        };
        RISK_GROUPS
    ];
    let mut group = 0;
    for (index, (p, event)) in by_risk(rows).enumerate() {
        while index >= (group + 1) * total / RISK_GROUPS {
            group += 1;
        }
        let g = &mut groups[group];
        g.rows += 1;
        g.observed += u64::from(event);
        g.expected += p;
    }
    groups.retain(|g| g.rows > 0);
    let statistic = groups
        .iter()
        .map(|g| {
            let n = g.rows as f64;
            let variance = g.expected * (1.0 - g.expected / n);
            (g.observed as f64 - g.expected).powi(2) / variance
        })
        .sum();
    let degrees_of_freedom = groups.len().saturating_sub(2);
    let p_value = ChiSquared::new(degrees_of_freedom as f64)
        .map(|d| d.sf(statistic))
        .unwrap_or(f64::NAN);
    HosmerLemeshow {
        statistic,
        degrees_of_freedom,
        p_value,
        groups,
    }
}
