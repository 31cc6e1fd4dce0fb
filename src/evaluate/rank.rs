//! One model's rows ranked once: each row's placement among the rows of the other class (what
//! the AUC and DeLong's variance are made of), and the deciles of risk, from one sort of each
//! class and one merged walk over the two.
//!
//! ```text
//! events and non-events each sorted by score (with their row numbers)
//! walk both in ascending order, one distinct score s at a time:
//!   e events and k non-events score s; b non-events and a events scored below it
//!   each of the e events:      c = 2b + k               (V₁₀ = c / 2n)
//!   each of the k non-events:  c = 2(m − a − e) + e     (V₀₁ = c / 2m)
//!   the k non-events, then the e events, go to the deciles of risk in that order
//! ```
//!
//! A placement is kept as the whole number c, twice the count of the other class below (or
//! above) plus the ties, so it is exact and takes 4 bytes a row; (c/2)/n and c/(2n) are the
//! same double, since both are the rounded quotient of the same exact numbers. The sort holds
//! (score, row) pairs, 16 bytes a row, only while the ranking is made; the placements stay
//! (4 bytes a row) for the paired test.

use super::hosmer::{HosmerLemeshow, RiskDeciles};
use super::rows::ModelRows;
use super::EvaluateError;

/// The most rows a ranking holds: placements (twice a count) and row numbers are `u32`.
pub const MAX_RANKED_ROWS: u64 = (u32::MAX / 2) as u64;

/// One model's placements, in row order within each class, and its deciles of risk.
#[derive(Debug, Clone)]
pub(super) struct Ranking {
    /// Per event: 2·#{non-events below} + #{non-events tied}.
    pub event_counts: Vec<u32>,
    /// Per non-event: 2·#{events above} + #{events tied}.
    pub non_event_counts: Vec<u32>,
    /// Hosmer–Lemeshow over the deciles of risk of the same walk.
    pub hosmer_lemeshow: HosmerLemeshow,
}

/// Refuse rows the ranking cannot count.
pub(super) fn check_size(rows: u64) -> Result<(), EvaluateError> {
    if rows > MAX_RANKED_ROWS {
        return Err(EvaluateError::TooManyRows {
            rows,
            limit: MAX_RANKED_ROWS,
        });
    }
    Ok(())
}

/// `values` with their positions, sorted by value (the order of `f64::total_cmp`).
fn sorted_with_rows(values: &[f64]) -> Vec<(f64, u32)> {
    let mut pairs: Vec<(f64, u32)> = values
        .iter()
        .enumerate()
        .map(|(row, &v)| (v, row as u32))
        .collect();
    pairs.sort_unstable_by(|a, b| a.0.total_cmp(&b.0));
    pairs
}

/// The end of the run of scores equal to `score` starting at `from` (equal as
/// `f64::total_cmp` orders them, so the head of a class always matches itself and the walk
/// always moves on).
fn run_end(sorted: &[(f64, u32)], from: usize, score: f64) -> usize {
    from + sorted[from..]
        .iter()
        .take_while(|p| p.0.total_cmp(&score).is_eq())
        .count()
}

/// Rank `rows` (the caller has checked [`check_size`]).
pub(super) fn rank(rows: &ModelRows) -> Ranking {
    let events = sorted_with_rows(rows.event_logits());
    let non_events = sorted_with_rows(rows.non_event_logits());
    let m = events.len() as u32;
    let mut event_counts = vec![0u32; events.len()];
    let mut non_event_counts = vec![0u32; non_events.len()];
    let mut deciles = RiskDeciles::new(rows.rows());
    let (mut i, mut j) = (0, 0);
    while i < events.len() || j < non_events.len() {
        let score = match (events.get(i), non_events.get(j)) {
            (Some(e), Some(n)) => std::cmp::min_by(e.0, n.0, f64::total_cmp),
            (Some(e), None) => e.0,
            (None, Some(n)) => n.0,
            (None, None) => unreachable!("the loop runs while a class has rows left"),
        };
        let (event_end, non_event_end) =
            (run_end(&events, i, score), run_end(&non_events, j, score));
        let (tied_events, tied_non_events) = ((event_end - i) as u32, (non_event_end - j) as u32);
        let event_count = 2 * j as u32 + tied_non_events;
        let non_event_count = 2 * (m - i as u32 - tied_events) + tied_events;
        for &(x, row) in &non_events[j..non_event_end] {
            non_event_counts[row as usize] = non_event_count;
            deciles.add(x, false);
        }
        for &(x, row) in &events[i..event_end] {
            event_counts[row as usize] = event_count;
            deciles.add(x, true);
        }
        (i, j) = (event_end, non_event_end);
    }
    Ranking {
        event_counts,
        non_event_counts,
        hosmer_lemeshow: deciles.finish(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::evaluate::Forecast;

    /// The placement counts by their definition, one pair of rows at a time.
    fn counted(own: &[f64], other: &[f64], own_is_event: bool) -> Vec<u32> {
        own.iter()
            .map(|&x| {
                let beaten = other
                    .iter()
                    .filter(|&&y| if own_is_event { y < x } else { y > x })
                    .count();
                let tied = other.iter().filter(|&&y| y == x).count();
                (2 * beaten + tied) as u32
            })
            .collect()
    }

    #[test]
    fn the_walk_gives_each_row_the_counts_of_its_definition_ties_included() {
        // Probabilities with ties within and across the classes, in no order.
        let events = [0.9, 0.4, 0.7, 0.4, 0.2, 0.9];
        let non_events = [0.4, 0.1, 0.9, 0.3, 0.4, 0.05, 0.7];
        let mut rows = ModelRows::new();
        for (&p, event) in events
            .iter()
            .map(|p| (p, true))
            .chain(non_events.iter().map(|p| (p, false)))
        {
            rows.push(Forecast::from_probability(p), event);
        }
        let ranking = rank(&rows);
        let (e, n) = (rows.event_logits(), rows.non_event_logits());
        assert_eq!(ranking.event_counts, counted(e, n, true));
        assert_eq!(ranking.non_event_counts, counted(n, e, false));
        let groups = &ranking.hosmer_lemeshow.groups;
        assert_eq!(groups.iter().map(|g| g.rows).sum::<u64>(), 13);
        assert_eq!(groups.iter().map(|g| g.observed).sum::<u64>(), 6);
    }

    #[test]
    fn more_rows_than_a_ranking_counts_are_refused() {
        assert!(check_size(MAX_RANKED_ROWS).is_ok());
        assert_eq!(
            check_size(MAX_RANKED_ROWS + 1),
            Err(EvaluateError::TooManyRows {
                rows: MAX_RANKED_ROWS + 1,
                limit: MAX_RANKED_ROWS,
            })
        );
    }
}
