//! The `brakeledger` command line: `serve` runs the server; the other subcommands are clients
//! of a running server, plus `summarise` (local physics, no server) and `demo`, which runs a
//! whole invented fleet through the real API.
//!
//! # Layout
//! - [`serve`]: the `serve` subcommand.
//! - [`client`]: the connection to a server and readable errors from gRPC status.
//! - [`dates`]: date and time flags in, calendar dates out.
//! - [`table`]: plain aligned text tables.
//! - [`parts`]: pad, lining, rotor and drum: component flags and names.
//! - [`trip_file`]: reading trip summaries from CSV or JSON Lines files, with line numbers.
//! - [`trips`]: `push-trips`, streaming a trip file and printing the ingest report.
//! - [`vehicle_file`]: `add-vehicle` from a JSON or TOML file.
//! - [`maintenance`]: `record-inspection` and `record-replacement`.
//! - [`forecast_view`]: `forecast` and `due` (tables and JSON).
//! - [`plan_view`]: the `plan` subcommand.
//! - [`chart`]: `chart`, the SVG wear chart of one part.
//! - [`summarise`]: `summarise`, a speed trace into a trip summary.
//! - [`demo`], [`demo_feed`], [`demo_accuracy`]: `demo`.
//! - [`access`]: `token` and `audit`.
//! - [`data_dir`]: `check`, `backup`, `restore`, `verify-backup`.

pub mod access;
pub mod chart;
pub mod client;
pub mod data_dir;
pub mod corrections;
pub mod dates;
pub mod demo;
pub mod demo_accuracy;
pub mod demo_feed;
pub mod fleet_view;
pub mod forecast_view;
pub mod maintenance;
pub mod parts;
pub mod plan_view;
pub mod serve;
pub mod summarise;
pub mod table;
pub mod trip_file;
pub mod trips;
pub mod vehicle_file;

use std::io::Write;
use std::path::PathBuf;

use clap::{Parser, Subcommand};

/// Where client subcommands connect when neither `--server` nor `BRAKELEDGER_SERVER` is given.
pub const DEFAULT_SERVER: &str = "http://127.0.0.1:50051";

/// brakeledger: when will each brake pad, rotor, lining and drum of a fleet reach its minimum
/// thickness? Forecasts support planning; they do not replace inspection by a qualified
/// technician or local roadworthiness rules.
#[derive(Debug, Parser)]
#[command(name = "brakeledger", version)]
pub struct Cli {
    /// Server that client subcommands talk to.
    #[arg(long, global = true, env = "BRAKELEDGER_SERVER", default_value = DEFAULT_SERVER)]
    pub server: String,
    /// Bearer token for a server that requires one (sent as `authorization: Bearer <token>`).
    #[arg(long, global = true, env = "BRAKELEDGER_TOKEN", hide_env_values = true)]
    pub token: Option<String>,
    /// PEM CA certificate to trust for an https:// server (default: the public web roots).
    #[arg(long, global = true, env = "BRAKELEDGER_CA_FILE")]
    pub ca_file: Option<PathBuf>,
    /// PEM client certificate, for a server that requires one (mutual TLS).
    #[arg(long, global = true, env = "BRAKELEDGER_CLIENT_CERT")]
    pub client_cert: Option<PathBuf>,
    /// PEM key of --client-cert.
    #[arg(long, global = true, env = "BRAKELEDGER_CLIENT_KEY")]
    pub client_key: Option<PathBuf>,
    /// What to do.
    #[command(subcommand)]
    pub command: Command,
}

