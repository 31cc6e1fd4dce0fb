//! Bins of predicted probability: the reliability table with Wilson intervals for the observed
//! share, and Murphy's (1973) decomposition of the Brier score over the same bins.
//!
//! The bins are [`RELIABILITY_BINS`] equal widths of [0, 1], each closed on the right
//! ((0.1, 0.2], …), the first also holding 0. Per bin only sums are kept (count, Σp, Σp², Σy,
//! Σpy), so the table costs the same for any number of rows.
//!
//! ```text
//! Brier = REL − RES + UNC + WBV − WBC
//! REL = (1/N) Σₖ nₖ (p̄ₖ − ōₖ)²        reliability
//! RES = (1/N) Σₖ nₖ (ōₖ − ō)²         resolution
//! UNC = ō (1 − ō)                      uncertainty
//! WBV = (1/N) Σₖ Σᵢ (pᵢ − p̄ₖ)²         within-bin variance of the forecasts
//! WBC = (2/N) Σₖ Σᵢ (yᵢ − ōₖ)(pᵢ − p̄ₖ) within-bin covariance of forecast and outcome
//! ```
//!
//! With one forecast value per bin the last two terms vanish and Murphy's identity
//! REL − RES + UNC = Brier holds exactly; with continuous forecasts the remainder
//! `within_bin = WBV − WBC` is reported so the parts always add up (the extension of Stephenson,
//! Coelho and Jolliffe 2008).

use serde::Serialize;

use super::rows::ModelRows;
use super::Bounds;

/// Bins of the reliability table.
pub const RELIABILITY_BINS: usize = 10;

#[derive(Debug, Clone, Copy, Default)]
struct BinSum {
    count: u64,
    sum_probability: f64,
    sum_squared_probability: f64,
    events: u64,
    sum_event_probability: f64,
}

/// Per-bin sums.
#[derive(Debug, Clone, Default)]
pub struct BinSums {
    bins: [BinSum; RELIABILITY_BINS],
}

/// The upper edge of bin `k`, k/B, rounded once (so 3/10 is the double nearest 0.3).
fn upper_edge(k: usize) -> f64 {
    (k + 1) as f64 / RELIABILITY_BINS as f64
}

/// The bin of probability `p`: (k/B, (k+1)/B], with 0 in the first.
///
/// `ceil(p·B) − 1` alone puts p = 0.3 in the fourth bin (0.3·10 rounds up to
/// 3.0000000000000004), so the guess is checked against the edges themselves: a probability
/// equal to an edge's double belongs to the bin below it.
fn bin_of(p: f64) -> usize {
    let last = RELIABILITY_BINS - 1;
    let guess = ((p * RELIABILITY_BINS as f64).ceil() as i64 - 1).clamp(0, last as i64) as usize;
    if guess > 0 && p <= upper_edge(guess - 1) {
        guess - 1
    } else if guess < last && p > upper_edge(guess) {
        guess + 1
    } else {
        guess
    }
}

impl BinSums {
    pub(super) fn add(&mut self, p: f64, event: bool) {
        let bin = &mut self.bins[bin_of(p)];
        bin.count += 1;
        bin.sum_probability += p;
        bin.sum_squared_probability += p * p;
        if event {
            bin.events += 1;
            bin.sum_event_probability += p;
        }
    }
}

/// One bin of the reliability table.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct ReliabilityBin {
    /// Lower edge of the bin (exclusive, except 0).
    pub from: f64,
    /// Upper edge (inclusive).
    pub to: f64,
    /// Rows whose probability falls in the bin.
    pub count: u64,
    /// Events among them.
    pub events: u64,
    /// Mean predicted probability (absent for an empty bin).
    pub mean_probability: Option<f64>,
    /// Observed share of events (absent for an empty bin).
    pub observed: Option<f64>,
    /// Wilson score interval for the observed share (absent for an empty bin).
    pub observed_interval: Option<Bounds>,
}

