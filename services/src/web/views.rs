//! The page's views: the fleets a caller may read, one fleet at a glance, the due list with
//! filters, one vehicle with its wear charts, and the visit plan with its downloads. Each reads
//! through [`Reader`] and renders escaped HTML.

use axum::extract::{Path, Query, State};
use axum::response::Response;
use brakeledger_proto::v1 as pb;
use chrono::{NaiveDate, Utc};
use http::{HeaderMap, StatusCode};
use serde::Deserialize;

use super::html::{badge, escape, fleet_href, link, page, query_value, table, vehicle_href};
use super::reads::{DueParts, PlanAsk, Reader};
use super::session::{caller, page_response};
use crate::cli::dates::today_in;
use crate::error::WebError;
use crate::exports::{due_status, job_note, undated_status};
use crate::part_names::{basis_name, vehicle_part_name, VehicleIndex};
use crate::state::AppState;

/// Window of the fleet overview, days: far enough to date every part that has a date.
const OVERVIEW_WINDOW_DAYS: i64 = 20 * 366;
/// Default window of the due list, days.
const DEFAULT_DUE_DAYS: u32 = 60;
/// Longest due-list window, days.
const MAX_DUE_DAYS: u32 = 3660;

/// `1.5` for mm and hours.
fn one_decimal(value: f64) -> String {
    format!("{value:.1}")
}

/// A date cell: the date, or a dash.
fn date_cell(date: &str) -> String {
    if date.is_empty() { "–".to_owned() } else { escape(date) }
}

/// `GET /`: the fleets the caller may read.
pub async fn fleets(State(state): State<AppState>, headers: HeaderMap) -> Result<Response, WebError> {
    let reader = Reader::new(&state, caller(&state, &headers)?);
    let rows: Vec<(String, Vec<String>)> = reader
        .fleets()
        .await?
        .iter()
        .filter_map(|summary| {
            let fleet = summary.fleet.as_ref()?;
            Some((String::new(), vec![
                link(&fleet_href(&fleet.fleet_id, ""), &fleet.fleet_id),
                escape(&fleet.display_name),
                escape(if fleet.time_zone.is_empty() { "UTC" } else { &fleet.time_zone }),
                summary.vehicle_count.to_string(),
            ]))
        })
        .collect();
    let body = if rows.is_empty() { "<p>No fleet this token may read.</p>".to_owned() } else { table("fleets", &["Fleet", "Name", "Time zone", "Vehicles"], &rows) };
    Ok(page_response(StatusCode::OK, &page("Fleets", None, &body)))
}

/// How urgent a vehicle's row is in the overview: lower comes first.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
enum Urgency {
    /// A part overdue or due now.
    Due,
    /// A part that cannot be forecast (it may already be worn).
    CannotTell,
    /// Dated parts only.
    Dated,
}

