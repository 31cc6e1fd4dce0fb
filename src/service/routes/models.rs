//! `GET /models` (what is loaded) and `GET /models/{name}` (one model's live version, link,
//! covariates with their training ranges, and terms), each with a strong ETag of its bytes
//! (`If-None-Match` → 304, see `service::etag`).

use std::sync::Arc;

use actix_web::{web, HttpRequest, HttpResponse};
use serde_json::{json, Value as Json};

use crate::model::{CovariateKind, Model};
use crate::registry::Entry;
use crate::service::etag::json_tagged_by_bytes;
use crate::service::problem::{echo, Kind, Problem};
use crate::service::state::AppState;

/// The entry serving `name`, or 404 `unknown-model` naming the models that are served.
pub fn find(state: &AppState, name: &str) -> Result<Arc<Entry>, Problem> {
    let snapshot = state.registry.snapshot();
    if let Some(entry) = snapshot.models.get(name) {
        return Ok(Arc::clone(entry));
    }
    if state.health.has_failed(name) {
        // In the directory but not loadable: the caller's request is right, the service is
        // not, and another replica (or a later try) may answer it.
        return Err(Problem::new(
            Kind::Unavailable,
            format!(
                "model {} failed to load: its live pointer names a version that is missing or not valid; the service log says which",
                echo(name)
            ),
        ));
    }
    let served: Vec<&str> = snapshot.models.keys().map(String::as_str).collect();
    let listing = if served.is_empty() {
        "no model is served at all (GET /readyz says why)".to_string()
    } else {
        format!("the models served are {}", served.join(", "))
    };
    Err(Problem::new(
        Kind::UnknownModel,
        format!("no model called {} is being served; {listing}", echo(name)),
    ))
}

fn summary(entry: &Entry) -> Json {
    let model = &entry.live;
    let f = &model.file;
    json!({
        "name": f.name,
        "version": f.version,
        "link": model.link.name(),
        "description": f.description,
        "outcome": {"name": f.outcome.name, "meaning": f.outcome.meaning},
        "covariates": model.covariates.len(),
        "has_covariance": model.covariance.is_some(),
    })
}

fn covariate(model: &Model, j: usize) -> Json {
    let c = &model.covariates[j];
    let spec = &model.file.covariates[j];
    let mut out = json!({"name": c.name, "kind": c.kind.name()});
    let map = out.as_object_mut().expect("built as an object");
    if let Some(unit) = &c.unit {
        map.insert("unit".into(), json!(unit));
    }
    if let Some(description) = &spec.description {
        map.insert("description".into(), json!(description));
    }
    if c.kind == CovariateKind::Categorical {
        map.insert("levels".into(), json!(c.levels));
        map.insert("reference".into(), json!(c.levels[c.reference]));
        map.insert(
            "training_shares".into(),
            Json::Object(
                c.levels
                    .iter()
                    .zip(&model.level_shares[j])
                    .map(|(l, s)| (l.clone(), json!(s)))
                    .collect(),
            ),
        );
    } else {
        map.insert(
            "training".into(),
            json!({"min": c.training_min, "max": c.training_max, "mean": c.training_mean}),
        );
    }
    if model.log_terms.iter().any(|&(_, k)| k == j) {
        map.insert("log_term".into(), json!(true));
    }
    out
}

/// `GET /models`.
pub async fn list(req: HttpRequest, state: web::Data<AppState>) -> Result<HttpResponse, Problem> {
    let snapshot = state.registry.snapshot();
    let models: Vec<Json> = snapshot.models.values().map(|e| summary(e)).collect();
    let body =
        serde_json::to_vec(&json!({ "models": models })).map_err(|e| Problem::internal(&e))?;
    Ok(json_tagged_by_bytes(&req, body))
}

/// `GET /models/{name}`.
pub async fn describe(
    req: HttpRequest,
    state: web::Data<AppState>,
    name: web::Path<String>,
) -> Result<HttpResponse, Problem> {
    let entry = find(&state, &name)?;
    let model = &entry.live;
    let f = &model.file;
    let mut body = summary(&entry);
    let map = body.as_object_mut().expect("built as an object");
    map.insert(
        "covariates".into(),
        Json::Array(
            (0..model.covariates.len())
                .map(|j| covariate(model, j))
                .collect(),
        ),
    );
    map.insert(
        "terms".into(),
        Json::Array(
            model
                .term_labels
                .iter()
                .zip(&model.coefficients)
                .map(|(t, b)| json!({"term": t, "coefficient": b}))
                .collect(),
        ),
    );
    if let Some(kind) = &f.covariance_type {
        map.insert("covariance_type".into(), json!(kind));
    }
    map.insert("has_joint_check".into(), json!(model.joint.is_some()));
    if let Some(d) = &f.decision {
        let mut decision = serde_json::Map::new();
        if let Some(t) = d.threshold {
            decision.insert("threshold".into(), json!(t));
        }
        decision.insert(
            "bands".into(),
            Json::Array(
                d.bands
                    .iter()
                    .map(|b| json!({"name": b.name, "below": b.below}))
                    .collect(),
            ),
        );
        map.insert("decision".into(), Json::Object(decision));
    }
    map.insert(
        "provenance".into(),
        json!({
            "fitted_by": f.provenance.fitted_by,
            "fitted_at": f.provenance.fitted_at,
            "observations": f.provenance.observations,
        }),
    );
    if let Some(shadow) = &entry.shadow {
        map.insert("shadow_version".into(), json!(shadow.version()));
    }
    if !entry.announced.is_empty() {
        map.insert(
            "announced".into(),
            Json::Array(
                entry
                    .announced
                    .iter()
                    .map(|a| json!({"covariate": a.field, "version": a.version}))
                    .collect(),
            ),
        );
    }
    map.insert(
        "example".into(),
        Json::Object(crate::service::example::example_observation(model)),
    );
    let body = serde_json::to_vec(&body).map_err(|e| Problem::internal(&e))?;
    Ok(json_tagged_by_bytes(&req, body))
}
