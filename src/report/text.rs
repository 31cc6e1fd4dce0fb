//! The plain-text rendering of a [`Report`], for a terminal or a review document: sections with
//! aligned tables, numbers to six significant digits, and the notes and cautions in full.

use std::fmt::Write;

use super::axis::{format_number, format_p_value};
use super::{EffectRow, ProbabilityRow, Report};

/// Column alignment in a [`Table`].
#[derive(Clone, Copy, PartialEq)]
enum Align {
    Left,
    Right,
}

/// The first five column words of the coefficient table, shared with `ogive fit`'s summary
/// ([`crate::fit::FitReport`]), which also says `95% lower` and `95% upper`.
pub const COEFFICIENT_COLUMNS: [&str; 5] = ["term", "coefficient", "std. error", "z", "p"];

/// A table of text cells, printed with each column as wide as its widest cell.
struct Table {
    header: Vec<String>,
    align: Vec<Align>,
    rows: Vec<Vec<String>>,
}

impl Table {
    fn new(header: &[(&str, Align)]) -> Table {
        Table {
            header: header.iter().map(|(h, _)| h.to_string()).collect(),
            align: header.iter().map(|(_, a)| *a).collect(),
            rows: Vec::new(),
        }
    }

    fn push(&mut self, row: Vec<String>) {
        self.rows.push(row);
    }

    fn render(&self, out: &mut String) {
        let widths: Vec<usize> = (0..self.header.len())
            .map(|c| {
                std::iter::once(&self.header)
                    .chain(&self.rows)
                    .map(|r| r.get(c).map_or(0, |s| s.chars().count()))
                    .max()
                    .unwrap_or(0)
            })
            .collect();
        for row in std::iter::once(&self.header).chain(&self.rows) {
            let mut line = String::from(" ");
            for (c, width) in widths.iter().enumerate() {
                let cell = row.get(c).map_or("", String::as_str);
                let pad = width - cell.chars().count();
                line.push(' ');
                match self.align[c] {
                    Align::Left => {
                        line.push_str(cell);
                        line.extend(std::iter::repeat_n(' ', pad));
                    }
                    Align::Right => {
                        line.extend(std::iter::repeat_n(' ', pad));
                        line.push_str(cell);
                    }
                }
                line.push(' ');
            }
            let _ = writeln!(out, "{}", line.trim_end());
        }
    }
}

fn optional(x: Option<f64>) -> String {
    x.map(format_number).unwrap_or_else(|| "–".to_string())
}

fn heading(out: &mut String, title: &str) {
    let _ = writeln!(out, "\n{title}\n{}", "-".repeat(title.chars().count()));
}

/// Wrap `text` at `width` columns, indenting every line by `indent` and the first by `first`.
fn wrap(out: &mut String, first: &str, indent: &str, text: &str, width: usize) {
    let mut line = String::from(first);
    let mut empty = true;
    for word in text.split_whitespace() {
        if !empty && line.chars().count() + 1 + word.chars().count() > width {
            let _ = writeln!(out, "{line}");
            line = String::from(indent);
            empty = true;
        }
        if !empty {
            line.push(' ');
        }
        line.push_str(word);
        empty = false;
    }
    let _ = writeln!(out, "{line}");
}

fn effect_table(rows: &[EffectRow]) -> Table {
    let mut table = Table::new(&[
        ("covariate", Align::Left),
        ("kind", Align::Left),
        ("effect", Align::Right),
        ("std. error", Align::Right),
        ("lower", Align::Right),
        ("upper", Align::Right),
    ]);
    for e in rows {
        let name = match &e.level {
            Some(level) => format!("{}={level}", e.covariate),
            None => e.covariate.clone(),
        };
        table.push(vec![
            name,
            e.kind.replace('_', " "),
            format_number(e.effect),
            optional(e.std_error),
            optional(e.lower),
            optional(e.upper),
        ]);
    }
    table
}

fn probability_line(label: &str, p: &ProbabilityRow, level_percent: &str) -> String {
    match (p.lower, p.upper) {
        (Some(lower), Some(upper)) => format!(
            "{label}: {} ({level_percent} interval {} to {}; std. error {})",
            format_number(p.probability),
            format_number(lower),
            format_number(upper),
            optional(p.std_error)
        ),
        _ => format!("{label}: {}", format_number(p.probability)),
    }
}

