//! The columns `ogive score` adds and how each cell is written.
//!
//! Every input column is kept as it was read (bytes unchanged, covariates or not), and these
//! are appended, in this order:
//!
//! ```text
//! probability              p = F(z)
//! probability_lower        lower end of the interval for p (built on the index scale)
//! probability_upper        upper end
//! linear_index             z = βᵀt
//! band                     with --decision, when the model names bands: the band p falls in
//! above_threshold          with --decision, when the model has a threshold: true or false
//! effect_NAME              with --effects, for each numeric or binary covariate NAME:
//! effect_NAME_se             its marginal effect and delta-method standard error
//! effect_NAME=LEVEL        for each non-reference LEVEL of a categorical covariate NAME:
//! effect_NAME=LEVEL_se       P(LEVEL) − P(reference) and its standard error
//! contribution_NAME        with --contributions, for each covariate NAME: how far it moves
//!                            the index from the training-mean profile (z minus z with NAME
//!                            alone at its training mean, or its training shares)
//! warnings                 semicolon-separated codes, empty when none:
//!                            out_of_range:NAME        NAME lies outside its training range
//!                            unusual_combination      the continuous covariates together lie
//!                                                     further from the training mean than
//!                                                     any training observation
//! error                    with --on-error keep: empty for a scored row; for a row that
//!                            cannot be scored, what is wrong with it (every other added
//!                            cell of that row is then empty)
//! ```
//!
//! A level's column carries the term notation (`effect_sector=retail`); covariate names cannot
//! contain `=`, so the split is unambiguous and the name needs no quoting in CSV. Numbers are
//! written in the shortest form that reads back to the same `f64`. A model without a
//! covariance leaves the interval and `_se` cells empty.
//!
//! This module formats; it does not compute anything.

use csv::ByteRecord;

use super::{BadRowPolicy, BatchError, RowProblem, ScoreOptions};
use crate::engine::{effect_slots, Answer, EffectSlot, Warning};
use crate::model::Model;

/// The four columns every scored row gets, before any effect columns.
pub const PROBABILITY_COLUMNS: [&str; 4] = [
    "probability",
    "probability_lower",
    "probability_upper",
    "linear_index",
];

/// Extrapolation warning codes.
pub const WARNINGS_COLUMN: &str = "warnings";

/// The decision band's name (with `--decision`, when the model names bands).
pub const BAND_COLUMN: &str = "band";

/// Whether p is at or above the decision threshold (with `--decision`, when the model has one).
pub const THRESHOLD_COLUMN: &str = "above_threshold";

/// The last column under [`BadRowPolicy::Keep`]: what is wrong with a row not scored.
pub const ERROR_COLUMN: &str = "error";

/// The name of a covariate's contribution column.
pub fn contribution_column(model: &Model, covariate: usize) -> String {
    format!("contribution_{}", model.covariates[covariate].name)
}

/// Which decision columns a model gives: `(band, above_threshold)`.
fn decision_columns(model: &Model) -> (bool, bool) {
    model.file.decision.as_ref().map_or((false, false), |d| {
        (!d.bands.is_empty(), d.threshold.is_some())
    })
}

/// The name of the effect column for one slot (the standard error column adds `_se`).
pub fn effect_column(model: &Model, slot: &EffectSlot) -> String {
    let covariate = &model.covariates[slot.covariate];
    match slot.level {
        Some(level) => format!("effect_{}={}", covariate.name, covariate.levels[level]),
        None => format!("effect_{}", covariate.name),
    }
}

/// Every column `ogive score` appends with these options, in order. Refuses `--decision` for
/// a model with neither a threshold nor bands.
pub fn output_columns(model: &Model, options: &ScoreOptions) -> Result<Vec<String>, BatchError> {
    let mut columns: Vec<String> = PROBABILITY_COLUMNS.iter().map(|c| c.to_string()).collect();
    if options.decision {
        let (band, threshold) = decision_columns(model);
        if !band && !threshold {
            return Err(BatchError::NoDecision {
                model: model.name().to_string(),
                version: model.version().to_string(),
            });
        }
        if band {
            columns.push(BAND_COLUMN.to_string());
        }
        if threshold {
            columns.push(THRESHOLD_COLUMN.to_string());
        }
    }
    if options.effects {
        for slot in effect_slots(model) {
            let name = effect_column(model, &slot);
            let std_error = format!("{name}_se");
            columns.push(name);
            columns.push(std_error);
        }
    }
    if options.contributions {
        columns.extend((0..model.covariates.len()).map(|j| contribution_column(model, j)));
    }
    columns.push(WARNINGS_COLUMN.to_string());
    if options.on_error == BadRowPolicy::Keep {
        columns.push(ERROR_COLUMN.to_string());
    }
    Ok(columns)
}

