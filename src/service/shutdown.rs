//! Graceful shutdown of a listener: on the signal, readiness turns 503 at once; the listener
//! keeps accepting for the drain delay (so load balancers and Kubernetes endpoints notice and
//! stop sending), then stops accepting, lets in-flight requests finish, and gives up at the
//! shutdown timeout, counted from the signal.
//!
//! ```text
//! t = 0                    signal: draining, /readyz → 503
//! t = drain_delay          stop accepting; idle keep-alive connections close
//! t ≤ shutdown_timeout     in-flight requests finish, or are dropped at the timeout
//! ```
//!
//! actix-web's own signal handling is disabled; the signals are caught here with tokio.

use std::future::Future;
use std::io;
use std::pin::pin;
use std::sync::Arc;
use std::task::Poll;
use std::time::{Duration, Instant};

use actix_web::dev::{Server, ServerHandle};

use super::state::Health;

/// Which of two futures finished first.
pub enum First<A, B> {
    /// The first.
    Left(A),
    /// The second.
    Right(B),
}

/// Wait for whichever of two futures finishes first (the other is dropped).
pub async fn first_of<A: Future, B: Future>(a: A, b: B) -> First<A::Output, B::Output> {
    let mut a = pin!(a);
    let mut b = pin!(b);
    std::future::poll_fn(move |cx| {
        if let Poll::Ready(x) = a.as_mut().poll(cx) {
            return Poll::Ready(First::Left(x));
        }
        if let Poll::Ready(y) = b.as_mut().poll(cx) {
            return Poll::Ready(First::Right(y));
        }
        Poll::Pending
    })
    .await
}

/// Resolves at the first SIGTERM or SIGINT. Must be called inside the runtime.
pub async fn termination_signal() -> io::Result<()> {
    #[cfg(unix)]
    {
        use tokio::signal::unix::{signal, SignalKind};
        let mut terminate = signal(SignalKind::terminate())?;
        let mut interrupt = signal(SignalKind::interrupt())?;
        let signal = match first_of(terminate.recv(), interrupt.recv()).await {
            First::Left(_) => "SIGTERM",
            First::Right(_) => "SIGINT",
        };
        tracing::info!(signal, "shutdown signal received");
        Ok(())
    }
    #[cfg(not(unix))]
    {
        tokio::signal::ctrl_c().await
    }
}

/// Drain and stop the servers behind `handles` (the public listener, and later the admin one).
pub async fn drain_and_stop(
    handles: &[ServerHandle],
    health: &Health,
    drain_delay: Duration,
    shutdown_timeout: Duration,
) {
    let started = Instant::now();
    health.start_draining();
    tracing::info!(
        drain_delay_ms = drain_delay.as_millis() as u64,
        shutdown_timeout_ms = shutdown_timeout.as_millis() as u64,
        "draining: readiness is now 503"
    );
    tokio::time::sleep(drain_delay.min(shutdown_timeout)).await;
    let remaining = shutdown_timeout.saturating_sub(started.elapsed());
    let stops = async {
        for handle in handles {
            handle.stop(true).await;
        }
    };
    if tokio::time::timeout(remaining, stops).await.is_err() {
        tracing::warn!("shutdown timeout reached with requests still in flight; exiting");
    } else {
        tracing::info!(elapsed_ms = started.elapsed().as_millis() as u64, "stopped");
    }
}

/// Run `server` until `signal` resolves, then drain and stop it. Returns early with the
/// server's error if it stops by itself.
pub async fn run_until(
    server: Server,
    health: Arc<Health>,
    drain_delay: Duration,
    shutdown_timeout: Duration,
    signal: impl Future<Output = ()>,
) -> io::Result<()> {
    let handle = server.handle();
    let mut running = actix_web::rt::spawn(server);
    match first_of(&mut running, signal).await {
        First::Left(result) => {
            return result.map_err(io::Error::other)?;
        }
        First::Right(()) => {}
    }
    drain_and_stop(&[handle], &health, drain_delay, shutdown_timeout).await;
    let _ = tokio::time::timeout(Duration::from_millis(100), running).await;
    Ok(())
}
