//! The one test server: the real application ([`ogive::service::Application`], as `ogive serve`
//! starts it) on 127.0.0.1 port 0 with both listeners, serving a model directory in a temporary
//! folder, on a thread of its own; and a blocking client for it.
//!
//! [`TestServer::start`] serves a copy of the committed HTTP test models
//! (`tests/http/models`); [`TestServer::serve`] a directory the test filled;
//! [`TestServer::launch`] any configuration.

use std::net::SocketAddr;
use std::path::Path;
use std::time::{Duration, Instant};

use ogive::engine::{Options, Scorer};
use ogive::model::Model;
use ogive::monitoring::shadow::Share;
use ogive::registry::lifecycle;
use ogive::service::admin::AdminToken;
use ogive::service::{AdminConfig, AppState, Application, Config, Settings, Shutdown};
use serde_json::{json, Value as Json};

/// The admin token of every test server.
pub const TOKEN: &str = "test-token-5f0c8e2a9b7d4c1e";
/// Its label.
pub const LABEL: &str = "ops";
/// What the history records for it.
pub const WHO: &str = "admin:ops";

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

/// The configuration of a test server for `models`: `settings`, the admin listener on port 0
/// with [`TOKEN`], monitoring off, every shadowed observation scored.
pub fn test_config(models: &Path, settings: Settings) -> Config {
    let token = AdminToken::new(TOKEN.as_bytes(), LABEL, "the test").expect("token");
    Config {
        admin: Some(AdminConfig {
            listen: "127.0.0.1:0".parse().expect("address"),
            token,
        }),
        ..Config::new(models, settings)
    }
}

/// The committed HTTP test model directory (also served by `.ci/http-checks.sh` when the demo
/// models are absent).
pub fn http_models() -> std::path::PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/http/models")
}

/// A temporary copy of the model directory `from`.
pub fn copy_models(from: &Path) -> tempfile::TempDir {
    let dir = tempfile::tempdir().expect("a temporary directory");
    super::process::copy_tree(from, dir.path());
    dir
}

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

/// A running application.
pub struct TestServer {
    /// The model directory.
    pub dir: tempfile::TempDir,
    /// The public listener's address.
    pub addr: SocketAddr,
    /// `http://127.0.0.1:PORT` of the public listener.
    pub public: String,
    /// The admin listener's address, if it has one.
    pub admin_addr: Option<SocketAddr>,
    /// `http://127.0.0.1:PORT` of the admin listener (empty without one).
    pub admin: String,
    state: AppState,
    shutdown: Shutdown,
    thread: Option<std::thread::JoinHandle<std::io::Result<()>>>,
    agent: ureq::Agent,
}

impl TestServer {
    /// Serve a copy of the committed HTTP test models with the default test settings.
    pub fn start() -> TestServer {
        TestServer::start_with(test_settings())
    }

    /// Serve a copy of the committed HTTP test models with these settings.
    pub fn start_with(settings: Settings) -> TestServer {
        let dir = copy_models(&http_models());
        let config = test_config(dir.path(), settings);
        TestServer::launch(dir, config)
    }

    /// Serve the model directory `dir` with shadow share `share`, every model loaded.
    pub fn serve(dir: tempfile::TempDir, share: Share) -> TestServer {
        let config = Config {
            shadow_share: share,
            ..test_config(dir.path(), test_settings())
        };
        let server = TestServer::launch(dir, config);
        assert!(
            server.state.health.models_loaded(),
            "a model of the directory failed to load"
        );
        server
    }

    /// Build the application for `config` (which serves `dir`) and run it on a thread.
    pub fn launch(dir: tempfile::TempDir, config: Config) -> TestServer {
        let application = Application::build(config).expect("the application starts");
        let addr = application.public_addr();
        let admin_addr = application.admin_addr();
        let state = application.state().clone();
        let shutdown = application.shutdown_handle();
        let thread = std::thread::Builder::new()
            .name("test-server".into())
            .spawn(move || application.run_until_stopped())
            .expect("a thread");
        TestServer {
            dir,
            addr,
            public: format!("http://{addr}"),
            admin_addr,
            admin: admin_addr
                .map(|a| format!("http://{a}"))
                .unwrap_or_default(),
            state,
            shutdown,
            thread: Some(thread),
            agent: ureq::AgentBuilder::new()
                .timeout(Duration::from_secs(60))
                .build(),
        }
    }

    /// The model directory.
    pub fn root(&self) -> &Path {
        self.dir.path()
    }

    /// The state the application serves.
    pub fn state(&self) -> &AppState {
        &self.state
    }

    /// Begin the graceful shutdown (as SIGTERM would) without waiting for it.
    pub fn begin_shutdown(&self) {
        self.shutdown.trigger();
    }

    /// Shut down gracefully and wait until both listeners and the follower have stopped.
    pub fn stop(mut self) {
        self.shutdown.trigger();
        if let Some(thread) = self.thread.take() {
            thread
                .join()
                .expect("the server thread does not panic")
                .expect("a clean stop");
        }
    }

    /// Send a request to a full URL; any status is returned, never an error.
    pub fn send_to(
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

    /// Send a request to a path of the public listener.
    pub fn send(
        &self,
        method: &str,
        path: &str,
        headers: &[(&str, &str)],
        body: Option<&[u8]>,
    ) -> Reply {
        self.send_to(&format!("{}{path}", self.public), method, headers, body)
    }

    /// GET a path of the public listener.
    pub fn get(&self, path: &str) -> Reply {
        self.send("GET", path, &[], None)
    }

    /// POST a JSON value to the public listener.
    pub fn post(&self, path: &str, body: &Json) -> Reply {
        self.post_raw(path, body.to_string().as_bytes())
    }

    /// POST raw bytes as JSON to the public listener.
    pub fn post_raw(&self, path: &str, body: &[u8]) -> Reply {
        self.send(
            "POST",
            path,
            &[("Content-Type", "application/json")],
            Some(body),
        )
    }

    /// An admin request with the token, and a JSON body if given.
    pub fn admin(&self, method: &str, path: &str, body: Option<&[u8]>) -> Reply {
        let bearer = format!("Bearer {TOKEN}");
        let mut headers = vec![("Authorization", bearer.as_str())];
        if body.is_some() {
            headers.push(("Content-Type", "application/json"));
        }
        self.send_to(&format!("{}{path}", self.admin), method, &headers, body)
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
}

impl Drop for TestServer {
    fn drop(&mut self) {
        self.shutdown.trigger();
        if let Some(thread) = self.thread.take() {
            let _ = thread.join();
        }
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

    /// The problem type's slug (after `urn:ogive:problem:`).
    #[track_caller]
    pub fn problem(&self) -> String {
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

    /// Assert the status and the problem slug; the problem's body.
    #[track_caller]
    pub fn expect_problem(&self, status: u16, slug: &str) -> Json {
        assert_eq!(self.status, status, "{}", self.text);
        assert_eq!(self.problem(), slug, "{}", self.text);
        self.json()
    }

    /// Assert the status; the JSON body.
    #[track_caller]
    pub fn expect(&self, status: u16) -> Json {
        assert_eq!(self.status, status, "{}", self.text);
        self.json()
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
