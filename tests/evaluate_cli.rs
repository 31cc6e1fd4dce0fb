//! `ogive evaluate`, run as a process: statsmodels' logit and probit fits of the Spector &
//! Mazzeo (1980) data evaluated on their training rows, logit against probit, with every figure
//! checked against `tests/reference/evaluate/evaluate.json` (scikit-learn, statsmodels, scipy;
//! see `make_evaluate_fixtures.py`); the identities of a logit fitted by maximum likelihood on
//! its own data; the model directory's stored and live versions; and the errors a bad file or a
//! bad request gets.

mod support;

use serde_json::Value as Json;
use sha2::{Digest, Sha256};
use support::cli::{data_path, model_json, run, write_model};
use support::close::assert_close;
use support::tolerances::evaluate_process as tolerance;

fn reference() -> Json {
    support::reference::fixture("evaluate/evaluate.json")
}

fn f(v: &Json) -> f64 {
    v.as_f64().unwrap_or_else(|| panic!("not a number: {v}"))
}

#[track_caller]
fn close(actual: &Json, expected: &Json, what: &str) {
    assert_close(
        f(actual),
        f(expected),
        tolerance::REFERENCE,
        tolerance::FLOOR,
        what,
    );
}

fn sha256_of(path: &std::path::Path) -> String {
    let bytes = std::fs::read(path).expect("read");
    Sha256::digest(&bytes)
        .iter()
        .map(|b| format!("{b:02x}"))
        .collect()
}

struct Setup {
    dir: tempfile::TempDir,
    logit: std::path::PathBuf,
    probit: std::path::PathBuf,
}

impl Setup {
    /// `--data` (the Spector rows) `--outcome grade --model` (the logit fixture) `--against`
    /// (the probit one): the comparison most tests run.
    fn logit_against_probit(&self) -> Vec<String> {
        let path = |p: &std::path::Path| p.to_str().expect("a UTF-8 path").to_string();
        [
            "--data",
            &path(&data_path()),
            "--outcome",
            "grade",
            "--model",
            &path(&self.logit),
            "--against",
            &path(&self.probit),
        ]
        .map(str::to_string)
        .to_vec()
    }
}

/// `texts` as the `&str`s the runners take.
fn strs(texts: &[String]) -> Vec<&str> {
    texts.iter().map(String::as_str).collect()
}

fn setup() -> Setup {
    let dir = tempfile::tempdir().expect("tempdir");
    let logit = write_model(dir.path(), "logit.json", &model_json("logit"));
    let probit = write_model(dir.path(), "probit.json", &model_json("probit"));
    Setup { dir, logit, probit }
}

/// `ogive evaluate` of the logit fixture on `data`, which must fail: what it printed on stderr.
fn refused_with_logit(s: &Setup, data: &std::path::Path, outcome: &str) -> String {
    let data = data.to_str().unwrap();
    let model = s.logit.to_str().unwrap();
    let args = [
        "evaluate",
        "--data",
        data,
        "--outcome",
        outcome,
        "--model",
        model,
    ];
    let result = run(&args, None, &[]);
    assert_ne!(result.code, 0, "the run should have failed");
    result.stderr
}

fn evaluate_json(args: &[&str]) -> Json {
    let mut all = vec!["evaluate", "--format", "json"];
    all.extend_from_slice(args);
    let result = run(&all, None, &[]);
    assert_eq!(result.code, 0, "{}", result.stderr);
    serde_json::from_str(&result.stdout).expect("evaluate --format json prints JSON")
}

