//! `ogive promote`, `ogive rollback` and `ogive history`: the model lifecycle on the model
//! directory itself, through [`crate::registry::lifecycle`] (which holds all the rules). A
//! serving process sharing the directory picks the change up within a second. (`ogive shadow`
//! is `shadow.rs`, with the same directory and actor flags.)

use std::path::PathBuf;
use std::process::ExitCode;

use anyhow::Context;

use crate::evaluate::evidence::Evidence;
use crate::registry::lifecycle::{self, HistoryView, Moved};
use crate::registry::shadow::ShadowNote;
use crate::registry::store::{Action, HistoryRecord};

/// Where the model directory is: shared by the lifecycle commands.
#[derive(Debug, clap::Args)]
pub struct Directory {
    /// The model directory: one folder per model, as `ogive serve --models` reads it.
    #[arg(
        long,
        env = "OGIVE_MODELS",
        value_name = "DIR",
        default_value = "model-files"
    )]
    pub models: PathBuf,
}

/// Who made a change, and why.
#[derive(Debug, clap::Args)]
pub struct Actor {
    /// Who is making the change, as recorded in the history (default `cli:` and the login
    /// name: `$USER`, else `$LOGNAME`, else the account of the process's user id in
    /// `/etc/passwd`, else `uid-N`).
    #[arg(long, env = "OGIVE_WHO", value_name = "LABEL")]
    pub who: Option<String>,
    /// Why, as recorded in the history.
    #[arg(long, value_name = "TEXT")]
    pub reason: Option<String>,
}

impl Actor {
    pub(crate) fn who(&self) -> String {
        self.who
            .clone()
            .unwrap_or_else(|| format!("cli:{}", login_name(|key| std::env::var(key).ok())))
    }
}

/// The name of the user running the command: `USER`, else `LOGNAME` (from `variable`), else
/// the `/etc/passwd` account of the process's user id, else `uid-N`; `unknown` only where the
/// user id itself cannot be read.
fn login_name(variable: impl Fn(&str) -> Option<String>) -> String {
    let from_environment = ["USER", "LOGNAME"]
        .into_iter()
        .filter_map(&variable)
        .find(|name| !name.trim().is_empty());
    if let Some(name) = from_environment {
        return name;
    }
    let Some(uid) = process_uid() else {
        return "unknown".into();
    };
    let passwd = std::fs::read_to_string("/etc/passwd").unwrap_or_default();
    account_of(&passwd, uid).unwrap_or_else(|| format!("uid-{uid}"))
}

/// The user id the process runs as: the owner of `/proc/self` (Linux), which is the
/// effective user id, read without a C binding.
fn process_uid() -> Option<u32> {
    use std::os::unix::fs::MetadataExt;
    std::fs::metadata("/proc/self").ok().map(|m| m.uid())
}

/// The account name `/etc/passwd` (`name:password:uid:…` per line) gives user id `uid`.
fn account_of(passwd: &str, uid: u32) -> Option<String> {
    passwd.lines().find_map(|line| {
        let mut fields = line.split(':');
        let name = fields.next()?;
        let id: u32 = fields.nth(1)?.parse().ok()?;
        (id == uid && !name.is_empty()).then(|| name.to_string())
    })
}

/// Arguments of `ogive promote`.
#[derive(Debug, clap::Args)]
pub struct PromoteArgs {
    #[command(flatten)]
    pub(crate) directory: Directory,
    /// The model's name: its folder under the model directory.
    pub name: String,
    /// The stored version to make live.
    pub version: String,
    /// Promote even if the covariates differ from the live version's (callers must change
    /// what they send). Deliberately not readable from the environment: it is a decision
    /// about one promotion.
    #[arg(long)]
    pub allow_breaking: bool,
    /// An evaluation report of this version (`ogive evaluate --format json`): refused unless it
    /// evaluated this very file; stored in NAME/evidence/ and named, with its SHA-256 and
    /// headline figures, in the history.
    #[arg(long, value_name = "REPORT")]
    pub evidence: Option<PathBuf>,
    #[command(flatten)]
    pub(crate) actor: Actor,
}

