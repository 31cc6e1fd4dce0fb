//! `ogive fit`: read a CSV, fit by maximum likelihood, print the summary, write the model file.
//! The work is [`crate::fit::fit`]; this file holds the flags and the progress bar.

use std::io::IsTerminal;
use std::path::{Path, PathBuf};
use std::process::ExitCode;
use std::time::Duration;

use indicatif::{ProgressBar, ProgressStyle};

use crate::fit::{
    self, CategoricalSpec, CovarianceType, FitRequest, PopulationMethod, PopulationRate, Progress,
    WeightColumn, WeightKind,
};
use crate::link::Link;
use crate::model::file::{Band, DecisionSpec};
use crate::registry::store::VERSIONS_DIR;

use super::like::Template;

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
    /// Take the terms, covariate kinds, units, reference levels, outcome, name, link,
    /// threshold, bands and description from this model file (a refit that keeps its contract
    /// with callers); the flags given beside it override what it says.
    #[arg(long, env = "OGIVE_LIKE", value_name = "MODEL_FILE")]
    pub like: Option<PathBuf>,
    /// The outcome column (0/1, or false/true). Required unless --like gives it.
    #[arg(long, env = "OGIVE_OUTCOME", value_name = "COL")]
    pub outcome: Option<String>,
    /// What outcome = 1 means, in a sentence (stored in the model file). Without it (and
    /// without --like) the file says only that the meaning was not stated.
    #[arg(long, env = "OGIVE_OUTCOME_MEANING", value_name = "TEXT")]
    pub outcome_meaning: Option<String>,
    /// The terms, comma-separated, each exactly one term: name, name^k, log(name), a*b,
    /// name=level. A bare categorical expands into its non-reference level indicators; in a
    /// product, into one product per non-reference level. Required unless --like gives them.
    #[arg(long, env = "OGIVE_TERMS", value_name = "LIST")]
    pub terms: Option<String>,
    /// A categorical covariate, optionally with its reference level (default: the first level in
    /// sorted order). Repeat for several, or separate them with commas (as OGIVE_CATEGORICAL
    /// does).
    #[arg(
        long,
        env = "OGIVE_CATEGORICAL",
        value_name = "COL[=REF]",
        value_delimiter = ','
    )]
    pub categorical: Vec<CategoricalSpec>,
    /// Treat this numeric column as a count (whole numbers ≥ 0). Repeatable, or comma-separated.
    #[arg(long, env = "OGIVE_COUNT", value_name = "COL", value_delimiter = ',')]
    pub count: Vec<String>,
    /// Treat this numeric column as continuous. Repeatable, or comma-separated.
    #[arg(
        long,
        env = "OGIVE_CONTINUOUS",
        value_name = "COL",
        value_delimiter = ','
    )]
    pub continuous: Vec<String>,
    /// The unit of a covariate, stored in the model file (e.g. years_trading=years).
    /// Repeatable, or comma-separated.
    #[arg(long, env = "OGIVE_UNIT", value_name = "COL=UNIT", value_parser = parse_pair,
          value_delimiter = ',')]
    pub unit: Vec<(String, String)>,
    /// The link [default: logit, or the --like file's].
    #[arg(long, env = "OGIVE_LINK")]
    pub link: Option<Link>,
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
    /// The model's name (lower-case letters, digits and '-'). Required unless --like gives it.
    #[arg(long, env = "OGIVE_NAME")]
    pub name: Option<String>,
    /// The version label to write into the model file (letters, digits, '.', '_' and '-',
    /// starting with a letter or digit, at most 64).
    #[arg(long, env = "OGIVE_VERSION")]
    pub version: String,
    /// What the model is for, in a sentence or two.
    #[arg(long, env = "OGIVE_DESCRIPTION")]
    pub description: Option<String>,
    /// A decision threshold: probabilities at or above it are flagged.
    #[arg(long, env = "OGIVE_THRESHOLD", value_name = "P")]
    pub threshold: Option<f64>,
    /// A named probability band with its exclusive upper bound, in increasing order; the last
    /// must be 1 (e.g. --band low=0.05 --band medium=0.2 --band high=1, or
    /// OGIVE_BAND=low=0.05,medium=0.2,high=1).
    #[arg(long, env = "OGIVE_BAND", value_name = "NAME=BELOW", value_parser = parse_band,
          value_delimiter = ',')]
    pub band: Vec<Band>,
    /// Announce a covariate of this version that the live version lacks, so that callers may
    /// start sending it before this version goes live (the live version accepts and ignores
    /// it, and says so). Repeatable, or comma-separated; never taken from --like.
    #[arg(
        long,
        env = "OGIVE_ANNOUNCE",
        value_name = "COL",
        value_delimiter = ','
    )]
    pub announce: Vec<String>,
    /// Where to write the model file (written atomically). An existing file is not replaced
    /// unless --force is given, and a version file inside a model directory
    /// (NAME/versions/VERSION.json) never is: a stored version does not change.
    #[arg(long, env = "OGIVE_OUT", value_name = "FILE")]
    pub out: PathBuf,
    /// Replace the file --out names if it exists (never a stored version file). Deliberately
    /// not readable from the environment: it is a decision about one file.
    #[arg(long)]
    pub force: bool,
    /// Record this time (seconds since the Unix epoch) as the fit time instead of now, for
    /// reproducible files.
    #[arg(long, env = "SOURCE_DATE_EPOCH", value_name = "SECONDS")]
    pub fitted_at: Option<u64>,
    /// Threads for reading the CSV and for every pass over the data (default: one per core).
    /// The fitted file is the same, bit for bit, whatever the number.
    #[arg(long, env = "OGIVE_THREADS", value_name = "N",
          value_parser = clap::value_parser!(u64).range(1..))]
    pub threads: Option<u64>,
    /// A column of frequency weights (finite numbers ≥ 0): a row of weight v counts as v
    /// identical observations. Never a covariate.
    #[arg(
        long,
        env = "OGIVE_WEIGHTS",
        value_name = "COL",
        conflicts_with = "sampling_weights"
    )]
    pub weights: Option<String>,
    /// A column of sampling weights (finite numbers ≥ 0, the inverse of each row's selection
    /// probability); the covariance is then the HC0 sandwich.
    #[arg(long, env = "OGIVE_SAMPLING_WEIGHTS", value_name = "COL")]
    pub sampling_weights: Option<String>,
    /// The outcome's share in the population when the data were drawn by outcome (for
    /// example every case and a sample of non-cases): the model then gives probabilities at
    /// the population's rate.
    #[arg(long, env = "OGIVE_POPULATION_RATE", value_name = "P")]
    pub population_rate: Option<f64>,
    /// How --population-rate is used: correct the logit intercept (the default for logit), or
    /// weight ones and zeros to their population shares (the default, and the only way, for
    /// the other links).
    #[arg(
        long,
        env = "OGIVE_POPULATION_METHOD",
        value_enum,
        requires = "population_rate"
    )]
    pub population_method: Option<PopulationMethodFlag>,
}

