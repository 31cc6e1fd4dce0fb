//! `ogive describe`, run as a process: the report's average marginal effects, effects at the
//! means and coefficient table against statsmodels on the Spector & Mazzeo data, the warnings
//! a data file raises, the cautions, and the SVG plots read back point by point.

mod support;

use ogive::engine::{effect_slots, Options, Scorer};
use ogive::model::{CovariateKind, Model, Value};
use serde_json::Value as Json;
use support::cli::{fixture, model_json, portfolio_json, run, write_model};
use support::close::relative_difference;
use support::tolerances::describe as tolerance;

fn describe_json(model: &Json, extra: &[&str]) -> Json {
    let dir = tempfile::tempdir().expect("tempdir");
    let path = write_model(dir.path(), "model.json", model);
    let mut args = vec!["describe", path.to_str().unwrap(), "--format", "json"];
    args.extend_from_slice(extra);
    let result = run(&args, None, &[]);
    assert_eq!(result.code, 0, "{}", result.stderr);
    serde_json::from_str(&result.stdout).expect("describe --format json prints JSON")
}

fn numbers(v: &Json) -> Vec<f64> {
    v.as_array()
        .expect("array")
        .iter()
        .map(|x| x.as_f64().expect("number"))
        .collect()
}

fn check_effects(rows: &Json, expected: &Json, source: &str) {
    let effects = numbers(&expected["effects"]);
    let std_errors = numbers(&expected["std_errors"]);
    let rows = rows.as_array().expect("effect rows");
    let names: Vec<&str> = rows
        .iter()
        .map(|r| r["covariate"].as_str().unwrap())
        .collect();
    // statsmodels orders effects as its exog columns: GPA, TUCE, PSI.
    assert_eq!(names, ["gpa", "tuce", "psi"]);
    for (i, row) in rows.iter().enumerate() {
        let effect = row["effect"].as_f64().unwrap();
        let se = row["std_error"].as_f64().unwrap();
        assert!(
            relative_difference(effect, effects[i]) < tolerance::STATSMODELS_EFFECT,
            "{source}: {} effect {effect} vs {}",
            names[i],
            effects[i]
        );
        assert!(
            relative_difference(se, std_errors[i]) < tolerance::STATSMODELS_EFFECT_SE,
            "{source}: {} se {se} vs {} (rel {:e})",
            names[i],
            std_errors[i],
            relative_difference(se, std_errors[i])
        );
    }
}

#[test]
fn average_marginal_effects_match_statsmodels() {
    let f = fixture();
    let data = support::cli::data_path();
    for link in ["logit", "probit"] {
        let report = describe_json(&model_json(link), &["--data", data.to_str().unwrap()]);
        let source =
            format!("statsmodels 0.15 {link} get_margeff(at='overall', dummy=True), Spector data");
        check_effects(
            &report["data"]["average_effects"],
            &f["models"][link]["margeff_overall"],
            &source,
        );
        assert_eq!(report["data"]["rows"], 32);
        // The average fitted probability equals the share of ones for a logit with an
        // intercept (a property of the logit score equations, common practice); for the
        // probit it is only close.
        if link == "logit" {
            let p = report["data"]["average_probability"]["probability"]
                .as_f64()
                .unwrap();
            assert!((p - 11.0 / 32.0).abs() < 1e-9, "{p}");
        }
    }
}

#[test]
fn effects_at_the_means_match_statsmodels() {
    let f = fixture();
    for link in ["logit", "probit"] {
        let report = describe_json(&model_json(link), &[]);
        let source =
            format!("statsmodels 0.15 {link} get_margeff(at='mean', dummy=True), Spector data");
        check_effects(
            &report["at_means"]["effects"],
            &f["models"][link]["margeff_mean"],
            &source,
        );
    }
}

