//! An evaluation report as the evidence of a promotion, run as processes: `ogive evaluate
//! --format json` on a candidate, then `ogive promote --evidence`, which stores the report in
//! `NAME/evidence/`, names its SHA-256 and headline figures in the history, and refuses a
//! report computed for another model, version or file (naming both), changing nothing; and the
//! same through the admin listener's promotion body (`"evidence"`).

mod support;

use std::path::{Path, PathBuf};

use serde_json::Value as Json;
use sha2::{Digest, Sha256};
use support::cli::{data_path, model_json, run, write_model};

const NAME: &str = "spector-logit";

fn sha256_hex(bytes: &[u8]) -> String {
    Sha256::digest(bytes)
        .iter()
        .map(|b| format!("{b:02x}"))
        .collect()
}

/// A model directory holding spector-logit 1 (the logit fit, live) and 2 (the probit fit
/// under the same name, standing in for a candidate).
fn model_directory(root: &Path) -> PathBuf {
    let models = root.join("models");
    let versions = models.join(NAME).join("versions");
    std::fs::create_dir_all(&versions).unwrap();
    write_model(&versions, "1.json", &model_json("logit"));
    let mut candidate = model_json("probit");
    candidate["name"] = NAME.into();
    candidate["version"] = "2".into();
    write_model(&versions, "2.json", &candidate);
    std::fs::write(models.join(NAME).join("live"), "1\n").unwrap();
    models
}

/// `ogive evaluate` of `version` against the live version, written to `out`.
fn evaluate(models: &Path, version: &str, against_live: bool, out: &Path) -> Json {
    let data = data_path();
    let mut args = vec![
        "evaluate",
        "--format",
        "json",
        "--data",
        data.to_str().unwrap(),
        "--outcome",
        "grade",
        "--models",
        models.to_str().unwrap(),
        "--name",
        NAME,
        "--version",
        version,
    ];
    if against_live {
        args.push("--against-live");
    }
    let result = run(&args, None, &[]);
    assert_eq!(result.code, 0, "{}", result.stderr);
    std::fs::write(out, &result.stdout).unwrap();
    serde_json::from_str(&result.stdout).expect("JSON")
}

fn promote(models: &Path, version: &str, evidence: &Path) -> support::cli::Run {
    run(
        &[
            "promote",
            "--models",
            models.to_str().unwrap(),
            NAME,
            version,
            "--evidence",
            evidence.to_str().unwrap(),
            "--who",
            "cli:test",
        ],
        None,
        &[],
    )
}

fn history_lines(models: &Path) -> Vec<Json> {
    let text = std::fs::read_to_string(models.join(NAME).join("history.jsonl")).unwrap_or_default();
    text.lines()
        .map(|l| serde_json::from_str(l).expect("history line is JSON"))
        .collect()
}

fn evidence_files(models: &Path) -> Vec<PathBuf> {
    let folder = models.join(NAME).join("evidence");
    let mut files: Vec<PathBuf> = std::fs::read_dir(&folder)
        .map(|entries| entries.map(|e| e.unwrap().path()).collect())
        .unwrap_or_default();
    files.sort();
    files
}

#[test]
fn promotion_with_evidence_stores_the_report_and_names_it_in_the_history() {
    let dir = tempfile::tempdir().unwrap();
    let models = model_directory(dir.path());
    let report_path = dir.path().join("report.json");
    let report = evaluate(&models, "2", true, &report_path);

    let result = promote(&models, "2", &report_path);
    assert_eq!(result.code, 0, "{}", result.stderr);
    assert!(
        result.stdout.contains("evidence stored as evidence/2-"),
        "{}",
        result.stdout
    );
    assert_eq!(
        std::fs::read_to_string(models.join(NAME).join("live"))
            .unwrap()
            .trim(),
        "2"
    );

    // The report is stored byte for byte, under the version and the promotion's time.
    let files = evidence_files(&models);
    assert_eq!(files.len(), 1, "{files:?}");
    let stored = std::fs::read(&files[0]).unwrap();
    let offered = std::fs::read(&report_path).unwrap();
    assert_eq!(stored, offered);
    let file_name = files[0].file_name().unwrap().to_str().unwrap().to_string();
    assert!(
        file_name.starts_with("2-") && file_name.ends_with("Z.json"),
        "{file_name}"
    );
    assert!(!file_name.contains(':'), "{file_name}");

    // The history line names the file, its SHA-256 and the headline figures.
    let history = history_lines(&models);
    let record = history.last().expect("a promotion record");
    assert_eq!(record["action"], "promote");
    assert_eq!((&record["from"], &record["to"]), (&"1".into(), &"2".into()));
    let evidence = &record["evidence"];
    assert_eq!(evidence["file"], format!("evidence/{file_name}"));
    assert_eq!(evidence["sha256"], sha256_hex(&offered));
    let figures = &report["models"][0]["figures"];
    assert_eq!(evidence["auc"], figures["auc"]["estimate"]);
    assert_eq!(evidence["brier"], figures["brier"]);
    assert_eq!(
        evidence["calibration_slope"],
        figures["calibration_slope"]["estimate"]
    );

    // `ogive history` shows it; the directory still loads for serving.
    let shown = run(
        &["history", "--models", models.to_str().unwrap(), NAME],
        None,
        &[],
    );
    assert_eq!(shown.code, 0, "{}", shown.stderr);
    assert!(
        shown.stdout.contains(&sha256_hex(&offered)),
        "{}",
        shown.stdout
    );
    let report = ogive::registry::load::load_directory(&models).expect("loads");
    assert!(report.failures.is_empty(), "{:?}", report.failures);
}

