//! What the model file records about the training data: each covariate's range, mean, standard
//! deviation and histogram (or level counts), the joint mean and covariance of the continuous
//! covariates with the largest Mahalanobis distance, and the histogram of fitted probabilities.
//!
//! Histogram bins (common practice for population-stability monitoring, where each bin should
//! hold a fair share of the training data):
//!
//! ```text
//! whole numbers spanning ≤ 20 values    one bin per value, edges half-way between values
//!                                       (binary: edges 0, 0.5, 1)
//! anything else                         ten bins at the training deciles, first edge the
//!                                       minimum, last the maximum; tied deciles merge bins
//! fitted probabilities                  ten bins at the deciles, first edge 0, last edge 1
//! ```
//!
//! Deciles are taken from an evenly strided sample of at most 10,000 observations (exact for
//! smaller data); the counts are exact over every observation.
//!
//! ```text
//! mean = Σx/n      std_dev = √(Σ(x − mean)²/(n − 1))      covariance: divisor n − 1
//! Mahalanobis distance d = √((x − m)ᵀ S⁻¹ (x − m))
//! ```

use std::collections::BTreeMap;

use nalgebra::DMatrix;

use crate::model::file::{CovariateKind, Histogram, JointSpec, TrainingSummary};

use super::design::reduce_rows;
use super::kernel::{add_packed_to, add_products, packed, CHUNK, LANES};

/// The largest sample used to place decile edges.
pub const QUANTILE_SAMPLE: usize = 10_000;

/// Bins of a decile histogram.
const DECILE_BINS: usize = 10;

/// Values spanning at most this many whole numbers get one bin per value.
const MAX_VALUE_BINS: f64 = 20.0;

/// Min, max, mean and standard deviation (n − 1) of a column.
pub fn moments(values: &[f64]) -> (f64, f64, f64, f64) {
    let n = values.len();
    let (min, max, sum) = reduce_rows(
        n,
        || (f64::INFINITY, f64::NEG_INFINITY, 0.0),
        |acc, range| {
            for &x in &values[range] {
                acc.0 = acc.0.min(x);
                acc.1 = acc.1.max(x);
                acc.2 += x;
            }
        },
        |t, p| {
            t.0 = t.0.min(p.0);
            t.1 = t.1.max(p.1);
            t.2 += p.2;
        },
    );
    let mean = (sum / n as f64).clamp(min, max);
    let squares = reduce_rows(
        n,
        || 0.0,
        |acc, range| {
            for &x in &values[range] {
                *acc += (x - mean) * (x - mean);
            }
        },
        |t, p| *t += p,
    );
    let sd = if n > 1 {
        (squares / (n - 1) as f64).sqrt()
    } else {
        0.0
    };
    (min, max, mean, sd)
}

/// An evenly strided sample, sorted.
fn sorted_sample(values: &[f64]) -> Vec<f64> {
    let n = values.len();
    let mut sample: Vec<f64> = if n <= QUANTILE_SAMPLE {
        values.to_vec()
    } else {
        (0..QUANTILE_SAMPLE)
            .map(|i| values[i * n / QUANTILE_SAMPLE])
            .collect()
    };
    sample.sort_by(f64::total_cmp);
    sample
}

/// Strictly increasing edges from candidates (dropping ties), keeping the first and last.
fn strictly_increasing(candidates: Vec<f64>) -> Vec<f64> {
    let Some(&last) = candidates.last() else {
        return Vec::new();
    };
    let mut edges: Vec<f64> = Vec::with_capacity(candidates.len());
    for e in candidates {
        if edges.last().is_none_or(|&p| e > p) {
            edges.push(e);
        }
    }
    if edges.last() != Some(&last) {
        edges.pop();
        edges.push(last);
    }
    edges
}

/// Decile edges between `low` and `high` from a sorted sample.
fn decile_edges(sample: &[f64], low: f64, high: f64) -> Vec<f64> {
    let mut candidates = vec![low];
    if !sample.is_empty() {
        for i in 1..DECILE_BINS {
            let position = (i * (sample.len() - 1)) as f64 / DECILE_BINS as f64;
            let below = sample[position.floor() as usize];
            let above = sample[position.ceil() as usize];
            let q = below + (above - below) * position.fract();
            if q > low && q < high {
                candidates.push(q);
            }
        }
    }
    candidates.push(high);
    strictly_increasing(candidates)
}

