//! `POST /models/{name}/probability`: one observation or a batch, scored by the live version
//! (and, once the answer is built, by the entry's shadow candidate, if any: `service::shadow`).

use actix_web::http::header;
use actix_web::{web, HttpMessage, HttpRequest, HttpResponse};

use super::models::find;
use crate::service::body::read_json;
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
    let model = &entry.live;
    let limits = &state.settings.limits;
    let body = read_json(&req, payload, limits.max_body_bytes).await?.value;
    let request = parse_probability_request(&body, limits.max_batch)?;
    let observations = state
        .settings
        .log_observations
        .then(|| match request.observations {
            Observations::One(o) => serde_json::to_string(o).unwrap_or_default(),
            Observations::Many(list) => serde_json::to_string(list).unwrap_or_default(),
        });
    req.extensions_mut().insert(Scored {
        model: model.name().to_string(),
        version: model.version().to_string(),
        observations,
    });
    let values = parse_all(model, request.observations)?;
    let request_id = req
        .extensions()
        .get::<RequestId>()
        .cloned()
        .unwrap_or_else(RequestId::generate);
    let metrics = state.metrics.scoring(model);
    let mut scored = score(model, &request, &values, request_id.as_str(), &metrics)?;
    if let Some(monitor) = &state.monitor {
        let probabilities = scored.answers().iter().map(|a| a.probability);
        let receipts = monitor
            .record_scored(model, &values, probabilities)
            .map_err(|e| Problem::internal(&e))?;
        scored.set_receipts(receipts);
    }
    let json = scored.to_json()?;
    if let Some(shadow) = &state.shadow {
        shadow.compare(&entry, &values, scored.answers());
    }
    Ok(HttpResponse::Ok()
        .insert_header((header::CONTENT_TYPE, "application/json"))
        .body(json))
}
