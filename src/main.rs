//! The `roughcal` binary: parse arguments, run, print errors with their context, set the exit code.

#![cfg_attr(
    not(test),
    deny(clippy::unwrap_used, clippy::expect_used, clippy::panic)
)]

use std::process::ExitCode;

use clap::Parser;

mod cli;

fn main() -> ExitCode {
    let args = cli::Cli::parse();
    match cli::run(args) {
        Ok(code) => code,
        Err(error) => {
            eprintln!("roughcal: {error:#}");
            ExitCode::from(1)
        }
    }
}
