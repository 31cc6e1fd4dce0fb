//! The shadow pointer in the model directory (`NAME/shadow`): set and ended through the
//! lifecycle, recorded in the history, completed after a crash between its record and its
//! pointer, ended by promoting or rolling back to the shadow version with what it measured
//! kept in the history line, and followed by a watching registry as `live` is; `ogive shadow`
//! does the same on the directory.
//!
//! The models are invented inputs built by `support::models`; nothing here is a reference
//! value. The checks are identities of the directory: what the pointers name, what the
//! history records, and what the registry serves.

mod support;

use std::path::Path;
use std::process::Command;

use ogive::registry::lifecycle::{self, LifecycleError, Promotion};
use ogive::registry::shadow::{NotedThresholds, ShadowFigures};
use ogive::registry::store::{Action, HistoryRecord, ModelDir};
use ogive::registry::watch::{WatchEvent, Watcher};
use ogive::registry::Registry;
use support::models;
use support::server::seed;
use tempfile::TempDir;

const NAME: &str = "arrears";

/// A directory with versions v1, v2 and v3 stored and v1 live.
fn three_versions() -> TempDir {
    let root = tempfile::tempdir().expect("temporary directory");
    let versions: Vec<(&str, Vec<u8>)> = ["v1", "v2", "v3"]
        .into_iter()
        .map(|v| (v, models::model_bytes(NAME, v)))
        .collect();
    seed(root.path(), NAME, &versions, Some("v1"));
    root
}

fn dir(root: &Path) -> ModelDir {
    ModelDir::new(root, NAME).expect("name")
}

fn shadow(root: &Path) -> Option<String> {
    dir(root).read_shadow().expect("read shadow")
}

fn records(root: &Path) -> Vec<HistoryRecord> {
    let history = dir(root).read_history().expect("history");
    assert!(history.warnings.is_empty(), "{:?}", history.warnings);
    history.records
}

fn last(root: &Path) -> HistoryRecord {
    records(root).pop().expect("a record")
}

fn figures(scored: u64) -> ShadowFigures {
    ShadowFigures {
        since: Some("2026-05-04T09:12:45.120Z".into()),
        scored,
        unscored: 1,
        mean_abs_difference: Some(0.0125),
        disagreements: 3,
        disagreement_rate: Some(3.0 / scored as f64),
    }
}

#[test]
fn setting_a_shadow_writes_the_pointer_after_its_record_and_repeating_it_writes_nothing() {
    let root = three_versions();
    assert_eq!(shadow(root.path()), None);
    let moved = lifecycle::set_shadow(root.path(), NAME, "v2", "test:ana", Some("try v2"), None)
        .expect("set");
    assert!(moved.changed);
    assert_eq!((moved.live.as_str(), moved.from.as_deref()), ("v1", None));
    assert_eq!(shadow(root.path()).as_deref(), Some("v2"));
    assert_eq!(
        std::fs::read_to_string(root.path().join(NAME).join("shadow")).expect("read"),
        "v2\n"
    );
    let record = last(root.path());
    assert_eq!(
        (record.action, record.from.as_deref(), record.to.as_str()),
        (Action::Shadow, None, "v2")
    );
    assert_eq!(
        (record.who.as_str(), record.reason.as_deref()),
        ("test:ana", Some("try v2"))
    );
    assert_eq!(record.shadow, None);

    let count = records(root.path()).len();
    let again =
        lifecycle::set_shadow(root.path(), NAME, "v2", "test:ana", None, None).expect("set again");
    assert!(!again.changed);
    assert_eq!(records(root.path()).len(), count);

    // Replacing it ends v2's shadowing, and the record keeps what the caller measured.
    lifecycle::set_shadow(
        root.path(),
        NAME,
        "v3",
        "test:ana",
        None,
        Some(&figures(40)),
    )
    .expect("replace");
    let record = last(root.path());
    assert_eq!(
        (record.action, record.from.as_deref(), record.to.as_str()),
        (Action::Shadow, Some("v2"), "v3")
    );
    let note = record.shadow.expect("the replaced shadow's note");
    assert_eq!(note.version, "v2");
    assert_eq!(note.figures, Some(figures(40)));
    // The invented files set no decision threshold: each decides at 0.5.
    assert_eq!(
        note.thresholds,
        NotedThresholds {
            live: Some(0.5),
            shadow: Some(0.5)
        }
    );
}

#[test]
fn ending_a_shadow_removes_the_pointer_and_records_it_and_a_second_end_is_refused() {
    let root = three_versions();
    lifecycle::set_shadow(root.path(), NAME, "v2", "test", None, None).expect("set");
    let moved =
        lifecycle::end_shadow(root.path(), NAME, "test:bo", None, Some(&figures(10))).expect("end");
    assert_eq!(moved.from.as_deref(), Some("v2"));
    assert_eq!(shadow(root.path()), None);
    assert!(!root.path().join(NAME).join("shadow").exists());
    let record = last(root.path());
    assert_eq!(
        (record.action, record.from.as_deref(), record.to.as_str()),
        (Action::Unshadow, Some("v2"), "v1")
    );
    assert_eq!(record.shadow.and_then(|n| n.figures), Some(figures(10)));
    let refused =
        lifecycle::end_shadow(root.path(), NAME, "test", None, None).expect_err("nothing shadows");
    assert!(
        matches!(refused, LifecycleError::NoShadow { .. }),
        "{refused}"
    );
    assert!(
        refused.to_string().contains("'arrears' has no shadow"),
        "{refused}"
    );
}

