//! What a connection may hold: how many connections a listener takes at once, and how long
//! one may go without the client taking what is written to it.
//!
//! ```text
//! connection cap   each actix worker takes max_connections / workers (rounded up); when
//!                  every worker is full the accept loop pauses, and further connections wait
//!                  in the kernel's accept queue (not refused) until one closes
//! stalled write    TCP_USER_TIMEOUT on every accepted socket: when data written to it stays
//!                  unacknowledged or untransmitted (the client's window shut because it
//!                  reads nothing) for write_stall_timeout_ms, the kernel abandons the
//!                  connection; the pending write fails, the dispatcher drops the connection
//!                  and, with it, the answer and its in-flight admission
//! ```
//!
//! A timer inside the answer body could not do this: actix stops polling a body while the
//! connection's write buffer is full, which is exactly when a reader has stalled. The socket
//! option is described in tcp(7) (`man 7 tcp`, "TCP_USER_TIMEOUT", RFC 5482); the hardening
//! tests check that the running kernel abandons a connection whose reader has stopped.

use std::any::Any;
use std::time::Duration;

use actix_web::dev::Extensions;

/// Connections each of `workers` workers may hold so that together they hold at most
/// `max_connections` (rounded up to a multiple of the worker count), at least one.
pub(crate) fn per_worker(max_connections: usize, workers: usize) -> usize {
    max_connections.div_ceil(workers.max(1)).max(1)
}

/// The `on_connect` hook of a listener: set the stalled-write timeout on the accepted socket.
pub(crate) fn on_connect(stall: Duration) -> impl Fn(&dyn Any, &mut Extensions) + Send + Sync {
    move |connection, _| {
        if let Some(stream) = connection.downcast_ref::<actix_web::rt::net::TcpStream>() {
            set_write_stall_timeout(stream, stall);
        }
    }
}

#[cfg(target_os = "linux")]
fn set_write_stall_timeout(stream: &actix_web::rt::net::TcpStream, stall: Duration) {
    if let Err(error) = socket2::SockRef::from(stream).set_tcp_user_timeout(Some(stall)) {
        tracing::warn!(error = %error, "cannot set the stalled-write timeout on a connection");
    }
}

#[cfg(not(target_os = "linux"))]
fn set_write_stall_timeout(_: &actix_web::rt::net::TcpStream, _: Duration) {}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_workers_share_the_cap_rounded_up() {
        assert_eq!(per_worker(1_000, 2), 500);
        assert_eq!(per_worker(1_000, 3), 334);
        assert_eq!(per_worker(5, 8), 1);
        assert_eq!(per_worker(0, 2), 1);
        assert_eq!(per_worker(7, 0), 7);
    }
}
