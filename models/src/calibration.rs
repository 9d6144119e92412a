//! Forecast accuracy on a simulated fleet: band coverage and median error against the true
//! crossing days, beside an oracle and two baselines a fleet might use instead. Works on both
//! generators ([`crate::simulator`] and [`crate::stress_fleet`]); figures are reported for
//! pads/linings and rotors/drums separately and overall ([`AccuracyReport`]).
//!
//! # Which parts, and how each is scored
//! Every part fitted at the cut is scored; none is dropped. With `cut` the cut day, `H` the
//! end of the simulated future and `(low, median, high)` a forecast's band, dates are compared
//! censored at `H` on both sides: nothing beyond `H` is simulated, so a median beyond it is
//! taken as `H` (one absurdly late median cannot swamp the mean, but it still costs its full
//! distance to `H`):
//! - **Crossing within the horizon** (truth `t`, after the cut): error `|median − t|`,
//!   covered if `low ≤ t ≤ high`.
//! - **Beyond the horizon** (no crossing simulated; censored, the truth is "≥ H"): error
//!   `max(0, H − median)`, a lower bound of the true error; covered if `high ≥ H`.
//! - **Already past the minimum at the cut** (due now): error `|median − cut|`, covered if
//!   `low ≤ cut + 1 day`.
//! - **Undated** (the model gave no date): counted in `undated`, never covered, and given the
//!   error of a median at `H`, as if "no date" meant "not within the horizon". A model that
//!   refuses to date a part due soon is penalised by its full distance to `H`.
//!
//! # Oracle
//! Knows each part's true thickness at the cut and its true rate (mm/MJ; for the stress fleet
//! the mean rate it experienced after the cut, see [`crate::stress_fleet`]), so its remaining
//! energy is exact: `R = (thickness_at_cut − min) / rate`. It forecasts only the energy use,
//! as the model does: [`estimate_energy_rate`] over the same window with the default
//! half-life and relative SD of [`ForecastSettings`], and the median and band of the inverse
//! Gaussian passage time ([`FirstPassage`]). Its error is what is left when wear is known
//! perfectly; the report prints the model's MAE over the oracle's (`ratio`).
//!
//! # Baselines
//! - **Mileage interval**: replace every `N` km, with `N` fitted per (class, axle, component)
//!   on the same history: `N = (new − min) / w`, `w` the group's pooled least-squares wear per km
//!   (mm/km) over all inspections (a cycle of unknown start is placed on the interval by its
//!   first measured thickness). The due day is when the km since fitting reach `N`, at the
//!   vehicle's mean km per day over the last 120 days.
//! - **Odometer extrapolation**: per part, a straight line of thickness against odometer over
//!   the current cycle's inspections (plus the new thickness at the fitting, when on record),
//!   extrapolated to the minimum and converted to days at the same km per day, as a spreadsheet
//!   would. Parts with fewer than two points or a non-falling line use the mileage interval.
//!
//! Both baselines are scored by the same rules as the model.

use std::collections::HashMap;
use std::fmt;

use crate::domain::Component;
use crate::energy_rate::estimate_energy_rate;
use crate::first_passage::FirstPassage;
use crate::forecast::{DueDistribution, ForecastSettings};
use crate::pipeline::{forecast_parts, GroupKey, PartInput};
use crate::simulator::{SimVehicle, SimulatedFleet, TrueCrossing, SECONDS_PER_DAY};
use crate::wear_history::{history_from_daily_energy, prefix_sums, DatedEvent, PartEventKind, PartHistory};

/// Identifies a part position in a fleet.
#[derive(Debug, Clone, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub struct PartKey {
    /// Vehicle identifier.
    pub vehicle_id: String,
    /// Axle, 1 = front.
    pub axle_index: u32,
    /// Which part.
    pub component: Component,
}

/// The truth about one part's due date, as scoring sees it.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum TrueDue {
    /// At or below its minimum already at the cut: due now.
    PastMinimum,
    /// Reaches its minimum on this day (days since epoch), after the cut, within the horizon.
    Crossing(f64),
    /// Does not reach its minimum within the simulated future (censored at the horizon end).
    BeyondHorizon,
}

