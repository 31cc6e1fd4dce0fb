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

use std::io::Write;

use csv::ByteRecord;

use super::BatchError;
use crate::engine::{effect_slots, Answer, EffectSlot, Warning};
use crate::model::Model;

/// Bytes the CSV writer buffers at a time.
const WRITE_BUFFER_BYTES: usize = 256 * 1024;

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

/// Writes scored rows: the input fields, then the added columns.
pub struct RowWriter<W: Write> {
    writer: csv::Writer<W>,
    out: ByteRecord,
    number: ryu::Buffer,
    warnings: Vec<u8>,
    out_of_range_codes: Vec<Vec<u8>>,
    effects: bool,
}

impl<W: Write> RowWriter<W> {
    /// Write the header: the input's columns followed by [`output_columns`]. Refuses an input
    /// that already has a column of one of those names, so that no output is ambiguous.
    pub fn new(
        model: &Model,
        output: W,
        input_header: &ByteRecord,
        effects: bool,
    ) -> Result<RowWriter<W>, BatchError> {
        let added = output_columns(model, effects);
        for field in input_header {
            let name = String::from_utf8_lossy(field);
            if let Some(taken) = added.iter().find(|a| a.as_str() == name.trim()) {
                return Err(BatchError::OutputColumnTaken(taken.clone()));
            }
        }
        let mut writer = csv::WriterBuilder::new()
            .buffer_capacity(WRITE_BUFFER_BYTES)
            .from_writer(output);
        let mut header = input_header.clone();
        for name in &added {
            header.push_field(name.as_bytes());
        }
        writer
            .write_byte_record(&header)
            .map_err(BatchError::Write)?;
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
        Ok(RowWriter {
            writer,
            out: ByteRecord::with_capacity(1024, header.len()),
            number: ryu::Buffer::new(),
            warnings: Vec::with_capacity(256),
            out_of_range_codes,
            effects,
        })
    }

    /// Write one scored row: `input` unchanged, then the answer's columns.
    #[inline]
    pub fn write(&mut self, input: &ByteRecord, answer: &Answer) -> Result<(), BatchError> {
        self.out.clear();
        for field in input {
            self.out.push_field(field);
        }
        self.push_number(Some(answer.probability));
        self.push_number(answer.interval.map(|i| i.lower));
        self.push_number(answer.interval.map(|i| i.upper));
        self.push_number(Some(answer.linear_index));
        if self.effects {
            for effect in &answer.effects {
                self.push_number(Some(effect.effect));
                self.push_number(effect.std_error);
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
        self.out.push_field(&self.warnings);
        self.writer
            .write_byte_record(&self.out)
            .map_err(BatchError::Write)
    }

    /// Flush everything written.
    pub fn finish(mut self) -> Result<(), BatchError> {
        self.writer.flush().map_err(|e| BatchError::Write(e.into()))
    }

    #[inline]
    fn push_number(&mut self, x: Option<f64>) {
        match x {
            Some(x) => self.out.push_field(self.number.format(x).as_bytes()),
            None => self.out.push_field(b""),
        }
    }
}
