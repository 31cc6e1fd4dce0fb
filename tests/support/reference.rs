//! Reading the committed reference fixtures of `tests/reference/`, and building a validated
//! [`Model`] from plain parts (always through a [`ModelFile`] and [`Model::from_file`], so every
//! test model passes the same validation a served one does).
use std::path::PathBuf;

use ogive::link::Link;
use ogive::model::{CovariateKind, Model, ModelFile};
use serde_json::{json, Map, Value as Json};

/// The path of a file under `tests/reference/`.
pub fn reference_path(relative: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("tests")
        .join("reference")
        .join(relative)
}

/// A committed fixture, parsed. Panics with the path if it is missing or not JSON: a test
/// without its reference cannot run.
pub fn fixture(relative: &str) -> Json {
    let path = reference_path(relative);
    let text = std::fs::read_to_string(&path)
        .unwrap_or_else(|e| panic!("cannot read fixture {}: {e}", path.display()));
    serde_json::from_str(&text)
        .unwrap_or_else(|e| panic!("fixture {} is not JSON: {e}", path.display()))
}

/// One covariate of a test model, with the training summary the file needs.
#[derive(Debug, Clone)]
pub struct CovariatePart {
    /// Field name.
    pub name: String,
    /// Kind.
    pub kind: CovariateKind,
    /// Levels (categorical only); the first is the reference unless `reference` says otherwise.
    pub levels: Vec<String>,
    /// Reference level (categorical only).
    pub reference: Option<String>,
    /// Training minimum, maximum and mean (numeric kinds).
    pub min: f64,
    /// Training maximum.
    pub max: f64,
    /// Training mean.
    pub mean: f64,
    /// Training count per level (categorical only), in `levels` order.
    pub level_counts: Vec<u64>,
}

impl CovariatePart {
    /// A numeric covariate with its training range and mean.
    pub fn numeric(name: &str, kind: CovariateKind, min: f64, max: f64, mean: f64) -> Self {
        CovariatePart {
            name: name.to_string(),
            kind,
            levels: Vec::new(),
            reference: None,
            min,
            max,
            mean,
            level_counts: Vec::new(),
        }
    }

    /// A categorical covariate with its levels, reference and training counts.
    pub fn categorical(name: &str, levels: &[&str], reference: &str, counts: &[u64]) -> Self {
        CovariatePart {
            name: name.to_string(),
            kind: CovariateKind::Categorical,
            levels: levels.iter().map(|l| l.to_string()).collect(),
            reference: Some(reference.to_string()),
            min: f64::NAN,
            max: f64::NAN,
            mean: f64::NAN,
            level_counts: counts.to_vec(),
        }
    }

    fn to_json(&self) -> Json {
        let mut c = Map::new();
        c.insert("name".into(), json!(self.name));
        c.insert("kind".into(), json!(self.kind));
        if self.kind == CovariateKind::Categorical {
            c.insert("levels".into(), json!(self.levels));
            c.insert("reference".into(), json!(self.reference));
            let counts: Map<String, Json> = self
                .levels
                .iter()
                .zip(&self.level_counts)
                .map(|(l, n)| (l.clone(), json!(n)))
                .collect();
            c.insert("training".into(), json!({ "level_counts": counts }));
        } else {
            c.insert(
                "training".into(),
                json!({ "min": self.min, "max": self.max, "mean": self.mean }),
            );
        }
        Json::Object(c)
    }
}

/// Everything a test model is made of.
#[derive(Debug, Clone)]
pub struct ModelParts {
    /// Model name (lower-case letters, digits, `-`).
    pub name: String,
    /// The link.
    pub link: Link,
    /// Covariates.
    pub covariates: Vec<CovariatePart>,
    /// Terms in the model-file syntax, with their coefficients.
    pub terms: Vec<(String, f64)>,
    /// Coefficient covariance, if any.
    pub covariance: Option<Vec<Vec<f64>>>,
    /// Check cases: observation and stored probability.
    pub check_cases: Vec<(Map<String, Json>, f64)>,
    /// Where the numbers came from, for the provenance notes.
    pub provenance: String,
}