impl TrueDue {
    /// Classifies a true crossing day (`None` = not within the simulated future).
    pub fn from_crossing(crossing_day: Option<f64>, cut_day: f64) -> Self {
        match crossing_day {
            None => TrueDue::BeyondHorizon,
            Some(day) if day <= cut_day => TrueDue::PastMinimum,
            Some(day) => TrueDue::Crossing(day),
        }
    }

    /// Absolute error of a forecast median day, days, with the median censored at the horizon
    /// end like the truth (module docs; a lower bound when censored). A NaN median counts as
    /// the horizon end.
    pub fn error_days(self, median_day: f64, cut_day: f64, horizon_end_day: f64) -> f64 {
        let median_day = median_day.min(horizon_end_day);
        match self {
            TrueDue::PastMinimum => (median_day - cut_day).abs(),
            TrueDue::Crossing(day) => (median_day - day).abs(),
            TrueDue::BeyondHorizon => (horizon_end_day - median_day).max(0.0),
        }
    }

    /// Whether the band `[low_day, high_day]` covers the truth (module docs).
    pub fn covered(self, low_day: f64, high_day: f64, cut_day: f64, horizon_end_day: f64) -> bool {
        match self {
            TrueDue::PastMinimum => low_day <= cut_day + 1.0,
            TrueDue::Crossing(day) => low_day <= day && day <= high_day,
            TrueDue::BeyondHorizon => high_day >= horizon_end_day,
        }
    }
}

/// Accuracy figures of one set of parts (pads/linings, rotors/drums, or all).
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct ScoreLine {
    /// Parts scored (every part fitted at the cut with a truth).
    pub parts: usize,
    /// Of which the model gave no date (scored as not covered, median at the horizon end).
    pub undated: usize,
    /// Of which the truth lies beyond the simulated horizon (censored).
    pub beyond_horizon: usize,
    /// Of which the part was already at or below its minimum at the cut.
    pub past_minimum: usize,
    /// Fraction of parts whose truth the model's band covers.
    pub band_coverage: f64,
    /// Mean absolute error of the model's median due day, days.
    pub median_mae_days: f64,
    /// Mean absolute error of the oracle's median, days.
    pub oracle_mae_days: f64,
    /// Mean absolute error of the mileage-interval baseline, days.
    pub mileage_baseline_mae_days: f64,
    /// Mean absolute error of the per-part odometer extrapolation, days.
    pub odometer_baseline_mae_days: f64,
}

impl ScoreLine {
    /// Model MAE over oracle MAE (infinite if the oracle is exact and the model is not).
    pub fn oracle_ratio(&self) -> f64 {
        if self.oracle_mae_days > 0.0 {
            self.median_mae_days / self.oracle_mae_days
        } else if self.median_mae_days > 0.0 {
            f64::INFINITY
        } else {
            1.0
        }
    }
}

/// Accuracy of a set of forecasts: overall and per component.
#[derive(Debug, Clone, PartialEq)]
pub struct AccuracyReport {
    /// Band level scored (0.8 = 10th-90th percentile).
    pub band_level: f64,
    /// Days from the cut to the end of the simulated future (censoring point).
    pub horizon_days: f64,
    /// Every part.
    pub overall: ScoreLine,
    /// Pads and linings.
    pub friction: ScoreLine,
    /// Rotors and drums.
    pub disc: ScoreLine,
}

impl fmt::Display for AccuracyReport {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        writeln!(
            f,
            "{:.0} % bands; truth censored {:.0} days after the cut; MAE in days",
            self.band_level * 100.0,
            self.horizon_days
        )?;
        writeln!(
            f,
            "{:<13} {:>5} {:>7} {:>6} {:>8} {:>8} {:>9} {:>10} {:>6} {:>8} {:>8}",
            "parts", "n", "undated", "beyond", "past-min", "coverage", "model MAE", "oracle MAE", "ratio", "mileage", "odometer"
        )?;
        for (name, line) in [("pads/linings", &self.friction), ("rotors/drums", &self.disc), ("all", &self.overall)] {
            writeln!(
                f,
                "{:<13} {:>5} {:>7} {:>6} {:>8} {:>7.1}% {:>9.1} {:>10.1} {:>6.2} {:>8.1} {:>8.1}",
                name,
                line.parts,
                line.undated,
                line.beyond_horizon,
                line.past_minimum,
                line.band_coverage * 100.0,
                line.median_mae_days,
                line.oracle_mae_days,
                line.oracle_ratio(),
                line.mileage_baseline_mae_days,
                line.odometer_baseline_mae_days
            )?;
        }
        Ok(())
    }
}