/// Subcommands. Each accepts negative numbers as option values (`--thickness-mm -3` reaches
/// the server's validation instead of reading as an unknown flag).
#[derive(Debug, Subcommand)]
pub enum Command {
    /// Run the gRPC server.
    ///
    /// Example: brakeledger serve --data /var/lib/brakeledger --listen 127.0.0.1:50051
    #[command(allow_negative_numbers = true)]
    #[command(after_long_help = serve::SERVE_SETTINGS_HELP, after_help = serve::SERVE_SETTINGS_HELP)]
    Serve(ServeArgs),
    /// Send trip summaries from a CSV or JSON Lines file and print what the server made of them.
    #[command(long_about = trips::PUSH_LONG_ABOUT, after_help = format!("{}{}", trips::PUSH_EXAMPLES, trip_file::COLUMNS_HELP))]
    #[command(allow_negative_numbers = true)]
    PushTrips(trips::PushTripsArgs),
    /// Register (or replace) a vehicle described in a JSON or TOML file.
    #[command(long_about = vehicle_file::ADD_VEHICLE_LONG_ABOUT, after_help = vehicle_file::ADD_VEHICLE_EXAMPLES)]
    #[command(allow_negative_numbers = true)]
    AddVehicle(vehicle_file::AddVehicleArgs),
    /// Create a fleet or change its settings (time zone, name); flags left out keep their value.
    #[command(after_help = fleet_view::FLEET_EXAMPLES)]
    #[command(allow_negative_numbers = true)]
    SetFleet(fleet_view::SetFleetArgs),
    /// Show one fleet's settings and vehicle count.
    #[command(after_help = fleet_view::FLEET_EXAMPLES)]
    #[command(allow_negative_numbers = true)]
    ShowFleet(fleet_view::FleetArgs),
    /// List every fleet with its time zone and vehicle count.
    #[command(after_help = fleet_view::FLEET_EXAMPLES)]
    #[command(allow_negative_numbers = true)]
    Fleets(fleet_view::FleetsArgs),
    /// List a fleet's vehicles with their class, mass and brakes.
    #[command(after_help = fleet_view::FLEET_EXAMPLES)]
    #[command(allow_negative_numbers = true)]
    Vehicles(fleet_view::FleetArgs),
    /// Record a measured pad, lining, rotor or drum thickness.
    #[command(after_help = maintenance::INSPECTION_EXAMPLES)]
    #[command(allow_negative_numbers = true)]
    RecordInspection(maintenance::InspectionArgs),
    /// Record that a pad, lining, rotor or drum was replaced.
    #[command(after_help = maintenance::REPLACEMENT_EXAMPLES)]
    #[command(allow_negative_numbers = true)]
    RecordReplacement(maintenance::ReplacementArgs),
    /// Void an inspection or replacement recorded by mistake (kept on file, no longer used).
    #[command(after_help = corrections::CORRECTION_EXAMPLES)]
    #[command(allow_negative_numbers = true)]
    VoidRecord(corrections::VoidArgs),
    /// Replace a mistaken inspection by a corrected one (the original is kept on file).
    #[command(after_help = corrections::CORRECTION_EXAMPLES)]
    #[command(allow_negative_numbers = true)]
    SupersedeInspection(corrections::SupersedeInspectionArgs),
    /// Replace a mistaken replacement record by a corrected one (the original is kept on file).
    #[command(after_help = corrections::CORRECTION_EXAMPLES)]
    #[command(allow_negative_numbers = true)]
    SupersedeReplacement(corrections::SupersedeReplacementArgs),
    /// List a vehicle's inspections and replacements with their status (in force, voided, superseded).
    #[command(after_help = corrections::CORRECTION_EXAMPLES)]
    #[command(allow_negative_numbers = true)]
    Records(corrections::RecordsArgs),
    /// Show one vehicle's forecast: every axle's friction part and rotor or drum.
    #[command(after_help = forecast_view::FORECAST_EXAMPLES)]
    #[command(allow_negative_numbers = true)]
    Forecast(forecast_view::ForecastArgs),
    /// List the parts of a fleet due before a date, earliest first.
    #[command(after_help = forecast_view::DUE_EXAMPLES)]
    #[command(allow_negative_numbers = true)]
    Due(forecast_view::DueArgs),
    /// Make a workshop plan that books parts before they are due, within a daily capacity.
    #[command(after_help = plan_view::PLAN_EXAMPLES)]
    #[command(allow_negative_numbers = true)]
    Plan(plan_view::PlanArgs),
    /// Write an SVG chart of one part: measurements, forecast band and minimum thickness.
    #[command(after_help = chart::CHART_EXAMPLES)]
    #[command(allow_negative_numbers = true)]
    Chart(chart::ChartArgs),
    /// Turn a speed-trace CSV into a trip summary (JSON), using the braking physics. No server.
    #[command(long_about = summarise::SUMMARISE_LONG_ABOUT, after_help = summarise::SUMMARISE_EXAMPLES)]
    #[command(allow_negative_numbers = true)]
    Summarise(summarise::SummariseArgs),
    /// Create, list and revoke access tokens (each belongs to a fleet and has a role).
    #[command(subcommand, after_help = access::TOKEN_EXAMPLES)]
    Token(access::TokenCommand),
    /// List a fleet's audit trail: writes made with workshop, fleet-admin and operator tokens.
    #[command(after_help = access::AUDIT_EXAMPLES)]
    Audit(access::AuditArgs),
    /// Verify a data directory offline: every record acknowledged is there, every value sound.
    #[command(after_help = data_dir::CHECK_EXAMPLES)]
    Check(data_dir::CheckArgs),
    /// Write a consistent backup of a running server's whole store to one file.
    #[command(after_help = data_dir::BACKUP_EXAMPLES)]
    Backup(data_dir::BackupArgs),
    /// Restore a backup file into an empty data directory (no server).
    #[command(after_help = data_dir::RESTORE_EXAMPLES)]
    Restore(data_dir::RestoreArgs),
    /// Verify a backup file: every checksum and its own record counts (no server).
    #[command(after_help = data_dir::VERIFY_EXAMPLES)]
    VerifyBackup(data_dir::VerifyBackupArgs),
    /// Run an invented fleet through an in-process server and show every answer it gives.
    #[command(long_about = demo::DEMO_LONG_ABOUT, after_help = demo::DEMO_EXAMPLES)]
    #[command(allow_negative_numbers = true)]
    Demo(demo::DemoArgs),
}

