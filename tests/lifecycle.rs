//! The model lifecycle on real files in temporary directories: upload, promote, rollback and
//! history, every refusal with its message, the gate's list of breaking changes, promoters
//! racing from threads and from processes, the `ogive` subcommands, and a watching registry
//! picking up a promotion made by the CLI.
//!
//! The models are invented inputs built by `support::models`; nothing here is a reference
//! value. The checks are identities of the directory: what the pointer names, what the
//! history records, and what the registry serves.

mod support;

use std::path::Path;
use std::process::{Command, Output};
use std::sync::Arc;
use std::time::{Duration, Instant};

use ogive::model::{CovariateKind, Model};
use ogive::registry::gate::{self, ContractChange, GateError, Novelty};
use ogive::registry::lifecycle::{self, LifecycleError, ViewWarning};
use ogive::registry::store::{Action, HistoryWarning, ModelDir};
use ogive::registry::watch::{WatchEvent, Watcher};
use ogive::registry::Registry;
use support::models;
use tempfile::TempDir;

const NAME: &str = "arrears";

fn root() -> TempDir {
    tempfile::tempdir().expect("temporary directory")
}

fn upload(root: &Path, version: &str) {
    models::store(root, NAME, version, "test:setup");
}

/// Upload as a test client with no reason, for the checks of what the gate answers.
fn try_upload(
    root: &Path,
    version: &str,
    bytes: &[u8],
    allow_breaking: bool,
) -> Result<lifecycle::Uploaded, LifecycleError> {
    lifecycle::upload(root, NAME, version, bytes, allow_breaking, "test", None)
}

fn promote(root: &Path, version: &str) -> lifecycle::Moved {
    lifecycle::promote(root, NAME, version, false, "test:promoter", None).expect("promote")
}

fn live(root: &Path) -> Option<String> {
    ModelDir::new(root, NAME)
        .expect("name")
        .read_live()
        .expect("read live")
}

fn records(root: &Path) -> Vec<ogive::registry::store::HistoryRecord> {
    let history = ModelDir::new(root, NAME)
        .expect("name")
        .read_history()
        .expect("read history");
    assert!(history.warnings.is_empty(), "{:?}", history.warnings);
    history.records
}

fn message(error: impl std::fmt::Display) -> String {
    error.to_string()
}

/// A timestamp of the shape `YYYY-MM-DDTHH:MM:SS.mmmZ` (RFC 3339, UTC) within a day of now.
fn assert_recent_rfc3339(when: &str) {
    let bytes = when.as_bytes();
    assert_eq!(bytes.len(), 24, "{when}");
    for (i, &b) in bytes.iter().enumerate() {
        let expected_digit = !matches!(i, 4 | 7 | 10 | 13 | 16 | 19 | 23);
        assert_eq!(b.is_ascii_digit(), expected_digit, "{when} at {i}");
    }
    assert_eq!(&when[4..5], "-");
    assert_eq!(&when[10..11], "T");
    assert_eq!(&when[23..], "Z");
    let today = ogive::timestamp::rfc3339_millis(std::time::SystemTime::now());
    assert_eq!(
        &when[..4],
        &today[..4],
        "year of {when} against now {today}"
    );
}

// ---------------------------------------------------------------- upload

#[test]
fn an_upload_stores_the_version_and_records_who_stored_it() {
    let root = root();
    let bytes = models::model_bytes(NAME, "v1");
    let uploaded = lifecycle::upload(
        root.path(),
        NAME,
        "v1",
        &bytes,
        false,
        "token:ci",
        Some("first fit"),
    )
    .expect("upload");
    assert_eq!(uploaded.novelty, Novelty::New);
    assert_eq!(uploaded.compared_with, None);
    let stored = std::fs::read(root.path().join("arrears/versions/v1.json")).expect("stored");
    assert_eq!(stored, bytes);
    assert_eq!(
        live(root.path()),
        None,
        "an upload does not make a version live"
    );
    let records = records(root.path());
    assert_eq!(records.len(), 1);
    assert_eq!(records[0].action, Action::Upload);
    assert_eq!(records[0].to, "v1");
    assert_eq!(records[0].from, None);
    assert_eq!(records[0].who, "token:ci");
    assert_eq!(records[0].reason.as_deref(), Some("first fit"));
    assert_recent_rfc3339(&records[0].when);
}

#[test]
fn the_same_bytes_uploaded_again_are_accepted_without_writing() {
    let root = root();
    upload(root.path(), "v1");
    let again = lifecycle::upload(
        root.path(),
        NAME,
        "v1",
        &models::model_bytes(NAME, "v1"),
        false,
        "test:retry",
        None,
    )
    .expect("a repeated upload is accepted");
    assert_eq!(again.novelty, Novelty::AlreadyStored);
    assert_eq!(
        records(root.path()).len(),
        1,
        "nothing recorded for a repeat"
    );
}

#[test]
fn a_version_label_is_never_overwritten() {
    let root = root();
    upload(root.path(), "v1");
    let mut other = models::base(NAME, "v1");
    other.description = "a different fit under the same label".into();
    let error = try_upload(root.path(), "v1", &models::bytes_of(other), true)
        .expect_err("overwrite refused");
    assert!(matches!(
        error,
        LifecycleError::Gate(GateError::VersionExists { .. })
    ));
    assert_eq!(
        message(&error),
        "version 'v1' of 'arrears' is already stored with different content; versions are \
         immutable, so upload this file under a new version label"
    );
    assert_eq!(
        std::fs::read(root.path().join("arrears/versions/v1.json")).expect("read"),
        models::model_bytes(NAME, "v1"),
        "the stored bytes are untouched"
    );
}

#[test]
fn an_upload_whose_file_names_another_model_or_version_is_refused() {
    let root = root();
    let error = lifecycle::upload(
        root.path(),
        NAME,
        "v1",
        &models::model_bytes("other-model", "v1"),
        false,
        "test",
        None,
    )
    .expect_err("name mismatch");
    assert_eq!(
        message(error),
        "the file's name is 'other-model' but it was offered as model 'arrears'"
    );
    let error = lifecycle::upload(
        root.path(),
        NAME,
        "v2",
        &models::model_bytes(NAME, "v1"),
        false,
        "test",
        None,
    )
    .expect_err("version mismatch");
    assert_eq!(
        message(error),
        "the file's version is 'v1' but it was offered as version 'v2'"
    );
    assert!(!root.path().join("arrears/versions/v2.json").exists());
}

#[test]
fn an_upload_with_bad_labels_is_refused_before_touching_the_disk() {
    let root = root();
    let bytes = models::model_bytes(NAME, "v1");
    let error = lifecycle::upload(root.path(), "../up", "v1", &bytes, false, "t", None)
        .expect_err("bad name");
    assert!(matches!(error, LifecycleError::Gate(GateError::BadModelName(ref n)) if n == "../up"));
    assert!(message(&error).starts_with("'../up' is not a valid model name"));
    let error = lifecycle::upload(root.path(), NAME, "../v1", &bytes, false, "t", None)
        .expect_err("bad version");
    assert!(message(&error).starts_with("'../v1' is not a valid version label"));
    assert_eq!(
        std::fs::read_dir(root.path()).expect("list").count(),
        0,
        "nothing was created"
    );
}

