//! Every route and every option over real HTTP. Answers are compared with the engine called
//! directly on the same model: the service must add nothing and lose nothing. Tolerance: the
//! numbers travel as shortest round-trip decimal text and are read back by serde_json's default
//! float parser, which may be one ulp off, so values agree to relative 4e-16 (identity check,
//! not a reference value). The service builds its options with `Options::new(level)`, so the
//! tests do too (the hard-coded default quantile may differ from the computed one in the last
//! digits).

use std::sync::Arc;

use ogive::engine::{effect_slots, Answer, Averager, Options, Scorer, Warning};
use ogive::model::{Model, Value};
use ogive::registry::{Entry, Snapshot};
use serde_json::{json, Value as Json};

use crate::support::http_models::{lease_file, lease_observation, model, plain_file};
use crate::support::server::{copy_models, http_models, test_config, test_settings, TestServer};
use crate::support::tolerances::http::SAME;

#[track_caller]
fn same(actual: &Json, expected: f64, what: &str) {
    let actual = actual
        .as_f64()
        .unwrap_or_else(|| panic!("{what}: not a number: {actual}"));
    let scale = expected.abs().max(f64::MIN_POSITIVE);
    assert!(
        (actual - expected).abs() <= SAME * scale,
        "{what}: service {actual:e}, engine {expected:e}"
    );
}

fn engine_answer(model: &Model, observation: &Json, options: &Options) -> Answer {
    let mut values = Vec::new();
    model
        .parse_observation(observation.as_object().expect("object"), &mut values)
        .expect("valid observation");
    Scorer::new(model).score(model, &values, options).clone()
}

/// Check one answer object against the engine's answer field by field.
pub fn check_answer(model: &Model, got: &Json, expected: &Answer, options: &Options) {
    same(&got["probability"], expected.probability, "probability");
    same(&got["linear_index"], expected.linear_index, "linear_index");
    match (expected.std_error, expected.interval) {
        (Some(se), Some(interval)) => {
            same(&got["std_error"], se, "std_error");
            same(&got["interval"]["lower"], interval.lower, "interval.lower");
            same(&got["interval"]["upper"], interval.upper, "interval.upper");
            same(&got["interval"]["level"], options.level(), "interval.level");
        }
        _ => {
            assert!(got.get("std_error").is_none() && got.get("interval").is_none());
        }
    }
    if options.effects {
        let effects = got["effects"].as_array().expect("effects");
        assert_eq!(effects.len(), expected.effects.len());
        for (g, e) in effects.iter().zip(&expected.effects) {
            let c = &model.covariates()[e.slot.covariate];
            assert_eq!(g["covariate"], json!(c.name()));
            assert_eq!(g["kind"], json!(e.slot.kind.name()));
            if let Some(l) = e.slot.level {
                assert_eq!(g["level"], json!(c.levels()[l]));
                assert_eq!(g["reference"], json!(c.levels()[c.reference()]));
            }
            same(&g["effect"], e.effect, "effect");
            match e.std_error {
                Some(se) => same(&g["std_error"], se, "effect std_error"),
                None => assert!(g.get("std_error").is_none()),
            }
            if let Some(i) = e.interval {
                same(&g["interval"]["lower"], i.lower, "effect interval");
                same(&g["interval"]["upper"], i.upper, "effect interval");
            }
            match e.elasticity {
                Some(x) => same(&g["elasticity"], x, "elasticity"),
                None => assert!(g.get("elasticity").is_none()),
            }
        }
    } else {
        assert!(got.get("effects").is_none());
    }
    let warnings = got["warnings"].as_array().expect("warnings");
    assert_eq!(warnings.len(), expected.warnings.len());
    for (g, w) in warnings.iter().zip(&expected.warnings) {
        match *w {
            Warning::OutOfRange {
                covariate,
                value,
                min,
                max,
            } => {
                assert_eq!(g["code"], json!("out_of_range"));
                assert_eq!(g["covariate"], json!(model.covariates()[covariate].name()));
                same(&g["value"], value, "warning value");
                assert_eq!(g["training_range"], json!({"min": min, "max": max}));
            }
            Warning::UnusualCombination {
                distance,
                max_distance,
            } => {
                assert_eq!(g["code"], json!("unusual_combination"));
                same(&g["distance"], distance, "distance");
                same(&g["max_distance"], max_distance, "max_distance");
            }
        }
        assert!(g["message"]
            .as_str()
            .is_some_and(|m| m.contains("extrapolating")));
    }
    if options.contributions {
        let contributions = got["contributions"].as_array().expect("contributions");
        assert_eq!(contributions.len(), expected.contributions.len());
        for (g, c) in contributions.iter().zip(&expected.contributions) {
            assert_eq!(
                g["covariate"],
                json!(model.covariates()[c.covariate].name())
            );
            same(&g["contribution"], c.contribution, "contribution");
        }
    } else {
        assert!(got.get("contributions").is_none());
    }
    match (expected.band, &model.file().decision) {
        (Some(b), Some(d)) => assert_eq!(got["band"], json!(d.bands[b].name)),
        _ => assert!(got.get("band").is_none()),
    }
    match expected.above_threshold {
        Some(a) => assert_eq!(got["above_threshold"], json!(a)),
        None => assert!(got.get("above_threshold").is_none()),
    }
}

