//! The lifecycle of a model's versions on disk: [`upload`], [`promote`], [`rollback`],
//! [`set_shadow`], [`end_shadow`] and [`history`]. The admin routes and the `promote`,
//! `rollback`, `shadow` and `history` subcommands are thin wrappers around these functions.
//!
//! Each changing operation runs under the model's exclusive lock, passes the [`gate`], and
//! writes in an order chosen for crashes. The history is the truth and the `live` pointer its
//! cache: a promotion or rollback appends its record first (fsynced), then moves the pointer
//! (atomically). A crash between the two leaves a history one move ahead of the pointer, with
//! the pointer still naming that last record's `from`; [`reconcile`] completes such a move by
//! writing the pointer the record names. Every changing operation reconciles first, under its
//! lock; so do the server's startup load and `ogive history`. No crash can therefore leave a
//! pointer the history does not name, and a rollback always goes where the history says.
//!
//! The one case this reading cannot tell apart: a pointer set by hand back to the `from` of the
//! last record is taken for an interrupted move and moved forward again. Move pointers with
//! `ogive promote` and `ogive rollback`, never by hand, while a history exists.
//!
//! Rollback is a stack. Replaying the history in order, with `live` the version it leaves live
//! and `previous` a stack of versions:
//!
//! ```text
//! promote  from → to    push `from` (if any);  live = to
//! rollback from → to    pop;                   live = to
//! upload                nothing
//! ```
//!
//! Before each promotion or rollback record, and finally against the `live` file itself, a
//! pointer that differs from `live` counts as a promotion `live → pointer` (a hand edit, a
//! redeployed ConfigMap), except a pointer that still names the `from` of the last record: that
//! is the interrupted move above, and the history's `live` stands. [`rollback`] goes to the top of the
//! stack, skipping entries equal to the current live version; an empty stack means there is
//! nothing to roll back to. So after promotions v1 → v2 → v3, rollbacks go to v2, then v1,
//! then refuse; a rollback is not undone by another rollback, but by promoting again.
//!
//! A rollback does not apply the covariate check (it returns to a contract callers already
//! met), but it does validate the target file, and reports the contract changes it makes.
//! Promoting the version that is already live changes nothing and records nothing.
//!
//! The shadow pointer (`NAME/shadow`, see [`crate::registry::shadow`]) is written the same way:
//! its record first, then the pointer, under the lock; [`reconcile`] completes a shadow change
//! whose pointer still shows the state before its record, by the same rule as for `live`. A
//! promotion or rollback to the version that shadows ends the shadowing: its record keeps what
//! the shadowing measured (`shadow`: the version, both thresholds, and the figures the caller
//! passes, [`Promotion::shadow_figures`]), then the live pointer moves, then the shadow pointer
//! is removed.
//!
//! Uploads are recorded in the history too (`action: "upload"`), so that it says who stored
//! each version and with which SHA-256; an upload repeated with identical bytes writes nothing.
//! Every version a promotion, rollback or comparison reads is checked against that digest
//! first, so a file changed under its label after it was stored is refused, never promoted.
//!
//! This module knows nothing of HTTP and nothing of the in-memory [`crate::registry::Registry`]:
//! callers that serve models may swap in the [`Model`] an outcome carries at once
//! ([`crate::registry::Registry::set_live`]), and the watcher ([`crate::registry::watch`])
//! brings every other replica along. Every function here does blocking file I/O and may wait
//! up to [`LOCK_WAIT`] for the lock, so an async caller runs it on a blocking thread.

use std::path::{Path, PathBuf};
use std::time::Duration;

use serde::Serialize;

use super::gate::{self, ContractChange, GateError, Novelty};
use super::shadow::{check_shadowable, CannotShadow, ShadowFigures, ShadowNote};
use super::store::{
    atomic, Action, HistoryRecord, HistoryWarning, ModelDir, ModelLock, StoreError,
};
use crate::evaluate::evidence::{Evidence, EvidenceError, EvidenceNote};
use crate::model::Model;

/// How long an operation waits for another promoter to release the model's lock.
pub const LOCK_WAIT: Duration = Duration::from_secs(30);

