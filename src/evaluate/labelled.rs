//! One pass over a labelled CSV file: each row's outcome and covariates are read with the same
//! reader and checks as `ogive score` ([`crate::batch::RowStream`]), scored by one model or two,
//! and fed to the accumulators of this module's statistics.
//!
//! A row is evaluated for both models or for neither: a bad outcome cell or a covariate cell
//! that either model cannot use stops the run with its row, line and column, or, under
//! [`ErrorPolicy::Skip`], leaves the row out for both and counts it by reason. The paired
//! figures therefore always rest on the same rows.
//!
//! This file reads and scores; it computes no figure and prints nothing.

use std::collections::BTreeMap;
use std::io::Read;

use crate::batch::{BatchError, CovariateColumns, ErrorPolicy, RowError, RowStream, WarningTally};
use crate::engine::{Options, Scorer};
use crate::model::Model;

use super::{Forecast, ModelRows, PairedRows};

/// Rows read between two progress reports.
const PROGRESS_EVERY_ROWS: u64 = 8192;

/// How many skipped rows a summary describes one by one (the rest are only counted).
pub const SKIPPED_EXAMPLES: usize = 20;

/// Why a labelled file could not be read through.
#[derive(Debug, thiserror::Error)]
pub enum LabelledError {
    /// The CSV could not be read, its header lacks a covariate, or a covariate cell is bad
    /// (under [`ErrorPolicy::Stop`]).
    #[error(transparent)]
    Batch(#[from] BatchError),
    /// The header has no outcome column of that name.
    #[error("the CSV header has no outcome column '{column}' (columns: {columns})")]
    MissingOutcome {
        /// The column asked for.
        column: String,
        /// The header's columns, comma-separated.
        columns: String,
    },
    /// The header names the outcome column twice.
    #[error(
        "the CSV header names the outcome column '{column}' twice (columns {first} and {second})"
    )]
    DuplicateOutcome {
        /// The column.
        column: String,
        /// The first, 1-based.
        first: usize,
        /// The second, 1-based.
        second: usize,
    },
    /// A bad row, under [`ErrorPolicy::Stop`].
    #[error(transparent)]
    Row(#[from] LabelledRowError),
}

/// A row that cannot be evaluated, and where it is.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum LabelledRowError {
    /// The outcome cell is not 0 or 1.
    #[error(
        "row {row} (line {line}): outcome '{column}' must be 0 or 1 (or false/true), got {text:?}"
    )]
    Outcome {
        /// The 1-based data row.
        row: u64,
        /// The 1-based line (the header is line 1).
        line: u64,
        /// The outcome column.
        column: String,
        /// The cell as read (cut to 40 characters).
        text: String,
    },
    /// A covariate cell one of the models cannot use, or a row of the wrong length.
    #[error("{error} (for model {model})")]
    Covariates {
        /// The model whose covariate is at fault.
        model: String,
        /// The row, line and problem.
        error: RowError,
    },
}

impl LabelledRowError {
    /// The key under which a skipped row is counted: `outcome 'COL'`, the covariate at fault,
    /// or `(row shape)`.
    pub fn reason(&self) -> String {
        match self {
            LabelledRowError::Outcome { column, .. } => format!("outcome '{column}'"),
            LabelledRowError::Covariates { error, .. } => error
                .problem
                .covariate()
                .map_or_else(|| "(row shape)".to_string(), |c| format!("covariate '{c}'")),
        }
    }
}

/// What the pass read, evaluated and left out.
#[derive(Debug, Clone)]
pub struct LabelledSummary {
    /// Data rows read.
    pub rows_read: u64,
    /// Rows evaluated (for every model).
    pub rows_evaluated: u64,
    /// Rows left out under [`ErrorPolicy::Skip`].
    pub rows_skipped: u64,
    /// Skipped rows by [`LabelledRowError::reason`].
    pub skipped_by_reason: BTreeMap<String, u64>,
    /// The first [`SKIPPED_EXAMPLES`] skipped rows and why.
    pub skipped_examples: Vec<LabelledRowError>,
    /// Extrapolation warnings over the evaluated rows, one tally per model in the order given.
    pub warnings: Vec<WarningTally>,
}