#[test]
fn the_live_version_cannot_shadow_and_a_model_without_one_has_nothing_to_shadow() {
    let root = three_versions();
    let refused = lifecycle::set_shadow(root.path(), NAME, "v1", "test", None, None)
        .expect_err("the live version");
    assert!(
        matches!(refused, LifecycleError::CannotShadow(_)),
        "{refused}"
    );
    assert_eq!(shadow(root.path()), None);

    let fresh = tempfile::tempdir().expect("temporary directory");
    lifecycle::upload(
        fresh.path(),
        NAME,
        "v1",
        &models::model_bytes(NAME, "v1"),
        false,
        "test",
        None,
    )
    .expect("upload");
    let refused = lifecycle::set_shadow(fresh.path(), NAME, "v1", "test", None, None)
        .expect_err("nothing live");
    assert!(
        matches!(refused, LifecycleError::NothingToShadow { .. }),
        "{refused}"
    );
}

#[test]
fn promoting_the_shadow_version_keeps_its_report_in_the_history_line_and_ends_it() {
    let root = three_versions();
    lifecycle::set_shadow(root.path(), NAME, "v2", "test", None, None).expect("set");
    let measured = figures(1200);
    let promotion = Promotion {
        who: "test:promoter",
        shadow_figures: Some(&measured),
        ..Promotion::default()
    };
    let moved = lifecycle::promote_with(root.path(), NAME, "v2", &promotion).expect("promote");
    let record = moved.record.expect("a record");
    assert_eq!(record, last(root.path()));
    assert_eq!(record.action, Action::Promote);
    let note = record.shadow.expect("the shadow's final report");
    assert_eq!(note.version, "v2");
    assert_eq!(note.figures, Some(measured));
    assert_eq!(note.thresholds.live, Some(0.5));
    assert_eq!(shadow(root.path()), None);

    // Promoting a version that is not the shadow leaves the shadow alone.
    lifecycle::set_shadow(root.path(), NAME, "v3", "test", None, None).expect("set");
    let moved = lifecycle::promote(root.path(), NAME, "v1", false, "test", None).expect("promote");
    assert_eq!(moved.record.expect("a record").shadow, None);
    assert_eq!(shadow(root.path()).as_deref(), Some("v3"));

    // A rollback to the shadow version ends it too (without figures: none were passed).
    let root = three_versions();
    lifecycle::promote(root.path(), NAME, "v2", false, "test", None).expect("promote");
    lifecycle::set_shadow(root.path(), NAME, "v1", "test", None, None).expect("set");
    let moved = lifecycle::rollback(root.path(), NAME, "test", None).expect("rollback");
    assert_eq!(moved.to, "v1");
    let note = moved.record.and_then(|r| r.shadow).expect("a note");
    assert_eq!((note.version.as_str(), note.figures), ("v1", None));
    assert_eq!(shadow(root.path()), None);
}

#[test]
fn a_shadow_change_recorded_but_not_written_is_completed_by_the_next_operation() {
    let root = three_versions();
    // As a crash between the record and the pointer leaves it: the record says v2, no pointer.
    lifecycle::set_shadow(root.path(), NAME, "v2", "test", None, None).expect("set");
    std::fs::remove_file(root.path().join(NAME).join("shadow")).expect("remove");
    let repaired =
        lifecycle::reconcile(root.path(), NAME, lifecycle::LOCK_WAIT).expect("reconcile");
    assert!(repaired.is_none(), "the live pointer needed nothing");
    assert_eq!(shadow(root.path()).as_deref(), Some("v2"));

    // An end recorded, the pointer still naming the shadow: removed by the next upload.
    lifecycle::end_shadow(root.path(), NAME, "test", None, None).expect("end");
    std::fs::write(root.path().join(NAME).join("shadow"), "v2\n").expect("write");
    lifecycle::upload(
        root.path(),
        NAME,
        "v4",
        &models::model_bytes(NAME, "v4"),
        false,
        "test",
        None,
    )
    .expect("upload");
    assert_eq!(shadow(root.path()), None);

    // A pointer set by hand to something else the history never named stays as it is.
    std::fs::write(root.path().join(NAME).join("shadow"), "v3\n").expect("write");
    lifecycle::reconcile(root.path(), NAME, lifecycle::LOCK_WAIT).expect("reconcile");
    assert_eq!(shadow(root.path()).as_deref(), Some("v3"));
}