/// Why a lifecycle operation did nothing.
#[derive(Debug, thiserror::Error)]
pub enum LifecycleError {
    /// The candidate did not pass the gate.
    #[error(transparent)]
    Gate(#[from] GateError),
    /// The directory could not be read or written.
    #[error(transparent)]
    Store(#[from] StoreError),
    /// The evaluation report offered as evidence is not one, or evaluated another model,
    /// version or file.
    #[error(transparent)]
    Evidence(#[from] EvidenceError),
    /// No directory for the model.
    #[error("there is no model '{name}' in {}", root.display())]
    UnknownModel {
        /// The model's name: its folder under the model directory.
        name: String,
        /// The model directory searched.
        root: PathBuf,
    },
    /// No file for the version.
    #[error("model '{name}' has no version '{version}' (stored: {})", listed(.stored))]
    UnknownVersion {
        /// The model's name: its folder under the model directory.
        name: String,
        /// The missing version.
        version: String,
        /// The versions that are stored.
        stored: Vec<String>,
    },
    /// A rollback of a model with no live version.
    #[error("model '{name}' has no live version, so there is nothing to roll back")]
    NoLiveVersion {
        /// The model's name: its folder under the model directory.
        name: String,
    },
    /// A rollback with no earlier version in the history.
    #[error("model '{name}' has no earlier live version to roll back to ('{live}' is live and the history holds no promotion still in effect)")]
    NothingToRollBack {
        /// The model's name: its folder under the model directory.
        name: String,
        /// The version `NAME/live` named at the time.
        live: String,
    },
    /// The live version could not be loaded, so the candidate cannot be compared with it.
    #[error("the live version '{live}' of '{name}' cannot be loaded to compare contracts ({problem}); allow breaking changes to promote without the comparison")]
    LiveUnreadable {
        /// The model's name: its folder under the model directory.
        name: String,
        /// The version `NAME/live` named at the time.
        live: String,
        /// Why it could not be loaded.
        problem: String,
    },
    /// A shadow set for a model with no live version.
    #[error(
        "model '{name}' has no live version, so nothing can shadow it; promote a version first"
    )]
    NothingToShadow {
        /// The model's name: its folder under the model directory.
        name: String,
    },
    /// The candidate cannot shadow the live version.
    #[error(transparent)]
    CannotShadow(#[from] CannotShadow),
    /// A shadow ended for a model that has none.
    #[error("model '{name}' has no shadow in the model directory")]
    NoShadow {
        /// The model's name: its folder under the model directory.
        name: String,
    },
    /// The version a rollback would return to does not pass the gate.
    #[error("cannot roll '{name}' back to '{target}', so '{live}' stays live: {problem}")]
    RollbackTargetInvalid {
        /// The model's name: its folder under the model directory.
        name: String,
        /// The live version, which keeps serving.
        live: String,
        /// The version the rollback would return to.
        target: String,
        /// Why it cannot go live.
        problem: Box<LifecycleError>,
    },
}

fn listed(versions: &[String]) -> String {
    if versions.is_empty() {
        "none".into()
    } else {
        versions.join(", ")
    }
}

/// The result of [`upload`].
#[derive(Debug, Clone, Serialize)]
pub struct Uploaded {
    /// The model's name: its folder under the model directory.
    pub name: String,
    /// The version label it is stored under, `NAME/versions/VERSION.json`.
    pub version: String,
    /// `new` if written now, `already_stored` if the identical bytes were there.
    pub novelty: Novelty,
    /// The live version it was compared with, if any.
    pub compared_with: Option<String>,
    /// Contract changes from the live version, allowed by `allow_breaking` (else empty).
    pub changes: Vec<ContractChange>,
}

/// The result of [`promote`] or [`rollback`].
#[derive(Debug, Clone, Serialize)]
pub struct Moved {
    /// The model's name: its folder under the model directory.
    pub name: String,
    /// `promote` or `rollback`.
    pub action: Action,
    /// The version live before, if any.
    pub from: Option<String>,
    /// The version live now.
    pub to: String,
    /// `false` when the version was already live and nothing was written.
    pub changed: bool,
    /// Contract changes from the old live version (allowed, or made by a rollback).
    pub changes: Vec<ContractChange>,
    /// The history record written, if any.
    pub record: Option<HistoryRecord>,
    /// The validated model now live, for a caller that serves it to swap in at once.
    #[serde(skip)]
    pub model: Model,
}

/// The result of [`set_shadow`] or [`end_shadow`].
#[derive(Debug, Clone, Serialize)]
pub struct ShadowMoved {
    /// The model's name: its folder under the model directory.
    pub name: String,
    /// The version `NAME/live` names: the one the shadow is compared with.
    pub live: String,
    /// The version that shadowed before, if any.
    pub from: Option<String>,
    /// The version that shadows now, if any.
    pub to: Option<String>,
    /// `false` when the shadow already was what was asked and nothing was written.
    pub changed: bool,
    /// The history record written, if any.
    pub record: Option<HistoryRecord>,
    /// The live version, validated (for the caller's report of contract changes).
    #[serde(skip)]
    pub live_model: Model,
    /// The shadow version now, validated.
    #[serde(skip)]
    pub shadow_model: Option<Model>,
}

/// What a promotion takes beyond the version: [`promote`] takes the defaults but for
/// `allow_breaking`, `who` and `reason`.
#[derive(Debug, Clone, Copy, Default)]
pub struct Promotion<'a> {
    /// Promote even if the contract changes.
    pub allow_breaking: bool,
    /// Who, for the history.
    pub who: &'a str,
    /// Why, for the history.
    pub reason: Option<&'a str>,
    /// An evaluation report of the version.
    pub evidence: Option<&'a Evidence>,
    /// What the caller measured of the version's shadowing, if it is the shadow version:
    /// kept in the history line when the promotion ends the shadowing.
    pub shadow_figures: Option<&'a ShadowFigures>,
}

/// The result of [`history`].
#[derive(Debug, Clone, Serialize)]
pub struct HistoryView {
    /// The model's name: its folder under the model directory.
    pub name: String,
    /// What the `live` file names now.
    pub live: Option<String>,
    /// Where a rollback would go now.
    pub rollback_to: Option<String>,
    /// Every readable record, oldest first.
    pub records: Vec<HistoryRecord>,
    /// Skipped lines, and a live pointer the history does not account for.
    #[serde(serialize_with = "as_messages")]
    pub warnings: Vec<ViewWarning>,
}

/// A warning about a history.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum ViewWarning {
    /// A line of the file was skipped.
    #[error(transparent)]
    Line(#[from] HistoryWarning),
    /// The history records a move the pointer does not show yet.
    #[error("the history's last record moves the model to '{recorded}' but the live pointer still names '{}': a promotion or rollback was interrupted (or is in progress); the next promote, rollback, `ogive history` or server start completes it", .pointer.as_deref().unwrap_or("nothing"))]
    PointerBehind {
        /// Where the history leaves the model.
        recorded: String,
        /// What the `live` file names.
        pointer: Option<String>,
    },
    /// The live pointer differs from where the history leaves it.
    #[error("the live pointer names '{}' but the history leaves '{}' live: that change is not recorded (an interrupted promotion, or an edit made outside ogive)", .pointer.as_deref().unwrap_or("nothing"), .recorded.as_deref().unwrap_or("nothing"))]
    Unrecorded {
        /// Where the history leaves the model.
        recorded: Option<String>,
        /// What the `live` file names.
        pointer: Option<String>,
    },
}

fn as_messages<S: serde::Serializer>(warnings: &[ViewWarning], s: S) -> Result<S::Ok, S::Error> {
    s.collect_seq(warnings.iter().map(|w| w.to_string()))
}

/// What the history and the pointer together say about a model (see the module docs).
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct Lineage {
    /// The live version: what the pointer names.
    pub live: Option<String>,
    /// Where the history alone leaves the model.
    pub recorded: Option<String>,
    /// Versions to roll back to, the next one last.
    pub previous: Vec<String>,
    /// The pointer still names the `from` of the last move the history records: that move was
    /// interrupted between its record and the pointer, and [`reconcile`] completes it. `live`
    /// is then the history's version.
    pub pointer_behind: bool,
}

impl Lineage {
    /// The version a rollback would go to now.
    pub fn rollback_target(&self) -> Option<&str> {
        self.previous
            .iter()
            .rev()
            .find(|v| Some(v.as_str()) != self.live.as_deref())
            .map(String::as_str)
    }

