//! Files the page hands out: the due list as CSV, the visit plan as CSV and iCalendar (the
//! same bytes as `brakeledger due --format csv` and `plan --format csv|ics`, from
//! [`crate::exports`]), and the wear chart of one part as an SVG image.

use axum::extract::{Path, Query, State};
use axum::response::{IntoResponse, Response};
use brakeledger_proto::v1 as pb;
use chrono::Utc;
use http::{header, HeaderMap};

use super::reads::Reader;
use super::session::caller;
use super::views::{filtered_due, plan_ask, DueFilter, DueQuery, PlanQuery};
use crate::cli::chart::{render_chart, ChartData};
use crate::error::WebError;
use crate::exports;
use crate::state::AppState;

/// A file download: its type, a plain file name, the bytes.
fn attachment(content_type: &'static str, file_name: &str, body: String) -> Response {
    let safe: String = file_name.chars().map(|c| if c.is_ascii_alphanumeric() || matches!(c, '-' | '_' | '.') { c } else { '_' }).collect();
    ([(header::CONTENT_TYPE, content_type.to_owned()), (header::CONTENT_DISPOSITION, format!("attachment; filename=\"{safe}\""))], body).into_response()
}

/// `GET /fleets/{fleet}/due.csv`: the filtered due list as CSV.
pub async fn due_csv(State(state): State<AppState>, Path(fleet_id): Path<String>, Query(query): Query<DueQuery>, headers: HeaderMap) -> Result<Response, WebError> {
    let filter = DueFilter::parse(&query)?;
    let reader = Reader::new(&state, caller(&state, &headers)?);
    let (due, vehicles) = filtered_due(&reader, &fleet_id, &filter).await?;
    let csv = exports::csv::due_list(&due.parts, &due.undated, &vehicles)?;
    Ok(attachment("text/csv; charset=utf-8; header=present", &format!("{fleet_id}-due.csv"), csv))
}

/// The plan a query asks for, with the fleet's vehicles.
async fn plan_of(state: &AppState, fleet_id: &str, query: &PlanQuery, headers: &HeaderMap) -> Result<(pb::PlanVisitsResponse, crate::part_names::VehicleIndex, String), WebError> {
    let reader = Reader::new(state, caller(state, headers)?);
    let zone = reader.time_zone(fleet_id).await?;
    let ask = plan_ask(query, zone)?;
    let plan = reader.plan(fleet_id, zone, ask).await?;
    Ok((plan, reader.vehicles(fleet_id).await?, format!("{fleet_id}-plan-{}", ask.first_day)))
}

/// `GET /fleets/{fleet}/plan.csv`: the visit plan as CSV.
pub async fn plan_csv(State(state): State<AppState>, Path(fleet_id): Path<String>, Query(query): Query<PlanQuery>, headers: HeaderMap) -> Result<Response, WebError> {
    let (plan, vehicles, name) = plan_of(&state, &fleet_id, &query, &headers).await?;
    Ok(attachment("text/csv; charset=utf-8; header=present", &format!("{name}.csv"), exports::csv::visit_plan(&plan, &vehicles)?))
}

/// `GET /fleets/{fleet}/plan.ics`: the visit plan as iCalendar.
pub async fn plan_ics(State(state): State<AppState>, Path(fleet_id): Path<String>, Query(query): Query<PlanQuery>, headers: HeaderMap) -> Result<Response, WebError> {
    let (plan, vehicles, name) = plan_of(&state, &fleet_id, &query, &headers).await?;
    Ok(attachment("text/calendar; charset=utf-8", &format!("{name}.ics"), exports::icalendar::visit_plan(&plan, &fleet_id, &vehicles, Utc::now())))
}

/// `GET /fleets/{fleet}/vehicles/{vehicle}/charts/{axle}/{part}`: the wear chart of one part
/// (`part` is pad or lining, rotor or drum) as an SVG image, drawn by the `chart` command's code.
pub async fn wear_chart(
    State(state): State<AppState>,
    Path((fleet_id, vehicle_id, axle, part)): Path<(String, String, String, String)>,
    headers: HeaderMap,
) -> Result<Response, WebError> {
    let axle_index: u32 = axle.parse().ok().filter(|a| *a >= 1).ok_or_else(|| WebError::BadQuery("the axle must be a number, 1 = front-most".into()))?;
    let component = match part.as_str() {
        "pad" | "lining" => pb::Component::Friction,
        "rotor" | "drum" => pb::Component::Disc,
        _ => return Err(WebError::BadQuery("the part must be pad, lining, rotor or drum".into())),
    };
    let reader = Reader::new(&state, caller(&state, &headers)?);
    let trajectory = reader.trajectory(&fleet_id, &vehicle_id, axle_index, component).await?;
    let about = reader.vehicle(&fleet_id, &vehicle_id).await?;
    let time_zone = reader.time_zone(&fleet_id).await?;
    let name = crate::part_names::part_name(component as i32, crate::part_names::brake_type_of(about.vehicle.as_ref(), axle_index));
    let data = ChartData { title: format!("vehicle {vehicle_id}, axle {axle_index} {name}"), trajectory, today: Some(Utc::now()), time_zone };
    let svg = tokio::task::spawn_blocking(move || render_chart(&data)).await.map_err(|e| WebError::Chart(e.to_string()))?.map_err(|e| WebError::Chart(format!("{e:#}")))?;
    Ok(([(header::CONTENT_TYPE, "image/svg+xml")], svg).into_response())
}

