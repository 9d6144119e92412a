//! CSV (RFC 4180: comma-separated, double-quoted where needed, CRLF line ends, one header
//! row) of a due list and of a visit plan. Dates are ISO 8601 calendar dates in the fleet's
//! time zone, thicknesses in mm, hours in hours. A text cell that a spreadsheet would run as a
//! formula (starting with `=`, `+`, `-` or `@`) is prefixed with `'`.

use brakeledger_proto::v1 as pb;

use super::{due_status, job_note, undated_status, ExportError};
use crate::part_names::{basis_name, vehicle_part_name, VehicleIndex};

/// Header of the due-list CSV.
pub const DUE_HEADER: [&str; 13] = [
    "status", "due_earliest_date", "due_median_date", "due_latest_date", "vehicle_id", "vehicle_class", "axle_index", "part",
    "current_thickness_mm", "min_thickness_mm", "basis", "band_level", "notes",
];

/// Header of the visit-plan CSV.
pub const PLAN_HEADER: [&str; 10] = [
    "visit_date", "vehicle_id", "axle_index", "part", "due_earliest_date", "due_median_date", "wear_life_given_up_days", "hours",
    "already_due", "note",
];

/// A text cell a spreadsheet will not run as a formula.
fn text_cell(text: &str) -> String {
    if text.starts_with(['=', '+', '-', '@']) {
        format!("'{text}")
    } else {
        text.to_owned()
    }
}

/// Writes `rows` under `header` as RFC 4180 text.
fn write_rows<const N: usize>(header: [&str; N], rows: impl IntoIterator<Item = [String; N]>) -> Result<String, ExportError> {
    let mut writer = ::csv::WriterBuilder::new().terminator(::csv::Terminator::CRLF).from_writer(Vec::new());
    writer.write_record(header)?;
    for row in rows {
        writer.write_record(&row)?;
    }
    let bytes = writer.into_inner().map_err(|e| ExportError::Csv(e.into_error().into()))?;
    Ok(String::from_utf8(bytes)?)
}

/// The due list: dated parts in the order given (earliest first), then the parts that cannot
/// be forecast, each with its status and reason.
pub fn due_list(parts: &[pb::DuePart], undated: &[pb::UndatedPart], vehicles: &VehicleIndex) -> Result<String, ExportError> {
    let dated = parts.iter().filter_map(|due| due.part.as_ref().map(|part| (due, part))).map(|(due, part)| {
        [
            due_status(part).to_owned(),
            part.due_earliest_date.clone(),
            part.due_median_date.clone(),
            part.due_latest_date.clone(),
            text_cell(&due.vehicle_id),
            text_cell(&due.vehicle_class),
            part.axle_index.to_string(),
            vehicle_part_name(vehicles, &due.vehicle_id, part.axle_index, part.component).to_owned(),
            format!("{:.2}", part.current_thickness_mm),
            format!("{:.2}", part.min_thickness_mm),
            basis_name(part.basis).to_owned(),
            format!("{}", part.band_level),
            text_cell(&part.notes.join("; ")),
        ]
    });
    let cannot = undated.iter().map(|u| {
        [
            undated_status(u).to_owned(),
            String::new(),
            String::new(),
            String::new(),
            text_cell(&u.vehicle_id),
            text_cell(&u.vehicle_class),
            u.axle_index.to_string(),
            vehicle_part_name(vehicles, &u.vehicle_id, u.axle_index, u.component).to_owned(),
            String::new(),
            String::new(),
            String::new(),
            String::new(),
            text_cell(&u.reason),
        ]
    });
    write_rows(DUE_HEADER, dated.chain(cannot))
}

/// The visit plan: one row per booked job, by visit day, then one row per part that could not
/// be booked (no visit date; the note says why).
pub fn visit_plan(plan: &pb::PlanVisitsResponse, vehicles: &VehicleIndex) -> Result<String, ExportError> {
    let booked = plan.visits.iter().flat_map(|visit| visit.jobs.iter().map(move |job| (visit, job))).map(|(visit, job)| {
        [
            visit.visit_date.clone(),
            text_cell(&visit.vehicle_id),
            job.axle_index.to_string(),
            vehicle_part_name(vehicles, &visit.vehicle_id, job.axle_index, job.component).to_owned(),
            job.due_earliest_date.clone(),
            job.due_median_date.clone(),
            job.wear_life_given_up_days.to_string(),
            format!("{}", job.hours),
            job.already_due.to_string(),
            job_note(job).to_owned(),
        ]
    });
    let unbooked = plan.unplanned.iter().map(|u| {
        [
            String::new(),
            text_cell(&u.vehicle_id),
            u.axle_index.to_string(),
            vehicle_part_name(vehicles, &u.vehicle_id, u.axle_index, u.component).to_owned(),
            u.due_earliest_date.clone(),
            String::new(),
            String::new(),
            String::new(),
            String::new(),
            text_cell(&format!("not booked: {}", u.reason)),
        ]
    });
    write_rows(PLAN_HEADER, booked.chain(unbooked))
}
