//! The application: one way to start the service. [`Application::build`] loads the model
//! directory, makes the shared state (registry, metrics, monitoring, shadow scoring), starts the
//! directory follower and binds both listeners; [`Application::run_until_stopped`] serves until
//! a [`Shutdown`] is triggered (or, when configured, SIGTERM or SIGINT arrives), then drains
//! and stops both listeners and the follower.
//!
//! `ogive serve` maps its arguments to a [`Config`] and calls these; the tests start the very
//! same application on port 0.

use std::io;
use std::net::{SocketAddr, TcpListener};
use std::path::PathBuf;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;
use std::time::Duration;

use anyhow::Context;

use super::admin::{self, AdminState, AdminToken};
use super::follow::{FollowHandle, Follower};
use super::shutdown::{self, first_of};
use super::state::Failures;
use super::{public_server, AppState, Settings};
use crate::metrics::Metrics;
use crate::monitoring::monitor::{Monitor, MonitorSettings};
use crate::monitoring::shadow::{Shadowing, Share};
use crate::receipt::ReceiptKeys;
use crate::registry::load::load_directory;
use crate::registry::watch::DEFAULT_INTERVAL;
use crate::registry::Registry;

/// The admin listener: where it listens and the token that guards it.
#[derive(Debug)]
pub struct AdminConfig {
    /// The address; port 0 picks a free port.
    pub listen: SocketAddr,
    /// The bearer token.
    pub token: AdminToken,
}

/// Drift, outcome and calibration monitoring.
#[derive(Debug, Clone)]
pub struct Monitoring {
    /// Window sizes and receipt rules (`drift_shards` is set to the worker count).
    pub windows: MonitorSettings,
    /// The keys that seal and open answer receipts.
    pub keys: Arc<ReceiptKeys>,
}

/// Everything the application needs to start.
#[derive(Debug)]
pub struct Config {
    /// The model directory: NAME/live and NAME/versions/VERSION.json per model.
    pub models: PathBuf,
    /// The public listener: address, workers, limits, drain.
    pub settings: Settings,
    /// The admin listener; `None` starts none.
    pub admin: Option<AdminConfig>,
    /// Monitoring; `None` turns it off.
    pub monitoring: Option<Monitoring>,
    /// Share of a shadowed model's observations also scored by its shadow.
    pub shadow_share: Share,
    /// How often the model directory is looked at.
    pub follow_interval: Duration,
    /// Whether SIGTERM and SIGINT stop the application (the command does; an embedding
    /// process, or a test, stops it through [`Application::shutdown_handle`]).
    pub stop_on_signals: bool,
}

impl Config {
    /// Serve `models` with these listener settings: no admin listener, monitoring off, every
    /// shadowed observation scored, the default follow interval, stopped by its handle only.
    pub fn new(models: impl Into<PathBuf>, settings: Settings) -> Config {
        Config {
            models: models.into(),
            settings,
            admin: None,
            monitoring: None,
            shadow_share: Share::ALL,
            follow_interval: DEFAULT_INTERVAL,
            stop_on_signals: false,
        }
    }
}

/// Stops a running [`Application`] gracefully (as SIGTERM does); cloneable, and a trigger
/// before the application runs is kept.
#[derive(Debug, Clone, Default)]
pub struct Shutdown {
    inner: Arc<ShutdownInner>,
}

#[derive(Debug, Default)]
struct ShutdownInner {
    triggered: AtomicBool,
    notify: tokio::sync::Notify,
}

impl Shutdown {
    /// Begin the drain and stop; returns at once.
    pub fn trigger(&self) {
        self.inner.triggered.store(true, Ordering::SeqCst);
        self.inner.notify.notify_waiters();
    }

    /// Resolves once [`trigger`](Shutdown::trigger) has been called.
    async fn triggered(&self) {
        loop {
            let notified = self.inner.notify.notified();
            if self.inner.triggered.load(Ordering::SeqCst) {
                return;
            }
            notified.await;
        }
    }
}