#[test]
fn an_upload_that_does_not_validate_names_the_field_at_fault() {
    let root = root();
    let error = lifecycle::upload(
        root.path(),
        NAME,
        "v1",
        &models::tampered_bytes(NAME, "v1"),
        false,
        "t",
        None,
    )
    .expect_err("check case does not reproduce");
    let text = message(&error);
    assert!(
        text.starts_with("version 'v1' of 'arrears' is not a valid model file: check_cases[0].probability: stored probability"),
        "{text}"
    );
    let error = lifecycle::upload(root.path(), NAME, "v1", b"{\"format\": ", false, "t", None)
        .expect_err("not JSON");
    assert!(
        message(&error).contains("not a valid model file"),
        "{error}"
    );
    assert!(!root.path().join("arrears/versions/v1.json").exists());
}

#[test]
fn an_upload_with_other_covariates_than_the_live_version_needs_allow_breaking() {
    let root = root();
    upload(root.path(), "v1");
    promote(root.path(), "v1");
    let breaking = models::bytes_of(models::without_covariate(
        models::base(NAME, "v2"),
        "tenure",
    ));
    let error =
        try_upload(root.path(), "v2", &breaking, false).expect_err("breaking upload refused");
    assert!(matches!(
        error,
        LifecycleError::Gate(GateError::Breaking { .. })
    ));
    assert!(!root.path().join("arrears/versions/v2.json").exists());
    let uploaded = try_upload(root.path(), "v2", &breaking, true).expect("allowed");
    assert_eq!(uploaded.compared_with.as_deref(), Some("v1"));
    assert_eq!(
        uploaded.changes,
        vec![ContractChange::Removed {
            covariate: "tenure".into(),
            kind: CovariateKind::Count
        }]
    );
}

// ---------------------------------------------------------------- promote

#[test]
fn a_first_promotion_points_live_at_the_version_and_records_it() {
    let root = root();
    upload(root.path(), "v1");
    let moved = lifecycle::promote(root.path(), NAME, "v1", false, "cli:ana", Some("launch"))
        .expect("promote");
    assert!(moved.changed);
    assert_eq!(moved.from, None);
    assert_eq!(moved.to, "v1");
    assert_eq!(moved.model.version(), "v1");
    assert_eq!(
        std::fs::read_to_string(root.path().join("arrears/live")).expect("live"),
        "v1\n"
    );
    let records = records(root.path());
    let last = records.last().expect("a record");
    assert_eq!(
        (last.action, last.from.as_deref(), last.to.as_str()),
        (Action::Promote, None, "v1")
    );
    assert_eq!(last.who, "cli:ana");
    assert_eq!(last.reason.as_deref(), Some("launch"));
    assert_recent_rfc3339(&last.when);
    assert_eq!(Some(last), moved.record.as_ref());
}

#[test]
fn promoting_the_live_version_again_changes_nothing() {
    let root = root();
    upload(root.path(), "v1");
    promote(root.path(), "v1");
    let before = records(root.path()).len();
    let again = promote(root.path(), "v1");
    assert!(!again.changed);
    assert_eq!(again.record, None);
    assert_eq!(records(root.path()).len(), before);
}

#[test]
fn promoting_an_unknown_model_or_version_is_refused_by_name() {
    let root = root();
    let error = lifecycle::promote(root.path(), NAME, "v1", false, "t", None)
        .expect_err("no model directory");
    assert_eq!(
        message(error),
        format!("there is no model 'arrears' in {}", root.path().display())
    );
    upload(root.path(), "v1");
    upload(root.path(), "v2");
    let error =
        lifecycle::promote(root.path(), NAME, "v9", false, "t", None).expect_err("no such version");
    assert_eq!(
        message(error),
        "model 'arrears' has no version 'v9' (stored: v1, v2)"
    );
}

#[test]
fn a_stored_file_that_fails_validation_is_never_promoted() {
    let root = root();
    upload(root.path(), "v1");
    promote(root.path(), "v1");
    models::place_version(root.path(), NAME, "v2", &models::tampered_bytes(NAME, "v2"));
    let error = lifecycle::promote(root.path(), NAME, "v2", false, "t", None)
        .expect_err("invalid file refused");
    assert!(
        message(&error)
            .starts_with("version 'v2' of 'arrears' is not a valid model file: check_cases[0]"),
        "{error}"
    );
    assert_eq!(live(root.path()).as_deref(), Some("v1"));
    // A file misplaced under another label is refused too.
    models::place_version(root.path(), NAME, "v3", &models::model_bytes(NAME, "v1"));
    let error = lifecycle::promote(root.path(), NAME, "v3", false, "t", None)
        .expect_err("misplaced file refused");
    assert_eq!(
        message(error),
        "the file's version is 'v1' but it was offered as version 'v3'"
    );
    assert_eq!(live(root.path()).as_deref(), Some("v1"));
}

#[test]
fn a_breaking_promotion_is_refused_with_what_callers_must_change_unless_allowed() {
    let root = root();
    upload(root.path(), "v1");
    promote(root.path(), "v1");
    let candidate = models::with_covariate(
        models::without_covariate(models::base(NAME, "v2"), "guarantor"),
        models::numeric("arrears_count", CovariateKind::Count),
    );
    models::place_version(root.path(), NAME, "v2", &models::bytes_of(candidate));
    let error = lifecycle::promote(root.path(), NAME, "v2", false, "t", None)
        .expect_err("breaking promotion refused");
    assert_eq!(
        message(&error),
        "version 'v2' of 'arrears' changes the contract with callers of live version 'v1', \
         so it is refused unless breaking changes are allowed; if it went live, callers would \
         have to:\n  \
         - stop sending 'guarantor': the candidate has no such covariate and refuses the field\n  \
         - send the new count covariate 'arrears_count' in every observation\n\
         to keep the contract instead, refit the candidate:\n  \
         - keep 'guarantor' in --terms\n  \
         - leave 'arrears_count' out of --terms (callers do not send it yet), or announce it \
         with --announce arrears_count so that callers can start sending it first\n\
         to put it live anyway and change the callers, allow breaking changes: \
         '?allow_breaking=true' on an upload, '\"allow_breaking\": true' in a promotion's body, \
         or 'ogive promote --allow-breaking'"
    );
    assert_eq!(live(root.path()).as_deref(), Some("v1"));
    let moved = lifecycle::promote(root.path(), NAME, "v2", true, "t", None).expect("allowed");
    assert_eq!(moved.changes.len(), 2);
    assert_eq!(live(root.path()).as_deref(), Some("v2"));
}

