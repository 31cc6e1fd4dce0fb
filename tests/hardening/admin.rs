//! The admin listener as a deployment runs it: the real `ogive serve` binary with a token file,
//! both listeners on 127.0.0.1:0, every log level on. The admin routes are not on the public
//! listener even with the right token; the admin listener refuses missing, empty and wrong
//! tokens with 401 problem details and takes the right one; and no part of any token sent
//! ever reaches the process's output.
//!
//! The route-by-route refusals are the admin tests' (`tests/admin.rs`); this file holds what a
//! hostile caller would try and what an operator reading the logs would see.

use std::io::{BufRead, BufReader, Read};
use std::net::SocketAddr;
use std::process::{Child, Command, Stdio};
use std::sync::mpsc;
use std::time::{Duration, Instant};

use serde_json::{json, Value as Json};

use crate::support::http_models::{lease_file, lease_observation};
use crate::{raw_request, Raw, DEADLINE};

/// The admin token: 32 hex digits, as `openssl rand -hex 16` would make one.
const TOKEN: &str = "4f3a9c0e7b21d86a5e0f4c93b7a1d2e8";

/// Tokens that are not the token but share most of it.
fn near_misses() -> Vec<String> {
    vec![
        TOKEN[..TOKEN.len() - 1].to_string(),
        format!("{TOKEN}0"),
        TOKEN.to_uppercase(),
        format!("{}x{}", &TOKEN[..16], &TOKEN[17..]),
    ]
}

/// A running `ogive serve` and everything it has printed so far.
struct Serving {
    child: Child,
    public: SocketAddr,
    admin: SocketAddr,
    output: mpsc::Receiver<String>,
    _models: tempfile::TempDir,
}

/// Forward each line of `stream` to `lines`.
fn collect(stream: impl Read + Send + 'static, lines: mpsc::Sender<String>) {
    std::thread::spawn(move || {
        for line in BufReader::new(stream).lines().map_while(Result::ok) {
            if lines.send(line).is_err() {
                break;
            }
        }
    });
}

/// The address in the first line of `output` starting with `prefix` (the rest of the line is
/// `http://ADDR`).
fn address_after(
    output: &mpsc::Receiver<String>,
    prefix: &str,
    seen: &mut Vec<String>,
) -> SocketAddr {
    let deadline = Instant::now() + DEADLINE;
    while Instant::now() < deadline {
        if let Ok(line) = output.recv_timeout(Duration::from_millis(100)) {
            seen.push(line.clone());
            if let Some(rest) = line.strip_prefix(prefix) {
                let address = rest.trim().trim_start_matches("http://");
                return address.parse().unwrap_or_else(|e| panic!("{line}: {e}"));
            }
        }
    }
    panic!("no line starting with {prefix:?}; printed so far: {seen:#?}");
}

fn start() -> (Serving, Vec<String>) {
    let models = tempfile::tempdir().expect("a temporary directory");
    let model = models.path().join("lease-test");
    std::fs::create_dir_all(model.join("versions")).expect("mkdir");
    std::fs::write(
        model.join("versions").join("2026-01.json"),
        lease_file().to_string(),
    )
    .expect("write the model");
    std::fs::write(model.join("live"), "2026-01\n").expect("write the live pointer");
    let token_file = models.path().join(".admin-token");
    std::fs::write(&token_file, TOKEN).expect("write the token file");
    let mut child = Command::new(env!("CARGO_BIN_EXE_ogive"))
        .args(["serve", "--models"])
        .arg(models.path())
        .args(["--listen", "127.0.0.1:0", "--admin-listen", "127.0.0.1:0"])
        .arg("--admin-token-file")
        .arg(&token_file)
        .args([
            "--workers",
            "1",
            "--drain-delay-ms",
            "0",
            "--shutdown-timeout-ms",
            "5000",
        ])
        .env_remove("OGIVE_ADMIN_TOKEN")
        .env_remove("OGIVE_ADMIN_TOKEN_FILE")
        // Every level of every crate, actix's own included: a token logged anywhere shows.
        .env("RUST_LOG", "trace")
        .stdin(Stdio::null())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("ogive serve starts");
    let (lines, output) = mpsc::channel();
    collect(child.stdout.take().expect("stdout"), lines.clone());
    collect(child.stderr.take().expect("stderr"), lines);
    let mut seen = Vec::new();
    let public = address_after(&output, "ogive serving on ", &mut seen);
    let admin = address_after(&output, "ogive admin on ", &mut seen);
    let serving = Serving {
        child,
        public,
        admin,
        output,
        _models: models,
    };
    (serving, seen)
}

impl Serving {
    /// Stop with SIGTERM and return every line printed, once the process has exited.
    fn stop(mut self, mut printed: Vec<String>) -> Vec<String> {
        let status = Command::new("kill")
            .args(["-TERM", &self.child.id().to_string()])
            .status()
            .expect("kill runs");
        assert!(status.success());
        let deadline = Instant::now() + DEADLINE;
        while self.child.try_wait().expect("wait").is_none() {
            if Instant::now() > deadline {
                let _ = self.child.kill();
                let _ = self.child.wait();
                panic!("ogive serve did not stop after SIGTERM");
            }
            std::thread::sleep(Duration::from_millis(20));
        }
        // The readers end when the pipes close.
        while let Ok(line) = self.output.recv_timeout(Duration::from_secs(5)) {
            printed.push(line);
        }
        printed
    }
}

