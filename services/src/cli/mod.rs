//! The `brakeledger` command line: `serve` runs the server; the other subcommands are clients
//! of a running server, plus `demo`, which runs a whole invented fleet through the real API.

pub mod serve;

use std::path::PathBuf;

use clap::{Parser, Subcommand};

/// brakeledger: when will each brake pad, rotor, lining and drum of a fleet reach its minimum
/// thickness? Forecasts support planning; they do not replace inspection by a qualified
/// technician or local roadworthiness rules.
#[derive(Debug, Parser)]
#[command(name = "brakeledger", version, about, long_about = None)]
pub struct Cli {
    /// What to do.
    #[command(subcommand)]
    pub command: Command,
}

/// Subcommands.
#[derive(Debug, Subcommand)]
pub enum Command {
    /// Run the gRPC server.
    ///
    /// Example: brakeledger serve --data /var/lib/brakeledger --listen 127.0.0.1:50051
    Serve(ServeArgs),
}

/// Runs a parsed command line to completion.
pub async fn run(cli: Cli) -> anyhow::Result<()> {
    match cli.command {
        Command::Serve(args) => serve::serve(args).await,
    }
}

/// Flags of `serve`.
#[derive(Debug, clap::Args)]
pub struct ServeArgs {
    /// TOML config file (see deploy/brakeledger.toml); environment variables
    /// BRAKELEDGER_LISTEN, BRAKELEDGER_DATA, BRAKELEDGER_LOG override it, flags override both.
    #[arg(long)]
    pub config: Option<PathBuf>,
    /// Data directory of the embedded database.
    #[arg(long)]
    pub data: Option<PathBuf>,
    /// Address to listen on, e.g. 127.0.0.1:50051.
    #[arg(long)]
    pub listen: Option<std::net::SocketAddr>,
    /// Log lines as JSON objects.
    #[arg(long)]
    pub json_logs: bool,
}
