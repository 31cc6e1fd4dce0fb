//! The fit summary printed by `ogive fit`: convergence, likelihoods, McFadden's pseudo-R², AIC,
//! BIC and the coefficient table with standard errors, z statistics, two-sided normal p-values
//! and 95% intervals.
//!
//! ```text
//! pseudo-R² = 1 − ℓ/ℓ₀      AIC = −2ℓ + 2k      BIC = −2ℓ + k·ln n
//! z = β/se                  p = 2·Φ(−|z|)       interval β ± 1.959964·se
//! ```
//!
//! What n and ℓ are depends on the weights ([`Counting`]):
//!
//! - no weights: n is the number of rows used;
//! - frequency weights: a row of weight v is v observations, so n = Σ vᵢ (statsmodels'
//!   `GLM(freq_weights=…)` takes the same n, its `wnobs`, for BIC and the residual degrees of
//!   freedom); a row of weight 0 is no observation at all;
//! - sampling weights (and the population weights of an outcome-stratified sample): ℓ = Σ vᵢ ℓᵢ
//!   is a pseudo-log-likelihood, the function whose maximum is the estimate, not the
//!   likelihood of the rows. It is shown and named as such, and McFadden's ratio is computed
//!   from it as a description of fit, but AIC and BIC are left out: their penalty counts
//!   independent observations, which weighted rows are not, so the figures would compare
//!   nothing. (statsmodels prints them from the weighted sum all the same; this is a choice.)

use std::fmt;

use crate::link::{normal_cdf, Link};

/// The normal quantile for a 95% interval.
const Z_95: f64 = 1.959_963_984_540_054;

/// How the rows of a fit count as observations.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Counting {
    /// One row, one observation.
    Rows,
    /// Frequency weights: the rows stand for this many observations (the sum of the weights).
    Frequency {
        /// Σ vᵢ.
        observations: f64,
    },
    /// Sampling or population weights: ℓ is a pseudo-log-likelihood.
    Sampling,
}

/// Everything the summary shows.
#[derive(Debug, Clone, PartialEq)]
pub struct FitReport {
    /// The link the model is fitted with (`--link`; by default logit, or the `--like` file's).
    pub link: Link,
    /// `classical` or `robust`.
    pub covariance_type: String,
    /// Rows used.
    pub observations: u64,
    /// How the rows count as observations.
    pub counting: Counting,
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

    /// The n of the information criteria: rows, or the sum of the frequency weights.
    pub fn counted_observations(&self) -> f64 {
        match self.counting {
            Counting::Frequency { observations } => observations,
            Counting::Rows | Counting::Sampling => self.observations as f64,
        }
    }

    /// Akaike's information criterion; `None` for a pseudo-likelihood.
    pub fn aic(&self) -> Option<f64> {
        (self.counting != Counting::Sampling)
            .then(|| -2.0 * self.log_likelihood + 2.0 * self.terms.len() as f64)
    }

    /// Schwarz's Bayesian information criterion; `None` for a pseudo-likelihood.
    pub fn bic(&self) -> Option<f64> {
        (self.counting != Counting::Sampling).then(|| {
            -2.0 * self.log_likelihood + self.terms.len() as f64 * self.counted_observations().ln()
        })
    }

    /// "log-likelihood", or "pseudo-log-likelihood" under sampling weights.
    pub fn likelihood_name(&self) -> &'static str {
        match self.counting {
            Counting::Sampling => "pseudo-log-likelihood",
            Counting::Rows | Counting::Frequency { .. } => "log-likelihood",
        }
    }

    /// The fit's figures in one clause, for the model file's notes.
    pub fn figures(&self) -> String {
        let r2 = self.pseudo_r_squared();
        match (self.aic(), self.bic()) {
            (Some(aic), Some(bic)) => {
                format!("McFadden pseudo-R² {r2:.6}, AIC {aic:.6}, BIC {bic:.6}")
            }
            _ => format!(
                "McFadden pseudo-R² {r2:.6} from the weighted pseudo-log-likelihood; no AIC or BIC (weighted rows are not independent observations)"
            ),
        }
    }
}

impl fmt::Display for FitReport {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let counted = match self.counting {
            Counting::Frequency { observations } => format!(
                "{} rows standing for {observations} observations (frequency weights)",
                self.observations
            ),
            Counting::Rows => format!("{} observations", self.observations),
            Counting::Sampling => format!("{} weighted rows", self.observations),
        };
        writeln!(
            f,
            "{} model, {counted}{}, {} terms; {} covariance",
            self.link,
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
        let name = self.likelihood_name();
        let null_name = format!("null {name}");
        writeln!(f, "{name:<26}{:>16.6}", self.log_likelihood)?;
        writeln!(f, "{null_name:<26}{:>16.6}", self.null_log_likelihood)?;
        writeln!(
            f,
            "{:<26}{:>16.6}",
            "McFadden pseudo-R²",
            self.pseudo_r_squared()
        )?;
        match (self.aic(), self.bic()) {
            (Some(aic), Some(bic)) => {
                writeln!(f, "{:<26}{aic:>16.6}", "AIC")?;
                writeln!(f, "{:<26}{bic:>16.6}", "BIC")?;
            }
            _ => writeln!(
                f,
                "no AIC or BIC: under sampling weights the log-likelihood is a pseudo-likelihood"
            )?,
        }
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
