//! What a browser dashboard needs from the public listener: CORS for the origins on the
//! allow-list only (Fetch Standard, "CORS protocol"), and entity tags on the read routes so
//! that polling costs a 304 until something changes (RFC 9110 §8.8.3, §13.1.2).

use std::sync::Arc;

use serde_json::json;

use ogive::service::CorsOrigins;

use crate::support::http_models::{lease_file, model, serving_a_stored_version};
use crate::support::server::{test_settings, TestServer};

const DASHBOARD: &str = "https://dashboard.example.org";

fn server_allowing(origins: &[&str]) -> TestServer {
    let mut settings = test_settings();
    settings.cors_origins = CorsOrigins::new(origins).expect("origins");
    TestServer::start_with(settings)
}

fn preflight(server: &TestServer, path: &str, origin: &str) -> crate::support::server::Reply {
    server.send(
        "OPTIONS",
        path,
        &[
            ("Origin", origin),
            ("Access-Control-Request-Method", "POST"),
            ("Access-Control-Request-Headers", "content-type"),
        ],
        None,
    )
}

#[test]
fn a_listed_origin_gets_its_preflight_answered() {
    let server = server_allowing(&[DASHBOARD, "http://127.0.0.1:3000"]);
    let answer = preflight(&server, "/models/lease-test/probability", DASHBOARD);
    assert_eq!(answer.status, 204, "{}", answer.text);
    assert_eq!(
        answer.header("access-control-allow-origin"),
        Some(DASHBOARD)
    );
    let methods = answer
        .header("access-control-allow-methods")
        .expect("methods");
    assert!(
        methods.contains("POST") && methods.contains("GET"),
        "{methods}"
    );
    let headers = answer
        .header("access-control-allow-headers")
        .expect("headers");
    assert!(
        headers.to_ascii_lowercase().contains("content-type"),
        "{headers}"
    );
    assert!(answer.header("access-control-max-age").is_some());
    assert!(answer.header("x-request-id").is_some());
    assert!(answer.header("access-control-allow-credentials").is_none());
}

#[test]
fn a_listed_origin_can_read_answers_and_their_etags() {
    let server = server_allowing(&[DASHBOARD]);
    let answer = server.send(
        "POST",
        "/models/lease-test/probability",
        &[("Origin", DASHBOARD), ("Content-Type", "application/json")],
        Some(
            json!({"observation": crate::support::http_models::lease_observation()})
                .to_string()
                .as_bytes(),
        ),
    );
    assert_eq!(answer.status, 200, "{}", answer.text);
    assert_eq!(
        answer.header("access-control-allow-origin"),
        Some(DASHBOARD)
    );
    let exposed = answer
        .header("access-control-expose-headers")
        .expect("exposed");
    assert!(
        exposed.contains("ETag") && exposed.contains("X-Request-Id"),
        "{exposed}"
    );
    assert_eq!(answer.header("vary"), Some("Origin"));
    // An error answer is readable too, so a page can show the problem's detail.
    let refused = server.send(
        "GET",
        "/models/no-such-model",
        &[("Origin", DASHBOARD)],
        None,
    );
    assert_eq!(refused.status, 404);
    assert_eq!(
        refused.header("access-control-allow-origin"),
        Some(DASHBOARD)
    );
}

#[test]
fn an_unlisted_origin_gets_no_cors_header_at_all() {
    let server = server_allowing(&[DASHBOARD]);
    for origin in [
        "https://evil.example",
        "https://dashboard.example.org.evil",
        "null",
    ] {
        let answer = preflight(&server, "/models/lease-test/probability", origin);
        assert_eq!(answer.status, 405, "{origin}: {}", answer.text);
        assert!(
            !answer
                .headers
                .iter()
                .any(|(n, _)| n.starts_with("access-control-")),
            "{origin}: {:?}",
            answer.headers
        );
        let read = server.send("GET", "/models", &[("Origin", origin)], None);
        assert_eq!(read.status, 200);
        assert!(
            read.header("access-control-allow-origin").is_none(),
            "{origin}"
        );
        assert_eq!(read.header("vary"), Some("Origin"));
    }
}

#[test]
fn without_a_list_the_listener_answers_no_cross_origin_call() {
    let server = TestServer::start();
    let answer = preflight(&server, "/models/lease-test/probability", DASHBOARD);
    assert_eq!(answer.status, 405);
    assert!(!answer
        .headers
        .iter()
        .any(|(n, _)| n.starts_with("access-control-")));
    let read = server.send("GET", "/models", &[("Origin", DASHBOARD)], None);
    assert!(read.header("access-control-allow-origin").is_none());
    assert!(read.header("vary").is_none());
}