/// The `--population-method` choices.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum PopulationMethodFlag {
    /// Subtract ln[((1 − τ)/τ)·(ȳ/(1 − ȳ))] from the logit intercept.
    Intercept,
    /// Weight ones by τ/ȳ and zeros by (1 − τ)/(1 − ȳ), with the sandwich covariance.
    Weights,
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

/// The fit request of the command line, completed from the --like file if there is one.
fn request_of(args: &FitArgs) -> anyhow::Result<FitRequest> {
    let mut like = args.like.as_deref().map(Template::read).transpose()?;
    if let (Some(template), Some(terms)) = (like.as_mut(), &args.terms) {
        template.restrict_to(terms);
    }
    let from_like = |what: &str| {
        anyhow::anyhow!("--{what} is required (or take it from a model file with --like FILE)")
    };
    let terms = match (&args.terms, &like) {
        (Some(terms), _) => terms.clone(),
        (None, Some(template)) => template.terms.clone(),
        (None, None) => return Err(from_like("terms")),
    };
    let intercept =
        !args.no_intercept && (args.terms.is_some() || like.as_ref().is_none_or(|t| t.intercept));
    let outcome = args
        .outcome
        .clone()
        .or_else(|| like.as_ref().map(|t| t.outcome.clone()))
        .ok_or_else(|| from_like("outcome"))?;
    let name = args
        .name
        .clone()
        .or_else(|| like.as_ref().map(|t| t.name.clone()))
        .ok_or_else(|| from_like("name"))?;
    // A column's kind or unit on the command line replaces the file's for that column.
    let kind_given = |c: &str| {
        args.categorical.iter().any(|s| s.column == c)
            || args.count.iter().any(|n| n == c)
            || args.continuous.iter().any(|n| n == c)
    };
    let mut categorical = Vec::new();
    let mut count = Vec::new();
    let mut continuous = Vec::new();
    let mut units = Vec::new();
    if let Some(template) = &like {
        categorical.extend(
            template
                .categorical
                .iter()
                .filter(|s| !kind_given(&s.column))
                .cloned(),
        );
        count.extend(template.count.iter().filter(|c| !kind_given(c)).cloned());
        continuous.extend(
            template
                .continuous
                .iter()
                .filter(|c| !kind_given(c))
                .cloned(),
        );
        units.extend(
            template
                .units
                .iter()
                .filter(|(c, _)| !args.unit.iter().any(|(given, _)| given == c))
                .cloned(),
        );
    }
    categorical.extend(args.categorical.iter().cloned());
    count.extend(args.count.iter().cloned());
    continuous.extend(args.continuous.iter().cloned());
    units.extend(args.unit.iter().cloned());
    let threshold = args
        .threshold
        .or_else(|| like.as_ref().and_then(|t| t.threshold));
    let bands = if args.band.is_empty() {
        like.as_ref().map(|t| t.bands.clone()).unwrap_or_default()
    } else {
        args.band.clone()
    };
    let decision =
        (threshold.is_some() || !bands.is_empty()).then_some(DecisionSpec { threshold, bands });
    let outcome_meaning = args
        .outcome_meaning
        .clone()
        .or_else(|| like.as_ref().map(|t| t.outcome_meaning.clone()))
        .unwrap_or_else(|| unstated_meaning(&outcome));
    Ok(FitRequest {
        data: args.data.clone(),
        outcome,
        outcome_meaning: Some(outcome_meaning),
        terms,
        categorical,
        count,
        continuous,
        units,
        link: args
            .link
            .or_else(|| like.as_ref().map(|t| t.link))
            .unwrap_or(Link::Logit),
        covariance: match args.covariance {
            CovarianceFlag::Classical => CovarianceType::Classical,
            CovarianceFlag::Robust => CovarianceType::Robust,
        },
        intercept,
        drop_missing: args.drop_missing,
        max_iterations: args.max_iterations,
        name,
        version: args.version.clone(),
        description: args
            .description
            .clone()
            .or_else(|| like.as_ref().map(|t| t.description.clone()))
            .unwrap_or_default(),
        decision,
        fitted_at_unix: args.fitted_at,
        threads: args.threads.map(|n| n as usize),
        weights: match (&args.weights, &args.sampling_weights) {
            (Some(column), _) => Some(WeightColumn {
                column: column.clone(),
                kind: WeightKind::Frequency,
            }),
            (None, Some(column)) => Some(WeightColumn {
                column: column.clone(),
                kind: WeightKind::Sampling,
            }),
            (None, None) => None,
        },
        population: args.population_rate.map(|rate| PopulationRate {
            rate,
            method: args.population_method.map(|m| match m {
                PopulationMethodFlag::Intercept => PopulationMethod::Intercept,
                PopulationMethodFlag::Weights => PopulationMethod::Weights,
            }),
        }),
        announces: args.announce.clone(),
    })
}

