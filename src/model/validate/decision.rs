//! The decision rule (threshold and bands) and the training histograms.

use std::collections::HashSet;

use super::super::error::{err, finite, ModelError, ModelProblem};
use super::super::file::{Histogram, ModelFile};

/// A histogram: at least one bin, one more edge than counts, edges finite and increasing.
pub(in crate::model) fn histogram(field: &str, h: &Histogram) -> Result<(), ModelError> {
    if h.edges.len() != h.counts.len() + 1 || h.counts.is_empty() {
        return Err(err(
            field,
            ModelProblem::Size {
                expected: "at least one bin and one more edge than counts".into(),
                found: format!("{} edges and {} counts", h.edges.len(), h.counts.len()),
            },
        ));
    }
    for (i, &e) in h.edges.iter().enumerate() {
        finite(|| format!("{field}.edges[{i}]"), e)?;
        if i > 0 && e <= h.edges[i - 1] {
            return Err(err(
                format!("{field}.edges[{i}]"),
                ModelProblem::OutOfRange(format!(
                    "edges must increase strictly, got {} then {e}",
                    h.edges[i - 1]
                )),
            ));
        }
    }
    Ok(())
}

/// The decision rule: a threshold strictly inside (0, 1); bands with unique names whose upper
/// edges increase within (0, 1] and end at 1.
pub(in crate::model) fn decision(file: &ModelFile) -> Result<(), ModelError> {
    let Some(d) = &file.decision else {
        return Ok(());
    };
    if let Some(t) = d.threshold {
        if !(t > 0.0 && t < 1.0) {
            return Err(err(
                "decision.threshold",
                ModelProblem::OutOfRange(format!("must lie strictly between 0 and 1, got {t}")),
            ));
        }
    }
    let mut previous = 0.0;
    let mut names = HashSet::new();
    for (i, band) in d.bands.iter().enumerate() {
        if band.name.trim().is_empty() {
            return Err(err(
                format!("decision.bands[{i}].name"),
                ModelProblem::Missing("a band needs a name".into()),
            ));
        }
        if !names.insert(band.name.as_str()) {
            return Err(err(
                format!("decision.bands[{i}].name"),
                ModelProblem::Duplicate(band.name.clone()),
            ));
        }
        if !(band.below > previous && band.below <= 1.0) {
            return Err(err(
                format!("decision.bands[{i}].below"),
                ModelProblem::OutOfRange(format!(
                    "bands must increase within (0, 1]; got {} after {previous}",
                    band.below
                )),
            ));
        }
        previous = band.below;
    }
    if !d.bands.is_empty() && previous != 1.0 {
        return Err(err(
            format!("decision.bands[{}].below", d.bands.len() - 1),
            ModelProblem::OutOfRange("the last band must reach 1".into()),
        ));
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use serde_json::json;

    use super::super::fixture::{accepted, refused};
    use crate::model::ModelProblem;

    #[test]
    fn histogram_edges_must_increase() {
        let e = refused(|m| {
            m["covariates"][0]["training"]["histogram"]["edges"] = json!([5.0, 50.0, 50.0])
        });
        assert_eq!(e.field, "covariates[0].training.histogram.edges[2]");
    }

    #[test]
    fn a_histogram_needs_one_more_edge_than_counts() {
        let e = refused(|m| {
            m["covariates"][0]["training"]["histogram"]["counts"] = json!([10, 20, 30])
        });
        assert_eq!(e.field, "covariates[0].training.histogram");
        assert!(matches!(e.problem, ModelProblem::Size { .. }));
    }

    #[test]
    fn a_threshold_on_the_edge_of_the_unit_interval() {
        for t in [0.0, 1.0, 1.5] {
            let e = refused(|m| m["decision"] = json!({"threshold": t}));
            assert_eq!(e.field, "decision.threshold", "threshold {t}");
        }
        accepted(|m| m["decision"] = json!({"threshold": 0.3}));
    }

    #[test]
    fn bands_need_unique_names() {
        let e = refused(|m| {
            m["decision"] =
                json!({"bands": [{"name": "low", "below": 0.2}, {"name": "low", "below": 1.0}]})
        });
        assert_eq!(e.field, "decision.bands[1].name");
        assert!(matches!(e.problem, ModelProblem::Duplicate(_)));
    }

    #[test]
    fn a_band_without_a_name() {
        let e = refused(|m| m["decision"] = json!({"bands": [{"name": " ", "below": 1.0}]}));
        assert_eq!(e.field, "decision.bands[0].name");
    }

    #[test]
    fn the_last_band_must_reach_one() {
        let e = refused(|m| {
            m["decision"] =
                json!({"bands": [{"name": "low", "below": 0.2}, {"name": "high", "below": 0.9}]})
        });
        assert_eq!(e.field, "decision.bands[1].below");
    }
}