fn check_figures(got: &Json, want: &Json, who: &str) {
    let what = |s: &str| format!("{who}: {s}");
    close(&got["brier"], &want["brier"], &what("Brier (sklearn)"));
    close(
        &got["brier_interval"]["std_error"],
        &want["brier_std_error"],
        &what("Brier SE (numpy)"),
    );
    close(
        &got["log_loss"],
        &want["log_loss"],
        &what("log loss (sklearn)"),
    );
    close(
        &got["log_loss_interval"]["std_error"],
        &want["log_loss_std_error"],
        &what("log loss SE (numpy)"),
    );
    close(
        &got["auc"]["estimate"],
        &want["auc"],
        &what("AUC (sklearn)"),
    );
    close(
        &got["auc"]["std_error"],
        &want["auc_std_error"],
        &what("AUC SE (DeLong, numpy)"),
    );
    for key in ["calibration_intercept", "calibration_slope"] {
        close(
            &got[key]["estimate"],
            &want[key]["estimate"],
            &what(&format!("{key} (statsmodels GLM)")),
        );
        close(
            &got[key]["std_error"],
            &want[key]["std_error"],
            &what(&format!("{key} SE (statsmodels GLM)")),
        );
    }
    close(
        &got["hosmer_lemeshow"]["statistic"],
        &want["hosmer_lemeshow"]["statistic"],
        &what("H (numpy)"),
    );
    close(
        &got["hosmer_lemeshow"]["p_value"],
        &want["hosmer_lemeshow"]["p_value"],
        &what("H p (scipy)"),
    );
    let bins = got["reliability"].as_array().expect("reliability");
    for (bin, reference) in bins
        .iter()
        .zip(want["reliability"].as_array().expect("bins"))
    {
        assert_eq!(bin["count"], reference["count"], "{who}: bin count");
        assert_eq!(bin["events"], reference["events"], "{who}: bin events");
        if reference["count"] != 0 {
            close(
                &bin["observed"],
                &reference["observed"],
                &what("bin observed (calibration_curve)"),
            );
            close(
                &bin["observed_interval"]["lower"],
                &reference["wilson"][0],
                &what("Wilson lower"),
            );
            close(
                &bin["observed_interval"]["upper"],
                &reference["wilson"][1],
                &what("Wilson upper"),
            );
        }
    }
}

#[test]
fn logit_against_probit_on_the_spector_rows_matches_the_reference_libraries() {
    let s = setup();
    let data = data_path();
    let report = evaluate_json(&strs(&s.logit_against_probit()));
    let want = &reference()["spector"];

    assert_eq!(report["report"], "ogive-evaluation");
    assert_eq!(report["data"]["sha256"], sha256_of(&data));
    assert_eq!(
        report["data"]["bytes"],
        std::fs::metadata(&data).unwrap().len()
    );
    assert_eq!(report["data"]["rows_read"], 32);
    assert_eq!(report["data"]["rows_evaluated"], 32);
    assert_eq!(report["data"]["rows_skipped"], 0);
    let models = report["models"].as_array().expect("models");
    assert_eq!(models.len(), 2);
    for (model, (path, name)) in models
        .iter()
        .zip([(&s.logit, "spector-logit"), (&s.probit, "spector-probit")])
    {
        assert_eq!(model["name"], name);
        assert_eq!(model["version"], "1");
        assert_eq!(model["sha256"], sha256_of(path));
    }
    assert_eq!(models[0]["role"], "evaluated");
    assert_eq!(models[1]["role"], "against");
    check_figures(&models[0]["figures"], &want["first"]["figures"], "logit");
    check_figures(&models[1]["figures"], &want["second"]["figures"], "probit");

    let (got, paired) = (&report["comparison"], &want["paired"]);
    close(
        &got["auc"]["difference"],
        &paired["auc"]["difference"],
        "AUC difference (sklearn)",
    );
    close(
        &got["auc"]["std_error"],
        &paired["auc"]["std_error"],
        "paired AUC SE (DeLong)",
    );
    close(
        &got["auc"]["p_value"],
        &paired["auc"]["p_value"],
        "paired AUC p (scipy)",
    );
    for key in ["brier", "log_loss"] {
        close(
            &got[key]["mean"],
            &paired[key]["mean"],
            &format!("{key} difference (numpy)"),
        );
        close(
            &got[key]["std_error"],
            &paired[key]["std_error"],
            &format!("{key} difference SE"),
        );
    }
    // Every reference interval holds 0, so the verdict may claim nothing.
    assert_eq!(
        got["verdict"]["favours"],
        serde_json::json!(["not_shown", "not_shown", "not_shown"])
    );
}

