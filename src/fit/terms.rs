//! The `--terms` list: splitting it into items, parsing each with the model's own term syntax
//! ([`TermText::parse`]), and expanding categorical covariates into level indicators once the
//! data has told us their levels.
//!
//! Expansion rules (documented in `ogive fit --help`):
//!
//! ```text
//! sector                 one indicator per non-reference level: sector=b, sector=c, …
//! sector=retail          that level's indicator alone (the level must occur in the data)
//! years*sector           one product per non-reference level: years*sector=b, years*sector=c, …
//! sector*region          every pair of non-reference levels
//! ```
//!
//! The intercept comes first unless `--no-intercept`; writing `intercept` in the list is allowed
//! and changes nothing. This module resolves names to covariate indices and checks kinds; it
//! does not look at values (the reader checks log domains, the rank check collinearity).

use crate::model::file::CovariateKind;
use crate::model::{Factor, Term, TermText};

use super::error::FitError;

/// Split a `--terms` list at the commas that lie outside brackets and parentheses, and parse
/// each item.
pub fn parse_term_list(list: &str) -> Result<Vec<TermText>, FitError> {
    let mut items = Vec::new();
    let mut depth = 0i32;
    let mut start = 0;
    for (i, ch) in list.char_indices() {
        match ch {
            '[' | '(' => depth += 1,
            ']' | ')' => depth -= 1,
            ',' if depth == 0 => {
                items.push(&list[start..i]);
                start = i + 1;
            }
            _ => {}
        }
    }
    items.push(&list[start..]);
    items
        .into_iter()
        .enumerate()
        .map(|(i, text)| {
            TermText::parse(text).map_err(|source| FitError::TermSyntax {
                position: i + 1,
                text: text.trim().to_string(),
                source,
            })
        })
        .collect()
}

/// Every covariate name the terms mention, in order of first appearance.
pub fn covariate_names(terms: &[TermText]) -> Vec<String> {
    let mut names: Vec<String> = Vec::new();
    for term in terms {
        for name in term.covariate_names() {
            if !names.iter().any(|n| n == name) {
                names.push(name.to_string());
            }
        }
    }
    names
}

/// The labels of the log terms over each covariate (the reader refuses values ≤ 0 for them).
pub fn log_term_of(terms: &[TermText], covariate: &str) -> Option<String> {
    terms.iter().find_map(|t| match t {
        TermText::Log(n) if n == covariate => Some(t.to_string()),
        _ => None,
    })
}

/// What the expansion needs to know of a covariate.
#[derive(Debug, Clone)]
pub struct CovariateShape {
    pub name: String,
    pub kind: CovariateKind,
    /// Levels of a categorical covariate (sorted).
    pub levels: Vec<String>,
    /// The reference level's index.
    pub reference: usize,
}

/// One column of the design: its canonical text and its resolved term.
#[derive(Debug, Clone, PartialEq)]
pub struct DesignTerm {
    /// The canonical text, as written to the model file.
    pub text: TermText,
    /// The term with covariate indices resolved.
    pub term: Term,
}

impl DesignTerm {
    /// The canonical label.
    pub fn label(&self) -> String {
        self.text.to_string()
    }
}

fn index_of(shapes: &[CovariateShape], name: &str) -> usize {
    // Every name in the terms was read as a covariate, so it is present.
    shapes.iter().position(|s| s.name == name).unwrap_or(0)
}

/// The expansions of one factor: (text, factor) for each column it stands for.
fn expand_factor(
    factor: &TermText,
    written: &str,
    shapes: &[CovariateShape],
) -> Result<Vec<(TermText, Factor)>, FitError> {
    match factor {
        TermText::Name(n) => {
            let c = index_of(shapes, n);
            let shape = &shapes[c];
            if shape.kind == CovariateKind::Categorical {
                Ok((0..shape.levels.len())
                    .filter(|&l| l != shape.reference)
                    .map(|l| {
                        (
                            TermText::Level(n.clone(), shape.levels[l].clone()),
                            Factor::Level(c, l),
                        )
                    })
                    .collect())
            } else {
                Ok(vec![(factor.clone(), Factor::Value(c))])
            }
        }
        TermText::Level(n, level) => {
            let c = index_of(shapes, n);
            let shape = &shapes[c];
            if shape.kind != CovariateKind::Categorical {
                return Err(FitError::TermKind {
                    term: written.to_string(),
                    problem: format!(
                        "'{n}' is {}, not categorical, so it has no levels (name it with --categorical {n} if its values are levels)",
                        shape.kind.name()
                    ),
                });
            }
            let l = shape
                .levels
                .iter()
                .position(|x| x == level)
                .ok_or_else(|| FitError::LevelNotObserved {
                    covariate: n.clone(),
                    level: level.clone(),
                    levels: shape.levels.join(", "),
                })?;
            Ok(vec![(factor.clone(), Factor::Level(c, l))])
        }
        _ => Err(FitError::TermKind {
            term: written.to_string(),
            problem: "a product's factors are covariates or level indicators".into(),
        }),
    }
}

