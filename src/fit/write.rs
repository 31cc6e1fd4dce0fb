//! Writing a model file crash-safely: the JSON goes to a temporary file beside the target, is
//! flushed to disk, and is renamed over the target; the folder is then flushed so the rename
//! itself survives a crash. A reader therefore sees the old file or the new one, never half.

use std::fs::{self, File};
use std::io::Write;
use std::path::Path;

use crate::model::ModelFile;

use super::error::FitError;

/// Write `file` as pretty-printed JSON to `path`, atomically.
pub fn write_model_file(path: &Path, file: &ModelFile) -> Result<(), FitError> {
    let failed = |source: std::io::Error| FitError::Write {
        path: path.to_path_buf(),
        source,
    };
    let mut json = serde_json::to_vec_pretty(file)
        .map_err(|e| failed(std::io::Error::other(e.to_string())))?;
    json.push(b'\n');
    let folder = match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => Path::new(".").to_path_buf(),
    };
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| "model.json".to_string());
    let temporary = folder.join(format!(".{name}.{}.tmp", std::process::id()));
    let result = (|| {
        let mut out = File::create(&temporary)?;
        out.write_all(&json)?;
        out.sync_all()?;
        drop(out);
        fs::rename(&temporary, path)?;
        // Flushing a folder is not possible everywhere; the rename has happened either way.
        if let Ok(dir) = File::open(&folder) {
            let _ = dir.sync_all();
        }
        Ok(())
    })();
    if result.is_err() {
        let _ = fs::remove_file(&temporary);
    }
    result.map_err(failed)
}
