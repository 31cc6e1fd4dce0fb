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

use std::collections::{BTreeMap, HashMap};
use std::io::Read;
use std::sync::{mpsc, Mutex};

use csv::ByteRecord;

use crate::batch::input::{covariate_columns, parse_record};
use crate::batch::{
    block_reader, record_start, BatchError, BlockSource, ErrorPolicy, RowError, WarningTally,
    DEFAULT_INPUT_BLOCK_BYTES,
};
use crate::engine::{Options, Scorer};
use crate::model::{Model, Value};

use super::rows::Scored;
use super::{Forecast, ModelRows, PairedRows};

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
        /// The column's name as the header row spells it.
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
        /// The outcome column's name as the header row spells it (its cells are 0/1 or false/true).
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
    /// The first 20 skipped rows (`SKIPPED_EXAMPLES`) and why.
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

/// How [`read_labelled`] reads.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct ReadOptions {
    /// What to do with a row that cannot be evaluated.
    pub on_error: ErrorPolicy,
    /// Worker threads that parse and score blocks of rows (at least 1). The figures are the
    /// same, bit for bit, whatever the number: the rows are accumulated in file order.
    pub threads: usize,
}

/// Read `input` once, scoring every row with each of `models` (one or two), and accumulate
/// the rows for [`super::evaluate`] and [`super::compare`]. `progress` is called now and then
/// with the bytes read.
///
/// The calling thread reads blocks of whole records (`batch::BlockSource`, the
/// reader of `ogive score`); `options.threads` workers parse, check and score each block's
/// rows into their figures; the calling thread adds the blocks to the accumulators in file
/// order. At most `2·threads + 2` blocks are in flight, each about
/// [`DEFAULT_INPUT_BLOCK_BYTES`] of input and its rows' figures.
pub fn read_labelled<R: Read>(
    models: &[&Model],
    input: R,
    outcome: &str,
    options: ReadOptions,
    progress: &mut dyn FnMut(u64),
) -> Result<Labelled, LabelledError> {
    assert!(
        (1..=2).contains(&models.len()),
        "one or two models are evaluated at a time"
    );
    let mut source = BlockSource::new(input, DEFAULT_INPUT_BLOCK_BYTES);
    let (header, header_bytes) = source.header()?;
    let columns: Vec<Vec<usize>> = models
        .iter()
        .map(|m| covariate_columns(m, &header))
        .collect::<Result<_, _>>()?;
    let layout = Layout {
        models,
        columns: &columns,
        header_len: header.len(),
        outcome_at: outcome_column(&header, outcome)?,
        outcome,
        on_error: options.on_error,
    };
    let mut totals = Totals {
        rows: models.iter().map(|_| ModelRows::new()).collect(),
        paired: (models.len() == 2).then(PairedRows::new),
        summary: LabelledSummary {
            rows_read: 0,
            rows_evaluated: 0,
            rows_skipped: 0,
            skipped_by_reason: BTreeMap::new(),
            skipped_examples: Vec::new(),
            warnings: models.iter().map(|m| WarningTally::new(m)).collect(),
        },
        newlines_before: memchr::memchr_iter(b'\n', &header_bytes).count() as u64,
    };
    let mut bytes_done = header_bytes.len() as u64;
    progress(bytes_done);

    let threads = options.threads.max(1);
    let (job_sender, job_receiver) = mpsc::channel::<(usize, Vec<u8>)>();
    let job_receiver = Mutex::new(job_receiver);
    let (done_sender, done_receiver) = mpsc::channel::<Done>();
    std::thread::scope(|scope| {
        for _ in 0..threads {
            let (done_sender, job_receiver, layout) = (done_sender.clone(), &job_receiver, &layout);
            scope.spawn(move || {
                let mut worker = Worker::new(layout);
                while let Some((index, block)) =
                    job_receiver.lock().ok().and_then(|r| r.recv().ok())
                {
                    // A panic is a bug; it ends the run with an error rather than leaving the
                    // reading thread waiting for a block that never comes.
                    let figures = std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| {
                        worker.block(&block)
                    }))
                    .unwrap_or(Err(BatchError::WorkerFailed));
                    if done_sender
                        .send(Done {
                            index,
                            block,
                            figures,
                        })
                        .is_err()
                    {
                        break;
                    }
                }
            });
        }
        drop(done_sender);
        let result = (|| -> Result<(), LabelledError> {
            let mut free: Vec<Vec<u8>> = (0..2 * threads + 2)
                .map(|_| Vec::with_capacity(DEFAULT_INPUT_BLOCK_BYTES))
                .collect();
            let mut waiting: HashMap<usize, Done> = HashMap::new();
            let (mut next_read, mut next_add, mut reading) = (0usize, 0usize, true);
            loop {
                while let Some(mut block) = reading.then(|| free.pop()).flatten() {
                    if source.next_block(&mut block)? {
                        job_sender
                            .send((next_read, block))
                            .map_err(|_| BatchError::WorkerFailed)?;
                        next_read += 1;
                    } else {
                        reading = false;
                        free.push(block);
                    }
                }
                if next_add == next_read {
                    return Ok(());
                }
                let done = done_receiver.recv().map_err(|_| BatchError::WorkerFailed)?;
                waiting.insert(done.index, done);
                while let Some(done) = waiting.remove(&next_add) {
                    totals.add(done.figures?)?;
                    bytes_done += done.block.len() as u64;
                    progress(bytes_done);
                    free.push(done.block);
                    next_add += 1;
                }
            }
        })();
        // No more blocks: the workers finish what they hold and stop.
        drop(job_sender);
        result
    })?;
    let Totals {
        rows,
        paired,
        mut summary,
        ..
    } = totals;
    summary.rows_read = summary.rows_evaluated + summary.rows_skipped;
    Ok(Labelled {
        rows,
        paired,
        summary,
    })
}

