//! Which version shadows a model's live version: the rule for what may shadow it, how the
//! live version's values are carried over to the candidate, the decision thresholds the two
//! are compared by, and what the history keeps of a shadowing that ended.
//!
//! The shadow is held in the model directory, beside `live`, and written like it (under the
//! model's lock, after its history record, crash-safely: [`crate::registry::lifecycle`]):
//!
//! ```text
//! ROOT/NAME/shadow    the shadow version's label and a newline; absent when there is none
//! ```
//!
//! so every replica's directory follower ([`crate::registry::watch`]) serves it as it serves
//! `live`, and a restart keeps it. A candidate may differ from the live version in its
//! covariates (a breaking candidate uploaded with `allow_breaking`). The live version's values
//! are carried over by covariate name, levels by level name; a covariate the candidate has but
//! callers do not send makes it unable to shadow (refused when it is set,
//! [`check_shadowable`]), unless the candidate announces it ([`reads_announced`]); a sampled
//! observation the candidate cannot take (a level it dropped, a value outside a log term's
//! domain) is counted as unscored.
//!
//! This module does no I/O and knows nothing of HTTP or of how the comparison is measured
//! (the monitoring of a shadow counts that).

use serde::{Deserialize, Serialize};

use crate::engine::Scorer;
use crate::model::{CovariateKind, Model, Value};

/// The decision threshold of a model file that sets none.
pub const DEFAULT_THRESHOLD: f64 = 0.5;

/// Why a candidate cannot shadow the live version.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum CannotShadow {
    /// The candidate is the live version.
    #[error("version '{version}' is the live version of '{model}'; a shadow is another version scored beside it")]
    IsLive {
        /// The model's name: its folder under the model directory.
        model: String,
        /// The version asked to shadow, which is live already.
        version: String,
    },
    /// The candidate needs a covariate that callers of the live version do not send.
    #[error("version '{candidate}' needs covariate '{covariate}', which callers of live version '{live}' do not send, so it cannot be scored on their requests; a version that announces it (ogive fit --announce {covariate}) is shadowed on the calls that send it")]
    Missing {
        /// The version label of the candidate refused as a shadow.
        candidate: String,
        /// The version `NAME/live` named at the time.
        live: String,
        /// The covariate's name, as callers send it.
        covariate: String,
    },
    /// A covariate is categorical in one version and numeric in the other.
    #[error("covariate '{covariate}' is {live_kind} in live version '{live}' but {candidate_kind} in version '{candidate}', so its values cannot be carried over")]
    KindMismatch {
        /// The version label of the candidate refused as a shadow.
        candidate: String,
        /// The version `NAME/live` named at the time.
        live: String,
        /// The covariate's name, as callers send it.
        covariate: String,
        /// Its kind in the live version.
        live_kind: &'static str,
        /// Its kind in the candidate.
        candidate_kind: &'static str,
    },
}

/// Where a candidate's covariate value comes from in the live version's values.
#[derive(Debug, Clone)]
pub(crate) enum Source {
    /// The number at this live covariate index.
    Number(usize),
    /// The level at this live covariate index, mapped to the candidate's level index.
    Level(usize, Vec<Option<usize>>),
}

/// How to build a candidate's values from the live version's values.
#[derive(Debug, Clone)]
pub(crate) enum Translation {
    /// The covariates are the same, in the same order, with the same levels.
    Identity,
    /// One source per candidate covariate.
    Mapped(Vec<Source>),
}

fn same_layout(live: &Model, candidate: &Model) -> bool {
    live.covariates.len() == candidate.covariates.len()
        && live
            .covariates
            .iter()
            .zip(&candidate.covariates)
            .all(|(a, b)| a.name == b.name && a.kind == b.kind && a.levels == b.levels)
}

pub(crate) fn translation(live: &Model, candidate: &Model) -> Result<Translation, CannotShadow> {
    if same_layout(live, candidate) {
        return Ok(Translation::Identity);
    }
    let mut sources = Vec::with_capacity(candidate.covariates.len());
    for covariate in &candidate.covariates {
        let Some(j) = live.covariate_index(&covariate.name) else {
            return Err(CannotShadow::Missing {
                candidate: candidate.version().to_string(),
                live: live.version().to_string(),
                covariate: covariate.name.clone(),
            });
        };
        let old = &live.covariates[j];
        let categorical = (
            old.kind == CovariateKind::Categorical,
            covariate.kind == CovariateKind::Categorical,
        );
        sources.push(match categorical {
            (false, false) => Source::Number(j),
            (true, true) => Source::Level(
                j,
                old.levels
                    .iter()
                    .map(|l| covariate.levels.iter().position(|m| m == l))
                    .collect(),
            ),
            _ => {
                return Err(CannotShadow::KindMismatch {
                    candidate: candidate.version().to_string(),
                    live: live.version().to_string(),
                    covariate: covariate.name.clone(),
                    live_kind: old.kind.name(),
                    candidate_kind: covariate.kind.name(),
                })
            }
        });
    }
    Ok(Translation::Mapped(sources))
}

