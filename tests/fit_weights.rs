//! Weighted fits and outcome-stratified samples.
//!
//! - statsmodels 0.15 fixtures written by `tests/reference/weights/make_weight_fixtures.py`:
//!   GLM(freq_weights=...) against `--weights`, GLM(var_weights=..., cov_type='HC0') against
//!   `--sampling-weights`, logit and probit (coefficients, every covariance entry, weighted
//!   log-likelihoods); tolerances from `support::fit`.
//! - Identity: whole frequency weights give the fit of the file with each row repeated.
//! - Simulation with known truth (common practice): an outcome-stratified sample of a simulated
//!   population, fitted with `--population-rate`, recovers the population intercept within the
//!   project's 4 standard errors; the corrected intercept is the uncorrected one minus
//!   ln[((1 − τ)/τ)·(ȳ/(1 − ȳ))] (King and Zeng 2001, closed form).
//! - The information criteria with frequency weights take n = Σw (statsmodels `aic`, `bic`,
//!   `wnobs`), a row of weight 0 counts for nothing (statsmodels, the same fixture: the fit
//!   with a `some_zero` column), and under sampling weights no AIC or BIC is given.
//! - Rank, separation and collinearity checks judge the rows that count: a row of weight 0
//!   neither rescues a degenerate design nor spoils a good one.
//! - Bad weights are refused naming the row and the column.

mod support;

use std::fmt::Write;

use ogive::engine::Options;
use ogive::fit::{
    Counting, CovarianceType, Fitted, PopulationMethod, PopulationRate, WeightColumn, WeightKind,
};
use ogive::link::Link;
use ogive::model::file::WeightingMethod;
use ogive::model::Model;
use rand::{Rng, SeedableRng};
use serde_json::Value as Json;
use support::fit::*;

fn weights_fixture() -> Json {
    let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/reference/weights/weighted.json");
    serde_json::from_str(&std::fs::read_to_string(path).expect("fixture")).expect("JSON")
}

fn weights_data() -> std::path::PathBuf {
    std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/reference/weights/weighted.csv")
}

fn weighted_fit(link: Link, column: &str, kind: WeightKind) -> Fitted {
    let mut r = request(&weights_data(), "y", "x, z");
    r.link = link;
    r.weights = Some(WeightColumn {
        column: column.into(),
        kind,
    });
    fit_request(&r).unwrap_or_else(|e| panic!("{link} weighted fit failed: {e}"))
}

fn covariance(fitted: &Fitted) -> Vec<Vec<f64>> {
    fitted.file.covariance.clone().expect("covariance")
}

/// Every covariance entry, relative to the scale √(VᵢᵢVⱼⱼ) so that a near-zero covariance is
/// not held to a relative tolerance of its own.
fn assert_covariance(ours: &[Vec<f64>], reference: &Json, tolerance: f64, what: &str) {
    let reference: Vec<Vec<f64>> = reference
        .as_array()
        .expect("matrix")
        .iter()
        .map(numbers)
        .collect();
    assert_eq!(ours.len(), reference.len(), "{what}: size");
    for i in 0..ours.len() {
        for j in 0..ours.len() {
            let scale = (reference[i][i] * reference[j][j]).sqrt();
            let d = (ours[i][j] - reference[i][j]).abs() / scale;
            assert!(
                d <= tolerance,
                "{what}: covariance[{i}][{j}] ogive {:.15e} vs statsmodels {:.15e} ({d:.2e} of the scale)",
                ours[i][j],
                reference[i][j]
            );
        }
    }
}

fn compare(fitted: &Fitted, reference: &Json, terms: &[String], what: &str) {
    for (term, &b) in terms.iter().zip(&numbers(&reference["coefficients"])) {
        assert_relative(
            coefficient(fitted, term),
            b,
            COEFFICIENT_VS_STATSMODELS,
            format!("{what}: coefficient of {term}"),
        );
    }
    // A standard error's relative tolerance, doubled for a variance.
    assert_covariance(
        &covariance(fitted),
        &reference["covariance"],
        2.0 * STD_ERROR_VS_STATSMODELS,
        what,
    );
    assert_relative(
        fitted.report.log_likelihood,
        reference["log_likelihood"].as_f64().expect("llf"),
        LOG_LIKELIHOOD_VS_STATSMODELS,
        format!("{what}: weighted log-likelihood"),
    );
    assert_relative(
        fitted.report.null_log_likelihood,
        reference["null_log_likelihood"].as_f64().expect("llnull"),
        LOG_LIKELIHOOD_VS_STATSMODELS,
        format!("{what}: weighted null log-likelihood"),
    );
}

