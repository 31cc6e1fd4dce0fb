//! Every way `ogive fit` can refuse, each asserting the exact message a data team would read,
//! and a check that no CSV, however broken, makes the fit panic. Rows are data rows counted
//! from 1 after the header.

mod support;

use ogive::fit::{CategoricalSpec, FitError};
use rand::{Rng, SeedableRng};
use support::fit::*;

fn failure(csv: &str, terms: &str, adjust: impl FnOnce(&mut ogive::fit::FitRequest)) -> String {
    let file = temp_csv(csv);
    let mut r = request(&file.path, "y", terms);
    adjust(&mut r);
    match fit_request(&r) {
        Ok(_) => panic!("expected the fit of {terms:?} to fail"),
        Err(e) => e.to_string(),
    }
}

/// A small dataset that fits fine: y against x and a two-level group.
fn healthy_rows() -> String {
    let mut s = String::from("y,x,group\n");
    let ys = [0, 1, 0, 1, 1, 0, 0, 1, 1, 0, 1, 0];
    for (i, y) in ys.iter().enumerate() {
        let group = if i % 3 == 0 { "b" } else { "a" };
        s.push_str(&format!("{y},{},{group}\n", i as f64 * 0.5 + 1.0));
    }
    s
}

#[test]
fn an_outcome_that_is_not_binary() {
    let e = failure("y,x\n0,1\n2,3\n1,4\n", "x", |_| {});
    assert_eq!(
        e,
        "row 2: outcome 'y' must be 0 or 1 (or false/true), got \"2\""
    );
}

#[test]
fn a_constant_outcome() {
    let e = failure("y,x\n1,1\n1,3\ntrue,4\n", "x", |_| {});
    assert_eq!(
        e,
        "outcome 'y' is 1 in all 3 observations: a binary model needs both outcomes"
    );
}

#[test]
fn a_rank_deficient_design_names_the_collinear_terms() {
    let mut csv = String::from("y,a,b\n");
    for (i, y) in [0, 1, 1, 0, 1, 0, 0, 1].iter().enumerate() {
        let a = i as f64 * 0.7 - 1.0;
        csv.push_str(&format!("{y},{a},{}\n", 3.0 * a - 2.0));
    }
    let e = failure(&csv, "a, b", |_| {});
    assert_eq!(
        e,
        "the design is rank-deficient: term 'b' is a linear combination of earlier terms: b = -2·intercept + 3·a"
    );
}

#[test]
fn complete_separation_names_the_term_and_direction() {
    let e = failure("y,x\n0,1\n0,2\n0,3\n1,4\n1,5\n1,6\n", "x", |_| {});
    assert_eq!(
        e,
        "complete separation: term 'x' predicts the outcome: every observation with x ≤ 3 has outcome 0 and every one with x ≥ 4 has outcome 1 (its coefficient runs to +∞); the maximum-likelihood estimate does not exist (drop or merge the term, or collect more varied data)"
    );
}

#[test]
fn quasi_complete_separation_of_a_level_names_the_level() {
    // Every observation in group c has outcome 0; groups a and b have both outcomes.
    let csv = "y,group\n0,a\n1,a\n0,b\n1,b\n1,a\n0,c\n0,c\n0,b\n";
    let e = failure(csv, "group", |r| {
        r.categorical = vec![CategoricalSpec {
            column: "group".into(),
            reference: None,
        }];
    });
    assert_eq!(
        e,
        "quasi-complete separation: term 'group=c' predicts the outcome: every observation with group=c > 0 has outcome 0 (its coefficient runs to −∞); the maximum-likelihood estimate does not exist (drop or merge the term, or collect more varied data)"
    );
}

#[test]
fn separation_by_a_combination_of_terms_is_found_after_the_fit() {
    // y = 1 exactly when a + b > 0, while neither a nor b alone separates.
    let mut csv = String::from("y,a,b\n");
    let mut rng = rand::rngs::StdRng::seed_from_u64(11);
    for _ in 0..60 {
        let a: f64 = rng.gen_range(-2.0..2.0);
        let b: f64 = rng.gen_range(-2.0..2.0);
        if (a + b).abs() < 0.05 {
            continue;
        }
        csv.push_str(&format!("{},{a},{b}\n", u8::from(a + b > 0.0)));
    }
    let e = failure(&csv, "a, b", |_| {});
    assert!(
        e.starts_with("complete separation: ") && e.contains("term '") && e.contains("+∞"),
        "{e}"
    );
}

#[test]
fn non_convergence_says_what_was_tried() {
    let file = reference_file("spector.csv");
    let mut r = request(&file, "GRADE", "GPA, TUCE, PSI");
    r.max_iterations = 2;
    let e = fit_request(&r).unwrap_err();
    assert!(matches!(e, FitError::NotConverged(_)), "{e}");
    let text = e.to_string();
    assert!(
        text.starts_with("the fit did not converge: no convergence in 2 Newton–Raphson steps (0 of them Fisher-scoring steps, 0 step halvings); at the last step the relative change of the log-likelihood was"),
        "{text}"
    );
    assert!(
        text.ends_with("raise --max-iterations or rescale the covariates"),
        "{text}"
    );
}

#[test]
fn a_missing_value_names_row_and_column() {
    let e = failure("y,x,z\n0,1,2\n1,,3\n1,4,5\n", "x, z", |_| {});
    assert_eq!(
        e,
        "row 2, column 'x': missing value (use --drop-missing to drop such rows)"
    );
    let e = failure("y,x,z\n0,1,2\n1,3,4\nNA,4,5\n", "x, z", |_| {});
    assert_eq!(
        e,
        "row 3, column 'y': missing value (use --drop-missing to drop such rows)"
    );
}

