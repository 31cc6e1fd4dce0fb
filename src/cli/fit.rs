//! `ogive fit`: read a CSV, fit by maximum likelihood, print the summary, write the model file.
//! The work is [`crate::fit::fit`]; this file holds the flags and the progress bar.

use std::io::IsTerminal;
use std::path::PathBuf;
use std::process::ExitCode;
use std::time::Duration;

use indicatif::{ProgressBar, ProgressStyle};

use crate::fit::{self, CategoricalSpec, CovarianceType, FitRequest, Progress};
use crate::link::Link;
use crate::model::file::{Band, DecisionSpec};

/// The covariance estimator, as a flag value.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum CovarianceFlag {
    /// Inverse of the observed information at the estimate.
    Classical,
    /// HC0 sandwich (heteroskedasticity-consistent).
    Robust,
}

/// Arguments of `ogive fit`.
///
/// Kinds of numeric columns are inferred: binary when every value is 0 or 1; count when every
/// value is a whole number, the smallest 0 and the largest at most 100; continuous otherwise.
/// A column whose first value is text is categorical. The default reference level of a
/// categorical covariate is the first in sorted order. Cells that are empty, NA, N/A, NaN, nan,
/// null or NULL are missing. The outcome is 0/1 (or false/true).
#[derive(Debug, clap::Args)]
pub struct FitArgs {
    /// The training data: a CSV file with a header line.
    #[arg(long, env = "OGIVE_DATA", value_name = "CSV")]
    pub data: PathBuf,
    /// The outcome column (0/1, or false/true).
    #[arg(long, env = "OGIVE_OUTCOME", value_name = "COL")]
    pub outcome: String,
    /// What outcome = 1 means, in a sentence (stored in the model file).
    #[arg(long, env = "OGIVE_OUTCOME_MEANING", value_name = "TEXT")]
    pub outcome_meaning: Option<String>,
    /// The terms, comma-separated, each exactly one term: name, name^k, log(name), a*b,
    /// name=level. A bare categorical expands into its non-reference level indicators; in a
    /// product, into one product per non-reference level.
    #[arg(long, env = "OGIVE_TERMS", value_name = "LIST")]
    pub terms: String,
    /// A categorical covariate, optionally with its reference level (default: the first level in
    /// sorted order). Repeat for several.
    #[arg(long, value_name = "COL[=REF]")]
    pub categorical: Vec<CategoricalSpec>,
    /// Treat this numeric column as a count (whole numbers ≥ 0). Repeatable.
    #[arg(long, value_name = "COL")]
    pub count: Vec<String>,
    /// Treat this numeric column as continuous. Repeatable.
    #[arg(long, value_name = "COL")]
    pub continuous: Vec<String>,
    /// The unit of a covariate, stored in the model file (e.g. years_trading=years). Repeatable.
    #[arg(long, value_name = "COL=UNIT", value_parser = parse_pair)]
    pub unit: Vec<(String, String)>,
    /// The link.
    #[arg(long, env = "OGIVE_LINK", default_value = "logit")]
    pub link: Link,
    /// The coefficient covariance.
    #[arg(
        long,
        env = "OGIVE_COVARIANCE",
        value_enum,
        default_value = "classical"
    )]
    pub covariance: CovarianceFlag,
    /// Leave out the intercept.
    #[arg(long, env = "OGIVE_NO_INTERCEPT")]
    pub no_intercept: bool,
    /// Drop rows with a missing value in the outcome or a covariate (and report how many)
    /// instead of failing.
    #[arg(long, env = "OGIVE_DROP_MISSING")]
    pub drop_missing: bool,
    /// The Newton–Raphson iteration cap.
    #[arg(long, env = "OGIVE_MAX_ITERATIONS", default_value_t = 100)]
    pub max_iterations: u32,
    /// The model's name (lower-case letters, digits and '-').
    #[arg(long, env = "OGIVE_NAME")]
    pub name: String,
    /// The version label.
    #[arg(long, env = "OGIVE_VERSION")]
    pub version: String,
    /// What the model is for, in a sentence or two.
    #[arg(long, env = "OGIVE_DESCRIPTION", default_value = "")]
    pub description: String,
    /// A decision threshold: probabilities at or above it are flagged.
    #[arg(long, env = "OGIVE_THRESHOLD", value_name = "P")]
    pub threshold: Option<f64>,
    /// A named probability band with its exclusive upper bound, in increasing order; the last
    /// must be 1 (e.g. --band low=0.05 --band medium=0.2 --band high=1).
    #[arg(long, value_name = "NAME=BELOW", value_parser = parse_band)]
    pub band: Vec<Band>,
    /// Where to write the model file (written atomically).
    #[arg(long, env = "OGIVE_OUT", value_name = "FILE")]
    pub out: PathBuf,
    /// Record this time (seconds since the Unix epoch) as the fit time instead of now, for
    /// reproducible files.
    #[arg(long, env = "SOURCE_DATE_EPOCH", value_name = "SECONDS")]
    pub fitted_at: Option<u64>,
}