/// `GET /fleets/{fleet}`: every vehicle with its next due part; overdue, due-now and
/// unforecastable vehicles first, then by the early end of the next part's due band.
pub async fn fleet_at_a_glance(State(state): State<AppState>, Path(fleet_id): Path<String>, headers: HeaderMap) -> Result<Response, WebError> {
    let reader = Reader::new(&state, caller(&state, &headers)?);
    let fleet = reader.fleet(&fleet_id).await?;
    let vehicles = reader.vehicles(&fleet_id).await?;
    let due = reader.due(&fleet_id, Utc::now() + chrono::Duration::days(OVERVIEW_WINDOW_DAYS), pb::Component::Unspecified).await?;
    let mut ranked = Vec::new();
    for vehicle in vehicles.values() {
        let next = due.parts.iter().find(|d| d.vehicle_id == vehicle.vehicle_id).and_then(|d| d.part.as_ref());
        let undated: Vec<&pb::UndatedPart> = due.undated.iter().filter(|u| u.vehicle_id == vehicle.vehicle_id).collect();
        let urgency = match next {
            Some(part) if part.overdue || part.due_now => Urgency::Due,
            _ if !undated.is_empty() => Urgency::CannotTell,
            _ => Urgency::Dated,
        };
        let order = next.and_then(|p| p.due_earliest.as_ref()).map_or(i64::MAX, |t| t.seconds);
        ranked.push(((urgency, order, vehicle.vehicle_id.clone()), vehicle, next, undated));
    }
    ranked.sort_by(|a, b| a.0.cmp(&b.0));
    let rows: Vec<(String, Vec<String>)> = ranked
        .iter()
        .map(|((urgency, _, _), vehicle, next, undated)| {
            let status = match (urgency, next) {
                (Urgency::Due, Some(part)) => due_status(part),
                (Urgency::CannotTell, _) => undated_status(undated[0]),
                (_, Some(part)) => due_status(part),
                (_, None) => "no parts",
            };
            let part_cell = next.map_or_else(String::new, |p| format!("axle {} {}", p.axle_index, vehicle_part_name(&vehicles, &vehicle.vehicle_id, p.axle_index, p.component)));
            let note = if undated.is_empty() {
                String::new()
            } else {
                let mut reasons: Vec<&str> = Vec::new();
                for reason in undated.iter().map(|u| u.reason.as_str()) {
                    if !reasons.contains(&reason) {
                        reasons.push(reason);
                    }
                }
                escape(&format!("{} part(s) cannot be forecast: {}", undated.len(), reasons.join("; ")))
            };
            (status.replace(' ', "-"), vec![
                link(&vehicle_href(&fleet_id, &vehicle.vehicle_id), &vehicle.vehicle_id),
                escape(&vehicle.vehicle_class),
                badge(status),
                escape(&part_cell),
                date_cell(next.map_or("", |p| &p.due_earliest_date)),
                date_cell(next.map_or("", |p| &p.due_median_date)),
                date_cell(next.map_or("", |p| &p.due_latest_date)),
                next.map_or_else(String::new, |p| one_decimal(p.current_thickness_mm)),
                next.map_or_else(String::new, |p| one_decimal(p.min_thickness_mm)),
                note,
            ])
        })
        .collect();
    let count = |u: Urgency| ranked.iter().filter(|r| r.0 .0 == u).count();
    let settings = fleet.fleet.unwrap_or_default();
    let zone = if settings.time_zone.is_empty() { "UTC".to_owned() } else { settings.time_zone };
    let body = format!(
        "<p class=\"summary\" id=\"summary\">{} vehicle(s); {} with a part overdue or due now; {} with a part that cannot be forecast. Dates are in {}; bands hold the true date with probability 80 %.</p>\
<p><label for=\"vehicle-filter\">Find a vehicle </label><input id=\"vehicle-filter\" data-filters=\"overview\" placeholder=\"vehicle or class\"></p>{}",
        ranked.len(),
        count(Urgency::Due),
        count(Urgency::CannotTell),
        escape(&zone),
        table("overview", &["Vehicle", "Class", "Status", "Next part", "Due earliest", "Due median", "Due latest", "Now mm", "Min mm", "Note"], &rows)
    );
    Ok(page_response(StatusCode::OK, &page(&format!("Fleet {fleet_id} at a glance"), Some(&fleet_id), &body)))
}

/// Filters of the due list, as they arrive in the address (checked by [`DueFilter::parse`]).
#[derive(Debug, Clone, Default, Deserialize)]
pub struct DueQuery {
    /// Window, days from now.
    pub within_days: Option<String>,
    /// One axle, or "any".
    pub axle: Option<String>,
    /// "pad" (or lining), "rotor" (or drum), or "any".
    pub part: Option<String>,
    /// "overdue", "due-now", "forecast", "cannot-forecast", or "any".
    pub status: Option<String>,
}

/// Checked filters of the due list.
#[derive(Debug, Clone, PartialEq)]
pub struct DueFilter {
    /// Window, days from now.
    pub within_days: u32,
    /// One axle only.
    pub axle: Option<u32>,
    /// One component only.
    pub component: pb::Component,
    /// One status only ("overdue", "due-now", "forecast", "cannot-forecast").
    pub status: Option<String>,
}

