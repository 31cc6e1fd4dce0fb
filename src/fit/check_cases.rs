//! Check cases: a handful of training observations spread over the range of the fitted linear
//! index, stored with the probability that the serving engine computes for them, so that a
//! model file that does not reproduce its own fit is refused at load.
//!
//! The rows are the ones with the smallest and largest index and those closest to evenly spaced
//! values between them. Their probabilities are computed by building the [`Model`] the file
//! describes and scoring each observation with [`Scorer::probability`], the engine's own path.

use serde_json::{Map, Number, Value as Json};

use crate::engine::Scorer;
use crate::model::file::{CheckCase, CovariateKind, ModelFile};
use crate::model::{Model, ModelError, ModelProblem};

use super::design::reduce_rows;
use super::reader::ColumnData;

/// How many check cases a fitted model carries.
pub const CHECK_CASES: usize = 7;

/// Rows whose indices are the minimum, the maximum, and closest to evenly spaced values between.
pub fn spread_rows(indices: &[f64], count: usize) -> Vec<usize> {
    if indices.is_empty() {
        return Vec::new();
    }
    let (low, high) = reduce_rows(
        indices.len(),
        || (f64::INFINITY, f64::NEG_INFINITY),
        |(l, h), range| {
            for &z in &indices[range] {
                *l = l.min(z);
                *h = h.max(z);
            }
        },
        |t, p| *t = (t.0.min(p.0), t.1.max(p.1)),
    );
    let targets: Vec<f64> = (0..count)
        .map(|m| low + (high - low) * m as f64 / (count.max(2) - 1) as f64)
        .collect();
    // The first row at the least distance from each target: blocks are combined in row order
    // and only a strictly closer row replaces a slot.
    let closer = |best: &mut Vec<(f64, usize)>, candidate: &[(f64, usize)]| {
        for (slot, &(distance, i)) in best.iter_mut().zip(candidate) {
            if distance < slot.0 {
                *slot = (distance, i);
            }
        }
    };
    let best = reduce_rows(
        indices.len(),
        || vec![(f64::INFINITY, 0usize); count],
        |best, range| {
            for i in range {
                for (target, slot) in targets.iter().zip(best.iter_mut()) {
                    let distance = (indices[i] - target).abs();
                    if distance < slot.0 {
                        *slot = (distance, i);
                    }
                }
            }
        },
        |total, part| closer(total, &part),
    );
    let mut rows: Vec<usize> = best.into_iter().map(|(_, i)| i).collect();
    rows.dedup();
    rows
}

/// The observation of row `i` as a caller would send it.
pub fn observation(
    names: &[String],
    kinds: &[CovariateKind],
    columns: &[ColumnData],
    i: usize,
) -> Map<String, Json> {
    let mut out = Map::new();
    for ((name, kind), column) in names.iter().zip(kinds).zip(columns) {
        let value = match column {
            ColumnData::Categorical { codes, levels } => {
                Json::String(levels[codes[i] as usize].clone())
            }
            ColumnData::Numeric(x) => {
                let x = x[i];
                match kind {
                    CovariateKind::Binary | CovariateKind::Count if (0.0..9e15).contains(&x) => {
                        Json::Number(Number::from(x as u64))
                    }
                    _ => Number::from_f64(x).map(Json::Number).unwrap_or(Json::Null),
                }
            }
        };
        out.insert(name.clone(), value);
    }
    out
}

/// Fill `file.check_cases` with these observations and the probabilities the engine gives
/// them, then validate the finished file.
pub fn attach(
    mut file: ModelFile,
    observations: Vec<Map<String, Json>>,
) -> Result<ModelFile, ModelError> {
    file.check_cases.clear();
    let model = Model::from_file(file.clone())?;
    let mut values = Vec::new();
    for (i, observation) in observations.into_iter().enumerate() {
        model
            .parse_observation(&observation, &mut values)
            .map_err(|e| ModelError {
                field: format!("check_cases[{i}].observation"),
                problem: ModelProblem::CheckCaseObservation(e),
            })?;
        let probability = Scorer::probability(&model, &values);
        file.check_cases.push(CheckCase {
            observation,
            probability,
        });
    }
    Model::from_file(file.clone())?;
    Ok(file)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn rows_span_the_index() {
        let z = [0.3, -2.0, 5.0, 1.45, 1.6, 4.1, -0.4];
        assert_eq!(spread_rows(&z, 3), [1, 3, 2]);
    }
}
