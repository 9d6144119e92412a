//! The whole in-crate forecasting pipeline for many parts: own fits, a fleet prior per group,
//! then a forecast per part. The service and the calibration test run these same steps.
//!
//! Steps: (1) [`crate::wear_fit::fit_part_any_sign`] on every part; (2)
//! [`estimate_group_priors`]: [`crate::estimate_prior`] over the fits of each group (vehicle
//! class, axle, component), then each rotor group's coupling to its vehicles' pads; (3)
//! [`crate::vehicle_forecast::forecast_vehicle`] per vehicle, leaving each vehicle out of the
//! prior it is shrunk toward.

use std::borrow::Borrow;
use std::collections::HashMap;
use std::hash::Hash;

use rayon::prelude::*;

use crate::domain::Component;
use crate::forecast::{vehicle_seed, PartOutlook};
use crate::pooling::{estimate_pad_coupling, estimate_prior, pool_pad_rotor_correlations, vehicle_key, CouplingEstimate, PadCoupling, WearPrior};
use crate::settings::ForecastSettings;
use crate::vehicle_forecast::{forecast_vehicle_fitted, PartData, PartForecast};
use crate::wear_fit::{fit_part_any_sign, WearFit};
use crate::wear_history::PartHistory;

/// The pooling group of a part: vehicle class, axle, component.
#[derive(Debug, Clone, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub struct GroupKey {
    /// Vehicle class.
    pub vehicle_class: String,
    /// Axle, 1 = front.
    pub axle_index: u32,
    /// Which part.
    pub component: Component,
}

/// Everything needed to forecast one part.
#[derive(Debug, Clone, PartialEq)]
pub struct PartInput {
    /// The vehicle the part belongs to (unique within the inputs of one call): parts of one
    /// vehicle and axle are modelled together (a rotor borrows from the vehicle's pads).
    pub vehicle_id: String,
    /// Pooling group.
    pub group: GroupKey,
    /// The part's history.
    pub history: PartHistory,
    /// Daily friction energy at this brake, MJ, oldest first, ending the day before today.
    pub daily_energy_mj: Vec<f64>,
    /// Cumulative energy at this brake up to today, MJ.
    pub current_cumulative_energy_mj: f64,
}

/// Result of the pipeline for one part.
#[derive(Debug, Clone, PartialEq)]
pub struct PartResult {
    /// The vehicle's own fit, if it succeeded.
    pub own_fit: Option<WearFit>,
    /// The forecast.
    pub outlook: PartOutlook,
}

/// Estimates every group's prior from `(group, vehicle key, own fit)` triples, then the pad
/// coupling of each rotor (drum) group from the pad (lining) groups of the same class (the
/// vehicle's pad deviation over its axles, [`crate::pooling`]).
/// The groups and fits may be owned or borrowed (`GroupKey` or `&GroupKey`, `WearFit` or
/// `&WearFit`); the groups' priors are estimated in parallel.
pub fn estimate_group_priors<G, F>(fits: impl IntoIterator<Item = (G, u64, F)>, settings: &ForecastSettings) -> HashMap<GroupKey, WearPrior>
where
    G: Borrow<GroupKey> + Hash + Eq + Send,
    F: Borrow<WearFit> + Send,
{
    let mut groups: HashMap<G, Vec<(u64, F)>> = HashMap::new();
    for (group, key, fit) in fits {
        groups.entry(group).or_default().push((key, fit));
    }
    let mut priors: HashMap<GroupKey, WearPrior> = groups
        .into_par_iter()
        .filter_map(|(k, fits)| estimate_prior(&fits, settings).map(|p| (k.borrow().clone(), p)))
        .collect();
    let couplings: Vec<(GroupKey, CouplingEstimate)> = priors
        .iter()
        .filter(|(k, _)| k.component == Component::Disc)
        .filter_map(|(k, rotor)| {
            let own_pad = priors.get(&GroupKey { component: Component::Friction, ..k.clone() })?;
            // Every pad group of the class, in axle order (the sums do not depend on the map).
            let mut class_pads: Vec<(u32, &WearPrior)> = priors
                .iter()
                .filter(|(g, _)| g.component == Component::Friction && g.vehicle_class == k.vehicle_class)
                .map(|(g, p)| (g.axle_index, p))
                .collect();
            class_pads.sort_by_key(|(axle, _)| *axle);
            let pads: Vec<&WearPrior> = class_pads.into_iter().map(|(_, p)| p).collect();
            estimate_pad_coupling(&pads, own_pad, rotor, settings).map(|c| (k.clone(), c))
        })
        .collect();
    // Each group's correlation shrunk toward the fleet's (pooling docs); β follows it.
    let pooled = pool_pad_rotor_correlations(&couplings.iter().map(|(_, c)| (c.coupling.correlation, c.coupling.vehicles)).collect::<Vec<_>>());
    for ((k, c), correlation) in couplings.into_iter().zip(pooled) {
        if let Some(p) = priors.get_mut(&k) {
            let slope = correlation * p.between_sd_mm_per_mj / c.deviation_sd_mm_per_mj;
            p.pad_coupling = Some(if slope.is_finite() { PadCoupling { correlation, slope, ..c.coupling } } else { c.coupling });
        }
    }
    priors
}

