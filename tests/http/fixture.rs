//! Test models, a real server on port 0, and a small HTTP client over ureq.
//!
//! The models are invented inputs for identity tests (the service must return exactly what the
//! engine computes); no value here is a reference value.

use std::sync::Arc;
use std::time::Duration;

use ogive::metrics::Metrics;
use ogive::model::Model;
use ogive::registry::Registry;
use ogive::service::{AppState, Background, Configure, Settings};
use serde_json::{json, Value as Json};

/// A covariance V = D R D with R = 0.9 I + 0.1 J (positive definite) and D the given standard
/// errors.
fn covariance(std_errors: &[f64]) -> Vec<Vec<f64>> {
    let k = std_errors.len();
    (0..k)
        .map(|r| {
            (0..k)
                .map(|c| {
                    let rho = if r == c { 1.0 } else { 0.1 };
                    rho * std_errors[r] * std_errors[c]
                })
                .collect()
        })
        .collect()
}

/// A logit model with every covariate kind, a log term, a square, a product, a covariance, a
/// joint check and decision bands.
pub fn lease_file() -> Json {
    let terms = [
        ("intercept", -1.2),
        ("log(annual_revenue)", -0.35),
        ("years_trading", -0.08),
        ("years_trading^2", 0.0015),
        ("prior_arrears", 0.45),
        ("guarantor", -0.6),
        ("sector[construction]", 0.5),
        ("sector[transport]", 0.3),
        ("sector[services]", -0.2),
        ("years_trading*guarantor", 0.02),
    ];
    let std_errors = [0.3, 0.05, 0.02, 0.0004, 0.08, 0.15, 0.12, 0.13, 0.11, 0.01];
    json!({
        "format": "ogive-model",
        "format_version": 1,
        "name": "lease-test",
        "version": "2026-01",
        "description": "test fixture for the HTTP tests",
        "outcome": {"name": "arrears_60", "meaning": "the lease fell 60+ days behind within a year"},
        "link": "logit",
        "covariates": [
            {"name": "annual_revenue", "kind": "continuous", "unit": "thousand EUR",
             "training": {"min": 20.0, "max": 5000.0, "mean": 600.0, "std_dev": 500.0}},
            {"name": "years_trading", "kind": "continuous", "unit": "years",
             "training": {"min": 0.0, "max": 40.0, "mean": 9.0, "std_dev": 7.0}},
            {"name": "prior_arrears", "kind": "count",
             "training": {"min": 0.0, "max": 6.0, "mean": 0.4, "std_dev": 0.8}},
            {"name": "guarantor", "kind": "binary",
             "training": {"min": 0.0, "max": 1.0, "mean": 0.35, "std_dev": 0.48}},
            {"name": "sector", "kind": "categorical",
             "levels": ["retail", "construction", "transport", "services"], "reference": "retail",
             "training": {"level_counts": {"retail": 400, "construction": 250, "transport": 150, "services": 200}}}
        ],
        "terms": terms.iter().map(|(t, b)| json!({"term": t, "coefficient": b})).collect::<Vec<_>>(),
        "covariance": covariance(&std_errors),
        "covariance_type": "classical",
        "joint": {"covariates": ["annual_revenue", "years_trading"], "mean": [600.0, 9.0],
                  "covariance": [[250000.0, 300.0], [300.0, 49.0]], "max_distance": 3.5},
        "decision": {"threshold": 0.3, "bands": [
            {"name": "low", "below": 0.1}, {"name": "medium", "below": 0.3}, {"name": "high", "below": 1.0}]},
        "provenance": {"fitted_by": "hand-written test fixture", "fitted_at": "2026-01-01T00:00:00Z", "observations": 1000}
    })
}

