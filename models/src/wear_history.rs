//! A part's dated history (replacements and inspections with the cumulative braking energy at
//! each) and its division into wear cycles.
//!
//! A wear cycle runs from one replacement to the next. Its start is *known* when it begins
//! with a recorded replacement (the part's new thickness then sits at the cycle's energy
//! origin). Parts already fitted when the records began have an *unknown* start: the first
//! inspection is their baseline and only thickness differences within the cycle carry
//! information about the wear rate.
//!
//! Day convention: `day` is days since the Unix epoch (UTC). An event happens at the start of
//! its day, so the cumulative energies recorded with it count every day strictly before
//! `day.floor()`. [`history_from_daily_energy`] builds histories following that convention.

use serde::{Deserialize, Serialize};

use crate::domain::Component;

/// What happened to the part at an event.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub enum PartEventKind {
    /// The part was measured.
    Inspection {
        /// Measured remaining thickness, mm.
        thickness_mm: f64,
    },
    /// A new part was fitted.
    Replacement {
        /// Thickness of the part fitted, mm.
        new_thickness_mm: f64,
    },
}

/// One dated event in a part's life. `day` is days since the Unix epoch (UTC), fractional
/// allowed. Convention: an event happens at the START of its day: cumulative energies count
/// every day strictly before `day.floor()`.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct PartEvent {
    /// Days since the Unix epoch (UTC).
    pub day: f64,
    /// Friction energy at this brake (axle) since the vehicle's records began, MJ.
    pub cumulative_energy_mj: f64,
    /// Of which dissipated in hot stops, MJ.
    pub cumulative_hot_energy_mj: f64,
    /// Inspection or replacement.
    pub kind: PartEventKind,
}

/// The recorded life of one part position (vehicle, axle, component).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PartHistory {
    /// Axle position, 1 = front-most.
    pub axle_index: u32,
    /// Pad/lining or rotor/drum.
    pub component: Component,
    /// Nominal new thickness from the vehicle spec, mm (used when a replacement gives none).
    pub new_thickness_mm: f64,
    /// Minimum allowed thickness, mm.
    pub min_thickness_mm: f64,
    /// Events in the order of [`order_events`]: by full timestamp, an inspection before a
    /// replacement at the same instant.
    pub events: Vec<PartEvent>,
}

/// One inspection inside a cycle.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CyclePoint {
    /// Day of the inspection (days since epoch).
    pub day: f64,
    /// Cumulative energy at the inspection, MJ.
    pub energy_mj: f64,
    /// Cumulative hot energy at the inspection, MJ.
    pub hot_energy_mj: f64,
    /// Measured thickness, mm.
    pub thickness_mm: f64,
}

/// How a cycle began.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CycleStart {
    /// Day of the replacement.
    pub day: f64,
    /// Cumulative energy at the replacement, MJ.
    pub energy_mj: f64,
    /// Cumulative hot energy at the replacement, MJ.
    pub hot_energy_mj: f64,
    /// Thickness fitted, mm.
    pub new_thickness_mm: f64,
}

/// The inspections of one part between two replacements.
#[derive(Debug, Clone, PartialEq)]
pub struct WearCycle {
    /// The replacement that began the cycle; `None` when the part predates the records.
    pub start: Option<CycleStart>,
    /// Inspections in day order.
    pub points: Vec<CyclePoint>,
}

impl WearCycle {
    /// Energy origin of the cycle: the replacement, else the first inspection, MJ.
    pub fn origin_energy_mj(&self) -> Option<(f64, f64)> {
        match (&self.start, self.points.first()) {
            (Some(s), _) => Some((s.energy_mj, s.hot_energy_mj)),
            (None, Some(p)) => Some((p.energy_mj, p.hot_energy_mj)),
            (None, None) => None,
        }
    }
}

/// The cycle of the part fitted now, as a view of its history ([`PartHistory::current_cycle_view`]).
#[derive(Debug, Clone, Copy)]
pub struct CurrentCycle<'a> {
    /// The replacement that began the cycle; `None` when the part predates the records.
    pub start: Option<CycleStart>,
    /// The events after that replacement (all of them without one).
    after: &'a [PartEvent],
}

