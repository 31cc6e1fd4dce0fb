//! `POST /models/{name}/outcomes`: report the observed outcome of earlier answers, by their
//! receipts, so that the answering version's live calibration can be measured. Any replica
//! sharing the key file takes any receipt, up to the maximum age and across restarts.
//!
//! ```text
//! one outcome   {"receipt": "...", "outcome": 1}
//!               → 200 {receipt_id, model, version, probability, scored_at, outcome}
//!               → 422 invalid-receipt (altered, cut, or an unknown key),
//!                 422 receipt-of-another-model (naming both), 422 receipt-expired (its age),
//!                 409 outcome-already-reported (a repeat this replica remembers)
//! a batch       {"outcomes": [{"receipt": "...", "outcome": 0}, ...]}
//!               → 200 {model, recorded, results: [{index, status, ...}]}, each result
//!                 either the recorded outcome (status 200) or a problem's type and detail;
//!                 the batch itself fails only if its shape is wrong, a receipt's length or
//!                 alphabet included (422 invalid-receipt at /outcomes/i/receipt, nothing
//!                 recorded): text that cannot be a receipt is a malformed report
//! ```
//!
//! An outcome is 0 or 1 (`false` and `true` are taken too). The checking and the figures are
//! [`crate::monitoring::monitor`]'s; this file only parses and answers.

use actix_web::http::header;
use actix_web::{web, HttpRequest, HttpResponse};
use serde_json::{json, Map, Value as Json};

use super::models::find;
use crate::monitoring::monitor::Monitor;
use crate::monitoring::outcomes::OutcomeError;
use crate::receipt::MAX_RECEIPT_CHARS;
use crate::service::body::read_json;
use crate::service::dto::json_kind;
use crate::service::problem::{Kind, Problem};
use crate::service::state::AppState;

/// The monitor, or 404 `monitoring-off`.
pub fn monitor_of(state: &AppState) -> Result<&Monitor, Problem> {
    state.monitor.as_ref().ok_or_else(|| {
        Problem::new(
            Kind::MonitoringOff,
            "this process was started with --monitoring off, so its answers carry no receipts and it keeps no drift or calibration",
        )
    })
}

/// One reported outcome, checked.
struct Reported<'a> {
    receipt: &'a str,
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
        .find(|k| !matches!(k.as_str(), "receipt" | "outcome"))
    {
        let shown: String = unknown.chars().take(100).collect();
        return Err(Problem::new(
            Kind::UnknownField,
            format!("'{shown}' is not a field of an outcome report (receipt, outcome)"),
        )
        .at(format!(
            "{base}/{}",
            crate::service::problem::escape_pointer_token(&shown)
        )));
    }
    let receipt = match fields.get("receipt") {
        Some(Json::String(s)) if !s.is_empty() && s.len() <= MAX_RECEIPT_CHARS => {
            if let Some((at, c)) = s
                .char_indices()
                .find(|&(_, c)| !(c.is_ascii_alphanumeric() || c == '-' || c == '_'))
            {
                return Err(Problem::new(
                    Kind::InvalidReceipt,
                    format!(
                        "a receipt is URL-safe base64 text (A–Z, a–z, 0–9, '-', '_'), but character {} is {c:?}",
                        s[..at].chars().count() + 1
                    ),
                )
                .at(format!("{base}/receipt")));
            }
            s.as_str()
        }
        Some(Json::String(s)) => {
            return Err(Problem::new(
                Kind::InvalidReceipt,
                format!(
                    "a receipt has 1 to {MAX_RECEIPT_CHARS} characters, got {}",
                    s.len()
                ),
            )
            .at(format!("{base}/receipt")))
        }
        Some(other) => {
            return Err(Problem::new(
                Kind::InvalidBody,
                format!(
                    "receipt is the text an answer carried as its receipt, got {}",
                    json_kind(other)
                ),
            )
            .at(format!("{base}/receipt")))
        }
        None => {
            return Err(Problem::new(
                Kind::InvalidBody,
                "an outcome report needs receipt: the receipt the answer carried",
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
    Ok(Reported { receipt, outcome })
}

/// The problem of a refused outcome; the pointer names the receipt of the report at `base`.
fn problem_of(error: &OutcomeError, base: &str) -> Problem {
    let kind = match error {
        OutcomeError::Receipt(_) => Kind::InvalidReceipt,
        OutcomeError::OtherModel { .. } => Kind::ReceiptOfAnotherModel,
        OutcomeError::Expired { .. } => Kind::ReceiptExpired,
        OutcomeError::AlreadyReported { .. } => Kind::OutcomeAlreadyReported,
    };
    Problem::new(kind, error.to_string()).at(format!("{base}/receipt"))
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
    let body = read_json(&req, payload, limits.max_body_bytes).await?.value;
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
            .report_outcome(model, reported.receipt, reported.outcome)
            .map_err(|e| problem_of(&e, ""))?;
        return Ok(ok_json(&json!(matched)));
    };
    if fields.len() > 1 {
        return Err(Problem::new(
            Kind::ConflictingFields,
            "send either one report (receipt, outcome) or a list under outcomes, not both",
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
        .enumerate()
        .map(|(i, r)| {
            let mut item = Map::new();
            item.insert("index".into(), json!(i));
            match monitor.report_outcome(model, r.receipt, r.outcome) {
                Ok(matched) => {
                    recorded += 1;
                    item.insert("status".into(), json!(200));
                    if let Json::Object(fields) = json!(matched) {
                        item.extend(fields);
                    }
                }
                Err(e) => {
                    let problem = problem_of(&e, &format!("/outcomes/{i}"));
                    item.insert("status".into(), json!(problem.kind.status()));
                    item.insert("type".into(), json!(problem.kind.type_uri()));
                    item.insert("detail".into(), json!(problem.detail));
                }
            }
            Json::Object(item)
        })
        .collect();
    Ok(ok_json(&json!({
        "model": model,
        "recorded": recorded,
        "results": results,
    })))
}
