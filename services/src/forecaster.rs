//! Forecasts from stored data: builds the models' inputs for a vehicle (per-part histories with
//! cumulative energies from the daily roll-up), computes its part outlooks with the fleet's
//! pooled priors, and keeps them materialised.
//!
//! # Materialisation
//! Every accepted write marks its vehicle stale (in the same transaction). [`run`] wakes on
//! writes and waits until they pause for `coalesce_ms` (at most `coalesce_max_ms`; see
//! [`settle`]), so that a burst or a stream of trips becomes one round after it ends instead
//! of a rewrite of the same forecasts (about 1 KB each, plus their due-index entries) for
//! every chunk that reaches the vehicle. A round recomputes stale vehicles in batches off the
//! async runtime until none is left (when writes arrived during a pass it waits for them to
//! pause again, within the round's `coalesce_max_ms`), and stores their forecasts together
//! with the due index, so that ListDue, WatchDue and PlanVisits read ranges, never refit the
//! fleet. When a round ends (no vehicle is left stale; writes arriving during a pass keep it
//! going), and at least every `priors_interval_ms` in a round that does not end, it re-estimates
//! the priors of the fleets it touched from the stored own-data fits; when a group's prior
//! moved, the vehicles of that class are marked stale once more. Own fits do not depend on
//! priors, so this settles after one extra round; and a round over more vehicles than one
//! pass takes begins by estimating the priors from the own fits it is about to store
//! ([`priors_for_round`]), so that after a stream of new data the fleet is computed once, not
//! once with the old priors and again with the new. Stale marks are durable: after a crash
//! the work resumes.

use std::collections::{BTreeMap, BTreeSet, HashMap};
use std::sync::Arc;
use std::time::Duration;

use brakeledger_models::domain::Component;
use brakeledger_models::wear_history::{history_from_daily_energy, DatedEvent};
use brakeledger_models::forecast::vehicle_seed;
use brakeledger_models::pipeline::{estimate_group_priors, GroupKey};
use brakeledger_models::pooling::vehicle_key;
use brakeledger_models::vehicle_forecast::{forecast_vehicle, PartData};
use brakeledger_models::wear_fit::fit_part_rate;
use brakeledger_models::{ForecastSettings, PartEventKind, PartHistory, PartOutlook, WearFit};
use rayon::prelude::*;
use tokio::sync::watch;

use crate::config::ForecastConfig;
use crate::error::{ServiceError, ServiceResult};
use crate::state::{AppState, ForecastChange};
use crate::store::{
    DailyEnergy, FleetPriors, GroupPrior, ServiceHistory, Store, StoredPart, VehicleForecasts,
    VehicleRecord, MS_PER_DAY,
};

/// J per MJ.
const J_PER_MJ: f64 = 1.0e6;

/// Everything stored about one vehicle that its forecasts read.
#[derive(Debug, Clone)]
pub struct VehicleData {
    /// The vehicle.
    pub vehicle: VehicleRecord,
    /// Daily roll-up, oldest first.
    pub daily: Vec<DailyEnergy>,
    /// Inspections and replacements.
    pub history: ServiceHistory,
}

/// Reads what a vehicle's forecast needs; `None` when the vehicle is not registered.
pub fn load_vehicle_data(store: &dyn Store, fleet_id: &str, vehicle_id: &str) -> ServiceResult<Option<VehicleData>> {
    let Some(vehicle) = store.get_vehicle(fleet_id, vehicle_id)? else {
        return Ok(None);
    };
    Ok(Some(VehicleData {
        daily: store.daily_energy(fleet_id, vehicle_id)?,
        history: store.service_history(fleet_id, vehicle_id)?,
        vehicle,
    }))
}

/// The models' input for one part.
#[derive(Debug, Clone)]
pub struct PartInput {
    /// Dated events with cumulative energies.
    pub history: PartHistory,
    /// Friction energy per day at this brake, MJ, from the first stored day through yesterday.
    pub daily_energy_mj: Vec<f64>,
    /// Cumulative energy at this brake up to now, MJ.
    pub current_cumulative_energy_mj: f64,
    /// Day (since epoch) of `daily_energy_mj[0]`.
    pub first_day: i64,
}

