//! How each refusal of the model lifecycle becomes problem details: one kind per reason, the
//! lifecycle's own sentence as the detail, and extension members (RFC 9457 §3.2) that let a
//! client act without parsing the sentence.
//!
//! ```text
//! invalid-label            422  the name or version of the route breaks its rule; parameter
//! invalid-model-file       422  field (the file's field, e.g. check_cases[0]), pointer (RFC 6901
//!                               into the uploaded body); for a check case that does not
//!                               reproduce also stored and computed
//! label-mismatch           422  pointer /name or /version, expected, in_file
//! version-exists           409  a different file is stored under the label
//! version-changed          409  a stored file no longer holds what was stored under its label
//! breaking-change          422  changes: [{change, …, callers_must, to_keep}], live, candidate,
//!                               to_override
//! unknown-model            404  no such model directory
//! unknown-version          404  stored: the versions there are
//! no-live-version          409  a rollback of a model nothing is live for
//! nothing-to-roll-back     409  live
//! live-unreadable          409  the live version does not load, so it cannot be compared
//! rollback-target-invalid  409  target, and the target's own problem
//! model-busy               503  another promoter holds the model's lock
//! cannot-shadow            422  the candidate is live, or needs a covariate callers do not send
//! ```
//!
//! Failures of the disk itself are 500s whose cause is logged, never sent.

use serde_json::{json, Value as Json};

use crate::evaluate::evidence::EvidenceError;
use crate::model::ModelProblem;
use crate::registry::gate::{ContractChange, GateError, OVERRIDE};
use crate::registry::lifecycle::LifecycleError;
use crate::registry::shadow::CannotShadow;
use crate::registry::store::StoreError;
use crate::service::problem::{escape_pointer_token, Kind, Problem};

/// One contract change as JSON: the gate's own fields plus `callers_must`, the sentence that
/// says what callers must change if it goes live, and `to_keep`, how a refit avoids it.
pub fn change_json(change: &ContractChange) -> Json {
    let mut value = serde_json::to_value(change).unwrap_or_else(|_| json!({}));
    if let Some(map) = value.as_object_mut() {
        map.insert("callers_must".into(), json!(change.to_string()));
        map.insert("to_keep".into(), json!(change.to_keep()));
    }
    value
}

/// Every change as JSON.
pub fn changes_json(changes: &[ContractChange]) -> Json {
    Json::Array(changes.iter().map(change_json).collect())
}

/// The RFC 6901 pointer of a model-file field path such as `terms[3].term` or
/// `covariates[0].training.level_counts`; `None` for a path it cannot read (a whole-file
/// problem, such as JSON that does not parse, names a line and column instead).
pub fn field_pointer(field: &str) -> Option<String> {
    if field.is_empty() {
        return None;
    }
    let mut pointer = String::new();
    for part in field.split('.') {
        let (key, indices) = match part.find('[') {
            Some(at) => (&part[..at], &part[at..]),
            None => (part, ""),
        };
        if key.is_empty() || !key.bytes().all(|b| b.is_ascii_alphanumeric() || b == b'_') {
            return None;
        }
        pointer.push('/');
        pointer.push_str(&escape_pointer_token(key));
        let mut rest = indices;
        while !rest.is_empty() {
            let close = rest.find(']')?;
            let index = rest.get(1..close)?;
            if !rest.starts_with('[')
                || index.is_empty()
                || !index.bytes().all(|b| b.is_ascii_digit())
            {
                return None;
            }
            pointer.push('/');
            pointer.push_str(index);
            rest = &rest[close + 1..];
        }
    }
    Some(pointer)
}

/// A name or version label of the route that breaks its rule.
fn label_problem(detail: String, parameter: &str) -> Problem {
    Problem::new(Kind::InvalidLabel, detail).parameter(parameter)
}

