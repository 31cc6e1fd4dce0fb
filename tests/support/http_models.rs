//! Test models of the committed HTTP test model directory (served by the test server,
//! [`super::server`]), and an observation of them.
//!
//! The models are invented inputs for identity tests (the service must return exactly what the
//! engine computes); no value here is a reference value.

use std::sync::Arc;

use ogive::model::Model;
use ogive::service::{Config, Monitoring};
use serde_json::{json, Value as Json};

use super::server::{copy_models, http_models, test_config, test_settings, TestServer};

fn read_model_file(name: &str, version: &str) -> Json {
    let path = http_models()
        .join(name)
        .join("versions")
        .join(format!("{version}.json"));
    let text = std::fs::read_to_string(&path)
        .unwrap_or_else(|e| panic!("cannot read {}: {e}", path.display()));
    serde_json::from_str(&text).unwrap_or_else(|e| panic!("{} is not JSON: {e}", path.display()))
}

/// A logit model with every covariate kind, a log term, a square, a product, a covariance
/// (D R D with R = 0.9 I + 0.1 J, so positive definite), a joint check and decision bands.
pub fn lease_file() -> Json {
    read_model_file("lease-test", "2026-01")
}

/// A probit model without a covariance.
pub fn plain_file() -> Json {
    read_model_file("plain-test", "v1")
}

/// A validated model from a file value.
pub fn model(file: &Json) -> Model {
    Model::from_json(file.to_string().as_bytes()).expect("the fixture is a valid model")
}

/// A valid observation of the lease model.
pub fn lease_observation() -> Json {
    json!({"annual_revenue": 450.0, "years_trading": 6.5, "prior_arrears": 1,
           "guarantor": 1, "sector": "construction"})
}

/// A copy of the committed test directory with a second stored version of lease-test,
/// 2026-02, that is not live (its intercept moved by +0.4, so its answers differ), served from
/// that directory with monitoring on; the stored version's model.
pub fn serving_a_stored_version() -> (TestServer, Model) {
    let dir = copy_models(&http_models());
    let mut stored = lease_file();
    stored["version"] = json!("2026-02");
    stored["terms"][0]["coefficient"] = json!(-0.8);
    let bytes = serde_json::to_vec_pretty(&stored).expect("json");
    std::fs::write(dir.path().join("lease-test/versions/2026-02.json"), &bytes).expect("write");
    let stored = model(&stored);
    let keys = Arc::new(ogive::receipt::ReceiptKeys::ephemeral().expect("key"));
    let config = Config {
        monitoring: Some(Monitoring {
            windows: ogive::monitoring::monitor::MonitorSettings::default(),
            keys,
        }),
        ..test_config(dir.path(), test_settings())
    };
    (TestServer::launch(dir, config), stored)
}
