//! The model directory on disk: where each file lives, how to read it, and
//! (through [`ModelLock`]) how to write it crash-safely.
//!
//! ```text
//! ROOT/NAME/versions/VERSION.json   one model file per version, never changed once written
//! ROOT/NAME/live                    the live version's label and a newline, replaced atomically
//! ROOT/NAME/shadow                  the shadow version's label and a newline, replaced
//!                                   atomically; absent when nothing shadows (`registry::shadow`)
//! ROOT/NAME/history.jsonl           append-only record of uploads, promotions, rollbacks and
//!                                   shadows set or ended
//! ROOT/NAME/.lock                   the promoters' lock (see `lock`)
//! ```
//!
//! "Never changed" is checked, not assumed: each upload record carries the SHA-256 of the bytes
//! stored, and [`ModelDir::read_version_verified`] refuses a file whose digest is no longer
//! that one ([`ContentChanged`], naming the file and both digests).
//!
//! Every reader skips entries whose names start with `.`: temporary files (`.…tmp`, see
//! `atomic`), the lock, and the `..data` links a Kubernetes ConfigMap volume adds. A
//! [`ModelDir`] can only be built for a valid model name and only builds paths for valid
//! version labels, so no route argument can reach outside the directory.
//!
//! This module reads and writes bytes. It does not validate model files (that is
//! [`crate::registry::gate`]) nor decide what may be promoted
//! ([`crate::registry::lifecycle`]).

pub mod atomic;
pub(crate) mod history;
pub(crate) mod lock;

use std::fs;
use std::io;
use std::path::{Path, PathBuf};
use std::time::{Duration, SystemTime};

use sha2::{Digest, Sha256};

pub use history::{Action, History, HistoryRecord, HistoryWarning};
pub use lock::ModelLock;

use crate::model::{is_model_name, is_version_label};

// One definition of the layout, shared with the startup loader.
pub use super::load::{LIVE_FILE, VERSIONS_DIR};
/// The shadow pointer inside a model directory.
pub const SHADOW_FILE: &str = "shadow";
/// The history inside a model directory.
pub const HISTORY_FILE: &str = "history.jsonl";
/// The lock file inside a model directory.
pub const LOCK_FILE: &str = ".lock";
/// The file-name ending of a version file.
pub const VERSION_SUFFIX: &str = ".json";

/// What went wrong reading or writing the model directory, with the path involved.
#[derive(Debug, thiserror::Error)]
pub enum StoreError {
    /// An operating-system error.
    #[error("cannot {action} {}: {cause}", path.display())]
    Io {
        /// What was being done (`read`, `rename into`, …).
        action: &'static str,
        /// The file or folder.
        path: PathBuf,
        /// The operating system's error.
        cause: io::Error,
    },
    /// A model name that could not be a directory of the store.
    #[error("'{0}' is not a valid model name (lower-case letters, digits and '-', starting with a letter, at most 64)")]
    BadModelName(String),
    /// A version label that could not be a file of the store.
    #[error("'{0}' is not a valid version label (letters, digits, '.', '_' and '-', starting with a letter or digit, at most 64)")]
    BadVersionLabel(String),
    /// A `live` or `shadow` file whose content is not a version label.
    #[error("{} does not hold a version label: {content:?}", path.display())]
    BadPointer {
        /// The `live` or `shadow` file.
        path: PathBuf,
        /// What it holds (at most 100 characters of it).
        content: String,
    },
    /// A stored version's file no longer holds the bytes recorded when it was stored.
    #[error(transparent)]
    ContentChanged(#[from] ContentChanged),
    /// Another holder kept the model's lock for longer than the caller would wait.
    #[error("{} is held by another promoter; gave up after {waited_ms} ms", path.display())]
    Busy {
        /// The lock file.
        path: PathBuf,
        /// How long this caller waited.
        waited_ms: u64,
    },
}

impl StoreError {
    pub(crate) fn io(action: &'static str, path: &Path, cause: io::Error) -> StoreError {
        StoreError::Io {
            action,
            path: path.to_path_buf(),
            cause,
        }
    }
}

/// A version file whose content differs from what was stored (or first served) under its label.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("{} no longer holds version '{version}' as it was stored: its SHA-256 was {recorded} and is {found} now; a stored version never changes, so put the stored file back, or store the new content under a new version label", path.display())]
pub struct ContentChanged {
    /// `NAME/versions/VERSION.json` in the model directory.
    pub path: PathBuf,
    /// The label the version was stored under, the file's name without `.json`.
    pub version: String,
    /// The digest recorded when the version was stored (or first served).
    pub recorded: String,
    /// The digest of the file's bytes now.
    pub found: String,
}

/// The SHA-256 of `bytes` as 64 lower-case hex digits, as history records store it.
pub fn sha256_hex(bytes: &[u8]) -> String {
    use std::fmt::Write as _;
    let digest = Sha256::digest(bytes);
    let mut hex = String::with_capacity(64);
    for byte in digest {
        let _ = write!(hex, "{byte:02x}");
    }
    hex
}

/// The size and modification time of a version file: what a watcher compares to notice that a
/// file under the same label was replaced (which it then refuses, see [`ContentChanged`]).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct FileStamp {
    /// The file's length in bytes, from its metadata.
    pub length: u64,
    /// Last modification, where the file system records it.
    pub modified: Option<SystemTime>,
}