#[test]
fn a_logit_on_its_own_training_rows_has_intercept_zero_and_slope_one() {
    let s = setup();
    let report = evaluate_json(&[
        "--data",
        data_path().to_str().unwrap(),
        "--outcome",
        "grade",
        "--model",
        s.logit.to_str().unwrap(),
    ]);
    let figures = &report["models"][0]["figures"];
    let intercept = f(&figures["calibration_intercept"]["estimate"]);
    let slope = f(&figures["calibration_slope"]["estimate"]);
    assert!(
        intercept.abs() < tolerance::SCORE_EQUATIONS,
        "intercept {intercept:e}"
    );
    assert!(
        (slope - 1.0).abs() < tolerance::SCORE_EQUATIONS,
        "slope {slope}"
    );
    assert!(report.get("comparison").is_none());
}

#[test]
fn text_report_gives_each_figure_with_its_interval_the_verdict_and_the_cautions() {
    let s = setup();
    let args = s.logit_against_probit();
    let result = run(&[&["evaluate"][..], &strs(&args)].concat(), None, &[]);
    assert_eq!(result.code, 0, "{}", result.stderr);
    let text = &result.stdout;
    let auc = f(&reference()["spector"]["first"]["figures"]["auc"]);
    for needle in [
        "95% intervals throughout".to_string(),
        "32 read, 32 evaluated, 0 skipped".to_string(),
        format!("AUC                    {auc:.4} ["),
        "Model spector-logit 1 (logit, evaluated)".to_string(),
        "Model spector-probit 1 (probit, compared against)".to_string(),
        "Hosmer–Lemeshow".to_string(),
        "verdict: no difference shown on AUC, Brier, log loss at 95%".to_string(),
        "A model estimate is not a decision".to_string(),
    ] {
        assert!(text.contains(&needle), "missing {needle:?} in:\n{text}");
    }
}

/// The Spector CSV with some cells replaced: (data row, column, new text).
fn damaged(dir: &std::path::Path, changes: &[(usize, usize, &str)]) -> std::path::PathBuf {
    let text = std::fs::read_to_string(data_path()).expect("spector.csv");
    let mut lines: Vec<Vec<String>> = text
        .lines()
        .map(|l| l.split(',').map(str::to_string).collect())
        .collect();
    for &(row, column, cell) in changes {
        lines[row][column] = cell.to_string();
    }
    let path = dir.join("damaged.csv");
    let body: Vec<String> = lines.iter().map(|l| l.join(",")).collect();
    std::fs::write(&path, body.join("\n") + "\n").expect("write");
    path
}

#[test]
fn a_bad_outcome_or_covariate_cell_stops_the_run_naming_row_line_and_column() {
    let s = setup();
    let data = damaged(s.dir.path(), &[(3, 3, "2")]);
    let stderr = refused_with_logit(&s, &data, "grade");
    assert!(
        stderr
            .contains("row 3 (line 4): outcome 'grade' must be 0 or 1 (or false/true), got \"2\""),
        "{}",
        stderr
    );

    let data = damaged(s.dir.path(), &[(5, 1, "many")]);
    let result = run(
        &[
            "evaluate",
            "--data",
            data.to_str().unwrap(),
            "--outcome",
            "grade",
            "--model",
            s.logit.to_str().unwrap(),
        ],
        None,
        &[],
    );
    assert_ne!(result.code, 0);
    assert!(
        result.stderr.contains("row 5 (line 6)"),
        "{}",
        result.stderr
    );
    assert!(result.stderr.contains("tuce"), "{}", result.stderr);
    assert!(
        result.stderr.contains("for model spector-logit 1"),
        "{}",
        result.stderr
    );
}

