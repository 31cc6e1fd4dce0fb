//! The validation gate that every upload and promotion passes, and that the watcher applies
//! before serving a file.
//!
//! A candidate passes when
//!
//! 1. its name and version label are valid and match the route (or the directory and the file
//!    name) it arrived under: a file that says it is another model or version is refused, so
//!    it can never displace that other entry;
//! 2. its bytes parse and validate as a model file, check cases included
//!    ([`Model::from_json`]);
//! 3. it does not overwrite a stored version with different bytes ([`check_new_version`]);
//!    identical bytes are accepted as a repeat of the same upload;
//! 4. its contract with callers is that of the live version ([`check_compatible`]), unless
//!    the caller allows breaking changes.
//!
//! The *contract* is what a caller sends and how it reads the answer. A contract change is
//! anything that makes a caller's observation or its reading of the answer wrong: a covariate
//! added (callers must send it), removed (the old field is now refused as unknown), changed in
//! kind (the accepted values change), in levels (a removed level is refused; an added one
//! appears in effects), in reference level (every level effect is measured from a different
//! level), or in unit (the same field now means a different number); a decision threshold
//! changed, added or dropped (`above_threshold` flips, appears or disappears); bands changed
//! (`band` names or bounds move, or `band` disappears); and the outcome's meaning (the
//! probability is of something else). Training ranges, terms, coefficients, the link, the
//! description and the provenance may change freely: callers send the same observations and
//! read the same fields.
//!
//! Each change says what callers must do if it goes live ([`ContractChange`]'s `Display`)
//! and how a refit keeps the contract instead ([`ContractChange::to_keep`]); a refusal adds
//! how to override it ([`OVERRIDE`]).
//!
//! This module is pure: bytes and models in, verdicts out. It does no I/O.

use std::fmt;

use serde::Serialize;

use crate::model::file::Band;
use crate::model::{is_model_name, is_version_label, CovariateKind, Model, ModelError};

/// How to put a breaking candidate live anyway, on each surface that can.
pub const OVERRIDE: &str = "to put it live anyway and change the callers, allow breaking changes: '?allow_breaking=true' on an upload, '\"allow_breaking\": true' in a promotion's body, or 'ogive promote --allow-breaking'";

/// Why a candidate was refused.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum GateError {
    /// The model name of the route (or directory) is not a model name.
    #[error("'{0}' is not a valid model name (lower-case letters, digits and '-', starting with a letter, at most 64)")]
    BadModelName(String),
    /// The version label of the route (or file name) is not a version label.
    #[error("'{0}' is not a valid version label (letters, digits, '.', '_' and '-', starting with a letter or digit, at most 64)")]
    BadVersionLabel(String),
    /// The bytes are not a valid model file, or its check cases do not reproduce.
    #[error("version '{version}' of '{name}' is not a valid model file: {error}")]
    Invalid {
        /// The model name it was offered as.
        name: String,
        /// The version label it was offered as.
        version: String,
        /// What is wrong, and in which field (boxed: it is large and refusals are rare).
        error: Box<ModelError>,
    },
    /// A list in the file is longer than serving can afford (`registry::limits`).
    #[error("version '{version}' of '{name}' is too large to serve: {limit}")]
    TooLarge {
        /// The model name it was offered as.
        name: String,
        /// The version label it was offered as.
        version: String,
        /// The limit passed.
        limit: super::limits::TooLarge,
    },
    /// The file's `name` is not the model it was offered as.
    #[error("the file's name is '{in_file}' but it was offered as model '{expected}'")]
    NameMismatch {
        /// The name of the route or directory.
        expected: String,
        /// The `name` field of the file.
        in_file: String,
    },
    /// The file's `version` is not the version it was offered as.
    #[error("the file's version is '{in_file}' but it was offered as version '{expected}'")]
    VersionMismatch {
        /// The label of the route or file name.
        expected: String,
        /// The `version` field of the file.
        in_file: String,
    },
    /// A different file is already stored under this version label.
    #[error("version '{version}' of '{name}' is already stored with different content; versions are immutable, so upload this file under a new version label")]
    VersionExists {
        /// The model's name: its folder under the model directory.
        name: String,
        /// The label.
        version: String,
    },
    /// The candidate's contract with callers differs from the live version's.
    #[error("version '{candidate}' of '{name}' changes the contract with callers of live version '{live}', so it is refused unless breaking changes are allowed; if it went live, callers would have to:{}\nto keep the contract instead, refit the candidate:{}\n{OVERRIDE}", bullet_list(.changes), keep_list(.changes))]
    Breaking {
        /// The model's name: its folder under the model directory.
        name: String,
        /// The live version's label.
        live: String,
        /// The candidate's label.
        candidate: String,
        /// Every difference, in the order of [`contract_changes`].
        changes: Vec<ContractChange>,
    },
}

