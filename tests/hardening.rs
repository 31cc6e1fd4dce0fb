//! Hardening over real TCP on 127.0.0.1: what a hostile or broken client can do to a running
//! server, and that every other client keeps being answered.
//!
//! ```text
//! slow head          a head sent one byte at a time is cut off by the client request timeout
//! slow body          a body that stops arriving is cut off too
//! oversized headers  431 or a closed connection, by size and by count
//! idle connections   hundreds of idle sockets: others are answered, the idle ones are closed
//! oversized body     413 before the client has sent it all
//! admin routes       absent from the public listener
//! the catalogue      every malformed request of tests/http/catalogue.rs over a raw socket,
//!                    each answered with its problem details, and others answered after each
//! admin.rs           the binary: tokens on the admin listener, and never in the log; two
//!                    Authorization headers, a one-character token, the header limit, the
//!                    request counts, a read-only model directory
//! connections.rs     a client that never reads is abandoned after the stalled-write
//!                    timeout; connections past the connection cap wait unaccepted
//! load.rs            the work budget, the in-flight caps (503 + Retry-After), batches on the
//!                    scoring pool
//! operation.rs       HEAD on the probes, Connection: close while draining, a live pointer
//!                    naming a missing version, a saturated answer's note
//! ```
//!
//! The public listener runs in-process with small timeouts (1.5 s) so the tests run fast. No assertion is about time: each wait has a generous deadline only so that a broken
//! server fails the test instead of hanging it.

#[path = "hardening/admin.rs"]
mod admin;
#[allow(dead_code)]
#[path = "http/catalogue.rs"]
mod catalogue;
#[path = "hardening/connections.rs"]
mod connections;
#[path = "hardening/load.rs"]
mod load;
#[path = "hardening/operation.rs"]
mod operation;
mod support;

use std::io::{ErrorKind, Read, Write};
use std::net::{SocketAddr, TcpStream};
use std::time::{Duration, Instant};

use ogive::service::body::DRAIN_FACTOR;
use ogive::service::Settings;
use serde_json::{json, Value as Json};
use support::http_models::lease_observation;
use support::server::{test_settings, TestServer};

/// Longest any single wait in these tests may take before the test fails instead of hanging.
const DEADLINE: Duration = Duration::from_secs(20);

/// The test settings with timeouts small enough for the tests to watch them act, and large
/// enough that a well-behaved client on a loaded machine (a debug build, tests in parallel)
/// never meets them.
fn hardened_settings() -> Settings {
    let mut settings = test_settings();
    settings.limits.client_request_timeout_ms = 1_500;
    settings.limits.body_timeout_ms = 1_500;
    settings.limits.keep_alive_ms = 1_500;
    settings.limits.client_disconnect_timeout_ms = 500;
    settings
}

fn address(server: &TestServer) -> SocketAddr {
    server.addr
}

/// A response read from a raw connection.
struct Raw {
    status: u16,
    /// The status line and headers.
    head: String,
    body: String,
}

impl Raw {
    /// A header's value (the name in any case).
    fn header(&self, name: &str) -> Option<&str> {
        self.head.lines().skip(1).find_map(|line| {
            let (n, v) = line.split_once(':')?;
            n.trim().eq_ignore_ascii_case(name).then(|| v.trim())
        })
    }
}

/// Send one request on a fresh connection (`Connection: close`) and read the whole response.
fn raw_request(addr: SocketAddr, method: &str, path: &str, headers: &str, body: &[u8]) -> Raw {
    let mut stream = TcpStream::connect(addr).expect("connect");
    stream.set_read_timeout(Some(DEADLINE)).expect("timeout");
    let head = format!(
        "{method} {path} HTTP/1.1\r\nHost: test\r\nConnection: close\r\n{headers}Content-Length: {}\r\n\r\n",
        body.len()
    );
    stream.write_all(head.as_bytes()).expect("write head");
    stream.write_all(body).expect("write body");
    let mut response = Vec::new();
    stream.read_to_end(&mut response).expect("read response");
    parse_response(&response).unwrap_or_else(|| {
        panic!(
            "{method} {path}: not an HTTP response: {:?}",
            String::from_utf8_lossy(&response)
        )
    })
}

fn parse_response(bytes: &[u8]) -> Option<Raw> {
    let text = String::from_utf8_lossy(bytes);
    let status = text.strip_prefix("HTTP/1.1 ")?.get(..3)?.parse().ok()?;
    let (head, body) = text.split_once("\r\n\r\n").unwrap_or((&text, ""));
    Some(Raw {
        status,
        head: head.to_string(),
        body: body.to_string(),
    })
}

