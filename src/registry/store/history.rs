//! `history.jsonl`: one JSON object per line, appended and never rewritten, recording every
//! upload, promotion and rollback of one model, and every shadow set or ended.
//!
//! ```text
//! {"when":"2026-05-04T09:12:45.120Z","action":"promote","from":"v1","to":"v2","who":"cli:ana","reason":"refit on May data"}
//! ```
//!
//! `when` is RFC 3339 in UTC with milliseconds, `from` is `null` when nothing was live, and
//! `reason` is left out when none was given. An upload record also carries `sha256`, the
//! lower-case hex SHA-256 of the bytes stored: what every later load of that version compares
//! the file with ([`History::recorded_digest`]). Readers ignore fields they do not know, so
//! later builds may add some.
//!
//! ```text
//! {"when":"2026-05-04T09:10:02.004Z","action":"upload","from":null,"to":"v2","who":"cli:ana","sha256":"9f86d081…"}
//! ```
//!
//! A shadow set records `"action":"shadow"` with `to` the shadow version and `from` the one it
//! replaced (or `null`); a shadow ended records `"action":"unshadow"` with `from` the version
//! that stopped shadowing and `to` the live version, which alone is scored from then on. A
//! record that ends a shadowing (an unshadow, a shadow that replaced another, a promotion or
//! rollback to the shadow version) carries `shadow`, what it measured
//! ([`crate::registry::shadow::ShadowNote`]):
//!
//! ```text
//! {"when":"…","action":"promote","from":"v1","to":"v2","who":"admin:deploy","shadow":{"version":"v2","thresholds":{"live":0.5,"shadow":0.5},"figures":{"since":"…","scored":1200,"unscored":0,"mean_abs_difference":0.0123,"disagreements":31,"disagreement_rate":0.0258}}}
//! ```
//!
//! Reading never fails on content: a last line cut short by a crash is skipped with
//! [`HistoryWarning::TornLastLine`], any other unreadable line with
//! [`HistoryWarning::Unreadable`], and the warnings are returned, not printed. This module
//! does not decide what the records mean for rollback; that is [`crate::registry::lifecycle`].

use crate::evaluate::evidence::EvidenceNote;
use crate::registry::shadow::ShadowNote;
use std::fs::File;
use std::io::{Read, Seek, SeekFrom};
use std::time::SystemTime;

use crate::timestamp::rfc3339_millis;

use serde::{Deserialize, Serialize};

/// What a history record records.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Action {
    /// A version file was stored (`from` is `null`, `to` is the version).
    Upload,
    /// The live pointer moved from `from` to `to` by promotion.
    Promote,
    /// The live pointer moved back from `from` to `to` by rollback.
    Rollback,
    /// The shadow pointer was set to `to` (replacing `from`, if any).
    Shadow,
    /// The shadow pointer naming `from` was removed; `to` is the live version.
    Unshadow,
}

impl Action {
    /// The name used in the file and in answers.
    pub fn name(self) -> &'static str {
        match self {
            Action::Upload => "upload",
            Action::Promote => "promote",
            Action::Rollback => "rollback",
            Action::Shadow => "shadow",
            Action::Unshadow => "unshadow",
        }
    }
}

/// One line of `history.jsonl`.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct HistoryRecord {
    /// When, as RFC 3339 in UTC.
    pub when: String,
    /// What happened.
    pub action: Action,
    /// The version live before (for promotions and rollbacks), if any.
    #[serde(default)]
    pub from: Option<String>,
    /// The version live after (or, for an upload, the version stored).
    pub to: String,
    /// Who did it: a label such as `cli:ana` or an admin token's label.
    pub who: String,
    /// Why, if they said.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub reason: Option<String>,
    /// For an upload: the SHA-256 of the bytes stored, as 64 lower-case hex digits.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub sha256: Option<String>,
    /// For a promotion offered with an evaluation report: where the report is stored, its
    /// SHA-256 and its headline figures.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub evidence: Option<EvidenceNote>,
    /// For a record that ends a shadowing: the version, both thresholds and what was measured.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub shadow: Option<ShadowNote>,
}

impl HistoryRecord {
    /// A record stamped with the current time.
    pub fn now(
        action: Action,
        from: Option<&str>,
        to: &str,
        who: &str,
        reason: Option<&str>,
    ) -> HistoryRecord {
        HistoryRecord {
            when: rfc3339_millis(SystemTime::now()),
            action,
            from: from.map(str::to_string),
            to: to.to_string(),
            who: who.to_string(),
            reason: reason.map(str::to_string),
            sha256: None,
            evidence: None,
            shadow: None,
        }
    }