#[test]
fn a_promotion_over_an_unloadable_live_version_needs_allow_breaking() {
    let root = root();
    upload(root.path(), "v1");
    promote(root.path(), "v1");
    upload(root.path(), "v2");
    // Someone damages the live file by hand.
    std::fs::write(root.path().join("arrears/versions/v1.json"), b"{}").expect("damage");
    let error = lifecycle::promote(root.path(), NAME, "v2", false, "t", None)
        .expect_err("no comparison possible");
    assert!(matches!(error, LifecycleError::LiveUnreadable { .. }));
    assert!(
        message(&error).starts_with(
            "the live version 'v1' of 'arrears' cannot be loaded to compare contracts"
        ),
        "{error}"
    );
    lifecycle::promote(root.path(), NAME, "v2", true, "t", None).expect("allowed");
    assert_eq!(live(root.path()).as_deref(), Some("v2"));
}

// ---------------------------------------------------------------- the gate's list

fn changes_to(candidate: ogive::model::ModelFile) -> Vec<String> {
    let live = Model::from_file(models::finished(models::base(NAME, "v1"))).expect("live");
    let candidate = Model::from_file(models::finished(candidate)).expect("candidate");
    gate::contract_changes(&live, &candidate)
        .iter()
        .map(ToString::to_string)
        .collect()
}

#[test]
fn the_gate_lists_every_kind_of_covariate_change() {
    let base = || models::base(NAME, "v2");
    assert!(
        changes_to(base()).is_empty(),
        "same covariates, new coefficients"
    );
    assert_eq!(
        changes_to(models::without_covariate(base(), "income")),
        ["stop sending 'income': the candidate has no such covariate and refuses the field"]
    );
    assert_eq!(
        changes_to(models::with_covariate(
            base(),
            models::categorical("channel", &["branch", "online"], "branch")
        )),
        ["send the new categorical covariate 'channel' in every observation"]
    );
    assert_eq!(
        changes_to(models::replaced_covariate(
            base(),
            models::numeric("tenure", CovariateKind::Continuous)
        )),
        ["send 'tenure' as a continuous value instead of a count one"]
    );
    assert_eq!(
        changes_to(models::replaced_covariate(
            base(),
            models::categorical("region", &["north", "south", "west", "islands"], "north")
        )),
        [
            "stop sending level(s) 'east' of 'region': the candidate refuses them",
            "expect new level(s) 'west', 'islands' of 'region' in answers (and send them where they apply)"
        ]
    );
    assert_eq!(
        changes_to(models::replaced_covariate(
            base(),
            models::categorical("region", &["north", "south", "east"], "south")
        )),
        ["read the effects of 'region' as changes from level 'south' instead of 'north'"]
    );
    let mut unit = base();
    unit.covariates[0].unit = Some("EUR".into());
    assert_eq!(
        changes_to(unit),
        ["send 'income' in 'EUR' instead of 'thousand EUR'"]
    );
    let mut no_unit = base();
    no_unit.covariates[1].unit = None;
    assert_eq!(
        changes_to(no_unit),
        ["send 'tenure' in no stated unit instead of 'years'"]
    );
}

fn decided(
    mut file: ogive::model::ModelFile,
    threshold: Option<f64>,
    bands: &[(&str, f64)],
) -> ogive::model::ModelFile {
    file.decision = Some(ogive::model::file::DecisionSpec {
        threshold,
        bands: bands
            .iter()
            .map(|(name, below)| ogive::model::file::Band {
                name: (*name).into(),
                below: *below,
            })
            .collect(),
    });
    file
}

fn contract_between(
    live: ogive::model::ModelFile,
    candidate: ogive::model::ModelFile,
) -> Vec<ContractChange> {
    let live = Model::from_file(models::finished(live)).expect("live");
    let candidate = Model::from_file(models::finished(candidate)).expect("candidate");
    gate::contract_changes(&live, &candidate)
}

#[test]
fn a_refit_that_drops_the_threshold_and_bands_is_a_contract_change() {
    let bands = [("low", 0.1), ("medium", 0.3), ("high", 1.0)];
    let live = decided(models::base(NAME, "v1"), Some(0.3), &bands);
    // The routine refit that forgot --threshold and --band: answers would lose both fields.
    let changes = contract_between(live.clone(), models::base(NAME, "v2"));
    let said: Vec<String> = changes.iter().map(ToString::to_string).collect();
    assert_eq!(
        said,
        [
            "expect no 'above_threshold' in answers (the live version flags p ≥ 0.3; the candidate has no threshold)",
            "expect no 'band' in answers (the live version's bands are low below 0.1, medium below 0.3, high below 1; the candidate has none)",
        ]
    );
    let keep: Vec<String> = changes.iter().map(ContractChange::to_keep).collect();
    assert_eq!(
        keep,
        [
            "--threshold 0.3",
            "--band low=0.1 --band medium=0.3 --band high=1"
        ]
    );
    // Moved bounds and a moved threshold are changes too; the same decision is none.
    let moved = decided(
        models::base(NAME, "v2"),
        Some(0.5),
        &[("low", 0.2), ("high", 1.0)],
    );
    let said: Vec<String> = contract_between(live.clone(), moved)
        .iter()
        .map(ToString::to_string)
        .collect();
    assert_eq!(
        said,
        [
            "read 'above_threshold' as p ≥ 0.5 instead of p ≥ 0.3",
            "read 'band' as low below 0.2, high below 1 instead of low below 0.1, medium below 0.3, high below 1",
        ]
    );
    let same = decided(models::base(NAME, "v2"), Some(0.3), &bands);
    assert!(contract_between(live.clone(), same).is_empty());
    // A candidate that adds a decision the live version lacks changes answers as well.
    let added = contract_between(models::base(NAME, "v1"), live);
    assert_eq!(
        added.iter().map(ToString::to_string).collect::<Vec<_>>(),
        [
            "expect 'above_threshold' in answers, true when p ≥ 0.3",
            "expect 'band' in answers: low below 0.1, medium below 0.3, high below 1",
        ]
    );
    assert_eq!(
        added
            .iter()
            .map(ContractChange::to_keep)
            .collect::<Vec<_>>(),
        ["no --threshold", "no --band"]
    );
}

#[test]
fn a_refit_that_changes_what_the_outcome_means_is_a_contract_change() {
    let mut candidate = models::base(NAME, "v2");
    candidate.outcome.meaning = "event = 1 means event = 1".into();
    let changes = contract_between(models::base(NAME, "v1"), candidate);
    assert_eq!(changes.len(), 1);
    assert_eq!(
        changes[0].to_string(),
        "read the probability as that of 'event = 1 means event = 1' instead of 'the event happened'"
    );
    assert_eq!(
        changes[0].to_keep(),
        "--outcome-meaning 'the event happened'"
    );
    // Surrounding space is not a change of meaning.
    let mut spaced = models::base(NAME, "v2");
    spaced.outcome.meaning = " the event happened ".into();
    assert!(contract_between(models::base(NAME, "v1"), spaced).is_empty());
}

