//! Terms: the columns of the design, their text syntax, their value at an observation and their
//! derivative with respect to each covariate.
//!
//! The text syntax is shared by `ogive fit --terms` and the model file, so a term reads the same
//! everywhere:
//!
//! ```text
//! intercept                 the constant 1
//! years_trading             a covariate itself
//! years_trading^2           an integer power (exponent 2 to 9)
//! log(annual_revenue)       the natural log (training range must be > 0)
//! sector=retail            the indicator of one level of a categorical covariate
//! years_trading*guarantor   a product of two or more factors; a factor is a covariate or a
//!                           level indicator such as sector=retail
//! ```
//!
//! A level indicator is `name=level`: everything after the first `=` is the level, so a level may
//! hold spaces (`sector=light manufacturing`) but not `*` or `,`, which separate factors and terms.
//!
//! This module parses and evaluates; it does not check that names exist (the model does that
//! once, at load, and then hands out [`Term`] values whose indices are known to be valid).

use std::fmt;

/// One factor of a product, or a simple term: a numeric covariate or a level indicator.
#[derive(Debug, Clone, PartialEq)]
pub enum Factor {
    /// The covariate's numeric value, by covariate index.
    Value(usize),
    /// 1 when the categorical covariate takes this level (indices of covariate and level).
    Level(usize, usize),
}

/// A term whose covariate indices have been resolved against a model's covariates.
#[derive(Debug, Clone, PartialEq)]
pub enum Term {
    /// The constant 1.
    Intercept,
    /// A numeric covariate.
    Covariate(usize),
    /// `x^k`.
    Power(usize, i32),
    /// `log(x)`.
    Log(usize),
    /// The indicator of one level of a categorical covariate.
    Level(usize, usize),
    /// A product of factors.
    Product(Vec<Factor>),
}

/// The parsed text of a term, with names not yet resolved.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum TermText {
    /// `intercept`
    Intercept,
    /// `name`
    Name(String),
    /// `name=level`
    Level(String, String),
    /// `name^k`
    Power(String, i32),
    /// `log(name)`
    Log(String),
    /// `a*b*…`, each factor a `Name` or a `Level`.
    Product(Vec<TermText>),
}

/// What is wrong with the text of a term.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum TermSyntaxError {
    /// Nothing between the commas.
    #[error("empty term")]
    Empty,
    /// A name that is not letters, digits and underscores starting with a letter or underscore.
    #[error("'{0}' is not a covariate name (letters, digits and _, not starting with a digit)")]
    BadName(String),
    /// A power whose exponent is not an integer from 2 to 9.
    #[error("in '{0}': the exponent must be an integer from 2 to 9")]
    BadExponent(String),
    /// Parentheses, brackets or operators the grammar does not allow.
    #[error("'{0}' is not a term: write name, name^k, log(name), name=level or a*b")]
    Unrecognised(String),
    /// A level indicator written with brackets; the notation is `name=level`.
    #[error("'{text}' is not a term: a level indicator is written {suggestion}")]
    Bracketed {
        /// The term as given.
        text: String,
        /// The same indicator in `name=level` notation.
        suggestion: String,
    },
}

/// The largest exponent a power term may have. Higher powers are numerically fragile and a sign
/// that a spline or a transformation is wanted instead.
pub const MAX_EXPONENT: i32 = 9;

/// Whether `s` is a valid covariate name: ASCII letters, digits and `_`, not starting with a digit.
pub fn is_covariate_name(s: &str) -> bool {
    let mut chars = s.chars();
    matches!(chars.next(), Some(c) if c.is_ascii_alphabetic() || c == '_')
        && chars.all(|c| c.is_ascii_alphanumeric() || c == '_')
}

fn parse_name(s: &str) -> Result<String, TermSyntaxError> {
    if is_covariate_name(s) {
        Ok(s.to_string())
    } else {
        Err(TermSyntaxError::BadName(s.to_string()))
    }
}

/// Parse a factor: `name` or `name=level`.
fn parse_factor(s: &str) -> Result<TermText, TermSyntaxError> {
    if let Some((name, level)) = s.split_once('=') {
        let level = level.trim();
        if level.is_empty() {
            return Err(TermSyntaxError::Unrecognised(s.to_string()));
        }
        Ok(TermText::Level(parse_name(name.trim())?, level.to_string()))
    } else if let Some(suggestion) = bracketed_level(s) {
        Err(TermSyntaxError::Bracketed {
            text: s.to_string(),
            suggestion,
        })
    } else {
        Ok(TermText::Name(parse_name(s)?))
    }
}