/// Per-axle dense daily series (MJ) from the first stored day through the day before `today`,
/// plus the energy of `today` and later (a trip can end up to minutes in the future).
fn axle_series(daily: &[DailyEnergy], axle: usize, today: i64) -> (i64, Vec<f64>, Vec<f64>, f64) {
    let Some(first_day) = daily.first().map(|d| d.day) else {
        return (today, Vec::new(), Vec::new(), 0.0);
    };
    let len = (today - first_day).max(0) as usize;
    let mut energy = vec![0.0; len];
    let mut hot = vec![0.0; len];
    let mut from_today = 0.0;
    for day in daily {
        let value = day.axle_energy_j.get(axle).copied().unwrap_or(0.0) / J_PER_MJ;
        let offset = day.day - first_day;
        if (offset as usize) < len {
            energy[offset as usize] += value;
            hot[offset as usize] += day.axle_hot_energy_j.get(axle).copied().unwrap_or(0.0) / J_PER_MJ;
        } else {
            from_today += value;
        }
    }
    (first_day, energy, hot, from_today)
}

/// Builds the models' input for every axle and component of a vehicle, at `now_ms`.
pub fn part_inputs(data: &VehicleData, now_ms: i64) -> Vec<PartInput> {
    let today = now_ms.div_euclid(MS_PER_DAY);
    let mut inputs = Vec::new();
    for (axle_position, axle) in data.vehicle.spec.axles.iter().enumerate() {
        let (first_day, energy, hot, from_today) = axle_series(&data.daily, axle_position, today);
        let current_cumulative_energy_mj = energy.iter().sum::<f64>() + from_today;
        for component in Component::ALL {
            let matches = |axle_index: u32, c: Component| axle_index == axle.axle_index && c == component;
            let events: Vec<DatedEvent> = data
                .history
                .replacements
                .iter()
                .filter(|r| matches(r.axle_index, r.component))
                .map(|r| DatedEvent {
                    day: r.replaced_at_ms as f64 / MS_PER_DAY as f64,
                    kind: PartEventKind::Replacement { new_thickness_mm: r.new_thickness_mm },
                })
                .chain(data.history.inspections.iter().filter(|i| matches(i.axle_index, i.component)).map(|i| DatedEvent {
                    day: i.measured_at_ms as f64 / MS_PER_DAY as f64,
                    kind: PartEventKind::Inspection { thickness_mm: i.thickness_mm },
                }))
                .collect();
            let history = history_from_daily_energy(
                axle.axle_index,
                component,
                axle.new_mm(component),
                axle.min_mm(component),
                first_day,
                &energy,
                &hot,
                &events,
            );
            inputs.push(PartInput { history, daily_energy_mj: energy.clone(), current_cumulative_energy_mj, first_day });
        }
    }
    inputs
}

/// Model settings from the service's forecast config at a band level.
pub fn model_settings(config: &ForecastConfig, band_level: f64) -> ForecastSettings {
    ForecastSettings {
        band_level,
        energy_window_days: config.energy_window_days,
        monte_carlo_draws: config.monte_carlo_draws,
        ..ForecastSettings::default()
    }
}

/// One part's own fit and outlook.
#[derive(Debug, Clone)]
pub struct ComputedPart {
    /// The model input it came from.
    pub input: PartInput,
    /// The vehicle's own fit, when one could be made, without its coefficients
    /// ([`fit_part_rate`], as `forecast_vehicle` makes it).
    pub own_fit: Option<WearFit>,
    /// The outlook.
    pub outlook: PartOutlook,
}

