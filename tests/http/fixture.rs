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

/// The committed test model directory (also served by `.ci/http-checks.sh` when the demo
/// models are absent).
pub fn models_dir() -> std::path::PathBuf {
    std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/http/models")
}

fn read_model_file(name: &str, version: &str) -> Json {
    let path = models_dir()
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
        Server::start_state(state, extra)
    }

    /// Start serving this state.
    pub fn start_state(state: AppState, extra: Option<Configure>) -> Server {
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