impl DueFilter {
    /// Checks the address's filters; a bad one names itself.
    pub fn parse(query: &DueQuery) -> Result<Self, WebError> {
        let given = |v: &Option<String>| v.as_deref().map(str::trim).filter(|v| !v.is_empty() && *v != "any").map(str::to_owned);
        let within_days = match given(&query.within_days) {
            None => DEFAULT_DUE_DAYS,
            Some(text) => text.parse().ok().filter(|d| (1..=MAX_DUE_DAYS).contains(d)).ok_or_else(|| WebError::BadQuery(format!("within_days must be a whole number of days from 1 to {MAX_DUE_DAYS}")))?,
        };
        let axle = match given(&query.axle) {
            None => None,
            Some(text) => Some(text.parse().ok().filter(|a| *a >= 1).ok_or_else(|| WebError::BadQuery("axle must be an axle number (1 = front-most) or 'any'".into()))?),
        };
        let component = match given(&query.part).as_deref() {
            None => pb::Component::Unspecified,
            Some("pad" | "lining") => pb::Component::Friction,
            Some("rotor" | "drum") => pb::Component::Disc,
            Some(_) => return Err(WebError::BadQuery("part must be pad (or lining), rotor (or drum) or 'any'".into())),
        };
        let status = match given(&query.status) {
            None => None,
            Some(s) if ["overdue", "due-now", "forecast", "cannot-forecast"].contains(&s.as_str()) => Some(s),
            Some(_) => return Err(WebError::BadQuery("status must be overdue, due-now, forecast, cannot-forecast or 'any'".into())),
        };
        Ok(Self { within_days, axle, component, status })
    }

    /// The filters as an address query (`within_days=60&...`).
    pub fn query(&self) -> String {
        let mut query = format!("within_days={}", self.within_days);
        if let Some(axle) = self.axle {
            query.push_str(&format!("&axle={axle}"));
        }
        match self.component {
            pb::Component::Friction => query.push_str("&part=pad"),
            pb::Component::Disc => query.push_str("&part=rotor"),
            pb::Component::Unspecified => {}
        }
        if let Some(status) = &self.status {
            query.push_str(&format!("&status={}", query_value(status)));
        }
        query
    }

    /// Keeps the parts these filters let through (the component was filtered by ListDue).
    fn apply(&self, mut due: DueParts) -> DueParts {
        let axle_ok = |axle: u32| self.axle.is_none_or(|wanted| wanted == axle);
        let status_ok = |status: &str| self.status.as_deref().is_none_or(|wanted| wanted == status.replace(' ', "-"));
        due.parts.retain(|d| d.part.as_ref().is_some_and(|p| axle_ok(p.axle_index) && status_ok(due_status(p))));
        due.undated.retain(|u| axle_ok(u.axle_index) && status_ok("cannot forecast"));
        due
    }
}

/// The due list a filter selects, with the fleet's vehicles (for part names).
pub async fn filtered_due(reader: &Reader, fleet_id: &str, filter: &DueFilter) -> Result<(DueParts, VehicleIndex), WebError> {
    let due_before = Utc::now() + chrono::Duration::days(i64::from(filter.within_days));
    let due = reader.due(fleet_id, due_before, filter.component).await?;
    Ok((filter.apply(due), reader.vehicles(fleet_id).await?))
}

/// A `<select>` with `options` (value, label), `chosen` selected.
fn select(name: &str, label: &str, options: &[(String, String)], chosen: &str) -> String {
    let mut out = format!("<label for=\"{name}\">{}</label><select id=\"{name}\" name=\"{name}\">", escape(label));
    for (value, text) in options {
        let selected = if value == chosen { " selected" } else { "" };
        out.push_str(&format!("<option value=\"{}\"{selected}>{}</option>", escape(value), escape(text)));
    }
    out.push_str("</select>");
    out
}