/// statsmodels GLM(freq_weights=copies), classical covariance (inverse observed information);
/// and GLM(freq_weights=some_zero), where every fifth row has weight 0 and counts for nothing,
/// in the estimate, the covariance, the likelihoods and the information criteria.
#[test]
fn frequency_weights_match_statsmodels_freq_weights() {
    let fixture = weights_fixture();
    let terms = strings(&fixture["terms"]);
    for link in [Link::Logit, Link::Probit] {
        let fitted = weighted_fit(link, "some_zero", WeightKind::Frequency);
        let reference = &fixture[link.name()]["some_zero"];
        let what = format!("{link}, weights with zeros vs statsmodels");
        compare(&fitted, reference, &terms, &what);
        assert_criteria(&fitted, reference, &what);
        let fitted = weighted_fit(link, "copies", WeightKind::Frequency);
        let what = format!("{link}, frequency weights vs statsmodels");
        compare(&fitted, &fixture[link.name()]["frequency"], &terms, &what);
        let w = fitted.file.provenance.weighting.as_ref().expect("recorded");
        assert_eq!(w.method, WeightingMethod::Frequency);
        assert_eq!(w.column.as_deref(), Some("copies"));
        assert_eq!(fitted.file.covariance_type.as_deref(), Some("classical"));
    }
}

/// statsmodels GLM(var_weights=inverse_p, cov_type='HC0'): the sandwich with weighted scores.
#[test]
fn sampling_weights_match_statsmodels_var_weights_hc0() {
    let fixture = weights_fixture();
    let terms = strings(&fixture["terms"]);
    for link in [Link::Logit, Link::Probit] {
        let fitted = weighted_fit(link, "inverse_p", WeightKind::Sampling);
        let what = format!("{link}, sampling weights vs statsmodels HC0");
        compare(&fitted, &fixture[link.name()]["sampling"], &terms, &what);
        assert_eq!(fitted.file.covariance_type.as_deref(), Some("robust"));
    }
    // For logit, statsmodels' own cov_params() (the fixture script checks it equals the
    // assembled sandwich).
    let fitted = weighted_fit(Link::Logit, "inverse_p", WeightKind::Sampling);
    assert_covariance(
        &covariance(&fitted),
        &fixture["logit"]["sampling"]["statsmodels_hc0_cov_params"],
        2.0 * STD_ERROR_VS_STATSMODELS,
        "logit, sampling weights vs statsmodels cov_params(HC0)",
    );
}

/// Identity: whole frequency weights fit exactly as the file with each row written that many
/// times, for the classical and the robust covariance.
#[test]
fn whole_frequency_weights_equal_repeated_rows() {
    let text = std::fs::read_to_string(weights_data()).expect("data");
    let mut lines = text.lines();
    let header = lines.next().expect("header");
    let copies_at = header
        .split(',')
        .position(|c| c == "copies")
        .expect("copies");
    let mut repeated = format!("{header}\n");
    for line in lines {
        let copies: usize = line.split(',').nth(copies_at).unwrap().parse().unwrap();
        for _ in 0..copies {
            writeln!(repeated, "{line}").unwrap();
        }
    }
    let repeated = temp_csv(&repeated);
    for covariance_type in [CovarianceType::Classical, CovarianceType::Robust] {
        for link in [Link::Logit, Link::Probit] {
            let mut r = request(&weights_data(), "y", "x, z");
            r.link = link;
            r.covariance = covariance_type;
            r.weights = Some(WeightColumn {
                column: "copies".into(),
                kind: WeightKind::Frequency,
            });
            let weighted = fit_request(&r).expect("weighted");
            let mut r = request(&repeated.path, "y", "x, z");
            r.link = link;
            r.covariance = covariance_type;
            let plain = fit_request(&r).expect("repeated");
            let what = format!("{link} {covariance_type:?}: weights vs repeated rows");
            for (a, b) in weighted.file.terms.iter().zip(&plain.file.terms) {
                assert_relative(a.coefficient, b.coefficient, REPEATED_ROWS, &what);
            }
            for (ra, rb) in covariance(&weighted).iter().zip(&covariance(&plain)) {
                for (a, b) in ra.iter().zip(rb) {
                    assert_relative(*a, *b, REPEATED_ROWS, &what);
                }
            }
            assert_relative(
                weighted.report.log_likelihood,
                plain.report.log_likelihood,
                REPEATED_ROWS,
                &what,
            );
            assert_relative(
                weighted.report.null_log_likelihood,
                plain.report.null_log_likelihood,
                REPEATED_ROWS,
                &what,
            );
        }
    }
}

