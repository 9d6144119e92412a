//! Workshop visit planning: book the parts that are already due at once, and every other part
//! as late as is safe, within a daily workshop capacity, bundling one vehicle's work into one
//! visit.
//!
//! # Method
//! Days are calendar day numbers in the fleet's time zone. A part's `due_day` is the day of the
//! lower end of its due band (`due_earliest`), its `median_day` the day of the band's median.
//! 1. **Already due** (`due_day ≤ from_day`: due now, or overdue). Each vehicle's already-due
//!    parts, most overdue vehicle first, are booked before anything else, together on the
//!    first day with enough free hours for all of them when that is also the first day with
//!    room for the most overdue one; otherwise each on the first day with room for it (joining
//!    the vehicle's visit when it has one that day). None waits for a later day while an
//!    earlier one has room.
//! 2. **Not yet due** parts whose `due_day` falls within the plan, earliest due first. A part's
//!    *latest safe day* is `due_day − 1 − safety_margin_days`: booked no later than that, it is
//!    replaced at least the margin before it may first reach its minimum. In order:
//!    a. it joins a visit of the same vehicle already booked on or before its latest safe day
//!    and at most `bundle_within_days` before it (the due-now visit of 1. included);
//!    b. otherwise a new visit carries it and the vehicle's other unbooked parts whose latest
//!    safe day is within `bundle_within_days` after its own (parts due after the plan ends
//!    included: booking them now saves a second visit). The visit goes on the **latest**
//!    day on or before the latest safe day with enough free hours: moved earlier only for
//!    capacity. If no day has room, the latest-due members are dropped one by one (they are
//!    planned on their own later);
//!    c. if the part alone finds no room on or before its latest safe day, it is booked on the
//!    first day with room inside the margin (still strictly before `due_day`) and marked
//!    `inside_safety_margin`; failing that it is listed as unplanned with the reason.
//! 3. Parts due after the plan ends are booked only by joining a visit (2a, 2b).
//! 4. A disc (rotor or drum) job includes the friction parts of the same axle, so a friction
//!    job on an axle whose disc job is in the same visit costs no extra hours.
//!
//! Each booked part reports the wear life it gives up: the days from its visit to its median
//! due date (0 for a part already due).
//!
//! Booking as late as the margin allows is the mirror image of earliest-deadline-first
//! (Jackson's rule, 1955: EDF minimises the maximum lateness on one machine): parts are taken in
//! due order and each placed on the latest day that keeps its deadline, so a part booked earlier
//! than its latest safe day was pushed there by capacity or by its vehicle's other work. With
//! daily capacities, bundles and unequal hours it is a heuristic, but one that never breaks a
//! capacity or a due date.

use crate::domain::Component;

/// Days kept between a visit and a not-yet-due part's `due_earliest` when the request names no
/// margin: one working week (common practice, no source: a week leaves room to reschedule
/// a visit that falls through).
pub const DEFAULT_SAFETY_MARGIN_DAYS: i64 = 7;

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
    /// Calendar day of the due band's median (not before `due_day`).
    pub median_day: i64,
    /// Workshop hours of the job.
    pub hours: f64,
}

impl PlanPart {
    /// True when the part is already due on the plan's first day (due now, or overdue).
    pub fn already_due(&self, limits: &PlanLimits) -> bool {
        self.due_day <= limits.from_day
    }

    /// The last day on which booking keeps the safety margin before `due_day` (may lie before
    /// the plan's first day when the part is due soon).
    pub fn latest_safe_day(&self, limits: &PlanLimits) -> i64 {
        self.due_day - 1 - limits.safety_margin_days.max(0)
    }

    /// Days of wear life given up by replacing the part on `day`: from `day` to its median due
    /// day, never negative.
    pub fn wear_life_given_up_days(&self, day: i64) -> i64 {
        (self.median_day - day).max(0)
    }
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
    /// A part may be moved this many days earlier than its latest safe day to share a visit
    /// with its vehicle's other work.
    pub bundle_within_days: i64,
    /// Days kept between a not-yet-due part's visit and its due day (see [`PlanPart::latest_safe_day`]).
    pub safety_margin_days: i64,
}

