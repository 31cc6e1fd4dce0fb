//! The link functions against outside references:
//!
//! * scipy (`special.expit`, `stats.norm.cdf/sf/pdf`, `stats.cauchy.cdf/sf/pdf`) and mpmath at
//!   60 digits (cloglog, and every density derivative) on a grid of z reaching |z| = 35,
//!   committed by `tests/reference/make_engine_fixtures.py` as `links/links.json`;
//! * `scipy.stats.norm.ppf` for the normal quantile (`links/normal_quantile.json`);
//! * Abramowitz & Stegun (1964), Table 26.1, for a handful of values of Φ and φ;
//! * facts of the trade, marked "common practice".

mod support;

use ogive::link::{normal_cdf, normal_quantile, Link, ALL_LINKS};
use support::close::assert_close;
use support::reference::fixture;
use support::tolerances::{
    ABRAMOWITZ_STEGUN_TEN_DECIMALS, CLOSED_FORM, COMMON_PRACTICE_FOUR_DECIMALS,
    LINK_FINITE_DIFFERENCE, LINK_VS_SCIPY, QUANTILE_VS_SCIPY, ROUNDING,
};

/// Which function of a link a fixture column holds.
const COLUMNS: [&str; 4] = ["probability", "complement", "density", "density_derivative"];

fn evaluate(link: Link, column: &str, z: f64) -> f64 {
    match column {
        "probability" => link.probability(z),
        "complement" => link.complement(z),
        "density" => link.density(z),
        "density_derivative" => link.density_derivative(z),
        other => panic!("unknown column {other}"),
    }
}

#[test]
fn every_link_matches_scipy_and_mpmath_deep_into_both_tails() {
    let f = fixture("links/links.json");
    let mut compared = 0;
    for link in ALL_LINKS {
        let table = &f["links"][link.name()];
        let points = table["points"].as_array().expect("points");
        assert!(points.len() > 100, "{link}: grid too small");
        for column in COLUMNS {
            let source = table["sources"][column].as_str().expect("source");
            for point in points {
                let z = point["z"].as_f64().expect("z");
                let expected = point[column].as_f64().expect("value");
                let actual = evaluate(link, column, z);
                let what = format!("{link} {column} at z = {z} [{source}; rel {LINK_VS_SCIPY:e}]");
                if expected.abs() >= f64::MIN_POSITIVE {
                    assert_close(actual, expected, LINK_VS_SCIPY, 0.0, what);
                    compared += 1;
                } else {
                    // Not representable as a normal double: the reference is 0 or subnormal,
                    // and so must ours be, with the right sign.
                    assert!(
                        actual.abs() < f64::MIN_POSITIVE && actual * expected >= 0.0,
                        "{what}: expected a value below the normal range, got {actual:e}"
                    );
                }
            }
        }
    }
    assert!(
        compared > 1500,
        "only {compared} representable values compared"
    );
}

#[test]
fn the_grid_reaches_35_in_both_tails() {
    let f = fixture("links/links.json");
    let zs: Vec<f64> = f["links"]["logit"]["points"]
        .as_array()
        .expect("points")
        .iter()
        .map(|p| p["z"].as_f64().expect("z"))
        .collect();
    assert!(zs.contains(&-35.0) && zs.contains(&35.0));
    assert!(
        zs.iter().any(|z| z.abs() < 1e-10 && *z != 0.0),
        "tiny |z| too"
    );
}

#[test]
fn normal_quantile_matches_scipy_norm_ppf() {
    let f = fixture("links/normal_quantile.json");
    let source = f["source"].as_str().expect("source");
    for point in f["points"].as_array().expect("points") {
        let p = point["p"].as_f64().expect("p");
        let expected = point["quantile"].as_f64().expect("quantile");
        assert_close(
            normal_quantile(p),
            expected,
            QUANTILE_VS_SCIPY,
            1e-300,
            format!("normal_quantile({p}) [{source}; rel {QUANTILE_VS_SCIPY:e}]"),
        );
    }
}