impl ModelParts {
    /// The model file, as JSON text would give it.
    pub fn file(&self) -> ModelFile {
        let covariance = self.covariance.as_ref().map(|v| json!(v));
        let mut file = json!({
            "format": ogive::model::FORMAT_NAME,
            "format_version": ogive::model::FORMAT_VERSION,
            "name": self.name,
            "version": "reference",
            "description": "a test model built from reference values",
            "outcome": { "name": "outcome", "meaning": "the outcome of the reference data" },
            "link": self.link,
            "covariates": self.covariates.iter().map(CovariatePart::to_json).collect::<Vec<_>>(),
            "terms": self
                .terms
                .iter()
                .map(|(t, b)| json!({ "term": t, "coefficient": b }))
                .collect::<Vec<_>>(),
            "check_cases": self
                .check_cases
                .iter()
                .map(|(o, p)| json!({ "observation": o, "probability": p }))
                .collect::<Vec<_>>(),
            "provenance": {
                "fitted_by": "tests/support/reference.rs",
                "fitted_at": "1970-01-01T00:00:00Z",
                "observations": 0,
                "notes": self.provenance,
            },
        });
        if let (Some(v), Some(map)) = (covariance, file.as_object_mut()) {
            map.insert("covariance".into(), v);
        }
        serde_json::from_value(file).unwrap_or_else(|e| panic!("test model file: {e}"))
    }

    /// The validated model. Panics with the validation error: a test model must be valid.
    pub fn model(&self) -> Model {
        Model::from_file(self.file())
            .unwrap_or_else(|e| panic!("test model '{}' refused: {e}", self.name))
    }
}

/// A model from an engine fixture (`tests/reference/engine/*.json`): its link, terms,
/// coefficients and covariance as statsmodels fitted them, training summaries computed from the
/// fixture's rows, and the first `check_cases` rows stored as check cases with statsmodels'
/// predicted probabilities.
pub fn fixture_model(fixture: &Json, model: &Json, check_cases: usize) -> Model {
    let rows = rows(fixture);
    let covariates = model["covariates"]
        .as_array()
        .expect("covariates")
        .iter()
        .map(|c| {
            let name = c["name"].as_str().expect("covariate name");
            let kind: CovariateKind =
                serde_json::from_value(c["kind"].clone()).expect("covariate kind");
            if kind == CovariateKind::Categorical {
                let levels: Vec<&str> = c["levels"]
                    .as_array()
                    .expect("levels")
                    .iter()
                    .map(|l| l.as_str().expect("level"))
                    .collect();
                let counts: Vec<u64> = levels
                    .iter()
                    .map(|l| rows.iter().filter(|r| r[name].as_str() == Some(l)).count() as u64)
                    .collect();
                let reference = c["reference"].as_str().expect("reference");
                CovariatePart::categorical(name, &levels, reference, &counts)
            } else {
                let values: Vec<f64> = rows
                    .iter()
                    .map(|r| r[name].as_f64().expect("numeric value"))
                    .collect();
                let min = values.iter().copied().fold(f64::INFINITY, f64::min);
                let max = values.iter().copied().fold(f64::NEG_INFINITY, f64::max);
                let mean = values.iter().sum::<f64>() / values.len() as f64;
                CovariatePart::numeric(name, kind, min, max, mean)
            }
        })
        .collect();
    let terms = model["terms"]
        .as_array()
        .expect("terms")
        .iter()
        .zip(numbers(&model["coefficients"]))
        .map(|(t, b)| (t.as_str().expect("term").to_string(), b))
        .collect();
    let covariance = model["covariance"]
        .as_array()
        .expect("covariance")
        .iter()
        .map(numbers)
        .collect();
    let probabilities = numbers(&model["probabilities"]["values"]);
    let check_cases = rows
        .iter()
        .zip(probabilities)
        .take(check_cases)
        .map(|(r, p)| (r.clone(), p))
        .collect();
    let link: Link = serde_json::from_value(model["link"].clone()).expect("link");
    ModelParts {
        name: model["name"].as_str().expect("model name").to_string(),
        link,
        covariates,
        terms,
        covariance: Some(covariance),
        check_cases,
        provenance: format!("{}", model["fit"]),
    }
    .model()
}

/// The observations of an engine fixture, as JSON objects a caller would send.
pub fn rows(fixture: &Json) -> Vec<Map<String, Json>> {
    fixture["rows"]
        .as_array()
        .expect("rows")
        .iter()
        .map(|r| r.as_object().expect("row object").clone())
        .collect()
}

/// A JSON array of numbers.
pub fn numbers(value: &Json) -> Vec<f64> {
    value
        .as_array()
        .unwrap_or_else(|| panic!("expected an array of numbers, got {value}"))
        .iter()
        .map(|x| x.as_f64().unwrap_or_else(|| panic!("not a number: {x}")))
        .collect()
}

/// A JSON array of strings.
pub fn strings(value: &Json) -> Vec<String> {
    value
        .as_array()
        .unwrap_or_else(|| panic!("expected an array of strings, got {value}"))
        .iter()
        .map(|x| {
            x.as_str()
                .unwrap_or_else(|| panic!("not text: {x}"))
                .to_string()
        })
        .collect()
}