/// An interval level as a percentage: 0.95 is "95%", 0.995 is "99.5%".
pub fn percent(level: f64) -> String {
    format!("{}%", (level * 100.0 * 1e6).round() / 1e6)
}

/// The width the report's prose is wrapped at.
const WIDTH: usize = 96;

/// The report as text: its title, then one section after another.
pub fn render_text(report: &Report) -> String {
    let mut out = String::new();
    let level_percent = percent(report.level);
    title(&mut out, report);
    provenance(&mut out, report);
    coefficients(&mut out, report, &level_percent);
    covariates(&mut out, report);
    effects_at_means(&mut out, report, &level_percent);
    over_data(&mut out, report, &level_percent);
    plots_notes_and_cautions(&mut out, report);
    out
}

/// The title, underlined, and the model's description.
fn title(out: &mut String, report: &Report) {
    let m = &report.model;
    let title = format!("Model report: {} {}", m.name, m.version);
    let _ = writeln!(out, "{title}\n{}", "=".repeat(title.chars().count()));
    if !m.description.is_empty() {
        wrap(out, "", "", &m.description, WIDTH);
    }
}

/// What the model estimates, how and from what it was fitted, and what its file holds.
fn provenance(out: &mut String, report: &Report) {
    let m = &report.model;
    heading(out, "Identity and provenance");
    let mut facts = vec![
        (
            "estimates".to_string(),
            format!("P({} = 1): {}", m.outcome, m.outcome_meaning),
        ),
        ("link".to_string(), m.link.clone()),
        ("fitted by".to_string(), m.fitted_by.clone()),
        ("fitted at".to_string(), m.fitted_at.clone()),
        ("observations".to_string(), m.observations.to_string()),
    ];
    if let Some(d) = &m.training_data {
        facts.push(("training data".to_string(), d.clone()));
    }
    if let Some(l) = m.log_likelihood {
        let mut text = format_number(l);
        if let Some(l0) = m.null_log_likelihood {
            let _ = write!(text, " (intercept only {})", format_number(l0));
        }
        if let Some(r2) = m.pseudo_r_squared {
            let _ = write!(text, "; McFadden pseudo R² {}", format_number(r2));
        }
        facts.push(("log-likelihood".to_string(), text));
    }
    if let Some(i) = m.iterations {
        facts.push(("iterations".to_string(), i.to_string()));
    }
    if let Some(w) = &m.weighting {
        facts.push(("weighting".to_string(), w.summary()));
    }
    facts.push(("covariance".to_string(), m.covariance.clone()));
    facts.push((
        "check cases".to_string(),
        if m.check_cases == 0 {
            "none stored in the file".to_string()
        } else {
            format!("{} reproduced when the file was loaded", m.check_cases)
        },
    ));
    if let Some(t) = m.decision_threshold {
        facts.push(("decision threshold".to_string(), format_number(t)));
    }
    if let Some(n) = &m.notes {
        facts.push(("notes".to_string(), n.clone()));
    }
    for (label, value) in facts {
        wrap(
            out,
            &format!("  {label:<19}"),
            &" ".repeat(21),
            &value,
            WIDTH,
        );
    }
}

/// The coefficient table, with the column words of `ogive fit`'s summary.
fn coefficients(out: &mut String, report: &Report, level_percent: &str) {
    heading(
        out,
        &format!("Coefficients ({level_percent} intervals, two-sided normal p-values)"),
    );
    // The column words of `ogive fit`'s table, so the two reports read alike.
    let (lower, upper) = (
        format!("{level_percent} lower"),
        format!("{level_percent} upper"),
    );
    let mut table = Table::new(&[
        ("term", Align::Left),
        (COEFFICIENT_COLUMNS[1], Align::Right),
        (COEFFICIENT_COLUMNS[2], Align::Right),
        (COEFFICIENT_COLUMNS[3], Align::Right),
        (COEFFICIENT_COLUMNS[4], Align::Right),
        (&lower, Align::Right),
        (&upper, Align::Right),
    ]);
    for c in &report.coefficients {
        table.push(vec![
            c.term.clone(),
            format_number(c.estimate),
            optional(c.std_error),
            c.z.map(|z| format!("{z:.3}")).unwrap_or_else(|| "–".into()),
            c.p_value.map(format_p_value).unwrap_or_else(|| "–".into()),
            optional(c.lower),
            optional(c.upper),
        ]);
    }
    table.render(out);
}

