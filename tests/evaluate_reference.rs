//! The statistics of `ogive evaluate` against libraries outside the project, on labelled rows
//! simulated by `tests/reference/evaluate/make_evaluate_fixtures.py` (the rows are input; the
//! check values come from scikit-learn 1.9, statsmodels 0.15, scipy 1.17 and the numpy
//! DeLong and Hosmer–Lemeshow written in that script from the papers). Then the identities the
//! figures must satisfy whatever the data, and the edge cases a reference cannot give.

mod support;

use ogive::evaluate::{
    compare, evaluate, EvaluateError, Favours, Forecast, ModelEvaluation, ModelRows, Names,
    PairedRows, RELIABILITY_BINS,
};
use serde_json::Value as Json;
use support::close::assert_close;
use support::tolerances::evaluate as tolerance;

fn fixture() -> Json {
    support::reference::fixture("evaluate/evaluate.json")
}

fn f(v: &Json) -> f64 {
    v.as_f64().unwrap_or_else(|| panic!("not a number: {v}"))
}

fn floats(v: &Json) -> Vec<f64> {
    v.as_array().expect("array").iter().map(f).collect()
}

struct Case {
    name: String,
    outcomes: Vec<bool>,
    first: Vec<f64>,
    second: Option<Vec<f64>>,
    json: Json,
}

fn cases() -> Vec<Case> {
    let fixture = fixture();
    assert_eq!(f(&fixture["level"]), 0.95);
    let cases: Vec<Case> = fixture["cases"]
        .as_array()
        .expect("cases")
        .iter()
        .map(|c| Case {
            name: c["name"].as_str().expect("name").to_owned(),
            outcomes: floats(&c["outcomes"]).iter().map(|&y| y == 1.0).collect(),
            first: floats(&c["first"]["probabilities"]),
            second: c.get("second").map(|s| floats(&s["probabilities"])),
            json: c.clone(),
        })
        .collect();
    // Guard against passing vacuously: the five cases, three of them paired.
    assert_eq!(cases.len(), 5);
    assert_eq!(cases.iter().filter(|c| c.second.is_some()).count(), 3);
    cases
}

fn rows_of(probabilities: &[f64], outcomes: &[bool]) -> ModelRows {
    let mut rows = ModelRows::new();
    for (&p, &y) in probabilities.iter().zip(outcomes) {
        rows.push(Forecast::from_probability(p), y);
    }
    rows
}