/// `GET /fleets/{fleet}/due`: the due list with filters (window, axle, part, status).
pub async fn due_list(State(state): State<AppState>, Path(fleet_id): Path<String>, Query(query): Query<DueQuery>, headers: HeaderMap) -> Result<Response, WebError> {
    let filter = DueFilter::parse(&query)?;
    let reader = Reader::new(&state, caller(&state, &headers)?);
    let (due, vehicles) = filtered_due(&reader, &fleet_id, &filter).await?;
    let max_axle = vehicles.values().flat_map(|v| v.axles.iter().map(|a| a.axle_index)).max().unwrap_or(2);
    let any = || ("any".to_owned(), "any".to_owned());
    let axles: Vec<(String, String)> = std::iter::once(any()).chain((1..=max_axle).map(|a| (a.to_string(), a.to_string()))).collect();
    let parts = [any(), ("pad".into(), "pad or lining".into()), ("rotor".into(), "rotor or drum".into())];
    let statuses = [any(), ("overdue".into(), "overdue".into()), ("due-now".into(), "due now".into()), ("forecast".into(), "forecast ahead".into()), ("cannot-forecast".into(), "cannot forecast".into())];
    let chosen_part = match filter.component {
        pb::Component::Friction => "pad",
        pb::Component::Disc => "rotor",
        pb::Component::Unspecified => "any",
    };
    let form = format!(
        "<form method=\"get\" class=\"filters\" id=\"due-filters\" data-autosubmit><label for=\"within_days\">Due within (days)</label>\
<input type=\"number\" min=\"1\" max=\"{MAX_DUE_DAYS}\" id=\"within_days\" name=\"within_days\" value=\"{}\">{}{}{}<button type=\"submit\">Show</button></form>",
        filter.within_days,
        select("axle", "Axle", &axles, &filter.axle.map_or("any".to_owned(), |a| a.to_string())),
        select("part", "Part", &parts, chosen_part),
        select("status", "Status", &statuses, filter.status.as_deref().unwrap_or("any")),
    );
    let rows: Vec<(String, Vec<String>)> = due
        .parts
        .iter()
        .filter_map(|d| d.part.as_ref().map(|p| (d, p)))
        .map(|(d, p)| {
            let status = due_status(p);
            (status.replace(' ', "-"), vec![
                badge(status),
                date_cell(&p.due_earliest_date),
                date_cell(&p.due_median_date),
                date_cell(&p.due_latest_date),
                link(&vehicle_href(&fleet_id, &d.vehicle_id), &d.vehicle_id),
                escape(&d.vehicle_class),
                p.axle_index.to_string(),
                escape(vehicle_part_name(&vehicles, &d.vehicle_id, p.axle_index, p.component)),
                format!("{} ({}–{})", one_decimal(p.current_thickness_mm), one_decimal(p.current_thickness_low_mm), one_decimal(p.current_thickness_high_mm)),
                one_decimal(p.min_thickness_mm),
                escape(basis_name(p.basis)),
                escape(&p.notes.join("; ")),
            ])
        })
        .collect();
    let dated = if rows.is_empty() {
        "<p id=\"nothing-due\">No part is known to be due in this window.</p>".to_owned()
    } else {
        table("due", &["Status", "Due earliest", "Due median", "Due latest", "Vehicle", "Class", "Axle", "Part", "Now mm (80 % band)", "Min mm", "Based on", "Notes"], &rows)
    };
    let undated_rows: Vec<(String, Vec<String>)> = due
        .undated
        .iter()
        .map(|u| ("cannot-forecast".to_owned(), vec![
            badge(undated_status(u)),
            link(&vehicle_href(&fleet_id, &u.vehicle_id), &u.vehicle_id),
            escape(&u.vehicle_class),
            u.axle_index.to_string(),
            escape(vehicle_part_name(&vehicles, &u.vehicle_id, u.axle_index, u.component)),
            escape(&u.reason),
        ]))
        .collect();
    let undated = if undated_rows.is_empty() {
        String::new()
    } else {
        format!(
            "<h2>Parts that cannot be forecast</h2><p>No due date can be given for these, so they may already be worn. Inspect them.</p>{}",
            table("undated", &["Status", "Vehicle", "Class", "Axle", "Part", "Why"], &undated_rows)
        )
    };
    let download = format!("<p class=\"downloads\">{}</p>", link(&fleet_href(&fleet_id, &format!("/due.csv?{}", filter.query())), "Download this list as CSV"));
    let summary = format!("<p class=\"summary\" id=\"summary\">{} part(s) due within {} day(s); {} part(s) cannot be forecast.</p>", due.parts.len(), filter.within_days, due.undated.len());
    Ok(page_response(StatusCode::OK, &page(&format!("Due list of fleet {fleet_id}"), Some(&fleet_id), &format!("{form}{summary}{download}{dated}{undated}"))))
}

