//! `ogive evaluate`: how well a model's probabilities match the outcomes in a labelled CSV
//! file, alone or beside a second model scored on the same rows. The reading and the figures
//! are [`crate::evaluate`]; this file finds the model files, hashes the data as it streams,
//! draws the progress bar and prints the report.

use std::fs::File;
use std::io::{self, Read};
use std::path::{Path, PathBuf};
use std::process::ExitCode;

use anyhow::{bail, Context};
use sha2::{Digest, Sha256};

use crate::batch::{self, ErrorPolicy};
use crate::evaluate::report::{self, DataSection, EvaluationReport, ModelSection, WarningShares};
use crate::evaluate::{self as figures, plots, read_labelled, ModelRows, Names, ReadOptions};
use crate::model::Model;
use crate::registry::store::ModelDir;
use crate::timestamp::rfc3339_millis;

use super::describe::Format;
use super::score::{progress_bar, OnError};

/// Arguments of `ogive evaluate`.
#[derive(Debug, clap::Args)]
pub struct EvaluateArgs {
    /// The labelled CSV file: a header row naming the covariates and the outcome column; `-`
    /// reads standard input (the report then names the data `-`, with its SHA-256 as read).
    #[arg(long, env = "OGIVE_DATA", value_name = "CSV")]
    pub data: PathBuf,
    /// The outcome column (0 or 1, also false/true).
    #[arg(long, env = "OGIVE_OUTCOME", value_name = "COL")]
    pub outcome: String,
    /// The model file to evaluate.
    #[arg(
        long,
        env = "OGIVE_MODEL",
        value_name = "FILE",
        conflicts_with = "name",
        required_unless_present = "name"
    )]
    pub model: Option<PathBuf>,
    /// A model directory (as `ogive serve` reads): with --name, evaluate a stored version;
    /// with --against-live, compare with the live version.
    #[arg(long, env = "OGIVE_MODELS", value_name = "DIR")]
    pub models: Option<PathBuf>,
    /// The model to evaluate from --models (its live version unless --version is given).
    #[arg(long, env = "OGIVE_NAME", value_name = "NAME", requires = "models")]
    pub name: Option<String>,
    /// The stored version to evaluate (with --name).
    #[arg(long, env = "OGIVE_VERSION", value_name = "V", requires = "name")]
    pub version: Option<String>,
    /// Compare with this model file, scored on the same rows.
    #[arg(
        long,
        env = "OGIVE_AGAINST",
        value_name = "FILE",
        conflicts_with = "against_live"
    )]
    pub against: Option<PathBuf>,
    /// Compare with the live version of the same model in --models.
    #[arg(long, env = "OGIVE_AGAINST_LIVE", requires = "models")]
    pub against_live: bool,
    /// Write the reliability diagram and the ROC curve as SVG into this folder (created if
    /// needed): reliability.svg and roc.svg, with both models when there are two.
    #[arg(long, env = "OGIVE_PLOTS", value_name = "DIR")]
    pub plots: Option<PathBuf>,
    /// The report's format (`json` is the evidence `ogive promote --evidence` takes).
    #[arg(long, env = "OGIVE_FORMAT", value_enum, default_value_t = Format::Text)]
    pub format: Format,
    /// What to do with a row that cannot be evaluated: stop with its row number, or skip it
    /// (for every model) and count it by reason.
    #[arg(long, env = "OGIVE_ON_ERROR", value_enum, default_value_t = OnError::Stop)]
    pub on_error: OnError,
    /// The level of every interval in the report.
    #[arg(long, env = "OGIVE_LEVEL", value_name = "L", default_value_t = 0.95)]
    pub level: f64,
    /// Worker threads that parse and score rows (default: one per core). The figures are the
    /// same, bit for bit, whatever the number.
    #[arg(long, env = "OGIVE_THREADS", value_name = "N",
          value_parser = clap::value_parser!(u64).range(1..))]
    pub threads: Option<u64>,
}

/// A model and the file it came from.
pub(crate) struct Loaded {
    model: Model,
    file: String,
    sha256: String,
}

