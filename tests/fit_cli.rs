//! `ogive fit` as a process: flags and `OGIVE_…` variables, the printed summary, the file it
//! writes (which `ogive check` accepts), the exit status and message of a failure, and no
//! progress output when stderr is not a terminal.

use std::path::PathBuf;
use std::process::Command;

fn ogive() -> Command {
    Command::new(env!("CARGO_BIN_EXE_ogive"))
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
    let run = ogive()
        .arg("fit")
        .env("OGIVE_DATA", spector())
        .env("OGIVE_OUTCOME", "GRADE")
        .env("OGIVE_TERMS", "GPA, TUCE, PSI")
        .env("OGIVE_LINK", "probit")
        .env("OGIVE_NAME", "spector")
        .env("OGIVE_VERSION", "2")
        .env("OGIVE_OUT", &out)
        .env("SOURCE_DATE_EPOCH", "1700000000")
        .output()
        .expect("run ogive fit");
    assert!(
        run.status.success(),
        "{}",
        String::from_utf8_lossy(&run.stderr)
    );
    let file: serde_json::Value =
        serde_json::from_slice(&std::fs::read(&out).expect("read")).expect("JSON");
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
