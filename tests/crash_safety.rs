//! Crash safety of promotion: the real `ogive promote` is killed with SIGKILL at random moments
//! across 100 promotions, and after every kill the model directory must still name a complete,
//! valid live version and its history must still read (a torn last line skipped with a
//! warning, never an error).
//!
//! `Child::kill` sends SIGKILL on Unix, which no process can catch or clean up after. The kill
//! moments are drawn uniformly over the time an undisturbed promotion takes, measured first in
//! the same run, so that they fall before, during and after the writes. The test is bounded: at
//! most 100 promotions and at most two minutes.
//!
//! SIGKILL cannot cut one `write` call short, so these kills never tear a history line; torn
//! lines (what a power cut leaves) are made by hand and tested in `tests/lifecycle.rs`.

mod lifecycle_support;

use std::path::Path;
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

use lifecycle_support as support;
use ogive::model::Model;
use ogive::registry::lifecycle;
use ogive::registry::store::{atomic, Action, HistoryWarning, ModelDir};
use rand::{Rng, SeedableRng};

const NAME: &str = "arrears";
const VERSIONS: [&str; 4] = ["v1", "v2", "v3", "v4"];
const PROMOTIONS: usize = 100;
const TIME_LIMIT: Duration = Duration::from_secs(120);

fn promote_command(root: &Path, version: &str, attempt: usize) -> Command {
    let mut command = Command::new(env!("CARGO_BIN_EXE_ogive"));
    command
        .args(["promote", "--models"])
        .arg(root)
        .args([NAME, version, "--who", &format!("crash-test:{attempt}")])
        .env("RUST_LOG", "error")
        .stdout(Stdio::null())
        .stderr(Stdio::null());
    command
}

/// What every reader must find, whatever moment the writer died at. Returns the live version
/// and how many history lines were skipped.
fn check_directory(dir: &ModelDir, attempt: usize) -> (String, usize) {
    let live = dir
        .read_live()
        .unwrap_or_else(|e| panic!("attempt {attempt}: the live pointer does not read: {e}"))
        .unwrap_or_else(|| panic!("attempt {attempt}: the live pointer is gone"));
    let bytes = dir
        .read_version(&live)
        .expect("read the live version")
        .unwrap_or_else(|| panic!("attempt {attempt}: live names '{live}', which is not stored"));
    let model = Model::from_json(&bytes).unwrap_or_else(|e| {
        panic!("attempt {attempt}: the live version '{live}' is not valid: {e}")
    });
    assert_eq!(model.version(), live, "attempt {attempt}");
    let history = dir
        .read_history()
        .unwrap_or_else(|e| panic!("attempt {attempt}: the history does not read: {e}"));
    for warning in &history.warnings {
        // A torn line is the only damage a killed append may leave; once a later append
        // follows it, it is an unreadable line in the middle.
        assert!(
            matches!(
                warning,
                HistoryWarning::TornLastLine { .. } | HistoryWarning::Unreadable { .. }
            ),
            "attempt {attempt}: {warning}"
        );
    }
    for record in &history.records {
        assert!(
            VERSIONS.contains(&record.to.as_str()),
            "attempt {attempt}: a record names an unknown version: {record:?}"
        );
    }
    let view = lifecycle::history(dir.path().parent().expect("root"), NAME)
        .unwrap_or_else(|e| panic!("attempt {attempt}: the history view fails: {e}"));
    assert_eq!(view.live.as_deref(), Some(live.as_str()));
    let stored = dir.list_versions().expect("list versions");
    assert_eq!(
        stored, VERSIONS,
        "attempt {attempt}: versions/ holds only whole versions"
    );
    (live, history.warnings.len())
}

fn has_temporaries(folder: &Path) -> bool {
    std::fs::read_dir(folder)
        .expect("list")
        .filter_map(|e| e.ok()?.file_name().into_string().ok())
        .any(|n| atomic::is_temporary_name(&n))
}

