//! `GET /models/{name}/curve`: probability and effect along a grid of one covariate, with an
//! ETag that changes only when the live version changes (`If-None-Match` → 304).

use actix_web::http::header;
use actix_web::{web, HttpMessage, HttpRequest, HttpResponse};

use super::models::find;
use crate::service::curve::{compute, etag, if_none_match, parse_curve_request};
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
    let matched = req
        .headers()
        .get(header::IF_NONE_MATCH)
        .and_then(|v| v.to_str().ok())
        .is_some_and(|v| if_none_match(v, &tag));
    if matched {
        return Ok(HttpResponse::NotModified()
            .insert_header((header::ETAG, tag))
            .insert_header((header::CACHE_CONTROL, "no-cache"))
            .finish());
    }
    let curve = compute(model, request)?;
    let json = serde_json::to_vec(&curve).map_err(|e| Problem::internal(&e))?;
    Ok(HttpResponse::Ok()
        .insert_header((header::CONTENT_TYPE, "application/json"))
        .insert_header((header::ETAG, tag))
        .insert_header((header::CACHE_CONTROL, "no-cache"))
        .body(json))
}
