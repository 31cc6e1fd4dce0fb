//! `GET /openapi.json`: the OpenAPI 3.1 document, completed from the live registry.

use actix_web::{web, HttpResponse};

use crate::service::openapi::document;
use crate::service::state::AppState;

/// Serve the document.
pub async fn document_route(state: web::Data<AppState>) -> HttpResponse {
    HttpResponse::Ok().json(document(&state.registry.snapshot(), &state.settings.limits))
}
