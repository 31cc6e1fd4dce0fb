//! The subcommands of the `ogive` binary, one file each. Each file holds its clap arguments and
//! a `run` function that wires the library together; the logic lives in the library modules so
//! that tests can reach it.

use std::process::ExitCode;

use clap::{Parser, Subcommand};

pub(crate) mod check;
pub(crate) mod describe;
pub(crate) mod evaluate;
pub(crate) mod fit;
pub(crate) mod lifecycle;
pub(crate) mod like;
pub(crate) mod log_line;
pub(crate) mod score;
pub(crate) mod serve;
pub(crate) mod shadow;

/// Fit, check and serve binary-outcome regression models (logit, probit, cloglog, cauchit).
#[derive(Debug, Parser)]
#[command(name = "ogive", version, about, long_about = None)]
pub struct Cli {
    /// What to do: the first word after `ogive`, with its own flags.
    #[command(subcommand)]
    pub command: Command,
}

/// Every subcommand of `ogive`, one file of `src/cli/` each.
#[derive(Debug, Subcommand)]
pub enum Command {
    /// Serve the models in a model directory over HTTP.
    Serve(serve::ServeArgs),
    /// Fit a model by maximum likelihood from a CSV file and write a model file.
    Fit(fit::FitArgs),
    /// Validate model files and print a summary of each; exit status 1 if any fails.
    Check(check::CheckArgs),
    /// Score a CSV file with a model, adding probabilities (and effects) as columns.
    Score(score::ScoreArgs),
    /// Print a reviewer's report on a model, optionally with plots.
    Describe(describe::DescribeArgs),
    /// Measure a model's discrimination and calibration on labelled rows, alone or against a
    /// second model on the same rows.
    Evaluate(evaluate::EvaluateArgs),
    /// Make a stored version the live version of a model.
    Promote(lifecycle::PromoteArgs),
    /// Return a model to the version that was live before the last promotion.
    Rollback(lifecycle::RollbackArgs),
    /// Print a model's promotion and rollback history.
    History(lifecycle::HistoryArgs),
    /// Score a stored version beside a model's live version on every replica, its answers only
    /// measured; or end that, or show what shadows.
    Shadow(shadow::ShadowArgs),
}

/// Set up `tracing`: JSON lines for `serve` (`cli::log_line`), compact text on stderr otherwise; level from
/// `RUST_LOG` (default `info` for `serve`, `warn` for the other commands).
///
/// `serve` writes its lines from a background thread through a buffer that is flushed whenever
/// no line is waiting, so a request never waits for stderr and a busy server writes many lines
/// per system call. Nothing is dropped: when the queue is full, the logging thread holds the
/// caller back. Keep the returned guard alive until the end of `main`: dropping it writes what is
/// queued. A process killed outright (SIGKILL) can lose the lines of its last moments.
pub fn init_logging(cli: &Cli) -> Option<tracing_appender::non_blocking::WorkerGuard> {
    use tracing_subscriber::EnvFilter;
    let serving = matches!(cli.command, Command::Serve(_));
    let filter = EnvFilter::try_from_default_env()
        .unwrap_or_else(|_| EnvFilter::new(if serving { "info" } else { "warn" }));
    let builder = tracing_subscriber::fmt().with_env_filter(filter);
    if serving {
        let (writer, guard) = tracing_appender::non_blocking::NonBlockingBuilder::default()
            .lossy(false)
            .thread_name("ogive-log")
            .finish(std::io::BufWriter::new(std::io::stderr()));
        let _ = builder
            .with_writer(writer)
            .event_format(log_line::JsonLines)
            .try_init();
        Some(guard)
    } else {
        let _ = builder
            .with_writer(std::io::stderr)
            .compact()
            .without_time()
            .try_init();
        None
    }
}

/// Run a parsed command line.
pub fn run(cli: Cli) -> anyhow::Result<ExitCode> {
    match cli.command {
        Command::Serve(args) => serve::run(args),
        Command::Fit(args) => fit::run(args),
        Command::Check(args) => check::run(args),
        Command::Score(args) => score::run(args),
        Command::Describe(args) => describe::run(args),
        Command::Evaluate(args) => evaluate::run(args),
        Command::Promote(args) => lifecycle::promote(args),
        Command::Rollback(args) => lifecycle::rollback(args),
        Command::History(args) => lifecycle::history(args),
        Command::Shadow(args) => shadow::run(args),
    }
}
