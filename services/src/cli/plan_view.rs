//! `brakeledger plan`: a workshop plan from PlanVisits, printed day by day with each visit's
//! jobs and hours, then what could not be booked in time, then the safety caution.

use std::io::Write;

use anyhow::Context;
use brakeledger_proto::v1 as pb;
use chrono::NaiveDate;
use serde::Serialize;

use crate::cli::client::{explain, Connection, ServerTarget};
use crate::cli::dates::{start_of_day, to_timestamp, today_in};
use crate::cli::forecast_view::{parse_band_level, VehicleIndex};
use crate::cli::parts::{brake_type_of, part_name};
use crate::cli::table::{number, Align, Table};
use crate::SAFETY_CAUTION;

/// Examples of `plan`.
pub const PLAN_EXAMPLES: &str = "\
Examples:
  brakeledger plan --fleet north
  brakeledger plan --fleet north --from 2025-04-07 --days 28 --hours-per-day 16 --bundle-days 21
  brakeledger plan --fleet north --pad-job-hours 2 --rotor-job-hours 4 --json

Parts are taken earliest due first and booked on the first day with room that is still
before their due date; other parts of the same vehicle due soon after ride along in the same
visit (a rotor or drum job includes that axle's pads or linings). Dates are calendar dates in
the fleet's time zone.";

/// Flags of `plan`.
#[derive(Debug, clap::Args)]
pub struct PlanArgs {
    /// Fleet identifier.
    #[arg(long)]
    pub fleet: String,
    /// First day of the plan (YYYY-MM-DD); default today in the fleet's time zone.
    #[arg(long)]
    pub from: Option<NaiveDate>,
    /// Number of days in the plan, the first included.
    #[arg(long, default_value_t = 14, value_parser = clap::value_parser!(u32).range(1..=367))]
    pub days: u32,
    /// Workshop hours available per day.
    #[arg(long, default_value_t = 8.0)]
    pub hours_per_day: f64,
    /// Hours to replace one axle's pads or linings (default: the server's, 1.5).
    #[arg(long)]
    pub pad_job_hours: Option<f64>,
    /// Hours to replace one axle's rotors or drums, pads included (default: the server's, 3).
    #[arg(long)]
    pub rotor_job_hours: Option<f64>,
    /// Parts of one vehicle due within this many days of its first part share a visit
    /// (default: the server's, 14).
    #[arg(long)]
    pub bundle_days: Option<u32>,
    /// Band level: 0.5, 0.8, 0.9 or 0.95.
    #[arg(long, default_value_t = 0.8, value_parser = parse_band_level)]
    pub band_level: f64,
    /// Print JSON instead of tables.
    #[arg(long)]
    pub json: bool,
}

/// The settings of a plan request besides the fleet and the days.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PlanSettings {
    /// Workshop hours per day.
    pub hours_per_day: f64,
    /// Hours per friction job; 0 means the server's default.
    pub pad_job_hours: f64,
    /// Hours per rotor or drum job; 0 means the server's default.
    pub rotor_job_hours: f64,
    /// Bundling window, days; 0 means the server's default.
    pub bundle_days: u32,
    /// Band level.
    pub band_level: f64,
}

/// Calls PlanVisits for `days` days from `first_day` (calendar days in `zone`).
pub async fn fetch_plan(
    connection: &mut Connection,
    fleet_id: &str,
    zone: chrono_tz::Tz,
    first_day: NaiveDate,
    days: u32,
    settings: PlanSettings,
) -> anyhow::Result<pb::PlanVisitsResponse> {
    let last_day = first_day + chrono::Duration::days(i64::from(days.max(1)) - 1);
    let from = start_of_day(first_day, zone).map_err(anyhow::Error::msg)?;
    let to = start_of_day(last_day, zone).map_err(anyhow::Error::msg)?;
    let request = pb::PlanVisitsRequest {
        fleet_id: fleet_id.to_owned(),
        from: Some(to_timestamp(from)),
        to: Some(to_timestamp(to)),
        capacity_hours_per_day: settings.hours_per_day,
        friction_job_hours: settings.pad_job_hours,
        disc_job_hours: settings.rotor_job_hours,
        bundle_within_days: settings.bundle_days,
        band_level: settings.band_level,
    };
    Ok(connection
        .forecast
        .plan_visits(request)
        .await
        .map_err(|s| explain(s, &format!("planning visits for fleet '{fleet_id}' from {first_day} to {last_day}")))?
        .into_inner())
}

