//! The exclusive lock on one model directory, and the writes that are only possible while it is
//! held.
//!
//! The lock is an OS file lock (`flock` on Unix, via [`File::try_lock`]) on `NAME/.lock`. The
//! kernel drops it when its holder exits, however it exits, so a promoter killed with SIGKILL
//! never leaves the model locked. Two threads of one process exclude each other too, because
//! each acquisition opens the file afresh.
//!
//! Every write into a model directory is a method of [`ModelLock`], so code that writes without
//! holding the lock does not compile. Readers never lock: every file they read is replaced by
//! an atomic rename or only appended to.

use std::fs::{File, OpenOptions, TryLockError};
use std::io::Write;
use std::time::{Duration, Instant};

use super::history::HistoryRecord;
use super::{atomic, ModelDir, StoreError};

/// Holding this value means holding the model directory's exclusive lock; dropping it releases
/// the lock.
#[derive(Debug)]
pub struct ModelLock {
    dir: ModelDir,
    file: File,
}

/// The longest pause between two attempts to take a busy lock.
const MAX_RETRY_PAUSE: Duration = Duration::from_millis(20);

impl ModelLock {
    /// Take the lock on `dir` (which must exist), waiting at most `wait` for another holder to
    /// release it; then sweep away temporary files left by writers that died.
    pub(super) fn acquire(dir: &ModelDir, wait: Duration) -> Result<ModelLock, StoreError> {
        let path = dir.lock_path();
        let file = OpenOptions::new()
            .read(true)
            .write(true)
            .create(true)
            .truncate(false)
            .open(&path)
            .map_err(|e| StoreError::io("open the lock file", &path, e))?;
        let started = Instant::now();
        let mut pause = Duration::from_millis(1);
        loop {
            match file.try_lock() {
                Ok(()) => break,
                Err(TryLockError::WouldBlock) => {
                    let waited = started.elapsed();
                    if waited >= wait {
                        return Err(StoreError::Busy {
                            path,
                            waited_ms: waited.as_millis() as u64,
                        });
                    }
                    std::thread::sleep(pause.min(wait - waited));
                    pause = (pause * 2).min(MAX_RETRY_PAUSE);
                }
                Err(TryLockError::Error(e)) => return Err(StoreError::io("lock", &path, e)),
            }
        }
        let lock = ModelLock {
            dir: dir.clone(),
            file,
        };
        atomic::sweep_temporaries(lock.dir.path())?;
        atomic::sweep_temporaries(&lock.dir.versions_path())?;
        Ok(lock)
    }

    /// The directory this lock guards.
    pub fn dir(&self) -> &ModelDir {
        &self.dir
    }

    /// Point `live` at `version`, atomically. The caller has checked that the version file
    /// exists and validates.
    pub fn write_live(&self, version: &str) -> Result<(), StoreError> {
        self.dir.version_path(version)?;
        atomic::replace_file(
            self.dir.path(),
            super::LIVE_FILE,
            format!("{version}\n").as_bytes(),
        )
    }

    /// Point `shadow` at `version`, atomically. The caller has checked that the version can
    /// shadow the live one.
    pub fn write_shadow(&self, version: &str) -> Result<(), StoreError> {
        self.dir.version_path(version)?;
        atomic::replace_file(
            self.dir.path(),
            super::SHADOW_FILE,
            format!("{version}\n").as_bytes(),
        )
    }

    /// Remove the `shadow` pointer (nothing shadows the live version any more), and fsync the
    /// directory so the removal survives a crash. No pointer is no change.
    pub fn remove_shadow(&self) -> Result<(), StoreError> {
        let path = self.dir.shadow_path();
        match std::fs::remove_file(&path) {
            Ok(()) => atomic::sync_directory(self.dir.path()),
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => Ok(()),
            Err(e) => Err(StoreError::io("remove", &path, e)),
        }
    }

    /// Store `bytes` as `versions/VERSION.json`. The caller has checked that no such version
    /// exists; holding the lock keeps it so until the rename.
    pub fn create_version(&self, version: &str, bytes: &[u8]) -> Result<(), StoreError> {
        let path = self.dir.version_path(version)?;
        let file_name = path
            .file_name()
            .and_then(|n| n.to_str())
            .ok_or_else(|| StoreError::BadVersionLabel(version.to_string()))?
            .to_string();
        atomic::create_directory(&self.dir.versions_path())?;
        atomic::replace_file(&self.dir.versions_path(), &file_name, bytes)
    }

    /// Append one record to `history.jsonl` and fsync it.
    ///
    /// If the file does not end in a newline (an earlier append was cut short), a newline goes
    /// first: the torn fragment then stays a line of its own, which readers skip with a
    /// warning, instead of corrupting this record too. Nothing already written is changed.
    pub fn append_history(&self, record: &HistoryRecord) -> Result<(), StoreError> {
        let path = self.dir.history_path();
        let existed = path.exists();
        let mut file = OpenOptions::new()
            .create(true)
            .append(true)
            .read(true)
            .open(&path)
            .map_err(|e| StoreError::io("open", &path, e))?;
        let mut line = Vec::with_capacity(256);
        if super::history::ends_without_newline(&mut file)
            .map_err(|e| StoreError::io("read the end of", &path, e))?
        {
            line.push(b'\n');
        }
        serde_json::to_writer(&mut line, record)
            .map_err(|e| StoreError::io("encode a record for", &path, e.into()))?;
        line.push(b'\n');
        // One write call for the whole record, so that concurrent readers see either none or
        // (almost always) all of it; a crash mid-write is what the torn-line rule is for.
        file.write_all(&line)
            .map_err(|e| StoreError::io("append to", &path, e))?;
        file.sync_data()
            .map_err(|e| StoreError::io("fsync", &path, e))?;
        if !existed {
            atomic::sync_directory(self.dir.path())?;
        }
        Ok(())
    }
}

impl Drop for ModelLock {
    fn drop(&mut self) {
        // Closing the file releases the lock anyway; unlocking first just makes it prompt.
        let _ = self.file.unlock();
    }
}
