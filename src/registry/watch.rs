//! Watching the model directory: notice a moved `live` or `shadow` pointer, a replaced version
//! file or a new model directory, and swap a freshly validated model into the [`Registry`].
//!
//! The watcher polls (every [`DEFAULT_INTERVAL`], never slower than [`MAX_INTERVAL`]) rather
//! than subscribing to file-system events. Event APIs such as inotify see only changes made
//! through the local kernel, so they miss a promotion written by another replica on a shared
//! network volume; and a Kubernetes ConfigMap update is a swap of a `..data` symlink, which a
//! watch on the files' own paths does not report as a change to them. Reading each model's
//! tiny `live` file and the size and time of the version it names costs a few system calls
//! per model per poll and sees all of these.
//!
//! A model is loaded with the startup loader's `load_live`, so a file is held to the same
//! rules at startup and on every swap: it validates, its check cases reproduce, and its name
//! and version match its place. A file that fails never replaces what is serving; the previous
//! version keeps serving and the failure is reported once, as a [`WatchEvent::Refused`], to
//! the caller's callback (the library never logs). The watcher does not apply the gate's
//! covariate check: the promotion that moved the pointer did, or was told not to.
//!
//! The shadow pointer (`NAME/shadow`, [`crate::registry::shadow`]) is followed the same way,
//! once the model serves: a pointer written anew (even naming the same version: a shadowing
//! set again starts a new count) is read through [`lifecycle::read_stored`], as a promotion
//! reads a version, and set as the entry's shadow ([`WatchEvent::Shadowed`]); a pointer
//! removed ends it ([`WatchEvent::ShadowEnded`]); a pointer whose version does not load is
//! reported once ([`WatchEvent::ShadowRefused`]) and the shadow ends, since the directory no
//! longer says to score the old one. A pointer naming the live version is not followed: a
//! version is not compared with itself.
//!
//! A version label names one content for good. The loader refuses a file whose SHA-256 differs
//! from the one its upload recorded; for a version with no such record (placed by hand, or by
//! a ConfigMap), the watcher remembers the digest of what it first served under each label and
//! refuses different bytes under that label later ([`LoadError::ContentChanged`]). A changed
//! deployment ships its new content under a new label.
//!
//! This module knows nothing of HTTP. The service runs [`Watcher::spawn`] after its startup
//! load (or calls [`Watcher::poll`] itself from a task of its own).

use std::collections::BTreeMap;
use std::fs;
use std::io;
use std::path::{Path, PathBuf};
use std::sync::mpsc::{self, RecvTimeoutError};
use std::sync::{Arc, Mutex};
use std::thread::JoinHandle;
use std::time::Duration;

use super::lifecycle::{self, LifecycleError};
use super::load::{load_live_with_digest, LoadError};
use super::store::{model_names, sha256_hex, ContentChanged, FileStamp, ModelDir, StoreError};
use super::Registry;

/// How often [`Watcher::spawn`] polls unless told otherwise.
pub const DEFAULT_INTERVAL: Duration = Duration::from_millis(500);
/// The longest interval [`Watcher::spawn`] accepts; longer ones are shortened to it, so that a
/// promotion reaches every replica within about a second.
pub const MAX_INTERVAL: Duration = Duration::from_secs(1);

/// Something the watcher did or refused to do.
#[derive(Debug)]
pub enum WatchEvent {
    /// A version began serving: a model seen for the first time, or a swap.
    Served {
        /// The model's name: its folder under the model directory.
        name: String,
        /// The version now serving.
        version: String,
        /// The version it replaced, if one was serving.
        previous: Option<String>,
    },
    /// A model's live version could not be loaded (a file that fails validation, a pointer
    /// naming a version that is not stored, a `live` file removed from a served model); `serving`,
    /// if any, keeps serving.
    Refused {
        /// The model's name: its folder under the model directory.
        name: String,
        /// The version still serving.
        serving: Option<String>,
        /// Why the live version could not be loaded.
        error: LoadError,
    },
    /// A model directory that was watched disappeared; its version keeps serving (removing a
    /// model from service takes a restart, so a half-synced volume never drops one).
    Vanished {
        /// The model's name: its folder under the model directory.
        name: String,
        /// The version still serving, if any.
        serving: Option<String>,
    },
    /// A shadow began to be followed: set, set again, or found at start.
    Shadowed {
        /// The model's name: its folder under the model directory.
        name: String,
        /// The live version it shadows.
        live: String,
        /// The shadow version.
        version: String,
        /// The shadow it replaced, if any.
        previous: Option<String>,
    },
    /// The shadow pointer was removed (or names the live version now): nothing shadows.
    ShadowEnded {
        /// The model's name: its folder under the model directory.
        name: String,
        /// The version that shadowed.
        version: String,
    },
    /// The shadow pointer names a version that cannot be loaded; nothing shadows.
    ShadowRefused {
        /// The model's name: its folder under the model directory.
        name: String,
        /// The version the pointer names.
        version: String,
        /// Why it cannot be loaded.
        error: Box<LifecycleError>,
    },
    /// The model directory itself could not be listed; everything keeps serving.
    DirectoryUnreadable {
        /// Why.
        error: StoreError,
    },
}