fn parse_pair(s: &str) -> Result<(String, String), String> {
    match s.split_once('=') {
        Some((a, b)) if !a.trim().is_empty() && !b.trim().is_empty() => {
            Ok((a.trim().to_string(), b.trim().to_string()))
        }
        _ => Err(format!("expected NAME=VALUE, got '{s}'")),
    }
}

fn parse_band(s: &str) -> Result<Band, String> {
    let (name, below) = parse_pair(s)?;
    let below = below
        .parse()
        .map_err(|_| format!("band '{name}': '{below}' is not a number"))?;
    Ok(Band { name, below })
}

/// A progress bar on stderr; hidden when stderr is not a terminal.
struct Bar(ProgressBar);

impl Bar {
    fn new() -> Bar {
        let bar = if std::io::stderr().is_terminal() {
            ProgressBar::new(0)
        } else {
            ProgressBar::hidden()
        };
        Bar(bar)
    }
}

impl Progress for Bar {
    fn start_reading(&self, total_bytes: u64) {
        self.0.set_length(total_bytes);
        self.0.set_style(
            ProgressStyle::with_template("reading {bar:30} {bytes}/{total_bytes} {msg}")
                .unwrap_or_else(|_| ProgressStyle::default_bar()),
        );
    }
    fn bytes_read(&self, bytes: u64) {
        self.0.set_position(bytes);
    }
    fn rows_read(&self, rows: u64) {
        self.0.set_message(format!("{rows} rows"));
    }
    fn start_fitting(&self) {
        self.0.set_style(
            ProgressStyle::with_template("fitting {spinner} {msg}")
                .unwrap_or_else(|_| ProgressStyle::default_spinner()),
        );
        self.0.set_message("iteration 0");
        self.0.enable_steady_tick(Duration::from_millis(120));
    }
    fn iteration(&self, iteration: u32, log_likelihood: f64) {
        self.0.set_message(format!(
            "iteration {iteration}, log-likelihood {log_likelihood:.6}"
        ));
    }
}

/// Run `ogive fit`.
pub fn run(args: FitArgs) -> anyhow::Result<ExitCode> {
    let decision = (args.threshold.is_some() || !args.band.is_empty()).then(|| DecisionSpec {
        threshold: args.threshold,
        bands: args.band.clone(),
    });
    let request = FitRequest {
        data: args.data,
        outcome: args.outcome,
        outcome_meaning: args.outcome_meaning,
        terms: args.terms,
        categorical: args.categorical,
        count: args.count,
        continuous: args.continuous,
        units: args.unit,
        link: args.link,
        covariance: match args.covariance {
            CovarianceFlag::Classical => CovarianceType::Classical,
            CovarianceFlag::Robust => CovarianceType::Robust,
        },
        intercept: !args.no_intercept,
        drop_missing: args.drop_missing,
        max_iterations: args.max_iterations,
        name: args.name,
        version: args.version,
        description: args.description,
        decision,
        fitted_at_unix: args.fitted_at,
    };
    let bar = Bar::new();
    let fitted = fit::fit(&request, &bar);
    bar.0.finish_and_clear();
    let fitted = fitted?;
    fit::write_model_file(&args.out, &fitted.file)?;
    print!("{}", fitted.report);
    println!(
        "wrote {} ({} {}, {} check cases)",
        args.out.display(),
        fitted.file.name,
        fitted.file.version,
        fitted.file.check_cases.len()
    );
    Ok(ExitCode::SUCCESS)
}