/// What the model file says of the outcome when nobody said what it means: only what is known.
fn unstated_meaning(outcome: &str) -> String {
    format!("'{outcome}' is 1 (what that means was not stated when the model was fitted)")
}

/// Whether `path` is a version file of a model directory: `NAME/versions/FILE` where NAME is a
/// model name.
fn is_stored_version(path: &Path) -> bool {
    let absolute = std::path::absolute(path).unwrap_or_else(|_| path.to_path_buf());
    let mut parents = absolute.ancestors().skip(1);
    let versions = parents.next().and_then(Path::file_name);
    let model = parents.next().and_then(Path::file_name);
    versions.is_some_and(|v| v == VERSIONS_DIR)
        && model
            .and_then(|m| m.to_str())
            .is_some_and(crate::model::is_model_name)
}

/// Refuse to write over an existing `out`: always for a stored version file, else without
/// `force`. Checked before the fit (so a long fit is not wasted) and again before writing.
fn check_out(out: &Path, force: bool) -> anyhow::Result<()> {
    if !out.exists() {
        return Ok(());
    }
    if is_stored_version(out) {
        anyhow::bail!(
            "--out {} is a stored version file of a model directory, and a stored version never \
             changes: write the new fit elsewhere with a new --version and upload it",
            out.display()
        );
    }
    if !force {
        anyhow::bail!(
            "--out {} already exists; choose another file, or add --force to replace it",
            out.display()
        );
    }
    Ok(())
}

/// Run `ogive fit`.
pub fn run(args: FitArgs) -> anyhow::Result<ExitCode> {
    check_out(&args.out, args.force)?;
    let request = request_of(&args)?;
    let bar = Bar::new();
    let fitted = fit::fit(&request, &bar);
    bar.0.finish_and_clear();
    let fitted = fitted?;
    check_out(&args.out, args.force)?;
    fit::write_model_file(&args.out, &fitted.file)?;
    print!("{}", fitted.report);
    if args.outcome_meaning.is_none() && args.like.is_none() {
        println!(
            "note: no --outcome-meaning, so the model file says only: {}",
            fitted.file.outcome.meaning
        );
    }
    println!(
        "wrote {} ({} {}, {} check cases)",
        args.out.display(),
        fitted.file.name,
        fitted.file.version,
        fitted.file.check_cases.len()
    );
    Ok(ExitCode::SUCCESS)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn only_files_in_a_model_directorys_versions_folder_are_stored_versions() {
        assert!(is_stored_version(Path::new(
            "/srv/models/lease-arrears/versions/1.0.0.json"
        )));
        assert!(is_stored_version(Path::new("m/versions/v1.json")));
        assert!(!is_stored_version(Path::new("/tmp/versions.json")));
        assert!(!is_stored_version(Path::new(
            "/tmp/Not_A_Model/versions/v1.json"
        )));
        assert!(!is_stored_version(Path::new("candidate.json")));
    }
}
