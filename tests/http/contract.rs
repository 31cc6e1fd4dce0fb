//! The served OpenAPI document is kept true: live answers of every route, good and bad, are
//! validated against the schemas it declares (JSON Schema 2020-12, by the `jsonschema` crate),
//! and the requests the tests send as valid are valid under the per-model request schemas.

use serde_json::{json, Value as Json};

use crate::support::contract::Contract;
use crate::support::http_models::lease_observation;
use crate::support::server::TestServer;

/// The JSON Pointers of every schema property, and every parameter, that has no description
/// under `node`.
fn undescribed(node: &Json, at: &str, out: &mut Vec<String>) {
    match node {
        Json::Object(map) => {
            if let Some(Json::Object(properties)) = map.get("properties") {
                for (name, property) in properties {
                    if property
                        .get("description")
                        .and_then(Json::as_str)
                        .is_none_or(str::is_empty)
                    {
                        out.push(format!("{at}/properties/{name}"));
                    }
                }
            }
            if let Some(Json::Array(parameters)) = map.get("parameters") {
                for (i, parameter) in parameters.iter().enumerate() {
                    if parameter
                        .get("description")
                        .and_then(Json::as_str)
                        .is_none_or(str::is_empty)
                    {
                        out.push(format!("{at}/parameters/{i} ({})", parameter["name"]));
                    }
                }
            }
            for (key, value) in map {
                undescribed(
                    value,
                    &format!("{at}/{}", key.replace('~', "~0").replace('/', "~1")),
                    out,
                );
            }
        }
        Json::Array(items) => {
            for (i, item) in items.iter().enumerate() {
                undescribed(item, &format!("{at}/{i}"), out);
            }
        }
        _ => {}
    }
}

#[test]
fn every_request_option_and_answer_field_is_described() {
    let base: Json =
        serde_json::from_str(include_str!("../../src/service/openapi.json")).expect("the document");
    let server = TestServer::start();
    let served = server.get("/openapi.json").json();
    for (what, doc) in [("openapi.json", &base), ("the served document", &served)] {
        let mut missing = Vec::new();
        undescribed(doc, "#", &mut missing);
        assert!(missing.is_empty(), "{what}: no description at {missing:#?}");
    }
    // The walk itself finds an undescribed property.
    let mut missing = Vec::new();
    undescribed(
        &json!({"properties": {"x": {"type": "number"}}}),
        "#",
        &mut missing,
    );
    assert_eq!(missing, ["#/properties/x"]);
}