/// Arguments of `ogive rollback`.
#[derive(Debug, clap::Args)]
pub struct RollbackArgs {
    #[command(flatten)]
    pub(crate) directory: Directory,
    /// The model's name: its folder under the model directory.
    pub name: String,
    #[command(flatten)]
    pub(crate) actor: Actor,
}

/// How `ogive history` prints.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum HistoryFormat {
    /// One line per record, for people.
    Text,
    /// One JSON document: live version, rollback target, records and warnings.
    Json,
}

/// How long `ogive history` waits for the model's lock to complete an interrupted move.
const REPAIR_LOCK_WAIT: std::time::Duration = std::time::Duration::from_secs(5);

/// Arguments of `ogive history`.
#[derive(Debug, clap::Args)]
pub struct HistoryArgs {
    #[command(flatten)]
    pub(crate) directory: Directory,
    /// The model's name: its folder under the model directory.
    pub name: String,
    /// Output format.
    #[arg(long, env = "OGIVE_FORMAT", value_enum, default_value_t = HistoryFormat::Text)]
    pub format: HistoryFormat,
}

/// Run `ogive promote`.
pub fn promote(args: PromoteArgs) -> anyhow::Result<ExitCode> {
    let evidence = match &args.evidence {
        None => None,
        Some(path) => {
            let bytes = std::fs::read(path)
                .with_context(|| format!("cannot read the evidence {}", path.display()))?;
            Some(
                Evidence::read(bytes)
                    .with_context(|| format!("the evidence {} cannot be used", path.display()))?,
            )
        }
    };
    let moved = lifecycle::promote_with_evidence(
        &args.directory.models,
        &args.name,
        &args.version,
        args.allow_breaking,
        &args.actor.who(),
        args.actor.reason.as_deref(),
        evidence.as_ref(),
    )
    .with_context(|| format!("promoting {} version {}", args.name, args.version))?;
    if moved.changed {
        tracing::info!(model = %moved.name, from = ?moved.from, to = %moved.to, "promoted");
    }
    print_moved(&moved);
    Ok(ExitCode::SUCCESS)
}

/// Run `ogive rollback`.
pub fn rollback(args: RollbackArgs) -> anyhow::Result<ExitCode> {
    let moved = lifecycle::rollback(
        &args.directory.models,
        &args.name,
        &args.actor.who(),
        args.actor.reason.as_deref(),
    )
    .with_context(|| format!("rolling back {}", args.name))?;
    tracing::info!(model = %moved.name, from = ?moved.from, to = %moved.to, "rolled back");
    print_moved(&moved);
    Ok(ExitCode::SUCCESS)
}

/// Run `ogive history`. Skipped lines are reported on standard error; they do not fail it.
pub fn history(args: HistoryArgs) -> anyhow::Result<ExitCode> {
    // Verification repairs what it can: a move the history records but the pointer lags.
    match lifecycle::reconcile(&args.directory.models, &args.name, REPAIR_LOCK_WAIT) {
        Ok(Some(record)) => eprintln!(
            "repaired: the live pointer now names '{}', as the history's last record says (an interrupted {} was completed)",
            record.to,
            record.action.name()
        ),
        Ok(None) => {}
        Err(error) => eprintln!("warning: could not complete an interrupted move: {error}"),
    }
    let view = lifecycle::history(&args.directory.models, &args.name)
        .with_context(|| format!("reading the history of {}", args.name))?;
    match args.format {
        HistoryFormat::Json => {
            let text = serde_json::to_string_pretty(&view).context("encoding the history")?;
            println!("{text}");
        }
        HistoryFormat::Text => print!("{}", history_text(&view)),
    }
    for warning in &view.warnings {
        eprintln!("warning: {warning}");
    }
    Ok(ExitCode::SUCCESS)
}

fn print_moved(moved: &Moved) {
    let from = moved.from.as_deref().unwrap_or("nothing");
    if !moved.changed {
        println!(
            "{}: {} is already live; nothing changed",
            moved.name, moved.to
        );
        return;
    }
    let verb = match moved.action {
        Action::Rollback => "rolled back",
        _ => "promoted",
    };
    println!("{}: {verb} {from} → {}", moved.name, moved.to);
    if let Some(e) = moved.record.as_ref().and_then(|r| r.evidence.as_ref()) {
        println!(
            "evidence stored as {} (sha256 {}): AUC {:.4}, Brier {:.5}, calibration slope {:.3}",
            e.file, e.sha256, e.auc, e.brier, e.calibration_slope
        );
    }
    if !moved.changes.is_empty() {
        println!("callers must now:");
        for change in &moved.changes {
            println!("  - {change}");
        }
    }
}