/// The warning code of one warning, as written in the `warnings` column.
pub fn warning_code(model: &Model, warning: &Warning) -> String {
    match warning {
        Warning::OutOfRange { covariate, .. } => {
            format!("out_of_range:{}", model.covariates[*covariate].name)
        }
        Warning::UnusualCombination { .. } => "unusual_combination".to_string(),
    }
}

/// The output's header: the input's columns followed by [`output_columns`]. Refuses an input
/// that already has a column of one of those names, so that no output is ambiguous.
pub fn output_header(
    model: &Model,
    input_header: &ByteRecord,
    options: &ScoreOptions,
) -> Result<ByteRecord, BatchError> {
    let added = output_columns(model, options)?;
    for field in input_header {
        let name = String::from_utf8_lossy(field);
        if let Some(taken) = added.iter().find(|a| a.as_str() == name.trim()) {
            return Err(BatchError::OutputColumnTaken(taken.clone()));
        }
    }
    let mut header = input_header.clone();
    for name in &added {
        header.push_field(name.as_bytes());
    }
    Ok(header)
}

/// Whether a field must be quoted: it holds a comma, a quote, or a line break.
#[inline]
fn needs_quotes(field: &[u8]) -> bool {
    field
        .iter()
        .any(|&b| matches!(b, b',' | b'"' | b'\n' | b'\r'))
}

/// Append one field, quoted (with inner quotes doubled) only where it must be.
#[inline]
fn push_field(out: &mut Vec<u8>, field: &[u8]) {
    if !needs_quotes(field) {
        out.extend_from_slice(field);
        return;
    }
    out.push(b'"');
    for &b in field {
        if b == b'"' {
            out.push(b'"');
        }
        out.push(b);
    }
    out.push(b'"');
}

/// Append a record's fields, comma-separated, without a terminator.
fn push_fields(out: &mut Vec<u8>, record: &ByteRecord) {
    for (i, field) in record.iter().enumerate() {
        if i > 0 {
            out.push(b',');
        }
        push_field(out, field);
    }
}

/// Append an input record: its text as read when that is exactly its fields joined by commas
/// (no quote anywhere; the length check rules out a terminator or stray bytes), else field by
/// field.
#[inline]
fn push_input(out: &mut Vec<u8>, input: &ByteRecord, text: Option<&[u8]>) {
    match text {
        Some(text)
            if text.len() + 1 == input.as_slice().len() + input.len()
                && memchr::memchr(b'"', text).is_none() =>
        {
            out.extend_from_slice(text)
        }
        _ => push_fields(out, input),
    }
}

/// Formats scored rows as CSV lines (`\n`-terminated, fields quoted only where they must be):
/// the input fields, then the added columns.
///
/// An input record's text is copied as it stands when it has no quote at all: its fields then
/// hold no comma, quote or line break, so the text is exactly its fields joined by commas,
/// which is what field-by-field writing would give. Any other record is written field by field.
pub struct RowWriter {
    number: ryu::Buffer,
    warnings: Vec<u8>,
    out_of_range_codes: Vec<Vec<u8>>,
    effects: bool,
    /// Band names, when the band column is written.
    bands: Option<Vec<Vec<u8>>>,
    threshold: bool,
    /// One contribution per covariate, in covariate order, when those columns are written.
    contributions: Option<Vec<f64>>,
    error: bool,
    /// The number of added cells before the error column, left empty for a row in error.
    added_before_error: usize,
    /// A row-in-error's message.
    message: String,
}