fn check_model(case: &str, got: &ModelEvaluation, want: &Json) {
    let what = |figure: &str| format!("{case}: {figure}");
    use tolerance::*;
    assert_close(
        got.brier,
        f(&want["brier"]),
        SKLEARN,
        0.0,
        what("Brier (sklearn brier_score_loss)"),
    );
    assert_close(
        got.log_loss,
        f(&want["log_loss"]),
        SKLEARN,
        0.0,
        what("log loss (sklearn log_loss)"),
    );
    assert_close(
        got.brier_interval.std_error,
        f(&want["brier_std_error"]),
        SUMS,
        0.0,
        what("Brier SE (numpy std(ddof=1)/√N)"),
    );
    assert_close(
        got.log_loss_interval.std_error,
        f(&want["log_loss_std_error"]),
        SUMS,
        0.0,
        what("log loss SE (numpy std(ddof=1)/√N)"),
    );
    let rate = floats(&want["event_rate_wilson"]);
    assert_close(
        got.event_rate_interval.lower,
        rate[0],
        CLOSED_FORM,
        0.0,
        what("event rate Wilson lower (statsmodels proportion_confint)"),
    );
    assert_close(
        got.event_rate_interval.upper,
        rate[1],
        CLOSED_FORM,
        0.0,
        what("event rate Wilson upper (statsmodels proportion_confint)"),
    );
    assert_close(
        got.auc.estimate,
        f(&want["auc"]),
        SKLEARN,
        0.0,
        what("AUC (sklearn roc_auc_score)"),
    );
    assert_close(
        got.auc.std_error,
        f(&want["auc_std_error"]),
        DELONG,
        0.0,
        what("AUC SE (DeLong, Sun & Xu)"),
    );
    let q = 1.959963984540054; // scipy.stats.norm.ppf(0.975)
    assert_close(
        got.auc.interval.lower,
        got.auc.estimate - q * f(&want["auc_std_error"]),
        DELONG,
        1.0,
        what("AUC lower"),
    );

    for (fit, key) in [
        (&got.calibration_intercept, "calibration_intercept"),
        (&got.calibration_slope, "calibration_slope"),
    ] {
        let reference = &want[key];
        assert_close(
            fit.estimate,
            f(&reference["estimate"]),
            STATSMODELS_GLM,
            1e-3,
            what(&format!("{key} (statsmodels GLM)")),
        );
        assert_close(
            fit.std_error,
            f(&reference["std_error"]),
            STATSMODELS_GLM,
            0.0,
            what(&format!("{key} SE (statsmodels GLM bse)")),
        );
        assert_close(
            fit.interval.upper,
            f(&reference["estimate"]) + q * f(&reference["std_error"]),
            STATSMODELS_GLM,
            1e-3,
            what(&format!("{key} upper")),
        );
    }

    let bins = want["reliability"].as_array().expect("reliability");
    assert_eq!(got.reliability.len(), RELIABILITY_BINS);
    assert_eq!(bins.len(), RELIABILITY_BINS);
    for (bin, reference) in got.reliability.iter().zip(bins) {
        let k = reference["bin"].as_u64().expect("bin");
        assert_eq!(
            bin.count,
            reference["count"].as_u64().unwrap(),
            "{case}: count of bin {k}"
        );
        assert_eq!(
            bin.events,
            reference["events"].as_u64().unwrap(),
            "{case}: events of bin {k}"
        );
        if bin.count == 0 {
            assert!(bin.observed.is_none() && bin.observed_interval.is_none());
            continue;
        }
        let label = |s: &str| what(&format!("bin {k} {s}"));
        assert_close(
            bin.observed.unwrap(),
            f(&reference["observed"]),
            CLOSED_FORM,
            0.0,
            label("observed (sklearn calibration_curve)"),
        );
        assert_close(
            bin.mean_probability.unwrap(),
            f(&reference["mean_probability"]),
            CLOSED_FORM,
            0.0,
            label("mean p (sklearn calibration_curve)"),
        );
        let wilson = floats(&reference["wilson"]);
        let interval = bin.observed_interval.unwrap();
        assert_close(
            interval.lower,
            wilson[0],
            CLOSED_FORM,
            1e-3,
            label("Wilson lower (statsmodels proportion_confint)"),
        );
        assert_close(
            interval.upper,
            wilson[1],
            CLOSED_FORM,
            1e-3,
            label("Wilson upper (statsmodels proportion_confint)"),
        );
    }

    let murphy = &want["murphy"];
    let d = &got.brier_decomposition;
    assert_close(
        d.reliability,
        f(&murphy["reliability"]),
        SUMS,
        SUM_FLOOR,
        what("REL (numpy)"),
    );
    assert_close(
        d.resolution,
        f(&murphy["resolution"]),
        SUMS,
        SUM_FLOOR,
        what("RES (numpy)"),
    );
    assert_close(
        d.uncertainty,
        f(&murphy["uncertainty"]),
        SUMS,
        SUM_FLOOR,
        what("UNC (numpy)"),
    );
    assert_close(
        d.within_bin,
        f(&murphy["within_bin"]),
        SUMS,
        SUM_FLOOR,
        what("within-bin (numpy)"),
    );

    let hl = &want["hosmer_lemeshow"];
    let got_hl = &got.hosmer_lemeshow;
    assert_eq!(
        got_hl.degrees_of_freedom as u64,
        hl["degrees_of_freedom"].as_u64().unwrap()
    );
    let groups = hl["groups"].as_array().unwrap();
    assert_eq!(got_hl.groups.len(), groups.len(), "{case}: risk groups");
    for (g, reference) in got_hl.groups.iter().zip(groups) {
        assert_eq!(
            g.rows,
            reference["rows"].as_u64().unwrap(),
            "{case}: group rows"
        );
        assert_eq!(
            g.observed,
            reference["observed"].as_u64().unwrap(),
            "{case}: group events"
        );
        assert_close(
            g.expected,
            f(&reference["expected"]),
            SUMS,
            0.0,
            what("group expected events"),
        );
        assert_close(
            g.expected + g.expected_non_events,
            g.rows as f64,
            SUMS,
            0.0,
            what("E + F = n"),
        );
    }
    assert_close(
        got_hl.statistic,
        f(&hl["statistic"]),
        SUMS,
        0.0,
        what("Hosmer–Lemeshow H (numpy)"),
    );
    assert_close(
        got_hl.p_value,
        f(&hl["p_value"]),
        P_VALUE,
        1e-300,
        what("Hosmer–Lemeshow p (scipy chi2.sf)"),
    );
}

#[test]
fn single_model_figures_match_the_reference_libraries() {
    for case in cases() {
        let rows = rows_of(&case.first, &case.outcomes);
        let got = evaluate(&rows, 0.95).expect("evaluate");
        check_model(&case.name, &got, &case.json["first"]["figures"]);
        if let Some(second) = &case.second {
            let got = evaluate(&rows_of(second, &case.outcomes), 0.95).expect("evaluate");
            check_model(
                &format!("{} (second)", case.name),
                &got,
                &case.json["second"]["figures"],
            );
        }
    }
}

