//! The model the observation and request targets score against, loaded once per process.
//!
//! By default the seed model `seeds/model_file/lease-every-kind.json`, a logit with every
//! covariate kind, a log term, a square, a product, a covariance and a joint check (the seed
//! observations of the other targets are written for its covariates). Set `OGIVE_FUZZ_MODEL`
//! to the path of another model file, such as a demo model, to fuzz against that one instead.
//! A missing or invalid model is a setup mistake, so this panics with the path at fault before
//! the first input is run.

use std::path::{Path, PathBuf};
use std::sync::{Arc, OnceLock};

use ogive::model::Model;

static MODEL: OnceLock<Arc<Model>> = OnceLock::new();

fn default_path() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("seeds/model_file/lease-every-kind.json")
}

/// The model under test.
pub fn fuzz_model() -> &'static Arc<Model> {
    MODEL.get_or_init(|| {
        let path = std::env::var_os("OGIVE_FUZZ_MODEL")
            .map(PathBuf::from)
            .unwrap_or_else(default_path);
        let bytes = std::fs::read(&path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
        let model = Model::from_json(&bytes)
            .unwrap_or_else(|e| panic!("{} is not a valid model: {e}", path.display()));
        Arc::new(model)
    })
}
