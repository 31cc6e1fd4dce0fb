//! The admin routes. Each is a thin wrapper: parse the route and body, run the lifecycle
//! function ([`crate::registry::lifecycle`]) on a blocking thread (it does file I/O and may
//! wait for another promoter's lock), poll the directory so the change serves here before the
//! answer ([`crate::service::follow`]), and write what happened.
//!
//! ```text
//! PUT    /models/{name}/versions/{version}   body: the model file (application/json)
//!        ?allow_breaking=true&reason=TEXT    → 201 stored, 200 already stored (identical bytes)
//! POST   /models/{name}/live                 {"version": "V", "allow_breaking": false, "reason": "…"}
//!                                            → 200 {name, action, from, to, changed, changes, record, serving}
//! POST   /models/{name}/rollback             {"reason": "…"} or no body → 200, the same shape
//! GET    /models/{name}/history              → 200 {name, live, rollback_to, records, warnings, serving}
//! PUT    /models/{name}/shadow               {"version": "V", "reason": "…"} → 200 {model, live_version, shadow_version, replaced, share, changes, notes}
//! GET    /models/{name}/shadow               → 200 the shadow report (see `monitoring::shadow`)
//! DELETE /models/{name}/shadow               → 200 {model, cleared, report}: this process's final report
//! GET    /models/{name}/monitoring           → 200 drift and calibration (see `service::admin::monitoring`)
//! GET    /openapi.json                       the admin listener's OpenAPI 3.1 document
//! ```
//!
//! `who` in the history is the token's (`admin:LABEL`). A shadow is written to the model
//! directory (`NAME/shadow`, recorded in the history), so every replica sharing the directory
//! scores it within a poll and keeps it across restarts; the report and the figures a history
//! record keeps when a shadowing ends are those of the process that answered.

use std::sync::{Arc, OnceLock};

use actix_web::http::header;
use actix_web::{web, HttpRequest, HttpResponse};
use serde_json::{json, Map, Value as Json};

use super::refusals::{changes_json, lifecycle_problem};
use super::AdminState;
use crate::evaluate::evidence::Evidence;
use crate::monitoring::shadow::Shadowing;
use crate::registry::gate::{self, Novelty};
use crate::registry::lifecycle::{self, LifecycleError, Moved};
use crate::service::body::{read_json, read_json_document, read_optional_json};
use crate::service::dto::json_kind;
use crate::service::middleware::Guarded;
use crate::service::problem::{echo, Kind, Problem};
use crate::service::routes::models::find;
use crate::service::routes::{method_not_allowed, not_found};

/// The hand-written admin document.
pub const DOCUMENT: &str = include_str!("openapi.json");

/// The longest `reason` kept in the history.
pub const MAX_REASON: usize = 500;

fn resource(path: &str, allow: &'static str) -> actix_web::Resource {
    web::resource(path).default_service(web::to(method_not_allowed(allow)))
}

/// Mount every admin route.
pub fn configure(cfg: &mut web::ServiceConfig) {
    cfg.service(resource("/openapi.json", "GET").route(web::get().to(Guarded(document))))
        .service(
            resource("/models/{name}/versions/{version}", "PUT")
                .route(web::put().to(Guarded(upload))),
        )
        .service(resource("/models/{name}/live", "POST").route(web::post().to(Guarded(promote))))
        .service(
            resource("/models/{name}/rollback", "POST").route(web::post().to(Guarded(rollback))),
        )
        .service(resource("/models/{name}/history", "GET").route(web::get().to(Guarded(history))))
        .service(
            resource("/models/{name}/shadow", "GET, PUT, DELETE")
                .route(web::put().to(Guarded(set_shadow)))
                .route(web::get().to(Guarded(shadow_report)))
                .route(web::delete().to(Guarded(clear_shadow))),
        )
        .service(
            resource("/models/{name}/monitoring", "GET")
                .route(web::get().to(Guarded(super::monitoring::report))),
        );
}

/// The answer to a path that matches no admin route (after the token was checked).
pub async fn unmatched(req: HttpRequest) -> Result<HttpResponse, Problem> {
    not_found(req).await
}

