//! The HTTP service: the public listener's routes, their request and response types, the one
//! error type, the middleware, and starting and stopping the server.
//!
//! ```text
//! mod.rs          the app factory and server start (this file)
//! config.rs       settings: address, limits, timeouts, drain, logging, CORS origins
//! cors.rs         cross-origin calls from the listed browser origins only
//! state.rs        what handlers share: registry, metrics, health, settings
//! routes/         one file per route family; routes/mod.rs mounts them
//! problem.rs      RFC 9457 problem details, the one error type
//! body.rs         JSON bodies: the one reader, strict parsing, size and time limits
//! compute.rs      the scoring pool, the work budget, the in-flight caps
//! dto.rs          request parsing and response views
//! observations.rs observations → engine values, service bounds
//! scoring.rs      driving the engine for a probability request
//! curve.rs        the curve of one covariate, its ETag
//! etag.rs         entity tags and If-None-Match for the read routes
//! openapi.rs      the OpenAPI 3.1 document (openapi.json + per-model paths)
//! middleware.rs   request id, header limit, panic catching, metrics, the log line
//! request_id.rs   X-Request-Id validation and generation
//! example.rs      an example observation and curl command for a model
//! shutdown.rs     signals, draining, graceful stop
//! shadow.rs       scoring a shadow candidate beside the live version, and its report
//! stored.rs       stored versions that are not live, loaded on demand for scoring
//! follow.rs       following the model directory: the watcher, readiness, its thread
//! admin/          the admin listener: token, lifecycle and shadow routes, its document
//! ```
//!
//! The service contains no statistics: it parses, calls the engine, and writes what the engine
//! computed.

pub mod admin;
pub mod body;
pub mod compute;
pub(crate) mod config;
pub(crate) mod cors;
pub(crate) mod curve;
pub mod dto;
pub(crate) mod etag;
pub(crate) mod example;
pub mod follow;
pub mod middleware;
pub mod observations;
pub(crate) mod openapi;
pub mod problem;
pub(crate) mod request_id;
pub(crate) mod routes;
pub mod scoring;
pub mod shadow;
pub(crate) mod shutdown;
pub(crate) mod state;
pub(crate) mod stored;

use std::io;
use std::net::{SocketAddr, TcpListener};
use std::sync::Arc;
use std::time::Duration;

use actix_web::{middleware::from_fn, web, App, HttpServer};

pub use config::{Limits, Settings};
pub use cors::CorsOrigins;
pub use state::{AppState, Health};

/// Extra routes to mount beside the public ones (for embedding and tests).
pub type Configure = Arc<dyn Fn(&mut web::ServiceConfig) + Send + Sync>;

/// Build the public listener's server on an already-bound listener (not yet running).
pub fn public_server(
    state: AppState,
    listener: TcpListener,
    extra: Option<Configure>,
) -> io::Result<actix_web::dev::Server> {
    let settings = state.settings.clone();
    let limits = &settings.limits;
    let data = web::Data::new(state);
    let body_timeout = body::BodyTimeout::of(limits);
    let grace_seconds = settings
        .shutdown_timeout_ms
        .saturating_sub(settings.drain_delay_ms)
        .div_ceil(1000)
        .max(1);
    let server = HttpServer::new(move || {
        let extra = extra.clone();
        App::new()
            .app_data(data.clone())
            .app_data(body_timeout)
            .wrap(from_fn(cors::cors))
            .wrap(from_fn(middleware::observe))
            .configure(routes::configure)
            .configure(move |cfg| {
                if let Some(extra) = &extra {
                    extra(cfg);
                }
            })
            .default_service(web::to(routes::not_found))
    })
    .workers(settings.worker_count())
    .disable_signals()
    .shutdown_timeout(grace_seconds)
    .client_request_timeout(Duration::from_millis(limits.client_request_timeout_ms))
    .client_disconnect_timeout(Duration::from_millis(limits.client_disconnect_timeout_ms))
    .keep_alive(Duration::from_millis(limits.keep_alive_ms))
    .max_connections(limits.max_connections_per_worker)
    .listen(listener)?
    .run();
    Ok(server)
}