fn bullet_list(changes: &[ContractChange]) -> String {
    changes.iter().map(|c| format!("\n  - {c}")).collect()
}

fn keep_list(changes: &[ContractChange]) -> String {
    changes
        .iter()
        .map(|c| format!("\n  - {}", c.to_keep()))
        .collect()
}

/// One difference between the contract of the live version and a candidate's. Its `Display`
/// says what callers must change; [`ContractChange::to_keep`] how a refit avoids it.
#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(tag = "change", rename_all = "snake_case")]
pub enum ContractChange {
    /// The candidate has a covariate the live version lacks.
    Added {
        /// The covariate's name, as callers send it.
        covariate: String,
        /// Its kind in the candidate: continuous, count, binary or categorical.
        kind: CovariateKind,
    },
    /// The candidate has a covariate the live version lacks, and announces it (the model
    /// file's `announces`): the live version has accepted the field since the candidate was
    /// stored, so callers could send it before the promotion. Not a breaking change.
    Announced {
        /// The covariate's name, as callers send it.
        covariate: String,
        /// Its kind in the candidate: continuous, count, binary or categorical.
        kind: CovariateKind,
    },
    /// The live version has a covariate the candidate lacks.
    Removed {
        /// The covariate's name, as callers send it.
        covariate: String,
        /// Its kind in the live version.
        kind: CovariateKind,
    },
    /// The covariate's kind differs.
    KindChanged {
        /// The covariate's name, as callers send it.
        covariate: String,
        /// Its kind in the live version.
        from: CovariateKind,
        /// Its kind in the candidate.
        to: CovariateKind,
    },
    /// Levels of a categorical covariate that only the candidate has.
    LevelsAdded {
        /// The covariate's name, as callers send it.
        covariate: String,
        /// The new levels.
        levels: Vec<String>,
    },
    /// Levels of a categorical covariate that the candidate no longer has.
    LevelsRemoved {
        /// The covariate's name, as callers send it.
        covariate: String,
        /// The dropped levels.
        levels: Vec<String>,
    },
    /// The reference level of a categorical covariate differs.
    ReferenceChanged {
        /// The covariate's name, as callers send it.
        covariate: String,
        /// The live version's reference level.
        from: String,
        /// The candidate's reference level.
        to: String,
    },
    /// The unit of a numeric covariate differs.
    UnitChanged {
        /// The covariate's name, as callers send it.
        covariate: String,
        /// The live version's unit.
        from: Option<String>,
        /// The candidate's unit.
        to: Option<String>,
    },
    /// The decision threshold differs, or only one version has one.
    ThresholdChanged {
        /// The live version's threshold.
        from: Option<f64>,
        /// The candidate's threshold.
        to: Option<f64>,
    },
    /// The named bands differ (names, bounds or their number), or only one version has them.
    BandsChanged {
        /// The live version's bands (empty: none).
        from: Vec<Band>,
        /// The candidate's bands (empty: none).
        to: Vec<Band>,
    },
    /// The outcome's stated meaning differs.
    OutcomeChanged {
        /// The live version's meaning.
        from: String,
        /// The candidate's meaning.
        to: String,
    },
}

fn unit_text(unit: &Option<String>) -> String {
    match unit {
        Some(u) => format!("'{u}'"),
        None => "no stated unit".into(),
    }
}