/// Computes every part of a vehicle at `now_ms` with the fleet's priors (pads first, rotors
/// borrowing from their pads; the vehicle left out of the priors it is shrunk toward). The
/// due-date integral uses points that do not depend on the data or the clock (quasi-random by
/// default; with pseudo-random draws the seed is the vehicle's own), so repeated calls agree
/// and new data moves dates smoothly.
pub fn compute_vehicle(data: &VehicleData, priors: &FleetPriors, now_ms: i64, settings: &ForecastSettings) -> Vec<ComputedPart> {
    let today_day = now_ms as f64 / MS_PER_DAY as f64;
    let ids = [data.vehicle.fleet_id.as_str(), data.vehicle.vehicle_id.as_str()];
    let settings = &ForecastSettings { seed: vehicle_seed(settings.seed, &ids), ..settings.clone() };
    let inputs = part_inputs(data, now_ms);
    let parts: Vec<PartData<'_>> = inputs
        .iter()
        .map(|i| PartData {
            history: &i.history,
            daily_energy_mj: &i.daily_energy_mj,
            current_cumulative_energy_mj: i.current_cumulative_energy_mj,
        })
        .collect();
    let class = &data.vehicle.spec.vehicle_class;
    let prior_of = |axle_index: u32, component: Component| priors.find(class, axle_index, component).map(|g| &g.prior);
    let results = forecast_vehicle(vehicle_key(&ids), &parts, prior_of, today_day, settings);
    inputs
        .into_iter()
        .zip(results)
        .map(|(input, r)| ComputedPart { input, own_fit: r.own_fit, outlook: r.outlook })
        .collect()
}

/// The stored form of computed parts (due quantiles kept whole, so any band level can be read).
pub fn materialise(data: &VehicleData, parts: &[ComputedPart], now_ms: i64) -> VehicleForecasts {
    VehicleForecasts {
        fleet_id: data.vehicle.fleet_id.clone(),
        vehicle_id: data.vehicle.vehicle_id.clone(),
        vehicle_class: data.vehicle.spec.vehicle_class.clone(),
        computed_at_ms: now_ms,
        parts: parts
            .iter()
            .map(|p| StoredPart {
                axle_index: p.input.history.axle_index,
                component: p.input.history.component,
                own_fit: p.own_fit.clone(),
                outlook: PartOutlook { trajectory: Vec::new(), ..p.outlook.clone() },
            })
            .collect(),
    }
}

/// Pools own fits `(group, vehicle key, fit)` into group priors (with each rotor group's
/// coupling to its pads), sorted by group.
fn pool_fits<F: std::borrow::Borrow<WearFit> + Send>(fits: impl Iterator<Item = (GroupKey, u64, F)>, settings: &ForecastSettings) -> FleetPriors {
    let mut groups: Vec<GroupPrior> = estimate_group_priors(fits, settings)
        .into_iter()
        .map(|(g, prior)| GroupPrior { vehicle_class: g.vehicle_class, axle_index: g.axle_index, component: g.component, prior })
        .collect();
    groups.sort_by(|a, b| (&a.vehicle_class, a.axle_index, a.component).cmp(&(&b.vehicle_class, b.axle_index, b.component)));
    FleetPriors { groups }
}

/// The own fits kept in one vehicle's stored forecasts (stored without their coefficients,
/// [`WearFit::without_coefficients`], which is what pooling reads).
fn stored_fits(vehicle: VehicleForecasts) -> impl Iterator<Item = (GroupKey, u64, WearFit)> {
    let key = vehicle_key(&[&vehicle.fleet_id, &vehicle.vehicle_id]);
    let class = vehicle.vehicle_class;
    vehicle.parts.into_iter().filter_map(move |part| {
        let group = GroupKey { vehicle_class: class.clone(), axle_index: part.axle_index, component: part.component };
        part.own_fit.map(|fit| (group, key, fit))
    })
}

/// A vehicle's own fits made from its stored data now (what its next stored forecast will
/// keep for pooling: own fits do not depend on priors), with its class.
#[derive(Debug, Clone)]
struct FreshFits {
    vehicle_class: String,
    /// `(axle, component, fit)` of each part that could be fitted.
    fits: Vec<(u32, Component, WearFit)>,
}

fn fresh_fits(data: &VehicleData, now_ms: i64, settings: &ForecastSettings) -> FreshFits {
    let fits = part_inputs(data, now_ms)
        .into_iter()
        .filter_map(|input| fit_part_rate(&input.history, settings).ok().map(|fit| (input.history.axle_index, input.history.component, fit)))
        .collect();
    FreshFits { vehicle_class: data.vehicle.spec.vehicle_class.clone(), fits }
}

