//! `ogive fit --like FILE`: the settings of an existing model file, so that a refit on new data
//! keeps the contract with callers without retyping every flag.
//!
//! ```text
//! from the file          becomes                          unless the command line gives
//! terms (no intercept)   --terms, --no-intercept           --terms
//! a full level set       the bare categorical name         (sector=a, sector=b → sector)
//! covariate kinds        --categorical C=REF, --count C,   a kind flag for that column
//!                        --continuous C (binary is inferred)
//! units                  --unit C=UNIT                     --unit for that column
//! outcome                --outcome, --outcome-meaning      either flag
//! name, link             --name, --link                    either flag
//! threshold, bands       --threshold, --band ...           --threshold; any --band
//! description            --description                     --description
//! ```
//!
//! Coefficients, covariance, training summaries and provenance are not taken: they come from
//! the new data. When the command line gives its own `--terms`, settings of columns those terms
//! do not use are dropped rather than refused.

use std::path::Path;

use anyhow::Context;

use crate::fit::terms::{covariate_names, parse_term_list};
use crate::fit::CategoricalSpec;
use crate::link::Link;
use crate::model::file::{Band, CovariateKind, ModelFile};
use crate::model::term::TermText;
use crate::model::Model;

/// The fit settings an existing model file carries.
#[derive(Debug, Clone, PartialEq)]
pub struct Template {
    /// The `--terms` list, without the intercept.
    pub terms: String,
    /// Whether the file has an intercept term.
    pub intercept: bool,
    /// The outcome column.
    pub outcome: String,
    /// What outcome = 1 means.
    pub outcome_meaning: String,
    /// The model's name.
    pub name: String,
    pub link: Link,
    /// Categorical covariates with their reference levels.
    pub categorical: Vec<CategoricalSpec>,
    /// Count covariates.
    pub count: Vec<String>,
    /// Continuous covariates.
    pub continuous: Vec<String>,
    /// Units, `(column, unit)`.
    pub units: Vec<(String, String)>,
    /// The decision threshold.
    pub threshold: Option<f64>,
    pub bands: Vec<Band>,
    pub description: String,
}

impl Template {
    /// Read and validate the model file at `path` and take its settings.
    pub fn read(path: &Path) -> anyhow::Result<Template> {
        let bytes = std::fs::read(path)
            .with_context(|| format!("--like {}: cannot read the file", path.display()))?;
        let model = Model::from_json(&bytes)
            .with_context(|| format!("--like {}: not a valid model file", path.display()))?;
        Ok(Template::of(&model.file))
    }

    /// The settings of a (valid) model file.
    pub fn of(file: &ModelFile) -> Template {
        let mut template = Template {
            terms: collapsed_terms(file).join(", "),
            intercept: file.terms.iter().any(|t| t.term.trim() == "intercept"),
            outcome: file.outcome.name.clone(),
            outcome_meaning: file.outcome.meaning.clone(),
            name: file.name.clone(),
            link: file.link,
            categorical: Vec::new(),
            count: Vec::new(),
            continuous: Vec::new(),
            units: Vec::new(),
            threshold: file.decision.as_ref().and_then(|d| d.threshold),
            bands: file
                .decision
                .as_ref()
                .map(|d| d.bands.clone())
                .unwrap_or_default(),
            description: file.description.clone(),
        };
        for c in &file.covariates {
            match c.kind {
                CovariateKind::Categorical => template.categorical.push(CategoricalSpec {
                    column: c.name.clone(),
                    reference: c.reference.clone(),
                }),
                CovariateKind::Count => template.count.push(c.name.clone()),
                CovariateKind::Continuous => template.continuous.push(c.name.clone()),
                CovariateKind::Binary => {}
            }
            if let Some(unit) = &c.unit {
                template.units.push((c.name.clone(), unit.clone()));
            }
        }
        template
    }