#[test]
fn model_listings_carry_strong_etags_of_their_bytes() {
    let server = TestServer::start();
    for path in ["/models", "/models/lease-test"] {
        let first = server.get(path);
        assert_eq!(first.status, 200);
        let tag = first.header("etag").expect("etag").to_string();
        assert!(
            !tag.starts_with("W/") && tag.starts_with('"') && tag.ends_with('"'),
            "{tag}"
        );
        assert_eq!(
            server.get(path).header("etag"),
            Some(tag.as_str()),
            "{path}: stable"
        );
        assert_eq!(first.header("cache-control"), Some("no-cache"));
        let cached = server.send("GET", path, &[("If-None-Match", &tag)], None);
        assert_eq!(cached.status, 304, "{path}");
        assert_eq!(cached.text, "");
        assert_eq!(cached.header("etag"), Some(tag.as_str()));
        let stale = server.send("GET", path, &[("If-None-Match", "\"0000\"")], None);
        assert_eq!(stale.status, 200, "{path}");
        assert_eq!(stale.text, first.text);
    }
    assert_ne!(
        server.get("/models").header("etag"),
        server.get("/models/lease-test").header("etag")
    );
}

#[test]
fn a_hot_swap_changes_the_model_etags() {
    let server = TestServer::start();
    let list = server
        .get("/models")
        .header("etag")
        .expect("etag")
        .to_string();
    let detail = server
        .get("/models/lease-test")
        .header("etag")
        .expect("etag")
        .to_string();
    let plain = server
        .get("/models/plain-test")
        .header("etag")
        .expect("etag")
        .to_string();
    let mut file = lease_file();
    file["version"] = json!("2026-02");
    server.state().registry.set_live(Arc::new(model(&file)));
    for (path, tag) in [("/models", &list), ("/models/lease-test", &detail)] {
        let after = server.send("GET", path, &[("If-None-Match", tag)], None);
        assert_eq!(after.status, 200, "{path}");
        assert_ne!(after.header("etag"), Some(tag.as_str()), "{path}");
    }
    let untouched = server.send(
        "GET",
        "/models/plain-test",
        &[("If-None-Match", &plain)],
        None,
    );
    assert_eq!(untouched.status, 304, "another model's tag stays");
}

fn metric(text: &str, prefix: &str) -> Option<f64> {
    text.lines()
        .find(|l| l.starts_with(prefix))
        .and_then(|l| l.rsplit(' ').next())
        .and_then(|v| v.parse().ok())
}

#[test]
fn a_stored_version_that_is_not_live_answers_and_says_so() {
    let (server, stored) = serving_a_stored_version();
    let observation = crate::support::http_models::lease_observation();
    let body = json!({"observation": observation});
    let answer = server.post("/models/lease-test/versions/2026-02/probability", &body);
    assert_eq!(answer.status, 200, "{}", answer.text);
    let answer = answer.json();
    assert_eq!(answer["version"], json!("2026-02"));
    let notes = answer["notes"].as_array().expect("notes");
    let note = notes
        .iter()
        .find(|n| n["code"] == json!("not_live"))
        .unwrap_or_else(|| panic!("no not_live note: {notes:?}"));
    let message = note["message"].as_str().expect("message");
    assert!(
        message.contains("'2026-02'") && message.contains("'2026-01'"),
        "{message}"
    );

    // The stored version's own answer, as the engine computes it (identity, 4e-16 relative as
    // in routes.rs): the live version's differs.
    let mut values = Vec::new();
    stored
        .parse_observation(observation.as_object().expect("object"), &mut values)
        .expect("valid");
    let options = ogive::engine::Options::new(0.95).expect("level");
    let expected = ogive::engine::Scorer::new(&stored)
        .score(&stored, &values, &options)
        .probability;
    let p = answer["probability"].as_f64().expect("p");
    assert!(
        (p - expected).abs() <= 4e-16 * expected,
        "{p} vs {expected}"
    );
    crate::support::contract::Contract::public(&server).check_reply(
        "/models/{name}/versions/{version}/probability",
        "post",
        &server.post("/models/lease-test/versions/2026-02/probability", &body),
        "a stored version that is not live",
    );
    let live = server.post("/models/lease-test/probability", &body).json();
    assert_eq!(live["version"], json!("2026-01"));
    assert_ne!(live["probability"], answer["probability"]);
    assert!(!live["notes"]
        .as_array()
        .expect("notes")
        .iter()
        .any(|n| n["code"] == json!("not_live")));

    // Its receipt names the stored version: the outcome counts toward 2026-02.
    let receipt = answer["receipt"].as_str().expect("a receipt");
    let recorded = server.post(
        "/models/lease-test/outcomes",
        &json!({"receipt": receipt, "outcome": 1}),
    );
    assert_eq!(recorded.status, 200, "{}", recorded.text);
    assert_eq!(recorded.json()["version"], json!("2026-02"));
}

