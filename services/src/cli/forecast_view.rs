//! `brakeledger forecast` (one vehicle, GetVehicleForecast) and `brakeledger due` (a fleet's
//! due list, ListDue through every page): fetching, tables for people and JSON for scripts.
//! Both end with the safety caution.

use std::io::Write;

use anyhow::Context;
use brakeledger_proto::v1 as pb;
use chrono::{DateTime, Utc};
use serde::Serialize;

use crate::cli::client::{explain, Connection, ServerTarget};
use crate::cli::dates::{from_timestamp, parse_date_or_instant, to_timestamp};
use crate::cli::parts::{basis_name, brake_type_of, part_name, PartArg};
use crate::cli::table::{number, with_uncertainty, Align, Table};
use crate::SAFETY_CAUTION;

/// Examples of `forecast`.
pub const FORECAST_EXAMPLES: &str = "\
Examples:
  brakeledger forecast --fleet north --vehicle bus-17
  brakeledger forecast --fleet north --vehicle bus-17 --band-level 0.9 --json";

/// Examples of `due`.
pub const DUE_EXAMPLES: &str = "\
Examples:
  brakeledger due --fleet north --within-days 60
  brakeledger due --fleet north --before 2025-12-31 --component rotor
  brakeledger due --fleet north --within-days 30 --json > due.json
  brakeledger due --fleet north --within-days 90 --format csv > due.csv

A part is listed when the early end of its due-date band falls before the window's end.
A part measured or estimated at or below its minimum is marked DUE NOW (all its dates are the
day its forecast was computed); a part whose median date has passed is marked OVERDUE. Parts
that cannot be forecast at all are listed after the table with the reason, so an empty list
never hides a part nobody can date. A fleet that was never set up and holds no vehicle is an
error (exit status 1). Dates are calendar dates in the fleet's time zone.";

/// Flags of `forecast`.
#[derive(Debug, clap::Args)]
pub struct ForecastArgs {
    /// Fleet identifier.
    #[arg(long)]
    pub fleet: String,
    /// Vehicle identifier.
    #[arg(long)]
    pub vehicle: String,
    /// Probability that the true date lies in the band, between 0 and 1.
    #[arg(long, default_value_t = 0.8, value_parser = parse_band_level)]
    pub band_level: f64,
    /// Print JSON instead of a table.
    #[arg(long)]
    pub json: bool,
}

/// Flags of `due`.
#[derive(Debug, clap::Args)]
pub struct DueArgs {
    /// Fleet identifier.
    #[arg(long)]
    pub fleet: String,
    /// Parts due within this many days from now (default 60).
    #[arg(long, conflicts_with = "before")]
    pub within_days: Option<u32>,
    /// Parts due before this date (YYYY-MM-DD, start of the day in the fleet's time zone) or
    /// instant (ISO 8601 with offset).
    #[arg(long)]
    pub before: Option<String>,
    /// Only this part: pad (or lining) or rotor (or drum).
    #[arg(long, value_enum)]
    pub component: Option<PartArg>,
    /// Band level: 0.5, 0.8, 0.9 or 0.95.
    #[arg(long, default_value_t = 0.8, value_parser = parse_band_level)]
    pub band_level: f64,
    /// Print JSON instead of a table (the same as --format json).
    #[arg(long)]
    pub json: bool,
    /// Output: table (default), json, or csv (RFC 4180, one header row; the parts that cannot
    /// be forecast follow the dated ones, with their reason).
    #[arg(long, value_enum, conflicts_with = "json")]
    pub format: Option<DueFormat>,
}

/// What `due` prints.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum DueFormat {
    /// Aligned text for people.
    Table,
    /// JSON for scripts.
    Json,
    /// CSV for spreadsheets.
    Csv,
}

/// Default window of `due`, days.
pub const DEFAULT_DUE_WINDOW_DAYS: u32 = 60;

/// A band level flag: strictly between 0 and 1.
pub fn parse_band_level(text: &str) -> Result<f64, String> {
    match text.parse::<f64>() {
        Ok(level) if level > 0.0 && level < 1.0 => Ok(level),
        _ => Err(format!("'{text}' is not a probability strictly between 0 and 1 (e.g. 0.8)")),
    }
}