/// Runs a parsed command line to completion, answers on stdout.
pub async fn run(cli: Cli) -> anyhow::Result<()> {
    run_with_output(cli, &mut std::io::stdout()).await
}

/// Reports the outcome of a command the way a command-line user expects: the error and its
/// causes on one line of standard error (never a backtrace), exit status 1.
pub fn exit_code(outcome: anyhow::Result<()>) -> std::process::ExitCode {
    match outcome {
        Ok(()) => std::process::ExitCode::SUCCESS,
        // The reader went away (`brakeledger due | head`): what it wanted was written.
        Err(error) if is_broken_pipe(&error) => std::process::ExitCode::SUCCESS,
        Err(error) => {
            eprintln!("error: {error:#}");
            std::process::ExitCode::FAILURE
        }
    }
}

/// Whether an error comes from writing to a closed pipe.
fn is_broken_pipe(error: &anyhow::Error) -> bool {
    error.chain().any(|cause| {
        cause.downcast_ref::<std::io::Error>().is_some_and(|e| e.kind() == std::io::ErrorKind::BrokenPipe)
            || cause.downcast_ref::<serde_json::Error>().and_then(|e| e.io_error_kind()) == Some(std::io::ErrorKind::BrokenPipe)
    })
}

/// Runs a parsed command line, writing the answers (tables, JSON, reports) to `out`; progress
/// and logs still go to stderr. Tests pass a buffer.
pub async fn run_with_output(cli: Cli, out: &mut impl Write) -> anyhow::Result<()> {
    let tls = client::ClientTls { ca_file: cli.ca_file, cert_file: cli.client_cert, key_file: cli.client_key };
    let server = client::ServerTarget { url: cli.server, token: cli.token, tls };
    let out = &mut *out;
    match cli.command {
        Command::Serve(args) => serve::serve(args, server.token).await,
        Command::PushTrips(args) => trips::push_trips(&server, &args, out).await,
        Command::AddVehicle(args) => vehicle_file::add_vehicle(&server, &args, out).await,
        Command::SetFleet(args) => fleet_view::set_fleet(&server, &args, out).await,
        Command::ShowFleet(args) => fleet_view::show_fleet(&server, &args, out).await,
        Command::Fleets(args) => fleet_view::fleets(&server, &args, out).await,
        Command::Vehicles(args) => fleet_view::vehicles(&server, &args, out).await,
        Command::RecordInspection(args) => maintenance::record_inspection(&server, &args, out).await,
        Command::RecordReplacement(args) => maintenance::record_replacement(&server, &args, out).await,
        Command::VoidRecord(args) => corrections::void_record(&server, &args, out).await,
        Command::SupersedeInspection(args) => corrections::supersede_inspection(&server, &args, out).await,
        Command::SupersedeReplacement(args) => corrections::supersede_replacement(&server, &args, out).await,
        Command::Records(args) => corrections::records(&server, &args, out).await,
        Command::Forecast(args) => forecast_view::forecast(&server, &args, out).await,
        Command::Due(args) => forecast_view::due(&server, &args, out).await,
        Command::Plan(args) => plan_view::plan(&server, &args, out).await,
        Command::Chart(args) => chart::chart(&server, &args, out).await,
        Command::Summarise(args) => summarise::summarise(&args, out),
        Command::Token(command) => access::token(&server, &command, out).await,
        Command::Audit(args) => access::audit(&server, &args, out).await,
        Command::Demo(args) => demo::demo(&args, out).await,
        Command::Check(args) => data_dir::check(&args, out),
        Command::Backup(args) => data_dir::backup(&server, &args, out).await,
        Command::Restore(args) => data_dir::restore(&args, out),
        Command::VerifyBackup(args) => data_dir::verify_backup(&args, out),
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
    /// A PostgreSQL database to use instead of the embedded one, as a URL
    /// (postgres://user@host:5432/brakeledger); several servers may share it. A password is
    /// better given in BRAKELEDGER_STORE or [store] url than on the command line.
    #[arg(long, value_name = "URL", conflicts_with = "data")]
    pub store: Option<String>,
    /// Address to listen on, e.g. 127.0.0.1:50051.
    #[arg(long)]
    pub listen: Option<std::net::SocketAddr>,
    /// Log lines as JSON objects.
    #[arg(long)]
    pub json_logs: bool,
    /// File holding the first operator token ([auth] operator_token_file); tokens are then
    /// required. Other tokens are created with `brakeledger token create`.
    #[arg(long)]
    pub operator_token_file: Option<PathBuf>,
    /// Serve without tokens on a non-loopback address (anyone reaching the port may read and
    /// change every fleet); logged as a warning at every start.
    #[arg(long)]
    pub insecure_no_auth: bool,
    /// Also serve the planners' web page on this address, e.g. 127.0.0.1:8090 ([web] listen).
    #[arg(long)]
    pub web_listen: Option<std::net::SocketAddr>,
}

#[cfg(test)]
mod tests {
    use super::*;
    use clap::CommandFactory;

    #[test]
    fn command_line_definition_is_consistent() {
        Cli::command().debug_assert();
    }

    #[test]
    fn every_client_subcommand_shows_an_example_in_its_help() {
        let mut cli = Cli::command();
        for sub in cli.get_subcommands_mut() {
            let name = sub.get_name().to_owned();
            let help = sub.render_long_help().to_string();
            assert!(help.contains("brakeledger "), "`{name} --help` has no example:\n{help}");
        }
    }

    #[test]
    fn server_flag_is_global_with_a_loopback_default() {
        let cli = Cli::try_parse_from(["brakeledger", "due", "--fleet", "north", "--within-days", "30"]).expect("parse");
        assert_eq!(cli.server, DEFAULT_SERVER);
        let cli = Cli::try_parse_from(["brakeledger", "due", "--fleet", "north", "--server", "http://10.0.0.5:9000"]).expect("parse");
        assert_eq!(cli.server, "http://10.0.0.5:9000");
    }
}