#[test]
fn promotions_killed_at_random_moments_leave_a_valid_live_version_and_a_readable_history() {
    let root = tempfile::tempdir().expect("temporary directory");
    for version in VERSIONS {
        lifecycle::upload(
            root.path(),
            NAME,
            version,
            &support::model_bytes(NAME, version),
            false,
            "crash-test:setup",
            None,
        )
        .expect("upload");
    }
    lifecycle::promote(root.path(), NAME, "v1", false, "crash-test:setup", None).expect("promote");
    let dir = ModelDir::new(root.path(), NAME).expect("name");

    // How long an undisturbed promotion takes on this machine, to spread the kills over it.
    let started = Instant::now();
    let status = promote_command(root.path(), "v2", 0)
        .status()
        .expect("run ogive");
    assert!(status.success());
    let undisturbed = started.elapsed().max(Duration::from_millis(1));

    let seed: u64 = rand::random();
    println!("seed {seed}, an undisturbed promotion takes {undisturbed:?}");
    let mut random = rand::rngs::StdRng::seed_from_u64(seed);
    let test_started = Instant::now();
    let (mut killed, mut finished, mut skipped_lines) = (0, 0, 0);
    // Where the kills landed, for the printout: after the pointer moved, between the pointer
    // and the history record, and with a temporary file left behind.
    let (mut after_pointer, mut unrecorded, mut with_debris) = (0, 0, 0);
    let mut live = check_directory(&dir, 0).0;
    for attempt in 1..=PROMOTIONS {
        if test_started.elapsed() > TIME_LIMIT {
            break;
        }
        let target = VERSIONS
            .iter()
            .find(|v| **v != live && random.gen_bool(0.5))
            .or_else(|| VERSIONS.iter().find(|v| **v != live))
            .expect("another version");
        let delay = undisturbed.mul_f64(random.gen_range(0.0..1.2));
        let mut child = promote_command(root.path(), target, attempt)
            .spawn()
            .expect("spawn ogive");
        std::thread::sleep(delay);
        if child.try_wait().expect("poll the child").is_some() {
            finished += 1;
        } else {
            child.kill().expect("SIGKILL the promoter");
            killed += 1;
        }
        let was_killed = !child.wait().expect("reap the child").success();
        let (now_live, skipped) = check_directory(&dir, attempt);
        if was_killed {
            let moved = now_live != live;
            after_pointer += usize::from(moved);
            let view = lifecycle::history(root.path(), NAME).expect("history");
            let recorded = view.records.last().is_some_and(|r| r.to == now_live);
            unrecorded += usize::from(moved && !recorded);
            with_debris += usize::from(has_temporaries(dir.path()));
        }
        assert!(
            now_live == live || now_live == *target,
            "attempt {attempt}: live is '{now_live}', neither the old '{live}' nor the target '{target}'"
        );
        live = now_live;
        skipped_lines = skipped_lines.max(skipped);
    }
    println!(
        "{} attempts: {killed} killed, {finished} finished first; of the kills, {after_pointer} \
         after the pointer moved, {unrecorded} before its history record, {with_debris} leaving \
         a temporary file; at most {skipped_lines} skipped history line(s)",
        killed + finished
    );
    assert!(
        killed > 0,
        "no promotion was interrupted; the test checked nothing"
    );

    // After the crashes, the next promoter sweeps the debris and carries on normally.
    let next = VERSIONS
        .iter()
        .find(|v| **v != live)
        .expect("another version");
    lifecycle::promote(root.path(), NAME, next, false, "crash-test:after", None).expect("promote");
    assert!(
        !has_temporaries(dir.path()),
        "the next promoter sweeps temporary files"
    );
    let back = lifecycle::rollback(root.path(), NAME, "crash-test:after", None).expect("rollback");
    assert_eq!(
        back.to, live,
        "a rollback returns to the version live before the last promotion"
    );
    let history = dir.read_history().expect("history");
    let last = history.records.last().expect("records");
    assert_eq!(
        (last.action, last.to.as_str()),
        (Action::Rollback, live.as_str())
    );
}
