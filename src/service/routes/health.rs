//! `GET /livez` (the process answers), `GET /readyz` (a model served, every model loaded and not
//! draining; the entries that failed to load are named in `failed_to_load`, what failed for
//! each in `load_errors`, and `reasons` says in words why the process is not ready, naming each
//! model that failed and what failed) and `GET /metrics` (the Prometheus
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

/// Readiness: 200 when at least one model is served, every model directory entry is loaded and
/// the process is not draining; 503 otherwise, with the reasons in words.
pub async fn readyz(state: web::Data<AppState>) -> HttpResponse {
    let health = &state.health;
    let models = state.registry.snapshot().models.len();
    let ready = ready(&state);
    let failures = health.failures();
    let mut reasons = Vec::new();
    if models == 0 {
        reasons.push(
            "no model is served: the model directory has no model with a live version (upload \
             one and promote it)"
                .to_string(),
        );
    }
    for (model, error) in &failures {
        reasons.push(format!("model '{model}' failed to load: {error}"));
    }
    if !health.models_loaded() && failures.is_empty() {
        reasons.push("a model with a live pointer failed to load (see the log and ogive_model_load_errors_total)".to_string());
    }
    if health.draining() {
        reasons.push("the process is draining for shutdown".to_string());
    }
    let failed_to_load: Vec<&str> = failures.iter().map(|(m, _)| m.as_str()).collect();
    let load_errors: serde_json::Map<String, serde_json::Value> = failures
        .iter()
        .map(|(m, e)| (m.clone(), json!(e)))
        .collect();
    let body = json!({
        "status": if ready { "ready" } else { "not_ready" },
        "models": models,
        "models_loaded": health.models_loaded(),
        "failed_to_load": failed_to_load,
        "load_errors": load_errors,
        "draining": health.draining(),
        "reasons": reasons,
    });
    if ready {
        HttpResponse::Ok().json(body)
    } else {
        HttpResponse::ServiceUnavailable().json(body)
    }
}

/// Ready to take traffic: a model to serve, every model loaded, not draining.
fn ready(state: &AppState) -> bool {
    state.health.ready() && !state.registry.snapshot().models.is_empty()
}

/// The metrics, with the live-version info and readiness refreshed at the scrape.
pub async fn metrics(state: web::Data<AppState>) -> Result<HttpResponse, Problem> {
    let metrics = &state.metrics;
    let snapshot = state.registry.snapshot();
    metrics.set_live_versions(&snapshot);
    if let Some(monitor) = &state.monitor {
        monitor.prepare(&snapshot);
    }
    metrics.ready.set(i64::from(ready(&state)));
    let text = metrics.encode().map_err(|e| Problem::internal(&e))?;
    Ok(HttpResponse::Ok()
        .insert_header((header::CONTENT_TYPE, TEXT_CONTENT_TYPE))
        .body(text))
}
