//! The `ogive` binary: parse arguments, set up logging, call the library, choose the exit code.

use std::process::ExitCode;

use clap::Parser;

fn main() -> ExitCode {
    let cli = ogive::cli::Cli::parse();
    let _log = ogive::cli::init_logging(&cli);
    match ogive::cli::run(cli) {
        Ok(code) => code,
        Err(error) => {
            eprintln!("error: {error}");
            for cause in error.chain().skip(1) {
                eprintln!("  caused by: {cause}");
            }
            ExitCode::from(2)
        }
    }
}
