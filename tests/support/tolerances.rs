//! Every tolerance the integration tests use, in one place, each with the reason it has the
//! value it has. A test names the constant beside its source; nothing else in `tests/` writes a
//! tolerance as a literal. The constants at the top serve the engine and link reference and
//! property tests; each module below serves one area.

/// Engine against statsmodels (predict, get_margeff) and against the numpy formulas of
/// `tests/reference/make_engine_fixtures.py`: relative. The project asks for 1e-8 or better; the
/// two sides compute the same quantities from the same coefficients in a different order, so
/// they agree to a few hundred ulps, and 1e-10 leaves room for summation order only.
pub const ENGINE_VS_STATSMODELS: f64 = 1e-10;

/// Below this magnitude an engine quantity is compared absolutely, at
/// `ENGINE_VS_STATSMODELS × ENGINE_ABSOLUTE_FLOOR`: a delta-method gradient that nearly cancels
/// can leave an effect or standard error many orders below its inputs.
pub const ENGINE_ABSOLUTE_FLOOR: f64 = 1e-6;

/// Link functions against scipy and mpmath: relative, wherever the reference value is a normal
/// double (the project's "relative 1e-12 where representable").
pub const LINK_VS_SCIPY: f64 = 1e-12;

/// Abramowitz & Stegun (1964) Table 26.1 as recalled here: ten decimals, so half a unit in the
/// tenth decimal, absolute.
pub const ABRAMOWITZ_STEGUN_TEN_DECIMALS: f64 = 5e-11;

/// `normal_quantile` against `scipy.stats.norm.ppf`: relative (absolute near p = ½ where the
/// quantile is 0).
pub const QUANTILE_VS_SCIPY: f64 = 1e-14;

/// Facts of the trade (β/4, 1/√(2π)) computed in closed form: relative.
pub const CLOSED_FORM: f64 = 1e-15;

/// Analytic derivative effect against a five-point central difference of the probability:
/// relative, or absolute below [`EFFECT_SCALE`]. The stencil's truncation error is O(h⁴) and
/// its rounding error O(ε/h); with h = 1e-4 · max(1, |x|) both stay near 1e-11.
pub const FINITE_DIFFERENCE: f64 = 1e-7;

/// Below this magnitude a property test compares an effect or probability absolutely (at its
/// tolerance times this scale): a difference quotient's error does not shrink with the effect.
pub const EFFECT_SCALE: f64 = 1e-3;

/// The same for standard errors in the property tests.
pub const STD_ERROR_SCALE: f64 = 1e-4;

/// Delta-method standard error against one built from a numerical Jacobian of the effect with
/// respect to β (five-point stencil, h = 1e-4 · max(1, |βᵢ|) / max(1, |tᵢ|)): relative.
pub const NUMERICAL_JACOBIAN: f64 = 1e-6;

/// Identities that hold up to a few roundings (a discrete change against two separately
/// computed probabilities, an average against the mean of its parts, p + (1 − p) = 1):
/// relative to the larger operand.
pub const ROUNDING: f64 = 1e-12;

/// A fact of the trade quoted to four decimals (φ(0) ≈ 0.3989): half a unit in the fourth
/// decimal, absolute.
pub const COMMON_PRACTICE_FOUR_DECIMALS: f64 = 5e-5;

/// A link's density against a central difference of its probability, and the density's slope
/// against a central difference of the density (h = 1e-5): truncation h²·f‴/6 ≈ 1e-11 and
/// rounding ε/h ≈ 1e-11, relative to max(|value|, 1e-3).
pub const LINK_FINITE_DIFFERENCE: f64 = 1e-8;

/// Fitting against statsmodels, published tables and simulation.
pub mod fit {
    /// Coefficients against statsmodels: relative (the project's 1e-6). Both sides iterate to a
    /// gradient far below this, so the agreement is usually near 1e-10.
    pub const COEFFICIENT_VS_STATSMODELS: f64 = 1e-6;

    /// Classical and HC0 standard errors against statsmodels: relative (the project's 1e-5).
    pub const STD_ERROR_VS_STATSMODELS: f64 = 1e-5;