/// The covariates with their training ranges, the shares of each level, and their descriptions.
fn covariates(out: &mut String, report: &Report) {
    heading(out, "Covariates and training ranges");
    let mut table = Table::new(&[
        ("covariate", Align::Left),
        ("kind", Align::Left),
        ("unit", Align::Left),
        ("min", Align::Right),
        ("mean", Align::Right),
        ("max", Align::Right),
        ("std. dev.", Align::Right),
    ]);
    let mut level_lines = Vec::new();
    for c in &report.covariates {
        table.push(vec![
            c.name.clone(),
            c.kind.clone(),
            c.unit.clone().unwrap_or_default(),
            optional(c.min),
            optional(c.mean),
            optional(c.max),
            optional(c.std_dev),
        ]);
        if !c.levels.is_empty() {
            let shares: Vec<String> = c
                .levels
                .iter()
                .map(|l| {
                    let reference = if Some(&l.level) == c.reference.as_ref() {
                        " (reference)"
                    } else {
                        ""
                    };
                    format!("{}{reference} {:.1}%", l.level, l.share * 100.0)
                })
                .collect();
            level_lines.push(format!("{}: {}", c.name, shares.join(", ")));
        }
    }
    table.render(out);
    for line in level_lines {
        wrap(out, "  levels of ", "    ", &line, WIDTH);
    }
    let described: Vec<_> = report
        .covariates
        .iter()
        .filter_map(|c| c.description.as_ref().map(|d| (c, d)))
        .collect();
    if !described.is_empty() {
        let _ = writeln!(out);
        for (c, d) in described {
            wrap(out, &format!("  {}: ", c.name), "    ", d, WIDTH);
        }
    }
}

/// The probability and the marginal effects at the training means.
fn effects_at_means(out: &mut String, report: &Report, level_percent: &str) {
    heading(
        out,
        &format!("Effects at the training means ({level_percent} intervals)"),
    );
    let _ = writeln!(
        out,
        "  {}",
        probability_line(
            "probability at the means",
            &report.at_means.probability,
            level_percent
        )
    );
    effect_table(&report.at_means.effects).render(out);
}

/// Over the data given with `--data`, if any: the average probability and marginal effects,
/// and how many rows lie outside the training data.
fn over_data(out: &mut String, report: &Report, level_percent: &str) {
    let Some(d) = &report.data else {
        return;
    };
    heading(
        out,
        &format!(
            "Over {} ({} rows, {level_percent} intervals)",
            d.source, d.rows
        ),
    );
    let _ = writeln!(
        out,
        "  {}",
        probability_line("average probability", &d.average_probability, level_percent)
    );
    let _ = writeln!(out, "  average marginal effects:");
    effect_table(&d.average_effects).render(out);
    let w = &d.warnings;
    let _ = writeln!(
        out,
        "\n  warnings: {} of {} rows lie outside the training data in some way",
        w.rows_with_warnings, d.rows
    );
    if !w.out_of_range.is_empty() {
        let mut table = Table::new(&[
            ("out of range", Align::Left),
            ("rows below", Align::Right),
            ("rows above", Align::Right),
            ("training range", Align::Left),
        ]);
        for o in &w.out_of_range {
            table.push(vec![
                o.covariate.clone(),
                o.below.to_string(),
                o.above.to_string(),
                format!("[{}, {}]", format_number(o.min), format_number(o.max)),
            ]);
        }
        table.render(out);
    }
    if w.unusual_combination > 0 {
        let _ = writeln!(
            out,
            "  unusual combination (further from the training mean than any training row): {} rows",
            w.unusual_combination
        );
    }
}

/// The plots written, the notes and the cautions.
fn plots_notes_and_cautions(out: &mut String, report: &Report) {
    if !report.plots.is_empty() {
        heading(out, "Plots");
        for p in &report.plots {
            let _ = writeln!(out, "  {p}");
        }
    }

    heading(out, "Notes");
    for n in &report.notes {
        wrap(out, "  - ", "    ", n, WIDTH);
    }
    heading(out, "Cautions");
    for c in &report.cautions {
        wrap(out, "  ! ", "    ", c, WIDTH);
    }
}
