//! The `brakeledger` binary: parses the command line and hands over to [`brakeledger::cli`].

use std::process::ExitCode;

use clap::Parser;

#[tokio::main]
async fn main() -> ExitCode {
    brakeledger::cli::exit_code(brakeledger::cli::run(brakeledger::cli::Cli::parse()).await)
}