/// One model's directory, `ROOT/NAME`.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ModelDir {
    name: String,
    path: PathBuf,
}

impl ModelDir {
    /// The directory of model `name` under `root`; refuses a name that is not a model name.
    /// The directory need not exist.
    pub fn new(root: &Path, name: &str) -> Result<ModelDir, StoreError> {
        if !is_model_name(name) {
            return Err(StoreError::BadModelName(name.to_string()));
        }
        Ok(ModelDir {
            name: name.to_string(),
            path: root.join(name),
        })
    }

    /// The model's name: the last part of [`ModelDir::path`].
    pub fn name(&self) -> &str {
        &self.name
    }

    /// `ROOT/NAME`.
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// Whether the directory exists.
    pub fn exists(&self) -> bool {
        self.path.is_dir()
    }

    /// `ROOT/NAME/versions`.
    pub fn versions_path(&self) -> PathBuf {
        self.path.join(VERSIONS_DIR)
    }

    /// `ROOT/NAME/live`.
    pub fn live_path(&self) -> PathBuf {
        self.path.join(LIVE_FILE)
    }

    /// `ROOT/NAME/shadow`.
    pub fn shadow_path(&self) -> PathBuf {
        self.path.join(SHADOW_FILE)
    }

    /// `ROOT/NAME/history.jsonl`.
    pub fn history_path(&self) -> PathBuf {
        self.path.join(HISTORY_FILE)
    }

    /// `ROOT/NAME/.lock`.
    pub fn lock_path(&self) -> PathBuf {
        self.path.join(LOCK_FILE)
    }

    /// `ROOT/NAME/versions/VERSION.json`; refuses a label that is not a version label.
    pub fn version_path(&self, version: &str) -> Result<PathBuf, StoreError> {
        if !is_version_label(version) {
            return Err(StoreError::BadVersionLabel(version.to_string()));
        }
        Ok(self
            .versions_path()
            .join(format!("{version}{VERSION_SUFFIX}")))
    }

    /// Create the directory and its `versions` folder if missing (fsyncing their parents).
    pub fn create(&self) -> Result<(), StoreError> {
        atomic::create_directory(&self.versions_path())
    }

    /// The live version's label, or `None` if there is no `live` file. Surrounding white space
    /// is ignored, so a pointer written by hand or by a ConfigMap (with or without a final
    /// newline) reads the same.
    pub fn read_live(&self) -> Result<Option<String>, StoreError> {
        read_pointer(self.live_path())
    }

