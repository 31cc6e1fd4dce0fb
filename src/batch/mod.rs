//! Batch scoring: stream a CSV file through a model and write it back with probabilities,
//! intervals, effects and warnings added as columns.
//!
//! The calling thread reads the input in blocks of whole records (about
//! [`DEFAULT_INPUT_BLOCK_BYTES`] each, cut where `cut` says a block parses on its own) and
//! hands them to `threads` workers, which parse, score and format their block's rows into the
//! block's output bytes; the calling thread writes finished blocks in input order. The output is
//! therefore the same, byte for byte, whatever the number of threads.
//!
//! Memory is flat: at most `2·threads + 2` blocks are in flight (being read, waiting, being
//! scored, or waiting to be written), and a block buffer is reused once its output is written.
//! The bound is `(2·threads + 2) × (block input + its output)`, about 2.3 MB per thread with
//! effect columns for ten covariates, plus the longest record when one is longer than a block,
//! plus each worker's [`Scorer`](crate::engine::Scorer).
//!
//! ```text
//! cut.rs      where the byte stream may be cut into blocks (quote-aware)
//! block.rs    scoring one block on a worker; row offsets for sharded runs
//! input.rs    the header → covariate column map, and parsing one row into values
//! output.rs   the added columns, their names, and how cells are written
//! shard.rs    which row blocks one machine takes when a file is split (--shard I/N)
//! tally.rs    warning counts per covariate
//! pending.rs  an output file renamed into place only once it is complete
//! ```
//!
//! A bad row (a cell that does not parse, an unseen level, a log of a non-positive number, the
//! wrong number of fields) either stops the run with its 1-based data row number and the
//! covariate at fault, or, under [`BadRowPolicy::Skip`], is left out of the output, counted and
//! described in the [`Summary`], or, under [`BadRowPolicy::Keep`], is written in its place with
//! empty added cells and what is wrong in an `error` column, and counted the same way. Rows
//! outside the shard are neither parsed nor checked.
//!
//! This module does not parse flags, draw progress bars or print: the command does.

mod block;
pub(crate) mod cut;
pub(crate) mod input;
pub(crate) mod output;
pub(crate) mod pending;
pub(crate) mod shard;
pub(crate) mod tally;

use std::collections::{BTreeMap, HashMap};
use std::io::{Read, Write};
use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};
use std::sync::{mpsc, Mutex};
use std::time::Duration;

use csv::ByteRecord;

pub(crate) use block::{block_reader, record_start};
use block::{BlockReport, BlockScorer, RowOffsets};
pub use input::{CovariateColumns, RowStream};
pub use output::{contribution_column, effect_column, output_columns, output_header, RowWriter};
pub use pending::PendingFile;
pub use shard::{BadShard, Shard};
pub use tally::{RangeCounts, WarningTally};

use crate::engine::{BadLevel, Options};
use crate::model::{Model, ObservationError};

/// How many skipped rows a [`Summary`] describes one by one (the rest are only counted).
pub const SKIPPED_EXAMPLES: usize = 20;

/// The default bytes of input in one block handed to a worker.
pub const DEFAULT_INPUT_BLOCK_BYTES: usize = 128 * 1024;

/// The number of worker threads when none is asked for: one per core.
pub fn default_threads() -> usize {
    std::thread::available_parallelism().map_or(1, |n| n.get())
}

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

/// What `ogive score` does with a row that cannot be scored.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum BadRowPolicy {
    /// Stop the run, naming the row and the covariate.
    #[default]
    Stop,
    /// Leave the row out of the output, count it and go on.
    Skip,
    /// Write the row in its place with empty added cells and what is wrong in an `error`
    /// column, count it and go on.
    Keep,
}

/// What a batch run computes and which rows it takes.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ScoreOptions {
    /// Add marginal-effect and standard-error columns.
    pub effects: bool,
    /// Add a contribution column per covariate.
    pub contributions: bool,
    /// Add the model's decision columns (band, above_threshold); the model must have a
    /// threshold or bands.
    pub decision: bool,
    /// The interval level, strictly between 0 and 1.
    pub level: f64,
    /// What to do with a bad row.
    pub on_error: BadRowPolicy,
    /// Which row blocks to score.
    pub shard: Shard,
    /// Rows per shard block (at least 1).
    pub block_rows: u64,
    /// Worker threads (at least 1).
    pub threads: usize,
    /// Bytes of input per block handed to a worker (at least 1; a block always holds whole
    /// records, so one longer record makes a longer block).
    pub input_block_bytes: usize,
}

