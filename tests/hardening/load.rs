//! Heavy requests and load limits over raw TCP: the work budget refuses a request before any
//! scoring, the in-flight caps answer 503 with Retry-After while they are full and admit again
//! once they are not, a batch scored on the pool answers exactly what single requests answer,
//! and 200 clients that never read their batch answers leave `ogive serve` under 256 MiB while
//! 200 clients that read are all answered (bounded: 400 connections, a 20 s deadline per read).

use std::time::Instant;

use serde_json::{json, Value as Json};

use crate::support::http_models::lease_observation;
use crate::support::server::{test_settings, TestServer};
use crate::{address, raw_request, Raw, DEADLINE};

const PROBABILITY: &str = "/models/lease-test/probability";
const JSON: &str = "Content-Type: application/json\r\n";

fn post(server: &TestServer, body: &Json) -> Raw {
    raw_request(
        address(server),
        "POST",
        PROBABILITY,
        JSON,
        body.to_string().as_bytes(),
    )
}

fn batch(n: usize) -> Json {
    json!({"observations": vec![lease_observation(); n]})
}

/// The reply is a 503 overloaded problem that tells the client when to come back; its problem
/// details.
#[track_caller]
fn overloaded(reply: &Raw) -> Json {
    assert_eq!(
        reply.status,
        503,
        "{}",
        &reply.body[..reply.body.len().min(300)]
    );
    assert_eq!(reply.header("retry-after"), Some("1"));
    let problem = problem(reply);
    assert_eq!(problem["type"], json!("urn:ogive:problem:overloaded"));
    problem
}

fn problem(reply: &Raw) -> Json {
    serde_json::from_str(&reply.body).unwrap_or_else(|e| panic!("{e}: {}", reply.body))
}

/// Wait until every admission has been released (each answer written out).
fn wait_until_idle(server: &TestServer) {
    let deadline = Instant::now() + DEADLINE;
    while server.state().compute.observations_in_flight() > 0 {
        assert!(Instant::now() < deadline, "admissions were never released");
        std::thread::sleep(std::time::Duration::from_millis(10));
    }
}

#[test]
fn a_request_over_the_work_budget_gets_413_before_any_scoring() {
    let terms = 10; // the lease test model's coefficients, intercept included
    let mut settings = test_settings();
    settings.limits.max_work_units = 100 * terms * terms;
    let server = TestServer::start_with(settings);
    let encode = |server: &TestServer| {
        String::from_utf8(server.state().metrics.encode().expect("metrics")).expect("text")
    };
    let scored_before = encode(&server);
    let reply = post(&server, &batch(101));
    assert_eq!(reply.status, 413, "{}", reply.body);
    let problem = problem(&reply);
    assert_eq!(problem["type"], json!("urn:ogive:problem:work-over-budget"));
    assert_eq!(problem["limit"], json!(100 * terms * terms));
    let detail = problem["detail"].as_str().expect("detail");
    assert!(detail.contains("at most 100 observations"), "{detail}");
    // Nothing was scored: the scoring counter did not move.
    let scored_after = encode(&server);
    let count = |text: &str| -> Vec<String> {
        text.lines()
            .filter(|l| l.starts_with("ogive_observations_scored_total"))
            .map(str::to_string)
            .collect()
    };
    assert_eq!(count(&scored_before), count(&scored_after));
    // At the budget exactly, the batch is answered.
    assert_eq!(post(&server, &batch(100)).status, 200);
}

#[test]
fn observations_over_the_in_flight_limit_get_503_with_retry_after_until_released() {
    let mut settings = test_settings();
    settings.limits.max_inflight_observations = 50;
    let server = TestServer::start_with(settings);
    // Another request's observations still being scored or written out.
    let held = server.state().compute.admit(45).expect("room");
    let reply = post(&server, &batch(20));
    assert_eq!(overloaded(&reply)["limit"], json!(50));
    // Within the room left, a request is answered.
    assert_eq!(post(&server, &batch(5)).status, 200);
    drop(held);
    wait_until_idle(&server);
    assert_eq!(post(&server, &batch(20)).status, 200);
    wait_until_idle(&server);
}

#[test]
fn body_bytes_over_the_in_flight_limit_get_503_with_retry_after() {
    let mut settings = test_settings();
    settings.limits.max_inflight_body_bytes = 64 * 1024;
    let server = TestServer::start_with(settings);
    let held = server
        .state()
        .compute
        .reserve_body(60 * 1024)
        .expect("room");
    // About 10 KB of body: over the 4 KiB left.
    let reply = post(&server, &batch(100));
    overloaded(&reply);
    drop(held);
    assert_eq!(post(&server, &batch(100)).status, 200);
    assert_eq!(server.state().compute.body_bytes_in_flight(), 0);
}