/// The JSON report of the logit fixture against the probit on `data`, skipping bad rows, with
/// `more` arguments.
fn logit_against_probit_skipping(s: &Setup, data: &std::path::Path, more: &[&str]) -> Json {
    let mut args = vec![
        "--data",
        data.to_str().unwrap(),
        "--outcome",
        "grade",
        "--on-error",
        "skip",
        "--model",
        s.logit.to_str().unwrap(),
        "--against",
        s.probit.to_str().unwrap(),
    ];
    args.extend_from_slice(more);
    evaluate_json(&args)
}

#[test]
fn skipped_rows_are_left_out_for_both_models_and_counted_by_reason() {
    let s = setup();
    let data = damaged(
        s.dir.path(),
        &[(2, 3, "yes"), (7, 3, ""), (9, 0, "NaN"), (11, 2, "2")],
    );
    let report = logit_against_probit_skipping(&s, &data, &[]);
    let d = &report["data"];
    assert_eq!(d["rows_read"], 32);
    assert_eq!(d["rows_evaluated"], 28);
    assert_eq!(d["rows_skipped"], 4);
    assert_eq!(d["skipped_by_reason"]["outcome 'grade'"], 2, "{d}");
    assert_eq!(d["skipped_by_reason"]["covariate 'gpa'"], 1, "{d}");
    assert_eq!(d["skipped_by_reason"]["covariate 'psi'"], 1, "{d}");
    for model in report["models"].as_array().unwrap() {
        assert_eq!(model["figures"]["rows"], 28);
    }
}

#[test]
fn a_missing_outcome_column_is_named_with_the_columns_there_are() {
    let s = setup();
    let stderr = refused_with_logit(&s, &data_path(), "passed");
    assert!(
        stderr.contains("no outcome column 'passed' (columns: gpa, tuce, psi, grade)"),
        "{}",
        stderr
    );
}

#[test]
fn rows_of_one_outcome_are_refused_with_the_counts() {
    let s = setup();
    let text = std::fs::read_to_string(data_path()).unwrap();
    let ones: Vec<&str> = text
        .lines()
        .filter(|l| l.ends_with(",1") || l.starts_with("gpa"))
        .collect();
    let data = s.dir.path().join("ones.csv");
    std::fs::write(&data, ones.join("\n") + "\n").unwrap();
    let stderr = refused_with_logit(&s, &data, "grade");
    assert!(
        stderr.contains("only one value (11 events in 11 rows)"),
        "{}",
        stderr
    );
}

/// A model directory holding spector-logit 1 (live) and 2 (the probit fit renamed: another
/// model of the same outcome, standing in for a candidate).
fn model_directory(root: &std::path::Path) -> std::path::PathBuf {
    let versions = root.join("models/spector-logit/versions");
    std::fs::create_dir_all(&versions).unwrap();
    write_model(&versions, "1.json", &model_json("logit"));
    let mut candidate = model_json("probit");
    candidate["name"] = "spector-logit".into();
    candidate["version"] = "2".into();
    write_model(&versions, "2.json", &candidate);
    std::fs::write(root.join("models/spector-logit/live"), "1\n").unwrap();
    root.join("models")
}

#[test]
fn a_stored_version_is_evaluated_against_the_live_one() {
    let s = setup();
    let models = model_directory(s.dir.path());
    let report = evaluate_json(&[
        "--data",
        data_path().to_str().unwrap(),
        "--outcome",
        "grade",
        "--models",
        models.to_str().unwrap(),
        "--name",
        "spector-logit",
        "--version",
        "2",
        "--against-live",
    ]);
    let list = report["models"].as_array().unwrap();
    assert_eq!(
        (&list[0]["version"], &list[1]["version"]),
        (&"2".into(), &"1".into())
    );
    assert_eq!(
        list[1]["sha256"],
        sha256_of(&models.join("spector-logit/versions/1.json"))
    );
    // Version 2 is the probit fit, version 1 the logit: the comparison is the reference's
    // with the sign turned.
    let want = &reference()["spector"]["paired"];
    let difference = f(&report["comparison"]["auc"]["difference"]);
    close(
        &(-difference).into(),
        &want["auc"]["difference"],
        "AUC difference, probit − logit",
    );

    // Without --version, --name means the live version; it cannot be compared with itself.
    let stderr = refused_from_directory(&models, &["--against-live"]);
    assert!(
        stderr.contains("spector-logit 1 is itself the live version"),
        "{stderr}"
    );
    let stderr = refused_from_directory(&models, &["--version", "7"]);
    assert!(stderr.contains("has no stored version '7'"), "{stderr}");
}

