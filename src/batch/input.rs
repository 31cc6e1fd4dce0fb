//! Reading a CSV file row by row and turning the covariate columns into the engine's values.
//!
//! The header row maps each covariate of the model to its column (by exact name, ignoring
//! surrounding spaces); every other column is carried along untouched. One
//! [`csv::ByteRecord`] and one value vector are reused for every row, so reading allocates
//! nothing per row once the first rows have sized the buffers. Only the covariate cells are
//! decoded as UTF-8; other cells stay bytes.
//!
//! This module reads and parses; it does not score, write, or decide what to do with a bad row.

use std::io::Read;

use csv::ByteRecord;

use super::{BatchError, RowError, RowProblem};
use crate::model::{Model, Value};

/// Bytes the CSV reader buffers at a time.
const READ_BUFFER_BYTES: usize = 64 * 1024;

/// A CSV input whose header has been matched against a model's covariates.
#[derive(Debug)]
pub struct RowStream<R: Read> {
    reader: csv::Reader<R>,
    header: ByteRecord,
    covariates: CovariateColumns,
    record: ByteRecord,
    row: u64,
}

/// Where each of one model's covariates sits in a header, with the value buffer its rows are
/// parsed into. A [`RowStream`] holds one for its own model; [`RowStream::columns_for`] makes
/// another for a second model read from the same rows.
#[derive(Debug, Clone)]
pub struct CovariateColumns {
    columns: Vec<usize>,
    values: Vec<Value>,
}

impl CovariateColumns {
    fn find(model: &Model, header: &ByteRecord) -> Result<CovariateColumns, BatchError> {
        Ok(CovariateColumns {
            columns: covariate_columns(model, header)?,
            values: Vec::with_capacity(model.covariates.len()),
        })
    }

    #[inline]
    fn parse(
        &mut self,
        model: &Model,
        header: &ByteRecord,
        record: &ByteRecord,
        row: u64,
    ) -> Result<&[Value], RowError> {
        match parse_record(model, &self.columns, header.len(), record, &mut self.values) {
            Ok(()) => Ok(&self.values),
            Err(problem) => Err(RowError {
                row,
                line: record.position().map_or(0, |p| p.line()),
                problem,
            }),
        }
    }
}

impl<R: Read> RowStream<R> {
    /// Read the header of `input` and find each covariate's column.
    pub fn new(model: &Model, input: R) -> Result<RowStream<R>, BatchError> {
        let mut reader = csv::ReaderBuilder::new()
            .has_headers(true)
            // Rows of the wrong length are reported per row (and can be skipped), not as a
            // read failure that ends the file.
            .flexible(true)
            .buffer_capacity(READ_BUFFER_BYTES)
            .from_reader(input);
        let header = reader.byte_headers().map_err(BatchError::Read)?.clone();
        if header.iter().all(<[u8]>::is_empty) {
            return Err(BatchError::NoHeader);
        }
        let covariates = CovariateColumns::find(model, &header)?;
        Ok(RowStream {
            reader,
            header,
            covariates,
            record: ByteRecord::new(),
            row: 0,
        })
    }

    /// Match another model's covariates against this input's header, so that each row can
    /// also be parsed for that model with [`RowStream::parse_for`].
    pub fn columns_for(&self, model: &Model) -> Result<CovariateColumns, BatchError> {
        CovariateColumns::find(model, &self.header)
    }

    /// The header row as read.
    pub fn header(&self) -> &ByteRecord {
        &self.header
    }

    /// Read the next data row; `false` at the end of the input.
    #[inline]
    pub fn advance(&mut self) -> Result<bool, BatchError> {
        let more = self
            .reader
            .read_byte_record(&mut self.record)
            .map_err(BatchError::Read)?;
        if more {
            self.row += 1;
        }
        Ok(more)
    }

    /// The 1-based number of the current data row (the header is not counted).
    pub fn row(&self) -> u64 {
        self.row
    }

    /// The 1-based line on which the current row starts (the header is line 1).
    pub fn line(&self) -> u64 {
        self.record.position().map_or(0, |p| p.line())
    }

    /// The current row's fields, as read.
    pub fn record(&self) -> &ByteRecord {
        &self.record
    }

    /// Bytes of input consumed so far.
    pub fn bytes_read(&self) -> u64 {
        self.reader.position().byte()
    }

    /// Parse the current row's covariate cells into values the engine can score, with every
    /// check the model asks for (finite numbers, whole counts, log domains, known levels).
    #[inline]
    pub fn parse(&mut self, model: &Model) -> Result<&[Value], RowError> {
        self.covariates
            .parse(model, &self.header, &self.record, self.row)
    }

    /// [`RowStream::parse`] for the model that `columns` was made for.
    #[inline]
    pub fn parse_for<'c>(
        &self,
        model: &Model,
        columns: &'c mut CovariateColumns,
    ) -> Result<&'c [Value], RowError> {
        columns.parse(model, &self.header, &self.record, self.row)
    }
}

/// Each covariate's column in `header`, in covariate order: by exact name, ignoring
/// surrounding spaces. Refuses an empty header, a missing covariate and a covariate named
/// twice.
pub fn covariate_columns(model: &Model, header: &ByteRecord) -> Result<Vec<usize>, BatchError> {
    if header.iter().all(<[u8]>::is_empty) {
        return Err(BatchError::NoHeader);
    }
    let names: Vec<String> = header
        .iter()
        .map(|f| String::from_utf8_lossy(f).trim().to_string())
        .collect();
    let mut columns = Vec::with_capacity(model.covariates.len());
    for covariate in &model.covariates {
        let mut found = names
            .iter()
            .enumerate()
            .filter(|(_, n)| **n == covariate.name)
            .map(|(i, _)| i);
        let first = found.next().ok_or_else(|| BatchError::MissingColumn {
            covariate: covariate.name.clone(),
            columns: names.join(", "),
        })?;
        if let Some(second) = found.next() {
            return Err(BatchError::DuplicateColumn {
                covariate: covariate.name.clone(),
                first: first + 1,
                second: second + 1,
            });
        }
        columns.push(first);
    }
    Ok(columns)
}

/// Parse one record's covariate cells (at `columns`) into `values`, with every check the model
/// asks for (finite numbers, whole counts, log domains, known levels). A record must have
/// `header_len` fields.
#[inline]
pub fn parse_record(
    model: &Model,
    columns: &[usize],
    header_len: usize,
    record: &ByteRecord,
    values: &mut Vec<Value>,
) -> Result<(), RowProblem> {
    if record.len() != header_len {
        return Err(RowProblem::FieldCount {
            expected: header_len,
            found: record.len(),
        });
    }
    values.clear();
    for (j, &column) in columns.iter().enumerate() {
        let name = || model.covariates[j].name.clone();
        let bytes = &record[column];
        let text = std::str::from_utf8(bytes)
            .map_err(|_| RowProblem::NotUtf8 { covariate: name() })?
            .trim();
        if text.is_empty() {
            return Err(RowProblem::Empty { covariate: name() });
        }
        let value = model.parse_text_value(j, text).map_err(RowProblem::Value)?;
        values.push(value);
    }
    model.check_values(values).map_err(RowProblem::Value)
}