#[test]
fn health_routes_answer() {
    let server = TestServer::start();
    let live = server.get("/livez");
    assert_eq!(
        (live.status, live.json()),
        (200, json!({"status": "alive"}))
    );
    let ready = server.get("/readyz");
    assert_eq!(ready.status, 200);
    assert_eq!(ready.json()["status"], json!("ready"));
    assert_eq!(ready.json()["models"], json!(2));
}

#[test]
fn an_empty_model_directory_is_not_ready_and_says_so() {
    let dir = tempfile::tempdir().expect("a temporary directory");
    let config = test_config(dir.path(), test_settings());
    let server = TestServer::launch(dir, config);
    let ready = server.get("/readyz");
    assert_eq!(ready.status, 503);
    let body = ready.json();
    assert_eq!(body["models"], json!(0));
    assert!(
        body["reasons"][0]
            .as_str()
            .is_some_and(|r| r.contains("no model is served")),
        "{body}"
    );
    assert_eq!(server.get("/livez").status, 200);
}

#[test]
fn an_unknown_model_error_lists_the_models_that_are_served() {
    let server = TestServer::start();
    let reply = server.get("/models/no-such-model");
    assert_eq!(reply.status, 404);
    let body = reply.json();
    let served: Vec<String> = server
        .state()
        .registry
        .snapshot()
        .models
        .keys()
        .cloned()
        .collect();
    assert!(!served.is_empty());
    let detail = body["detail"].as_str().expect("detail");
    assert!(
        served.iter().all(|name| detail.contains(name.as_str())),
        "{detail}"
    );
}

#[test]
fn readiness_is_503_while_a_model_failed_to_load_and_names_what_failed() {
    let dir = copy_models(&http_models());
    let broken = dir.path().join("broken-test");
    std::fs::create_dir_all(broken.join("versions")).expect("mkdir");
    std::fs::write(broken.join("versions").join("v1.json"), "{").expect("write");
    std::fs::write(broken.join("live"), "v1\n").expect("write live");
    let config = test_config(dir.path(), test_settings());
    let server = TestServer::launch(dir, config);
    let ready = server.get("/readyz");
    assert_eq!(ready.status, 503);
    let ready = ready.json();
    assert_eq!(ready["models_loaded"], json!(false));
    assert_eq!(ready["failed_to_load"], json!(["broken-test"]), "{ready}");
    // Which model, and what failed: the file's syntax error, with its place.
    let error = ready["load_errors"]["broken-test"]
        .as_str()
        .expect("an error");
    assert!(error.contains("v1") && error.contains("line 1"), "{ready}");
    let reasons: Vec<&str> = ready["reasons"]
        .as_array()
        .expect("reasons")
        .iter()
        .filter_map(Json::as_str)
        .collect();
    assert_eq!(
        reasons,
        [format!("model 'broken-test' failed to load: {error}")],
        "{ready}"
    );
    assert_eq!(server.get("/livez").status, 200);
}