    /// Log-likelihoods against statsmodels: relative. The same sum over the same data in a
    /// different order, at an estimate equal to ~1e-10.
    pub const LOG_LIKELIHOOD_VS_STATSMODELS: f64 = 1e-9;

    /// A number printed to three decimals (Greene's tables, the Newton-vs-IRLS check):
    /// half a unit in the third decimal, absolute.
    pub const PRINTED_THREE_DECIMALS: f64 = 5e-4;

    /// Estimates in a simulation: within this many standard errors of the truth (the project's 4).
    pub const SIMULATION_STANDARD_ERRORS: f64 = 4.0;

    /// Coverage of nominal 95% intervals over 200 simulated datasets: the project's band.
    pub const COVERAGE_BAND: (f64, f64) = (0.92, 0.98);

    /// Amemiya (1981): logit coefficients are about 1.6 times probit ones; the loose band used
    /// here for every coefficient of the Spector fit.
    pub const AMEMIYA_RATIO_BAND: (f64, f64) = (1.4, 1.9);

    /// The agreement promised between thread counts, relative.
    pub const THREADS_AGREE: f64 = 1e-10;

    /// Repeated rows against frequency weights: the same sums in a different grouping, so only
    /// rounding separates them (relative).
    pub const REPEATED_ROWS: f64 = 1e-9;

    /// The corrected intercept against the closed form applied to the uncorrected fit: one
    /// subtraction (relative).
    pub const CLOSED_FORM_SHIFT: f64 = 1e-12;

    /// A refitted demo model against the committed one (relative): the same fit on the same
    /// data differs, at most, in the rounding of a reordered sum.
    pub const REFIT_RELATIVE: f64 = 1e-9;
}

/// `ogive describe` against statsmodels and the plots it draws.
pub mod describe {
    /// statsmodels 0.15 `get_margeff(...).margeff`: closed-form effects at the same β, so they
    /// agree to rounding.
    pub const STATSMODELS_EFFECT: f64 = 1e-10;
    /// statsmodels 0.15 `get_margeff(...).margeff_se`: the delta method with the same
    /// covariance (observed agreement ~1e-15).
    pub const STATSMODELS_EFFECT_SE: f64 = 1e-10;
    /// statsmodels 0.15 `bse`, `tvalues`, `pvalues` (scipy's normal survival function),
    /// `conf_int()`: the same formulas on the same covariance.
    pub const STATSMODELS_COEFFICIENTS: f64 = 1e-12;
    /// Reading a plotted point back from the SVG path: coordinates are written to 1/1000
    /// pixel, so the data value is known to half that over the panel's pixel height.
    pub const PIXEL: f64 = 0.0005;
}

/// `ogive score` against the engine and statsmodels.
pub mod score {
    /// Relative tolerance between a number read back from the CSV and the engine's own value. The
    /// CSV carries the shortest text that reads back to the same f64, so the two should be equal;
    /// 1e-12 leaves room for nothing but that.
    pub const CSV_ROUND_TRIP: f64 = 1e-12;

    /// Tolerance against statsmodels' fitted probabilities (statsmodels 0.15 Logit/Probit.predict
    /// on the Spector data, fixture written by tests/reference/describe/make_spector_fixtures.py):
    /// both evaluate F(xᵀβ) at the same β, so only rounding separates them.
    pub const STATSMODELS_PREDICT: f64 = 1e-12;

    /// A contribution column against its closed form β·(x − x̄) (or the level shares' sum):
    /// the engine's z difference and the closed form differ in rounding only (absolute).
    pub const CONTRIBUTION_CLOSED_FORM: f64 = 1e-12;
}