/// Whether a group's prior moved enough to recompute the forecasts resting on it.
fn prior_moved(old: Option<&GroupPrior>, new: &GroupPrior) -> bool {
    match old {
        None => true,
        Some(old) => {
            let relative = |a: f64, b: f64| (a - b).abs() / a.abs().max(b.abs()).max(1e-12);
            relative(old.prior.mean_mm_per_mj, new.prior.mean_mm_per_mj) > 0.01
                || relative(old.prior.between_sd_mm_per_mj, new.prior.between_sd_mm_per_mj) > 0.05
        }
    }
}

/// What one [`refresh_pass`] did.
#[derive(Debug, Default)]
pub struct PassOutcome {
    /// The forecasts it stored, each with the one it replaced.
    pub changes: Vec<ForecastChange>,
    /// Whether stale vehicles remain.
    pub remaining: bool,
    /// Whether it re-estimated the priors of the fleets waiting for it.
    pub priors_estimated: bool,
}

/// One pass over up to `batch_vehicles` stale vehicles. The batch's data is read first, its
/// forecasts are computed on rayon's threads (pure computation, one vehicle each), then stored
/// in mark order. The pass's fleets join `pending_priors`; their priors are re-estimated when
/// the pass ends a round (no vehicle is stale but the ones it is about to clear: writes that
/// arrived during the pass leave marks of their own) or when `priors_due` (the caller's clock:
/// under writes that never pause priors still move). So the stale count never reads zero while
/// a re-estimation waits. Before, every pass re-estimated: in a round over thousands of
/// vehicles, or while trips streamed in, each batch's new own fits moved the prior and marked
/// the whole class stale again, so the fleet was recomputed (and rewritten) once per batch.
pub fn refresh_pass(store: &dyn Store, config: &ForecastConfig, now_ms: i64, pending_priors: &mut BTreeSet<String>, priors_due: bool) -> ServiceResult<PassOutcome> {
    let batch = config.batch_vehicles.max(1);
    let marks = store.claim_stale(batch)?;
    if marks.is_empty() && pending_priors.is_empty() {
        return Ok(PassOutcome::default());
    }
    let mut priors_by_fleet: HashMap<String, FleetPriors> = HashMap::new();
    let mut loaded = Vec::with_capacity(marks.len());
    for mark in &marks {
        if !priors_by_fleet.contains_key(&mark.fleet_id) {
            let priors = store.get_priors(&mark.fleet_id)?.unwrap_or_default();
            priors_by_fleet.insert(mark.fleet_id.clone(), priors);
        }
        // A vehicle no longer registered has nothing to compute; its mark is cleared below.
        if let Some(data) = load_vehicle_data(store, &mark.fleet_id, &mark.vehicle_id)? {
            loaded.push(data);
        }
    }
    // The refresh stores forecasts without their trajectories (see `materialise`).
    let settings = ForecastSettings { with_trajectory: false, ..model_settings(config, 0.8) };
    let records: Vec<VehicleForecasts> = loaded
        .par_iter()
        .map(|data| {
            let priors = &priors_by_fleet[&data.vehicle.fleet_id];
            materialise(data, &compute_vehicle(data, priors, now_ms, &settings), now_ms)
        })
        .collect();
    let before = store.replace_forecasts(&records)?;
    let changes: Vec<ForecastChange> =
        before.into_iter().zip(records).map(|(before, record)| ForecastChange { before: before.map(Arc::new), after: Arc::new(record) }).collect();
    pending_priors.extend(priors_by_fleet.into_keys());
    // This pass's own marks (a vehicle written again meanwhile keeps its key) and nothing else.
    let round_ends = store.stale_vehicles(marks.len() + 1)?.len() <= marks.len();
    let priors_estimated = round_ends || priors_due;
    if priors_estimated {
        for fleet_id in pending_priors.clone() {
            reestimate_priors(store, config, &fleet_id, &HashMap::new())?;
            pending_priors.remove(&fleet_id);
        }
    }
    // Cleared last, so that a vehicle re-marked above stays stale and the pending count never
    // reads zero while work remains.
    for mark in &marks {
        store.clear_stale(mark)?;
    }
    let remaining = !store.stale_vehicles(1)?.is_empty();
    Ok(PassOutcome { changes, remaining, priors_estimated })
}

