//! The Hosmer–Lemeshow (1980) goodness-of-fit statistic over deciles of risk.
//!
//! ```text
//! rows sorted by p (a non-event before an event at equal p), cut into G groups,
//! group g holding sorted rows ⌊gN/G⌋ … ⌊(g+1)N/G⌋ − 1
//! Oᵍ = events in g,  Eᵍ = Σ p in g,  nᵍ = rows in g
//! H  = Σ_g (Oᵍ − Eᵍ)² / (Eᵍ (1 − Eᵍ/nᵍ))     ~ χ² with G − 2 degrees of freedom
//!    = Σ_g (Oᵍ − Eᵍ)² · nᵍ / (Eᵍ Fᵍ)            Fᵍ = Σ (1 − p) in g
//! ```
//!
//! The second form is the one computed: Fᵍ is summed from each row's own complement, so a
//! group of near-certain events keeps a positive denominator where `1 − Eᵍ/nᵍ` would round
//! to 0 and the term would become 0/0. Every stored probability lies inside
//! [`PROBABILITY_EDGE`](super::PROBABILITY_EDGE), so E and F are positive; a group whose
//! denominator still underflows adds nothing when it observed what it predicted and makes
//! the statistic infinite otherwise (a model that called an outcome impossible saw it).
//!
//! A small p-value says the observed events depart from the predicted ones somewhere along
//! the range of risk; with very many rows even a slight miscalibration earns one, so the
//! reliability table and the calibration slope say how large the departure is.

use serde::Serialize;
use statrs::distribution::{ChiSquared, ContinuousCDF};

use super::rows::logistic;

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
    /// Non-events expected, Σ(1 − p).
    pub expected_non_events: f64,
}

impl RiskGroup {
    /// This group's term of H.
    fn term(&self) -> f64 {
        let gap = self.observed as f64 - self.expected;
        let denominator = self.expected * self.expected_non_events;
        if denominator > 0.0 {
            gap * gap * self.rows as f64 / denominator
        } else if gap.abs() < 0.5 {
            0.0
        } else {
            f64::INFINITY
        }
    }
}

/// The groups filled one row at a time, in order of risk (a non-event before an event at
/// equal p), as [`super::rank`] walks the rows.
pub(super) struct RiskDeciles {
    total: u64,
    seen: u64,
    group: usize,
    groups: Vec<RiskGroup>,
}

impl RiskDeciles {
    /// Groups for `total` rows.
    pub(super) fn new(total: u64) -> RiskDeciles {
        RiskDeciles {
            total,
            seen: 0,
            group: 0,
            groups: vec![
                RiskGroup {
                    rows: 0,
                    observed: 0,
                    expected: 0.0,
                    expected_non_events: 0.0,
                };
                RISK_GROUPS
            ],
        }
    }

    /// The next row in order of risk: its logit and outcome.
    #[inline]
    pub(super) fn add(&mut self, logit: f64, event: bool) {
        let groups = RISK_GROUPS as u64;
        while self.seen >= (self.group as u64 + 1) * self.total / groups {
            self.group += 1;
        }
        self.seen += 1;
        let g = &mut self.groups[self.group];
        g.rows += 1;
        g.observed += u64::from(event);
        g.expected += logistic(logit);
        g.expected_non_events += logistic(-logit);
    }

    /// The statistic over the groups filled.
    pub(super) fn finish(self) -> HosmerLemeshow {
        let mut groups = self.groups;
        groups.retain(|g| g.rows > 0);
        let statistic = groups.iter().map(RiskGroup::term).sum();
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
}

#[cfg(test)]
mod tests {
    use super::*;

    fn group(observed: u64, expected: f64, expected_non_events: f64) -> RiskGroup {
        RiskGroup {
            rows: 10,
            observed,
            expected,
            expected_non_events,
        }
    }

    #[test]
    fn a_group_whose_denominator_underflows_adds_nothing_only_when_it_saw_what_it_predicted() {
        assert_eq!(group(10, 10.0, 0.0).term(), 0.0);
        assert_eq!(group(0, 0.0, 10.0).term(), 0.0);
        assert_eq!(group(9, 10.0, 0.0).term(), f64::INFINITY);
        assert_eq!(group(1, 0.0, 10.0).term(), f64::INFINITY);
        // The ordinary case: (O − E)² n / (E F) = 4 · 10 / (5 · 5).
        assert_eq!(group(7, 5.0, 5.0).term(), 1.6);
    }
}