/// What a poll compares to decide whether a model needs loading: the pointer's raw bytes and
/// the stamp of the version file it names.
#[derive(Debug, Clone, PartialEq, Eq)]
struct Fingerprint {
    pointer: Option<Vec<u8>>,
    version_file: Option<FileStamp>,
}

#[derive(Debug, Default)]
struct Watched {
    /// The directory has versions but no `live` file, and nothing of it serves: a model on
    /// its way in, not one that is failing.
    awaiting_promotion: bool,
    /// The fingerprint of the last conclusive load (success, or a refusal that only a change
    /// of content can cure). `None` forces a load at the next poll.
    fingerprint: Option<Fingerprint>,
    /// The last refusal reported, so an unchanged failure is reported once.
    last_refusal: Option<String>,
    /// The SHA-256 of what this process served under each version label.
    served_digests: BTreeMap<String, String>,
    /// The shadow pointer as last followed; `None` forces a look at the next poll.
    shadow: Option<ShadowStamp>,
}

/// What a poll compares to decide whether the shadow pointer changed: its bytes, and the file's
/// identity and time, since a pointer written anew is a new file (`store::atomic` renames a
/// fresh one into place) even when it names the same version.
#[derive(Debug, Clone, PartialEq, Eq)]
struct ShadowStamp {
    pointer: Option<Vec<u8>>,
    inode: u64,
    modified: Option<std::time::SystemTime>,
}

/// Polls one model directory and keeps a [`Registry`] in step with it.
#[derive(Debug)]
pub struct Watcher {
    root: PathBuf,
    watched: BTreeMap<String, Watched>,
    directory_error: Option<String>,
    unserved: Vec<String>,
}

impl Watcher {
    /// A watcher of the model directory `root`. It has seen nothing yet: the first
    /// [`poll`](Watcher::poll) loads every model the registry does not already serve at the
    /// version its pointer names.
    pub fn new(root: impl Into<PathBuf>) -> Watcher {
        Watcher {
            root: root.into(),
            watched: BTreeMap::new(),
            directory_error: None,
            unserved: Vec::new(),
        }
    }

    /// The model directory watched.
    pub fn root(&self) -> &Path {
        &self.root
    }

    /// The models found by the last poll that have a `live` pointer but no version serving in
    /// the registry (for readiness: ready when this is empty). A model directory without a
    /// `live` file (a first version uploaded, not yet promoted) is not in service and not
    /// listed, so uploading a new model never makes a replica unready.
    pub fn unserved(&self) -> &[String] {
        &self.unserved
    }

    /// Why the live version of `name` was last refused, if its last load failed.
    pub fn refusal(&self, name: &str) -> Option<&str> {
        self.watched.get(name)?.last_refusal.as_deref()
    }

    /// Look at the directory once, swap changed models into `registry`, and say what happened.
    pub fn poll(&mut self, registry: &Registry) -> Vec<WatchEvent> {
        let mut events = Vec::new();
        let names = match model_names(&self.root) {
            Ok(names) => {
                self.directory_error = None;
                names
            }
            Err(error) => {
                let message = error.to_string();
                if self.directory_error.as_ref() != Some(&message) {
                    self.directory_error = Some(message);
                    events.push(WatchEvent::DirectoryUnreadable { error });
                }
                return events;
            }
        };
        let gone: Vec<String> = self
            .watched
            .keys()
            .filter(|n| names.binary_search(n).is_err())
            .cloned()
            .collect();
        for name in gone {
            self.watched.remove(&name);
            events.push(WatchEvent::Vanished {
                serving: serving_version(registry, &name),
                name,
            });
        }
        for name in &names {
            if let Some(event) = self.poll_model(registry, name) {
                events.push(event);
            }
            if let Some(event) = self.poll_shadow(registry, name) {
                events.push(event);
            }
        }
        let snapshot = registry.snapshot();
        self.unserved = names
            .into_iter()
            .filter(|n| !snapshot.models.contains_key(n))
            .filter(|n| !self.watched.get(n).is_some_and(|w| w.awaiting_promotion))
            .collect();
        events
    }

