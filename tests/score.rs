//! `ogive score`, run as a process on temporary CSV files: its output equals the engine's
//! answers row for row, bad rows stop or are skipped as asked, shards partition the rows, and
//! standard input and output work.

#[path = "reference/describe/support.rs"]
mod support;

use std::collections::HashMap;
use std::path::Path;

use ogive::batch::output_columns;
use ogive::engine::{Options, Scorer, Warning};
use ogive::model::{Model, Value};
use rand::{Rng, SeedableRng};
use support::{model_json, portfolio_json, run, write_model};

/// Relative tolerance between a number read back from the CSV and the engine's own value. The
/// CSV carries the shortest text that reads back to the same f64, so the two should be equal;
/// 1e-12 leaves room for nothing but that.
const CSV_ROUND_TRIP: f64 = 1e-12;

/// Tolerance against statsmodels' fitted probabilities (statsmodels 0.15 Logit/Probit.predict
/// on the Spector data, fixture written by tests/reference/describe/make_spector_fixtures.py):
/// both evaluate F(xᵀβ) at the same β, so only rounding separates them.
const STATSMODELS_PREDICT: f64 = 1e-12;

fn close(a: f64, b: f64, tolerance: f64) -> bool {
    (a - b).abs() <= tolerance * a.abs().max(b.abs()).max(1e-300)
}

/// The columns of the generated input files, covariates and pass-through columns mixed.
const INPUT_COLUMNS: [&str; 7] = [
    "id",
    "sector",
    "revenue",
    "years",
    "arrears",
    "guarantor",
    "note",
];

fn levels() -> [&'static str; 3] {
    ["retail", "light manufacturing", "transport"]
}

/// One generated row of the portfolio model's covariates, plus two pass-through columns.
struct Row {
    id: String,
    revenue: f64,
    years: f64,
    arrears: u32,
    guarantor: u32,
    sector: usize,
    note: String,
}

fn rows(n: usize, seed: u64) -> Vec<Row> {
    let mut rng = rand::rngs::StdRng::seed_from_u64(seed);
    (0..n)
        .map(|i| Row {
            id: format!("L-{i:05}"),
            // Some rows fall outside the training ranges (revenue up to 7000, years up to 50)
            // so that warnings appear.
            revenue: rng.gen_range(5.0..7000.0),
            years: rng.gen_range(0.0..50.0),
            arrears: rng.gen_range(0..8),
            guarantor: rng.gen_range(0..2),
            sector: rng.gen_range(0..3),
            note: if i % 7 == 0 {
                "has, a comma and \"quotes\"".to_string()
            } else {
                String::new()
            },
        })
        .collect()
}

fn write_rows(path: &Path, rows: &[Row]) {
    let mut w = csv::Writer::from_path(path).expect("csv");
    w.write_record(INPUT_COLUMNS).expect("header");
    for r in rows {
        w.write_record([
            r.id.clone(),
            levels()[r.sector].to_string(),
            r.revenue.to_string(),
            r.years.to_string(),
            r.arrears.to_string(),
            r.guarantor.to_string(),
            r.note.clone(),
        ])
        .expect("row");
    }
    w.flush().expect("flush");
}

fn values(row: &Row) -> Vec<Value> {
    vec![
        Value::Number(row.revenue),
        Value::Number(row.years),
        Value::Number(f64::from(row.arrears)),
        Value::Number(f64::from(row.guarantor)),
        Value::Level(row.sector),
    ]
}

fn read_csv(text: &str) -> (Vec<String>, Vec<Vec<String>>) {
    let mut reader = csv::Reader::from_reader(text.as_bytes());
    let header = reader
        .headers()
        .expect("header")
        .iter()
        .map(String::from)
        .collect();
    let records = reader
        .records()
        .map(|r| r.expect("record").iter().map(String::from).collect())
        .collect();
    (header, records)
}

fn number(cell: &str) -> f64 {
    cell.parse()
        .unwrap_or_else(|_| panic!("not a number: {cell:?}"))
}

fn warning_codes(model: &Model, warnings: &[Warning]) -> String {
    warnings
        .iter()
        .map(|w| match w {
            Warning::OutOfRange { covariate, .. } => {
                format!("out_of_range:{}", model.covariates[*covariate].name)
            }
            Warning::UnusualCombination { .. } => "unusual_combination".to_string(),
        })
        .collect::<Vec<_>>()
        .join(";")
}

