//! `ogive serve`: in progress (issue 4).
use std::process::ExitCode;
/// Arguments of `ogive serve`.
#[derive(Debug, clap::Args)]
pub struct ServeArgs {}
/// Run `ogive serve`.
pub fn run(_args: ServeArgs) -> anyhow::Result<ExitCode> {
    anyhow::bail!("`ogive serve` is not built yet")
}