/// Count values into bins `[eᵢ, eᵢ₊₁)`, the last one closed. A value's bin is the number of
/// interior edges at or below it, counted edge by edge over a chunk of values (no branch per
/// value).
pub fn count_into(values: &[f64], edges: &[f64]) -> Vec<u64> {
    let bins = edges.len() - 1;
    let interior = &edges[1..bins];
    reduce_rows(
        values.len(),
        || vec![0u64; bins],
        |acc, range| {
            let mut bin = [0u32; CHUNK];
            for chunk in values[range].chunks(CHUNK) {
                let bin = &mut bin[..chunk.len()];
                bin.fill(0);
                for &e in interior {
                    for (b, &x) in bin.iter_mut().zip(chunk) {
                        *b += u32::from(e <= x);
                    }
                }
                for &b in bin.iter() {
                    acc[b as usize] += 1;
                }
            }
        },
        |t, p| t.iter_mut().zip(p).for_each(|(a, b)| *a += b),
    )
}

/// Edges for one numeric covariate (see the module documentation).
fn covariate_edges(values: &[f64], min: f64, max: f64) -> Vec<f64> {
    if min == max {
        let half = 0.5 * min.abs().max(1.0);
        return vec![min - half, max + half];
    }
    let whole = values.iter().all(|x| x.fract() == 0.0);
    if whole && max - min <= MAX_VALUE_BINS {
        let mut edges = vec![min];
        let mut v = min + 0.5;
        while v < max {
            edges.push(v);
            v += 1.0;
        }
        edges.push(max);
        return edges;
    }
    decile_edges(&sorted_sample(values), min, max)
}

/// The training summary of a numeric covariate.
pub fn numeric_summary(values: &[f64]) -> TrainingSummary {
    let (min, max, mean, sd) = moments(values);
    let edges = covariate_edges(values, min, max);
    let counts = count_into(values, &edges);
    TrainingSummary {
        min: Some(min),
        max: Some(max),
        mean: Some(mean),
        std_dev: Some(sd),
        histogram: Some(Histogram { edges, counts }),
        level_counts: None,
    }
}

/// The training summary of a categorical covariate.
pub fn level_summary(codes: &[u32], levels: &[String]) -> TrainingSummary {
    let counts = reduce_rows(
        codes.len(),
        || vec![0u64; levels.len()],
        |acc, range| {
            for &c in &codes[range] {
                acc[c as usize] += 1;
            }
        },
        |t, p| t.iter_mut().zip(p).for_each(|(a, b)| *a += b),
    );
    TrainingSummary {
        level_counts: Some(
            levels
                .iter()
                .cloned()
                .zip(counts)
                .collect::<BTreeMap<String, u64>>(),
        ),
        ..TrainingSummary::default()
    }
}

/// The histogram of fitted probabilities.
pub fn probability_histogram(probabilities: &[f64]) -> Histogram {
    let edges = decile_edges(&sorted_sample(probabilities), 0.0, 1.0);
    let counts = count_into(probabilities, &edges);
    Histogram { edges, counts }
}