#[test]
fn output_equals_the_engine_row_for_row() {
    let dir = tempfile::tempdir().expect("tempdir");
    let json = portfolio_json(true);
    let model_path = write_model(dir.path(), "portfolio.json", &json);
    let model = Model::from_json(&serde_json::to_vec(&json).unwrap()).expect("valid model");
    let generated = rows(400, 11);
    let data = dir.path().join("in.csv");
    let out = dir.path().join("out.csv");
    write_rows(&data, &generated);
    let result = run(
        &[
            "score",
            "--model",
            model_path.to_str().unwrap(),
            "--data",
            data.to_str().unwrap(),
            "--out",
            out.to_str().unwrap(),
            "--effects",
            "--level",
            "0.9",
        ],
        None,
        &[],
    );
    assert_eq!(result.code, 0, "{}", result.stderr);
    let (header, records) = read_csv(&std::fs::read_to_string(&out).unwrap());
    let mut expected_header: Vec<String> = INPUT_COLUMNS.iter().map(|s| s.to_string()).collect();
    expected_header.extend(output_columns(&model, true));
    assert_eq!(header, expected_header);
    assert_eq!(records.len(), generated.len());

    let mut scorer = Scorer::new(&model);
    let mut options = Options::new(0.9).unwrap();
    options.contributions = false;
    let column: HashMap<&str, usize> = header
        .iter()
        .enumerate()
        .map(|(i, h)| (h.as_str(), i))
        .collect();
    let mut warned = 0;
    for (row, record) in generated.iter().zip(&records) {
        // Pass-through columns are unchanged, including quoted text with commas.
        assert_eq!(record[0], row.id);
        assert_eq!(record[6], row.note);
        let answer = scorer.score(&model, &values(row), &options);
        let cell = |name: &str| number(&record[column[name]]);
        assert!(close(
            cell("probability"),
            answer.probability,
            CSV_ROUND_TRIP
        ));
        assert!(close(
            cell("linear_index"),
            answer.linear_index,
            CSV_ROUND_TRIP
        ));
        let interval = answer.interval.expect("interval");
        assert!(close(
            cell("probability_lower"),
            interval.lower,
            CSV_ROUND_TRIP
        ));
        assert!(close(
            cell("probability_upper"),
            interval.upper,
            CSV_ROUND_TRIP
        ));
        for effect in &answer.effects {
            let name = ogive::batch::effect_column(&model, &effect.slot);
            assert!(
                close(cell(&name), effect.effect, CSV_ROUND_TRIP),
                "{name} in {}",
                row.id
            );
            assert!(close(
                cell(&format!("{name}_se")),
                effect.std_error.expect("se"),
                CSV_ROUND_TRIP
            ));
        }
        assert_eq!(
            record[column["warnings"]],
            warning_codes(&model, &answer.warnings)
        );
        warned += usize::from(!answer.warnings.is_empty());
    }
    assert!(
        warned > 0,
        "the generated rows should include some that warn"
    );
}

#[test]
fn effect_columns_are_named_per_covariate_and_level() {
    let model = Model::from_json(&serde_json::to_vec(&portfolio_json(true)).unwrap()).unwrap();
    let columns = output_columns(&model, true);
    assert_eq!(
        columns,
        [
            "probability",
            "probability_lower",
            "probability_upper",
            "linear_index",
            "effect_revenue",
            "effect_revenue_se",
            "effect_years",
            "effect_years_se",
            "effect_arrears",
            "effect_arrears_se",
            "effect_guarantor",
            "effect_guarantor_se",
            "effect_sector=light manufacturing",
            "effect_sector=light manufacturing_se",
            "effect_sector=transport",
            "effect_sector=transport_se",
            "warnings",
        ]
    );
    assert_eq!(
        output_columns(&model, false),
        [
            "probability",
            "probability_lower",
            "probability_upper",
            "linear_index",
            "warnings"
        ]
    );
}

#[test]
fn spector_probabilities_match_statsmodels_predictions() {
    let dir = tempfile::tempdir().expect("tempdir");
    let fixture = support::fixture();
    for link in ["logit", "probit"] {
        let model_path = write_model(dir.path(), "spector.json", &model_json(link));
        let result = run(
            &[
                "score",
                "--model",
                model_path.to_str().unwrap(),
                "--data",
                support::data_path().to_str().unwrap(),
                "--out",
                "-",
            ],
            None,
            &[],
        );
        assert_eq!(result.code, 0, "{}", result.stderr);
        let (header, records) = read_csv(&result.stdout);
        assert_eq!(&header[..4], ["gpa", "tuce", "psi", "grade"]);
        let fitted = fixture["models"][link]["fitted_probabilities"]
            .as_array()
            .unwrap();
        assert_eq!(records.len(), fitted.len());
        for (record, p) in records.iter().zip(fitted) {
            // statsmodels 0.15 {Logit,Probit}.predict, Spector data; rel 1e-12.
            let expected = p.as_f64().unwrap();
            assert!(
                close(number(&record[4]), expected, STATSMODELS_PREDICT),
                "{link}: {} vs {expected}",
                record[4]
            );
        }
    }
}

