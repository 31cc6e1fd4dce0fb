//! The evaluation report: what `ogive evaluate` prints (text) or records (JSON, the evidence
//! a promotion can carry), and the section `ogive describe --data` adds when the data carry
//! the model's outcome. One [`EvaluationReport`] value feeds both renderings, so the two
//! formats always hold the same numbers.
//!
//! The JSON names the data file by its SHA-256 and each model by name, version and the SHA-256
//! of its file, so a reader (or the promotion gate) can tell which rows and which model a
//! figure belongs to. Rendering computes nothing.

use std::fmt::Write as _;

use serde::Serialize;

use crate::batch::WarningTally;
use crate::model::Model;
use crate::report::axis::format_p_value;
use crate::report::CAUTIONS;

use super::{Bounds, Comparison, ModelEvaluation};

/// The `report` field of an evaluation report's JSON.
pub const REPORT_KIND: &str = "ogive-evaluation";

/// The JSON layout's version.
pub const REPORT_FORMAT_VERSION: u32 = 1;

/// Everything an evaluation found.
#[derive(Debug, Clone, Serialize)]
pub struct EvaluationReport {
    /// Always [`REPORT_KIND`].
    pub report: &'static str,
    /// Always [`REPORT_FORMAT_VERSION`].
    pub format_version: u32,
    /// When the evaluation ran (RFC 3339, UTC).
    pub created: String,
    /// The interval level used throughout.
    pub level: f64,
    /// The labelled rows.
    pub data: DataSection,
    /// The model evaluated, then the one it is compared against (if any).
    pub models: Vec<ModelSection>,
    /// The paired comparison of the first model with the second, when there are two.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub comparison: Option<Comparison>,
    /// Plot files written, if any.
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub plots: Vec<String>,
    /// How each figure was computed.
    pub notes: Vec<String>,
    /// The cautions every report carries.
    pub cautions: Vec<String>,
}

/// The labelled rows and what was made of them.
#[derive(Debug, Clone, Serialize)]
pub struct DataSection {
    /// The file as given on the command line.
    pub path: String,
    /// SHA-256 of the file's bytes, lowercase hex.
    pub sha256: String,
    /// The file's length in bytes.
    pub bytes: u64,
    /// The outcome column's name as the header row spells it (its cells are 0/1 or false/true).
    pub outcome: String,
    /// Data rows read.
    pub rows_read: u64,
    /// Rows evaluated (for every model).
    pub rows_evaluated: u64,
    /// Rows left out (`--on-error skip`).
    pub rows_skipped: u64,
    /// Skipped rows by reason (the column at fault, or `(row shape)`).
    pub skipped_by_reason: std::collections::BTreeMap<String, u64>,
    /// The first skipped rows and why, as sentences.
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub skipped_examples: Vec<String>,
}

/// One model: who it is, how often it extrapolated on these rows, and its figures.
#[derive(Debug, Clone, Serialize)]
pub struct ModelSection {
    /// `evaluated` for the first model, `against` for the second.
    pub role: &'static str,
    /// The model's name.
    pub name: String,
    /// Its version label.
    pub version: String,
    pub link: String,
    /// Where its file was read from.
    pub file: String,
    /// SHA-256 of the file's bytes, lowercase hex.
    pub sha256: String,
    /// Extrapolation warnings over the evaluated rows.
    pub warnings: WarningShares,
    /// Every figure.
    pub figures: ModelEvaluation,
}

/// Extrapolation warnings over the evaluated rows.
#[derive(Debug, Clone, Serialize)]
pub struct WarningShares {
    /// Rows with at least one warning.
    pub rows_with_warnings: u64,
    /// Their share of the evaluated rows.
    pub share_with_warnings: f64,
    /// Rows with an unusual combination of covariates.
    pub unusual_combination: u64,
    /// Their share.
    pub share_unusual_combination: f64,
    /// Per covariate with any: rows below and above its training range.
    pub out_of_range: Vec<OutOfRange>,
}

/// One covariate's out-of-range counts.
#[derive(Debug, Clone, Serialize)]
pub struct OutOfRange {
    pub covariate: String,
    /// Rows below the training minimum.
    pub below: u64,
    /// Rows above the training maximum.
    pub above: u64,
    /// (below + above) / rows evaluated.
    pub share: f64,
}

impl WarningShares {
    /// The shares of `tally` over its rows.
    pub fn of(model: &Model, tally: &WarningTally) -> WarningShares {
        let rows = tally.rows().max(1) as f64;
        WarningShares {
            rows_with_warnings: tally.rows_with_warnings(),
            share_with_warnings: tally.rows_with_warnings() as f64 / rows,
            unusual_combination: tally.unusual_combination(),
            share_unusual_combination: tally.unusual_combination() as f64 / rows,
            out_of_range: tally
                .out_of_range()
                .map(|c| OutOfRange {
                    covariate: model.covariates[c.covariate].name.clone(),
                    below: c.below,
                    above: c.above,
                    share: (c.below + c.above) as f64 / rows,
                })
                .collect(),
        }
    }
}