/// A probit model without a covariance.
pub fn plain_file() -> Json {
    json!({
        "format": "ogive-model",
        "format_version": 1,
        "name": "plain-test",
        "version": "v1",
        "outcome": {"name": "took_up", "meaning": "the household took up the rebate"},
        "link": "probit",
        "covariates": [
            {"name": "income", "kind": "continuous", "training": {"min": 5.0, "max": 200.0, "mean": 45.0}},
            {"name": "owner", "kind": "binary", "training": {"min": 0.0, "max": 1.0, "mean": 0.6}}
        ],
        "terms": [
            {"term": "intercept", "coefficient": -0.4},
            {"term": "income", "coefficient": 0.01},
            {"term": "owner", "coefficient": 0.3}
        ],
        "provenance": {"fitted_by": "hand-written test fixture", "fitted_at": "2026-01-01T00:00:00Z", "observations": 500}
    })
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

/// A real server on 127.0.0.1:0 serving both fixtures.
pub struct Server {
    /// `http://127.0.0.1:PORT`.
    pub base: String,
    /// The running listener.
    pub background: Option<Background>,
    /// The client.
    pub agent: ureq::Agent,
}

/// Settings for tests: port 0, two workers, no drain delay, small limits where tests probe them.
pub fn test_settings() -> Settings {
    let mut settings = Settings {
        listen: "127.0.0.1:0".parse().expect("address"),
        workers: 2,
        drain_delay_ms: 0,
        shutdown_timeout_ms: 5_000,
        ..Settings::default()
    };
    settings.limits.max_batch = 1_000;
    settings.limits.max_body_bytes = 512 * 1024;
    settings.limits.max_header_bytes = 8 * 1024;
    settings
}

impl Server {
    /// Start with the default test settings.
    pub fn start() -> Server {
        Server::start_with(test_settings(), None)
    }

    /// Start with these settings and extra routes.
    pub fn start_with(settings: Settings, extra: Option<Configure>) -> Server {
        let registry = Arc::new(Registry::from_models([
            model(&lease_file()),
            model(&plain_file()),
        ]));
        let state = AppState::new(registry, Metrics::new().expect("metrics"), settings, true);
        let background = Background::start(state, extra).expect("server starts");
        let base = format!("http://{}", background.addr);
        let agent = ureq::AgentBuilder::new()
            .timeout(Duration::from_secs(20))
            .build();
        Server {
            base,
            background: Some(background),
            agent,
        }
    }

    /// The state the server serves.
    pub fn state(&self) -> &AppState {
        &self.background.as_ref().expect("running").state
    }

    /// Send a request; any status is returned, never an error.
    pub fn send(
        &self,
        method: &str,
        path: &str,
        headers: &[(&str, &str)],
        body: Option<&[u8]>,
    ) -> Reply {
        let mut request = self.agent.request(method, &format!("{}{path}", self.base));
        for (name, value) in headers {
            request = request.set(name, value);
        }
        let result = match body {
            Some(bytes) => request.send_bytes(bytes),
            None => request.call(),
        };
        let response = match result {
            Ok(r) => r,
            Err(ureq::Error::Status(_, r)) => r,
            Err(e) => panic!("{method} {path}: transport error {e}"),
        };
        Reply::from(response)
    }

    /// GET a path.
    pub fn get(&self, path: &str) -> Reply {
        self.send("GET", path, &[], None)
    }

    /// POST a JSON value.
    pub fn post(&self, path: &str, body: &Json) -> Reply {
        self.send(
            "POST",
            path,
            &[("Content-Type", "application/json")],
            Some(body.to_string().as_bytes()),
        )
    }

    /// POST raw bytes as JSON.
    pub fn post_raw(&self, path: &str, body: &[u8]) -> Reply {
        self.send(
            "POST",
            path,
            &[("Content-Type", "application/json")],
            Some(body),
        )
    }
}

/// A response, read whole.
#[derive(Debug, Clone)]
pub struct Reply {
    /// The status code.
    pub status: u16,
    /// Header names (lower case) and values.
    pub headers: Vec<(String, String)>,
    /// The body text.
    pub text: String,
}

impl From<ureq::Response> for Reply {
    fn from(response: ureq::Response) -> Reply {
        let status = response.status();
        let headers = response
            .headers_names()
            .into_iter()
            .filter_map(|n| {
                response
                    .header(&n)
                    .map(|v| (n.to_ascii_lowercase(), v.to_string()))
            })
            .collect();
        let text = response.into_string().unwrap_or_default();
        Reply {
            status,
            headers,
            text,
        }
    }
}

impl Reply {
    /// A header's value.
    pub fn header(&self, name: &str) -> Option<&str> {
        self.headers
            .iter()
            .find(|(n, _)| n == name)
            .map(|(_, v)| v.as_str())
    }

    /// The body as JSON.
    pub fn json(&self) -> Json {
        serde_json::from_str(&self.text).unwrap_or_else(|e| {
            panic!(
                "status {}: body is not JSON ({e}): {}",
                self.status, self.text
            )
        })
    }
}
