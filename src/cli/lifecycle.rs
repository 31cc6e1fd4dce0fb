//! `ogive promote`, `ogive rollback`, `ogive history`: in progress (issue 5).
use std::process::ExitCode;
/// Arguments of `ogive promote`.
#[derive(Debug, clap::Args)]
pub struct PromoteArgs {}
/// Arguments of `ogive rollback`.
#[derive(Debug, clap::Args)]
pub struct RollbackArgs {}
/// Arguments of `ogive history`.
#[derive(Debug, clap::Args)]
pub struct HistoryArgs {}
/// Run `ogive promote`.
pub fn promote(_args: PromoteArgs) -> anyhow::Result<ExitCode> {
    anyhow::bail!("`ogive promote` is not built yet")
}
/// Run `ogive rollback`.
pub fn rollback(_args: RollbackArgs) -> anyhow::Result<ExitCode> {
    anyhow::bail!("`ogive rollback` is not built yet")
}
/// Run `ogive history`.
pub fn history(_args: HistoryArgs) -> anyhow::Result<ExitCode> {
    anyhow::bail!("`ogive history` is not built yet")
}
