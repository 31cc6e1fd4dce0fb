//! Operating the service: request ids, header limits, loading a model directory, draining on
//! shutdown with a request in flight, and the `ogive serve` binary itself (its printed example,
//! its JSON log lines, SIGTERM). A panicking handler's 500 is tested beside `Guarded`, in
//! `src/service/middleware.rs`.

use std::io::{BufRead, BufReader, Read, Write};
use std::net::TcpStream;
use std::path::Path;
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};

use ogive::registry::load::load_directory;
use serde_json::{json, Value as Json};

use crate::support::http_models::{lease_file, lease_observation, plain_file};
use crate::support::server::{test_settings, TestServer};

#[test]
fn a_valid_request_id_is_echoed_and_an_invalid_one_replaced() {
    let server = TestServer::start();
    let body = json!({"observation": lease_observation()}).to_string();
    let path = "/models/lease-test/probability";
    let json = [("Content-Type", "application/json")];
    for (sent, kept) in [
        ("trace-42:abc/DEF", true),
        (&*"x".repeat(128), true),
        (&*"x".repeat(129), false),
        ("has space", false),
    ] {
        let mut headers = json.to_vec();
        headers.push(("X-Request-Id", sent));
        let reply = server.send("POST", path, &headers, Some(body.as_bytes()));
        let echoed = reply.header("x-request-id").expect("id header").to_string();
        assert_eq!(reply.json()["request_id"], json!(echoed));
        if kept {
            assert_eq!(echoed, sent);
        } else {
            assert_ne!(echoed, sent);
            assert!(uuid::Uuid::parse_str(&echoed).is_ok(), "{echoed}");
        }
    }
    let problem = server.get("/models/none");
    assert!(problem.header("x-request-id").is_some());
}

fn write_model(root: &Path, file: &Json) {
    let name = file["name"].as_str().expect("name");
    let version = file["version"].as_str().expect("version");
    let dir = root.join(name).join("versions");
    std::fs::create_dir_all(&dir).expect("mkdir");
    std::fs::write(dir.join(format!("{version}.json")), file.to_string()).expect("write");
    std::fs::write(root.join(name).join("live"), format!("{version}\n")).expect("write live");
}

#[test]
fn loading_a_directory_skips_temporary_entries_and_reports_broken_models() {
    let root = tempfile::tempdir().expect("tempdir");
    write_model(root.path(), &lease_file());
    write_model(root.path(), &plain_file());
    std::fs::create_dir_all(root.path().join(".staging")).expect("mkdir");
    std::fs::create_dir_all(root.path().join("half-written.tmp")).expect("mkdir");
    std::fs::create_dir_all(root.path().join("lost+found")).expect("mkdir");
    std::fs::write(root.path().join("model.schema.json"), "{}").expect("write");
    std::fs::write(
        root.path()
            .join("plain-test")
            .join("versions")
            .join(".v2.json.tmp"),
        "{",
    )
    .expect("write");
    std::fs::create_dir_all(root.path().join("no-pointer").join("versions")).expect("mkdir");
    let mut misplaced = plain_file();
    misplaced["name"] = json!("other-name");
    std::fs::create_dir_all(root.path().join("misplaced").join("versions")).expect("mkdir");
    std::fs::write(
        root.path()
            .join("misplaced")
            .join("versions")
            .join("v1.json"),
        misplaced.to_string(),
    )
    .expect("write");
    std::fs::write(root.path().join("misplaced").join("live"), "v1").expect("write");
    let report = load_directory(root.path()).expect("the directory loads");
    let loaded: Vec<&String> = report.snapshot.models.keys().collect();
    assert_eq!(loaded, ["lease-test", "plain-test"]);
    let failed: Vec<&str> = report.failures.iter().map(|(n, _)| n.as_str()).collect();
    assert_eq!(failed, ["misplaced", "no-pointer"]);
    assert!(report.failures[0].1.to_string().contains("other-name"));
    assert!(load_directory(&root.path().join("absent")).is_err());
}