#[test]
fn paired_comparison_matches_numpy_delong_and_row_differences() {
    use tolerance::*;
    let mut verdicts = Vec::new();
    for case in cases() {
        let Some(second) = &case.second else { continue };
        let (a, b) = (
            rows_of(&case.first, &case.outcomes),
            rows_of(second, &case.outcomes),
        );
        let mut paired = PairedRows::new();
        for ((&p, &q), &y) in case.first.iter().zip(second).zip(&case.outcomes) {
            paired.push(
                Forecast::from_probability(p),
                Forecast::from_probability(q),
                y,
            );
        }
        let names = Names {
            first: "candidate",
            second: "live",
        };
        let got = compare(&a, &b, &paired, 0.95, names).expect("compare");
        let want = &case.json["paired"];
        let what = |s: &str| format!("{}: {s}", case.name);

        let auc = &want["auc"];
        assert_close(
            got.auc.difference,
            f(&auc["difference"]),
            SKLEARN,
            1e-3,
            what("AUC difference (sklearn)"),
        );
        assert_close(
            got.auc.std_error,
            f(&auc["std_error"]),
            DELONG,
            0.0,
            what("paired AUC SE (DeLong)"),
        );
        assert_close(
            got.auc.correlation,
            f(&auc["correlation"]),
            DELONG,
            0.0,
            what("AUC correlation (DeLong)"),
        );
        assert_close(got.auc.z, f(&auc["z"]), DELONG, 1e-3, what("paired z"));
        assert_close(
            got.auc.p_value,
            f(&auc["p_value"]),
            P_VALUE,
            1e-300,
            what("paired p (scipy norm.sf)"),
        );
        let interval = floats(&auc["interval"]);
        assert_close(
            got.auc.interval.lower,
            interval[0],
            DELONG,
            1e-3,
            what("AUC difference lower"),
        );
        assert_close(
            got.auc.interval.upper,
            interval[1],
            DELONG,
            1e-3,
            what("AUC difference upper"),
        );

        for (figure, key) in [(&got.brier, "brier"), (&got.log_loss, "log_loss")] {
            let reference = &want[key];
            let floor = f(&reference["std_error"]);
            assert_close(
                figure.mean,
                f(&reference["mean"]),
                SUMS,
                floor,
                what(&format!("{key} mean difference (numpy)")),
            );
            assert_close(
                figure.std_error,
                f(&reference["std_error"]),
                SUMS,
                0.0,
                what(&format!("{key} difference SE (numpy)")),
            );
            assert_close(
                figure.p_value,
                f(&reference["p_value"]),
                P_VALUE,
                1e-300,
                what(&format!("{key} p (scipy norm.sf)")),
            );
        }

        // The verdict favours a model exactly where the reference interval leaves out 0.
        let side = |interval: Vec<f64>, higher_is_better: bool| {
            if interval[0] <= 0.0 && 0.0 <= interval[1] {
                Favours::NotShown
            } else if (interval[0] > 0.0) == higher_is_better {
                Favours::First
            } else {
                Favours::Second
            }
        };
        let expected = [
            side(floats(&auc["interval"]), true),
            side(floats(&want["brier"]["interval"]), false),
            side(floats(&want["log_loss"]["interval"]), false),
        ];
        assert_eq!(
            got.verdict.favours, expected,
            "{}: {}",
            case.name, got.verdict.text
        );
        verdicts.push(got.verdict);
    }
    // The cases cover both outcomes of the verdict.
    assert!(verdicts.iter().any(|v| v.favours.contains(&Favours::First)));
    assert!(verdicts.iter().any(|v| v.favours == [Favours::NotShown; 3]));
    let shown = &verdicts[0].text;
    assert!(
        shown.starts_with("candidate does better on AUC, Brier, log loss at 95%"),
        "{shown}"
    );
    let twins = &verdicts[1].text;
    assert!(
        twins.starts_with("no difference shown on AUC, Brier, log loss at 95%"),
        "{twins}"
    );
}

/// Murphy (1973): with one forecast value per bin the within-bin terms vanish and
/// REL − RES + UNC equals the Brier score; with continuous forecasts the within-bin remainder
/// closes the sum. Checked on every case, with the Brier score from scikit-learn.
#[test]
fn murphy_decomposition_adds_up_to_the_brier_score() {
    for case in cases() {
        let got = evaluate(&rows_of(&case.first, &case.outcomes), 0.95).expect("evaluate");
        let d = got.brier_decomposition;
        let brier = f(&case.json["first"]["figures"]["brier"]);
        let sum = d.reliability - d.resolution + d.uncertainty + d.within_bin;
        assert_close(
            sum,
            brier,
            tolerance::IDENTITY,
            1.0,
            format!("{}: REL − RES + UNC + WB", case.name),
        );
        if case.name == "binned forecasts" {
            assert!(
                d.within_bin.abs() < tolerance::IDENTITY,
                "within-bin {:e}",
                d.within_bin
            );
            let murphy = d.reliability - d.resolution + d.uncertainty;
            assert_close(
                murphy,
                brier,
                tolerance::IDENTITY,
                1.0,
                "binned forecasts: REL − RES + UNC = Brier",
            );
        }
    }
}