    /// The shadow version's label, or `None` if there is no `shadow` file; read as
    /// [`read_live`](ModelDir::read_live) reads `live`.
    pub fn read_shadow(&self) -> Result<Option<String>, StoreError> {
        read_pointer(self.shadow_path())
    }

    /// The bytes of a version file, or `None` if the version is not stored.
    pub fn read_version(&self, version: &str) -> Result<Option<Vec<u8>>, StoreError> {
        let path = self.version_path(version)?;
        match fs::read(&path) {
            Ok(bytes) => Ok(Some(bytes)),
            Err(e) if e.kind() == io::ErrorKind::NotFound => Ok(None),
            Err(e) => Err(StoreError::io("read", &path, e)),
        }
    }

    /// The bytes of a version file, as [`read_version`](ModelDir::read_version), after checking
    /// them against the SHA-256 its history recorded when it was stored; a version with no
    /// recorded digest (placed by hand) is returned unchecked.
    pub fn read_version_verified(&self, version: &str) -> Result<Option<Vec<u8>>, StoreError> {
        let Some(bytes) = self.read_version(version)? else {
            return Ok(None);
        };
        self.verify_version(version, &bytes)?;
        Ok(Some(bytes))
    }

    /// Check `bytes`, read from version `version`'s file, against the digest its history
    /// recorded when it was stored.
    pub fn verify_version(&self, version: &str, bytes: &[u8]) -> Result<(), StoreError> {
        let history = self.read_history()?;
        let Some(recorded) = history.recorded_digest(version) else {
            return Ok(());
        };
        let found = sha256_hex(bytes);
        if found != recorded {
            return Err(ContentChanged {
                path: self.version_path(version)?,
                version: version.to_string(),
                recorded: recorded.to_string(),
                found,
            }
            .into());
        }
        Ok(())
    }

    /// The stamp of a version file, or `None` if the version is not stored. Follows symlinks.
    pub fn version_stamp(&self, version: &str) -> Result<Option<FileStamp>, StoreError> {
        let path = self.version_path(version)?;
        match fs::metadata(&path) {
            Ok(meta) => Ok(Some(FileStamp {
                length: meta.len(),
                modified: meta.modified().ok(),
            })),
            Err(e) if e.kind() == io::ErrorKind::NotFound => Ok(None),
            Err(e) => Err(StoreError::io("inspect", &path, e)),
        }
    }

    /// The labels of the stored versions, sorted; temporary and other non-version files are
    /// skipped.
    pub fn list_versions(&self) -> Result<Vec<String>, StoreError> {
        let dir = self.versions_path();
        let entries = match fs::read_dir(&dir) {
            Ok(entries) => entries,
            Err(e) if e.kind() == io::ErrorKind::NotFound => return Ok(Vec::new()),
            Err(e) => return Err(StoreError::io("list", &dir, e)),
        };
        let mut labels = Vec::new();
        for entry in entries {
            let entry = entry.map_err(|e| StoreError::io("list", &dir, e))?;
            let file_name = entry.file_name();
            let Some(label) = file_name
                .to_str()
                .and_then(|n| n.strip_suffix(VERSION_SUFFIX))
            else {
                continue;
            };
            if is_version_label(label) {
                labels.push(label.to_string());
            }
        }
        labels.sort();
        Ok(labels)
    }

    /// The history: its readable records and a warning per skipped line. A missing file is an
    /// empty history.
    pub fn read_history(&self) -> Result<History, StoreError> {
        let path = self.history_path();
        match fs::read(&path) {
            Ok(bytes) => Ok(history::parse(&bytes)),
            Err(e) if e.kind() == io::ErrorKind::NotFound => Ok(History::default()),
            Err(e) => Err(StoreError::io("read", &path, e)),
        }
    }

    /// Take the model's exclusive lock (the directory must exist), waiting at most `wait`.
    pub fn lock(&self, wait: Duration) -> Result<ModelLock, StoreError> {
        ModelLock::acquire(self, wait)
    }
}

