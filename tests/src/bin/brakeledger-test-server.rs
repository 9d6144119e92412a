//! The real `brakeledger` command line, built inside the tests package so that end-to-end tests
//! can start the server as a separate process (and kill it).

use std::process::ExitCode;

use clap::Parser;

#[tokio::main]
async fn main() -> ExitCode {
    brakeledger::cli::exit_code(brakeledger::cli::run(brakeledger::cli::Cli::parse()).await)
}