fn hex(digest: &[u8]) -> String {
    digest.iter().map(|b| format!("{b:02x}")).collect()
}

fn load_file(path: &Path) -> anyhow::Result<Loaded> {
    let bytes = std::fs::read(path)
        .with_context(|| format!("cannot read model file {}", path.display()))?;
    let model = Model::from_json(&bytes)
        .with_context(|| format!("model file {} is not valid", path.display()))?;
    Ok(Loaded {
        model,
        file: path.display().to_string(),
        sha256: hex(&Sha256::digest(&bytes)),
    })
}

/// Version `version` of `name` in the model directory `root`, or its live version.
fn load_stored(root: &Path, name: &str, version: Option<&str>) -> anyhow::Result<Loaded> {
    let dir = ModelDir::new(root, name)?;
    if !dir.exists() {
        bail!("there is no model '{name}' in {}", root.display());
    }
    let version = match version {
        Some(v) => v.to_string(),
        None => dir.read_live()?.with_context(|| {
            format!(
                "model '{name}' in {} has no live version; name one with --version",
                root.display()
            )
        })?,
    };
    let path = dir.version_path(&version)?;
    if !path.is_file() {
        bail!(
            "model '{name}' has no stored version '{version}' ({} is missing)",
            path.display()
        );
    }
    let loaded = load_file(&path)?;
    if loaded.model.name() != name || loaded.model.version() != version {
        bail!(
            "{} holds model {} {}, not {name} {version}",
            path.display(),
            loaded.model.name(),
            loaded.model.version()
        );
    }
    Ok(loaded)
}

fn load_models(args: &EvaluateArgs) -> anyhow::Result<(Loaded, Option<Loaded>)> {
    let first = match (&args.model, &args.name, &args.models) {
        (Some(path), _, _) => load_file(path)?,
        (None, Some(name), Some(root)) => load_stored(root, name, args.version.as_deref())?,
        _ => bail!("name the model to evaluate with --model FILE or --models DIR --name NAME"),
    };
    let second = if let Some(path) = &args.against {
        Some(load_file(path)?)
    } else if args.against_live {
        let root = args
            .models
            .as_deref()
            .context("--against-live needs --models DIR")?;
        let live = load_stored(root, first.model.name(), None)?;
        if live.model.version() == first.model.version() {
            bail!(
                "{} {} is itself the live version; evaluate a candidate against it, or drop \
                 --against-live",
                first.model.name(),
                first.model.version()
            );
        }
        Some(live)
    } else {
        None
    };
    Ok((first, second))
}

/// A reader that hashes and counts what passes through it.
struct Hashing<R> {
    inner: R,
    hasher: Sha256,
    bytes: u64,
}

impl<R: Read> Read for Hashing<R> {
    fn read(&mut self, buf: &mut [u8]) -> io::Result<usize> {
        let n = self.inner.read(buf)?;
        self.hasher.update(&buf[..n]);
        self.bytes += n as u64;
        Ok(n)
    }
}

/// Run `ogive evaluate`.
pub fn run(args: EvaluateArgs) -> anyhow::Result<ExitCode> {
    figures::quantile_for(args.level)?;
    let (first, second) = load_models(&args)?;
    let reading = ReadOptions {
        on_error: match args.on_error {
            OnError::Stop => ErrorPolicy::Stop,
            OnError::Skip => ErrorPolicy::Skip,
        },
        threads: args
            .threads
            .map_or_else(batch::default_threads, |n| n as usize),
    };
    let models: Vec<Loaded> = std::iter::once(first).chain(second).collect();
    let (mut built, rows) = evaluate_data(&models, &args.data, &args.outcome, reading, args.level)?;
    if let Some(folder) = &args.plots {
        let written = plots::write_plots(folder, &built, &rows)?;
        built.plots = written.iter().map(|p| p.display().to_string()).collect();
    }
    match args.format {
        Format::Text => print!("{}", report::render_text(&built)),
        Format::Json => println!(
            "{}",
            serde_json::to_string_pretty(&built).context("cannot write the JSON report")?
        ),
    }
    Ok(ExitCode::SUCCESS)
}