#[test]
fn every_covariate_change_says_how_a_refit_keeps_the_contract() {
    let mut unit = models::base(NAME, "v2");
    unit.covariates[0].unit = None;
    let reference = models::replaced_covariate(
        models::base(NAME, "v2"),
        models::categorical("region", &["north", "south", "east"], "south"),
    );
    let keep: Vec<String> = [unit, reference]
        .into_iter()
        .flat_map(|c| contract_between(models::base(NAME, "v1"), c))
        .map(|c| c.to_keep())
        .collect();
    assert_eq!(
        keep,
        ["--unit 'income=thousand EUR'", "--categorical region=north"]
    );
}

#[test]
fn a_breaking_upload_is_refused_with_the_threshold_and_bands_it_drops() {
    let root = root();
    let bands = [("low", 0.1), ("high", 1.0)];
    let v1 = models::bytes_of(decided(models::base(NAME, "v1"), Some(0.3), &bands));
    try_upload(root.path(), "v1", &v1, false).expect("first upload");
    promote(root.path(), "v1");
    let v2 = models::bytes_of(models::base(NAME, "v2"));
    let error = try_upload(root.path(), "v2", &v2, false).expect_err("refused");
    let LifecycleError::Gate(GateError::Breaking { changes, .. }) = &error else {
        panic!("expected a breaking-change refusal, got {error}");
    };
    assert!(matches!(
        changes.as_slice(),
        [
            ContractChange::ThresholdChanged {
                from: Some(_),
                to: None
            },
            ContractChange::BandsChanged { .. }
        ]
    ));
    assert!(
        message(&error).contains("'?allow_breaking=true' on an upload"),
        "{error}"
    );
    let stored = ModelDir::new(root.path(), NAME)
        .expect("name")
        .read_version("v2")
        .expect("read");
    assert_eq!(stored, None, "a refused upload stores nothing");
    let uploaded = try_upload(root.path(), "v2", &v2, true).expect("allowed");
    assert_eq!(uploaded.changes.len(), 2);
}

#[test]
fn the_gate_lists_several_changes_in_covariate_order_and_new_ones_last() {
    let candidate = models::with_covariate(
        models::replaced_covariate(
            models::without_covariate(models::base(NAME, "v2"), "income"),
            models::numeric("guarantor", CovariateKind::Continuous),
        ),
        models::numeric("age", CovariateKind::Continuous),
    );
    assert_eq!(
        changes_to(candidate),
        [
            "stop sending 'income': the candidate has no such covariate and refuses the field",
            "send 'guarantor' as a continuous value instead of a binary one",
            "send the new continuous covariate 'age' in every observation",
        ]
    );
}

#[test]
fn allowed_breaking_changes_are_returned_not_refused() {
    let live = Model::from_file(models::finished(models::base(NAME, "v1"))).expect("live");
    let candidate = Model::from_file(models::finished(models::without_covariate(
        models::base(NAME, "v2"),
        "region",
    )))
    .expect("candidate");
    let error = gate::check_compatible(&live, &candidate, false).expect_err("refused");
    let GateError::Breaking {
        live: live_version,
        candidate: candidate_version,
        changes,
        ..
    } = error
    else {
        panic!("expected a breaking-change refusal, got {error}");
    };
    assert_eq!(
        (live_version.as_str(), candidate_version.as_str()),
        ("v1", "v2")
    );
    assert_eq!(changes.len(), 1);
    assert_eq!(
        gate::check_compatible(&live, &candidate, true).expect("allowed"),
        changes
    );
}

// ---------------------------------------------------------------- rollback

#[test]
fn rollbacks_return_through_the_promotions_in_effect_then_refuse() {
    let root = root();
    for v in ["v1", "v2", "v3"] {
        upload(root.path(), v);
        promote(root.path(), v);
    }
    let back = lifecycle::rollback(root.path(), NAME, "cli:bo", Some("drift")).expect("rollback");
    assert_eq!((back.from.as_deref(), back.to.as_str()), (Some("v3"), "v2"));
    assert_eq!(back.model.version(), "v2");
    assert_eq!(live(root.path()).as_deref(), Some("v2"));
    let record = records(root.path()).pop().expect("record");
    assert_eq!(
        (record.action, record.from.as_deref(), record.to.as_str()),
        (Action::Rollback, Some("v3"), "v2")
    );
    assert_eq!(
        (record.who.as_str(), record.reason.as_deref()),
        ("cli:bo", Some("drift"))
    );

    let back = lifecycle::rollback(root.path(), NAME, "t", None).expect("second rollback");
    assert_eq!(back.to, "v1");
    let error = lifecycle::rollback(root.path(), NAME, "t", None).expect_err("bottom of the stack");
    assert_eq!(
        message(error),
        "model 'arrears' has no earlier live version to roll back to ('v1' is live and the \
         history holds no promotion still in effect)"
    );
    assert_eq!(live(root.path()).as_deref(), Some("v1"));

    // Promoting again starts a new stack entry.
    promote(root.path(), "v3");
    assert_eq!(
        lifecycle::rollback(root.path(), NAME, "t", None)
            .expect("rollback")
            .to,
        "v1"
    );
}

#[test]
fn a_rollback_with_nothing_live_or_no_model_is_refused() {
    let root = root();
    let error = lifecycle::rollback(root.path(), NAME, "t", None).expect_err("no model");
    assert!(matches!(error, LifecycleError::UnknownModel { .. }));
    upload(root.path(), "v1");
    let error = lifecycle::rollback(root.path(), NAME, "t", None).expect_err("nothing live");
    assert_eq!(
        message(error),
        "model 'arrears' has no live version, so there is nothing to roll back"
    );
}

#[test]
fn a_rollback_to_a_file_that_no_longer_validates_keeps_the_live_version() {
    let root = root();
    // Placed by hand, so no upload digest stands before the validation this test is about (an
    // uploaded file changed later is refused for that first, see the tests at the end).
    models::place_version(root.path(), NAME, "v1", &models::model_bytes(NAME, "v1"));
    models::place_live(root.path(), NAME, "v1");
    upload(root.path(), "v2");
    promote(root.path(), "v2");
    std::fs::write(
        root.path().join("arrears/versions/v1.json"),
        models::tampered_bytes(NAME, "v1"),
    )
    .expect("damage");
    let error = lifecycle::rollback(root.path(), NAME, "t", None).expect_err("refused");
    assert!(
        message(&error).starts_with(
            "cannot roll 'arrears' back to 'v1', so 'v2' stays live: version 'v1' of 'arrears' is not a valid model file: check_cases[0]"
        ),
        "{error}"
    );
    assert_eq!(live(root.path()).as_deref(), Some("v2"));
}

#[test]
fn a_rollback_across_a_breaking_change_reports_the_changes() {
    let root = root();
    upload(root.path(), "v1");
    promote(root.path(), "v1");
    let breaking = models::without_covariate(models::base(NAME, "v2"), "tenure");
    try_upload(root.path(), "v2", &models::bytes_of(breaking), true).expect("upload");
    lifecycle::promote(root.path(), NAME, "v2", true, "t", None).expect("promote");
    let back = lifecycle::rollback(root.path(), NAME, "t", None).expect("rollback");
    assert_eq!(
        back.changes,
        vec![ContractChange::Added {
            covariate: "tenure".into(),
            kind: CovariateKind::Count
        }]
    );
}