/// One booked job of a visit.
#[derive(Debug, Clone, PartialEq)]
pub struct BookedJob {
    /// Index of the part (into the planner's input).
    pub part: usize,
    /// Hours charged for it in this visit (0 for pads or linings under a rotor or drum job of the
    /// same axle).
    pub hours: f64,
    /// Booked after its latest safe day (still before its due day), because every day before
    /// was full.
    pub inside_safety_margin: bool,
}

/// One booked visit of one vehicle on one day.
#[derive(Debug, Clone, PartialEq)]
pub struct PlannedVisit {
    /// Vehicle identifier.
    pub vehicle_id: String,
    /// Calendar day number of the visit.
    pub day: i64,
    /// The booked jobs.
    pub jobs: Vec<BookedJob>,
}

impl PlannedVisit {
    /// Hours of the visit.
    pub fn hours(&self) -> f64 {
        self.jobs.iter().map(|j| j.hours).sum()
    }
}

/// Why a part due within the plan could not be booked.
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
    /// Parts due within the plan that were not booked, with the reason (indexes into the input).
    pub unplanned: Vec<(usize, UnplannedReason)>,
}

/// Hours charged for part `i` when booked with the parts `visit` (which may include `i`).
fn charged_hours(parts: &[PlanPart], i: usize, visit: &[usize]) -> f64 {
    let part = &parts[i];
    // A rotor or drum job includes the axle's pads or linings (when it takes at least as long:
    // so adding a job to a visit never lowers its hours).
    let covered = part.component == Component::Friction
        && visit.iter().any(|&j| {
            let other = &parts[j];
            other.component == Component::Disc && other.axle_index == part.axle_index && other.vehicle_id == part.vehicle_id && other.hours >= part.hours
        });
    if covered {
        0.0
    } else {
        part.hours
    }
}

/// Workshop hours of a set of parts done in one visit.
fn visit_cost(parts: &[PlanPart], visit: &[usize]) -> f64 {
    visit.iter().map(|&i| charged_hours(parts, i, visit)).sum()
}

/// The plan being built: free hours per day and the visits booked so far.
struct Workshop<'a> {
    parts: &'a [PlanPart],
    limits: &'a PlanLimits,
    free_hours: Vec<f64>,
    visits: Vec<PlannedVisit>,
    settled: Vec<bool>,
}

impl<'a> Workshop<'a> {
    fn new(parts: &'a [PlanPart], limits: &'a PlanLimits) -> Self {
        let days = (limits.to_day - limits.from_day + 1).max(0) as usize;
        Self { parts, limits, free_hours: vec![limits.capacity_hours_per_day.max(0.0); days], visits: Vec::new(), settled: vec![false; parts.len()] }
    }

    fn visit_on(&self, vehicle_id: &str, day: i64) -> Option<usize> {
        self.visits.iter().position(|v| v.day == day && v.vehicle_id == vehicle_id)
    }

    /// Extra hours that booking `members` on `day` costs (joining the vehicle's visit that day).
    fn extra_hours(&self, vehicle_id: &str, day: i64, members: &[usize]) -> f64 {
        let existing: Vec<usize> = self.visit_on(vehicle_id, day).map(|v| self.visits[v].jobs.iter().map(|j| j.part).collect()).unwrap_or_default();
        let all: Vec<usize> = existing.iter().chain(members).copied().collect();
        visit_cost(self.parts, &all) - visit_cost(self.parts, &existing)
    }

    /// Whether `members` fit on `day` (a day of the plan).
    fn fits(&self, vehicle_id: &str, day: i64, members: &[usize]) -> bool {
        if day < self.limits.from_day || day > self.limits.to_day {
            return false;
        }
        self.free_hours[(day - self.limits.from_day) as usize] + 1e-9 >= self.extra_hours(vehicle_id, day, members)
    }

    /// The first day of `days` on which `members` fit.
    fn first_fit(&self, vehicle_id: &str, mut days: impl Iterator<Item = i64>, members: &[usize]) -> Option<i64> {
        days.find(|&d| self.fits(vehicle_id, d, members))
    }

