//! `ogive score`: stream a CSV file through a model and write it back with probabilities,
//! intervals, warnings and (optionally) decision bands, effects and contributions added. The work is [`crate::batch::score_csv`];
//! this file opens the files, draws the progress bar and prints the end-of-run summary.

use std::fs::File;
use std::io::{self, IsTerminal, Read, Write};
use std::path::{Path, PathBuf};
use std::process::ExitCode;

use anyhow::Context;

use crate::batch::{self, BadRowPolicy, PendingFile, ScoreOptions, Shard, Summary};
use crate::model::Model;

/// Arguments of `ogive score`.
#[derive(Debug, clap::Args)]
pub struct ScoreArgs {
    /// The model file to score with.
    #[arg(long, env = "OGIVE_MODEL", value_name = "FILE")]
    pub model: PathBuf,
    /// The CSV file to score, with a header row naming the covariates (other columns are
    /// passed through); `-` reads standard input.
    #[arg(long, env = "OGIVE_DATA", value_name = "CSV")]
    pub data: PathBuf,
    /// Where to write the scored CSV; `-` writes standard output. A file appears only once
    /// the run has finished.
    #[arg(long, env = "OGIVE_OUT", value_name = "CSV")]
    pub out: PathBuf,
    /// Add each covariate's marginal effect and its standard error as columns.
    #[arg(long, env = "OGIVE_EFFECTS")]
    pub effects: bool,
    /// Add each covariate's contribution to the index (how far it moves the index from the
    /// training-mean profile) as a column contribution_NAME.
    #[arg(long, env = "OGIVE_CONTRIBUTIONS")]
    pub contributions: bool,
    /// Add the model's decision columns: band (the band the probability falls in) when the
    /// model names bands, above_threshold (true or false) when it has a threshold.
    #[arg(long, env = "OGIVE_DECISION")]
    pub decision: bool,
    /// The level of the probability interval.
    #[arg(long, env = "OGIVE_LEVEL", value_name = "L", default_value_t = 0.95)]
    pub level: f64,
    /// What to do with a row that cannot be scored: stop with its row number; skip it and
    /// report the skipped rows at the end; or keep it in the output with empty added cells
    /// and what is wrong in an added error column.
    #[arg(long, env = "OGIVE_ON_ERROR", value_enum, default_value_t = ScoreOnError::Stop)]
    pub on_error: ScoreOnError,
    /// Score only shard I of N: the rows in blocks I, I+N, I+2N, … (blocks of --block-rows
    /// rows, counted from 0), so that N machines can split one file. Every shard's output has
    /// the header.
    #[arg(long, env = "OGIVE_SHARD", value_name = "I/N", default_value = "0/1")]
    pub shard: Shard,
    /// Rows per shard block.
    #[arg(long, env = "OGIVE_BLOCK_ROWS", value_name = "R", default_value_t = batch::DEFAULT_BLOCK_ROWS,
          value_parser = clap::value_parser!(u64).range(1..))]
    pub block_rows: u64,
    /// Worker threads that parse, score and format rows (default: one per core). The output is
    /// the same, byte for byte, whatever the number.
    #[arg(long, env = "OGIVE_THREADS", value_name = "N",
          value_parser = clap::value_parser!(u64).range(1..))]
    pub threads: Option<u64>,
}

/// The `--on-error` choices of `ogive evaluate`, which reads labelled rows and cannot keep a
/// row it cannot score.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum OnError {
    /// Stop at the first bad row.
    Stop,
    /// Skip bad rows, count them and go on.
    Skip,
}

/// The `--on-error` choices of `ogive score`, which can also keep a bad row in place.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum ScoreOnError {
    /// Stop at the first bad row.
    Stop,
    /// Skip bad rows, count them and go on.
    Skip,
    /// Keep bad rows, unscored, with what is wrong in an error column.
    Keep,
}

fn is_dash(path: &Path) -> bool {
    path.as_os_str() == "-"
}

/// How a path is named in messages: `standard input` / `standard output` for `-`.
fn shown(path: &Path, dash: &'static str) -> String {
    if is_dash(path) {
        dash.to_string()
    } else {
        path.display().to_string()
    }
}

