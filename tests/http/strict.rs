//! Strict reading of request bodies and the echo rule, one regression test per guarded
//! behaviour: a repeated key is refused wherever it stands, an empty or byte-order-marked or
//! compressed body is refused with its own words, echoed text is cut with its length stated,
//! echoed numbers read back as the same double, and a missing-covariate answer names every
//! missing covariate.

use serde_json::{json, Value as Json};

use crate::support::http_models::lease_observation;
use crate::support::server::TestServer;

const PROBABILITY: &str = "/models/lease-test/probability";

fn problem_of(server: &TestServer, body: &[u8], headers: &[(&str, &str)]) -> (u16, Json) {
    let reply = server.send("POST", PROBABILITY, headers, Some(body));
    (reply.status, reply.json())
}

fn post(server: &TestServer, body: &[u8]) -> (u16, Json) {
    problem_of(server, body, &[("Content-Type", "application/json")])
}

#[test]
fn a_key_repeated_at_the_top_level_is_refused_naming_the_key_and_its_pointer() {
    let server = TestServer::start();
    let observation = lease_observation().to_string();
    let body = format!(r#"{{"observation": {observation}, "effects": true, "effects": false}}"#);
    let (status, problem) = post(&server, body.as_bytes());
    assert_eq!(status, 422, "{problem}");
    assert_eq!(problem["type"], json!("urn:ogive:problem:duplicate-key"));
    assert_eq!(problem["pointer"], json!("/effects"));
    let detail = problem["detail"].as_str().expect("detail");
    assert!(detail.contains("'effects'"), "{detail}");
}

#[test]
fn a_key_repeated_deep_in_a_batch_is_refused_with_the_pointer_of_the_second_occurrence() {
    let server = TestServer::start();
    let good = lease_observation().to_string();
    // The third observation sends years_trading twice; serde_json alone would keep the last.
    let twice = r#"{"annual_revenue": 450.0, "years_trading": 6.5, "prior_arrears": 1,
                    "guarantor": 1, "sector": "construction", "years_trading": 60}"#;
    let body = format!(r#"{{"observations": [{good}, {good}, {twice}]}}"#);
    let (status, problem) = post(&server, body.as_bytes());
    assert_eq!(status, 422, "{problem}");
    assert_eq!(problem["type"], json!("urn:ogive:problem:duplicate-key"));
    assert_eq!(problem["pointer"], json!("/observations/2/years_trading"));
    let detail = problem["detail"].as_str().expect("detail");
    assert!(detail.contains("/observations/2"), "{detail}");
}

#[test]
fn a_key_that_needs_pointer_escaping_is_escaped_in_the_duplicate_pointer() {
    let server = TestServer::start();
    let (status, problem) = post(&server, br#"{"observation": {"a/b": 1, "a/b": 2}}"#);
    assert_eq!(status, 422, "{problem}");
    assert_eq!(problem["pointer"], json!("/observation/a~1b"));
}

#[test]
fn an_empty_body_says_the_body_is_empty() {
    let server = TestServer::start();
    for body in [&b""[..], b"  \r\n "] {
        let (status, problem) = post(&server, body);
        assert_eq!(status, 400, "{problem}");
        assert_eq!(problem["type"], json!("urn:ogive:problem:malformed-json"));
        let detail = problem["detail"].as_str().expect("detail");
        assert!(detail.starts_with("the body is empty"), "{detail}");
    }
}

#[test]
fn a_body_with_a_byte_order_mark_gets_415_naming_the_mark() {
    let server = TestServer::start();
    let mut body = b"\xEF\xBB\xBF".to_vec();
    body.extend_from_slice(
        json!({"observation": lease_observation()})
            .to_string()
            .as_bytes(),
    );
    let (status, problem) = post(&server, &body);
    assert_eq!(status, 415, "{problem}");
    assert_eq!(
        problem["type"],
        json!("urn:ogive:problem:unsupported-media-type")
    );
    assert!(problem["detail"]
        .as_str()
        .expect("detail")
        .contains("UTF-8 byte-order mark"));
}

#[test]
fn a_compressed_body_gets_415_and_is_never_inflated() {
    let server = TestServer::start();
    // The bytes are not even gzip: the refusal comes from the header, before any reading.
    let body = json!({"observation": lease_observation()}).to_string();
    for coding in ["gzip", "br", "identity, gzip"] {
        let (status, problem) = problem_of(
            &server,
            body.as_bytes(),
            &[
                ("Content-Type", "application/json"),
                ("Content-Encoding", coding),
            ],
        );
        assert_eq!(status, 415, "{coding}: {problem}");
        assert!(problem["detail"]
            .as_str()
            .expect("detail")
            .contains("Content-Encoding"));
    }
    let (status, _) = problem_of(
        &server,
        body.as_bytes(),
        &[
            ("Content-Type", "application/json"),
            ("Content-Encoding", "identity"),
        ],
    );
    assert_eq!(status, 200, "identity is no encoding");
}

#[test]
fn a_long_unknown_field_is_echoed_cut_with_an_ellipsis_and_its_length() {
    let server = TestServer::start();
    let long = "x".repeat(5_000);
    let mut observation = lease_observation();
    observation[long.as_str()] = json!(1);
    let reply = server.post(PROBABILITY, &json!({ "observation": observation }));
    let problem = reply.json();
    assert_eq!(problem["type"], json!("urn:ogive:problem:unknown-field"));
    let detail = problem["detail"].as_str().expect("detail");
    assert!(
        detail.contains(&format!("'{}…' (5000 characters)", "x".repeat(64))),
        "{detail}"
    );
    assert!(detail.len() < 300, "the detail is {} bytes", detail.len());
    // The pointer locates the field exactly: it is not an echo.
    assert_eq!(problem["pointer"], json!(format!("/observation/{long}")));
}

#[test]
fn a_long_text_value_is_echoed_cut_with_its_length() {
    let server = TestServer::start();
    let mut observation = lease_observation();
    observation["years_trading"] = json!("9".repeat(1_000));
    let problem = server
        .post(PROBABILITY, &json!({ "observation": observation }))
        .json();
    assert_eq!(problem["type"], json!("urn:ogive:problem:not-a-number"));
    let detail = problem["detail"].as_str().expect("detail");
    assert!(detail.ends_with("…' (1000 characters)"), "{detail}");
}

#[test]
fn numbers_are_echoed_in_shortest_round_trip_form() {
    let server = TestServer::start();
    // Each value breaks a rule and is echoed; the echo must read back as the same double.
    let cases = [
        ("prior_arrears", "0.30000000000000004"),
        ("prior_arrears", "2.5e-300"),
        ("annual_revenue", "1.5e-13"),
        ("years_trading", "1.7976931348623157e308"),
    ];
    for (covariate, text) in cases {
        let mut observation = lease_observation().to_string();
        let at = observation
            .find(&format!("\"{covariate}\":"))
            .expect("covariate present");
        let value_start = at + covariate.len() + 3;
        let value_end = value_start
            + observation[value_start..]
                .find([',', '}'])
                .expect("value ends");
        observation.replace_range(value_start..value_end, text);
        let body = format!(r#"{{"observation": {observation}}}"#);
        let (status, problem) = post(&server, body.as_bytes());
        assert_eq!(status, 422, "{text}: {problem}");
        let detail = problem["detail"].as_str().expect("detail");
        // Each text above is the shortest decimal of its double (Rust prints the same digits),
        // so the echo must contain it verbatim, not a rounded or zero-padded form.
        let sent: f64 = text.parse().expect("a number");
        assert!(
            format!("{sent}") == text || format!("{sent:e}") == text,
            "{text} is a shortest form"
        );
        assert!(
            detail.contains(text),
            "{text} is not echoed as itself: {detail}"
        );
        assert!(detail.len() < 200, "{detail}");
    }
}

#[test]
fn a_missing_covariates_error_names_every_missing_covariate() {
    let server = TestServer::start();
    let observation = json!({"annual_revenue": 450.0, "guarantor": 1});
    let problem = server
        .post(PROBABILITY, &json!({ "observation": observation }))
        .json();
    assert_eq!(
        problem["type"],
        json!("urn:ogive:problem:missing-covariate")
    );
    assert_eq!(problem["pointer"], json!("/observation/years_trading"));
    assert_eq!(
        problem["missing"],
        json!(["years_trading", "prior_arrears", "sector"])
    );
    let detail = problem["detail"].as_str().expect("detail");
    for name in ["years_trading", "prior_arrears", "sector"] {
        assert!(detail.contains(name), "{detail}");
    }
}