impl RowWriter {
    /// A writer of rows scored by `model`, with the columns `options` ask for (see
    /// [`output_columns`], which checks them first).
    pub fn new(model: &Model, options: &ScoreOptions) -> RowWriter {
        let (band, threshold) = if options.decision {
            decision_columns(model)
        } else {
            (false, false)
        };
        let bands = band.then(|| {
            model
                .file
                .decision
                .iter()
                .flat_map(|d| &d.bands)
                .map(|b| b.name.clone().into_bytes())
                .collect()
        });
        let error = options.on_error == BadRowPolicy::Keep;
        let added_before_error =
            output_columns(model, options).map_or(0, |c| c.len() - usize::from(error));
        let out_of_range_codes = (0..model.covariates.len())
            .map(|j| {
                warning_code(
                    model,
                    &Warning::OutOfRange {
                        covariate: j,
                        value: 0.0,
                        min: 0.0,
                        max: 0.0,
                    },
                )
                .into_bytes()
            })
            .collect();
        RowWriter {
            number: ryu::Buffer::new(),
            warnings: Vec::with_capacity(256),
            out_of_range_codes,
            effects: options.effects,
            bands,
            threshold,
            contributions: options
                .contributions
                .then(|| vec![0.0; model.covariates.len()]),
            error,
            added_before_error,
            message: String::new(),
        }
    }

    /// Append a header record (see [`output_header`]) to `out`.
    pub fn write_header(&mut self, out: &mut Vec<u8>, header: &ByteRecord) {
        push_fields(out, header);
        out.push(b'\n');
    }

    /// Append one scored row to `out`: the input fields unchanged, then the answer's columns.
    /// `text` is the record's text as read, without its terminator, if the caller has it.
    #[inline]
    pub fn write(
        &mut self,
        out: &mut Vec<u8>,
        input: &ByteRecord,
        text: Option<&[u8]>,
        answer: &Answer,
    ) {
        push_input(out, input, text);
        push_number(&mut self.number, out, Some(answer.probability));
        push_number(&mut self.number, out, answer.interval.map(|i| i.lower));
        push_number(&mut self.number, out, answer.interval.map(|i| i.upper));
        push_number(&mut self.number, out, Some(answer.linear_index));
        if let Some(bands) = &self.bands {
            out.push(b',');
            if let Some(band) = answer.band.and_then(|b| bands.get(b)) {
                push_field(out, band);
            }
        }
        if self.threshold {
            out.extend_from_slice(match answer.above_threshold {
                Some(true) => b",true",
                Some(false) => b",false",
                None => b",",
            });
        }
        if self.effects {
            for effect in &answer.effects {
                push_number(&mut self.number, out, Some(effect.effect));
                push_number(&mut self.number, out, effect.std_error);
            }
        }
        if let Some(by_covariate) = &mut self.contributions {
            for c in &answer.contributions {
                by_covariate[c.covariate] = c.contribution;
            }
            for &x in by_covariate.iter() {
                push_number(&mut self.number, out, Some(x));
            }
        }
        self.warnings.clear();
        for (i, warning) in answer.warnings.iter().enumerate() {
            if i > 0 {
                self.warnings.push(b';');
            }
            match warning {
                Warning::OutOfRange { covariate, .. } => self
                    .warnings
                    .extend_from_slice(&self.out_of_range_codes[*covariate]),
                Warning::UnusualCombination { .. } => {
                    self.warnings.extend_from_slice(b"unusual_combination")
                }
            }
        }
        out.push(b',');
        push_field(out, &self.warnings);
        if self.error {
            out.push(b',');
        }
        out.push(b'\n');
    }

    /// Append a row that could not be scored, under [`BadRowPolicy::Keep`]: its fields (padded
    /// with empty ones, or cut, to the header's `header_len`, as the problem then says), empty
    /// added cells, and the problem in the error column.
    pub fn write_error(
        &mut self,
        out: &mut Vec<u8>,
        input: &ByteRecord,
        text: Option<&[u8]>,
        header_len: usize,
        problem: &RowProblem,
    ) {
        use std::fmt::Write as _;
        if input.len() == header_len {
            push_input(out, input, text);
        } else {
            for i in 0..header_len {
                if i > 0 {
                    out.push(b',');
                }
                push_field(out, input.get(i).unwrap_or_default());
            }
        }
        for _ in 0..self.added_before_error {
            out.push(b',');
        }
        self.message.clear();
        let _ = write!(self.message, "{problem}");
        if input.len() > header_len {
            let _ = write!(
                self.message,
                "; the fields after the {header_len}th are not written"
            );
        }
        out.push(b',');
        push_field(out, self.message.as_bytes());
        out.push(b'\n');
    }
}

/// Append `,x` (or `,` alone for no value); a number never needs quotes.
#[inline]
fn push_number(number: &mut ryu::Buffer, out: &mut Vec<u8>, x: Option<f64>) {
    out.push(b',');
    if let Some(x) = x {
        out.extend_from_slice(number.format(x).as_bytes());
    }
}