/// What every worker needs to know about the file and the models.
struct Layout<'a> {
    models: &'a [&'a Model],
    /// Each model's covariate columns.
    columns: &'a [Vec<usize>],
    header_len: usize,
    outcome_at: usize,
    outcome: &'a str,
    on_error: ErrorPolicy,
}

/// A block back from a worker, with its buffer for reuse.
struct Done {
    index: usize,
    block: Vec<u8>,
    figures: Result<BlockFigures, BatchError>,
}

/// One block's rows, worked out on a worker. Row and line numbers are counted from the
/// block's start.
struct BlockFigures {
    /// The good rows in order: one entry per model each.
    scored: Vec<[Scored; 2]>,
    /// Records in the block.
    records: u64,
    /// `\n` bytes in the block.
    newlines: u64,
    /// Rows left out under [`ErrorPolicy::Skip`], by reason.
    skipped_by_reason: BTreeMap<String, u64>,
    /// The first [`SKIPPED_EXAMPLES`] of them.
    skipped_examples: Vec<LabelledRowError>,
    /// The row that stops the run under [`ErrorPolicy::Stop`].
    stopped: Option<LabelledRowError>,
    /// Extrapolation warnings of the good rows, per model.
    warnings: Vec<WarningTally>,
}

/// One worker's scorers and buffers, reused from block to block.
struct Worker<'a> {
    layout: &'a Layout<'a>,
    options: Options,
    scorers: Vec<Scorer>,
    values: Vec<Vec<Value>>,
    record: ByteRecord,
}