#[test]
fn coefficient_table_matches_statsmodels() {
    let f = fixture();
    for link in ["logit", "probit"] {
        let m = &f["models"][link];
        let report = describe_json(&model_json(link), &[]);
        let rows = report["coefficients"].as_array().unwrap();
        let (bse, z, p) = (
            numbers(&m["bse"]),
            numbers(&m["z"]),
            numbers(&m["p_values"]),
        );
        let intervals = m["conf_int_95"].as_array().unwrap();
        for (i, row) in rows.iter().enumerate() {
            // statsmodels 0.15 {Logit,Probit} bse, tvalues, pvalues, conf_int(0.05); rel 1e-12.
            let get = |k: &str| row[k].as_f64().unwrap();
            let interval = numbers(&intervals[i]);
            for (name, ours, theirs) in [
                ("std_error", get("std_error"), bse[i]),
                ("z", get("z"), z[i]),
                ("p_value", get("p_value"), p[i]),
                ("lower", get("lower"), interval[0]),
                ("upper", get("upper"), interval[1]),
            ] {
                assert!(
                    relative_difference(ours, theirs) < tolerance::STATSMODELS_COEFFICIENTS,
                    "{link} {} {name}: {ours} vs {theirs}",
                    row["term"]
                );
            }
        }
    }
}

#[test]
fn data_warnings_are_counted_per_covariate() {
    let dir = tempfile::tempdir().expect("tempdir");
    let data = dir.path().join("data.csv");
    // gpa's training range is [2.06, 4], tuce's [12, 29].
    std::fs::write(
        &data,
        "gpa,tuce,psi\n3.0,20,1\n1.9,20,0\n4.3,31,1\n4.5,20,0\n3.1,10,1\n",
    )
    .unwrap();
    let report = describe_json(&model_json("logit"), &["--data", data.to_str().unwrap()]);
    let w = &report["data"]["warnings"];
    assert_eq!(w["rows_with_warnings"], 4);
    let counts: Vec<(String, u64, u64)> = w["out_of_range"]
        .as_array()
        .unwrap()
        .iter()
        .map(|c| {
            (
                c["covariate"].as_str().unwrap().to_string(),
                c["below"].as_u64().unwrap(),
                c["above"].as_u64().unwrap(),
            )
        })
        .collect();
    assert_eq!(
        counts,
        [("gpa".to_string(), 1, 2), ("tuce".to_string(), 1, 1)]
    );
}

#[test]
fn text_report_has_every_section_and_the_cautions() {
    let dir = tempfile::tempdir().expect("tempdir");
    let path = write_model(dir.path(), "model.json", &model_json("probit"));
    let data = support::cli::data_path();
    let result = run(
        &[
            "describe",
            path.to_str().unwrap(),
            "--data",
            data.to_str().unwrap(),
        ],
        None,
        &[],
    );
    assert_eq!(result.code, 0, "{}", result.stderr);
    let text = result.stdout;
    for section in [
        "Model report: spector-probit 1",
        "Identity and provenance",
        "Coefficients (95% intervals",
        "Covariates and training ranges",
        "Effects at the training means",
        "average marginal effects",
        "Notes",
        "Cautions",
    ] {
        assert!(text.contains(section), "missing {section:?}");
    }
    // The cautions are wrapped to the page; compare with white space collapsed.
    let flat: String = text.split_whitespace().collect::<Vec<_>>().join(" ");
    for caution in ogive::report::CAUTIONS {
        let caution: String = caution.split_whitespace().collect::<Vec<_>>().join(" ");
        assert!(flat.contains(&caution), "missing caution {caution:?}");
    }
    for phrase in [
        "A model estimate is not a decision",
        "local law, fair-lending and anti-discrimination rules, and licensed professional practice",
        "an out-of-range warning means the model is extrapolating",
        "Monitor outcomes before trusting a new version",
    ] {
        assert!(
            flat.to_lowercase().contains(&phrase.to_lowercase()),
            "missing {phrase:?}"
        );
    }
}

/// A panel of a plot and its data-to-pixel mapping, read from its data attributes.
struct Panel {
    log: bool,
    x: (f64, f64),
    y: (f64, f64),
    left: f64,
    top: f64,
    width: f64,
    height: f64,
}

