//! `ogive fit` as a process: flags and `OGIVE_…` variables, the printed summary, the file it
//! writes (which `ogive check` accepts), the exit status and message of a failure, and no
//! progress output when stderr is not a terminal.

mod support;

use std::path::PathBuf;
use std::process::Command;

use support::process::succeeded;

fn ogive() -> Command {
    Command::new(env!("CARGO_BIN_EXE_ogive"))
}

/// Run the fit `command`, assert that it succeeded, and return the model file it wrote at `out`.
#[track_caller]
fn fitted(command: &mut Command, out: &std::path::Path) -> serde_json::Value {
    succeeded(command);
    model_json(out)
}

/// The model file at `out`, parsed.
fn model_json(out: &std::path::Path) -> serde_json::Value {
    serde_json::from_slice(&std::fs::read(out).expect("read the model file")).expect("JSON")
}

fn spector() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("tests/reference/fit/spector.csv")
}

#[test]
fn fit_prints_the_summary_and_writes_a_file_that_check_accepts() {
    let dir = tempfile::tempdir().expect("temporary folder");
    let out = dir.path().join("spector.json");
    let run = ogive()
        .args(["fit", "--outcome", "GRADE", "--terms", "GPA, TUCE, PSI"])
        .args([
            "--name",
            "spector",
            "--version",
            "1",
            "--covariance",
            "robust",
        ])
        .arg("--data")
        .arg(spector())
        .arg("--out")
        .arg(&out)
        .output()
        .expect("run ogive fit");
    let stdout = String::from_utf8_lossy(&run.stdout);
    assert!(
        run.status.success(),
        "{stdout}\n{}",
        String::from_utf8_lossy(&run.stderr)
    );
    for expected in [
        "converged in ",
        "log-likelihood ",
        "null log-likelihood ",
        "McFadden pseudo-R² ",
        "AIC ",
        "BIC ",
        "robust covariance",
        "intercept ",
        "PSI ",
    ] {
        assert!(
            stdout.contains(expected),
            "missing {expected:?} in:\n{stdout}"
        );
    }
    // Silent progress: stderr is a pipe here, not a terminal.
    assert!(
        run.stderr.is_empty(),
        "{}",
        String::from_utf8_lossy(&run.stderr)
    );
    let check = ogive()
        .arg("check")
        .arg(&out)
        .output()
        .expect("run ogive check");
    assert!(
        check.status.success(),
        "{}",
        String::from_utf8_lossy(&check.stdout)
    );
    // No temporary file is left beside the model file.
    let names: Vec<_> = std::fs::read_dir(dir.path()).expect("list").collect();
    assert_eq!(names.len(), 1);
}

#[test]
fn flags_can_come_from_environment_variables() {
    let dir = tempfile::tempdir().expect("temporary folder");
    let out = dir.path().join("probit.json");
    let file = fitted(
        ogive()
            .arg("fit")
            .env("OGIVE_DATA", spector())
            .env("OGIVE_OUTCOME", "GRADE")
            .env("OGIVE_TERMS", "GPA, TUCE, PSI")
            .env("OGIVE_LINK", "probit")
            .env("OGIVE_NAME", "spector")
            .env("OGIVE_VERSION", "2")
            .env("OGIVE_OUT", &out)
            .env("SOURCE_DATE_EPOCH", "1700000000"),
        &out,
    );
    assert_eq!(file["link"], "probit");
    assert_eq!(file["version"], "2");
    assert_eq!(file["provenance"]["fitted_at"], "2023-11-14T22:13:20Z");
}