    /// Books `members` on `day`, in the vehicle's visit of that day when it has one.
    fn book(&mut self, vehicle_id: &str, day: i64, members: &[usize], inside_safety_margin: bool) {
        let extra = self.extra_hours(vehicle_id, day, members);
        self.free_hours[(day - self.limits.from_day) as usize] -= extra;
        let visit = match self.visit_on(vehicle_id, day) {
            Some(v) => v,
            None => {
                self.visits.push(PlannedVisit { vehicle_id: vehicle_id.to_owned(), day, jobs: Vec::new() });
                self.visits.len() - 1
            }
        };
        let jobs = &mut self.visits[visit].jobs;
        jobs.extend(members.iter().map(|&part| BookedJob { part, hours: 0.0, inside_safety_margin }));
        let all: Vec<usize> = jobs.iter().map(|j| j.part).collect();
        for job in jobs.iter_mut() {
            job.hours = charged_hours(self.parts, job.part, &all);
        }
        for &i in members {
            self.settled[i] = true;
        }
    }

    /// Step 1: a vehicle's already-due parts (in urgency order).
    fn book_already_due(&mut self, vehicle_id: &str, group: &[usize], unplanned: &mut Vec<(usize, UnplannedReason)>) {
        let all_days = self.limits.from_day..=self.limits.to_day;
        let first_alone = self.first_fit(vehicle_id, all_days.clone(), &group[..1]);
        let first_all = self.first_fit(vehicle_id, all_days.clone(), group);
        if first_all.is_some() && first_all == first_alone {
            if let Some(day) = first_all {
                self.book(vehicle_id, day, group, false);
            }
            return;
        }
        for &i in group {
            match self.first_fit(vehicle_id, all_days.clone(), &[i]) {
                Some(day) => self.book(vehicle_id, day, &[i], false),
                None => unplanned.push((i, UnplannedReason::AlreadyDueNoCapacity)),
            }
        }
    }

    /// Step 2a: the latest visit of the part's vehicle it may join, if one has room.
    fn join_existing(&mut self, i: usize) -> bool {
        let part = &self.parts[i];
        let latest = part.latest_safe_day(self.limits);
        let day = self
            .visits
            .iter()
            .filter(|v| v.vehicle_id == part.vehicle_id && v.day <= latest && latest - v.day <= self.limits.bundle_within_days)
            .map(|v| v.day)
            .filter(|&d| self.fits(&part.vehicle_id, d, &[i]))
            .max();
        match day {
            Some(day) => {
                let vehicle_id = part.vehicle_id.clone();
                self.book(&vehicle_id, day, &[i], false);
                true
            }
            None => false,
        }
    }

    /// Steps 2b and 2c for a part not yet due whose due day falls within the plan.
    fn book_not_yet_due(&mut self, anchor: usize, order: &[usize]) -> Option<UnplannedReason> {
        let part = &self.parts[anchor];
        let vehicle_id = part.vehicle_id.clone();
        let anchor_latest = part.latest_safe_day(self.limits);
        // The bundle, in due order (so dropping from the back drops the latest).
        let mut bundle: Vec<usize> = vec![anchor];
        bundle.extend(order.iter().copied().filter(|&j| {
            j != anchor
                && !self.settled[j]
                && self.parts[j].vehicle_id == vehicle_id
                && !self.parts[j].already_due(self.limits)
                && self.parts[j].latest_safe_day(self.limits) <= anchor_latest + self.limits.bundle_within_days
        }));
        loop {
            let last_day = bundle.iter().map(|&i| self.parts[i].latest_safe_day(self.limits)).fold(self.limits.to_day, i64::min);
            if let Some(day) = self.first_fit(&vehicle_id, (self.limits.from_day..=last_day).rev(), &bundle) {
                self.book(&vehicle_id, day, &bundle, false);
                return None;
            }
            if bundle.len() == 1 {
                break;
            }
            bundle.pop();
        }
        // Inside the margin: the first day with room after the latest safe day, before the due day.
        let margin_days = (anchor_latest + 1).max(self.limits.from_day)..=(part.due_day - 1).min(self.limits.to_day);
        match self.first_fit(&vehicle_id, margin_days, &[anchor]) {
            Some(day) => {
                self.book(&vehicle_id, day, &[anchor], true);
                None
            }
            None => Some(UnplannedReason::NoCapacity),
        }
    }
}

