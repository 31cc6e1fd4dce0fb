//! Following the model directory: one [`Watcher`] per serving process, polled by a thread of
//! its own every interval and, right after each change the admin listener makes, by the admin
//! route itself, so the change serves before the route answers.
//!
//! The registry's live versions are changed here only, always from what the directory says
//! at the moment of the poll. Swapping in the model a lifecycle call returned would be faster
//! by one file read, but could leave the process serving a version that is no longer live: if
//! another writer (the CLI, another replica) moves the pointer back to the version the watcher
//! last saw before the watcher polls again, the watcher sees nothing new and never corrects
//! the swap. One watcher, whose every poll is serialized by a mutex, cannot fall behind the
//! registry that way.
//!
//! After each poll the follower logs what happened, counts refused files in
//! `ogive_model_load_errors_total`, sets readiness (ready when every model with a `live`
//! pointer has a version serving, [`Watcher::unserved`]), and clears a shadow whose version
//! has just gone live (it would only be compared with itself). A shadow the directory sets
//! (through any replica's admin listener or `ogive shadow`) starts this process's count of it
//! ([`Shadowing::begin`]); one it ends stops it. It then looks at what the
//! stored versions of each served model announce (`registry::announce`) and records the
//! fields the live version is to accept and ignore.
//!
//! This module does not decide what may be promoted ([`crate::registry::lifecycle`]) nor how
//! a file is validated ([`crate::registry::watch`] loads through the startup loader).

use std::io;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, Mutex, PoisonError};
use std::thread::JoinHandle;
use std::time::Duration;

use super::state::{AppState, Failures, Health};
use crate::metrics::Metrics;
use crate::monitoring::shadow::Shadowing;
use crate::registry::announce::Announcements;
use crate::registry::watch::{WatchEvent, Watcher, MAX_INTERVAL};
use crate::registry::Registry;

/// The serving process's view of the model directory.
#[derive(Debug)]
pub struct Follower {
    watcher: Mutex<Watcher>,
    announcements: Mutex<Announcements>,
    root: PathBuf,
    registry: Arc<Registry>,
    health: Arc<Health>,
    metrics: Metrics,
    shadow: Option<Arc<Shadowing>>,
}

impl Follower {
    /// A follower of the model directory `root` for the process serving `state`: it swaps
    /// into its registry, reports readiness to its health, counts refusals in its metrics and
    /// ends shadowings in its shadow scoring. It has polled nothing yet: the first poll adopts
    /// what the registry already serves.
    pub fn new(root: impl Into<PathBuf>, state: &AppState) -> Follower {
        let root = root.into();
        Follower {
            watcher: Mutex::new(Watcher::new(root.clone())),
            announcements: Mutex::new(Announcements::new()),
            root,
            registry: Arc::clone(&state.registry),
            health: Arc::clone(&state.health),
            metrics: state.metrics.clone(),
            shadow: state.shadow.clone(),
        }
    }

    /// The model directory followed.
    pub fn root(&self) -> &Path {
        &self.root
    }

    /// The registry it swaps into.
    pub fn registry(&self) -> &Arc<Registry> {
        &self.registry
    }

    /// Look at the directory now and bring the registry, readiness and shadows in line with it.
    /// Blocking file I/O: an async caller runs it on a blocking thread.
    pub fn poll(&self) {
        let mut watcher = self.watcher.lock().unwrap_or_else(PoisonError::into_inner);
        let events = watcher.poll(&self.registry);
        self.health.set_models_loaded(watcher.unserved().is_empty());
        let failures: Failures = watcher
            .unserved()
            .iter()
            .map(|name| {
                let reason = watcher
                    .refusal(name)
                    .unwrap_or("its live version has not loaded yet");
                (name.clone(), reason.to_string())
            })
            .collect();
        self.health.set_failed(&failures);
        drop(watcher);
        for event in events {
            self.handle(event);
        }
        self.look_at_announcements();
    }