/// Per-day series of one vehicle over its history, index 0 = `start_day`.
#[derive(Debug, Clone, PartialEq)]
pub struct DailySeries {
    /// Friction energy per axle per day, MJ (`[axle][day]`).
    pub axle_energy_mj: Vec<Vec<f64>>,
    /// Hot energy per axle per day, MJ.
    pub axle_hot_energy_mj: Vec<Vec<f64>>,
    /// Distance per day, km.
    pub km: Vec<f64>,
}

/// Sums a vehicle's trips into per-day series (a trip counts on the day it starts).
pub fn daily_series(vehicle: &SimVehicle, start_day: i64, days: usize) -> DailySeries {
    let axles = vehicle.spec.axles.len();
    let mut s = DailySeries { axle_energy_mj: vec![vec![0.0; days]; axles], axle_hot_energy_mj: vec![vec![0.0; days]; axles], km: vec![0.0; days] };
    for trip in &vehicle.trips {
        let d = (trip.start_unix_s / SECONDS_PER_DAY).floor() as i64 - start_day;
        if d < 0 || d as usize >= days {
            continue;
        }
        let d = d as usize;
        s.km[d] += trip.distance_m / 1000.0;
        let hot_share = if trip.friction_energy_j > 0.0 { trip.hot_energy_j / trip.friction_energy_j } else { 0.0 };
        for (a, axle) in vehicle.spec.axles.iter().enumerate() {
            let e = trip.axle_energy_j.get(a).copied().unwrap_or(axle.energy_share * trip.friction_energy_j) / 1e6;
            s.axle_energy_mj[a][d] += e;
            s.axle_hot_energy_mj[a][d] += e * hot_share;
        }
    }
    s
}

/// The part histories of a simulated vehicle up to the cut, with their pipeline inputs.
pub fn vehicle_inputs(vehicle: &SimVehicle, start_day: i64, cut_day: i64, window_days: usize) -> Vec<(PartKey, PartInput)> {
    let days = (cut_day - start_day).max(0) as usize;
    let series = daily_series(vehicle, start_day, days);
    let mut out = Vec::new();
    for (a, axle) in vehicle.spec.axles.iter().enumerate() {
        for component in Component::ALL {
            let mut events: Vec<DatedEvent> = vehicle
                .inspections
                .iter()
                .filter(|i| i.axle_index == axle.axle_index && i.component == component)
                .map(|i| DatedEvent { day: i.unix_s / SECONDS_PER_DAY, kind: PartEventKind::Inspection { thickness_mm: i.thickness_mm } })
                .collect();
            events.extend(
                vehicle
                    .replacements
                    .iter()
                    .filter(|r| r.axle_index == axle.axle_index && r.component == component)
                    .map(|r| DatedEvent { day: r.unix_s / SECONDS_PER_DAY, kind: PartEventKind::Replacement { new_thickness_mm: r.new_thickness_mm } }),
            );
            let energy = &series.axle_energy_mj[a];
            let history = history_from_daily_energy(
                axle.axle_index,
                component,
                axle.new_mm(component),
                axle.min_mm(component),
                start_day,
                energy,
                &series.axle_hot_energy_mj[a],
                &events,
            );
            let window = window_days.min(energy.len());
            let input = PartInput {
                vehicle_id: vehicle.vehicle_id.clone(),
                group: GroupKey { vehicle_class: vehicle.spec.vehicle_class.clone(), axle_index: axle.axle_index, component },
                history,
                daily_energy_mj: energy[energy.len() - window..].to_vec(),
                current_cumulative_energy_mj: energy.iter().sum(),
            };
            out.push((PartKey { vehicle_id: vehicle.vehicle_id.clone(), axle_index: axle.axle_index, component }, input));
        }
    }
    out
}

