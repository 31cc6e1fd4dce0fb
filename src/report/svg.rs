//! One SVG plot per continuous covariate: the probability and the marginal effect dP/dx against
//! that covariate, the other covariates held at their training means (categorical ones at their
//! training shares), written directly as SVG text — no script, no browser needed.
//!
//! The curve runs over the training range extended by a tenth of its width on each side (not
//! below 0 for a covariate whose training values are all non-negative), so a reviewer sees where
//! the model extrapolates. A covariate that enters the model through a `log(x)` term and whose
//! training range spans a factor of ten or more is drawn on a logarithmic x axis (extended by a
//! tenth of its width in log units), where its curve is read most easily. The training range is
//! shaded in both panels, the training mean is marked, the interval band surrounds each curve,
//! and the point of the training range where the effect is largest in magnitude is marked.
//!
//! Every value drawn comes from the engine ([`Scorer`]); this module only places it. Each panel
//! is a `<g class="panel">` whose data attributes give its mapping from data to pixels, so a
//! reader (or a test) can turn any path vertex back into numbers:
//!
//! ```text
//! px = data-left + (s(x) − s(data-x-min)) / (s(data-x-max) − s(data-x-min)) · data-width
//! py = data-top  + (data-y-max − y) / (data-y-max − data-y-min) · data-height
//! s(x) = x, or ln x where data-x-scale="log"
//! ```
//!
//! Inside a panel, `<path class="curve">` is the curve (one vertex per grid point, in order of
//! x) and `<path class="band">` the interval: the upper ends left to right, then the lower ends
//! right to left. Coordinates are written to 1/1000 of a pixel.
//!
//! A covariate that shares a product term with a binary or categorical partner has one more
//! curve per level of that partner, `<path class="partner-curve" data-partner="NAME"
//! data-level="LEVEL">` in both panels (the curve at the means alone would hide the
//! interaction); a continuous or count partner is named in the subtitle instead. Along the
//! bottom of the probability panel, `<g class="rug">` shows the training data's density from
//! the histogram the model file stores: one bar per bin, its height proportional to the bin's
//! count per unit of x. Numbers in labels are rounded to [`LABEL_DIGITS`] significant digits.

use std::fmt::Write as _;
use std::path::{Path, PathBuf};

use super::axis::{format_number, log_ticks, nice_range, nice_step, tick_label, ticks};
use super::frame::{self, Frame, HEIGHT, LEFT, TOP};
use super::text::percent;
use crate::engine::{effect_slots, Options, Scorer};
use crate::model::{Covariate, CovariateKind, Model, Value};

/// Significant digits of the numbers written in labels (tick labels follow the tick step).
pub const LABEL_DIGITS: i32 = 3;
/// The tallest rug bar, in pixels.
const RUG_HEIGHT: f64 = 14.0;
/// Dash patterns of the partner curves, one per level, in turn.
const PARTNER_DASHES: [&str; 4] = ["6 3", "2 3", "9 3 2 3", "1 2"];

/// A number rounded to [`LABEL_DIGITS`] significant digits, without trailing zeros; scientific
/// notation only outside 1e-4 to 1e6.
pub fn label_number(x: f64) -> String {
    if x == 0.0 || !x.is_finite() {
        return format_number(x);
    }
    let magnitude = x.abs().log10().floor() as i32;
    if !(-4..6).contains(&magnitude) {
        return format!("{:.*e}", (LABEL_DIGITS - 1) as usize, x);
    }
    let decimals = (LABEL_DIGITS - 1 - magnitude).max(0) as usize;
    let text = format!("{x:.decimals$}");
    if text.contains('.') {
        text.trim_end_matches('0').trim_end_matches('.').to_string()
    } else {
        text
    }
}

/// The covariates that share a product term with `covariate`, in model order.
pub fn partners(model: &Model, covariate: usize) -> Vec<usize> {
    (0..model.covariates.len())
        .filter(|&other| other != covariate)
        .filter(|&other| {
            model.terms.iter().any(|t| {
                matches!(t, crate::model::Term::Product(_))
                    && t.involves(covariate)
                    && t.involves(other)
            })
        })
        .collect()
}

