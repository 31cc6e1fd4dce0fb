//! Batch scoring: stream a CSV file through a model and write it back with probabilities,
//! intervals, effects and warnings added as columns.
//!
//! The whole run keeps one CSV reader, one CSV writer, one [`Scorer`] and a handful of reused
//! buffers, so its memory is the same for a thousand rows or a billion. Rows are scored in
//! input order and written as soon as they are scored.
//!
//! ```text
//! input.rs    the header → covariate column map, and parsing one row into values
//! output.rs   the added columns, their names, and how cells are written
//! shard.rs    which row blocks one machine takes when a file is split (--shard I/N)
//! tally.rs    warning counts per covariate
//! pending.rs  an output file renamed into place only once it is complete
//! ```
//!
//! A bad row (a cell that does not parse, an unseen level, a log of a non-positive number, the
//! wrong number of fields) either stops the run with its 1-based data row number and the
//! covariate at fault, or, under [`ErrorPolicy::Skip`], is left out of the output, counted and
//! described in the [`Summary`]. Rows outside the shard are neither parsed nor checked.
//!
//! This module does not parse flags, draw progress bars or print: the command does.

pub mod input;
pub mod output;
pub mod pending;
pub mod shard;
pub mod tally;

use std::collections::BTreeMap;
use std::io::{Read, Write};

pub use input::{CovariateColumns, RowStream};
pub use output::{effect_column, output_columns, RowWriter};
pub use pending::PendingFile;
pub use shard::{BadShard, Shard};
pub use tally::{RangeCounts, WarningTally};

use crate::engine::{BadLevel, Options, Scorer};
use crate::model::{Model, ObservationError};

/// How many skipped rows a [`Summary`] describes one by one (the rest are only counted).
pub const SKIPPED_EXAMPLES: usize = 20;

/// Rows scored between two progress reports.
const PROGRESS_EVERY_ROWS: u64 = 8192;

/// The default number of rows in a shard block.
pub const DEFAULT_BLOCK_ROWS: u64 = 10_000;

/// What to do with a row that cannot be scored.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum ErrorPolicy {
    /// Stop the run, naming the row and the covariate.
    #[default]
    Stop,
    /// Leave the row out of the output, count it and go on.
    Skip,
}

/// What a batch run computes and which rows it takes.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ScoreOptions {
    /// Add marginal-effect and standard-error columns.
    pub effects: bool,
    /// The interval level, strictly between 0 and 1.
    pub level: f64,
    /// What to do with a bad row.
    pub on_error: ErrorPolicy,
    /// Which row blocks to score.
    pub shard: Shard,
    /// Rows per shard block (at least 1).
    pub block_rows: u64,
}

impl Default for ScoreOptions {
    fn default() -> Self {
        ScoreOptions {
            effects: false,
            level: 0.95,
            on_error: ErrorPolicy::Stop,
            shard: Shard::ALL,
            block_rows: DEFAULT_BLOCK_ROWS,
        }
    }
}