/// Runs the pipeline on every part of a simulated fleet at its cut; returns each part's due
/// distribution (parts with no date are absent).
pub fn forecast_fleet(fleet: &SimulatedFleet, settings: &ForecastSettings) -> HashMap<PartKey, DueDistribution> {
    let mut keys = Vec::new();
    let mut inputs = Vec::new();
    for v in &fleet.vehicles {
        for (k, i) in vehicle_inputs(v, fleet.start_day, fleet.cut_day, settings.energy_window_days) {
            keys.push(k);
            inputs.push(i);
        }
    }
    let results = forecast_parts(&inputs, fleet.cut_day as f64, settings);
    keys.into_iter().zip(results).filter_map(|(k, r)| r.outlook.due.map(|d| (k, d))).collect()
}

/// `parts` pipeline inputs for benchmarks: the parts of a 400-vehicle simulated fleet (730
/// days of history, invented data) repeated to the count, each copy with its own vehicle ids so
/// that no two copies pool as one vehicle. Returns the inputs and the cut day (today).
pub fn repeated_fleet_inputs(parts: usize) -> (Vec<PartInput>, f64) {
    let fleet = crate::simulator::simulate(&crate::simulator::SimConfig { vehicles: 400, history_days: 730, future_days: 1, ..Default::default() });
    let base: Vec<PartInput> =
        fleet.vehicles.iter().flat_map(|v| vehicle_inputs(v, fleet.start_day, fleet.cut_day, 120)).map(|(_, i)| i).collect();
    let all = (0..)
        .flat_map(|copy| base.iter().map(move |p| PartInput { vehicle_id: format!("{}-copy{copy}", p.vehicle_id), ..p.clone() }))
        .take(parts)
        .collect();
    (all, fleet.cut_day as f64)
}

/// One part's current-cycle data in km, for the baselines.
struct KmCycle {
    /// (km since the cycle origin, thickness) points; the origin is the fitting or first inspection.
    points: Vec<(f64, f64)>,
    known_start: bool,
    km_now: f64,
}

fn km_cycle(history: &PartHistory, km_prefix: &[f64], start_day: i64, cut_day: i64) -> Option<KmCycle> {
    let cycles = history.cycles();
    let c = cycles.last()?;
    let km_at = |day: f64| crate::wear_history::prefix_at(km_prefix, day.floor() as i64 - start_day);
    let (origin_km, known_start) = match (&c.start, c.points.first()) {
        (Some(s), _) => (km_at(s.day), true),
        (None, Some(p)) => (km_at(p.day), false),
        _ => return None,
    };
    let mut points: Vec<(f64, f64)> = c.points.iter().map(|p| (km_at(p.day) - origin_km, p.thickness_mm)).collect();
    if let Some(s) = &c.start {
        points.insert(0, (0.0, s.new_thickness_mm));
    }
    Some(KmCycle { points, known_start, km_now: km_at(cut_day as f64) - origin_km })
}

fn line(points: &[(f64, f64)]) -> Option<(f64, f64)> {
    if points.len() < 2 {
        return None;
    }
    let n = points.len() as f64;
    let xm = points.iter().map(|p| p.0).sum::<f64>() / n;
    let ym = points.iter().map(|p| p.1).sum::<f64>() / n;
    let sxx: f64 = points.iter().map(|p| (p.0 - xm).powi(2)).sum();
    let sxy: f64 = points.iter().map(|p| (p.0 - xm) * (p.1 - ym)).sum();
    (sxx > 0.0).then(|| {
        let b = sxy / sxx;
        (ym - b * xm, b)
    })
}

