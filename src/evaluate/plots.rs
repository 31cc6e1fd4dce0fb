//! The evaluation's two pictures, as SVG text in the manner of `ogive describe`'s plots
//! ([`crate::report::svg`]): a reliability diagram (observed share against mean predicted
//! probability per bin, the diagonal of perfect calibration, Wilson intervals, markers whose
//! area is proportional to the bin's rows) and the ROC curve, each with one or two models.
//!
//! Both panels are the unit square, and each is a `<g class="panel">` whose data attributes
//! give its mapping from data to pixels, so a reader (or a test) can turn any vertex back into
//! numbers:
//!
//! ```text
//! px = data-left + (x − data-x-min) / (data-x-max − data-x-min) · data-width
//! py = data-top  + (data-y-max − y) / (data-y-max − data-y-min) · data-height
//! ```
//!
//! Reliability: per model a `<path class="curve" data-model="M">` through the non-empty bins and
//! one `<circle class="bin" data-model="M" data-count="n">` a bin. ROC: per model a
//! `<path class="curve" data-model="M">` whose vertices are exact points of the empirical ROC
//! curve (false-positive rate, true-positive rate) at successive thresholds, from (0, 0) to
//! (1, 1), thresholds tied within a model giving one diagonal step. Above [`ROC_VERTICES`]
//! points a vertex is kept only once either rate has moved by 1/[`ROC_VERTICES`] since the last
//! one, so a picture of a million rows stays small while every vertex drawn stays on the curve.

use std::fmt::Write as _;
use std::path::{Path, PathBuf};

use crate::report::frame::{self, Frame, HEIGHT, LEFT, TOP};
use crate::report::svg::{escape, PlotError};

use super::report::EvaluationReport;
use super::ModelRows;

/// At most about this many vertices of a ROC curve are drawn.
pub const ROC_VERTICES: usize = 1000;

const FRAME: Frame = Frame { width: 640.0 };
const SIDE: f64 = 480.0;
/// The radius of the marker of the fullest bin; the others scale by √(count / fullest).
const LARGEST_MARKER: f64 = 11.0;
const SMALLEST_MARKER: f64 = 2.0;

const COLOURS: [&str; 2] = ["#1f4e8c", "#a3470f"];
const DIAGONAL: &str = "#8a8778";

/// The points of the empirical ROC curve (false-positive rate, true-positive rate), thinned as
/// the module notes say.
pub fn roc_points(rows: &ModelRows) -> Vec<(f64, f64)> {
    let mut events = rows.event_logits().to_vec();
    let mut non_events = rows.non_event_logits().to_vec();
    // Highest score first: lowering the threshold admits rows in this order.
    events.sort_unstable_by(|a, b| b.total_cmp(a));
    non_events.sort_unstable_by(|a, b| b.total_cmp(a));
    let (m, n) = (events.len(), non_events.len());
    let step = 1.0 / ROC_VERTICES as f64;
    let mut points = vec![(0.0, 0.0)];
    let (mut last_fpr, mut last_tpr) = (0.0, 0.0);
    let (mut i, mut j) = (0, 0);
    while i < m || j < n {
        // The next threshold: the larger of the two next scores; admit every row at it.
        let threshold = match (events.get(i), non_events.get(j)) {
            (Some(&e), Some(&v)) => e.max(v),
            (Some(&e), None) => e,
            (None, Some(&v)) => v,
            (None, None) => break,
        };
        while i < m && events[i] >= threshold {
            i += 1;
        }
        while j < n && non_events[j] >= threshold {
            j += 1;
        }
        let (fpr, tpr) = (j as f64 / n as f64, i as f64 / m as f64);
        let last = i == m && j == n;
        if last || (fpr - last_fpr).max(tpr - last_tpr) >= step || m + n <= ROC_VERTICES {
            points.push((fpr, tpr));
            (last_fpr, last_tpr) = (fpr, tpr);
        }
    }
    points
}

/// A square panel showing [0, 1] × [0, 1].
struct Panel;

impl Panel {
    fn px(x: f64) -> f64 {
        LEFT + x * SIDE
    }

    fn py(y: f64) -> f64 {
        TOP + (1.0 - y) * SIDE
    }

    fn open(svg: &mut String, id: &str) {
        let _ = writeln!(
            svg,
            r#"<g class="panel" id="{id}" data-x-scale="linear" data-x-min="0" data-x-max="1" data-y-min="0" data-y-max="1" data-left="{LEFT}" data-top="{TOP}" data-width="{SIDE}" data-height="{SIDE}">"#
        );
        for k in 1..10 {
            let t = k as f64 / 10.0;
            let _ = writeln!(
                svg,
                r##"<line x1="{:.3}" y1="{TOP}" x2="{:.3}" y2="{}" stroke="#e4e4e4" stroke-width="0.6"/><line x1="{LEFT}" y1="{:.3}" x2="{}" y2="{:.3}" stroke="#e4e4e4" stroke-width="0.6"/>"##,
                Panel::px(t),
                Panel::px(t),
                TOP + SIDE,
                Panel::py(t),
                LEFT + SIDE,
                Panel::py(t)
            );
        }
        let _ = writeln!(
            svg,
            r##"<line class="diagonal" x1="{LEFT}" y1="{}" x2="{}" y2="{TOP}" stroke="{DIAGONAL}" stroke-dasharray="5 3"/>"##,
            TOP + SIDE,
            LEFT + SIDE
        );
    }

