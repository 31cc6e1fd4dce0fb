//! The admin listener over real HTTP, on real files: every route and every refusal, the token,
//! the gate (invalid files, check cases that do not reproduce, breaking candidates with and
//! without `allow_breaking`), rollback, the history's `who`, shadow scoring and its report, the
//! served admin document, and the binary's startup with and without a token.
//!
//! Identity tests: the public listener must serve exactly what the engine computes with the
//! version it names, and the shadow report must equal the figures the test computes from the
//! engine's probabilities of both versions. The models are invented inputs
//! (`support::models`), never reference values.

mod support;

use std::io::{BufRead, BufReader};
use std::process::{Command, Stdio};
use std::sync::mpsc;
use std::time::{Duration, Instant};

use ogive::model::CovariateKind;
use ogive::monitoring::shadow::{Share, DIFFERENCE_BUCKETS};
use ogive::registry::gate::contract_changes;
use ogive::registry::lifecycle;
use serde_json::{json, Value as Json};
use support::contract::Contract;
use support::models::{
    base, bytes_of, categorical, model_bytes, numeric, place_version, replaced_covariate,
    tampered_bytes, with_covariate, without_covariate,
};
use support::server::{engine_probability, model_of, observations, seed, TestServer, TOKEN, WHO};

const NAME: &str = "uptake";

/// A deployment serving `uptake` v1 with v2 and v3 stored (same covariates).
fn three_versions(share: Share) -> TestServer {
    let dir = tempfile::tempdir().expect("a temporary directory");
    let versions: Vec<(&str, Vec<u8>)> = ["v1", "v2", "v3"]
        .iter()
        .map(|v| (*v, model_bytes(NAME, v)))
        .collect();
    seed(dir.path(), NAME, &versions, Some("v1"));
    TestServer::serve(dir, share)
}

#[test]
fn the_admin_document_refuses_the_bodies_the_routes_refuse() {
    let d = three_versions(Share::ALL);
    let contract = Contract::admin(&d);
    let promote = contract.validator("PromoteRequest");
    let long = "x".repeat(501);
    for body in [
        json!({}),
        json!({"version": 2}),
        json!({"version": "v2", "allow_breaking": "yes"}),
        json!({"version": "v2", "force": true}),
        json!({"version": "-v2"}),
        json!({"version": "v2", "reason": "tab\there"}),
        json!({"version": "v2", "reason": long}),
    ] {
        assert!(!promote.is_valid(&body), "the document accepts {body}");
        let reply = d.admin_json("POST", &format!("/models/{NAME}/live"), &body);
        assert_eq!(reply.status, 422, "{body}: {}", reply.text);
    }
    assert_eq!(d.public_version(NAME), "v1");
    let body = json!({"version": "v2", "allow_breaking": false, "reason": "a reason"});
    assert!(promote.is_valid(&body));
    d.admin_json("POST", &format!("/models/{NAME}/live"), &body)
        .expect(200);
    let shadow = contract.validator("ShadowRequest");
    for body in [
        json!({"version": "../v1"}),
        json!({"version": "v1", "share": 1}),
    ] {
        assert!(!shadow.is_valid(&body), "the document accepts {body}");
        assert_eq!(d.set_shadow_body(NAME, &body).status, 422, "{body}");
    }
    assert!(shadow.is_valid(&json!({"version": "v3"})));
}

/// The public listener answers `observation` with `version`, and the probability the engine
/// computes with that version's file.
#[track_caller]
fn assert_serves(d: &TestServer, version: &str, bytes: &[u8], observation: &Json) {
    let reply = d.post(
        &format!("/models/{NAME}/probability"),
        &json!({"observation": observation}),
    );
    let body = reply.expect(200);
    assert_eq!(body["version"], version, "{body}");
    let expected = engine_probability(&model_of(bytes), observation);
    assert_eq!(body["probability"].as_f64(), Some(expected), "{body}");
    assert_eq!(d.public_version(NAME), version);
}

fn stored_versions(d: &TestServer, name: &str) -> Vec<String> {
    let mut versions: Vec<String> = std::fs::read_dir(d.root().join(name).join("versions"))
        .map(|listing| {
            listing
                .filter_map(Result::ok)
                .filter_map(|e| e.file_name().into_string().ok())
                .filter(|n| !n.starts_with('.'))
                .collect()
        })
        .unwrap_or_default();
    versions.sort();
    versions
}

#[test]
fn every_route_refuses_a_missing_other_empty_or_wrong_token() {
    let d = three_versions(Share::ALL);
    let routes = [
        ("PUT", "/models/uptake/versions/v9"),
        ("POST", "/models/uptake/live"),
        ("POST", "/models/uptake/rollback"),
        ("GET", "/models/uptake/history"),
        ("PUT", "/models/uptake/shadow"),
        ("GET", "/models/uptake/shadow"),
        ("DELETE", "/models/uptake/shadow"),
        ("GET", "/openapi.json"),
        ("GET", "/no/such/route"),
    ];
    let wrong_tokens = [
        "Bearer wrong-token".to_string(),
        format!("Bearer {}", &TOKEN[..TOKEN.len() - 1]),
        format!("Bearer {TOKEN}x"),
        format!("Bearer {}", TOKEN.to_uppercase()),
    ];
    let basic = format!("Basic {TOKEN}");
    let mut cases: Vec<(Option<&str>, bool)> = vec![
        (None, false),
        (Some(basic.as_str()), false),
        (Some("Bearer"), true),
        (Some("Bearer "), true),
    ];
    cases.extend(wrong_tokens.iter().map(|t| (Some(t.as_str()), true)));
    let body = json!({"version": "v2"}).to_string();
    for (method, path) in routes {
        for (authorization, invalid_token) in &cases {
            let mut headers = vec![("Content-Type", "application/json")];
            if let Some(value) = authorization {
                headers.push(("Authorization", value));
            }
            let url = format!("{}{path}", d.admin);
            let reply = d.send_to(&url, method, &headers, Some(body.as_bytes()));
            let problem = reply.expect_problem(401, "unauthorized");
            assert_eq!(problem["status"], 401);
            let challenge = reply.header("www-authenticate").expect("a challenge");
            assert!(challenge.starts_with("Bearer realm="), "{challenge}");
            assert_eq!(
                challenge.contains("error=\"invalid_token\""),
                *invalid_token,
                "{method} {path} with {authorization:?}: {challenge}"
            );
            assert!(!reply.text.contains(TOKEN), "the answer echoes the token");
        }
    }
    // Nothing was changed by the refused requests.
    assert_eq!(d.public_version(NAME), "v1");
    assert_eq!(stored_versions(&d, NAME), ["v1.json", "v2.json", "v3.json"]);
    // With the token, an unknown path is a 404 and a known route answers.
    d.admin("GET", "/no/such/route", None)
        .expect_problem(404, "not-found");
    d.admin("GET", "/models/uptake/history", None).expect(200);
}