#[test]
fn a_failed_fit_exits_non_zero_with_the_reason_and_writes_nothing() {
    let dir = tempfile::tempdir().expect("temporary folder");
    let out = dir.path().join("never.json");
    let run = ogive()
        .args(["fit", "--outcome", "GRADE", "--terms", "GPA, log(PSI)"])
        .args(["--name", "spector", "--version", "1"])
        .arg("--data")
        .arg(spector())
        .arg("--out")
        .arg(&out)
        .output()
        .expect("run ogive fit");
    assert!(!run.status.success());
    let stderr = String::from_utf8_lossy(&run.stderr);
    assert!(
        stderr.contains("row 1: term 'log(PSI)' needs PSI > 0, got 0"),
        "{stderr}"
    );
    assert!(!out.exists());
}

fn fit_spector_to(out: &std::path::Path, extra: &[&str]) -> std::process::Output {
    ogive()
        .args(["fit", "--outcome", "GRADE", "--terms", "GPA, TUCE, PSI"])
        .args(["--name", "spector", "--version", "v1"])
        .arg("--data")
        .arg(spector())
        .arg("--out")
        .arg(out)
        .args(extra)
        .output()
        .expect("run ogive fit")
}

#[test]
fn fit_does_not_overwrite_a_file_without_force_nor_a_stored_version_ever() {
    let dir = tempfile::tempdir().expect("temporary folder");
    let out = dir.path().join("candidate.json");
    std::fs::write(&out, b"kept").expect("write");
    let run = fit_spector_to(&out, &[]);
    assert!(!run.status.success());
    let stderr = String::from_utf8_lossy(&run.stderr);
    assert!(
        stderr.contains("already exists") && stderr.contains("--force"),
        "{stderr}"
    );
    assert_eq!(std::fs::read(&out).expect("read"), b"kept");
    let run = fit_spector_to(&out, &["--force"]);
    assert!(
        run.status.success(),
        "{}",
        String::from_utf8_lossy(&run.stderr)
    );
    assert_ne!(std::fs::read(&out).expect("read"), b"kept");

    let stored = dir.path().join("spector/versions/v1.json");
    std::fs::create_dir_all(stored.parent().expect("parent")).expect("mkdir");
    std::fs::write(&stored, b"stored").expect("write");
    let run = fit_spector_to(&stored, &["--force"]);
    assert!(!run.status.success());
    let stderr = String::from_utf8_lossy(&run.stderr);
    assert!(stderr.contains("stored version never changes"), "{stderr}");
    assert_eq!(std::fs::read(&stored).expect("read"), b"stored");
}

fn demo(path: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join(path)
}

fn model_at(path: &std::path::Path) -> ogive::model::Model {
    ogive::model::Model::from_json(&std::fs::read(path).expect("read")).expect("valid model")
}

#[test]
fn a_refit_like_the_live_file_keeps_the_whole_contract() {
    let dir = tempfile::tempdir().expect("temporary folder");
    let live = demo("model-files/lease-arrears/versions/1.0.0.json");
    let out = dir.path().join("candidate.json");
    succeeded(
        ogive()
            .args(["fit", "--version", "1.1.0"])
            .arg("--like")
            .arg(&live)
            .arg("--data")
            .arg(demo("demo-data/lease-arrears.csv"))
            .arg("--out")
            .arg(&out),
    );
    let (live, candidate) = (model_at(&live), model_at(&out));
    let changes = ogive::registry::gate::contract_changes(&live, &candidate);
    assert!(changes.is_empty(), "{changes:?}");
    assert_eq!(candidate.file().description, live.file().description);
    assert_eq!(candidate.file().link, live.file().link);
    let terms = |m: &ogive::model::Model| {
        m.file()
            .terms
            .iter()
            .map(|t| t.term.clone())
            .collect::<Vec<_>>()
    };
    assert_eq!(terms(&candidate), terms(&live));

    // A flag beside --like overrides the file, and the gate shows exactly that change.
    let out = dir.path().join("lower-threshold.json");
    succeeded(
        ogive()
            .args(["fit", "--version", "1.1.1", "--threshold", "0.25"])
            .arg("--like")
            .arg(demo("model-files/lease-arrears/versions/1.0.0.json"))
            .arg("--data")
            .arg(demo("demo-data/lease-arrears.csv"))
            .arg("--out")
            .arg(&out),
    );
    let changes = ogive::registry::gate::contract_changes(&live, &model_at(&out));
    assert!(
        matches!(
            changes.as_slice(),
            [ogive::registry::gate::ContractChange::ThresholdChanged { .. }]
        ),
        "{changes:?}"
    );
}

