//! Terms: each parses, names covariates of the model in the way their kind allows, appears once
//! (in canonical spelling), has a finite coefficient, and a log term's covariate stays positive
//! over its whole training range.

use super::super::error::{err, finite, ModelError, ModelProblem};
use super::super::file::{CovariateKind, ModelFile};
use super::super::term::{Factor, Term, TermText};
use super::super::Covariate;

/// The resolved terms, their canonical labels and their coefficients, in file order.
pub(in crate::model) struct Terms {
    pub terms: Vec<Term>,
    pub labels: Vec<String>,
    pub coefficients: Vec<f64>,
}

/// Every term of `file`, resolved against its validated covariates.
pub(in crate::model) fn terms(
    file: &ModelFile,
    covariates: &[Covariate],
) -> Result<Terms, ModelError> {
    if file.terms.is_empty() {
        return Err(err(
            "terms",
            ModelProblem::Missing("a model needs at least one term".into()),
        ));
    }
    let mut out = Terms {
        terms: Vec::with_capacity(file.terms.len()),
        labels: Vec::with_capacity(file.terms.len()),
        coefficients: Vec::with_capacity(file.terms.len()),
    };
    for (i, spec) in file.terms.iter().enumerate() {
        let at = |f: &str| format!("terms[{i}].{f}");
        let text = TermText::parse(&spec.term).map_err(|e| err(at("term"), e.into()))?;
        let label = text.to_string();
        let term = resolve(&text, &label, covariates).map_err(|p| err(at("term"), p))?;
        if out.labels.contains(&label) {
            return Err(err(at("term"), ModelProblem::Duplicate(label)));
        }
        out.coefficients
            .push(finite(|| at("coefficient"), spec.coefficient)?);
        out.terms.push(term);
        out.labels.push(label);
    }
    Ok(out)
}

/// One parsed term against the covariates; `label` is its canonical text, for messages.
fn resolve(text: &TermText, label: &str, covariates: &[Covariate]) -> Result<Term, ModelProblem> {
    Ok(match text {
        TermText::Intercept => Term::Intercept,
        TermText::Name(_) | TermText::Level(..) => match factor(text, label, covariates)? {
            Factor::Value(c) => Term::Covariate(c),
            Factor::Level(c, l) => Term::Level(c, l),
        },
        TermText::Power(n, k) => Term::Power(number(n, label, covariates)?, *k),
        TermText::Log(n) => {
            let c = number(n, label, covariates)?;
            let min = covariates[c].training_min;
            if min.is_nan() || min <= 0.0 {
                return Err(ModelProblem::LogDomain {
                    term: label.to_string(),
                    covariate: n.clone(),
                    min,
                });
            }
            Term::Log(c)
        }
        TermText::Product(factors) => Term::Product(
            factors
                .iter()
                .map(|f| factor(f, label, covariates))
                .collect::<Result<Vec<_>, _>>()?,
        ),
    })
}

/// The index of the numeric covariate called `name`.
fn number(name: &str, label: &str, covariates: &[Covariate]) -> Result<usize, ModelProblem> {
    let c = find(name, label, covariates)?;
    if covariates[c].kind == CovariateKind::Categorical {
        return Err(ModelProblem::TermKind {
            term: label.to_string(),
            problem: format!(
                "'{name}' is categorical and cannot be used as a number; name a level, as in {name}={}",
                covariates[c].levels.get(1).map(String::as_str).unwrap_or("level")
            ),
        });
    }
    Ok(c)
}

/// A factor of a product (or a term on its own): a numeric covariate or a level indicator.
fn factor(text: &TermText, label: &str, covariates: &[Covariate]) -> Result<Factor, ModelProblem> {
    match text {
        TermText::Name(n) => Ok(Factor::Value(number(n, label, covariates)?)),
        TermText::Level(n, level) => {
            let c = find(n, label, covariates)?;
            let cov = &covariates[c];
            if cov.kind != CovariateKind::Categorical {
                return Err(ModelProblem::TermKind {
                    term: label.to_string(),
                    problem: format!(
                        "'{n}' is {}, not categorical, so it has no levels",
                        cov.kind.name()
                    ),
                });
            }
            let l = cov.levels.iter().position(|x| x == level).ok_or_else(|| {
                ModelProblem::UnknownLevel {
                    covariate: n.clone(),
                    level: level.clone(),
                    levels: cov.levels.join(", "),
                }
            })?;
            Ok(Factor::Level(c, l))
        }
        _ => Err(ModelProblem::TermKind {
            term: label.to_string(),
            problem: "a product's factors are covariates or level indicators".into(),
        }),
    }
}

fn find(name: &str, label: &str, covariates: &[Covariate]) -> Result<usize, ModelProblem> {
    covariates
        .iter()
        .position(|c| c.name == name)
        .ok_or_else(|| ModelProblem::UnknownCovariate {
            term: label.to_string(),
            covariate: name.to_string(),
        })
}

#[cfg(test)]
mod tests {
    use serde_json::json;

    use super::super::fixture::{accepted, refused};
    use crate::model::{Factor, ModelProblem, Term};

    #[test]
    fn the_fixture_resolves_every_kind_of_term() {
        let model = accepted(|_| {});
        assert_eq!(
            model.terms,
            vec![
                Term::Intercept,
                Term::Log(0),
                Term::Power(0, 2),
                Term::Covariate(1),
                Term::Level(2, 1),
                Term::Product(vec![Factor::Value(0), Factor::Value(1)]),
            ]
        );
    }

    #[test]
    fn no_terms_at_all() {
        let e = refused(|m| m["terms"] = json!([]));
        assert_eq!(e.field, "terms");
    }

    #[test]
    fn a_term_that_does_not_parse() {
        let e = refused(|m| m["terms"][3]["term"] = json!("guarantor +"));
        assert_eq!(e.field, "terms[3].term");
        assert!(matches!(e.problem, ModelProblem::TermSyntax(_)));
    }

    #[test]
    fn a_level_of_a_numeric_covariate() {
        let e = refused(|m| m["terms"][3]["term"] = json!("guarantor=yes"));
        assert_eq!(e.field, "terms[3].term");
        assert!(matches!(e.problem, ModelProblem::TermKind { .. }));
    }

    #[test]
    fn a_categorical_covariate_raised_to_a_power() {
        let e = refused(|m| m["terms"][2]["term"] = json!("region^2"));
        assert_eq!(e.field, "terms[2].term");
        assert!(
            matches!(e.problem, ModelProblem::TermKind { ref problem, .. } if problem.contains("region=south"))
        );
    }

    #[test]
    fn a_product_with_an_unknown_level() {
        let e = refused(|m| m["terms"][5]["term"] = json!("income*region=west"));
        assert_eq!(e.field, "terms[5].term");
        assert!(
            matches!(e.problem, ModelProblem::UnknownLevel { ref level, .. } if level == "west")
        );
    }

    #[test]
    fn a_coefficient_that_is_not_a_finite_number() {
        // JSON has no NaN, but a model built in code (the fitter) can carry one.
        let mut file: crate::model::ModelFile =
            serde_json::from_value(super::super::fixture::base()).expect("fixture parses");
        file.terms[1].coefficient = f64::INFINITY;
        let e = crate::model::Model::from_file(file).expect_err("refused");
        assert_eq!(e.field, "terms[1].coefficient");
        assert!(matches!(e.problem, ModelProblem::NonFinite(_)));
    }
}
