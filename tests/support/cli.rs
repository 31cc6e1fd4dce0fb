//! Models and a runner for the tests of the `ogive` commands (`score`, `describe`, `evaluate`).
//!
//! - [`model_json`] builds an ogive model file from the statsmodels fixture `spector.json`
//!   (written by `tests/reference/describe/make_spector_fixtures.py`). The coefficients and their
//!   covariance are statsmodels' own estimates, so a test that scores with the model checks
//!   ogive's effects against statsmodels' effects at the same estimate; the check cases are
//!   statsmodels' fitted probabilities for the first rows of the data.
//! - [`portfolio_json`] is an invented model that uses every kind of covariate and term (log,
//!   square, product, count, binary, a categorical with a space in a level, the joint check).
//!   Its numbers are inputs to identity tests only ("the command's output equals the engine's
//!   answer"), never check values.
//! - [`run`] runs the `ogive` binary.

use std::path::PathBuf;

use serde_json::{json, Value};

/// The folder holding the fixture files.
pub fn folder() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("tests/reference/describe")
}

/// The parsed `spector.json`.
pub fn fixture() -> Value {
    let text = std::fs::read_to_string(folder().join("spector.json")).expect("spector.json");
    serde_json::from_str(&text).expect("spector.json parses")
}

/// The path of `spector.csv` (columns gpa, tuce, psi, grade).
pub fn data_path() -> PathBuf {
    folder().join("spector.csv")
}

/// The rows of `spector.csv` as (gpa, tuce, psi).
pub fn data_rows() -> Vec<(f64, f64, f64)> {
    let text = std::fs::read_to_string(data_path()).expect("spector.csv");
    text.lines()
        .skip(1)
        .map(|line| {
            let cells: Vec<f64> = line
                .split(',')
                .map(|c| c.parse().expect("number"))
                .collect();
            (cells[0], cells[1], cells[2])
        })
        .collect()
}

/// An ogive model file (as JSON) for the fitted `link` ("logit" or "probit").
pub fn model_json(link: &str) -> Value {
    let f = fixture();
    let m = &f["models"][link];
    let training = &f["training"];
    let covariate = |name: &str, kind: &str, description: &str| {
        json!({
            "name": name,
            "kind": kind,
            "description": description,
            "training": {
                "min": training[name]["min"],
                "max": training[name]["max"],
                "mean": training[name]["mean"],
                "std_dev": training[name]["std_dev"],
            }
        })
    };
    let terms: Vec<Value> = f["terms"]
        .as_array()
        .expect("terms")
        .iter()
        .zip(m["params"].as_array().expect("params"))
        .map(|(t, b)| json!({"term": t, "coefficient": b}))
        .collect();
    let rows = data_rows();
    let check_cases: Vec<Value> = rows
        .iter()
        .zip(m["fitted_probabilities"].as_array().expect("fitted"))
        .take(5)
        .map(|(&(gpa, tuce, psi), p)| {
            json!({"observation": {"gpa": gpa, "tuce": tuce, "psi": psi}, "probability": p})
        })
        .collect();
    json!({
        "format": "ogive-model",
        "format_version": 1,
        "name": format!("spector-{link}"),
        "version": "1",
        "description": "Spector & Mazzeo (1980) grade data as shipped with statsmodels; coefficients fitted by statsmodels",
        "outcome": {"name": "grade", "meaning": "the student's grade improved"},
        "link": link,
        "covariates": [
            covariate("gpa", "continuous", "grade point average"),
            covariate("tuce", "continuous", "score on a test of economics"),
            covariate("psi", "binary", "taught by the personalised system of instruction"),
        ],
        "terms": terms,
        "covariance": m["cov_params"],
        "covariance_type": "classical",
        "check_cases": check_cases,
        "provenance": {
            "fitted_by": format!("statsmodels {}", f["source"]["statsmodels"].as_str().unwrap_or("?")),
            "fitted_at": "2025-01-01T00:00:00Z",
            "observations": f["observations"],
            "log_likelihood": m["log_likelihood"],
            "null_log_likelihood": m["null_log_likelihood"],
            "iterations": m["iterations"],
            "data": "statsmodels.datasets.spector",
        }
    })
}

