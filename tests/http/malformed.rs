//! The catalogue of malformed requests (`catalogue.rs`) sent through a client library: each
//! answer must carry its case's status, problem type and field.

use serde_json::{json, Value as Json};

use crate::catalogue::{catalogue, PROBABILITY};
use crate::support::http_models::lease_observation;
use crate::support::server::TestServer;

#[test]
fn every_malformed_request_gets_its_problem_details() {
    let server = TestServer::start();
    let cases = catalogue();
    assert!(cases.len() >= 30, "the catalogue has {} cases", cases.len());
    let mut failures = Vec::new();
    for case in &cases {
        let headers: Vec<(&str, &str)> =
            case.headers.iter().map(|(n, v)| (*n, v.as_str())).collect();
        let reply = server.send(case.method, &case.path, &headers, case.body.as_deref());
        if let Err(wrong) = case.check(reply.status, reply.header("content-type"), &reply.text) {
            failures.push(wrong);
        }
    }
    assert!(
        failures.is_empty(),
        "{} of {} cases wrong:\n{}",
        failures.len(),
        cases.len(),
        failures.join("\n")
    );
}

#[test]
fn a_faulty_batch_names_the_first_index_and_lists_every_fault() {
    let server = TestServer::start();
    let good = lease_observation();
    let mut batch: Vec<Json> = (0..6).map(|_| good.clone()).collect();
    batch[3]["sector"] = json!("mining");
    batch[5]["guarantor"] = json!(7);
    let reply = server.post(PROBABILITY, &json!({"observations": batch}));
    let problem = reply.json();
    assert_eq!(problem["index"], json!(3));
    let errors = problem["errors"].as_array().expect("errors listed");
    assert_eq!(errors.len(), 2);
    assert_eq!(errors[1]["index"], json!(5));
    assert_eq!(errors[1]["pointer"], json!("/observations/5/guarantor"));
    assert_eq!(errors[1]["type"], json!("urn:ogive:problem:not-binary"));
}

#[test]
fn a_405_names_the_allowed_method() {
    let server = TestServer::start();
    let reply = server.get(PROBABILITY);
    assert_eq!(reply.status, 405);
    assert_eq!(reply.header("allow"), Some("POST"));
    let reply = server.send("POST", "/models", &[], Some(b"{}"));
    assert_eq!(reply.header("allow"), Some("GET"));
}

#[test]
fn malformed_json_names_line_and_column() {
    let server = TestServer::start();
    let reply = server.post_raw(PROBABILITY, b"{\n  \"observation\": {,}\n}");
    let problem = reply.json();
    assert_eq!(problem["line"], json!(2));
    assert_eq!(problem["column"], json!(19));
}