/// Why a batch run could not go on.
#[derive(Debug, thiserror::Error)]
pub enum BatchError {
    /// The input is not readable CSV (or could not be read at all).
    #[error("cannot read the CSV input: {0}")]
    Read(#[source] csv::Error),
    /// The input is empty: there is not even a header row.
    #[error("the CSV input has no header row")]
    NoHeader,
    /// The input has a header but no data rows, where rows are needed (averages).
    #[error("the CSV input has no data rows")]
    NoRows,
    /// The header lacks a covariate the model needs.
    #[error(
        "the CSV header has no column '{covariate}', which the model needs (columns: {columns})"
    )]
    MissingColumn {
        /// The covariate.
        covariate: String,
        /// The header's columns, comma-separated.
        columns: String,
    },
    /// Two columns carry the same covariate's name.
    #[error("the CSV header names covariate '{covariate}' twice (columns {first} and {second})")]
    DuplicateColumn {
        /// The covariate.
        covariate: String,
        /// The first column, 1-based.
        first: usize,
        /// The second column, 1-based.
        second: usize,
    },
    /// The input already has a column the output would add.
    #[error(
        "the input already has a column named '{0}', which the output adds; rename or drop it"
    )]
    OutputColumnTaken(String),
    /// The interval level is out of range.
    #[error(transparent)]
    Level(#[from] BadLevel),
    /// A row that cannot be scored, under [`ErrorPolicy::Stop`].
    #[error(transparent)]
    Row(#[from] RowError),
    /// The output could not be written.
    #[error("cannot write the CSV output: {0}")]
    Write(#[source] csv::Error),
}

/// A row that cannot be scored, and where it is.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("row {row} (line {line}): {problem}")]
pub struct RowError {
    /// The 1-based data row (the header is not counted).
    pub row: u64,
    /// The 1-based line on which the row starts (the header is line 1).
    pub line: u64,
    /// What is wrong with it.
    pub problem: RowProblem,
}

/// What is wrong with a row.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum RowProblem {
    /// A covariate's cell does not give a valid value (the error names the covariate).
    #[error(transparent)]
    Value(ObservationError),
    /// A covariate's cell is empty.
    #[error("covariate '{covariate}' is empty")]
    Empty {
        /// The covariate.
        covariate: String,
    },
    /// A covariate's cell is not UTF-8 text.
    #[error("covariate '{covariate}' is not valid UTF-8 text")]
    NotUtf8 {
        /// The covariate.
        covariate: String,
    },
    /// The row has a different number of fields than the header.
    #[error("the row has {found} fields but the header has {expected}")]
    FieldCount {
        /// Fields in the header.
        expected: usize,
        /// Fields in this row.
        found: usize,
    },
}

impl RowProblem {
    /// The covariate at fault, if the problem lies in one cell.
    pub fn covariate(&self) -> Option<&str> {
        match self {
            RowProblem::Value(e) => Some(e.field()),
            RowProblem::Empty { covariate } | RowProblem::NotUtf8 { covariate } => Some(covariate),
            RowProblem::FieldCount { .. } => None,
        }
    }
}

/// What a batch run did.
#[derive(Debug, Clone)]
pub struct Summary {
    /// Data rows read from the input (all shards).
    pub rows_read: u64,
    /// Rows that belonged to this shard.
    pub rows_in_shard: u64,
    /// Rows scored and written.
    pub rows_scored: u64,
    /// Rows left out under [`ErrorPolicy::Skip`].
    pub rows_skipped: u64,
    /// The first [`SKIPPED_EXAMPLES`] skipped rows and why.
    pub skipped_examples: Vec<RowError>,
    /// Skipped rows per covariate at fault (`(row shape)` for a wrong field count).
    pub skipped_by_covariate: BTreeMap<String, u64>,
    /// Warnings over the scored rows.
    pub warnings: WarningTally,
    /// Whether intervals and standard errors were computed (the model has a covariance).
    pub intervals: bool,
}

/// Score every row of `input` in this shard and write them, with the added columns of
/// [`output_columns`], to `output`. `progress` is called now and then with the input bytes
/// consumed so far.
pub fn score_csv<R: Read, W: Write>(
    model: &Model,
    input: R,
    output: W,
    options: &ScoreOptions,
    progress: &mut dyn FnMut(u64),
) -> Result<Summary, BatchError> {
    let mut engine_options = Options::new(options.level)?;
    engine_options.effects = options.effects;
    engine_options.contributions = false;
    engine_options.elasticities = false;
    engine_options.intervals = true;

    let mut rows = RowStream::new(model, input)?;
    let mut writer = RowWriter::new(model, output, rows.header(), options.effects)?;
    let mut scorer = Scorer::new(model);
    let mut summary = Summary {
        rows_read: 0,
        rows_in_shard: 0,
        rows_scored: 0,
        rows_skipped: 0,
        skipped_examples: Vec::new(),
        skipped_by_covariate: BTreeMap::new(),
        warnings: WarningTally::new(model),
        intervals: model.covariance.is_some(),
    };
    let block_rows = options.block_rows.max(1);
    while rows.advance()? {
        let row = rows.row();
        if row % PROGRESS_EVERY_ROWS == 0 {
            progress(rows.bytes_read());
        }
        if !options.shard.contains(row, block_rows) {
            continue;
        }
        summary.rows_in_shard += 1;
        let values = match rows.parse(model) {
            Ok(values) => values,
            Err(error) => match options.on_error {
                ErrorPolicy::Stop => return Err(error.into()),
                ErrorPolicy::Skip => {
                    summary.rows_skipped += 1;
                    let key = error.problem.covariate().unwrap_or("(row shape)");
                    *summary
                        .skipped_by_covariate
                        .entry(key.to_string())
                        .or_default() += 1;
                    if summary.skipped_examples.len() < SKIPPED_EXAMPLES {
                        summary.skipped_examples.push(error);
                    }
                    continue;
                }
            },
        };
        let answer = scorer.score(model, values, &engine_options);
        summary.warnings.add(&answer.warnings);
        writer.write(rows.record(), answer)?;
        summary.rows_scored += 1;
    }
    summary.rows_read = rows.row();
    progress(rows.bytes_read());
    writer.finish()?;
    Ok(summary)
}