impl Panel {
    fn read(node: roxmltree::Node) -> Panel {
        let get = |name: &str| -> f64 {
            node.attribute(name)
                .unwrap_or_else(|| panic!("panel lacks {name}"))
                .parse()
                .expect("number")
        };
        Panel {
            log: match node.attribute("data-x-scale") {
                Some("log") => true,
                Some("linear") => false,
                other => panic!("data-x-scale is {other:?}"),
            },
            x: (get("data-x-min"), get("data-x-max")),
            y: (get("data-y-min"), get("data-y-max")),
            left: get("data-left"),
            top: get("data-top"),
            width: get("data-width"),
            height: get("data-height"),
        }
    }

    fn scaled(&self, x: f64) -> f64 {
        if self.log {
            x.ln()
        } else {
            x
        }
    }

    fn data_x(&self, px: f64) -> f64 {
        let (a, b) = (self.scaled(self.x.0), self.scaled(self.x.1));
        let s = a + (px - self.left) / self.width * (b - a);
        if self.log {
            s.exp()
        } else {
            s
        }
    }

    fn pixel_x(&self, x: f64) -> f64 {
        let (a, b) = (self.scaled(self.x.0), self.scaled(self.x.1));
        self.left + (self.scaled(x) - a) / (b - a) * self.width
    }

    fn data_y(&self, py: f64) -> f64 {
        self.y.1 - (py - self.top) / self.height * (self.y.1 - self.y.0)
    }

    /// How far a read-back y value may be from the truth: half a thousandth of a pixel.
    fn y_tolerance(&self) -> f64 {
        tolerance::PIXEL * (self.y.1 - self.y.0) / self.height
    }
}

/// The vertices of an SVG path written as "Mx,y Lx,y … [Z]".
fn vertices(d: &str) -> Vec<(f64, f64)> {
    d.split(['M', 'L', 'Z'])
        .map(str::trim)
        .filter(|s| !s.is_empty())
        .map(|pair| {
            let (x, y) = pair.split_once(',').expect("x,y");
            (x.parse().expect("x"), y.parse().expect("y"))
        })
        .collect()
}

fn path_of<'a>(panel: roxmltree::Node<'a, 'a>, quantity: &str) -> Vec<(f64, f64)> {
    let node = panel
        .descendants()
        .find(|n| n.attribute("data-quantity") == Some(quantity))
        .unwrap_or_else(|| panic!("no path {quantity}"));
    vertices(node.attribute("d").expect("d"))
}