    /// Whether the history accounts for the live pointer.
    pub fn is_recorded(&self) -> bool {
        self.live == self.recorded && !self.pointer_behind
    }
}

/// The last promotion or rollback record, if the pointer still names its `from` rather than
/// its `to`: a move recorded but not yet made (see the module docs).
pub fn interrupted_move<'a>(
    records: &'a [HistoryRecord],
    pointer: Option<&str>,
) -> Option<&'a HistoryRecord> {
    let last = records
        .iter()
        .rev()
        .find(|r| matches!(r.action, Action::Promote | Action::Rollback))?;
    (pointer != Some(last.to.as_str()) && pointer == last.from.as_deref()).then_some(last)
}

/// Move `live` to `to`, pushing the version it leaves: a promotion, recorded or not.
fn move_live(live: &mut Option<String>, previous: &mut Vec<String>, to: Option<&str>) {
    if live.as_deref() != to {
        if let Some(old) = live.take() {
            previous.push(old);
        }
        *live = to.map(str::to_string);
    }
}

/// Replay promotion and rollback records, then reconcile with the `live` file's content
/// (`pointer`, `None` when there is no `live` file).
pub fn replay(records: &[HistoryRecord], pointer: Option<&str>) -> Lineage {
    let mut live: Option<String> = None;
    let mut previous: Vec<String> = Vec::new();
    for record in records {
        match record.action {
            Action::Upload | Action::Shadow | Action::Unshadow => {}
            Action::Promote => {
                move_live(&mut live, &mut previous, record.from.as_deref());
                move_live(&mut live, &mut previous, Some(&record.to));
            }
            Action::Rollback => {
                move_live(&mut live, &mut previous, record.from.as_deref());
                previous.pop();
                live = Some(record.to.clone());
            }
        }
    }
    let recorded = live.clone();
    let pointer_behind = interrupted_move(records, pointer).is_some();
    match pointer {
        _ if pointer_behind => {}
        Some(p) => move_live(&mut live, &mut previous, Some(p)),
        // No `live` file: nothing is live, but the stack is kept for when one is promoted.
        None => live = None,
    }
    Lineage {
        live,
        recorded,
        previous,
        pointer_behind,
    }
}