/// `GET /fleets/{fleet}/vehicles/{vehicle}`: the vehicle, its parts' forecasts and wear charts.
pub async fn vehicle(State(state): State<AppState>, Path((fleet_id, vehicle_id)): Path<(String, String)>, headers: HeaderMap) -> Result<Response, WebError> {
    let reader = Reader::new(&state, caller(&state, &headers)?);
    let about = reader.vehicle(&fleet_id, &vehicle_id).await?;
    let spec = about.vehicle.unwrap_or_default();
    let vehicles: VehicleIndex = [(vehicle_id.clone(), spec.clone())].into_iter().collect();
    let facts = format!(
        "<p class=\"facts\">Class {} · {} kg · {} axle(s){} · {} trip(s) recorded</p>",
        escape(&spec.vehicle_class),
        spec.mass_kg,
        spec.axles.len(),
        spec.vin.as_deref().map(|vin| format!(" · VIN {}", escape(vin))).unwrap_or_default(),
        about.trips_recorded
    );
    let body = match reader.forecast(&fleet_id, &vehicle_id).await {
        Ok(forecast) => {
            let rows: Vec<(String, Vec<String>)> = forecast
                .parts
                .iter()
                .map(|p| {
                    let status = if p.due_earliest.is_none() { "cannot forecast" } else { due_status(p) };
                    (status.replace(' ', "-"), vec![
                        p.axle_index.to_string(),
                        escape(vehicle_part_name(&vehicles, &vehicle_id, p.axle_index, p.component)),
                        badge(status),
                        format!("{} ({}–{})", one_decimal(p.current_thickness_mm), one_decimal(p.current_thickness_low_mm), one_decimal(p.current_thickness_high_mm)),
                        one_decimal(p.min_thickness_mm),
                        date_cell(&p.due_earliest_date),
                        date_cell(&p.due_median_date),
                        date_cell(&p.due_latest_date),
                        escape(basis_name(p.basis)),
                        escape(&p.notes.join("; ")),
                    ])
                })
                .collect();
            let charts: String = forecast
                .parts
                .iter()
                .map(|p| {
                    let name = vehicle_part_name(&vehicles, &vehicle_id, p.axle_index, p.component);
                    let word = if p.component == pb::Component::Disc as i32 { "rotor" } else { "pad" };
                    let src = format!("{}/charts/{}/{word}", vehicle_href(&fleet_id, &vehicle_id), p.axle_index);
                    format!("<figure><img src=\"{}\" alt=\"Wear chart of axle {} {}\" width=\"1000\" height=\"620\"><figcaption>Axle {} {}</figcaption></figure>", escape(&src), p.axle_index, escape(name), p.axle_index, escape(name))
                })
                .collect();
            format!(
                "{facts}<p>Dates are in {}; bands hold the true value with probability 80 %.</p>{}<h2>Wear charts</h2><div class=\"charts\">{charts}</div>",
                escape(if forecast.time_zone.is_empty() { "UTC" } else { &forecast.time_zone }),
                table("parts", &["Axle", "Part", "Status", "Now mm (80 % band)", "Min mm", "Due earliest", "Due median", "Due latest", "Based on", "Notes"], &rows)
            )
        }
        // Nothing about this vehicle can be forecast yet: say why, as the API does.
        Err(WebError::Refused(status)) if status.code() == tonic::Code::FailedPrecondition => {
            format!("{facts}<p class=\"error\" id=\"cannot-forecast\">{}</p>", escape(status.message()))
        }
        Err(other) => return Err(other),
    };
    Ok(page_response(StatusCode::OK, &page(&format!("Vehicle {vehicle_id}"), Some(&fleet_id), &body)))
}

/// The plan's settings, as they arrive in the address.
#[derive(Debug, Clone, Default, Deserialize)]
pub struct PlanQuery {
    /// First day, YYYY-MM-DD (default today in the fleet's time zone).
    pub from: Option<String>,
    /// Days in the plan (default 14).
    pub days: Option<String>,
    /// Workshop hours per day (default 8).
    pub hours_per_day: Option<String>,
}

/// Checks the plan's settings; the first day defaults to today in `zone`.
pub fn plan_ask(query: &PlanQuery, zone: chrono_tz::Tz) -> Result<PlanAsk, WebError> {
    let given = |v: &Option<String>| v.as_deref().map(str::trim).filter(|v| !v.is_empty()).map(str::to_owned);
    let first_day = match given(&query.from) {
        None => today_in(zone),
        Some(text) => text.parse::<NaiveDate>().map_err(|_| WebError::BadQuery(format!("from must be a date YYYY-MM-DD, not '{text}'")))?,
    };
    let days = match given(&query.days) {
        None => 14,
        Some(text) => text.parse().ok().filter(|d| (1..=366).contains(d)).ok_or_else(|| WebError::BadQuery("days must be a whole number from 1 to 366".into()))?,
    };
    let hours_per_day = match given(&query.hours_per_day) {
        None => 8.0,
        Some(text) => text.parse::<f64>().ok().filter(|h| h.is_finite() && *h > 0.0).ok_or_else(|| WebError::BadQuery("hours_per_day must be a number of hours greater than 0".into()))?,
    };
    Ok(PlanAsk { first_day, days, hours_per_day })
}

/// The plan's settings as an address query.
pub fn plan_query(ask: &PlanAsk) -> String {
    format!("from={}&days={}&hours_per_day={}", ask.first_day, ask.days, ask.hours_per_day)
}