/// How each figure is computed, for the report's notes.
pub fn notes() -> Vec<String> {
    [
        "Brier score: mean of (p − y)²; its interval is the mean ± q·SE over rows. Murphy's \
         decomposition over the ten reliability bins: Brier = reliability − resolution + \
         uncertainty + within-bin (the last term is what binning continuous probabilities \
         leaves over).",
        "Log loss: mean of −[y ln p + (1 − y) ln(1 − p)], with p held inside [1e-15, 1 − 1e-15].",
        "AUC: the probability that a random event scores above a random non-event (ties count \
         half), with DeLong's standard error (placements as in Sun & Xu 2014); interval ± q·SE, \
         held inside [0, 1].",
        "Calibration intercept: a in logit P(y = 1) = a + logit(p), with logit(p) as an offset \
         (0 when the mean probability matches the event rate). Calibration slope: b in \
         logit P(y = 1) = a + b·logit(p) (1 is ideal; below 1 the probabilities are too \
         extreme). Both by maximum likelihood with Wald intervals, whatever the model's link.",
        "Hosmer–Lemeshow: rows sorted by p and cut into ten groups of (nearly) equal size; \
         H = Σ (O − E)² / (E (1 − E/n)), referred to χ² with groups − 2 degrees of freedom. \
         With many rows a small departure earns a small p-value: read the reliability table \
         and the slope for its size.",
        "Reliability table: ten equal-width bins of p, each (k/10, (k+1)/10]; the observed share \
         with its Wilson interval.",
        "Comparison: per-row differences (first − second) of the squared error and the log \
         loss, mean ± q·SE; the AUC difference by DeLong's paired test. A difference is called \
         shown only when its interval leaves out 0.",
    ]
    .iter()
    .map(|s| s.to_string())
    .collect()
}

/// The cautions, owned.
pub fn cautions() -> Vec<String> {
    CAUTIONS.iter().map(|s| s.to_string()).collect()
}

fn interval(b: &Bounds, decimals: usize) -> String {
    format!("[{:.decimals$}, {:.decimals$}]", b.lower, b.upper)
}

fn percent(share: f64) -> String {
    format!("{:.2}%", 100.0 * share)
}

/// The plain-text rendering.
pub fn render_text(report: &EvaluationReport) -> String {
    let mut s = String::new();
    let level = format!("{}%", report.level * 100.0);
    let d = &report.data;
    let _ = writeln!(
        s,
        "Evaluation on labelled rows ({level} intervals throughout)"
    );
    let _ = writeln!(s);
    let _ = writeln!(
        s,
        "data      {} ({} bytes, sha256 {})",
        d.path, d.bytes, d.sha256
    );
    let _ = writeln!(
        s,
        "rows      {} read, {} evaluated, {} skipped",
        d.rows_read, d.rows_evaluated, d.rows_skipped
    );
    for (reason, count) in &d.skipped_by_reason {
        let _ = writeln!(s, "          skipped for {reason}: {count}");
    }
    for example in &d.skipped_examples {
        let _ = writeln!(s, "          e.g. {example}");
    }
    if let Some(first) = report.models.first() {
        let f = &first.figures;
        let _ = writeln!(
            s,
            "outcome   {}: {} events in {} rows, rate {:.4} {}",
            d.outcome,
            f.events,
            f.rows,
            f.event_rate,
            interval(&f.event_rate_interval, 4)
        );
    }
    for m in &report.models {
        let _ = writeln!(s);
        render_model(&mut s, m);
    }
    if let Some(c) = &report.comparison {
        let _ = writeln!(s);
        render_comparison(&mut s, report, c);
    }
    if !report.plots.is_empty() {
        let _ = writeln!(s);
        let _ = writeln!(s, "Plots");
        for p in &report.plots {
            let _ = writeln!(s, "  {p}");
        }
    }
    let _ = writeln!(s);
    let _ = writeln!(s, "How the figures are computed");
    for n in &report.notes {
        let _ = writeln!(s, "  - {n}");
    }
    let _ = writeln!(s);
    let _ = writeln!(s, "Cautions");
    for c in &report.cautions {
        let _ = writeln!(s, "  - {c}");
    }
    s
}

/// The block `ogive describe` appends when its data carry the outcome: the rows, the model's
/// figures and the notes (the describe report already carries the cautions).
pub fn render_section(report: &EvaluationReport) -> String {
    let mut s = String::new();
    let d = &report.data;
    let _ = writeln!(s);
    let _ = writeln!(
        s,
        "Evaluation on the data's outcome column '{}' ({}% intervals; as ogive evaluate)",
        d.outcome,
        report.level * 100.0
    );
    let _ = writeln!(
        s,
        "  data {} (sha256 {}): {} rows evaluated",
        d.path, d.sha256, d.rows_evaluated
    );
    for m in &report.models {
        render_model(&mut s, m);
    }
    let _ = writeln!(s, "  How the figures are computed");
    for n in &report.notes {
        let _ = writeln!(s, "    - {n}");
    }
    s
}