/// Under `lock`, complete a move the history records but the pointer does not show yet, by
/// writing the pointer the last record names, and likewise a shadow change
/// ([`interrupted_shadow`]). Returns the move's record, or `None` when the live pointer already
/// agrees. The record's version passed the gate before it was written, so it is not checked
/// again.
fn complete_interrupted_move(lock: &ModelLock) -> Result<Option<HistoryRecord>, LifecycleError> {
    let pointer = lock.dir().read_live()?;
    let shadow = lock.dir().read_shadow()?;
    let history = lock.dir().read_history()?;
    if let Some(target) = interrupted_shadow(&history.records, shadow.as_deref()) {
        match target {
            Some(version) => lock.write_shadow(&version)?,
            None => lock.remove_shadow()?,
        }
    }
    let Some(record) = interrupted_move(&history.records, pointer.as_deref()) else {
        return Ok(None);
    };
    lock.write_live(&record.to)?;
    Ok(Some(record.clone()))
}

/// The shadow pointer before and after the last record that changed it: a shadow set
/// (`from` → `to`), ended (`from` → none), or a promotion or rollback that ended one (its
/// note's version → none).
fn shadow_change(records: &[HistoryRecord]) -> Option<(Option<&str>, Option<&str>)> {
    records.iter().rev().find_map(|r| match r.action {
        Action::Shadow => Some((r.from.as_deref(), Some(r.to.as_str()))),
        Action::Unshadow => Some((r.from.as_deref(), None)),
        Action::Promote | Action::Rollback => r
            .shadow
            .as_ref()
            .map(|note| (Some(note.version.as_str()), None)),
        Action::Upload => None,
    })
}

/// Where the shadow pointer should be, if it still shows the state before the last shadow
/// change the history records (`Some(None)`: removed): a change recorded but not yet made.
pub fn interrupted_shadow(
    records: &[HistoryRecord],
    pointer: Option<&str>,
) -> Option<Option<String>> {
    let (before, after) = shadow_change(records)?;
    (pointer != after && pointer == before).then(|| after.map(str::to_string))
}

/// Bring model `name`'s pointer into line with its history (see the module docs), waiting at
/// most `wait` for the lock. Returns the record whose move was completed, if one was. Reads
/// first without the lock, so a model that needs nothing is never locked or written (a
/// read-only directory stays untouched).
pub fn reconcile(
    root: &Path,
    name: &str,
    wait: Duration,
) -> Result<Option<HistoryRecord>, LifecycleError> {
    let dir = existing_dir(root, name)?;
    let pointer = dir.read_live()?;
    let shadow = dir.read_shadow()?;
    let records = dir.read_history()?.records;
    if interrupted_move(&records, pointer.as_deref()).is_none()
        && interrupted_shadow(&records, shadow.as_deref()).is_none()
    {
        return Ok(None);
    }
    let lock = dir.lock(wait)?;
    complete_interrupted_move(&lock)
}

fn existing_dir(root: &Path, name: &str) -> Result<ModelDir, LifecycleError> {
    let dir = ModelDir::new(root, name).map_err(|_| GateError::BadModelName(name.to_string()))?;
    if !dir.exists() {
        return Err(LifecycleError::UnknownModel {
            name: name.to_string(),
            root: root.to_path_buf(),
        });
    }
    Ok(dir)
}

/// Version `version` of model `name` as stored under `root`, read as every promotion reads it:
/// checked against the digest recorded when it was stored, and through steps 1–2 of the gate
/// (for serving a stored version that is not live, `service::stored`).
pub fn read_stored(root: &Path, name: &str, version: &str) -> Result<Model, LifecycleError> {
    load_stored(&existing_dir(root, name)?, version)
}

/// Read a stored version, checked against the digest recorded when it was stored, and gate it
/// (steps 1–2).
fn load_stored(dir: &ModelDir, version: &str) -> Result<Model, LifecycleError> {
    gate::check_labels(dir.name(), version)?;
    let bytes =
        dir.read_version_verified(version)?
            .ok_or_else(|| LifecycleError::UnknownVersion {
                name: dir.name().to_string(),
                version: version.to_string(),
                stored: dir.list_versions().unwrap_or_default(),
            })?;
    Ok(gate::check_file(dir.name(), version, &bytes)?)
}

/// Step 4 against the live version, if there is one.
fn compare_with_live(
    dir: &ModelDir,
    live: Option<&str>,
    candidate: &Model,
    allow_breaking: bool,
) -> Result<Vec<ContractChange>, LifecycleError> {
    let Some(live) = live else {
        return Ok(Vec::new());
    };
    match load_stored(dir, live) {
        Ok(live_model) => Ok(gate::check_compatible(
            &live_model,
            candidate,
            allow_breaking,
        )?),
        Err(_) if allow_breaking => Ok(Vec::new()),
        Err(problem) => Err(LifecycleError::LiveUnreadable {
            name: dir.name().to_string(),
            live: live.to_string(),
            problem: problem.to_string(),
        }),
    }
}