/// The values a partner's curves are drawn at, with their labels: 0 and 1 for a binary
/// partner, every level for a categorical one; `None` for a continuous or count partner.
fn partner_levels(model: &Model, partner: usize) -> Option<Vec<(String, Value)>> {
    let c = &model.covariates[partner];
    match c.kind {
        CovariateKind::Binary => Some(vec![
            ("0".to_string(), Value::Number(0.0)),
            ("1".to_string(), Value::Number(1.0)),
        ]),
        CovariateKind::Categorical => Some(
            c.levels
                .iter()
                .enumerate()
                .map(|(i, level)| (level.clone(), Value::Level(i)))
                .collect(),
        ),
        CovariateKind::Continuous | CovariateKind::Count => None,
    }
}

/// Points on each curve.
pub const GRID_POINTS: usize = 161;
/// The share of the training range's width added on each side of it.
pub const EXTENSION: f64 = 0.1;
/// A logged covariate whose training maximum is at least this multiple of its minimum gets a
/// logarithmic x axis.
pub const LOG_AXIS_RATIO: f64 = 10.0;

const FRAME: Frame = Frame { width: 760.0 };
const PLOT_WIDTH: f64 = 620.0;
const PROBABILITY_TOP: f64 = TOP;
const PROBABILITY_HEIGHT: f64 = 240.0;
const EFFECT_TOP: f64 = 380.0;
const EFFECT_HEIGHT: f64 = 180.0;

const CURVE_COLOUR: &str = "#1f4e8c";
const BAND_COLOUR: &str = "#8fb3de";
const RANGE_COLOUR: &str = "#ecebe4";
const EFFECT_COLOUR: &str = "#a3470f";
const EFFECT_BAND_COLOUR: &str = "#f0b98d";
/// A white outline drawn under a label's letters, so it stays readable over curves and bands.
const HALO: &str =
    r#"stroke="white" stroke-width="3" stroke-linejoin="round" paint-order="stroke""#;

/// Why a plot could not be made or written.
#[derive(Debug, thiserror::Error)]
pub enum PlotError {
    /// Only continuous covariates are plotted.
    #[error("covariate '{0}' is not continuous, so it has no curve to plot")]
    NotContinuous(String),
    /// The plot file could not be written.
    #[error("cannot write {path}: {source}")]
    Write {
        /// The file.
        path: PathBuf,
        /// The cause.
        #[source]
        source: std::io::Error,
    },
}

/// One grid point of a covariate's curves.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CurvePoint {
    /// The covariate's value.
    pub x: f64,
    /// The probability at `x`, the other covariates at their training means.
    pub probability: f64,
    /// The interval for the probability, when the model has a covariance.
    pub probability_interval: Option<(f64, f64)>,
    /// dP/dx there.
    pub effect: f64,
    /// The interval for the effect, when the model has a covariance.
    pub effect_interval: Option<(f64, f64)>,
}

/// The covariates that get a plot: the continuous ones, in model order.
pub fn plotted_covariates(model: &Model) -> Vec<usize> {
    (0..model.covariates.len())
        .filter(|&j| model.covariates[j].kind == CovariateKind::Continuous)
        .collect()
}

/// Whether a covariate's plot has a logarithmic x axis: a term takes its log and its training
/// range spans a factor of at least [`LOG_AXIS_RATIO`].
pub fn log_axis(model: &Model, covariate: usize) -> bool {
    let c = &model.covariates[covariate];
    model.log_terms.iter().any(|&(_, j)| j == covariate)
        && c.training_min > 0.0
        && c.training_max / c.training_min >= LOG_AXIS_RATIO
}

/// The x range of a covariate's plot: its training range extended by [`EXTENSION`] of its
/// width on each side (of its width in log units on a log axis), not below 0 if the training
/// minimum is ≥ 0, and above 0 (at least half the training minimum) if a term takes its log.
pub fn plot_range(model: &Model, covariate: usize) -> (f64, f64) {
    let c = &model.covariates[covariate];
    let (min, max) = (c.training_min, c.training_max);
    if log_axis(model, covariate) {
        let factor = (EXTENSION * (max / min).ln()).exp();
        return (min / factor, max * factor);
    }
    let span = if max > min {
        max - min
    } else {
        min.abs().max(1.0)
    };
    let mut low = min - EXTENSION * span;
    let high = max + EXTENSION * span;
    if min >= 0.0 {
        low = low.max(0.0);
    }
    if model.log_terms.iter().any(|&(_, c)| c == covariate) {
        low = low.max(0.5 * min);
    }
    (low, high)
}