#[test]
fn the_model_list_and_description_show_what_is_loaded() {
    let server = TestServer::start();
    let list = server.get("/models").json();
    let names: Vec<&str> = list["models"]
        .as_array()
        .expect("list")
        .iter()
        .map(|m| m["name"].as_str().expect("name"))
        .collect();
    assert_eq!(names, ["lease-test", "plain-test"]);
    let lease = server.get("/models/lease-test").json();
    assert_eq!(lease["version"], json!("2026-01"));
    assert_eq!(lease["link"], json!("logit"));
    assert_eq!(
        lease["covariates"][0]["training"],
        json!({"min": 20.0, "max": 5000.0, "mean": 600.0})
    );
    assert_eq!(lease["covariates"][0]["log_term"], json!(true));
    assert_eq!(
        lease["covariates"][4]["levels"],
        json!(["retail", "construction", "transport", "services"])
    );
    assert_eq!(lease["covariates"][4]["reference"], json!("retail"));
    assert_eq!(
        lease["terms"][1],
        json!({"term": "log(annual_revenue)", "coefficient": -0.35})
    );
    assert_eq!(lease["decision"]["threshold"], json!(0.3));
    assert_eq!(lease["has_covariance"], json!(true));
    // The example observation the description offers is itself accepted.
    let scored = server.post(
        "/models/lease-test/probability",
        &json!({"observation": lease["example"]}),
    );
    assert_eq!(scored.status, 200, "{}", scored.text);
}

#[test]
fn one_observation_with_default_options_is_the_engines_answer() {
    let server = TestServer::start();
    let reply = server.post(
        "/models/lease-test/probability",
        &json!({"observation": lease_observation()}),
    );
    assert_eq!(reply.status, 200, "{}", reply.text);
    assert_eq!(reply.header("content-type"), Some("application/json"));
    let body = reply.json();
    assert_eq!(body["model"], json!("lease-test"));
    assert_eq!(body["version"], json!("2026-01"));
    assert_eq!(body["link"], json!("logit"));
    assert_eq!(body["level"], json!(0.95));
    assert_eq!(body["request_id"].as_str(), reply.header("x-request-id"));
    assert_eq!(body["notes"], json!([]));
    let m = model(&lease_file());
    let options = Options::new(0.95).expect("level");
    check_answer(
        &m,
        &body,
        &engine_answer(&m, &lease_observation(), &options),
        &options,
    );
    // One effect per numeric or binary covariate, one per non-reference level.
    assert_eq!(body["effects"].as_array().map(Vec::len), Some(4 + 3));
}

#[test]
fn every_option_changes_the_answer_as_the_engine_does() {
    let server = TestServer::start();
    let m = model(&lease_file());
    let cases = [
        json!({"effects": false}),
        json!({"intervals": false}),
        json!({"level": 0.8}),
        json!({"elasticities": true}),
        json!({"contributions": false}),
        json!({"effects": false, "intervals": false, "contributions": false}),
    ];
    for extra in cases {
        let mut body = json!({"observation": lease_observation()});
        for (k, v) in extra.as_object().expect("object") {
            body[k] = v.clone();
        }
        let mut options = Options::new(extra["level"].as_f64().unwrap_or(0.95)).expect("level");
        options.effects = extra["effects"].as_bool().unwrap_or(true);
        options.intervals = extra["intervals"].as_bool().unwrap_or(true);
        options.elasticities = extra["elasticities"].as_bool().unwrap_or(false);
        options.contributions = extra["contributions"].as_bool().unwrap_or(true);
        let reply = server.post("/models/lease-test/probability", &body);
        assert_eq!(reply.status, 200, "{extra}: {}", reply.text);
        let got = reply.json();
        same(&got["level"], options.level(), "level");
        check_answer(
            &m,
            &got,
            &engine_answer(&m, &lease_observation(), &options),
            &options,
        );
    }
}