#[test]
fn draining_turns_readiness_off_and_lets_an_in_flight_request_finish() {
    let mut settings = test_settings();
    settings.drain_delay_ms = 1_500;
    let server = TestServer::start_with(settings);
    let addr = server.addr;
    // A request whose body is still arriving when the shutdown begins.
    let body = json!({"observation": lease_observation()}).to_string();
    let (first, rest) = body.split_at(body.len() / 2);
    let mut stream = TcpStream::connect(addr).expect("connect");
    stream
        .set_read_timeout(Some(Duration::from_secs(10)))
        .expect("timeout");
    write!(
        stream,
        "POST /models/lease-test/probability HTTP/1.1\r\nHost: test\r\nContent-Type: application/json\r\nContent-Length: {}\r\n\r\n{first}",
        body.len()
    )
    .expect("write head");
    stream.flush().expect("flush");
    std::thread::sleep(Duration::from_millis(100));
    server.begin_shutdown();
    let mut saw_draining = false;
    let deadline = Instant::now() + Duration::from_secs(5);
    while Instant::now() < deadline {
        let ready = server.get("/readyz");
        if ready.status == 503 {
            assert_eq!(ready.json()["draining"], json!(true));
            saw_draining = true;
            break;
        }
        std::thread::sleep(Duration::from_millis(10));
    }
    assert!(saw_draining, "readiness never turned 503");
    assert_eq!(
        server.get("/livez").status,
        200,
        "liveness stays up while draining"
    );
    stream.write_all(rest.as_bytes()).expect("write rest");
    let mut response = String::new();
    let mut reader = BufReader::new(stream);
    reader.read_line(&mut response).expect("status line");
    assert!(response.starts_with("HTTP/1.1 200"), "{response}");
    server.stop();
    assert!(
        TcpStream::connect(addr).is_err(),
        "still accepting after the shutdown"
    );
}

struct Serving {
    child: Child,
    /// Kept open: a closed pipe would make the server's next line on stdout fail.
    _stdout: BufReader<std::process::ChildStdout>,
    base: String,
    example: String,
    stderr: std::process::ChildStderr,
}

fn serve_binary(models: &Path, extra: &[&str]) -> Serving {
    let mut child = Command::new(env!("CARGO_BIN_EXE_ogive"))
        .arg("serve")
        .arg("--models")
        .arg(models)
        .args([
            "--listen",
            "127.0.0.1:0",
            "--drain-delay-ms",
            "300",
            "--shutdown-timeout-ms",
            "3000",
            "--workers",
            "1",
        ])
        .args(extra)
        .env("RUST_LOG", "info")
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("the binary starts");
    let mut stdout = BufReader::new(child.stdout.take().expect("stdout"));
    let mut first = String::new();
    stdout.read_line(&mut first).expect("address line");
    let base = first
        .trim()
        .rsplit(' ')
        .next()
        .expect("address")
        .to_string();
    let mut example = String::new();
    stdout.read_line(&mut example).expect("try line");
    example.clear();
    stdout.read_line(&mut example).expect("example line");
    let stderr = child.stderr.take().expect("stderr");
    Serving {
        child,
        _stdout: stdout,
        base,
        example: example.trim().to_string(),
        stderr,
    }
}

fn terminate(serving: &mut Serving) -> std::process::ExitStatus {
    let status = Command::new("kill")
        .args(["-TERM", &serving.child.id().to_string()])
        .status()
        .expect("kill runs");
    assert!(status.success());
    let deadline = Instant::now() + Duration::from_secs(10);
    loop {
        if let Some(status) = serving.child.try_wait().expect("wait") {
            return status;
        }
        assert!(
            Instant::now() < deadline,
            "the process did not exit within its shutdown timeout"
        );
        std::thread::sleep(Duration::from_millis(20));
    }
}

/// The body of the printed example command (`curl … -d '{…}' URL`).
fn example_body(example: &str) -> (String, String) {
    let start = example.find("-d '").expect("a body") + 4;
    let end = example[start..].find("' ").expect("end of body") + start;
    let url = example[end + 2..].trim().to_string();
    (example[start..end].replace("'\\''", "'"), url)
}