/// One part's forecast for scripts: the contract's fields with times as RFC 3339 text.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PartView {
    /// Vehicle identifier.
    pub vehicle_id: String,
    /// Vehicle class.
    #[serde(skip_serializing_if = "String::is_empty")]
    pub vehicle_class: String,
    /// Axle, 1 = front-most.
    pub axle_index: u32,
    /// "friction" or "disc".
    pub component: &'static str,
    /// pad, lining, rotor or drum.
    pub part: &'static str,
    /// Estimated thickness today, mm.
    pub current_thickness_mm: f64,
    /// Low end of its band, mm.
    pub current_thickness_low_mm: f64,
    /// High end of its band, mm.
    pub current_thickness_high_mm: f64,
    /// Minimum thickness, mm.
    pub min_thickness_mm: f64,
    /// Wear rate, mm/MJ.
    pub wear_rate_mm_per_mj: f64,
    /// Its standard error, mm/MJ.
    pub wear_rate_stderr: f64,
    /// Friction energy per day at this brake, MJ/day.
    pub daily_energy_mj: f64,
    /// Early end of the due band, RFC 3339.
    pub due_earliest: Option<String>,
    /// Median due instant, RFC 3339.
    pub due_median: Option<String>,
    /// Late end of the due band, RFC 3339.
    pub due_latest: Option<String>,
    /// Early end as a calendar date in the fleet's zone.
    pub due_earliest_date: String,
    /// Median as a calendar date.
    pub due_median_date: String,
    /// Late end as a calendar date.
    pub due_latest_date: String,
    /// Where the wear rate came from.
    pub basis: &'static str,
    /// Inspections the wear rate rests on.
    pub inspections_used: u32,
    /// Band level.
    pub band_level: f64,
    /// Notes for planners.
    pub notes: Vec<String>,
    /// At or below its minimum when computed: every due date is that day.
    pub due_now: bool,
    /// Its median due date is before today (fleet's time zone).
    pub overdue: bool,
}

impl PartView {
    /// The view of a part of a vehicle (known or not).
    pub fn new(vehicle_id: &str, vehicle_class: &str, part: &pb::PartForecast, vehicle: Option<&pb::Vehicle>) -> Self {
        let rfc3339 = |ts: &Option<prost_types::Timestamp>| {
            ts.as_ref().and_then(from_timestamp).map(|t| t.to_rfc3339_opts(chrono::SecondsFormat::Secs, true))
        };
        Self {
            vehicle_id: vehicle_id.to_owned(),
            vehicle_class: vehicle_class.to_owned(),
            axle_index: part.axle_index,
            component: match pb::Component::try_from(part.component) {
                Ok(pb::Component::Friction) => "friction",
                Ok(pb::Component::Disc) => "disc",
                _ => "unspecified",
            },
            part: part_name(part.component, brake_type_of(vehicle, part.axle_index)),
            current_thickness_mm: part.current_thickness_mm,
            current_thickness_low_mm: part.current_thickness_low_mm,
            current_thickness_high_mm: part.current_thickness_high_mm,
            min_thickness_mm: part.min_thickness_mm,
            wear_rate_mm_per_mj: part.wear_rate_mm_per_mj,
            wear_rate_stderr: part.wear_rate_stderr,
            daily_energy_mj: part.daily_energy_mj,
            due_earliest: rfc3339(&part.due_earliest),
            due_median: rfc3339(&part.due_median),
            due_latest: rfc3339(&part.due_latest),
            due_earliest_date: part.due_earliest_date.clone(),
            due_median_date: part.due_median_date.clone(),
            due_latest_date: part.due_latest_date.clone(),
            basis: basis_name(part.basis),
            inspections_used: part.inspections_used,
            band_level: part.band_level,
            notes: part.notes.clone(),
            due_now: part.due_now,
            overdue: part.overdue,
        }
    }
}

