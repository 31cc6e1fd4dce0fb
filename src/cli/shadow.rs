//! `ogive shadow`: set, end or show a model's shadow on the model directory itself, through
//! [`crate::registry::lifecycle`] (which holds the rules and writes the history). Every serving
//! process sharing the directory follows the change within a second, as it follows a
//! promotion. The figures a shadow is measured by live in the serving processes (their admin
//! reports and the `ogive_shadow_*` series), so a shadowing ended here is recorded with its
//! thresholds but without figures.

use std::process::ExitCode;

use anyhow::Context;

use super::lifecycle::{record_line, Actor, Directory};
use crate::registry::gate;
use crate::registry::lifecycle::{self, ShadowMoved};
use crate::registry::shadow::threshold;

/// Arguments of `ogive shadow`: exactly one of `--version`, `--stop` and `--show`.
#[derive(Debug, clap::Args)]
#[command(group(
    clap::ArgGroup::new("what")
        .required(true)
        .args(["version", "stop", "show"])
))]
pub struct ShadowArgs {
    #[command(flatten)]
    directory: Directory,
    /// The model's name: its folder under the model directory.
    pub name: String,
    /// Score this stored version beside the live one (replacing any other shadow).
    #[arg(long, value_name = "VERSION")]
    pub version: Option<String>,
    /// End the shadowing: only the live version is scored.
    #[arg(long)]
    pub stop: bool,
    /// Print what shadows the model now and the history's shadow records.
    #[arg(long)]
    pub show: bool,
    #[command(flatten)]
    actor: Actor,
}

/// Run `ogive shadow`.
pub fn run(args: ShadowArgs) -> anyhow::Result<ExitCode> {
    let root = &args.directory.models;
    let (who, reason) = (args.actor.who(), args.actor.reason.as_deref());
    if let Some(version) = &args.version {
        let moved = lifecycle::set_shadow(root, &args.name, version, &who, reason, None)
            .with_context(|| format!("shadowing {} with version {version}", args.name))?;
        print_set(&moved);
    } else if args.stop {
        let moved = lifecycle::end_shadow(root, &args.name, &who, reason, None)
            .with_context(|| format!("ending the shadow of {}", args.name))?;
        println!(
            "{}: {} no longer shadows {}; the serving processes' figures of it stay in their ogive_shadow_* series",
            moved.name,
            moved.from.as_deref().unwrap_or("nothing"),
            moved.live
        );
    } else {
        let view = lifecycle::shadow_view(root, &args.name)
            .with_context(|| format!("reading the shadow of {}", args.name))?;
        let live = view.live.as_deref().unwrap_or("nothing");
        match &view.shadow {
            Some(shadow) => println!("{}: {shadow} shadows live {live}", view.name),
            None => println!("{}: nothing shadows live {live}", view.name),
        }
        for record in &view.records {
            println!("{}", record_line(record));
        }
    }
    Ok(ExitCode::SUCCESS)
}

fn print_set(moved: &ShadowMoved) {
    let Some(candidate) = &moved.shadow_model else {
        return;
    };
    if !moved.changed {
        println!(
            "{}: {} already shadows {}; nothing changed",
            moved.name,
            candidate.version(),
            moved.live
        );
        return;
    }
    match &moved.from {
        Some(from) => println!(
            "{}: {} now shadows {} (replacing {from})",
            moved.name,
            candidate.version(),
            moved.live
        ),
        None => println!(
            "{}: {} now shadows {}",
            moved.name,
            candidate.version(),
            moved.live
        ),
    }
    let (live_threshold, shadow_threshold) = (threshold(&moved.live_model), threshold(candidate));
    if live_threshold != shadow_threshold {
        println!(
            "the versions decide by different thresholds (live {live_threshold}, shadow {shadow_threshold}): a disagreement may come from the thresholds alone"
        );
    }
    let changes = gate::contract_changes(&moved.live_model, candidate);
    if !changes.is_empty() {
        println!("it differs from the live version's contract (its answers are only measured):");
        for change in &changes {
            println!("  - {change}");
        }
    }
}