/// The accumulated rows: one [`ModelRows`] per model in the order given, and the paired
/// per-row differences of the first two when there are two.
#[derive(Debug, Clone)]
pub struct Labelled {
    /// Per model.
    pub rows: Vec<ModelRows>,
    /// First − second, when two models were given.
    pub paired: Option<PairedRows>,
    /// What was read.
    pub summary: LabelledSummary,
}

/// The outcome cell: 0 or 1 (also 0.0 / 1.0), or false / true in any letter case, as
/// `ogive fit` reads it.
fn parse_outcome(text: &[u8]) -> Option<bool> {
    let text = text.trim_ascii();
    match text {
        b"0" => return Some(false),
        b"1" => return Some(true),
        _ => {}
    }
    if text.eq_ignore_ascii_case(b"true") {
        return Some(true);
    }
    if text.eq_ignore_ascii_case(b"false") {
        return Some(false);
    }
    let x: f64 = std::str::from_utf8(text).ok()?.parse().ok()?;
    if x == 0.0 {
        Some(false)
    } else if x == 1.0 {
        Some(true)
    } else {
        None
    }
}

fn outcome_column(header: &csv::ByteRecord, column: &str) -> Result<usize, LabelledError> {
    let names: Vec<String> = header
        .iter()
        .map(|f| String::from_utf8_lossy(f).trim().to_string())
        .collect();
    let mut found = names
        .iter()
        .enumerate()
        .filter(|(_, n)| n.as_str() == column)
        .map(|(i, _)| i);
    let first = found.next().ok_or_else(|| LabelledError::MissingOutcome {
        column: column.to_string(),
        columns: names.join(", "),
    })?;
    if let Some(second) = found.next() {
        return Err(LabelledError::DuplicateOutcome {
            column: column.to_string(),
            first: first + 1,
            second: second + 1,
        });
    }
    Ok(first)
}

/// Whether the CSV header of `input` has a column named `column` (surrounding spaces ignored).
pub fn has_column<R: Read>(input: R, column: &str) -> Result<bool, csv::Error> {
    let mut reader = csv::ReaderBuilder::new()
        .has_headers(true)
        .from_reader(input);
    let header = reader.byte_headers()?;
    Ok(header
        .iter()
        .any(|f| String::from_utf8_lossy(f).trim() == column))
}

/// Read `input` once, scoring every row with each of `models` (one or two), and accumulate
/// the rows for [`super::evaluate`] and [`super::compare`]. `rows_hint` sizes the stored
/// logits up front (0 when unknown); `progress` is called now and then with the bytes read.
pub fn read_labelled<R: Read>(
    models: &[&Model],
    input: R,
    outcome: &str,
    on_error: ErrorPolicy,
    rows_hint: usize,
    progress: &mut dyn FnMut(u64),
) -> Result<Labelled, LabelledError> {
    assert!(
        (1..=2).contains(&models.len()),
        "one or two models are evaluated at a time"
    );
    let mut stream = RowStream::new(models[0], input)?;
    let outcome_at = outcome_column(stream.header(), outcome)?;
    let mut other_columns: Vec<CovariateColumns> = models[1..]
        .iter()
        .map(|m| stream.columns_for(m))
        .collect::<Result<_, _>>()?;
    let options = Options::probability_only();
    let mut scorers: Vec<Scorer> = models.iter().map(|m| Scorer::new(m)).collect();
    let mut rows: Vec<ModelRows> = models
        .iter()
        .map(|_| ModelRows::with_capacity(rows_hint))
        .collect();
    let mut paired = (models.len() == 2).then(PairedRows::new);
    let mut summary = LabelledSummary {
        rows_read: 0,
        rows_evaluated: 0,
        rows_skipped: 0,
        skipped_by_reason: BTreeMap::new(),
        skipped_examples: Vec::new(),
        warnings: models.iter().map(|m| WarningTally::new(m)).collect(),
    };
    let mut forecasts = [Forecast::from_probability(0.5); 2];

    while stream.advance()? {
        let row = stream.row();
        if row % PROGRESS_EVERY_ROWS == 0 {
            progress(stream.bytes_read());
        }
        match score_row(
            models,
            &mut stream,
            &mut other_columns,
            &mut scorers,
            &options,
            outcome_at,
            outcome,
            &mut forecasts,
            &mut summary.warnings,
        ) {
            Ok(event) => {
                for (model_rows, forecast) in rows.iter_mut().zip(&forecasts) {
                    model_rows.push(*forecast, event);
                }
                if let Some(paired) = &mut paired {
                    paired.push(forecasts[0], forecasts[1], event);
                }
                summary.rows_evaluated += 1;
            }
            Err(error) => match on_error {
                ErrorPolicy::Stop => return Err(error.into()),
                ErrorPolicy::Skip => {
                    summary.rows_skipped += 1;
                    *summary.skipped_by_reason.entry(error.reason()).or_default() += 1;
                    if summary.skipped_examples.len() < SKIPPED_EXAMPLES {
                        summary.skipped_examples.push(error);
                    }
                }
            },
        }
    }
    summary.rows_read = stream.row();
    progress(stream.bytes_read());
    Ok(Labelled {
        rows,
        paired,
        summary,
    })
}

