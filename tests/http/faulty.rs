//! Batches sent with `"on_error": "keep"`: each faulty observation is answered in its place in
//! `results` by the fault a refusal would have listed, the others exactly as if sent alone, on
//! both the live route and the stored-version route, checked against the served OpenAPI
//! document; monitoring (receipts, drift windows, the scoring series, the shadow comparison)
//! sees the scored observations only.

use serde_json::{json, Value as Json};

use crate::catalogue::PROBABILITY;
use crate::support::contract::Contract;
use crate::support::http_models::{lease_observation, serving_a_stored_version};
use crate::support::server::TestServer;

/// Six varied valid observations of the lease model.
fn six() -> Vec<Json> {
    let sectors = ["construction", "retail", "services"];
    (0..6)
        .map(|i| {
            let mut o = lease_observation();
            o["annual_revenue"] = json!(300.0 + 170.0 * i as f64);
            o["years_trading"] = json!(2.5 + 1.75 * i as f64);
            o["prior_arrears"] = json!(i % 3);
            o["guarantor"] = json!(i % 2);
            o["sector"] = json!(sectors[i % 3]);
            o
        })
        .collect()
}

/// [`six`] with an unseen sector at 1, a guarantor of 7 at 3 and a non-object at 4.
fn six_with_faults() -> Vec<Json> {
    let mut batch = six();
    batch[1]["sector"] = json!("mining");
    batch[3]["guarantor"] = json!(7);
    batch[4] = json!("not an observation");
    batch
}

const FAULTY: [usize; 3] = [1, 3, 4];
const GOOD: [usize; 3] = [0, 2, 5];

/// An answer without what differs from call to call (the request id, the receipts).
fn without_call(mut answer: Json) -> Json {
    let object = answer.as_object_mut().expect("an answer");
    object.remove("request_id");
    object.remove("receipt");
    if let Some(results) = object.get_mut("results").and_then(Json::as_array_mut) {
        for row in results {
            row.as_object_mut().expect("a result").remove("receipt");
        }
    }
    answer
}

fn note<'a>(answer: &'a Json, code: &str) -> Option<&'a Json> {
    answer["notes"]
        .as_array()
        .expect("notes")
        .iter()
        .find(|n| n["code"] == code)
}

#[test]
fn each_faulty_observation_is_answered_in_its_place_by_the_fault_the_refusal_lists() {
    let server = TestServer::start();
    let contract = Contract::public(&server);
    let batch = six_with_faults();
    let body = json!({"observations": batch, "on_error": "keep", "average_effects": true});
    contract.check("ProbabilityRequest.lease-test", &body, "a batch kept");
    let refused_body = json!({"observations": batch, "average_effects": true});
    assert!(
        !contract
            .validator("ProbabilityRequest.lease-test")
            .is_valid(&refused_body),
        "without on_error keep the document refuses the faulty observations"
    );
    let reply = server.post(PROBABILITY, &body);
    assert_eq!(reply.status, 200, "{}", reply.text);
    contract.check_reply(PROBABILITY, "post", &reply, "a batch with faults kept");
    let answer = reply.json();
    assert_eq!(answer["count"], json!(6));
    let results = answer["results"].as_array().expect("results");
    assert_eq!(results.len(), 6);
    for (i, row) in results.iter().enumerate() {
        assert_eq!(row["index"], json!(i), "{row}");
    }

    // The faults are the ones the refusal of the same batch lists, in the same words.
    let refused = server.post(PROBABILITY, &refused_body);
    assert_eq!(refused.status, 422);
    let listed = refused.json()["errors"].clone();
    let listed = listed.as_array().expect("errors listed");
    assert_eq!(listed.len(), FAULTY.len());
    for (fault, index) in listed.iter().zip(FAULTY) {
        let row = &results[index];
        assert_eq!(row.as_object().expect("a fault").len(), 2, "{row}");
        assert_eq!(fault["index"], json!(index));
        for member in ["type", "detail", "pointer"] {
            assert_eq!(row["error"][member], fault[member], "{member} of {index}");
        }
    }
    assert_eq!(
        results[3]["error"]["pointer"],
        json!("/observations/3/guarantor")
    );
    assert_eq!(
        results[1]["error"]["type"],
        json!("urn:ogive:problem:unseen-level")
    );

    // The good ones are answered exactly as each alone, and the averages are those of the good
    // ones sent as a batch of their own.
    for index in GOOD {
        let alone = server
            .post(PROBABILITY, &json!({"observation": batch[index]}))
            .expect(200);
        let mut row = without_call(results[index].clone());
        row.as_object_mut().expect("a result").remove("index");
        let alone = without_call(alone);
        for (key, value) in row.as_object().expect("a result") {
            assert_eq!(value, &alone[key], "{key} of observation {index}");
        }
        assert!(results[index]["probability"].is_number());
    }
    let good: Vec<&Json> = GOOD.iter().map(|&i| &batch[i]).collect();
    let only_good = server
        .post(
            PROBABILITY,
            &json!({"observations": good, "average_effects": true}),
        )
        .expect(200);
    assert_eq!(answer["average_effects"], only_good["average_effects"]);
    assert_eq!(answer["average_effects"]["count"], json!(3));

    let faulty = note(&answer, "faulty_observations").expect("a faulty_observations note");
    let message = faulty["message"].as_str().expect("a sentence");
    assert!(message.starts_with("3 of 6 observations"), "{message}");
    assert!(note(&only_good, "faulty_observations").is_none());
}

