//! The OpenAPI 3.1 document served at `GET /openapi.json`.
//!
//! The routes and shared schemas are written by hand in `openapi.json` beside this file (the
//! reviewed contract). At serving time the document is completed from the live registry:
//! configured limits replace the defaults written there, and each loaded model gets concrete
//! paths (`/models/NAME/probability`, `/models/NAME/curve`) whose schemas spell out that
//! model's covariates exactly, kinds, levels and the service's numeric bounds included, so a
//! generated client or a property-based tester knows what a valid observation is. The
//! templated model paths are then left out: the served document describes this deployment's
//! routes exactly (a name that is not loaded answers 404 `unknown-model`). With no model
//! loaded, the templates are served as written.

use std::sync::OnceLock;

use serde_json::{json, Map, Value as Json};

use super::config::Limits;
use super::curve::RESERVED;
use super::observations::{MAX_MAGNITUDE, MIN_LOG_ARGUMENT};
use crate::model::{CovariateKind, Model};
use crate::registry::Snapshot;

/// The hand-written part of the document.
pub const BASE: &str = include_str!("openapi.json");

fn base() -> &'static Json {
    static PARSED: OnceLock<Json> = OnceLock::new();
    PARSED.get_or_init(|| serde_json::from_str(BASE).unwrap_or_else(|_| json!({})))
}

/// The JSON Schema of one covariate's value in a request body.
pub fn covariate_schema(model: &Model, j: usize) -> Json {
    let c = &model.covariates[j];
    let has_log = model.log_terms.iter().any(|&(_, k)| k == j);
    let low = if has_log {
        MIN_LOG_ARGUMENT
    } else {
        -MAX_MAGNITUDE
    };
    let mut schema = match c.kind {
        CovariateKind::Continuous => {
            json!({"type": "number", "minimum": low, "maximum": MAX_MAGNITUDE})
        }
        CovariateKind::Count => {
            json!({"type": "integer", "minimum": if has_log { 1.0 } else { 0.0 }, "maximum": MAX_MAGNITUDE})
        }
        CovariateKind::Binary => json!({"enum": [0, 1, false, true]}),
        CovariateKind::Categorical => json!({"type": "string", "enum": c.levels}),
    };
    let mut description = format!("{} covariate", c.kind.name());
    if c.kind != CovariateKind::Categorical {
        description.push_str(&format!(
            "; training range [{}, {}]",
            c.training_min, c.training_max
        ));
    }
    if let Some(unit) = &c.unit {
        description.push_str(&format!("; unit {unit}"));
    }
    schema["description"] = json!(description);
    schema
}

/// The same value as a query parameter (curve route): query text carries binary values as
/// `0`/`1`.
fn query_schema(model: &Model, j: usize) -> Json {
    match model.covariates[j].kind {
        CovariateKind::Binary => json!({"type": "integer", "enum": [0, 1]}),
        _ => covariate_schema(model, j),
    }
}

/// The JSON Schema of one observation of `model`.
pub fn observation_schema(model: &Model) -> Json {
    let properties: Map<String, Json> = (0..model.covariates.len())
        .map(|j| (model.covariates[j].name.clone(), covariate_schema(model, j)))
        .collect();
    let required: Vec<&str> = model.covariates.iter().map(|c| c.name.as_str()).collect();
    json!({
        "type": "object",
        "properties": properties,
        "required": required,
        "additionalProperties": false,
    })
}

fn component_name(model: &Model) -> String {
    format!("Observation.{}", model.name())
}