/// `name=level` for a factor written `name[level]`, so the refusal can show the notation.
fn bracketed_level(s: &str) -> Option<String> {
    let (name, rest) = s.split_once('[')?;
    let level = rest.strip_suffix(']')?.trim();
    (is_covariate_name(name.trim()) && !level.is_empty())
        .then(|| format!("{}={level}", name.trim()))
}

impl TermText {
    /// Parse the text of one term (surrounding white space is ignored).
    pub fn parse(text: &str) -> Result<TermText, TermSyntaxError> {
        let s = text.trim();
        if s.is_empty() {
            return Err(TermSyntaxError::Empty);
        }
        if s == "intercept" {
            return Ok(TermText::Intercept);
        }
        if let Some(inner) = s.strip_prefix("log(").and_then(|r| r.strip_suffix(')')) {
            return Ok(TermText::Log(parse_name(inner.trim())?));
        }
        if s.contains('*') {
            let factors = s
                .split('*')
                .map(|f| parse_factor(f.trim()))
                .collect::<Result<Vec<_>, _>>()?;
            return Ok(TermText::Product(factors));
        }
        if s.contains('=') {
            return parse_factor(s);
        }
        if let Some((base, exponent)) = s.split_once('^') {
            let k: i32 = exponent
                .trim()
                .parse()
                .map_err(|_| TermSyntaxError::BadExponent(s.to_string()))?;
            if !(2..=MAX_EXPONENT).contains(&k) {
                return Err(TermSyntaxError::BadExponent(s.to_string()));
            }
            return Ok(TermText::Power(parse_name(base.trim())?, k));
        }
        if bracketed_level(s).is_none() && s.contains(['(', ')', '+', '-', '/', ' ', '^', '[', ']'])
        {
            return Err(TermSyntaxError::Unrecognised(s.to_string()));
        }
        parse_factor(s)
    }

    /// Every covariate name this term mentions, in order of appearance.
    pub fn covariate_names(&self) -> Vec<&str> {
        match self {
            TermText::Intercept => vec![],
            TermText::Name(n)
            | TermText::Level(n, _)
            | TermText::Power(n, _)
            | TermText::Log(n) => {
                vec![n.as_str()]
            }
            TermText::Product(fs) => fs.iter().flat_map(|f| f.covariate_names()).collect(),
        }
    }
}

impl fmt::Display for TermText {
    /// The canonical spelling: the one written to model files and shown in answers.
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            TermText::Intercept => f.write_str("intercept"),
            TermText::Name(n) => f.write_str(n),
            TermText::Level(n, l) => write!(f, "{n}={l}"),
            TermText::Power(n, k) => write!(f, "{n}^{k}"),
            TermText::Log(n) => write!(f, "log({n})"),
            TermText::Product(fs) => {
                for (i, factor) in fs.iter().enumerate() {
                    if i > 0 {
                        f.write_str("*")?;
                    }
                    write!(f, "{factor}")?;
                }
                Ok(())
            }
        }
    }
}

/// The value a covariate takes in an observation, as the engine sees it.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Value {
    /// A continuous, count or binary covariate's number.
    Number(f64),
    /// A categorical covariate's level, by index into its levels.
    Level(usize),
    /// A categorical covariate at its training shares: each level indicator takes the share of
    /// that level in the training data. Used only for effects at the training means, where the
    /// "mean observation" of a categorical covariate is its vector of shares.
    Shares,
}

impl Value {
    /// The numeric value; 0 for a categorical value (never asked for by a valid model).
    #[inline]
    pub fn number(self) -> f64 {
        match self {
            Value::Number(x) => x,
            _ => 0.0,
        }
    }
}

/// Evaluation context: the training shares of every categorical covariate's levels, indexed by
/// covariate then level (empty for non-categorical covariates).
pub type LevelShares = [Vec<f64>];

#[inline]
fn indicator(values: &[Value], shares: &LevelShares, covariate: usize, level: usize) -> f64 {
    match values[covariate] {
        Value::Level(l) => f64::from(u8::from(l == level)),
        Value::Shares => shares[covariate][level],
        Value::Number(_) => 0.0,
    }
}

#[inline]
fn factor_value(factor: &Factor, values: &[Value], shares: &LevelShares) -> f64 {
    match *factor {
        Factor::Value(c) => values[c].number(),
        Factor::Level(c, l) => indicator(values, shares, c, l),
    }
}

impl Term {
    /// The term's value `t(x)` at an observation.
    #[inline]
    pub fn value(&self, values: &[Value], shares: &LevelShares) -> f64 {
        match self {
            Term::Intercept => 1.0,
            Term::Covariate(c) => values[*c].number(),
            Term::Power(c, k) => values[*c].number().powi(*k),
            Term::Log(c) => values[*c].number().ln(),
            Term::Level(c, l) => indicator(values, shares, *c, *l),
            Term::Product(fs) => fs.iter().map(|f| factor_value(f, values, shares)).product(),
        }
    }