/// Check every vertex of the probability and effect curves and bands against the engine;
/// returns whether the x axis is logarithmic.
fn check_plot(model: &Model, covariate: usize, svg: &str) -> bool {
    let document = roxmltree::Document::parse(svg).expect("the SVG is well-formed XML");
    let root = document.root_element();
    assert_eq!(root.tag_name().name(), "svg");
    let panel_node = |id: &str| {
        root.descendants()
            .find(|n| n.attribute("id") == Some(id))
            .unwrap_or_else(|| panic!("no {id}"))
    };
    let (probability_node, effect_node) =
        (panel_node("probability-panel"), panel_node("effect-panel"));
    let (probability_panel, effect_panel) =
        (Panel::read(probability_node), Panel::read(effect_node));

    let mut scorer = Scorer::new(model);
    let mut options = Options::new(0.95).unwrap();
    options.contributions = false;
    let slot = effect_slots(model)
        .iter()
        .position(|s| s.covariate == covariate)
        .unwrap();
    let mut engine_at = |x: f64| {
        let mut values: Vec<Value> = model.mean_profile().to_vec();
        values[covariate] = Value::Number(x);
        scorer.score(model, &values, &options).clone()
    };

    let curve = path_of(probability_node, "probability");
    let band = path_of(probability_node, "probability-interval");
    let effect_curve = path_of(effect_node, "effect");
    let effect_band = path_of(effect_node, "effect-interval");
    assert!(curve.len() > 50, "a smooth curve needs many points");
    assert_eq!(band.len(), 2 * curve.len());
    assert_eq!(effect_curve.len(), curve.len());
    let n = curve.len();
    let c = &model.covariates()[covariate];
    let (first_x, last_x) = (
        probability_panel.data_x(curve[0].0),
        probability_panel.data_x(curve[n - 1].0),
    );
    // The curve runs beyond the training range on both sides (not below 0 for a
    // non-negative covariate).
    assert!(first_x < c.training_min() || (c.training_min() >= 0.0 && first_x <= c.training_min()));
    assert!(last_x > c.training_max());
    for i in 0..n {
        let x = probability_panel.data_x(curve[i].0);
        let answer = engine_at(x);
        let p = probability_panel.data_y(curve[i].1);
        let tol = probability_panel.y_tolerance();
        assert!(
            (p - answer.probability).abs() <= tol,
            "{}: P at x = {x}: plotted {p}, engine {}",
            c.name(),
            answer.probability
        );
        let interval = answer.interval.unwrap();
        let upper = probability_panel.data_y(band[i].1);
        let lower = probability_panel.data_y(band[2 * n - 1 - i].1);
        assert!((upper - interval.upper).abs() <= tol, "upper at {x}");
        assert!((lower - interval.lower).abs() <= tol, "lower at {x}");

        let effect = answer.effects[slot];
        let tol = effect_panel.y_tolerance();
        let m = effect_panel.data_y(effect_curve[i].1);
        assert!(
            (m - effect.effect).abs() <= tol,
            "{}: dP/dx at {x}: plotted {m}, engine {}",
            c.name(),
            effect.effect
        );
        let e_interval = effect.interval.unwrap();
        assert!((effect_panel.data_y(effect_band[i].1) - e_interval.upper).abs() <= tol);
        assert!(
            (effect_panel.data_y(effect_band[2 * n - 1 - i].1) - e_interval.lower).abs() <= tol
        );
    }
    // The shaded training range spans exactly [min, max] (to the 1/1000 pixel written).
    let range = probability_node
        .descendants()
        .find(|n| n.attribute("class") == Some("training-range"))
        .expect("training range");
    let left: f64 = range.attribute("x").unwrap().parse().unwrap();
    let width: f64 = range.attribute("width").unwrap().parse().unwrap();
    assert!((left - probability_panel.pixel_x(c.training_min())).abs() <= 2e-3);
    assert!((left + width - probability_panel.pixel_x(c.training_max())).abs() <= 2e-3);
    probability_panel.log
}

fn plots_for(model_json: &Json) -> (Model, Vec<(String, String)>, Json) {
    let dir = tempfile::tempdir().expect("tempdir");
    let plots = dir.path().join("plots");
    let report = describe_json(model_json, &["--plots", plots.to_str().unwrap()]);
    let model = Model::from_json(&serde_json::to_vec(model_json).unwrap()).unwrap();
    let mut files: Vec<(String, String)> = std::fs::read_dir(&plots)
        .expect("plots folder")
        .map(|e| {
            let path = e.unwrap().path();
            (
                path.file_name().unwrap().to_string_lossy().into_owned(),
                std::fs::read_to_string(&path).unwrap(),
            )
        })
        .collect();
    files.sort();
    (model, files, report)
}

#[test]
fn spector_plots_parse_and_follow_the_engine() {
    for link in ["logit", "probit"] {
        let (model, files, report) = plots_for(&model_json(link));
        let names: Vec<&str> = files.iter().map(|(n, _)| n.as_str()).collect();
        // One plot per continuous covariate: gpa and tuce (psi is binary).
        assert_eq!(names, ["gpa.svg", "tuce.svg"]);
        assert_eq!(report["plots"].as_array().unwrap().len(), 2);
        for (name, svg) in &files {
            let covariate = model
                .covariate_index(name.trim_end_matches(".svg"))
                .unwrap();
            assert!(!check_plot(&model, covariate, svg), "{name}: linear axis");
        }
    }
}

#[test]
fn plots_of_a_model_with_logs_squares_and_levels_follow_the_engine() {
    let (model, files, _) = plots_for(&portfolio_json(true));
    let continuous: Vec<String> = model
        .covariates()
        .iter()
        .filter(|c| c.kind() == CovariateKind::Continuous)
        .map(|c| format!("{}.svg", c.name()))
        .collect();
    let names: Vec<String> = files.iter().map(|(n, _)| n.clone()).collect();
    assert_eq!(names, continuous);
    for (name, svg) in &files {
        let covariate = model
            .covariate_index(name.trim_end_matches(".svg"))
            .unwrap();
        // revenue enters as log(revenue) and spans 20 to 5000: a log axis; years: linear.
        assert_eq!(
            check_plot(&model, covariate, svg),
            name == "revenue.svg",
            "{name}"
        );
    }
}