/// A part that cannot be forecast, for scripts.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct UndatedView {
    /// Vehicle identifier.
    pub vehicle_id: String,
    /// Vehicle class.
    #[serde(skip_serializing_if = "String::is_empty")]
    pub vehicle_class: String,
    /// Axle, 1 = front-most.
    pub axle_index: u32,
    /// pad, lining, rotor or drum.
    pub part: &'static str,
    /// Why no date can be given.
    pub reason: String,
    /// The forecast has not been computed yet.
    pub pending: bool,
}

impl UndatedView {
    /// The view of an undated part of a vehicle (known or not).
    pub fn new(part: &pb::UndatedPart, vehicle: Option<&pb::Vehicle>) -> Self {
        Self {
            vehicle_id: part.vehicle_id.clone(),
            vehicle_class: part.vehicle_class.clone(),
            axle_index: part.axle_index,
            part: part_name(part.component, brake_type_of(vehicle, part.axle_index)),
            reason: part.reason.clone(),
            pending: part.pending,
        }
    }
}

/// A vehicle's forecast for scripts.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct VehicleForecastView {
    /// Fleet identifier.
    pub fleet_id: String,
    /// Vehicle identifier.
    pub vehicle_id: String,
    /// Time zone of the calendar dates.
    pub time_zone: String,
    /// When the forecast was computed, RFC 3339.
    pub computed_at: Option<String>,
    /// The parts.
    pub parts: Vec<PartView>,
    /// The safety caution.
    pub caution: String,
}

/// A due list for scripts.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct DueListView {
    /// Fleet identifier.
    pub fleet_id: String,
    /// Window end, RFC 3339.
    pub due_before: String,
    /// Time zone of the calendar dates.
    pub time_zone: String,
    /// The parts, earliest first.
    pub parts: Vec<PartView>,
    /// Parts that cannot be forecast, with the reason.
    pub undated: Vec<UndatedView>,
    /// The safety caution.
    pub caution: String,
}

/// A date cell: the calendar date, or `-`.
fn date_cell(date: &str) -> String {
    if date.is_empty() {
        "-".to_owned()
    } else {
        date.to_owned()
    }
}

/// Text for the thickness band: `9.4 (8.9-9.9)`.
fn thickness_cell(part: &pb::PartForecast) -> String {
    format!(
        "{} ({}-{})",
        number(part.current_thickness_mm, 1),
        number(part.current_thickness_low_mm, 1),
        number(part.current_thickness_high_mm, 1)
    )
}

/// Runs `forecast`.
pub async fn forecast(server: &ServerTarget, args: &ForecastArgs, out: &mut impl Write) -> anyhow::Result<()> {
    let mut connection = Connection::open(server).await?;
    let (response, vehicle) = fetch_forecast(&mut connection, &args.fleet, &args.vehicle, args.band_level).await?;
    if args.json {
        serde_json::to_writer_pretty(&mut *out, &forecast_view(&response, vehicle.as_ref()))?;
        writeln!(out)?;
    } else {
        write!(out, "{}", render_forecast(&response, vehicle.as_ref()))?;
    }
    Ok(())
}

/// GetVehicleForecast, with the vehicle (for part names) when it can be read.
pub async fn fetch_forecast(
    connection: &mut Connection,
    fleet_id: &str,
    vehicle_id: &str,
    band_level: f64,
) -> anyhow::Result<(pb::GetVehicleForecastResponse, Option<pb::Vehicle>)> {
    let doing = format!("reading the forecast of vehicle '{vehicle_id}' in fleet '{fleet_id}'");
    let response = connection
        .forecast
        .get_vehicle_forecast(pb::GetVehicleForecastRequest { fleet_id: fleet_id.to_owned(), vehicle_id: vehicle_id.to_owned(), band_level })
        .await
        .map_err(|s| explain(s, &doing))?
        .into_inner();
    let vehicle = connection.vehicle_if_any(fleet_id, vehicle_id).await;
    Ok((response, vehicle))
}