#[test]
fn elasticities_are_given_for_continuous_covariates_only() {
    let server = TestServer::start();
    let body = json!({"observation": lease_observation(), "elasticities": true});
    let got = server.post("/models/lease-test/probability", &body).json();
    for effect in got["effects"].as_array().expect("effects") {
        let continuous = matches!(
            effect["covariate"].as_str(),
            Some("annual_revenue" | "years_trading")
        );
        assert_eq!(effect.get("elasticity").is_some(), continuous, "{effect}");
    }
}

#[test]
fn a_batch_with_average_effects_and_effects_at_means_is_the_engines_answer() {
    let server = TestServer::start();
    let m = model(&lease_file());
    let observations: Vec<Json> = (0..25)
        .map(|i| {
            let mut o = lease_observation();
            o["annual_revenue"] = json!(50.0 + 37.0 * f64::from(i));
            o["years_trading"] = json!(f64::from(i % 9) * 1.7);
            o["prior_arrears"] = json!(i % 3);
            o["guarantor"] = json!(i % 2);
            o["sector"] =
                json!(["retail", "construction", "transport", "services"][i as usize % 4]);
            o
        })
        .collect();
    let body = json!({"observations": observations, "average_effects": true, "at_means": true, "level": 0.9});
    let reply = server.post("/models/lease-test/probability", &body);
    assert_eq!(reply.status, 200, "{}", reply.text);
    let got = reply.json();
    assert_eq!(got["count"], json!(25));
    let options = Options::new(0.9).expect("level");
    let mut scorer = Scorer::new(&m);
    let mut averager = Averager::new(&m, scorer.slots().len());
    let mut values = Vec::new();
    for (i, o) in observations.iter().enumerate() {
        m.parse_observation(o.as_object().expect("object"), &mut values)
            .expect("valid");
        let answer = scorer
            .score_and_average(&m, &values, &options, &mut averager)
            .clone();
        let result = &got["results"][i];
        assert_eq!(result["index"], json!(i));
        check_answer(&m, result, &answer, &options);
    }
    let (probability, effects) = averager.finish(&m, &effect_slots(&m), &options);
    let average = &got["average_effects"];
    assert_eq!(average["count"], json!(25));
    same(
        &average["probability"]["probability"],
        probability.value,
        "average probability",
    );
    same(
        &average["probability"]["std_error"],
        probability.std_error.expect("se"),
        "average probability se",
    );
    for (g, e) in average["effects"]
        .as_array()
        .expect("effects")
        .iter()
        .zip(&effects)
    {
        same(&g["effect"], e.value, "average effect");
        same(
            &g["std_error"],
            e.std_error.expect("se"),
            "average effect se",
        );
        same(
            &g["interval"]["lower"],
            e.interval.expect("interval").lower,
            "average interval",
        );
    }
    let mut at_means_options = options;
    at_means_options.contributions = false;
    let at_means = Scorer::new(&m)
        .score_at_means(&m, &at_means_options)
        .clone();
    let got_means = &got["at_means"];
    same(
        &got_means["probability"],
        at_means.probability,
        "at-means probability",
    );
    for (g, e) in got_means["effects"]
        .as_array()
        .expect("effects")
        .iter()
        .zip(&at_means.effects)
    {
        same(&g["effect"], e.effect, "at-means effect");
        same(&g["std_error"], e.std_error.expect("se"), "at-means se");
    }
    assert!(got_means["note"]
        .as_str()
        .is_some_and(|n| n.contains("square of the mean")));
}

#[test]
fn extrapolation_warnings_name_the_covariate_value_and_range() {
    let server = TestServer::start();
    let m = model(&lease_file());
    let mut outside = lease_observation();
    outside["annual_revenue"] = json!(9000.0);
    let mut unusual = lease_observation();
    unusual["annual_revenue"] = json!(4900.0);
    unusual["years_trading"] = json!(39.0);
    for (observation, code) in [(outside, "out_of_range"), (unusual, "unusual_combination")] {
        let got = server
            .post(
                "/models/lease-test/probability",
                &json!({"observation": observation}),
            )
            .json();
        let options = Options::new(0.95).expect("level");
        let expected = engine_answer(&m, &observation, &options);
        assert!(!expected.warnings.is_empty());
        assert_eq!(got["warnings"][0]["code"], json!(code), "{got}");
        check_answer(&m, &got, &expected, &options);
    }
}

