//! A real deployment for the admin tests: a model directory in a temporary folder, the public
//! and admin listeners on 127.0.0.1 port 0, the directory follower, and a blocking client.
//! Include with `mod admin_support;` beside `mod lifecycle_support;` and the HTTP tests'
//! fixture (`#[allow(dead_code)] #[path = "http/fixture.rs"] mod fixture;`, for its `Reply`).

#![allow(dead_code)]

use std::path::Path;
use std::sync::Arc;
use std::time::{Duration, Instant};

use ogive::engine::{Options, Scorer};
use ogive::metrics::Metrics;
use ogive::model::Model;
use ogive::registry::lifecycle;
use ogive::registry::load::load_directory;
use ogive::registry::watch::DEFAULT_INTERVAL;
use ogive::registry::Registry;
use ogive::service::admin::{self, AdminState, AdminToken};
use ogive::service::follow::{FollowHandle, Follower};
use ogive::service::shadow::{Shadowing, Share};
use ogive::service::{AppState, Background, Settings};
use serde_json::{json, Value as Json};

pub use crate::fixture::Reply;

/// The admin token of every test deployment.
pub const TOKEN: &str = "test-token-5f0c8e2a9b7d4c1e";
/// Its label.
pub const LABEL: &str = "ops";
/// What the history records for it.
pub const WHO: &str = "admin:ops";

/// Put `versions` of model `name` into `root` through the lifecycle (as the CLI would) and
/// promote `live`, if given.
pub fn seed(root: &Path, name: &str, versions: &[(&str, Vec<u8>)], live: Option<&str>) {
    for (version, bytes) in versions {
        lifecycle::upload(root, name, version, bytes, true, "cli:setup", None)
            .unwrap_or_else(|e| panic!("seeding {name} {version}: {e}"));
    }
    if let Some(version) = live {
        lifecycle::promote(root, name, version, true, "cli:setup", None)
            .unwrap_or_else(|e| panic!("promoting {name} {version}: {e}"));
    }
}

/// A running deployment.
pub struct Deployment {
    /// The model directory.
    pub dir: tempfile::TempDir,
    /// `http://127.0.0.1:PORT` of the public listener.
    pub public: String,
    /// `http://127.0.0.1:PORT` of the admin listener.
    pub admin: String,
    /// The served state.
    pub state: AppState,
    background: Option<Background>,
    following: Option<FollowHandle>,
    agent: ureq::Agent,
}

/// Reading a reply of the HTTP tests' client as an admin test needs it.
pub trait Answer {
    /// The problem type's slug (after `urn:ogive:problem:`).
    fn problem(&self) -> String;
    /// Assert the status and the problem slug; the problem's body.
    fn expect_problem(&self, status: u16, slug: &str) -> Json;
    /// Assert the status; the JSON body.
    fn expect(&self, status: u16) -> Json;
}

impl Answer for Reply {
    #[track_caller]
    fn problem(&self) -> String {
        assert_eq!(
            self.header("content-type"),
            Some("application/problem+json"),
            "status {}: {}",
            self.status,
            self.text
        );
        let body = self.json();
        body["type"]
            .as_str()
            .and_then(|t| t.strip_prefix("urn:ogive:problem:"))
            .unwrap_or_else(|| panic!("not a problem: {body}"))
            .to_string()
    }

    #[track_caller]
    fn expect_problem(&self, status: u16, slug: &str) -> Json {
        assert_eq!(self.status, status, "{}", self.text);
        assert_eq!(self.problem(), slug, "{}", self.text);
        self.json()
    }

    #[track_caller]
    fn expect(&self, status: u16) -> Json {
        assert_eq!(self.status, status, "{}", self.text);
        self.json()
    }
}

/// Settings for tests: port 0, two workers, no drain delay.
pub fn test_settings() -> Settings {
    Settings {
        listen: "127.0.0.1:0".parse().expect("address"),
        workers: 2,
        drain_delay_ms: 0,
        shutdown_timeout_ms: 5_000,
        ..Settings::default()
    }
}

impl Deployment {
    /// Serve the model directory `dir` with shadow share `share`.
    pub fn start(dir: tempfile::TempDir, share: Share) -> Deployment {
        let report = load_directory(dir.path()).expect("the model directory loads");
        assert!(report.failures.is_empty(), "{:?}", report.failures);
        let registry = Arc::new(Registry::default());
        registry.replace(report.snapshot);
        let metrics = Metrics::new().expect("metrics");
        let shadowing = Shadowing::new(share, &metrics.registry).expect("shadow series");
        let state = AppState::new(registry, metrics, test_settings(), true).with_shadow(shadowing);
        let follower = Arc::new(Follower::new(dir.path(), &state));
        let following = follower
            .spawn(DEFAULT_INTERVAL)
            .expect("the follower starts");
        let token = AdminToken::new(TOKEN.as_bytes(), LABEL, "the test").expect("token");
        let admin_state = AdminState::new(state.clone(), follower, token);
        let listener = admin::Listener::bind("127.0.0.1:0".parse().expect("address"), admin_state)
            .expect("the admin listener binds");
        let background = Background::start_with_admin(state.clone(), Some(listener), None)
            .expect("the listeners start");
        let admin_addr = background.admin_addr.expect("an admin address");
        Deployment {
            dir,
            public: format!("http://{}", background.addr),
            admin: format!("http://{admin_addr}"),
            state,
            background: Some(background),
            following: Some(following),
            agent: ureq::AgentBuilder::new()
                .timeout(Duration::from_secs(60))
                .build(),
        }
    }