#[test]
fn a_batch_scored_on_the_pool_answers_what_single_requests_answer() {
    let server = TestServer::start_with(test_settings());
    let mut observations = Vec::new();
    for i in 0..400u32 {
        let mut o = lease_observation();
        o["years_trading"] = json!(1.0 + f64::from(i) * 0.05);
        o["sector"] = json!(["retail", "construction", "transport", "services"][i as usize % 4]);
        observations.push(o);
    }
    let body = json!({ "observations": observations });
    // Well over the inline size: this batch is parsed and scored on the pool.
    assert!(body.to_string().len() > ogive::service::compute::INLINE_BODY_BYTES);
    let reply = post(&server, &body);
    assert_eq!(reply.status, 200, "{}", reply.body);
    let answer = problem(&reply);
    let results = answer["results"].as_array().expect("results");
    assert_eq!(results.len(), 400);
    for i in [0usize, 1, 137, 399] {
        let single = post(&server, &json!({"observation": observations[i]}));
        let single = problem(&single);
        assert_eq!(
            results[i]["probability"], single["probability"],
            "observation {i}"
        );
        assert_eq!(results[i]["effects"], single["effects"], "observation {i}");
        assert_eq!(
            results[i]["interval"], single["interval"],
            "observation {i}"
        );
    }
    wait_until_idle(&server);
}

/// The largest resident set `ogive serve` may reach in the test below: the reference pod's
/// memory limit (256 MiB, deploy/kubernetes/deployment.yaml).
const RSS_BOUND_KIB: u64 = 256 * 1024;

fn peak_rss_kib(pid: u32) -> u64 {
    let status = std::fs::read_to_string(format!("/proc/{pid}/status")).expect("/proc status");
    status
        .lines()
        .find_map(|l| l.strip_prefix("VmHWM:"))
        .and_then(|v| v.trim().trim_end_matches("kB").trim().parse().ok())
        .expect("VmHWM")
}

#[test]
fn two_hundred_clients_that_never_read_leave_memory_bounded_and_every_reader_answered() {
    use std::io::Write;
    use std::net::TcpStream;
    use std::process::{Command, Stdio};

    let models = crate::support::server::http_models();
    let mut child = Command::new(env!("CARGO_BIN_EXE_ogive"))
        .args(["serve", "--models"])
        .arg(&models)
        .args([
            "--listen",
            "127.0.0.1:0",
            "--workers",
            "2",
            "--drain-delay-ms",
            "0",
        ])
        .args(["--shutdown-timeout-ms", "2000"])
        .env_remove("OGIVE_ADMIN_TOKEN")
        .env_remove("OGIVE_ADMIN_TOKEN_FILE")
        .env("RUST_LOG", "warn")
        .stdin(Stdio::null())
        .stdout(Stdio::piped())
        .stderr(Stdio::null())
        .spawn()
        .expect("ogive serve starts");
    let stdout = child.stdout.take().expect("stdout");
    let mut lines = std::io::BufRead::lines(std::io::BufReader::new(stdout));
    let addr: std::net::SocketAddr = loop {
        let line = lines.next().expect("a line").expect("text");
        if let Some(rest) = line.strip_prefix("ogive serving on http://") {
            break rest.trim().parse().expect("address");
        }
    };
    std::thread::spawn(move || for _ in lines {});

    // 200 clients send a 200-observation batch each and never read a byte of the answer.
    let body = batch(200).to_string();
    let request = format!(
        "POST {PROBABILITY} HTTP/1.1\r\nHost: test\r\n{JSON}Content-Length: {}\r\n\r\n{body}",
        body.len()
    );
    let silent: Vec<TcpStream> = (0..200)
        .map(|_| {
            let mut stream = TcpStream::connect(addr).expect("connect");
            stream.write_all(request.as_bytes()).expect("write");
            stream
        })
        .collect();

    // 200 clients that read: each sends one observation and must get its answer.
    let single = json!({"observation": lease_observation()}).to_string();
    let readers: Vec<_> = (0..8)
        .map(|_| {
            let single = single.clone();
            std::thread::spawn(move || {
                (0..25)
                    .map(|_| raw_request(addr, "POST", PROBABILITY, JSON, single.as_bytes()).status)
                    .collect::<Vec<u16>>()
            })
        })
        .collect();
    let statuses: Vec<u16> = readers
        .into_iter()
        .flat_map(|r| r.join().expect("reader"))
        .collect();
    assert_eq!(statuses.len(), 200);
    assert!(statuses.iter().all(|&s| s == 200), "{statuses:?}");

    let peak = peak_rss_kib(child.id());
    drop(silent);
    let _ = Command::new("kill")
        .args(["-TERM", &child.id().to_string()])
        .status();
    let deadline = Instant::now() + DEADLINE;
    while child.try_wait().expect("wait").is_none() {
        if Instant::now() > deadline {
            let _ = child.kill();
            break;
        }
        std::thread::sleep(std::time::Duration::from_millis(20));
    }
    let _ = child.wait();
    assert!(
        peak < RSS_BOUND_KIB,
        "peak resident set {peak} KiB, over the {RSS_BOUND_KIB} KiB bound"
    );
    eprintln!("peak resident set of ogive serve: {peak} KiB (bound {RSS_BOUND_KIB} KiB)");
}