/// Run `evaluate` of `spector-logit` from the model directory `models` on the Spector rows
/// with `more` arguments, assert that it failed, and return its standard error.
fn refused_from_directory(models: &std::path::Path, more: &[&str]) -> String {
    let (data, models) = (data_path(), models.to_str().unwrap().to_string());
    let mut args = vec![
        "evaluate",
        "--data",
        data.to_str().unwrap(),
        "--outcome",
        "grade",
        "--models",
        &models,
        "--name",
        "spector-logit",
    ];
    args.extend_from_slice(more);
    let result = run(&args, None, &[]);
    assert_ne!(result.code, 0, "the run should have failed");
    result.stderr
}

#[test]
fn a_level_outside_zero_and_one_is_refused_before_reading() {
    let s = setup();
    let result = run(
        &[
            "evaluate",
            "--data",
            "/nonexistent.csv",
            "--outcome",
            "grade",
            "--model",
            s.logit.to_str().unwrap(),
            "--level",
            "95",
        ],
        None,
        &[],
    );
    assert_ne!(result.code, 0);
    assert!(
        result.stderr.contains("strictly between 0 and 1, got 95"),
        "{}",
        result.stderr
    );
}

/// A panel's mapping from pixels back to data, from its `data-*` attributes.
struct Panel {
    left: f64,
    top: f64,
    width: f64,
    height: f64,
}

impl Panel {
    fn read(node: roxmltree::Node) -> Panel {
        let number = |key: &str| -> f64 {
            node.attribute(key)
                .unwrap_or_else(|| panic!("panel has no {key}"))
                .parse()
                .expect("number")
        };
        assert_eq!((number("data-x-min"), number("data-x-max")), (0.0, 1.0));
        assert_eq!((number("data-y-min"), number("data-y-max")), (0.0, 1.0));
        Panel {
            left: number("data-left"),
            top: number("data-top"),
            width: number("data-width"),
            height: number("data-height"),
        }
    }

    fn data(&self, (px, py): (f64, f64)) -> (f64, f64) {
        (
            (px - self.left) / self.width,
            1.0 - (py - self.top) / self.height,
        )
    }

    /// Coordinates are written to 1/1000 pixel: half that over the panel's size.
    fn tolerance(&self) -> f64 {
        0.0005 / self.width.min(self.height) + 1e-12
    }
}

fn vertices(d: &str) -> Vec<(f64, f64)> {
    d.split(['M', 'L'])
        .map(str::trim)
        .filter(|s| !s.is_empty())
        .map(|pair| {
            let (x, y) = pair.split_once(',').expect("x,y");
            (x.parse().expect("x"), y.parse().expect("y"))
        })
        .collect()
}

fn plots_of_logit_against_probit() -> (tempfile::TempDir, String, String) {
    let s = setup();
    let folder = s.dir.path().join("plots");
    let args = s.logit_against_probit();
    let report =
        evaluate_json(&[&strs(&args)[..], &["--plots", folder.to_str().unwrap()]].concat());
    let listed: Vec<&str> = report["plots"]
        .as_array()
        .unwrap()
        .iter()
        .map(|p| p.as_str().unwrap())
        .collect();
    assert_eq!(listed.len(), 2, "{listed:?}");
    let read = |name: &str| std::fs::read_to_string(folder.join(name)).expect("plot written");
    let (reliability, roc) = (read("reliability.svg"), read("roc.svg"));
    (s.dir, reliability, roc)
}

