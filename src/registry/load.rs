//! Loading a model directory into a [`Snapshot`], once, with one error per
//! model entry that could not be loaded.
//!
//! ```text
//! DIR/NAME/live                   the live version's label (surrounding white space ignored)
//! DIR/NAME/versions/VERSION.json  a model file; its name and version must match the path
//! ```
//!
//! Entries whose names start with `.` or end in `.tmp` are temporary files of a writer in
//! progress and are skipped, as are directories whose names are not model names (a volume's
//! `lost+found`, say); loose files in `DIR` (the model-file schema, a README) are ignored.
//! A model that fails to load is reported and left out of the snapshot; the others still
//! serve. This module does not watch the directory or promote versions; but before loading a
//! model it completes a move its history records and its pointer does not show yet (a
//! promoter killed between the two writes, see [`crate::registry::lifecycle`]), so that a
//! server never starts on a version its history says was replaced. A directory it cannot
//! write is loaded as it is, and the repair reported as failed.
//!
//! A version file is also checked against the SHA-256 its history recorded when it was stored
//! (see [`crate::registry::store`]): a file changed under its label is refused with
//! [`LoadError::ContentChanged`], naming the file and both digests.

use std::fs;
use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::time::Duration;

use super::lifecycle;
use super::store::{history, sha256_hex, ContentChanged, HistoryRecord, HISTORY_FILE};
use super::{Entry, Snapshot};
use crate::model::{is_model_name, is_version_label, Model, ModelError};

/// The name of the live pointer file inside a model's directory.
pub const LIVE_FILE: &str = "live";
/// The folder of version files inside a model's directory.
pub const VERSIONS_DIR: &str = "versions";