#[test]
fn a_stored_version_counts_in_no_live_series() {
    let (server, _) = serving_a_stored_version();
    let mut far = crate::support::http_models::lease_observation();
    far["years_trading"] = json!(500.0);
    let batch = json!({"observations": [crate::support::http_models::lease_observation(), far]});
    let answer = server.post("/models/lease-test/versions/2026-02/probability", &batch);
    assert_eq!(answer.status, 200, "{}", answer.text);
    let results = answer.json()["results"].clone();
    assert!(results[1]["receipt"].is_string(), "{results}");
    assert!(results[1]["warnings"]
        .as_array()
        .is_some_and(|w| !w.is_empty()));
    let metrics = server.get("/metrics").text;
    assert_eq!(
        metric(
            &metrics,
            "ogive_observations_scored_total{model=\"lease-test\",version=\"2026-02\"}"
        ),
        Some(2.0),
        "{metrics}"
    );
    for live_series in [
        "ogive_predicted_probability_count{model=\"lease-test\"}",
        "ogive_out_of_range_total{model=\"lease-test\",covariate=\"years_trading\"}",
    ] {
        assert_eq!(
            metric(&metrics, live_series).unwrap_or(0.0),
            0.0,
            "{live_series}"
        );
    }
    let monitor = server.state().monitor.as_ref().expect("monitor");
    let report = serde_json::to_value(monitor.report("lease-test", Some("2026-01"))).expect("json");
    let text = report.to_string();
    assert!(
        !text.contains("2026-02"),
        "no drift window for the stored version: {text}"
    );
}

#[test]
fn the_live_version_by_label_is_the_live_answer() {
    let (server, _) = serving_a_stored_version();
    let body = json!({"observation": crate::support::http_models::lease_observation(), "contributions": true});
    let by_label = server
        .post("/models/lease-test/versions/2026-01/probability", &body)
        .json();
    let live = server.post("/models/lease-test/probability", &body).json();
    for field in [
        "version",
        "probability",
        "interval",
        "effects",
        "contributions",
        "notes",
    ] {
        assert_eq!(by_label[field], live[field], "{field}");
    }
}

#[test]
fn a_version_that_is_not_stored_or_not_a_label_is_refused() {
    let (server, _) = serving_a_stored_version();
    let body = json!({"observation": crate::support::http_models::lease_observation()});
    let missing = server.post("/models/lease-test/versions/2027-01/probability", &body);
    assert_eq!(missing.status, 404, "{}", missing.text);
    let missing = missing.json();
    assert_eq!(missing["type"], json!("urn:ogive:problem:unknown-version"));
    assert_eq!(missing["stored"], json!(["2026-01", "2026-02"]));
    let bad = server.post("/models/lease-test/versions/..%2Fx/probability", &body);
    assert_eq!(bad.status, 422, "{}", bad.text);
    assert_eq!(bad.json()["type"], json!("urn:ogive:problem:invalid-label"));
    let unknown = server.post("/models/no-such/versions/2026-01/probability", &body);
    assert_eq!(unknown.status, 404);
    assert_eq!(
        unknown.json()["type"],
        json!("urn:ogive:problem:unknown-model")
    );
    let get = server.get("/models/lease-test/versions/2026-02/probability");
    assert_eq!(get.status, 405);
    // A directory that does not hold the version: the refusal lists what it holds.
    let plain = TestServer::start();
    let refused = plain.post("/models/lease-test/versions/2026-02/probability", &body);
    assert_eq!(refused.status, 404, "{}", refused.text);
    let refused = refused.json();
    assert_eq!(refused["stored"], json!(["2026-01"]), "{refused}");
    assert!(refused["detail"]
        .as_str()
        .is_some_and(|d| d.contains("'2026-02'")));
}

#[test]
fn a_stored_version_whose_bytes_changed_is_refused() {
    let (server, _) = serving_a_stored_version();
    let path = server.root().join("lease-test/versions/2026-02.json");
    let bytes = std::fs::read(&path).expect("read");
    let record = json!({"when": "2026-01-01T00:00:00.000Z", "action": "upload", "from": null,
        "to": "2026-02", "who": "test", "reason": null,
        "sha256": ogive::registry::store::sha256_hex(b"other bytes")});
    std::fs::write(
        server.root().join("lease-test/history.jsonl"),
        format!("{record}\n"),
    )
    .expect("history");
    assert!(!bytes.is_empty());
    let body = json!({"observation": crate::support::http_models::lease_observation()});
    let refused = server.post("/models/lease-test/versions/2026-02/probability", &body);
    assert_eq!(refused.status, 409, "{}", refused.text);
    assert_eq!(
        refused.json()["type"],
        json!("urn:ogive:problem:version-changed")
    );
}