#[test]
fn a_pointer_moved_by_hand_is_reported_and_rolled_back_over() {
    let root = root();
    for v in ["v1", "v2", "v3"] {
        upload(root.path(), v);
    }
    promote(root.path(), "v1");
    promote(root.path(), "v2");
    models::place_live(root.path(), NAME, "v3");
    let view = lifecycle::history(root.path(), NAME).expect("history");
    assert_eq!(view.live.as_deref(), Some("v3"));
    assert_eq!(view.rollback_to.as_deref(), Some("v2"));
    assert_eq!(
        view.warnings,
        vec![ViewWarning::Unrecorded {
            recorded: Some("v2".into()),
            pointer: Some("v3".into())
        }]
    );
    assert_eq!(
        lifecycle::rollback(root.path(), NAME, "t", None)
            .expect("rollback")
            .to,
        "v2"
    );
    assert!(lifecycle::history(root.path(), NAME)
        .expect("history")
        .warnings
        .is_empty());
}

// ---------------------------------------------------------------- history

#[test]
fn the_history_view_says_what_is_live_and_where_a_rollback_goes() {
    let root = root();
    upload(root.path(), "v1");
    upload(root.path(), "v2");
    promote(root.path(), "v1");
    promote(root.path(), "v2");
    let view = lifecycle::history(root.path(), NAME).expect("history");
    assert_eq!(view.live.as_deref(), Some("v2"));
    assert_eq!(view.rollback_to.as_deref(), Some("v1"));
    let actions: Vec<Action> = view.records.iter().map(|r| r.action).collect();
    assert_eq!(
        actions,
        [
            Action::Upload,
            Action::Upload,
            Action::Promote,
            Action::Promote
        ]
    );
    assert!(view.warnings.is_empty());
    let json = serde_json::to_value(&view).expect("encode");
    assert_eq!(json["live"], "v2");
    assert_eq!(json["rollback_to"], "v1");
    assert_eq!(json["records"][3]["from"], "v1");
    assert!(json["records"][0]["from"].is_null());
}