fn quoted(levels: &[String]) -> String {
    levels
        .iter()
        .map(|l| format!("'{l}'"))
        .collect::<Vec<_>>()
        .join(", ")
}

fn bands_text(bands: &[Band]) -> String {
    bands
        .iter()
        .map(|b| format!("{} below {}", b.name, b.below))
        .collect::<Vec<_>>()
        .join(", ")
}

fn band_flags(bands: &[Band]) -> String {
    bands
        .iter()
        .map(|b| format!("--band {}={}", b.name, b.below))
        .collect::<Vec<_>>()
        .join(" ")
}

impl ContractChange {
    /// How a refit of the candidate keeps this part of the contract, naming the `ogive fit`
    /// flag that does it.
    pub fn to_keep(&self) -> String {
        match self {
            ContractChange::Added { covariate, .. } => format!(
                "leave '{covariate}' out of --terms (callers do not send it yet), or announce it with --announce {covariate} so that callers can start sending it first"
            ),
            ContractChange::Announced { covariate, .. } => format!(
                "nothing: '{covariate}' is announced, so the live version accepts it already"
            ),
            ContractChange::Removed { covariate, .. } => {
                format!("keep '{covariate}' in --terms")
            }
            ContractChange::KindChanged {
                covariate, from, ..
            } => match from {
                CovariateKind::Categorical => format!("name '{covariate}' with --categorical"),
                _ => format!(
                    "fit '{covariate}' as a {} covariate again (not named with --categorical)",
                    from.name()
                ),
            },
            ContractChange::LevelsAdded { covariate, levels } => format!(
                "fit on data in which '{covariate}' takes no level(s) {}",
                quoted(levels)
            ),
            ContractChange::LevelsRemoved { covariate, levels } => format!(
                "fit on data in which '{covariate}' still takes level(s) {}",
                quoted(levels)
            ),
            ContractChange::ReferenceChanged {
                covariate, from, ..
            } => {
                format!("--categorical {covariate}={from}")
            }
            ContractChange::UnitChanged {
                covariate, from, ..
            } => match from {
                Some(unit) => format!("--unit '{covariate}={unit}'"),
                None => format!("no --unit for '{covariate}'"),
            },
            ContractChange::ThresholdChanged { from, .. } => match from {
                Some(t) => format!("--threshold {t}"),
                None => "no --threshold".into(),
            },
            ContractChange::BandsChanged { from, .. } if from.is_empty() => "no --band".into(),
            ContractChange::BandsChanged { from, .. } => band_flags(from),
            ContractChange::OutcomeChanged { from, .. } => {
                format!("--outcome-meaning '{from}'")
            }
        }
    }
}

impl fmt::Display for ContractChange {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            ContractChange::Added { covariate, kind } => write!(
                f,
                "send the new {} covariate '{covariate}' in every observation",
                kind.name()
            ),
            ContractChange::Announced { covariate, kind } => write!(
                f,
                "send the announced {} covariate '{covariate}' in every observation (the live version accepts and ignores it meanwhile; a call without it is refused once this version is live)",
                kind.name()
            ),
            ContractChange::Removed { covariate, .. } => write!(
                f,
                "stop sending '{covariate}': the candidate has no such covariate and refuses the field"
            ),
            ContractChange::KindChanged { covariate, from, to } => write!(
                f,
                "send '{covariate}' as a {} value instead of a {} one",
                to.name(),
                from.name()
            ),
            ContractChange::LevelsAdded { covariate, levels } => write!(
                f,
                "expect new level(s) {} of '{covariate}' in answers (and send them where they apply)",
                quoted(levels)
            ),
            ContractChange::LevelsRemoved { covariate, levels } => write!(
                f,
                "stop sending level(s) {} of '{covariate}': the candidate refuses them",
                quoted(levels)
            ),
            ContractChange::ReferenceChanged { covariate, from, to } => write!(
                f,
                "read the effects of '{covariate}' as changes from level '{to}' instead of '{from}'"
            ),
            ContractChange::UnitChanged { covariate, from, to } => write!(
                f,
                "send '{covariate}' in {} instead of {}",
                unit_text(to),
                unit_text(from)
            ),
            ContractChange::ThresholdChanged { from, to } => match (from, to) {
                (Some(from), Some(to)) => write!(
                    f,
                    "read 'above_threshold' as p ≥ {to} instead of p ≥ {from}"
                ),
                (Some(from), None) => write!(
                    f,
                    "expect no 'above_threshold' in answers (the live version flags p ≥ {from}; the candidate has no threshold)"
                ),
                (None, Some(to)) => write!(
                    f,
                    "expect 'above_threshold' in answers, true when p ≥ {to}"
                ),
                (None, None) => write!(f, "expect no change of threshold"),
            },
            ContractChange::BandsChanged { from, to } => match (from.is_empty(), to.is_empty()) {
                (false, true) => write!(
                    f,
                    "expect no 'band' in answers (the live version's bands are {}; the candidate has none)",
                    bands_text(from)
                ),
                (true, false) => write!(
                    f,
                    "expect 'band' in answers: {}",
                    bands_text(to)
                ),
                _ => write!(
                    f,
                    "read 'band' as {} instead of {}",
                    bands_text(to),
                    bands_text(from)
                ),
            },
            ContractChange::OutcomeChanged { from, to } => write!(
                f,
                "read the probability as that of '{to}' instead of '{from}'"
            ),
        }
    }
}

