//! The design matrix: one value per observation and term, stored in blocks of
//! [`ROWS_PER_BLOCK`] rows, each block column-major (a block's first term for every one of its
//! rows, then its second, …), and the blocked, parallel reduction over its rows that every pass
//! of the fit uses.
//!
//! Column-major blocks are what make a pass fast: the linear index, the score and every entry
//! of the information matrix are then sums along contiguous runs of a block, which the
//! compiler turns into vector instructions, with no copy of the rows per pass (the sums
//! themselves are [`super::kernel`]'s).
//!
//! Term values come from [`Term::value`], the function the engine scores with, so a model's
//! check cases reproduce exactly what the fit saw.
//!
//! Rows are reduced in fixed blocks of [`ROWS_PER_BLOCK`] and the block results are combined in
//! block order, so a fit gives the same bits whatever the number of threads. The number of
//! threads is the calling thread's setting ([`with_threads`]), one per core (at most 16) by
//! default.

use std::cell::Cell;
use std::ops::Range;
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::Mutex;

use crate::model::{Term, Value};

use super::reader::ColumnData;

/// Rows per reduction block.
pub const ROWS_PER_BLOCK: usize = 16_384;

/// The design matrix.
#[derive(Debug, Clone, PartialEq)]
pub struct Design {
    rows: usize,
    columns: usize,
    /// Block after block, each `columns` runs of the block's rows.
    values: Vec<f64>,
}

/// Some consecutive rows of one block of the design: one contiguous run per term.
#[derive(Debug, Clone, Copy)]
pub struct Rows<'a> {
    values: &'a [f64],
    /// The distance between the starts of two terms' runs (the block's length).
    stride: usize,
    /// The offset of the first row inside its block.
    offset: usize,
    len: usize,
    terms: usize,
}

impl<'a> Rows<'a> {
    /// Term `j`'s values for these rows.
    #[inline]
    pub fn column(&self, j: usize) -> &'a [f64] {
        let start = j * self.stride + self.offset;
        &self.values[start..start + self.len]
    }

    /// How many rows.
    #[inline]
    pub fn len(&self) -> usize {
        self.len
    }

    /// How many terms.
    #[inline]
    pub fn terms(&self) -> usize {
        self.terms
    }
}

impl Design {
    /// A design from row-major values (`rows × columns`); `None` if the length does not match.
    #[cfg(test)]
    pub(crate) fn from_row_major(rows: usize, columns: usize, values: Vec<f64>) -> Option<Design> {
        if values.len() != rows * columns {
            return None;
        }
        let mut blocked = vec![0.0; values.len()];
        for (block, out) in blocked
            .chunks_mut(ROWS_PER_BLOCK * columns.max(1))
            .enumerate()
        {
            let len = out.len() / columns.max(1);
            for r in 0..len {
                for j in 0..columns {
                    out[j * len + r] = values[(block * ROWS_PER_BLOCK + r) * columns + j];
                }
            }
        }
        Some(Design {
            rows,
            columns,
            values: blocked,
        })
    }

    /// Build the design from the covariate columns of a table.
    pub fn build(columns: &[ColumnData], rows: usize, terms: &[Term]) -> Design {
        let k = terms.len();
        let mut values = vec![0.0; rows * k];
        let no_shares: Vec<Vec<f64>> = vec![Vec::new(); columns.len()];
        let chunks: Vec<(usize, &mut [f64])> = values
            .chunks_mut(ROWS_PER_BLOCK * k.max(1))
            .enumerate()
            .collect();
        let queue = Mutex::new(chunks.into_iter());
        let threads = worker_threads();
        std::thread::scope(|scope| {
            for _ in 0..threads {
                scope.spawn(|| {
                    let mut observation = vec![Value::Number(0.0); columns.len()];
                    loop {
                        let next = queue.lock().ok().and_then(|mut q| q.next());
                        let Some((block, out)) = next else { break };
                        let first = block * ROWS_PER_BLOCK;
                        let len = out.len() / k.max(1);
                        for (term, run) in terms.iter().zip(out.chunks_mut(len.max(1))) {
                            fill_run(term, columns, first, run, &mut observation, &no_shares);
                        }
                    }
                });
            }
        });
        Design {
            rows,
            columns: k,
            values,
        }
    }

    /// Observations.
    pub fn rows(&self) -> usize {
        self.rows
    }

    /// Terms.
    pub fn columns(&self) -> usize {
        self.columns
    }

    /// Rows `range`, which lie inside one block (as every range [`reduce_rows`] hands out does).
    #[inline]
    pub fn rows_of(&self, range: Range<usize>) -> Rows<'_> {
        let block = range.start / ROWS_PER_BLOCK;
        let block_start = block * ROWS_PER_BLOCK;
        let stride = ROWS_PER_BLOCK.min(self.rows - block_start);
        assert!(
            range.end <= block_start + stride,
            "rows {range:?} span two blocks"
        );
        let base = block_start * self.columns;
        Rows {
            values: &self.values[base..base + stride * self.columns],
            stride,
            offset: range.start - block_start,
            len: range.len(),
            terms: self.columns,
        }
    }
}

