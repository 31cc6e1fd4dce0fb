//! Where a CSV byte stream may be cut into blocks that parse on their own exactly as they
//! would inside the whole stream.
//!
//! A cut is safe just past a record terminator (`\n` or `\r`) that lies outside quotes: the
//! parser is then at the start of a record, and a `\n` left at the head of the next block (the
//! second half of a `\r\n`) is an empty line, which the parser skips. Quoting follows the CSV
//! parser's own rules (RFC 4180): a quote opens a quoted field only at the start of a field, a
//! doubled quote inside one is a literal quote, and a quote in the middle of an unquoted field
//! is an ordinary character. A scan must start at the start of a record.
//!
//! This module only finds positions; it does not read or parse fields.

/// The parser states that matter for finding record ends.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum State {
    /// Between records (terminators here are empty lines).
    StartRecord,
    /// At the start of a field inside a record.
    StartField,
    /// Inside an unquoted field.
    InField,
    /// Inside a quoted field.
    InQuoted,
    /// Just after a quote inside a quoted field: the field's end, or the first of a doubled
    /// quote.
    QuoteInQuoted,
}

#[inline]
fn is_terminator(b: u8) -> bool {
    b == b'\n' || b == b'\r'
}

/// Walk `bytes` from the start of a record, calling `at_end(i, ended_record)` after each
/// terminator outside quotes at index `i`; `ended_record` is false for an empty line.
/// Stops early when `at_end` returns `true`.
fn scan(bytes: &[u8], mut at_end: impl FnMut(usize, bool) -> bool) {
    let mut state = State::StartRecord;
    for (i, &b) in bytes.iter().enumerate() {
        state = match state {
            State::InQuoted => {
                if b == b'"' {
                    State::QuoteInQuoted
                } else {
                    State::InQuoted
                }
            }
            State::StartRecord | State::StartField | State::InField | State::QuoteInQuoted => {
                if is_terminator(b) {
                    if at_end(i, state != State::StartRecord) {
                        return;
                    }
                    State::StartRecord
                } else if b == b',' {
                    State::StartField
                } else if b == b'"' {
                    match state {
                        State::StartRecord | State::StartField => State::InQuoted,
                        // A doubled quote inside a quoted field.
                        State::QuoteInQuoted => State::InQuoted,
                        _ => State::InField,
                    }
                } else {
                    State::InField
                }
            }
        };
    }
}

/// The index just past the terminator of the first record in `bytes` (empty lines before it
/// are not records), or `None` if no record ends in `bytes`.
pub fn first_record_end(bytes: &[u8]) -> Option<usize> {
    let mut found = None;
    scan(bytes, |i, ended_record| {
        if ended_record {
            found = Some(i + 1);
        }
        ended_record
    });
    found
}

/// The index just past the last record terminator outside quotes in `bytes`, or `None` if
/// there is none: everything before it is whole records.
pub fn last_record_end(bytes: &[u8]) -> Option<usize> {
    if memchr::memchr(b'"', bytes).is_none() {
        // No quotes: every terminator is a record end.
        return memchr::memrchr2(b'\n', b'\r', bytes).map(|i| i + 1);
    }
    let mut found = None;
    scan(bytes, |i, _| {
        found = Some(i + 1);
        false
    });
    found
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Records the csv parser reads from `bytes`, as field lists.
    fn parsed(bytes: &[u8]) -> Vec<Vec<Vec<u8>>> {
        let mut reader = csv::ReaderBuilder::new()
            .has_headers(false)
            .flexible(true)
            .from_reader(bytes);
        reader
            .byte_records()
            .map(|r| r.expect("csv").iter().map(<[u8]>::to_vec).collect())
            .collect()
    }

    const AWKWARD: &[&str] = &[
        "a,b\n1,2\n",
        "a,b\r\n1,2\r\n3,4",
        "a,\"b\nc\",d\n1,2,3\n",
        "x,ab\"c\n1,\"multi\nline\",2\n",
        "\"q\"\"uote\",\"\"\"\"\n\n\n2,\"a,b\"\r\n",
        "a\rb\rc",
        "\"open,\n\nstill open\",x\ny\n",
        "\"closed\"tail,z\n1\n",
    ];

    /// Identity: cutting at every position [`last_record_end`] allows and parsing the pieces
    /// one by one gives the records of the whole (the csv parser is the reference).
    #[test]
    fn cut_pieces_parse_as_the_whole() {
        for text in AWKWARD {
            let bytes = text.as_bytes();
            let whole = parsed(bytes);
            for limit in 1..=bytes.len() {
                let mut pieces = Vec::new();
                let mut start = 0;
                while start < bytes.len() {
                    let window = &bytes[start..(start + limit).min(bytes.len())];
                    let at_end = start + window.len() == bytes.len();
                    let cut = if at_end {
                        window.len()
                    } else {
                        // No record end in the window: read on to the next one.
                        last_record_end(window)
                            .or_else(|| first_cut_at_or_after(&bytes[start..], limit))
                            .unwrap_or(bytes.len() - start)
                    };
                    pieces.extend(parsed(&bytes[start..start + cut]));
                    start += cut;
                }
                assert_eq!(pieces, whole, "{text:?} cut every {limit} bytes");
            }
        }
    }

    fn first_cut_at_or_after(bytes: &[u8], at: usize) -> Option<usize> {
        let mut found = None;
        scan(bytes, |i, _| {
            if i + 1 >= at {
                found = Some(i + 1);
                true
            } else {
                false
            }
        });
        found
    }

    #[test]
    fn the_first_record_skips_empty_lines_and_quoted_newlines() {
        assert_eq!(first_record_end(b"\n\r\na,b\nc"), Some(7));
        // A record ends at its `\r`; the `\n` after it is an empty line.
        assert_eq!(first_record_end(b"\"a\nb\",c\r\nd"), Some(8));
        assert_eq!(first_record_end(b"a,\"b"), None);
        assert_eq!(first_record_end(b""), None);
        assert_eq!(last_record_end(b"a\nb\"c\nd"), Some(6));
        assert_eq!(last_record_end(b"\"a\nb"), None);
    }
}
