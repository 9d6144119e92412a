//! `brakeledger set-fleet`, `show-fleet`, `fleets` and `vehicles`: create or change a fleet's
//! settings (time zone, display name) with UpsertFleet, read one back (GetFleet), list every
//! fleet (ListFleets) and a fleet's vehicles (ListVehicles); each with `--json`.

use std::io::Write;

use anyhow::Context;
use brakeledger_proto::v1 as pb;
use serde::Serialize;

use crate::cli::client::{explain, Connection, ServerTarget};
use crate::cli::table::{number, Align, Table};

/// Examples of the fleet commands.
pub const FLEET_EXAMPLES: &str = "\
Examples:
  brakeledger set-fleet --fleet north --time-zone Europe/Lisbon --name 'North depot'
  brakeledger set-fleet --fleet north --name 'North depot (coaches)'    # keeps the time zone
  brakeledger show-fleet --fleet north
  brakeledger fleets --json
  brakeledger vehicles --fleet north";

/// Flags of `set-fleet`.
#[derive(Debug, clap::Args)]
pub struct SetFleetArgs {
    /// Fleet identifier (created when new).
    #[arg(long)]
    pub fleet: String,
    /// IANA time zone in which planners see dates (e.g. Europe/Lisbon); default: unchanged,
    /// UTC for a new fleet.
    #[arg(long)]
    pub time_zone: Option<String>,
    /// Name for people; default: unchanged, empty for a new fleet.
    #[arg(long)]
    pub name: Option<String>,
    /// Print JSON instead of text.
    #[arg(long)]
    pub json: bool,
}

/// Flags of `show-fleet` and `vehicles`.
#[derive(Debug, clap::Args)]
pub struct FleetArgs {
    /// Fleet identifier.
    #[arg(long)]
    pub fleet: String,
    /// Print JSON instead of text.
    #[arg(long)]
    pub json: bool,
}

/// Flags of `fleets`.
#[derive(Debug, clap::Args)]
pub struct FleetsArgs {
    /// Print JSON instead of a table.
    #[arg(long)]
    pub json: bool,
}

/// A fleet for scripts.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct FleetView {
    /// Fleet identifier.
    pub fleet_id: String,
    /// Time zone of its dates.
    pub time_zone: String,
    /// Name for people.
    pub display_name: String,
    /// Registered vehicles.
    pub vehicle_count: u64,
    /// Set up with set-fleet (false: it only holds vehicles and uses the defaults).
    pub set_up: bool,
}

fn fleet_view(fleet: Option<pb::Fleet>, vehicle_count: u64, set_up: bool) -> FleetView {
    let fleet = fleet.unwrap_or_default();
    let time_zone = if fleet.time_zone.is_empty() { "UTC".to_owned() } else { fleet.time_zone };
    FleetView { fleet_id: fleet.fleet_id, time_zone, display_name: fleet.display_name, vehicle_count, set_up }
}

fn write_json(out: &mut impl Write, value: &impl Serialize) -> anyhow::Result<()> {
    serde_json::to_writer_pretty(&mut *out, value).context("writing JSON")?;
    writeln!(out)?;
    Ok(())
}

fn fleet_text(view: &FleetView) -> String {
    let name = if view.display_name.is_empty() { String::new() } else { format!(" ({})", view.display_name) };
    format!("fleet {}{name}: time zone {}, {} vehicle(s)", view.fleet_id, view.time_zone, view.vehicle_count)
}

/// Runs `set-fleet`: reads the fleet (when it exists) so that a flag left out keeps its value.
pub async fn set_fleet(server: &ServerTarget, args: &SetFleetArgs, out: &mut impl Write) -> anyhow::Result<()> {
    let mut connection = Connection::open(server).await?;
    let existing = match connection.fleet.get_fleet(pb::GetFleetRequest { fleet_id: args.fleet.clone() }).await {
        Ok(response) => response.into_inner().fleet,
        Err(status) if status.code() == tonic::Code::NotFound => None,
        Err(status) => return Err(explain(status, &format!("reading fleet '{}'", args.fleet))),
    };
    let existing = existing.unwrap_or_default();
    let fleet = pb::Fleet {
        fleet_id: args.fleet.clone(),
        time_zone: args.time_zone.clone().unwrap_or(existing.time_zone),
        display_name: args.name.clone().unwrap_or(existing.display_name),
    };
    let response = connection
        .fleet
        .upsert_fleet(pb::UpsertFleetRequest { fleet: Some(fleet) })
        .await
        .map_err(|s| explain(s, &format!("setting up fleet '{}'", args.fleet)))?
        .into_inner();
    let count = connection.fleet.get_fleet(pb::GetFleetRequest { fleet_id: args.fleet.clone() }).await.map(|r| r.into_inner().vehicle_count).unwrap_or(0);
    let view = fleet_view(response.fleet, count, true);
    if args.json {
        return write_json(out, &view);
    }
    writeln!(out, "{} {}", if response.created { "created" } else { "updated" }, fleet_text(&view))?;
    Ok(())
}