impl<'a> Worker<'a> {
    fn new(layout: &'a Layout<'a>) -> Worker<'a> {
        Worker {
            layout,
            options: Options::probability_only(),
            scorers: layout.models.iter().map(|m| Scorer::new(m)).collect(),
            values: layout
                .models
                .iter()
                .map(|m| Vec::with_capacity(m.covariates.len()))
                .collect(),
            record: ByteRecord::new(),
        }
    }

    fn block(&mut self, input: &[u8]) -> Result<BlockFigures, BatchError> {
        let layout = self.layout;
        let mut figures = BlockFigures {
            scored: Vec::new(),
            records: 0,
            newlines: memchr::memchr_iter(b'\n', input).count() as u64,
            skipped_by_reason: BTreeMap::new(),
            skipped_examples: Vec::new(),
            stopped: None,
            warnings: layout.models.iter().map(|m| WarningTally::new(m)).collect(),
        };
        let mut reader = block_reader(input);
        while reader
            .read_byte_record(&mut self.record)
            .map_err(BatchError::Read)?
        {
            figures.records += 1;
            let line = self
                .record
                .position()
                .map_or(0, |p| record_start(input, p).1);
            match self.row(figures.records, line, &mut figures.warnings) {
                Ok(scored) => figures.scored.push(scored),
                Err(error) => match layout.on_error {
                    ErrorPolicy::Stop => {
                        figures.stopped = Some(error);
                        break;
                    }
                    ErrorPolicy::Skip => {
                        *figures.skipped_by_reason.entry(error.reason()).or_default() += 1;
                        if figures.skipped_examples.len() < SKIPPED_EXAMPLES {
                            figures.skipped_examples.push(error);
                        }
                    }
                },
            }
        }
        Ok(figures)
    }

    /// Read the current record's outcome and every model's covariates, then score it with
    /// every model: nothing is scored or counted unless the whole row is good.
    #[inline]
    fn row(
        &mut self,
        row: u64,
        line: u64,
        warnings: &mut [WarningTally],
    ) -> Result<[Scored; 2], LabelledRowError> {
        let layout = self.layout;
        let record = &self.record;
        // A row of the wrong length is reported by the covariate parse below, as `ogive score`
        // reports it; only a row of the header's length has a cell to read the outcome from.
        let event = if record.len() == layout.header_len {
            let cell = &record[layout.outcome_at];
            Some(
                parse_outcome(cell).ok_or_else(|| LabelledRowError::Outcome {
                    row,
                    line,
                    column: layout.outcome.to_string(),
                    text: String::from_utf8_lossy(cell).chars().take(40).collect(),
                })?,
            )
        } else {
            None
        };
        // The second model's covariates are checked before the first's: a row bad for both
        // is reported for the second.
        for index in (0..layout.models.len()).rev() {
            let model = layout.models[index];
            parse_record(
                model,
                &layout.columns[index],
                layout.header_len,
                record,
                &mut self.values[index],
            )
            .map_err(|problem| LabelledRowError::Covariates {
                model: format!("{} {}", model.name(), model.version()),
                error: RowError { row, line, problem },
            })?;
        }
        let event = event.expect("a row that parsed has the header's length");
        let mut scored = [Scored::of(Forecast::from_probability(0.5), event); 2];
        for (index, model) in layout.models.iter().enumerate() {
            let answer = self.scorers[index].score(model, &self.values[index], &self.options);
            warnings[index].add(&answer.warnings);
            let forecast = Forecast {
                probability: answer.probability,
                complement: answer.complement,
            };
            scored[index] = Scored::of(forecast, event);
        }
        Ok(scored)
    }
}

/// The accumulators, fed the blocks in file order.
struct Totals {
    rows: Vec<ModelRows>,
    paired: Option<PairedRows>,
    summary: LabelledSummary,
    newlines_before: u64,
}

impl Totals {
    /// Turn a block's row and line numbers into the file's.
    fn in_file(&self, error: LabelledRowError) -> LabelledRowError {
        let (rows, lines) = (
            self.summary.rows_evaluated + self.summary.rows_skipped,
            self.newlines_before,
        );
        match error {
            LabelledRowError::Outcome {
                row,
                line,
                column,
                text,
            } => LabelledRowError::Outcome {
                row: rows + row,
                line: lines + line,
                column,
                text,
            },
            LabelledRowError::Covariates { model, error } => LabelledRowError::Covariates {
                model,
                error: RowError {
                    row: rows + error.row,
                    line: lines + error.line,
                    problem: error.problem,
                },
            },
        }
    }

    /// Add a block; the error that stops the run, if the block has one.
    fn add(&mut self, block: BlockFigures) -> Result<(), LabelledRowError> {
        if let Some(error) = block.stopped {
            return Err(self.in_file(error));
        }
        for scored in &block.scored {
            for (rows, row) in self.rows.iter_mut().zip(scored) {
                rows.push_scored(row);
            }
            if let Some(paired) = &mut self.paired {
                paired.push_scored(&scored[0], &scored[1]);
            }
        }
        for (total, tally) in self.summary.warnings.iter_mut().zip(&block.warnings) {
            total.merge(tally);
        }
        for error in block.skipped_examples {
            if self.summary.skipped_examples.len() < SKIPPED_EXAMPLES {
                let error = self.in_file(error);
                self.summary.skipped_examples.push(error);
            }
        }
        let skipped: u64 = block.skipped_by_reason.values().sum();
        for (reason, count) in block.skipped_by_reason {
            *self.summary.skipped_by_reason.entry(reason).or_default() += count;
        }
        debug_assert_eq!(skipped + block.scored.len() as u64, block.records);
        self.summary.rows_evaluated += block.scored.len() as u64;
        self.summary.rows_skipped += skipped;
        self.newlines_before += block.newlines;
        Ok(())
    }
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
