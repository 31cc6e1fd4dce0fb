//! Calibration intercept and slope: logistic regressions of the outcome on the logit of the
//! model's probability, whatever the model's own link.
//!
//! ```text
//! intercept (calibration-in-the-large):  logit P(y = 1) = a + logit(p)        (offset)
//! slope:                                  logit P(y = 1) = a + b · logit(p)
//! ```
//!
//! Both are fitted by Newton's method on the exact log-likelihood, started at the perfectly
//! calibrated values (a = 0, b = 1), with Wald intervals from the inverse information. A well
//! calibrated model has intercept near 0 and slope near 1; a slope below 1 says the
//! probabilities are too extreme.

use serde::Serialize;

use super::rows::{logistic, ModelRows};
use super::Bounds;

const MAX_ITERATIONS: usize = 100;
const STEP_TOLERANCE: f64 = 1e-12;

/// One calibration coefficient with its standard error and Wald interval.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct CalibrationFit {
    /// The coefficient.
    pub estimate: f64,
    /// Its standard error from the inverse information.
    pub std_error: f64,
    /// estimate ± q · std_error.
    pub interval: Bounds,
    /// Newton iterations taken.
    pub iterations: usize,
}

/// The score (∂ℓ/∂a, ∂ℓ/∂b) and the information (I_aa, I_ab, I_bb) of logit P = a + b·x.
struct Derivatives {
    score: [f64; 2],
    information: [f64; 3],
}

fn derivatives(rows: &ModelRows, a: f64, b: f64) -> Derivatives {
    let mut score = [0.0; 2];
    let (mut i_aa, mut i_ab, mut i_bb) = (0.0, 0.0, 0.0);
    let mut add = |x: f64, y: f64| {
        let p = logistic(a + b * x);
        let w = p * (1.0 - p);
        score[0] += y - p;
        score[1] += (y - p) * x;
        i_aa += w;
        i_ab += w * x;
        i_bb += w * x * x;
    };
    for &x in rows.event_logits() {
        add(x, 1.0);
    }
    for &x in rows.non_event_logits() {
        add(x, 0.0);
    }
    Derivatives {
        score,
        information: [i_aa, i_ab, i_bb],
    }
}

pub(super) fn intercept(rows: &ModelRows, quantile: f64) -> CalibrationFit {
    let mut a = 0.0;
    let mut iterations = 0;
    let mut information = 0.0;
    while iterations < MAX_ITERATIONS {
        iterations += 1;
        let d = derivatives(rows, a, 1.0);
        information = d.information[0];
        let step = d.score[0] / information;
        a += step;
        if step.abs() < STEP_TOLERANCE * (1.0 + a.abs()) {
            information = derivatives(rows, a, 1.0).information[0];
            break;
        }
    }
    let std_error = 1.0 / information.sqrt();
    CalibrationFit {
        estimate: a,
        std_error,
        interval: Bounds::normal(a, std_error, quantile),
        iterations,
    }
}

pub(super) fn slope(rows: &ModelRows, quantile: f64) -> CalibrationFit {
    let (mut a, mut b) = (0.0, 1.0);
    let mut iterations = 0;
    let mut inverse_bb = f64::NAN;
    while iterations < MAX_ITERATIONS {
        iterations += 1;
        let d = derivatives(rows, a, b);
        let [i_aa, i_ab, i_bb] = d.information;
        let determinant = i_aa * i_bb - i_ab * i_ab;
        let step_a = (i_bb * d.score[0] - i_ab * d.score[1]) / determinant;
        let step_b = (i_aa * d.score[1] - i_ab * d.score[0]) / determinant;
        a += step_a;
        b += step_b;
        inverse_bb = i_aa / determinant;
        if step_a.abs().max(step_b.abs()) < STEP_TOLERANCE * (1.0 + a.abs().max(b.abs())) {
            let [i_aa, i_ab, i_bb] = derivatives(rows, a, b).information;
            inverse_bb = i_aa / (i_aa * i_bb - i_ab * i_ab);
            break;
        }
    }
    let std_error = inverse_bb.sqrt();
    CalibrationFit {
        estimate: b,
        std_error,
        interval: Bounds::normal(b, std_error, quantile),
        iterations,
    }
}
