//! Scoring one block of whole CSV records on a worker thread: parse, score and format every
//! row of the block into the block's output bytes, and count what happened.
//!
//! A block knows nothing of the rows before it, so row and line numbers in what it reports are
//! counted from the block's start; the thread that writes blocks in order turns them into the
//! file's numbers. Only shard membership needs the file's row number before a row is scored:
//! a sharded run counts each block's records first and waits in [`RowOffsets`] until the
//! blocks before it have been counted.
//!
//! This module does not read the input, write the output, or decide the order of blocks.

use std::collections::{BTreeMap, HashMap};
use std::sync::{Condvar, Mutex};

use csv::ByteRecord;

use super::input::parse_record;
use super::output::RowWriter;
use super::{BadRowPolicy, BatchError, RowError, ScoreOptions, WarningTally, SKIPPED_EXAMPLES};
use crate::engine::{Options, Scorer};
use crate::model::{Model, Value};

/// What scoring one block found. Row and line numbers are counted from the block's start
/// (its first record is row 1, its first byte on line 1).
#[derive(Debug)]
pub(super) struct BlockReport {
    /// Records in the block (in the shard or not).
    pub records: u64,
    /// `\n` bytes in the block, to carry line numbers across blocks.
    pub newlines: u64,
    /// Records that belonged to the shard.
    pub rows_in_shard: u64,
    /// Rows scored and written to the block's output.
    pub rows_scored: u64,
    /// Rows not scored under [`BadRowPolicy::Skip`] or [`BadRowPolicy::Keep`].
    pub rows_skipped: u64,
    /// The block's first skipped rows, at most [`SKIPPED_EXAMPLES`].
    pub skipped_examples: Vec<RowError>,
    /// Skipped rows per covariate at fault.
    pub skipped_by_covariate: BTreeMap<String, u64>,
    /// Warnings over the block's scored rows.
    pub warnings: WarningTally,
    /// The row that stopped the run under [`BadRowPolicy::Stop`]; the output holds the rows
    /// before it.
    pub stopped: Option<RowError>,
}

/// One worker's scorer, writer and buffers, reused from block to block.
pub(super) struct BlockScorer<'m> {
    model: &'m Model,
    columns: &'m [usize],
    header_len: usize,
    options: &'m ScoreOptions,
    engine_options: Options,
    scorer: Scorer,
    writer: RowWriter,
    record: ByteRecord,
    values: Vec<Value>,
}

pub(crate) fn block_reader(input: &[u8]) -> csv::Reader<&[u8]> {
    csv::ReaderBuilder::new()
        .has_headers(false)
        // Rows of the wrong length are reported per row (and can be skipped), not as a read
        // failure.
        .flexible(true)
        .from_reader(input)
}

/// Where the record the parser marked at `position` really starts: the parser marks a record
/// at the end of the one before, which may be followed by the `\n` of a `\r\n` or by empty
/// lines. Returns the byte index and the line (1-based) of the record's first byte, so that
/// neither depends on where blocks begin.
pub(crate) fn record_start(input: &[u8], position: &csv::Position) -> (usize, u64) {
    let from = (position.byte() as usize).min(input.len());
    let terminators = input[from..]
        .iter()
        .take_while(|&&b| b == b'\n' || b == b'\r')
        .count();
    let newlines = memchr::memchr_iter(b'\n', &input[from..from + terminators]).count();
    (from + terminators, position.line() + newlines as u64)
}

/// The text of the record that starts at `start` and was read up to `end` (just past its
/// terminator, if it has one), without the terminator.
fn record_text(input: &[u8], start: usize, end: usize) -> &[u8] {
    let text = &input[start.min(end)..end.min(input.len())];
    text.strip_suffix(b"\n")
        .or_else(|| text.strip_suffix(b"\r"))
        .unwrap_or(text)
}