/// A scoring request for one `observation` of the HTTP test model, on a connection of its own.
fn raw_score(addr: SocketAddr, observation: &Json) -> Raw {
    let body = json!({ "observation": observation }).to_string();
    raw_request(
        addr,
        "POST",
        "/models/lease-test/probability",
        "Content-Type: application/json\r\n",
        body.as_bytes(),
    )
}

/// One scoring request by a well-behaved client: it must be answered with a probability.
fn assert_answers_others(addr: SocketAddr) {
    let reply = raw_score(addr, &lease_observation());
    assert_eq!(reply.status, 200, "{}", reply.body);
    let answer: Json = serde_json::from_str(&reply.body).expect("JSON answer");
    assert!(answer["probability"].is_number(), "{answer}");
}

/// What the server did with a connection it was expected to end.
#[derive(Debug, PartialEq)]
enum Ended {
    /// It answered (with this status) and closed.
    Answered(u16),
    /// It closed without answering.
    Closed,
}

/// Read from `stream` until the server closes it; whatever arrived first is its answer. `None`
/// when the server neither answered nor closed before `deadline`.
fn wait_for_end(stream: &mut TcpStream, deadline: Instant) -> Option<Ended> {
    let mut received = Vec::new();
    let mut buffer = [0u8; 4096];
    loop {
        let left = deadline.checked_duration_since(Instant::now())?;
        stream
            .set_read_timeout(Some(left.max(Duration::from_millis(1))))
            .expect("timeout");
        match stream.read(&mut buffer) {
            Ok(0) => break,
            Ok(n) => received.extend_from_slice(&buffer[..n]),
            Err(e) if matches!(e.kind(), ErrorKind::WouldBlock | ErrorKind::TimedOut) => {
                if Instant::now() >= deadline {
                    return None;
                }
            }
            // A reset after the server gave up on the connection is an end too.
            Err(_) => break,
        }
    }
    Some(match parse_response(&received) {
        Some(raw) => Ended::Answered(raw.status),
        None => Ended::Closed,
    })
}

/// The status of the response that arrives on `stream`, read as soon as its status line is
/// in (the connection may stay open); `None` when none arrives before `deadline`.
fn read_status(stream: &mut TcpStream, deadline: Instant) -> Option<u16> {
    let mut received = Vec::new();
    let mut buffer = [0u8; 256];
    while received.len() < 12 {
        let left = deadline.checked_duration_since(Instant::now())?;
        stream
            .set_read_timeout(Some(left.max(Duration::from_millis(1))))
            .expect("timeout");
        match stream.read(&mut buffer) {
            Ok(0) => return None,
            Ok(n) => received.extend_from_slice(&buffer[..n]),
            Err(e) if matches!(e.kind(), ErrorKind::WouldBlock | ErrorKind::TimedOut) => {}
            Err(_) => return None,
        }
    }
    let text = String::from_utf8_lossy(&received);
    text.strip_prefix("HTTP/1.1 ")?.get(..3)?.parse().ok()
}

/// Whether the server has closed `stream` (a response, if any, is read and dropped). A
/// non-blocking look: `false` while the connection is still open and silent.
fn is_closed(stream: &mut TcpStream) -> bool {
    let mut buffer = [0u8; 1024];
    loop {
        match stream.read(&mut buffer) {
            Ok(0) => return true,
            Ok(_) => continue,
            Err(e) if e.kind() == ErrorKind::WouldBlock => return false,
            Err(_) => return true,
        }
    }
}

#[test]
fn a_client_sending_its_head_byte_by_byte_is_cut_off_while_others_are_answered() {
    let server = TestServer::start_with(hardened_settings());
    let addr = address(&server);
    let slow = std::thread::spawn(move || {
        let mut stream = TcpStream::connect(addr).expect("connect");
        stream.set_nodelay(true).expect("nodelay");
        // A head that never ends: a request line, then one header value growing by a byte at a
        // time, far below the header size limit within the deadline.
        let mut bytes = b"GET /livez HTTP/1.1\r\nHost: test\r\nX-Slow: "
            .iter()
            .copied();
        let deadline = Instant::now() + DEADLINE;
        let mut sent = 0usize;
        while Instant::now() < deadline {
            let byte = bytes.next().unwrap_or(b'a');
            if stream.write_all(&[byte]).is_err() {
                return (sent, Some(Ended::Closed));
            }
            sent += 1;
            stream.set_nonblocking(true).expect("nonblocking");
            let closed = is_closed(&mut stream);
            stream.set_nonblocking(false).expect("blocking");
            if closed {
                return (sent, Some(Ended::Closed));
            }
            std::thread::sleep(Duration::from_millis(20));
        }
        (sent, None)
    });
    let mut answered = 0;
    while !slow.is_finished() {
        assert_answers_others(addr);
        answered += 1;
        std::thread::sleep(Duration::from_millis(25));
    }
    let (sent, ended) = slow.join().expect("the slow client");
    assert_eq!(
        ended,
        Some(Ended::Closed),
        "the server kept a client that sent {sent} bytes of an unfinished head"
    );
    assert!(
        answered > 0,
        "no other request ran while the slow client was connected"
    );
    assert_answers_others(addr);
}

