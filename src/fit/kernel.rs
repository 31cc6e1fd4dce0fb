//! The sums every pass over the design is made of, and how they are kept to the same bits on
//! any machine and any number of threads.
//!
//! A sum over rows is kept in [`LANES`] partial sums: element i of a run goes to lane i mod 16,
//! and the lanes are added at the end in one fixed tree ([`total`]). The order of every
//! addition is thus fixed by the data alone. Passes walk a block of the design in chunks of
//! [`CHUNK`] rows, so that a chunk's terms, its index, scores and weights stay in the first-level
//! cache while every sum of the chunk is taken; a chunk's products are added to the lanes, which
//! run on over the whole block.
//!
//! Sixteen lanes are four 256-bit registers: on a processor with AVX2 the passes run in code
//! compiled for it (chosen once, at run time), elsewhere in the same code compiled for the
//! baseline instruction set. Both do the same multiplications and additions in the same order,
//! each rounded once (no fused multiply-add), so they give the same bits. (The pointwise terms
//! call `exp`, `ln` and `erfc`: those are the C library's and the `libm` crate's, and a C
//! library may choose its own variant per processor, so across machines the promise is the
//! sums', not those functions'.)

use std::sync::OnceLock;

use super::design::Rows;

/// Partial sums per run.
pub const LANES: usize = 16;

/// Rows per chunk of a pass.
pub const CHUNK: usize = 256;

/// One sum's partial sums.
pub type Lanes = [f64; LANES];

/// Whether the passes run in the code compiled for AVX2.
pub fn wide() -> bool {
    static WIDE: OnceLock<bool> = OnceLock::new();
    *WIDE.get_or_init(|| {
        #[cfg(target_arch = "x86_64")]
        {
            std::arch::is_x86_feature_detected!("avx2")
        }
        #[cfg(not(target_arch = "x86_64"))]
        {
            false
        }
    })
}

/// Add `aᵢ bᵢ` to lane i mod [`LANES`].
#[inline(always)]
pub fn add_products(lanes: &mut Lanes, a: &[f64], b: &[f64]) {
    let body = a.len() - a.len() % LANES;
    let (a_body, a_tail) = a.split_at(body);
    let (b_body, b_tail) = b[..a.len()].split_at(body);
    for (x, y) in a_body.chunks_exact(LANES).zip(b_body.chunks_exact(LANES)) {
        for l in 0..LANES {
            lanes[l] += x[l] * y[l];
        }
    }
    for (l, (x, y)) in a_tail.iter().zip(b_tail).enumerate() {
        lanes[l] += x * y;
    }
}

/// The lanes added in a fixed tree.
#[inline(always)]
pub fn total(lanes: &Lanes) -> f64 {
    let mut level = *lanes;
    let mut width = LANES;
    while width > 1 {
        width /= 2;
        for l in 0..width {
            level[l] = level[2 * l] + level[2 * l + 1];
        }
    }
    level[0]
}

/// The position of entry (a, b), b ≤ a, of a packed lower triangle.
#[inline(always)]
pub fn packed(a: usize, b: usize) -> usize {
    a * (a + 1) / 2 + b
}

/// Add the products of rows `start..end` (inside `rows`) to the packed lower triangle of
/// `Σ wᵢ xᵢ xᵢᵀ`; `weights` are those rows' weights and `run` holds one chunk.
#[inline(always)]
pub fn add_gram_chunk(
    lanes: &mut [Lanes],
    rows: Rows<'_>,
    start: usize,
    weights: &[f64],
    run: &mut [f64; CHUNK],
) {
    let n = weights.len();
    let run = &mut run[..n];
    for a in 0..rows.terms() {
        let column = &rows.column(a)[start..start + n];
        for ((r, &x), &w) in run.iter_mut().zip(column).zip(weights) {
            *r = x * w;
        }
        for b in 0..=a {
            add_products(
                &mut lanes[packed(a, b)],
                run,
                &rows.column(b)[start..start + n],
            );
        }
    }
}

/// Unpack a lower triangle of lanes into a row-major `k × k` matrix (both triangles), adding.
pub fn add_packed_to(matrix: &mut [f64], lanes: &[Lanes], k: usize) {
    for a in 0..k {
        for b in 0..=a {
            let value = total(&lanes[packed(a, b)]);
            matrix[a * k + b] += value;
        }
    }
}

#[inline(always)]
fn dot_body(a: &[f64], b: &[f64]) -> f64 {
    let mut lanes = [0.0; LANES];
    add_products(&mut lanes, a, b);
    total(&lanes)
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
fn dot_wide(a: &[f64], b: &[f64]) -> f64 {
    dot_body(a, b)
}

/// `Σᵢ aᵢ bᵢ` (over the length of `a`) in [`LANES`] partial sums.
pub fn dot(a: &[f64], b: &[f64]) -> f64 {
    #[cfg(target_arch = "x86_64")]
    if wide() {
        // SAFETY: the processor has AVX2 (checked by `wide`).
        return unsafe { dot_wide(a, b) };
    }
    dot_body(a, b)
}

#[inline(always)]
fn gram_body(lanes: &mut [Lanes], rows: Rows<'_>, weights: &[f64]) {
    let mut run = [0.0; CHUNK];
    let mut start = 0;
    while start < rows.len() {
        let end = (start + CHUNK).min(rows.len());
        add_gram_chunk(lanes, rows, start, &weights[start..end], &mut run);
        start = end;
    }
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
fn gram_wide(lanes: &mut [Lanes], rows: Rows<'_>, weights: &[f64]) {
    gram_body(lanes, rows, weights)
}

/// Add `Σ wᵢ xᵢ xᵢᵀ` over some rows of one block to the lower triangle of `matrix` (row-major
/// `k × k`). Callers finish with [`super::design::symmetrise`].
pub fn add_weighted_gram(matrix: &mut [f64], rows: Rows<'_>, weights: &[f64]) {
    let k = rows.terms();
    let mut lanes = vec![[0.0; LANES]; k * (k + 1) / 2];
    #[cfg(target_arch = "x86_64")]
    if wide() {
        // SAFETY: the processor has AVX2 (checked by `wide`).
        unsafe { gram_wide(&mut lanes, rows, weights) };
        add_packed_to(matrix, &lanes, k);
        return;
    }
    gram_body(&mut lanes, rows, weights);
    add_packed_to(matrix, &lanes, k);
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The lanes and the tree give the exact sum where every partial sum is exact (integers),
    /// and the tail of a run lands in the first lanes.
    #[test]
    fn dot_is_the_sum_of_products() {
        for n in [0, 1, 15, 16, 17, 255, 256, 1000] {
            let a: Vec<f64> = (0..n).map(|i| (i % 13) as f64).collect();
            let b: Vec<f64> = (0..n).map(|i| (i % 7) as f64 - 3.0).collect();
            let exact: f64 = a.iter().zip(&b).map(|(x, y)| x * y).sum();
            assert_eq!(dot(&a, &b), exact, "n = {n}");
            assert_eq!(dot_body(&a, &b), exact, "n = {n}");
        }
    }

    /// The code chosen at run time gives the bits of the baseline code on rounded sums.
    #[test]
    fn wide_and_baseline_code_agree_bit_for_bit() {
        let a: Vec<f64> = (0..1003).map(|i| (i as f64 * 0.731).sin() / 3.0).collect();
        let b: Vec<f64> = (0..1003).map(|i| (i as f64 * 1.37).cos() * 7.1).collect();
        assert_eq!(dot(&a, &b).to_bits(), dot_body(&a, &b).to_bits());
    }
}
