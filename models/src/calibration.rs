//! Forecast accuracy on a simulated fleet: band coverage and median error against the true
//! crossing days, next to two baselines a fleet might use instead.
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
//! Parts already past their minimum at the cut and parts not crossing within the simulated
//! future are left out of the figures (they have no date to score).

use std::collections::HashMap;
use std::fmt;

use crate::domain::Component;
use crate::forecast::{DueDistribution, ForecastSettings};
use crate::pipeline::{forecast_parts, GroupKey, PartInput};
use crate::simulator::{SimVehicle, SimulatedFleet, SECONDS_PER_DAY};
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

/// Accuracy figures of a set of forecasts.
#[derive(Debug, Clone, PartialEq)]
pub struct AccuracyReport {
    /// Parts scored.
    pub parts: usize,
    /// Band level scored (0.8 = 10th-90th percentile).
    pub band_level: f64,
    /// Fraction of true crossing days inside the band.
    pub band_coverage: f64,
    /// Mean absolute error of the median due day, days.
    pub median_mae_days: f64,
    /// Mean absolute error of the mileage-interval baseline, days.
    pub mileage_baseline_mae_days: f64,
    /// Mean absolute error of the per-part odometer extrapolation, days.
    pub odometer_baseline_mae_days: f64,
}

impl fmt::Display for AccuracyReport {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        writeln!(f, "parts scored:                     {}", self.parts)?;
        writeln!(f, "{:.0}% band coverage:                {:.1}%", self.band_level * 100.0, self.band_coverage * 100.0)?;
        writeln!(f, "median due-date MAE:              {:.1} days", self.median_mae_days)?;
        writeln!(
            f,
            "mileage-interval baseline MAE:    {:.1} days (ratio {:.2})",
            self.mileage_baseline_mae_days,
            self.median_mae_days / self.mileage_baseline_mae_days
        )?;
        write!(
            f,
            "odometer-extrapolation MAE:       {:.1} days (ratio {:.2})",
            self.odometer_baseline_mae_days,
            self.median_mae_days / self.odometer_baseline_mae_days
        )
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

/// Scores `forecasts` against the fleet's true crossings, with both baselines (module docs).
pub fn accuracy_report(
    fleet: &SimulatedFleet,
    forecasts: &HashMap<PartKey, DueDistribution>,
    band_level: f64,
    window_days: usize,
) -> AccuracyReport {
    let cut = fleet.cut_day as f64;
    let days = (fleet.cut_day - fleet.start_day).max(0) as usize;
    // Gather per-part km cycles and group wear per km.
    struct Scored {
        key: PartKey,
        group: GroupKey,
        truth: f64,
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
            let truth = v
                .truth
                .iter()
                .find(|t| t.axle_index == key.axle_index && t.component == key.component)
                .and_then(|t| t.crossing_day);
            let Some(truth) = truth.filter(|t| *t > cut) else { continue };
            if !forecasts.contains_key(&key) {
                continue;
            }
            let cycle = km_cycle(&input.history, &km_prefix, fleet.start_day, fleet.cut_day);
            scored.push(Scored {
                key,
                group: input.group,
                truth,
                cycle,
                km_per_day,
                new_mm: input.history.new_thickness_mm,
                min_mm: input.history.min_thickness_mm,
            });
        }
    }
    let mut covered = 0usize;
    let mut err_model = 0.0;
    let mut err_mileage = 0.0;
    let mut err_odometer = 0.0;
    for s in &scored {
        let Some(due) = forecasts.get(&s.key) else { continue };
        let (low, median, high) = due.band(band_level);
        if s.truth >= low && s.truth <= high {
            covered += 1;
        }
        err_model += (median - s.truth).abs();
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
        err_mileage += (mileage_due.min(cut + 1e5) - s.truth).abs();
        err_odometer += (odometer_due.min(cut + 1e5) - s.truth).abs();
    }
    let n = scored.len().max(1) as f64;
    AccuracyReport {
        parts: scored.len(),
        band_level,
        band_coverage: covered as f64 / n,
        median_mae_days: err_model / n,
        mileage_baseline_mae_days: err_mileage / n,
        odometer_baseline_mae_days: err_odometer / n,
    }
}