impl<'a> CurrentCycle<'a> {
    /// The cycle's inspections in day order, as [`WearCycle::points`].
    pub fn points(&self) -> impl DoubleEndedIterator<Item = CyclePoint> + 'a {
        self.after.iter().filter(|e| usable_event(e)).filter_map(|e| match e.kind {
            PartEventKind::Inspection { thickness_mm } => cycle_point(e, thickness_mm),
            PartEventKind::Replacement { .. } => None,
        })
    }

    /// [`WearCycle::origin_energy_mj`] of this cycle.
    pub fn origin_energy_mj(&self) -> Option<(f64, f64)> {
        match (&self.start, self.points().next()) {
            (Some(s), _) => Some((s.energy_mj, s.hot_energy_mj)),
            (None, Some(p)) => Some((p.energy_mj, p.hot_energy_mj)),
            (None, None) => None,
        }
    }
}

impl PartHistory {
    /// Splits the events into wear cycles, oldest first. The last cycle is the part fitted
    /// now. Events with non-finite values are skipped.
    pub fn cycles(&self) -> Vec<WearCycle> {
        // Each cycle's points get room at once for every event up to the next replacement (one
        // allocation per cycle rather than one per doubling; every part is fitted each refresh).
        let is_replacement = |e: &PartEvent| matches!(e.kind, PartEventKind::Replacement { .. });
        let room = |from: usize| self.events.get(from..).map_or(0, |rest| rest.iter().take_while(|e| !is_replacement(e)).count());
        let mut cycles = Vec::with_capacity(1 + self.events.iter().filter(|e| is_replacement(e)).count());
        cycles.push(WearCycle { start: None, points: Vec::with_capacity(room(0)) });
        for (index, event) in self.events.iter().enumerate().filter(|(_, e)| usable_event(e)) {
            match event.kind {
                PartEventKind::Replacement { new_thickness_mm } => {
                    let start = Some(self.cycle_start(event, new_thickness_mm));
                    cycles.push(WearCycle { start, points: Vec::with_capacity(room(index + 1)) });
                }
                PartEventKind::Inspection { thickness_mm } => {
                    if let (Some(last), Some(point)) = (cycles.last_mut(), cycle_point(event, thickness_mm)) {
                        last.points.push(point);
                    }
                }
            }
        }
        if cycles.len() > 1 && cycles[0].points.is_empty() {
            cycles.remove(0);
        }
        cycles
    }

    /// The last of [`Self::cycles`] (the part fitted now) without building the others.
    pub fn current_cycle(&self) -> WearCycle {
        let view = self.current_cycle_view();
        WearCycle { start: view.start, points: view.points().collect() }
    }

    /// [`Self::current_cycle`] as a view of the events, its points read as they are walked
    /// (no list of them is built: a refresh forecasts every part).
    pub fn current_cycle_view(&self) -> CurrentCycle<'_> {
        let last_replacement = self
            .events
            .iter()
            .rposition(|e| usable_event(e) && matches!(e.kind, PartEventKind::Replacement { .. }));
        let (start, after) = match last_replacement {
            Some(i) => match self.events[i].kind {
                PartEventKind::Replacement { new_thickness_mm } => (Some(self.cycle_start(&self.events[i], new_thickness_mm)), &self.events[i + 1..]),
                PartEventKind::Inspection { .. } => (None, &self.events[..]),
            },
            None => (None, &self.events[..]),
        };
        CurrentCycle { start, after }
    }

    /// The start of the cycle a replacement begins: the thickness fitted, or the nominal new
    /// thickness when the record gives none that is usable.
    fn cycle_start(&self, event: &PartEvent, new_thickness_mm: f64) -> CycleStart {
        let new_mm = if new_thickness_mm.is_finite() && new_thickness_mm > 0.0 { new_thickness_mm } else { self.new_thickness_mm };
        CycleStart {
            day: event.day,
            energy_mj: event.cumulative_energy_mj,
            hot_energy_mj: event.cumulative_hot_energy_mj,
            new_thickness_mm: new_mm,
        }
    }
}

