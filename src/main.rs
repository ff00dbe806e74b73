//! The `kinequil` binary: everything lives in the library; this maps outcomes to exit codes.

use std::io::Write;
use std::process::ExitCode;

use clap::Parser;

fn main() -> ExitCode {
    let cli = kinequil::cli::Cli::parse();
    match kinequil::cli::execute(cli) {
        Ok(outcome) => {
            // A closed pipe (e.g. `| head`) is not an error.
            let _ = std::io::stdout().write_all(outcome.text.as_bytes());
            if let Some(diagnosis) = outcome.diagnosis {
                eprintln!("error: {diagnosis}");
            }
            ExitCode::from(outcome.exit_code)
        }
        Err(e) => {
            eprintln!("error: {e}");
            ExitCode::from(e.exit_code())
        }
    }
}