/// Runs `plan`.
pub async fn plan(server: &ServerTarget, args: &PlanArgs, out: &mut impl Write) -> anyhow::Result<()> {
    if !(args.hours_per_day.is_finite() && args.hours_per_day > 0.0) {
        anyhow::bail!("--hours-per-day must be a number of hours greater than 0");
    }
    for (flag, value) in [("--pad-job-hours", args.pad_job_hours), ("--rotor-job-hours", args.rotor_job_hours)] {
        if value.is_some_and(|h| !(h.is_finite() && h > 0.0)) {
            anyhow::bail!("{flag} must be a number of hours greater than 0");
        }
    }
    let mut connection = Connection::open(server).await?;
    let zone = connection.fleet_time_zone(&args.fleet).await?;
    let first_day = args.from.unwrap_or_else(|| today_in(zone));
    let settings = PlanSettings {
        hours_per_day: args.hours_per_day,
        pad_job_hours: args.pad_job_hours.unwrap_or(0.0),
        rotor_job_hours: args.rotor_job_hours.unwrap_or(0.0),
        bundle_days: args.bundle_days.unwrap_or(0),
        band_level: args.band_level,
    };
    let response = fetch_plan(&mut connection, &args.fleet, zone, first_day, args.days, settings).await?;
    let vehicles: VehicleIndex =
        connection.all_vehicles(&args.fleet).await?.into_iter().map(|v| (v.vehicle_id.clone(), v)).collect();
    if args.json {
        serde_json::to_writer_pretty(&mut *out, &plan_view(&response, &vehicles)).context("writing JSON")?;
        writeln!(out)?;
    } else {
        let last_day = first_day + chrono::Duration::days(i64::from(args.days) - 1);
        let heading = format!(
            "Workshop plan for fleet {}, {first_day} to {last_day} ({}), {} h per day",
            args.fleet,
            if response.time_zone.is_empty() { "UTC" } else { &response.time_zone },
            number(args.hours_per_day, 1)
        );
        write!(out, "{}", render_plan(&heading, &response, &vehicles))?;
    }
    Ok(())
}

/// One visit for scripts.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct VisitView {
    /// Day of the visit (fleet's zone).
    pub visit_date: String,
    /// Vehicle identifier.
    pub vehicle_id: String,
    /// Hours booked.
    pub hours: f64,
    /// Jobs.
    pub jobs: Vec<JobView>,
}

/// One job for scripts.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct JobView {
    /// Axle, 1 = front-most.
    pub axle_index: u32,
    /// pad, lining, rotor or drum.
    pub part: &'static str,
    /// Early end of the part's due band (calendar date).
    pub due_earliest_date: String,
    /// Hours booked.
    pub hours: f64,
}

/// A part that could not be booked, for scripts.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct UnplannedView {
    /// Vehicle identifier.
    pub vehicle_id: String,
    /// Axle.
    pub axle_index: u32,
    /// pad, lining, rotor or drum.
    pub part: &'static str,
    /// Early end of its due band (calendar date).
    pub due_earliest_date: String,
    /// Why.
    pub reason: String,
}

/// A plan for scripts.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PlanView {
    /// Time zone of the dates.
    pub time_zone: String,
    /// Visits by day.
    pub visits: Vec<VisitView>,
    /// Parts not booked in time.
    pub unplanned: Vec<UnplannedView>,
    /// The safety caution.
    pub caution: String,
}

/// The JSON view of a plan.
pub fn plan_view(response: &pb::PlanVisitsResponse, vehicles: &VehicleIndex) -> PlanView {
    PlanView {
        time_zone: response.time_zone.clone(),
        visits: response
            .visits
            .iter()
            .map(|v| VisitView {
                visit_date: v.visit_date.clone(),
                vehicle_id: v.vehicle_id.clone(),
                hours: v.hours,
                jobs: v
                    .jobs
                    .iter()
                    .map(|j| JobView {
                        axle_index: j.axle_index,
                        part: part_name(j.component, brake_type_of(vehicles.get(&v.vehicle_id), j.axle_index)),
                        due_earliest_date: j.due_earliest_date.clone(),
                        hours: j.hours,
                    })
                    .collect(),
            })
            .collect(),
        unplanned: response
            .unplanned
            .iter()
            .map(|u| UnplannedView {
                vehicle_id: u.vehicle_id.clone(),
                axle_index: u.axle_index,
                part: part_name(u.component, brake_type_of(vehicles.get(&u.vehicle_id), u.axle_index)),
                due_earliest_date: u.due_earliest_date.clone(),
                reason: u.reason.clone(),
            })
            .collect(),
        caution: if response.caution.is_empty() { SAFETY_CAUTION.to_owned() } else { response.caution.clone() },
    }
}