/// `GET /openapi.json`.
pub async fn document() -> HttpResponse {
    static SERVED: OnceLock<Json> = OnceLock::new();
    let doc = SERVED.get_or_init(|| {
        let mut doc: Json = serde_json::from_str(DOCUMENT).unwrap_or_else(|_| json!({}));
        doc["info"]["version"] = json!(env!("CARGO_PKG_VERSION"));
        doc
    });
    HttpResponse::Ok().json(doc)
}

/// Run a lifecycle step on a blocking thread.
async fn blocking<T: Send + 'static>(
    step: impl FnOnce() -> Result<T, Problem> + Send + 'static,
) -> Result<T, Problem> {
    web::block(step).await.map_err(|e| Problem::internal(&e))?
}

fn query_pairs(req: &HttpRequest) -> Result<Vec<(String, String)>, Problem> {
    web::Query::<Vec<(String, String)>>::from_query(req.query_string())
        .map(web::Query::into_inner)
        .map_err(|e| Problem::new(Kind::InvalidQuery, format!("the query cannot be read: {e}")))
}

fn parse_flag(name: &str, text: &str) -> Result<bool, Problem> {
    match text {
        "true" | "1" => Ok(true),
        "false" | "0" => Ok(false),
        other => Err(Problem::new(
            Kind::InvalidQuery,
            format!(
                "{name} takes true or false, got {:?}",
                other.chars().take(40).collect::<String>()
            ),
        )
        .parameter(name)),
    }
}

fn check_reason(reason: &str, at: Problem) -> Result<(), Problem> {
    if reason.chars().count() > MAX_REASON || reason.chars().any(char::is_control) {
        return Err(at);
    }
    Ok(())
}

/// The options of an upload: `allow_breaking` and `reason` from the query.
fn upload_options(req: &HttpRequest) -> Result<(bool, Option<String>), Problem> {
    let mut allow_breaking = false;
    let mut reason = None;
    for (key, value) in query_pairs(req)? {
        match key.as_str() {
            "allow_breaking" => allow_breaking = parse_flag("allow_breaking", &value)?,
            "reason" => {
                let bad = Problem::new(
                    Kind::InvalidQuery,
                    format!(
                        "reason must be at most {MAX_REASON} characters without control characters"
                    ),
                )
                .parameter("reason");
                check_reason(&value, bad)?;
                reason = Some(value);
            }
            other => {
                return Err(Problem::new(
                    Kind::InvalidQuery,
                    format!(
                        "unknown query parameter {:?}; this route takes allow_breaking and reason",
                        other.chars().take(40).collect::<String>()
                    ),
                )
                .parameter(other.chars().take(40).collect::<String>()))
            }
        }
    }
    Ok((allow_breaking, reason))
}

/// A JSON body that must be an object with only `allowed` members; a route whose body is
/// optional (`required: false`) takes an empty body as `{}`.
async fn object_body(
    req: &HttpRequest,
    payload: web::Payload,
    limit: usize,
    allowed: &[&str],
    required: bool,
) -> Result<Map<String, Json>, Problem> {
    let body = if required {
        read_json(req, payload, limit).await?.value
    } else {
        match read_optional_json(req, payload, limit).await? {
            Some(body) => body.value,
            None => return Ok(Map::new()),
        }
    };
    let Json::Object(map) = body else {
        return Err(Problem::new(
            Kind::InvalidBody,
            format!("the body must be a JSON object, got {}", json_kind(&body)),
        )
        .at(""));
    };
    if let Some(unknown) = map.keys().find(|k| !allowed.contains(&k.as_str())) {
        return Err(Problem::new(
            Kind::UnknownField,
            format!(
                "{} is not a member of this body; it takes {}",
                echo(unknown),
                allowed.join(", ")
            ),
        )
        .at(format!(
            "/{}",
            crate::service::problem::escape_pointer_token(unknown)
        )));
    }
    Ok(map)
}