/// Re-estimates a fleet's priors from its stored own fits, with `fresh` (vehicle id → fits
/// made from its data now) in place of the stored ones of the vehicles it holds; when a
/// group's prior moved, marks the other vehicles of that class stale (the ones in `fresh` are
/// stale already, and a new mark would have them computed twice).
fn reestimate_priors(store: &dyn Store, config: &ForecastConfig, fleet_id: &str, fresh: &HashMap<String, FreshFits>) -> ServiceResult<()> {
    // One replica at a time re-estimates a fleet's priors; the others skip it.
    let Some(_one_replica) = store.lock_fleet_priors(fleet_id)? else { return Ok(()) };
    let old = store.get_priors(fleet_id)?.unwrap_or_default();
    // The stored fits of the vehicles not in `fresh`, read one forecast at a time, and each
    // stored vehicle's class.
    let mut fits: Vec<(GroupKey, u64, WearFit)> = Vec::new();
    let mut classes: Vec<(String, String)> = Vec::new();
    store.visit_fleet_forecasts(fleet_id, &mut |vehicle| {
        classes.push((vehicle.vehicle_id.clone(), vehicle.vehicle_class.clone()));
        if !fresh.contains_key(&vehicle.vehicle_id) {
            fits.extend(stored_fits(vehicle));
        }
        Ok(())
    })?;
    // The fits made now join them (already reduced to what pooling reads, so cheap to copy).
    fits.extend(fresh.iter().flat_map(|(vehicle_id, f)| {
        let key = vehicle_key(&[fleet_id, vehicle_id]);
        f.fits.iter().map(move |(axle_index, component, fit)| {
            (GroupKey { vehicle_class: f.vehicle_class.clone(), axle_index: *axle_index, component: *component }, key, fit.clone())
        })
    }));
    let new = pool_fits(fits.into_iter(), &model_settings(config, 0.8));
    // Classes with a group whose prior moved, appeared or disappeared.
    let changed: BTreeSet<&str> = new
        .groups
        .iter()
        .filter(|g| prior_moved(old.find(&g.vehicle_class, g.axle_index, g.component), g))
        .chain(old.groups.iter().filter(|g| new.find(&g.vehicle_class, g.axle_index, g.component).is_none()))
        .map(|g| g.vehicle_class.as_str())
        .collect();
    if changed.is_empty() {
        return Ok(());
    }
    store.put_priors(fleet_id, &new)?;
    let again: Vec<String> = classes
        .into_iter()
        .filter(|(vehicle_id, class)| changed.contains(class.as_str()) && !fresh.contains_key(vehicle_id))
        .map(|(vehicle_id, _)| vehicle_id)
        .collect();
    tracing::debug!(fleet = %fleet_id, classes = changed.len(), vehicles = again.len(), "fleet priors moved; recomputing");
    store.mark_stale(fleet_id, &again)?;
    Ok(())
}

/// Before a round: re-estimates the priors of every fleet with stale vehicles from the own
/// fits the round is about to store (made now from each stale vehicle's data, in batches of
/// `batch_vehicles`) and the stored fits of the others, so that the round computes with the
/// priors it will end with. Only fleets with more stale vehicles than one pass takes. Without
/// it a round after a stream of new data computed every vehicle with the old priors, moved
/// them at its end, and computed (and rewrote) the fleet a second time.
pub fn priors_for_round(store: &dyn Store, config: &ForecastConfig, now_ms: i64) -> ServiceResult<()> {
    let marks = store.stale_vehicles(usize::MAX)?;
    let mut by_fleet: BTreeMap<String, Vec<String>> = BTreeMap::new();
    for mark in marks {
        by_fleet.entry(mark.fleet_id).or_default().push(mark.vehicle_id);
    }
    let settings = model_settings(config, 0.8);
    let batch = config.batch_vehicles.max(1);
    // A round of one pass gains nothing: its end re-estimates the priors anyway, and a few
    // vehicles move them little.
    by_fleet.retain(|_, vehicle_ids| vehicle_ids.len() > batch);
    for (fleet_id, vehicle_ids) in by_fleet {
        let mut fresh: HashMap<String, FreshFits> = HashMap::with_capacity(vehicle_ids.len());
        for chunk in vehicle_ids.chunks(batch) {
            let mut loaded = Vec::with_capacity(chunk.len());
            for vehicle_id in chunk {
                // A vehicle no longer registered has no fits.
                if let Some(data) = load_vehicle_data(store, &fleet_id, vehicle_id)? {
                    loaded.push(data);
                }
            }
            let fits: Vec<(String, FreshFits)> = loaded.par_iter().map(|d| (d.vehicle.vehicle_id.clone(), fresh_fits(d, now_ms, &settings))).collect();
            fresh.extend(fits);
        }
        reestimate_priors(store, config, &fleet_id, &fresh)?;
    }
    Ok(())
}

