//! `POST /models/{name}/probability`: one observation or a batch, scored by the live version
//! (and, once the answer is built, by the entry's shadow candidate, if any: `monitoring::shadow`).
//! `POST /models/{name}/versions/{version}/probability`: the same request scored by a stored
//! version named by its label (`service::stored`), through the same code. When that version is
//! not live, the answer carries a `not_live` note, its receipts name that version, and it
//! enters no drift window, no model-wide series and no shadow comparison.
//!
//! The body is read on the I/O worker; a small one is parsed and scored there, a larger one on
//! the scoring pool (`service::compute`), so that a large batch never delays the requests that
//! share its worker. Either way the request passes the work budget and the in-flight limit
//! before anything is scored.

use std::sync::Arc;

use actix_web::http::header;
use actix_web::web::Bytes;
use actix_web::{web, HttpMessage, HttpRequest, HttpResponse};
use serde_json::Value as Json;

use super::models::find;
use crate::model::{Model, Value};
use crate::monitoring::shadow::reads_announced;
use crate::registry::{gate, Entry};
use crate::service::admin::refusals::gate_problem;
use crate::service::body::{parse_json, read_json_bytes};
use crate::service::compute::{Admitted, INLINE_BODY_BYTES};
use crate::service::direct;
use crate::service::dto::{parse_probability_request, Observations};
use crate::service::middleware::Scored;
use crate::service::observations::{parse, parse_object};
use crate::service::problem::{Kind, Problem};
use crate::service::request_id::RequestId;
use crate::service::scoring::{announced_message, score, ANNOUNCED_IGNORED};
use crate::service::state::AppState;

/// Which version answers a request: the live one, or a stored one asked for by its label.
struct Target {
    entry: Arc<Entry>,
    model: Arc<Model>,
    live: bool,
}

/// Score the request's observations with the model's live version.
pub async fn probability(
    req: HttpRequest,
    name: web::Path<String>,
    payload: web::Payload,
    state: web::Data<AppState>,
) -> Result<HttpResponse, Problem> {
    let entry = find(&state, &name)?;
    let model = Arc::clone(&entry.live);
    let target = Target {
        entry,
        model,
        live: true,
    };
    respond(req, payload, state, target).await
}

/// Score the request's observations with the stored version the path names.
pub async fn version_probability(
    req: HttpRequest,
    path: web::Path<(String, String)>,
    payload: web::Payload,
    state: web::Data<AppState>,
) -> Result<HttpResponse, Problem> {
    let (name, version) = path.into_inner();
    gate::check_labels(&name, &version).map_err(|e| gate_problem(&e))?;
    let entry = find(&state, &name)?;
    let model = stored_version(&state, &entry, &version).await?;
    let live = Arc::ptr_eq(&model, &entry.live);
    let target = Target { entry, model, live };
    respond(req, payload, state, target).await
}

/// The version `version` of `entry`'s model: the live or shadow version already loaded, or one
/// read from the model directory (off the I/O worker, on first use).
async fn stored_version(
    state: &AppState,
    entry: &Entry,
    version: &str,
) -> Result<Arc<Model>, Problem> {
    if entry.live.version() == version {
        return Ok(Arc::clone(&entry.live));
    }
    if let Some(shadow) = entry.shadow.as_ref().filter(|s| s.version() == version) {
        return Ok(Arc::clone(shadow));
    }
    let name = entry.live.name().to_string();
    let Some(stored) = state.stored.clone() else {
        return Err(Problem::new(
            Kind::UnknownVersion,
            format!(
                "this process serves no model directory, so of model '{name}' only the live version '{}' can be asked for",
                entry.live.version()
            ),
        )
        .parameter("version"));
    };
    if let Some(model) = stored.cached(&name, version) {
        return Ok(model);
    }
    let version = version.to_string();
    web::block(move || stored.load(&name, &version))
        .await
        .map_err(|e| Problem::internal(&e))?
}