#[test]
fn on_error_takes_stop_or_keep_and_keep_changes_nothing_without_faults() {
    let server = TestServer::start();
    for (value, what) in [
        (json!("skip"), "the text 'skip'"),
        (json!(true), "true"),
        (json!("Keep"), "the text 'Keep'"),
    ] {
        let reply = server.post(
            PROBABILITY,
            &json!({"observations": six(), "on_error": value}),
        );
        let problem = reply.expect_problem(422, "invalid-option");
        assert_eq!(problem["pointer"], json!("/on_error"));
        let detail = problem["detail"].as_str().expect("detail");
        assert!(
            detail.contains("\"keep\"") && detail.contains("\"stop\"") && detail.contains(what),
            "{detail}"
        );
    }
    // "stop" is the default: the same refusal whether said or not.
    let stop = server.post(
        PROBABILITY,
        &json!({"observations": six_with_faults(), "on_error": "stop"}),
    );
    let default = server.post(PROBABILITY, &json!({"observations": six_with_faults()}));
    assert_eq!(stop.status, 422);
    let strip = |mut problem: Json| {
        problem
            .as_object_mut()
            .expect("a problem")
            .remove("request_id");
        problem
            .as_object_mut()
            .expect("a problem")
            .remove("instance");
        problem
    };
    assert_eq!(strip(stop.json()), strip(default.json()));
    // Without faults, keep answers as stop does (the direct reader takes the option too).
    for batch in [six(), vec![lease_observation()]] {
        let plain = server
            .post(PROBABILITY, &json!({"observations": batch}))
            .expect(200);
        let kept = server
            .post(
                PROBABILITY,
                &json!({"observations": batch, "on_error": "keep"}),
            )
            .expect(200);
        assert_eq!(without_call(kept), without_call(plain));
    }
}

#[test]
fn a_single_faulty_observation_and_a_batch_of_faults_only_are_refused_as_with_stop() {
    let server = TestServer::start();
    let contract = Contract::public(&server);
    let mut bad = lease_observation();
    bad["sector"] = json!("mining");
    let reply = server.post(
        PROBABILITY,
        &json!({"observation": bad, "on_error": "keep"}),
    );
    let problem = reply.expect_problem(422, "unseen-level");
    assert_eq!(problem["pointer"], json!("/observation/sector"));

    let mut worse = lease_observation();
    worse["guarantor"] = json!(7);
    for batch in [vec![bad.clone()], vec![bad.clone(), worse, json!(3)]] {
        let kept = server.post(
            PROBABILITY,
            &json!({"observations": batch, "on_error": "keep"}),
        );
        assert_eq!(kept.status, 422, "{}", kept.text);
        contract.check_reply(PROBABILITY, "post", &kept, "nothing to score");
        let stopped = server.post(PROBABILITY, &json!({"observations": batch}));
        let (kept, stopped) = (kept.json(), stopped.json());
        for member in ["type", "detail", "pointer", "index", "errors"] {
            assert_eq!(kept[member], stopped[member], "{member}");
        }
        assert_eq!(
            kept["errors"].as_array().map(Vec::len),
            Some(batch.len()),
            "{kept}"
        );
    }
}