/// Store `bytes` as version `version` of model `name` under `root`, after the gate: valid,
/// check cases reproduce, name and version match, no different file under the label, and the
/// the same contract as the live version unless `allow_breaking`. Creates the model's directory
/// for its first version. Identical bytes already stored are accepted without writing
/// ([`Novelty::AlreadyStored`]) and without comparing covariates again: the promotion will.
pub fn upload(
    root: &Path,
    name: &str,
    version: &str,
    bytes: &[u8],
    allow_breaking: bool,
    who: &str,
    reason: Option<&str>,
) -> Result<Uploaded, LifecycleError> {
    let candidate = gate::check_file(name, version, bytes)?;
    let dir = ModelDir::new(root, name)?;
    dir.create()?;
    let lock = dir.lock(LOCK_WAIT)?;
    complete_interrupted_move(&lock)?;
    let novelty =
        gate::check_new_version(name, version, dir.read_version(version)?.as_deref(), bytes)?;
    let live = dir.read_live()?;
    let mut uploaded = Uploaded {
        name: name.to_string(),
        version: version.to_string(),
        novelty,
        compared_with: live.clone(),
        changes: Vec::new(),
    };
    if novelty == Novelty::AlreadyStored {
        // The bytes match the file; the file must still match what was stored.
        dir.verify_version(version, bytes)?;
        record_unrecorded_upload(&lock, version, bytes, who, reason)?;
        return Ok(uploaded);
    }
    uploaded.changes = compare_with_live(&dir, live.as_deref(), &candidate, allow_breaking)?;
    lock.create_version(version, bytes)?;
    lock.append_history(&HistoryRecord::upload(version, bytes, who, reason))?;
    Ok(uploaded)
}

/// A version is stored before its upload record is appended; if a crash came between the two,
/// the repeated upload (which writes no file) writes the missing record. So does the upload of
/// a version whose record carries no digest (placed by hand, or stored by an older build), so
/// that later loads are checked against it.
fn record_unrecorded_upload(
    lock: &ModelLock,
    version: &str,
    bytes: &[u8],
    who: &str,
    reason: Option<&str>,
) -> Result<(), LifecycleError> {
    let history = lock.dir().read_history()?;
    if history.recorded_digest(version).is_none() {
        lock.append_history(&HistoryRecord::upload(version, bytes, who, reason))?;
    }
    Ok(())
}

/// Make stored version `version` the live version of model `name`, after the gate (valid,
/// check cases reproduce, same contract as the live version unless `allow_breaking`).
/// Promoting the live version again succeeds with `changed: false` and writes nothing.
pub fn promote(
    root: &Path,
    name: &str,
    version: &str,
    allow_breaking: bool,
    who: &str,
    reason: Option<&str>,
) -> Result<Moved, LifecycleError> {
    promote_with_evidence(root, name, version, allow_breaking, who, reason, None)
}

/// [`promote`] with an evaluation report (`ogive evaluate --format json`) as evidence. The
/// report must have evaluated this very version (its name, its version and the SHA-256 of the
/// stored file), or nothing changes and the refusal names both. It is stored crash-safely at
/// `NAME/evidence/VERSION-TIME.json` before the history records the promotion, and the record
/// names that file, the report's SHA-256 and its AUC, Brier score and calibration slope.
/// Promoting the live version again stores nothing.
pub fn promote_with_evidence(
    root: &Path,
    name: &str,
    version: &str,
    allow_breaking: bool,
    who: &str,
    reason: Option<&str>,
    evidence: Option<&Evidence>,
) -> Result<Moved, LifecycleError> {
    let promotion = Promotion {
        allow_breaking,
        who,
        reason,
        evidence,
        shadow_figures: None,
    };
    promote_with(root, name, version, &promotion)
}

/// [`promote`] with everything a promotion may carry ([`Promotion`]): evidence as
/// [`promote_with_evidence`] stores it, and, when `version` is the shadow version, the end of
/// the shadowing with what it measured (see the module docs).
pub fn promote_with(
    root: &Path,
    name: &str,
    version: &str,
    promotion: &Promotion<'_>,
) -> Result<Moved, LifecycleError> {
    gate::check_labels(name, version)?;
    let dir = existing_dir(root, name)?;
    let lock = dir.lock(LOCK_WAIT)?;
    complete_interrupted_move(&lock)?;
    let candidate = load_stored(&dir, version)?;
    if let Some(evidence) = promotion.evidence {
        // load_stored has just read and verified this file.
        let bytes = dir.read_version_verified(version)?.unwrap_or_default();
        evidence.check_for(name, version, &bytes)?;
    }
    let live = dir.read_live()?;
    if live.as_deref() == Some(version) {
        return Ok(Moved {
            name: name.to_string(),
            action: Action::Promote,
            from: live.clone(),
            to: version.to_string(),
            changed: false,
            changes: Vec::new(),
            record: None,
            model: candidate,
        });
    }
    let changes = compare_with_live(&dir, live.as_deref(), &candidate, promotion.allow_breaking)?;
    let mut record = HistoryRecord::now(
        Action::Promote,
        live.as_deref(),
        version,
        promotion.who,
        promotion.reason,
    );
    if let Some(evidence) = promotion.evidence {
        record.evidence = Some(store_evidence(&dir, version, &record.when, evidence)?);
    }
    record.shadow = ending_shadow(&dir, live.as_deref(), &candidate, promotion.shadow_figures)?;
    move_pointer(&lock, &record)?;
    Ok(Moved {
        name: name.to_string(),
        action: Action::Promote,
        from: live,
        to: version.to_string(),
        changed: true,
        changes,
        record: Some(record),
        model: candidate,
    })
}