fn text_member(map: &Map<String, Json>, key: &str) -> Result<Option<String>, Problem> {
    match map.get(key) {
        None => Ok(None),
        Some(Json::String(s)) => Ok(Some(s.clone())),
        Some(other) => Err(Problem::new(
            Kind::InvalidBody,
            format!("{key} must be a string, got {}", json_kind(other)),
        )
        .at(format!("/{key}"))),
    }
}

fn bool_member(map: &Map<String, Json>, key: &str) -> Result<bool, Problem> {
    match map.get(key) {
        None => Ok(false),
        Some(Json::Bool(b)) => Ok(*b),
        Some(other) => Err(Problem::new(
            Kind::InvalidBody,
            format!("{key} must be true or false, got {}", json_kind(other)),
        )
        .at(format!("/{key}"))),
    }
}

fn version_member(map: &Map<String, Json>) -> Result<String, Problem> {
    text_member(map, "version")?.ok_or_else(|| {
        Problem::new(
            Kind::InvalidBody,
            "the body needs a version: {\"version\": \"V\"}",
        )
        .at("/version")
    })
}

fn reason_member(map: &Map<String, Json>) -> Result<Option<String>, Problem> {
    let reason = text_member(map, "reason")?;
    if let Some(text) = &reason {
        let bad = Problem::new(
            Kind::InvalidBody,
            format!("reason must be at most {MAX_REASON} characters without control characters"),
        )
        .at("/reason");
        check_reason(text, bad)?;
    }
    Ok(reason)
}

/// `"evidence"`: an evaluation report, stored as sent (pretty-printed).
fn evidence_member(map: &Map<String, Json>) -> Result<Option<Evidence>, Problem> {
    let Some(value) = map.get("evidence") else {
        return Ok(None);
    };
    let refuse = |detail: String| Problem::new(Kind::InvalidBody, detail).at("/evidence");
    if !value.is_object() {
        return Err(refuse(format!(
            "evidence must be the JSON of an evaluation report (ogive evaluate --format json), got {}",
            json_kind(value)
        )));
    }
    let bytes = serde_json::to_vec_pretty(value).map_err(|e| refuse(e.to_string()))?;
    Evidence::read(bytes)
        .map(Some)
        .map_err(|e| refuse(e.to_string()))
}

fn serving(state: &AdminState, name: &str) -> Option<String> {
    state
        .app
        .registry
        .snapshot()
        .models
        .get(name)
        .map(|e| e.live.version().to_string())
}

fn moved_json(moved: &Moved, serving: Option<String>) -> Json {
    json!({
        "name": moved.name,
        "action": moved.action.name(),
        "from": moved.from,
        "to": moved.to,
        "changed": moved.changed,
        "changes": changes_json(&moved.changes),
        "record": moved.record,
        "serving": serving,
    })
}

/// `PUT /models/{name}/versions/{version}`.
pub async fn upload(
    req: HttpRequest,
    path: web::Path<(String, String)>,
    payload: web::Payload,
    state: web::Data<AdminState>,
) -> Result<HttpResponse, Problem> {
    let (name, version) = path.into_inner();
    let (allow_breaking, reason) = upload_options(&req)?;
    let limit = state.app.settings.limits.max_body_bytes;
    let bytes = read_json_document(&req, payload, limit).await?;
    let who = state.token.who();
    let root = state.follower.root().to_path_buf();
    let uploaded = blocking(move || {
        lifecycle::upload(
            &root,
            &name,
            &version,
            &bytes,
            allow_breaking,
            &who,
            reason.as_deref(),
        )
        .map_err(|e| lifecycle_problem(&e))
    })
    .await?;
    tracing::info!(model = %uploaded.name, version = %uploaded.version, novelty = ?uploaded.novelty, who = %state.token.who(), "version uploaded");
    let body = json!({
        "name": uploaded.name,
        "version": uploaded.version,
        "novelty": uploaded.novelty,
        "compared_with": uploaded.compared_with,
        "changes": changes_json(&uploaded.changes),
    });
    let mut answer = match uploaded.novelty {
        Novelty::New => HttpResponse::Created(),
        Novelty::AlreadyStored => HttpResponse::Ok(),
    };
    Ok(answer.json(body))
}

