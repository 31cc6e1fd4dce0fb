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
//! effect_NAME              with --effects, for each numeric or binary covariate NAME:
//! effect_NAME_se             its marginal effect and delta-method standard error
//! effect_NAME.LEVEL        for each non-reference LEVEL of a categorical covariate NAME:
//! effect_NAME.LEVEL_se       P(LEVEL) − P(reference) and its standard error
//! warnings                 semicolon-separated codes, empty when none:
//!                            out_of_range:NAME        NAME lies outside its training range
//!                            unusual_combination      the continuous covariates together lie
//!                                                     further from the training mean than
//!                                                     any training observation
//! ```
//!
//! A level's column carries the term notation (`effect_sector=retail`); covariate names cannot
//! contain `=`, so the split is unambiguous and the name needs no quoting in CSV. Numbers are written in the shortest form that reads back to the same `f64`.
//! A model without a covariance leaves the interval and `_se` cells empty.
//!
//! This module formats; it does not compute anything.

use csv::ByteRecord;

use super::BatchError;
use crate::engine::{effect_slots, Answer, EffectSlot, Warning};
use crate::model::Model;

/// The four columns every scored row gets, before any effect columns.
pub const PROBABILITY_COLUMNS: [&str; 4] = [
    "probability",
    "probability_lower",
    "probability_upper",
    "linear_index",
];

/// The last column: extrapolation warning codes.
pub const WARNINGS_COLUMN: &str = "warnings";

/// The name of the effect column for one slot (the standard error column adds `_se`).
pub fn effect_column(model: &Model, slot: &EffectSlot) -> String {
    let covariate = &model.covariates[slot.covariate];
    match slot.level {
        Some(level) => format!("effect_{}={}", covariate.name, covariate.levels[level]),
        None => format!("effect_{}", covariate.name),
    }
}

/// Every column `ogive score` appends, in order.
pub fn output_columns(model: &Model, effects: bool) -> Vec<String> {
    let mut columns: Vec<String> = PROBABILITY_COLUMNS.iter().map(|c| c.to_string()).collect();
    if effects {
        for slot in effect_slots(model) {
            let name = effect_column(model, &slot);
            let std_error = format!("{name}_se");
            columns.push(name);
            columns.push(std_error);
        }
    }
    columns.push(WARNINGS_COLUMN.to_string());
    columns
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
    effects: bool,
) -> Result<ByteRecord, BatchError> {
    let added = output_columns(model, effects);
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
}

impl RowWriter {
    /// A writer of rows scored by `model` (with effect columns if `effects`).
    pub fn new(model: &Model, effects: bool) -> RowWriter {
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
            effects,
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
        match text {
            // The length check confirms that the text holds exactly the fields and the commas
            // between them (no terminator, no stray bytes).
            Some(text)
                if text.len() + 1 == input.as_slice().len() + input.len()
                    && memchr::memchr(b'"', text).is_none() =>
            {
                out.extend_from_slice(text)
            }
            _ => push_fields(out, input),
        }
        self.push_number(out, Some(answer.probability));
        self.push_number(out, answer.interval.map(|i| i.lower));
        self.push_number(out, answer.interval.map(|i| i.upper));
        self.push_number(out, Some(answer.linear_index));
        if self.effects {
            for effect in &answer.effects {
                self.push_number(out, Some(effect.effect));
                self.push_number(out, effect.std_error);
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
        out.push(b'\n');
    }

    /// Append `,x` (or `,` alone for no value); a number never needs quotes.
    #[inline]
    fn push_number(&mut self, out: &mut Vec<u8>, x: Option<f64>) {
        out.push(b',');
        if let Some(x) = x {
            out.extend_from_slice(self.number.format(x).as_bytes());
        }
    }
}
