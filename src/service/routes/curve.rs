//! `GET /models/{name}/curve`: probability and effect along a grid of one covariate, with an
//! ETag that changes only when the live version changes (`If-None-Match` → 304).

use actix_web::{web, HttpMessage, HttpRequest, HttpResponse};

use super::models::find;
use crate::service::curve::{compute, etag, parse_curve_request};
use crate::service::etag::{already_held, json_tagged, not_modified};
use crate::service::middleware::Scored;
use crate::service::problem::{Kind, Problem};
use crate::service::state::AppState;

/// Answer a curve request.
pub async fn curve(
    req: HttpRequest,
    name: web::Path<String>,
    state: web::Data<AppState>,
) -> Result<HttpResponse, Problem> {
    let entry = find(&state, &name)?;
    let model = &entry.live;
    req.extensions_mut().insert(Scored {
        model: model.name().to_string(),
        version: model.version().to_string(),
        observations: None,
    });
    let tag = etag(model);
    let pairs = web::Query::<Vec<(String, String)>>::from_query(req.query_string())
        .map_err(|e| Problem::new(Kind::InvalidQuery, format!("the query cannot be read: {e}")))?
        .into_inner();
    let request = parse_curve_request(model, &pairs, state.settings.limits.max_curve_points)?;
    if already_held(&req, &tag) {
        return Ok(not_modified(&tag));
    }
    let curve = compute(model, request)?;
    let json = serde_json::to_vec(&curve).map_err(|e| Problem::internal(&e))?;
    Ok(json_tagged(&req, &tag, json))
}
