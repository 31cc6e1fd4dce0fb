//! `ogive score`, run as a process on temporary CSV files: its output equals the engine's
//! answers row for row, bad rows stop, are skipped or are kept with an error column as asked,
//! decision and contribution columns follow their definitions, shards partition the rows, and
//! standard input and output work; any number of threads writes the bytes of one.

mod support;

use std::collections::HashMap;
use std::path::Path;

use ogive::batch::{
    output_columns, output_header, score_csv, BadRowPolicy, RowStream, ScoreOptions, Shard,
    SKIPPED_EXAMPLES,
};
use ogive::engine::{Options, Scorer, Warning};
use ogive::model::{Model, Value};
use rand::{Rng, SeedableRng};
use support::cli::{model_json, portfolio_json, run, write_model};
use support::close::within;
use support::tolerances::score::{CONTRIBUTION_CLOSED_FORM, CSV_ROUND_TRIP, STATSMODELS_PREDICT};

fn with_effects(effects: bool) -> ScoreOptions {
    ScoreOptions {
        effects,
        ..ScoreOptions::default()
    }
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
                format!("out_of_range:{}", model.covariates()[*covariate].name())
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
    expected_header.extend(output_columns(&model, &with_effects(true)).unwrap());
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
        assert!(within(
            cell("probability"),
            answer.probability,
            CSV_ROUND_TRIP
        ));
        assert!(within(
            cell("linear_index"),
            answer.linear_index,
            CSV_ROUND_TRIP
        ));
        let interval = answer.interval.expect("interval");
        assert!(within(
            cell("probability_lower"),
            interval.lower,
            CSV_ROUND_TRIP
        ));
        assert!(within(
            cell("probability_upper"),
            interval.upper,
            CSV_ROUND_TRIP
        ));
        for effect in &answer.effects {
            let name = ogive::batch::effect_column(&model, &effect.slot);
            assert!(
                within(cell(&name), effect.effect, CSV_ROUND_TRIP),
                "{name} in {}",
                row.id
            );
            assert!(within(
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
    let columns = output_columns(&model, &with_effects(true)).unwrap();
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
        output_columns(&model, &with_effects(false)).unwrap(),
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
    let fixture = support::cli::fixture();
    for link in ["logit", "probit"] {
        let model_path = write_model(dir.path(), "spector.json", &model_json(link));
        let result = run(
            &[
                "score",
                "--model",
                model_path.to_str().unwrap(),
                "--data",
                support::cli::data_path().to_str().unwrap(),
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
                within(number(&record[4]), expected, STATSMODELS_PREDICT),
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

/// Under `--on-error keep` every input row is written, in order; a bad row keeps its fields
/// (a short one padded to the header), its added cells are empty, and the error column says
/// what is wrong in the words `--on-error stop` would use.
#[test]
fn keep_writes_bad_rows_in_place_with_what_is_wrong() {
    let dir = tempfile::tempdir().expect("tempdir");
    let model = write_model(dir.path(), "m.json", &portfolio_json(true));
    let mut args = score_args(model.to_str().unwrap(), "-", "-");
    args.extend(["--on-error", "keep"]);
    let result = run(&args, Some(BAD_ROWS.as_bytes()), &[]);
    assert_eq!(result.code, 0, "{}", result.stderr);
    let (header, records) = read_csv(&result.stdout);
    assert_eq!(header.last().map(String::as_str), Some("error"));
    assert_eq!(header[header.len() - 2], "warnings");
    let ids: Vec<&str> = records.iter().map(|r| r[0].as_str()).collect();
    assert_eq!(ids, ["a", "b", "c", "d", "e", "f", "g", "h"]);
    let at = |name: &str| header.iter().position(|h| h == name).expect(name);
    let errors = [
        ("b", "covariate 'arrears' is a count"),
        ("d", "covariate 'sector' has no level 'shipping'"),
        ("e", "term 'log(revenue)' needs revenue > 0, got -4"),
        ("f", "the row has 4 fields but the header has 6"),
        ("g", "covariate 'revenue' is empty"),
    ];
    for record in &records {
        assert_eq!(record.len(), header.len(), "row {}", record[0]);
        let expected = errors.iter().find(|(id, _)| *id == record[0]);
        match expected {
            Some((_, message)) => {
                assert!(
                    record[at("error")].contains(message),
                    "{}: {:?}",
                    record[0],
                    record[at("error")]
                );
                for cell in &record[at("probability")..at("error")] {
                    assert_eq!(
                        cell, "",
                        "row {}: an unscored row has empty cells",
                        record[0]
                    );
                }
            }
            None => {
                assert_eq!(record[at("error")], "", "row {}", record[0]);
                assert!(number(&record[at("probability")]) > 0.0);
            }
        }
    }
    // The short row keeps its four fields and is padded to six.
    let short = records.iter().find(|r| r[0] == "f").expect("row f");
    assert_eq!(&short[..6], ["f", "100", "3", "0", "", ""]);
    let e = &result.stderr;
    assert!(
        e.contains("scored 3 of 8 rows; 5 kept unscored with an error"),
        "{e}"
    );
    assert!(e.contains("unscored row 4 (line 5)"), "{e}");
}

/// The portfolio model with a threshold of 0.3 and bands low < 0.2 ≤ medium < 0.5 ≤ high.
fn portfolio_with_decision() -> serde_json::Value {
    let mut json = portfolio_json(true);
    json["decision"] = serde_json::json!({
        "threshold": 0.3,
        "bands": [
            {"name": "low", "below": 0.2},
            {"name": "medium", "below": 0.5},
            {"name": "high", "below": 1.0}
        ]
    });
    json
}

/// `--decision` adds the band and above_threshold columns, each following its definition (the
/// first band whose bound exceeds p; p ≥ threshold), and `--contributions` one column per
/// covariate equal to the engine's contribution, which for a covariate entering only through
/// a linear term is β·(x − x̄) (arrears: 0.42·(x − 0.7)) and for the categorical
/// Σₗ βₗ·(1[level = l] − shareₗ) over its non-reference levels (training shares 0.3 and 0.2).
#[test]
fn decision_and_contribution_columns_follow_their_definitions() {
    let dir = tempfile::tempdir().expect("tempdir");
    let json = portfolio_with_decision();
    let model_path = write_model(dir.path(), "portfolio.json", &json);
    let model = Model::from_json(&serde_json::to_vec(&json).unwrap()).expect("valid model");
    let generated = rows(300, 5);
    let data = dir.path().join("in.csv");
    write_rows(&data, &generated);
    let mut args = score_args(model_path.to_str().unwrap(), data.to_str().unwrap(), "-");
    args.extend(["--decision", "--contributions"]);
    let result = run(&args, None, &[]);
    assert_eq!(result.code, 0, "{}", result.stderr);
    let (header, records) = read_csv(&result.stdout);
    let added: Vec<&str> = header[INPUT_COLUMNS.len()..]
        .iter()
        .map(String::as_str)
        .collect();
    assert_eq!(
        added,
        [
            "probability",
            "probability_lower",
            "probability_upper",
            "linear_index",
            "band",
            "above_threshold",
            "contribution_revenue",
            "contribution_years",
            "contribution_arrears",
            "contribution_guarantor",
            "contribution_sector",
            "warnings",
        ]
    );
    let at = |name: &str| header.iter().position(|h| h == name).expect(name);
    let mut scorer = Scorer::new(&model);
    let options = Options::new(0.95).unwrap();
    let mut bands_seen = std::collections::BTreeSet::new();
    for (row, record) in generated.iter().zip(&records) {
        let p = number(&record[at("probability")]);
        let band = match p {
            p if p < 0.2 => "low",
            p if p < 0.5 => "medium",
            _ => "high",
        };
        assert_eq!(record[at("band")], band, "{}: p = {p}", row.id);
        bands_seen.insert(band);
        let above = if p >= 0.3 { "true" } else { "false" };
        assert_eq!(record[at("above_threshold")], above, "{}: p = {p}", row.id);
        let answer = scorer.score(&model, &values(row), &options);
        for c in &answer.contributions {
            let name = ogive::batch::contribution_column(&model, c.covariate);
            assert!(
                within(number(&record[at(&name)]), c.contribution, CSV_ROUND_TRIP),
                "{name} in {}",
                row.id
            );
        }
        let arrears = 0.42 * (f64::from(row.arrears) - 0.7);
        assert!(
            (number(&record[at("contribution_arrears")]) - arrears).abs()
                <= CONTRIBUTION_CLOSED_FORM,
            "{}",
            row.id
        );
        let level = |l: usize| f64::from(u8::from(row.sector == l));
        let sector = 0.25 * (level(1) - 0.3) + 0.55 * (level(2) - 0.2);
        assert!(
            (number(&record[at("contribution_sector")]) - sector).abs() <= CONTRIBUTION_CLOSED_FORM,
            "{}",
            row.id
        );
    }
    assert_eq!(bands_seen.len(), 3, "the rows should fall in every band");
}

/// `--decision` with a model that has no threshold and no bands is refused before any row.
#[test]
fn decision_columns_need_a_model_with_a_decision() {
    let dir = tempfile::tempdir().expect("tempdir");
    let model = write_model(dir.path(), "m.json", &portfolio_json(true));
    let mut args = score_args(model.to_str().unwrap(), "-", "-");
    args.push("--decision");
    let result = run(&args, Some(BAD_ROWS.as_bytes()), &[]);
    assert_ne!(result.code, 0);
    assert!(
        result
            .stderr
            .contains("model portfolio-test 3.1 has no decision threshold or bands"),
        "{}",
        result.stderr
    );
    assert!(result.stdout.is_empty(), "{}", result.stdout);
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

/// The scored text of `input` read as one stream by one reader and written by the csv crate's
/// writer, the way a single-threaded run works: the reference the block-parallel run must
/// reproduce. Numbers are written with ryu, the shortest text that reads back to the same f64.
fn one_stream_reference(
    model: &Model,
    input: &[u8],
    options: &ScoreOptions,
) -> (Vec<u8>, Vec<(u64, u64, String)>) {
    let mut rows = RowStream::new(model, input).expect("header");
    let mut writer = csv::Writer::from_writer(Vec::new());
    writer
        .write_byte_record(&output_header(model, rows.header(), options).expect("header"))
        .expect("write");
    let mut scorer = Scorer::new(model);
    let mut engine = Options::new(options.level).unwrap();
    engine.effects = options.effects;
    engine.contributions = false;
    engine.elasticities = false;
    let mut skipped = Vec::new();
    let mut number = ryu::Buffer::new();
    while rows.advance().expect("read") {
        if !options.shard.contains(rows.row(), options.block_rows) {
            continue;
        }
        match rows.parse(model) {
            Ok(values) => {
                let values = values.to_vec();
                let answer = scorer.score(model, &values, &engine);
                let mut out = rows.record().clone();
                let mut cells = vec![
                    Some(answer.probability),
                    answer.interval.map(|i| i.lower),
                    answer.interval.map(|i| i.upper),
                    Some(answer.linear_index),
                ];
                for effect in &answer.effects {
                    cells.push(Some(effect.effect));
                    cells.push(effect.std_error);
                }
                for cell in cells {
                    out.push_field(cell.map_or("", |x| number.format(x)).as_bytes());
                }
                out.push_field(warning_codes(model, &answer.warnings).as_bytes());
                writer.write_byte_record(&out).expect("write");
            }
            Err(e) => skipped.push((e.row, e.line, e.problem.to_string())),
        }
    }
    (writer.into_inner().expect("bytes"), skipped)
}

/// Generated rows with everything that makes cutting a CSV stream hard: quoted fields with
/// commas, doubled quotes and newlines, a stray quote inside an unquoted field, and bad rows.
fn awkward_input(rows: usize, crlf: bool) -> Vec<u8> {
    let mut rng = rand::rngs::StdRng::seed_from_u64(21);
    let end = if crlf { "\r\n" } else { "\n" };
    let mut text = format!("id,revenue,years,arrears,guarantor,sector,note{end}");
    for i in 0..rows {
        let note = match i % 6 {
            0 => "\"two\nlines, and \"\"quotes\"\"\"".to_string(),
            1 => "a stray\"quote".to_string(),
            2 => "\"\"".to_string(),
            _ => String::new(),
        };
        let arrears = if i % 53 == 7 {
            "1.5".to_string()
        } else {
            rng.gen_range(0..8).to_string()
        };
        let sector = if i % 71 == 3 {
            "shipping"
        } else {
            levels()[i % 3]
        };
        let sector = if sector.contains(' ') {
            format!("\"{sector}\"")
        } else {
            sector.to_string()
        };
        text.push_str(&format!(
            "r{i},{},{},{arrears},{},{sector},{note}{end}",
            rng.gen_range(5.0..7000.0),
            rng.gen_range(0.0..50.0),
            rng.gen_range(0..2),
        ));
        if crlf && i % 40 == 9 {
            // An empty line, which the parser skips.
            text.push_str(end);
        }
        if i % 97 == 13 {
            text.push_str(&format!("short,1,2{end}"));
        }
    }
    text.into_bytes()
}

/// The block-parallel run writes exactly the bytes of a single reader and writer over the whole
/// stream, for any number of threads and any block size (down to one byte, which puts a cut
/// after every record), and reports the same skipped rows in the same order. Line numbers are
/// checked against the single reader on the LF file; on the CRLF file (where that reader counts
/// a record's line from the end of the one before) they are checked across thread counts.
#[test]
fn any_thread_count_and_block_size_give_the_bytes_of_one_stream() {
    let model = Model::from_json(&serde_json::to_vec(&portfolio_json(true)).unwrap()).unwrap();
    for crlf in [false, true] {
        let input = awkward_input(700, crlf);
        for shard in [Shard::ALL, Shard::new(1, 3).unwrap()] {
            let base = ScoreOptions {
                effects: true,
                on_error: BadRowPolicy::Skip,
                shard,
                block_rows: 25,
                ..ScoreOptions::default()
            };
            let (expected, expected_skipped) = one_stream_reference(&model, &input, &base);
            assert!(expected_skipped.len() > 5, "the input should have bad rows");
            let mut lines_seen: Option<Vec<u64>> = None;
            for threads in [1, 2, 3, 8] {
                for input_block_bytes in [1, 97, 4096, 1 << 20] {
                    let options = ScoreOptions {
                        threads,
                        input_block_bytes,
                        ..base
                    };
                    let mut output = Vec::new();
                    let summary = score_csv(&model, &input[..], &mut output, &options, &mut |_| {})
                        .expect("scored");
                    let case = format!(
                        "crlf {crlf}, shard {shard}, {threads} threads, blocks of {input_block_bytes} bytes"
                    );
                    assert!(output == expected, "{case}: output differs");
                    let skipped: Vec<(u64, u64, String)> = summary
                        .skipped_examples
                        .iter()
                        .map(|e| (e.row, e.line, e.problem.to_string()))
                        .collect();
                    let count = skipped.len();
                    assert_eq!(
                        count,
                        expected_skipped.len().min(SKIPPED_EXAMPLES),
                        "{case}"
                    );
                    assert_eq!(
                        summary.rows_skipped,
                        expected_skipped.len() as u64,
                        "{case}"
                    );
                    for (got, want) in skipped.iter().zip(&expected_skipped) {
                        assert_eq!(got.0, want.0, "{case}: row");
                        assert_eq!(got.2, want.2, "{case}: problem");
                        if !crlf {
                            assert_eq!(got.1, want.1, "{case}: line");
                        }
                    }
                    let lines: Vec<u64> = skipped.iter().map(|s| s.1).collect();
                    assert_eq!(
                        lines_seen.get_or_insert_with(|| lines.clone()),
                        &lines,
                        "{case}"
                    );
                }
            }
        }
    }
}

/// A stopping row is reported with the file's row and line numbers whichever block and thread
/// meets it, and what was written before it is the rows before it.
#[test]
fn a_stopping_row_is_numbered_in_the_file_whatever_the_blocks() {
    let model = Model::from_json(&serde_json::to_vec(&portfolio_json(true)).unwrap()).unwrap();
    let input = awkward_input(300, false);
    let base = ScoreOptions::default();
    // The first bad row, found by the single reader.
    let (_, skipped) = one_stream_reference(
        &model,
        &input,
        &ScoreOptions {
            on_error: BadRowPolicy::Skip,
            ..base
        },
    );
    let (row, line, problem) = skipped[0].clone();
    for threads in [1, 4] {
        for input_block_bytes in [1, 300, 1 << 20] {
            let options = ScoreOptions {
                threads,
                input_block_bytes,
                ..base
            };
            let error = score_csv(&model, &input[..], &mut Vec::new(), &options, &mut |_| {})
                .expect_err("a bad row stops the run");
            let ogive::batch::BatchError::Row(e) = error else {
                panic!("not a row error: {error}");
            };
            assert_eq!(
                (e.row, e.line, e.problem.to_string()),
                (row, line, problem.clone())
            );
        }
    }
}