#[test]
fn without_like_the_terms_outcome_and_name_are_required() {
    let dir = tempfile::tempdir().expect("temporary folder");
    let run = ogive()
        .args([
            "fit",
            "--outcome",
            "GRADE",
            "--name",
            "spector",
            "--version",
            "1",
        ])
        .arg("--data")
        .arg(spector())
        .arg("--out")
        .arg(dir.path().join("m.json"))
        .env_remove("OGIVE_TERMS")
        .output()
        .expect("run ogive fit");
    assert!(!run.status.success());
    let stderr = String::from_utf8_lossy(&run.stderr);
    assert!(
        stderr.contains("--terms is required") && stderr.contains("--like"),
        "{stderr}"
    );
}

#[test]
fn the_repeatable_fit_flags_come_from_environment_variables_too() {
    let dir = tempfile::tempdir().expect("temporary folder");
    let out = dir.path().join("regions.json");
    let data = PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("tests/reference/fit/simulated_categorical.csv");
    let mut fit = ogive();
    fit.args([
        "fit",
        "--terms",
        "income, tenure, region",
        "--outcome",
        "outcome",
    ])
    .args(["--name", "regions", "--version", "1"])
    .arg("--data")
    .arg(&data)
    .arg("--out")
    .arg(&out)
    .env("OGIVE_CATEGORICAL", "region=south")
    .env("OGIVE_CONTINUOUS", "income,tenure")
    .env("OGIVE_UNIT", "income=thousand EUR,tenure=years")
    .env("OGIVE_BAND", "low=0.2,high=1");
    let file = fitted(&mut fit, &out);
    let covariate = |name: &str| {
        file["covariates"]
            .as_array()
            .expect("covariates")
            .iter()
            .find(|c| c["name"] == name)
            .cloned()
            .expect("covariate")
    };
    assert_eq!(covariate("region")["reference"], "south");
    assert_eq!(covariate("income")["unit"], "thousand EUR");
    assert_eq!(covariate("tenure")["unit"], "years");
    assert_eq!(covariate("tenure")["kind"], "continuous");
    assert_eq!(
        file["decision"]["bands"],
        serde_json::json!([{"name": "low", "below": 0.2}, {"name": "high", "below": 1.0}])
    );
}

#[test]
fn a_fit_without_an_outcome_meaning_says_only_what_is_known() {
    let dir = tempfile::tempdir().expect("temporary folder");
    let out = dir.path().join("m.json");
    let run = fit_spector_to(&out, &[]);
    assert!(
        run.status.success(),
        "{}",
        String::from_utf8_lossy(&run.stderr)
    );
    let file = model_json(&out);
    let meaning = file["outcome"]["meaning"].as_str().expect("meaning");
    assert_eq!(
        meaning,
        "'GRADE' is 1 (what that means was not stated when the model was fitted)"
    );
    let stdout = String::from_utf8_lossy(&run.stdout);
    assert!(stdout.contains("note: no --outcome-meaning"), "{stdout}");
}