/// The oracle's `(low, median, high)` due days for one part (module docs): the remaining
/// energy `(thickness_at_cut − min) / true rate` is known exactly, only the energy use is
/// forecast, with [`estimate_energy_rate`] over the last `window_days` of `daily_energy_mj`
/// at the default half-life and relative SD, and the inverse Gaussian passage time. A part at
/// or below its minimum is due at the cut. `None` when there is no rate or no recent energy.
pub fn oracle_band(
    truth: &TrueCrossing,
    min_thickness_mm: f64,
    daily_energy_mj: &[f64],
    cut_day: f64,
    window_days: usize,
    band_level: f64,
) -> Option<(f64, f64, f64)> {
    let left_mm = truth.thickness_at_cut_mm - min_thickness_mm;
    if left_mm <= 0.0 {
        return Some((cut_day, cut_day, cut_day));
    }
    let rate = truth.true_rate_mm_per_mj;
    if !(rate.is_finite() && rate > 0.0) {
        return None;
    }
    let defaults = ForecastSettings::default();
    let energy = estimate_energy_rate(daily_energy_mj, window_days, defaults.energy_half_life_days, defaults.energy_rate_relative_sd)?;
    let remaining_mj = left_mm / rate;
    let (mean, variance) = (energy.mean_mj_per_day, energy.variance_mj2_per_day);
    if mean.is_nan() || variance.is_nan() || mean <= 0.0 {
        return None;
    }
    if variance <= 0.0 {
        // Perfectly steady energy: the passage time is certain.
        let day = cut_day + remaining_mj / mean;
        return Some((day, day, day));
    }
    let passage = FirstPassage::new(remaining_mj, mean, variance).ok()?;
    let half = band_level.clamp(0.0, 0.98) / 2.0;
    Some((
        cut_day + passage.quantile(0.5 - half),
        cut_day + passage.quantile(0.5),
        cut_day + passage.quantile(0.5 + half),
    ))
}

/// Running sums of one [`ScoreLine`].
#[derive(Default)]
struct LineSums {
    parts: usize,
    undated: usize,
    beyond_horizon: usize,
    past_minimum: usize,
    covered: usize,
    model: f64,
    oracle: f64,
    mileage: f64,
    odometer: f64,
}

impl LineSums {
    fn line(&self) -> ScoreLine {
        let n = self.parts.max(1) as f64;
        ScoreLine {
            parts: self.parts,
            undated: self.undated,
            beyond_horizon: self.beyond_horizon,
            past_minimum: self.past_minimum,
            band_coverage: self.covered as f64 / n,
            median_mae_days: self.model / n,
            oracle_mae_days: self.oracle / n,
            mileage_baseline_mae_days: self.mileage / n,
            odometer_baseline_mae_days: self.odometer / n,
        }
    }
}