#[test]
fn a_client_that_stops_sending_its_body_is_cut_off_while_others_are_answered() {
    let server = TestServer::start_with(hardened_settings());
    let addr = address(&server);
    let body = json!({"observation": lease_observation()}).to_string();
    let mut stream = TcpStream::connect(addr).expect("connect");
    write!(
        stream,
        "POST /models/lease-test/probability HTTP/1.1\r\nHost: test\r\nContent-Type: application/json\r\nContent-Length: {}\r\n\r\n{}",
        body.len(),
        &body[..body.len() / 2]
    )
    .expect("write half a request");
    assert_answers_others(addr);
    let ended = wait_for_end(&mut stream, Instant::now() + DEADLINE);
    assert_eq!(
        ended,
        Some(Ended::Answered(408)),
        "a body that stopped halfway must be answered 408 and its connection closed"
    );
    assert_answers_others(addr);
}

#[test]
fn oversized_headers_get_431_or_a_closed_connection_and_others_are_unaffected() {
    let server = TestServer::start_with(hardened_settings());
    let addr = address(&server);
    let limit = hardened_settings().limits.max_header_bytes;
    let one_large = format!("X-Large: {}\r\n", "a".repeat(limit + 1));
    let many_small: String = (0..400).map(|i| format!("X-Many-{i}: {i}\r\n")).collect();
    let huge = format!("X-Huge: {}\r\n", "a".repeat(1024 * 1024));
    for (case, headers) in [
        ("one header over the limit", one_large),
        ("400 small headers", many_small),
        ("a 1 MiB header", huge),
    ] {
        let mut stream = TcpStream::connect(addr).expect("connect");
        let head = format!("GET /livez HTTP/1.1\r\nHost: test\r\n{headers}\r\n");
        // The server may stop reading and close before the head is all written.
        let _ = stream.write_all(head.as_bytes());
        let ended = wait_for_end(&mut stream, Instant::now() + DEADLINE);
        assert!(
            matches!(ended, Some(Ended::Answered(431)) | Some(Ended::Closed)),
            "{case}: {ended:?}"
        );
        assert_answers_others(addr);
    }
    let reply = raw_request(
        addr,
        "GET",
        "/livez",
        &format!("X-Large: {}\r\n", "a".repeat(limit + 1)),
        b"",
    );
    assert_eq!(reply.status, 431);
    let problem: Json = serde_json::from_str(&reply.body).expect("a problem body");
    assert_eq!(problem["status"], json!(431));
}

#[test]
fn hundreds_of_idle_connections_leave_others_answered_and_are_closed_by_the_server() {
    const IDLE: usize = 500;
    let server = TestServer::start_with(hardened_settings());
    let addr = address(&server);
    let mut idle: Vec<TcpStream> = Vec::with_capacity(IDLE + 1);
    for _ in 0..IDLE {
        idle.push(TcpStream::connect(addr).expect("connect"));
    }
    // One more that made a request and then sits idle on keep-alive.
    let mut kept_alive = TcpStream::connect(addr).expect("connect");
    kept_alive
        .write_all(b"GET /livez HTTP/1.1\r\nHost: test\r\n\r\n")
        .expect("write");
    let mut first = [0u8; 12];
    kept_alive
        .set_read_timeout(Some(DEADLINE))
        .expect("timeout");
    kept_alive.read_exact(&mut first).expect("a response");
    assert_eq!(&first, b"HTTP/1.1 200");
    idle.push(kept_alive);
    for _ in 0..5 {
        assert_answers_others(addr);
    }
    for stream in &idle {
        stream.set_nonblocking(true).expect("nonblocking");
    }
    let deadline = Instant::now() + DEADLINE;
    let mut open: Vec<TcpStream> = idle;
    while !open.is_empty() && Instant::now() < deadline {
        open.retain_mut(|stream| !is_closed(stream));
        std::thread::sleep(Duration::from_millis(50));
    }
    assert!(
        open.is_empty(),
        "{} of {} idle connections were never closed by the server",
        open.len(),
        IDLE + 1
    );
    assert_answers_others(addr);
}