/// The panel `id` of a plot and its data-to-pixel mapping.
fn panel_of<'a, 'input>(
    document: &'a roxmltree::Document<'input>,
    id: &str,
) -> (roxmltree::Node<'a, 'input>, Panel) {
    let node = document
        .descendants()
        .find(|n| n.attribute("id") == Some(id))
        .unwrap_or_else(|| panic!("no element with id {id}"));
    (node, Panel::read(node))
}

#[test]
fn the_roc_plot_draws_every_point_of_sklearns_roc_curve_for_both_models() {
    let (_dir, _, roc) = plots_of_logit_against_probit();
    let document = roxmltree::Document::parse(&roc).expect("well-formed SVG");
    let (panel_node, panel) = panel_of(&document, "roc-panel");
    let curves: Vec<_> = panel_node
        .descendants()
        .filter(|n| n.has_tag_name("path") && n.attribute("class") == Some("curve"))
        .collect();
    assert_eq!(curves.len(), 2);
    let want = &reference()["spector"];
    for (curve, (key, name)) in curves
        .iter()
        .zip([("first", "spector-logit 1"), ("second", "spector-probit 1")])
    {
        assert_eq!(curve.attribute("data-model"), Some(name));
        let points: Vec<(f64, f64)> = vertices(curve.attribute("d").unwrap())
            .into_iter()
            .map(|p| panel.data(p))
            .collect();
        let expected = want["roc"][key].as_array().unwrap();
        assert_eq!(
            points.len(),
            expected.len(),
            "{name}: vertices against sklearn roc_curve"
        );
        for (got, reference) in points.iter().zip(expected) {
            let (fpr, tpr) = (f(&reference[0]), f(&reference[1]));
            assert!(
                (got.0 - fpr).abs() <= panel.tolerance()
                    && (got.1 - tpr).abs() <= panel.tolerance(),
                "{name}: vertex {got:?}, sklearn roc_curve ({fpr}, {tpr})"
            );
        }
        // The trapezoids under the drawn curve add up to the AUC (ties are diagonal steps).
        let area: f64 = points
            .windows(2)
            .map(|w| (w[1].0 - w[0].0) * (w[1].1 + w[0].1) / 2.0)
            .sum();
        let auc = f(&want[key]["figures"]["auc"]);
        assert!(
            (area - auc).abs() < 4.0 * panel.tolerance(),
            "{name}: area {area}, sklearn AUC {auc}"
        );
    }
}

#[test]
fn the_reliability_plot_places_each_bin_at_its_mean_and_observed_share_sized_by_rows() {
    let (_dir, reliability, _) = plots_of_logit_against_probit();
    let document = roxmltree::Document::parse(&reliability).expect("well-formed SVG");
    let (panel_node, panel) = panel_of(&document, "reliability-panel");
    let diagonal = panel_node
        .descendants()
        .find(|n| n.attribute("class") == Some("diagonal"))
        .expect("the diagonal");
    let end = |x: &str, y: &str| {
        panel.data((
            diagonal.attribute(x).unwrap().parse().unwrap(),
            diagonal.attribute(y).unwrap().parse().unwrap(),
        ))
    };
    assert_eq!((end("x1", "y1"), end("x2", "y2")), ((0.0, 0.0), (1.0, 1.0)));

    let want = &reference()["spector"];
    for (key, name) in [("first", "spector-logit 1"), ("second", "spector-probit 1")] {
        let markers: Vec<_> = panel_node
            .descendants()
            .filter(|n| {
                n.attribute("class") == Some("bin") && n.attribute("data-model") == Some(name)
            })
            .collect();
        let bins: Vec<&Json> = want[key]["figures"]["reliability"]
            .as_array()
            .unwrap()
            .iter()
            .filter(|b| b["count"] != 0)
            .collect();
        assert_eq!(
            markers.len(),
            bins.len(),
            "{name}: one marker per non-empty bin"
        );
        let mut by_count = Vec::new();
        for (marker, bin) in markers.iter().zip(&bins) {
            let number = |k: &str| -> f64 { marker.attribute(k).unwrap().parse().unwrap() };
            let (x, y) = panel.data((number("cx"), number("cy")));
            let (mean, observed) = (f(&bin["mean_probability"]), f(&bin["observed"]));
            assert!(
                (x - mean).abs() <= panel.tolerance() && (y - observed).abs() <= panel.tolerance(),
                "{name}: marker at ({x}, {y}), calibration_curve ({mean}, {observed})"
            );
            assert_eq!(number("data-count"), f(&bin["count"]));
            by_count.push((number("data-count"), number("r")));
        }
        // Marker area grows with the bin's rows.
        by_count.sort_by(|a, b| a.0.total_cmp(&b.0));
        assert!(
            by_count.windows(2).all(|w| w[0].1 <= w[1].1),
            "{name}: radii {by_count:?}"
        );
    }
}

