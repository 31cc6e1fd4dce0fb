//! `GET /livez` (the process answers), `GET /readyz` (every model loaded and not draining; the
//! entries that failed to load are named in `failed_to_load`) and `GET /metrics` (the Prometheus
//! text format). Both probes also answer HEAD.

use actix_web::http::header;
use actix_web::{web, HttpResponse};
use serde_json::json;

use crate::metrics::TEXT_CONTENT_TYPE;
use crate::service::problem::Problem;
use crate::service::state::AppState;

/// Liveness: answering is the proof.
pub async fn livez() -> HttpResponse {
    HttpResponse::Ok().json(json!({"status": "alive"}))
}

/// Readiness: 200 when every model directory entry is loaded and the process is not draining,
/// 503 otherwise, with the reasons.
pub async fn readyz(state: web::Data<AppState>) -> HttpResponse {
    let health = &state.health;
    let models = state.registry.snapshot().models.len();
    let body = json!({
        "status": if health.ready() { "ready" } else { "not_ready" },
        "models": models,
        "models_loaded": health.models_loaded(),
        "failed_to_load": health.failed(),
        "draining": health.draining(),
    });
    if health.ready() {
        HttpResponse::Ok().json(body)
    } else {
        HttpResponse::ServiceUnavailable().json(body)
    }
}

/// The metrics, with the live-version info and readiness refreshed at the scrape.
pub async fn metrics(state: web::Data<AppState>) -> Result<HttpResponse, Problem> {
    let metrics = &state.metrics;
    let snapshot = state.registry.snapshot();
    metrics.set_live_versions(&snapshot);
    if let Some(monitor) = &state.monitor {
        monitor.prepare(&snapshot);
    }
    metrics.ready.set(i64::from(state.health.ready()));
    let text = metrics.encode().map_err(|e| Problem::internal(&e))?;
    Ok(HttpResponse::Ok()
        .insert_header((header::CONTENT_TYPE, TEXT_CONTENT_TYPE))
        .body(text))
}