#[test]
fn uploads_are_validated_stored_byte_for_byte_and_repeatable() {
    let dir = tempfile::tempdir().expect("a temporary directory");
    let d = TestServer::serve(dir, Share::ALL);
    let contract = Contract::admin(&d);
    let template = "/models/{name}/versions/{version}";
    let v1 = model_bytes(NAME, "v1");

    let reply = d.upload(NAME, "v1", &v1, "?reason=first%20fit");
    contract.check_reply(template, "put", &reply, "the reply");
    let body = reply.expect(201);
    assert_eq!(body["novelty"], "new");
    assert_eq!(body["compared_with"], Json::Null);
    let on_disk = std::fs::read(d.root().join(NAME).join("versions").join("v1.json"))
        .expect("the stored file");
    assert_eq!(on_disk, v1, "the stored file is the uploaded bytes");

    let reply = d.upload(NAME, "v1", &v1, "");
    contract.check_reply(template, "put", &reply, "the reply");
    assert_eq!(reply.expect(200)["novelty"], "already_stored");

    let reply = d.upload(NAME, "v1", &model_bytes(NAME, "v1")[..v1.len() - 1], "");
    contract.check_reply(template, "put", &reply, "the reply");
    reply.expect_problem(409, "version-exists");

    // A model with a stored version but nothing live is not served; with nothing else served
    // the process is not ready, and says why.
    let ready = d.get("/readyz");
    assert_eq!(ready.status, 503);
    assert!(ready.text.contains("no model is served"), "{}", ready.text);
    d.get(&format!("/models/{NAME}"))
        .expect_problem(404, "unknown-model");
    let reply = d.promote(NAME, "v1", false);
    contract.check_reply("/models/{name}/live", "post", &reply, "the reply");
    let moved = reply.expect(200);
    assert_eq!(moved["from"], Json::Null);
    assert_eq!(moved["serving"], "v1");
    assert_serves(&d, "v1", &v1, &observations(1)[0]);

    let history = d
        .admin("GET", &format!("/models/{NAME}/history"), None)
        .expect(200);
    let records = history["records"].as_array().expect("records");
    assert_eq!(records[0]["action"], "upload");
    assert_eq!(records[0]["reason"], "first fit");
    assert!(records.iter().all(|r| r["who"] == WHO), "{history}");

    let reply = d.admin(
        "PUT",
        &format!("/models/{NAME}/versions/v2?allow_breaking=maybe"),
        Some(&v1),
    );
    reply.expect_problem(400, "invalid-query");
    let reply = d.admin(
        "PUT",
        &format!("/models/{NAME}/versions/v2?force=1"),
        Some(&v1),
    );
    reply.expect_problem(400, "invalid-query");
    let url = format!("{}/models/{NAME}/versions/v2", d.admin);
    let bearer = format!("Bearer {TOKEN}");
    let reply = d.send_to(
        &url,
        "PUT",
        &[("Authorization", &bearer), ("Content-Type", "text/plain")],
        Some(&model_bytes(NAME, "v2")),
    );
    reply.expect_problem(415, "unsupported-media-type");
    assert_eq!(stored_versions(&d, NAME), ["v1.json"]);
}

