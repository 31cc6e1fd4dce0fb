//! The parallel block reader of `ogive fit` against the data as written (identity tests): a
//! file several blocks long whose categorical levels first appear in a different order in each
//! block, quoted fields with commas and newlines, CRLF line ends, a byte-order mark, and missing
//! cells dropped by `--drop-missing`. Whatever the blocks and threads, the columns must come back
//! in file order with exactly the values written.

use std::fmt::Write;

use ogive::fit::reader::{read_table, ColumnData, ColumnRequest, ReadRequest};
use ogive::fit::Silent;

fn request(path: &std::path::Path, drop_missing: bool) -> ReadRequest {
    ReadRequest {
        path: path.to_path_buf(),
        outcome: "y".into(),
        columns: vec![
            ColumnRequest {
                name: "x".into(),
                categorical: false,
                log_term: None,
            },
            ColumnRequest {
                name: "place".into(),
                categorical: false,
                log_term: None,
            },
        ],
        drop_missing,
        threads: None,
        weight: None,
    }
}

const PLACES: [&str; 5] = ["\"Lyon, Rhône\"", "Graz", "\"two\nlines\"", "Oslo", "Évora"];
const DECODED: [&str; 5] = ["Lyon, Rhône", "Graz", "two\nlines", "Oslo", "Évora"];

#[test]
fn a_multi_block_file_reads_back_exactly() {
    let rows = 120_000;
    let mut text = String::from("\u{feff}y,x,unused,place\r\n");
    let mut expected = Vec::with_capacity(rows);
    for i in 0..rows {
        // Rotate the level order every 10,000 rows so blocks meet levels in different orders.
        let place = (i + i / 10_000) % PLACES.len();
        let x = (i as f64) * 0.001 - 7.5;
        let y = (i * 7 + 3) % 5 < 2;
        let end = if i % 3 == 0 { "\r\n" } else { "\n" };
        let _ = write!(text, "{},{x},junk {i},{}{end}", u8::from(y), PLACES[place]);
        expected.push((f64::from(u8::from(y)), x, DECODED[place]));
    }
    assert!(
        text.len() > 3 << 20,
        "the file should span several 1 MiB blocks"
    );
    let dir = tempfile::tempdir().expect("temporary folder");
    let path = dir.path().join("data.csv");
    std::fs::write(&path, &text).expect("write");
    let table = read_table(&request(&path, false), &Silent).expect("read");
    assert_eq!(table.rows(), rows);
    let ColumnData::Numeric(x) = &table.columns[0] else {
        panic!("x should be numeric")
    };
    let ColumnData::Categorical { codes, levels } = &table.columns[1] else {
        panic!("place should be categorical (its first value is text)")
    };
    let mut sorted = DECODED.map(String::from).to_vec();
    sorted.sort();
    assert_eq!(levels, &sorted);
    for (i, (y, xv, place)) in expected.iter().enumerate() {
        assert_eq!(table.outcome[i], *y, "row {}", i + 1);
        assert_eq!(x[i], *xv, "row {}", i + 1);
        assert_eq!(levels[codes[i] as usize], *place, "row {}", i + 1);
    }
}

#[test]
fn drop_missing_keeps_the_order_of_the_rest() {
    let mut text = String::from("y,x,place\n");
    let mut kept = Vec::new();
    for i in 0..50_000 {
        let missing = i % 997 == 0;
        let x = if missing {
            String::new()
        } else {
            format!("{}", i as f64 / 4.0)
        };
        let _ = writeln!(text, "{},{x},P{}", i % 2, i % 4);
        if !missing {
            kept.push(i as f64 / 4.0);
        }
    }
    let dir = tempfile::tempdir().expect("temporary folder");
    let path = dir.path().join("data.csv");
    std::fs::write(&path, &text).expect("write");
    let table = read_table(&request(&path, true), &Silent).expect("read");
    assert_eq!(table.dropped, 50_000_u64.div_ceil(997));
    assert_eq!(table.rows_in_file, 50_000);
    let ColumnData::Numeric(x) = &table.columns[0] else {
        panic!("numeric")
    };
    assert_eq!(x, &kept);
}

#[test]
fn an_error_deep_in_the_file_names_its_row() {
    let mut text = String::from("y,x,place\n");
    for i in 0..90_000 {
        let x = if i == 77_776 {
            "oops".to_string()
        } else {
            i.to_string()
        };
        let _ = writeln!(text, "{},{x},A", i % 2);
    }
    let dir = tempfile::tempdir().expect("temporary folder");
    let path = dir.path().join("data.csv");
    std::fs::write(&path, &text).expect("write");
    let e = read_table(&request(&path, false), &Silent).unwrap_err();
    assert_eq!(
        e.to_string(),
        "row 77777, column 'x': \"oops\" is not a number (if the column holds levels, name it with --categorical x)"
    );
}