#[test]
fn describe_with_labelled_data_adds_the_same_figures_as_evaluate() {
    let s = setup();
    let folder = s.dir.path().join("plots");
    let data = data_path();
    let result = run(
        &[
            "describe",
            s.logit.to_str().unwrap(),
            "--data",
            data.to_str().unwrap(),
            "--format",
            "json",
            "--plots",
            folder.to_str().unwrap(),
        ],
        None,
        &[],
    );
    assert_eq!(result.code, 0, "{}", result.stderr);
    let described: Json = serde_json::from_str(&result.stdout).expect("JSON");
    let evaluated = evaluate_json(&[
        "--data",
        data.to_str().unwrap(),
        "--outcome",
        "grade",
        "--model",
        s.logit.to_str().unwrap(),
    ]);
    let (a, b) = (
        &described["evaluation"]["models"][0]["figures"],
        &evaluated["models"][0]["figures"],
    );
    assert!(
        a.is_object(),
        "describe gave no evaluation: {}",
        result.stdout
    );
    assert_eq!(a, b, "describe and evaluate give the same figures");
    for plot in ["reliability.svg", "roc.svg", "gpa.svg"] {
        assert!(folder.join(plot).is_file(), "{plot} not written");
    }

    // Without the outcome column, describe adds nothing.
    let no_outcome = s.dir.path().join("covariates.csv");
    let text = std::fs::read_to_string(&data).unwrap();
    let trimmed: Vec<String> = text
        .lines()
        .map(|l| l.rsplit_once(',').unwrap().0.to_string())
        .collect();
    std::fs::write(&no_outcome, trimmed.join("\n") + "\n").unwrap();
    let result = run(
        &[
            "describe",
            s.logit.to_str().unwrap(),
            "--data",
            no_outcome.to_str().unwrap(),
            "--format",
            "json",
        ],
        None,
        &[],
    );
    assert_eq!(result.code, 0, "{}", result.stderr);
    let described: Json = serde_json::from_str(&result.stdout).expect("JSON");
    assert!(described.get("evaluation").is_none());
}

/// The Spector rows `copies` times under one header, with `extra` lines inserted after the
/// copy numbered by each (1-based): a file of many read blocks whose good rows are the Spector
/// rows repeated.
fn repeated(dir: &std::path::Path, copies: usize, extra: &[(usize, &str)]) -> std::path::PathBuf {
    let text = std::fs::read_to_string(data_path()).expect("spector.csv");
    let (header, rows) = text.split_once('\n').expect("a header line");
    let mut body = format!("{header}\n");
    for copy in 1..=copies {
        body.push_str(rows);
        for (_, line) in extra.iter().filter(|(after, _)| *after == copy) {
            body.push_str(line);
            body.push('\n');
        }
    }
    let path = dir.join("repeated.csv");
    std::fs::write(&path, body).expect("write");
    path
}