/// Run a promotion or rollback, then poll, and answer what moved.
async fn move_live(
    state: web::Data<AdminState>,
    step: impl FnOnce(&std::path::Path, &str) -> Result<Moved, LifecycleError> + Send + 'static,
) -> Result<HttpResponse, Problem> {
    let who = state.token.who();
    let follower = Arc::clone(&state.follower);
    let moved = blocking(move || {
        let moved = step(follower.root(), &who).map_err(|e| lifecycle_problem(&e))?;
        if moved.changed {
            follower.poll();
        }
        Ok(moved)
    })
    .await?;
    let serving = serving(&state, &moved.name);
    tracing::info!(model = %moved.name, action = moved.action.name(), from = moved.from.as_deref(), to = %moved.to, changed = moved.changed, serving = serving.as_deref(), who = %state.token.who(), "live version moved");
    Ok(HttpResponse::Ok().json(moved_json(&moved, serving)))
}

/// `POST /models/{name}/live`.
pub async fn promote(
    req: HttpRequest,
    name: web::Path<String>,
    payload: web::Payload,
    state: web::Data<AdminState>,
) -> Result<HttpResponse, Problem> {
    let limit = state.app.settings.limits.max_body_bytes;
    let body = object_body(
        &req,
        payload,
        limit,
        &["version", "allow_breaking", "reason", "evidence"],
        true,
    )
    .await?;
    let version = version_member(&body)?;
    let allow_breaking = bool_member(&body, "allow_breaking")?;
    let reason = reason_member(&body)?;
    let evidence = evidence_member(&body)?;
    let name = name.into_inner();
    // Promoting the shadow version ends its shadowing: the history keeps this process's report.
    let shadow_figures = state.app.shadow.as_ref().and_then(|shadow| {
        let snapshot = state.app.registry.snapshot();
        let entry = snapshot.models.get(&name)?;
        shadow
            .report(entry)
            .filter(|r| r.shadow_version == version)
            .map(|r| r.figures())
    });
    move_live(state, move |root, who| {
        let promotion = lifecycle::Promotion {
            allow_breaking,
            who,
            reason: reason.as_deref(),
            evidence: evidence.as_ref(),
            shadow_figures: shadow_figures.as_ref(),
        };
        lifecycle::promote_with(root, &name, &version, &promotion)
    })
    .await
}

/// `POST /models/{name}/rollback`.
pub async fn rollback(
    req: HttpRequest,
    name: web::Path<String>,
    payload: web::Payload,
    state: web::Data<AdminState>,
) -> Result<HttpResponse, Problem> {
    let limit = state.app.settings.limits.max_body_bytes;
    let body = object_body(&req, payload, limit, &["reason"], false).await?;
    let reason = reason_member(&body)?;
    let name = name.into_inner();
    move_live(state, move |root, who| {
        lifecycle::rollback(root, &name, who, reason.as_deref())
    })
    .await
}

/// `GET /models/{name}/history`.
pub async fn history(
    name: web::Path<String>,
    state: web::Data<AdminState>,
) -> Result<HttpResponse, Problem> {
    let name = name.into_inner();
    let root = state.follower.root().to_path_buf();
    let view =
        blocking(move || lifecycle::history(&root, &name).map_err(|e| lifecycle_problem(&e)))
            .await?;
    let mut body = serde_json::to_value(&view).map_err(|e| Problem::internal(&e))?;
    body["serving"] = json!(serving(&state, &view.name));
    Ok(HttpResponse::Ok().json(body))
}

fn shadowing(state: &AdminState) -> Result<&Arc<Shadowing>, Problem> {
    state.app.shadow.as_ref().ok_or_else(|| {
        Problem::new(
            Kind::ShadowOff,
            "this process was started without shadow scoring",
        )
    })
}