fn score_args<'a>(model: &'a str, data: &'a str, out: &'a str) -> Vec<&'a str> {
    vec!["score", "--model", model, "--data", data, "--out", out]
}

const BAD_ROWS: &str = "id,revenue,years,arrears,guarantor,sector\n\
    a,100,3,0,1,retail\n\
    b,100,3,1.5,1,retail\n\
    c,250,12,2,0,transport\n\
    d,100,3,0,1,shipping\n\
    e,-4,3,0,1,retail\n\
    f,100,3,0\n\
    g,,3,0,1,retail\n\
    h,900,1,1,1,light manufacturing\n";

#[test]
fn a_bad_row_stops_the_run_with_its_row_number_and_covariate_and_writes_no_file() {
    let dir = tempfile::tempdir().expect("tempdir");
    let model = write_model(dir.path(), "m.json", &portfolio_json(true));
    let data = dir.path().join("in.csv");
    std::fs::write(&data, BAD_ROWS).unwrap();
    let out = dir.path().join("out.csv");
    let result = run(
        &score_args(
            model.to_str().unwrap(),
            data.to_str().unwrap(),
            out.to_str().unwrap(),
        ),
        None,
        &[],
    );
    assert_ne!(result.code, 0);
    assert!(
        result.stderr.contains("row 2 (line 3)") && result.stderr.contains("'arrears' is a count"),
        "{}",
        result.stderr
    );
    assert!(!out.exists(), "a stopped run must not leave its output");
    let leftovers: Vec<_> = std::fs::read_dir(dir.path())
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .filter(|n| n.contains("partial"))
        .collect();
    assert!(leftovers.is_empty(), "{leftovers:?}");
}

#[test]
fn skip_leaves_bad_rows_out_counts_them_and_names_each() {
    let dir = tempfile::tempdir().expect("tempdir");
    let model = write_model(dir.path(), "m.json", &portfolio_json(true));
    let mut args = score_args(model.to_str().unwrap(), "-", "-");
    args.extend(["--on-error", "skip"]);
    let result = run(&args, Some(BAD_ROWS.as_bytes()), &[]);
    assert_eq!(result.code, 0, "{}", result.stderr);
    let (_, records) = read_csv(&result.stdout);
    let ids: Vec<&str> = records.iter().map(|r| r[0].as_str()).collect();
    assert_eq!(ids, ["a", "c", "h"]);
    let e = &result.stderr;
    assert!(e.contains("scored 3 of 8 rows; 5 skipped"), "{e}");
    for expected in [
        "row 2 (line 3): covariate 'arrears' is a count",
        "row 4 (line 5): covariate 'sector' has no level 'shipping'",
        "row 5 (line 6): term 'log(revenue)' needs revenue > 0, got -4",
        "row 6 (line 7): the row has 4 fields but the header has 6",
        "row 7 (line 8): covariate 'revenue' is empty",
    ] {
        assert!(e.contains(expected), "missing {expected:?} in {e}");
    }
    assert!(
        e.contains("(row shape): 1, arrears: 1, revenue: 2, sector: 1"),
        "{e}"
    );
}

#[test]
fn shards_partition_the_rows_exactly_and_each_has_the_header() {
    let dir = tempfile::tempdir().expect("tempdir");
    let model = write_model(dir.path(), "m.json", &portfolio_json(true));
    let generated = rows(103, 5);
    let data = dir.path().join("in.csv");
    write_rows(&data, &generated);
    let (count, block_rows) = (3usize, 8usize);
    let mut seen: Vec<String> = Vec::new();
    let mut full_header = None;
    for index in 0..count {
        let shard = format!("{index}/{count}");
        let mut args = score_args(model.to_str().unwrap(), data.to_str().unwrap(), "-");
        let block = block_rows.to_string();
        args.extend(["--shard", &shard, "--block-rows", &block]);
        let result = run(&args, None, &[]);
        assert_eq!(result.code, 0, "{}", result.stderr);
        let (header, records) = read_csv(&result.stdout);
        assert_eq!(*full_header.get_or_insert_with(|| header.clone()), header);
        let expected: Vec<&str> = generated
            .iter()
            .enumerate()
            .filter(|(i, _)| (i / block_rows) % count == index)
            .map(|(_, r)| r.id.as_str())
            .collect();
        let got: Vec<&str> = records.iter().map(|r| r[0].as_str()).collect();
        assert_eq!(got, expected, "shard {shard}");
        seen.extend(got.iter().map(|s| s.to_string()));
    }
    seen.sort();
    let mut all: Vec<String> = generated.iter().map(|r| r.id.clone()).collect();
    all.sort();
    assert_eq!(seen, all, "every row in exactly one shard");
}