/// The engine's probability and effect at `points` values over the plot range, evenly spaced
/// along its axis (in ln x on a log axis), other covariates at the mean profile.
pub fn curve(
    model: &Model,
    covariate: usize,
    options: &Options,
    points: usize,
) -> Result<Vec<CurvePoint>, PlotError> {
    curve_with(model, covariate, options, points, &[])
}

/// [`curve`] with some other covariates set to given values instead of their means.
pub fn curve_with(
    model: &Model,
    covariate: usize,
    options: &Options,
    points: usize,
    fixed: &[(usize, Value)],
) -> Result<Vec<CurvePoint>, PlotError> {
    let c = &model.covariates[covariate];
    if c.kind != CovariateKind::Continuous {
        return Err(PlotError::NotContinuous(c.name.clone()));
    }
    let slot = effect_slots(model)
        .iter()
        .position(|s| s.covariate == covariate)
        .ok_or_else(|| PlotError::NotContinuous(c.name.clone()))?;
    let (low, high) = plot_range(model, covariate);
    let log = log_axis(model, covariate);
    let mut options = *options;
    options.effects = true;
    options.intervals = true;
    options.contributions = false;
    options.elasticities = false;
    let mut scorer = Scorer::new(model);
    let mut values: Vec<Value> = model.mean_profile.clone();
    for &(j, value) in fixed {
        values[j] = value;
    }
    let n = points.max(2);
    let mut out = Vec::with_capacity(n);
    for i in 0..n {
        let t = i as f64 / (n - 1) as f64;
        let x = if log {
            (low.ln() + (high.ln() - low.ln()) * t).exp()
        } else {
            low + (high - low) * t
        };
        values[covariate] = Value::Number(x);
        let answer = scorer.score(model, &values, &options);
        let effect = answer.effects[slot];
        out.push(CurvePoint {
            x,
            probability: answer.probability,
            probability_interval: answer.interval.map(|i| (i.lower, i.upper)),
            effect: effect.effect,
            effect_interval: effect.interval.map(|i| (i.lower, i.upper)),
        });
    }
    Ok(out)
}

/// A rectangle of the picture and the data range it shows.
struct Panel {
    left: f64,
    top: f64,
    width: f64,
    height: f64,
    x: (f64, f64),
    y: (f64, f64),
    x_log: bool,
}

impl Panel {
    fn scale(&self, x: f64) -> f64 {
        if self.x_log {
            x.ln()
        } else {
            x
        }
    }

    fn px(&self, x: f64) -> f64 {
        let (a, b) = (self.scale(self.x.0), self.scale(self.x.1));
        self.left + (self.scale(x) - a) / (b - a) * self.width
    }

    fn py(&self, y: f64) -> f64 {
        self.top + (self.y.1 - y) / (self.y.1 - self.y.0) * self.height
    }

    fn open(&self, svg: &mut String, id: &str) {
        let _ = writeln!(
            svg,
            r#"<g class="panel" id="{id}" data-x-scale="{}" data-x-min="{}" data-x-max="{}" data-y-min="{}" data-y-max="{}" data-left="{}" data-top="{}" data-width="{}" data-height="{}">"#,
            if self.x_log { "log" } else { "linear" },
            self.x.0,
            self.x.1,
            self.y.0,
            self.y.1,
            self.left,
            self.top,
            self.width,
            self.height
        );
    }

    fn path(&self, points: impl Iterator<Item = (f64, f64)>, close: bool) -> String {
        let mut d = frame::path_data(points.map(|(x, y)| (self.px(x), self.py(y))));
        if close {
            d.push_str(" Z");
        }
        d
    }

    /// The interval band (when every point has one: upper ends left to right, then lower ends
    /// right to left) and the curve over it, tagged `data-quantity="NAME-interval"` and
    /// `data-quantity="NAME"`.
    fn curve_and_band(&self, svg: &mut String, points: &[CurvePoint], quantity: Quantity) {
        let bands: Option<Vec<(f64, (f64, f64))>> = points
            .iter()
            .map(|p| (quantity.interval)(p).map(|i| (p.x, i)))
            .collect();
        if let Some(bands) = bands {
            let upper = bands.iter().map(|&(x, (_, upper))| (x, upper));
            let lower = bands.iter().rev().map(|&(x, (lower, _))| (x, lower));
            let _ = writeln!(
                svg,
                r#"<path class="band" data-quantity="{}-interval" d="{}" fill="{}" fill-opacity="0.55" stroke="none"/>"#,
                quantity.name,
                self.path(upper.chain(lower), true),
                quantity.band_colour
            );
        }
        let d = self.path(points.iter().map(|p| (p.x, (quantity.value)(p))), false);
        let _ = writeln!(
            svg,
            r#"<path class="curve" data-quantity="{}" d="{d}" fill="none" stroke="{}" stroke-width="2.2"/>"#,
            quantity.name, quantity.colour
        );
    }