/// The service, built and bound, not yet serving.
pub struct Application {
    state: AppState,
    public: TcpListener,
    public_addr: SocketAddr,
    admin: Option<admin::Listener>,
    admin_addr: Option<SocketAddr>,
    following: FollowHandle,
    shutdown: Shutdown,
    stop_on_signals: bool,
}

impl std::fmt::Debug for Application {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Application")
            .field("public_addr", &self.public_addr)
            .field("admin_addr", &self.admin_addr)
            .finish_non_exhaustive()
    }
}

impl Application {
    /// Load the model directory, make the shared state, start following the directory, and
    /// bind the public listener (and the admin listener when configured).
    pub fn build(config: Config) -> anyhow::Result<Application> {
        let Config {
            models,
            settings,
            admin,
            monitoring,
            shadow_share,
            follow_interval,
            stop_on_signals,
        } = config;
        let metrics = Metrics::new()?;
        let (registry, failed) = load_models(&models, &metrics)?;
        let state = AppState::new(registry, metrics, settings.clone(), failed.is_empty())
            .with_stored_versions(&models);
        state.health.set_failed(&failed);
        let state = match monitoring {
            Some(Monitoring { windows, keys }) => {
                let windows = MonitorSettings {
                    drift_shards: settings.worker_count(),
                    ..windows
                };
                let monitor = Monitor::new(windows, keys, &state.metrics.registry)?;
                state.with_monitor(monitor)
            }
            None => state,
        };
        let shadowing = Shadowing::new(shadow_share, &state.metrics.registry)?;
        let state = state.with_shadow(shadowing);
        let follower = Arc::new(Follower::new(models, &state));
        let following = follower
            .spawn(follow_interval)
            .context("starting the model directory watcher")?;
        let public =
            bind(settings.listen).with_context(|| format!("listening on {}", settings.listen))?;
        let public_addr = public.local_addr()?;
        let admin = match admin {
            Some(AdminConfig { listen, token }) => {
                Some(bind_admin(listen, token, &state, follower)?)
            }
            None => {
                tracing::warn!(
                    reason =
                        "no admin token is configured (--admin-token-file or OGIVE_ADMIN_TOKEN)",
                    "admin listener off"
                );
                None
            }
        };
        let admin_addr = admin
            .as_ref()
            .map(admin::Listener::local_addr)
            .transpose()?;
        Ok(Application {
            state,
            public,
            public_addr,
            admin,
            admin_addr,
            following,
            shutdown: Shutdown::default(),
            stop_on_signals,
        })
    }

    /// The address the public listener is bound to.
    pub fn public_addr(&self) -> SocketAddr {
        self.public_addr
    }

    /// The address the admin listener is bound to, if it has one.
    pub fn admin_addr(&self) -> Option<SocketAddr> {
        self.admin_addr
    }

    /// The state every handler shares.
    pub fn state(&self) -> &AppState {
        &self.state
    }

    /// A handle that stops the application gracefully from any thread.
    pub fn shutdown_handle(&self) -> Shutdown {
        self.shutdown.clone()
    }

    /// Serve on this thread (in an actix system of its own) until stopped, then drain the
    /// public listener (see `shutdown`), stop the admin listener and the follower.
    pub fn run_until_stopped(self) -> io::Result<()> {
        let Application {
            state,
            public,
            admin,
            following,
            shutdown: stop,
            stop_on_signals,
            ..
        } = self;
        let result = actix_web::rt::System::new().block_on(async move {
            let signal = async {
                if stop_on_signals {
                    let signals = async {
                        if let Err(e) = shutdown::termination_signal().await {
                            tracing::error!(error = %e, "cannot wait for signals; stopping");
                        }
                    };
                    first_of(stop.triggered(), signals).await;
                } else {
                    stop.triggered().await;
                }
            };
            let admin = admin.map(admin::Listener::server).transpose()?;
            let admin_handle = admin.as_ref().map(actix_web::dev::Server::handle);
            let admin_running = admin.map(actix_web::rt::spawn);
            let settings = Arc::clone(&state.settings);
            let health = Arc::clone(&state.health);
            let server = public_server(state, public)?;
            let result = shutdown::run_until(
                server,
                health,
                settings.drain_delay(),
                settings.shutdown_timeout(),
                signal,
            )
            .await;
            if let Some(handle) = admin_handle {
                handle.stop(true).await;
            }
            if let Some(running) = admin_running {
                let _ = tokio::time::timeout(Duration::from_millis(100), running).await;
            }
            result
        });
        following.stop();
        result
    }
}