/// The note of the shadowing that going live with `candidate` ends, if `candidate` is the
/// shadow version: both thresholds (the live one from `live`'s file, if it still reads) and
/// `figures`.
fn ending_shadow(
    dir: &ModelDir,
    live: Option<&str>,
    candidate: &Model,
    figures: Option<&ShadowFigures>,
) -> Result<Option<ShadowNote>, LifecycleError> {
    if dir.read_shadow()?.as_deref() != Some(candidate.version()) {
        return Ok(None);
    }
    let live_model = live.and_then(|v| load_stored(dir, v).ok());
    Ok(Some(ShadowNote::of(
        live_model.as_ref(),
        candidate,
        figures.cloned(),
    )))
}

/// Return model `name` to the version that was live before the latest promotion still in
/// effect (see the module docs for the exact rule). The target must pass steps 1–2 of the
/// gate; its contract changes are reported, not refused.
pub fn rollback(
    root: &Path,
    name: &str,
    who: &str,
    reason: Option<&str>,
) -> Result<Moved, LifecycleError> {
    let dir = existing_dir(root, name)?;
    let lock = dir.lock(LOCK_WAIT)?;
    complete_interrupted_move(&lock)?;
    let live = dir
        .read_live()?
        .ok_or_else(|| LifecycleError::NoLiveVersion {
            name: name.to_string(),
        })?;
    let history = dir.read_history()?;
    let lineage = replay(&history.records, Some(&live));
    let target = lineage
        .rollback_target()
        .ok_or_else(|| LifecycleError::NothingToRollBack {
            name: name.to_string(),
            live: live.clone(),
        })?
        .to_string();
    let invalid = |problem: LifecycleError| LifecycleError::RollbackTargetInvalid {
        name: name.to_string(),
        live: live.clone(),
        target: target.clone(),
        problem: Box::new(problem),
    };
    let model = load_stored(&dir, &target).map_err(invalid)?;
    // For the report only: a live file that no longer loads does not block going back.
    let changes = load_stored(&dir, &live)
        .map(|live_model| gate::contract_changes(&live_model, &model))
        .unwrap_or_default();
    let mut record = HistoryRecord::now(Action::Rollback, Some(&live), &target, who, reason);
    record.shadow = ending_shadow(&dir, Some(&live), &model, None)?;
    move_pointer(&lock, &record)?;
    Ok(Moved {
        name: name.to_string(),
        action: Action::Rollback,
        from: Some(live),
        to: target,
        changed: true,
        changes,
        record: Some(record),
        model,
    })
}

/// The folder of a model's stored evidence, inside its directory.
pub const EVIDENCE_DIR: &str = "evidence";

/// Write the report to `NAME/evidence/VERSION-TIME.json` (temporary file, fsync, rename, fsync
/// of the folder), before the history names it.
fn store_evidence(
    dir: &ModelDir,
    version: &str,
    when: &str,
    evidence: &Evidence,
) -> Result<EvidenceNote, LifecycleError> {
    let folder = dir.path().join(EVIDENCE_DIR);
    atomic::create_directory(&folder)?;
    // 2026-12-02T15:36:24.123Z → 20261202T153624.123Z: no ':' in a file name.
    let stamp: String = when.chars().filter(|c| *c != '-' && *c != ':').collect();
    let file_name = format!("{version}-{stamp}.json");
    atomic::replace_file(&folder, &file_name, &evidence.bytes)?;
    Ok(evidence.note(&format!("{EVIDENCE_DIR}/{file_name}")))
}

/// History first, pointer second (and the shadow pointer last, when the move ends a
/// shadowing): see the module docs for why.
fn move_pointer(lock: &ModelLock, record: &HistoryRecord) -> Result<(), LifecycleError> {
    lock.append_history(record)?;
    lock.write_live(&record.to)?;
    if record.shadow.is_some() {
        lock.remove_shadow()?;
    }
    Ok(())
}