/// Whether `candidate` can shadow `live`: it is another version, and every covariate it needs
/// can be carried over from what callers of `live` send.
pub fn check_shadowable(live: &Model, candidate: &Model) -> Result<(), CannotShadow> {
    if live.version() == candidate.version() {
        return Err(CannotShadow::IsLive {
            model: live.name().to_string(),
            version: live.version().to_string(),
        });
    }
    if reads_announced(live, candidate) {
        return Ok(());
    }
    translation(live, candidate).map(|_| ())
}

/// Whether `candidate` needs covariates that `live` lacks and announces every one of them
/// (`registry::announce`): such a shadow parses each request itself and is scored on the
/// observations that send them ([`crate::monitoring::shadow::Shadowing::compare_parsed`]).
pub fn reads_announced(live: &Model, candidate: &Model) -> bool {
    let mut new = candidate
        .covariates
        .iter()
        .filter(|c| live.covariate_index(&c.name).is_none())
        .peekable();
    new.peek().is_some() && new.all(|c| candidate.file.announces.contains(&c.name))
}

impl Translation {
    /// The candidate's probability for one observation of the live version's values, or
    /// `None` if the candidate cannot take it.
    pub(crate) fn probability(
        &self,
        candidate: &Model,
        observation: &[Value],
        buffer: &mut Vec<Value>,
    ) -> Option<f64> {
        let values: &[Value] = match self {
            Translation::Identity => observation,
            Translation::Mapped(sources) => {
                buffer.clear();
                for source in sources {
                    buffer.push(match source {
                        Source::Number(j) => match observation[*j] {
                            Value::Number(x) => Value::Number(x),
                            _ => return None,
                        },
                        Source::Level(j, levels) => match observation[*j] {
                            Value::Level(l) => Value::Level(levels.get(l).copied().flatten()?),
                            _ => return None,
                        },
                    });
                }
                buffer
            }
        };
        candidate.check_values(values).ok()?;
        let p = Scorer::probability(candidate, values);
        p.is_finite().then_some(p)
    }
}

/// The decision threshold of `model`: its file's, or [`DEFAULT_THRESHOLD`].
pub fn threshold(model: &Model) -> f64 {
    model
        .file
        .decision
        .as_ref()
        .and_then(|d| d.threshold)
        .unwrap_or(DEFAULT_THRESHOLD)
}

/// The decision thresholds of a shadowing: each version decides by its own.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct NotedThresholds {
    /// The live version's (absent when its file could no longer be read).
    pub live: Option<f64>,
    /// The shadow version's (absent when its file could no longer be read).
    pub shadow: Option<f64>,
}

/// What one serving process measured of a shadowing, as its admin report gives it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ShadowFigures {
    /// When that process began counting (RFC 3339, UTC).
    #[serde(default)]
    pub since: Option<String>,
    /// Observations scored by the shadow.
    pub scored: u64,
    /// Sampled observations it could not score.
    pub unscored: u64,
    /// The mean of |q − p| over the scored observations; `null` before the first.
    pub mean_abs_difference: Option<f64>,
    /// Observations on which the two versions decided differently.
    pub disagreements: u64,
    /// `disagreements / scored`; `null` before the first.
    pub disagreement_rate: Option<f64>,
}

/// What the history keeps of a shadowing that ended (cleared, replaced, or promoted): the
/// version, both thresholds, and the figures of the process that ended it, when it had any
/// (a command run on the directory itself has none: the figures live in the serving
/// processes, and in the fleet's series).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ShadowNote {
    /// The version that was shadowing.
    pub version: String,
    /// The thresholds the disagreements were counted with.
    pub thresholds: NotedThresholds,
    /// The ending process's figures.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub figures: Option<ShadowFigures>,
}

// Every figure is a finite count or mean (|q − p| ≤ 1), and JSON has no NaN, so equality is
// reflexive.
impl Eq for ShadowNote {}

impl ShadowNote {
    /// The note of `candidate` shadowing `live` (`None` when the live file no longer reads),
    /// with `figures` if the caller measured any.
    pub fn of(
        live: Option<&Model>,
        candidate: &Model,
        figures: Option<ShadowFigures>,
    ) -> ShadowNote {
        ShadowNote {
            version: candidate.version().to_string(),
            thresholds: NotedThresholds {
                live: live.map(threshold),
                shadow: Some(threshold(candidate)),
            },
            figures,
        }
    }
}
