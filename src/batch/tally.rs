//! Counting extrapolation warnings over many rows: how many rows fell below or above each
//! covariate's training range, and how many were an unusual combination.
//!
//! The tally keeps one pair of counters per covariate, so it stays the same size however many
//! rows it sees. It counts; it does not judge (the report and the command say what a count
//! means).

use crate::engine::Warning;
use crate::model::Model;

/// Warning counts over a set of rows.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct WarningTally {
    rows: u64,
    rows_with_warnings: u64,
    below: Vec<u64>,
    above: Vec<u64>,
    unusual_combination: u64,
}

/// One covariate's counts: rows below the training minimum and rows above the maximum.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct RangeCounts {
    /// The covariate's index.
    pub covariate: usize,
    /// Rows whose value was below the training minimum.
    pub below: u64,
    /// Rows whose value was above the training maximum.
    pub above: u64,
}

impl WarningTally {
    /// An empty tally for `model`.
    pub fn new(model: &Model) -> WarningTally {
        let n = model.covariates.len();
        WarningTally {
            rows: 0,
            rows_with_warnings: 0,
            below: vec![0; n],
            above: vec![0; n],
            unusual_combination: 0,
        }
    }

    /// Count one row's warnings.
    #[inline]
    pub fn add(&mut self, warnings: &[Warning]) {
        self.rows += 1;
        if warnings.is_empty() {
            return;
        }
        self.rows_with_warnings += 1;
        for w in warnings {
            match *w {
                Warning::OutOfRange {
                    covariate,
                    value,
                    min,
                    ..
                } => {
                    if value < min {
                        self.below[covariate] += 1;
                    } else {
                        self.above[covariate] += 1;
                    }
                }
                Warning::UnusualCombination { .. } => self.unusual_combination += 1,
            }
        }
    }

    /// Add another tally's counts (of the same model) to this one.
    pub fn merge(&mut self, other: &WarningTally) {
        self.rows += other.rows;
        self.rows_with_warnings += other.rows_with_warnings;
        for (total, part) in self.below.iter_mut().zip(&other.below) {
            *total += part;
        }
        for (total, part) in self.above.iter_mut().zip(&other.above) {
            *total += part;
        }
        self.unusual_combination += other.unusual_combination;
    }

    /// Rows counted.
    pub fn rows(&self) -> u64 {
        self.rows
    }

    /// Rows that raised at least one warning.
    pub fn rows_with_warnings(&self) -> u64 {
        self.rows_with_warnings
    }

    /// Rows whose continuous covariates together lay further from the training mean than any
    /// training observation.
    pub fn unusual_combination(&self) -> u64 {
        self.unusual_combination
    }

    /// Counts for every covariate that had at least one row outside its training range, in
    /// covariate order.
    pub fn out_of_range(&self) -> impl Iterator<Item = RangeCounts> + '_ {
        self.below
            .iter()
            .zip(&self.above)
            .enumerate()
            .filter(|(_, (b, a))| **b + **a > 0)
            .map(|(covariate, (&below, &above))| RangeCounts {
                covariate,
                below,
                above,
            })
    }
}
