//! The committed JSON Schema of the model file stays true to the types, and every model file
//! committed under `model-files/` loads and validates (check cases included).
//!
//! `.ci/run` also validates every model file against the committed schema with
//! `check-jsonschema` (PyPI), an implementation independent of ours.

use std::path::{Path, PathBuf};

use ogive::model::{file::json_schema, Model};

const SCHEMA_PATH: &str = "model-files/model.schema.json";

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

#[test]
fn committed_schema_matches_the_types() {
    let generated = serde_json::to_string_pretty(&json_schema()).expect("schema serialises") + "\n";
    let path = root().join(SCHEMA_PATH);
    if std::env::var_os("OGIVE_UPDATE_SCHEMA").is_some() {
        std::fs::write(&path, &generated).expect("write schema");
    }
    let committed = std::fs::read_to_string(&path).unwrap_or_default();
    assert!(
        committed == generated,
        "{SCHEMA_PATH} is out of date with src/model/file.rs; regenerate it with \
         OGIVE_UPDATE_SCHEMA=1 cargo test --test model_files"
    );
}

fn version_files(dir: &Path, out: &mut Vec<PathBuf>) {
    let Ok(entries) = std::fs::read_dir(dir) else {
        return;
    };
    for entry in entries.flatten() {
        let path = entry.path();
        if path.is_dir() {
            version_files(&path, out);
        } else if path.extension().is_some_and(|e| e == "json")
            && path
                .parent()
                .and_then(Path::file_name)
                .is_some_and(|n| n == "versions")
        {
            out.push(path);
        }
    }
}

#[test]
fn every_committed_model_file_validates() {
    let mut files = Vec::new();
    version_files(&root().join("model-files"), &mut files);
    for demo in ["lease-arrears", "rebate-uptake"] {
        assert!(
            files
                .iter()
                .any(|f| f.starts_with(root().join("model-files").join(demo))),
            "the demo model {demo} is missing from model-files/"
        );
    }
    for path in &files {
        let bytes = std::fs::read(path).expect("read model file");
        if let Err(e) = Model::from_json(&bytes) {
            panic!("{} does not validate: {e}", path.display());
        }
    }
}