    fn poll_model(&mut self, registry: &Registry, name: &str) -> Option<WatchEvent> {
        let dir = ModelDir::new(&self.root, name).ok()?;
        // Taken before loading: if the pointer moves in between, the next poll sees a new
        // fingerprint and loads again; taken after, a move could be missed for good.
        let fingerprint = fingerprint(&dir);
        let watched = self.watched.entry(name.to_string()).or_default();
        if fingerprint.is_some() && watched.fingerprint == fingerprint {
            return None;
        }
        let serving = serving_version(registry, name);
        let no_pointer = fingerprint.as_ref().is_some_and(|f| f.pointer.is_none());
        watched.awaiting_promotion = no_pointer && serving.is_none();
        let pointed = fingerprint.as_ref().and_then(pointer_label);
        let last_pointed = watched.fingerprint.as_ref().and_then(pointer_label);
        // Nothing to load: versions are stored but none was ever promoted (not a failure);
        // or the pointer moved to the version already serving (loaded at startup, or swapped
        // in by the promoter itself), which was validated on its way in.
        let settled = watched.awaiting_promotion
            || (pointed.is_some() && pointed == serving && last_pointed != pointed);
        if settled {
            watched.fingerprint = fingerprint;
            watched.last_refusal = None;
            if let Some(version) = pointed.filter(|v| !watched.served_digests.contains_key(v)) {
                // Adopted, not loaded here: remember what the label holds now.
                if let Ok(Some(bytes)) = dir.read_version(&version) {
                    watched.served_digests.insert(version, sha256_hex(&bytes));
                }
            }
            return None;
        }
        let loaded = load_live_with_digest(dir.path(), name).and_then(|(model, digest)| {
            match watched.served_digests.get(model.version()) {
                Some(recorded) if *recorded != digest => Err(ContentChanged {
                    path: dir.version_path(model.version()).unwrap_or_default(),
                    version: model.version().to_string(),
                    recorded: recorded.clone(),
                    found: digest,
                }
                .into()),
                _ => Ok((model, digest)),
            }
        });
        match loaded {
            Ok((model, digest)) => {
                watched
                    .served_digests
                    .insert(model.version().to_string(), digest);
                let version = model.version().to_string();
                registry.set_live(Arc::new(model));
                watched.fingerprint = fingerprint;
                watched.last_refusal = None;
                Some(WatchEvent::Served {
                    name: name.to_string(),
                    version,
                    previous: serving,
                })
            }
            Err(error) => {
                if !is_transient(&error) {
                    watched.fingerprint = fingerprint;
                }
                let message = error.to_string();
                if watched.last_refusal.as_ref() == Some(&message) {
                    return None;
                }
                watched.last_refusal = Some(message);
                Some(WatchEvent::Refused {
                    name: name.to_string(),
                    serving,
                    error,
                })
            }
        }
    }

    /// Follow model `name`'s shadow pointer (see the module docs), once the model serves.
    fn poll_shadow(&mut self, registry: &Registry, name: &str) -> Option<WatchEvent> {
        let dir = ModelDir::new(&self.root, name).ok()?;
        let watched = self.watched.get_mut(name)?;
        let entry = registry.snapshot().models.get(name).cloned()?;
        let stamp = shadow_stamp(&dir)?;
        if watched.shadow.as_ref() == Some(&stamp) {
            return None;
        }
        watched.shadow = Some(stamp.clone());
        let current = entry.shadow.as_ref().map(|s| s.version().to_string());
        let label = stamp
            .pointer
            .as_deref()
            .and_then(|bytes| std::str::from_utf8(bytes).ok())
            .map(|text| text.trim().to_string());
        let end = |registry: &Registry| {
            registry.update_shadow(name, |_| None);
            current.clone().map(|version| WatchEvent::ShadowEnded {
                name: name.to_string(),
                version,
            })
        };
        let Some(label) = label.filter(|l| *l != entry.live.version()) else {
            return end(registry);
        };
        match lifecycle::read_stored(&self.root, name, &label) {
            Ok(candidate) => {
                let candidate = Arc::new(candidate);
                let before = registry.update_shadow(name, |_| Some(Arc::clone(&candidate)))?;
                Some(WatchEvent::Shadowed {
                    name: name.to_string(),
                    live: before.live.version().to_string(),
                    version: label,
                    previous: current,
                })
            }
            Err(error) => {
                if matches!(error, LifecycleError::Store(StoreError::Io { .. })) {
                    // Worth another look at the next poll.
                    watched.shadow = None;
                }
                registry.update_shadow(name, |_| None);
                Some(WatchEvent::ShadowRefused {
                    name: name.to_string(),
                    version: label,
                    error: Box::new(error),
                })
            }
        }
    }