/// Abramowitz & Stegun (1964), Table 26.1 (normal probability function P(x) and density Z(x)).
/// Values written from memory of the table, kept to ten decimals.
const ABRAMOWITZ_STEGUN: [(f64, f64, f64); 6] = [
    // (x, P(x) = Φ(x), Z(x) = φ(x))
    (0.0, 0.5000000000, 0.3989422804),
    (1.0, 0.8413447461, 0.2419707245),
    (1.5, 0.9331927987, 0.1295175957),
    (2.0, 0.9772498681, 0.0539909665),
    (2.5, 0.9937903347, 0.0175283005),
    (3.0, 0.9986501020, 0.0044318484),
];

#[test]
fn normal_distribution_matches_abramowitz_and_stegun_table_26_1() {
    for (x, p, z) in ABRAMOWITZ_STEGUN {
        let tolerance = ABRAMOWITZ_STEGUN_TEN_DECIMALS;
        let what =
            |f: &str| format!("{f}({x}) [A&S 1964 Table 26.1, from memory; abs {tolerance:e}]");
        assert_close(Link::Probit.probability(x), p, tolerance, 1.0, what("Φ"));
        assert_close(normal_cdf(x), p, tolerance, 1.0, what("normal_cdf"));
        assert_close(
            Link::Probit.complement(-x),
            p,
            tolerance,
            1.0,
            what("1 − Φ(−x)"),
        );
        assert_close(Link::Probit.density(x), z, tolerance, 1.0, what("φ"));
        assert_close(Link::Probit.density(-x), z, tolerance, 1.0, what("φ(−x)"));
    }
}

#[test]
fn normal_density_peaks_at_one_over_root_two_pi() {
    // Common practice: the standard normal density peaks at 1/√(2π) ≈ 0.3989 at z = 0.
    let peak = 1.0 / (2.0 * std::f64::consts::PI).sqrt();
    assert_close(
        Link::Probit.density(0.0),
        peak,
        CLOSED_FORM,
        0.0,
        "φ(0) [common practice]",
    );
    let four_decimals = COMMON_PRACTICE_FOUR_DECIMALS;
    assert_close(
        Link::Probit.density(0.0),
        0.3989,
        four_decimals,
        1.0,
        "φ(0) ≈ 0.3989",
    );
    for z in [-1e-3, 1e-3, 0.5, -0.5, 2.0] {
        assert!(Link::Probit.density(z) < Link::Probit.density(0.0));
    }
}

#[test]
fn logistic_density_peaks_at_one_quarter() {
    // Common practice: the logistic density F(1 − F) peaks at 1/4 at z = 0.
    assert_close(
        Link::Logit.density(0.0),
        0.25,
        CLOSED_FORM,
        0.0,
        "logit f(0) [common practice]",
    );
    assert_eq!(Link::Logit.probability(0.0), 0.5);
}

#[test]
fn probability_and_complement_sum_to_one_and_the_derivatives_are_consistent() {
    // Identities, not references: F + (1 − F) = 1, f is the slope of F and f′ the slope of f
    // (central differences; for z > 0 the slope of F is taken as minus the slope of 1 − F,
    // which keeps its digits where F is close to 1).
    let h = 1e-5;
    for link in ALL_LINKS {
        for i in -60..=60 {
            let z = f64::from(i) / 8.0;
            let sum = link.probability(z) + link.complement(z);
            assert_close(
                sum,
                1.0,
                ROUNDING,
                0.0,
                format!("{link}: F + (1 − F) at {z}"),
            );
            let slope = if z > 0.0 {
                (link.complement(z - h) - link.complement(z + h)) / (2.0 * h)
            } else {
                (link.probability(z + h) - link.probability(z - h)) / (2.0 * h)
            };
            let what = format!("{link}: F′ = f at {z}");
            assert_close(slope, link.density(z), LINK_FINITE_DIFFERENCE, 1e-3, what);
            let slope = (link.density(z + h) - link.density(z - h)) / (2.0 * h);
            let what = format!("{link}: f′ at {z}");
            assert_close(
                slope,
                link.density_derivative(z),
                LINK_FINITE_DIFFERENCE,
                1e-3,
                what,
            );
        }
    }
}