#[test]
fn a_file_that_fails_validation_is_refused_naming_what_is_wrong() {
    let d = three_versions(Share::ALL);
    let contract = Contract::admin(&d);
    let template = "/models/{name}/versions/{version}";

    // Check cases that do not reproduce.
    let tampered = tampered_bytes(NAME, "v4");
    let reply = d.upload(NAME, "v4", &tampered, "");
    contract.check_reply(template, "put", &reply, "the reply");
    let problem = reply.expect_problem(422, "invalid-model-file");
    assert_eq!(problem["field"], "check_cases[0].probability");
    assert_eq!(problem["pointer"], "/check_cases/0/probability");
    let file: Json = serde_json::from_slice(&tampered).expect("JSON");
    assert_eq!(problem["stored"], file["check_cases"][0]["probability"]);
    let honest = model_of(&model_bytes(NAME, "v4"));
    let computed = engine_probability(&honest, &file["check_cases"][0]["observation"]);
    assert_eq!(problem["computed"].as_f64(), Some(computed), "{problem}");
    assert!(
        problem["detail"]
            .as_str()
            .is_some_and(|d| d.contains("check_cases[0]")),
        "{problem}"
    );

    // A term naming no covariate.
    let mut file: Json = serde_json::from_slice(&model_bytes(NAME, "v4")).expect("JSON");
    file["terms"][2]["term"] = json!("tenancy");
    let reply = d.upload(NAME, "v4", file.to_string().as_bytes(), "");
    contract.check_reply(template, "put", &reply, "the reply");
    let problem = reply.expect_problem(422, "invalid-model-file");
    assert_eq!(problem["field"], "terms[2].term", "{problem}");
    assert!(problem["detail"]
        .as_str()
        .is_some_and(|d| d.contains("tenancy")));

    // Not a model file at all.
    let reply = d.upload(NAME, "v4", br#"{"name": 1}"#, "");
    contract.check_reply(template, "put", &reply, "the reply");
    reply.expect_problem(422, "invalid-model-file");
    let reply = d.upload(NAME, "v4", b"{", "");
    contract.check_reply(template, "put", &reply, "the reply");
    let problem = reply.expect_problem(422, "invalid-model-file");
    assert_eq!(problem["field"], "(line 1, column 1)", "{problem}");
    assert!(problem.get("pointer").is_none(), "{problem}");

    // A file of another model or another version.
    let reply = d.upload(NAME, "v4", &model_bytes("other", "v4"), "");
    contract.check_reply(template, "put", &reply, "the reply");
    let problem = reply.expect_problem(422, "label-mismatch");
    assert_eq!(problem["pointer"], "/name");
    assert_eq!(problem["in_file"], "other");
    let reply = d.upload(NAME, "v4", &model_bytes(NAME, "v5"), "");
    let problem = reply.expect_problem(422, "label-mismatch");
    assert_eq!(problem["pointer"], "/version");
    assert_eq!(problem["expected"], "v4");

    // Labels that break their rule.
    let reply = d.upload("Up_Take", "v4", &model_bytes(NAME, "v4"), "");
    contract.check_reply(template, "put", &reply, "the reply");
    assert_eq!(
        reply.expect_problem(422, "invalid-label")["parameter"],
        "name"
    );
    let reply = d.upload(NAME, "-v4", &model_bytes(NAME, "v4"), "");
    assert_eq!(
        reply.expect_problem(422, "invalid-label")["parameter"],
        "version"
    );

    // Nothing was written, and v1 still serves.
    assert_eq!(stored_versions(&d, NAME), ["v1.json", "v2.json", "v3.json"]);
    assert!(!d.root().join("Up_Take").exists());
    assert_serves(&d, "v1", &model_bytes(NAME, "v1"), &observations(3)[2]);
}

#[test]
fn a_model_past_a_size_limit_is_refused_at_upload_naming_the_limit() {
    let d = three_versions(Share::ALL);
    let contract = Contract::admin(&d);
    let template = "/models/{name}/versions/{version}";

    // A category of 1,001 levels: an identifier, not a category (the limit is 1,000).
    let levels: Vec<String> = (0..1_001).map(|i| format!("p{i:04}")).collect();
    let levels: Vec<&str> = levels.iter().map(String::as_str).collect();
    let file = with_covariate(base(NAME, "v4"), categorical("postcode", &levels, "p0000"));
    let reply = d.upload(NAME, "v4", &bytes_of(file), "");
    contract.check_reply(template, "put", &reply, "the reply");
    let problem = reply.expect_problem(422, "model-too-large");
    assert_eq!(problem["limit"], json!(1_000), "{problem}");
    assert_eq!(problem["count"], json!(1_001), "{problem}");
    let pointer = problem["pointer"].as_str().expect("a pointer");
    assert!(
        pointer.starts_with("/covariates/") && pointer.ends_with("/levels"),
        "{problem}"
    );
    let detail = problem["detail"].as_str().expect("a detail");
    assert!(
        detail.contains("postcode") && detail.contains("1000"),
        "{detail}"
    );

    // 257 terms, one past the limit: refused before validation reads a term.
    let mut file: Json = serde_json::from_slice(&model_bytes(NAME, "v4")).expect("JSON");
    let terms = file["terms"].as_array_mut().expect("terms");
    let extra = terms[1].clone();
    while terms.len() < 257 {
        terms.push(extra.clone());
    }
    let reply = d.upload(NAME, "v4", file.to_string().as_bytes(), "");
    contract.check_reply(template, "put", &reply, "the reply");
    let problem = reply.expect_problem(422, "model-too-large");
    assert_eq!(problem["pointer"], json!("/terms"), "{problem}");
    assert_eq!(problem["limit"], json!(256), "{problem}");
    assert_eq!(problem["count"], json!(257), "{problem}");

    // Nothing was written, and v1 still serves.
    assert_eq!(stored_versions(&d, NAME), ["v1.json", "v2.json", "v3.json"]);
    assert_serves(&d, "v1", &model_bytes(NAME, "v1"), &observations(3)[2]);
}

/// `v1` with `guarantor` removed and a count `seasonal` added.
fn breaking_candidate(version: &str) -> Vec<u8> {
    let file = without_covariate(base(NAME, version), "guarantor");
    bytes_of(with_covariate(
        file,
        numeric("seasonal", CovariateKind::Count),
    ))
}

#[test]
fn a_breaking_candidate_needs_allow_breaking_and_the_answer_lists_the_changes() {
    let d = three_versions(Share::ALL);
    let contract = Contract::admin(&d);
    let v1 = model_bytes(NAME, "v1");
    let candidate = breaking_candidate("v9");
    let expected_changes = json!([
        {"change": "removed", "covariate": "guarantor", "kind": "binary"},
        {"change": "added", "covariate": "seasonal", "kind": "count"},
    ]);
    let library = contract_changes(&model_of(&v1), &model_of(&candidate));
    let check_changes = |changes: &Json| {
        let changes = changes.as_array().expect("a list of changes");
        assert_eq!(changes.len(), 2, "{changes:?}");
        for ((change, expected), from_library) in changes
            .iter()
            .zip(expected_changes.as_array().expect("list"))
            .zip(&library)
        {
            for key in ["change", "covariate", "kind"] {
                assert_eq!(change[key], expected[key], "{change}");
            }
            assert_eq!(change["callers_must"], from_library.to_string());
            assert_eq!(change["to_keep"], from_library.to_keep());
        }
    };

    let reply = d.upload(NAME, "v9", &candidate, "");
    contract.check_reply(
        "/models/{name}/versions/{version}",
        "put",
        &reply,
        "the reply",
    );
    let problem = reply.expect_problem(422, "breaking-change");
    check_changes(&problem["changes"]);
    assert_eq!(problem["live"], "v1");
    assert_eq!(problem["candidate"], "v9");
    let to_override = problem["to_override"].as_str().expect("how to override");
    assert!(
        to_override.contains("?allow_breaking=true"),
        "{to_override}"
    );
    let detail = problem["detail"].as_str().expect("detail");
    assert!(
        detail.contains("guarantor") && detail.contains("seasonal"),
        "{detail}"
    );
    assert_serves(&d, "v1", &v1, &observations(2)[1]);
    assert_eq!(stored_versions(&d, NAME), ["v1.json", "v2.json", "v3.json"]);

    let reply = d.upload(NAME, "v9", &candidate, "?allow_breaking=true");
    contract.check_reply(
        "/models/{name}/versions/{version}",
        "put",
        &reply,
        "the reply",
    );
    let body = reply.expect(201);
    check_changes(&body["changes"]);
    assert_eq!(body["compared_with"], "v1");

    let reply = d.promote(NAME, "v9", false);
    contract.check_reply("/models/{name}/live", "post", &reply, "the reply");
    check_changes(&reply.expect_problem(422, "breaking-change")["changes"]);
    assert_serves(&d, "v1", &v1, &observations(2)[1]);

    let reply = d.promote(NAME, "v9", true);
    contract.check_reply("/models/{name}/live", "post", &reply, "the reply");
    let moved = reply.expect(200);
    check_changes(&moved["changes"]);
    assert_eq!(moved["serving"], "v9");
    assert_eq!(moved["record"]["who"], WHO);
    let observation = json!({"income": 70.0, "tenure": 4, "region": "south", "seasonal": 2});
    assert_serves(&d, "v9", &candidate, &observation);
    // The old observation shape is now refused by the public listener: callers had to change.
    let old = d.post(
        &format!("/models/{NAME}/probability"),
        &json!({"observation": observations(1)[0]}),
    );
    assert_eq!(old.status, 422, "{}", old.text);
}

#[test]
fn refused_promotions_leave_the_old_version_serving() {
    let d = three_versions(Share::ALL);
    let contract = Contract::admin(&d);
    let template = "/models/{name}/live";
    let v1 = model_bytes(NAME, "v1");
    let observation = &observations(5)[4];

    let reply = d.promote(NAME, "v8", false);
    contract.check_reply(template, "post", &reply, "the reply");
    let problem = reply.expect_problem(404, "unknown-version");
    assert_eq!(problem["stored"], json!(["v1", "v2", "v3"]));
    assert_serves(&d, "v1", &v1, observation);

    let reply = d.promote("absent", "v1", false);
    contract.check_reply(template, "post", &reply, "the reply");
    reply.expect_problem(404, "unknown-model");

    // A version file placed on the volume by hand that fails its check cases.
    place_version(d.root(), NAME, "v7", &tampered_bytes(NAME, "v7"));
    let reply = d.promote(NAME, "v7", true);
    contract.check_reply(template, "post", &reply, "the reply");
    let problem = reply.expect_problem(422, "invalid-model-file");
    assert_eq!(problem["field"], "check_cases[0].probability");
    assert_serves(&d, "v1", &v1, observation);

    for (body, slug, pointer) in [
        (json!({}), "invalid-body", "/version"),
        (json!({"version": 2}), "invalid-body", "/version"),
        (
            json!({"version": "v2", "allow_breaking": "yes"}),
            "invalid-body",
            "/allow_breaking",
        ),
        (
            json!({"version": "v2", "force": true}),
            "unknown-field",
            "/force",
        ),
        (json!(["v2"]), "invalid-body", ""),
    ] {
        let reply = d.admin_json("POST", &format!("/models/{NAME}/live"), &body);
        contract.check_reply(template, "post", &reply, "the reply");
        let problem = reply.expect_problem(422, slug);
        assert_eq!(problem["pointer"], pointer, "{body}: {problem}");
        assert_serves(&d, "v1", &v1, observation);
    }
    let reply = d.admin(
        "POST",
        &format!("/models/{NAME}/live"),
        Some(b"{\"version\""),
    );
    contract.check_reply(template, "post", &reply, "the reply");
    reply.expect_problem(400, "malformed-json");

    // Promoting the live version changes nothing and records nothing.
    let before = d
        .admin("GET", &format!("/models/{NAME}/history"), None)
        .expect(200);
    let moved = d.promote(NAME, "v1", false).expect(200);
    assert_eq!(moved["changed"], false);
    assert_eq!(moved["record"], Json::Null);
    let after = d
        .admin("GET", &format!("/models/{NAME}/history"), None)
        .expect(200);
    assert_eq!(before["records"], after["records"]);

    let reply = d.admin("GET", &format!("/models/{NAME}/live"), None);
    contract.check_reply(template, "post", &reply, "the reply");
    let problem = reply.expect_problem(405, "method-not-allowed");
    assert_eq!(reply.header("allow"), Some("POST"), "{problem}");
}

#[test]
fn rollback_walks_back_down_the_promotions_then_refuses() {
    let d = three_versions(Share::ALL);
    let contract = Contract::admin(&d);
    let template = "/models/{name}/rollback";
    let bytes = |v: &str| model_bytes(NAME, v);
    let observation = &observations(7)[6];

    let reply = d.rollback(NAME);
    contract.check_reply(template, "post", &reply, "the reply");
    let problem = reply.expect_problem(409, "nothing-to-roll-back");
    assert_eq!(problem["live"], "v1");

    d.promote(NAME, "v2", false).expect(200);
    assert_serves(&d, "v2", &bytes("v2"), observation);
    d.promote(NAME, "v3", false).expect(200);
    assert_serves(&d, "v3", &bytes("v3"), observation);

    let reply = d.admin_json(
        "POST",
        &format!("/models/{NAME}/rollback"),
        &json!({"reason": "calibration drifted"}),
    );
    contract.check_reply(template, "post", &reply, "the reply");
    let moved = reply.expect(200);
    assert_eq!(
        (moved["from"].as_str(), moved["to"].as_str()),
        (Some("v3"), Some("v2"))
    );
    assert_eq!(moved["action"], "rollback");
    assert_eq!(moved["serving"], "v2");
    assert_eq!(moved["record"]["reason"], "calibration drifted");
    assert_serves(&d, "v2", &bytes("v2"), observation);

    let moved = d.rollback(NAME).expect(200);
    assert_eq!(moved["to"], "v1");
    assert_serves(&d, "v1", &bytes("v1"), observation);
    let reply = d.rollback(NAME);
    contract.check_reply(template, "post", &reply, "the reply");
    reply.expect_problem(409, "nothing-to-roll-back");
    assert_serves(&d, "v1", &bytes("v1"), observation);

    let reply = d.admin_json(
        "POST",
        &format!("/models/{NAME}/rollback"),
        &json!({"why": "x"}),
    );
    reply.expect_problem(422, "unknown-field");

    // A model with versions but nothing live, and a model that does not exist.
    d.upload("fresh", "v1", &model_bytes("fresh", "v1"), "")
        .expect(201);
    let reply = d.rollback("fresh");
    contract.check_reply(template, "post", &reply, "the reply");
    reply.expect_problem(409, "no-live-version");
    let reply = d.rollback("absent");
    contract.check_reply(template, "post", &reply, "the reply");
    reply.expect_problem(404, "unknown-model");
}

#[test]
fn the_history_records_what_happened_when_and_who_did_it() {
    let d = three_versions(Share::ALL);
    let contract = Contract::admin(&d);
    d.upload(NAME, "v4", &model_bytes(NAME, "v4"), "?reason=refit")
        .expect(201);
    d.admin_json(
        "POST",
        &format!("/models/{NAME}/live"),
        &json!({"version": "v4", "reason": "better calibrated"}),
    )
    .expect(200);
    // A change made on the directory directly (the CLI) is in the same history.
    lifecycle::promote(d.root(), NAME, "v2", false, "cli:ana", None).expect("a CLI promotion");
    assert!(d.wait_for_version(NAME, "v2", Duration::from_secs(2)));
    d.rollback(NAME).expect(200);

    let reply = d.admin("GET", &format!("/models/{NAME}/history"), None);
    contract.check_reply("/models/{name}/history", "get", &reply, "the reply");
    let history = reply.expect(200);
    let records = history["records"].as_array().expect("records");
    let summary: Vec<(String, Option<String>, String, String)> = records
        .iter()
        .map(|r| {
            (
                r["action"].as_str().unwrap_or_default().to_string(),
                r["from"].as_str().map(str::to_string),
                r["to"].as_str().unwrap_or_default().to_string(),
                r["who"].as_str().unwrap_or_default().to_string(),
            )
        })
        .collect();
    let step = |action: &str, from: Option<&str>, to: &str, who: &str| {
        (
            action.to_string(),
            from.map(str::to_string),
            to.to_string(),
            who.to_string(),
        )
    };
    let setup = "cli:setup";
    assert_eq!(
        summary,
        [
            step("upload", None, "v1", setup),
            step("upload", None, "v2", setup),
            step("upload", None, "v3", setup),
            step("promote", None, "v1", setup),
            step("upload", None, "v4", WHO),
            step("promote", Some("v1"), "v4", WHO),
            step("promote", Some("v4"), "v2", "cli:ana"),
            step("rollback", Some("v2"), "v4", WHO),
        ]
    );
    assert_eq!(records[4]["reason"], "refit");
    assert_eq!(records[5]["reason"], "better calibrated");
    assert!(records
        .iter()
        .all(|r| r["when"].as_str().is_some_and(|w| w.ends_with('Z'))));
    assert_eq!(history["live"], "v4");
    assert_eq!(history["serving"], "v4");
    assert_eq!(history["rollback_to"], "v1");
    assert_eq!(history["warnings"], json!([]));

    let reply = d.admin("GET", "/models/absent/history", None);
    contract.check_reply("/models/{name}/history", "get", &reply, "the reply");
    reply.expect_problem(404, "unknown-model");
    let reply = d.admin("GET", "/models/NOT_A_NAME/history", None);
    contract.check_reply("/models/{name}/history", "get", &reply, "the reply");
    reply.expect_problem(422, "invalid-label");
}

/// A regression test for following the directory: a rollback written by another process
/// right after an admin promotion, before the watcher's next poll, puts the pointer back where
/// the watcher last saw it. Serving the promoted model straight from the promotion's answer
/// would leave this process on it for good; following the directory serves the pointer.
#[test]
fn a_cli_rollback_right_after_an_admin_promotion_is_served_within_two_seconds() {
    let d = three_versions(Share::ALL);
    for _ in 0..5 {
        assert_eq!(d.promote(NAME, "v2", false).expect(200)["serving"], "v2");
        lifecycle::rollback(d.root(), NAME, "cli:ana", None).expect("a CLI rollback");
        assert!(
            d.wait_for_version(NAME, "v1", Duration::from_secs(2)),
            "still serving {} with the pointer on v1",
            d.public_version(NAME)
        );
        assert_serves(&d, "v1", &model_bytes(NAME, "v1"), &observations(1)[0]);
    }
}

/// What the test itself computes for a shadow comparison of `observations` answered by
/// `live` with `candidate` scoring them.
struct Expected {
    scored: u64,
    mean: f64,
    disagreements: u64,
    bins: Vec<u64>,
}

fn expected_figures(live: &[u8], candidate: &[u8], observations: &[Json]) -> Expected {
    let (live, candidate) = (model_of(live), model_of(candidate));
    let mut bins = vec![0u64; DIFFERENCE_BUCKETS.len()];
    let (mut sum, mut disagreements) = (0.0, 0u64);
    for observation in observations {
        let p = engine_probability(&live, observation);
        let q = engine_probability(&candidate, observation);
        let difference = (q - p).abs();
        sum += difference;
        let bin = DIFFERENCE_BUCKETS
            .iter()
            .position(|&bound| difference <= bound)
            .expect("a difference of at most 1");
        bins[bin] += 1;
        disagreements += u64::from((p >= 0.5) != (q >= 0.5));
    }
    Expected {
        scored: observations.len() as u64,
        mean: sum / observations.len() as f64,
        disagreements,
        bins,
    }
}

#[track_caller]
fn assert_report(report: &Json, expected: &Expected) {
    assert_eq!(report["scored"], expected.scored, "{report}");
    assert_eq!(report["unscored"], 0, "{report}");
    let mean = report["mean_abs_difference"].as_f64().expect("a mean");
    // The same differences summed in another order: relative 1e-12.
    assert!(
        (mean - expected.mean).abs() <= 1e-12 * expected.mean.max(1e-300),
        "mean {mean} but the engine's probabilities give {}",
        expected.mean
    );
    assert_eq!(report["disagreements"], expected.disagreements, "{report}");
    let rate = expected.disagreements as f64 / expected.scored as f64;
    assert_eq!(report["disagreement_rate"].as_f64(), Some(rate));
    let bins: Vec<u64> = report["difference_histogram"]
        .as_array()
        .expect("bins")
        .iter()
        .map(|b| b["count"].as_u64().expect("a count"))
        .collect();
    assert_eq!(bins, expected.bins, "{report}");
    assert_eq!(report["thresholds"], json!({"live": 0.5, "shadow": 0.5}));
    assert_eq!(
        report["notes"],
        json!([]),
        "same thresholds, nothing to note"
    );
}

#[test]
fn a_shadow_with_another_threshold_says_disagreements_may_come_from_the_thresholds() {
    let d = three_versions(Share::ALL);
    let contract = Contract::admin(&d);
    let mut file = base(NAME, "v7");
    file.decision = Some(ogive::model::file::DecisionSpec {
        threshold: Some(0.3),
        bands: Vec::new(),
    });
    let candidate = bytes_of(file);
    d.upload(NAME, "v7", &candidate, "?allow_breaking=true")
        .expect(201);
    let reply = d.set_shadow(NAME, "v7");
    contract.check_reply("/models/{name}/shadow", "put", &reply, "the reply");
    let set = reply.expect(200);
    let changes = set["changes"].as_array().expect("changes");
    assert_eq!(changes.len(), 1, "{set}");
    assert_eq!(changes[0]["change"], "threshold_changed");
    assert_eq!(changes[0]["to_keep"], "no --threshold");
    let notes = set["notes"].as_array().expect("notes");
    assert_eq!(notes.len(), 1, "{set}");
    let note = notes[0].as_str().expect("a sentence");
    assert!(
        note.contains("live 'v1' at 0.5") && note.contains("shadow 'v7' at 0.3"),
        "{note}"
    );
    d.post(
        &format!("/models/{NAME}/probability"),
        &json!({"observations": observations(5)}),
    )
    .expect(200);
    let reply = d.shadow_report(NAME);
    contract.check_reply("/models/{name}/shadow", "get", &reply, "the reply");
    let report = reply.expect(200);
    assert_eq!(report["thresholds"], json!({"live": 0.5, "shadow": 0.3}));
    assert_eq!(report["notes"], json!([note]));
}

#[test]
fn a_shadow_scores_every_request_without_changing_the_answers() {
    let d = three_versions(Share::ALL);
    let contract = Contract::admin(&d);
    let path = format!("/models/{NAME}/probability");
    let all = observations(60);
    let single = |o: &Json| json!({"observation": o, "average_effects": false});
    let strip = |mut body: Json| {
        body["request_id"] = Json::Null;
        body
    };
    let before: Vec<Json> = all[..5]
        .iter()
        .map(|o| strip(d.post(&path, &single(o)).expect(200)))
        .collect();
    let batch_before = strip(
        d.post(&path, &json!({"observations": &all[5..25]}))
            .expect(200),
    );

    let reply = d.set_shadow(NAME, "v3");
    contract.check_reply("/models/{name}/shadow", "put", &reply, "the reply");
    let set = reply.expect(200);
    assert_eq!(
        (
            &set["live_version"],
            &set["shadow_version"],
            &set["replaced"]
        ),
        (&json!("v1"), &json!("v3"), &Json::Null)
    );
    assert_eq!(set["changes"], json!([]));
    let public = d.get(&format!("/models/{NAME}")).expect(200);
    assert_eq!(public["shadow_version"], "v3");

    // The same requests get the same answers.
    for (o, earlier) in all[..5].iter().zip(&before) {
        assert_eq!(&strip(d.post(&path, &single(o)).expect(200)), earlier);
    }
    let batch = strip(
        d.post(&path, &json!({"observations": &all[5..25]}))
            .expect(200),
    );
    assert_eq!(batch, batch_before);
    for o in &all[25..] {
        d.post(&path, &single(o)).expect(200);
    }

    let reply = d.shadow_report(NAME);
    contract.check_reply("/models/{name}/shadow", "get", &reply, "the reply");
    let report = reply.expect(200);
    let (v1, v3) = (model_bytes(NAME, "v1"), model_bytes(NAME, "v3"));
    let expected = expected_figures(&v1, &v3, &all);
    assert_report(&report, &expected);
    assert_eq!(report["live_version_at_start"], "v1");
    assert_eq!(report["share"], 1.0);

    let metrics = d.get("/metrics").text;
    let series = format!("ogive_shadow_scored_total{{model=\"{NAME}\",version=\"v3\"}} 60");
    assert!(metrics.contains(&series), "no {series} in\n{metrics}");
    let count = format!("ogive_shadow_abs_difference_count{{model=\"{NAME}\",version=\"v3\"}} 60");
    assert!(metrics.contains(&count), "no {count}");

    let reply = d.admin("DELETE", &format!("/models/{NAME}/shadow"), None);
    contract.check_reply("/models/{name}/shadow", "delete", &reply, "the reply");
    let cleared = reply.expect(200);
    assert_eq!(cleared["cleared"], "v3");
    assert_eq!(cleared["report"], report);
    let reply = d.shadow_report(NAME);
    contract.check_reply("/models/{name}/shadow", "get", &reply, "the reply");
    reply.expect_problem(404, "no-shadow");
    d.admin("DELETE", &format!("/models/{NAME}/shadow"), None)
        .expect_problem(404, "no-shadow");
    assert!(d.get(&format!("/models/{NAME}")).expect(200)["shadow_version"].is_null());

    // Setting it again starts a new count.
    d.set_shadow(NAME, "v3").expect(200);
    let report = d.shadow_report(NAME).expect(200);
    assert_eq!(report["scored"], 0);
    assert_eq!(report["mean_abs_difference"], Json::Null);
    d.post(&path, &single(&all[0])).expect(200);
    let report = d.shadow_report(NAME).expect(200);
    assert_report(&report, &expected_figures(&v1, &v3, &all[..1]));
}

#[test]
fn a_share_of_a_quarter_scores_exactly_a_quarter_of_the_observations() {
    let d = three_versions(Share::new(0.25).expect("a share"));
    d.set_shadow(NAME, "v2").expect(200);
    let all = observations(43);
    d.post(
        &format!("/models/{NAME}/probability"),
        &json!({"observations": &all[..20]}),
    )
    .expect(200);
    for o in &all[20..] {
        d.post(
            &format!("/models/{NAME}/probability"),
            &json!({"observation": o}),
        )
        .expect(200);
    }
    let report = d.shadow_report(NAME).expect(200);
    // ⌊43 · 0.25⌋ = 10: observations 3, 7, …, 39 counted from 0.
    assert_eq!(report["scored"], 10, "{report}");
    assert_eq!(report["share"], 0.25);
    let chosen: Vec<Json> = (0..43)
        .filter(|g| g % 4 == 3)
        .map(|g| all[g].clone())
        .collect();
    let expected = expected_figures(&model_bytes(NAME, "v1"), &model_bytes(NAME, "v2"), &chosen);
    assert_report(&report, &expected);
}

#[test]
fn a_candidate_with_other_covariates_is_scored_by_covariate_and_level_name() {
    let dir = tempfile::tempdir().expect("a temporary directory");
    let v1 = model_bytes(NAME, "v1");
    // No guarantor (and so no income*guarantor term), and region's levels in another order,
    // without 'east', with another reference level.
    let file = without_covariate(base(NAME, "v2"), "guarantor");
    let file = replaced_covariate(file, categorical("region", &["south", "north"], "south"));
    let v2 = bytes_of(file);
    seed(
        dir.path(),
        NAME,
        &[("v1", v1.clone()), ("v2", v2.clone())],
        Some("v1"),
    );
    let d = TestServer::serve(dir, Share::ALL);

    let set = d
        .admin_json(
            "PUT",
            &format!("/models/{NAME}/shadow"),
            &json!({"version": "v2"}),
        )
        .expect(200);
    let changes: Vec<&str> = set["changes"]
        .as_array()
        .expect("changes")
        .iter()
        .filter_map(|c| c["change"].as_str())
        .collect();
    assert_eq!(
        changes,
        ["removed", "levels_removed", "reference_changed"],
        "{set}"
    );

    let all = observations(30);
    for o in &all {
        d.post(
            &format!("/models/{NAME}/probability"),
            &json!({"observation": o}),
        )
        .expect(200);
    }
    let report = d.shadow_report(NAME).expect(200);
    let takes = |o: &&Json| o["region"] != "east";
    let scorable: Vec<Json> = all.iter().filter(takes).cloned().collect();
    let unscorable = all.len() - scorable.len();
    assert_eq!(report["unscored"], unscorable as u64, "{report}");
    let (live, candidate) = (model_of(&v1), model_of(&v2));
    let (mut sum, mut disagreements) = (0.0, 0u64);
    for o in &scorable {
        let mut for_candidate = o.clone();
        for_candidate
            .as_object_mut()
            .expect("object")
            .remove("guarantor");
        let p = engine_probability(&live, o);
        let q = engine_probability(&candidate, &for_candidate);
        sum += (q - p).abs();
        disagreements += u64::from((p >= 0.5) != (q >= 0.5));
    }
    assert_eq!(report["scored"], scorable.len() as u64);
    let mean = report["mean_abs_difference"].as_f64().expect("a mean");
    let expected = sum / scorable.len() as f64;
    assert!(
        (mean - expected).abs() <= 1e-12 * expected,
        "{mean} vs {expected}"
    );
    assert_eq!(report["disagreements"], disagreements);
}

#[test]
fn shadow_refusals_say_why() {
    let d = three_versions(Share::ALL);
    let contract = Contract::admin(&d);
    let template = "/models/{name}/shadow";
    let put = |name: &str, body: &Json| d.set_shadow_body(name, body);

    let reply = put(NAME, &json!({"version": "v8"}));
    contract.check_reply(template, "put", &reply, "the reply");
    let problem = reply.expect_problem(404, "unknown-version");
    assert_eq!(problem["stored"], json!(["v1", "v2", "v3"]));

    let reply = put(NAME, &json!({"version": "v1"}));
    contract.check_reply(template, "put", &reply, "the reply");
    assert_eq!(
        reply.expect_problem(422, "cannot-shadow")["pointer"],
        "/version"
    );

    d.upload(
        NAME,
        "v9",
        &breaking_candidate("v9"),
        "?allow_breaking=true",
    )
    .expect(201);
    let reply = put(NAME, &json!({"version": "v9"}));
    contract.check_reply(template, "put", &reply, "the reply");
    let problem = reply.expect_problem(422, "cannot-shadow");
    assert_eq!(problem["covariate"], "seasonal");

    place_version(d.root(), NAME, "v7", &tampered_bytes(NAME, "v7"));
    let reply = put(NAME, &json!({"version": "v7"}));
    contract.check_reply(template, "put", &reply, "the reply");
    reply.expect_problem(422, "invalid-model-file");

    let reply = put("absent", &json!({"version": "v1"}));
    contract.check_reply(template, "put", &reply, "the reply");
    reply.expect_problem(404, "unknown-model");
    let reply = put(NAME, &json!({"version": "v2", "share": 1}));
    contract.check_reply(template, "put", &reply, "the reply");
    reply.expect_problem(422, "unknown-field");
    let reply = put(NAME, &json!({"version": "../v2"}));
    contract.check_reply(template, "put", &reply, "the reply");
    reply.expect_problem(422, "invalid-label");

    let reply = d.shadow_report(NAME);
    reply.expect_problem(404, "no-shadow");
    let reply = d.admin("PATCH", &format!("/models/{NAME}/shadow"), None);
    reply.expect_problem(405, "method-not-allowed");
    assert_eq!(reply.header("allow"), Some("GET, PUT, DELETE"));
    assert!(d.get(&format!("/models/{NAME}")).expect(200)["shadow_version"].is_null());
}

#[test]
fn promoting_the_shadow_version_ends_the_shadow() {
    let d = three_versions(Share::ALL);
    d.set_shadow(NAME, "v2").expect(200);
    assert_eq!(
        std::fs::read_to_string(d.root().join(NAME).join("shadow")).expect("the shadow pointer"),
        "v2\n"
    );
    for o in &observations(12) {
        d.post(
            &format!("/models/{NAME}/probability"),
            &json!({"observation": o}),
        )
        .expect(200);
    }
    let report = d.shadow_report(NAME).expect(200);
    assert_eq!(report["scored"], 12);
    let moved = d.promote(NAME, "v2", false).expect(200);
    assert_eq!(moved["serving"], "v2");
    // The promotion's history line keeps the shadow's final report and both thresholds.
    let note = &moved["record"]["shadow"];
    assert_eq!(note["version"], "v2");
    assert_eq!(note["thresholds"], json!({"live": 0.5, "shadow": 0.5}));
    for figure in [
        "scored",
        "unscored",
        "mean_abs_difference",
        "disagreements",
        "disagreement_rate",
        "since",
    ] {
        assert_eq!(note["figures"][figure], report[figure], "{figure}: {note}");
    }
    let history = d
        .admin("GET", &format!("/models/{NAME}/history"), None)
        .expect(200);
    let records = history["records"].as_array().expect("records");
    assert_eq!(records.last(), Some(&moved["record"]));
    assert!(!d.root().join(NAME).join("shadow").exists());
    d.shadow_report(NAME).expect_problem(404, "no-shadow");
    assert!(d.get(&format!("/models/{NAME}")).expect(200)["shadow_version"].is_null());

    // Another shadow survives promotions of other versions.
    d.set_shadow(NAME, "v3").expect(200);
    d.rollback(NAME).expect(200);
    let report = d.shadow_report(NAME).expect(200);
    assert_eq!(report["shadow_version"], "v3");
    assert_eq!(report["live_version"], "v1");
    assert_eq!(report["live_version_at_start"], "v2");
}

/// Start the binary on `dir` with `extra` arguments and environment, and collect its stdout
/// lines.
fn start_binary(
    dir: &std::path::Path,
    extra: &[&str],
    token_env: Option<&str>,
) -> (std::process::Child, mpsc::Receiver<String>) {
    let mut command = Command::new(env!("CARGO_BIN_EXE_ogive"));
    command
        .args(["serve", "--models"])
        .arg(dir)
        .args(["--listen", "127.0.0.1:0", "--admin-listen", "127.0.0.1:0"])
        .args(["--drain-delay-ms", "0", "--workers", "1"])
        .args(extra)
        .env_remove("OGIVE_ADMIN_TOKEN_FILE")
        .env_remove("OGIVE_ADMIN_TOKEN")
        .env("RUST_LOG", "warn")
        .stdin(Stdio::null())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped());
    if let Some(token) = token_env {
        command.env("OGIVE_ADMIN_TOKEN", token);
    }
    let mut child = command.spawn().expect("ogive serve starts");
    let stdout = child.stdout.take().expect("stdout");
    let (lines, received) = mpsc::channel();
    std::thread::spawn(move || {
        for line in BufReader::new(stdout).lines().map_while(Result::ok) {
            let _ = lines.send(line);
        }
    });
    (child, received)
}