    /// Poll every `interval` (at most [`MAX_INTERVAL`]) on a thread of its own, passing each
    /// event to `on_event`, until the returned handle is stopped or dropped. A std thread,
    /// not an async task, because every poll is blocking file I/O.
    pub fn spawn(
        mut self,
        registry: Arc<Registry>,
        interval: Duration,
        mut on_event: impl FnMut(WatchEvent) + Send + 'static,
    ) -> io::Result<WatchHandle> {
        let interval = interval.min(MAX_INTERVAL);
        let (stop, stopped) = mpsc::channel::<()>();
        let unserved = Arc::new(Mutex::new(Vec::new()));
        let shared = Arc::clone(&unserved);
        let thread = std::thread::Builder::new()
            .name("ogive-watch".into())
            .spawn(move || loop {
                for event in self.poll(&registry) {
                    on_event(event);
                }
                if let Ok(mut list) = shared.lock() {
                    list.clone_from(&self.unserved);
                }
                match stopped.recv_timeout(interval) {
                    Err(RecvTimeoutError::Timeout) => {}
                    Ok(()) | Err(RecvTimeoutError::Disconnected) => return,
                }
            })?;
        Ok(WatchHandle {
            stop: Some(stop),
            thread: Some(thread),
            unserved,
        })
    }
}

/// A running watcher thread; dropping it stops the thread (and waits for its current poll).
#[derive(Debug)]
pub struct WatchHandle {
    stop: Option<mpsc::Sender<()>>,
    thread: Option<JoinHandle<()>>,
    unserved: Arc<Mutex<Vec<String>>>,
}

impl WatchHandle {
    /// The models the last poll found with no version serving (see [`Watcher::unserved`]).
    pub fn unserved(&self) -> Vec<String> {
        self.unserved.lock().map(|l| l.clone()).unwrap_or_default()
    }

    /// Stop polling and wait for the thread to finish.
    pub fn stop(mut self) {
        self.shut_down();
    }

    fn shut_down(&mut self) {
        if let Some(stop) = self.stop.take() {
            let _ = stop.send(());
        }
        if let Some(thread) = self.thread.take() {
            let _ = thread.join();
        }
    }
}

impl Drop for WatchHandle {
    fn drop(&mut self) {
        self.shut_down();
    }
}

fn serving_version(registry: &Registry, name: &str) -> Option<String> {
    registry
        .snapshot()
        .models
        .get(name)
        .map(|entry| entry.live.version().to_string())
}

/// The pointer's bytes and the stamp of the version they name; `None` when either could not be
/// read for a reason other than absence (then the model is loaded, and the error reported, at
/// every poll until it clears).
fn fingerprint(dir: &ModelDir) -> Option<Fingerprint> {
    let pointer = match fs::read(dir.live_path()) {
        Ok(bytes) => Some(bytes),
        Err(e) if e.kind() == io::ErrorKind::NotFound => None,
        Err(_) => return None,
    };
    let mut fingerprint = Fingerprint {
        pointer,
        version_file: None,
    };
    if let Some(label) = pointer_label(&fingerprint) {
        fingerprint.version_file = dir.version_stamp(&label).ok()?;
    }
    Some(fingerprint)
}

/// The shadow pointer's stamp (no file: no bytes); `None` when it could not be read for a
/// reason other than absence (then it is looked at again at the next poll).
fn shadow_stamp(dir: &ModelDir) -> Option<ShadowStamp> {
    use std::os::unix::fs::MetadataExt;
    let path = dir.shadow_path();
    let metadata = match fs::metadata(&path) {
        Ok(metadata) => metadata,
        Err(e) if e.kind() == io::ErrorKind::NotFound => {
            return Some(ShadowStamp {
                pointer: None,
                inode: 0,
                modified: None,
            })
        }
        Err(_) => return None,
    };
    let pointer = match fs::read(&path) {
        Ok(bytes) => Some(bytes),
        Err(e) if e.kind() == io::ErrorKind::NotFound => None,
        Err(_) => return None,
    };
    Some(ShadowStamp {
        pointer,
        inode: metadata.ino(),
        modified: metadata.modified().ok(),
    })
}

fn pointer_label(fingerprint: &Fingerprint) -> Option<String> {
    let bytes = fingerprint.pointer.as_ref()?;
    let label = std::str::from_utf8(bytes).ok()?.trim();
    crate::model::is_version_label(label).then(|| label.to_string())
}

/// An I/O failure other than a missing file: worth retrying at every poll.
fn is_transient(error: &LoadError) -> bool {
    match error {
        LoadError::LivePointer { source, .. }
        | LoadError::VersionFile { source, .. }
        | LoadError::History { source, .. } => source.kind() != io::ErrorKind::NotFound,
        _ => false,
    }
}