#[test]
fn standard_input_and_output_give_the_same_bytes_as_files() {
    let dir = tempfile::tempdir().expect("tempdir");
    let model = write_model(dir.path(), "m.json", &portfolio_json(true));
    let data = dir.path().join("in.csv");
    write_rows(&data, &rows(50, 9));
    let out = dir.path().join("out.csv");
    let mut from_files = score_args(
        model.to_str().unwrap(),
        data.to_str().unwrap(),
        out.to_str().unwrap(),
    );
    from_files.push("--effects");
    assert_eq!(run(&from_files, None, &[]).code, 0);
    let mut piped = score_args(model.to_str().unwrap(), "-", "-");
    piped.push("--effects");
    let result = run(&piped, Some(&std::fs::read(&data).unwrap()), &[]);
    assert_eq!(result.code, 0, "{}", result.stderr);
    assert_eq!(result.stdout, std::fs::read_to_string(&out).unwrap());
}

#[test]
fn flags_can_come_from_environment_variables() {
    let dir = tempfile::tempdir().expect("tempdir");
    let model = write_model(dir.path(), "m.json", &portfolio_json(true));
    let result = run(
        &["score"],
        Some(BAD_ROWS.as_bytes()),
        &[
            ("OGIVE_MODEL", model.to_str().unwrap()),
            ("OGIVE_DATA", "-"),
            ("OGIVE_OUT", "-"),
            ("OGIVE_ON_ERROR", "skip"),
            ("OGIVE_EFFECTS", "true"),
            ("OGIVE_SHARD", "0/2"),
            ("OGIVE_BLOCK_ROWS", "4"),
        ],
    );
    assert_eq!(result.code, 0, "{}", result.stderr);
    let (header, records) = read_csv(&result.stdout);
    assert!(header.iter().any(|h| h == "effect_revenue_se"));
    // Rows 1–4 form block 0 (shard 0 of 2): a and c are good, b and d are skipped.
    let ids: Vec<&str> = records.iter().map(|r| r[0].as_str()).collect();
    assert_eq!(ids, ["a", "c"]);
}

#[test]
fn without_a_covariance_interval_cells_are_empty_and_one_note_says_why() {
    let dir = tempfile::tempdir().expect("tempdir");
    let model = write_model(dir.path(), "m.json", &portfolio_json(false));
    let mut args = score_args(model.to_str().unwrap(), "-", "-");
    args.push("--effects");
    let input = "revenue,years,arrears,guarantor,sector\n100,3,0,1,retail\n200,5,1,0,transport\n";
    let result = run(&args, Some(input.as_bytes()), &[]);
    assert_eq!(result.code, 0, "{}", result.stderr);
    assert_eq!(
        result.stderr.matches("no coefficient covariance").count(),
        1
    );
    let (header, records) = read_csv(&result.stdout);
    for record in &records {
        for (name, cell) in header.iter().zip(record) {
            let empty = name == "probability_lower"
                || name == "probability_upper"
                || name.ends_with("_se")
                || name == "warnings";
            assert_eq!(cell.is_empty(), empty, "{name} = {cell:?}");
        }
    }
}

#[test]
fn header_problems_are_refused_before_any_row() {
    let dir = tempfile::tempdir().expect("tempdir");
    let model = write_model(dir.path(), "m.json", &portfolio_json(true));
    let args = score_args(model.to_str().unwrap(), "-", "-");
    let cases = [
        (
            "revenue,years,arrears,guarantor\n1,2,3,1\n",
            "no column 'sector'",
        ),
        (
            "revenue,years,arrears,guarantor,sector,probability\n1,2,0,1,retail,0.5\n",
            "already has a column named 'probability'",
        ),
        (
            "revenue,years,years,arrears,guarantor,sector\n",
            "names covariate 'years' twice (columns 2 and 3)",
        ),
        ("", "no header row"),
    ];
    for (input, message) in cases {
        let result = run(&args, Some(input.as_bytes()), &[]);
        assert_ne!(result.code, 0, "{input:?}");
        assert!(
            result.stderr.contains(message),
            "{message:?} not in {}",
            result.stderr
        );
        assert!(
            result.stdout.is_empty(),
            "{input:?} wrote {}",
            result.stdout
        );
    }
}
