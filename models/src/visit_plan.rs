//! Workshop visit planning: book every part before its due date within a daily capacity,
//! bundling the parts of one vehicle that fall due close together into one visit.
//!
//! # Method
//! Earliest-deadline-first with bundling, a greedy list schedule:
//! 1. Parts whose due date (`due_day`, the calendar day of the lower end of the due band) falls
//!    on or before the plan's last day must be booked. A part can be booked on a day `d` with
//!    `from_day ≤ d < due_day`: strictly before the day it may first reach its minimum. A part
//!    already due when the plan starts (`due_day ≤ from_day`: due now, or overdue) can be
//!    booked on any day of the plan; being earliest-due, it is booked first, on the first day
//!    with enough free hours. None is ever dropped: what cannot be booked is listed with the
//!    reason.
//! 2. Take the unbooked mandatory part with the earliest due day (ties: vehicle, axle,
//!    component). Its visit bundles every other unbooked part of the same vehicle due within
//!    `bundle_within_days` of it (including parts due after the plan ends: booking them now
//!    saves a second visit).
//! 3. Book the bundle on the earliest day with enough free hours before the anchor's due
//!    day. If none has room, drop optional (late) parts of the bundle, latest first, then
//!    try again; if the anchor alone does not fit, it is listed as unplanned with the reason.
//! 4. A disc (rotor or drum) job includes the friction parts of the same axle, so a friction
//!    job on an axle whose disc job is in the same visit costs no extra hours.
//!
//! Earliest-due-date order minimises the maximum lateness of jobs on one machine (Jackson's
//! rule, 1955); with daily capacities, bundles and unequal hours it is a heuristic, but one
//! that never breaks a capacity or a due date, which is what a planner needs from a first plan.

use crate::domain::Component;

/// One part that may need booking.
#[derive(Debug, Clone, PartialEq)]
pub struct PlanPart {
    /// Vehicle identifier.
    pub vehicle_id: String,
    /// Axle, 1 = front-most.
    pub axle_index: u32,
    /// Component.
    pub component: Component,
    /// Calendar day (days since 1970-01-01 in the fleet's time zone) of the due band's lower end.
    pub due_day: i64,
    /// Workshop hours of the job.
    pub hours: f64,
}

/// The planning window and workshop limits.
#[derive(Debug, Clone, PartialEq)]
pub struct PlanLimits {
    /// First plan day (calendar day number).
    pub from_day: i64,
    /// Last plan day, inclusive.
    pub to_day: i64,
    /// Workshop hours per day.
    pub capacity_hours_per_day: f64,
    /// Parts of one vehicle due within this many days of the visit's first part join the visit.
    pub bundle_within_days: i64,
}

/// One booked visit: indexes into the input parts.
#[derive(Debug, Clone, PartialEq)]
pub struct PlannedVisit {
    /// Vehicle identifier.
    pub vehicle_id: String,
    /// Calendar day number of the visit.
    pub day: i64,
    /// Indexes of the booked parts (into the planner's input), with the hours charged each.
    pub jobs: Vec<(usize, f64)>,
}

impl PlannedVisit {
    /// Hours of the visit.
    pub fn hours(&self) -> f64 {
        self.jobs.iter().map(|(_, h)| h).sum()
    }
}

/// Why a mandatory part could not be booked.
#[derive(Debug, Clone, PartialEq)]
pub enum UnplannedReason {
    /// It was already due when the plan starts and no day of the plan has the hours free.
    AlreadyDueNoCapacity,
    /// The job alone takes more hours than a day has.
    LongerThanADay,
    /// Every day before its due day is full.
    NoCapacity,
}

impl UnplannedReason {
    /// Plain-words reason.
    pub fn describe(&self) -> &'static str {
        match self {
            UnplannedReason::AlreadyDueNoCapacity => "already due, and every workshop day of the plan is full: book it at once elsewhere",
            UnplannedReason::LongerThanADay => "the job takes more hours than the workshop has in a day",
            UnplannedReason::NoCapacity => "every workshop day before its due date is full",
        }
    }
}

/// The plan.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct VisitPlan {
    /// Visits by day, then vehicle.
    pub visits: Vec<PlannedVisit>,
    /// Mandatory parts not booked, with the reason (indexes into the input).
    pub unplanned: Vec<(usize, UnplannedReason)>,
}

/// Hours charged for part `i` when booked with `others` in the same visit.
fn charged_hours(parts: &[PlanPart], i: usize, bundle: &[usize]) -> f64 {
    let part = &parts[i];
    let covered = part.component == Component::Friction
        && bundle.iter().any(|&j| {
            parts[j].component == Component::Disc && parts[j].axle_index == part.axle_index && parts[j].vehicle_id == part.vehicle_id
        });
    if covered {
        0.0
    } else {
        part.hours
    }
}

