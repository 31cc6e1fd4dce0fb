//! `GET /models/{name}/monitoring`, on the admin listener: the monitoring report of one model —
//! for each version seen since the process started (and the live one), input drift per
//! covariate and prediction drift with the bins behind them, and calibration over the outcomes
//! reported so far — plus this process's receipt bookkeeping (ids remembered, maximum age,
//! whether the key is ephemeral).
//!
//! The report is built by [`crate::monitoring::monitor::Monitor::report`]; this file only finds
//! the model and serializes. The figures are this process's own: replicas each keep their own
//! windows, and Prometheus aggregates them. The same figures, without the bins, are on the
//! public `/metrics`.

use actix_web::http::header;
use actix_web::{web, HttpResponse};

use crate::service::admin::AdminState;
use crate::service::problem::Problem;
use crate::service::routes::models::find;
use crate::service::routes::outcomes::monitor_of;
use crate::service::state::AppState;

/// The monitoring report of model `name` served by `state`.
pub fn monitoring_report(state: &AppState, name: &str) -> Result<HttpResponse, Problem> {
    let entry = find(state, name)?;
    let monitor = monitor_of(state)?;
    let report = monitor.report(entry.live.name(), Some(entry.live.version()));
    let body = serde_json::to_vec(&report).map_err(|e| Problem::internal(&e))?;
    Ok(HttpResponse::Ok()
        .insert_header((header::CONTENT_TYPE, "application/json"))
        .insert_header((header::CACHE_CONTROL, "no-store"))
        .body(body))
}

/// The admin route.
pub async fn report(
    name: web::Path<String>,
    state: web::Data<AdminState>,
) -> Result<HttpResponse, Problem> {
    monitoring_report(&state.app, &name)
}
