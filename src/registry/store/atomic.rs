//! Crash-safe writes: a file either keeps its old bytes or holds the whole new ones, whatever
//! moment the process dies at.
//!
//! ```text
//! write   DIR/.NAME.<unique>.tmp      (a name every reader skips)
//! fsync   the temporary file          (its bytes are on disk)
//! rename  it onto DIR/NAME            (atomic on one file system)
//! fsync   DIR                         (the rename itself is on disk)
//! ```
//!
//! This module only moves bytes; it does not lock. Callers that must not race (promoters,
//! uploaders) hold the model's lock (`registry::store::lock`) around these calls, which is also what
//! makes [`sweep_temporaries`] safe: under the lock, any temporary file left behind belongs to
//! a writer that died.

use std::fs::{self, File, OpenOptions};
use std::io::Write;
use std::path::Path;

use super::StoreError;

/// Whether a directory entry is a temporary file of an unfinished write: it starts with `.` and
/// ends with `.tmp`. Every reader of the model directory skips these names.
pub fn is_temporary_name(file_name: &str) -> bool {
    file_name.starts_with('.') && file_name.ends_with(".tmp")
}

/// Replace (or create) `dir/file_name` with `bytes`, crash-safely.
pub fn replace_file(dir: &Path, file_name: &str, bytes: &[u8]) -> Result<(), StoreError> {
    // A fresh UUID per write, so concurrent writers (even ones that do not lock) never share a
    // temporary file.
    let temporary = dir.join(format!(
        ".{file_name}.{}.tmp",
        uuid::Uuid::new_v4().simple()
    ));
    let target = dir.join(file_name);
    let written = (|| {
        let mut file = OpenOptions::new()
            .write(true)
            .create_new(true)
            .open(&temporary)
            .map_err(|e| StoreError::io("create", &temporary, e))?;
        file.write_all(bytes)
            .map_err(|e| StoreError::io("write", &temporary, e))?;
        file.sync_all()
            .map_err(|e| StoreError::io("fsync", &temporary, e))?;
        drop(file);
        fs::rename(&temporary, &target).map_err(|e| StoreError::io("rename into", &target, e))
    })();
    if written.is_err() {
        // Best effort: a leftover is harmless (readers skip it) and swept under the next lock.
        let _ = fs::remove_file(&temporary);
    }
    written?;
    sync_directory(dir)
}

/// fsync a directory, so that entries created or renamed in it survive a crash.
pub fn sync_directory(dir: &Path) -> Result<(), StoreError> {
    File::open(dir)
        .and_then(|d| d.sync_all())
        .map_err(|e| StoreError::io("fsync directory", dir, e))
}

/// Create `dir` (and missing parents), fsyncing each parent whose entries changed.
pub fn create_directory(dir: &Path) -> Result<(), StoreError> {
    if dir.is_dir() {
        return Ok(());
    }
    if let Some(parent) = dir.parent().filter(|p| !p.as_os_str().is_empty()) {
        create_directory(parent)?;
    }
    match fs::create_dir(dir) {
        Ok(()) => {}
        // Another writer created it first: the same outcome.
        Err(e) if e.kind() == std::io::ErrorKind::AlreadyExists && dir.is_dir() => return Ok(()),
        Err(e) => return Err(StoreError::io("create directory", dir, e)),
    }
    match dir.parent().filter(|p| !p.as_os_str().is_empty()) {
        Some(parent) => sync_directory(parent),
        None => Ok(()),
    }
}

/// Remove the temporary files left in `dir` by writers that died. Only call this while holding
/// the lock that every writer into `dir` holds. Returns how many were removed.
pub fn sweep_temporaries(dir: &Path) -> Result<usize, StoreError> {
    let entries = match fs::read_dir(dir) {
        Ok(entries) => entries,
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => return Ok(0),
        Err(e) => return Err(StoreError::io("list", dir, e)),
    };
    let mut removed = 0;
    for entry in entries {
        let entry = entry.map_err(|e| StoreError::io("list", dir, e))?;
        let name = entry.file_name();
        // Files only: a folder with such a name is nobody's half-written file.
        let is_file = entry.file_type().is_ok_and(|t| t.is_file());
        if is_file && name.to_str().is_some_and(is_temporary_name) {
            let path = entry.path();
            fs::remove_file(&path).map_err(|e| StoreError::io("remove", &path, e))?;
            removed += 1;
        }
    }
    if removed > 0 {
        sync_directory(dir)?;
    }
    Ok(removed)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn temporary_names_are_dot_names_ending_in_tmp() {
        assert!(is_temporary_name(".live.0123.tmp"));
        assert!(!is_temporary_name("live"));
        assert!(!is_temporary_name(".lock"));
        assert!(!is_temporary_name("v1.tmp"));
    }

    #[test]
    fn a_replaced_file_holds_the_new_bytes_and_no_temporary_remains() {
        let dir = tempfile::tempdir().expect("temporary directory");
        replace_file(dir.path(), "live", b"v1\n").expect("first write");
        replace_file(dir.path(), "live", b"v2\n").expect("second write");
        assert_eq!(fs::read(dir.path().join("live")).expect("read"), b"v2\n");
        let names: Vec<_> = fs::read_dir(dir.path())
            .expect("list")
            .map(|e| e.expect("entry").file_name())
            .collect();
        assert_eq!(names, vec![std::ffi::OsString::from("live")]);
    }

    #[test]
    fn sweeping_removes_only_temporaries() {
        let dir = tempfile::tempdir().expect("temporary directory");
        fs::write(dir.path().join(".live.dead.tmp"), b"v").expect("write");
        fs::write(dir.path().join("live"), b"v1").expect("write");
        fs::write(dir.path().join(".lock"), b"").expect("write");
        fs::create_dir(dir.path().join("..data.tmp")).expect("mkdir");
        assert_eq!(sweep_temporaries(dir.path()).expect("sweep"), 1);
        assert!(dir.path().join("..data.tmp").is_dir());
        assert!(dir.path().join("live").exists());
        assert!(dir.path().join(".lock").exists());
    }
}