/// Read the body, score it with the target version (inline or on the pool) and answer.
async fn respond(
    req: HttpRequest,
    payload: web::Payload,
    state: web::Data<AppState>,
    target: Target,
) -> Result<HttpResponse, Problem> {
    let limits = &state.settings.limits;
    let bytes = read_json_bytes(&req, payload, limits.max_body_bytes).await?;
    let request_id = req
        .extensions()
        .get::<RequestId>()
        .cloned()
        .unwrap_or_else(RequestId::generate);
    let job_state = state.clone().into_inner();
    let target = Arc::new(target);
    let job_target = Arc::clone(&target);
    let inline = bytes.len() <= INLINE_BODY_BYTES;
    let job = move || answer(&job_state, &job_target, &bytes, request_id.as_str());
    let answered = if inline {
        job()
    } else {
        state.compute.run(job).await?
    };
    req.extensions_mut().insert(Scored {
        model: target.model.name().to_string(),
        version: target.model.version().to_string(),
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

/// How a request's observations were read: straight into values (`service::direct`), or as
/// JSON to be checked against the model once the request is admitted.
enum Read<'a> {
    Values(Vec<Value>),
    Sent(Observations<'a>),
}

/// Parse, check, admit, score and serialize: everything after the body has arrived.
fn answer(state: &AppState, target: &Target, bytes: &Bytes, request_id: &str) -> Answered {
    let mut logged = None;
    let result = (|| {
        let limits = &state.settings.limits;
        let model = &target.model;
        // Fields that stored versions announce: the live version accepts and ignores them.
        let accepted: Vec<&str> = if target.live {
            target
                .entry
                .announced
                .iter()
                .map(|a| a.field.as_str())
                .filter(|f| model.covariate_index(f).is_none())
                .collect()
        } else {
            Vec::new()
        };
        let shadow_reads_objects = state.shadow.is_some()
            && target.live
            && (target.entry.shadow.as_ref()).is_some_and(|c| reads_announced(model, c));
        // The observations as sent are needed only to log them, to see announced fields or
        // for a shadow that reads fields the live version does not; otherwise a well-formed
        // request is read straight into values, and anything else the general way below.
        let needs_objects =
            state.settings.log_observations || !accepted.is_empty() || shadow_reads_objects;
        let direct = (!needs_objects)
            .then(|| direct::read(model, bytes, limits.max_batch))
            .flatten();
        let body: Json;
        let (request, read) = match direct {
            Some(direct) => (direct.request, Read::Values(direct.values)),
            None => {
                body = parse_json(bytes)?;
                let (request, observations) = parse_probability_request(&body, limits.max_batch)?;
                (request, Read::Sent(observations))
            }
        };
        let sent = match read {
            Read::Sent(observations) => Some(observations),
            Read::Values(_) => None,
        };
        logged = sent
            .filter(|_| state.settings.log_observations)
            .map(|observations| match observations {
                Observations::One(o) => serde_json::to_string(o).unwrap_or_default(),
                Observations::Many(list) => serde_json::to_string(list).unwrap_or_default(),
            });
        state
            .compute
            .check_budget(request.count, model.coefficients.len())?;
        let admission = state.compute.admit(request.count)?;
        let (mut values, faults) = match read {
            Read::Values(values) => (values, Vec::new()),
            Read::Sent(observations) => {
                let parsed = parse(model, observations, &accepted, request.keep_faulty)?;
                (parsed.values, parsed.faults)
            }
        };
        let metrics = if target.live {
            state.metrics.scoring(model)
        } else {
            let detached = state.metrics.scoring_not_live(model);
            Arc::new(detached.map_err(|e| Problem::internal(&e))?)
        };
        let mut scored = score(model, &request, &values, faults, request_id, &metrics)?;
        // Monitoring sees the scored observations only: no receipt, drift count or shadow
        // comparison for one answered by its fault.
        scored.align_values(&mut values);
        if let Some(monitor) = &state.monitor {
            let probabilities = scored.answers().iter().map(|a| a.probability);
            let receipts = if target.live {
                monitor.record_scored(model, &values, probabilities)
            } else {
                monitor.seal_not_live(model, probabilities)
            };
            scored.set_receipts(receipts.map_err(|e| Problem::internal(&e))?);
        }
        if !target.live {
            scored.set_not_live(target.entry.live.version());
        }
        if let Some(observations) = sent {
            let announced = announced_sent(&target.entry, &accepted, observations);
            if !announced.is_empty() {
                scored.add_note(ANNOUNCED_IGNORED, announced_message(model, &announced));
            }
        }
        let json = scored.to_json();
        match (&state.shadow, &target.entry.shadow, sent) {
            (Some(shadow), Some(candidate), Some(observations)) if shadow_reads_objects => {
                let mut rows = parsed_by(candidate, observations);
                let mut faulty = scored.faulty_indices().peekable();
                let mut index = 0;
                rows.retain(|_| {
                    let scored = faulty.next_if_eq(&index).is_none();
                    index += 1;
                    scored
                });
                shadow.compare_parsed(&target.entry, &rows, scored.answers());
            }
            (Some(shadow), Some(_), _) if target.live => {
                shadow.compare(&target.entry, &values, scored.answers());
            }
            _ => {}
        }
        Ok((json, admission))
    })();
    Answered { result, logged }
}

/// The announced fields (each with the version announcing it) that some observation sends.
fn announced_sent<'a>(
    entry: &'a Entry,
    accepted: &[&str],
    observations: Observations<'_>,
) -> Vec<(&'a str, &'a str)> {
    if accepted.is_empty() {
        return Vec::new();
    }
    let sends = |field: &str| match observations {
        Observations::One(object) => object.contains_key(field),
        Observations::Many(list) => list
            .iter()
            .any(|o| o.as_object().is_some_and(|o| o.contains_key(field))),
    };
    entry
        .announced
        .iter()
        .filter(|a| accepted.contains(&a.field.as_str()) && sends(&a.field))
        .map(|a| (a.field.as_str(), a.version.as_str()))
        .collect()
}

/// Each observation as `candidate` reads it, or `None` where it cannot (an announced
/// covariate not sent, a value it refuses): for a shadow that needs announced covariates.
/// Fields the candidate does not know (kept from the live version) are ignored.
fn parsed_by(candidate: &Model, observations: Observations<'_>) -> Vec<Option<Vec<Value>>> {
    let read = |object: &serde_json::Map<String, serde_json::Value>| {
        let unknown: Vec<&str> = object
            .keys()
            .map(String::as_str)
            .filter(|k| candidate.covariate_index(k).is_none())
            .collect();
        let mut values = Vec::with_capacity(candidate.covariates.len());
        parse_object(candidate, object, "", &mut values, &unknown)
            .is_ok()
            .then_some(values)
    };
    match observations {
        Observations::One(object) => vec![read(object)],
        Observations::Many(list) => list.iter().map(|o| o.as_object().and_then(read)).collect(),
    }
}
