//! An evaluation report offered as evidence for a promotion: what it must hold, which model
//! and version it was computed for, and the headline figures the history line repeats.
//!
//! The gate ([`crate::registry::lifecycle::promote_with_evidence`]) refuses evidence for
//! another model, another version, or another file of the same version (the report names the
//! SHA-256 of the model file it scored with). This file reads the report; it writes nothing.

use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};

use super::report::{REPORT_FORMAT_VERSION, REPORT_KIND};

/// Why a report cannot serve as evidence.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum EvidenceError {
    /// Not an evaluation report of a layout this build reads.
    #[error("the evidence is not an ogive evaluation report: {0}")]
    NotAReport(String),
    /// Computed for another model or version.
    #[error("the evidence was computed for {found_name} {found_version}, not for {name} {version}; evaluate {name} {version} and offer that report")]
    OtherModel {
        /// The model being promoted.
        name: String,
        /// The version being promoted.
        version: String,
        /// The model the report evaluated.
        found_name: String,
        /// The version the report evaluated.
        found_version: String,
    },
    /// Computed with another file of the same name and version.
    #[error("the evidence for {name} {version} was computed with a model file of SHA-256 {found}, but the stored file's is {stored}")]
    OtherFile {
        /// The model.
        name: String,
        version: String,
        /// The digest the report names.
        found: String,
        /// The stored file's digest.
        stored: String,
    },
}

/// What the history records about the evidence of a promotion.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct EvidenceNote {
    /// The stored report, relative to the model's directory (`evidence/VERSION-TIME.json`).
    pub file: String,
    /// SHA-256 of the stored report's bytes.
    pub sha256: String,
    /// The evaluated model's AUC.
    pub auc: f64,
    /// Its Brier score.
    pub brier: f64,
    pub calibration_slope: f64,
}

// Every figure of a note is checked finite when the report is read, so equality is reflexive.
impl Eq for EvidenceNote {}

/// A report checked to be an evaluation of one model, with its headline figures.
#[derive(Debug, Clone, PartialEq)]
pub struct Evidence {
    /// The report's bytes, as they will be stored.
    pub bytes: Vec<u8>,
    /// Their SHA-256, lowercase hex.
    pub sha256: String,
    /// The evaluated model's name.
    pub name: String,
    pub version: String,
    /// SHA-256 of the model file the report scored with.
    pub model_sha256: String,
    pub auc: f64,
    /// Brier score.
    pub brier: f64,
    pub calibration_slope: f64,
}

#[derive(Deserialize)]
struct Header {
    report: String,
    format_version: u32,
    models: Vec<ModelHeader>,
}

#[derive(Deserialize)]
struct ModelHeader {
    name: String,
    version: String,
    sha256: String,
    figures: Headline,
}

#[derive(Deserialize)]
struct Headline {
    auc: Estimate,
    brier: f64,
    calibration_slope: Estimate,
}

#[derive(Deserialize)]
struct Estimate {
    estimate: f64,
}

impl Evidence {
    /// Read `bytes` as an evaluation report (the JSON of `ogive evaluate --format json`).
    pub fn read(bytes: Vec<u8>) -> Result<Evidence, EvidenceError> {
        let header: Header =
            serde_json::from_slice(&bytes).map_err(|e| EvidenceError::NotAReport(e.to_string()))?;
        if header.report != REPORT_KIND {
            return Err(EvidenceError::NotAReport(format!(
                "its \"report\" is {:?}, expected {REPORT_KIND:?}",
                header.report
            )));
        }
        if header.format_version != REPORT_FORMAT_VERSION {
            return Err(EvidenceError::NotAReport(format!(
                "format_version {} is not read by this build (it reads {REPORT_FORMAT_VERSION})",
                header.format_version
            )));
        }
        let Some(first) = header.models.into_iter().next() else {
            return Err(EvidenceError::NotAReport("it names no model".into()));
        };
        let figures = [
            ("auc", first.figures.auc.estimate),
            ("brier", first.figures.brier),
            (
                "calibration_slope",
                first.figures.calibration_slope.estimate,
            ),
        ];
        if let Some((field, _)) = figures.iter().find(|(_, v)| !v.is_finite()) {
            return Err(EvidenceError::NotAReport(format!(
                "models[0].figures.{field} is not a finite number"
            )));
        }
        Ok(Evidence {
            sha256: hex(&Sha256::digest(&bytes)),
            bytes,
            name: first.name,
            version: first.version,
            model_sha256: first.sha256,
            auc: figures[0].1,
            brier: figures[1].1,
            calibration_slope: figures[2].1,
        })
    }

    /// Refuse the evidence unless it evaluated `name` `version` from a file whose bytes are
    /// `model_file`.
    pub fn check_for(
        &self,
        name: &str,
        version: &str,
        model_file: &[u8],
    ) -> Result<(), EvidenceError> {
        if self.name != name || self.version != version {
            return Err(EvidenceError::OtherModel {
                name: name.to_string(),
                version: version.to_string(),
                found_name: self.name.clone(),
                found_version: self.version.clone(),
            });
        }
        let stored = hex(&Sha256::digest(model_file));
        if stored != self.model_sha256 {
            return Err(EvidenceError::OtherFile {
                name: name.to_string(),
                version: version.to_string(),
                found: self.model_sha256.clone(),
                stored,
            });
        }
        Ok(())
    }

    /// The history's note for this evidence stored at `file`.
    pub fn note(&self, file: &str) -> EvidenceNote {
        EvidenceNote {
            file: file.to_string(),
            sha256: self.sha256.clone(),
            auc: self.auc,
            brier: self.brier,
            calibration_slope: self.calibration_slope,
        }
    }
}

/// Lowercase hex of a digest.
pub fn hex(digest: &[u8]) -> String {
    digest.iter().map(|b| format!("{b:02x}")).collect()
}