/// Check a model name and version label (from a route or the directory) before anything is
/// read or built from them.
pub fn check_labels(name: &str, version: &str) -> Result<(), GateError> {
    if !is_model_name(name) {
        return Err(GateError::BadModelName(name.to_string()));
    }
    if !is_version_label(version) {
        return Err(GateError::BadVersionLabel(version.to_string()));
    }
    Ok(())
}

/// Steps 1 and 2 of the gate: the labels are valid, the file's lists are within the size limits
/// (`registry::limits`), the bytes validate as a model file (check cases reproduce), and the
/// file names itself `name`, version `version`.
pub fn check_file(name: &str, version: &str, bytes: &[u8]) -> Result<Model, GateError> {
    check_labels(name, version)?;
    super::limits::check_model_size(bytes).map_err(|limit| GateError::TooLarge {
        name: name.to_string(),
        version: version.to_string(),
        limit,
    })?;
    let model = Model::from_json(bytes).map_err(|error| GateError::Invalid {
        name: name.to_string(),
        version: version.to_string(),
        error: Box::new(error),
    })?;
    if model.name() != name {
        return Err(GateError::NameMismatch {
            expected: name.to_string(),
            in_file: model.name().to_string(),
        });
    }
    if model.version() != version {
        return Err(GateError::VersionMismatch {
            expected: version.to_string(),
            in_file: model.version().to_string(),
        });
    }
    Ok(model)
}

/// Whether an upload adds a version or repeats one.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Novelty {
    /// No file is stored under this label: store it.
    New,
    /// The identical bytes are already stored: nothing to write.
    AlreadyStored,
}

/// Step 3 of the gate: a stored version is never overwritten. Identical bytes are a repeat of
/// the same upload (a client retrying after a lost answer) and pass as [`Novelty::AlreadyStored`];
/// any other difference, even one that only re-formats the JSON, is refused, because the stored
/// bytes are what replicas and auditors read.
pub fn check_new_version(
    name: &str,
    version: &str,
    stored: Option<&[u8]>,
    bytes: &[u8],
) -> Result<Novelty, GateError> {
    match stored {
        None => Ok(Novelty::New),
        Some(stored) if stored == bytes => Ok(Novelty::AlreadyStored),
        Some(_) => Err(GateError::VersionExists {
            name: name.to_string(),
            version: version.to_string(),
        }),
    }
}

/// Every contract difference between `live` and `candidate`: [`covariate_changes`], then the
/// threshold, the bands and the outcome's meaning. Empty when callers need change nothing.
pub fn contract_changes(live: &Model, candidate: &Model) -> Vec<ContractChange> {
    let mut changes = covariate_changes(live, candidate);
    changes.extend(decision_changes(live, candidate));
    let (from, to) = (&live.file.outcome.meaning, &candidate.file.outcome.meaning);
    if from.trim() != to.trim() {
        changes.push(ContractChange::OutcomeChanged {
            from: from.clone(),
            to: to.clone(),
        });
    }
    changes
}