/// The JSON view of a vehicle's forecast.
pub fn forecast_view(response: &pb::GetVehicleForecastResponse, vehicle: Option<&pb::Vehicle>) -> VehicleForecastView {
    let class = vehicle.map(|v| v.vehicle_class.as_str()).unwrap_or_default();
    VehicleForecastView {
        fleet_id: response.fleet_id.clone(),
        vehicle_id: response.vehicle_id.clone(),
        time_zone: response.time_zone.clone(),
        computed_at: response.computed_at.as_ref().and_then(from_timestamp).map(|t| t.to_rfc3339_opts(chrono::SecondsFormat::Secs, true)),
        parts: response.parts.iter().map(|p| PartView::new(&response.vehicle_id, class, p, vehicle)).collect(),
        caution: caution_of(&response.caution),
    }
}

/// The server's caution, or ours when it sent none.
fn caution_of(from_server: &str) -> String {
    if from_server.is_empty() {
        SAFETY_CAUTION.to_owned()
    } else {
        from_server.to_owned()
    }
}

/// A vehicle's forecast as a table with notes and the caution.
pub fn render_forecast(response: &pb::GetVehicleForecastResponse, vehicle: Option<&pb::Vehicle>) -> String {
    let band = response.parts.first().map(|p| p.band_level).filter(|l| *l > 0.0).unwrap_or(0.8);
    let zone = if response.time_zone.is_empty() { "UTC" } else { response.time_zone.as_str() };
    let computed = response
        .computed_at
        .as_ref()
        .and_then(from_timestamp)
        .map(|t| format!(", computed {}", t.to_rfc3339_opts(chrono::SecondsFormat::Secs, true)))
        .unwrap_or_default();
    let mut text = format!(
        "Forecast for vehicle {} (fleet {}){computed}\nDates are in {zone}; bands hold the true value with probability {:.0} %.\n\n",
        response.vehicle_id,
        response.fleet_id,
        band * 100.0
    );
    let mut table = Table::new(&[
        ("axle", Align::Right),
        ("part", Align::Left),
        ("now mm (band)", Align::Right),
        ("min mm", Align::Right),
        ("wear mm/MJ", Align::Right),
        ("MJ/day", Align::Right),
        ("due earliest", Align::Left),
        ("due median", Align::Left),
        ("due latest", Align::Left),
        ("based on", Align::Left),
        ("inspections", Align::Right),
    ]);
    let mut notes = Vec::new();
    for part in &response.parts {
        let name = part_name(part.component, brake_type_of(vehicle, part.axle_index));
        table.row(vec![
            part.axle_index.to_string(),
            name.to_owned(),
            thickness_cell(part),
            number(part.min_thickness_mm, 1),
            with_uncertainty(part.wear_rate_mm_per_mj, part.wear_rate_stderr),
            number(part.daily_energy_mj, 1),
            date_cell(&part.due_earliest_date),
            date_cell(&part.due_median_date),
            date_cell(&part.due_latest_date),
            basis_name(part.basis).to_owned(),
            part.inspections_used.to_string(),
        ]);
        for note in &part.notes {
            notes.push(format!("  axle {} {name}: {note}", part.axle_index));
        }
    }
    text.push_str(&table.render());
    if !notes.is_empty() {
        text.push_str("\nNotes:\n");
        for note in notes {
            text.push_str(&note);
            text.push('\n');
        }
    }
    text.push('\n');
    text.push_str(&caution_of(&response.caution));
    text.push('\n');
    text
}

/// A fleet's due list: every page of ListDue.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct DueList {
    /// Parts due before the window's end, earliest first.
    pub parts: Vec<pb::DuePart>,
    /// Parts that cannot be forecast.
    pub undated: Vec<pb::UndatedPart>,
    /// The fleet's time zone.
    pub time_zone: String,
}

/// Every part due before `due_before`, following the pages, and the fleet's time zone.
pub async fn fetch_due(
    connection: &mut Connection,
    fleet_id: &str,
    due_before: DateTime<Utc>,
    band_level: f64,
    component: Option<PartArg>,
) -> anyhow::Result<(Vec<pb::DuePart>, String)> {
    let list = fetch_due_list(connection, fleet_id, due_before, band_level, component, false).await?;
    Ok((list.parts, list.time_zone))
}