/// Waits until no write has woken the worker for `quiet`, `longest` after the wait began at
/// the latest (writes that never pause still get their forecasts refreshed), or until `stop`
/// changes. True when the writes paused (or the worker stops); false when `longest` ran out.
async fn settle(wake: &tokio::sync::Notify, stop: &mut watch::Receiver<bool>, quiet: Duration, longest: Duration) -> bool {
    let deadline = tokio::time::Instant::now() + longest;
    loop {
        let until = (tokio::time::Instant::now() + quiet).min(deadline);
        tokio::select! {
            _ = wake.notified() => {
                if tokio::time::Instant::now() >= deadline {
                    return false;
                }
            }
            _ = tokio::time::sleep_until(until) => return until < deadline || quiet.is_zero(),
            _ = stop.changed() => return true,
        }
    }
}

/// Keeps forecasts materialised until `stop` turns true (see the module docs).
pub async fn run(state: AppState, mut stop: watch::Receiver<bool>) {
    use futures::FutureExt;
    let quiet = Duration::from_millis(state.forecast.coalesce_ms);
    let longest = Duration::from_millis(state.forecast.coalesce_max_ms.max(state.forecast.coalesce_ms));
    // Longest the priors wait in a round that does not end (never shorter than a round's wait).
    let priors_interval = Duration::from_millis(state.forecast.priors_interval_ms).max(longest);
    let mut more_work = true; // stale marks may survive a restart
    // Whether the next pass begins a round (see `priors_for_round`).
    let mut round_begins = true;
    // When the current round began waiting.
    let mut round_started = std::time::Instant::now();
    // Fleets whose priors wait for the end of the round (see `refresh_pass`), and when priors
    // were last re-estimated.
    let mut pending_priors = BTreeSet::new();
    let mut priors_estimated_at = std::time::Instant::now();
    loop {
        if !more_work {
            tokio::select! {
                _ = stop.changed() => {}
                _ = state.wake_forecaster.notified() => {}
                _ = tokio::time::sleep(Duration::from_secs(5)) => {}
            }
            if *stop.borrow() {
                break;
            }
            round_started = std::time::Instant::now();
            settle(&state.wake_forecaster, &mut stop, quiet, longest).await;
            round_begins = true;
        } else if state.wake_forecaster.notified().now_or_never().is_some() {
            // Writes arrived during the last pass: they may be a stream still going on, whose
            // vehicles would be recomputed again and again. Wait for them to pause too, within
            // what is left of the round's `longest`; past it, passes follow each other.
            let left = longest.saturating_sub(round_started.elapsed());
            if !left.is_zero() {
                settle(&state.wake_forecaster, &mut stop, quiet.min(left), left).await;
            }
        }
        if *stop.borrow() {
            break;
        }
        // Forecasts are stored: while writes are refused (a full disk, a read-only store) a
        // pass could only fail; the next wake-up or timer tries again.
        if state.blocking(|store| Ok(store.writable())).await.map_or(true, |w| w.is_err()) {
            more_work = false;
            continue;
        }
        let store = Arc::clone(&state.store);
        let config = state.forecast.clone();
        let started = std::time::Instant::now();
        let priors_due = priors_estimated_at.elapsed() >= priors_interval;
        let mut pending = std::mem::take(&mut pending_priors);
        let prepare = std::mem::take(&mut round_begins);
        let pass = tokio::task::spawn_blocking(move || {
            let now_ms = crate::convert::now_ms();
            let prepared = if prepare { priors_for_round(store.as_ref(), &config, now_ms) } else { Ok(()) };
            let outcome = prepared.and_then(|()| refresh_pass(store.as_ref(), &config, now_ms, &mut pending, priors_due));
            (outcome, pending)
        })
        .await;
        crate::metrics::forecast_refresh(started.elapsed().as_secs_f64());
        let pass = pass.map(|(outcome, pending)| {
            pending_priors = pending;
            outcome
        });
        match pass {
            Ok(Ok(outcome)) => {
                for change in outcome.changes {
                    let _ = state.changes.send(change);
                }
                if outcome.priors_estimated {
                    priors_estimated_at = std::time::Instant::now();
                }
                more_work = outcome.remaining;
            }
            Ok(Err(error)) => {
                tracing::error!(%error, "forecast refresh failed; retrying later");
                more_work = false;
            }
            Err(error) => {
                tracing::error!(%error, "forecast refresh task failed");
                more_work = false;
            }
        }
    }
}