/// Scores `forecasts` against the fleet's true crossings, beside the oracle and both
/// baselines (module docs). Every part with a truth is scored; parts missing from
/// `forecasts` count as undated.
pub fn accuracy_report(
    fleet: &SimulatedFleet,
    forecasts: &HashMap<PartKey, DueDistribution>,
    band_level: f64,
    window_days: usize,
) -> AccuracyReport {
    let cut = fleet.cut_day as f64;
    let horizon_end = fleet.horizon_end_day as f64;
    let days = (fleet.cut_day - fleet.start_day).max(0) as usize;
    // Gather per-part km cycles and group wear per km.
    struct Scored {
        key: PartKey,
        group: GroupKey,
        truth: TrueDue,
        oracle: Option<(f64, f64, f64)>,
        cycle: Option<KmCycle>,
        km_per_day: f64,
        new_mm: f64,
        min_mm: f64,
    }
    let mut scored = Vec::new();
    let mut group_sums: HashMap<GroupKey, (f64, f64)> = HashMap::new();
    for v in &fleet.vehicles {
        let series = daily_series(v, fleet.start_day, days);
        let km_prefix = prefix_sums(&series.km);
        let window = window_days.min(series.km.len()).max(1);
        let km_per_day = series.km[series.km.len().saturating_sub(window)..].iter().sum::<f64>() / window as f64;
        for (key, input) in vehicle_inputs(v, fleet.start_day, fleet.cut_day, window_days) {
            // Group wear per km from every cycle (through the origin when the start is known,
            // centred otherwise).
            let sums = group_sums.entry(input.group.clone()).or_insert((0.0, 0.0));
            for c in input.history.cycles() {
                let km_at = |day: f64| crate::wear_history::prefix_at(&km_prefix, day.floor() as i64 - fleet.start_day);
                match &c.start {
                    Some(s) => {
                        let o = km_at(s.day);
                        for p in &c.points {
                            let x = km_at(p.day) - o;
                            sums.0 += x * x;
                            sums.1 += x * (s.new_thickness_mm - p.thickness_mm);
                        }
                    }
                    None if c.points.len() >= 2 => {
                        let pts: Vec<(f64, f64)> = c.points.iter().map(|p| (km_at(p.day), -p.thickness_mm)).collect();
                        let n = pts.len() as f64;
                        let xm = pts.iter().map(|p| p.0).sum::<f64>() / n;
                        let ym = pts.iter().map(|p| p.1).sum::<f64>() / n;
                        for p in &pts {
                            sums.0 += (p.0 - xm).powi(2);
                            sums.1 += (p.0 - xm) * (p.1 - ym);
                        }
                    }
                    None => {}
                }
            }
            let Some(truth) = v.truth.iter().find(|t| t.axle_index == key.axle_index && t.component == key.component) else {
                continue;
            };
            let min_mm = input.history.min_thickness_mm;
            let oracle = oracle_band(truth, min_mm, &input.daily_energy_mj, cut, window_days, band_level);
            let cycle = km_cycle(&input.history, &km_prefix, fleet.start_day, fleet.cut_day);
            scored.push(Scored {
                key,
                group: input.group,
                truth: TrueDue::from_crossing(truth.crossing_day, cut),
                oracle,
                cycle,
                km_per_day,
                new_mm: input.history.new_thickness_mm,
                min_mm,
            });
        }
    }
    let mut friction = LineSums::default();
    let mut disc = LineSums::default();
    let mut overall = LineSums::default();
    for s in &scored {
        // The model: no date counts as "not within the horizon", never covered.
        let band = forecasts.get(&s.key).map(|due| due.band(band_level));
        let model_error = s.truth.error_days(band.map_or(horizon_end, |b| b.1), cut, horizon_end);
        let model_covered = band.is_some_and(|(low, _, high)| s.truth.covered(low, high, cut, horizon_end));
        let oracle_error = s.truth.error_days(s.oracle.map_or(horizon_end, |b| b.1), cut, horizon_end);
        // Mileage interval.
        let mm_per_km = group_sums.get(&s.group).and_then(|(sxx, sxy)| (*sxx > 0.0).then(|| sxy / sxx)).unwrap_or(0.0);
        let usable = s.new_mm - s.min_mm;
        let interval_km = if mm_per_km > 0.0 { usable / mm_per_km } else { f64::INFINITY };
        let km_per_day = s.km_per_day.max(1e-6);
        let mileage_due = match &s.cycle {
            Some(c) => {
                let used_at_origin = if c.known_start { 0.0 } else { ((s.new_mm - c.points[0].1) / usable).clamp(0.0, 1.0) * interval_km };
                let remaining = interval_km - used_at_origin - c.km_now;
                cut + (remaining / km_per_day).max(0.0)
            }
            None => cut + interval_km / km_per_day,
        };
        let odometer_due = s
            .cycle
            .as_ref()
            .and_then(|c| line(&c.points).filter(|(_, b)| *b < 0.0).map(|(a, b)| (c, a, b)))
            .map_or(mileage_due, |(c, a, b)| {
                let km_at_min = (s.min_mm - a) / b;
                cut + ((km_at_min - c.km_now) / km_per_day).max(0.0)
            });
        let mileage_error = s.truth.error_days(mileage_due, cut, horizon_end);
        let odometer_error = s.truth.error_days(odometer_due, cut, horizon_end);
        let component_sums = match s.key.component {
            Component::Friction => &mut friction,
            Component::Disc => &mut disc,
        };
        for sums in [component_sums, &mut overall] {
            sums.parts += 1;
            sums.undated += usize::from(band.is_none());
            sums.beyond_horizon += usize::from(s.truth == TrueDue::BeyondHorizon);
            sums.past_minimum += usize::from(s.truth == TrueDue::PastMinimum);
            sums.covered += usize::from(model_covered);
            sums.model += model_error;
            sums.oracle += oracle_error;
            sums.mileage += mileage_error;
            sums.odometer += odometer_error;
        }
    }
    AccuracyReport {
        band_level,
        horizon_days: horizon_end - cut,
        overall: overall.line(),
        friction: friction.line(),
        disc: disc.line(),
    }
}