#[test]
fn a_body_over_the_limit_gets_413_before_the_client_has_sent_it_all() {
    let server = TestServer::start_with(hardened_settings());
    let addr = address(&server);
    let limit = hardened_settings().limits.max_body_bytes;
    // The client declares (or streams) a body far over the limit, sends a part larger than
    // the most the server reads before answering, then waits: the 413 must come while most of
    // the body is still unsent.
    let part = vec![b' '; (DRAIN_FACTOR + 2) * limit];
    let declared = format!("Content-Length: {}\r\n", 64 * 1024 * 1024);
    for (case, framing) in [
        ("declared", declared.as_str()),
        ("chunked", "Transfer-Encoding: chunked\r\n"),
    ] {
        let mut stream = TcpStream::connect(addr).expect("connect");
        write!(
            stream,
            "POST /models/lease-test/probability HTTP/1.1\r\nHost: test\r\nContent-Type: application/json\r\n{framing}\r\n"
        )
        .expect("write head");
        let sent = if framing.starts_with("Transfer") {
            write!(stream, "{:x}\r\n", part.len()).and_then(|()| stream.write_all(&part))
        } else {
            stream.write_all(&part)
        };
        // The server may close once it has read enough; that is no failure of the test.
        drop(sent);
        let deadline = Instant::now() + DEADLINE;
        assert_eq!(read_status(&mut stream, deadline), Some(413), "{case}");
        assert_eq!(
            wait_for_end(&mut stream, deadline),
            Some(Ended::Closed),
            "{case}: the server kept the connection of a body over the limit"
        );
        assert_answers_others(addr);
    }
}

#[test]
fn the_admin_routes_do_not_exist_on_the_public_listener() {
    let server = TestServer::start_with(hardened_settings());
    let addr = address(&server);
    let model_file = support::http_models::lease_file().to_string();
    let version = json!({"version": "2026-01"}).to_string();
    let json_type = "Content-Type: application/json\r\nAuthorization: Bearer a-token\r\n";
    for (method, path, body) in [
        (
            "PUT",
            "/models/lease-test/versions/2026-02",
            model_file.as_str(),
        ),
        ("POST", "/models/lease-test/live", version.as_str()),
        ("POST", "/models/lease-test/rollback", ""),
        ("GET", "/models/lease-test/history", ""),
        ("PUT", "/models/lease-test/shadow", version.as_str()),
        ("DELETE", "/models/lease-test/shadow", ""),
    ] {
        let reply = raw_request(addr, method, path, json_type, body.as_bytes());
        assert_eq!(reply.status, 404, "{method} {path}: {}", reply.body);
        let problem: Json = serde_json::from_str(&reply.body).expect("a problem body");
        assert_eq!(problem["status"], json!(404), "{method} {path}");
    }
    let live = raw_request(addr, "GET", "/models/lease-test", "", b"");
    let live: Json = serde_json::from_str(&live.body).expect("model JSON");
    assert_eq!(
        live["version"],
        json!("2026-01"),
        "nothing was promoted: {live}"
    );
}

#[test]
fn every_case_of_the_catalogue_over_a_raw_socket_gets_its_problem_and_leaves_others_answered() {
    let server = TestServer::start_with(hardened_settings());
    let addr = address(&server);
    let cases = catalogue::catalogue();
    let mut failures = Vec::new();
    for case in &cases {
        let headers: String = case
            .headers
            .iter()
            .map(|(name, value)| format!("{name}: {value}\r\n"))
            .collect();
        let body = case.body.as_deref().unwrap_or(b"");
        let reply = raw_request(addr, case.method, &case.path, &headers, body);
        if let Err(wrong) = case.check(reply.status, reply.header("content-type"), &reply.body) {
            failures.push(wrong);
        }
        // A hostile request changes nothing for the next caller.
        assert_answers_others(addr);
    }
    assert!(
        failures.is_empty(),
        "{} of {} cases wrong over a raw socket:\n{}",
        failures.len(),
        cases.len(),
        failures.join("\n")
    );
}