    fn path(points: impl Iterator<Item = (f64, f64)>) -> String {
        frame::path_data(points.map(|(x, y)| (Panel::px(x), Panel::py(y))))
    }

    fn close(svg: &mut String, x_label: &str, y_label: &str) {
        for k in 0..=5 {
            let t = k as f64 / 5.0;
            let label = format!("{t:.1}");
            let (x, y) = (Panel::px(t), Panel::py(t));
            let bottom = TOP + SIDE;
            let _ = writeln!(
                svg,
                r##"<line x1="{x:.3}" y1="{bottom}" x2="{x:.3}" y2="{}" stroke="#333"/><text x="{x:.3}" y="{}" text-anchor="middle">{label}</text>"##,
                bottom + 5.0,
                bottom + 19.0
            );
            let _ = writeln!(
                svg,
                r##"<line x1="{}" y1="{y:.3}" x2="{LEFT}" y2="{y:.3}" stroke="#333"/><text x="{}" y="{:.3}" text-anchor="end">{label}</text>"##,
                LEFT - 5.0,
                LEFT - 8.0,
                y + 4.0
            );
        }
        let _ = writeln!(
            svg,
            r##"<rect x="{LEFT}" y="{TOP}" width="{SIDE}" height="{SIDE}" fill="none" stroke="#333"/>"##
        );
        let _ = writeln!(
            svg,
            r#"<text x="{}" y="{}" text-anchor="middle" font-size="13">{}</text>"#,
            LEFT + SIDE / 2.0,
            TOP + SIDE + 42.0,
            escape(x_label)
        );
        let (cx, cy) = (LEFT - 52.0, TOP + SIDE / 2.0);
        let _ = writeln!(
            svg,
            r#"<text x="{cx}" y="{cy}" text-anchor="middle" font-size="13" transform="rotate(-90 {cx} {cy})">{}</text>"#,
            escape(y_label)
        );
        let _ = writeln!(svg, "</g>");
    }
}

fn head(svg: &mut String, title: &str, description: &str, subtitle: &str) {
    FRAME.open(svg, title, &escape(description));
    FRAME.heading(svg, 30.0, title);
    FRAME.subheading(svg, 52.0, None, &escape(subtitle));
}

fn legend(svg: &mut String, labels: &[String]) {
    let mut x = LEFT;
    let y = HEIGHT - 34.0;
    for (colour, label) in COLOURS.iter().zip(labels) {
        let swatch = format!(
            r#"<line x1="0" y1="0" x2="18" y2="0" stroke="{colour}" stroke-width="2.2"/><circle cx="9" cy="0" r="4" fill="{colour}"/>"#
        );
        frame::legend_entry(svg, x, y, &swatch, label);
        // Helvetica at 12 px averages about 6.5 px a character.
        x += 44.0 + 6.5 * label.chars().count() as f64;
    }
    frame::legend_entry(
        svg,
        x,
        y,
        &format!(
            r#"<line x1="0" y1="0" x2="18" y2="0" stroke="{DIAGONAL}" stroke-dasharray="5 3"/>"#
        ),
        "diagonal",
    );
}

fn labels(report: &EvaluationReport) -> Vec<String> {
    report
        .models
        .iter()
        .map(|m| format!("{} {}", m.name, m.version))
        .collect()
}

/// The reliability diagram of every model in `report`.
pub fn reliability_svg(report: &EvaluationReport) -> String {
    let mut svg = String::with_capacity(16 * 1024);
    let level = format!("{}%", report.level * 100.0);
    head(
        &mut svg,
        "Reliability: observed share against predicted probability",
        "Per bin of predicted probability (ten equal widths), the observed share of events \
         against the mean predicted probability, with Wilson intervals; marker area is \
         proportional to the bin's rows. Points on the dashed diagonal are perfectly calibrated.",
        &format!(
            "{} rows of {}; bars: {level} Wilson intervals; marker area ∝ rows in the bin",
            report.data.rows_evaluated, report.data.path
        ),
    );
    Panel::open(&mut svg, "reliability-panel");
    let fullest = report
        .models
        .iter()
        .flat_map(|m| m.figures.reliability.iter().map(|b| b.count))
        .max()
        .unwrap_or(1)
        .max(1) as f64;
    for (k, model) in report.models.iter().enumerate() {
        let colour = COLOURS[k];
        let label = escape(&format!("{} {}", model.name, model.version));
        let filled: Vec<_> = model
            .figures
            .reliability
            .iter()
            .filter_map(|b| Some((b, b.mean_probability?, b.observed?, b.observed_interval?)))
            .collect();
        let d = Panel::path(filled.iter().map(|&(_, x, y, _)| (x, y)));
        let _ = writeln!(
            svg,
            r#"<path class="curve" data-model="{label}" d="{d}" fill="none" stroke="{colour}" stroke-width="1.6"/>"#
        );
        for (bin, x, y, wilson) in filled {
            let (cx, cy) = (Panel::px(x), Panel::py(y));
            let radius =
                (LARGEST_MARKER * (bin.count as f64 / fullest).sqrt()).max(SMALLEST_MARKER);
            let _ = writeln!(
                svg,
                r#"<line class="interval" data-model="{label}" x1="{cx:.3}" y1="{:.3}" x2="{cx:.3}" y2="{:.3}" stroke="{colour}" stroke-width="1.2"/>"#,
                Panel::py(wilson.upper),
                Panel::py(wilson.lower)
            );
            let _ = writeln!(
                svg,
                r#"<circle class="bin" data-model="{label}" data-count="{}" cx="{cx:.3}" cy="{cy:.3}" r="{radius:.3}" fill="{colour}" fill-opacity="0.55" stroke="{colour}"/>"#,
                bin.count
            );
        }
    }
    Panel::close(
        &mut svg,
        "mean predicted probability",
        "observed share of events",
    );
    legend(&mut svg, &labels(report));
    frame::close(&mut svg);
    svg
}

