//! The catalogue of malformed requests, shared by the HTTP tests (`malformed.rs`, through a
//! client library) and the hardening tests (over raw sockets). Each entry names what is wrong,
//! what is sent, and the status, problem type and field (JSON Pointer or query parameter) the
//! answer must carry.

use serde_json::{json, Value as Json};

use crate::support::http_models::lease_observation;

/// Where the answer must locate the fault.
#[derive(Debug, Clone, Copy)]
pub enum Field {
    /// No field (the request as a whole).
    None,
    /// A JSON Pointer into the body.
    Pointer(&'static str),
    /// A query parameter.
    Parameter(&'static str),
}

/// One malformed request and what its answer must carry.
pub struct Case {
    pub what: &'static str,
    pub method: &'static str,
    pub path: String,
    pub headers: Vec<(&'static str, String)>,
    pub body: Option<Vec<u8>>,
    pub status: u16,
    pub slug: &'static str,
    pub field: Field,
}

pub const PROBABILITY: &str = "/models/lease-test/probability";

fn json_case(
    what: &'static str,
    body: Json,
    status: u16,
    slug: &'static str,
    field: Field,
) -> Case {
    raw_case(what, body.to_string().as_bytes(), status, slug, field)
}

fn raw_case(
    what: &'static str,
    body: &[u8],
    status: u16,
    slug: &'static str,
    field: Field,
) -> Case {
    Case {
        what,
        method: "POST",
        path: PROBABILITY.into(),
        headers: vec![("Content-Type", "application/json".into())],
        body: Some(body.to_vec()),
        status,
        slug,
        field,
    }
}

fn get_case(what: &'static str, path: &str, status: u16, slug: &'static str, field: Field) -> Case {
    Case {
        what,
        method: "GET",
        path: path.into(),
        headers: vec![],
        body: None,
        status,
        slug,
        field,
    }
}

/// One observation with `key` set to `value` (or removed when `value` is None).
fn observation_with(key: &str, value: Option<Json>) -> Json {
    let mut o = lease_observation();
    match value {
        Some(v) => o[key] = v,
        None => {
            o.as_object_mut().expect("object").remove(key);
        }
    }
    json!({ "observation": o })
}

/// Every case.
pub fn catalogue() -> Vec<Case> {
    use Field::{None as Whole, Parameter, Pointer};
    let good = lease_observation();
    let mut bad_batch: Vec<Json> = (0..6).map(|_| good.clone()).collect();
    bad_batch[3]["sector"] = json!("mining");
    bad_batch[5]["guarantor"] = json!(7);
    let too_many: Vec<Json> = (0..1001).map(|_| good.clone()).collect();
    let curve = "/models/lease-test/curve";
    vec![
        raw_case("truncated JSON", br#"{"observation": "#, 400, "malformed-json", Whole),
        raw_case("trailing garbage", br#"{"observation": {}} x"#, 400, "malformed-json", Whole),
        raw_case("empty body", b"", 400, "malformed-json", Whole),
        raw_case("bytes that are not UTF-8", b"{\"observation\": \"\xff\xfe\"}", 400, "malformed-json", Whole),
        raw_case("single quotes", b"{'observation': {}}", 400, "malformed-json", Whole),
        raw_case("whitespace only", b" \n\t ", 400, "malformed-json", Whole),
        raw_case("a key given twice", br#"{"observation": {}, "observation": {}}"#, 422, "duplicate-key", Pointer("/observation")),
        raw_case("a covariate given twice", br#"{"observation": {"sector": "retail", "sector": "retail"}}"#, 422, "duplicate-key", Pointer("/observation/sector")),
        raw_case("a UTF-8 byte-order mark", b"\xEF\xBB\xBF{\"observation\": {}}", 415, "unsupported-media-type", Whole),
        Case { what: "a gzip-encoded body", method: "POST", path: PROBABILITY.into(),
            headers: vec![("Content-Type", "application/json".into()), ("Content-Encoding", "gzip".into())],
            body: Some(json!({"observation": good}).to_string().into_bytes()),
            status: 415, slug: "unsupported-media-type", field: Whole },
        json_case("body is an array", json!([good]), 422, "invalid-body", Pointer("")),
        json_case("body is a string", json!("hello"), 422, "invalid-body", Pointer("")),
        json_case("neither observation nor observations", json!({"effects": true}), 422, "missing-observation", Pointer("")),
        json_case("both observation and observations", json!({"observation": good, "observations": [good]}), 422, "conflicting-fields", Pointer("/observations")),
        json_case("observation is an array", json!({"observation": [good]}), 422, "invalid-body", Pointer("/observation")),
        json_case("observations is an object", json!({"observations": good}), 422, "invalid-body", Pointer("/observations")),
        json_case("empty batch", json!({"observations": []}), 422, "empty-batch", Pointer("/observations")),
        json_case("batch over the configured limit", json!({"observations": too_many}), 422, "too-many-observations", Pointer("/observations")),
        json_case("misspelt option", json!({"observation": good, "efects": false}), 422, "unknown-field", Pointer("/efects")),
        json_case("level as text", json!({"observation": good, "level": "95%"}), 422, "invalid-option", Pointer("/level")),
        json_case("level of 1", json!({"observation": good, "level": 1.0}), 422, "invalid-option", Pointer("/level")),
        json_case("level of 0", json!({"observation": good, "level": 0}), 422, "invalid-option", Pointer("/level")),
        json_case("level above the largest accepted", json!({"observation": good, "level": 0.9999999}), 422, "invalid-option", Pointer("/level")),
        json_case("effects not a boolean", json!({"observation": good, "effects": "yes"}), 422, "invalid-option", Pointer("/effects")),
        json_case("average_effects not a boolean", json!({"observations": [good], "average_effects": 1}), 422, "invalid-option", Pointer("/average_effects")),
        json_case("missing covariate", observation_with("sector", None), 422, "missing-covariate", Pointer("/observation/sector")),
        json_case("unknown covariate", observation_with("revenue", Some(json!(3.0))), 422, "unknown-field", Pointer("/observation/revenue")),
        json_case("unknown covariate with a slash", observation_with("a/b", Some(json!(3.0))), 422, "unknown-field", Pointer("/observation/a~1b")),
        json_case("number sent as text", observation_with("annual_revenue", Some(json!("450"))), 422, "not-a-number", Pointer("/observation/annual_revenue")),
        json_case("number sent as null", observation_with("years_trading", Some(Json::Null)), 422, "not-a-number", Pointer("/observation/years_trading")),
        raw_case("number too large to be finite",
            br#"{"observation": {"annual_revenue": 1e999, "years_trading": 3, "prior_arrears": 0, "guarantor": 0, "sector": "retail"}}"#,
            422, "non-finite", Pointer("/observation/annual_revenue")),
        json_case("binary covariate given 2", observation_with("guarantor", Some(json!(2))), 422, "not-binary", Pointer("/observation/guarantor")),
        json_case("binary covariate given text", observation_with("guarantor", Some(json!("yes"))), 422, "not-binary", Pointer("/observation/guarantor")),
        json_case("fractional count", observation_with("prior_arrears", Some(json!(1.5))), 422, "not-a-count", Pointer("/observation/prior_arrears")),
        json_case("negative count", observation_with("prior_arrears", Some(json!(-1))), 422, "not-a-count", Pointer("/observation/prior_arrears")),
        json_case("categorical given a number", observation_with("sector", Some(json!(3))), 422, "not-a-level", Pointer("/observation/sector")),
        json_case("level never seen in training", observation_with("sector", Some(json!("mining"))), 422, "unseen-level", Pointer("/observation/sector")),
        json_case("log of zero", observation_with("annual_revenue", Some(json!(0))), 422, "outside-domain", Pointer("/observation/annual_revenue")),
        json_case("log argument below the service bound", observation_with("annual_revenue", Some(json!(1e-13))), 422, "outside-domain", Pointer("/observation/annual_revenue")),
        json_case("magnitude above the service bound", observation_with("years_trading", Some(json!(2e12))), 422, "outside-domain", Pointer("/observation/years_trading")),
        json_case("a batch with faults at 3 and 5", json!({"observations": bad_batch}), 422, "unseen-level", Pointer("/observations/3/sector")),
        json_case("a batch element that is not an object", json!({"observations": [good, good, 17]}), 422, "invalid-body", Pointer("/observations/2")),
        Case { what: "unknown model", method: "POST", path: "/models/no-such-model/probability".into(),
            headers: vec![("Content-Type", "application/json".into())], body: Some(json!({"observation": good}).to_string().into_bytes()),
            status: 404, slug: "unknown-model", field: Whole },
        get_case("unknown route", "/nothing/here", 404, "not-found", Whole),
        get_case("unknown model described", "/models/no-such-model", 404, "unknown-model", Whole),
        get_case("GET on the probability route", PROBABILITY, 405, "method-not-allowed", Whole),
        Case { what: "DELETE on the model list", method: "DELETE", path: "/models".into(), headers: vec![], body: None,
            status: 405, slug: "method-not-allowed", field: Whole },
        Case { what: "text/plain body", method: "POST", path: PROBABILITY.into(),
            headers: vec![("Content-Type", "text/plain".into())], body: Some(json!({"observation": good}).to_string().into_bytes()),
            status: 415, slug: "unsupported-media-type", field: Whole },
        Case { what: "no content type", method: "POST", path: PROBABILITY.into(), headers: vec![],
            body: Some(json!({"observation": good}).to_string().into_bytes()),
            status: 415, slug: "unsupported-media-type", field: Whole },
        raw_case("body over the configured size limit", &vec![b' '; 600 * 1024], 413, "body-too-large", Whole),
        Case { what: "headers over the configured limit", method: "GET", path: "/models".into(),
            headers: vec![("X-Padding", "p".repeat(9 * 1024))], body: None,
            status: 431, slug: "headers-too-large", field: Whole },
        get_case("curve without over", &format!("{curve}?points=5"), 422, "missing-covariate", Parameter("over")),
        get_case("curve over an unknown covariate", &format!("{curve}?over=height"), 422, "unknown-field", Parameter("over")),
        get_case("curve points not a number", &format!("{curve}?over=years_trading&points=many"), 400, "invalid-query", Parameter("points")),
        get_case("curve with one point", &format!("{curve}?over=years_trading&points=1"), 422, "invalid-option", Parameter("points")),
        get_case("curve with too many points", &format!("{curve}?over=years_trading&points=501"), 422, "invalid-option", Parameter("points")),
        get_case("curve held at an unseen level", &format!("{curve}?over=years_trading&sector=mining"), 422, "unseen-level", Parameter("sector")),
        get_case("curve with an unknown parameter", &format!("{curve}?over=years_trading&colour=red"), 422, "unknown-field", Parameter("colour")),
        get_case("curve from infinity", &format!("{curve}?over=years_trading&from=inf"), 422, "non-finite", Parameter("from")),
        get_case("curve from above to", &format!("{curve}?over=years_trading&from=10&to=2"), 422, "invalid-option", Parameter("from")),
        get_case("curve with a repeated covariate", &format!("{curve}?over=years_trading&sector=retail&sector=transport"), 400, "invalid-query", Parameter("sector")),
        get_case("curve with a repeated parameter", &format!("{curve}?over=years_trading&over=guarantor"), 400, "invalid-query", Parameter("over")),
        get_case("curve binary held at true", &format!("{curve}?over=years_trading&guarantor=true"), 422, "not-binary", Parameter("guarantor")),
        get_case("curve held below a log term's domain", &format!("{curve}?over=years_trading&annual_revenue=-5"), 422, "outside-domain", Parameter("annual_revenue")),
        get_case("curve level of 2", &format!("{curve}?over=years_trading&level=2"), 422, "invalid-option", Parameter("level")),
        get_case("curve held count fractional", &format!("{curve}?over=years_trading&prior_arrears=0.5"), 422, "not-a-count", Parameter("prior_arrears")),
    ]
}

impl Case {
    /// Whether an answer (status, content type, body) is this case's problem details; `Err`
    /// says what is wrong with it.
    pub fn check(&self, status: u16, content_type: Option<&str>, body: &str) -> Result<(), String> {
        let problem = match serde_json::from_str::<Json>(body) {
            Ok(p) => p,
            Err(_) => {
                return Err(format!(
                    "{}: status {status} with a body that is not JSON: {body}",
                    self.what
                ))
            }
        };
        let expected_type = format!("urn:ogive:problem:{}", self.slug);
        let mut wrong = Vec::new();
        if status != self.status {
            wrong.push(format!("status {status} (expected {})", self.status));
        }
        if problem["type"] != json!(expected_type) {
            wrong.push(format!(
                "type {} (expected {expected_type})",
                problem["type"]
            ));
        }
        if problem["status"] != json!(self.status) {
            wrong.push(format!("status member {}", problem["status"]));
        }
        if content_type != Some("application/problem+json") {
            wrong.push(format!("content type {content_type:?}"));
        }
        for member in ["title", "detail"] {
            if !problem[member].is_string() {
                wrong.push(format!("no {member}"));
            }
        }
        match self.field {
            Field::None => {
                if problem.get("pointer").is_some() || problem.get("parameter").is_some() {
                    wrong.push(format!("unexpected field in {problem}"));
                }
            }
            Field::Pointer(p) => {
                if problem["pointer"] != json!(p) {
                    wrong.push(format!("pointer {} (expected {p:?})", problem["pointer"]));
                }
            }
            Field::Parameter(p) => {
                if problem["parameter"] != json!(p) {
                    wrong.push(format!(
                        "parameter {} (expected {p:?})",
                        problem["parameter"]
                    ));
                }
            }
        }
        if wrong.is_empty() {
            Ok(())
        } else {
            Err(format!("{}: {} — body {body}", self.what, wrong.join("; ")))
        }
    }
}
