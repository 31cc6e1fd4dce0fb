//! Everything that can stop a fit, as one enum whose variants carry the bad value and where it
//! was (row, column, term), so that the message alone tells the data team what to mend.
//!
//! Rows are data rows counted from 1 after the header line (a spreadsheet's row numbers are one
//! more, because of the header).

use std::path::PathBuf;

use crate::model::term::TermSyntaxError;
use crate::model::ModelError;

/// Why a fit failed.
#[derive(Debug, thiserror::Error)]
pub enum FitError {
    /// The data file could not be opened or read.
    #[error("cannot read '{path}': {source}")]
    Read {
        /// The file's path, as given on the command line or in its environment variable.
        path: PathBuf,
        /// The operating system's reason.
        source: std::io::Error,
    },
    /// The model file could not be written.
    #[error("cannot write '{path}': {source}")]
    Write {
        /// The file's path, as given on the command line or in its environment variable.
        path: PathBuf,
        /// The operating system's reason.
        source: std::io::Error,
    },
    /// The CSV is malformed (the csv parser's own message, with the row).
    #[error("malformed CSV at row {row}: {message}")]
    Csv {
        /// The data row, counted from 1 below the header row.
        row: u64,
        /// What the parser said.
        message: String,
    },
    /// The file has no header line.
    #[error("the data file is empty: expected a header line naming the columns")]
    NoHeader,
    /// The header has a column name that is not UTF-8 text.
    #[error("header column {0} is not UTF-8 text")]
    HeaderNotText(usize),
    /// A column the fit needs is not in the header.
    #[error("column '{column}' is not in the data (columns: {available})")]
    MissingColumn {
        /// The column asked for.
        column: String,
        /// The header, comma-separated.
        available: String,
    },
    /// A column the fit needs appears twice in the header.
    #[error("column '{0}' appears more than once in the header")]
    DuplicateColumn(String),
    /// A row with fewer fields than the header.
    #[error("row {row} has {found} fields but the header has {expected}")]
    ShortRow {
        /// The data row, counted from 1 below the header row.
        row: u64,
        /// Fields found.
        found: usize,
        /// Fields in the header.
        expected: usize,
    },
    /// There are no data rows (or none left after dropping missing values).
    #[error("no observations to fit{0}")]
    NoRows(String),
    /// An empty or `NA` cell, without `--drop-missing`.
    #[error("row {row}, column '{column}': missing value (use --drop-missing to drop such rows)")]
    Missing {
        /// The data row, counted from 1 below the header row.
        row: u64,
        /// The column's name as the header row spells it.
        column: String,
    },
    /// A weight that is not a finite number ≥ 0.
    #[error("row {row}, column '{column}': the weight {text:?} {problem} (weights are finite numbers ≥ 0)")]
    BadWeight {
        /// The data row, counted from 1 below the header row.
        row: u64,
        /// The weight column's name (`--weights` or `--sampling-weights`).
        column: String,
        /// The cell as written.
        text: String,
        /// What is wrong with it.
        problem: &'static str,
    },
    /// Every weight is zero, so no observation counts.
    #[error("every weight in column '{column}' is zero ({rows} rows): no observation counts")]
    WeightsAllZero {
        /// The weight column's name (`--weights` or `--sampling-weights`).
        column: String,
        /// Rows read.
        rows: u64,
    },
    /// A numeric column with a cell that is not a number.
    #[error("row {row}, column '{column}': {text:?} is not a number (if the column holds levels, name it with --categorical {column})")]
    NotANumber {
        /// The data row, counted from 1 below the header row.
        row: u64,
        /// The column's name as the header row spells it.
        column: String,
        /// The cell's text.
        text: String,
    },
    /// A number that is infinite.
    #[error("row {row}, column '{column}': {text:?} is not a finite number")]
    NotFinite {
        /// The data row, counted from 1 below the header row.
        row: u64,
        /// The column's name as the header row spells it.
        column: String,
        /// The cell's text.
        text: String,
    },
    /// A cell of a categorical column that is not UTF-8 text.
    #[error("row {row}, column '{column}': the level is not UTF-8 text")]
    LevelNotText {
        /// The data row, counted from 1 below the header row.
        row: u64,
        /// The column's name as the header row spells it.
        column: String,
    },
    /// A categorical level that cannot be written inside a term such as `sector=level`.
    #[error("column '{column}': level {level:?} cannot be named in a term (levels may not contain '*' or ',' or start or end with a space)")]
    LevelNotNameable {
        /// The column's name as the header row spells it.
        column: String,
        /// The level as the data spell it.
        level: String,
    },
    /// An outcome cell that is not 0/1 (or false/true).
    #[error("row {row}: outcome '{column}' must be 0 or 1 (or false/true), got {text:?}")]
    OutcomeNotBinary {
        /// The data row, counted from 1 below the header row.
        row: u64,
        /// The outcome column's name as the header row spells it (its cells are 0/1 or false/true).
        column: String,
        /// The cell's text.
        text: String,
    },
    /// Every observation has the same outcome.
    #[error("outcome '{column}' is {value} in all {rows} observations: a binary model needs both outcomes")]
    OutcomeConstant {
        /// The outcome column's name as the header row spells it (its cells are 0/1 or false/true).
        column: String,
        /// The only value seen.
        value: u8,
        /// Observations.
        rows: u64,
    },
    /// The `--terms` list does not parse.
    #[error("--terms item {position} ('{text}'): {source}")]
    TermSyntax {
        /// 1-based position in the list.
        position: usize,
        /// The item's text.
        text: String,
        /// What is wrong with it.
        source: TermSyntaxError,
    },
    /// A term used in a way its covariate's kind does not allow.
    #[error("term '{term}': {problem}")]
    TermKind {
        /// The term as written.
        term: String,
        /// What is wrong.
        problem: String,
    },
    /// The same term twice (after expansion of categorical covariates).
    #[error("term '{0}' appears more than once")]
    DuplicateTerm(String),
    /// A flag that names a column the terms do not use, or contradicts another flag.
    #[error("{0}")]
    BadOption(String),
    /// A categorical level named (as a reference or in a term) that never occurs in the data.
    #[error(
        "covariate '{covariate}' has no observations at level '{level}' (levels seen: {levels})"
    )]
    LevelNotObserved {
        /// The covariate's name: its column in the data.
        covariate: String,
        /// The level asked for.
        level: String,
        /// The levels in the data.
        levels: String,
    },
    /// A categorical covariate with a single level in the data.
    #[error("categorical covariate '{covariate}' takes the single level '{level}' in every observation: it cannot be estimated")]
    SingleLevel {
        /// The covariate's name: its column in the data.
        covariate: String,
        /// Its only level.
        level: String,
    },
    /// A log term over a value that is zero or negative.
    #[error("row {row}: term '{term}' needs {column} > 0, got {value}")]
    LogOfNonPositive {
        /// The data row, counted from 1 below the header row.
        row: u64,
        /// The log term.
        term: String,
        /// The covariate's name: its column in the data.
        column: String,
        /// The value the data gave, as parsed.
        value: f64,
    },
    /// A term that is a linear combination of earlier terms.
    #[error("the design is rank-deficient: {0}")]
    RankDeficient(String),
    /// The outcome is perfectly (or almost perfectly) predicted, so the estimate does not exist.
    #[error("{kind} separation: {detail}; the maximum-likelihood estimate does not exist (drop or merge the term, or collect more varied data)")]
    Separation {
        /// `complete` or `quasi-complete`.
        kind: &'static str,
        /// The term and direction.
        detail: String,
    },
    /// Newton–Raphson did not converge.
    #[error("the fit did not converge: {0}")]
    NotConverged(String),
    /// The negative Hessian at the estimate is not positive definite.
    #[error("the information matrix at the estimate is not positive definite, so there is no covariance: {0}")]
    SingularInformation(String),
    /// The assembled model file failed validation (a bug, reported rather than written).
    #[error("the fitted model file failed validation: {0}")]
    Invalid(#[from] ModelError),
}