/// Read the current row's outcome and every model's covariates, then score it with every
/// model: nothing is scored or counted unless the whole row is good.
#[allow(clippy::too_many_arguments)]
#[inline]
fn score_row<R: Read>(
    models: &[&Model],
    stream: &mut RowStream<R>,
    other_columns: &mut [CovariateColumns],
    scorers: &mut [Scorer],
    options: &Options,
    outcome_at: usize,
    outcome: &str,
    forecasts: &mut [Forecast; 2],
    warnings: &mut [WarningTally],
) -> Result<bool, LabelledRowError> {
    let covariates = |error: RowError, model: &Model| LabelledRowError::Covariates {
        model: format!("{} {}", model.name(), model.version()),
        error,
    };
    // A row of the wrong length is reported by the covariate parse below, as `ogive score`
    // reports it; only a row of the header's length has a cell to read the outcome from.
    let event = if stream.record().len() == stream.header().len() {
        let cell = &stream.record()[outcome_at];
        Some(
            parse_outcome(cell).ok_or_else(|| LabelledRowError::Outcome {
                row: stream.row(),
                line: stream.line(),
                column: outcome.to_string(),
                text: String::from_utf8_lossy(cell).chars().take(40).collect(),
            })?,
        )
    } else {
        None
    };
    let second = match (models.get(1), other_columns.first_mut()) {
        (Some(model), Some(columns)) => Some((
            *model,
            stream
                .parse_for(model, columns)
                .map_err(|e| covariates(e, model))?,
        )),
        _ => None,
    };
    let first = stream
        .parse(models[0])
        .map_err(|e| covariates(e, models[0]))?;
    let event = event.expect("a row that parsed has the header's length");

    let answer = scorers[0].score(models[0], first, options);
    forecasts[0] = Forecast {
        probability: answer.probability,
        complement: answer.complement,
    };
    warnings[0].add(&answer.warnings);
    if let Some((model, values)) = second {
        let answer = scorers[1].score(model, values, options);
        forecasts[1] = Forecast {
            probability: answer.probability,
            complement: answer.complement,
        };
        warnings[1].add(&answer.warnings);
    }
    Ok(event)
}

#[cfg(test)]
mod tests {
    use super::parse_outcome;

    #[test]
    fn outcome_cells_read_as_fit_reads_them() {
        for (text, want) in [
            ("0", Some(false)),
            ("1", Some(true)),
            (" 1 ", Some(true)),
            ("1.0", Some(true)),
            ("0e0", Some(false)),
            ("TRUE", Some(true)),
            ("false", Some(false)),
            ("2", None),
            ("0.5", None),
            ("", None),
            ("yes", None),
        ] {
            assert_eq!(parse_outcome(text.as_bytes()), want, "{text:?}");
        }
    }
}