    /// The upload record of `bytes` stored as version `to`, stamped with the current time and
    /// carrying their SHA-256.
    pub fn upload(to: &str, bytes: &[u8], who: &str, reason: Option<&str>) -> HistoryRecord {
        HistoryRecord {
            sha256: Some(super::sha256_hex(bytes)),
            ..HistoryRecord::now(Action::Upload, None, to, who, reason)
        }
    }
}

/// A line of the history that was skipped.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum HistoryWarning {
    /// The last line has no newline and does not parse: an append was interrupted.
    #[error("history line {line} skipped: the last record is incomplete ({bytes} bytes without an end), an append was interrupted")]
    TornLastLine {
        /// Its line number, from 1.
        line: usize,
        /// How many bytes the fragment has.
        bytes: usize,
    },
    /// A line (not the last) that is not a record.
    #[error("history line {line} skipped: {problem}")]
    Unreadable {
        /// Its line number, from 1.
        line: usize,
        /// What the parser said.
        problem: String,
    },
}

/// The readable records of a history, oldest first, and the lines that were skipped.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct History {
    /// The records, in file order.
    pub records: Vec<HistoryRecord>,
    /// One warning per skipped line.
    pub warnings: Vec<HistoryWarning>,
}

impl History {
    /// The SHA-256 recorded when `version` was stored: that of its last upload record carrying
    /// one. `None` for a version placed by hand or stored by a build that did not record it.
    pub fn recorded_digest(&self, version: &str) -> Option<&str> {
        self.records
            .iter()
            .rev()
            .filter(|r| r.action == Action::Upload && r.to == version)
            .find_map(|r| r.sha256.as_deref())
    }
}

/// Parse the bytes of a `history.jsonl`. Blank lines are ignored. A last line without its
/// newline is kept if it parses (a hand-written file may lack the final newline) and skipped
/// with a warning if not.
pub fn parse(bytes: &[u8]) -> History {
    let mut history = History::default();
    let complete = bytes.ends_with(b"\n");
    let lines: Vec<&[u8]> = bytes.split(|&b| b == b'\n').collect();
    // `split` yields an empty piece after a final newline; it is not a line.
    let count = if complete {
        lines.len() - 1
    } else {
        lines.len()
    };
    for (index, raw) in lines.iter().take(count).enumerate() {
        let line = index + 1;
        if raw.iter().all(u8::is_ascii_whitespace) {
            continue;
        }
        match serde_json::from_slice::<HistoryRecord>(raw) {
            Ok(record) => history.records.push(record),
            Err(_) if !complete && line == count => {
                history.warnings.push(HistoryWarning::TornLastLine {
                    line,
                    bytes: raw.len(),
                });
            }
            Err(e) => history.warnings.push(HistoryWarning::Unreadable {
                line,
                problem: e.to_string(),
            }),
        }
    }
    history
}

/// Whether a non-empty file's last byte is something other than a newline.
pub(super) fn ends_without_newline(file: &mut File) -> std::io::Result<bool> {
    let length = file.seek(SeekFrom::End(0))?;
    if length == 0 {
        return Ok(false);
    }
    file.seek(SeekFrom::End(-1))?;
    let mut last = [0u8; 1];
    file.read_exact(&mut last)?;
    Ok(last[0] != b'\n')
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_torn_last_line_is_skipped_with_a_warning_and_the_rest_kept() {
        let good = r#"{"when":"t","action":"promote","from":null,"to":"v1","who":"a"}"#;
        let bytes = format!("{good}\n{{\"when\":\"t\",\"act");
        let history = parse(bytes.as_bytes());
        assert_eq!(history.records.len(), 1);
        assert_eq!(
            history.warnings,
            vec![HistoryWarning::TornLastLine { line: 2, bytes: 16 }]
        );
    }

    #[test]
    fn a_complete_last_line_without_newline_is_kept() {
        let good = r#"{"when":"t","action":"rollback","from":"v2","to":"v1","who":"a"}"#;
        let history = parse(good.as_bytes());
        assert_eq!(history.records.len(), 1);
        assert!(history.warnings.is_empty());
    }

    #[test]
    fn bad_bytes_in_the_middle_are_skipped_not_fatal() {
        let good = r#"{"when":"t","action":"upload","to":"v1","who":"a"}"#;
        let bytes = [good.as_bytes(), b"\n\xff\xfe{\n\n", good.as_bytes(), b"\n"].concat();
        let history = parse(&bytes);
        assert_eq!(history.records.len(), 2);
        assert_eq!(history.records[0].from, None);
        assert!(matches!(
            history.warnings.as_slice(),
            [HistoryWarning::Unreadable { line: 2, .. }]
        ));
    }
}