/// [`serving_a_stored_version`] with the stored 2026-02 as the shadow of the live 2026-01.
fn serving_with_a_shadow() -> TestServer {
    let (server, _) = serving_a_stored_version();
    server.set_shadow("lease-test", "2026-02").expect(200);
    server
}

fn scored_total(server: &TestServer, version: &str) -> f64 {
    let metrics = server.get("/metrics").text;
    let series =
        format!("ogive_observations_scored_total{{model=\"lease-test\",version=\"{version}\"}}");
    metrics
        .lines()
        .find(|l| l.starts_with(&series))
        .and_then(|l| l.rsplit(' ').next())
        .and_then(|v| v.parse().ok())
        .unwrap_or(0.0)
}

fn drift_window(server: &TestServer, version: &str) -> u64 {
    let monitor = server.state().monitor.as_ref().expect("monitor");
    let report = serde_json::to_value(monitor.report("lease-test", Some("2026-01"))).expect("json");
    let text = report.to_string();
    let mut found = None;
    let mut stack = vec![&report];
    while let Some(node) = stack.pop() {
        match node {
            Json::Object(map) => {
                if map.get("version") == Some(&json!(version)) {
                    if let Some(n) = map.get("window_observations").and_then(Json::as_u64) {
                        found = Some(n);
                    }
                }
                stack.extend(map.values());
            }
            Json::Array(list) => stack.extend(list),
            _ => {}
        }
    }
    found.unwrap_or_else(|| panic!("no drift window for {version}: {text}"))
}

#[test]
fn monitoring_sees_the_scored_observations_only() {
    let server = serving_with_a_shadow();
    let body = json!({"observations": six_with_faults(), "on_error": "keep"});
    let answer = server.post(PROBABILITY, &body).expect(200);
    let results = answer["results"].as_array().expect("results");
    let mut receipts = Vec::new();
    for (i, row) in results.iter().enumerate() {
        let receipt = row.get("receipt").and_then(Json::as_str);
        assert_eq!(receipt.is_some(), GOOD.contains(&i), "{row}");
        receipts.extend(receipt);
    }
    // Each receipt is the answer of its own observation: the outcome reports the probability
    // of the row that carried it.
    for (&index, receipt) in GOOD.iter().zip(&receipts) {
        let recorded = server
            .post(
                "/models/lease-test/outcomes",
                &json!({"receipt": receipt, "outcome": 1}),
            )
            .expect(200);
        assert_eq!(recorded["probability"], results[index]["probability"]);
    }
    assert_eq!(scored_total(&server, "2026-01"), 3.0);
    assert_eq!(drift_window(&server, "2026-01"), 3);
    let shadow = server.shadow_report("lease-test").expect(200);
    assert_eq!(shadow["scored"], json!(3), "{shadow}");
    assert_eq!(shadow["unscored"], json!(0), "{shadow}");
}

#[test]
fn the_stored_version_route_keeps_faults_the_same_way() {
    let server = serving_with_a_shadow();
    let contract = Contract::public(&server);
    let path = "/models/lease-test/versions/2026-02/probability";
    let body = json!({"observations": six_with_faults(), "on_error": "keep"});
    let reply = server.post(path, &body);
    assert_eq!(reply.status, 200, "{}", reply.text);
    contract.check_reply(
        "/models/{name}/versions/{version}/probability",
        "post",
        &reply,
        "a stored version with faults kept",
    );
    let answer = reply.json();
    assert_eq!(answer["version"], json!("2026-02"));
    assert!(note(&answer, "not_live").is_some());
    assert!(note(&answer, "faulty_observations").is_some());
    let results = answer["results"].as_array().expect("results");
    let batch = six_with_faults();
    for index in GOOD {
        let alone = server
            .post(path, &json!({"observation": batch[index]}))
            .expect(200);
        assert_eq!(results[index]["probability"], alone["probability"]);
        assert!(results[index]["receipt"].is_string());
    }
    for index in FAULTY {
        assert!(
            results[index]["error"]["type"].is_string(),
            "{}",
            results[index]
        );
        assert!(results[index].get("receipt").is_none());
    }
    assert_eq!(scored_total(&server, "2026-02"), 3.0 + GOOD.len() as f64);
}