#[test]
fn a_torn_last_line_is_skipped_with_a_warning_and_later_appends_stay_readable() {
    let root = root();
    upload(root.path(), "v1");
    upload(root.path(), "v2");
    promote(root.path(), "v1");
    let path = root.path().join("arrears/history.jsonl");
    let mut bytes = std::fs::read(&path).expect("read");
    // A crash in the middle of appending the next record.
    bytes.extend_from_slice(br#"{"when":"2026-05-01T00:00:00.000Z","action":"promote","fr"#);
    std::fs::write(&path, &bytes).expect("tear");
    let view = lifecycle::history(root.path(), NAME).expect("a torn history still reads");
    assert_eq!(view.records.len(), 3);
    assert_eq!(
        view.warnings,
        vec![ViewWarning::Line(HistoryWarning::TornLastLine {
            line: 4,
            bytes: 57
        })]
    );
    assert_eq!(
        message(&view.warnings[0]),
        "history line 4 skipped: the last record is incomplete (57 bytes without an end), an \
         append was interrupted"
    );
    // The next append starts on a fresh line: its record reads, the fragment stays skipped.
    promote(root.path(), "v2");
    let history = ModelDir::new(root.path(), NAME)
        .expect("name")
        .read_history()
        .expect("read");
    assert_eq!(history.records.len(), 4);
    assert_eq!(history.records[3].to, "v2");
    assert!(matches!(
        history.warnings.as_slice(),
        [HistoryWarning::Unreadable { line: 4, .. }]
    ));
    assert_eq!(
        lifecycle::rollback(root.path(), NAME, "t", None)
            .expect("rollback")
            .to,
        "v1"
    );
}

// ---------------------------------------------------------------- concurrent promoters

/// Every promotion or rollback record starts where the one before it ended: the mark of
/// promoters that never interleaved between reading the pointer and writing it.
fn assert_history_is_one_chain(root: &Path) -> usize {
    let records = records(root);
    let moves: Vec<_> = records
        .iter()
        .filter(|r| r.action != Action::Upload)
        .collect();
    for pair in moves.windows(2) {
        assert_eq!(
            pair[1].from.as_deref(),
            Some(pair[0].to.as_str()),
            "record {:?} does not start where {:?} ended",
            pair[1],
            pair[0]
        );
    }
    let last = moves.last().expect("some moves");
    assert_eq!(live(root).as_deref(), Some(last.to.as_str()));
    let dir = ModelDir::new(root, NAME).expect("name");
    let bytes = dir
        .read_version(&last.to)
        .expect("read")
        .expect("the live version is stored");
    assert_eq!(Model::from_json(&bytes).expect("valid").version(), last.to);
    moves.len()
}

#[test]
fn promoters_on_many_threads_never_corrupt_the_pointer_or_the_history() {
    let root = root();
    let versions = ["v1", "v2", "v3", "v4"];
    for v in versions {
        upload(root.path(), v);
    }
    let threads = 8;
    let rounds = 25;
    let changed: usize = std::thread::scope(|scope| {
        let handles: Vec<_> = (0..threads)
            .map(|t| {
                let root = root.path();
                scope.spawn(move || {
                    let mut changed = 0;
                    for round in 0..rounds {
                        let moved = if (t + round) % 5 == 4 {
                            match lifecycle::rollback(root, NAME, &format!("thread:{t}"), None) {
                                Ok(moved) => moved,
                                Err(LifecycleError::NothingToRollBack { .. }) => continue,
                                Err(e) => panic!("rollback failed: {e}"),
                            }
                        } else {
                            let version = versions[(t * 7 + round) % versions.len()];
                            lifecycle::promote(
                                root,
                                NAME,
                                version,
                                false,
                                &format!("thread:{t}"),
                                None,
                            )
                            .expect("promote")
                        };
                        changed += usize::from(moved.changed);
                    }
                    changed
                })
            })
            .collect();
        handles.into_iter().map(|h| h.join().expect("thread")).sum()
    });
    assert_eq!(assert_history_is_one_chain(root.path()), changed);
}

fn ogive(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_ogive"))
        .args(args)
        .env_remove("OGIVE_MODELS")
        .env_remove("OGIVE_WHO")
        .env("RUST_LOG", "error")
        .output()
        .expect("run ogive")
}

#[test]
fn promoters_in_many_processes_never_corrupt_the_pointer_or_the_history() {
    let root = root();
    let versions = ["v1", "v2", "v3"];
    for v in versions {
        upload(root.path(), v);
    }
    let models = root.path().to_str().expect("utf-8 path").to_string();
    let processes = 4;
    let rounds = 10;
    let changed: usize = std::thread::scope(|scope| {
        let handles: Vec<_> = (0..processes)
            .map(|p| {
                let models = models.clone();
                scope.spawn(move || {
                    let mut changed = 0;
                    for round in 0..rounds {
                        let version = versions[(p + round) % versions.len()];
                        let who = format!("process:{p}");
                        let out =
                            ogive(&["promote", "--models", &models, NAME, version, "--who", &who]);
                        let stdout = String::from_utf8_lossy(&out.stdout);
                        assert!(
                            out.status.success(),
                            "{stdout}{}",
                            String::from_utf8_lossy(&out.stderr)
                        );
                        changed += usize::from(!stdout.contains("already live"));
                    }
                    changed
                })
            })
            .collect();
        handles.into_iter().map(|h| h.join().expect("thread")).sum()
    });
    assert_eq!(assert_history_is_one_chain(root.path()), changed);
    let whos: std::collections::BTreeSet<String> = records(root.path())
        .into_iter()
        .filter(|r| r.action == Action::Promote)
        .map(|r| r.who)
        .collect();
    assert!(whos.iter().all(|w| w.starts_with("process:")), "{whos:?}");
}

// ---------------------------------------------------------------- the subcommands

#[test]
fn the_cli_promotes_rolls_back_and_prints_the_history() {
    let root = root();
    upload(root.path(), "v1");
    upload(root.path(), "v2");
    let models = root.path().to_str().expect("utf-8 path");
    let out = ogive(&[
        "promote", "--models", models, NAME, "v1", "--who", "cli:test",
    ]);
    assert!(out.status.success());
    assert_eq!(
        String::from_utf8_lossy(&out.stdout),
        "arrears: promoted nothing → v1\n"
    );
    let out = ogive(&[
        "promote", "--models", models, NAME, "v2", "--reason", "refit",
    ]);
    assert_eq!(
        String::from_utf8_lossy(&out.stdout),
        "arrears: promoted v1 → v2\n"
    );
    let who = records(root.path()).last().expect("record").who.clone();
    match std::env::var("USER") {
        Ok(user) if !user.is_empty() => assert_eq!(who, format!("cli:{user}")),
        // Without USER the login name comes from LOGNAME or the uid's account.
        _ => assert!(who.starts_with("cli:") && who != "cli:unknown", "{who}"),
    }
    let out = ogive(&["promote", "--models", models, NAME, "v2"]);
    assert_eq!(
        String::from_utf8_lossy(&out.stdout),
        "arrears: v2 is already live; nothing changed\n"
    );

    let out = ogive(&["history", "--models", models, NAME, "--format", "json"]);
    assert!(out.status.success());
    let json: serde_json::Value = serde_json::from_slice(&out.stdout).expect("JSON history");
    assert_eq!(json["live"], "v2");
    assert_eq!(json["rollback_to"], "v1");
    assert_eq!(json["records"][3]["reason"], "refit");

    let out = ogive(&["history", "--models", models, NAME]);
    let text = String::from_utf8_lossy(&out.stdout);
    let lines: Vec<&str> = text.lines().collect();
    assert_eq!(lines[0], "arrears: live v2; a rollback would return to v1");
    assert!(
        lines[1].contains("upload    stored v1  by test:setup"),
        "{text}"
    );
    assert!(
        lines[3].contains("promote   nothing → v1  by cli:test"),
        "{text}"
    );
    let expected = format!("promote   v1 → v2  by {who}  (refit)");
    assert!(lines[4].ends_with(&expected), "{text}");

    let out = ogive(&["rollback", "--models", models, NAME, "--who", "cli:test"]);
    assert_eq!(
        String::from_utf8_lossy(&out.stdout),
        "arrears: rolled back v2 → v1\n"
    );
    let out = ogive(&["rollback", "--models", models, NAME]);
    assert_eq!(out.status.code(), Some(2));
    assert!(
        String::from_utf8_lossy(&out.stderr)
            .contains("has no earlier live version to roll back to"),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
}

#[test]
fn the_cli_reads_the_directory_from_the_environment_and_reports_refusals() {
    let root = root();
    upload(root.path(), "v1");
    let out = Command::new(env!("CARGO_BIN_EXE_ogive"))
        .args(["promote", NAME, "v7"])
        .env("OGIVE_MODELS", root.path())
        .env("OGIVE_WHO", "env:who")
        .output()
        .expect("run ogive");
    assert_eq!(out.status.code(), Some(2));
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(
        stderr.contains("model 'arrears' has no version 'v7' (stored: v1)"),
        "{stderr}"
    );
    let out = Command::new(env!("CARGO_BIN_EXE_ogive"))
        .args(["promote", NAME, "v1"])
        .env("OGIVE_MODELS", root.path())
        .env("OGIVE_WHO", "env:who")
        .output()
        .expect("run ogive");
    assert!(out.status.success());
    assert_eq!(records(root.path()).last().expect("record").who, "env:who");
}

#[test]
fn the_cli_lists_breaking_changes_and_promotes_them_only_when_allowed() {
    let root = root();
    upload(root.path(), "v1");
    promote(root.path(), "v1");
    let breaking = models::replaced_covariate(
        models::base(NAME, "v2"),
        models::numeric("tenure", CovariateKind::Continuous),
    );
    models::place_version(root.path(), NAME, "v2", &models::bytes_of(breaking));
    let models = root.path().to_str().expect("utf-8 path");
    let out = ogive(&["promote", "--models", models, NAME, "v2"]);
    assert_eq!(out.status.code(), Some(2));
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(
        stderr.contains(
            "callers would have to:\n  - send 'tenure' as a continuous value instead of a count one\n\
             to keep the contract instead, refit the candidate:\n  \
             - fit 'tenure' as a count covariate again (not named with --categorical)\n"
        ) && stderr.contains("'ogive promote --allow-breaking'"),
        "{stderr}"
    );
    let out = ogive(&[
        "promote",
        "--models",
        models,
        NAME,
        "v2",
        "--allow-breaking",
    ]);
    assert!(out.status.success());
    assert_eq!(
        String::from_utf8_lossy(&out.stdout),
        "arrears: promoted v1 → v2\ncallers must now:\n  - send 'tenure' as a continuous value instead of a count one\n"
    );
}

// ---------------------------------------------------------------- watching

fn served_version(registry: &Registry, name: &str) -> Option<String> {
    registry
        .snapshot()
        .models
        .get(name)
        .map(|e| e.live.version().to_string())
}

/// Poll `condition` every 20 ms until it holds or `deadline` passes.
fn eventually(deadline: Duration, mut condition: impl FnMut() -> bool) -> bool {
    let started = Instant::now();
    while started.elapsed() < deadline {
        if condition() {
            return true;
        }
        std::thread::sleep(Duration::from_millis(20));
    }
    condition()
}

#[test]
fn a_promotion_by_the_cli_reaches_a_watching_registry() {
    let root = root();
    upload(root.path(), "v1");
    upload(root.path(), "v2");
    promote(root.path(), "v1");
    let registry = Arc::new(Registry::default());
    let events = Arc::new(std::sync::Mutex::new(Vec::new()));
    let sink = Arc::clone(&events);
    let handle = Watcher::new(root.path())
        .spawn(
            Arc::clone(&registry),
            Duration::from_millis(200),
            move |e| sink.lock().expect("events").push(format!("{e:?}")),
        )
        .expect("spawn the watcher");
    assert!(
        eventually(Duration::from_secs(10), || served_version(&registry, NAME)
            .as_deref()
            == Some("v1")),
        "the first poll serves the live version"
    );
    assert!(handle.unserved().is_empty());
    let models = root.path().to_str().expect("utf-8 path");
    let out = ogive(&["promote", "--models", models, NAME, "v2"]);
    assert!(out.status.success());
    // deploy/RUNNING-AT-SCALE.md (How a promotion propagates) says replicas swap within 2 s;
    // the wait here is longer so that a slow machine does not fail the test, which checks that
    // the swap happens, not how fast.
    assert!(
        eventually(Duration::from_secs(10), || served_version(&registry, NAME)
            .as_deref()
            == Some("v2")),
        "the watcher swapped in v2; events: {:?}",
        events.lock().expect("events")
    );
    let model = registry.snapshot().models[NAME].live.clone();
    assert_eq!(
        model.file(),
        Model::from_json(&models::model_bytes(NAME, "v2"))
            .expect("valid")
            .file(),
        "the registry serves the whole v2 file"
    );
    handle.stop();
}

#[test]
fn a_file_that_fails_validation_never_replaces_the_serving_version() {
    let root = root();
    upload(root.path(), "v1");
    promote(root.path(), "v1");
    let registry = Registry::default();
    let mut watcher = Watcher::new(root.path());
    let events = watcher.poll(&registry);
    assert!(
        matches!(events.as_slice(), [WatchEvent::Served { version, previous: None, .. }] if version == "v1"),
        "{events:?}"
    );
    // A deploy drops a damaged file in and points live at it by hand.
    models::place_version(root.path(), NAME, "v2", &models::tampered_bytes(NAME, "v2"));
    models::place_live(root.path(), NAME, "v2");
    let events = watcher.poll(&registry);
    match events.as_slice() {
        [WatchEvent::Refused {
            name,
            serving,
            error,
        }] => {
            assert_eq!(name, NAME);
            assert_eq!(serving.as_deref(), Some("v1"));
            assert!(error.to_string().contains("check_cases[0]"), "{error}");
        }
        other => panic!("expected one refusal, got {other:?}"),
    }
    assert_eq!(served_version(&registry, NAME).as_deref(), Some("v1"));
    assert!(
        watcher.poll(&registry).is_empty(),
        "an unchanged failure is reported once"
    );
    // Pointing live at a good version serves it again. (An upload would be refused now: the
    // live file it would be compared with does not load.)
    models::place_version(root.path(), NAME, "v3", &models::model_bytes(NAME, "v3"));
    models::place_live(root.path(), NAME, "v3");
    let events = watcher.poll(&registry);
    assert!(
        matches!(events.as_slice(), [WatchEvent::Served { version, previous: Some(p), .. }] if version == "v3" && p == "v1"),
        "{events:?}"
    );
}

#[test]
fn the_watcher_notices_new_models_ignores_temporaries_and_keeps_vanished_ones() {
    let root = root();
    let registry = Registry::default();
    let mut watcher = Watcher::new(root.path());
    assert!(watcher.poll(&registry).is_empty());
    // An upload without a promotion: the model is on its way in, neither failing nor unready.
    upload(root.path(), "v1");
    assert!(watcher.poll(&registry).is_empty());
    assert!(watcher.unserved().is_empty());
    promote(root.path(), "v1");
    // Debris of a writer that died, in every place a reader looks.
    std::fs::write(root.path().join("arrears/.live.dead.tmp"), b"v9\n").expect("write");
    std::fs::write(root.path().join("arrears/versions/.v9.json.dead.tmp"), b"{").expect("write");
    std::fs::create_dir(root.path().join(".tmp-model")).expect("mkdir");
    let events = watcher.poll(&registry);
    assert!(
        matches!(events.as_slice(), [WatchEvent::Served { version, .. }] if version == "v1"),
        "{events:?}"
    );
    assert!(watcher.unserved().is_empty());
    // A second model appears.
    models::store(root.path(), "uptake", "a", "t");
    lifecycle::promote(root.path(), "uptake", "a", false, "t", None).expect("promote");
    let events = watcher.poll(&registry);
    assert!(
        matches!(events.as_slice(), [WatchEvent::Served { name, .. }] if name == "uptake"),
        "{events:?}"
    );
    // The first model's directory disappears: it keeps serving.
    std::fs::remove_dir_all(root.path().join(NAME)).expect("remove");
    let events = watcher.poll(&registry);
    assert!(
        matches!(events.as_slice(), [WatchEvent::Vanished { serving: Some(v), .. }] if v == "v1"),
        "{events:?}"
    );
    assert_eq!(served_version(&registry, NAME).as_deref(), Some("v1"));
}

#[test]
fn a_watcher_started_after_the_startup_load_adopts_what_is_served() {
    let root = root();
    upload(root.path(), "v1");
    promote(root.path(), "v1");
    let report = ogive::registry::load::load_directory(root.path()).expect("load");
    let registry = Registry::default();
    registry.replace(report.snapshot);
    let before = Arc::clone(&registry.snapshot().models[NAME].live);
    let mut watcher = Watcher::new(root.path());
    assert!(watcher.poll(&registry).is_empty());
    assert!(Arc::ptr_eq(&before, &registry.snapshot().models[NAME].live));
}

#[test]
fn a_model_with_a_live_pointer_that_does_not_load_is_unserved() {
    let root = root();
    upload(root.path(), "v1");
    models::place_live(root.path(), NAME, "v7");
    let registry = Registry::default();
    let mut watcher = Watcher::new(root.path());
    let events = watcher.poll(&registry);
    match events.as_slice() {
        [WatchEvent::Refused {
            serving: None,
            error,
            ..
        }] => assert!(error.to_string().contains("versions/v7.json"), "{error}"),
        other => panic!("expected one refusal, got {other:?}"),
    }
    assert_eq!(
        watcher.unserved(),
        [NAME],
        "not ready: a live pointer serves nothing"
    );
}

#[test]
fn a_version_swapped_in_by_its_promoter_is_not_loaded_again() {
    let root = root();
    upload(root.path(), "v1");
    upload(root.path(), "v2");
    promote(root.path(), "v1");
    let registry = Registry::default();
    let mut watcher = Watcher::new(root.path());
    assert_eq!(watcher.poll(&registry).len(), 1);
    // What an admin route does: promote, then serve the promoted model at once.
    let moved = promote(root.path(), "v2");
    registry.set_live(Arc::new(moved.model));
    let swapped_in = Arc::clone(&registry.snapshot().models[NAME].live);
    assert!(watcher.poll(&registry).is_empty(), "nothing new to report");
    assert!(Arc::ptr_eq(
        &swapped_in,
        &registry.snapshot().models[NAME].live
    ));
}

#[test]
fn setting_a_live_version_keeps_the_shadow_and_the_other_models() {
    let load = |name: &str, version: &str| {
        Arc::new(Model::from_json(&models::model_bytes(name, version)).expect("valid"))
    };
    let registry = Registry::default();
    assert!(registry.set_live(load(NAME, "v1")).is_none());
    registry.set_live(load("uptake", "a"));
    let mut snapshot = ogive::registry::Snapshot::clone(&registry.snapshot());
    let entry = Arc::make_mut(snapshot.models.get_mut(NAME).expect("entry"));
    entry.shadow = Some(load(NAME, "v3"));
    registry.replace(snapshot);
    let replaced = registry.set_live(load(NAME, "v2")).expect("v1 was live");
    assert_eq!(replaced.version(), "v1");
    let snapshot = registry.snapshot();
    let entry = &snapshot.models[NAME];
    assert_eq!(entry.live.version(), "v2");
    assert_eq!(entry.shadow.as_ref().map(|s| s.version()), Some("v3"));
    assert_eq!(snapshot.models["uptake"].live.version(), "a");
}

// ---------------------------------------------------------------- content under a label

/// Valid bytes for version `version` that differ from the stored ones (another description).
fn other_content(version: &str) -> Vec<u8> {
    let mut other = models::base(NAME, version);
    other.description = "another fit written over the stored file".into();
    models::bytes_of(other)
}

/// The SHA-256 of a file as `sha256sum` (GNU coreutils) prints it, when the tool is there.
fn sha256sum(path: &Path) -> Option<String> {
    let out = Command::new("sha256sum").arg(path).output().ok()?;
    let text = String::from_utf8(out.stdout).ok()?;
    text.split_whitespace().next().map(str::to_string)
}

#[test]
fn an_upload_records_the_sha256_of_the_bytes_stored() {
    let root = root();
    upload(root.path(), "v1");
    let digest = records(root.path())[0]
        .sha256
        .clone()
        .expect("the upload carries a digest");
    // Reference: GNU coreutils `sha256sum` of the stored file, exact; without the tool, the
    // digest of the uploaded bytes (the function itself is checked against FIPS 180-2).
    let file = root.path().join("arrears/versions/v1.json");
    let expected = sha256sum(&file)
        .unwrap_or_else(|| ogive::registry::store::sha256_hex(&models::model_bytes(NAME, "v1")));
    assert_eq!(digest, expected);
    assert_eq!(digest.len(), 64);
    // Promotions carry none; the line format stays the same for them.
    promote(root.path(), "v1");
    assert_eq!(records(root.path())[1].sha256, None);
}

#[test]
fn a_stored_file_changed_under_its_label_is_refused_and_the_stored_content_keeps_serving() {
    let root = root();
    upload(root.path(), "v1");
    upload(root.path(), "v2");
    promote(root.path(), "v1");
    let registry = Registry::default();
    let mut watcher = Watcher::new(root.path());
    assert_eq!(watcher.poll(&registry).len(), 1);
    let stored = models::model_bytes(NAME, "v1");
    let recorded = ogive::registry::store::sha256_hex(&stored);
    let changed = other_content("v1");
    let found = ogive::registry::store::sha256_hex(&changed);
    models::place_version(root.path(), NAME, "v1", &changed);

    // The watcher refuses it, naming the file and both digests; the stored content serves on.
    let events = watcher.poll(&registry);
    match events.as_slice() {
        [WatchEvent::Refused { serving, error, .. }] => {
            assert_eq!(serving.as_deref(), Some("v1"));
            let text = error.to_string();
            assert!(text.contains("arrears/versions/v1.json"), "{text}");
            assert!(text.contains(&recorded) && text.contains(&found), "{text}");
        }
        other => panic!("expected one refusal, got {other:?}"),
    }
    assert_eq!(
        registry.snapshot().models[NAME].live.file(),
        Model::from_json(&stored).expect("valid").file(),
        "the content stored under v1 keeps serving"
    );
    assert!(watcher.poll(&registry).is_empty(), "reported once");

    // A fresh start refuses to load it too.
    let report = ogive::registry::load::load_directory(root.path()).expect("load");
    assert!(report.snapshot.models.is_empty());
    assert!(
        matches!(
            report.failures.as_slice(),
            [(_, ogive::registry::load::LoadError::ContentChanged(c))] if c.recorded == recorded && c.found == found
        ),
        "{:?}",
        report.failures
    );

    // No promotion compares with it or goes back to it.
    let error = lifecycle::promote(root.path(), NAME, "v2", false, "t", None)
        .expect_err("the live file cannot be compared");
    assert!(message(&error).contains(&found), "{error}");
    models::place_version(root.path(), NAME, "v2", &other_content("v2"));
    let error = lifecycle::promote(root.path(), NAME, "v2", true, "t", None)
        .expect_err("a changed candidate is refused");
    assert!(
        matches!(&error, LifecycleError::Store(ogive::registry::store::StoreError::ContentChanged(c)) if c.version == "v2"),
        "{error}"
    );
    // Nor is the changed file accepted as a repeat of its upload.
    let error = try_upload(root.path(), "v2", &other_content("v2"), true)
        .expect_err("the repeat of a changed file is refused");
    assert!(
        message(&error).contains("no longer holds version 'v2'"),
        "{error}"
    );

    // Putting the stored bytes back serves again.
    models::place_version(root.path(), NAME, "v1", &stored);
    let events = watcher.poll(&registry);
    assert!(
        matches!(events.as_slice(), [WatchEvent::Served { version, .. }] if version == "v1"),
        "{events:?}"
    );
}

#[test]
fn a_hand_placed_version_is_held_to_the_content_first_served_under_its_label() {
    let root = root();
    models::place_version(root.path(), NAME, "v1", &models::model_bytes(NAME, "v1"));
    models::place_live(root.path(), NAME, "v1");
    let registry = Registry::default();
    let mut watcher = Watcher::new(root.path());
    assert_eq!(watcher.poll(&registry).len(), 1);
    // A redeploy ships other content under the same label: refused, v1 as first served stays.
    models::place_version(root.path(), NAME, "v1", &other_content("v1"));
    let events = watcher.poll(&registry);
    assert!(
        matches!(events.as_slice(), [WatchEvent::Refused { serving: Some(v), error, .. }]
            if v == "v1" && error.to_string().contains("a new version label")),
        "{events:?}"
    );
    assert_eq!(
        registry.snapshot().models[NAME].live.file().description,
        models::base(NAME, "v1").description
    );
    // New content under a new label is served.
    models::place_version(root.path(), NAME, "v2", &models::model_bytes(NAME, "v2"));
    models::place_live(root.path(), NAME, "v2");
    let events = watcher.poll(&registry);
    assert!(
        matches!(events.as_slice(), [WatchEvent::Served { version, .. }] if version == "v2"),
        "{events:?}"
    );
}
