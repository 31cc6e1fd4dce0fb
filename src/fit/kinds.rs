//! Covariate kinds for numeric columns: inferred from the values, or set by `--count` and
//! `--continuous`. (Text columns, and columns named with `--categorical`, are categorical.)
//!
//! ```text
//! binary      every value is 0 or 1
//! count       every value is a whole number, the smallest is 0 and the largest at most 100
//! continuous  anything else
//! ```
//!
//! The count rule asks for a zero because counts (prior arrears, claims, children) start at
//! none, while whole-number measurements (an age, a price in whole euros) rarely do; and for a
//! modest maximum because large whole numbers are more often amounts than counts. The kind
//! matters when the model is served: a count refuses fractional values, a binary covariate's
//! effect is a discrete change. When the rule guesses wrong, `--count COL` or
//! `--continuous COL` overrides it.

use crate::model::file::CovariateKind;

use super::error::FitError;

/// The largest value of an inferred count.
pub const MAX_INFERRED_COUNT: f64 = 100.0;

/// The kind the values suggest.
pub fn infer_kind(values: &[f64]) -> CovariateKind {
    if values.iter().all(|&x| x == 0.0 || x == 1.0) {
        return CovariateKind::Binary;
    }
    let whole = values.iter().all(|&x| x.fract() == 0.0);
    let min = values.iter().copied().fold(f64::INFINITY, f64::min);
    let max = values.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    if whole && min == 0.0 && max <= MAX_INFERRED_COUNT {
        CovariateKind::Count
    } else {
        CovariateKind::Continuous
    }
}

/// The kind asked for with `--count` or `--continuous`, checked against the values.
pub fn overridden_kind(
    column: &str,
    values: &[f64],
    requested: CovariateKind,
) -> Result<CovariateKind, FitError> {
    if requested == CovariateKind::Count {
        if let Some((i, x)) = values
            .iter()
            .enumerate()
            .find(|(_, &x)| x < 0.0 || x.fract() != 0.0)
        {
            return Err(FitError::BadOption(format!(
                "--count {column}: observation {} has {x}, which is not a whole number ≥ 0",
                i + 1
            )));
        }
    }
    Ok(requested)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn inference_follows_the_documented_rule() {
        assert_eq!(infer_kind(&[0.0, 1.0, 1.0]), CovariateKind::Binary);
        assert_eq!(infer_kind(&[0.0, 3.0, 1.0]), CovariateKind::Count);
        assert_eq!(infer_kind(&[18.0, 40.0, 65.0]), CovariateKind::Continuous);
        assert_eq!(infer_kind(&[0.0, 250.0]), CovariateKind::Continuous);
        assert_eq!(infer_kind(&[0.0, 1.5]), CovariateKind::Continuous);
    }

    #[test]
    fn a_count_override_refuses_fractions() {
        let e = overridden_kind("arrears", &[1.0, 2.5], CovariateKind::Count).unwrap_err();
        assert_eq!(
            e.to_string(),
            "--count arrears: observation 2 has 2.5, which is not a whole number ≥ 0"
        );
    }
}
