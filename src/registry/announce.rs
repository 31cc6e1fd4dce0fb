//! Announced covariates: the first step of adding a covariate without a hard cut-over.
//!
//! A stored version whose model file lists covariates in `announces` (and that the live
//! version lacks) makes the live version accept those fields in requests and ignore them for
//! scoring, so callers can start sending them before the announcing version goes live; a
//! shadow of it is scored on the calls that send them, and the gate does not count them as a
//! breaking change at promotion. This module finds what the stored versions of a model
//! announce: each version file is read once (again only when its size or time changes) and
//! only its `announces` list is taken from it. A file that cannot be read or parsed announces
//! nothing; it is the gate's and the loader's business, not this one's.
//!
//! This module knows nothing of HTTP.

use std::collections::BTreeMap;
use std::path::Path;

use serde::Deserialize;

use super::store::{FileStamp, ModelDir};
use crate::model::Model;

/// One announced field: the covariate, and the stored version that announces it.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Announced {
    /// The covariate's name, the field callers may send.
    pub field: String,
    /// The stored version announcing it.
    pub version: String,
}

#[derive(Deserialize)]
struct Announcing {
    #[serde(default)]
    announces: Vec<String>,
}

/// What the stored versions of each model announce, remembered between looks.
#[derive(Debug, Default)]
pub struct Announcements {
    seen: BTreeMap<(String, String), (FileStamp, Vec<String>)>,
}

impl Announcements {
    /// Nothing looked at yet.
    pub fn new() -> Announcements {
        Announcements::default()
    }

    /// The fields that the stored versions of `live`'s model under `root` announce and `live`
    /// lacks, in version order then field order (blocking file I/O).
    pub fn look(&mut self, root: &Path, live: &Model) -> Vec<Announced> {
        let name = live.name();
        let Ok(dir) = ModelDir::new(root, name) else {
            return Vec::new();
        };
        let versions = dir.list_versions().unwrap_or_default();
        self.seen
            .retain(|(model, version), _| model != name || versions.contains(version));
        let mut out = Vec::new();
        for version in versions {
            if version == live.version() {
                continue;
            }
            for field in self.announces(&dir, &version) {
                if live.covariate_index(&field).is_none()
                    && !out.iter().any(|a: &Announced| a.field == field)
                {
                    out.push(Announced {
                        field,
                        version: version.clone(),
                    });
                }
            }
        }
        out
    }

    /// What version `version` announces, read again only when its file changed.
    fn announces(&mut self, dir: &ModelDir, version: &str) -> Vec<String> {
        let Ok(Some(stamp)) = dir.version_stamp(version) else {
            return Vec::new();
        };
        let key = (dir.name().to_string(), version.to_string());
        if let Some((seen, fields)) = self.seen.get(&key) {
            if *seen == stamp {
                return fields.clone();
            }
        }
        let fields = dir
            .read_version(version)
            .ok()
            .flatten()
            .and_then(|bytes| serde_json::from_slice::<Announcing>(&bytes).ok())
            .map(|a| a.announces)
            .unwrap_or_default();
        self.seen.insert(key, (stamp, fields.clone()));
        fields
    }
}
