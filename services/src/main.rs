//! The `brakeledger` binary: parses the command line and hands over to [`brakeledger::cli`].

use clap::Parser;

use brakeledger::cli::{serve, Cli, Command};

#[tokio::main]
async fn main() -> anyhow::Result<()> {
    let cli = Cli::parse();
    match cli.command {
        Command::Serve(args) => serve::serve(args).await,
    }
}
