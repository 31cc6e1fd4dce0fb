//! `ogive check FILE...`: validate model files and print a one-screen summary of each.

use std::path::PathBuf;
use std::process::ExitCode;

use crate::model::Model;

/// Arguments of `ogive check`.
#[derive(Debug, clap::Args)]
pub struct CheckArgs {
    /// Model files to validate.
    #[arg(required = true, value_name = "FILE")]
    pub files: Vec<PathBuf>,
}

/// Run `ogive check`: exit status 0 if every file passes, 1 if any fails.
pub fn run(args: CheckArgs) -> anyhow::Result<ExitCode> {
    let mut failed = 0;
    for path in &args.files {
        match std::fs::read(path) {
            Err(e) => {
                failed += 1;
                println!("FAIL {}: cannot read: {e}\n", path.display());
            }
            Ok(bytes) => match Model::from_json(&bytes) {
                Ok(model) => println!(
                    "ok   {}\n{}",
                    path.display(),
                    crate::model::summary::summary(&model)
                ),
                Err(e) => {
                    failed += 1;
                    println!("FAIL {}\n     {e}\n", path.display());
                }
            },
        }
    }
    if failed > 0 {
        println!("{failed} of {} file(s) failed", args.files.len());
        Ok(ExitCode::from(1))
    } else {
        Ok(ExitCode::SUCCESS)
    }
}