#[test]
fn without_a_covariance_the_report_says_so_and_plots_have_no_bands() {
    let dir = tempfile::tempdir().expect("tempdir");
    let data = dir.path().join("data.csv");
    // The second row is inside every training range but an unusual combination of revenue and
    // years (Mahalanobis distance above the model's largest training distance, 3).
    std::fs::write(
        &data,
        "revenue,years,arrears,guarantor,sector\n800,9,0,1,retail\n4900,0.5,1,0,transport\n",
    )
    .unwrap();
    let plots = dir.path().join("plots");
    let report = describe_json(
        &portfolio_json(false),
        &[
            "--data",
            data.to_str().unwrap(),
            "--plots",
            plots.to_str().unwrap(),
        ],
    );
    assert!(report["coefficients"]
        .as_array()
        .unwrap()
        .iter()
        .all(|c| c["std_error"].is_null() && c["p_value"].is_null()));
    assert!(report["data"]["average_effects"]
        .as_array()
        .unwrap()
        .iter()
        .all(|e| e["std_error"].is_null() && e["effect"].is_f64()));
    assert!(report["notes"]
        .as_array()
        .unwrap()
        .iter()
        .any(|n| n.as_str().unwrap().contains("no coefficient covariance")));
    let w = &report["data"]["warnings"];
    assert_eq!(w["unusual_combination"], 1);
    assert_eq!(w["rows_with_warnings"], 1);
    assert!(w["out_of_range"].as_array().unwrap().is_empty());
    for entry in std::fs::read_dir(&plots).unwrap() {
        let svg = std::fs::read_to_string(entry.unwrap().path()).unwrap();
        let document = roxmltree::Document::parse(&svg).expect("well-formed XML");
        assert!(document
            .descendants()
            .all(|n| n.attribute("class") != Some("band")));
        assert!(svg.contains("no intervals (no covariance)"));
    }
}

/// `ogive fit` and `ogive describe` head their coefficient tables with the same words.
#[test]
fn fit_and_describe_use_the_same_coefficient_column_words() {
    let dir = tempfile::tempdir().expect("temporary folder");
    let out = dir.path().join("m.json");
    let spector =
        std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/reference/fit/spector.csv");
    let ogive = env!("CARGO_BIN_EXE_ogive");
    let fit = std::process::Command::new(ogive)
        .args(["fit", "--outcome", "GRADE", "--terms", "GPA, TUCE, PSI"])
        .args(["--name", "spector", "--version", "1", "--data"])
        .arg(&spector)
        .arg("--out")
        .arg(&out)
        .output()
        .expect("run ogive fit");
    assert!(fit.status.success());
    let describe = std::process::Command::new(ogive)
        .arg("describe")
        .arg(&out)
        .output()
        .expect("run ogive describe");
    assert!(describe.status.success());
    let header = |text: &[u8]| -> Vec<String> {
        let text = String::from_utf8_lossy(text).into_owned();
        let line = text
            .lines()
            .find(|l| l.trim_start().starts_with("term "))
            .expect("a coefficient table")
            .to_string();
        line.split("  ")
            .map(str::trim)
            .filter(|w| !w.is_empty())
            .map(str::to_string)
            .collect()
    };
    let words = header(&fit.stdout);
    assert_eq!(words, header(&describe.stdout));
    assert_eq!(
        &words[..5],
        ogive::report::text::COEFFICIENT_COLUMNS.map(String::from)
    );
}

fn demo_lease() -> Model {
    let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("model-files/lease-arrears/versions/1.0.0.json");
    Model::from_json(&std::fs::read(path).expect("read")).expect("valid")
}

