//! A one-screen plain-text summary of a validated model, used by `ogive check`.

use std::fmt::Write;

use super::{CovariateKind, Model};

/// Identity, link, covariates with their training ranges, terms with coefficients, and what
/// the file does and does not carry.
pub fn summary(model: &Model) -> String {
    let f = &model.file;
    let mut s = String::new();
    let _ = writeln!(
        s,
        "     {} {} ({} link, {} terms, {} covariates)",
        f.name,
        f.version,
        f.link,
        model.terms.len(),
        model.covariates.len()
    );
    let _ = writeln!(
        s,
        "     outcome: {} = 1 means {}",
        f.outcome.name, f.outcome.meaning
    );
    let _ = writeln!(
        s,
        "     fitted by {} at {} on {} observations",
        f.provenance.fitted_by, f.provenance.fitted_at, f.provenance.observations
    );
    for c in &model.covariates {
        let range = match c.kind {
            CovariateKind::Categorical => format!(
                "levels {} (reference {})",
                c.levels.join(", "),
                c.levels[c.reference]
            ),
            _ => format!(
                "training range [{}, {}], mean {:.6}",
                c.training_min, c.training_max, c.training_mean
            ),
        };
        let unit = c
            .unit
            .as_deref()
            .map(|u| format!(" [{u}]"))
            .unwrap_or_default();
        let _ = writeln!(
            s,
            "       {:<22} {:<11} {range}{unit}",
            c.name,
            c.kind.name()
        );
    }
    for (label, b) in model.term_labels.iter().zip(&model.coefficients) {
        let _ = writeln!(s, "       β {label:<30} {b:>14.6}");
    }
    let _ = writeln!(
        s,
        "     covariance: {}; joint extrapolation check: {}; check cases reproduced: {}",
        if model.covariance.is_some() {
            "yes"
        } else {
            "no (answers carry no intervals)"
        },
        if model.joint.is_some() { "yes" } else { "no" },
        f.check_cases.len()
    );
    s
}
