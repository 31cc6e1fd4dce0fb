//! The settings of the public listener: where it listens, its limits and timeouts, its drain
//! and shutdown times, and what it logs. Plain data with defaults that run out of the box; the
//! command line (`ogive serve`) fills it from flags and `OGIVE_…` variables.
//!
//! This module does not read files or parse flags.

use std::net::SocketAddr;
use std::time::Duration;

use super::cors::CorsOrigins;

/// Limits on what one request may carry and how long a client may take.
#[derive(Debug, Clone, PartialEq)]
pub struct Limits {
    /// Most observations in one batch.
    pub max_batch: usize,
    /// Largest request body, in bytes.
    pub max_body_bytes: usize,
    /// Largest total size of the request headers, in bytes (names, values and separators).
    pub max_header_bytes: usize,
    /// Most points on one curve.
    pub max_curve_points: usize,
    /// Time a client has to send the request head after connecting.
    pub client_request_timeout_ms: u64,
    /// Time a client has to send the whole request body once its head has arrived (actix
    /// bounds only the head; without this a stalled body would hold its connection forever).
    pub body_timeout_ms: u64,
    /// Time an idle keep-alive connection stays open.
    pub keep_alive_ms: u64,
    /// Time a client has to acknowledge a closed connection.
    pub client_disconnect_timeout_ms: u64,
    /// Most connections open at once over the listener (each worker takes its share, rounded
    /// up); connections past it wait in the kernel's accept queue until one closes.
    pub max_connections: usize,
    /// Longest a connection may go without the client taking any of the bytes written to it
    /// (a stalled reader) before the kernel abandons it (`TCP_USER_TIMEOUT`, Linux).
    pub write_stall_timeout_ms: u64,
    /// Most scoring jobs running at once on the pool (0: one per available core).
    pub compute_threads: usize,
    /// Most work one request may ask for: observations × terms².
    pub max_work_units: u64,
    /// Most observations admitted and not yet written out, over all requests.
    pub max_inflight_observations: usize,
    /// Most request-body bytes being read at once, over all requests.
    pub max_inflight_body_bytes: usize,
}

impl Default for Limits {
    fn default() -> Limits {
        Limits {
            max_batch: 10_000,
            max_body_bytes: 8 * 1024 * 1024,
            max_header_bytes: 16 * 1024,
            max_curve_points: 500,
            client_request_timeout_ms: 5_000,
            body_timeout_ms: 30_000,
            keep_alive_ms: 5_000,
            client_disconnect_timeout_ms: 1_000,
            max_connections: 1_000,
            write_stall_timeout_ms: 30_000,
            compute_threads: 0,
            max_work_units: 25_000_000,
            max_inflight_observations: 20_000,
            max_inflight_body_bytes: 32 * 1024 * 1024,
        }
    }
}

/// Everything the public listener needs to start.
#[derive(Debug, Clone, PartialEq)]
pub struct Settings {
    /// The address to listen on; port 0 picks a free port.
    pub listen: SocketAddr,
    /// Worker threads; 0 means one per CPU core.
    pub workers: usize,
    /// Request limits and timeouts.
    pub limits: Limits,
    /// After SIGTERM, how long to keep accepting (readiness already 503) so that load balancers
    /// notice before connections are refused.
    pub drain_delay_ms: u64,
    /// After SIGTERM, the longest the process waits for in-flight requests before exiting.
    pub shutdown_timeout_ms: u64,
    /// Log the covariate values of each observation (off by default: they may be personal data).
    pub log_observations: bool,
    /// The origins whose browser pages may call the public listener (CORS); empty by default.
    pub cors_origins: CorsOrigins,
}

impl Default for Settings {
    fn default() -> Settings {
        Settings {
            listen: SocketAddr::from(([127, 0, 0, 1], 8080)),
            workers: 0,
            limits: Limits::default(),
            drain_delay_ms: 5_000,
            shutdown_timeout_ms: 30_000,
            log_observations: false,
            cors_origins: CorsOrigins::default(),
        }
    }
}

impl Settings {
    /// The drain delay as a duration.
    pub fn drain_delay(&self) -> Duration {
        Duration::from_millis(self.drain_delay_ms)
    }

    /// The shutdown timeout as a duration.
    pub fn shutdown_timeout(&self) -> Duration {
        Duration::from_millis(self.shutdown_timeout_ms)
    }

    /// Worker threads to start: the configured count, or one per available core.
    pub fn worker_count(&self) -> usize {
        if self.workers > 0 {
            self.workers
        } else {
            std::thread::available_parallelism().map_or(1, |n| n.get())
        }
    }
}
