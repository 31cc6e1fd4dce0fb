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
/// `serve` writes its lines through `service::access_log`: every thread appends whole lines to
/// one buffer that a background thread writes out, gathering lines for at most a couple of
/// milliseconds, so a request never waits for stderr and a busy server writes many lines per
/// system call; request lines are written there by hand, without the logging crate's dispatch.
/// Nothing is dropped: when 8 MiB wait unwritten, an appending thread waits for the writer.
/// Keep the returned guard alive until the end of `main`: dropping it writes what is waiting.
/// A process killed outright (SIGKILL) can lose the lines of its last moments.
pub fn init_logging(cli: &Cli) -> Option<crate::service::access_log::LogGuard> {
    use crate::service::access_log::{self, LogSink, REQUEST_TARGET};
    use tracing_subscriber::EnvFilter;
    let serving = matches!(cli.command, Command::Serve(_));
    let filter = EnvFilter::try_from_default_env()
        .unwrap_or_else(|_| EnvFilter::new(if serving { "info" } else { "warn" }));
    let builder = tracing_subscriber::fmt().with_env_filter(filter);
    if serving {
        let Ok((sink, guard)) = LogSink::start(std::io::stderr(), "ogive-log") else {
            let _ = builder
                .with_writer(std::io::stderr)
                .event_format(log_line::JsonLines)
                .try_init();
            return None;
        };
        if builder
            .with_writer(sink.clone())
            .event_format(log_line::JsonLines)
            .try_init()
            .is_ok()
        {
            let requests = tracing::enabled!(target: REQUEST_TARGET, tracing::Level::INFO);
            access_log::install(sink, requests);
        }
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