#[cfg(test)]
mod tests {
    //! The scoring rules on a fleet small enough to score by hand (invented data).
    use super::*;
    use crate::domain::{AxleBrake, BrakeType, VehicleSpec};
    use crate::simulator::{SimReplacement, SimTrip, TrueCrossing};

    const START: i64 = 20_000;
    const HISTORY: i64 = 200;
    const CUT: f64 = (START + HISTORY) as f64;
    const HORIZON: f64 = CUT + 1000.0;

    /// One disc axle (pad 20 → 3 mm, rotor 45 → 40 mm), 10 MJ every day at 08:00, both parts
    /// fitted on the first morning.
    fn vehicle(id: &str, truth: Vec<TrueCrossing>) -> SimVehicle {
        let axle = AxleBrake { axle_index: 1, brake_type: BrakeType::Disc, energy_share: 1.0, friction_new_mm: 20.0, friction_min_mm: 3.0, disc_new_mm: 45.0, disc_min_mm: 40.0 };
        let trips = (0..HISTORY)
            .map(|d| {
                let start = (START + d) as f64 * SECONDS_PER_DAY + 8.0 * 3600.0;
                SimTrip { trip_id: format!("{id}-t{d}"), start_unix_s: start, end_unix_s: start + 3600.0, distance_m: 50_000.0, friction_energy_j: 1e7, axle_energy_j: vec![1e7], brake_applications: 40, hot_energy_j: 0.0 }
            })
            .collect();
        let fitted = START as f64 * SECONDS_PER_DAY + 6.0 * 3600.0;
        let replacements = [(Component::Friction, 20.0), (Component::Disc, 45.0)]
            .into_iter()
            .map(|(component, mm)| SimReplacement { replacement_id: format!("{id}-{component:?}"), unix_s: fitted, axle_index: 1, component, new_thickness_mm: mm })
            .collect();
        SimVehicle {
            vehicle_id: id.into(),
            vin: None,
            spec: VehicleSpec { vehicle_class: "test".into(), mass_kg: 10_000.0, axles: vec![axle] },
            trips,
            inspections: Vec::new(),
            replacements,
            truth,
            reassigned_day: None,
        }
    }

    fn truth(component: Component, crossing_day: Option<f64>, rate: f64, thickness_at_cut_mm: f64) -> TrueCrossing {
        TrueCrossing { axle_index: 1, component, crossing_day, true_rate_mm_per_mj: rate, thickness_at_cut_mm }
    }

    fn key(id: &str, component: Component) -> PartKey {
        PartKey { vehicle_id: id.into(), axle_index: 1, component }
    }

    /// 99 quantiles in a straight line from `first` (1st percentile) to `last` (99th), days
    /// after the cut.
    fn spread(first: f64, last: f64) -> DueDistribution {
        DueDistribution { quantile_days: (0..99).map(|i| CUT + first + (last - first) * f64::from(i) / 98.0).collect() }
    }

