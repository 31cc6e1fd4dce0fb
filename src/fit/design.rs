//! The design matrix: one value per observation and term, stored in blocks of
//! [`ROWS_PER_BLOCK`] rows, each block column-major (a block's first term for every one of its
//! rows, then its second, …), and the blocked, parallel reduction over its rows that every pass
//! of the fit uses.
//!
//! Column-major blocks are what make a pass fast: the linear index, the score and every entry
//! of the information matrix are then sums along contiguous runs of a block, which the
//! compiler turns into vector instructions, with no copy of the rows per pass.
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
    if threads <= 1 {
        run();
    } else {
        std::thread::scope(|scope| {
            for _ in 0..threads {
                scope.spawn(run);
            }
        });
    }
    let mut total = init();
    for slot in slots {
        if let Some(acc) = slot.into_inner().ok().flatten() {
            combine(&mut total, acc);
        }
    }
    total
}

/// Lanes of the vectorised sums: four independent partial sums per run, added at the end.
const LANES: usize = 4;

/// `Σᵢ aᵢ bᵢ` in [`LANES`] partial sums (a fixed order, so the same bits on every run).
#[inline]
pub fn dot(a: &[f64], b: &[f64]) -> f64 {
    let mut lanes = [0.0; LANES];
    let (a_body, a_tail) = a.split_at(a.len() - a.len() % LANES);
    let b_body = &b[..a_body.len()];
    for (x, y) in a_body.chunks_exact(LANES).zip(b_body.chunks_exact(LANES)) {
        for l in 0..LANES {
            lanes[l] += x[l] * y[l];
        }
    }
    let mut tail = 0.0;
    for (x, y) in a_tail.iter().zip(&b[a_body.len()..]) {
        tail += x * y;
    }
    (lanes[0] + lanes[1]) + (lanes[2] + lanes[3]) + tail
}

/// Add `Σ wᵢ xᵢ xᵢᵀ` over some rows to the lower triangle of `matrix` (row-major `k × k`);
/// with no weights, `XᵀX`. `scratch` holds one row-length run. Callers finish with
/// [`symmetrise`].
pub fn add_weighted_gram(
    matrix: &mut [f64],
    rows: Rows<'_>,
    weights: Option<&[f64]>,
    scratch: &mut Vec<f64>,
) {
    let k = rows.terms();
    for a in 0..k {
        let column = rows.column(a);
        let weighted: &[f64] = match weights {
            Some(w) => {
                scratch.clear();
                scratch.extend(column.iter().zip(w).map(|(x, v)| x * v));
                scratch
            }
            None => column,
        };
        for b in 0..=a {
            matrix[a * k + b] += dot(weighted, rows.column(b));
        }
    }
}

/// Make a row-major square matrix exactly symmetric by copying its lower triangle up.
pub fn symmetrise(matrix: &mut [f64], k: usize) {
    for a in 0..k {
        for b in 0..a {
            matrix[b * k + a] = matrix[a * k + b];
        }
    }
}

/// `XᵀWX`, the Gram matrix of the design with the rows weighted (`XᵀX` without weights), for
/// the rank and collinearity checks: a row of weight 0 adds nothing, so a design is judged by
/// the observations that count.
pub fn gram(design: &Design, weights: Option<&[f64]>) -> Vec<f64> {
    let k = design.columns();
    let mut g = reduce_rows(
        design.rows(),
        || (vec![0.0; k * k], Vec::new()),
        |(acc, scratch), range| {
            let block_weights = weights.map(|w| &w[range.clone()]);
            add_weighted_gram(acc, design.rows_of(range), block_weights, scratch)
        },
        |total, part| total.0.iter_mut().zip(part.0).for_each(|(t, p)| *t += p),
    )
    .0;
    symmetrise(&mut g, k);
    g
}