// Regression tests, one per defect found by the reference checks above.

/// statrs' `erfc` (used by `normal_cdf` until this test was written) was off by up to 1e-10
/// relative for arguments above ½, that is Φ(z) for z below −0.7 and 1 − Φ(z) above 0.7.
#[test]
fn regression_normal_cdf_lost_digits_beyond_0_7() {
    let f = fixture("links/links.json");
    let points = f["links"]["probit"]["points"].as_array().expect("points");
    let mut checked = 0;
    for point in points {
        let z = point["z"].as_f64().expect("z");
        if (0.7..8.0).contains(&z.abs()) {
            let what =
                |c: &str| format!("probit {c} at {z} [scipy.stats.norm; rel {LINK_VS_SCIPY:e}]");
            let p = point["probability"].as_f64().expect("p");
            let q = point["complement"].as_f64().expect("1 − p");
            assert_close(normal_cdf(z), p, LINK_VS_SCIPY, 0.0, what("cdf"));
            assert_close(
                Link::Probit.complement(z),
                q,
                LINK_VS_SCIPY,
                0.0,
                what("sf"),
            );
            checked += 1;
        }
    }
    assert!(checked > 150, "only {checked} points in the region");
}

/// The logit density slope was computed as f·(F(−z) − F(z)), which cancels near z = 0 (at
/// z = 1e-8 it kept only eight digits); now −f·tanh(z/2).
#[test]
fn regression_logit_density_slope_near_zero() {
    for z in [1e-12, -1e-8, 1e-4, -0.01] {
        let got = Link::Logit.density_derivative(z);
        assert_close(
            got,
            reference_point("logit", z),
            LINK_VS_SCIPY,
            0.0,
            format!("z = {z}"),
        );
    }
}

/// The cloglog density slope used f·(1 − e^z), which cancels near z = 0; now −f·expm1(z).
#[test]
fn regression_cloglog_density_slope_near_zero() {
    for z in [1e-12, -1e-8, 1e-4, -0.01] {
        let got = Link::Cloglog.density_derivative(z);
        assert_close(
            got,
            reference_point("cloglog", z),
            LINK_VS_SCIPY,
            0.0,
            format!("z = {z}"),
        );
    }
}

/// One Newton step from statrs' `erfc_inv` left the quantile 4e-14 off at p = 1e-300, and a
/// Newton step on Φ near 1 loses digits for p close to 1; now two Halley steps on the lower
/// half, with Φ⁻¹(p) = −Φ⁻¹(1 − p) above ½.
#[test]
fn regression_normal_quantile_in_the_far_tails() {
    let f = fixture("links/normal_quantile.json");
    for point in f["points"].as_array().expect("points") {
        let p = point["p"].as_f64().expect("p");
        if !(1e-100..=1.0 - 1e-6).contains(&p) {
            let expected = point["quantile"].as_f64().expect("quantile");
            let what = format!("Φ⁻¹({p:e}) [scipy.stats.norm.ppf; rel {QUANTILE_VS_SCIPY:e}]");
            assert_close(normal_quantile(p), expected, QUANTILE_VS_SCIPY, 0.0, what);
        }
    }
    assert_eq!(normal_quantile(0.0), f64::NEG_INFINITY);
    assert_eq!(normal_quantile(1.0), f64::INFINITY);
    assert!(normal_quantile(1.5).is_nan() && normal_quantile(f64::NAN).is_nan());
}

/// The fixture's f′ for `link` at exactly `z` (which must be a grid point).
fn reference_point(link: &str, z: f64) -> f64 {
    let f = fixture("links/links.json");
    f["links"][link]["points"]
        .as_array()
        .expect("points")
        .iter()
        .find(|p| p["z"].as_f64() == Some(z))
        .and_then(|p| p["density_derivative"].as_f64())
        .unwrap_or_else(|| panic!("{z} is not a grid point of {link}"))
}