#[test]
fn a_file_of_many_blocks_gives_the_same_report_on_one_thread_or_three() {
    let s = setup();
    // 3,000 copies of 32 rows: about 1.4 MB, read in blocks of 128 KiB.
    let data = repeated(
        s.dir.path(),
        3_000,
        &[(1_000, "2.5,20,1,2"), (2_999, "2.5,many,1,0")],
    );
    let report = |threads: &str| {
        let mut report = logit_against_probit_skipping(&s, &data, &["--threads", threads]);
        report.as_object_mut().unwrap().remove("created");
        report
    };
    let (one, three) = (report("1"), report("3"));
    assert_eq!(one, three, "the figures depend on the number of threads");

    let d = &one["data"];
    assert_eq!(d["rows_read"], 96_002);
    assert_eq!(d["rows_evaluated"], 96_000);
    // The bad rows are numbered in the whole file: row 32,001 follows the 1,000th copy.
    let examples = d["skipped_examples"].as_array().unwrap();
    assert_eq!(examples.len(), 2, "{d}");
    assert!(
        examples[0]
            .as_str()
            .unwrap()
            .starts_with("row 32001 (line 32002): outcome 'grade'"),
        "{d}"
    );
    assert!(
        examples[1]
            .as_str()
            .unwrap()
            .starts_with("row 95970 (line 95971): "),
        "{d}"
    );
    // The good rows are the Spector rows repeated, so the AUC, Brier score and log loss are
    // those of the rows once (scikit-learn).
    let want = &reference()["spector"];
    for (model, key) in one["models"]
        .as_array()
        .unwrap()
        .iter()
        .zip(["first", "second"])
    {
        let (got, want) = (&model["figures"], &want[key]["figures"]);
        close(&got["auc"]["estimate"], &want["auc"], "AUC (sklearn)");
        close(&got["brier"], &want["brier"], "Brier (sklearn)");
        close(&got["log_loss"], &want["log_loss"], "log loss (sklearn)");
    }
}

#[test]
fn data_dash_reads_standard_input_and_records_what_it_read() {
    let s = setup();
    let file = data_path();
    let (logit, probit) = (s.logit.to_str().unwrap(), s.probit.to_str().unwrap());
    let models = ["--outcome", "grade", "--model", logit, "--against", probit];
    let from_stdin = [
        &["evaluate", "--format", "json", "--data", "-"][..],
        &models,
    ]
    .concat();
    let bytes = std::fs::read(&file).expect("spector.csv");
    let piped = run(&from_stdin, Some(&bytes), &[]);
    assert_eq!(piped.code, 0, "{}", piped.stderr);
    let mut piped: Json = serde_json::from_str(&piped.stdout).expect("JSON");
    let mut named = evaluate_json(&[&["--data", file.to_str().unwrap()][..], &models].concat());
    assert_eq!(piped["data"]["path"], "-");
    assert_eq!(piped["data"]["sha256"], sha256_of(&file));
    assert_eq!(piped["data"]["bytes"], bytes.len());
    for report in [&mut piped, &mut named] {
        let report = report.as_object_mut().unwrap();
        report.remove("created");
        report["data"].as_object_mut().unwrap().remove("path");
    }
    assert_eq!(
        piped, named,
        "standard input and the file give other reports"
    );

    // A bad row on standard input is named as in a file.
    let bad = String::from_utf8(bytes)
        .unwrap()
        .replacen("2.66,20.0,0,0", "2.66,20.0,0,2", 1);
    let refused = run(&from_stdin, Some(bad.as_bytes()), &[]);
    assert_ne!(refused.code, 0);
    assert!(
        refused
            .stderr
            .contains("evaluating on standard input stopped")
            && refused.stderr.contains("row 1 (line 2): outcome 'grade'"),
        "{}",
        refused.stderr
    );
}