/// Run `ogive score`.
pub fn run(args: ScoreArgs) -> anyhow::Result<ExitCode> {
    let bytes = std::fs::read(&args.model)
        .with_context(|| format!("cannot read model file {}", args.model.display()))?;
    let model = Model::from_json(&bytes)
        .with_context(|| format!("model file {} is not valid", args.model.display()))?;
    let options = ScoreOptions {
        effects: args.effects,
        contributions: args.contributions,
        decision: args.decision,
        level: args.level,
        on_error: match args.on_error {
            ScoreOnError::Stop => BadRowPolicy::Stop,
            ScoreOnError::Skip => BadRowPolicy::Skip,
            ScoreOnError::Keep => BadRowPolicy::Keep,
        },
        shard: args.shard,
        block_rows: args.block_rows,
        threads: args
            .threads
            .map_or_else(batch::default_threads, |n| n as usize),
        input_block_bytes: batch::DEFAULT_INPUT_BLOCK_BYTES,
    };
    if model.covariance.is_none() {
        eprintln!(
            "note: model {} {} has no coefficient covariance, so the interval and _se columns are empty",
            model.name(),
            model.version()
        );
    }

    let (input, input_bytes): (Box<dyn Read>, Option<u64>) = if is_dash(&args.data) {
        (Box::new(io::stdin().lock()), None)
    } else {
        let file = File::open(&args.data)
            .with_context(|| format!("cannot open {}", args.data.display()))?;
        let length = file.metadata().ok().map(|m| m.len());
        (Box::new(file), length)
    };
    let bar = progress_bar(input_bytes);
    let mut on_progress = |bytes: u64| {
        if let Some(bar) = &bar {
            bar.set_position(bytes);
        }
    };

    let summary = if is_dash(&args.out) {
        let mut stdout = io::stdout().lock();
        let summary = batch::score_csv(&model, input, &mut stdout, &options, &mut on_progress)
            .with_context(|| format!("scoring {} stopped", shown(&args.data, "standard input")))?;
        stdout.flush().context("cannot write standard output")?;
        summary
    } else {
        let mut pending = PendingFile::create(&args.out)
            .with_context(|| format!("cannot create {}", args.out.display()))?;
        let summary = batch::score_csv(&model, input, pending.file(), &options, &mut on_progress)
            .with_context(|| {
            format!(
                "scoring {} stopped; {} was not written",
                args.data.display(),
                args.out.display()
            )
        })?;
        pending
            .commit()
            .with_context(|| format!("cannot finish writing {}", args.out.display()))?;
        summary
    };
    if let Some(bar) = bar {
        bar.finish_and_clear();
    }
    eprint!("{}", summary_text(&model, &options, &summary));
    Ok(ExitCode::SUCCESS)
}

/// A progress bar on standard error, only when standard error is a terminal.
pub(crate) fn progress_bar(length: Option<u64>) -> Option<indicatif::ProgressBar> {
    if !io::stderr().is_terminal() {
        return None;
    }
    let bar = match length {
        Some(length) => {
            let bar = indicatif::ProgressBar::new(length);
            if let Ok(style) = indicatif::ProgressStyle::with_template(
                "{bar:40} {bytes}/{total_bytes} {bytes_per_sec} eta {eta}",
            ) {
                bar.set_style(style);
            }
            bar
        }
        None => {
            let bar = indicatif::ProgressBar::new_spinner();
            if let Ok(style) =
                indicatif::ProgressStyle::with_template("{spinner} {bytes} read {bytes_per_sec}")
            {
                bar.set_style(style);
            }
            bar
        }
    };
    Some(bar)
}

/// The end-of-run report printed on standard error.
fn summary_text(model: &Model, options: &ScoreOptions, summary: &Summary) -> String {
    use std::fmt::Write as _;
    let mut s = String::new();
    let shard = if options.shard == Shard::ALL {
        String::new()
    } else {
        format!(
            " ({} in shard {}, blocks of {} rows)",
            summary.rows_in_shard, options.shard, options.block_rows
        )
    };
    let (skipped, rows_word) = if options.on_error == BadRowPolicy::Keep {
        ("kept unscored with an error", "unscored rows")
    } else {
        ("skipped", "skipped rows")
    };
    let _ = writeln!(
        s,
        "scored {} of {} rows{shard}; {} {skipped}",
        summary.rows_scored, summary.rows_read, summary.rows_skipped
    );
    if summary.rows_skipped > 0 {
        let by: Vec<String> = summary
            .skipped_by_covariate
            .iter()
            .map(|(c, n)| format!("{c}: {n}"))
            .collect();
        let _ = writeln!(s, "{rows_word} by covariate at fault: {}", by.join(", "));
        let example = if options.on_error == BadRowPolicy::Keep {
            "unscored"
        } else {
            "skipped"
        };
        for e in &summary.skipped_examples {
            let _ = writeln!(s, "  {example} {e}");
        }
        if summary.rows_skipped > summary.skipped_examples.len() as u64 {
            let _ = writeln!(
                s,
                "  … and {} more",
                summary.rows_skipped - summary.skipped_examples.len() as u64
            );
        }
    }
    let tally = &summary.warnings;
    if tally.rows_with_warnings() > 0 {
        let _ = writeln!(
            s,
            "{} scored rows carry warnings (the model is extrapolating there):",
            tally.rows_with_warnings()
        );
        for counts in tally.out_of_range() {
            let c = &model.covariates[counts.covariate];
            let _ = writeln!(
                s,
                "  out_of_range:{}  {} below {}, {} above {}",
                c.name, counts.below, c.training_min, counts.above, c.training_max
            );
        }
        if tally.unusual_combination() > 0 {
            let _ = writeln!(s, "  unusual_combination  {}", tally.unusual_combination());
        }
    }
    s
}
