//! The engine against outside references: models fitted by statsmodels 0.15 and the values it
//! (and an independent numpy implementation of the formulas) computes for them, committed as
//! JSON by `tests/reference/make_engine_fixtures.py`.
//!
//! * `engine/spector.json`: the Spector & Mazzeo (1980) data shipped with statsmodels, logit
//!   and probit of GRADE on GPA, TUCE and PSI, plus a logit with GPA² and a probit with the
//!   products GPA·TUCE and GPA·PSI.
//! * `engine/simulated.json`: cloglog and cauchit GLMs on data simulated by the script, with a
//!   log term, a square of a count, level indicators of a categorical covariate, a product of a
//!   count with a level indicator and a product with a binary covariate.
//!
//! Each model is rebuilt as an ogive model file (statsmodels' coefficients and covariance,
//! training ranges and means from the rows, the first rows as check cases with statsmodels'
//! probabilities) and every row is scored with the engine.

mod support;

use ogive::engine::{Average, Averager, Effect, EffectSlot, Interval, Options, Scorer};
use ogive::model::{Model, Value};
use serde_json::Value as Json;
use support::close::assert_close;
use support::reference::{fixture, fixture_model, numbers, rows};
use support::tolerances::{ENGINE_ABSOLUTE_FLOOR, ENGINE_VS_STATSMODELS};

const FIXTURES: [&str; 2] = ["engine/spector.json", "engine/simulated.json"];

/// Rows stored as check cases in each rebuilt model (so loading also proves they reproduce).
const CHECK_CASES: usize = 5;

fn models(path: &str) -> (Json, Vec<Json>) {
    let f = fixture(path);
    let models = f["models"].as_array().expect("models").clone();
    (f, models)
}

fn options(model: &Json) -> Options {
    let level = model["level"].as_f64().expect("level");
    let options = Options::new(level).expect("fixture level");
    assert_close(
        options.quantile(),
        model["quantile"].as_f64().expect("quantile"),
        ENGINE_VS_STATSMODELS,
        0.0,
        "normal quantile of the level (scipy.stats.norm.ppf)",
    );
    options
}

/// The covariate (and level) names of an engine effect slot, as the fixture spells them.
fn slot_names(model: &Model, slot: &EffectSlot) -> (String, Option<String>) {
    let c = &model.covariates()[slot.covariate];
    (
        c.name().to_string(),
        slot.level.map(|l| c.levels()[l].clone()),
    )
}

/// Compare one engine quantity with a reference, naming both.
#[track_caller]
fn check(actual: f64, expected: &Json, what: &str, source: &str) {
    let expected = expected
        .as_f64()
        .unwrap_or_else(|| panic!("{what}: reference is not a number: {expected}"));
    assert_close(
        actual,
        expected,
        ENGINE_VS_STATSMODELS,
        ENGINE_ABSOLUTE_FLOOR,
        format!("{what} [{source}; rel {ENGINE_VS_STATSMODELS:e}]"),
    );
}

/// An estimate with its standard error and interval against a reference effect record.
fn check_estimate(
    value: f64,
    std_error: Option<f64>,
    interval: Option<Interval>,
    reference: &Json,
    what: &str,
    source: &str,
) {
    check(value, &reference["effect"], what, source);
    let se = std_error.expect("the model has a covariance");
    check(
        se,
        &reference["std_error"],
        &format!("{what}: std error"),
        source,
    );
    let interval = interval.expect("interval");
    let bounds = &reference["interval"];
    check(
        interval.lower,
        &bounds[0],
        &format!("{what}: lower"),
        source,
    );
    check(
        interval.upper,
        &bounds[1],
        &format!("{what}: upper"),
        source,
    );
}

/// The engine's slot order and names against a reference list of effect records.
fn check_slot(model: &Model, slot: &EffectSlot, reference: &Json, at: &str) -> String {
    let (covariate, level) = slot_names(model, slot);
    assert_eq!(
        reference["covariate"].as_str(),
        Some(covariate.as_str()),
        "{at}"
    );
    assert_eq!(reference["level"].as_str(), level.as_deref(), "{at}");
    assert_eq!(reference["kind"].as_str(), Some(slot.kind.name()), "{at}");
    format!(
        "{at}, effect of {covariate}{}",
        level.map(|l| format!("[{l}]")).unwrap_or_default()
    )
}

fn check_effects(model: &Model, effects: &[Effect], reference: &Json, at: &str, source: &str) {
    let reference = reference.as_array().expect("effects");
    assert_eq!(effects.len(), reference.len(), "{at}: number of effects");
    for (e, r) in effects.iter().zip(reference) {
        let what = check_slot(model, &e.slot, r, at);
        check_estimate(e.effect, e.std_error, e.interval, r, &what, source);
    }
}

fn check_averages(model: &Model, averages: &[Average], reference: &Json, at: &str, source: &str) {
    let reference = reference.as_array().expect("effects");
    assert_eq!(averages.len(), reference.len(), "{at}: number of effects");
    for (a, r) in averages.iter().zip(reference) {
        let slot = a.slot.expect("an effect slot");
        let what = format!("{} (average)", check_slot(model, &slot, r, at));
        check_estimate(a.value, a.std_error, a.interval, r, &what, source);
    }
}

fn parsed_rows(model: &Model, fixture: &Json) -> Vec<Vec<Value>> {
    rows(fixture)
        .iter()
        .enumerate()
        .map(|(i, row)| {
            let mut values = Vec::new();
            model
                .parse_observation(row, &mut values)
                .unwrap_or_else(|e| panic!("row {i}: {e}"));
            values
        })
        .collect()
}

