//! One pass over a CSV file for the report: average marginal effects with delta-method standard
//! errors, the average probability, and the extrapolation warnings the rows would raise.
//!
//! ```text
//! AME = (1/n) Σᵢ mᵢ      ∇AME = (1/n) Σᵢ ∂mᵢ/∂β      se = √(∇AMEᵀ V ∇AME)
//! ```
//!
//! The data are treated as fixed and only the coefficients as uncertain, the usual convention
//! for average marginal effects. The pass keeps running sums only ([`Averager`]), so its memory
//! does not grow with the file. A row that cannot be scored stops the pass with its row number.

use std::io::Read;

use crate::batch::{BatchError, RowStream, WarningTally};
use crate::engine::{effect_slots, Average, Averager, Options, Scorer};
use crate::model::Model;

/// What one pass over a data file found.
#[derive(Debug, Clone)]
pub struct DataSummary {
    /// Where the rows came from (a file name, or `standard input`).
    pub source: String,
    /// Rows read and scored.
    pub rows: u64,
    /// The average probability.
    pub probability: Average,
    /// The average effects, in [`effect_slots`] order.
    pub effects: Vec<Average>,
    /// Warnings the rows raised.
    pub warnings: WarningTally,
}

/// Score every row of `input` and average; `options` gives the interval level.
pub fn summarise_csv<R: Read>(
    model: &Model,
    input: R,
    source: &str,
    options: &Options,
) -> Result<DataSummary, BatchError> {
    let mut rows = RowStream::new(model, input)?;
    let slots = effect_slots(model);
    let mut scorer = Scorer::new(model);
    let mut averager = Averager::new(model, slots.len());
    let mut warnings = WarningTally::new(model);
    // Per row only the effects and their gradients are needed (the averager takes them);
    // standard errors come once, from the averaged gradient.
    let mut per_row = *options;
    per_row.effects = false;
    per_row.intervals = false;
    per_row.contributions = false;
    per_row.elasticities = false;
    while rows.advance()? {
        let values = rows.parse(model)?;
        let answer = scorer.score_and_average(model, values, &per_row, &mut averager);
        warnings.add(&answer.warnings);
    }
    if averager.count() == 0 {
        return Err(BatchError::NoRows);
    }
    let mut at_end = *options;
    at_end.intervals = true;
    let (probability, effects) = averager.finish(model, &slots, &at_end);
    Ok(DataSummary {
        source: source.to_string(),
        rows: averager.count(),
        probability,
        effects,
        warnings,
    })
}