/// The problem for a refusal of the gate.
pub fn gate_problem(error: &GateError) -> Problem {
    let detail = error.to_string();
    match error {
        GateError::BadModelName(_) => label_problem(detail, "name"),
        GateError::BadVersionLabel(_) => label_problem(detail, "version"),
        GateError::Invalid { error, .. } => {
            let mut problem =
                Problem::new(Kind::InvalidModelFile, detail).extension("field", json!(error.field));
            if let Some(pointer) = field_pointer(&error.field) {
                problem = problem.at(pointer);
            }
            if let ModelProblem::CheckCaseMismatch {
                stored, computed, ..
            } = &error.problem
            {
                problem = problem
                    .extension("stored", json!(stored))
                    .extension("computed", json!(computed));
            }
            problem
        }
        GateError::TooLarge { limit, .. } => Problem::new(Kind::ModelTooLarge, detail)
            .at(limit.pointer.clone())
            .limit(limit.limit as u64)
            .extension("count", json!(limit.count)),
        GateError::NameMismatch { expected, in_file } => Problem::new(Kind::LabelMismatch, detail)
            .at("/name")
            .extension("expected", json!(expected))
            .extension("in_file", json!(in_file)),
        GateError::VersionMismatch { expected, in_file } => {
            Problem::new(Kind::LabelMismatch, detail)
                .at("/version")
                .extension("expected", json!(expected))
                .extension("in_file", json!(in_file))
        }
        GateError::VersionExists { .. } => Problem::new(Kind::VersionExists, detail),
        GateError::Breaking {
            live,
            candidate,
            changes,
            ..
        } => Problem::new(Kind::BreakingChange, detail)
            .extension("live", json!(live))
            .extension("candidate", json!(candidate))
            .extension("changes", changes_json(changes))
            .extension("to_override", json!(OVERRIDE)),
    }
}

/// The problem for a failure of the model directory.
pub fn store_problem(error: &StoreError) -> Problem {
    let detail = error.to_string();
    match error {
        StoreError::BadModelName(_) => label_problem(detail, "name"),
        StoreError::BadVersionLabel(_) => label_problem(detail, "version"),
        StoreError::BadPointer { .. } => Problem::new(Kind::LiveUnreadable, detail),
        StoreError::ContentChanged(changed) => Problem::new(Kind::VersionChanged, detail)
            .extension("version", json!(changed.version))
            .extension("recorded_sha256", json!(changed.recorded))
            .extension("found_sha256", json!(changed.found)),
        StoreError::Busy { .. } => Problem::new(
            Kind::ModelBusy,
            format!("{detail}; try again when the other change has finished"),
        ),
        StoreError::Io { cause, .. } => match unwritable_cause(cause) {
            Some(why) => {
                tracing::error!(error = %error, "the model directory cannot be written");
                Problem::new(Kind::StoreUnwritable, format!("{detail}: {why}"))
            }
            None => Problem::internal(error),
        },
    }
}

/// Why a write failed, when the cause is the directory rather than a bug: what an operator
/// must fix (a read-only mount, missing permissions, a full disk or quota).
fn unwritable_cause(cause: &std::io::Error) -> Option<&'static str> {
    const READ_ONLY_FILESYSTEM: i32 = 30; // EROFS
    const NO_SPACE: i32 = 28; // ENOSPC
    const QUOTA: i32 = 122; // EDQUOT
    match (cause.kind(), cause.raw_os_error()) {
        (_, Some(READ_ONLY_FILESYSTEM)) => Some("the model directory is on a read-only file system"),
        (std::io::ErrorKind::PermissionDenied, _) => Some(
            "this process may not write in the model directory (its permissions, or an immutable attribute)",
        ),
        (_, Some(NO_SPACE)) => Some("the file system of the model directory is full"),
        (_, Some(QUOTA)) => Some("the disk quota of the model directory is used up"),
        _ => None,
    }
}

/// The problem for a refusal of the lifecycle.
pub fn lifecycle_problem(error: &LifecycleError) -> Problem {
    let detail = error.to_string();
    match error {
        LifecycleError::Gate(gate) => gate_problem(gate),
        LifecycleError::Evidence(evidence) => {
            let problem = Problem::new(Kind::InvalidBody, detail).at("/evidence");
            match evidence {
                EvidenceError::OtherModel {
                    found_name,
                    found_version,
                    ..
                } => problem
                    .extension("evidence_model", json!(found_name))
                    .extension("evidence_version", json!(found_version)),
                EvidenceError::OtherFile { found, stored, .. } => problem
                    .extension("evidence_sha256", json!(found))
                    .extension("stored_sha256", json!(stored)),
                EvidenceError::NotAReport(_) => problem,
            }
        }
        LifecycleError::Store(store) => store_problem(store),
        LifecycleError::UnknownModel { name, .. } => Problem::new(
            Kind::UnknownModel,
            format!("there is no model '{name}' in the model directory"),
        ),
        LifecycleError::UnknownVersion { stored, .. } => {
            Problem::new(Kind::UnknownVersion, detail).extension("stored", json!(stored))
        }
        LifecycleError::NoLiveVersion { .. } | LifecycleError::NothingToShadow { .. } => {
            Problem::new(Kind::NoLiveVersion, detail)
        }
        LifecycleError::CannotShadow(cannot) => shadow_problem(cannot),
        LifecycleError::NoShadow { .. } => Problem::new(Kind::NoShadow, detail),
        LifecycleError::NothingToRollBack { live, .. } => {
            Problem::new(Kind::NothingToRollBack, detail).extension("live", json!(live))
        }
        LifecycleError::LiveUnreadable { live, .. } => {
            Problem::new(Kind::LiveUnreadable, detail).extension("live", json!(live))
        }
        LifecycleError::RollbackTargetInvalid {
            live,
            target,
            problem,
            ..
        } => {
            let inner = lifecycle_problem(problem);
            Problem::new(Kind::RollbackTargetInvalid, detail)
                .extension("live", json!(live))
                .extension("target", json!(target))
                .extension("target_problem", json!(inner.kind.type_uri()))
        }
    }
}