/// Fits every part (of any sign) and estimates one prior per group.
pub fn fit_and_pool(inputs: &[PartInput], settings: &ForecastSettings) -> (Vec<Option<WearFit>>, HashMap<GroupKey, WearPrior>) {
    let fits: Vec<Option<WearFit>> = inputs.par_iter().map(|p| fit_part_any_sign(&p.history, settings).ok()).collect();
    let triples = inputs
        .iter()
        .zip(&fits)
        .filter_map(|(input, fit)| fit.as_ref().map(|f| (&input.group, vehicle_key(&[&input.vehicle_id]), f)));
    let priors = estimate_group_priors(triples, settings);
    (fits, priors)
}

/// Runs the pipeline over `inputs` for `today_day` (days since epoch); results in input order.
/// Fits and vehicles are spread over rayon's threads; each vehicle's forecast depends only on
/// its own data, the priors and its own seed, so the result does not depend on the threads.
///
/// Vehicles are forecast in the order of their keys ([`vehicle_key`]): each prior's members
/// are sorted by that key, so the leave-one-out look-ups of consecutive vehicles land close
/// together instead of all over a group of many thousand vehicles.
pub fn forecast_parts(inputs: &[PartInput], today_day: f64, settings: &ForecastSettings) -> Vec<PartResult> {
    let (mut fits, priors) = fit_and_pool(inputs, settings);
    let prior_by_group: HashMap<(&str, u32, Component), &WearPrior> =
        priors.iter().map(|(k, p)| ((k.vehicle_class.as_str(), k.axle_index, k.component), p)).collect();
    // (vehicle key, part index), grouped by vehicle: by key, then id (keys are hashes), then
    // input order within the vehicle.
    let mut order: Vec<(u64, usize)> = inputs.par_iter().enumerate().map(|(i, p)| (vehicle_key(&[&p.vehicle_id]), i)).collect();
    let same_vehicle = |a: &(u64, usize), b: &(u64, usize)| a.0 == b.0 && inputs[a.1].vehicle_id == inputs[b.1].vehicle_id;
    order.par_sort_unstable_by(|a, b| a.0.cmp(&b.0).then_with(|| inputs[a.1].vehicle_id.cmp(&inputs[b.1].vehicle_id)).then(a.1.cmp(&b.1)));
    // Each vehicle with its key and its parts' indices and own fits.
    type Members = Vec<(usize, Option<WearFit>)>;
    let vehicles: Vec<(u64, Members)> =
        order.chunk_by(same_vehicle).map(|parts| (parts[0].0, parts.iter().map(|&(_, i)| (i, fits[i].take())).collect())).collect();
    let computed: Vec<(Vec<usize>, Vec<PartForecast>)> = vehicles
        .into_par_iter()
        .map(|(key, members)| {
            let vehicle_id = inputs[members[0].0].vehicle_id.as_str();
            // One random stream per vehicle, as in the service.
            let vehicle_settings = ForecastSettings { seed: vehicle_seed(settings.seed, &[vehicle_id]), ..settings.clone() };
            let parts: Vec<PartData<'_>> = members
                .iter()
                .map(|&(i, _)| PartData {
                    history: &inputs[i].history,
                    daily_energy_mj: &inputs[i].daily_energy_mj,
                    current_cumulative_energy_mj: inputs[i].current_cumulative_energy_mj,
                })
                .collect();
            let class = inputs[members[0].0].group.vehicle_class.as_str();
            let prior_of = |axle_index: u32, component: Component| prior_by_group.get(&(class, axle_index, component)).copied();
            let indices: Vec<usize> = members.iter().map(|m| m.0).collect();
            let own_fits = members.into_iter().map(|m| m.1).collect();
            (indices, forecast_vehicle_fitted(key, &parts, own_fits, prior_of, today_day, &vehicle_settings))
        })
        .collect();
    let mut out: Vec<Option<PartResult>> = std::iter::repeat_with(|| None).take(inputs.len()).collect();
    for (indices, forecasts) in computed {
        for (i, r) in indices.into_iter().zip(forecasts) {
            out[i] = Some(PartResult { own_fit: r.own_fit, outlook: r.outlook });
        }
    }
    // Every slot is filled (each part belongs to one vehicle). `filter_map` collects in place
    // (an `Option<PartResult>` is as large as a `PartResult`); `flatten` would copy the lot
    // into a second vector of fresh pages.
    #[allow(clippy::filter_map_identity)]
    let results: Vec<PartResult> = out.into_iter().filter_map(|r| r).collect();
    results
}