/// Connections the kernel completes and queues for the public listener beyond those it holds
/// (`--max-connections`); actix-web's own default. Past the queue, new connections wait in the
/// client's SYN retries: the server spends no memory on them.
const BACKLOG: i32 = 1024;

fn bind(addr: SocketAddr) -> io::Result<TcpListener> {
    use socket2::{Domain, Socket, Type};
    let socket = Socket::new(Domain::for_address(addr), Type::STREAM, None)?;
    // As std's TcpListener::bind does on Unix: a restart can bind while old connections linger.
    socket.set_reuse_address(true)?;
    socket.bind(&addr.into())?;
    socket.listen(BACKLOG)?;
    socket.set_nonblocking(true)?;
    Ok(socket.into())
}

/// Load every model of `root` into a new registry, logging what loaded, what was repaired and
/// what failed (each failure also counted in `ogive_model_load_errors_total`); the models that
/// failed, each with what failed.
fn load_models(
    root: &std::path::Path,
    metrics: &Metrics,
) -> anyhow::Result<(Arc<Registry>, Failures)> {
    let report = load_directory(root)
        .with_context(|| format!("loading the model directory {}", root.display()))?;
    for repair in &report.repairs {
        match &repair.outcome {
            Ok(record) => {
                tracing::warn!(model = %repair.name, to = %record.to, "completed a move the history records but the live pointer did not show (an interrupted promotion or rollback)")
            }
            Err(error) => {
                tracing::error!(model = %repair.name, error = %error, "the live pointer lags the history and could not be moved")
            }
        }
    }
    for (name, error) in &report.failures {
        tracing::error!(model = %name, error = %error, "model not loaded");
        metrics.model_load_errors.with_label_values(&[name]).inc();
    }
    for entry in report.snapshot.models.values() {
        let m = &entry.live;
        tracing::info!(
            model = m.name(),
            version = m.version(),
            link = m.link.name(),
            "model loaded"
        );
    }
    if report.snapshot.models.is_empty() {
        tracing::warn!(dir = %root.display(), "no models loaded");
    }
    let failed = report
        .failures
        .iter()
        .map(|(name, error)| (name.clone(), error.to_string()))
        .collect();
    let registry = Arc::new(Registry::default());
    registry.replace(report.snapshot);
    Ok((registry, failed))
}

fn bind_admin(
    listen: SocketAddr,
    token: AdminToken,
    state: &AppState,
    follower: Arc<Follower>,
) -> anyhow::Result<admin::Listener> {
    if token.is_short() {
        tracing::warn!(
            label = token.label(),
            "the admin token is short; use at least 128 random bits"
        );
    }
    let label = token.label().to_string();
    let admin_state = AdminState::new(state.clone(), follower, token);
    let listener = admin::Listener::bind(listen, admin_state)
        .with_context(|| format!("listening on {listen} (admin)"))?;
    let addr = listener.local_addr()?;
    if !addr.ip().is_loopback() {
        tracing::warn!(admin_listen = %addr, "the admin listener is not on a loopback address; restrict who can reach it");
    }
    tracing::info!(admin_listen = %addr, label = %label, "admin listener on");
    Ok(listener)
}