/// Regression: for a risk group the model calls certain, the denominator was computed as
/// E (1 − E/n), and 1 − E/n loses every digit to cancellation there (the rounding of Σp over
/// a thousand rows is larger than n·(1 − p)), so the group's term came out several times too
/// large, or 0/0 where the sum rounded to n. The closed form of that term, with c = 1 − p:
///
/// ```text
/// O = n − 1:  (O − E)² · n / (E · F) = (1 − n c)² / (n p c)
/// ```
///
/// It is of order 1e12 here, so the other groups' terms (below 1e3) are within the tolerance.
#[test]
fn hosmer_lemeshow_keeps_its_digits_for_a_group_predicted_certain() {
    let (spread, certain) = (9000, 1000);
    let mut rows = ModelRows::new();
    for i in 0..spread {
        rows.push(
            Forecast::from_probability(0.1 + 0.8 * i as f64 / spread as f64),
            i % 3 == 0,
        );
    }
    for i in 0..certain {
        rows.push(
            Forecast {
                probability: 1.0,
                complement: 0.0,
            },
            i > 0,
        );
    }
    let hl = evaluate(&rows, 0.95).expect("evaluate").hosmer_lemeshow;
    let top = *hl.groups.last().expect("groups");
    assert_eq!((top.rows, top.observed), (certain, certain - 1));
    // The held probability 1 − 1e-15 and its complement, as the stored logit gives them back.
    let logit = (1.0f64 - 1e-15).ln() - 1e-15f64.ln();
    let (p, c) = (1.0 / (1.0 + (-logit).exp()), 1.0 / (1.0 + logit.exp()));
    let n = certain as f64;
    let expected = (1.0 - n * c).powi(2) / (n * p * c);
    assert_close(
        top.expected_non_events,
        n * c,
        1e-12,
        0.0,
        "F of the certain group",
    );
    assert_close(
        hl.statistic,
        expected,
        1e-6,
        0.0,
        "H, dominated by the certain group's term (closed form)",
    );
    assert_eq!(hl.p_value, 0.0);

    // The same group with every row an event: its term is n c / p ≈ 1e-12.
    let mut rows = ModelRows::new();
    for i in 0..spread {
        rows.push(
            Forecast::from_probability(0.1 + 0.8 * i as f64 / spread as f64),
            i % 3 == 0,
        );
    }
    for _ in 0..certain {
        rows.push(
            Forecast {
                probability: 1.0,
                complement: 0.0,
            },
            true,
        );
    }
    // The other nine groups hold the same rows as before, so H differs from the first H by
    // the certain group's two terms alone.
    let all_events = evaluate(&rows, 0.95).expect("evaluate").hosmer_lemeshow;
    let term = n * c / p;
    assert!(
        all_events.statistic.is_finite(),
        "H = {}",
        all_events.statistic
    );
    assert_close(
        all_events.statistic - term + expected,
        hl.statistic,
        // 1e-10 of 1e12 is 100, far below the other groups' 4.5e3: a wrong sum shows.
        1e-10,
        0.0,
        "H with every certain row an event, plus the difference of the two terms",
    );
    assert!(all_events.p_value.is_finite(), "p = {}", all_events.p_value);
}

#[test]
fn one_outcome_value_is_refused_with_the_counts() {
    let mut rows = ModelRows::new();
    for i in 0..20 {
        rows.push(Forecast::from_probability(0.05 * i as f64), true);
    }
    assert_eq!(
        evaluate(&rows, 0.95).unwrap_err(),
        EvaluateError::OneClass {
            rows: 20,
            events: 20
        }
    );
}

#[test]
fn a_level_outside_zero_and_one_is_refused() {
    let case = &cases()[0];
    let rows = rows_of(&case.first, &case.outcomes);
    for level in [0.0, 1.0, 95.0, f64::NAN] {
        assert!(
            matches!(evaluate(&rows, level), Err(EvaluateError::Level(_))),
            "level {level}"
        );
    }
}

#[test]
fn two_models_on_different_rows_are_refused() {
    let case = &cases()[0];
    let a = rows_of(&case.first, &case.outcomes);
    let b = rows_of(&case.first[..100], &case.outcomes[..100]);
    let names = Names {
        first: "a",
        second: "b",
    };
    assert_eq!(
        compare(&a, &b, &PairedRows::new(), 0.95, names).unwrap_err(),
        EvaluateError::DifferentRows {
            first: 3000,
            second: 100
        }
    );
}