impl Default for ScoreOptions {
    fn default() -> Self {
        ScoreOptions {
            effects: false,
            contributions: false,
            decision: false,
            level: 0.95,
            on_error: BadRowPolicy::Stop,
            shard: Shard::ALL,
            block_rows: DEFAULT_BLOCK_ROWS,
            threads: default_threads(),
            input_block_bytes: DEFAULT_INPUT_BLOCK_BYTES,
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
        /// The covariate's name: the CSV column the model reads it from.
        covariate: String,
        /// The header's columns, comma-separated.
        columns: String,
    },
    /// Two columns carry the same covariate's name.
    #[error("the CSV header names covariate '{covariate}' twice (columns {first} and {second})")]
    DuplicateColumn {
        /// The covariate's name: the CSV column the model reads it from.
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
    /// Decision columns were asked of a model that has no threshold and no bands.
    #[error("model {model} {version} has no decision threshold or bands, so there are no decision columns to add; drop --decision or score with a model that has a decision")]
    NoDecision {
        /// The name of the model the file was scored with.
        model: String,
        /// The version label of the model the file was scored with.
        version: String,
    },
    /// The interval level is out of range.
    #[error(transparent)]
    Level(#[from] BadLevel),
    /// A row that cannot be scored, under [`BadRowPolicy::Stop`].
    #[error(transparent)]
    Row(#[from] RowError),
    /// The output could not be written.
    #[error("cannot write the CSV output: {0}")]
    Write(#[source] csv::Error),
    /// A scoring thread stopped unexpectedly (a bug; the run cannot go on).
    #[error("a scoring thread stopped unexpectedly; nothing more can be scored")]
    WorkerFailed,
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
        /// The covariate's name: the CSV column the model reads it from.
        covariate: String,
    },
    /// A covariate's cell is not UTF-8 text.
    #[error("covariate '{covariate}' is not valid UTF-8 text")]
    NotUtf8 {
        /// The covariate's name: the CSV column the model reads it from.
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
    /// Rows not scored: left out under [`BadRowPolicy::Skip`], written with an error under
    /// [`BadRowPolicy::Keep`].
    pub rows_skipped: u64,
    /// The first [`SKIPPED_EXAMPLES`] rows not scored and why.
    pub skipped_examples: Vec<RowError>,
    /// Rows not scored per covariate at fault (`(row shape)` for a wrong field count).
    pub skipped_by_covariate: BTreeMap<String, u64>,
    /// Warnings over the scored rows.
    pub warnings: WarningTally,
    /// Whether intervals and standard errors were computed (the model has a covariance).
    pub intervals: bool,
}

/// A block buffer and its output, reused from block to block.
struct Slot {
    input: Vec<u8>,
    output: Vec<u8>,
}

/// A block on its way to a worker.
struct Job {
    index: usize,
    slot: Slot,
}

/// A block back from a worker; `report` is `None` for a block that was not scored because an
/// earlier block stopped the run.
struct Done {
    index: usize,
    slot: Slot,
    report: Option<Result<BlockReport, BatchError>>,
}

/// Score one block on a worker. A sharded run first counts the block's records, publishes the
/// count and waits for the number of rows before the block.
fn score_job(
    scorer: &mut BlockScorer<'_>,
    offsets: &RowOffsets,
    sharded: bool,
    index: usize,
    slot: &mut Slot,
) -> Result<BlockReport, BatchError> {
    let rows_before = if sharded {
        let counted = scorer.count_records(&slot.input);
        // Publish even a failed count, so that later blocks are not left waiting.
        offsets.publish(index, *counted.as_ref().unwrap_or(&0));
        counted?;
        Some(offsets.wait(index).ok_or(BatchError::WorkerFailed)?)
    } else {
        None
    };
    scorer.score(&slot.input, &mut slot.output, rows_before)
}

fn read_error(error: std::io::Error) -> BatchError {
    BatchError::Read(error.into())
}

/// Read up to `want` more bytes onto the end of `buffer`; `false` at the end of the input.
fn read_more<R: Read>(
    input: &mut R,
    buffer: &mut Vec<u8>,
    want: usize,
) -> Result<bool, BatchError> {
    let start = buffer.len();
    buffer.resize(start + want.max(1), 0);
    loop {
        match input.read(&mut buffer[start..]) {
            Ok(n) => {
                buffer.truncate(start + n);
                return Ok(n > 0);
            }
            Err(e) if e.kind() == std::io::ErrorKind::Interrupted => continue,
            Err(e) => {
                buffer.truncate(start);
                return Err(read_error(e));
            }
        }
    }
}

/// The input, read in blocks of whole records (also the block reader of
/// [`crate::evaluate::read_labelled`]).
pub(crate) struct BlockSource<R: Read> {
    input: R,
    /// Bytes read past the last cut: the start of the next block.
    carry: Vec<u8>,
    at_end: bool,
    block_bytes: usize,
}

impl<R: Read> BlockSource<R> {
    /// A source that reads `input` in blocks of about `block_bytes` (at least 1).
    pub(crate) fn new(input: R, block_bytes: usize) -> BlockSource<R> {
        let block_bytes = block_bytes.max(1);
        BlockSource {
            input,
            carry: Vec::with_capacity(block_bytes),
            at_end: false,
            block_bytes,
        }
    }

    /// Read the header record, returning it and the bytes it took (with the empty lines
    /// before it).
    pub(crate) fn header(&mut self) -> Result<(ByteRecord, Vec<u8>), BatchError> {
        let end = loop {
            if let Some(end) = cut::first_record_end(&self.carry) {
                break end;
            }
            if self.at_end {
                break self.carry.len();
            }
            self.at_end = !read_more(&mut self.input, &mut self.carry, self.block_bytes)?;
        };
        let bytes: Vec<u8> = self.carry.drain(..end).collect();
        let mut reader = csv::ReaderBuilder::new()
            .has_headers(false)
            .flexible(true)
            .from_reader(&bytes[..]);
        let mut header = ByteRecord::new();
        reader
            .read_byte_record(&mut header)
            .map_err(BatchError::Read)?;
        Ok((header, bytes))
    }

    /// Fill `block` with the next whole records; `false` when the input is exhausted.
    pub(crate) fn next_block(&mut self, block: &mut Vec<u8>) -> Result<bool, BatchError> {
        block.clear();
        block.append(&mut self.carry);
        let mut target = self.block_bytes;
        loop {
            while !self.at_end && block.len() < target {
                let want = target - block.len();
                self.at_end = !read_more(&mut self.input, block, want)?;
            }
            if self.at_end {
                return Ok(!block.is_empty());
            }
            match cut::last_record_end(block) {
                Some(cut) => {
                    self.carry.extend_from_slice(&block[cut..]);
                    block.truncate(cut);
                    return Ok(true);
                }
                // One record longer than the block so far: read on.
                None => target += self.block_bytes,
            }
        }
    }
}

/// Totals of the blocks written so far, and the numbers that turn a block's row and line
/// numbers into the file's.
struct Totals {
    summary: Summary,
    rows_before: u64,
    newlines_before: u64,
}

impl Totals {
    fn in_file(&self, error: RowError) -> RowError {
        RowError {
            row: self.rows_before + error.row,
            line: self.newlines_before + error.line,
            problem: error.problem,
        }
    }

    /// Add a block's counts; the error that stops the run, if the block has one.
    fn add(&mut self, report: BlockReport) -> Result<(), RowError> {
        let summary = &mut self.summary;
        summary.rows_in_shard += report.rows_in_shard;
        summary.rows_scored += report.rows_scored;
        summary.rows_skipped += report.rows_skipped;
        summary.warnings.merge(&report.warnings);
        for (covariate, count) in report.skipped_by_covariate {
            *summary.skipped_by_covariate.entry(covariate).or_default() += count;
        }
        for error in report.skipped_examples {
            if self.summary.skipped_examples.len() < SKIPPED_EXAMPLES {
                let error = self.in_file(error);
                self.summary.skipped_examples.push(error);
            }
        }
        if let Some(error) = report.stopped {
            return Err(self.in_file(error));
        }
        self.rows_before += report.records;
        self.newlines_before += report.newlines;
        Ok(())
    }
}

/// Sets the flag and wakes every waiter if the worker holding it panics, so that no thread
/// waits forever for a block that will never come.
struct PanicAlarm<'a> {
    panicked: &'a AtomicBool,
    offsets: &'a RowOffsets,
}

impl Drop for PanicAlarm<'_> {
    fn drop(&mut self) {
        if std::thread::panicking() {
            self.panicked.store(true, Ordering::SeqCst);
            self.offsets.abandon();
        }
    }
}

/// Score every row of `input` in this shard and write them, with the added columns of
/// [`output_columns`], to `output`. `progress` is called now and then with the input bytes
/// consumed so far.
pub fn score_csv<R: Read, W: Write>(
    model: &Model,
    input: R,
    mut output: W,
    options: &ScoreOptions,
    progress: &mut dyn FnMut(u64),
) -> Result<Summary, BatchError> {
    let mut engine_options = Options::new(options.level)?;
    engine_options.effects = options.effects;
    engine_options.contributions = options.contributions;
    engine_options.elasticities = false;
    engine_options.intervals = true;

    let block_bytes = options.input_block_bytes.max(1);
    let mut source = BlockSource {
        input,
        carry: Vec::with_capacity(block_bytes),
        at_end: false,
        block_bytes,
    };
    let (header, header_bytes) = source.header()?;
    let columns = input::covariate_columns(model, &header)?;
    let mut header_text = Vec::new();
    RowWriter::new(model, options)
        .write_header(&mut header_text, &output_header(model, &header, options)?);
    output
        .write_all(&header_text)
        .map_err(|e| BatchError::Write(e.into()))?;

    let mut totals = Totals {
        summary: Summary {
            rows_read: 0,
            rows_in_shard: 0,
            rows_scored: 0,
            rows_skipped: 0,
            skipped_examples: Vec::new(),
            skipped_by_covariate: BTreeMap::new(),
            warnings: WarningTally::new(model),
            intervals: model.covariance.is_some(),
        },
        rows_before: 0,
        newlines_before: memchr::memchr_iter(b'\n', &header_bytes).count() as u64,
    };
    let mut bytes_done = header_bytes.len() as u64;

    let threads = options.threads.max(1);
    let sharded = options.shard != Shard::ALL;
    let offsets = RowOffsets::new();
    let panicked = AtomicBool::new(false);
    // Blocks after the first that stopped the run need not be scored.
    let first_stopped = AtomicUsize::new(usize::MAX);
    let (job_sender, job_receiver) = mpsc::channel::<Job>();
    let job_receiver = Mutex::new(job_receiver);
    let (done_sender, done_receiver) = mpsc::channel::<Done>();

    std::thread::scope(|scope| {
        for _ in 0..threads {
            let done_sender = done_sender.clone();
            let (job_receiver, offsets, panicked, first_stopped) =
                (&job_receiver, &offsets, &panicked, &first_stopped);
            let columns = &columns[..];
            let header_len = header.len();
            scope.spawn(move || {
                let _alarm = PanicAlarm { panicked, offsets };
                let mut scorer =
                    BlockScorer::new(model, columns, header_len, options, engine_options);
                loop {
                    let next = job_receiver.lock().ok().and_then(|r| r.recv().ok());
                    let Some(Job { index, mut slot }) = next else {
                        break;
                    };
                    let report = (index <= first_stopped.load(Ordering::SeqCst))
                        .then(|| score_job(&mut scorer, offsets, sharded, index, &mut slot));
                    if matches!(&report, Some(Ok(r)) if r.stopped.is_none()) {
                        // Scored to the end.
                    } else if report.is_some() {
                        first_stopped.fetch_min(index, Ordering::SeqCst);
                    }
                    if done_sender
                        .send(Done {
                            index,
                            slot,
                            report,
                        })
                        .is_err()
                    {
                        break;
                    }
                }
            });
        }
        drop(done_sender);

        let result = (|| -> Result<(), BatchError> {
            let mut free: Vec<Slot> = (0..2 * threads + 2)
                .map(|_| Slot {
                    input: Vec::with_capacity(block_bytes),
                    output: Vec::new(),
                })
                .collect();
            let mut waiting: HashMap<usize, Done> = HashMap::new();
            let (mut next_read, mut next_write) = (0usize, 0usize);
            let mut reading = true;
            loop {
                while reading {
                    let Some(mut slot) = free.pop() else { break };
                    if source.next_block(&mut slot.input)? {
                        let job = Job {
                            index: next_read,
                            slot,
                        };
                        job_sender.send(job).map_err(|_| BatchError::WorkerFailed)?;
                        next_read += 1;
                    } else {
                        reading = false;
                        free.push(slot);
                    }
                }
                if next_write == next_read {
                    return Ok(());
                }
                let done = match done_receiver.recv_timeout(Duration::from_millis(200)) {
                    Ok(done) => done,
                    Err(mpsc::RecvTimeoutError::Timeout) => {
                        if panicked.load(Ordering::SeqCst) {
                            return Err(BatchError::WorkerFailed);
                        }
                        continue;
                    }
                    Err(mpsc::RecvTimeoutError::Disconnected) => {
                        return Err(BatchError::WorkerFailed)
                    }
                };
                waiting.insert(done.index, done);
                while let Some(Done { slot, report, .. }) = waiting.remove(&next_write) {
                    let mut slot = slot;
                    output
                        .write_all(&slot.output)
                        .map_err(|e| BatchError::Write(e.into()))?;
                    totals.add(report.ok_or(BatchError::WorkerFailed)??)?;
                    bytes_done += slot.input.len() as u64;
                    progress(bytes_done);
                    slot.output.clear();
                    free.push(slot);
                    next_write += 1;
                }
            }
        })();
        // Let the workers finish: no more blocks, and nobody waits for offsets.
        drop(job_sender);
        first_stopped.store(0, Ordering::SeqCst);
        offsets.abandon();
        result
    })?;
    totals.summary.rows_read = totals.rows_before;
    progress(bytes_done);
    output.flush().map_err(|e| BatchError::Write(e.into()))?;
    Ok(totals.summary)
}