/// The Wilson score interval for `events` of `count`.
///
/// ```text
/// centre = (k + q²/2) / (n + q²)
/// half   = q / (n + q²) · √(k (n − k) / n + q²/4)
/// ```
pub fn wilson(events: u64, count: u64, quantile: f64) -> Bounds {
    let (k, n, q2) = (events as f64, count as f64, quantile * quantile);
    let centre = (k + q2 / 2.0) / (n + q2);
    let half = quantile / (n + q2) * (k * (n - k) / n + q2 / 4.0).sqrt();
    Bounds {
        lower: (centre - half).max(0.0),
        upper: (centre + half).min(1.0),
    }
}

pub(super) fn reliability(rows: &ModelRows, quantile: f64) -> Vec<ReliabilityBin> {
    let width = 1.0 / RELIABILITY_BINS as f64;
    rows.bins()
        .bins
        .iter()
        .enumerate()
        .map(|(k, bin)| {
            let filled = bin.count > 0;
            let n = bin.count as f64;
            ReliabilityBin {
                from: k as f64 * width,
                to: (k + 1) as f64 * width,
                count: bin.count,
                events: bin.events,
                mean_probability: filled.then(|| bin.sum_probability / n),
                observed: filled.then(|| bin.events as f64 / n),
                observed_interval: filled.then(|| wilson(bin.events, bin.count, quantile)),
            }
        })
        .collect()
}

/// Murphy's decomposition of the Brier score over the reliability bins.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct BrierDecomposition {
    /// REL: how far each bin's mean forecast is from its observed share (smaller is better).
    pub reliability: f64,
    /// RES: how far the bins' observed shares spread around the overall rate (larger is
    /// better).
    pub resolution: f64,
    /// UNC: ō(1 − ō), fixed by the data.
    pub uncertainty: f64,
    /// WBV − WBC: what binning continuous forecasts leaves over, so that
    /// reliability − resolution + uncertainty + within_bin equals the Brier score.
    pub within_bin: f64,
}

pub(super) fn decompose(rows: &ModelRows) -> BrierDecomposition {
    let total = rows.rows() as f64;
    let overall = rows.events() as f64 / total;
    let (mut reliability, mut resolution, mut variance, mut covariance) = (0.0, 0.0, 0.0, 0.0);
    for bin in rows.bins().bins.iter().filter(|b| b.count > 0) {
        let n = bin.count as f64;
        let mean_p = bin.sum_probability / n;
        let observed = bin.events as f64 / n;
        reliability += n * (mean_p - observed).powi(2);
        resolution += n * (observed - overall).powi(2);
        variance += bin.sum_squared_probability - n * mean_p * mean_p;
        // Σ (y − ō)(p − p̄) = Σ y p − n ō p̄
        covariance += bin.sum_event_probability - n * observed * mean_p;
    }
    BrierDecomposition {
        reliability: reliability / total,
        resolution: resolution / total,
        uncertainty: overall * (1.0 - overall),
        within_bin: (variance - 2.0 * covariance) / total,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn bins_are_closed_on_the_right() {
        assert_eq!(bin_of(0.0), 0);
        assert_eq!(bin_of(0.1), 0);
        assert_eq!(bin_of(0.1000001), 1);
        assert_eq!(bin_of(1.0), RELIABILITY_BINS - 1);
    }

    #[test]
    fn a_probability_on_an_edge_whose_product_rounds_up_stays_below_it() {
        // 0.3 · 10, 0.6 · 10 and 0.7 · 10 each round above the integer.
        for (p, bin) in [(0.3, 2), (0.6, 5), (0.7, 6), (0.9, 8)] {
            assert_eq!(bin_of(p), bin, "p = {p}");
            assert_eq!(
                bin_of(f64::from_bits(f64::to_bits(p) + 1)),
                bin + 1,
                "just above {p}"
            );
        }
    }
}