/// Every part due before `due_before`, following the pages; with `include_undated`, also the
/// parts that cannot be forecast (the server sends them with the first page).
pub async fn fetch_due_list(
    connection: &mut Connection,
    fleet_id: &str,
    due_before: DateTime<Utc>,
    band_level: f64,
    component: Option<PartArg>,
    include_undated: bool,
) -> anyhow::Result<DueList> {
    let mut list = DueList::default();
    let mut page_token = String::new();
    let mut pages = 0u32;
    loop {
        let request = pb::ListDueRequest {
            fleet_id: fleet_id.to_owned(),
            due_before: Some(to_timestamp(due_before)),
            band_level,
            component: component.map(|c| c.component()).unwrap_or(pb::Component::Unspecified) as i32,
            page_size: 1000,
            page_token: page_token.clone(),
            include_undated,
        };
        pages += 1;
        let page = connection
            .forecast
            .list_due(request)
            .await
            .map_err(|s| explain(s, &format!("listing the parts due in fleet '{fleet_id}' (page {pages})")))?
            .into_inner();
        list.parts.extend(page.parts);
        list.undated.extend(page.undated);
        list.time_zone = page.time_zone;
        if page.next_page_token.is_empty() || page.next_page_token == page_token {
            return Ok(list);
        }
        page_token = page.next_page_token;
    }
}

pub use crate::part_names::VehicleIndex;

/// Runs `due`.
pub async fn due(server: &ServerTarget, args: &DueArgs, out: &mut impl Write) -> anyhow::Result<()> {
    let mut connection = Connection::open(server).await?;
    let zone = connection.fleet_time_zone(&args.fleet).await?;
    let due_before = match &args.before {
        Some(text) => parse_date_or_instant(text, zone).map_err(anyhow::Error::msg).context("--before")?,
        None => Utc::now() + chrono::Duration::days(i64::from(args.within_days.unwrap_or(DEFAULT_DUE_WINDOW_DAYS))),
    };
    let list = fetch_due_list(&mut connection, &args.fleet, due_before, args.band_level, args.component, true).await?;
    let vehicles: VehicleIndex =
        connection.all_vehicles(&args.fleet).await?.into_iter().map(|v| (v.vehicle_id.clone(), v)).collect();
    let format = if args.json { DueFormat::Json } else { args.format.unwrap_or(DueFormat::Table) };
    if format == DueFormat::Csv {
        out.write_all(crate::exports::csv::due_list(&list.parts, &list.undated, &vehicles)?.as_bytes())?;
    } else if format == DueFormat::Json {
        let view = DueListView {
            fleet_id: args.fleet.clone(),
            due_before: due_before.to_rfc3339_opts(chrono::SecondsFormat::Secs, true),
            parts: list.parts.iter().filter_map(|d| d.part.as_ref().map(|p| PartView::new(&d.vehicle_id, &d.vehicle_class, p, vehicles.get(&d.vehicle_id)))).collect(),
            undated: list.undated.iter().map(|u| UndatedView::new(u, vehicles.get(&u.vehicle_id))).collect(),
            time_zone: list.time_zone,
            caution: SAFETY_CAUTION.to_owned(),
        };
        serde_json::to_writer_pretty(&mut *out, &view)?;
        writeln!(out)?;
    } else {
        let until = due_before.with_timezone(&zone).format("%Y-%m-%d %H:%M");
        write!(out, "{}", render_due_list(&list.parts, &list.undated, &vehicles, &format!("{until} {}", list.time_zone)))?;
        writeln!(out, "\n{SAFETY_CAUTION}")?;
    }
    Ok(())
}

/// A due list as a table, with a count line naming the window end (no undated section).
pub fn render_due(parts: &[pb::DuePart], vehicles: &VehicleIndex, window_end: &str) -> String {
    render_due_list(parts, &[], vehicles, window_end)
}

/// The status column of a due part: OVERDUE (median date passed), DUE NOW (at or below its
/// minimum), or empty.
fn status_cell(part: &pb::PartForecast) -> &'static str {
    match (part.overdue, part.due_now) {
        (true, _) => "OVERDUE",
        (false, true) => "DUE NOW",
        (false, false) => "",
    }
}