#[test]
fn a_near_collinear_design_fits_with_a_note_naming_its_terms_and_condition_number() {
    let reference = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("tests/reference/fit");
    let fixture: serde_json::Value = serde_json::from_slice(
        &std::fs::read(reference.join("near_collinear.json")).expect("read the fixture"),
    )
    .expect("JSON");
    let dir = tempfile::tempdir().expect("temporary folder");
    let fit = |terms: &str, out: &str| {
        ogive()
            .args(["fit", "--outcome", "y", "--terms", terms])
            .args(["--name", "near", "--version", "1"])
            .arg("--data")
            .arg(reference.join("near_collinear.csv"))
            .arg("--out")
            .arg(dir.path().join(out))
            .output()
            .expect("run ogive fit")
    };
    let run = fit("x, z, w", "with-z.json");
    let stdout = String::from_utf8_lossy(&run.stdout);
    assert!(
        run.status.success(),
        "{stdout}{}",
        String::from_utf8_lossy(&run.stderr)
    );
    let note = stdout
        .lines()
        .find(|l| l.contains("nearly collinear"))
        .unwrap_or_else(|| panic!("no collinearity note in:\n{stdout}"));
    let printed: f64 = note
        .split("length) is ")
        .nth(1)
        .and_then(|rest| rest.split(',').next())
        .and_then(|number| number.trim().parse().ok())
        .unwrap_or_else(|| panic!("no condition number in: {note}"));
    // Reference: numpy.linalg.cond of the unit-length-scaled design (the fixture script beside
    // the data); the note prints one decimal, so the tolerance is half of that.
    let expected = fixture["condition_with_z"].as_f64().expect("number");
    assert!(
        (printed - expected).abs() <= 0.05,
        "{printed} vs numpy {expected}"
    );
    assert!(note.contains("above 30"), "{note}");
    // Reference: numpy.linalg.svd of the same scaled design gives each term's share of its
    // coefficient's variance on the dimension of the largest condition index; x and z carry
    // nearly all of theirs there, the intercept and w almost none. Printed to two decimals.
    let terms = ["intercept", "x", "z", "w"];
    let proportions = fixture["proportions_with_z"].as_array().expect("array");
    let involved: Vec<&str> = fixture["involved_with_z"]
        .as_array()
        .expect("array")
        .iter()
        .filter_map(|t| t.as_str())
        .collect();
    assert_eq!(involved, ["x", "z"], "the fixture's dependency");
    for (term, proportion) in terms.iter().zip(proportions) {
        let proportion = proportion.as_f64().expect("number");
        let named = format!("'{term}' ({proportion:.2})");
        assert_eq!(
            note.contains(&named),
            involved.contains(term),
            "{term}: numpy's proportion {proportion} in {note}"
        );
    }
    // Without z the design is well conditioned (numpy: about 11) and nothing is said.
    assert!(fixture["condition_without_z"].as_f64().expect("number") < 30.0);
    let run = fit("x, w", "without-z.json");
    assert!(run.status.success());
    assert!(!String::from_utf8_lossy(&run.stdout).contains("collinear"));
}

#[test]
fn fit_and_describe_head_their_coefficient_tables_with_the_same_words() {
    let dir = tempfile::tempdir().expect("temporary folder");
    let out = dir.path().join("refit.json");
    let fit = succeeded(
        ogive()
            .args(["fit", "--version", "1.0.1"])
            .arg("--like")
            .arg(demo("model-files/lease-arrears/versions/1.0.0.json"))
            .arg("--data")
            .arg(demo("demo-data/lease-arrears.csv"))
            .arg("--out")
            .arg(&out),
    );
    let describe = succeeded(ogive().arg("describe").arg(&out));
    // The header is the line that starts with "term"; its columns are set apart by two or
    // more spaces.
    let header = |output: &[u8]| -> Vec<String> {
        let text = String::from_utf8_lossy(output).to_string();
        let line = text
            .lines()
            .find(|l| l.trim_start().starts_with("term "))
            .unwrap_or_else(|| panic!("no coefficient table in:\n{text}"))
            .to_string();
        line.split("  ")
            .map(str::trim)
            .filter(|c| !c.is_empty())
            .map(str::to_string)
            .collect()
    };
    let fitted = header(&fit.stdout);
    assert_eq!(fitted, header(&describe.stdout));
    assert_eq!(
        fitted,
        [
            "term",
            "coefficient",
            "std. error",
            "z",
            "p",
            "95% lower",
            "95% upper"
        ]
    );
}
