//! The fit summary printed by `ogive fit`: convergence, likelihoods, McFadden's pseudo-R², AIC,
//! BIC and the coefficient table with standard errors, z statistics, two-sided normal p-values
//! and 95% intervals.
//!
//! ```text
//! pseudo-R² = 1 − ℓ/ℓ₀      AIC = −2ℓ + 2k      BIC = −2ℓ + k·ln n
//! z = β/se                  p = 2·Φ(−|z|)       interval β ± 1.959964·se
//! ```

use std::fmt;

use crate::link::{normal_cdf, Link};

/// The normal quantile for a 95% interval.
const Z_95: f64 = 1.959_963_984_540_054;

/// Everything the summary shows.
#[derive(Debug, Clone, PartialEq)]
pub struct FitReport {
    /// The link.
    pub link: Link,
    /// `classical` or `robust`.
    pub covariance_type: String,
    /// Observations used.
    pub observations: u64,
    /// Rows dropped for missing values.
    pub dropped: u64,
    /// Newton steps.
    pub iterations: u32,
    /// Steps taken with the expected information.
    pub fisher_steps: u32,
    /// Step halvings.
    pub halvings: u32,
    /// ℓ at the estimate.
    pub log_likelihood: f64,
    /// ℓ of the constant-probability model.
    pub null_log_likelihood: f64,
    /// Term labels.
    pub terms: Vec<String>,
    /// Coefficients.
    pub coefficients: Vec<f64>,
    /// Standard errors (square roots of the covariance diagonal).
    pub std_errors: Vec<f64>,
    /// Remarks (for example, why the file has no joint block).
    pub remarks: Vec<String>,
}

impl FitReport {
    /// McFadden's pseudo-R².
    pub fn pseudo_r_squared(&self) -> f64 {
        1.0 - self.log_likelihood / self.null_log_likelihood
    }

    /// Akaike's information criterion.
    pub fn aic(&self) -> f64 {
        -2.0 * self.log_likelihood + 2.0 * self.terms.len() as f64
    }

    /// Schwarz's Bayesian information criterion.
    pub fn bic(&self) -> f64 {
        -2.0 * self.log_likelihood + self.terms.len() as f64 * (self.observations as f64).ln()
    }
}

impl fmt::Display for FitReport {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        writeln!(
            f,
            "{} model, {} observations{}, {} terms; {} covariance",
            self.link,
            self.observations,
            if self.dropped > 0 {
                format!(" ({} rows with missing values dropped)", self.dropped)
            } else {
                String::new()
            },
            self.terms.len(),
            self.covariance_type
        )?;
        writeln!(
            f,
            "converged in {} Newton–Raphson iterations ({} Fisher-scoring steps, {} step halvings)",
            self.iterations, self.fisher_steps, self.halvings
        )?;
        writeln!(f, "log-likelihood        {:>16.6}", self.log_likelihood)?;
        writeln!(
            f,
            "null log-likelihood   {:>16.6}",
            self.null_log_likelihood
        )?;
        writeln!(f, "McFadden pseudo-R²    {:>16.6}", self.pseudo_r_squared())?;
        writeln!(f, "AIC                   {:>16.6}", self.aic())?;
        writeln!(f, "BIC                   {:>16.6}", self.bic())?;
        let width = self.terms.iter().map(|t| t.len()).max().unwrap_or(4).max(4);
        writeln!(
            f,
            "\n{:<width$}  {:>13}  {:>12}  {:>8}  {:>9}  {:>13}  {:>13}",
            "term", "coefficient", "std. error", "z", "p", "95% lower", "95% upper"
        )?;
        for ((term, &b), &se) in self
            .terms
            .iter()
            .zip(&self.coefficients)
            .zip(&self.std_errors)
        {
            let z = b / se;
            let p = 2.0 * normal_cdf(-z.abs());
            writeln!(
                f,
                "{term:<width$}  {b:>13.6}  {se:>12.6}  {z:>8.3}  {p:>9.3e}  {:>13.6}  {:>13.6}",
                b - Z_95 * se,
                b + Z_95 * se
            )?;
        }
        for remark in &self.remarks {
            writeln!(f, "note: {remark}")?;
        }
        Ok(())
    }
}
