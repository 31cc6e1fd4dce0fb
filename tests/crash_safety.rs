//! Crash safety of promotion and rollback: the real `ogive promote` and `ogive rollback` are
//! killed with SIGKILL at random moments across 100 operations, and after every kill the model
//! directory must still name a complete, valid live version, its history must still read (a
//! torn last line skipped with a warning, never an error), and history and pointer must agree:
//! the pointer is never ahead of the history, a lagging pointer is completed by
//! `lifecycle::reconcile` (what a server start and `ogive history` run), after which the last
//! promotion or rollback record names the live version and the rollback target is the one
//! the test's own account of the operations expects.
//!
//! `Child::kill` sends SIGKILL on Unix, which no process can catch or clean up after. The kill
//! moments are drawn uniformly over the time an undisturbed promotion takes, measured first in
//! the same run, so that they fall before, during and after the writes. The draw comes from a
//! seed printed at the start; set `OGIVE_CRASH_SEED` to replay one. The test is bounded: at
//! most 100 operations and at most two minutes.
//!
//! SIGKILL cannot cut one `write` call short, so these kills never tear a history line; torn
//! lines (what a power cut leaves) are made by hand and tested in `tests/lifecycle.rs`.

mod support;

use std::path::Path;
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

use ogive::model::Model;
use ogive::registry::lifecycle;
use ogive::registry::store::{atomic, Action, HistoryWarning, ModelDir};
use rand::{Rng, SeedableRng};
use support::models;

const NAME: &str = "arrears";
const VERSIONS: [&str; 4] = ["v1", "v2", "v3", "v4"];
const OPERATIONS: usize = 100;
const TIME_LIMIT: Duration = Duration::from_secs(120);

/// One operation the test asks for.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Operation {
    Promote(&'static str),
    Rollback,
}

fn command(root: &Path, operation: Operation, attempt: usize) -> Command {
    let mut command = Command::new(env!("CARGO_BIN_EXE_ogive"));
    match operation {
        Operation::Promote(version) => command
            .args(["promote", "--models"])
            .arg(root)
            .args([NAME, version]),
        Operation::Rollback => command.args(["rollback", "--models"]).arg(root).arg(NAME),
    };
    command
        .args(["--who", &format!("crash-test:{attempt}")])
        .env("RUST_LOG", "error")
        .stdout(Stdio::null())
        .stderr(Stdio::null());
    command
}

/// The test's own account of the lifecycle, written from the rule the operator is told
/// (promotion pushes the version it leaves; rollback returns to the latest one still
/// different from live), independent of the library's replay.
#[derive(Debug, Clone, Default)]
struct Expected {
    live: String,
    stack: Vec<String>,
}

impl Expected {
    fn rollback_target(&self) -> Option<String> {
        self.stack.iter().rev().find(|v| **v != self.live).cloned()
    }

    fn apply(&mut self, operation: Operation) {
        match operation {
            Operation::Promote(version) => {
                let old = std::mem::replace(&mut self.live, version.to_string());
                self.stack.push(old);
            }
            Operation::Rollback => {
                let target = self.rollback_target().expect("a rollback target");
                while self.stack.last().is_some_and(|v| *v != target) {
                    self.stack.pop();
                }
                self.stack.pop();
                self.live = target;
            }
        }
    }
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
    let stored = dir.list_versions().expect("list versions");
    assert_eq!(
        stored, VERSIONS,
        "attempt {attempt}: versions/ holds only whole versions"
    );
    (live, history.warnings.len())
}

/// The promotion and rollback records, oldest first.
fn moves(dir: &ModelDir) -> Vec<ogive::registry::store::HistoryRecord> {
    dir.read_history()
        .expect("history")
        .records
        .into_iter()
        .filter(|r| r.action != Action::Upload)
        .collect()
}

fn has_temporaries(folder: &Path) -> bool {
    std::fs::read_dir(folder)
        .expect("list")
        .filter_map(|e| e.ok()?.file_name().into_string().ok())
        .any(|n| atomic::is_temporary_name(&n))
}

fn seed() -> u64 {
    match std::env::var("OGIVE_CRASH_SEED") {
        Ok(text) => text.trim().parse().expect("OGIVE_CRASH_SEED is a u64"),
        Err(_) => rand::random(),
    }
}

/// The next operation: a rollback a third of the time when there is somewhere to go.
fn next_operation(random: &mut impl Rng, expected: &Expected) -> Operation {
    if expected.rollback_target().is_some() && random.gen_bool(1.0 / 3.0) {
        return Operation::Rollback;
    }
    let others: Vec<&'static str> = VERSIONS
        .iter()
        .copied()
        .filter(|v| *v != expected.live)
        .collect();
    Operation::Promote(others[random.gen_range(0..others.len())])
}

