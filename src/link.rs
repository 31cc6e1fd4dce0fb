//! Link functions: the probability `F(z)`, its complement `1 − F(z)`, the density `f(z)` and the
//! density's derivative `f′(z)` for each supported link, accurate deep into both tails.
//!
//! This module knows nothing about models, files or HTTP. Every function is pure and cheap, so
//! the engine can call it per observation without allocation.
//!
//! ```text
//! link     F(z)                f(z)             f′(z)
//! logit    1/(1+e^−z)          F(1−F)           f(1−2F)
//! probit   Φ(z)                φ(z)             −zφ(z)
//! cloglog  1−exp(−e^z)         exp(z−e^z)       f(1−e^z)
//! cauchit  ½ + atan(z)/π       1/(π(1+z²))      −2z/(π(1+z²)²)
//! ```
//!
//! Tail accuracy: each link computes `F` and `1 − F` separately, never as `1 − (the other)`, so
//! both stay accurate to a few ulps for |z| up to 35 wherever the value is representable.

use std::f64::consts::{FRAC_1_SQRT_2, PI};
use std::fmt;
use std::str::FromStr;

use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

/// `1/√(2π)`, the peak of the standard normal density.
const FRAC_1_SQRT_2PI: f64 = 0.398_942_280_401_432_7;

/// A link between the linear index `z` and the probability `p = F(z)`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "lowercase")]
pub enum Link {
    /// The logistic distribution function.
    Logit,
    /// The standard normal distribution function.
    Probit,
    /// Complementary log-log: the Gumbel (minimum) distribution function.
    Cloglog,
    /// The standard Cauchy distribution function.
    Cauchit,
}

/// Every link, in a fixed order (for tests, help text and documentation).
pub const ALL_LINKS: [Link; 4] = [Link::Logit, Link::Probit, Link::Cloglog, Link::Cauchit];

/// The probability, its complement and the density at one value of the index.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LinkValues {
    /// `F(z)`.
    pub probability: f64,
    /// `1 − F(z)`, accurate when `F(z)` is close to 1.
    pub complement: f64,
    /// `f(z)`.
    pub density: f64,
}

impl Link {
    /// The name used in model files, flags and answers.
    pub fn name(self) -> &'static str {
        match self {
            Link::Logit => "logit",
            Link::Probit => "probit",
            Link::Cloglog => "cloglog",
            Link::Cauchit => "cauchit",
        }
    }

    /// `F(z)`, `1 − F(z)` and `f(z)` together, from as few transcendental evaluations as the
    /// link allows (one `exp` for logit, one `erfc` and one `exp` for probit). The separate
    /// functions below return exactly these values, so the engine's one-call path and a
    /// caller's separate calls agree to the bit.
    ///
    /// Each link computes the smaller of `F` and `1 − F` directly and the larger as one minus
    /// it (which is exact to an ulp because the larger is at least ½), except logit, where
    /// both are one division from the same `e^−|z|`.
    #[inline]
    pub fn evaluate(self, z: f64) -> LinkValues {
        match self {
            Link::Logit => {
                // e = e^−|z| never overflows; the density e/(1 + e)² is symmetric.
                let e = (-z.abs()).exp();
                let smaller = e / (1.0 + e);
                let larger = 1.0 / (1.0 + e);
                let density = e / ((1.0 + e) * (1.0 + e));
                let (probability, complement) = if z >= 0.0 {
                    (larger, smaller)
                } else {
                    (smaller, larger)
                };
                LinkValues {
                    probability,
                    complement,
                    density,
                }
            }
            Link::Probit => {
                // The tail beyond |z|, ½·erfc(|z|/√2), is the smaller of Φ(z) and 1 − Φ(z).
                let tail = 0.5 * libm::erfc(z.abs() * FRAC_1_SQRT_2);
                let (probability, complement) = if z >= 0.0 {
                    (1.0 - tail, tail)
                } else {
                    (tail, 1.0 - tail)
                };
                LinkValues {
                    probability,
                    complement,
                    density: FRAC_1_SQRT_2PI * (-0.5 * z * z).exp(),
                }
            }
            Link::Cloglog => {
                let ez = z.exp();
                let complement = (-ez).exp();
                // 1 − exp(−e^z) = −expm1(−e^z) is exact for small e^z, where 1 − exp would
                // cancel; once 1 − F ≤ ½ (e^z ≥ ln 2) one minus the complement is exact.
                let probability = if ez < std::f64::consts::LN_2 {
                    -(-ez).exp_m1()
                } else {
                    1.0 - complement
                };
                // f = e^z·exp(−e^z); 0 once e^z overflows (where inf·0 would be NaN).
                let density = if ez.is_infinite() {
                    0.0
                } else {
                    ez * complement
                };
                LinkValues {
                    probability,
                    complement,
                    density,
                }
            }
            Link::Cauchit => LinkValues {
                probability: cauchy_cdf(z),
                complement: cauchy_cdf(-z),
                density: 1.0 / (PI * (1.0 + z * z)),
            },
        }
    }

    /// The probability `F(z)`.
    #[inline]
    pub fn probability(self, z: f64) -> f64 {
        self.evaluate(z).probability
    }

    /// The complement `1 − F(z)`, computed directly so it keeps its precision when `F(z)` is
    /// close to 1.
    #[inline]
    pub fn complement(self, z: f64) -> f64 {
        self.evaluate(z).complement
    }

    /// The density `f(z) = F′(z)`.
    #[inline]
    pub fn density(self, z: f64) -> f64 {
        self.evaluate(z).density
    }

    /// The derivative of the density, `f′(z)`.
    #[inline]
    pub fn density_derivative(self, z: f64) -> f64 {
        self.density_derivative_from(z, self.density(z))
    }

    /// `f′(z)` given `f(z)` (from [`Link::evaluate`]), without evaluating the density again.
    #[inline]
    pub fn density_derivative_from(self, z: f64, density: f64) -> f64 {
        match self {
            // 1 − 2F = −tanh(z/2): no cancellation near z = 0, where F(−z) − F(z) would lose
            // every digit of a tiny slope, and exact in both tails.
            Link::Logit => -density * (0.5 * z).tanh(),
            Link::Probit => -z * density,
            // f·(1 − e^z), with 1 − e^z = −expm1(z) keeping its digits near z = 0; 0 where the
            // density has underflowed (and e^z may be infinite).
            Link::Cloglog => {
                if density == 0.0 {
                    0.0
                } else {
                    -density * z.exp_m1()
                }
            }
            Link::Cauchit => {
                let s = 1.0 + z * z;
                -2.0 * z / (PI * s * s)
            }
        }
    }

    /// The log-likelihood contribution `log F(z)` (for `y = 1`), accurate in the lower tail.
    #[inline]
    pub fn log_probability(self, z: f64) -> f64 {
        match self {
            // log F = −log(1 + e^−z), written to avoid overflow on either side.
            Link::Logit => -softplus(-z),
            _ => self.probability(z).ln(),
        }
    }

    /// The log-likelihood contribution `log(1 − F(z))` (for `y = 0`).
    #[inline]
    pub fn log_complement(self, z: f64) -> f64 {
        match self {
            Link::Logit => -softplus(z),
            Link::Cloglog => -z.exp(),
            _ => self.complement(z).ln(),
        }
    }
}