/// A plan as text: heading, visits (the date shown on each day's first visit), totals, what
/// could not be booked, the caution.
pub fn render_plan(heading: &str, response: &pb::PlanVisitsResponse, vehicles: &VehicleIndex) -> String {
    let view = plan_view(response, vehicles);
    let mut text = format!("{heading}\n\n");
    if view.visits.is_empty() {
        text.push_str("No visit needed in this period.\n");
    } else {
        let mut table = Table::new(&[("day", Align::Left), ("vehicle", Align::Left), ("jobs (part, due earliest)", Align::Left), ("hours", Align::Right)]);
        let mut previous_day = "";
        for visit in &view.visits {
            let day = if visit.visit_date == previous_day { String::new() } else { visit.visit_date.clone() };
            previous_day = &visit.visit_date;
            let jobs: Vec<String> = visit.jobs.iter().map(|j| format!("axle {} {} ({})", j.axle_index, j.part, j.due_earliest_date)).collect();
            table.row(vec![day, visit.vehicle_id.clone(), jobs.join(", "), number(visit.hours, 1)]);
        }
        text.push_str(&table.render());
        let jobs: usize = view.visits.iter().map(|v| v.jobs.len()).sum();
        let hours: f64 = view.visits.iter().map(|v| v.hours).sum();
        let days = view.visits.iter().map(|v| v.visit_date.as_str()).collect::<std::collections::BTreeSet<_>>().len();
        text.push_str(&format!("\n{} visit(s) on {days} day(s): {jobs} job(s), {} workshop hours.\n", view.visits.len(), number(hours, 1)));
    }
    if !view.unplanned.is_empty() {
        text.push_str(&format!("\n{} part(s) could not be booked before they are due:\n\n", view.unplanned.len()));
        let mut table = Table::new(&[
            ("vehicle", Align::Left),
            ("axle", Align::Right),
            ("part", Align::Left),
            ("due earliest", Align::Left),
            ("reason", Align::Left),
        ]);
        for u in &view.unplanned {
            table.row(vec![u.vehicle_id.clone(), u.axle_index.to_string(), u.part.to_owned(), u.due_earliest_date.clone(), u.reason.clone()]);
        }
        text.push_str(&table.render());
    }
    text.push('\n');
    text.push_str(&view.caution);
    text.push('\n');
    text
}

#[cfg(test)]
mod tests {
    use super::*;

    fn job(axle: u32, component: pb::Component, due: &str, hours: f64) -> pb::PlannedJob {
        pb::PlannedJob { axle_index: axle, component: component as i32, due_earliest_date: due.into(), hours, ..Default::default() }
    }

    #[test]
    fn visits_are_grouped_by_day_with_totals_and_unbooked_parts() {
        let response = pb::PlanVisitsResponse {
            visits: vec![
                pb::Visit {
                    vehicle_id: "bus-17".into(),
                    visit_date: "2025-03-03".into(),
                    jobs: vec![job(1, pb::Component::Friction, "2025-03-05", 1.5), job(2, pb::Component::Disc, "2025-03-12", 3.0)],
                    hours: 4.5,
                },
                pb::Visit { vehicle_id: "van-2".into(), visit_date: "2025-03-03".into(), jobs: vec![job(1, pb::Component::Friction, "2025-03-04", 1.5)], hours: 1.5 },
                pb::Visit { vehicle_id: "van-9".into(), visit_date: "2025-03-04".into(), jobs: vec![job(1, pb::Component::Friction, "2025-03-06", 1.5)], hours: 1.5 },
            ],
            unplanned: vec![pb::UnplannedPart {
                vehicle_id: "van-4".into(),
                axle_index: 1,
                component: pb::Component::Friction as i32,
                due_earliest_date: "2025-03-01".into(),
                reason: "already due before the plan starts".into(),
                ..Default::default()
            }],
            time_zone: "UTC".into(),
            caution: String::new(),
        };
        let text = render_plan("Workshop plan", &response, &VehicleIndex::new());
        let lines: Vec<&str> = text.lines().collect();
        assert_eq!(lines[2], "day         vehicle  jobs (part, due earliest)                                       hours");
        assert_eq!(lines[4], "2025-03-03  bus-17   axle 1 pad/lining (2025-03-05), axle 2 rotor/drum (2025-03-12)    4.5");
        assert!(lines[5].starts_with("            van-2"), "same day: the date is not repeated: {text}");
        assert!(lines[6].starts_with("2025-03-04  van-9"), "{text}");
        assert!(text.contains("3 visit(s) on 2 day(s): 4 job(s), 7.5 workshop hours."), "{text}");
        assert!(text.contains("1 part(s) could not be booked before they are due:"), "{text}");
        assert!(text.contains("van-4       1  pad/lining  2025-03-01    already due before the plan starts"), "{text}");
        assert!(text.trim_end().ends_with(SAFETY_CAUTION), "a plan without a server caution still carries ours");
    }
}
