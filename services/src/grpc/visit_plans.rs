//! PlanVisits between the wire and the planner: the due parts of a fleet become planner
//! inputs (calendar days in the fleet's time zone), and the plan becomes the response (the
//! planner's rules are in `brakeledger_models::visit_plan`).

use brakeledger_models::domain::Component;
use brakeledger_models::visit_plan::{plan_visits, PlanLimits, PlanPart};
use brakeledger_proto::v1 as pb;

use crate::convert::{component_from_wire, component_to_wire, timestamp_ms};
use crate::grpc::forecast_views::local_day_number;

/// Workshop hours of one axle's job, by component.
#[derive(Debug, Clone, Copy)]
pub struct JobHours {
    /// Hours to replace one axle's pads or linings.
    pub friction: f64,
    /// Hours to replace one axle's rotors or drums (pads or linings included).
    pub disc: f64,
}

/// Plans the dated parts among `parts` within `limits` (days in `zone`) and builds the response
/// (time zone left empty for the caller).
pub fn plan_for_due_parts(parts: &[pb::DuePart], job_hours: JobHours, limits: &PlanLimits, zone: chrono_tz::Tz) -> pb::PlanVisitsResponse {
    // Parts with a due date, each beside its planner input (same index).
    let (booked_parts, plan_parts): (Vec<&pb::DuePart>, Vec<PlanPart>) = parts
        .iter()
        .filter_map(|due| {
            let part = due.part.as_ref()?;
            let earliest = part.due_earliest.as_ref().and_then(timestamp_ms)?;
            let median = part.due_median.as_ref().and_then(timestamp_ms).unwrap_or(earliest);
            let component = component_from_wire("component", part.component).ok()?;
            let hours = match component {
                Component::Friction => job_hours.friction,
                Component::Disc => job_hours.disc,
            };
            let due_day = local_day_number(earliest, zone);
            let median_day = local_day_number(median, zone).max(due_day);
            Some((due, PlanPart { vehicle_id: due.vehicle_id.clone(), axle_index: part.axle_index, component, due_day, median_day, hours }))
        })
        .unzip();
    let plan = plan_visits(&plan_parts, limits);
    let epoch = chrono::NaiveDate::from_ymd_opt(1970, 1, 1).unwrap_or_default();
    let day_text = |day: i64| (epoch + chrono::Duration::days(day)).to_string();
    let find = |i: usize| (booked_parts[i], booked_parts[i].part.as_ref());
    let visits = plan
        .visits
        .iter()
        .map(|visit| pb::Visit {
            vehicle_id: visit.vehicle_id.clone(),
            visit_date: day_text(visit.day),
            hours: visit.hours(),
            jobs: visit
                .jobs
                .iter()
                .map(|job| {
                    let (_, part) = find(job.part);
                    let planned = &plan_parts[job.part];
                    pb::PlannedJob {
                        axle_index: planned.axle_index,
                        component: component_to_wire(planned.component) as i32,
                        due_earliest: part.and_then(|p| p.due_earliest),
                        due_earliest_date: part.map(|p| p.due_earliest_date.clone()).unwrap_or_default(),
                        hours: job.hours,
                        wear_life_given_up_days: u32::try_from(planned.wear_life_given_up_days(visit.day)).unwrap_or(u32::MAX),
                        due_median: part.and_then(|p| p.due_median),
                        due_median_date: part.map(|p| p.due_median_date.clone()).unwrap_or_default(),
                        already_due: planned.already_due(limits),
                        inside_safety_margin: job.inside_safety_margin,
                    }
                })
                .collect(),
        })
        .collect();
    let unplanned = plan
        .unplanned
        .iter()
        .map(|(i, reason)| {
            let (due, part) = find(*i);
            pb::UnplannedPart {
                vehicle_id: due.vehicle_id.clone(),
                axle_index: plan_parts[*i].axle_index,
                component: component_to_wire(plan_parts[*i].component) as i32,
                due_earliest: part.and_then(|p| p.due_earliest),
                due_earliest_date: part.map(|p| p.due_earliest_date.clone()).unwrap_or_default(),
                reason: reason.describe().to_owned(),
            }
        })
        .collect();
    pb::PlanVisitsResponse {
        visits,
        unplanned,
        time_zone: String::new(),
        caution: crate::SAFETY_CAUTION.to_owned(),
        safety_margin_days: u32::try_from(limits.safety_margin_days).unwrap_or_default(),
    }
}
