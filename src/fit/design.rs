//! The design matrix: one row of term values per observation, stored row-major as `f64`, and
//! the blocked, parallel reduction over its rows that every pass of the fit uses.
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

use nalgebra::{DMatrixView, DMatrixViewMut};

use crate::model::{Term, Value};

use super::reader::ColumnData;

/// Rows per reduction block.
pub const ROWS_PER_BLOCK: usize = 16_384;

/// The design matrix.
#[derive(Debug, Clone, PartialEq)]
pub struct Design {
    rows: usize,
    columns: usize,
    values: Vec<f64>,
}

impl Design {
    /// A design from row-major values (`rows × columns`); `None` if the length does not match.
    #[cfg(test)]
    pub(crate) fn from_row_major(rows: usize, columns: usize, values: Vec<f64>) -> Option<Design> {
        (values.len() == rows * columns).then_some(Design {
            rows,
            columns,
            values,
        })
    }

    /// Build the design from the covariate columns of a table.
    pub fn build(columns: &[ColumnData], rows: usize, terms: &[Term]) -> Design {
        let k = terms.len();
        let mut values = vec![0.0; rows * k];
        let no_shares: Vec<Vec<f64>> = vec![Vec::new(); columns.len()];
        let chunk_rows = ROWS_PER_BLOCK;
        let chunks: Vec<(usize, &mut [f64])> = values
            .chunks_mut(chunk_rows * k.max(1))
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
                        let Some((chunk, out)) = next else { break };
                        let first = chunk * chunk_rows;
                        for (r, row) in out.chunks_mut(k.max(1)).enumerate() {
                            let i = first + r;
                            for (value, column) in observation.iter_mut().zip(columns) {
                                *value = match column {
                                    ColumnData::Numeric(x) => Value::Number(x[i]),
                                    ColumnData::Categorical { codes, .. } => {
                                        Value::Level(codes[i] as usize)
                                    }
                                };
                            }
                            for (cell, term) in row.iter_mut().zip(terms) {
                                *cell = term.value(&observation, &no_shares);
                            }
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

    /// Row `i`.
    #[inline]
    pub fn row(&self, i: usize) -> &[f64] {
        &self.values[i * self.columns..(i + 1) * self.columns]
    }

    /// Rows `range`, row-major.
    #[inline]
    pub fn rows_of(&self, range: Range<usize>) -> &[f64] {
        &self.values[range.start * self.columns..range.end * self.columns]
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

/// Add `Σ wᵢ xᵢ xᵢᵀ` over a block of rows (row-major, `k` columns) to `matrix` (`k × k`), as one
/// matrix product `Xᵀ (W X)` so that it runs at the speed of a blocked, vectorised GEMM; with
/// no weights it adds `XᵀX`. The result is symmetric up to rounding; callers finish with
/// [`symmetrise`].
pub fn add_weighted_gram(matrix: &mut [f64], rows: &[f64], weights: Option<&[f64]>, k: usize) {
    if k == 0 || rows.is_empty() {
        return;
    }
    let n = rows.len() / k;
    let scaled: Vec<f64>;
    let right = match weights {
        Some(w) => {
            let mut out = vec![0.0; rows.len()];
            for ((target, x), &wi) in out.chunks_exact_mut(k).zip(rows.chunks_exact(k)).zip(w) {
                for (t, &v) in target.iter_mut().zip(x) {
                    *t = v * wi;
                }
            }
            scaled = out;
            &scaled[..]
        }
        None => rows,
    };
    // Xᵀ is the row-major block read column-major: k × n with strides (1, k).
    let transposed = DMatrixView::from_slice_with_strides(rows, k, n, 1, k);
    let weighted = DMatrixView::from_slice_with_strides(right, n, k, k, 1);
    let mut out = DMatrixViewMut::from_slice(matrix, k, k);
    out.gemm(1.0, &transposed, &weighted, 1.0);
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
        || vec![0.0; k * k],
        |acc, range| {
            let block_weights = weights.map(|w| &w[range.clone()]);
            add_weighted_gram(acc, design.rows_of(range), block_weights, k)
        },
        |total, part| total.iter_mut().zip(part).for_each(|(t, p)| *t += p),
    );
    symmetrise(&mut g, k);
    g
}
