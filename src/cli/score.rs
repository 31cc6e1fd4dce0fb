//! `ogive score`: in progress (in progress).
use std::process::ExitCode;
/// Arguments of `ogive score`.
#[derive(Debug, clap::Args)]
pub struct ScoreArgs {}
/// Run `ogive score`.
pub fn run(_args: ScoreArgs) -> anyhow::Result<ExitCode> {
    anyhow::bail!("`ogive score` is not built yet")
}
