//! Operating details a load balancer or a careless deployment meets, over raw TCP: the probes
//! answer HEAD, every answer during the SIGTERM drain says `Connection: close`, a live pointer
//! naming a version that is not stored is reported as "failed to load", and a saturated answer
//! explains its zero-width interval.

use std::io::{Read, Write};
use std::net::TcpStream;
use std::time::{Duration, Instant};

use ogive::service::Config;
use serde_json::{json, Value as Json};

use crate::support::http_models::{lease_file, lease_observation};
use crate::support::server::{test_config, TestServer};
use crate::{address, hardened_settings, parse_response, raw_request, raw_score, Raw, DEADLINE};

/// Send `request` (a whole HTTP/1.1 request) on `stream` and read one response to its end,
/// by Content-Length, leaving the connection as the server left it.
fn exchange(stream: &mut TcpStream, request: &str) -> Raw {
    stream.write_all(request.as_bytes()).expect("write");
    stream.set_read_timeout(Some(DEADLINE)).expect("timeout");
    let started = Instant::now();
    let mut received = Vec::new();
    let mut buffer = [0u8; 4096];
    loop {
        assert!(started.elapsed() < DEADLINE, "no whole response");
        if let Some(raw) = parse_response(&received) {
            let length: usize = raw
                .header("content-length")
                .and_then(|v| v.parse().ok())
                .unwrap_or(0);
            if raw.body.len() >= length {
                return raw;
            }
        }
        match stream.read(&mut buffer) {
            Ok(0) => return parse_response(&received).expect("a response before the close"),
            Ok(n) => received.extend_from_slice(&buffer[..n]),
            Err(e) => panic!("read: {e}"),
        }
    }
}

#[test]
fn the_probes_answer_head_with_their_status_and_no_body() {
    let server = TestServer::start_with(hardened_settings());
    let addr = address(&server);
    for path in ["/livez", "/readyz"] {
        let reply = raw_request(addr, "HEAD", path, "", b"");
        assert_eq!(reply.status, 200, "HEAD {path}: {}", reply.head);
        assert_eq!(reply.body, "", "HEAD {path} has no body");
        assert!(reply.header("x-request-id").is_some(), "{}", reply.head);
    }
    // Draining (the directory follower never undoes it) makes readiness 503.
    server.state().health.start_draining();
    assert_eq!(raw_request(addr, "HEAD", "/readyz", "", b"").status, 503);
    // The other routes still take GET only, and say so.
    let reply = raw_request(addr, "HEAD", "/models", "", b"");
    assert_eq!(reply.status, 405);
    assert_eq!(reply.header("allow"), Some("GET"));
}

#[test]
fn answers_during_the_sigterm_drain_say_connection_close() {
    let mut settings = hardened_settings();
    settings.drain_delay_ms = 20_000;
    settings.shutdown_timeout_ms = 25_000;
    let server = TestServer::start_with(settings);
    let addr = address(&server);
    let mut stream = TcpStream::connect(addr).expect("connect");
    let request = "GET /livez HTTP/1.1\r\nHost: test\r\n\r\n";
    let before = exchange(&mut stream, request);
    assert_eq!(before.status, 200);
    assert_ne!(
        before.header("connection").map(str::to_ascii_lowercase),
        Some("close".into()),
        "a keep-alive answer before the drain: {}",
        before.head
    );
    server.begin_shutdown();
    let deadline = Instant::now() + DEADLINE;
    while !server.state().health.draining() {
        assert!(Instant::now() < deadline, "the drain did not begin");
        std::thread::sleep(std::time::Duration::from_millis(10));
    }
    // The same keep-alive connection: answered, told to close, and closed.
    let during = exchange(&mut stream, request);
    assert_eq!(during.status, 200, "{}", during.head);
    assert_eq!(
        during.header("connection").map(str::to_ascii_lowercase),
        Some("close".into()),
        "{}",
        during.head
    );
    let mut rest = Vec::new();
    let closed = stream.read_to_end(&mut rest).map(|_| rest.is_empty());
    assert!(closed.unwrap_or(true), "the server closed the connection");
    // A new connection during the drain gets the same.
    let scored = raw_score(addr, &lease_observation());
    assert_eq!(scored.status, 200, "{}", scored.body);
    assert_eq!(scored.header("connection"), Some("close"));
}

