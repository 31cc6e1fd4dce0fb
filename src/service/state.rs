//! What every handler shares: the registry of live models, the metrics, the settings and the
//! health flags. Cloning an [`AppState`] clones `Arc`s only.

use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;

use super::compute::Compute;
use super::config::Settings;
use super::stored::StoredVersions;
use crate::metrics::Metrics;
use crate::monitoring::monitor::Monitor;
use crate::monitoring::shadow::Shadowing;
use crate::registry::Registry;

/// Model directory entries that failed to load, each with what failed, in name order.
pub type Failures = Vec<(String, String)>;

/// Readiness inputs: whether every model directory entry has a valid live version, and whether
/// the process is draining for shutdown. Liveness needs no flag: answering is the proof.
#[derive(Debug)]
pub struct Health {
    models_loaded: AtomicBool,
    draining: AtomicBool,
    failed: std::sync::RwLock<Failures>,
}

impl Health {
    /// Health with the given load state, not draining.
    pub fn new(models_loaded: bool) -> Health {
        Health {
            models_loaded: AtomicBool::new(models_loaded),
            draining: AtomicBool::new(false),
            failed: std::sync::RwLock::new(Vec::new()),
        }
    }

    /// Record which model directory entries failed to load and why, in name order (the loader
    /// at start and the directory watcher after each look call this): a live pointer naming a
    /// version that is not stored, an unreadable or invalid version file.
    pub fn set_failed(&self, failures: &[(String, String)]) {
        let mut failed = self.failed.write().unwrap_or_else(|e| e.into_inner());
        if failed.as_slice() != failures {
            *failed = failures.to_vec();
        }
    }

    /// The model directory entries that failed to load, each with what failed, in name order.
    pub fn failures(&self) -> Failures {
        self.failed.read().map(|f| f.clone()).unwrap_or_default()
    }

    /// Whether the model directory entry `name` failed to load.
    pub fn has_failed(&self, name: &str) -> bool {
        self.failed
            .read()
            .is_ok_and(|f| f.iter().any(|(n, _)| n == name))
    }

    /// Record whether every model directory entry now has a valid live version (the loader and,
    /// later, the directory watcher call this).
    pub fn set_models_loaded(&self, loaded: bool) {
        self.models_loaded.store(loaded, Ordering::SeqCst);
    }

    /// Whether every model directory entry has a valid live version.
    pub fn models_loaded(&self) -> bool {
        self.models_loaded.load(Ordering::SeqCst)
    }

    /// Start draining: readiness turns false at once and stays false.
    pub fn start_draining(&self) {
        self.draining.store(true, Ordering::SeqCst);
    }

    /// Whether the process is draining.
    pub fn draining(&self) -> bool {
        self.draining.load(Ordering::SeqCst)
    }

    /// Ready: every model loaded and not draining.
    pub fn ready(&self) -> bool {
        self.models_loaded() && !self.draining()
    }
}

/// The state shared by every handler of the public listener.
#[derive(Debug, Clone)]
pub struct AppState {
    /// The live models.
    pub registry: Arc<Registry>,
    /// The metrics.
    pub metrics: Metrics,
    /// Readiness flags.
    pub health: Arc<Health>,
    /// Limits, timeouts and logging choices.
    pub settings: Arc<Settings>,
    /// Drift, answers and calibration; `None` when monitoring is off.
    pub monitor: Option<Monitor>,
    /// Scoring of shadow candidates beside the live versions; `None` when it is off.
    pub shadow: Option<Arc<Shadowing>>,
    /// The scoring pool and the in-flight counts.
    pub compute: Arc<Compute>,
    /// The model directory's stored versions, for scoring with one that is not live; `None`
    /// when no directory is served (then only the live and shadow versions can be asked for).
    pub stored: Option<Arc<StoredVersions>>,
}

impl AppState {
    /// State for a registry whose load went as `models_loaded` says.
    pub fn new(
        registry: Arc<Registry>,
        metrics: Metrics,
        settings: Settings,
        models_loaded: bool,
    ) -> AppState {
        metrics.prepare(&registry.snapshot());
        AppState {
            registry,
            metrics,
            health: Arc::new(Health::new(models_loaded)),
            compute: Arc::new(Compute::new(&settings.limits)),
            settings: Arc::new(settings),
            monitor: None,
            shadow: None,
            stored: None,
        }
    }

    /// The same state with monitoring on (its series registered in this state's metrics).
    pub fn with_monitor(self, monitor: Monitor) -> AppState {
        AppState {
            monitor: Some(monitor),
            ..self
        }
    }

    /// The same state able to score with any version stored in the model directory `root`.
    pub fn with_stored_versions(self, root: impl Into<std::path::PathBuf>) -> AppState {
        AppState {
            stored: Some(Arc::new(StoredVersions::new(root))),
            ..self
        }
    }

    /// The same state with shadow scoring on (its series registered in this state's metrics).
    pub fn with_shadow(self, shadow: Shadowing) -> AppState {
        AppState {
            shadow: Some(Arc::new(shadow)),
            ..self
        }
    }
}