fn bearer(token: &str) -> String {
    format!("Authorization: Bearer {token}\r\n")
}

fn json_headers(authorization: &str) -> String {
    format!("Content-Type: application/json\r\n{authorization}")
}

fn body_json(reply: &Raw) -> Json {
    serde_json::from_str(&reply.body)
        .unwrap_or_else(|e| panic!("status {}: not JSON ({e}): {}", reply.status, reply.body))
}

#[test]
fn admin_tokens_are_checked_on_the_admin_listener_only_and_never_logged() {
    let (serving, printed) = start();
    let mut candidate = lease_file();
    candidate["version"] = json!("2026-02");
    let candidate = candidate.to_string();
    let promote = json!({"version": "2026-02"}).to_string();

    // The admin routes do not exist on the public listener, even with the right token.
    for (method, path, body) in [
        (
            "PUT",
            "/models/lease-test/versions/2026-02",
            candidate.as_str(),
        ),
        ("POST", "/models/lease-test/live", promote.as_str()),
        ("POST", "/models/lease-test/rollback", ""),
        ("GET", "/models/lease-test/history", ""),
    ] {
        let reply = raw_request(
            serving.public,
            method,
            path,
            &json_headers(&bearer(TOKEN)),
            body.as_bytes(),
        );
        assert_eq!(
            reply.status, 404,
            "{method} {path} on the public listener: {}",
            reply.body
        );
        assert_eq!(body_json(&reply)["status"], json!(404));
    }

    // Missing, empty and wrong tokens: 401 problem details, and nothing changes.
    let mut refused: Vec<String> = vec![
        String::new(),
        "Authorization: Bearer\r\n".into(),
        bearer(""),
    ];
    refused.push(format!("Authorization: Basic {TOKEN}\r\n"));
    // Two headers, even both with the token: no proxy and no server may disagree on which counts.
    refused.push(format!("{}{}", bearer(TOKEN), bearer(TOKEN)));
    refused.push(format!(
        "{}{}",
        bearer("wrong-but-long-enough"),
        bearer(TOKEN)
    ));
    refused.extend(near_misses().iter().map(|t| bearer(t)));
    for authorization in &refused {
        let headers = json_headers(authorization);
        for (method, path, body) in [
            (
                "PUT",
                "/models/lease-test/versions/2026-02",
                candidate.as_str(),
            ),
            ("POST", "/models/lease-test/live", promote.as_str()),
            ("GET", "/models/lease-test/history", ""),
        ] {
            let reply = raw_request(serving.admin, method, path, &headers, body.as_bytes());
            assert_eq!(
                reply.status, 401,
                "{method} {path} with {authorization:?}: {}",
                reply.body
            );
            let problem = body_json(&reply);
            assert_eq!(problem["status"], json!(401));
            assert_eq!(problem["type"], json!("urn:ogive:problem:unauthorized"));
            assert!(
                !reply.body.contains(&TOKEN[..12]),
                "the refusal echoes the token"
            );
        }
    }
    let live = raw_request(serving.public, "GET", "/models/lease-test", "", b"");
    assert_eq!(
        body_json(&live)["version"],
        json!("2026-01"),
        "a refused request changed the live version"
    );

    // The right token passes: upload, promote, and the public listener serves the new version.
    let headers = json_headers(&bearer(TOKEN));
    for (method, path, body, status) in [
        (
            "PUT",
            "/models/lease-test/versions/2026-02",
            candidate.as_str(),
            201,
        ),
        ("POST", "/models/lease-test/live", promote.as_str(), 200),
        ("GET", "/models/lease-test/history", "", 200),
    ] {
        let reply = raw_request(serving.admin, method, path, &headers, body.as_bytes());
        assert_eq!(reply.status, status, "{method} {path}: {}", reply.body);
    }
    let live = raw_request(serving.public, "GET", "/models/lease-test", "", b"");
    assert_eq!(body_json(&live)["version"], json!("2026-02"));

    let printed = serving.stop(printed);
    assert!(
        printed.iter().any(|line| line.contains("\"status\":401")),
        "the refusals were not logged at all, so the check below would prove nothing"
    );
    let mut secrets = vec![TOKEN.to_string()];
    secrets.extend(near_misses());
    for line in &printed {
        for secret in &secrets {
            // Any 12 characters in a row of a token sent, so that a truncated or partly
            // masked token is caught too.
            for window in secret.as_bytes().windows(12) {
                let window = std::str::from_utf8(window).expect("ASCII");
                assert!(
                    !line.contains(window),
                    "a token sent is in the output: {line}"
                );
            }
        }
    }
}