#[test]
fn a_live_pointer_naming_a_missing_version_is_reported_as_failed_to_load() {
    let models = tempfile::tempdir().expect("a temporary directory");
    let good = models.path().join("lease-test");
    std::fs::create_dir_all(good.join("versions")).expect("mkdir");
    std::fs::write(
        good.join("versions").join("2026-01.json"),
        lease_file().to_string(),
    )
    .expect("write the model");
    std::fs::write(good.join("live"), "2026-01\n").expect("write live");
    let ghost = models.path().join("ghost");
    std::fs::create_dir_all(ghost.join("versions")).expect("mkdir");
    std::fs::write(ghost.join("live"), "3.0\n").expect("write live");

    let config = Config {
        follow_interval: Duration::from_millis(50),
        ..test_config(models.path(), hardened_settings())
    };
    let server = TestServer::launch(models, config);
    let addr = server.addr;

    let ready = raw_request(addr, "GET", "/readyz", "", b"");
    assert_eq!(ready.status, 503, "{}", ready.body);
    let ready: Json = serde_json::from_str(&ready.body).expect("JSON");
    assert_eq!(ready["failed_to_load"], json!(["ghost"]), "{ready}");
    let error = ready["load_errors"]["ghost"].as_str().expect("what failed");
    assert!(error.contains("3.0"), "{ready}");
    let reasons = ready["reasons"].to_string();
    assert!(reasons.contains("model 'ghost' failed to load"), "{ready}");
    assert_eq!(ready["models"], json!(1));

    let described = raw_request(addr, "GET", "/models/ghost", "", b"");
    assert_eq!(described.status, 503, "{}", described.body);
    let problem: Json = serde_json::from_str(&described.body).expect("JSON");
    assert_eq!(problem["type"], json!("urn:ogive:problem:unavailable"));
    let detail = problem["detail"].as_str().expect("detail");
    assert!(detail.contains("'ghost' failed to load"), "{detail}");
    // A name that is nowhere is still unknown, and the loaded model still answers.
    let unknown = raw_request(addr, "GET", "/models/nowhere", "", b"");
    assert_eq!(unknown.status, 404);
    crate::assert_answers_others(addr);

    // Once the version is stored, the next look serves it and readiness returns.
    let mut file = lease_file();
    file["name"] = json!("ghost");
    file["version"] = json!("3.0");
    std::fs::write(ghost.join("versions").join("3.0.json"), file.to_string()).expect("write");
    let deadline = Instant::now() + DEADLINE;
    loop {
        let ready = raw_request(addr, "GET", "/readyz", "", b"");
        if ready.status == 200 {
            break;
        }
        assert!(
            Instant::now() < deadline,
            "never ready again: {}",
            ready.body
        );
        std::thread::sleep(Duration::from_millis(20));
    }
    server.stop();
}

#[test]
fn a_saturated_answer_notes_that_its_zero_width_interval_is_rounding() {
    let server = TestServer::start_with(hardened_settings());
    let addr = address(&server);
    let mut observation = lease_observation();
    // Far outside training: the index is large enough that p and both interval ends round to 1.
    observation["prior_arrears"] = json!(1e9);
    let reply = raw_score(addr, &observation);
    assert_eq!(reply.status, 200, "{}", reply.body);
    let answer: Json = serde_json::from_str(&reply.body).expect("JSON");
    let interval = &answer["interval"];
    assert_eq!(interval["lower"], interval["upper"], "{answer}");
    let codes: Vec<&Json> = answer["notes"]
        .as_array()
        .expect("notes")
        .iter()
        .map(|n| &n["code"])
        .collect();
    assert!(codes.contains(&&json!("saturated_interval")), "{answer}");

    // An ordinary answer has no such note.
    let reply = raw_score(addr, &lease_observation());
    assert!(!reply.body.contains("saturated_interval"), "{}", reply.body);
}