#[test]
fn the_binary_serves_prints_a_working_example_logs_json_and_stops_on_sigterm() {
    let root = tempfile::tempdir().expect("tempdir");
    write_model(root.path(), &lease_file());
    let mut serving = serve_binary(root.path(), &["--log-observations"]);
    let agent = ureq::AgentBuilder::new()
        .timeout(Duration::from_secs(10))
        .build();
    let (body, url) = example_body(&serving.example);
    assert_eq!(
        url,
        format!("{}/models/lease-test/probability", serving.base)
    );
    let answer: Json = agent
        .post(&url)
        .set("Content-Type", "application/json")
        .set("X-Request-Id", "binary-test-1")
        .send_string(&body)
        .expect("the example works")
        .into_json()
        .expect("JSON");
    assert!(
        answer["probability"].is_number()
            && answer["effects"].is_array()
            && answer["interval"].is_object()
    );
    assert_eq!(
        agent
            .get(&format!("{}/readyz", serving.base))
            .call()
            .map(|r| r.status())
            .ok(),
        Some(200)
    );
    let status = terminate(&mut serving);
    assert!(status.success(), "exit status {status}");
    let mut logs = String::new();
    serving.stderr.read_to_string(&mut logs).expect("logs");
    let lines: Vec<Json> = logs
        .lines()
        .map(|l| serde_json::from_str(l).unwrap_or_else(|e| panic!("not a JSON line ({e}): {l}")))
        .collect();
    let request = lines
        .iter()
        .find(|l| l["request_id"] == json!("binary-test-1"))
        .expect("the request's log line");
    assert_eq!(request["route"], json!("/models/{name}/probability"));
    assert_eq!(request["status"], json!(200));
    assert_eq!(request["model"], json!("lease-test"));
    assert_eq!(request["version"], json!("2026-01"));
    assert!(request["latency_ms"].is_number());
    // Written to the microsecond, so the text has at most three decimals.
    let latency = request["latency_ms"].to_string();
    let decimals = latency.split_once('.').map_or(0, |(_, d)| d.len());
    assert!(
        decimals <= 3,
        "latency_ms {latency} has more than microsecond digits"
    );
    assert!(request["observations"]
        .as_str()
        .is_some_and(|o| o.contains("annual_revenue")));
    assert!(lines
        .iter()
        .any(|l| l["message"] == json!("draining: readiness is now 503")));
}

#[test]
fn the_binary_is_not_ready_with_a_broken_model_and_logs_no_values_by_default() {
    let root = tempfile::tempdir().expect("tempdir");
    write_model(root.path(), &lease_file());
    std::fs::create_dir_all(root.path().join("broken-model")).expect("mkdir");
    std::fs::write(root.path().join("broken-model").join("live"), "v9").expect("write");
    let mut serving = serve_binary(root.path(), &[]);
    let agent = ureq::AgentBuilder::new()
        .timeout(Duration::from_secs(10))
        .build();
    match agent.get(&format!("{}/readyz", serving.base)).call() {
        Err(ureq::Error::Status(503, r)) => {
            let body: Json = r.into_json().expect("JSON");
            assert_eq!(body["models_loaded"], json!(false));
            assert_eq!(body["models"], json!(1));
        }
        other => panic!("readiness with a broken model: {other:?}"),
    }
    let metrics = agent
        .get(&format!("{}/metrics", serving.base))
        .call()
        .expect("metrics")
        .into_string()
        .expect("text");
    // At least the start-up load counts (the directory watcher may count its retries too).
    let load_errors: f64 = metrics
        .lines()
        .find_map(|l| l.strip_prefix("ogive_model_load_errors_total{model=\"broken-model\"} "))
        .and_then(|v| v.parse().ok())
        .unwrap_or_else(|| panic!("no load-error series in {metrics}"));
    assert!(load_errors >= 1.0);
    assert!(metrics.contains("ogive_ready 0"));
    let (body, url) = example_body(&serving.example);
    agent
        .post(&url)
        .set("Content-Type", "application/json")
        .send_string(&body)
        .expect("the other model serves");
    assert!(terminate(&mut serving).success());
    let mut logs = String::new();
    serving.stderr.read_to_string(&mut logs).expect("logs");
    assert!(logs.contains("\"model not loaded\""));
    let request = logs
        .lines()
        .filter_map(|l| serde_json::from_str::<Json>(l).ok())
        .find(|l| l["route"] == json!("/models/{name}/probability"))
        .expect("request line");
    assert!(
        request.get("observations").is_none(),
        "values logged without --log-observations"
    );
}