impl fmt::Display for Link {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

/// A link name that is not one of logit, probit, cloglog, cauchit.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("unknown link '{0}': expected one of logit, probit, cloglog, cauchit")]
pub struct UnknownLink(pub String);

impl FromStr for Link {
    type Err = UnknownLink;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        ALL_LINKS
            .iter()
            .copied()
            .find(|l| l.name() == s)
            .ok_or_else(|| UnknownLink(s.to_string()))
    }
}

/// `log(1 + e^x)` without overflow.
#[inline]
fn softplus(x: f64) -> f64 {
    if x > 0.0 {
        x + (-x).exp().ln_1p()
    } else {
        x.exp().ln_1p()
    }
}

/// The standard normal distribution function through `erfc`, which keeps its relative precision
/// in the lower tail (where `1 − Φ(−z)` would lose every digit):
///
/// ```text
/// Φ(z) = ½ · erfc(−z/√2)
/// ```
///
/// `erfc` is the FreeBSD/musl algorithm (the `libm` crate), accurate to about an ulp over the
/// whole line. (statrs' `erfc` was off by up to 1e-10 relative for arguments above ½, that is
/// for z below −0.7; see the regression test in `tests/link_reference.rs`.) What remains is the
/// rounding of z/√2, which costs about z²·ε relative: 1.4e-13 at |z| = 35.
#[inline]
pub fn normal_cdf(z: f64) -> f64 {
    0.5 * libm::erfc(-z * FRAC_1_SQRT_2)
}

/// The standard normal quantile `Φ⁻¹(p)` for `0 < p < 1` (−∞ at 0, +∞ at 1, NaN outside).
///
/// The upper half is taken from the lower one, `Φ⁻¹(p) = −Φ⁻¹(1 − p)` (1 − p is exact for
/// p ≥ ½), so the refinement always works where Φ has relative precision. A starting value
/// from statrs' `erfc_inv` is refined by two Halley steps on the accurate Φ above:
///
/// ```text
/// r = (Φ(x) − p) / φ(x)        x ← x − r / (1 + x·r/2)
/// ```
///
/// which converges cubically, so the result is good to a few ulps down to p = 1e-300.
pub fn normal_quantile(p: f64) -> f64 {
    if !(p > 0.0 && p < 1.0) {
        return if p == 0.0 {
            f64::NEG_INFINITY
        } else if p == 1.0 {
            f64::INFINITY
        } else {
            f64::NAN
        };
    }
    if p > 0.5 {
        return -lower_normal_quantile(1.0 - p);
    }
    lower_normal_quantile(p)
}

/// `Φ⁻¹(p)` for `0 < p ≤ ½`.
fn lower_normal_quantile(p: f64) -> f64 {
    let mut x = statrs::function::erf::erfc_inv(2.0 * p) * -std::f64::consts::SQRT_2;
    for _ in 0..2 {
        let density = FRAC_1_SQRT_2PI * (-0.5 * x * x).exp();
        if density <= 0.0 || !x.is_finite() {
            break;
        }
        let r = (normal_cdf(x) - p) / density;
        x -= r / (1.0 + 0.5 * x * r);
    }
    x
}

/// The standard Cauchy distribution function. For `z < 0` the textbook `½ + atan(z)/π` cancels
/// badly, so it uses the identity `½ + atan(z)/π = atan(1/|z|)/π`.
#[inline]
fn cauchy_cdf(z: f64) -> f64 {
    if z < -1.0 {
        (-1.0 / z).atan() / PI
    } else {
        0.5 + z.atan() / PI
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_round_trip() {
        for link in ALL_LINKS {
            assert_eq!(link.name().parse::<Link>(), Ok(link));
        }
        assert!("logistic".parse::<Link>().is_err());
    }
}
