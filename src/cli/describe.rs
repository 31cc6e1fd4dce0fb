//! `ogive describe`: in progress (in progress).
use std::process::ExitCode;
/// Arguments of `ogive describe`.
#[derive(Debug, clap::Args)]
pub struct DescribeArgs {}
/// Run `ogive describe`.
pub fn run(_args: DescribeArgs) -> anyhow::Result<ExitCode> {
    anyhow::bail!("`ogive describe` is not built yet")
}