fn numeric_covariate(
    name: &str,
    written: &str,
    what: &str,
    shapes: &[CovariateShape],
) -> Result<usize, FitError> {
    let c = index_of(shapes, name);
    if shapes[c].kind == CovariateKind::Categorical {
        return Err(FitError::TermKind {
            term: written.to_string(),
            problem: format!("'{name}' is categorical and has no {what}"),
        });
    }
    Ok(c)
}

/// Expand the parsed terms into the columns of the design, intercept first if wanted.
pub fn expand(
    terms: &[TermText],
    shapes: &[CovariateShape],
    intercept: bool,
) -> Result<Vec<DesignTerm>, FitError> {
    let mut out: Vec<DesignTerm> = Vec::new();
    if intercept {
        out.push(DesignTerm {
            text: TermText::Intercept,
            term: Term::Intercept,
        });
    } else if terms.contains(&TermText::Intercept) {
        return Err(FitError::BadOption(
            "--terms lists 'intercept' but --no-intercept was given".into(),
        ));
    }
    for text in terms {
        let written = text.to_string();
        let expanded: Vec<DesignTerm> = match text {
            TermText::Intercept => Vec::new(),
            TermText::Name(_) | TermText::Level(..) => expand_factor(text, &written, shapes)?
                .into_iter()
                .map(|(text, factor)| DesignTerm {
                    text,
                    term: match factor {
                        Factor::Value(c) => Term::Covariate(c),
                        Factor::Level(c, l) => Term::Level(c, l),
                    },
                })
                .collect(),
            TermText::Power(n, k) => vec![DesignTerm {
                text: text.clone(),
                term: Term::Power(numeric_covariate(n, &written, "powers", shapes)?, *k),
            }],
            TermText::Log(n) => vec![DesignTerm {
                text: text.clone(),
                term: Term::Log(numeric_covariate(n, &written, "logarithm", shapes)?),
            }],
            TermText::Product(factors) => {
                let mut combinations: Vec<(Vec<TermText>, Vec<Factor>)> =
                    vec![(Vec::new(), Vec::new())];
                for factor in factors {
                    let choices = expand_factor(factor, &written, shapes)?;
                    let mut next = Vec::with_capacity(combinations.len() * choices.len());
                    for (texts, resolved) in &combinations {
                        for (t, f) in &choices {
                            let mut texts = texts.clone();
                            texts.push(t.clone());
                            let mut resolved = resolved.clone();
                            resolved.push(f.clone());
                            next.push((texts, resolved));
                        }
                    }
                    combinations = next;
                }
                combinations
                    .into_iter()
                    .map(|(texts, factors)| DesignTerm {
                        text: TermText::Product(texts),
                        term: Term::Product(factors),
                    })
                    .collect()
            }
        };
        for term in expanded {
            if out.iter().any(|t| t.text == term.text) {
                return Err(FitError::DuplicateTerm(term.label()));
            }
            out.push(term);
        }
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn shapes() -> Vec<CovariateShape> {
        vec![
            CovariateShape {
                name: "years".into(),
                kind: CovariateKind::Continuous,
                levels: vec![],
                reference: 0,
            },
            CovariateShape {
                name: "sector".into(),
                kind: CovariateKind::Categorical,
                levels: vec!["farm".into(), "retail".into(), "transport".into()],
                reference: 0,
            },
        ]
    }

    fn labels(list: &str) -> Vec<String> {
        let terms = parse_term_list(list).expect("parses");
        expand(&terms, &shapes(), true)
            .expect("expands")
            .iter()
            .map(DesignTerm::label)
            .collect()
    }

    #[test]
    fn a_bare_categorical_expands_into_its_non_reference_levels() {
        assert_eq!(
            labels("years, sector"),
            ["intercept", "years", "sector=retail", "sector=transport"]
        );
    }

    #[test]
    fn a_product_with_a_bare_categorical_expands_per_level() {
        assert_eq!(
            labels("years*sector, years^2"),
            [
                "intercept",
                "years*sector=retail",
                "years*sector=transport",
                "years^2"
            ]
        );
    }

    #[test]
    fn commas_inside_brackets_do_not_split() {
        let terms = parse_term_list("log(years), sector=retail").expect("parses");
        assert_eq!(terms.len(), 2);
        assert_eq!(covariate_names(&terms), ["years", "sector"]);
    }

    #[test]
    fn kinds_are_enforced() {
        let terms = parse_term_list("sector^2").expect("parses");
        let e = expand(&terms, &shapes(), true).unwrap_err();
        assert_eq!(
            e.to_string(),
            "term 'sector^2': 'sector' is categorical and has no powers"
        );
        let terms = parse_term_list("sector=mining").expect("parses");
        let e = expand(&terms, &shapes(), true).unwrap_err();
        assert_eq!(
            e.to_string(),
            "covariate 'sector' has no observations at level 'mining' (levels seen: farm, retail, transport)"
        );
        let terms = parse_term_list("years, years").expect("parses");
        assert!(matches!(
            expand(&terms, &shapes(), true),
            Err(FitError::DuplicateTerm(_))
        ));
    }
}