#[test]
fn operations_killed_at_random_moments_leave_history_and_pointer_in_agreement() {
    let root = tempfile::tempdir().expect("temporary directory");
    for version in VERSIONS {
        models::store(root.path(), NAME, version, "crash-test:setup");
    }
    lifecycle::promote(root.path(), NAME, "v1", false, "crash-test:setup", None).expect("promote");
    let dir = ModelDir::new(root.path(), NAME).expect("name");
    let mut expected = Expected {
        live: "v1".into(),
        stack: Vec::new(),
    };

    // How long an undisturbed promotion takes on this machine, to spread the kills over it.
    let started = Instant::now();
    let status = command(root.path(), Operation::Promote("v2"), 0)
        .status()
        .expect("run ogive");
    assert!(status.success());
    let undisturbed = started.elapsed().max(Duration::from_millis(1));
    expected.apply(Operation::Promote("v2"));

    let seed = seed();
    println!("seed {seed} (replay with OGIVE_CRASH_SEED={seed}); an undisturbed promotion takes {undisturbed:?}");
    let mut random = rand::rngs::StdRng::seed_from_u64(seed);
    let test_started = Instant::now();
    let (mut killed, mut finished, mut skipped_lines) = (0, 0, 0);
    // Kills that left the pointer behind the history's last record (completed by reconcile).
    let mut pointer_behind = 0;
    for attempt in 1..=OPERATIONS {
        if test_started.elapsed() > TIME_LIMIT {
            break;
        }
        let operation = next_operation(&mut random, &expected);
        let records_before = moves(&dir).len();
        let delay = undisturbed.mul_f64(random.gen_range(0.0..1.2));
        let mut child = command(root.path(), operation, attempt)
            .spawn()
            .expect("spawn ogive");
        std::thread::sleep(delay);
        if child.try_wait().expect("poll the child").is_some() {
            finished += 1;
        } else {
            child.kill().expect("SIGKILL the operator");
            killed += 1;
        }
        let succeeded = child.wait().expect("reap the child").success();
        let (pointer, skipped) = check_directory(&dir, attempt);
        skipped_lines = skipped_lines.max(skipped);

        // The operation counts if and only if its record was written.
        let records = moves(&dir);
        let recorded = records.len() > records_before;
        assert!(
            records.len() <= records_before + 1,
            "attempt {attempt}: one operation wrote more than one record"
        );
        assert!(
            recorded || !succeeded,
            "attempt {attempt}: {operation:?} succeeded without a record"
        );
        if recorded {
            let record = records.last().expect("a record");
            let want_to = match operation {
                Operation::Promote(version) => version.to_string(),
                Operation::Rollback => expected.rollback_target().expect("target"),
            };
            assert_eq!(
                (record.from.as_deref(), record.to.as_str()),
                (Some(expected.live.as_str()), want_to.as_str()),
                "attempt {attempt}: {operation:?} recorded the wrong move"
            );
            expected.apply(operation);
        }

        // The pointer is never ahead of the history: it names the last record's `to`, or
        // (killed between the two writes) still its `from`.
        let last = records.last().expect("records");
        assert!(
            pointer == last.to || (!succeeded && Some(pointer.as_str()) == last.from.as_deref()),
            "attempt {attempt}: the pointer names '{pointer}' but the last record is {last:?}"
        );
        if pointer != last.to {
            pointer_behind += 1;
            let repaired = lifecycle::reconcile(root.path(), NAME, Duration::from_secs(5))
                .expect("reconcile")
                .expect("a repair");
            assert_eq!(repaired.to, last.to, "attempt {attempt}");
        }
        let live = dir.read_live().expect("pointer").expect("a pointer");
        assert_eq!(live, expected.live, "attempt {attempt}: the live version");
        assert_eq!(
            moves(&dir).last().map(|r| r.to.clone()),
            Some(live.clone()),
            "attempt {attempt}: the last record names the live version"
        );
        let view = lifecycle::history(root.path(), NAME).expect("history view");
        assert_eq!(
            view.rollback_to,
            expected.rollback_target(),
            "attempt {attempt}: a rollback would go elsewhere than expected"
        );
        assert!(
            view.warnings
                .iter()
                .all(|w| matches!(w, lifecycle::ViewWarning::Line(_))),
            "attempt {attempt}: {:?}",
            view.warnings
        );
    }
    println!(
        "{} operations: {killed} killed, {finished} finished first; {pointer_behind} kill(s) left \
         the pointer behind the history and were completed; at most {skipped_lines} skipped \
         history line(s)",
        killed + finished
    );
    assert!(
        killed > 0,
        "no operation was interrupted; the test checked nothing"
    );

    // After the crashes, the next operator sweeps the debris and carries on normally.
    let live = expected.live.clone();
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

#[test]
fn a_move_recorded_before_a_crash_is_completed_at_the_next_server_start() {
    let root = tempfile::tempdir().expect("temporary directory");
    for version in ["v1", "v2"] {
        models::store(root.path(), NAME, version, "crash-test:setup");
    }
    lifecycle::promote(root.path(), NAME, "v1", false, "crash-test:setup", None).expect("promote");
    // What a promoter killed between its two writes leaves: the record, not the pointer.
    let dir = ModelDir::new(root.path(), NAME).expect("name");
    let lock = dir.lock(Duration::from_secs(5)).expect("lock");
    lock.append_history(&ogive::registry::store::HistoryRecord::now(
        Action::Promote,
        Some("v1"),
        "v2",
        "crash-test",
        None,
    ))
    .expect("append");
    drop(lock);
    let report = ogive::registry::load::load_directory(root.path()).expect("load");
    assert_eq!(report.snapshot.models[NAME].live.version(), "v2");
    assert_eq!(report.repairs.len(), 1);
    assert_eq!(dir.read_live().expect("pointer").as_deref(), Some("v2"));
    // Rollback then returns to v1, not to the v2 the history records as replaced.
    let view = lifecycle::history(root.path(), NAME).expect("history");
    assert_eq!(view.rollback_to.as_deref(), Some("v1"));
    assert!(view.warnings.is_empty(), "{:?}", view.warnings);
}