#[test]
fn a_watching_registry_follows_the_shadow_pointer_as_it_follows_live() {
    let root = three_versions();
    let registry = Registry::default();
    let mut watcher = Watcher::new(root.path());
    watcher.poll(&registry);
    let shadow_of = |registry: &Registry| {
        registry.snapshot().models[NAME]
            .shadow
            .as_ref()
            .map(|m| m.version().to_string())
    };
    assert_eq!(shadow_of(&registry), None);

    lifecycle::set_shadow(root.path(), NAME, "v2", "test", None, None).expect("set");
    let events = watcher.poll(&registry);
    assert!(
        matches!(events.as_slice(), [WatchEvent::Shadowed { version, live, previous: None, .. }] if version == "v2" && live == "v1"),
        "{events:?}"
    );
    assert_eq!(shadow_of(&registry).as_deref(), Some("v2"));
    assert!(watcher.poll(&registry).is_empty(), "nothing changed");

    // Ended and set again between two polls: a new pointer file, so a new shadowing.
    lifecycle::end_shadow(root.path(), NAME, "test", None, None).expect("end");
    lifecycle::set_shadow(root.path(), NAME, "v2", "test", None, None).expect("set again");
    let events = watcher.poll(&registry);
    assert!(
        matches!(events.as_slice(), [WatchEvent::Shadowed { previous: Some(p), .. }] if p == "v2"),
        "{events:?}"
    );

    lifecycle::end_shadow(root.path(), NAME, "test", None, None).expect("end");
    let events = watcher.poll(&registry);
    assert!(
        matches!(events.as_slice(), [WatchEvent::ShadowEnded { version, .. }] if version == "v2"),
        "{events:?}"
    );
    assert_eq!(shadow_of(&registry), None);

    // A pointer naming a version that does not load is refused, once, and nothing shadows.
    models::place_version(root.path(), NAME, "v7", &models::tampered_bytes(NAME, "v7"));
    std::fs::write(root.path().join(NAME).join("shadow"), "v7\n").expect("write");
    let events = watcher.poll(&registry);
    assert!(
        matches!(events.as_slice(), [WatchEvent::ShadowRefused { version, .. }] if version == "v7"),
        "{events:?}"
    );
    assert_eq!(shadow_of(&registry), None);
    assert!(watcher.poll(&registry).is_empty(), "reported once");

    // A fresh watcher (a restarted replica) finds the shadow at its first poll.
    lifecycle::set_shadow(root.path(), NAME, "v3", "test", None, None).expect("set");
    let restarted = Registry::default();
    Watcher::new(root.path()).poll(&restarted);
    assert_eq!(shadow_of(&restarted).as_deref(), Some("v3"));
}

#[test]
fn ogive_shadow_sets_shows_and_stops_a_shadow_on_the_directory() {
    let root = three_versions();
    let ogive = |args: &[&str]| {
        let output = Command::new(env!("CARGO_BIN_EXE_ogive"))
            .args(args)
            .arg("--models")
            .arg(root.path())
            .env("OGIVE_WHO", "cli:ana")
            .output()
            .expect("run ogive");
        (
            output.status.success(),
            String::from_utf8_lossy(&output.stdout).into_owned(),
            String::from_utf8_lossy(&output.stderr).into_owned(),
        )
    };
    let (ok, out, err) = ogive(&["shadow", NAME, "--version", "v2", "--reason", "a look"]);
    assert!(ok, "{err}");
    assert_eq!(
        out.lines().next(),
        Some("arrears: v2 now shadows v1"),
        "{out}"
    );
    assert_eq!(shadow(root.path()).as_deref(), Some("v2"));
    assert_eq!(last(root.path()).who, "cli:ana");

    let (ok, out, _) = ogive(&["shadow", NAME, "--show"]);
    assert!(ok);
    let lines: Vec<&str> = out.lines().collect();
    assert_eq!(lines[0], "arrears: v2 shadows live v1", "{out}");
    assert!(
        lines[1].contains("shadow v2") && lines[1].contains("(a look)"),
        "{out}"
    );

    let (ok, out, err) = ogive(&["shadow", NAME, "--stop"]);
    assert!(ok, "{err}");
    assert!(out.starts_with("arrears: v2 no longer shadows v1"), "{out}");
    assert_eq!(shadow(root.path()), None);
    let (ok, out, _) = ogive(&["history", NAME]);
    assert!(ok);
    let ended = out.lines().last().expect("a line");
    assert!(
        ended.contains("shadow v2 ended; v1 alone")
            && ended.contains("thresholds live 0.5 and shadow 0.5"),
        "{out}"
    );

    // Exactly one of --version, --stop and --show.
    let (ok, _, err) = ogive(&["shadow", NAME]);
    assert!(!ok);
    assert!(err.contains("--version") && err.contains("--stop"), "{err}");
    let (ok, _, err) = ogive(&["shadow", NAME, "--stop", "--show"]);
    assert!(!ok, "{err}");
    let (ok, _, err) = ogive(&["shadow", NAME, "--stop"]);
    assert!(!ok);
    assert!(err.contains("has no shadow"), "{err}");
    let (ok, _, err) = ogive(&["shadow", NAME, "--version", "v9"]);
    assert!(!ok);
    assert!(err.contains("has no version 'v9'"), "{err}");
}