/// One term's values for the rows of a block starting at row `first`: a covariate's column or
/// the intercept directly, any other term through [`Term::value`].
fn fill_run(
    term: &Term,
    columns: &[ColumnData],
    first: usize,
    run: &mut [f64],
    observation: &mut [Value],
    no_shares: &[Vec<f64>],
) {
    match term {
        Term::Intercept => run.fill(1.0),
        Term::Covariate(c) if matches!(columns[*c], ColumnData::Numeric(_)) => {
            if let ColumnData::Numeric(x) = &columns[*c] {
                run.copy_from_slice(&x[first..first + run.len()]);
            }
        }
        _ => {
            for (r, cell) in run.iter_mut().enumerate() {
                let i = first + r;
                for (value, column) in observation.iter_mut().zip(columns) {
                    *value = match column {
                        ColumnData::Numeric(x) => Value::Number(x[i]),
                        ColumnData::Categorical { codes, .. } => Value::Level(codes[i] as usize),
                    };
                }
                *cell = term.value(observation, no_shares);
            }
        }
    }
}

thread_local! {
    /// The thread count that [`with_threads`] set on this thread, if any.
    static THREADS: Cell<Option<usize>> = const { Cell::new(None) };
}

/// Restores the previous thread setting when dropped (also when unwinding).
struct Restore(Option<usize>);

impl Drop for Restore {
    fn drop(&mut self) {
        THREADS.with(|t| t.set(self.0));
    }
}

/// Run `work` with every pass over the data that it makes from this thread using `threads`
/// threads (at least 1). The setting belongs to the calling thread, so fits running side by
/// side on different threads do not affect each other.
pub fn with_threads<T>(threads: usize, work: impl FnOnce() -> T) -> T {
    let _restore = Restore(THREADS.with(|t| t.replace(Some(threads.max(1)))));
    work()
}

/// Threads to use for passes over the data: the [`with_threads`] setting, or one per core (at
/// most 16).
pub fn worker_threads() -> usize {
    THREADS.with(Cell::get).unwrap_or_else(|| {
        std::thread::available_parallelism()
            .map(|n| n.get())
            .unwrap_or(1)
            .clamp(1, 16)
    })
}

/// `run` on this many threads (on the calling one alone for one).
fn run_on(threads: usize, run: impl Fn() + Sync) {
    if threads <= 1 {
        run();
    } else {
        std::thread::scope(|scope| {
            for _ in 0..threads {
                scope.spawn(&run);
            }
        });
    }
}

/// Reduce `rows` rows in blocks: `work` folds a range of rows into a fresh accumulator, and the
/// block accumulators are combined in block order with `combine`.
pub fn reduce_rows<A: Send>(
    rows: usize,
    init: impl Fn() -> A + Sync,
    work: impl Fn(&mut A, Range<usize>) + Sync,
    combine: impl Fn(&mut A, A),
) -> A {
    let blocks = rows.div_ceil(ROWS_PER_BLOCK);
    let next = AtomicUsize::new(0);
    let slots: Vec<Mutex<Option<A>>> = (0..blocks).map(|_| Mutex::new(None)).collect();
    let threads = worker_threads().min(blocks.max(1));
    let run = || loop {
        let b = next.fetch_add(1, Ordering::Relaxed);
        if b >= blocks {
            break;
        }
        let mut acc = init();
        work(
            &mut acc,
            b * ROWS_PER_BLOCK..((b + 1) * ROWS_PER_BLOCK).min(rows),
        );
        if let Ok(mut slot) = slots[b].lock() {
            *slot = Some(acc);
        }
    };
    run_on(threads, run);
    let mut total = init();
    for slot in slots {
        if let Some(acc) = slot.into_inner().ok().flatten() {
            combine(&mut total, acc);
        }
    }
    total
}

/// `work(0)`, …, `work(count − 1)` on the worker threads, in order: for per-column work that
/// needs no reduction over rows (each item is computed whole by one thread, so its bits do not
/// depend on the number of threads).
pub fn each_parallel<T: Send>(count: usize, work: impl Fn(usize) -> T + Sync) -> Vec<T> {
    let next = AtomicUsize::new(0);
    let slots: Vec<Mutex<Option<T>>> = (0..count).map(|_| Mutex::new(None)).collect();
    let run = || loop {
        let i = next.fetch_add(1, Ordering::Relaxed);
        if i >= count {
            break;
        }
        let value = work(i);
        if let Ok(mut slot) = slots[i].lock() {
            *slot = Some(value);
        }
    };
    let threads = worker_threads().min(count.max(1));
    run_on(threads, run);
    slots
        .into_iter()
        .map(|slot| {
            slot.into_inner()
                .ok()
                .flatten()
                .expect("every item was computed")
        })
        .collect()
}

/// Make a row-major square matrix exactly symmetric by copying its lower triangle up.
pub fn symmetrise(matrix: &mut [f64], k: usize) {
    for a in 0..k {
        for b in 0..a {
            matrix[b * k + a] = matrix[a * k + b];
        }
    }
}