/// One model's block of the text report.
pub fn render_model(s: &mut String, m: &ModelSection) {
    let f = &m.figures;
    let role = if m.role == "against" {
        "compared against"
    } else {
        "evaluated"
    };
    let _ = writeln!(s, "Model {} {} ({}, {role})", m.name, m.version, m.link);
    let _ = writeln!(s, "  file sha256            {}  ({})", m.sha256, m.file);
    let _ = writeln!(
        s,
        "  rows                   {} ({} events); mean p {:.4} against event rate {:.4}",
        f.rows, f.events, f.mean_probability, f.event_rate
    );
    let _ = writeln!(
        s,
        "  AUC                    {:.4} {}  SE {:.4} (DeLong)",
        f.auc.estimate,
        interval(&f.auc.interval, 4),
        f.auc.std_error
    );
    let _ = writeln!(
        s,
        "  Brier score            {:.5} {}  SE {:.5}",
        f.brier,
        interval(&f.brier_interval.interval, 5),
        f.brier_interval.std_error
    );
    let b = &f.brier_decomposition;
    let _ = writeln!(
        s,
        "    reliability {:.5}, resolution {:.5}, uncertainty {:.5}, within-bin {:+.5}",
        b.reliability, b.resolution, b.uncertainty, b.within_bin
    );
    let _ = writeln!(
        s,
        "  log loss               {:.5} {}  SE {:.5}",
        f.log_loss,
        interval(&f.log_loss_interval.interval, 5),
        f.log_loss_interval.std_error
    );
    for (label, fit, ideal) in [
        ("calibration intercept", &f.calibration_intercept, 0.0),
        ("calibration slope    ", &f.calibration_slope, 1.0),
    ] {
        let verdict = if fit.interval.contains(ideal) {
            format!("holds {ideal}")
        } else {
            format!("leaves out {ideal}")
        };
        let _ = writeln!(
            s,
            "  {label}  {:.4} {}  SE {:.4}; the interval {verdict}",
            fit.estimate,
            interval(&fit.interval, 4),
            fit.std_error
        );
    }
    let h = &f.hosmer_lemeshow;
    let _ = writeln!(
        s,
        "  Hosmer–Lemeshow        H = {:.3}, {} df, p = {} over {} groups",
        h.statistic,
        h.degrees_of_freedom,
        if h.p_value.is_nan() {
            "not defined (fewer than three groups)".to_string()
        } else {
            format_p_value(h.p_value)
        },
        h.groups.len()
    );
    let w = &m.warnings;
    let _ = writeln!(
        s,
        "  warnings               {} of rows carry one ({} rows); unusual combination {}",
        percent(w.share_with_warnings),
        w.rows_with_warnings,
        percent(w.share_unusual_combination)
    );
    for o in &w.out_of_range {
        let _ = writeln!(
            s,
            "    out of range: {} on {} ({} below, {} above the training range)",
            percent(o.share),
            o.covariate,
            o.below,
            o.above
        );
    }
    let _ = writeln!(
        s,
        "  reliability table      bin            n   events  mean p  observed [interval]"
    );
    for bin in &f.reliability {
        let range = format!("({:.1}, {:.1}]", bin.from, bin.to);
        match (bin.mean_probability, bin.observed, bin.observed_interval) {
            (Some(mean), Some(observed), Some(wilson)) => {
                let _ = writeln!(
                    s,
                    "                         {range:<12} {:>7} {:>7}  {mean:.4}  {observed:.4} {}",
                    bin.count,
                    bin.events,
                    interval(&wilson, 4)
                );
            }
            _ => {
                let _ = writeln!(s, "                         {range:<12} {:>7}", 0);
            }
        }
    }
}

fn render_comparison(s: &mut String, report: &EvaluationReport, c: &Comparison) {
    let (first, second) = (&report.models[0], &report.models[1]);
    let _ = writeln!(
        s,
        "Comparison: {} {} − {} {} on the same {} rows",
        first.name, first.version, second.name, second.version, report.data.rows_evaluated
    );
    let a = &c.auc;
    let _ = writeln!(
        s,
        "  AUC difference         {:+.4} {}  SE {:.4}, z {:.2}, p {} (DeLong paired; correlation {:.3})",
        a.difference,
        interval(&a.interval, 4),
        a.std_error,
        a.z,
        format_p_value(a.p_value),
        a.correlation
    );
    for (label, d) in [
        ("Brier difference", &c.brier),
        ("log-loss difference", &c.log_loss),
    ] {
        let _ = writeln!(
            s,
            "  {label:<22} {:+.5} {}  SE {:.5}, p {} (mean of per-row differences)",
            d.mean,
            interval(&d.interval, 5),
            d.std_error,
            format_p_value(d.p_value)
        );
    }
    let _ = writeln!(s, "  verdict: {}", c.verdict.text);
}