/// A due list as a table with a count line naming the window end, then the parts that cannot
/// be forecast with their reasons. "No part is due" is said only when both are empty.
pub fn render_due_list(parts: &[pb::DuePart], undated: &[pb::UndatedPart], vehicles: &VehicleIndex, window_end: &str) -> String {
    let mut table = Table::new(&[
        ("status", Align::Left),
        ("due earliest", Align::Left),
        ("due median", Align::Left),
        ("due latest", Align::Left),
        ("vehicle", Align::Left),
        ("class", Align::Left),
        ("axle", Align::Right),
        ("part", Align::Left),
        ("now mm", Align::Right),
        ("min mm", Align::Right),
        ("based on", Align::Left),
    ]);
    for due in parts {
        let Some(part) = &due.part else { continue };
        table.row(vec![
            status_cell(part).to_owned(),
            date_cell(&part.due_earliest_date),
            date_cell(&part.due_median_date),
            date_cell(&part.due_latest_date),
            due.vehicle_id.clone(),
            due.vehicle_class.clone(),
            part.axle_index.to_string(),
            part_name(part.component, brake_type_of(vehicles.get(&due.vehicle_id), part.axle_index)).to_owned(),
            number(part.current_thickness_mm, 1),
            number(part.min_thickness_mm, 1),
            basis_name(part.basis).to_owned(),
        ]);
    }
    let count = table.len();
    let mut text = if count == 0 && undated.is_empty() {
        return format!("No part is due before {window_end}.\n");
    } else if count == 0 {
        format!("No part is known to be due before {window_end}, but some parts cannot be forecast (below).\n")
    } else {
        let vehicles_due = parts.iter().map(|d| d.vehicle_id.as_str()).collect::<std::collections::HashSet<_>>().len();
        let urgent = parts.iter().filter_map(|d| d.part.as_ref()).filter(|p| p.overdue || p.due_now).count();
        let urgent_text = if urgent > 0 { format!(" ({urgent} overdue or due now)") } else { String::new() };
        format!("{count} part(s){urgent_text} on {vehicles_due} vehicle(s) may reach minimum thickness before {window_end}:\n\n{}", table.render())
    };
    if !undated.is_empty() {
        let mut cannot = Table::new(&[("vehicle", Align::Left), ("class", Align::Left), ("axle", Align::Right), ("part", Align::Left), ("why", Align::Left)]);
        for part in undated {
            cannot.row(vec![
                part.vehicle_id.clone(),
                part.vehicle_class.clone(),
                part.axle_index.to_string(),
                part_name(part.component, brake_type_of(vehicles.get(&part.vehicle_id), part.axle_index)).to_owned(),
                part.reason.clone(),
            ]);
        }
        let vehicles_undated = undated.iter().map(|u| u.vehicle_id.as_str()).collect::<std::collections::HashSet<_>>().len();
        text.push_str(&format!(
            "\n{} part(s) on {vehicles_undated} vehicle(s) cannot be forecast: no due date can be given, so they may already be worn. Inspect them:\n\n{}",
            undated.len(),
            cannot.render()
        ));
    }
    text
}

#[cfg(test)]
mod tests {
    use super::*;

    pub(crate) fn part(axle: u32, component: pb::Component, earliest: &str) -> pb::PartForecast {
        pb::PartForecast {
            axle_index: axle,
            component: component as i32,
            current_thickness_mm: 7.46,
            current_thickness_low_mm: 6.9,
            current_thickness_high_mm: 8.04,
            min_thickness_mm: 3.0,
            wear_rate_mm_per_mj: 0.0123,
            wear_rate_stderr: 0.0011,
            daily_energy_mj: 14.26,
            due_earliest_date: earliest.into(),
            due_median_date: "2025-10-01".into(),
            due_latest_date: "2025-11-20".into(),
            basis: pb::ForecastBasis::Combined as i32,
            inspections_used: 3,
            notes: vec![],
            band_level: 0.8,
            ..Default::default()
        }
    }

    fn vehicle() -> pb::Vehicle {
        let axle = |i: u32, t: pb::BrakeType| pb::AxleBrake { axle_index: i, brake_type: t as i32, ..Default::default() };
        pb::Vehicle {
            vehicle_id: "bus-17".into(),
            vehicle_class: "city-bus".into(),
            axles: vec![axle(1, pb::BrakeType::Disc), axle(2, pb::BrakeType::Drum)],
            ..Default::default()
        }
    }