#[test]
fn a_model_without_covariance_says_its_answers_carry_no_intervals() {
    let server = TestServer::start();
    let m = model(&plain_file());
    let observation = json!({"income": 60.0, "owner": true});
    let got = server
        .post(
            "/models/plain-test/probability",
            &json!({"observation": observation}),
        )
        .json();
    assert_eq!(got["notes"][0]["code"], json!("no_covariance"));
    assert_eq!(got["link"], json!("probit"));
    let options = Options::new(0.95).expect("level");
    check_answer(
        &m,
        &got,
        &engine_answer(&m, &observation, &options),
        &options,
    );
}

fn curve_values(model: &Model, over: usize, held: &[(usize, Value)], x: Value) -> Answer {
    let mut values = model.mean_profile().to_vec();
    for &(j, v) in held {
        values[j] = v;
    }
    values[over] = x;
    let mut options = Options::new(0.95).expect("level");
    options.contributions = false;
    Scorer::new(model).score(model, &values, &options).clone()
}

#[test]
fn a_numeric_curve_runs_over_the_training_range_at_the_training_means() {
    let server = TestServer::start();
    let m = model(&lease_file());
    let reply = server.get("/models/lease-test/curve?over=years_trading&points=9");
    assert_eq!(reply.status, 200, "{}", reply.text);
    let got = reply.json();
    assert_eq!(got["from"], json!(0.0));
    assert_eq!(got["to"], json!(40.0));
    assert_eq!(got["effect_kind"], json!("derivative"));
    assert_eq!(got["held"]["sector"], json!({"source": "training_shares"}));
    assert_eq!(
        got["held"]["annual_revenue"],
        json!({"value": 600.0, "source": "training_mean"})
    );
    let points = got["points"].as_array().expect("points");
    assert_eq!(points.len(), 9);
    for (i, p) in points.iter().enumerate() {
        let x = 5.0 * i as f64;
        same(&p["value"], x, "grid value");
        let expected = curve_values(&m, 1, &[], Value::Number(x));
        same(&p["probability"], expected.probability, "curve probability");
        same(&p["std_error"], expected.std_error.expect("se"), "curve se");
        let effect = expected
            .effects
            .iter()
            .find(|e| e.slot.covariate == 1)
            .expect("effect");
        same(&p["effect"], effect.effect, "curve effect");
        same(
            &p["effect_std_error"],
            effect.std_error.expect("se"),
            "curve effect se",
        );
        assert_eq!(p["outside_training_range"], json!(false));
    }
}

#[test]
fn a_curve_holds_given_values_and_covers_every_kind() {
    let server = TestServer::start();
    let m = model(&lease_file());
    let got = server
        .get("/models/lease-test/curve?over=sector&guarantor=1&annual_revenue=300&prior_arrears=2&years_trading=4.5")
        .json();
    assert_eq!(got["reference"], json!("retail"));
    assert_eq!(
        got["held"]["guarantor"],
        json!({"value": 1.0, "source": "given"})
    );
    let points = got["points"].as_array().expect("points");
    assert_eq!(points.len(), 4);
    assert_eq!(points[0]["value"], json!("retail"));
    assert_eq!(points[0]["effect"], json!(0.0));
    let held = [
        (0, Value::Number(300.0)),
        (1, Value::Number(4.5)),
        (2, Value::Number(2.0)),
        (3, Value::Number(1.0)),
    ];
    for (l, p) in points.iter().enumerate() {
        let expected = curve_values(&m, 4, &held, Value::Level(l));
        same(&p["probability"], expected.probability, "level probability");
        if l > 0 {
            let effect = expected
                .effects
                .iter()
                .find(|e| e.slot.covariate == 4 && e.slot.level == Some(l))
                .expect("level effect");
            same(&p["effect"], effect.effect, "level effect");
        }
    }
    let binary = server.get("/models/lease-test/curve?over=guarantor").json();
    assert_eq!(binary["effect_kind"], json!("discrete_change"));
    assert_eq!(binary["points"].as_array().map(Vec::len), Some(2));
    let count = server
        .get("/models/lease-test/curve?over=prior_arrears&from=0&to=3&points=10")
        .json();
    let values: Vec<f64> = count["points"]
        .as_array()
        .expect("points")
        .iter()
        .map(|p| p["value"].as_f64().expect("number"))
        .collect();
    assert_eq!(values, [0.0, 1.0, 2.0, 3.0]);
    let beyond = server
        .get("/models/lease-test/curve?over=years_trading&from=30&to=60&points=4")
        .json();
    assert_eq!(beyond["points"][3]["outside_training_range"], json!(true));
}