    /// Record, for every served model, the fields its stored versions announce.
    fn look_at_announcements(&self) {
        let mut announcements = self
            .announcements
            .lock()
            .unwrap_or_else(PoisonError::into_inner);
        for (name, entry) in &self.registry.snapshot().models {
            let announced = announcements.look(&self.root, &entry.live);
            if announced != entry.announced {
                for a in announced.iter().filter(|a| !entry.announced.contains(a)) {
                    tracing::info!(model = %name, field = %a.field, version = %a.version, live = entry.live.version(), "announced covariate: the live version accepts and ignores it");
                }
                self.registry.set_announced(name, &announced);
            }
        }
    }

    fn handle(&self, event: WatchEvent) {
        match event {
            WatchEvent::Served {
                name,
                version,
                previous,
            } => {
                tracing::info!(model = %name, version = %version, previous = previous.as_deref(), "now serving");
                let before = self.registry.update_shadow(&name, |entry| {
                    entry.shadow.clone().filter(|s| s.version() != version)
                });
                let shadowed = before.and_then(|e| e.shadow.clone());
                if shadowed.is_some_and(|s| s.version() == version) {
                    if let Some(shadow) = &self.shadow {
                        shadow.end(&name);
                    }
                    tracing::info!(model = %name, version = %version, "shadow ended: the shadow version is now live");
                }
            }
            WatchEvent::Refused {
                name,
                serving,
                error,
            } => {
                self.metrics
                    .model_load_errors
                    .with_label_values(&[name.as_str()])
                    .inc();
                tracing::error!(model = %name, serving = serving.as_deref(), error = %error, "live version refused; the serving version stays");
            }
            WatchEvent::Shadowed {
                name,
                live,
                version,
                previous,
            } => {
                if let Some(shadow) = &self.shadow {
                    shadow.begin(&name, &live, &version);
                }
                tracing::info!(model = %name, live = %live, shadow = %version, replaced = previous.as_deref(), "shadow followed from the model directory");
            }
            WatchEvent::ShadowEnded { name, version } => {
                if let Some(shadow) = &self.shadow {
                    shadow.end(&name);
                }
                tracing::info!(model = %name, shadow = %version, "shadow ended in the model directory");
            }
            WatchEvent::ShadowRefused {
                name,
                version,
                error,
            } => {
                if let Some(shadow) = &self.shadow {
                    shadow.end(&name);
                }
                tracing::error!(model = %name, shadow = %version, error = %error, "shadow version refused; nothing shadows");
            }
            WatchEvent::Vanished { name, serving } => {
                tracing::warn!(model = %name, serving = serving.as_deref(), "model directory vanished; its version keeps serving until a restart");
            }
            WatchEvent::DirectoryUnreadable { error } => {
                tracing::error!(error = %error, "model directory unreadable; everything keeps serving");
            }
        }
    }

    /// Poll every `interval` (at most [`MAX_INTERVAL`]) on a thread of its own, starting now,
    /// until the returned handle is stopped or dropped.
    pub fn spawn(self: &Arc<Self>, interval: Duration) -> io::Result<FollowHandle> {
        let interval = interval.min(MAX_INTERVAL);
        let stopping = Arc::new(AtomicBool::new(false));
        let (follower, stop) = (Arc::clone(self), Arc::clone(&stopping));
        let thread = std::thread::Builder::new()
            .name("ogive-follow".into())
            .spawn(move || {
                while !stop.load(Ordering::SeqCst) {
                    follower.poll();
                    // Woken early by `FollowHandle::stop`; a spurious wake-up only polls sooner.
                    std::thread::park_timeout(interval);
                }
            })?;
        Ok(FollowHandle {
            stopping,
            thread: Some(thread),
        })
    }
}

/// The polling thread of a [`Follower`]; dropping it stops the thread (after its current poll).
#[derive(Debug)]
pub struct FollowHandle {
    stopping: Arc<AtomicBool>,
    thread: Option<JoinHandle<()>>,
}

impl FollowHandle {
    /// Stop polling and wait for the thread.
    pub fn stop(mut self) {
        self.halt();
    }

    fn halt(&mut self) {
        self.stopping.store(true, Ordering::SeqCst);
        if let Some(thread) = self.thread.take() {
            thread.thread().unpark();
            let _ = thread.join();
        }
    }
}

impl Drop for FollowHandle {
    fn drop(&mut self) {
        self.halt();
    }
}