/// The model file at `path`, with its SHA-256, for [`evaluate_data`].
pub(crate) fn loaded_from(path: &Path) -> anyhow::Result<Loaded> {
    load_file(path)
}

/// Evaluate one or two models on the labelled file `data`: the one pass over the rows, every
/// figure, the report, and the rows kept for the plots. `ogive describe --data` calls this too.
pub(crate) fn evaluate_data(
    models: &[Loaded],
    data: &Path,
    outcome: &str,
    reading: ReadOptions,
    level: f64,
) -> anyhow::Result<(EvaluationReport, Vec<ModelRows>)> {
    let from_stdin = data.as_os_str() == "-";
    let shown = if from_stdin {
        "standard input".to_string()
    } else {
        data.display().to_string()
    };
    let (source, length): (Box<dyn Read>, Option<u64>) = if from_stdin {
        (Box::new(io::stdin().lock()), None)
    } else {
        let file = File::open(data).with_context(|| format!("cannot open {shown}"))?;
        let length = file.metadata().ok().map(|m| m.len());
        (Box::new(file), length)
    };
    let mut input = Hashing {
        inner: source,
        hasher: Sha256::new(),
        bytes: 0,
    };
    let bar = progress_bar(length);
    let mut on_progress = |bytes: u64| {
        if let Some(bar) = &bar {
            bar.set_position(bytes);
        }
    };
    let scored: Vec<&Model> = models.iter().map(|m| &m.model).collect();
    let labelled = read_labelled(&scored, &mut input, outcome, reading, &mut on_progress)
        .with_context(|| format!("evaluating on {shown} stopped"))?;
    // Hash whatever the reader left unread (nothing, when it read to the end).
    io::copy(&mut input, &mut io::sink()).with_context(|| format!("cannot read {shown}"))?;
    if let Some(bar) = bar {
        bar.finish_and_clear();
    }

    let summary = &labelled.summary;
    let mut sections = Vec::new();
    let evaluations = figures::evaluate_each(&labelled.rows, level, reading.threads);
    for (index, (loaded, evaluation)) in models.iter().zip(evaluations).enumerate() {
        let evaluation = evaluation.with_context(|| {
            format!(
                "cannot evaluate {} {} on {}",
                loaded.model.name(),
                loaded.model.version(),
                shown
            )
        })?;
        sections.push(ModelSection {
            role: if index == 0 { "evaluated" } else { "against" },
            name: loaded.model.name().to_string(),
            version: loaded.model.version().to_string(),
            link: loaded.model.link.name().to_string(),
            file: loaded.file.clone(),
            sha256: loaded.sha256.clone(),
            warnings: WarningShares::of(&loaded.model, &summary.warnings[index]),
            figures: evaluation,
        });
    }
    let comparison = match (models.get(1), &labelled.paired) {
        (Some(other), Some(paired)) => {
            let first_name = format!("{} {}", models[0].model.name(), models[0].model.version());
            let second_name = format!("{} {}", other.model.name(), other.model.version());
            let names = Names {
                first: &first_name,
                second: &second_name,
            };
            Some(figures::compare(
                &labelled.rows[0],
                &labelled.rows[1],
                paired,
                level,
                names,
            )?)
        }
        _ => None,
    };

    let built = EvaluationReport {
        report: report::REPORT_KIND,
        format_version: report::REPORT_FORMAT_VERSION,
        created: rfc3339_millis(std::time::SystemTime::now()),
        level,
        data: DataSection {
            path: data.display().to_string(),
            sha256: hex(&input.hasher.finalize()),
            bytes: input.bytes,
            outcome: outcome.to_string(),
            rows_read: summary.rows_read,
            rows_evaluated: summary.rows_evaluated,
            rows_skipped: summary.rows_skipped,
            skipped_by_reason: summary.skipped_by_reason.clone(),
            skipped_examples: summary
                .skipped_examples
                .iter()
                .map(|e| e.to_string())
                .collect(),
        },
        models: sections,
        comparison,
        plots: Vec::new(),
        notes: report::notes(),
        cautions: report::cautions(),
    };
    Ok((built, labelled.rows))
}