/// The ROC curves of every model in `report`, from their rows (in the same order).
pub fn roc_svg(report: &EvaluationReport, rows: &[ModelRows]) -> String {
    let mut svg = String::with_capacity(64 * 1024);
    let aucs: Vec<String> = report
        .models
        .iter()
        .map(|m| {
            format!(
                "{} {}: AUC {:.4} [{:.4}, {:.4}]",
                m.name,
                m.version,
                m.figures.auc.estimate,
                m.figures.auc.interval.lower,
                m.figures.auc.interval.upper
            )
        })
        .collect();
    head(
        &mut svg,
        "ROC curve",
        "True-positive rate against false-positive rate as the threshold on the predicted \
         probability falls; the dashed diagonal is a model that ranks no better than chance.",
        &aucs.join("; "),
    );
    Panel::open(&mut svg, "roc-panel");
    for (k, (model, model_rows)) in report.models.iter().zip(rows).enumerate() {
        let label = escape(&format!("{} {}", model.name, model.version));
        let d = Panel::path(roc_points(model_rows).into_iter());
        let _ = writeln!(
            svg,
            r#"<path class="curve" data-model="{label}" d="{d}" fill="none" stroke="{}" stroke-width="2"/>"#,
            COLOURS[k]
        );
    }
    Panel::close(
        &mut svg,
        "false-positive rate (1 − specificity)",
        "true-positive rate (sensitivity)",
    );
    legend(&mut svg, &labels(report));
    frame::close(&mut svg);
    svg
}

/// Write `reliability.svg` and `roc.svg` into `folder` (created if needed); returns the paths.
pub fn write_plots(
    folder: &Path,
    report: &EvaluationReport,
    rows: &[ModelRows],
) -> Result<Vec<PathBuf>, PlotError> {
    frame::write_all(
        folder,
        [
            Ok(("reliability.svg".to_string(), reliability_svg(report))),
            Ok(("roc.svg".to_string(), roc_svg(report, rows))),
        ],
    )
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::evaluate::Forecast;

    fn rows(scored: &[(f64, bool)]) -> ModelRows {
        let mut rows = ModelRows::new();
        for &(p, y) in scored {
            rows.push(Forecast::from_probability(p), y);
        }
        rows
    }

    #[test]
    fn roc_points_step_through_thresholds_with_ties_as_one_diagonal_step() {
        // Scores 0.9 (event), 0.7 (event and non-event, tied), 0.2 (non-event).
        let points = roc_points(&rows(&[
            (0.9, true),
            (0.7, true),
            (0.7, false),
            (0.2, false),
        ]));
        assert_eq!(points, vec![(0.0, 0.0), (0.0, 0.5), (0.5, 1.0), (1.0, 1.0)]);
    }

    #[test]
    fn a_long_roc_curve_is_thinned_to_points_on_it() {
        let scored: Vec<(f64, bool)> = (0..20_000)
            .map(|i| ((i as f64 + 0.5) / 20_000.0, i % 3 == 0 || i > 15_000))
            .collect();
        let points = roc_points(&rows(&scored));
        assert!(
            points.len() <= 2 * ROC_VERTICES + 2,
            "{} vertices",
            points.len()
        );
        assert_eq!(points.first(), Some(&(0.0, 0.0)));
        assert_eq!(points.last(), Some(&(1.0, 1.0)));
        // Every vertex is a multiple of 1/n and 1/m: a point the full curve passes through.
        let (m, n) = (
            scored.iter().filter(|s| s.1).count() as f64,
            scored.iter().filter(|s| !s.1).count() as f64,
        );
        for &(fpr, tpr) in &points {
            assert!(((fpr * n).round() - fpr * n).abs() < 1e-6, "fpr {fpr}");
            assert!(((tpr * m).round() - tpr * m).abs() < 1e-6, "tpr {tpr}");
        }
    }
}