/// Why one model directory entry could not be loaded.
#[derive(Debug, thiserror::Error)]
pub enum LoadError {
    /// The live pointer file is absent or unreadable.
    #[error("cannot read the live pointer {path}: {source}")]
    LivePointer {
        /// `NAME/live` in the model directory.
        path: PathBuf,
        /// The I/O error.
        source: std::io::Error,
    },
    /// The live pointer does not hold a version label.
    #[error("the live pointer {path} holds {content:?}, which is not a version label")]
    BadLivePointer {
        /// `NAME/live` in the model directory.
        path: PathBuf,
        /// What it holds.
        content: String,
    },
    /// The version file the pointer names is absent or unreadable.
    #[error("cannot read the live version file {path}: {source}")]
    VersionFile {
        /// `NAME/versions/VERSION.json` in the model directory.
        path: PathBuf,
        /// The I/O error.
        source: std::io::Error,
    },
    /// The version file is not a valid model.
    #[error("{path} is not a valid model: {error}")]
    Invalid {
        /// `NAME/versions/VERSION.json` in the model directory.
        path: PathBuf,
        /// What is wrong inside it (boxed: it is large and rare).
        error: Box<ModelError>,
    },
    /// The version file's bytes are not those recorded when it was stored.
    #[error(transparent)]
    ContentChanged(#[from] ContentChanged),
    /// The history, which holds the digests the version file is checked against, is
    /// unreadable.
    #[error("cannot read the history {path} to check the live version file against it: {source}")]
    History {
        /// The history file.
        path: PathBuf,
        /// The I/O error.
        source: std::io::Error,
    },
    /// The file's own name or version differs from where it is stored.
    #[error("{path} declares model '{found_name}' version '{found_version}', but its place in the directory says '{expected_name}' version '{expected_version}'")]
    Misplaced {
        /// `NAME/versions/VERSION.json` in the model directory.
        path: PathBuf,
        /// The directory's model name.
        expected_name: String,
        /// The pointer's version label.
        expected_version: String,
        /// The name inside the file.
        found_name: String,
        /// The version inside the file.
        found_version: String,
    },
}

/// The model directory itself could not be listed.
#[derive(Debug, thiserror::Error)]
#[error("cannot read the model directory {path}: {source}")]
pub struct DirectoryError {
    /// The model directory as given (`--models`), whose entries could not be listed.
    pub path: PathBuf,
    /// The I/O error.
    pub source: std::io::Error,
}

/// What loading a directory produced.
#[derive(Debug, Default)]
pub struct LoadReport {
    /// The models that loaded, each at its live version.
    pub snapshot: Snapshot,
    /// The entries that did not, by model name, in name order.
    pub failures: Vec<(String, LoadError)>,
    /// Interrupted moves completed before loading (or that could not be), by model name.
    pub repairs: Vec<Repair>,
}

/// An interrupted move found at load: the pointer lagged the history's last record.
#[derive(Debug)]
pub struct Repair {
    /// The model's name: its folder under the model directory.
    pub name: String,
    /// The record whose move was completed, or why it could not be (the pointer's version then
    /// loads as it is).
    pub outcome: Result<HistoryRecord, String>,
}

/// How long the startup load waits for a model's lock before leaving its repair to the
/// promoter holding it.
const REPAIR_LOCK_WAIT: Duration = Duration::from_secs(2);

/// Complete an interrupted move of model `name`, if its files show one.
fn repair_interrupted_move(root: &Path, name: &str) -> Option<Repair> {
    let outcome = match lifecycle::reconcile(root, name, REPAIR_LOCK_WAIT) {
        Ok(Some(record)) => Ok(record),
        Ok(None) => return None,
        Err(error) => Err(error.to_string()),
    };
    Some(Repair {
        name: name.to_string(),
        outcome,
    })
}

/// Whether a directory entry's name marks a writer's temporary file.
pub fn is_temporary(name: &str) -> bool {
    name.starts_with('.') || name.ends_with(".tmp")
}

/// Load the live version of every model in `dir`.
pub fn load_directory(dir: &Path) -> Result<LoadReport, DirectoryError> {
    let listing = fs::read_dir(dir).map_err(|source| DirectoryError {
        path: dir.to_path_buf(),
        source,
    })?;
    let mut names: Vec<String> = Vec::new();
    for entry in listing {
        let entry = entry.map_err(|source| DirectoryError {
            path: dir.to_path_buf(),
            source,
        })?;
        let Ok(name) = entry.file_name().into_string() else {
            continue;
        };
        if is_temporary(&name) || !is_model_name(&name) || !entry.path().is_dir() {
            continue;
        }
        names.push(name);
    }
    names.sort();
    let mut report = LoadReport::default();
    for name in names {
        report.repairs.extend(repair_interrupted_move(dir, &name));
        match load_live(&dir.join(&name), &name) {
            Ok(model) => {
                report
                    .snapshot
                    .models
                    .insert(name, Arc::new(Entry::serving(Arc::new(model))));
            }
            Err(error) => report.failures.push((name, error)),
        }
    }
    Ok(report)
}

/// Load the version that `model_dir/live` names, checking that the file belongs there and
/// holds the bytes stored under its label.
pub fn load_live(model_dir: &Path, name: &str) -> Result<Model, LoadError> {
    load_live_with_digest(model_dir, name).map(|(model, _)| model)
}

/// [`load_live`], also returning the SHA-256 of the file's bytes (for a caller that remembers
/// what it served under each label).
pub fn load_live_with_digest(model_dir: &Path, name: &str) -> Result<(Model, String), LoadError> {
    let pointer = model_dir.join(LIVE_FILE);
    let content = fs::read_to_string(&pointer).map_err(|source| LoadError::LivePointer {
        path: pointer.clone(),
        source,
    })?;
    let version = content.trim();
    if !is_version_label(version) {
        return Err(LoadError::BadLivePointer {
            path: pointer,
            content: content.chars().take(80).collect(),
        });
    }
    let path = model_dir.join(VERSIONS_DIR).join(format!("{version}.json"));
    let bytes = fs::read(&path).map_err(|source| LoadError::VersionFile {
        path: path.clone(),
        source,
    })?;
    let found = sha256_hex(&bytes);
    let history_path = model_dir.join(HISTORY_FILE);
    let records = match fs::read(&history_path) {
        Ok(bytes) => history::parse(&bytes),
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => history::History::default(),
        Err(source) => {
            return Err(LoadError::History {
                path: history_path,
                source,
            })
        }
    };
    if let Some(recorded) = records.recorded_digest(version) {
        if recorded != found {
            return Err(ContentChanged {
                path,
                version: version.to_string(),
                recorded: recorded.to_string(),
                found,
            }
            .into());
        }
    }
    let model = Model::from_json(&bytes).map_err(|error| LoadError::Invalid {
        path: path.clone(),
        error: Box::new(error),
    })?;
    if model.name() != name || model.version() != version {
        return Err(LoadError::Misplaced {
            path,
            expected_name: name.to_string(),
            expected_version: version.to_string(),
            found_name: model.name().to_string(),
            found_version: model.version().to_string(),
        });
    }
    Ok((model, found))
}