    /// The partners' curves, thin and dashed, one per level of an interacting partner, then
    /// the covariate's own curve and its band over them.
    fn all_curves(&self, svg: &mut String, curves: &Curves, quantity: Quantity) {
        for (i, (partner, level, points)) in curves.partners.iter().enumerate() {
            let dash = PARTNER_DASHES[i % PARTNER_DASHES.len()];
            let d = self.path(points.iter().map(|p| (p.x, (quantity.value)(p))), false);
            let _ = writeln!(
                svg,
                r#"<path class="partner-curve" data-partner="{}" data-level="{}" d="{d}" fill="none" stroke="{}" stroke-width="1.3" stroke-dasharray="{dash}"/>"#,
                escape(partner),
                escape(level),
                quantity.colour
            );
        }
        self.curve_and_band(svg, &curves.points, quantity);
    }

    /// The training data's density along the bottom edge: one bar per histogram bin, its
    /// height proportional to the bin's count per unit of x (per unit of ln x on a log axis).
    fn rug(&self, svg: &mut String, edges: &[f64], counts: &[u64]) {
        let densities: Vec<f64> = counts
            .iter()
            .zip(edges.windows(2))
            .map(|(&count, w)| {
                let width = self.scale(w[1].max(f64::MIN_POSITIVE))
                    - self.scale(w[0].max(f64::MIN_POSITIVE));
                if width > 0.0 {
                    count as f64 / width
                } else {
                    0.0
                }
            })
            .collect();
        let top = densities.iter().copied().fold(0.0_f64, f64::max);
        if top <= 0.0 {
            return;
        }
        let bottom = self.top + self.height;
        let _ = writeln!(svg, r#"<g class="rug" data-bins="{}">"#, counts.len());
        for ((w, &count), density) in edges.windows(2).zip(counts).zip(&densities) {
            let (a, b) = (w[0].max(self.x.0), w[1].min(self.x.1));
            if b <= a || count == 0 {
                continue;
            }
            let height = RUG_HEIGHT * density / top;
            let (x0, x1) = (self.px(a), self.px(b));
            let _ = writeln!(
                svg,
                r##"<rect x="{x0:.3}" y="{:.3}" width="{:.3}" height="{height:.3}" fill="#6b6757" fill-opacity="0.45" data-from="{}" data-to="{}" data-count="{count}"/>"##,
                bottom - height,
                (x1 - x0).max(0.5),
                w[0],
                w[1]
            );
        }
        let _ = writeln!(svg, "</g>");
    }

    /// The training range, shaded, with dashed edges and a dotted line at the mean.
    fn training_range(&self, svg: &mut String, min: f64, max: f64, mean: f64) {
        let (a, b) = (self.px(min.max(self.x.0)), self.px(max.min(self.x.1)));
        let _ = writeln!(
            svg,
            r#"<rect class="training-range" x="{a:.3}" y="{:.3}" width="{:.3}" height="{:.3}" fill="{RANGE_COLOUR}"/>"#,
            self.top,
            b - a,
            self.height
        );
        for edge in [a, b] {
            let _ = writeln!(
                svg,
                r##"<line x1="{edge:.3}" y1="{:.3}" x2="{edge:.3}" y2="{:.3}" stroke="#8a8778" stroke-dasharray="5 3"/>"##,
                self.top,
                self.top + self.height
            );
        }
        let m = self.px(mean);
        let _ = writeln!(
            svg,
            r##"<line class="training-mean" x1="{m:.3}" y1="{:.3}" x2="{m:.3}" y2="{:.3}" stroke="#8a8778" stroke-dasharray="1 3"/>"##,
            self.top,
            self.top + self.height
        );
    }

    /// Grid lines, the frame, ticks and tick labels on both axes.
    fn axes(&self, svg: &mut String, y_label: &str, x_labels: bool) {
        let y_step = nice_step(self.y.1 - self.y.0, 5);
        for t in ticks(self.y.0, self.y.1, 5) {
            let y = self.py(t);
            let _ = writeln!(
                svg,
                r##"<line x1="{:.3}" y1="{y:.3}" x2="{:.3}" y2="{y:.3}" stroke="#d9d9d9" stroke-width="0.6"/>"##,
                self.left,
                self.left + self.width
            );
            let _ = writeln!(
                svg,
                r##"<line x1="{:.3}" y1="{y:.3}" x2="{:.3}" y2="{y:.3}" stroke="#333"/>"##,
                self.left - 5.0,
                self.left
            );
            let _ = writeln!(
                svg,
                r#"<text x="{:.3}" y="{:.3}" text-anchor="end">{}</text>"#,
                self.left - 8.0,
                y + 4.0,
                tick_label(t, y_step)
            );
        }
        let x_step = nice_step(self.x.1 - self.x.0, 7);
        let x_ticks = if self.x_log {
            log_ticks(self.x.0, self.x.1)
        } else {
            ticks(self.x.0, self.x.1, 7)
        };
        for t in x_ticks {
            let x = self.px(t);
            let bottom = self.top + self.height;
            let _ = writeln!(
                svg,
                r##"<line x1="{x:.3}" y1="{bottom:.3}" x2="{x:.3}" y2="{:.3}" stroke="#333"/>"##,
                bottom + 5.0
            );
            if x_labels {
                let _ = writeln!(
                    svg,
                    r#"<text x="{x:.3}" y="{:.3}" text-anchor="middle">{}</text>"#,
                    bottom + 19.0,
                    if self.x_log {
                        format_number(t)
                    } else {
                        tick_label(t, x_step)
                    }
                );
            }
        }
        let _ = writeln!(
            svg,
            r##"<rect x="{}" y="{}" width="{}" height="{}" fill="none" stroke="#333"/>"##,
            self.left, self.top, self.width, self.height
        );
        let (cx, cy) = (self.left - 62.0, self.top + self.height / 2.0);
        let _ = writeln!(
            svg,
            r#"<text x="{cx:.3}" y="{cy:.3}" text-anchor="middle" transform="rotate(-90 {cx:.3} {cy:.3})">{}</text>"#,
            escape(y_label)
        );
    }
}

/// Text made safe for SVG content and attribute values.
pub(crate) fn escape(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for ch in text.chars() {
        match ch {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&apos;"),
            _ => out.push(ch),
        }
    }
    out
}

/// One plotted quantity: how to read it and its interval from a grid point, and its colours.
struct Quantity {
    name: &'static str,
    value: fn(&CurvePoint) -> f64,
    interval: fn(&CurvePoint) -> Option<(f64, f64)>,
    colour: &'static str,
    band_colour: &'static str,
}

/// The probability panel's quantity.
const PROBABILITY: Quantity = Quantity {
    name: "probability",
    value: |p| p.probability,
    interval: |p| p.probability_interval,
    colour: CURVE_COLOUR,
    band_colour: BAND_COLOUR,
};

/// The marginal-effect panel's quantity.
const EFFECT: Quantity = Quantity {
    name: "effect",
    value: |p| p.effect,
    interval: |p| p.effect_interval,
    colour: EFFECT_COLOUR,
    band_colour: EFFECT_BAND_COLOUR,
};

/// A partner's name, one of its levels, and the curve with the partner held at that level.
type PartnerCurve = (String, String, Vec<CurvePoint>);

/// The curves of one plot: the covariate's own, one per level of each binary or categorical
/// partner in a product term, and the partners (continuous ones) that are only named.
struct Curves {
    points: Vec<CurvePoint>,
    partners: Vec<PartnerCurve>,
    noted: Vec<String>,
}

/// The SVG plot for one continuous covariate: the curves, the two panels they set, the header,
/// the probability panel, the marginal-effect panel, and the axis label and legend.
pub fn render(model: &Model, covariate: usize, options: &Options) -> Result<String, PlotError> {
    let curves = curves(model, covariate, options)?;
    let (probability_panel, effect_panel) = panels(model, covariate, &curves);
    let level = percent(options.level());
    let mut svg = String::with_capacity(64 * 1024);
    header(&mut svg, model, covariate, &curves, &level);
    probability_section(&mut svg, &probability_panel, model, covariate, &curves);
    effect_section(
        &mut svg,
        [&probability_panel, &effect_panel],
        model,
        covariate,
        &curves,
    );
    footer(&mut svg, model, covariate, &level);
    Ok(svg)
}

/// The covariate's curve on the plot grid, and the partners' curves.
fn curves(model: &Model, covariate: usize, options: &Options) -> Result<Curves, PlotError> {
    let points = curve(model, covariate, options, GRID_POINTS)?;
    let mut partner_curves: Vec<PartnerCurve> = Vec::new();
    let mut noted_partners: Vec<String> = Vec::new();
    for partner in partners(model, covariate) {
        let name = model.covariates[partner].name.clone();
        match partner_levels(model, partner) {
            Some(levels) => {
                for (label, value) in levels {
                    let points =
                        curve_with(model, covariate, options, GRID_POINTS, &[(partner, value)])?;
                    partner_curves.push((name.clone(), label, points));
                }
            }
            None => noted_partners.push(name),
        }
    }
    Ok(Curves {
        points,
        partners: partner_curves,
        noted: noted_partners,
    })
}

/// The probability panel (0 to a round top above every curve and band) and the marginal-effect
/// panel (a round range around every curve and band, and 0), over the covariate's plot range.
fn panels(model: &Model, covariate: usize, curves: &Curves) -> (Panel, Panel) {
    let (points, partner_curves) = (&curves.points, &curves.partners);
    let (low, high) = plot_range(model, covariate);
    let top_probability = points
        .iter()
        .map(|p| p.probability_interval.map_or(p.probability, |i| i.1))
        .chain(
            partner_curves
                .iter()
                .flat_map(|(_, _, curve)| curve.iter().map(|p| p.probability)),
        )
        .fold(0.0_f64, f64::max);
    let probability_max = if top_probability > 0.8 {
        1.0
    } else {
        nice_range(0.0, top_probability, 5).1.min(1.0)
    };
    let probability_panel = Panel {
        left: LEFT,
        top: PROBABILITY_TOP,
        width: PLOT_WIDTH,
        height: PROBABILITY_HEIGHT,
        x: (low, high),
        y: (0.0, probability_max),
        x_log: log_axis(model, covariate),
    };
    let (effect_low, effect_high) = points.iter().fold((0.0_f64, 0.0_f64), |(a, b), p| {
        let (lower, upper) = p.effect_interval.unwrap_or((p.effect, p.effect));
        (a.min(lower).min(p.effect), b.max(upper).max(p.effect))
    });
    let (effect_low, effect_high) = partner_curves
        .iter()
        .flat_map(|(_, _, curve)| curve.iter().map(|p| p.effect))
        .fold((effect_low, effect_high), |(a, b), e| (a.min(e), b.max(e)));
    let effect_panel = Panel {
        left: LEFT,
        top: EFFECT_TOP,
        width: PLOT_WIDTH,
        height: EFFECT_HEIGHT,
        x: (low, high),
        y: nice_range(effect_low, effect_high, 4),
        x_log: log_axis(model, covariate),
    };
    (probability_panel, effect_panel)
}

/// The opening of the SVG, its title and description (with the mapping from data to pixels),
/// the headings, and the note on interactions.
fn header(svg: &mut String, model: &Model, covariate: usize, curves: &Curves, level: &str) {
    let (c, f, points) = (&model.covariates[covariate], &model.file, &curves.points);
    let (low, high) = plot_range(model, covariate);
    let title = format!("P({} = 1) against {}", f.outcome.name, c.name);
    let description = format!(
        "{} {} ({} link): the probability and the marginal effect of {} computed by ogive \
         on {} points from {} to {}, the other covariates at their training means. Each panel \
         maps data to pixels by px = data-left + (x - data-x-min) / (data-x-max - data-x-min) * \
         data-width and py = data-top + (data-y-max - y) / (data-y-max - data-y-min) * \
         data-height.",
        escape(&f.name),
        escape(&f.version),
        f.link,
        escape(&c.name),
        points.len(),
        low,
        high
    );
    FRAME.open(svg, &title, &description);
    FRAME.heading(svg, 28.0, &title);
    FRAME.subheading(
        svg,
        48.0,
        None,
        &format!(
            "{} {}, {} link; other covariates at their training means; bands: {level} intervals",
            escape(&f.name),
            escape(&f.version),
            f.link
        ),
    );
    FRAME.subheading(
        svg,
        66.0,
        None,
        &format!(
            "{} = 1 means: {}",
            escape(&f.outcome.name),
            escape(&f.outcome.meaning)
        ),
    );

    let interaction = interaction_note(&curves.partners, &curves.noted);
    if !interaction.is_empty() {
        FRAME.subheading(
            svg,
            HEIGHT - 8.0,
            Some("interaction"),
            &escape(&interaction),
        );
    }
}

/// The probability panel: the training range and its rug, the partners' curves, the curve with
/// its band, the axes and the training range's label.
fn probability_section(
    svg: &mut String,
    probability_panel: &Panel,
    model: &Model,
    covariate: usize,
    curves: &Curves,
) {
    let (c, f) = (&model.covariates[covariate], &model.file);
    let (low, high) = probability_panel.x;
    probability_panel.open(svg, "probability-panel");
    probability_panel.training_range(svg, c.training_min, c.training_max, c.training_mean);
    if let Some(histogram) = f
        .covariates
        .iter()
        .find(|spec| spec.name == c.name)
        .and_then(|spec| spec.training.histogram.as_ref())
    {
        probability_panel.rug(svg, &histogram.edges, &histogram.counts);
    }
    probability_panel.all_curves(svg, curves, PROBABILITY);
    probability_panel.axes(svg, &format!("P({} = 1)", f.outcome.name), true);
    let range_label = format!(
        "training range {} to {}, mean {}",
        label_number(c.training_min),
        label_number(c.training_max),
        label_number(c.training_mean)
    );
    // Centred over the shaded range, but kept inside the panel (about 6.5 px a character).
    let half_width = 3.25 * range_label.chars().count() as f64 + 6.0;
    let centre = 0.5
        * (probability_panel.px(c.training_min.max(low))
            + probability_panel.px(c.training_max.min(high)));
    let centre = centre
        .max(LEFT + half_width)
        .min(LEFT + PLOT_WIDTH - half_width);
    let _ = writeln!(
        svg,
        r##"<text x="{centre:.3}" y="{:.3}" text-anchor="middle" fill="#5d5a4c" {HALO}>{}</text>"##,
        PROBABILITY_TOP + 16.0,
        escape(&range_label)
    );
    let _ = writeln!(svg, "</g>");
}

/// The marginal-effect panel: the training range, the zero line, the partners' curves, the
/// curve with its band, the largest effect in the training range, and the axes.
fn effect_section(
    svg: &mut String,
    panels: [&Panel; 2],
    model: &Model,
    covariate: usize,
    curves: &Curves,
) {
    let (c, points) = (&model.covariates[covariate], &curves.points);
    let effect_panel = panels[1];
    effect_panel.open(svg, "effect-panel");
    effect_panel.training_range(svg, c.training_min, c.training_max, c.training_mean);
    if effect_panel.y.0 < 0.0 && effect_panel.y.1 > 0.0 {
        let zero = effect_panel.py(0.0);
        let _ = writeln!(
            svg,
            r##"<line class="zero" x1="{}" y1="{zero:.3}" x2="{}" y2="{zero:.3}" stroke="#555"/>"##,
            LEFT,
            LEFT + PLOT_WIDTH
        );
    }
    effect_panel.all_curves(svg, curves, EFFECT);
    largest_effect(svg, panels, c, points);
    effect_panel.axes(svg, &format!("dP/d({})", c.name), true);
    let _ = writeln!(svg, "</g>");
}

/// The largest effect within the training range, marked in both panels and labelled: beyond
/// the range the curve is extrapolation.
fn largest_effect(svg: &mut String, panels: [&Panel; 2], c: &Covariate, points: &[CurvePoint]) {
    let effect_panel = panels[1];
    let inside = |p: &&CurvePoint| p.x >= c.training_min && p.x <= c.training_max;
    if let Some(peak) = points
        .iter()
        .filter(inside)
        .max_by(|a, b| a.effect.abs().total_cmp(&b.effect.abs()))
    {
        let (x, y) = (effect_panel.px(peak.x), effect_panel.py(peak.effect));
        for panel in panels {
            let _ = writeln!(
                svg,
                r#"<line class="largest-effect" x1="{x:.3}" y1="{:.3}" x2="{x:.3}" y2="{:.3}" stroke="{EFFECT_COLOUR}" stroke-dasharray="2 2"/>"#,
                panel.top,
                panel.top + panel.height
            );
        }
        let _ = writeln!(
            svg,
            r#"<circle class="largest-effect" cx="{x:.3}" cy="{y:.3}" r="4" fill="{EFFECT_COLOUR}" data-x="{}" data-effect="{}"/>"#,
            peak.x, peak.effect
        );
        let label = format!(
            "largest effect in the training range: {} at {} = {}",
            label_number(peak.effect),
            c.name,
            label_number(peak.x)
        );
        // Helvetica at 12 px averages about 6.5 px a character: put the label on whichever
        // side of the marker it fits.
        let fits_right = x + 8.0 + 6.5 * label.chars().count() as f64 <= LEFT + PLOT_WIDTH;
        let (anchor, shift) = if fits_right {
            ("start", 8.0)
        } else {
            ("end", -8.0)
        };
        let _ = writeln!(
            svg,
            r#"<text x="{:.3}" y="{:.3}" text-anchor="{anchor}" fill="{EFFECT_COLOUR}" {HALO}>{}</text>"#,
            x + shift,
            EFFECT_TOP + 16.0,
            escape(&label)
        );
    }
}

/// The covariate's axis label (with its unit), the legend, and the end of the SVG.
fn footer(svg: &mut String, model: &Model, covariate: usize, level: &str) {
    let c = &model.covariates[covariate];
    let x_label = match &c.unit {
        Some(unit) if *unit != c.name => format!("{} ({unit})", c.name),
        _ => c.name.clone(),
    };
    let _ = writeln!(
        svg,
        r#"<text x="{:.3}" y="{:.3}" text-anchor="middle" font-size="13">{}</text>"#,
        LEFT + PLOT_WIDTH / 2.0,
        EFFECT_TOP + EFFECT_HEIGHT + 40.0,
        escape(&x_label)
    );
    legend(svg, level, model.covariance.is_some());
    frame::close(svg);
}

/// The line under the legend that explains the partner curves, or names the partners that have
/// none; empty without partners.
fn interaction_note(curves: &[(String, String, Vec<CurvePoint>)], noted: &[String]) -> String {
    let mut parts = Vec::new();
    let mut drawn: Vec<&str> = curves.iter().map(|(name, _, _)| name.as_str()).collect();
    drawn.dedup();
    for name in drawn {
        let levels: Vec<String> = curves
            .iter()
            .filter(|(n, _, _)| n == name)
            .map(|(_, level, _)| level.clone())
            .collect();
        parts.push(format!(
            "interacts with {name}: thin dashed curves at {name} = {}",
            levels.join(", ")
        ));
    }
    for name in noted {
        parts.push(format!(
            "interacts with {name}: the curves hold {name} at its mean, so its effect here changes with {name}"
        ));
    }
    parts.join("; ")
}

fn legend(svg: &mut String, level: &str, intervals: bool) {
    let y = HEIGHT - 28.0;
    let interval_label = if intervals {
        format!("{level} interval")
    } else {
        "no intervals (no covariance)".to_string()
    };
    let items = [
        (
            format!(
                r#"<line x1="0" y1="0" x2="18" y2="0" stroke="{CURVE_COLOUR}" stroke-width="2.2"/>"#
            ),
            "probability".to_string(),
        ),
        (
            format!(
                r#"<line x1="0" y1="0" x2="18" y2="0" stroke="{EFFECT_COLOUR}" stroke-width="2.2"/>"#
            ),
            "marginal effect".to_string(),
        ),
        (
            format!(r#"<rect x="0" y="-5" width="18" height="10" fill="{BAND_COLOUR}"/>"#),
            interval_label,
        ),
        (
            format!(
                r##"<rect x="0" y="-5" width="18" height="10" fill="{RANGE_COLOUR}" stroke="#8a8778" stroke-dasharray="5 3"/>"##
            ),
            "training range (dotted: mean)".to_string(),
        ),
    ];
    let mut x = LEFT;
    for (swatch, label) in items {
        frame::legend_entry(svg, x, y, &swatch, &label);
        // Helvetica at 12 px averages about 6.5 px a character.
        x += 40.0 + 6.5 * label.chars().count() as f64;
    }
}

/// Write one plot per continuous covariate into `folder` (created if needed), named
/// `COVARIATE.svg`; returns the paths written.
pub fn write_plots(
    model: &Model,
    folder: &Path,
    options: &Options,
) -> Result<Vec<PathBuf>, PlotError> {
    frame::write_all(
        folder,
        plotted_covariates(model).into_iter().map(|j| {
            render(model, j, options).map(|svg| (format!("{}.svg", model.covariates[j].name), svg))
        }),
    )
}