/// The joint block for the continuous covariates, or `None` if there are none or their
/// covariance is singular (then the file carries no joint warning and the fit says so).
pub fn joint(names: &[String], columns: &[&[f64]], means: &[f64]) -> Option<JointSpec> {
    let m = columns.len();
    let n = columns.first()?.len();
    if n < 2 {
        return None;
    }
    let products = reduce_rows(
        n,
        || vec![0.0; m * m],
        |acc, range| {
            let len = range.len();
            let centred = centred(columns, means, range);
            let mut lanes = vec![[0.0; LANES]; m * (m + 1) / 2];
            for a in 0..m {
                for b in 0..=a {
                    add_products(
                        &mut lanes[packed(a, b)],
                        &centred[a * len..(a + 1) * len],
                        &centred[b * len..(b + 1) * len],
                    );
                }
            }
            add_packed_to(acc, &lanes, m);
        },
        |t, p| t.iter_mut().zip(p).for_each(|(a, b)| *a += b),
    );
    let mut covariance = vec![vec![0.0; m]; m];
    for a in 0..m {
        for b in 0..=a {
            let c = products[a * m + b] / (n - 1) as f64;
            covariance[a][b] = c;
            covariance[b][a] = c;
        }
    }
    let flat: Vec<f64> = covariance.iter().flatten().copied().collect();
    let inverse = DMatrix::from_row_slice(m, m, &flat).cholesky()?.inverse();
    let precision: Vec<f64> = (0..m * m).map(|i| inverse[(i / m, i % m)]).collect();
    // Per row q = Σₐ dₐ (Σ_b P_ab d_b), the sums in term order, taken a block's rows at a time.
    let max_squared = reduce_rows(
        n,
        || 0.0f64,
        |acc, range| {
            let len = range.len();
            let centred = centred(columns, means, range);
            let mut quadratic = vec![0.0; len];
            let mut inner = vec![0.0; len];
            for a in 0..m {
                inner.fill(0.0);
                for b in 0..m {
                    let p = precision[a * m + b];
                    for (u, &d) in inner.iter_mut().zip(&centred[b * len..(b + 1) * len]) {
                        *u += p * d;
                    }
                }
                for ((q, &u), &d) in quadratic
                    .iter_mut()
                    .zip(&inner)
                    .zip(&centred[a * len..(a + 1) * len])
                {
                    *q += d * u;
                }
            }
            *acc = quadratic.iter().fold(*acc, |most, &q| most.max(q));
        },
        |t, p| *t = t.max(p),
    );
    let max_distance = max_squared.max(0.0).sqrt();
    (max_distance > 0.0).then(|| JointSpec {
        covariates: names.to_vec(),
        mean: means.to_vec(),
        covariance,
        max_distance,
    })
}

/// Rows `range` of each column less its mean, column after column.
fn centred(columns: &[&[f64]], means: &[f64], range: std::ops::Range<usize>) -> Vec<f64> {
    let mut out = Vec::with_capacity(columns.len() * range.len());
    for (column, &mean) in columns.iter().zip(means) {
        out.extend(column[range.clone()].iter().map(|&x| x - mean));
    }
    out
}

/// Whether a covariate kind enters the joint block.
pub fn in_joint(kind: CovariateKind) -> bool {
    kind == CovariateKind::Continuous
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn small_whole_numbers_get_one_bin_each() {
        let values = [0.0, 1.0, 1.0, 3.0, 2.0];
        let s = numeric_summary(&values);
        let h = s.histogram.expect("histogram");
        assert_eq!(h.edges, [0.0, 0.5, 1.5, 2.5, 3.0]);
        assert_eq!(h.counts, [1, 2, 1, 1]);
        let binary = numeric_summary(&[0.0, 1.0, 1.0])
            .histogram
            .expect("histogram");
        assert_eq!(binary.edges, [0.0, 0.5, 1.0]);
        assert_eq!(binary.counts, [1, 2]);
    }

    #[test]
    fn deciles_split_continuous_values_evenly() {
        let values: Vec<f64> = (0..1000).map(|i| (i as f64 * 0.37).sin() * 10.0).collect();
        let h = numeric_summary(&values).histogram.expect("histogram");
        assert_eq!(h.counts.len(), 10);
        assert_eq!(h.counts.iter().sum::<u64>(), 1000);
        assert!(
            h.counts.iter().all(|&c| (99..=101).contains(&c)),
            "{:?}",
            h.counts
        );
    }

    #[test]
    fn moments_match_the_textbook_formulas() {
        let (min, max, mean, sd) = moments(&[2.0, 4.0, 4.0, 4.0, 5.0, 5.0, 7.0, 9.0]);
        assert_eq!((min, max, mean), (2.0, 9.0, 5.0));
        assert!((sd - (32.0f64 / 7.0).sqrt()).abs() < 1e-15);
    }
}