/// Make `dir` unwritable for this process, and writable again on drop: `chattr +i` where the
/// tests run as root (root ignores permission bits), mode 0555 otherwise.
struct Unwritable(std::path::PathBuf);

impl Unwritable {
    fn make(dir: &std::path::Path) -> Unwritable {
        use std::os::unix::fs::PermissionsExt;
        let immutable = Command::new("chattr")
            .arg("+i")
            .arg(dir)
            .status()
            .is_ok_and(|s| s.success());
        if !immutable {
            std::fs::set_permissions(dir, std::fs::Permissions::from_mode(0o555)).expect("chmod");
        }
        let guard = Unwritable(dir.to_path_buf());
        let probe = dir.join(".probe");
        assert!(
            std::fs::write(&probe, b"x").is_err(),
            "neither chattr +i nor mode 0555 made {} unwritable here, so this test cannot run",
            dir.display()
        );
        guard
    }
}

impl Drop for Unwritable {
    fn drop(&mut self) {
        use std::os::unix::fs::PermissionsExt;
        let _ = Command::new("chattr").arg("-i").arg(&self.0).status();
        let _ = std::fs::set_permissions(&self.0, std::fs::Permissions::from_mode(0o755));
    }
}

#[test]
fn the_admin_listener_keeps_the_header_limit_is_counted_and_names_an_unwritable_directory() {
    let (serving, printed) = start();
    let headers = json_headers(&bearer(TOKEN));

    // The header limit of `ogive serve` (16 KiB by default) holds on the admin listener too,
    // before the token is even looked at.
    let padded = format!("{headers}X-Padding: {}\r\n", "p".repeat(20 * 1024));
    let reply = raw_request(
        serving.admin,
        "GET",
        "/models/lease-test/history",
        &padded,
        b"",
    );
    assert_eq!(reply.status, 431, "{}", reply.body);
    assert_eq!(
        body_json(&reply)["type"],
        json!("urn:ogive:problem:headers-too-large")
    );

    // A model directory this process may not write: the upload names the cause.
    let mut candidate = lease_file();
    candidate["version"] = json!("2026-03");
    let versions = serving._models.path().join("lease-test").join("versions");
    let guard = Unwritable::make(&versions);
    let reply = raw_request(
        serving.admin,
        "PUT",
        "/models/lease-test/versions/2026-03",
        &headers,
        candidate.to_string().as_bytes(),
    );
    drop(guard);
    assert_eq!(reply.status, 503, "{}", reply.body);
    let problem = body_json(&reply);
    assert_eq!(problem["type"], json!("urn:ogive:problem:store-unwritable"));
    let detail = problem["detail"].as_str().expect("detail");
    assert!(detail.contains("may not write"), "{detail}");
    // Nothing changed for callers.
    let body = json!({"observation": lease_observation()}).to_string();
    let scored = raw_request(
        serving.public,
        "POST",
        "/models/lease-test/probability",
        "Content-Type: application/json\r\n",
        body.as_bytes(),
    );
    assert_eq!(scored.status, 200, "{}", scored.body);

    // A repeated key in an uploaded model file is refused before the file is looked at.
    let file = candidate.to_string();
    let twice = file.replacen("{", "{\"version\": \"2026-03\", ", 1);
    let reply = raw_request(
        serving.admin,
        "PUT",
        "/models/lease-test/versions/2026-03",
        &headers,
        twice.as_bytes(),
    );
    assert_eq!(reply.status, 422, "{}", reply.body);
    assert_eq!(body_json(&reply)["pointer"], json!("/version"));

    // Admin requests are counted, under labels of their own.
    let metrics = raw_request(serving.public, "GET", "/metrics", "", b"");
    let counted = metrics.body.lines().any(|line| {
        line.starts_with("ogive_http_requests_total")
            && line.contains("route=\"admin:/models/{name}/versions/{version}\"")
            && line.contains("status=\"503\"")
    });
    assert!(counted, "no admin count in:\n{}", metrics.body);
    serving.stop(printed);
}

#[test]
fn a_one_character_admin_token_is_refused_at_start_stating_the_minimum() {
    let models = tempfile::tempdir().expect("a temporary directory");
    let token_file = models.path().join(".admin-token");
    std::fs::write(&token_file, "x\n").expect("write the token file");
    let output = Command::new(env!("CARGO_BIN_EXE_ogive"))
        .args(["serve", "--models"])
        .arg(models.path())
        .args(["--listen", "127.0.0.1:0", "--admin-listen", "127.0.0.1:0"])
        .arg("--admin-token-file")
        .arg(&token_file)
        .env_remove("OGIVE_ADMIN_TOKEN")
        .env_remove("OGIVE_ADMIN_TOKEN_FILE")
        .stdin(Stdio::null())
        .output()
        .expect("ogive serve runs");
    assert!(
        !output.status.success(),
        "a one-character token was accepted"
    );
    let said = format!(
        "{}{}",
        String::from_utf8_lossy(&output.stdout),
        String::from_utf8_lossy(&output.stderr)
    );
    assert!(
        said.contains("has 1 characters; the minimum is 16"),
        "{said}"
    );
}