/// Whether an event's day and energies are finite (the others are skipped).
fn usable_event(event: &PartEvent) -> bool {
    event.day.is_finite() && event.cumulative_energy_mj.is_finite() && event.cumulative_hot_energy_mj.is_finite()
}

/// An inspection as a cycle point; `None` when its thickness is not finite.
fn cycle_point(event: &PartEvent, thickness_mm: f64) -> Option<CyclePoint> {
    thickness_mm.is_finite().then_some(CyclePoint {
        day: event.day,
        energy_mj: event.cumulative_energy_mj,
        hot_energy_mj: event.cumulative_hot_energy_mj,
        thickness_mm,
    })
}

/// A dated event without energies, for [`history_from_daily_energy`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct DatedEvent {
    /// Days since the Unix epoch (UTC).
    pub day: f64,
    /// What happened.
    pub kind: PartEventKind,
}

/// Builds a [`PartHistory`] from per-day energies and dated events.
///
/// `first_day` is the day (since epoch) of `daily_energy_mj[0]`; `daily_hot_energy_mj` is
/// either empty or as long as `daily_energy_mj`. Each event gets the sum of the days strictly
/// before its `day.floor()` (the start-of-day convention). Events are put in order by
/// [`order_events`].
#[allow(clippy::too_many_arguments)]
pub fn history_from_daily_energy(
    axle_index: u32,
    component: Component,
    new_thickness_mm: f64,
    min_thickness_mm: f64,
    first_day: i64,
    daily_energy_mj: &[f64],
    daily_hot_energy_mj: &[f64],
    events: &[DatedEvent],
) -> PartHistory {
    let prefix = prefix_sums(daily_energy_mj);
    let hot_prefix = prefix_sums(daily_hot_energy_mj);
    let mut sorted: Vec<DatedEvent> = events.iter().copied().filter(|e| e.day.is_finite()).collect();
    order_events(&mut sorted);
    let events = sorted
        .into_iter()
        .map(|e| {
            let days_before = e.day.floor() as i64 - first_day;
            PartEvent {
                day: e.day,
                cumulative_energy_mj: prefix_at(&prefix, days_before),
                cumulative_hot_energy_mj: prefix_at(&hot_prefix, days_before),
                kind: e.kind,
            }
        })
        .collect();
    PartHistory { axle_index, component, new_thickness_mm, min_thickness_mm, events }
}

/// Puts a part's events in the order they happened: by their full timestamp; at exactly the
/// same instant an inspection comes before a replacement. The tie rule follows the workshop
/// routine of measuring a worn part and then replacing it: a reading stamped with the same
/// instant as a replacement is taken to be of the part removed, never of the new one, so a worn
/// reading can never be mistaken for the first point of a new part's cycle. Every view of a
/// part's history (fit, forecast, trajectory chart) uses this one rule.
pub fn order_events(events: &mut [DatedEvent]) {
    events.sort_by(|a, b| a.day.total_cmp(&b.day).then_with(|| event_rank(&a.kind).cmp(&event_rank(&b.kind))));
}

fn event_rank(kind: &PartEventKind) -> u8 {
    match kind {
        PartEventKind::Inspection { .. } => 0,
        PartEventKind::Replacement { .. } => 1,
    }
}

/// `prefix[i]` = sum of the first `i` values.
pub fn prefix_sums(values: &[f64]) -> Vec<f64> {
    let mut out = Vec::with_capacity(values.len() + 1);
    let mut total = 0.0;
    out.push(0.0);
    for v in values {
        total += if v.is_finite() { *v } else { 0.0 };
        out.push(total);
    }
    out
}

/// Sum of the first `days` values from a prefix-sum table, clamped to the table.
pub fn prefix_at(prefix: &[f64], days: i64) -> f64 {
    if days <= 0 || prefix.is_empty() {
        return 0.0;
    }
    let i = (days as usize).min(prefix.len() - 1);
    prefix[i]
}