/// The first stdout line starting with `prefix`, within 30 s.
fn line_starting(lines: &mpsc::Receiver<String>, prefix: &str) -> String {
    let started = Instant::now();
    while started.elapsed() < Duration::from_secs(30) {
        if let Ok(line) = lines.recv_timeout(Duration::from_millis(100)) {
            if line.starts_with(prefix) {
                return line;
            }
        }
    }
    panic!("no line starting with {prefix:?} within 30 s");
}

fn terminate(mut child: std::process::Child) {
    let _ = Command::new("kill")
        .args(["-TERM", &child.id().to_string()])
        .status();
    let started = Instant::now();
    while started.elapsed() < Duration::from_secs(20) {
        if child.try_wait().ok().flatten().is_some() {
            return;
        }
        std::thread::sleep(Duration::from_millis(50));
    }
    let _ = child.kill();
    let _ = child.wait();
    panic!("ogive serve did not stop within 20 s of SIGTERM");
}

#[test]
fn the_binary_starts_admin_routes_only_with_a_token_and_says_so() {
    let dir = tempfile::tempdir().expect("a temporary directory");
    seed(
        dir.path(),
        NAME,
        &[("v1", model_bytes(NAME, "v1"))],
        Some("v1"),
    );

    let (child, lines) = start_binary(dir.path(), &[], None);
    let off = line_starting(&lines, "ogive admin");
    assert_eq!(
        off,
        "ogive admin off: no admin token is configured (--admin-token-file or OGIVE_ADMIN_TOKEN)"
    );
    terminate(child);

    let token_file = dir.path().join(".admin-token");
    std::fs::write(&token_file, format!("{TOKEN}\n")).expect("the token file");
    let file_arg = token_file.to_string_lossy().to_string();
    let (child, lines) = start_binary(
        dir.path(),
        &[
            "--admin-token-file",
            &file_arg,
            "--admin-token-label",
            "deploy-bot",
        ],
        None,
    );
    let on = line_starting(&lines, "ogive admin");
    let admin = on
        .strip_prefix("ogive admin on ")
        .unwrap_or_else(|| panic!("{on}"))
        .to_string();
    let agent = ureq::AgentBuilder::new()
        .timeout(Duration::from_secs(20))
        .build();
    let refused = agent.get(&format!("{admin}/models/{NAME}/history")).call();
    assert!(matches!(refused, Err(ureq::Error::Status(401, _))));
    let upload = agent
        .put(&format!("{admin}/models/{NAME}/versions/v2"))
        .set("Authorization", &format!("Bearer {TOKEN}"))
        .set("Content-Type", "application/json")
        .send_bytes(&model_bytes(NAME, "v2"))
        .expect("the upload is accepted");
    assert_eq!(upload.status(), 201);
    let history: Json = agent
        .get(&format!("{admin}/models/{NAME}/history"))
        .set("Authorization", &format!("Bearer {TOKEN}"))
        .call()
        .expect("the history")
        .into_json()
        .expect("JSON");
    let last = history["records"]
        .as_array()
        .and_then(|r| r.last())
        .cloned();
    assert_eq!(
        last.map(|r| r["who"].clone()),
        Some(json!("admin:deploy-bot"))
    );
    terminate(child);

    // The token from the environment instead.
    let (child, lines) = start_binary(dir.path(), &[], Some(TOKEN));
    assert!(line_starting(&lines, "ogive admin").starts_with("ogive admin on http://127.0.0.1:"));
    terminate(child);

    // Unusable configurations stop the process before it serves, naming the file, not the token.
    std::fs::write(&token_file, "\n").expect("an empty token file");
    for (args, env, needle) in [
        (
            vec!["--admin-token-file", file_arg.as_str()],
            None,
            "is empty",
        ),
        (
            vec!["--admin-token-file", file_arg.as_str()],
            Some(TOKEN),
            "set one",
        ),
    ] {
        let (mut child, _) = start_binary(dir.path(), &args, env);
        let started = Instant::now();
        let status = loop {
            if let Some(status) = child.try_wait().expect("status") {
                break status;
            }
            assert!(started.elapsed() < Duration::from_secs(30), "still running");
            std::thread::sleep(Duration::from_millis(50));
        };
        assert!(!status.success());
        let mut stderr = String::new();
        std::io::Read::read_to_string(&mut child.stderr.take().expect("stderr"), &mut stderr)
            .expect("stderr");
        assert!(stderr.contains(needle), "{stderr}");
        assert!(
            !stderr.contains(TOKEN),
            "the token is in the error: {stderr}"
        );
    }
}