/// True coefficients of the simulated population: a rare outcome (about 6%).
const POPULATION_TRUTH: [f64; 3] = [-3.2, 0.9, -0.6];

/// A simulated population (fixed seed) and an outcome-stratified sample of it: every one and
/// three zeros per one. Returns the sample as CSV and the population's share of ones.
fn stratified_sample(link: Link) -> (String, f64) {
    let mut rng = rand::rngs::StdRng::seed_from_u64(77);
    let truth = match link {
        Link::Probit => [-1.6, 0.45, -0.3],
        _ => POPULATION_TRUTH,
    };
    let mut ones = Vec::new();
    let mut zeros = Vec::new();
    for _ in 0..300_000 {
        let x: f64 = rng.gen_range(-2.0..2.0);
        let z: f64 = rng.gen_range(-1.0..1.0);
        let p = link.probability(truth[0] + truth[1] * x + truth[2] * z);
        let row = format!("{x},{z}");
        if rng.gen::<f64>() < p {
            ones.push(row);
        } else {
            zeros.push(row);
        }
    }
    let rate = ones.len() as f64 / (ones.len() + zeros.len()) as f64;
    let mut text = String::from("y,x,z\n");
    for row in &ones {
        writeln!(text, "1,{row}").unwrap();
    }
    // Zeros are in random order, so the first 3 × ones are a simple random sample of them.
    for row in zeros.iter().take(3 * ones.len()) {
        writeln!(text, "0,{row}").unwrap();
    }
    (text, rate)
}

fn within_standard_errors(fitted: &Fitted, truth: &[f64; 3], what: &str) {
    let v = covariance(fitted);
    for (j, (term, want)) in ["intercept", "x", "z"].iter().zip(truth).enumerate() {
        let b = coefficient(fitted, term);
        let se = v[j][j].sqrt();
        assert!(
            (b - want).abs() <= SIMULATION_STANDARD_ERRORS * se,
            "{what}: {term} = {b} is more than {SIMULATION_STANDARD_ERRORS} standard errors ({se}) from the truth {want}"
        );
    }
}

#[test]
fn the_intercept_correction_recovers_the_population_intercept() {
    let (text, rate) = stratified_sample(Link::Logit);
    let csv = temp_csv(&text);
    let plain = fit_request(&request(&csv.path, "y", "x, z")).expect("plain fit");
    let mut r = request(&csv.path, "y", "x, z");
    r.population = Some(PopulationRate { rate, method: None });
    let corrected = fit_request(&r).expect("corrected fit");

    // The closed form on the uncorrected fit (sample rate 1/4 by construction).
    let sample_rate = 0.25;
    let shift = ((1.0 - rate) / rate * (sample_rate / (1.0 - sample_rate))).ln();
    assert_relative(
        coefficient(&corrected, "intercept"),
        coefficient(&plain, "intercept") - shift,
        CLOSED_FORM_SHIFT,
        "corrected intercept vs the closed form",
    );
    for term in ["x", "z"] {
        assert_eq!(
            coefficient(&corrected, term),
            coefficient(&plain, term),
            "{term}"
        );
    }
    assert_eq!(
        covariance(&corrected),
        covariance(&plain),
        "the covariance is unchanged"
    );
    let w = corrected
        .file
        .provenance
        .weighting
        .as_ref()
        .expect("recorded");
    assert_eq!(w.method, WeightingMethod::PopulationIntercept);
    assert_eq!(w.population_rate, Some(rate));
    // The uncorrected intercept is far from the population's; the corrected one is not.
    assert!((coefficient(&plain, "intercept") - POPULATION_TRUTH[0]).abs() > 1.0);
    within_standard_errors(&corrected, &POPULATION_TRUTH, "logit, intercept correction");

    // The file written says so, and `describe` shows it.
    let model = Model::from_file(corrected.file.clone()).expect("valid model");
    let report = ogive::report::build(&model, &Options::new(0.95).unwrap(), None);
    let text = ogive::report::render_text(&report);
    assert!(
        text.contains("weighting") && text.contains("prior correction"),
        "{text}"
    );
    assert!(ogive::report::render_json(&report).contains("population_intercept"));
}