/// Make stored version `version` the shadow of model `name`'s live version: it must pass
/// steps 1–2 of the gate and be able to shadow the live version
/// ([`crate::registry::shadow::check_shadowable`]). A shadow it replaces is ended, its note
/// carrying `replaced_figures` (what the caller measured of it). Setting the shadow it already
/// has changes nothing and records nothing.
pub fn set_shadow(
    root: &Path,
    name: &str,
    version: &str,
    who: &str,
    reason: Option<&str>,
    replaced_figures: Option<&ShadowFigures>,
) -> Result<ShadowMoved, LifecycleError> {
    gate::check_labels(name, version)?;
    let dir = existing_dir(root, name)?;
    let lock = dir.lock(LOCK_WAIT)?;
    complete_interrupted_move(&lock)?;
    let candidate = load_stored(&dir, version)?;
    let live = dir
        .read_live()?
        .ok_or_else(|| LifecycleError::NothingToShadow {
            name: name.to_string(),
        })?;
    let live_model = load_stored(&dir, &live)?;
    check_shadowable(&live_model, &candidate)?;
    let before = dir.read_shadow()?;
    let mut moved = ShadowMoved {
        name: name.to_string(),
        live,
        from: before.clone(),
        to: Some(version.to_string()),
        changed: false,
        record: None,
        live_model,
        shadow_model: None,
    };
    if before.as_deref() != Some(version) {
        let mut record =
            HistoryRecord::now(Action::Shadow, before.as_deref(), version, who, reason);
        if let Some(replaced) = &before {
            record.shadow = Some(note_of(&dir, &moved.live_model, replaced, replaced_figures));
        }
        lock.append_history(&record)?;
        lock.write_shadow(version)?;
        moved.changed = true;
        moved.record = Some(record);
    }
    moved.shadow_model = Some(candidate);
    Ok(moved)
}

/// End model `name`'s shadowing: record it, with what the caller measured (`figures`), and
/// remove the shadow pointer. Refused when nothing shadows.
pub fn end_shadow(
    root: &Path,
    name: &str,
    who: &str,
    reason: Option<&str>,
    figures: Option<&ShadowFigures>,
) -> Result<ShadowMoved, LifecycleError> {
    let dir = existing_dir(root, name)?;
    let lock = dir.lock(LOCK_WAIT)?;
    complete_interrupted_move(&lock)?;
    let no_shadow = || LifecycleError::NoShadow {
        name: name.to_string(),
    };
    let shadow = dir.read_shadow()?.ok_or_else(no_shadow)?;
    let live = dir.read_live()?.ok_or_else(no_shadow)?;
    let live_model = load_stored(&dir, &live)?;
    let mut record = HistoryRecord::now(Action::Unshadow, Some(&shadow), &live, who, reason);
    record.shadow = Some(note_of(&dir, &live_model, &shadow, figures));
    lock.append_history(&record)?;
    lock.remove_shadow()?;
    Ok(ShadowMoved {
        name: name.to_string(),
        live,
        from: Some(shadow),
        to: None,
        changed: true,
        record: Some(record),
        live_model,
        shadow_model: None,
    })
}

/// The note of `version` shadowing `live`; a version that no longer reads keeps the live
/// threshold only (its own is then unknown, noted as the default).
fn note_of(
    dir: &ModelDir,
    live: &Model,
    version: &str,
    figures: Option<&ShadowFigures>,
) -> ShadowNote {
    match load_stored(dir, version) {
        Ok(shadow) => ShadowNote::of(Some(live), &shadow, figures.cloned()),
        Err(_) => ShadowNote {
            version: version.to_string(),
            thresholds: super::shadow::NotedThresholds {
                live: Some(super::shadow::threshold(live)),
                shadow: None,
            },
            figures: figures.cloned(),
        },
    }
}

/// What shadows model `name` now: the shadow pointer's version, if any, and the history's
/// records of shadows set and ended, oldest first. Reads without locking.
pub fn shadow_view(root: &Path, name: &str) -> Result<ShadowView, LifecycleError> {
    let dir = existing_dir(root, name)?;
    let history = dir.read_history()?;
    Ok(ShadowView {
        name: name.to_string(),
        live: dir.read_live()?,
        shadow: dir.read_shadow()?,
        records: history
            .records
            .into_iter()
            .filter(|r| r.shadow.is_some() || matches!(r.action, Action::Shadow | Action::Unshadow))
            .collect(),
    })
}

/// The result of [`shadow_view`].
#[derive(Debug, Clone, Serialize)]
pub struct ShadowView {
    /// The model's name: its folder under the model directory.
    pub name: String,
    /// What the `live` file names.
    pub live: Option<String>,
    /// What the `shadow` file names.
    pub shadow: Option<String>,
    /// The records that set or ended a shadow, oldest first.
    pub records: Vec<HistoryRecord>,
}