#[test]
fn a_curve_range_outside_the_domain_is_clipped_and_said_so() {
    let server = TestServer::start();
    let got = server
        .get("/models/lease-test/curve?over=annual_revenue&from=-10&to=100&points=3")
        .json();
    assert_eq!(got["from"], json!(1e-12));
    assert!(got["notes"][0]
        .as_str()
        .is_some_and(|n| n.contains("clipped")));
    let ignored = server
        .get("/models/lease-test/curve?over=guarantor&guarantor=0")
        .json();
    assert!(ignored["notes"][0]
        .as_str()
        .is_some_and(|n| n.contains("not used")));
}

#[test]
fn the_curve_etag_changes_only_with_the_live_version() {
    let server = TestServer::start();
    let first = server.get("/models/lease-test/curve?over=years_trading");
    let tag = first.header("etag").expect("etag").to_string();
    assert!(tag.starts_with('"') && tag.ends_with('"'));
    let other_query = server.get("/models/lease-test/curve?over=guarantor&points=3");
    assert_eq!(other_query.header("etag"), Some(tag.as_str()));
    let cached = server.send(
        "GET",
        "/models/lease-test/curve?over=years_trading",
        &[("If-None-Match", &tag)],
        None,
    );
    assert_eq!(cached.status, 304);
    assert_eq!(cached.text, "");
    assert_eq!(cached.header("etag"), Some(tag.as_str()));
    let weak = format!("\"other\", W/{tag}");
    let cached = server.send(
        "GET",
        "/models/lease-test/curve?over=years_trading",
        &[("If-None-Match", &weak)],
        None,
    );
    assert_eq!(cached.status, 304);
    let plain = server.get("/models/plain-test/curve?over=income");
    assert_ne!(plain.header("etag"), Some(tag.as_str()));

    // A promotion: the same model under a new version label.
    let mut file = lease_file();
    file["version"] = json!("2026-02");
    let mut snapshot = Snapshot::default();
    for m in [model(&file), model(&plain_file())] {
        snapshot
            .models
            .insert(m.name().to_string(), Arc::new(Entry::serving(Arc::new(m))));
    }
    server.state().registry.replace(snapshot);
    let after = server.send(
        "GET",
        "/models/lease-test/curve?over=years_trading",
        &[("If-None-Match", &tag)],
        None,
    );
    assert_eq!(after.status, 200);
    assert_ne!(after.header("etag"), Some(tag.as_str()));
    assert_eq!(after.json()["version"], json!("2026-02"));
}

