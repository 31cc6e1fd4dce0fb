//! The admin listener: uploads, promotions, rollbacks, history and shadows, behind one bearer
//! token, on its own address (loopback by default, `--admin-listen`, port 8081).
//!
//! ```text
//! mod.rs        the admin app factory and listener (this file)
//! auth.rs       the token: where it comes from, the constant-time check, 401 answers
//! routes.rs     the routes, thin wrappers around registry::lifecycle and service::shadow
//! refusals.rs   lifecycle refusals → problem details with extension members
//! openapi.json  the admin listener's OpenAPI 3.1 document, served at GET /openapi.json
//! ```
//!
//! The admin listener shares the public listener's [`AppState`] (the registry, the metrics,
//! the shadow scoring and the limits) and its `Follower`, and is stopped with it. It has
//! no route without a token: [`AdminToken::configured`] returning `None` means `ogive serve`
//! starts no admin listener at all and says so. Its requests go through the same middleware as
//! the public ones: request id, the header size limit (`--max-header-bytes`), the log line
//! (which never holds a header), and `ogive_http_requests_total` and the latency histogram,
//! with route labels prefixed `admin:` so that they never mix with the callers' traffic.

pub(crate) mod auth;
pub(crate) mod monitoring;
pub(crate) mod refusals;
pub(crate) mod routes;

use std::io;
use std::net::{SocketAddr, TcpListener};
use std::sync::Arc;
use std::time::Duration;

use actix_web::{middleware::from_fn, web, App, HttpServer};

pub use auth::AdminToken;

use super::follow::Follower;
use super::middleware;
use super::state::AppState;

/// Most connections the admin listener holds at once: its callers are a few operators and
/// deploy jobs, and its one worker should not take the public listener's share of memory.
pub const MAX_CONNECTIONS: usize = 64;

/// What every admin handler shares.
#[derive(Debug, Clone)]
pub struct AdminState {
    /// The public listener's state: registry, metrics, shadow scoring, limits.
    pub app: AppState,
    /// The follower of the model directory, polled after each change.
    pub follower: Arc<Follower>,
    /// The token every admin request must present as `Authorization: Bearer`, compared in
    /// constant time and never logged.
    pub token: Arc<AdminToken>,
}

impl AdminState {
    /// The admin state for `app`, following the directory with `follower`, guarded by `token`.
    pub fn new(app: AppState, follower: Arc<Follower>, token: AdminToken) -> AdminState {
        AdminState {
            app,
            follower,
            token: Arc::new(token),
        }
    }
}

/// An admin listener bound to its address, not yet serving.
#[derive(Debug)]
pub struct Listener {
    state: AdminState,
    listener: TcpListener,
}

impl Listener {
    /// Bind `addr` (port 0 picks a free port) for `state`.
    pub fn bind(addr: SocketAddr, state: AdminState) -> io::Result<Listener> {
        let listener = TcpListener::bind(addr)?;
        listener.set_nonblocking(true)?;
        Ok(Listener { state, listener })
    }

    /// The address it is bound to.
    pub fn local_addr(&self) -> io::Result<SocketAddr> {
        self.listener.local_addr()
    }

    /// The server (not yet running). One worker: admin requests are few, and their file I/O
    /// runs on the blocking pool.
    pub fn server(self) -> io::Result<actix_web::dev::Server> {
        let settings = Arc::clone(&self.state.app.settings);
        // The public state too: the shared middleware reads its limits and metrics from it.
        let app = web::Data::new(self.state.app.clone());
        let data = web::Data::new(self.state);
        let limits = &settings.limits;
        let body_timeout = crate::service::body::BodyTimeout::of(limits);
        let server = HttpServer::new(move || {
            App::new()
                .app_data(data.clone())
                .app_data(app.clone())
                .app_data(middleware::AdminListener)
                .app_data(body_timeout)
                .wrap(from_fn(auth::require_token))
                .wrap(from_fn(middleware::observe))
                .configure(routes::configure)
                .default_service(web::to(routes::unmatched))
        })
        .workers(1)
        .disable_signals()
        .shutdown_timeout(settings.shutdown_timeout_ms.div_ceil(1000).max(1))
        .client_request_timeout(Duration::from_millis(limits.client_request_timeout_ms))
        .client_disconnect_timeout(Duration::from_millis(limits.client_disconnect_timeout_ms))
        .keep_alive(Duration::from_millis(limits.keep_alive_ms))
        .max_connections(MAX_CONNECTIONS)
        .on_connect(crate::service::connection::on_connect(
            Duration::from_millis(limits.write_stall_timeout_ms),
        ))
        .listen(self.listener)?
        .run();
        Ok(server)
    }
}