#[test]
fn live_answers_match_the_served_document() {
    let server = TestServer::start();
    let contract = Contract::public(&server);
    let get = |path: &str, template: &str, what: &str| {
        contract.check_reply(template, "get", &server.get(path), what);
    };
    get("/livez", "/livez", "liveness");
    get("/readyz", "/readyz", "readiness");
    get("/models", "/models", "model list");
    get(
        "/models/lease-test",
        "/models/lease-test",
        "model description",
    );
    get(
        "/models/plain-test",
        "/models/plain-test",
        "model description without covariance",
    );
    for query in [
        "over=years_trading",
        "over=sector&guarantor=1",
        "over=guarantor",
        "over=prior_arrears&from=-3&to=4",
        "over=years_trading&points=1",
        "over=years_trading&points=x",
    ] {
        get(
            &format!("/models/lease-test/curve?{query}"),
            "/models/lease-test/curve",
            query,
        );
    }
    get(
        "/models/plain-test/curve?over=income",
        "/models/plain-test/curve",
        "curve without covariance",
    );

    let mut outside = lease_observation();
    outside["annual_revenue"] = json!(9000.0);
    let bodies = [
        json!({"observation": lease_observation()}),
        json!({"observation": outside, "elasticities": true}),
        json!({"observation": lease_observation(), "effects": false, "intervals": false, "contributions": false}),
        json!({"observations": [lease_observation(), outside], "average_effects": true, "at_means": true}),
        json!({"observations": [lease_observation()], "average_effects": true, "intervals": false}),
    ];
    let request_schema = "ProbabilityRequest.lease-test";
    for body in &bodies {
        contract.check(request_schema, body, "a valid request");
        let reply = server.post("/models/lease-test/probability", body);
        assert_eq!(reply.status, 200);
        contract.check_reply(
            "/models/lease-test/probability",
            "post",
            &reply,
            &body.to_string(),
        );
    }
    let plain = server.post(
        "/models/plain-test/probability",
        &json!({"observations": [{"income": 10, "owner": 0}], "at_means": true}),
    );
    contract.check_reply(
        "/models/lease-test/probability",
        "post",
        &plain,
        "no covariance",
    );
    for bad in [
        json!({"observation": {"annual_revenue": 1}}),
        json!({"observations": [lease_observation(), {"sector": 1}]}),
        json!({"nothing": true}),
    ] {
        let reply = server.post("/models/lease-test/probability", &bad);
        assert_eq!(reply.status, 422);
        contract.check_reply(
            "/models/lease-test/probability",
            "post",
            &reply,
            &bad.to_string(),
        );
        let validator = contract.validator(request_schema);
        assert!(!validator.is_valid(&bad), "the document accepts {bad}");
    }
    let reply = server.post_raw("/models/lease-test/probability", b"{");
    contract.check_reply(
        "/models/lease-test/probability",
        "post",
        &reply,
        "malformed JSON",
    );
    let reply = server.send("PUT", "/models", &[], None);
    contract.check_reply("/models", "get", &reply, "405 under default");
    let version = "/models/{name}/versions/{version}/probability";
    let by_label = server.post(
        "/models/lease-test/versions/2026-01/probability",
        &bodies[3],
    );
    assert_eq!(by_label.status, 200);
    contract.check_reply(version, "post", &by_label, "the live version by label");
    let missing = server.post("/models/lease-test/versions/0.9/probability", &bodies[0]);
    assert_eq!(missing.status, 404);
    contract.check_reply(version, "post", &missing, "a version not stored");
    for path in ["/models", "/models/lease-test"] {
        let tag = server.get(path).header("etag").expect("etag").to_string();
        let cached = server.send("GET", path, &[("If-None-Match", &tag)], None);
        assert_eq!(cached.status, 304);
        contract.check_reply(path, "get", &cached, "not modified");
    }
}

#[test]
fn the_document_rejects_what_the_service_rejects() {
    let server = TestServer::start();
    let contract = Contract::public(&server);
    let validator = contract.validator("ProbabilityRequest.lease-test");
    let mut cases = Vec::new();
    for (key, value) in [
        ("guarantor", json!(2)),
        ("prior_arrears", json!(1.5)),
        ("annual_revenue", json!(0)),
        ("annual_revenue", json!(2e12)),
        ("sector", json!("mining")),
        ("years_trading", json!("3")),
    ] {
        let mut o = lease_observation();
        o[key] = value;
        cases.push(json!({"observation": o}));
    }
    cases.push(json!({"observation": lease_observation(), "level": 1}));
    cases.push(json!({"observation": lease_observation(), "observations": [lease_observation()]}));
    for body in cases {
        assert!(!validator.is_valid(&body), "the document accepts {body}");
        let reply = server.post("/models/lease-test/probability", &body);
        assert_eq!(reply.status, 422, "the service accepts {body}");
    }
}

#[test]
fn every_route_that_reads_a_body_documents_its_408_answer() {
    // A body that stops arriving is answered 408 (tests/hardening.rs); each public operation
    // that takes one says so.
    for (name, text) in [("public", include_str!("../../src/service/openapi.json"))] {
        let document: Json = serde_json::from_str(text).expect("the document");
        let mut with_body = 0;
        for (path, item) in document["paths"].as_object().expect("paths") {
            for (method, operation) in item.as_object().expect("a path item") {
                if operation.get("requestBody").is_none() {
                    continue;
                }
                with_body += 1;
                assert!(
                    operation["responses"].get("408").is_some(),
                    "{name} document: {method} {path} takes a body but documents no 408"
                );
            }
        }
        assert!(with_body > 0, "{name} document: no operation takes a body");
    }
}