/// Plans visits (see the module docs).
pub fn plan_visits(parts: &[PlanPart], limits: &PlanLimits) -> VisitPlan {
    let days = (limits.to_day - limits.from_day + 1).max(0) as usize;
    let mut free_hours = vec![limits.capacity_hours_per_day.max(0.0); days];
    let mut order: Vec<usize> = (0..parts.len()).collect();
    order.sort_by(|&a, &b| {
        let (pa, pb) = (&parts[a], &parts[b]);
        (pa.due_day, &pa.vehicle_id, pa.axle_index, pa.component).cmp(&(pb.due_day, &pb.vehicle_id, pb.axle_index, pb.component))
    });
    let mut settled = vec![false; parts.len()];
    let mut plan = VisitPlan::default();
    for &anchor in &order {
        let anchor_part = &parts[anchor];
        if settled[anchor] || anchor_part.due_day > limits.to_day {
            continue;
        }
        settled[anchor] = true;
        let already_due = |p: &PlanPart| p.due_day <= limits.from_day;
        if anchor_part.hours > limits.capacity_hours_per_day {
            plan.unplanned.push((anchor, UnplannedReason::LongerThanADay));
            continue;
        }
        // The anchor's bundle, in due order (so dropping from the back drops the latest).
        let mut bundle: Vec<usize> = vec![anchor];
        bundle.extend(order.iter().copied().filter(|&j| {
            j != anchor
                && !settled[j]
                && parts[j].vehicle_id == anchor_part.vehicle_id
                && parts[j].due_day <= anchor_part.due_day + limits.bundle_within_days
        }));
        let booked = loop {
            // The latest day that is before the due day of every part of the bundle not yet due.
            let last_day = bundle.iter().filter(|&&i| !already_due(&parts[i])).map(|&i| parts[i].due_day - 1).fold(limits.to_day, i64::min);
            let jobs: Vec<(usize, f64)> = bundle.iter().map(|&i| (i, charged_hours(parts, i, &bundle))).collect();
            let need: f64 = jobs.iter().map(|(_, h)| h).sum();
            let day = (limits.from_day..=last_day).find(|d| free_hours[(d - limits.from_day) as usize] + 1e-9 >= need);
            match day {
                Some(day) => break Some((day, jobs, need)),
                None if bundle.len() > 1 => {
                    bundle.pop();
                }
                None => break None,
            }
        };
        match booked {
            Some((day, jobs, need)) => {
                free_hours[(day - limits.from_day) as usize] -= need;
                for (i, _) in &jobs {
                    settled[*i] = true;
                }
                plan.visits.push(PlannedVisit { vehicle_id: anchor_part.vehicle_id.clone(), day, jobs });
            }
            None if already_due(anchor_part) => plan.unplanned.push((anchor, UnplannedReason::AlreadyDueNoCapacity)),
            None => plan.unplanned.push((anchor, UnplannedReason::NoCapacity)),
        }
    }
    plan.visits.sort_by(|a, b| (a.day, &a.vehicle_id).cmp(&(b.day, &b.vehicle_id)));
    plan
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    fn part(vehicle: &str, axle: u32, component: Component, due_day: i64, hours: f64) -> PlanPart {
        PlanPart { vehicle_id: vehicle.into(), axle_index: axle, component, due_day, hours }
    }

    fn limits(capacity: f64) -> PlanLimits {
        PlanLimits { from_day: 100, to_day: 113, capacity_hours_per_day: capacity, bundle_within_days: 7 }
    }

    #[test]
    fn bundles_one_vehicle_and_covers_pads_under_a_rotor_job() {
        let parts = vec![
            part("a", 1, Component::Friction, 105, 1.5),
            part("a", 1, Component::Disc, 109, 3.0),
            part("a", 2, Component::Friction, 130, 1.5),
        ];
        let plan = plan_visits(&parts, &limits(8.0));
        assert!(plan.unplanned.is_empty());
        assert_eq!(plan.visits.len(), 1);
        let visit = &plan.visits[0];
        assert_eq!(visit.day, 100);
        assert_eq!(visit.jobs.len(), 2, "axle 2 is due too late to bundle");
        assert!((visit.hours() - 3.0).abs() < 1e-9, "pads of axle 1 come with its rotor job");
    }

    #[test]
    fn capacity_pushes_work_to_later_days_and_reports_what_cannot_fit() {
        let parts = vec![part("a", 1, Component::Disc, 102, 3.0), part("b", 1, Component::Disc, 102, 3.0), part("c", 1, Component::Disc, 102, 3.0)];
        let plan = plan_visits(&parts, &limits(4.0));
        // Days 100 and 101 are before the due day 102: room for two 3-hour jobs in all.
        assert_eq!(plan.visits.len(), 2);
        assert_eq!(plan.unplanned, vec![(2, UnplannedReason::NoCapacity)]);
    }

    #[test]
    fn parts_already_due_are_booked_first_on_the_first_day_with_room() {
        // Day 100 is full with two 3-hour rotor jobs due on day 101; the overdue pad (due day
        // 99) and the pad due now (day 100) still come first, so they take day 100.
        let parts = vec![
            part("a", 1, Component::Disc, 101, 3.0),
            part("b", 1, Component::Friction, 99, 1.0),
            part("c", 2, Component::Friction, 100, 1.5),
        ];
        let plan = plan_visits(&parts, &limits(4.0));
        let day_of = |i: usize| plan.visits.iter().find(|v| v.jobs.iter().any(|(j, _)| *j == i)).map(|v| v.day);
        assert_eq!((day_of(1), day_of(2)), (Some(100), Some(100)), "{plan:?}");
        assert_eq!(plan.unplanned, vec![(0, UnplannedReason::NoCapacity)], "the rotor job no longer fits before day 101");
        // With no room anywhere in the plan, an already-due part is listed with its own reason.
        let full = PlanLimits { to_day: 100, ..limits(1.0) };
        let plan = plan_visits(&[part("b", 1, Component::Friction, 99, 1.0), part("c", 1, Component::Friction, 100, 1.0)], &full);
        assert_eq!(plan.visits.len(), 1);
        assert_eq!(plan.unplanned, vec![(1, UnplannedReason::AlreadyDueNoCapacity)]);
        // Already-due parts of one vehicle share a visit.
        let plan = plan_visits(&[part("d", 1, Component::Friction, 98, 1.0), part("d", 2, Component::Friction, 100, 1.0)], &limits(4.0));
        assert_eq!(plan.visits.len(), 1);
        assert_eq!(plan.visits[0].jobs.len(), 2);
    }

    fn arb_parts() -> impl Strategy<Value = Vec<PlanPart>> {
        prop::collection::vec(
            (0usize..6, 1u32..4, any::<bool>(), 95i64..130, 0.5f64..5.0).prop_map(|(v, axle, disc, due, hours)| {
                part(&format!("v{v}"), axle, if disc { Component::Disc } else { Component::Friction }, due, hours)
            }),
            0..40,
        )
        .prop_map(|mut parts| {
            // One entry per vehicle, axle and component, as forecasts give.
            parts.sort_by(|a, b| (&a.vehicle_id, a.axle_index, a.component).cmp(&(&b.vehicle_id, b.axle_index, b.component)));
            parts.dedup_by(|a, b| a.vehicle_id == b.vehicle_id && a.axle_index == b.axle_index && a.component == b.component);
            parts
        })
    }

    proptest! {
        /// Invariants: no day over capacity, nothing booked on or after its due day or outside
        /// the window, every part due within the window booked or listed exactly once.
        #[test]
        fn plans_respect_capacity_due_dates_and_account_for_every_part(parts in arb_parts(), capacity in 1.0f64..12.0) {
            let limits = limits(capacity);
            let plan = plan_visits(&parts, &limits);
            let mut per_day = std::collections::HashMap::new();
            let mut seen = vec![0u32; parts.len()];
            for visit in &plan.visits {
                prop_assert!(visit.day >= limits.from_day && visit.day <= limits.to_day);
                *per_day.entry(visit.day).or_insert(0.0) += visit.hours();
                for (i, _) in &visit.jobs {
                    let already_due = parts[*i].due_day <= limits.from_day;
                    prop_assert!(already_due || visit.day < parts[*i].due_day, "booked on or after its due day");
                    prop_assert_eq!(&parts[*i].vehicle_id, &visit.vehicle_id);
                    seen[*i] += 1;
                }
            }
            for hours in per_day.values() {
                prop_assert!(*hours <= capacity + 1e-9);
            }
            for (i, reason) in &plan.unplanned {
                seen[*i] += 1;
                // No part already due is left unbooked while a day of the plan has its hours free.
                if parts[*i].due_day <= limits.from_day && *reason != UnplannedReason::LongerThanADay {
                    for day in limits.from_day..=limits.to_day {
                        let used = per_day.get(&day).copied().unwrap_or(0.0);
                        prop_assert!(capacity - used + 1e-9 < parts[*i].hours, "part {} unbooked while day {} has {} h free", i, day, capacity - used);
                    }
                }
            }
            for (i, p) in parts.iter().enumerate() {
                if p.due_day <= limits.to_day {
                    prop_assert_eq!(seen[i], 1, "mandatory part {} seen {} times", i, seen[i]);
                } else {
                    prop_assert!(seen[i] <= 1);
                }
            }
        }
    }
}
