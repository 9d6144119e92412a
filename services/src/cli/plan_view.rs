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
  brakeledger plan --fleet north --days 28 --format ics > brake-visits.ics
  brakeledger plan --fleet north --days 28 --format csv > brake-visits.csv

Parts already due (due now, or overdue) are booked first, on the first day with free hours.
Every other part is booked as late as is safe: on or before the day that leaves
--safety-margin-days (default 7) before the early end of its due band, earlier only when that
day is full or to share a visit with the same vehicle's other work (a rotor or drum job
includes that axle's pads or linings). 'gives up' is the wear life, in days, between the visit
and the part's median due date. Dates are calendar dates in the fleet's time zone.";

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
    /// Days kept between the visit of a part not yet due and the early end of its due band
    /// (default: the server's, 7).
    #[arg(long, value_parser = clap::value_parser!(u32).range(0..=366))]
    pub safety_margin_days: Option<u32>,
    /// Band level: 0.5, 0.8, 0.9 or 0.95.
    #[arg(long, default_value_t = 0.8, value_parser = parse_band_level)]
    pub band_level: f64,
    /// Print JSON instead of tables (the same as --format json).
    #[arg(long)]
    pub json: bool,
    /// Output: table (default), json, csv (one row per job, then the parts not booked) or ics
    /// (iCalendar, RFC 5545: one all-day event per visit, for a shared workshop calendar).
    #[arg(long, value_enum, conflicts_with = "json")]
    pub format: Option<PlanFormat>,
}

/// What `plan` prints.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum PlanFormat {
    /// Aligned text for people.
    Table,
    /// JSON for scripts.
    Json,
    /// CSV for spreadsheets.
    Csv,
    /// iCalendar for calendars.
    Ics,
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
    /// Safety margin before a part's due date, days; `None` means the server's default.
    pub safety_margin_days: Option<u32>,
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
        safety_margin_days: settings.safety_margin_days,
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
        safety_margin_days: args.safety_margin_days,
    };
    let response = fetch_plan(&mut connection, &args.fleet, zone, first_day, args.days, settings).await?;
    let vehicles: VehicleIndex =
        connection.all_vehicles(&args.fleet).await?.into_iter().map(|v| (v.vehicle_id.clone(), v)).collect();
    match if args.json { PlanFormat::Json } else { args.format.unwrap_or(PlanFormat::Table) } {
        PlanFormat::Json => {
            serde_json::to_writer_pretty(&mut *out, &plan_view(&response, &vehicles)).context("writing JSON")?;
            writeln!(out)?;
        }
        PlanFormat::Csv => out.write_all(crate::exports::csv::visit_plan(&response, &vehicles)?.as_bytes())?,
        PlanFormat::Ics => out.write_all(crate::exports::icalendar::visit_plan(&response, &args.fleet, &vehicles, chrono::Utc::now()).as_bytes())?,
        PlanFormat::Table => {
            let last_day = first_day + chrono::Duration::days(i64::from(args.days) - 1);
            let heading = format!(
                "Workshop plan for fleet {}, {first_day} to {last_day} ({}), {} h per day, safety margin {} day(s)",
                args.fleet,
                if response.time_zone.is_empty() { "UTC" } else { &response.time_zone },
                number(args.hours_per_day, 1),
                response.safety_margin_days
            );
            write!(out, "{}", render_plan(&heading, &response, &vehicles))?;
        }
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
    /// Median due date (calendar date).
    pub due_median_date: String,
    /// Wear life given up by replacing the part on the visit day, days.
    pub wear_life_given_up_days: u32,
    /// Already due when the plan starts (due now, or overdue).
    pub already_due: bool,
    /// Booked inside the safety margin because every earlier day was full.
    pub inside_safety_margin: bool,
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
    /// Safety margin applied, days.
    pub safety_margin_days: u32,
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
                        due_median_date: j.due_median_date.clone(),
                        wear_life_given_up_days: j.wear_life_given_up_days,
                        already_due: j.already_due,
                        inside_safety_margin: j.inside_safety_margin,
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
        safety_margin_days: response.safety_margin_days,
        caution: if response.caution.is_empty() { SAFETY_CAUTION.to_owned() } else { response.caution.clone() },
    }
}