/// An invented model exercising every covariate kind and term form (identity tests only).
pub fn portfolio_json(with_covariance: bool) -> Value {
    let terms = [
        ("intercept", 2.0),
        ("log(revenue)", -0.35),
        ("years", -0.09),
        ("years^2", 0.0021),
        ("arrears", 0.42),
        ("guarantor", -0.6),
        ("sector=light manufacturing", 0.25),
        ("sector=transport", 0.55),
        ("years*guarantor", 0.018),
    ];
    // Typical size of each term, so that every coefficient's standard error is a plausible
    // share of it.
    let scale = [1.0, 6.5, 9.0, 130.0, 1.0, 1.0, 1.0, 1.0, 4.0];
    let k = terms.len();
    // A positive-definite covariance: D·(A·Aᵀ + 0.01·I)·D with a fixed A and D = 1/scale.
    let a: Vec<Vec<f64>> = (0..k)
        .map(|r| {
            (0..k)
                .map(|c| (((r * 7 + c * 3) % 11) as f64 - 5.0) * 0.01)
                .collect()
        })
        .collect();
    let covariance: Vec<Vec<f64>> = (0..k)
        .map(|r| {
            (0..k)
                .map(|c| {
                    let dot: f64 = (0..k).map(|m| a[r][m] * a[c][m]).sum();
                    (dot + if r == c { 0.01 } else { 0.0 }) / (scale[r] * scale[c])
                })
                .collect()
        })
        .collect();
    let mut model = json!({
        "format": "ogive-model",
        "format_version": 1,
        "name": "portfolio-test",
        "version": "3.1",
        "description": "Invented model for identity tests of ogive score and describe",
        "outcome": {"name": "late", "meaning": "an invented outcome"},
        "link": "probit",
        "covariates": [
            {"name": "revenue", "kind": "continuous", "unit": "thousand EUR",
             "training": {"min": 20.0, "max": 5000.0, "mean": 800.0, "std_dev": 600.0}},
            {"name": "years", "kind": "continuous", "unit": "years",
             "training": {"min": 0.0, "max": 40.0, "mean": 9.0, "std_dev": 7.0}},
            {"name": "arrears", "kind": "count",
             "training": {"min": 0.0, "max": 6.0, "mean": 0.7, "std_dev": 1.1}},
            {"name": "guarantor", "kind": "binary",
             "training": {"min": 0.0, "max": 1.0, "mean": 0.4}},
            {"name": "sector", "kind": "categorical",
             "levels": ["retail", "light manufacturing", "transport"], "reference": "retail",
             "training": {"level_counts": {"retail": 500, "light manufacturing": 300, "transport": 200}}}
        ],
        "terms": terms.iter().map(|(t, b)| json!({"term": t, "coefficient": b})).collect::<Vec<_>>(),
        "joint": {
            "covariates": ["revenue", "years"],
            "mean": [800.0, 9.0],
            "covariance": [[360000.0, 840.0], [840.0, 49.0]],
            "max_distance": 3.0
        },
        "provenance": {"fitted_by": "hand-written for tests", "fitted_at": "2025-01-01T00:00:00Z",
                       "observations": 1000}
    });
    if with_covariance {
        model["covariance"] = json!(covariance);
        model["covariance_type"] = json!("classical");
    }
    model
}

/// Write `model` to `folder/name` and return the path.
pub fn write_model(folder: &std::path::Path, name: &str, model: &Value) -> PathBuf {
    let path = folder.join(name);
    std::fs::write(&path, serde_json::to_vec_pretty(model).expect("json")).expect("write model");
    path
}

/// The output of one run of the `ogive` binary.
pub struct Run {
    /// The exit status code.
    pub code: i32,
    /// Standard output.
    pub stdout: String,
    /// Standard error.
    pub stderr: String,
}

/// Run `ogive ARGS…` with `stdin` as standard input and the `OGIVE_*` variables in `env`.
pub fn run(args: &[&str], stdin: Option<&[u8]>, env: &[(&str, &str)]) -> Run {
    use std::io::Write;
    use std::process::{Command, Stdio};
    let mut command = Command::new(env!("CARGO_BIN_EXE_ogive"));
    command
        .args(args)
        .stdin(if stdin.is_some() {
            Stdio::piped()
        } else {
            Stdio::null()
        })
        .stdout(Stdio::piped())
        .stderr(Stdio::piped());
    for (key, _) in std::env::vars() {
        if key.starts_with("OGIVE_") {
            command.env_remove(key);
        }
    }
    for (key, value) in env {
        command.env(key, value);
    }
    let mut child = command.spawn().expect("start ogive");
    if let Some(bytes) = stdin {
        let mut pipe = child.stdin.take().expect("stdin");
        pipe.write_all(bytes).expect("write stdin");
    }
    let output = child.wait_with_output().expect("ogive finishes");
    Run {
        code: output.status.code().unwrap_or(-1),
        stdout: String::from_utf8(output.stdout).expect("utf-8 stdout"),
        stderr: String::from_utf8(output.stderr).expect("utf-8 stderr"),
    }
}
