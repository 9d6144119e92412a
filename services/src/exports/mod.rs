//! Files a planner takes into other tools: the due list and the visit plan as CSV
//! ([`csv`], RFC 4180), the visit plan as an iCalendar file ([`icalendar`], RFC 5545). Built from
//! the gRPC responses (ListDue, PlanVisits), so the command line and the web page write the
//! same bytes for the same answer.

pub mod csv;
pub mod icalendar;

use brakeledger_proto::v1 as pb;

/// Failures while writing an export.
#[derive(Debug, thiserror::Error)]
pub enum ExportError {
    /// The CSV writer failed.
    #[error("writing CSV: {0}")]
    Csv(#[from] ::csv::Error),
    /// The CSV bytes were not UTF-8 (cannot happen with UTF-8 input; kept typed).
    #[error("writing CSV: {0}")]
    Text(#[from] std::string::FromUtf8Error),
}

/// The status word of a dated part: "overdue" (its median date has passed), "due now" (at or
/// below its minimum), else "forecast" (a due date lies ahead).
pub fn due_status(part: &pb::PartForecast) -> &'static str {
    match (part.overdue, part.due_now) {
        (true, _) => "overdue",
        (false, true) => "due now",
        (false, false) => "forecast",
    }
}

/// The status word of a part without a due date.
pub fn undated_status(part: &pb::UndatedPart) -> &'static str {
    if part.pending {
        "not computed yet"
    } else {
        "cannot forecast"
    }
}

/// What a booked job's note says: already due, inside the safety margin, or nothing.
pub fn job_note(job: &pb::PlannedJob) -> &'static str {
    if job.already_due {
        "already due"
    } else if job.inside_safety_margin {
        "inside the safety margin: earlier days full"
    } else {
        ""
    }
}