/// Plans visits (see the module docs).
pub fn plan_visits(parts: &[PlanPart], limits: &PlanLimits) -> VisitPlan {
    let mut order: Vec<usize> = (0..parts.len()).collect();
    order.sort_by(|&a, &b| {
        let (pa, pb) = (&parts[a], &parts[b]);
        (pa.due_day, &pa.vehicle_id, pa.axle_index, pa.component).cmp(&(pb.due_day, &pb.vehicle_id, pb.axle_index, pb.component))
    });
    let mut workshop = Workshop::new(parts, limits);
    let mut unplanned = Vec::new();
    let too_long = |i: usize| parts[i].hours > limits.capacity_hours_per_day;
    // Step 1: already-due parts, grouped by vehicle, most overdue vehicle first.
    let mut groups: Vec<(&str, Vec<usize>)> = Vec::new();
    for &i in order.iter().filter(|&&i| parts[i].already_due(limits) && limits.from_day <= limits.to_day) {
        if too_long(i) {
            unplanned.push((i, UnplannedReason::LongerThanADay));
            continue;
        }
        match groups.iter_mut().find(|(v, _)| *v == parts[i].vehicle_id) {
            Some((_, group)) => group.push(i),
            None => groups.push((&parts[i].vehicle_id, vec![i])),
        }
    }
    for (vehicle_id, group) in &groups {
        workshop.book_already_due(vehicle_id, group, &mut unplanned);
    }
    // Steps 2 and 3: the rest, earliest due first.
    for &i in order.iter().filter(|&&i| !parts[i].already_due(limits)) {
        if workshop.settled[i] {
            continue;
        }
        let within_plan = parts[i].due_day <= limits.to_day;
        if within_plan && too_long(i) {
            workshop.settled[i] = true;
            unplanned.push((i, UnplannedReason::LongerThanADay));
            continue;
        }
        if workshop.join_existing(i) || !within_plan {
            continue;
        }
        if let Some(reason) = workshop.book_not_yet_due(i, &order) {
            workshop.settled[i] = true;
            unplanned.push((i, reason));
        }
    }
    let mut visits = workshop.visits;
    visits.sort_by(|a, b| (a.day, &a.vehicle_id).cmp(&(b.day, &b.vehicle_id)));
    for visit in &mut visits {
        visit.jobs.sort_by_key(|j| (parts[j.part].axle_index, parts[j.part].component));
    }
    VisitPlan { visits, unplanned }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    /// A part whose median due day is 20 days after its earliest.
    fn part(vehicle: &str, axle: u32, component: Component, due_day: i64, hours: f64) -> PlanPart {
        PlanPart { vehicle_id: vehicle.into(), axle_index: axle, component, due_day, median_day: due_day + 20, hours }
    }

    fn limits(capacity: f64) -> PlanLimits {
        PlanLimits { from_day: 100, to_day: 113, capacity_hours_per_day: capacity, bundle_within_days: 7, safety_margin_days: 0 }
    }

    fn day_of(plan: &VisitPlan, i: usize) -> Option<i64> {
        plan.visits.iter().find(|v| v.jobs.iter().any(|j| j.part == i)).map(|v| v.day)
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
        assert_eq!(visit.day, 104, "as late as possible: the day before the pad's due day");
        assert_eq!(visit.jobs.len(), 2, "axle 2 is due too late to bundle");
        assert!((visit.hours() - 3.0).abs() < 1e-9, "pads of axle 1 come with its rotor job");
    }

    #[test]
    fn parts_not_yet_due_are_booked_as_late_as_the_margin_allows() {
        // The case from the field: a pad with about seven weeks left (due day 149, median 169)
        // in an eight-week plan is booked a week before its due day, not today.
        let long = PlanLimits { to_day: 155, safety_margin_days: 7, ..limits(8.0) };
        let parts = vec![part("a", 1, Component::Friction, 149, 1.5)];
        let plan = plan_visits(&parts, &long);
        assert_eq!(day_of(&plan, 0), Some(141), "{plan:?}");
        assert_eq!(parts[0].wear_life_given_up_days(141), 28, "four weeks of wear given up, not seven");
        // Capacity moves work earlier, never later: three 3-hour jobs due on day 112 with room
        // for two a day.
        let parts: Vec<PlanPart> = ["a", "b", "c"].iter().map(|v| part(v, 1, Component::Disc, 112, 3.0)).collect();
        let plan = plan_visits(&parts, &PlanLimits { safety_margin_days: 3, ..limits(6.0) });
        let days: Vec<i64> = (0..3).map(|i| day_of(&plan, i).expect("booked")).collect();
        assert_eq!(days, vec![108, 108, 107]);
        assert!(plan.visits.iter().all(|v| v.jobs.iter().all(|j| !j.inside_safety_margin)));
    }

    #[test]
    fn a_full_week_before_the_margin_books_inside_it_and_says_so() {
        // Days 100..=104 are full of rotor jobs due now; the pad due on day 108 (latest safe
        // day 104 with a 3-day margin) goes on day 105, inside its margin.
        let mut parts: Vec<PlanPart> = (0..5).map(|v| part(&format!("r{v}"), 1, Component::Disc, 99, 4.0)).collect();
        parts.push(part("p", 1, Component::Friction, 108, 1.5));
        let plan = plan_visits(&parts, &PlanLimits { safety_margin_days: 3, ..limits(4.0) });
        assert_eq!(day_of(&plan, 5), Some(105), "{plan:?}");
        let job = plan.visits.iter().flat_map(|v| &v.jobs).find(|j| j.part == 5).expect("booked");
        assert!(job.inside_safety_margin);
    }

    #[test]
    fn capacity_pushes_work_earlier_and_reports_what_cannot_fit() {
        let parts = vec![part("a", 1, Component::Disc, 102, 3.0), part("b", 1, Component::Disc, 102, 3.0), part("c", 1, Component::Disc, 102, 3.0)];
        let plan = plan_visits(&parts, &limits(4.0));
        // Days 100 and 101 are before the due day 102: room for two 3-hour jobs in all.
        assert_eq!(plan.visits.len(), 2);
        assert_eq!(plan.unplanned, vec![(2, UnplannedReason::NoCapacity)]);
    }

    #[test]
    fn parts_already_due_are_booked_first_on_the_first_day_with_room() {
        // The rotor job due on day 101 would fit only on day 100; the overdue pad (due day 99)
        // and the pad due now (day 100) come first and take day 100.
        let parts = vec![
            part("a", 1, Component::Disc, 101, 3.0),
            part("b", 1, Component::Friction, 99, 1.0),
            part("c", 2, Component::Friction, 100, 1.5),
        ];
        let plan = plan_visits(&parts, &limits(4.0));
        assert_eq!((day_of(&plan, 1), day_of(&plan, 2)), (Some(100), Some(100)), "{plan:?}");
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

    #[test]
    fn a_due_now_pad_and_its_vehicles_other_axle_share_one_visit() {
        // The rear rotor (due day 110, latest safe day 106) would go on day 106 alone; the front
        // pad is due now, so the rotor moves forward into the pad's visit on day 100 (within the
        // 7-day bundling window of its latest safe day).
        let parts = vec![part("a", 2, Component::Disc, 110, 3.0), part("a", 1, Component::Friction, 100, 1.5)];
        let plan = plan_visits(&parts, &PlanLimits { safety_margin_days: 3, ..limits(8.0) });
        assert_eq!(plan.visits.len(), 1, "{plan:?}");
        assert_eq!(plan.visits[0].day, 100);
        assert_eq!(plan.visits[0].jobs.len(), 2);
        // Outside the window the rotor keeps its own, later visit.
        let parts = vec![part("a", 2, Component::Disc, 113, 3.0), part("a", 1, Component::Friction, 100, 1.5)];
        let plan = plan_visits(&parts, &PlanLimits { safety_margin_days: 0, bundle_within_days: 5, ..limits(8.0) });
        assert_eq!((day_of(&plan, 1), day_of(&plan, 0)), (Some(100), Some(112)), "{plan:?}");
    }

    fn arb_parts() -> impl Strategy<Value = Vec<PlanPart>> {
        prop::collection::vec(
            (0usize..6, 1u32..4, any::<bool>(), 95i64..130, 0i64..40, 0.5f64..5.0).prop_map(|(v, axle, disc, due, spread, hours)| PlanPart {
                median_day: due + spread,
                ..part(&format!("v{v}"), axle, if disc { Component::Disc } else { Component::Friction }, due, hours)
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
        /// Invariants: no day over capacity; nothing not yet due booked on or after its due day
        /// (bundled or not), nor outside the window; no part already due left unbooked while a
        /// day has room for it; a lone part booked before its latest safe day only because every
        /// later safe day was full (and inside its margin only because every safe day was full);
        /// every part due within the window booked or listed exactly once.
        #[test]
        fn plans_respect_capacity_due_dates_and_account_for_every_part(
            parts in arb_parts(),
            capacity in 1.0f64..12.0,
            margin in 0i64..10,
            bundle in 0i64..15,
        ) {
            let limits = PlanLimits { safety_margin_days: margin, bundle_within_days: bundle, ..limits(capacity) };
            let plan = plan_visits(&parts, &limits);
            let mut used = std::collections::HashMap::new();
            let mut seen = vec![0u32; parts.len()];
            for visit in &plan.visits {
                prop_assert!(visit.day >= limits.from_day && visit.day <= limits.to_day);
                *used.entry(visit.day).or_insert(0.0) += visit.hours();
                for job in &visit.jobs {
                    let p = &parts[job.part];
                    prop_assert!(p.already_due(&limits) || visit.day < p.due_day, "part {} booked on day {} on or after its due day {}", job.part, visit.day, p.due_day);
                    prop_assert!(job.inside_safety_margin || p.already_due(&limits) || visit.day <= p.latest_safe_day(&limits));
                    prop_assert_eq!(&p.vehicle_id, &visit.vehicle_id);
                    prop_assert!(p.wear_life_given_up_days(visit.day) >= 0);
                    seen[job.part] += 1;
                }
            }
            let free = |day: i64| capacity - used.get(&day).copied().unwrap_or(0.0);
            for day in limits.from_day..=limits.to_day {
                prop_assert!(free(day) >= -1e-9, "day {} over capacity", day);
            }
            for visit in plan.visits.iter().filter(|v| v.jobs.len() == 1) {
                let job = &visit.jobs[0];
                let p = &parts[job.part];
                if p.already_due(&limits) {
                    continue;
                }
                let latest = p.latest_safe_day(&limits);
                let skipped = if job.inside_safety_margin { limits.from_day..=latest } else { (visit.day + 1)..=latest };
                for day in skipped {
                    prop_assert!(free(day) + 1e-9 < p.hours, "part {} booked on day {} while day {} had {} h free", job.part, visit.day, day, free(day));
                }
            }
            for (i, reason) in &plan.unplanned {
                seen[*i] += 1;
                if parts[*i].already_due(&limits) && *reason != UnplannedReason::LongerThanADay {
                    for day in limits.from_day..=limits.to_day {
                        prop_assert!(free(day) + 1e-9 < parts[*i].hours, "part {} unbooked while day {} has {} h free", i, day, free(day));
                    }
                }
            }
            for (i, p) in parts.iter().enumerate() {
                if p.due_day <= limits.to_day {
                    prop_assert_eq!(seen[i], 1, "part {} due within the plan seen {} times", i, seen[i]);
                } else {
                    prop_assert!(seen[i] <= 1);
                }
            }
        }
    }
}
