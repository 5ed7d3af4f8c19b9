//! `ohmsight`: the command-line tool. Logic lives in the library; each command is one file
//! under `cmd/` that parses its arguments and calls it.
//!
//! Exit codes, decided in one place ([`cmd::Failure::exit_code`]): 0 everything asked for was
//! done; 1 the board, the link or the store failed (or a survey was cut short: what was
//! measured is still printed and stored); 2 bad input (a file, an argument, a run id). Commands
//! that judge a unit (`check`, `compare`) use 1 for "the unit fails / changed" and 3 for "no
//! verdict: the board, the link or the store failed".

mod cmd;

use clap::Parser;
use std::process::ExitCode;

fn main() -> ExitCode {
    let outcome = match std::env::var_os(cmd::MAN_PAGES_ENV) {
        Some(dir) => cmd::man_pages(std::path::Path::new(&dir)),
        None => cmd::run(cmd::Cli::parse()),
    };
    match outcome {
        Ok(()) => ExitCode::SUCCESS,
        Err(failure) => {
            if !failure.message.is_empty() {
                eprintln!("ohmsight: {}", failure.message);
            }
            ExitCode::from(failure.exit_code())
        }
    }
}
