//! The sample a fit estimates from: the table as read, each row's weight, and the rows that
//! count (a row of weight 0 is no observation). Refuses a sample no binary model can be fitted
//! to: no rows, weights that are all zero, an outcome that does not vary among the rows that
//! count.
//!
//! This module decides nothing about terms or the estimate.

use super::error::FitError;
use super::options::{read_request, Checked, FitRequest};
use super::reader::{self, Table};
use super::{weighting, Progress};

/// The data of a fit.
#[derive(Debug)]
pub(crate) struct Sample {
    /// The rows kept.
    pub table: Table,
    /// One weight per row: the weight column's, or the population weights; `None` unweighted.
    pub weights: Option<Vec<f64>>,
    /// Rows of positive weight (every row without weights).
    pub counted: usize,
}

impl Sample {
    /// Rows kept.
    pub fn rows(&self) -> usize {
        self.table.rows()
    }

    /// The outcome, 0.0 or 1.0 per row.
    pub fn outcome(&self) -> &[f64] {
        &self.table.outcome
    }

    /// The weights, if any.
    pub fn weights(&self) -> Option<&[f64]> {
        self.weights.as_deref()
    }
}

/// Read the file a checked request names and weight its rows.
pub(crate) fn read(
    request: &FitRequest,
    checked: &Checked,
    progress: &dyn Progress,
) -> Result<Sample, FitError> {
    let table = reader::read_table(&read_request(request, checked), progress)?;
    let n = table.rows();
    if n == 0 {
        return Err(FitError::NoRows(if table.dropped > 0 {
            format!(
                " (all {} rows had a missing value and were dropped)",
                table.dropped
            )
        } else {
            String::new()
        }));
    }
    let weights: Option<Vec<f64>> = match &checked.weighting {
        weighting::Plan::PopulationWeights(rate) => {
            Some(weighting::population_weights(&table.outcome, *rate))
        }
        _ => table.weights.clone(),
    };
    if let (Some(w), Some(column)) = (&weights, checked.weighting.column()) {
        if w.iter().all(|&v| v == 0.0) {
            return Err(FitError::WeightsAllZero {
                column: column.to_string(),
                rows: n as u64,
            });
        }
    }
    // A row of weight 0 is no observation: it counts for neither outcome.
    let counts = |i: usize| weights.as_deref().is_none_or(|w| w[i] > 0.0);
    let counted = (0..n).filter(|&i| counts(i)).count();
    let ones = (0..n)
        .filter(|&i| counts(i) && table.outcome[i] > 0.5)
        .count();
    if ones == 0 || ones == counted {
        return Err(FitError::OutcomeConstant {
            column: request.outcome.clone(),
            value: u8::from(ones == counted),
            rows: counted as u64,
        });
    }
    Ok(Sample {
        table,
        weights,
        counted,
    })
}