#[test]
fn population_weights_recover_the_population_model_for_any_link() {
    for (link, truth) in [
        (Link::Logit, POPULATION_TRUTH),
        (Link::Probit, [-1.6, 0.45, -0.3]),
    ] {
        let (text, rate) = stratified_sample(link);
        let csv = temp_csv(&text);
        let mut r = request(&csv.path, "y", "x, z");
        r.link = link;
        r.population = Some(PopulationRate {
            rate,
            method: Some(PopulationMethod::Weights),
        });
        let fitted = fit_request(&r).expect("weighted fit");
        let w = fitted.file.provenance.weighting.as_ref().expect("recorded");
        assert_eq!(w.method, WeightingMethod::PopulationWeights);
        assert_eq!(fitted.file.covariance_type.as_deref(), Some("robust"));
        within_standard_errors(&fitted, &truth, &format!("{link}, population weights"));
    }
}

fn refusal(text: &str, weights: Option<(&str, WeightKind)>, population: Option<f64>) -> String {
    let csv = temp_csv(text);
    let mut r = request(&csv.path, "y", "x");
    r.weights = weights.map(|(column, kind)| WeightColumn {
        column: column.into(),
        kind,
    });
    r.population = population.map(|rate| PopulationRate { rate, method: None });
    match fit_request(&r) {
        Ok(_) => panic!("accepted {text:?}"),
        Err(e) => e.to_string(),
    }
}

#[test]
fn bad_weights_are_refused_naming_the_row_and_the_column() {
    let good = "y,x,w\n0,1.5,1\n1,2.5,2\n0,0.5,1\n1,3.0,1\n";
    let cases = [
        (
            "y,x,w\n0,1.5,1\n1,2.5,-2\n",
            "row 2, column 'w': the weight \"-2\" is negative",
        ),
        (
            "y,x,w\n0,1.5,inf\n",
            "row 1, column 'w': the weight \"inf\" is not finite",
        ),
        (
            "y,x,w\n0,1.5,1\n1,1,NaN\n",
            "row 2, column 'w': missing value",
        ),
        (
            "y,x,w\n0,1.5,1\n1,1,heavy\n",
            "row 2, column 'w': the weight \"heavy\" is not a number",
        ),
        (
            "y,x,w\n0,1.5,0\n1,2.5,0\n0,1,0\n1,3,0\n",
            "every weight in column 'w' is zero (4 rows)",
        ),
    ];
    for kind in [WeightKind::Frequency, WeightKind::Sampling] {
        for (text, message) in cases {
            let e = refusal(text, Some(("w", kind)), None);
            assert!(e.contains(message), "{message:?} not in {e:?}");
        }
        let e = refusal(good, Some(("weight", kind)), None);
        assert!(e.contains("column 'weight' is not in the data"), "{e}");
        let e = refusal(good, Some(("x", kind)), None);
        assert!(
            e.contains("'x' cannot also be the outcome or a covariate"),
            "{e}"
        );
    }
    for rate in [0.0, 1.0, -0.1, f64::NAN] {
        let e = refusal(good, None, Some(rate));
        assert!(e.contains("--population-rate"), "{e}");
    }
    let e = refusal(good, Some(("w", WeightKind::Frequency)), Some(0.1));
    assert!(e.contains("cannot be combined"), "{e}");
}

/// AIC and BIC against statsmodels' `aic` and `bic` (its `bic_llf`).
fn assert_criteria(fitted: &Fitted, reference: &Json, what: &str) {
    let report = &fitted.report;
    for (ours, key) in [(report.aic(), "aic"), (report.bic(), "bic")] {
        assert_relative(
            ours.expect("a frequency-weighted fit has information criteria"),
            reference[key].as_f64().expect(key),
            LOG_LIKELIHOOD_VS_STATSMODELS,
            format!("{what}: {key}"),
        );
    }
}