    #[test]
    fn every_part_is_scored_by_the_documented_rules() {
        let fleet = SimulatedFleet {
            vehicles: vec![
                // Pad: 10 mm above its minimum at 0.01 mm/MJ and 10 MJ/day: due in 100 days.
                // Rotor: not worn out within the horizon.
                vehicle("a", vec![truth(Component::Friction, Some(CUT + 100.0), 0.01, 13.0), truth(Component::Disc, None, 1e-4, 44.0)]),
                // Pad worn out 5 days before the cut; rotor again beyond the horizon.
                vehicle("b", vec![truth(Component::Friction, Some(CUT - 5.0), 0.01, 2.5), truth(Component::Disc, None, 1e-4, 44.0)]),
            ],
            start_day: START,
            cut_day: START + HISTORY,
            horizon_end_day: HORIZON as i64,
        };
        let mut forecasts = HashMap::new();
        forecasts.insert(key("a", Component::Friction), spread(90.0, 90.0)); // 10 days early, band misses
        // key("a", Disc) is left undated.
        forecasts.insert(key("b", Component::Friction), spread(30.0, 30.0)); // 30 days late for a part due now
        forecasts.insert(key("b", Component::Disc), spread(500.0, 1100.0)); // median 800, 90th beyond the horizon
        let report = accuracy_report(&fleet, &forecasts, 0.8, 120);
        assert_eq!(report.horizon_days, 1000.0);

        let pads = report.friction;
        assert_eq!((pads.parts, pads.undated, pads.beyond_horizon, pads.past_minimum), (2, 0, 0, 1));
        assert_eq!(pads.band_coverage, 0.0);
        assert!((pads.median_mae_days - 20.0).abs() < 1e-6, "{pads:?}"); // (10 + 30) / 2
        // The oracle knows 1000 MJ remain at 10 MJ/day (100 days) and that the worn pad is due now.
        assert!(pads.oracle_mae_days < 0.01, "{pads:?}");
        // No inspections: the mileage interval is endless, censored at the horizon: (900 + 1000) / 2.
        assert!((pads.mileage_baseline_mae_days - 950.0).abs() < 1e-6, "{pads:?}");

        let rotors = report.disc;
        assert_eq!((rotors.parts, rotors.undated, rotors.beyond_horizon, rotors.past_minimum), (2, 1, 2, 0));
        assert_eq!(rotors.band_coverage, 0.5, "the undated rotor is not covered, the wide band is");
        // Undated counts as a median at the horizon (error 0 for a censored truth); the other
        // is 200 days short of the horizon.
        assert!((rotors.median_mae_days - 100.0).abs() < 1e-6, "{rotors:?}");
        assert!(rotors.oracle_mae_days.abs() < 1e-9, "40000 MJ at 10 MJ/day lies beyond the horizon");

        let all = report.overall;
        assert_eq!((all.parts, all.undated, all.beyond_horizon, all.past_minimum), (4, 1, 2, 1));
        assert!((all.band_coverage - 0.25).abs() < 1e-12 && (all.median_mae_days - 60.0).abs() < 1e-6, "{all:?}");
        assert!(pads.oracle_ratio() > 1e3, "the oracle is all but exact here: {}", pads.oracle_ratio());
        let table = report.to_string();
        assert!(table.contains("pads/linings") && table.contains("rotors/drums") && table.contains("oracle MAE"), "{table}");
    }

    #[test]
    fn medians_are_censored_at_the_horizon_like_the_truth() {
        let (cut, horizon) = (100.0, 1100.0);
        let crossing = TrueDue::Crossing(400.0);
        assert_eq!(crossing.error_days(350.0, cut, horizon), 50.0);
        assert_eq!(crossing.error_days(1e18, cut, horizon), 700.0, "a median beyond the horizon counts as the horizon");
        assert_eq!(crossing.error_days(f64::NAN, cut, horizon), 700.0);
        assert!(crossing.covered(399.0, 401.0, cut, horizon) && !crossing.covered(401.0, 500.0, cut, horizon));
        assert_eq!(TrueDue::BeyondHorizon.error_days(900.0, cut, horizon), 200.0);
        assert_eq!(TrueDue::BeyondHorizon.error_days(1500.0, cut, horizon), 0.0);
        assert!(TrueDue::BeyondHorizon.covered(900.0, 1100.0, cut, horizon) && !TrueDue::BeyondHorizon.covered(900.0, 1099.0, cut, horizon));
        assert_eq!(TrueDue::PastMinimum.error_days(130.0, cut, horizon), 30.0);
        assert!(TrueDue::PastMinimum.covered(101.0, 150.0, cut, horizon) && !TrueDue::PastMinimum.covered(101.5, 150.0, cut, horizon));
        assert_eq!(TrueDue::from_crossing(Some(100.0), cut), TrueDue::PastMinimum);
        assert_eq!(TrueDue::from_crossing(Some(100.5), cut), TrueDue::Crossing(100.5));
        assert_eq!(TrueDue::from_crossing(None, cut), TrueDue::BeyondHorizon);
    }
}