/// The document for the models in `snapshot`, under `limits`.
pub fn document(snapshot: &Snapshot, limits: &Limits) -> Json {
    let mut doc = base().clone();
    doc["info"]["version"] = json!(env!("CARGO_PKG_VERSION"));
    doc["components"]["schemas"]["ProbabilityRequest"]["properties"]["observations"]["maxItems"] =
        json!(limits.max_batch);
    let template_curve = doc["paths"]["/models/{name}/curve"].clone();
    set_points_maximum(&mut doc["paths"]["/models/{name}/curve"], limits);
    let template_probability = doc["paths"]["/models/{name}/probability"].clone();
    let template_describe = doc["paths"]["/models/{name}"].clone();
    let request_template = doc["components"]["schemas"]["ProbabilityRequest"].clone();
    for entry in snapshot.models.values() {
        let model = &entry.live;
        let name = component_name(model);
        doc["components"]["schemas"][&name] = observation_schema(model);
        let observation_ref = json!(format!("#/components/schemas/{name}"));
        let mut request = request_template.clone();
        // The reference replaces the generic observation's; the property keeps its description.
        request["properties"]["observation"]["$ref"] = observation_ref.clone();
        // A batch sent with "on_error": "keep" answers a faulty observation (of any JSON type)
        // by its error, so only without it must every observation of a batch be one this
        // model takes.
        request["properties"]["observations"]["items"] = json!({
            "description": "an observation of this model; with on_error keep, any value, a faulty one being answered by its error"
        });
        request["if"] = json!({
            "properties": {"on_error": {"const": "keep", "description": "faulty observations kept"}},
            "required": ["on_error"]
        });
        request["else"] = json!({"properties": {"observations": {
            "items": {"$ref": observation_ref},
            "description": "without on_error keep, each observation is one this model takes"
        }}});
        let request_name = format!("ProbabilityRequest.{}", model.name());
        doc["components"]["schemas"][&request_name] = request;

        let mut probability = template_probability.clone();
        let operation = &mut probability["post"];
        operation["operationId"] = json!(format!("probability.{}", model.name()));
        operation["requestBody"]["content"]["application/json"]["schema"] =
            json!({"$ref": format!("#/components/schemas/{request_name}")});
        if let Some(map) = operation.as_object_mut() {
            map.remove("parameters");
        }
        doc["paths"][format!("/models/{}/probability", model.name())] = probability;

        let mut describe = template_describe.clone();
        describe["get"]["operationId"] = json!(format!("describeModel.{}", model.name()));
        if let Some(map) = describe["get"].as_object_mut() {
            map.remove("parameters");
        }
        doc["paths"][format!("/models/{}", model.name())] = describe;

        let mut curve = template_curve.clone();
        let operation = &mut curve["get"];
        operation["operationId"] = json!(format!("curve.{}", model.name()));
        let over: Vec<&str> = model
            .covariates
            .iter()
            .map(|c| c.name.as_str())
            .filter(|n| !RESERVED.contains(n))
            .collect();
        let mut parameters: Vec<Json> = operation["parameters"]
            .as_array()
            .cloned()
            .unwrap_or_default()
            .into_iter()
            .filter(|p| p["in"] != "path")
            .collect();
        for p in &mut parameters {
            if p["name"] == "over" {
                p["schema"] = json!({"type": "string", "enum": over});
            }
        }
        for (j, c) in model.covariates.iter().enumerate() {
            if RESERVED.contains(&c.name.as_str()) {
                continue;
            }
            parameters.push(json!({
                "name": c.name,
                "in": "query",
                "required": false,
                "description": "hold this covariate at a value (default: its training mean, or its training shares for a categorical covariate)",
                "schema": query_schema(model, j),
            }));
        }
        operation["parameters"] = Json::Array(parameters);
        set_points_maximum(&mut curve, limits);
        doc["paths"][format!("/models/{}/curve", model.name())] = curve;
    }
    if !snapshot.models.is_empty() {
        // The served document describes this deployment: its models' concrete paths replace
        // the templates (which stay in openapi.json, and are served when no model is loaded).
        if let Some(paths) = doc["paths"].as_object_mut() {
            for template in TEMPLATED_PATHS {
                paths.remove(template);
            }
        }
    }
    doc
}

/// The templated model paths of the hand-written document.
pub const TEMPLATED_PATHS: [&str; 3] = [
    "/models/{name}",
    "/models/{name}/probability",
    "/models/{name}/curve",
];

fn set_points_maximum(curve_path: &mut Json, limits: &Limits) {
    if let Some(parameters) = curve_path["get"]["parameters"].as_array_mut() {
        for p in parameters {
            if p["name"] == "points" {
                p["schema"]["maximum"] = json!(limits.max_curve_points);
            }
        }
    }
}
