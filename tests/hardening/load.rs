//! Heavy requests and load limits over raw TCP: the work budget refuses a request before any
//! scoring, the in-flight caps answer 503 with Retry-After while they are full and admit again
//! once they are not, and a batch scored on the pool answers exactly what single requests
//! answer.

use std::time::Instant;

use serde_json::{json, Value as Json};

use crate::fixture::{lease_observation, test_settings, Server};
use crate::{address, raw_request, Raw, DEADLINE};

const PROBABILITY: &str = "/models/lease-test/probability";
const JSON: &str = "Content-Type: application/json\r\n";

fn post(server: &Server, body: &Json) -> Raw {
    raw_request(
        address(server),
        "POST",
        PROBABILITY,
        JSON,
        body.to_string().as_bytes(),
    )
}

fn batch(n: usize) -> Json {
    json!({"observations": vec![lease_observation(); n]})
}

fn problem(reply: &Raw) -> Json {
    serde_json::from_str(&reply.body).unwrap_or_else(|e| panic!("{e}: {}", reply.body))
}

/// Wait until every admission has been released (each answer written out).
fn wait_until_idle(server: &Server) {
    let deadline = Instant::now() + DEADLINE;
    while server.state().compute.observations_in_flight() > 0 {
        assert!(Instant::now() < deadline, "admissions were never released");
        std::thread::sleep(std::time::Duration::from_millis(10));
    }
}

#[test]
fn a_request_over_the_work_budget_gets_413_before_any_scoring() {
    let terms = 10; // the lease test model's coefficients, intercept included
    let mut settings = test_settings();
    settings.limits.max_work_units = 100 * terms * terms;
    let server = Server::start_with(settings, None);
    let encode = |server: &Server| {
        String::from_utf8(server.state().metrics.encode().expect("metrics")).expect("text")
    };
    let scored_before = encode(&server);
    let reply = post(&server, &batch(101));
    assert_eq!(reply.status, 413, "{}", reply.body);
    let problem = problem(&reply);
    assert_eq!(problem["type"], json!("urn:ogive:problem:work-over-budget"));
    assert_eq!(problem["limit"], json!(100 * terms * terms));
    let detail = problem["detail"].as_str().expect("detail");
    assert!(detail.contains("at most 100 observations"), "{detail}");
    // Nothing was scored: the scoring counter did not move.
    let scored_after = encode(&server);
    let count = |text: &str| -> Vec<String> {
        text.lines()
            .filter(|l| l.starts_with("ogive_observations_scored_total"))
            .map(str::to_string)
            .collect()
    };
    assert_eq!(count(&scored_before), count(&scored_after));
    // At the budget exactly, the batch is answered.
    assert_eq!(post(&server, &batch(100)).status, 200);
}

#[test]
fn observations_over_the_in_flight_limit_get_503_with_retry_after_until_released() {
    let mut settings = test_settings();
    settings.limits.max_inflight_observations = 50;
    let server = Server::start_with(settings, None);
    // Another request's observations still being scored or written out.
    let held = server.state().compute.admit(45).expect("room");
    let reply = post(&server, &batch(10));
    assert_eq!(reply.status, 503, "{}", reply.body);
    assert_eq!(reply.header("retry-after"), Some("1"));
    let problem = problem(&reply);
    assert_eq!(problem["type"], json!("urn:ogive:problem:overloaded"));
    assert_eq!(problem["limit"], json!(50));
    // Within the room left, a request is answered.
    assert_eq!(post(&server, &batch(5)).status, 200);
    drop(held);
    wait_until_idle(&server);
    assert_eq!(post(&server, &batch(10)).status, 200);
    wait_until_idle(&server);
}

#[test]
fn body_bytes_over_the_in_flight_limit_get_503_with_retry_after() {
    let mut settings = test_settings();
    settings.limits.max_inflight_body_bytes = 64 * 1024;
    let server = Server::start_with(settings, None);
    let held = server
        .state()
        .compute
        .reserve_body(60 * 1024)
        .expect("room");
    // About 10 KB of body: over the 4 KiB left.
    let reply = post(&server, &batch(100));
    assert_eq!(
        reply.status,
        503,
        "{}",
        &reply.body[..reply.body.len().min(300)]
    );
    assert_eq!(reply.header("retry-after"), Some("1"));
    assert_eq!(
        problem(&reply)["type"],
        json!("urn:ogive:problem:overloaded")
    );
    drop(held);
    assert_eq!(post(&server, &batch(100)).status, 200);
    assert_eq!(server.state().compute.body_bytes_in_flight(), 0);
}

#[test]
fn a_batch_scored_on_the_pool_answers_what_single_requests_answer() {
    let server = Server::start_with(test_settings(), None);
    let mut observations = Vec::new();
    for i in 0..400u32 {
        let mut o = lease_observation();
        o["years_trading"] = json!(1.0 + f64::from(i) * 0.05);
        o["sector"] = json!(["retail", "construction", "transport", "services"][i as usize % 4]);
        observations.push(o);
    }
    let body = json!({ "observations": observations });
    // Well over the inline size: this batch is parsed and scored on the pool.
    assert!(body.to_string().len() > ogive::service::compute::INLINE_BODY_BYTES);
    let reply = post(&server, &body);
    assert_eq!(reply.status, 200, "{}", reply.body);
    let answer = problem(&reply);
    let results = answer["results"].as_array().expect("results");
    assert_eq!(results.len(), 400);
    for i in [0usize, 1, 137, 399] {
        let single = post(&server, &json!({"observation": observations[i]}));
        let single = problem(&single);
        assert_eq!(
            results[i]["probability"], single["probability"],
            "observation {i}"
        );
        assert_eq!(results[i]["effects"], single["effects"], "observation {i}");
        assert_eq!(
            results[i]["interval"], single["interval"],
            "observation {i}"
        );
    }
    wait_until_idle(&server);
}