/// The history of model `name`: its records, where a rollback would go, and a warning per
/// skipped line or unrecorded change. Reads without locking; never fails on the history's
/// content.
pub fn history(root: &Path, name: &str) -> Result<HistoryView, LifecycleError> {
    let dir = existing_dir(root, name)?;
    let live = dir.read_live()?;
    let history = dir.read_history()?;
    let lineage = replay(&history.records, live.as_deref());
    let mut warnings: Vec<ViewWarning> = history.warnings.into_iter().map(Into::into).collect();
    if lineage.pointer_behind {
        warnings.push(ViewWarning::PointerBehind {
            recorded: lineage.recorded.clone().unwrap_or_default(),
            pointer: live.clone(),
        });
    } else if !lineage.is_recorded() {
        warnings.push(ViewWarning::Unrecorded {
            recorded: lineage.recorded.clone(),
            pointer: live.clone(),
        });
    }
    Ok(HistoryView {
        name: name.to_string(),
        rollback_to: lineage.rollback_target().map(str::to_string),
        live,
        records: history.records,
        warnings,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn record(action: Action, from: Option<&str>, to: &str) -> HistoryRecord {
        HistoryRecord::now(action, from, to, "test", None)
    }

    fn promote_record(from: Option<&str>, to: &str) -> HistoryRecord {
        record(Action::Promote, from, to)
    }

    #[test]
    fn rollbacks_walk_back_down_the_stack_then_stop() {
        let mut records = vec![
            promote_record(None, "v1"),
            promote_record(Some("v1"), "v2"),
            promote_record(Some("v2"), "v3"),
        ];
        let lineage = replay(&records, Some("v3"));
        assert_eq!(lineage.rollback_target(), Some("v2"));
        assert!(lineage.is_recorded());
        records.push(record(Action::Rollback, Some("v3"), "v2"));
        assert_eq!(replay(&records, Some("v2")).rollback_target(), Some("v1"));
        records.push(record(Action::Rollback, Some("v2"), "v1"));
        assert_eq!(replay(&records, Some("v1")).rollback_target(), None);
    }

    #[test]
    fn a_rollback_is_not_undone_by_another_rollback() {
        let records = vec![
            promote_record(Some("v1"), "v2"),
            record(Action::Rollback, Some("v2"), "v1"),
        ];
        assert_eq!(replay(&records, Some("v1")).rollback_target(), None);
    }

    #[test]
    fn uploads_do_not_move_the_stack() {
        let records = vec![
            record(Action::Upload, None, "v1"),
            promote_record(None, "v1"),
            record(Action::Upload, None, "v2"),
            promote_record(Some("v1"), "v2"),
            record(Action::Upload, None, "v3"),
        ];
        let lineage = replay(&records, Some("v2"));
        assert_eq!(lineage.previous, vec!["v1"]);
        assert_eq!(lineage.rollback_target(), Some("v1"));
    }

    #[test]
    fn a_pointer_moved_without_a_record_counts_as_a_promotion() {
        // The record of v2 → v3 was lost (a crash between the pointer and the history).
        let records = vec![promote_record(Some("v1"), "v2")];
        let lineage = replay(&records, Some("v3"));
        assert!(!lineage.is_recorded());
        assert_eq!(lineage.recorded.as_deref(), Some("v2"));
        assert_eq!(lineage.rollback_target(), Some("v2"));
        // A later promotion from v3 is then consistent with it.
        let records = vec![
            promote_record(Some("v1"), "v2"),
            promote_record(Some("v3"), "v4"),
        ];
        let lineage = replay(&records, Some("v4"));
        assert_eq!(lineage.previous, vec!["v1", "v2", "v3"]);
        assert!(lineage.is_recorded());
    }

    #[test]
    fn a_move_recorded_but_not_made_counts_as_made() {
        // The record of v2 → v3 was written; the crash came before the pointer moved.
        let records = vec![
            promote_record(Some("v1"), "v2"),
            promote_record(Some("v2"), "v3"),
        ];
        let lineage = replay(&records, Some("v2"));
        assert!(lineage.pointer_behind);
        assert!(!lineage.is_recorded());
        assert_eq!(lineage.live.as_deref(), Some("v3"));
        assert_eq!(lineage.rollback_target(), Some("v2"));
        assert_eq!(
            interrupted_move(&records, Some("v2")).map(|r| r.to.as_str()),
            Some("v3")
        );
        assert!(interrupted_move(&records, Some("v3")).is_none());
    }

    #[test]
    fn an_interrupted_rollback_does_not_return_to_the_version_rolled_away_from() {
        let records = vec![
            promote_record(Some("v1"), "v2"),
            promote_record(Some("v2"), "v3"),
            record(Action::Rollback, Some("v3"), "v2"),
        ];
        // The pointer still names v3: the rollback's record is the truth.
        let lineage = replay(&records, Some("v3"));
        assert_eq!(lineage.live.as_deref(), Some("v2"));
        assert_eq!(lineage.rollback_target(), Some("v1"));
    }

    #[test]
    fn an_interrupted_first_promotion_is_completed_from_no_pointer() {
        let records = vec![
            record(Action::Upload, None, "v1"),
            promote_record(None, "v1"),
        ];
        let lineage = replay(&records, None);
        assert!(lineage.pointer_behind);
        assert_eq!(lineage.live.as_deref(), Some("v1"));
    }

    #[test]
    fn a_history_that_starts_from_a_hand_written_pointer_still_rolls_back() {
        let records = vec![promote_record(Some("v0"), "v1")];
        let lineage = replay(&records, Some("v1"));
        assert_eq!(lineage.rollback_target(), Some("v0"));
    }
}