#[test]
fn drop_missing_drops_and_reports_how_many() {
    let mut csv = healthy_rows();
    csv.push_str("1,NA,a\n,2.5,b\n0,3.5,\n");
    let file = temp_csv(&csv);
    let mut r = request(&file.path, "y", "x, group");
    r.drop_missing = true;
    let fitted = fit_request(&r).expect("fit");
    assert_eq!(fitted.report.dropped, 3);
    assert_eq!(fitted.report.observations, 12);
    assert!(fitted
        .report
        .to_string()
        .contains("12 observations (3 rows with missing values dropped)"));
    assert!(fitted
        .file
        .provenance
        .notes
        .as_deref()
        .unwrap_or_default()
        .contains("15 rows in the file, 3 dropped for missing values"));
}

#[test]
fn a_non_numeric_value_names_row_and_column() {
    let e = failure("y,x\n0,1\n1,2\n1,seven\n0,4\n", "x", |_| {});
    assert_eq!(
        e,
        "row 3, column 'x': \"seven\" is not a number (if the column holds levels, name it with --categorical x)"
    );
}

#[test]
fn the_log_of_a_non_positive_value() {
    let e = failure("y,x\n0,1\n1,2\n1,0\n0,4\n", "log(x)", |_| {});
    assert_eq!(e, "row 3: term 'log(x)' needs x > 0, got 0");
}

#[test]
fn a_reference_level_with_no_observations() {
    let e = failure(&healthy_rows(), "x, group", |r| {
        r.categorical = vec![CategoricalSpec {
            column: "group".into(),
            reference: Some("c".into()),
        }];
    });
    assert_eq!(
        e,
        "covariate 'group' has no observations at level 'c' (levels seen: a, b)"
    );
}

#[test]
fn a_level_term_with_no_observations() {
    let e = failure(&healthy_rows(), "x, group=z", |_| {});
    assert_eq!(
        e,
        "covariate 'group' has no observations at level 'z' (levels seen: a, b)"
    );
}

#[test]
fn a_categorical_covariate_with_one_level() {
    let e = failure("y,x,g\n0,1,a\n1,2,a\n1,3,a\n0,5,a\n", "x, g", |_| {});
    assert_eq!(
        e,
        "categorical covariate 'g' takes the single level 'a' in every observation: it cannot be estimated"
    );
}

#[test]
fn columns_and_rows_that_do_not_fit_the_header() {
    let e = failure("y,x\n0,1\n1,2\n", "x, w", |_| {});
    assert_eq!(e, "column 'w' is not in the data (columns: y, x)");
    let e = failure("y,x,z\n0,1,2\n1,2\n", "x", |_| {});
    assert_eq!(e, "row 2 has 2 fields but the header has 3");
    let e = failure("", "x", |_| {});
    assert_eq!(
        e,
        "the data file is empty: expected a header line naming the columns"
    );
    let e = failure("y,x\n", "x", |_| {});
    assert_eq!(e, "no observations to fit");
}

#[test]
fn a_bad_model_name_is_refused_before_reading() {
    let e = failure(&healthy_rows(), "x", |r| r.name = "Lease Model".into());
    assert_eq!(
        e,
        "--name 'Lease Model': a model name is lower-case letters, digits and '-', starting with a letter, at most 64"
    );
}

#[test]
fn term_syntax_and_kind_errors_point_at_the_item() {
    let e = failure(&healthy_rows(), "x, x+group", |_| {});
    assert_eq!(
        e,
        "--terms item 2 ('x+group'): 'x+group' is not a term: write name, name^k, log(name), name=level or a*b"
    );
    let e = failure(&healthy_rows(), "log(group)", |_| {});
    assert_eq!(
        e,
        "term 'log(group)': 'group' is categorical and has no logarithm"
    );
}

/// No CSV makes the fit panic: random bytes, and random CSV-like text with quotes, blanks,
/// ragged rows and odd numbers (fixed seed, 400 cases). Any answer is fine except a panic.
#[test]
fn no_csv_makes_the_fit_panic() {
    let mut rng = rand::rngs::StdRng::seed_from_u64(2024);
    let cells = [
        "0",
        "1",
        "",
        "NA",
        "2.5",
        "-3",
        "1e308",
        "inf",
        "\"q,uoted\"",
        "\"a\nb\"",
        "x",
        "0.0",
        "true",
        " 7 ",
        "\u{fffd}",
        "1e-320",
        "-0",
    ];
    for case in 0..400 {
        let text = if case % 4 == 0 {
            let len = rng.gen_range(0..200);
            (0..len).map(|_| rng.gen::<u8>()).collect::<Vec<u8>>()
        } else {
            let mut s = String::from("y,a,b\n");
            for _ in 0..rng.gen_range(0..30) {
                let width = rng.gen_range(1..5);
                let row: Vec<&str> = (0..width)
                    .map(|_| cells[rng.gen_range(0..cells.len())])
                    .collect();
                s.push_str(&row.join(","));
                s.push_str(if rng.gen_bool(0.1) { "\r\n" } else { "\n" });
            }
            s.into_bytes()
        };
        let dir = tempfile::tempdir().expect("temporary folder");
        let path = dir.path().join("data.csv");
        std::fs::write(&path, &text).expect("write");
        for terms in ["a, b", "log(a), b^2", "a*b"] {
            let r = request(&path, "y", terms);
            let _ = fit_request(&r);
        }
    }
}