/// Computes a vehicle's forecasts now (for single-vehicle requests), with its data.
pub fn vehicle_forecast_now(store: &dyn Store, fleet_id: &str, vehicle_id: &str, config: &ForecastConfig, band_level: f64, now_ms: i64) -> ServiceResult<(VehicleData, Vec<ComputedPart>)> {
    let data = load_vehicle_data(store, fleet_id, vehicle_id)?
        .ok_or_else(|| ServiceError::NotFound(format!("vehicle '{vehicle_id}' is not registered in fleet '{fleet_id}'")))?;
    let priors = store.get_priors(fleet_id)?.unwrap_or_default();
    let parts = compute_vehicle(&data, &priors, now_ms, &model_settings(config, band_level));
    Ok((data, parts))
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::time::Instant;

    /// Notifies `wake` every 10 ms for `for_how_long`.
    fn writes(wake: Arc<tokio::sync::Notify>, for_how_long: Duration) -> tokio::task::JoinHandle<()> {
        tokio::spawn(async move {
            let started = Instant::now();
            while started.elapsed() < for_how_long {
                wake.notify_one();
                tokio::time::sleep(Duration::from_millis(10)).await;
            }
        })
    }

    /// Waits with [`settle`] (quiet time `quiet`, cap `longest`) while writes come every 10 ms
    /// for `writing`; stops the worker after `stop_after`, if given. (writes paused, time waited)
    async fn settle_during_writes(writing: Duration, quiet: Duration, longest: Duration, stop_after: Option<Duration>) -> (bool, Duration) {
        let wake = Arc::new(tokio::sync::Notify::new());
        let (stopping, mut stop) = watch::channel(false);
        let writer = writes(Arc::clone(&wake), writing);
        // The sender stays alive through the wait: a dropped one would end it at once.
        let _kept = match stop_after {
            Some(after) => {
                tokio::spawn(async move {
                    tokio::time::sleep(after).await;
                    let _ = stopping.send(true);
                    tokio::time::sleep(Duration::from_secs(30)).await;
                });
                None
            }
            None => Some(stopping),
        };
        let started = Instant::now();
        let paused = settle(&wake, &mut stop, quiet, longest).await;
        let waited = started.elapsed();
        writer.abort();
        (paused, waited)
    }

    #[tokio::test]
    async fn a_refresh_waits_for_writes_to_pause() {
        // Writes every 10 ms for 400 ms: the wait ends after they stop, not at the first
        // quiet-time interval, and long before the cap.
        let (paused, waited) = settle_during_writes(Duration::from_millis(400), Duration::from_millis(250), Duration::from_secs(20), None).await;
        assert!(paused, "the writes paused");
        assert!(waited >= Duration::from_millis(400) && waited < Duration::from_secs(20), "{waited:?}");
    }

    #[tokio::test]
    async fn writes_that_never_pause_still_get_a_refresh_at_the_cap() {
        let (paused, waited) = settle_during_writes(Duration::from_secs(10), Duration::from_millis(100), Duration::from_millis(500), None).await;
        assert!(!paused, "the cap ran out");
        assert!(waited >= Duration::from_millis(500) && waited < Duration::from_secs(10), "the cap ends the wait while writes go on: {waited:?}");
    }

    #[tokio::test]
    async fn a_stop_ends_the_wait() {
        let (_, waited) = settle_during_writes(Duration::from_secs(10), Duration::from_millis(100), Duration::from_secs(60), Some(Duration::from_millis(100))).await;
        assert!(waited < Duration::from_secs(10), "{waited:?}");
    }
}