/// Bind the configured address.
pub fn bind(settings: &Settings) -> io::Result<TcpListener> {
    let listener = TcpListener::bind(settings.listen)?;
    listener.set_nonblocking(true)?;
    Ok(listener)
}

/// Serve `state` on `listener` until `signal` resolves, then drain and stop (see
/// [`shutdown`]). Must run inside an actix system.
pub async fn serve(
    state: AppState,
    listener: TcpListener,
    extra: Option<Configure>,
    signal: impl std::future::Future<Output = ()>,
) -> io::Result<()> {
    let settings = state.settings.clone();
    let health = state.health.clone();
    let server = public_server(state, listener, extra)?;
    shutdown::run_until(
        server,
        health,
        settings.drain_delay(),
        settings.shutdown_timeout(),
        signal,
    )
    .await
}

/// Serve as [`serve`] does, with the admin listener beside the public one when `admin` is
/// given: it runs until the public listener has drained and stopped, then stops too.
pub async fn serve_with_admin(
    state: AppState,
    listener: TcpListener,
    admin: Option<admin::Listener>,
    extra: Option<Configure>,
    signal: impl std::future::Future<Output = ()>,
) -> io::Result<()> {
    let admin = admin.map(admin::Listener::server).transpose()?;
    let admin_handle = admin.as_ref().map(actix_web::dev::Server::handle);
    let admin_running = admin.map(actix_web::rt::spawn);
    let result = serve(state, listener, extra, signal).await;
    if let Some(handle) = admin_handle {
        handle.stop(true).await;
    }
    if let Some(running) = admin_running {
        let _ = tokio::time::timeout(Duration::from_millis(100), running).await;
    }
    result
}

/// A public listener (and an admin listener, if started with one) running on its own thread
/// (for tests and embedding).
pub struct Background {
    /// The address it listens on.
    pub addr: SocketAddr,
    /// The admin listener's address, if it has one.
    pub admin_addr: Option<SocketAddr>,
    /// The state it serves.
    pub state: AppState,
    stop: Option<tokio::sync::oneshot::Sender<()>>,
    thread: Option<std::thread::JoinHandle<io::Result<()>>>,
}

impl Background {
    /// Start serving `state` on `settings.listen` in a new thread with its own runtime.
    pub fn start(state: AppState, extra: Option<Configure>) -> io::Result<Background> {
        Background::start_with_admin(state, None, extra)
    }

    /// Start as [`Background::start`] does, with the admin listener `admin` beside it.
    pub fn start_with_admin(
        state: AppState,
        admin: Option<admin::Listener>,
        extra: Option<Configure>,
    ) -> io::Result<Background> {
        let listener = bind(&state.settings)?;
        let addr = listener.local_addr()?;
        let admin_addr = admin
            .as_ref()
            .map(admin::Listener::local_addr)
            .transpose()?;
        let (stop, stopped) = tokio::sync::oneshot::channel::<()>();
        let thread_state = state.clone();
        let thread = std::thread::Builder::new()
            .name("ogive-public".into())
            .spawn(move || {
                let stop = async {
                    let _ = stopped.await;
                };
                actix_web::rt::System::new().block_on(serve_with_admin(
                    thread_state,
                    listener,
                    admin,
                    extra,
                    stop,
                ))
            })?;
        Ok(Background {
            addr,
            admin_addr,
            state,
            stop: Some(stop),
            thread: Some(thread),
        })
    }

    /// Begin the graceful shutdown (as SIGTERM would) without waiting for it.
    pub fn begin_shutdown(&mut self) {
        if let Some(stop) = self.stop.take() {
            let _ = stop.send(());
        }
    }

    /// Shut down gracefully and wait for the thread.
    pub fn stop(mut self) -> io::Result<()> {
        self.begin_shutdown();
        match self.thread.take().map(|t| t.join()) {
            Some(Ok(result)) => result,
            Some(Err(_)) => Err(io::Error::other("the server thread panicked")),
            None => Ok(()),
        }
    }
}

impl Drop for Background {
    fn drop(&mut self) {
        self.begin_shutdown();
        if let Some(thread) = self.thread.take() {
            let _ = thread.join();
        }
    }
}