    /// Keep only the settings of the covariates that `terms` use (for a command line that gives
    /// its own terms). Terms that do not parse are left for the fit to report.
    pub fn restrict_to(&mut self, terms: &str) {
        let Ok(parsed) = parse_term_list(terms) else {
            return;
        };
        let used = covariate_names(&parsed);
        let uses = |c: &String| used.contains(c);
        self.categorical.retain(|c| uses(&c.column));
        self.count.retain(uses);
        self.continuous.retain(uses);
        self.units.retain(|(c, _)| uses(c));
    }
}

/// The file's terms as a `--terms` list would give them: the intercept left out, and the
/// indicators of a categorical covariate that cover all its non-reference levels written once
/// as its bare name, where the first of them stood (so a refit expands them the same way).
fn collapsed_terms(file: &ModelFile) -> Vec<String> {
    let parsed: Vec<Option<TermText>> = file
        .terms
        .iter()
        .map(|t| TermText::parse(&t.term).ok())
        .collect();
    let mut out = Vec::new();
    let mut collapsed: Vec<&str> = Vec::new();
    for (spec, text) in file.terms.iter().zip(&parsed) {
        match text {
            Some(TermText::Intercept) => continue,
            Some(TermText::Level(name, _)) if covers_all_levels(file, &parsed, name) => {
                if !collapsed.contains(&name.as_str()) {
                    collapsed.push(name);
                    out.push(name.clone());
                }
            }
            _ => out.push(spec.term.trim().to_string()),
        }
    }
    out
}

/// Whether the plain indicator terms of categorical `name` are exactly one per non-reference
/// level.
fn covers_all_levels(file: &ModelFile, parsed: &[Option<TermText>], name: &str) -> bool {
    let Some(spec) = file
        .covariates
        .iter()
        .find(|c| c.name == name && c.kind == CovariateKind::Categorical)
    else {
        return false;
    };
    let (Some(levels), Some(reference)) = (&spec.levels, &spec.reference) else {
        return false;
    };
    let mut present: Vec<&str> = parsed
        .iter()
        .filter_map(|t| match t {
            Some(TermText::Level(n, level)) if n == name => Some(level.as_str()),
            _ => None,
        })
        .collect();
    let mut wanted: Vec<&str> = levels
        .iter()
        .map(String::as_str)
        .filter(|l| l != reference)
        .collect();
    present.sort_unstable();
    wanted.sort_unstable();
    present == wanted
}

#[cfg(test)]
mod tests {
    use super::*;

    fn demo() -> ModelFile {
        let path = concat!(
            env!("CARGO_MANIFEST_DIR"),
            "/model-files/lease-arrears/versions/1.0.0.json"
        );
        let bytes = std::fs::read(path).expect("read");
        Model::from_json(&bytes).expect("valid").file
    }

    #[test]
    fn a_full_set_of_level_indicators_becomes_the_bare_categorical() {
        let template = Template::of(&demo());
        assert_eq!(
            template.terms,
            "log(annual_revenue), years_trading, years_trading^2, prior_arrears, guarantor, \
             years_trading*guarantor, sector"
        );
        assert!(template.intercept);
        assert_eq!(
            template.categorical,
            vec![CategoricalSpec {
                column: "sector".into(),
                reference: Some("construction".into())
            }]
        );
        assert_eq!(template.count, vec!["prior_arrears"]);
        assert_eq!(template.threshold, Some(0.3));
        assert_eq!(template.bands.len(), 3);
    }

    #[test]
    fn a_partial_set_of_level_indicators_stays_as_written() {
        let mut file = demo();
        file.terms.retain(|t| t.term != "sector=retail");
        let template = Template::of(&file);
        assert!(
            template
                .terms
                .ends_with("sector=hospitality, sector=logistics, sector=manufacturing"),
            "{}",
            template.terms
        );
    }

    #[test]
    fn own_terms_drop_the_settings_of_unused_columns() {
        let mut template = Template::of(&demo());
        template.restrict_to("years_trading, guarantor");
        assert!(template.categorical.is_empty());
        assert!(template.count.is_empty());
        assert_eq!(template.continuous, vec!["years_trading"]);
        assert_eq!(
            template.units,
            vec![("years_trading".into(), "years".into())]
        );
    }
}