#[test]
fn metrics_count_requests_observations_and_warnings() {
    let server = TestServer::start();
    let mut outside = lease_observation();
    outside["annual_revenue"] = json!(9000.0);
    let batch = json!({"observations": [lease_observation(), outside, lease_observation()]});
    assert_eq!(
        server.post("/models/lease-test/probability", &batch).status,
        200
    );
    assert_eq!(server.get("/models/nope").status, 404);
    let reply = server.get("/metrics");
    assert_eq!(reply.status, 200);
    assert!(reply
        .header("content-type")
        .is_some_and(|c| c.starts_with("text/plain; version=0.0.4")));
    let text = reply.text;
    for line in [
        "ogive_observations_scored_total{model=\"lease-test\",version=\"2026-01\"} 3",
        "ogive_observations_scored_total{model=\"plain-test\",version=\"v1\"} 0",
        "ogive_out_of_range_total{covariate=\"annual_revenue\",model=\"lease-test\"} 1",
        "ogive_out_of_range_total{covariate=\"years_trading\",model=\"lease-test\"} 0",
        "ogive_predicted_probability_count{model=\"lease-test\"} 3",
        "ogive_http_requests_total{method=\"POST\",route=\"/models/{name}/probability\",status=\"200\"} 1",
        "ogive_http_requests_total{method=\"GET\",route=\"/models/{name}\",status=\"404\"} 1",
        "ogive_live_version_info{link=\"logit\",model=\"lease-test\",version=\"2026-01\"} 1",
        "ogive_ready 1",
    ] {
        assert!(text.contains(line), "missing {line:?} in\n{text}");
    }
}

#[test]
fn the_openapi_document_has_a_concrete_path_per_model() {
    let server = TestServer::start();
    let doc = server.get("/openapi.json").json();
    assert_eq!(doc["openapi"], json!("3.1.0"));
    let paths = doc["paths"].as_object().expect("paths");
    for path in [
        "/livez",
        "/readyz",
        "/metrics",
        "/openapi.json",
        "/models",
        "/models/lease-test",
        "/models/lease-test/probability",
        "/models/lease-test/curve",
        "/models/plain-test",
        "/models/plain-test/probability",
        "/models/plain-test/curve",
    ] {
        assert!(paths.contains_key(path), "missing {path}");
    }
    assert!(!paths.contains_key("/models/{name}/probability"));
    let observation = &doc["components"]["schemas"]["Observation.lease-test"];
    assert_eq!(
        observation["properties"]["sector"]["enum"],
        json!(["retail", "construction", "transport", "services"])
    );
    assert_eq!(
        observation["properties"]["annual_revenue"]["minimum"],
        json!(1e-12)
    );
    assert_eq!(
        doc["components"]["schemas"]["ProbabilityRequest"]["properties"]["observations"]
            ["maxItems"],
        json!(1000)
    );
}

#[test]
fn regression_a_curve_over_the_whole_domain_starts_exactly_at_the_log_domain_edge() {
    // The grid's end points were computed as a + (b − a)·t, which rounds to 0 at the 1e-12
    // edge; log(0) made the curve not computable. (A descending range, from above to, is now
    // refused: see the catalogue.)
    let server = TestServer::start();
    let reply = server
        .get("/models/lease-test/curve?over=annual_revenue&points=2&from=-1e12&to=999999999999");
    assert_eq!(reply.status, 200, "{}", reply.text);
    assert_eq!(reply.json()["points"][0]["value"], json!(1e-12));
    assert_eq!(reply.json()["points"][1]["value"], json!(999999999999.0));
}

#[test]
fn regression_a_descending_curve_is_refused_naming_from() {
    let server = TestServer::start();
    let reply = server
        .get("/models/lease-test/curve?over=annual_revenue&points=2&from=999999999999&to=-1e12");
    assert_eq!(reply.status, 422, "{}", reply.text);
    assert_eq!(reply.json()["parameter"], json!("from"));
    // Against the training range when only one end is given: the training maximum is 5000.
    let reply = server.get("/models/lease-test/curve?over=annual_revenue&from=6000");
    assert_eq!(reply.status, 422, "{}", reply.text);
    assert_eq!(reply.json()["parameter"], json!("from"));
}

#[test]
fn regression_an_elasticity_at_an_underflowing_probability_is_left_out() {
    // m·x/p is 0/0 where a probit probability underflows to 0; it made the whole answer
    // not computable.
    let server = TestServer::start();
    let body = json!({"elasticities": true, "observation": {"income": -569103424293.3263, "owner": false}});
    let reply = server.post("/models/plain-test/probability", &body);
    assert_eq!(reply.status, 200, "{}", reply.text);
    let got = reply.json();
    assert_eq!(got["probability"], json!(0.0));
    assert!(got["effects"][0].get("elasticity").is_none());
}