    /// The derivative `∂t/∂x_j` with respect to numeric covariate `j`:
    ///
    /// ```text
    /// ∂x/∂x = 1     ∂x^k/∂x = k·x^(k−1)     ∂log x/∂x = 1/x
    /// ∂(a·b·…)/∂x = Σ over factors equal to x of the product of the other factors
    /// ```
    #[inline]
    pub fn derivative(&self, j: usize, values: &[Value], shares: &LevelShares) -> f64 {
        match self {
            Term::Intercept | Term::Level(..) => 0.0,
            Term::Covariate(c) => f64::from(u8::from(*c == j)),
            Term::Power(c, k) if *c == j => f64::from(*k) * values[j].number().powi(k - 1),
            Term::Log(c) if *c == j => 1.0 / values[j].number(),
            Term::Power(..) | Term::Log(..) => 0.0,
            Term::Product(fs) => {
                let mut total = 0.0;
                for (i, f) in fs.iter().enumerate() {
                    if *f == Factor::Value(j) {
                        let mut rest = 1.0;
                        for (m, other) in fs.iter().enumerate() {
                            if m != i {
                                rest *= factor_value(other, values, shares);
                            }
                        }
                        total += rest;
                    }
                }
                total
            }
        }
    }

    /// Whether the term's value depends on covariate `j`.
    pub fn involves(&self, j: usize) -> bool {
        match self {
            Term::Intercept => false,
            Term::Covariate(c) | Term::Power(c, _) | Term::Log(c) | Term::Level(c, _) => *c == j,
            Term::Product(fs) => fs
                .iter()
                .any(|f| matches!(*f, Factor::Value(c) | Factor::Level(c, _) if c == j)),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parses_every_form_and_prints_it_back() {
        for text in [
            "intercept",
            "years_trading",
            "years_trading^2",
            "log(annual_revenue)",
            "sector=retail",
            "years_trading*guarantor",
            "a*sector=light manufacturing*b",
        ] {
            let parsed = TermText::parse(text).expect(text);
            assert_eq!(parsed.to_string(), text);
        }
        assert_eq!(
            TermText::parse(" x ^ 3 "),
            Ok(TermText::Power("x".into(), 3))
        );
        assert_eq!(
            TermText::parse(" sector = light manufacturing "),
            Ok(TermText::Level(
                "sector".into(),
                "light manufacturing".into()
            ))
        );
        assert_eq!(
            TermText::parse("grade=a=b"),
            Ok(TermText::Level("grade".into(), "a=b".into()))
        );
    }

    #[test]
    fn a_bracketed_level_is_refused_with_the_notation_to_use() {
        let e = TermText::parse("x*sector[retail]").expect_err("brackets");
        assert_eq!(
            e.to_string(),
            "'sector[retail]' is not a term: a level indicator is written sector=retail"
        );
        assert!(matches!(
            TermText::parse("sector="),
            Err(TermSyntaxError::Unrecognised(_))
        ));
        assert!(matches!(
            TermText::parse("=retail"),
            Err(TermSyntaxError::BadName(_))
        ));
    }

    #[test]
    fn refuses_what_the_grammar_does_not_allow() {
        assert_eq!(TermText::parse("  "), Err(TermSyntaxError::Empty));
        assert!(matches!(
            TermText::parse("x^1"),
            Err(TermSyntaxError::BadExponent(_))
        ));
        assert!(matches!(
            TermText::parse("x^2.5"),
            Err(TermSyntaxError::BadExponent(_))
        ));
        assert!(matches!(
            TermText::parse("x+y"),
            Err(TermSyntaxError::Unrecognised(_))
        ));
        assert!(matches!(
            TermText::parse("exp(x)"),
            Err(TermSyntaxError::Unrecognised(_))
        ));
        assert!(matches!(
            TermText::parse("2x"),
            Err(TermSyntaxError::BadName(_))
        ));
        assert!(matches!(
            TermText::parse("log(x*y)"),
            Err(TermSyntaxError::BadName(_))
        ));
    }

    #[test]
    fn product_rule_counts_a_repeated_factor_twice() {
        let t = Term::Product(vec![Factor::Value(0), Factor::Value(0), Factor::Value(1)]);
        let values = [Value::Number(3.0), Value::Number(2.0)];
        // d(x·x·y)/dx = 2xy = 12
        assert_eq!(t.derivative(0, &values, &[]), 12.0);
        assert_eq!(t.value(&values, &[]), 18.0);
    }
}
