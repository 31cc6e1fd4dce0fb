//! `POST /models/{name}/probability`: one observation or a batch, scored by the live version
//! (and, once the answer is built, by the entry's shadow candidate, if any: `service::shadow`).
//!
//! The body is read on the I/O worker; a small one is parsed and scored there, a larger one on
//! the scoring pool (`service::compute`), so that a large batch never delays the requests that
//! share its worker. Either way the request passes the work budget and the in-flight limit
//! before anything is scored.

use std::sync::Arc;

use actix_web::http::header;
use actix_web::web::Bytes;
use actix_web::{web, HttpMessage, HttpRequest, HttpResponse};

use super::models::find;
use crate::registry::Entry;
use crate::service::body::{parse_json, read_json_bytes};
use crate::service::compute::{Admitted, INLINE_BODY_BYTES};
use crate::service::dto::{parse_probability_request, Observations};
use crate::service::middleware::Scored;
use crate::service::observations::parse_all;
use crate::service::problem::Problem;
use crate::service::request_id::RequestId;
use crate::service::scoring::score;
use crate::service::state::AppState;

/// Score the request's observations with the model's live version.
pub async fn probability(
    req: HttpRequest,
    name: web::Path<String>,
    payload: web::Payload,
    state: web::Data<AppState>,
) -> Result<HttpResponse, Problem> {
    let entry = find(&state, &name)?;
    let limits = &state.settings.limits;
    let bytes = read_json_bytes(&req, payload, limits.max_body_bytes).await?;
    let request_id = req
        .extensions()
        .get::<RequestId>()
        .cloned()
        .unwrap_or_else(RequestId::generate);
    let job_state = state.clone().into_inner();
    let job_entry = Arc::clone(&entry);
    let inline = bytes.len() <= INLINE_BODY_BYTES;
    let job = move || answer(&job_state, &job_entry, &bytes, request_id.as_str());
    let answered = if inline {
        job()
    } else {
        state.compute.run(job).await?
    };
    req.extensions_mut().insert(Scored {
        model: entry.live.name().to_string(),
        version: entry.live.version().to_string(),
        observations: answered.logged,
    });
    let (json, admission) = answered.result?;
    Ok(HttpResponse::Ok()
        .insert_header((header::CONTENT_TYPE, "application/json"))
        .body(Admitted::boxed(json, admission)))
}

/// What one request's job produced: the answer (or its problem), and the observations for the
/// log line when observation logging is on.
struct Answered {
    result: Result<(Vec<u8>, crate::service::compute::Admission), Problem>,
    logged: Option<String>,
}

/// Parse, check, admit, score and serialize: everything after the body has arrived.
fn answer(state: &AppState, entry: &Entry, bytes: &Bytes, request_id: &str) -> Answered {
    let mut logged = None;
    let result = (|| {
        let limits = &state.settings.limits;
        let model = &entry.live;
        let body = parse_json(bytes)?;
        let request = parse_probability_request(&body, limits.max_batch)?;
        logged = state
            .settings
            .log_observations
            .then(|| match request.observations {
                Observations::One(o) => serde_json::to_string(o).unwrap_or_default(),
                Observations::Many(list) => serde_json::to_string(list).unwrap_or_default(),
            });
        let count = request.observations.len();
        state
            .compute
            .check_budget(count, model.coefficients.len())?;
        let admission = state.compute.admit(count)?;
        let values = parse_all(model, request.observations)?;
        let metrics = state.metrics.scoring(model);
        let mut scored = score(model, &request, &values, request_id, &metrics)?;
        if let Some(monitor) = &state.monitor {
            let probabilities = scored.answers().iter().map(|a| a.probability);
            let receipts = monitor
                .record_scored(model, &values, probabilities)
                .map_err(|e| Problem::internal(&e))?;
            scored.set_receipts(receipts);
        }
        let json = scored.to_json()?;
        if let Some(shadow) = &state.shadow {
            shadow.compare(entry, &values, scored.answers());
        }
        Ok((json, admission))
    })();
    Answered { result, logged }
}
