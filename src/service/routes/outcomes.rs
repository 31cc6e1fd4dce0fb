//! `POST /models/{name}/outcomes`: report the observed outcome of earlier answers, so that the
//! answering version's live calibration can be measured.
//!
//! ```text
//! one outcome   {"answer_id": "ID", "outcome": 1}
//!               → 200 {answer_id, model, version, probability, linear_index, outcome}
//!               → 404 unknown-answer (never given, or evicted), 409 outcome-already-reported
//! a batch       {"outcomes": [{"answer_id": "ID/0", "outcome": 0}, ...]}
//!               → 200 {model, recorded, results: [{answer_id, status, ...}]}, each result
//!                 either the matched answer (status 200) or a problem's type and detail
//!                 (status 404 or 409); the batch itself fails only if its shape is wrong
//! ```
//!
//! An answer id is the request id of a single-observation answer, or `ID/i` for the i-th
//! observation (from 0) of a batch answer; an outcome is 0 or 1 (`false` and `true` are taken
//! too). The matching and the figures are [`crate::metrics::monitor`]'s; this file only parses
//! and answers.

use actix_web::http::header;
use actix_web::{web, HttpRequest, HttpResponse};
use serde_json::{json, Map, Value as Json};

use super::models::find;
use crate::metrics::monitor::Monitor;
use crate::metrics::outcomes::OutcomeError;
use crate::service::body::{parse_json, read_json_body};
use crate::service::dto::json_kind;
use crate::service::problem::{Kind, Problem};
use crate::service::request_id::MAX_LENGTH;
use crate::service::state::AppState;

/// The longest answer id: a request id, `/`, and a batch index.
const MAX_ANSWER_ID: usize = MAX_LENGTH + 1 + 20;

/// The monitor, or 404 `monitoring-off`.
pub fn monitor_of(state: &AppState) -> Result<&Monitor, Problem> {
    state.monitor.as_ref().ok_or_else(|| {
        Problem::new(
            Kind::MonitoringOff,
            "this process was started with --monitoring off, so it keeps no answers, drift or calibration",
        )
    })
}

/// One reported outcome, checked.
struct Reported<'a> {
    answer_id: &'a str,
    outcome: bool,
}

fn parse_reported<'a>(value: &'a Json, base: &str) -> Result<Reported<'a>, Problem> {
    let Json::Object(fields) = value else {
        return Err(Problem::new(
            Kind::InvalidBody,
            format!("an outcome report is an object, got {}", json_kind(value)),
        )
        .at(base.to_string()));
    };
    if let Some(unknown) = fields
        .keys()
        .find(|k| !matches!(k.as_str(), "answer_id" | "outcome"))
    {
        let shown: String = unknown.chars().take(100).collect();
        return Err(Problem::new(
            Kind::UnknownField,
            format!("'{shown}' is not a field of an outcome report (answer_id, outcome)"),
        )
        .at(format!(
            "{base}/{}",
            crate::service::problem::escape_pointer_token(&shown)
        )));
    }
    let answer_id = match fields.get("answer_id") {
        Some(Json::String(s)) if !s.is_empty() && s.len() <= MAX_ANSWER_ID => s.as_str(),
        Some(Json::String(s)) => {
            return Err(Problem::new(
                Kind::InvalidBody,
                format!(
                    "answer_id must have 1 to {MAX_ANSWER_ID} characters, got {}",
                    s.len()
                ),
            )
            .at(format!("{base}/answer_id")))
        }
        Some(other) => {
            return Err(Problem::new(
                Kind::InvalidBody,
                format!(
                    "answer_id is the text id of an answer, got {}",
                    json_kind(other)
                ),
            )
            .at(format!("{base}/answer_id")))
        }
        None => {
            return Err(Problem::new(
                Kind::InvalidBody,
                "an outcome report needs answer_id: the request id of a single answer, or ID/i for the i-th observation of a batch",
            )
            .at(base.to_string()))
        }
    };
    let outcome = match fields.get("outcome") {
        Some(Json::Bool(b)) => *b,
        Some(Json::Number(n)) if n.as_f64() == Some(0.0) => false,
        Some(Json::Number(n)) if n.as_f64() == Some(1.0) => true,
        Some(other) => {
            let shown: String = other.to_string().chars().take(40).collect();
            return Err(
                Problem::new(Kind::InvalidBody, format!("outcome is 0 or 1, got {shown}"))
                    .at(format!("{base}/outcome")),
            );
        }
        None => {
            return Err(
                Problem::new(Kind::InvalidBody, "an outcome report needs outcome: 0 or 1")
                    .at(base.to_string()),
            )
        }
    };
    Ok(Reported { answer_id, outcome })
}