/// `PUT /models/{name}/shadow`: written to the model directory
/// ([`lifecycle::set_shadow`]), then followed here before the answer, and by every other
/// replica within a poll.
pub async fn set_shadow(
    req: HttpRequest,
    name: web::Path<String>,
    payload: web::Payload,
    state: web::Data<AdminState>,
) -> Result<HttpResponse, Problem> {
    let shadow = Arc::clone(shadowing(&state)?);
    let limit = state.app.settings.limits.max_body_bytes;
    let body = object_body(&req, payload, limit, &["version", "reason"], true).await?;
    let version = version_member(&body)?;
    let reason = reason_member(&body)?;
    let name = name.into_inner();
    let entry = find(&state.app, &name)?;
    // What this process measured of a shadow the new one replaces, for the history.
    let replaced = shadow
        .report(&entry)
        .filter(|r| r.shadow_version != version)
        .map(|r| r.figures());
    let who = state.token.who();
    let follower = Arc::clone(&state.follower);
    let label = name.clone();
    let moved = blocking(move || {
        let moved = lifecycle::set_shadow(
            follower.root(),
            &label,
            &version,
            &who,
            reason.as_deref(),
            replaced.as_ref(),
        )
        .map_err(|e| lifecycle_problem(&e))?;
        follower.poll();
        Ok(moved)
    })
    .await?;
    let candidate = moved
        .shadow_model
        .as_ref()
        .ok_or_else(|| Problem::internal(&"a shadow set without its model"))?;
    let changes = gate::contract_changes(&moved.live_model, candidate);
    let version = candidate.version().to_string();
    tracing::info!(model = %name, live = %moved.live, shadow = %version, replaced = moved.from.as_deref(), changed = moved.changed, who = %state.token.who(), "shadow set");
    Ok(HttpResponse::Ok().json(json!({
        "model": name,
        "live_version": moved.live,
        "shadow_version": version,
        "replaced": moved.from,
        "share": shadow.share().get(),
        "changes": changes_json(&changes),
        "notes": crate::monitoring::shadow::threshold_note(&moved.live_model, candidate).into_iter().collect::<Vec<_>>(),
    })))
}

fn no_shadow(name: &str) -> Problem {
    let shown: String = name.chars().take(100).collect();
    Problem::new(
        Kind::NoShadow,
        format!("model '{shown}' has no shadow; set one with PUT /models/{shown}/shadow"),
    )
}

/// `GET /models/{name}/shadow`.
pub async fn shadow_report(
    name: web::Path<String>,
    state: web::Data<AdminState>,
) -> Result<HttpResponse, Problem> {
    let shadow = shadowing(&state)?;
    let entry = find(&state.app, &name)?;
    let report = shadow.report(&entry).ok_or_else(|| no_shadow(&name))?;
    Ok(HttpResponse::Ok()
        .insert_header((header::CACHE_CONTROL, "no-store"))
        .json(report))
}

/// `DELETE /models/{name}/shadow`: this process's final report, kept in the history record
/// that ends the shadowing ([`lifecycle::end_shadow`]).
pub async fn clear_shadow(
    name: web::Path<String>,
    state: web::Data<AdminState>,
) -> Result<HttpResponse, Problem> {
    let shadow = Arc::clone(shadowing(&state)?);
    let name = name.into_inner();
    find(&state.app, &name)?;
    // Follow the directory first, so the report is of the shadowing being ended.
    let follower = Arc::clone(&state.follower);
    blocking(move || {
        follower.poll();
        Ok(())
    })
    .await?;
    let entry = find(&state.app, &name)?;
    let report = shadow.report(&entry);
    let figures = report.as_ref().map(|r| r.figures());
    let (who, follower, label) = (state.token.who(), Arc::clone(&state.follower), name.clone());
    let moved = blocking(move || {
        let moved = lifecycle::end_shadow(follower.root(), &label, &who, None, figures.as_ref())
            .map_err(|e| lifecycle_problem(&e))?;
        follower.poll();
        Ok(moved)
    })
    .await?;
    let cleared = moved.from.unwrap_or_default();
    tracing::info!(model = %name, shadow = %cleared, who = %state.token.who(), "shadow cleared");
    Ok(HttpResponse::Ok().json(json!({
        "model": name,
        "cleared": cleared,
        "report": report,
    })))
}