impl<'m> BlockScorer<'m> {
    /// A scorer for blocks of a file whose header has `header_len` fields and the covariates
    /// at `columns`.
    pub fn new(
        model: &'m Model,
        columns: &'m [usize],
        header_len: usize,
        options: &'m ScoreOptions,
        engine_options: Options,
    ) -> BlockScorer<'m> {
        BlockScorer {
            model,
            columns,
            header_len,
            options,
            engine_options,
            scorer: Scorer::new(model),
            writer: RowWriter::new(model, options),
            record: ByteRecord::new(),
            values: Vec::with_capacity(model.covariates.len()),
        }
    }

    /// The number of records in `input`, as the parser reads them.
    pub fn count_records(&mut self, input: &[u8]) -> Result<u64, BatchError> {
        let mut reader = block_reader(input);
        let mut records = 0;
        while reader
            .read_byte_record(&mut self.record)
            .map_err(BatchError::Read)?
        {
            records += 1;
        }
        Ok(records)
    }

    /// Score the rows of `input` (whole records), appending the scored rows to `output`.
    /// `rows_before` is the number of data rows in the file before this block, needed only to
    /// decide shard membership (`None` when every row is taken).
    pub fn score(
        &mut self,
        input: &[u8],
        output: &mut Vec<u8>,
        rows_before: Option<u64>,
    ) -> Result<BlockReport, BatchError> {
        let model = self.model;
        let options = self.options;
        let block_rows = options.block_rows.max(1);
        let mut report = BlockReport {
            records: 0,
            newlines: memchr::memchr_iter(b'\n', input).count() as u64,
            rows_in_shard: 0,
            rows_scored: 0,
            rows_skipped: 0,
            skipped_examples: Vec::new(),
            skipped_by_covariate: BTreeMap::new(),
            warnings: WarningTally::new(model),
            stopped: None,
        };
        let mut reader = block_reader(input);
        while reader
            .read_byte_record(&mut self.record)
            .map_err(BatchError::Read)?
        {
            report.records += 1;
            if let Some(before) = rows_before {
                if !options.shard.contains(before + report.records, block_rows) {
                    continue;
                }
            }
            report.rows_in_shard += 1;
            let parsed = parse_record(
                model,
                self.columns,
                self.header_len,
                &self.record,
                &mut self.values,
            );
            let (start, line) = self
                .record
                .position()
                .map_or((0, 0), |p| record_start(input, p));
            let end = reader.position().byte() as usize;
            if let Err(problem) = parsed {
                if options.on_error == BadRowPolicy::Keep {
                    let text = record_text(input, start, end);
                    self.writer.write_error(
                        output,
                        &self.record,
                        Some(text),
                        self.header_len,
                        &problem,
                    );
                }
                let error = RowError {
                    row: report.records,
                    line,
                    problem,
                };
                match options.on_error {
                    BadRowPolicy::Stop => {
                        report.stopped = Some(error);
                        break;
                    }
                    BadRowPolicy::Skip | BadRowPolicy::Keep => {
                        report.rows_skipped += 1;
                        let key = error.problem.covariate().unwrap_or("(row shape)");
                        *report
                            .skipped_by_covariate
                            .entry(key.to_string())
                            .or_default() += 1;
                        if report.skipped_examples.len() < SKIPPED_EXAMPLES {
                            report.skipped_examples.push(error);
                        }
                        continue;
                    }
                }
            }
            let answer = self.scorer.score(model, &self.values, &self.engine_options);
            report.warnings.add(&answer.warnings);
            let text = record_text(input, start, end);
            self.writer.write(output, &self.record, Some(text), answer);
            report.rows_scored += 1;
        }
        Ok(report)
    }
}

/// The number of data rows before each block, for a sharded run: each block's record count is
/// published as soon as it is known, and a block's offset is ready once every block before it
/// has been counted.
pub(super) struct RowOffsets {
    state: Mutex<OffsetState>,
    changed: Condvar,
}

struct OffsetState {
    /// Counts of blocks at or after `frontier`, waiting for the ones before them.
    counts: HashMap<usize, u64>,
    /// Every block before this one has been counted.
    frontier: usize,
    /// Rows in the blocks before `frontier`.
    rows_before_frontier: u64,
    /// Offsets known and not yet taken.
    ready: HashMap<usize, u64>,
    /// The run is ending: nobody will publish any more.
    abandoned: bool,
}

impl RowOffsets {
    /// Offsets for a run whose first block is block 0.
    pub fn new() -> RowOffsets {
        RowOffsets {
            state: Mutex::new(OffsetState {
                counts: HashMap::new(),
                frontier: 0,
                rows_before_frontier: 0,
                ready: HashMap::from([(0, 0)]),
                abandoned: false,
            }),
            changed: Condvar::new(),
        }
    }

    /// Block `index` has `records` records.
    pub fn publish(&self, index: usize, records: u64) {
        let Ok(mut state) = self.state.lock() else {
            return;
        };
        state.counts.insert(index, records);
        let mut advanced = false;
        loop {
            let frontier = state.frontier;
            let Some(count) = state.counts.remove(&frontier) else {
                break;
            };
            state.rows_before_frontier += count;
            state.frontier += 1;
            let (next, rows) = (state.frontier, state.rows_before_frontier);
            state.ready.insert(next, rows);
            advanced = true;
        }
        if advanced {
            self.changed.notify_all();
        }
    }

    /// Wait for the number of rows before block `index`; `None` if the run is ending.
    pub fn wait(&self, index: usize) -> Option<u64> {
        let mut state = self.state.lock().ok()?;
        loop {
            if let Some(rows) = state.ready.remove(&index) {
                return Some(rows);
            }
            if state.abandoned {
                return None;
            }
            state = self.changed.wait(state).ok()?;
        }
    }

    /// Wake every waiter: no more counts will come.
    pub fn abandon(&self) {
        if let Ok(mut state) = self.state.lock() {
            state.abandoned = true;
        }
        self.changed.notify_all();
    }
}
