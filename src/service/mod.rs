//! The HTTP service: the public listener's routes, their request and response types, the one
//! error type, the middleware, and starting and stopping the server.
//!
//! ```text
//! mod.rs          the public listener's app factory (this file)
//! app.rs          the application: build from a config, bind, run until stopped
//! config.rs       settings: address, limits, timeouts, drain, logging, CORS origins
//! cors.rs         cross-origin calls from the listed browser origins only
//! state.rs        what handlers share: registry, metrics, health, settings
//! routes/         one file per route family; routes/mod.rs mounts them
//! problem.rs      RFC 9457 problem details, the one error type
//! body.rs         JSON bodies: the one reader, strict parsing, size and time limits
//! compute.rs      the scoring pool, the work budget, the in-flight caps
//! connection.rs   the connection cap and the stalled-write timeout
//! dto.rs          request parsing, answer notes
//! answer.rs       the answer's JSON, written by hand into one buffer
//! direct.rs       a well-formed probability request read straight into values
//! observations.rs observations → engine values, service bounds
//! scoring.rs      driving the engine for a probability request
//! scorers.rs      each thread's engine scratch per model version, kept between requests
//! curve.rs        the curve of one covariate, its ETag
//! etag.rs         entity tags and If-None-Match for the read routes
//! openapi.rs      the OpenAPI 3.1 document (openapi.json + per-model paths)
//! middleware.rs   request id, header limit, panic catching, metrics, the log line
//! access_log.rs   the log's shared buffer and writer thread, the request line by hand
//! request_id.rs   X-Request-Id validation and generation
//! example.rs      an example observation and curl command for a model
//! shutdown.rs     signals, draining, graceful stop
//! stored.rs       stored versions that are not live, loaded on demand for scoring
//! follow.rs       following the model directory: the watcher, readiness, its thread
//! admin/          the admin listener: token, lifecycle, shadow and monitoring routes, its document
//! ```
//!
//! The service contains no statistics: it parses, calls the engine, and writes what the engine
//! computed.

pub mod access_log;
pub mod admin;
pub(crate) mod answer;
pub(crate) mod app;
pub mod body;
pub mod compute;
pub(crate) mod config;
pub(crate) mod connection;
pub(crate) mod cors;
pub(crate) mod curve;
pub(crate) mod direct;
pub mod dto;
pub(crate) mod etag;
pub(crate) mod example;
pub(crate) mod follow;
pub(crate) mod middleware;
pub mod observations;
pub(crate) mod openapi;
pub mod problem;
pub(crate) mod request_id;
pub(crate) mod routes;
pub(crate) mod scorers;
pub mod scoring;
pub(crate) mod shutdown;
pub(crate) mod state;
pub(crate) mod stored;

use std::io;
use std::net::TcpListener;
use std::time::Duration;

use actix_web::{middleware::from_fn, web, App, HttpServer};

pub use app::{AdminConfig, Application, Config, Monitoring, Shutdown};
pub use config::{Limits, Settings};
pub use cors::CorsOrigins;
pub use state::{AppState, Health};

/// The public listener's server on an already-bound listener (not yet running); started by
/// [`Application::run_until_stopped`].
fn public_server(state: AppState, listener: TcpListener) -> io::Result<actix_web::dev::Server> {
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
        App::new()
            .app_data(data.clone())
            .app_data(body_timeout)
            .wrap(from_fn(cors::cors))
            .wrap(from_fn(middleware::observe))
            .configure(routes::configure)
            .default_service(web::to(routes::not_found))
    })
    .workers(settings.worker_count())
    .disable_signals()
    .shutdown_timeout(grace_seconds)
    .client_request_timeout(Duration::from_millis(limits.client_request_timeout_ms))
    .client_disconnect_timeout(Duration::from_millis(limits.client_disconnect_timeout_ms))
    .keep_alive(Duration::from_millis(limits.keep_alive_ms))
    .max_connections(connection::per_worker(
        limits.max_connections,
        settings.worker_count(),
    ))
    .on_connect(connection::on_connect(Duration::from_millis(
        limits.write_stall_timeout_ms,
    )))
    .listen(listener)?
    .run();
    Ok(server)
}
