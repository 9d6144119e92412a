//! The `brakeledger` binary: parses the command line and hands over to [`brakeledger::cli`].

use clap::Parser;

#[tokio::main]
async fn main() -> anyhow::Result<()> {
    brakeledger::cli::run(brakeledger::cli::Cli::parse()).await
}
