//! The coefficient table: each term's estimate with its standard error, z statistic, two-sided
//! p-value and normal interval.
//!
//! ```text
//! se = √V_kk        z = β / se        p = 2·(1 − Φ(|z|))        interval: β ± q·se
//! ```
//!
//! `1 − Φ(|z|)` is computed as `Φ(−|z|)` by [`crate::link::normal_cdf`], whose erfc keeps its
//! relative precision for large |z| where `1 − Φ` would round to 0 (and which is accurate to
//! about an ulp, where statrs' normal survival function is off by ~4e-11 relative near
//! |z| = 2).

use serde::Serialize;

use crate::engine::Options;
use crate::link::normal_cdf;
use crate::model::Model;

/// One row of the coefficient table.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct CoefficientRow {
    /// The term's canonical text.
    pub term: String,
    /// The estimate β.
    pub estimate: f64,
    /// Its standard error, when the model has a covariance.
    pub std_error: Option<f64>,
    /// β / se.
    pub z: Option<f64>,
    /// The two-sided p-value of z under the standard normal.
    pub p_value: Option<f64>,
    /// Lower end of the normal interval.
    pub lower: Option<f64>,
    /// Upper end of the normal interval.
    pub upper: Option<f64>,
}

/// The coefficient table, in term order.
pub fn coefficient_table(model: &Model, options: &Options) -> Vec<CoefficientRow> {
    let k = model.terms.len();
    let q = options.quantile();
    model
        .term_labels
        .iter()
        .zip(&model.coefficients)
        .enumerate()
        .map(|(i, (label, &estimate))| {
            let std_error = model
                .covariance
                .as_ref()
                .map(|v| v[i * k + i].max(0.0).sqrt());
            let z = std_error.filter(|&se| se > 0.0).map(|se| estimate / se);
            CoefficientRow {
                term: label.clone(),
                estimate,
                std_error,
                z,
                p_value: z.map(|z| 2.0 * normal_cdf(-z.abs())),
                lower: std_error.map(|se| estimate - q * se),
                upper: std_error.map(|se| estimate + q * se),
            }
        })
        .collect()
}