/// The label a pointer file (`live`, `shadow`) holds, or `None` if there is no such file.
fn read_pointer(path: PathBuf) -> Result<Option<String>, StoreError> {
    let bytes = match fs::read(&path) {
        Ok(bytes) => bytes,
        Err(e) if e.kind() == io::ErrorKind::NotFound => return Ok(None),
        Err(e) => return Err(StoreError::io("read", &path, e)),
    };
    let text = String::from_utf8_lossy(&bytes);
    let label = text.trim();
    if !is_version_label(label) {
        return Err(StoreError::BadPointer {
            path,
            content: label.chars().take(100).collect(),
        });
    }
    Ok(Some(label.to_string()))
}

/// The names of the model directories under `root`, sorted: sub-directories (or links to them)
/// whose names are valid model names. Files such as `model.schema.json` and entries starting
/// with `.` are skipped.
pub fn model_names(root: &Path) -> Result<Vec<String>, StoreError> {
    let entries = fs::read_dir(root).map_err(|e| StoreError::io("list", root, e))?;
    let mut names = Vec::new();
    for entry in entries {
        let entry = entry.map_err(|e| StoreError::io("list", root, e))?;
        let Some(name) = entry.file_name().to_str().map(str::to_string) else {
            continue;
        };
        // `fs::metadata` follows links: a ConfigMap volume links each entry into `..data`.
        if is_model_name(&name) && fs::metadata(entry.path()).is_ok_and(|m| m.is_dir()) {
            names.push(name);
        }
    }
    names.sort();
    Ok(names)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_that_could_escape_the_directory_are_refused() {
        let root = Path::new("/models");
        assert!(matches!(
            ModelDir::new(root, "../etc"),
            Err(StoreError::BadModelName(_))
        ));
        let dir = ModelDir::new(root, "lease-arrears").expect("valid name");
        assert!(matches!(
            dir.version_path("../../live"),
            Err(StoreError::BadVersionLabel(_))
        ));
        assert!(matches!(
            dir.version_path(".hidden"),
            Err(StoreError::BadVersionLabel(_))
        ));
        assert_eq!(
            dir.version_path("2026.05").expect("valid label"),
            Path::new("/models/lease-arrears/versions/2026.05.json")
        );
    }

    #[test]
    fn the_pointer_is_read_without_surrounding_space_and_garbage_is_refused() {
        let root = tempfile::tempdir().expect("temporary directory");
        let dir = ModelDir::new(root.path(), "m").expect("valid name");
        dir.create().expect("create");
        assert_eq!(dir.read_live().expect("read"), None);
        fs::write(dir.live_path(), "  v2\n").expect("write");
        assert_eq!(dir.read_live().expect("read").as_deref(), Some("v2"));
        fs::write(dir.live_path(), "../v2").expect("write");
        assert!(matches!(
            dir.read_live(),
            Err(StoreError::BadPointer { .. })
        ));
    }

    #[test]
    fn digests_match_the_published_sha256_test_vectors() {
        // Reference: FIPS 180-2, appendix B.1 ("abc") and the empty-message value published
        // with it (also `printf '' | sha256sum`); exact.
        assert_eq!(
            sha256_hex(b"abc"),
            "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
        );
        assert_eq!(
            sha256_hex(b""),
            "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855"
        );
    }

    #[test]
    fn listings_skip_temporaries_links_and_files() {
        let root = tempfile::tempdir().expect("temporary directory");
        let dir = ModelDir::new(root.path(), "m").expect("valid name");
        dir.create().expect("create");
        for name in ["v1.json", "v2.json", ".v3.json.abc.tmp", "notes.txt"] {
            fs::write(dir.versions_path().join(name), "{}").expect("write");
        }
        fs::create_dir(root.path().join("..data")).expect("mkdir");
        fs::write(root.path().join("model.schema.json"), "{}").expect("write");
        assert_eq!(dir.list_versions().expect("list"), vec!["v1", "v2"]);
        assert_eq!(model_names(root.path()).expect("list"), vec!["m"]);
    }
}