/// Runs `show-fleet`.
pub async fn show_fleet(server: &ServerTarget, args: &FleetArgs, out: &mut impl Write) -> anyhow::Result<()> {
    let mut connection = Connection::open(server).await?;
    let response = connection
        .fleet
        .get_fleet(pb::GetFleetRequest { fleet_id: args.fleet.clone() })
        .await
        .map_err(|s| explain(s, &format!("reading fleet '{}'", args.fleet)))?
        .into_inner();
    let view = fleet_view(response.fleet, response.vehicle_count, true);
    if args.json {
        return write_json(out, &view);
    }
    writeln!(out, "{}; {} forecast(s) being recomputed", fleet_text(&view), response.forecasts_pending)?;
    Ok(())
}

/// Runs `fleets`.
pub async fn fleets(server: &ServerTarget, args: &FleetsArgs, out: &mut impl Write) -> anyhow::Result<()> {
    let mut connection = Connection::open(server).await?;
    let response = connection.fleet.list_fleets(pb::ListFleetsRequest {}).await.map_err(|s| explain(s, "listing fleets"))?.into_inner();
    let views: Vec<FleetView> = response.fleets.into_iter().map(|f| fleet_view(f.fleet, f.vehicle_count, f.set_up)).collect();
    if args.json {
        return write_json(out, &views);
    }
    if views.is_empty() {
        writeln!(out, "No fleet yet: create one with set-fleet, or register a vehicle.")?;
        return Ok(());
    }
    let mut table = Table::new(&[("fleet", Align::Left), ("name", Align::Left), ("time zone", Align::Left), ("vehicles", Align::Right), ("note", Align::Left)]);
    for v in &views {
        let note = if v.set_up { "" } else { "never set up: defaults" };
        table.row(vec![v.fleet_id.clone(), v.display_name.clone(), v.time_zone.clone(), v.vehicle_count.to_string(), note.to_owned()]);
    }
    write!(out, "{}", table.render())?;
    Ok(())
}

/// One vehicle for scripts.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct VehicleView {
    /// Vehicle identifier.
    pub vehicle_id: String,
    /// Vehicle class.
    pub vehicle_class: String,
    /// Mass, kg.
    pub mass_kg: f64,
    /// Brake of each axle, front first: disc or drum.
    pub brakes: Vec<&'static str>,
}

/// Runs `vehicles`.
pub async fn vehicles(server: &ServerTarget, args: &FleetArgs, out: &mut impl Write) -> anyhow::Result<()> {
    let mut connection = Connection::open(server).await?;
    // NOT_FOUND for a fleet never set up that holds no vehicle, not an empty list.
    connection.fleet_time_zone(&args.fleet).await?;
    let views: Vec<VehicleView> = connection
        .all_vehicles(&args.fleet)
        .await?
        .into_iter()
        .map(|v| VehicleView {
            brakes: v
                .axles
                .iter()
                .map(|a| match pb::BrakeType::try_from(a.brake_type) {
                    Ok(pb::BrakeType::Drum) => "drum",
                    _ => "disc",
                })
                .collect(),
            vehicle_id: v.vehicle_id,
            vehicle_class: v.vehicle_class,
            mass_kg: v.mass_kg,
        })
        .collect();
    if args.json {
        return write_json(out, &views);
    }
    writeln!(out, "{} vehicle(s) in fleet {}:\n", views.len(), args.fleet)?;
    let mut table = Table::new(&[("vehicle", Align::Left), ("class", Align::Left), ("mass kg", Align::Right), ("brakes, front first", Align::Left)]);
    for v in &views {
        table.row(vec![v.vehicle_id.clone(), v.vehicle_class.clone(), number(v.mass_kg, 0), v.brakes.join(", ")]);
    }
    write!(out, "{}", table.render())?;
    Ok(())
}