    #[test]
    fn the_forecast_table_names_parts_by_brake_type_and_ends_with_the_caution() {
        let mut drum = part(2, pb::Component::Disc, "");
        drum.notes = vec!["fell back to the fleet rate".into()];
        drum.due_median_date = String::new();
        drum.due_latest_date = String::new();
        let response = pb::GetVehicleForecastResponse {
            fleet_id: "north".into(),
            vehicle_id: "bus-17".into(),
            parts: vec![part(1, pb::Component::Friction, "2025-09-01"), drum],
            time_zone: "Europe/Lisbon".into(),
            ..Default::default()
        };
        let text = render_forecast(&response, Some(&vehicle()));
        let lines: Vec<&str> = text.lines().collect();
        assert_eq!(lines[0], "Forecast for vehicle bus-17 (fleet north)");
        assert!(lines[1].contains("Europe/Lisbon") && lines[1].contains("80 %"), "{text}");
        assert!(lines[3].starts_with("axle  part  now mm (band)  min mm"), "{text}");
        assert!(lines[5].starts_with("   1  pad   7.5 (6.9-8.0)     3.0  0.0123 ± 0.0011    14.3  2025-09-01"), "{text}");
        assert!(lines[3].contains("  wear mm/MJ  MJ/day"), "{text}");
        assert!(lines[6].starts_with("   2  drum") && lines[6].contains("  -  "), "unset dates show as '-': {text}");
        assert!(text.contains("Notes:\n  axle 2 drum: fell back to the fleet rate\n"), "{text}");
        assert!(text.trim_end().ends_with(SAFETY_CAUTION), "{text}");
    }

    #[test]
    fn the_due_table_counts_parts_and_vehicles() {
        let due = |vehicle: &str, p: pb::PartForecast| pb::DuePart { fleet_id: "north".into(), vehicle_id: vehicle.into(), vehicle_class: "city-bus".into(), part: Some(p) };
        let parts = vec![
            due("bus-17", part(2, pb::Component::Friction, "2025-08-01")),
            due("bus-17", part(1, pb::Component::Friction, "2025-08-03")),
            due("bus-99", part(1, pb::Component::Disc, "2025-08-09")),
        ];
        let vehicles: VehicleIndex = [("bus-17".to_owned(), vehicle())].into_iter().collect();
        let text = render_due(&parts, &vehicles, "2025-09-30 00:00 UTC");
        let lines: Vec<&str> = text.lines().collect();
        assert_eq!(lines[0], "3 part(s) on 2 vehicle(s) may reach minimum thickness before 2025-09-30 00:00 UTC:");
        assert!(lines[4].contains("bus-17") && lines[4].contains(" lining "), "axle 2 of bus-17 is a drum brake: {text}");
        assert!(lines[5].contains(" pad "), "{text}");
        assert!(lines[6].contains("bus-99") && lines[6].contains("rotor/drum"), "unknown vehicle gives the generic name: {text}");
        assert_eq!(render_due(&[], &vehicles, "2025-09-30"), "No part is due before 2025-09-30.\n");
    }

    #[test]
    fn json_view_keeps_units_in_names_and_the_caution() {
        let response = pb::GetVehicleForecastResponse {
            fleet_id: "north".into(),
            vehicle_id: "bus-17".into(),
            parts: vec![part(1, pb::Component::Friction, "2025-09-01")],
            ..Default::default()
        };
        let json = serde_json::to_value(forecast_view(&response, Some(&vehicle()))).expect("json");
        assert_eq!(json["parts"][0]["part"], "pad");
        assert_eq!(json["parts"][0]["wear_rate_mm_per_mj"], 0.0123);
        assert_eq!(json["parts"][0]["due_earliest_date"], "2025-09-01");
        assert_eq!(json["caution"], SAFETY_CAUTION);
    }

    #[test]
    fn band_levels_must_be_probabilities() {
        assert_eq!(parse_band_level("0.9"), Ok(0.9));
        assert!(parse_band_level("1").is_err());
        assert!(parse_band_level("80").is_err());
        assert!(parse_band_level("x").is_err());
    }
}