    /// The model directory.
    pub fn root(&self) -> &Path {
        self.dir.path()
    }

    /// Send a request; any status is returned, never an error.
    pub fn send(
        &self,
        url: &str,
        method: &str,
        headers: &[(&str, &str)],
        body: Option<&[u8]>,
    ) -> Reply {
        let mut request = self.agent.request(method, url);
        for (name, value) in headers {
            request = request.set(name, value);
        }
        let result = match body {
            Some(bytes) => request.send_bytes(bytes),
            None => request.call(),
        };
        match result {
            Ok(r) => Reply::from(r),
            Err(ureq::Error::Status(_, r)) => Reply::from(r),
            Err(e) => panic!("{method} {url}: transport error {e}"),
        }
    }

    /// An admin request with the token, and a JSON body if given.
    pub fn admin(&self, method: &str, path: &str, body: Option<&[u8]>) -> Reply {
        let bearer = format!("Bearer {TOKEN}");
        let mut headers = vec![("Authorization", bearer.as_str())];
        if body.is_some() {
            headers.push(("Content-Type", "application/json"));
        }
        self.send(&format!("{}{path}", self.admin), method, &headers, body)
    }

    /// An admin request with a JSON value as its body.
    pub fn admin_json(&self, method: &str, path: &str, body: &Json) -> Reply {
        self.admin(method, path, Some(body.to_string().as_bytes()))
    }

    /// Upload a version through the admin listener.
    pub fn upload(&self, name: &str, version: &str, bytes: &[u8], query: &str) -> Reply {
        self.admin(
            "PUT",
            &format!("/models/{name}/versions/{version}{query}"),
            Some(bytes),
        )
    }

    /// Promote through the admin listener.
    pub fn promote(&self, name: &str, version: &str, allow_breaking: bool) -> Reply {
        self.admin_json(
            "POST",
            &format!("/models/{name}/live"),
            &json!({"version": version, "allow_breaking": allow_breaking}),
        )
    }

    /// Roll back through the admin listener.
    pub fn rollback(&self, name: &str) -> Reply {
        self.admin("POST", &format!("/models/{name}/rollback"), None)
    }

    /// Set `name`'s shadow through the admin listener.
    pub fn set_shadow(&self, name: &str, version: &str) -> Reply {
        self.set_shadow_body(name, &json!({"version": version}))
    }

    /// `PUT /models/{name}/shadow` with this body.
    pub fn set_shadow_body(&self, name: &str, body: &Json) -> Reply {
        self.admin_json("PUT", &format!("/models/{name}/shadow"), body)
    }

    /// `name`'s shadow report from the admin listener.
    pub fn shadow_report(&self, name: &str) -> Reply {
        self.admin("GET", &format!("/models/{name}/shadow"), None)
    }

    /// GET on the public listener.
    pub fn get(&self, path: &str) -> Reply {
        self.send(&format!("{}{path}", self.public), "GET", &[], None)
    }

    /// POST a JSON value to the public listener.
    pub fn post(&self, path: &str, body: &Json) -> Reply {
        self.send(
            &format!("{}{path}", self.public),
            "POST",
            &[("Content-Type", "application/json")],
            Some(body.to_string().as_bytes()),
        )
    }

    /// The version the public listener names for `name` (from `GET /models/{name}`).
    pub fn public_version(&self, name: &str) -> String {
        let body = self.get(&format!("/models/{name}")).expect(200);
        body["version"].as_str().expect("a version").to_string()
    }

    /// Wait up to `limit` for the public listener to name `version` for `name`.
    pub fn wait_for_version(&self, name: &str, version: &str, limit: Duration) -> bool {
        let started = Instant::now();
        while started.elapsed() < limit {
            if self.public_version(name) == version {
                return true;
            }
            std::thread::sleep(Duration::from_millis(20));
        }
        false
    }

    /// Stop both listeners and the follower.
    pub fn stop(mut self) {
        if let Some(background) = self.background.take() {
            background.stop().expect("a clean stop");
        }
        if let Some(following) = self.following.take() {
            following.stop();
        }
    }
}

impl Drop for Deployment {
    fn drop(&mut self) {
        drop(self.background.take());
        drop(self.following.take());
    }
}

/// The probability the engine computes with `model` for an observation (the service's full
/// scoring path, default options).
pub fn engine_probability(model: &Model, observation: &Json) -> f64 {
    let mut values = Vec::new();
    let object = observation.as_object().expect("an object");
    model
        .parse_observation(object, &mut values)
        .expect("a valid observation");
    let mut scorer = Scorer::new(model);
    scorer
        .score(model, &values, &Options::default())
        .probability
}

/// The model of a file's bytes.
pub fn model_of(bytes: &[u8]) -> Model {
    Model::from_json(bytes).expect("a valid model file")
}

/// Observations of the lifecycle-support base model, varied over every covariate.
pub fn observations(count: usize) -> Vec<Json> {
    let regions = ["north", "south", "east"];
    (0..count)
        .map(|i| {
            json!({
                "income": 8.0 + (i * 37 % 400) as f64 + 0.25 * (i % 4) as f64,
                "tenure": (i * 7) % 30,
                "guarantor": i % 2,
                "region": regions[i % 3],
            })
        })
        .collect()
}
