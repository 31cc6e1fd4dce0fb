//! `ogive describe`: print a reviewer's report on a model, optionally with average effects over
//! a data file and one SVG plot per continuous covariate. The report is built by
//! [`crate::report`]; this file opens the files and chooses the format.

use std::fs::File;
use std::io::{self, Read};
use std::path::PathBuf;
use std::process::ExitCode;

use anyhow::Context;

use crate::engine::Options;
use crate::model::Model;
use crate::report;

/// Arguments of `ogive describe`.
#[derive(Debug, clap::Args)]
pub struct DescribeArgs {
    /// The model file to describe.
    #[arg(value_name = "FILE")]
    pub file: PathBuf,
    /// A CSV file of observations (a header row naming the covariates): adds average marginal
    /// effects over its rows and the warnings they would raise. `-` reads standard input.
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
    if let Some(folder) = &args.plots {
        let written = report::svg::write_plots(&model, folder, &options)?;
        built.plots = written.iter().map(|p| p.display().to_string()).collect();
    }
    match args.format {
        Format::Text => print!("{}", report::render_text(&built)),
        Format::Json => println!("{}", report::render_json(&built)),
    }
    Ok(ExitCode::SUCCESS)
}
