//! `ogive describe`: print a reviewer's report on a model, optionally with average effects over
//! a data file and one SVG plot per continuous covariate; when the data file carries the
//! model's outcome column, also `ogive evaluate`'s figures for the model alone (and its two
//! plots). The report is built by
//! [`crate::report`]; this file opens the files and chooses the format.

use std::fs::File;
use std::io::{self, Read};
use std::path::{Path, PathBuf};
use std::process::ExitCode;

use anyhow::Context;

use super::evaluate;
use crate::batch::{self, ErrorPolicy};
use crate::engine::Options;
use crate::evaluate::report::{self as evaluation_report, EvaluationReport};
use crate::evaluate::{labelled, plots, ModelRows, ReadOptions};
use crate::model::Model;
use crate::report;

/// Arguments of `ogive describe`.
#[derive(Debug, clap::Args)]
pub struct DescribeArgs {
    /// The model file to describe.
    #[arg(value_name = "FILE")]
    pub file: PathBuf,
    /// A CSV file of observations (a header row naming the covariates): adds average marginal
    /// effects over its rows and the warnings they would raise; when it also has the model's
    /// outcome column, the evaluation of `ogive evaluate` (discrimination and calibration).
    /// `-` reads standard input (no evaluation then).
    #[arg(long, env = "OGIVE_DATA", value_name = "CSV")]
    pub data: Option<PathBuf>,
    /// Write one SVG plot per continuous covariate into this folder (created if needed).
    #[arg(long, env = "OGIVE_PLOTS", value_name = "DIR")]
    pub plots: Option<PathBuf>,
    /// The report's format.
    #[arg(long, env = "OGIVE_FORMAT", value_enum, default_value_t = Format::Text)]
    pub format: Format,
    /// The level of every interval in the report.
    #[arg(long, env = "OGIVE_LEVEL", value_name = "L", default_value_t = 0.95)]
    pub level: f64,
}

/// The `--format` choices.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum Format {
    /// Aligned plain text.
    Text,
    /// Pretty-printed JSON.
    Json,
}

/// Run `ogive describe`.
pub fn run(args: DescribeArgs) -> anyhow::Result<ExitCode> {
    let bytes = std::fs::read(&args.file)
        .with_context(|| format!("cannot read model file {}", args.file.display()))?;
    let model = Model::from_json(&bytes)
        .with_context(|| format!("model file {} is not valid", args.file.display()))?;
    let options = Options::new(args.level)?;
    let data = match &args.data {
        None => None,
        Some(path) => {
            let (input, source): (Box<dyn Read>, String) = if path.as_os_str() == "-" {
                (Box::new(io::stdin().lock()), "standard input".to_string())
            } else {
                let file =
                    File::open(path).with_context(|| format!("cannot open {}", path.display()))?;
                (Box::new(file), path.display().to_string())
            };
            let summary = report::summarise_csv(&model, input, &source, &options)
                .with_context(|| format!("cannot summarise {source}"))?;
            Some(summary)
        }
    };
    let mut built = report::build(&model, &options, data.as_ref());
    let mut evaluation = match &args.data {
        Some(path) if path.as_os_str() != "-" => {
            outcome_evaluation(&args.file, &model, path, args.level)?
        }
        _ => None,
    };
    if let Some(folder) = &args.plots {
        let mut written = report::svg::write_plots(&model, folder, &options)?;
        if let Some((evaluated, rows)) = &mut evaluation {
            written.extend(plots::write_plots(folder, evaluated, rows)?);
        }
        built.plots = written.iter().map(|p| p.display().to_string()).collect();
    }
    let evaluation = evaluation.map(|(report, _)| report);
    match args.format {
        Format::Text => {
            print!("{}", report::render_text(&built));
            if let Some(evaluated) = &evaluation {
                print!("{}", evaluation_report::render_section(evaluated));
            }
        }
        Format::Json => {
            let mut json: serde_json::Value = serde_json::from_str(&report::render_json(&built))
                .context("cannot write the JSON report")?;
            if let (Some(evaluated), Some(object)) = (&evaluation, json.as_object_mut()) {
                object.insert(
                    "evaluation".into(),
                    serde_json::to_value(evaluated).context("cannot write the JSON report")?,
                );
            }
            println!(
                "{}",
                serde_json::to_string_pretty(&json).context("cannot write the JSON report")?
            );
        }
    }
    Ok(ExitCode::SUCCESS)
}

/// When the data file carries the model's outcome column, the figures `ogive evaluate` gives
/// for the model alone, computed by the same code.
fn outcome_evaluation(
    file: &Path,
    model: &Model,
    data: &Path,
    level: f64,
) -> anyhow::Result<Option<(EvaluationReport, Vec<ModelRows>)>> {
    let outcome = &model.file.outcome.name;
    let header = File::open(data).with_context(|| format!("cannot open {}", data.display()))?;
    if !labelled::has_column(header, outcome)
        .with_context(|| format!("cannot read the header of {}", data.display()))?
    {
        return Ok(None);
    }
    let loaded = evaluate::loaded_from(file)?;
    let reading = ReadOptions {
        on_error: ErrorPolicy::Stop,
        threads: batch::default_threads(),
    };
    let evaluated = evaluate::evaluate_data(&[loaded], data, outcome, reading, level)
        .with_context(|| format!("{} carries the outcome column '{outcome}'", data.display()))?;
    Ok(Some(evaluated))
}
