//! What one connection may hold, over raw TCP on 127.0.0.1: a client that never reads its
//! answer is abandoned after the stalled-write timeout (its answer and admission released), and
//! connections past the connection cap wait unanswered in the kernel's queue while the clients
//! holding a place keep being answered, then are served in turn. Bounded: at most 116 connections, each wait under
//! the 20 s deadline; nothing here asserts a time.

use std::io::{Read, Write};
use std::net::{SocketAddr, TcpStream};
use std::time::{Duration, Instant};

use serde_json::json;

use crate::support::http_models::lease_observation;
use crate::support::server::TestServer;
use crate::{assert_answers_others, hardened_settings, parse_response, DEADLINE};

/// A connection whose receive buffer is as small as the kernel allows, so that the server
/// meets a shut window after a few kilobytes instead of several megabytes.
fn stingy_connection(addr: SocketAddr) -> TcpStream {
    let socket =
        socket2::Socket::new(socket2::Domain::IPV4, socket2::Type::STREAM, None).expect("a socket");
    socket.set_recv_buffer_size(4096).expect("a small buffer");
    socket.connect(&addr.into()).expect("connect");
    socket.into()
}

#[test]
fn a_client_that_never_reads_its_answer_is_abandoned_after_the_stall_timeout() {
    let mut settings = hardened_settings();
    settings.limits.write_stall_timeout_ms = 1_000;
    settings.limits.max_batch = 5_000;
    settings.limits.max_body_bytes = 8 * 1024 * 1024;
    let server = TestServer::start_with(settings);
    // 5,000 observations with effects: an answer of several megabytes, more than the kernel
    // buffers of both ends hold, so most of it waits in the server for the client.
    let body = json!({"observations": vec![lease_observation(); 5_000]}).to_string();
    let mut stream = stingy_connection(server.addr);
    write!(
        stream,
        "POST /models/lease-test/probability HTTP/1.1\r\nHost: test\r\nContent-Type: application/json\r\nContent-Length: {}\r\n\r\n{body}",
        body.len()
    )
    .expect("send the batch");
    // The answer is admitted and held while the client reads nothing ...
    let compute = &server.state().compute;
    let deadline = Instant::now() + DEADLINE;
    while compute.observations_in_flight() == 0 {
        assert!(Instant::now() < deadline, "the batch was never admitted");
        std::thread::sleep(Duration::from_millis(10));
    }
    // ... until the kernel gives up on the stalled connection and the server lets it go.
    while compute.observations_in_flight() > 0 {
        assert!(
            Instant::now() < deadline,
            "a client that never reads still holds {} observations",
            compute.observations_in_flight()
        );
        std::thread::sleep(Duration::from_millis(50));
    }
    // What the client can still read is a truncated answer, then an end.
    let mut received = Vec::new();
    stream.set_read_timeout(Some(DEADLINE)).expect("timeout");
    let mut buffer = [0u8; 65536];
    loop {
        match stream.read(&mut buffer) {
            Ok(0) | Err(_) => break,
            Ok(n) => received.extend_from_slice(&buffer[..n]),
        }
    }
    let answer = parse_response(&received).expect("the start of the answer");
    assert_eq!(answer.status, 200);
    let length: usize = answer
        .header("content-length")
        .and_then(|v| v.parse().ok())
        .expect("a length");
    assert!(
        answer.body.len() < length,
        "the whole answer arrived: the test did not stall the writer"
    );
    assert_answers_others(server.addr);
}

/// Whether anything has arrived on `stream` (a non-blocking look).
fn has_data(stream: &TcpStream) -> bool {
    stream.set_nonblocking(true).expect("non-blocking");
    let mut byte = [0u8; 1];
    let arrived = matches!(stream.peek(&mut byte), Ok(n) if n > 0);
    stream.set_nonblocking(false).expect("blocking");
    arrived
}

/// Send `request` on `stream` and read one response by its Content-Length.
fn exchange(stream: &mut TcpStream, request: &str) -> u16 {
    stream.write_all(request.as_bytes()).expect("write");
    stream.set_read_timeout(Some(DEADLINE)).expect("timeout");
    let mut received = Vec::new();
    let mut buffer = [0u8; 4096];
    loop {
        if let Some(raw) = parse_response(&received) {
            let length: usize = raw
                .header("content-length")
                .and_then(|v| v.parse().ok())
                .unwrap_or(0);
            if received.len() >= raw.head.len() + 4 + length {
                return raw.status;
            }
        }
        let n = stream.read(&mut buffer).expect("a response");
        assert!(n > 0, "closed before a whole response");
        received.extend_from_slice(&buffer[..n]);
    }
}

#[test]
fn connections_past_the_cap_wait_unanswered_and_the_answered_clients_are_unaffected() {
    let cap = 8;
    let mut settings = hardened_settings();
    settings.workers = 2;
    settings.limits.max_connections = cap;
    // Long enough that no held connection is closed by a timeout while the test runs.
    settings.limits.keep_alive_ms = 60_000;
    settings.limits.client_request_timeout_ms = 60_000;
    let server = TestServer::start_with(settings);
    let keep_alive = "GET /livez HTTP/1.1\r\nHost: test\r\n\r\n";
    let mut holders: Vec<TcpStream> = (0..cap)
        .map(|_| {
            let mut stream = TcpStream::connect(server.addr).expect("connect");
            assert_eq!(exchange(&mut stream, keep_alive), 200);
            stream
        })
        .collect();
    // 100 more connections, each with a whole request sent: the kernel queues them, the
    // server takes none while its places are full.
    let closing = "GET /livez HTTP/1.1\r\nHost: test\r\nConnection: close\r\n\r\n";
    let mut waiting: Vec<TcpStream> = (0..100)
        .map(|_| {
            let mut stream = TcpStream::connect(server.addr).expect("queued by the kernel");
            stream.write_all(closing.as_bytes()).expect("write");
            stream
        })
        .collect();
    // The clients holding a place are answered as before, on their own connections.
    for _ in 0..5 {
        for stream in &mut holders {
            assert_eq!(exchange(stream, keep_alive), 200);
        }
    }
    // Meanwhile none of the waiting connections was taken: each would have been answered
    // by now (a slow machine can only make this look pass, never fail).
    std::thread::sleep(Duration::from_millis(200));
    let answered = waiting.iter().filter(|s| has_data(s)).count();
    assert_eq!(
        answered, 0,
        "connections past the cap of {cap} were answered"
    );
    // Once they leave, the waiting connections are taken in turn and each is answered.
    drop(holders);
    for stream in &mut waiting {
        stream.set_read_timeout(Some(DEADLINE)).expect("timeout");
        let mut received = Vec::new();
        stream
            .read_to_end(&mut received)
            .expect("an answer, then the close");
        let answer = parse_response(&received).expect("an answer");
        assert_eq!(answer.status, 200);
    }
}