fn demo_plot(covariate: &str) -> (Model, usize, String) {
    let model = demo_lease();
    let j = model
        .covariates()
        .iter()
        .position(|c| c.name() == covariate)
        .expect("covariate");
    let svg =
        ogive::report::svg::render(&model, j, &ogive::engine::Options::default()).expect("render");
    (model, j, svg)
}

/// years_trading enters `years_trading*guarantor`: its plot draws one curve per value of the
/// binary partner, in both panels, each following the engine at that value.
#[test]
fn an_interacting_covariate_has_a_curve_per_level_of_its_partner() {
    let (model, j, svg) = demo_plot("years_trading");
    let partner = model
        .covariates()
        .iter()
        .position(|c| c.name() == "guarantor")
        .expect("guarantor");
    let document = roxmltree::Document::parse(&svg).expect("well-formed");
    let panel_of = |id: &str| {
        document
            .descendants()
            .find(|n| n.attribute("id") == Some(id))
            .expect("panel")
    };
    let probability = panel_of("probability-panel");
    let effect = panel_of("effect-panel");
    for (node, value) in [(probability, true), (effect, false)] {
        let panel = Panel::read(node);
        let curves: Vec<_> = node
            .descendants()
            .filter(|n| n.attribute("class") == Some("partner-curve"))
            .collect();
        assert_eq!(curves.len(), 2, "one curve per value of guarantor");
        for curve in curves {
            assert_eq!(curve.attribute("data-partner"), Some("guarantor"));
            let level: f64 = curve
                .attribute("data-level")
                .expect("level")
                .parse()
                .expect("0/1");
            let expected = ogive::report::svg::curve_with(
                &model,
                j,
                &ogive::engine::Options::default(),
                ogive::report::svg::GRID_POINTS,
                &[(partner, ogive::model::Value::Number(level))],
            )
            .expect("curve");
            let drawn = vertices(curve.attribute("d").expect("d"));
            assert_eq!(drawn.len(), expected.len());
            for (&(_, py), point) in drawn.iter().zip(&expected) {
                let truth = if value {
                    point.probability
                } else {
                    point.effect
                };
                assert!(
                    (panel.data_y(py) - truth).abs() <= panel.y_tolerance(),
                    "guarantor = {level}"
                );
            }
        }
    }
    assert!(svg.contains("interacts with guarantor: thin dashed curves at guarantor = 0, 1"));
    // A covariate in no product has no partner curves and no such line.
    let (_, _, plain) = demo_plot("annual_revenue");
    assert!(!plain.contains("partner-curve") && !plain.contains("interacts with"));
}

/// The rug along the probability panel is the training histogram of the model file: every
/// non-empty bin inside the plotted range, its count carried through.
#[test]
fn the_plot_has_a_rug_of_the_training_data() {
    let (model, j, svg) = demo_plot("years_trading");
    let histogram = model.file().covariates[j]
        .training
        .histogram
        .clone()
        .expect("the demo file stores a histogram");
    let document = roxmltree::Document::parse(&svg).expect("well-formed");
    let rug = document
        .descendants()
        .find(|n| n.attribute("class") == Some("rug"))
        .expect("a rug");
    let drawn: u64 = rug
        .children()
        .filter(|n| n.is_element())
        .map(|n| {
            n.attribute("data-count")
                .expect("count")
                .parse::<u64>()
                .expect("number")
        })
        .sum();
    let total: u64 = histogram.counts.iter().sum();
    assert_eq!(
        drawn, total,
        "the training range lies inside the plotted range"
    );
}

/// Labels carry three significant digits, not the six of the tables.
#[test]
fn plot_labels_are_rounded_to_readable_digits() {
    let (_, _, svg) = demo_plot("years_trading");
    // The demo's training summary: min 0.3, max 60, mean 9.25221.
    assert!(
        svg.contains("training range 0.3 to 60, mean 9.25<"),
        "{svg}"
    );
    assert_eq!(ogive::report::svg::label_number(-7.35260e-5), "-7.35e-5");
    assert_eq!(ogive::report::svg::label_number(620.308535), "620");
    assert_eq!(ogive::report::svg::label_number(0.00548873), "0.00549");
}
