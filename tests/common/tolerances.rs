//! Every tolerance the reference and property tests use, in one place, each with the reason it
//! has the value it has. A test names the constant beside its source; nothing else in `tests/`
//! writes a tolerance as a literal.

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