/// One history record as a line for people.
pub(crate) fn record_line(record: &HistoryRecord) -> String {
    let change = match (record.action, &record.from) {
        (Action::Upload, _) => format!("stored {}", record.to),
        (Action::Shadow, Some(from)) => format!("shadow {from} → {}", record.to),
        (Action::Shadow, None) => format!("shadow {}", record.to),
        (Action::Unshadow, from) => format!(
            "shadow {} ended; {} alone",
            from.as_deref().unwrap_or("?"),
            record.to
        ),
        (_, Some(from)) => format!("{from} → {}", record.to),
        (_, None) => format!("nothing → {}", record.to),
    };
    let mut line = format!(
        "{:<24}  {:<8}  {change}  by {}",
        record.when,
        record.action.name(),
        record.who
    );
    if let Some(reason) = &record.reason {
        line.push_str(&format!("  ({reason})"));
    }
    if let Some(e) = &record.evidence {
        line.push_str(&format!(
            "  evidence {} sha256 {}: AUC {:.4}, Brier {:.5}, calibration slope {:.3}",
            e.file, e.sha256, e.auc, e.brier, e.calibration_slope
        ));
    }
    if let Some(note) = &record.shadow {
        line.push_str(&format!("  {}", shadow_note_text(note)));
    }
    line
}

/// What a record keeps of a shadowing that ended, in words.
pub(crate) fn shadow_note_text(note: &ShadowNote) -> String {
    let threshold = |t: Option<f64>| t.map_or_else(|| "unknown".to_string(), |t| t.to_string());
    let thresholds = format!(
        "thresholds live {} and shadow {}",
        threshold(note.thresholds.live),
        threshold(note.thresholds.shadow)
    );
    let Some(f) = &note.figures else {
        return format!(
            "shadow {} ended ({thresholds}; no figures: ended on the directory, they are in the serving processes' series)",
            note.version
        );
    };
    let figure = |x: Option<f64>| x.map_or_else(|| "none".to_string(), |x| format!("{x:.4}"));
    format!(
        "shadow {} ended: {} scored ({} unscored) since {}, mean |Δp| {}, disagreements {} (share {}), {thresholds}",
        note.version,
        f.scored,
        f.unscored,
        f.since.as_deref().unwrap_or("the process started"),
        figure(f.mean_abs_difference),
        f.disagreements,
        figure(f.disagreement_rate)
    )
}

fn history_text(view: &HistoryView) -> String {
    let mut out = match (&view.live, &view.rollback_to) {
        (Some(live), Some(target)) => format!(
            "{}: live {live}; a rollback would return to {target}\n",
            view.name
        ),
        (Some(live), None) => format!("{}: live {live}; nothing to roll back to\n", view.name),
        (None, _) => format!("{}: no live version\n", view.name),
    };
    for record in &view.records {
        out.push_str(&record_line(record));
        out.push('\n');
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn who_without_user_falls_back_to_logname() {
        let name = login_name(|key| (key == "LOGNAME").then(|| "ana".to_string()));
        assert_eq!(name, "ana");
    }

    #[test]
    fn who_without_user_or_logname_is_the_account_of_the_uid_never_unknown() {
        let name = login_name(|_| None);
        assert_ne!(name, "unknown");
        assert!(!name.is_empty());
        let uid = process_uid().expect("uid");
        let passwd = std::fs::read_to_string("/etc/passwd").unwrap_or_default();
        let expected = account_of(&passwd, uid).unwrap_or_else(|| format!("uid-{uid}"));
        assert_eq!(name, expected);
    }

    #[test]
    fn passwd_lines_give_the_account_of_a_uid() {
        let passwd = "root:x:0:0:root:/root:/bin/sh\nana:x:1000:1000::/home/ana:/bin/sh\n";
        assert_eq!(account_of(passwd, 1000).as_deref(), Some("ana"));
        assert_eq!(account_of(passwd, 0).as_deref(), Some("root"));
        assert_eq!(account_of(passwd, 7), None);
    }
}