/// statsmodels GLM(freq_weights=copies): `aic`, `bic` (from ln Σw) and `wnobs`.
#[test]
fn frequency_weights_count_the_weight_sum_in_aic_and_bic() {
    let fixture = weights_fixture();
    for link in [Link::Logit, Link::Probit] {
        let fitted = weighted_fit(link, "copies", WeightKind::Frequency);
        let reference = &fixture[link.name()]["frequency"];
        let what = format!("{link}, frequency weights vs statsmodels");
        let report = &fitted.report;
        assert_eq!(
            report.observations,
            reference["nobs"].as_u64().expect("nobs"),
            "{what}: rows"
        );
        assert_eq!(
            report.counting,
            Counting::Frequency {
                observations: reference["weighted_nobs"].as_f64().expect("wnobs")
            },
            "{what}: observations"
        );
        assert_criteria(&fitted, reference, &what);
        let printed = report.to_string();
        assert!(
            printed.contains("1500 rows standing for 3755 observations (frequency weights)"),
            "{printed}"
        );
        let notes = fitted.file.provenance.notes.as_deref().unwrap_or_default();
        assert!(notes.contains("AIC") && notes.contains("BIC"), "{notes}");
    }
}

/// Under sampling weights the weighted log-likelihood is a pseudo-likelihood: it is shown
/// under that name and no AIC or BIC is given, in the summary or the model file's notes.
#[test]
fn sampling_weights_give_no_information_criteria() {
    let fitted = weighted_fit(Link::Logit, "inverse_p", WeightKind::Sampling);
    let report = &fitted.report;
    assert_eq!(report.counting, Counting::Sampling);
    assert_eq!((report.aic(), report.bic()), (None, None));
    let printed = report.to_string();
    assert!(printed.contains("pseudo-log-likelihood"), "{printed}");
    assert!(!printed.contains("\nAIC"), "{printed}");
    let notes = fitted.file.provenance.notes.as_deref().unwrap_or_default();
    assert!(
        !notes.contains(", AIC ") && notes.contains("no AIC or BIC"),
        "{notes}"
    );
}

/// A fit of `text` with frequency weights from column `w`.
fn fit_weighted_text(text: &str, terms: &str) -> Result<Fitted, String> {
    let csv = temp_csv(text);
    let mut r = request(&csv.path, "y", terms);
    r.weights = Some(WeightColumn {
        column: "w".into(),
        kind: WeightKind::Frequency,
    });
    fit_request(&r).map_err(|e| e.to_string())
}

fn weighted_refusal(text: &str, terms: &str) -> String {
    match fit_weighted_text(text, terms) {
        Ok(_) => panic!("accepted {text:?}"),
        Err(e) => e,
    }
}

/// The rows of positive weight have b = 2·a exactly; the one row breaking that has weight 0.
#[test]
fn a_zero_weight_row_does_not_rescue_a_rank_deficient_design() {
    let mut text = String::from("y,a,b,w\n");
    for (i, a) in [0.3, 1.1, 2.0, 2.7, 3.4, 4.2, 5.0, 5.9].iter().enumerate() {
        writeln!(text, "{},{a},{},1", i % 2, 2.0 * a).unwrap();
    }
    text.push_str("1,1.0,7.5,0\n");
    let e = weighted_refusal(&text, "a, b");
    assert!(
        e.contains("term 'b' is a linear combination of earlier terms: b = 2·a"),
        "{e}"
    );
}

/// Outcome 1 exactly where a > 2 among the rows that count; the row that would break the
/// separation has weight 0. Given weight 1 instead, the same data fit.
#[test]
fn a_zero_weight_row_does_not_hide_a_separation() {
    let mut rows = String::new();
    for a in [0.2, 0.5, 0.9, 1.4, 1.8, 2.3, 2.6, 3.1, 3.3, 3.9] {
        writeln!(rows, "{},{a}", u8::from(a > 2.0)).unwrap();
    }
    let with = |weight: u8| {
        let mut text = String::from("y,a,w\n");
        for line in rows.lines() {
            writeln!(text, "{line},1").unwrap();
        }
        writeln!(text, "0,3.5,{weight}").unwrap();
        writeln!(text, "1,0.7,{weight}").unwrap();
        text
    };
    let e = weighted_refusal(&with(0), "a");
    assert!(
        e.contains("complete separation: term 'a' predicts the outcome"),
        "{e}"
    );
    if let Err(e) = fit_weighted_text(&with(1), "a") {
        panic!("refused the same data with both rows counted: {e}");
    }
}

/// The outcome is constant among the rows that count: refused, though a zero-weight row has
/// the other value.
#[test]
fn a_zero_weight_row_does_not_make_the_outcome_vary() {
    let e = weighted_refusal("y,a,w\n0,1,1\n0,2,2\n0,3,1\n1,4,0\n", "a");
    assert!(e.contains("outcome 'y' is 0 in all 3 observations"), "{e}");
}
