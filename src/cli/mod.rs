//! The subcommands of the `ogive` binary, one file each. Each file holds its clap arguments and
//! a `run` function that wires the library together; the logic lives in the library modules so
//! that tests can reach it.

use std::process::ExitCode;

use clap::{Parser, Subcommand};

pub mod check;
pub mod describe;
pub mod evaluate;
pub mod fit;
pub mod lifecycle;
pub mod like;
pub mod score;
pub mod serve;

/// Fit, check and serve binary-outcome regression models (logit, probit, cloglog, cauchit).
#[derive(Debug, Parser)]
#[command(name = "ogive", version, about, long_about = None)]
pub struct Cli {
    /// The subcommand.
    #[command(subcommand)]
    pub command: Command,
}

/// The subcommands.
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
}

/// Set up `tracing`: JSON lines for `serve`, compact text on stderr otherwise; level from
/// `RUST_LOG` (default `info` for `serve`, `warn` for the other commands).
pub fn init_logging(cli: &Cli) {
    use tracing_subscriber::EnvFilter;
    let serving = matches!(cli.command, Command::Serve(_));
    let filter = EnvFilter::try_from_default_env()
        .unwrap_or_else(|_| EnvFilter::new(if serving { "info" } else { "warn" }));
    let builder = tracing_subscriber::fmt()
        .with_env_filter(filter)
        .with_writer(std::io::stderr);
    let _ = if serving {
        builder
            .json()
            .flatten_event(true)
            .with_current_span(false)
            .try_init()
    } else {
        builder.compact().without_time().try_init()
    };
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
    }
}
