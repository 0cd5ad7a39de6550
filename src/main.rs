//! The `tally` binary: parse arguments, run the command, map errors to exit codes.
//! Exit codes: 0 ok, 1 bad input data or any other runtime error, 2 usage error.
use std::process::ExitCode;

use clap::Parser;

fn main() -> ExitCode {
    let cli = tally::cli::Cli::parse();
    match tally::cli::run(cli) {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) if tally::cli::is_broken_pipe(&e) => ExitCode::SUCCESS,
        Err(e) => {
            #[allow(clippy::print_stderr)]
            {
                let text = format!("{e:#}");
                eprintln!(
                    "tally: error: {}",
                    tally::report::format::terminal_safe(&text)
                );
                if let Some(advice) = tally::cli::advice(&e) {
                    eprintln!("tally: {advice}");
                }
            }
            ExitCode::from(1)
        }
    }
}