/// The problem for a candidate that cannot shadow.
pub fn shadow_problem(error: &CannotShadow) -> Problem {
    let problem = Problem::new(Kind::CannotShadow, error.to_string()).at("/version");
    match error {
        CannotShadow::IsLive { .. } => problem,
        CannotShadow::Missing { covariate, .. } | CannotShadow::KindMismatch { covariate, .. } => {
            problem.extension("covariate", json!(covariate))
        }
    }
}

#[cfg(test)]
mod tests {
    #[test]
    fn a_model_over_a_size_limit_is_refused_naming_the_limit_and_the_list() {
        let error = super::GateError::TooLarge {
            name: "lease".into(),
            version: "v2".into(),
            limit: crate::registry::limits::TooLarge {
                what: "the term list".into(),
                pointer: "/terms".into(),
                count: 300,
                limit: 256,
            },
        };
        let problem = super::gate_problem(&error);
        assert_eq!(problem.kind, super::Kind::ModelTooLarge);
        assert_eq!(problem.pointer.as_deref(), Some("/terms"));
        assert_eq!(problem.limit, Some(256));
        assert!(
            problem
                .detail
                .contains("the term list has 300 entries; the most a model may have is 256"),
            "{}",
            problem.detail
        );
    }
    #[test]
    fn an_unwritable_directory_is_named_as_the_cause_not_an_internal_error() {
        for (code, words) in [
            (30, "read-only file system"),
            (13, "may not write"),
            (1, "may not write"),
            (28, "full"),
        ] {
            let error = crate::registry::store::StoreError::Io {
                action: "create",
                path: "/models/lease/versions/.tmp".into(),
                cause: std::io::Error::from_raw_os_error(code),
            };
            let problem = super::store_problem(&error);
            assert_eq!(problem.kind, super::Kind::StoreUnwritable, "errno {code}");
            assert!(problem.detail.contains(words), "{}", problem.detail);
            assert!(
                problem.detail.contains("/models/lease/versions"),
                "{}",
                problem.detail
            );
        }
        let other = crate::registry::store::StoreError::Io {
            action: "read",
            path: "/models".into(),
            cause: std::io::Error::from_raw_os_error(5),
        };
        assert_eq!(super::store_problem(&other).kind, super::Kind::Internal);
    }

    use super::*;

    #[test]
    fn field_paths_become_pointers() {
        assert_eq!(
            field_pointer("terms[3].term").as_deref(),
            Some("/terms/3/term")
        );
        assert_eq!(
            field_pointer("check_cases[0].probability").as_deref(),
            Some("/check_cases/0/probability")
        );
        assert_eq!(
            field_pointer("covariance[2][1]").as_deref(),
            Some("/covariance/2/1")
        );
        assert_eq!(field_pointer("name").as_deref(), Some("/name"));
        for unreadable in [
            "",
            "terms[x]",
            "terms[",
            ".name",
            "a..b",
            "(line 1, column 1)",
        ] {
            assert_eq!(field_pointer(unreadable), None, "{unreadable}");
        }
    }

    #[test]
    fn every_refusal_of_the_gate_has_a_client_error_kind() {
        let errors = [
            GateError::BadModelName("X".into()),
            GateError::BadVersionLabel("/".into()),
            GateError::NameMismatch {
                expected: "a".into(),
                in_file: "b".into(),
            },
            GateError::VersionExists {
                name: "a".into(),
                version: "v1".into(),
            },
        ];
        for error in &errors {
            let status = gate_problem(error).kind.status();
            assert!((400..500).contains(&status), "{error}: {status}");
        }
    }
}