/// The threshold and band differences between `live` and `candidate`.
fn decision_changes(live: &Model, candidate: &Model) -> Vec<ContractChange> {
    let threshold = |m: &Model| m.file.decision.as_ref().and_then(|d| d.threshold);
    let bands = |m: &Model| {
        m.file
            .decision
            .as_ref()
            .map(|d| d.bands.clone())
            .unwrap_or_default()
    };
    let mut changes = Vec::new();
    let (from, to) = (threshold(live), threshold(candidate));
    if from != to {
        changes.push(ContractChange::ThresholdChanged { from, to });
    }
    let (from, to) = (bands(live), bands(candidate));
    if from != to {
        changes.push(ContractChange::BandsChanged { from, to });
    }
    changes
}

/// Every covariate difference between `live` and `candidate`: the live version's covariates in
/// order (removed, or changed in kind, unit, levels or reference), then the candidate's new
/// ones in order.
pub fn covariate_changes(live: &Model, candidate: &Model) -> Vec<ContractChange> {
    let mut changes = Vec::new();
    for old in &live.covariates {
        let Some(new) = candidate.covariates.iter().find(|c| c.name == old.name) else {
            changes.push(ContractChange::Removed {
                covariate: old.name.clone(),
                kind: old.kind,
            });
            continue;
        };
        if old.kind != new.kind {
            changes.push(ContractChange::KindChanged {
                covariate: old.name.clone(),
                from: old.kind,
                to: new.kind,
            });
            continue;
        }
        if old.kind == CovariateKind::Categorical {
            let added: Vec<String> = new
                .levels
                .iter()
                .filter(|l| !old.levels.contains(l))
                .cloned()
                .collect();
            let removed: Vec<String> = old
                .levels
                .iter()
                .filter(|l| !new.levels.contains(l))
                .cloned()
                .collect();
            if !removed.is_empty() {
                changes.push(ContractChange::LevelsRemoved {
                    covariate: old.name.clone(),
                    levels: removed,
                });
            }
            if !added.is_empty() {
                changes.push(ContractChange::LevelsAdded {
                    covariate: old.name.clone(),
                    levels: added,
                });
            }
            let (from, to) = (&old.levels[old.reference], &new.levels[new.reference]);
            if from != to {
                changes.push(ContractChange::ReferenceChanged {
                    covariate: old.name.clone(),
                    from: from.clone(),
                    to: to.clone(),
                });
            }
        } else if old.unit != new.unit {
            changes.push(ContractChange::UnitChanged {
                covariate: old.name.clone(),
                from: old.unit.clone(),
                to: new.unit.clone(),
            });
        }
    }
    for new in &candidate.covariates {
        if live.covariate_index(&new.name).is_none() {
            let covariate = new.name.clone();
            let kind = new.kind;
            changes.push(if candidate.file.announces.contains(&new.name) {
                ContractChange::Announced { covariate, kind }
            } else {
                ContractChange::Added { covariate, kind }
            });
        }
    }
    changes
}

impl ContractChange {
    /// Whether callers of the live version would break: every change but an announced
    /// covariate, which they could start sending while the candidate was stored.
    pub fn is_breaking(&self) -> bool {
        !matches!(self, ContractChange::Announced { .. })
    }
}

/// Step 4 of the gate. Returns the contract changes (empty, or allowed because
/// `allow_breaking`), or [`GateError::Breaking`] listing every one of them.
pub fn check_compatible(
    live: &Model,
    candidate: &Model,
    allow_breaking: bool,
) -> Result<Vec<ContractChange>, GateError> {
    let changes = contract_changes(live, candidate);
    if !changes.iter().any(ContractChange::is_breaking) || allow_breaking {
        return Ok(changes);
    }
    Err(GateError::Breaking {
        name: candidate.name().to_string(),
        live: live.version().to_string(),
        candidate: candidate.version().to_string(),
        changes,
    })
}