fn problem_of(error: &OutcomeError) -> Problem {
    let kind = match error {
        OutcomeError::NotFound { .. } => Kind::UnknownAnswer,
        OutcomeError::AlreadyReported { .. } => Kind::OutcomeAlreadyReported,
    };
    Problem::new(kind, error.to_string())
}

fn ok_json(body: &Json) -> HttpResponse {
    HttpResponse::Ok()
        .insert_header((header::CONTENT_TYPE, "application/json"))
        .body(body.to_string())
}

/// Record one outcome, or each outcome of a batch.
pub async fn report(
    req: HttpRequest,
    name: web::Path<String>,
    payload: web::Payload,
    state: web::Data<AppState>,
) -> Result<HttpResponse, Problem> {
    let entry = find(&state, &name)?;
    let model = entry.live.name();
    let monitor = monitor_of(&state)?;
    let limits = &state.settings.limits;
    let bytes = read_json_body(&req, payload, limits.max_body_bytes).await?;
    let body = parse_json(&bytes)?;
    let Json::Object(fields) = &body else {
        return Err(Problem::new(
            Kind::InvalidBody,
            format!(
                "the body is an outcome report or {{\"outcomes\": [...]}}, got {}",
                json_kind(&body)
            ),
        )
        .at(""));
    };
    let Some(list) = fields.get("outcomes") else {
        let reported = parse_reported(&body, "")?;
        let matched = monitor
            .report_outcome(model, reported.answer_id, reported.outcome)
            .map_err(|e| problem_of(&e))?;
        return Ok(ok_json(&json!(matched)));
    };
    if fields.len() > 1 {
        return Err(Problem::new(
            Kind::ConflictingFields,
            "send either one report (answer_id, outcome) or a list under outcomes, not both",
        )
        .at(""));
    }
    let Json::Array(list) = list else {
        return Err(Problem::new(
            Kind::InvalidBody,
            format!("outcomes is a list, got {}", json_kind(list)),
        )
        .at("/outcomes"));
    };
    if list.is_empty() {
        return Err(Problem::new(Kind::EmptyBatch, "outcomes is empty").at("/outcomes"));
    }
    if list.len() > limits.max_batch {
        return Err(Problem::new(
            Kind::InvalidBody,
            format!(
                "{} outcome reports; at most {} are taken at once",
                list.len(),
                limits.max_batch
            ),
        )
        .at("/outcomes")
        .limit(limits.max_batch as u64));
    }
    let reports = list
        .iter()
        .enumerate()
        .map(|(i, v)| parse_reported(v, &format!("/outcomes/{i}")).map_err(|p| p.index(i)))
        .collect::<Result<Vec<_>, _>>()?;
    let mut recorded = 0;
    let results: Vec<Json> = reports
        .iter()
        .map(
            |r| match monitor.report_outcome(model, r.answer_id, r.outcome) {
                Ok(matched) => {
                    recorded += 1;
                    let mut item = json!(matched);
                    if let Some(map) = item.as_object_mut() {
                        map.insert("status".into(), json!(200));
                    }
                    item
                }
                Err(e) => {
                    let problem = problem_of(&e);
                    let mut item = Map::new();
                    item.insert("answer_id".into(), json!(r.answer_id));
                    item.insert("status".into(), json!(problem.kind.status()));
                    item.insert("type".into(), json!(problem.kind.type_uri()));
                    item.insert("detail".into(), json!(problem.detail));
                    Json::Object(item)
                }
            },
        )
        .collect();
    Ok(ok_json(&json!({
        "model": model,
        "recorded": recorded,
        "results": results,
    })))
}