/// Send `head` then `sent` to the admin listener of `server` and read until it closes (or 10 s).
fn admin_raw(server: &TestServer, head: &str, sent: &[u8]) -> String {
    use std::io::{Read, Write};
    let addr = server.admin_addr.expect("an admin listener");
    let mut stream = std::net::TcpStream::connect(addr).expect("connect");
    stream
        .set_read_timeout(Some(std::time::Duration::from_secs(10)))
        .expect("timeout");
    stream.write_all(head.as_bytes()).expect("head");
    stream.write_all(sent).expect("body");
    let mut answer = Vec::new();
    let _ = stream.read_to_end(&mut answer);
    String::from_utf8_lossy(&answer).into_owned()
}

#[test]
fn every_admin_operation_documents_the_body_refusals_it_gives() {
    let mut settings = crate::support::server::test_settings();
    settings.limits.body_timeout_ms = 300;
    let server = TestServer::start_with(settings);
    let contract = Contract::admin(&server);
    let bearer = format!("Bearer {}", crate::support::server::TOKEN);
    let operations = [
        (
            "PUT",
            "/models/{name}/versions/{version}",
            "/models/lease-test/versions/2026-09",
        ),
        ("POST", "/models/{name}/live", "/models/lease-test/live"),
        (
            "POST",
            "/models/{name}/rollback",
            "/models/lease-test/rollback",
        ),
        ("PUT", "/models/{name}/shadow", "/models/lease-test/shadow"),
    ];
    let large = vec![b' '; 600 * 1024];
    for (method, template, path) in operations {
        let url = format!("{}{path}", server.admin);
        let json = [
            ("Authorization", bearer.as_str()),
            ("Content-Type", "application/json"),
        ];
        let text = [
            ("Authorization", bearer.as_str()),
            ("Content-Type", "text/plain"),
        ];
        let mut cases: Vec<(&str, u16, crate::support::server::Reply)> = vec![
            (
                "a body of another type",
                415,
                server.send_to(&url, method, &text, Some(b"{}")),
            ),
            (
                "a body over the limit",
                413,
                server.send_to(&url, method, &json, Some(&large)),
            ),
        ];
        if template != "/models/{name}/versions/{version}" {
            // A model file's syntax errors are its validator's (422 invalid-model-file).
            let malformed = server.send_to(&url, method, &json, Some(b"{\"version\": }"));
            cases.push(("malformed JSON", 400, malformed));
        } else {
            let query = format!("{url}?colour=red");
            let reply = server.send_to(&query, method, &json, Some(b"{}"));
            cases.push(("an unknown query parameter", 400, reply));
        }
        if template != "/models/{name}/rollback" {
            cases.push((
                "an empty body",
                400,
                server.send_to(&url, method, &json, Some(b"")),
            ));
        }
        for (what, status, reply) in &cases {
            assert_eq!(
                reply.status, *status,
                "{method} {path}, {what}: {}",
                reply.text
            );
            let operation = &contract.document()["paths"][template][method.to_lowercase()];
            assert!(
                operation["responses"][status.to_string()].is_object(),
                "{method} {template} answers {what} {status}, left under default"
            );
            contract.check_reply(template, &method.to_lowercase(), reply, what);
        }
        // A body that stops arriving.
        let head = format!(
            "{method} {path} HTTP/1.1\r\nHost: x\r\nAuthorization: {bearer}\r\nContent-Type: application/json\r\nContent-Length: 100\r\n\r\n"
        );
        let answer = admin_raw(&server, &head, b"{\"version\"");
        assert!(
            answer.starts_with("HTTP/1.1 408"),
            "{method} {path}: {answer}"
        );
        let operation = &contract.document()["paths"][template][method.to_lowercase()];
        assert!(
            operation["responses"]["408"].is_object(),
            "{method} {template}: no 408"
        );
    }
    // No operation leaves these under default, nor says it gives them when it does not.
    for (path, item) in contract.document()["paths"].as_object().expect("paths") {
        for (method, operation) in item.as_object().expect("a path item") {
            let responses = &operation["responses"];
            let default = responses["default"]["description"].as_str().unwrap_or("");
            for status in ["400", "408", "413", "415"] {
                assert!(
                    !default.contains(status),
                    "{method} {path}: {status} under default"
                );
                let takes_body = operation.get("requestBody").is_some();
                assert_eq!(
                    responses.get(status).is_some(),
                    takes_body,
                    "{method} {path}: {status} documented {} a body",
                    if takes_body { "without" } else { "with no" }
                );
            }
        }
    }
}