#[test]
fn evidence_for_another_version_is_refused_naming_both_and_nothing_changes() {
    let dir = tempfile::tempdir().unwrap();
    let models = model_directory(dir.path());
    let report_path = dir.path().join("report-of-1.json");
    evaluate(&models, "1", false, &report_path);

    let result = promote(&models, "2", &report_path);
    assert_ne!(result.code, 0);
    assert!(
        result
            .stderr
            .contains("the evidence was computed for spector-logit 1, not for spector-logit 2"),
        "{}",
        result.stderr
    );
    assert_eq!(
        std::fs::read_to_string(models.join(NAME).join("live"))
            .unwrap()
            .trim(),
        "1"
    );
    assert!(evidence_files(&models).is_empty());
    assert!(history_lines(&models)
        .iter()
        .all(|r| r["action"] != "promote"));
}

#[test]
fn evidence_computed_with_another_file_of_the_version_is_refused_with_both_digests() {
    let dir = tempfile::tempdir().unwrap();
    let models = model_directory(dir.path());
    let report_path = dir.path().join("report.json");
    let mut report = evaluate(&models, "2", true, &report_path);
    report["models"][0]["sha256"] = "0".repeat(64).into();
    std::fs::write(&report_path, serde_json::to_vec_pretty(&report).unwrap()).unwrap();

    let result = promote(&models, "2", &report_path);
    assert_ne!(result.code, 0);
    let stored = sha256_hex(&std::fs::read(models.join(NAME).join("versions/2.json")).unwrap());
    assert!(result.stderr.contains(&"0".repeat(64)), "{}", result.stderr);
    assert!(result.stderr.contains(&stored), "{}", result.stderr);
    assert!(evidence_files(&models).is_empty());
}

#[test]
fn a_file_that_is_not_an_evaluation_report_is_refused_before_anything_moves() {
    let dir = tempfile::tempdir().unwrap();
    let models = model_directory(dir.path());
    let path = write_model(dir.path(), "model-as-evidence.json", &model_json("logit"));
    let result = promote(&models, "2", &path);
    assert_ne!(result.code, 0);
    assert!(
        result.stderr.contains("is not an ogive evaluation report"),
        "{}",
        result.stderr
    );
    assert_eq!(
        std::fs::read_to_string(models.join(NAME).join("live"))
            .unwrap()
            .trim(),
        "1"
    );
}

#[test]
fn the_admin_promotion_takes_evidence_and_refuses_it_for_another_version() {
    use ogive::monitoring::shadow::Share;
    use support::server::TestServer;

    let dir = tempfile::tempdir().unwrap();
    let models = model_directory(dir.path());
    let of_1 = evaluate(&models, "1", false, &dir.path().join("report-of-1.json"));
    let of_2 = evaluate(&models, "2", true, &dir.path().join("report-of-2.json"));
    // Serve the model directory itself (a folder of its own, as the deployment expects).
    let served = tempfile::tempdir().unwrap();
    std::fs::rename(models.join(NAME), served.path().join(NAME)).unwrap();
    let d = TestServer::serve(served, Share::ALL);
    let path = format!("/models/{NAME}/live");

    let refused = d
        .admin_json(
            "POST",
            &path,
            &serde_json::json!({"version": "2", "evidence": of_1}),
        )
        .expect_problem(422, "invalid-body");
    assert_eq!(refused["pointer"], "/evidence", "{refused}");
    assert_eq!(refused["evidence_version"], "1", "{refused}");
    let detail = refused["detail"].as_str().unwrap();
    assert!(
        detail.contains("computed for spector-logit 1, not for spector-logit 2"),
        "{detail}"
    );
    let not_a_report = d
        .admin_json(
            "POST",
            &path,
            &serde_json::json!({"version": "2", "evidence": "report.json"}),
        )
        .expect_problem(422, "invalid-body");
    assert_eq!(not_a_report["pointer"], "/evidence");
    assert!(evidence_files(d.dir.path()).is_empty());

    let moved = d
        .admin_json(
            "POST",
            &path,
            &serde_json::json!({"version": "2", "evidence": of_2}),
        )
        .expect(200);
    assert_eq!(moved["to"], "2", "{moved}");
    let files = evidence_files(d.dir.path());
    assert_eq!(files.len(), 1);
    let stored: Json = serde_json::from_slice(&std::fs::read(&files[0]).unwrap()).unwrap();
    assert_eq!(stored, of_2, "the report is stored as sent");
    let record = history_lines(d.dir.path()).pop().unwrap();
    assert_eq!(record["who"], support::server::WHO);
    assert_eq!(
        record["evidence"]["sha256"],
        sha256_hex(&std::fs::read(&files[0]).unwrap())
    );
    assert_eq!(
        record["evidence"]["auc"],
        of_2["models"][0]["figures"]["auc"]["estimate"]
    );
}
