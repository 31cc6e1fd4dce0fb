//! An output file that appears under its name only once it is complete.
//!
//! A scoring run writes to a temporary file beside the target and renames it into place after
//! the last row is flushed and synced, so a consumer never mistakes the output of a run that
//! stopped on a bad row (or was killed) for a finished one. If the run fails, the temporary
//! file is removed when the [`PendingFile`] is dropped.

use std::fs::{self, File};
use std::io;
use std::path::{Path, PathBuf};

/// A file being written at a temporary path, renamed to its target on [`PendingFile::commit`].
#[derive(Debug)]
pub struct PendingFile {
    file: File,
    temporary: PathBuf,
    target: PathBuf,
    committed: bool,
}

impl PendingFile {
    /// Create the temporary file `.NAME.partial-PID` in the target's folder.
    pub fn create(target: &Path) -> io::Result<PendingFile> {
        let name = target
            .file_name()
            .ok_or_else(|| io::Error::new(io::ErrorKind::InvalidInput, "not a file path"))?;
        let mut temporary_name = std::ffi::OsString::from(".");
        temporary_name.push(name);
        temporary_name.push(format!(".partial-{}", std::process::id()));
        let temporary = target.with_file_name(temporary_name);
        let file = File::create(&temporary)?;
        Ok(PendingFile {
            file,
            temporary,
            target: target.to_path_buf(),
            committed: false,
        })
    }

    /// The open temporary file, to write to.
    pub fn file(&mut self) -> &mut File {
        &mut self.file
    }

    /// Sync the file, rename it to the target and sync the folder.
    pub fn commit(mut self) -> io::Result<()> {
        self.file.sync_all()?;
        fs::rename(&self.temporary, &self.target)?;
        self.committed = true;
        let folder = match self.target.parent() {
            Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
            _ => PathBuf::from("."),
        };
        // Syncing a folder is how the rename itself becomes durable; some file systems do not
        // allow opening a folder, and then there is nothing more to do.
        if let Ok(dir) = File::open(folder) {
            let _ = dir.sync_all();
        }
        Ok(())
    }
}

impl Drop for PendingFile {
    fn drop(&mut self) {
        if !self.committed {
            let _ = fs::remove_file(&self.temporary);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::io::Write;

    #[test]
    fn the_target_appears_only_on_commit_and_a_dropped_file_leaves_nothing() {
        let dir = tempfile::tempdir().unwrap();
        let target = dir.path().join("scored.csv");
        let mut pending = PendingFile::create(&target).unwrap();
        pending.file().write_all(b"a,b\n1,2\n").unwrap();
        assert!(!target.exists());
        pending.commit().unwrap();
        assert_eq!(std::fs::read_to_string(&target).unwrap(), "a,b\n1,2\n");

        let abandoned = dir.path().join("abandoned.csv");
        let mut pending = PendingFile::create(&abandoned).unwrap();
        pending.file().write_all(b"half").unwrap();
        drop(pending);
        let names: Vec<_> = std::fs::read_dir(dir.path())
            .unwrap()
            .map(|e| e.unwrap().file_name())
            .collect();
        assert_eq!(names, [std::ffi::OsString::from("scored.csv")]);
    }
}
