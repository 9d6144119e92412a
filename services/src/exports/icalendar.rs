//! The visit plan as an iCalendar file (RFC 5545): one all-day `VEVENT` per visit, on the
//! visit's calendar date in the fleet's time zone (`DTSTART;VALUE=DATE`, `DTEND` the next day,
//! exclusive), its jobs in the `DESCRIPTION`.
//!
//! - `UID`s are stable: derived from the fleet, the vehicle and the visit date, so exporting the
//!   same plan again updates a calendar's events instead of adding copies.
//! - Text values are escaped (RFC 5545 §3.3.11: backslash, `;`, `,` and newlines), lines end in
//!   CRLF and are folded at 75 octets (§3.1) without splitting a UTF-8 character.
//! - `DTSTAMP` is when the file was made, in UTC.

use brakeledger_proto::v1 as pb;
use chrono::{DateTime, NaiveDate, Utc};
use sha2::{Digest, Sha256};

use super::job_note;
use crate::part_names::{vehicle_part_name, VehicleIndex};

/// Longest content line, octets, before it is folded (RFC 5545 §3.1).
pub const MAX_LINE_OCTETS: usize = 75;

/// A TEXT value escaped as RFC 5545 §3.3.11 asks.
pub fn escape_text(text: &str) -> String {
    let mut escaped = String::with_capacity(text.len());
    for c in text.chars() {
        match c {
            '\\' => escaped.push_str("\\\\"),
            ';' => escaped.push_str("\\;"),
            ',' => escaped.push_str("\\,"),
            '\n' => escaped.push_str("\\n"),
            '\r' => {}
            other => escaped.push(other),
        }
    }
    escaped
}

/// One content line, folded at [`MAX_LINE_OCTETS`] (continuations start with a space), each
/// piece ending in CRLF.
pub fn fold_line(line: &str) -> String {
    let mut folded = String::with_capacity(line.len() + line.len() / 70 * 3 + 2);
    let mut used = 0;
    for c in line.chars() {
        if used + c.len_utf8() > MAX_LINE_OCTETS {
            folded.push_str("\r\n ");
            used = 1;
        }
        folded.push(c);
        used += c.len_utf8();
    }
    folded.push_str("\r\n");
    folded
}

/// The stable UID of a fleet's visit of a vehicle on a date.
fn visit_uid(fleet_id: &str, vehicle_id: &str, visit_date: &str) -> String {
    let digest = Sha256::digest([fleet_id, vehicle_id, visit_date].join("\u{1f}").as_bytes());
    let hex: String = digest.iter().take(16).map(|b| format!("{b:02x}")).collect();
    format!("visit-{visit_date}-{hex}@brakeledger")
}

/// `YYYYMMDD` of an ISO 8601 calendar date and of the day after it; `None` when not a date.
fn all_day(visit_date: &str) -> Option<(String, String)> {
    let day: NaiveDate = visit_date.parse().ok()?;
    let next = day.succ_opt()?;
    Some((day.format("%Y%m%d").to_string(), next.format("%Y%m%d").to_string()))
}

/// What one visit's event says: a summary and a description listing its jobs.
fn visit_text(visit: &pb::Visit, fleet_id: &str, time_zone: &str, caution: &str, vehicles: &VehicleIndex) -> (String, String) {
    let names: Vec<String> = visit
        .jobs
        .iter()
        .map(|job| format!("axle {} {}", job.axle_index, vehicle_part_name(vehicles, &visit.vehicle_id, job.axle_index, job.component)))
        .collect();
    let summary = format!("Brake work: vehicle {} ({})", visit.vehicle_id, names.join(", "));
    let mut lines = vec![format!("Brake work on vehicle {} of fleet {}, {} workshop hour(s):", visit.vehicle_id, fleet_id, visit.hours)];
    for (job, name) in visit.jobs.iter().zip(&names) {
        let note = job_note(job);
        lines.push(format!(
            "- {name}: due earliest {}, median {}; gives up {} day(s) of wear life; {} h{}",
            job.due_earliest_date,
            job.due_median_date,
            job.wear_life_given_up_days,
            job.hours,
            if note.is_empty() { String::new() } else { format!("; {note}") }
        ));
    }
    lines.push(format!("Dates are calendar dates in {time_zone}."));
    lines.push(caution.to_owned());
    (summary, lines.join("\n"))
}

/// The plan of `fleet_id` as an iCalendar file made at `stamped_at`.
pub fn visit_plan(plan: &pb::PlanVisitsResponse, fleet_id: &str, vehicles: &VehicleIndex, stamped_at: DateTime<Utc>) -> String {
    let time_zone = if plan.time_zone.is_empty() { "UTC" } else { plan.time_zone.as_str() };
    let caution = if plan.caution.is_empty() { crate::SAFETY_CAUTION } else { plan.caution.as_str() };
    let stamp = stamped_at.format("%Y%m%dT%H%M%SZ").to_string();
    let mut lines = vec![
        "BEGIN:VCALENDAR".to_owned(),
        "VERSION:2.0".to_owned(),
        "PRODID:-//brakeledger//visit plan//EN".to_owned(),
        "CALSCALE:GREGORIAN".to_owned(),
        "METHOD:PUBLISH".to_owned(),
    ];
    for visit in &plan.visits {
        let Some((start, end)) = all_day(&visit.visit_date) else { continue };
        let (summary, description) = visit_text(visit, fleet_id, time_zone, caution, vehicles);
        lines.extend([
            "BEGIN:VEVENT".to_owned(),
            format!("UID:{}", escape_text(&visit_uid(fleet_id, &visit.vehicle_id, &visit.visit_date))),
            format!("DTSTAMP:{stamp}"),
            format!("DTSTART;VALUE=DATE:{start}"),
            format!("DTEND;VALUE=DATE:{end}"),
            format!("SUMMARY:{}", escape_text(&summary)),
            format!("DESCRIPTION:{}", escape_text(&description)),
            "TRANSP:TRANSPARENT".to_owned(),
            "END:VEVENT".to_owned(),
        ]);
    }
    lines.push("END:VCALENDAR".to_owned());
    lines.iter().map(|line| fold_line(line)).collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn text_is_escaped_and_lines_fold_at_75_octets_without_splitting_characters() {
        assert_eq!(escape_text("a;b,c\\d\ne"), "a\\;b\\,c\\\\d\\ne");
        let long = format!("DESCRIPTION:{}", "é".repeat(80));
        let folded = fold_line(&long);
        for piece in folded.split("\r\n").filter(|p| !p.is_empty()) {
            assert!(piece.len() <= MAX_LINE_OCTETS, "{} octets: {piece}", piece.len());
        }
        let unfolded = folded.replace("\r\n ", "");
        assert_eq!(unfolded, format!("{long}\r\n"), "unfolding (RFC 5545 §3.1) gives the line back");
        assert_eq!(fold_line("SHORT"), "SHORT\r\n");
    }

    #[test]
    fn uids_are_stable_and_differ_by_vehicle_and_date() {
        let a = visit_uid("north", "bus-17", "2026-12-05");
        assert_eq!(a, visit_uid("north", "bus-17", "2026-12-05"));
        assert_ne!(a, visit_uid("north", "bus-18", "2026-12-05"));
        assert_ne!(a, visit_uid("north", "bus-17", "2026-12-06"));
        assert_ne!(a, visit_uid("south", "bus-17", "2026-12-05"));
        assert_eq!(all_day("2026-12-31"), Some(("20261231".into(), "20270101".into())));
        assert_eq!(all_day("not a date"), None);
    }
}
