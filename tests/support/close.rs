//! Comparing numbers: every integration test compares through these, with a tolerance from
//! [`super::tolerances`] and a name for what is compared.

use std::fmt::Display;

/// `|a − b| / max(|a|, |b|)`, 0 when both are equal (including both 0).
pub fn relative_difference(a: f64, b: f64) -> f64 {
    if a == b {
        0.0
    } else {
        (a - b).abs() / a.abs().max(b.abs())
    }
}

/// Whether `a` and `b` agree to relative `tolerance` (symmetric in the two).
pub fn within(a: f64, b: f64, tolerance: f64) -> bool {
    relative_difference(a, b) <= tolerance
}

/// Assert `actual` matches `expected` to relative `tolerance`, or absolutely to
/// `tolerance × floor` when `expected` is smaller than `floor` in magnitude.
#[track_caller]
pub fn assert_close(actual: f64, expected: f64, tolerance: f64, floor: f64, what: impl Display) {
    let scale = expected.abs().max(floor);
    let ok = (actual - expected).abs() <= tolerance * scale;
    assert!(
        ok && actual.is_finite() == expected.is_finite(),
        "{what}: got {actual:e}, expected {expected:e} (difference {:e}, tolerance {tolerance:e} \
         relative to {scale:e})",
        (actual - expected).abs()
    );
}

/// Assert a relative agreement, symmetric in the two values (no absolute floor: an expected 0
/// must be met exactly), naming the quantity.
#[track_caller]
pub fn assert_relative(ours: f64, reference: f64, tolerance: f64, what: impl Display) {
    let d = relative_difference(ours, reference);
    assert!(
        d <= tolerance,
        "{what}: ogive {ours:.15e} vs reference {reference:.15e} (relative {d:.2e} > {tolerance:e})"
    );
}