/// Run `test` on every model of every engine fixture, rebuilt as an ogive model, with the
/// fixture's rows parsed as observations and the options at the fixture's level.
fn each_model(mut test: impl FnMut(&str, &Json, &Model, &[Vec<Value>], &Options)) {
    for path in FIXTURES {
        let (f, models) = models(path);
        for m in &models {
            let model = fixture_model(&f, m, CHECK_CASES);
            let rows = parsed_rows(&model, &f);
            test(path, m, &model, &rows, &options(m));
        }
    }
}

#[test]
fn probability_of_every_row_matches_statsmodels_predict() {
    each_model(|path, m, model, rows, options| {
        let source = m["probabilities"]["source"].as_str().expect("source");
        let expected = numbers(&m["probabilities"]["values"]);
        let mut scorer = Scorer::new(model);
        for (i, values) in rows.iter().enumerate() {
            let what = format!("{path} {}, row {i}: probability", model.name());
            let reference = Json::from(expected[i]);
            check(
                Scorer::probability(model, values),
                &reference,
                &what,
                source,
            );
            let answer = scorer.score(model, values, options);
            check(answer.probability, &reference, &what, source);
            let complement = Json::from(1.0 - expected[i]);
            check(
                answer.complement,
                &complement,
                &format!("{what} (1 − p)"),
                source,
            );
        }
    });
}

#[test]
fn per_observation_effects_errors_and_intervals_match_numpy() {
    each_model(|path, m, model, rows, options| {
        let reference = m["observations"]["values"]
            .as_array()
            .expect("observations");
        let source = m["observations"]["source"].as_str().expect("source");
        let mut scorer = Scorer::new(model);
        for (i, values) in rows.iter().enumerate() {
            let r = &reference[i];
            let at = format!("{path} {}, row {i}", model.name());
            let a = scorer.score(model, values, options);
            check(
                a.linear_index,
                &r["linear_index"],
                &format!("{at}: index"),
                source,
            );
            check(
                a.probability,
                &r["probability"],
                &format!("{at}: p"),
                source,
            );
            let se = a.std_error.expect("std error");
            check(
                se,
                &r["probability_std_error"],
                &format!("{at}: se(p)"),
                source,
            );
            let interval = a.interval.expect("interval");
            let bounds = &r["probability_interval"];
            check(
                interval.lower,
                &bounds[0],
                &format!("{at}: p lower"),
                source,
            );
            check(
                interval.upper,
                &bounds[1],
                &format!("{at}: p upper"),
                source,
            );
            check_effects(model, &a.effects, &r["effects"], &at, source);
        }
    });
}

#[test]
fn average_effects_match_statsmodels_get_margeff_overall_and_numpy() {
    each_model(|path, m, model, rows, options| {
        let mut scorer = Scorer::new(model);
        let mut averager = Averager::new(model, scorer.slots().len());
        for values in rows {
            scorer.score_and_average(model, values, options, &mut averager);
        }
        let (probability, effects) = averager.finish(model, scorer.slots(), options);
        let blocks = m["average_effects"].as_array().expect("average blocks");
        assert!(!blocks.is_empty());
        for block in blocks {
            let source = block["source"].as_str().expect("source");
            let at = format!("{path} {}", model.name());
            check_averages(model, &effects, &block["effects"], &at, source);
            if let Some(p) = block.get("probability") {
                check(
                    probability.value,
                    &p["value"],
                    &format!("{at}: mean p"),
                    source,
                );
                let se = probability.std_error.expect("std error");
                check(se, &p["std_error"], &format!("{at}: se(mean p)"), source);
            }
        }
    });
}

#[test]
fn effects_at_means_match_statsmodels_get_margeff_mean_and_numpy() {
    each_model(|path, m, model, _, options| {
        let mut scorer = Scorer::new(model);
        let a = scorer.score_at_means(model, options);
        let blocks = m["effects_at_means"].as_array().expect("at-means blocks");
        assert!(!blocks.is_empty());
        for block in blocks {
            let source = block["source"].as_str().expect("source");
            let at = format!("{path} {} at means", model.name());
            check_effects(model, &a.effects, &block["effects"], &at, source);
            if let Some(p) = block.get("probability") {
                check(a.linear_index, &block["linear_index"], &at, source);
                check(a.probability, &p["value"], &format!("{at}: p"), source);
                let se = a.std_error.expect("std error");
                check(se, &p["std_error"], &format!("{at}: se(p)"), source);
            }
        }
    });
}

#[test]
fn every_fixture_model_covers_what_the_issue_asks_for() {
    // A guard on the fixtures themselves: statsmodels' own margeff blocks for the plain logit
    // and probit, a square term, a product term, and all four links across the two files.
    let mut links = Vec::new();
    let mut statsmodels_blocks = 0;
    let mut square = false;
    let mut product = false;
    for path in FIXTURES {
        let (_, models) = models(path);
        for m in &models {
            links.push(m["link"].as_str().expect("link").to_string());
            for t in m["terms"].as_array().expect("terms") {
                let t = t.as_str().expect("term");
                square |= t.ends_with("^2");
                product |= t.contains('*');
            }
            for key in ["average_effects", "effects_at_means"] {
                for block in m[key].as_array().expect("blocks") {
                    let source = block["source"].as_str().expect("source");
                    if source.contains("get_margeff") && source.contains("dummy=True") {
                        statsmodels_blocks += 1;
                    }
                }
            }
        }
    }
    for link in ["logit", "probit", "cloglog", "cauchit"] {
        assert!(
            links.iter().any(|l| l == link),
            "no fixture model with the {link} link"
        );
    }
    assert_eq!(
        statsmodels_blocks, 4,
        "overall and mean blocks for logit and probit"
    );
    assert!(square && product);
}