/// The figures of `ogive evaluate` against scikit-learn, statsmodels, scipy and numpy.
pub mod evaluate {
    /// Brier score, log loss and AUC against scikit-learn 1.9 (`brier_score_loss`, `log_loss`,
    /// `roc_auc_score`): relative. Both sides sum the same few thousand terms in a different
    /// order (numpy sums pairwise), so they agree to a few ulps a term.
    pub const SKLEARN: f64 = 1e-12;
    /// DeLong standard errors, covariances and the paired z against the numpy midrank
    /// algorithm of Sun & Xu (2014): relative. Same placements, sums in another order.
    pub const DELONG: f64 = 1e-10;
    /// Calibration intercept and slope with their standard errors against statsmodels 0.15
    /// GLM Binomial fitted by Newton (tol 1e-14): relative. Two Newton runs to the same
    /// maximum agree to the precision of the score equations (observed ~1e-15); 1e-10 leaves
    /// room for the logit of p computed as ln p − ln(1 − p) here and by scipy there.
    pub const STATSMODELS_GLM: f64 = 1e-10;
    /// Wilson intervals against statsmodels `proportion_confint(method='wilson')`, and the
    /// reliability table against `calibration_curve`: relative; closed forms on the same
    /// counts.
    pub const CLOSED_FORM: f64 = 1e-12;
    /// Murphy's terms and Hosmer–Lemeshow against numpy sums over the same bins and groups:
    /// relative, with absolute floor [`SUM_FLOOR`] for terms near 0. ogive keeps running sums
    /// (Σp, Σp²) where numpy subtracts means first, and recovers p from the stored logit.
    pub const SUMS: f64 = 1e-9;
    /// Below this a Murphy term or a mean difference is compared absolutely.
    pub const SUM_FLOOR: f64 = 1e-6;
    /// p-values against scipy's normal and χ² survival functions: relative (statrs and scipy
    /// evaluate the same incomplete gamma and erfc to about 1e-14; the statistic they are
    /// given already differs by [`SUMS`]).
    pub const P_VALUE: f64 = 1e-7;
    /// The identity REL − RES + UNC + within-bin = Brier: absolute. Each term is a sum of a few
    /// thousand products below 1.
    pub const IDENTITY: f64 = 1e-12;
}

/// The `ogive evaluate` process against the references on the Spector rows.
pub mod evaluate_process {
    /// Figures from the process against scikit-learn / statsmodels / numpy on the Spector rows:
    /// relative. ogive's probabilities from the model file agree with statsmodels' `predict`
    /// to about 1e-15 (the file carries the coefficients to the last digit), and the figures
    /// are smooth in them; 1e-9 leaves room for the different summation orders on 32 rows.
    pub const REFERENCE: f64 = 1e-9;
    /// Below this a figure is compared absolutely (an intercept of 1e-16 is 0).
    pub const FLOOR: f64 = 1e-6;
    /// The likelihood equations of a logit with an intercept, at the statsmodels estimate
    /// (Newton, tol 1e-14): Σ (y − p) = 0 and Σ (y − p) z = 0, so on the training rows the
    /// calibration intercept is 0 and the slope 1 (common practice). Absolute.
    pub const SCORE_EQUATIONS: f64 = 1e-7;
}

/// Live calibration and drift against scikit-learn, statsmodels, numpy and hand computation.
pub mod monitoring {
    /// Brier score, log loss and AUC against scikit-learn 1.9: relative. Both sides sum the
    /// same n ≤ 600 terms in a different order (numpy uses pairwise summation), so they agree
    /// to a few ulps per term.
    pub const SKLEARN: f64 = 1e-12;
    /// Calibration-in-the-large against numpy: absolute (the value is a difference of means
    /// and may be near 0).
    pub const NUMPY_ABSOLUTE: f64 = 1e-13;
    /// Calibration slope and intercept against statsmodels 0.15 Logit (Newton, tol 1e-14):
    /// relative. Two Newton–Raphson runs to the same maximum agree to the precision of the
    /// score equations, about 1e-12 of the parameters here; 1e-9 leaves room for summation order.
    pub const STATSMODELS: f64 = 1e-9;
    /// PSI against the hand computation of the same formula: relative.
    pub const HAND: f64 = 1e-12;
}

/// Served answers against the engine's own values.
pub mod http {
    /// A number of a served answer against the engine's value for the same version: the
    /// answer carries the shortest text that reads back to the same f64, so only the last
    /// digit of a value near 1 may differ (two ulps, relative).
    pub const SAME: f64 = 4e-16;
}
