//! Stored versions that are not live, for `POST /models/{name}/versions/{version}/probability`:
//! read from the model directory on first use (checked against the digest recorded when each
//! was stored, and validated as a promotion would: `registry::lifecycle::read_stored`), then
//! kept in a small cache. A version file never changes under its label, so a cached version
//! needs no second look; a file whose bytes changed is refused when it is first read.

use std::collections::VecDeque;
use std::path::{Path, PathBuf};
use std::sync::{Arc, Mutex};

use serde_json::json;

use super::admin::refusals::{gate_problem, lifecycle_problem, store_problem};
use super::problem::{Kind, Problem};
use crate::model::Model;
use crate::registry::lifecycle::{read_stored, LifecycleError};

/// Stored versions kept loaded at once; the one used longest ago is dropped first.
pub const CACHED_VERSIONS: usize = 8;

/// The model directory's stored versions, loaded on demand.
#[derive(Debug)]
pub struct StoredVersions {
    root: PathBuf,
    cache: Mutex<VecDeque<Arc<Model>>>,
}

impl StoredVersions {
    /// The stored versions of the model directory `root`.
    pub fn new(root: impl Into<PathBuf>) -> StoredVersions {
        StoredVersions {
            root: root.into(),
            cache: Mutex::new(VecDeque::with_capacity(CACHED_VERSIONS)),
        }
    }

    /// The model directory: one folder per model, as `ogive serve --models` reads it.
    pub fn root(&self) -> &Path {
        &self.root
    }

    /// Version `version` of model `name`, if it is loaded already.
    pub fn cached(&self, name: &str, version: &str) -> Option<Arc<Model>> {
        let mut cache = self.cache.lock().unwrap_or_else(|e| e.into_inner());
        let at = cache
            .iter()
            .position(|m| m.name() == name && m.version() == version)?;
        let model = cache.remove(at)?;
        cache.push_front(Arc::clone(&model));
        Some(model)
    }

    /// Version `version` of model `name`, read from the directory (blocking: run it off the I/O
    /// workers) and kept.
    pub fn load(&self, name: &str, version: &str) -> Result<Arc<Model>, Problem> {
        if let Some(model) = self.cached(name, version) {
            return Ok(model);
        }
        let model = Arc::new(
            read_stored(&self.root, name, version).map_err(|e| refusal(name, version, &e))?,
        );
        let mut cache = self.cache.lock().unwrap_or_else(|e| e.into_inner());
        if !cache
            .iter()
            .any(|m| m.name() == name && m.version() == version)
        {
            cache.truncate(CACHED_VERSIONS - 1);
            cache.push_front(Arc::clone(&model));
        }
        Ok(model)
    }
}

/// The answer to a version that cannot be served: the caller's fault (a bad label, a version
/// that is not stored) in the caller's words; a stored file that is not fit to serve as 503 or
/// 409, since another replica or a repaired file may answer.
fn refusal(name: &str, version: &str, error: &LifecycleError) -> Problem {
    use crate::registry::gate::GateError;
    match error {
        LifecycleError::Gate(
            gate @ (GateError::BadModelName(_) | GateError::BadVersionLabel(_)),
        ) => gate_problem(gate),
        LifecycleError::UnknownVersion { .. } => lifecycle_problem(error),
        LifecycleError::Store(store @ crate::registry::store::StoreError::ContentChanged(_)) => {
            store_problem(store)
        }
        LifecycleError::UnknownModel { .. } => Problem::new(
            Kind::UnknownVersion,
            format!("model '{name}' has no stored versions in this process's model directory"),
        )
        .extension("stored", json!([])),
        other => {
            tracing::error!(model = name, version, error = %other, "a stored version cannot be served");
            Problem::new(
                Kind::Unavailable,
                format!(
                    "version '{version}' of model '{name}' is stored but cannot be served: {other}"
                ),
            )
        }
    }
}
