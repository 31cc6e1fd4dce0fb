//! `ogive fit`: in progress (in progress).
use std::process::ExitCode;
/// Arguments of `ogive fit`.
#[derive(Debug, clap::Args)]
pub struct FitArgs {}
/// Run `ogive fit`.
pub fn run(_args: FitArgs) -> anyhow::Result<ExitCode> {
    anyhow::bail!("`ogive fit` is not built yet")
}