/// A plan as text: heading, one row per job (the date on each day's first job, the vehicle on
/// each visit's first job), totals, what could not be booked, the caution.
pub fn render_plan(heading: &str, response: &pb::PlanVisitsResponse, vehicles: &VehicleIndex) -> String {
    let view = plan_view(response, vehicles);
    let mut text = format!("{heading}\n\n");
    if view.visits.is_empty() {
        text.push_str("No visit needed in this period.\n");
    } else {
        let mut table = Table::new(&[
            ("day", Align::Left),
            ("vehicle", Align::Left),
            ("axle", Align::Right),
            ("part", Align::Left),
            ("due earliest", Align::Left),
            ("due median", Align::Left),
            ("gives up (days)", Align::Right),
            ("hours", Align::Right),
            ("note", Align::Left),
        ]);
        let mut previous_day = "";
        for visit in &view.visits {
            for (n, job) in visit.jobs.iter().enumerate() {
                let day = if n > 0 || visit.visit_date == previous_day { String::new() } else { visit.visit_date.clone() };
                let vehicle = if n == 0 { visit.vehicle_id.clone() } else { String::new() };
                let note = if job.already_due {
                    "already due"
                } else if job.inside_safety_margin {
                    "inside the safety margin: earlier days full"
                } else {
                    ""
                };
                table.row(vec![
                    day,
                    vehicle,
                    job.axle_index.to_string(),
                    job.part.to_owned(),
                    job.due_earliest_date.clone(),
                    job.due_median_date.clone(),
                    job.wear_life_given_up_days.to_string(),
                    number(job.hours, 1),
                    note.to_owned(),
                ]);
            }
            previous_day = &visit.visit_date;
        }
        text.push_str(&table.render());
        let jobs: usize = view.visits.iter().map(|v| v.jobs.len()).sum();
        let hours: f64 = view.visits.iter().map(|v| v.hours).sum();
        let given_up: u64 = view.visits.iter().flat_map(|v| &v.jobs).map(|j| u64::from(j.wear_life_given_up_days)).sum();
        let days = view.visits.iter().map(|v| v.visit_date.as_str()).collect::<std::collections::BTreeSet<_>>().len();
        text.push_str(&format!(
            "\n{} visit(s) on {days} day(s): {jobs} job(s), {} workshop hours, {given_up} day(s) of wear life given up in all.\n",
            view.visits.len(),
            number(hours, 1)
        ));
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

    fn job(axle: u32, component: pb::Component, due: &str, median: &str, given_up: u32, hours: f64) -> pb::PlannedJob {
        pb::PlannedJob {
            axle_index: axle,
            component: component as i32,
            due_earliest_date: due.into(),
            due_median_date: median.into(),
            wear_life_given_up_days: given_up,
            hours,
            ..Default::default()
        }
    }

    /// A vehicle with discs on axle 1 and drums on axle 2.
    fn vehicle(id: &str) -> (String, pb::Vehicle) {
        let axle = |index: u32, brake: pb::BrakeType| pb::AxleBrake { axle_index: index, brake_type: brake as i32, ..Default::default() };
        (id.to_owned(), pb::Vehicle { vehicle_id: id.into(), axles: vec![axle(1, pb::BrakeType::Disc), axle(2, pb::BrakeType::Drum)], ..Default::default() })
    }

    #[test]
    fn one_row_per_job_with_the_wear_life_given_up_totals_and_unbooked_parts() {
        let due_now = pb::PlannedJob { already_due: true, ..job(1, pb::Component::Friction, "2025-03-01", "2025-03-01", 0, 1.5) };
        let response = pb::PlanVisitsResponse {
            visits: vec![
                pb::Visit {
                    vehicle_id: "bus-17".into(),
                    visit_date: "2025-03-03".into(),
                    jobs: vec![due_now, job(2, pb::Component::Disc, "2025-03-12", "2025-03-30", 27, 3.0)],
                    hours: 4.5,
                },
                pb::Visit { vehicle_id: "van-2".into(), visit_date: "2025-03-03".into(), jobs: vec![job(1, pb::Component::Friction, "2025-03-11", "2025-03-20", 17, 1.5)], hours: 1.5 },
                pb::Visit {
                    vehicle_id: "van-9".into(),
                    visit_date: "2025-03-04".into(),
                    jobs: vec![pb::PlannedJob { inside_safety_margin: true, ..job(1, pb::Component::Friction, "2025-03-06", "2025-03-09", 5, 1.5) }],
                    hours: 1.5,
                },
            ],
            unplanned: vec![pb::UnplannedPart {
                vehicle_id: "bus-17".into(),
                axle_index: 2,
                component: pb::Component::Friction as i32,
                due_earliest_date: "2025-03-01".into(),
                reason: "already due, and every workshop day of the plan is full".into(),
                ..Default::default()
            }],
            time_zone: "UTC".into(),
            caution: String::new(),
            safety_margin_days: 7,
        };
        let vehicles: VehicleIndex = ["bus-17", "van-2", "van-9"].into_iter().map(vehicle).collect();
        let text = render_plan("Workshop plan", &response, &vehicles);
        let lines: Vec<&str> = text.lines().collect();
        assert!(lines[2].starts_with("day         vehicle  axle  part  due earliest  due median  gives up (days)  hours  note"), "{text}");
        assert_eq!(lines[4], "2025-03-03  bus-17      1  pad   2025-03-01    2025-03-01                0    1.5  already due");
        assert_eq!(lines[5], "                        2  drum  2025-03-12    2025-03-30               27    3.0", "{text}");
        assert!(lines[6].starts_with("            van-2       1  pad"), "same day: the date is not repeated: {text}");
        assert!(lines[7].starts_with("2025-03-04  van-9") && lines[7].ends_with("inside the safety margin: earlier days full"), "{text}");
        assert!(text.contains("3 visit(s) on 2 day(s): 4 job(s), 7.5 workshop hours, 49 day(s) of wear life given up in all."), "{text}");
        assert!(text.contains("1 part(s) could not be booked before they are due:"), "{text}");
        assert!(text.contains("bus-17      2  lining  2025-03-01    already due"), "{text}");
        assert!(text.trim_end().ends_with(SAFETY_CAUTION), "a plan without a server caution still carries ours");
    }
}