/// `GET /fleets/{fleet}/plan`: the visit plan with its CSV and iCalendar downloads.
pub async fn visit_plan(State(state): State<AppState>, Path(fleet_id): Path<String>, Query(query): Query<PlanQuery>, headers: HeaderMap) -> Result<Response, WebError> {
    let reader = Reader::new(&state, caller(&state, &headers)?);
    let zone = reader.time_zone(&fleet_id).await?;
    let ask = plan_ask(&query, zone)?;
    let plan = reader.plan(&fleet_id, zone, ask).await?;
    let vehicles = reader.vehicles(&fleet_id).await?;
    let form = format!(
        "<form method=\"get\" class=\"filters\" id=\"plan-settings\" data-autosubmit><label for=\"from\">From</label><input type=\"date\" id=\"from\" name=\"from\" value=\"{}\">\
<label for=\"days\">Days</label><input type=\"number\" min=\"1\" max=\"366\" id=\"days\" name=\"days\" value=\"{}\">\
<label for=\"hours_per_day\">Workshop hours per day</label><input type=\"number\" min=\"0.5\" step=\"0.5\" id=\"hours_per_day\" name=\"hours_per_day\" value=\"{}\"><button type=\"submit\">Plan</button></form>",
        ask.first_day, ask.days, ask.hours_per_day
    );
    let query = plan_query(&ask);
    let downloads = format!(
        "<p class=\"downloads\">{} · {}</p>",
        link(&fleet_href(&fleet_id, &format!("/plan.ics?{query}")), "Download as iCalendar (.ics)").replacen("<a ", "<a id=\"plan-ics\" ", 1),
        link(&fleet_href(&fleet_id, &format!("/plan.csv?{query}")), "Download as CSV").replacen("<a ", "<a id=\"plan-csv\" ", 1),
    );
    let mut rows = Vec::new();
    for visit in &plan.visits {
        for (n, job) in visit.jobs.iter().enumerate() {
            let first = n == 0;
            rows.push((if job.already_due { "already-due".to_owned() } else { String::new() }, vec![
                if first { escape(&visit.visit_date) } else { String::new() },
                if first { link(&vehicle_href(&fleet_id, &visit.vehicle_id), &visit.vehicle_id) } else { String::new() },
                job.axle_index.to_string(),
                escape(vehicle_part_name(&vehicles, &visit.vehicle_id, job.axle_index, job.component)),
                date_cell(&job.due_earliest_date),
                date_cell(&job.due_median_date),
                job.wear_life_given_up_days.to_string(),
                one_decimal(job.hours),
                escape(job_note(job)),
            ]));
        }
    }
    let visits = if rows.is_empty() {
        "<p id=\"no-visits\">No visit needed in this period.</p>".to_owned()
    } else {
        table("visits", &["Day", "Vehicle", "Axle", "Part", "Due earliest", "Due median", "Gives up (days)", "Hours", "Note"], &rows)
    };
    let unplanned_rows: Vec<(String, Vec<String>)> = plan
        .unplanned
        .iter()
        .map(|u| (String::new(), vec![
            link(&vehicle_href(&fleet_id, &u.vehicle_id), &u.vehicle_id),
            u.axle_index.to_string(),
            escape(vehicle_part_name(&vehicles, &u.vehicle_id, u.axle_index, u.component)),
            date_cell(&u.due_earliest_date),
            escape(&u.reason),
        ]))
        .collect();
    let unplanned = if unplanned_rows.is_empty() {
        String::new()
    } else {
        format!("<h2>Not booked before they are due</h2>{}", table("unplanned", &["Vehicle", "Axle", "Part", "Due earliest", "Why"], &unplanned_rows))
    };
    let summary = format!(
        "<p class=\"summary\" id=\"summary\">{} visit(s) from {} for {} day(s), {} workshop hour(s) a day; parts already due come first, the rest as late as the {}-day safety margin allows. Dates are in {}.</p>",
        plan.visits.len(),
        ask.first_day,
        ask.days,
        ask.hours_per_day,
        plan.safety_margin_days,
        escape(if plan.time_zone.is_empty() { "UTC" } else { &plan.time_zone })
    );
    Ok(page_response(StatusCode::OK, &page(&format!("Visit plan of fleet {fleet_id}"), Some(&fleet_id), &format!("{form}{summary}{downloads}{visits}{unplanned}"))))
}

