//! The whole in-crate forecasting pipeline for many parts: own fits, a fleet prior per group,
//! then a forecast per part. The service and the calibration test run these same steps.
//!
//! Steps: (1) [`crate::wear_fit::fit_part_rate`] on every part (the fit of any sign, without
//! its coefficients); (2)
//! [`estimate_group_priors`]: [`crate::estimate_prior`] over the fits of each group (vehicle
//! class, axle, component), then each rotor group's coupling to its vehicles' pads; (3)
//! [`crate::vehicle_forecast::forecast_vehicle`] per vehicle, leaving each vehicle out of the
//! prior it is shrunk toward. [`forecast_parts`] returns every result at once;
//! [`forecast_parts_in_passes`] hands them out a pass of vehicles at a time, as the service's
//! forecast worker stores them, with the same results.

use std::borrow::Borrow;
use std::collections::HashMap;
use std::hash::Hash;
use std::sync::OnceLock;

use rayon::prelude::*;

use crate::domain::Component;
use crate::forecast::{vehicle_seed, PartOutlook};
use crate::pooling::{estimate_pad_coupling, estimate_prior, pool_pad_rotor_correlations, vehicle_key, CouplingEstimate, PadCoupling, WearPrior};
use crate::settings::ForecastSettings;
use crate::vehicle_forecast::{forecast_vehicle_outlooks, PartData};
use crate::wear_fit::{fit_part_rate, WearFit};
use crate::wear_history::PartHistory;

/// Vehicles forecast one after another on one thread in a pass, each touching the next one's
/// data first ([`Refresh::touch`]).
const TOUCH_CHUNK: usize = 16;

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
    /// The vehicle's own fit, if it succeeded, without its coefficients ([`crate::wear_fit::fit_part_rate`]).
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
    priors_of_groups(groups, settings)
}

/// [`estimate_group_priors`] from the fits already grouped, each group's in the order given.
fn priors_of_groups<G, F>(groups: HashMap<G, Vec<(u64, F)>>, settings: &ForecastSettings) -> HashMap<GroupKey, WearPrior>
where
    G: Borrow<GroupKey> + Hash + Eq + Send,
    F: Borrow<WearFit> + Send,
{
    let mut priors: HashMap<GroupKey, WearPrior> = groups
        .into_par_iter()
        .filter_map(|(k, fits)| estimate_prior(&fits, settings).map(|p| (k.borrow().clone(), p)))
        .collect();
    let mut couplings: Vec<(GroupKey, CouplingEstimate)> = priors
        .par_iter()
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
    // In key order: the map's order changes from one map to the next, and the pooled sums
    // would change in their last bits with it.
    couplings.sort_by(|a, b| a.0.cmp(&b.0));
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
    let (fits, _, priors) = fit_and_pool_keyed(inputs, settings);
    (fits, priors)
}

/// [`fit_and_pool`] with every part's [`vehicle_key`] (in input order) beside the fits. The
/// fits are grouped on rayon's threads: each thread gathers a contiguous run of the inputs and
/// the runs are joined in input order, so every group lists its fits as a serial pass would.
fn fit_and_pool_keyed(inputs: &[PartInput], settings: &ForecastSettings) -> (Vec<Option<WearFit>>, Vec<u64>, HashMap<GroupKey, WearPrior>) {
    let (fits, keys): (Vec<Option<WearFit>>, Vec<u64>) =
        inputs.par_iter().map(|p| (fit_part_rate(&p.history, settings).ok(), vehicle_key(&[&p.vehicle_id]))).unzip();
    type Groups<'a> = HashMap<&'a GroupKey, Vec<(u64, &'a WearFit)>>;
    let groups: Groups<'_> = inputs
        .par_iter()
        .zip(&fits)
        .zip(&keys)
        .fold(Groups::new, |mut groups, ((input, fit), key)| {
            if let Some(fit) = fit {
                groups.entry(&input.group).or_default().push((*key, fit));
            }
            groups
        })
        .reduce(Groups::new, |mut earlier, later| {
            for (group, mut fits) in later {
                earlier.entry(group).or_default().append(&mut fits);
            }
            earlier
        });
    let priors = priors_of_groups(groups, settings);
    (fits, keys, priors)
}

/// Runs the pipeline over `inputs` for `today_day` (days since epoch); results in input order.
/// Fits and vehicles are spread over rayon's threads; each vehicle's forecast depends only on
/// its own data, the priors and its own seed, so the result does not depend on the threads.
///
/// Vehicles are forecast in the order of their keys ([`vehicle_key`]): each prior's members
/// are sorted by that key, so the leave-one-out look-ups of consecutive vehicles land close
/// together instead of all over a group of many thousand vehicles. Nothing is moved on one
/// thread alone: each fit stays where it was made until it joins its result, and each
/// vehicle's outlooks go straight to their parts' places (set once each).
pub fn forecast_parts(inputs: &[PartInput], today_day: f64, settings: &ForecastSettings) -> Vec<PartResult> {
    let refresh = Refresh::prepare(inputs, today_day, settings);
    let outlooks: Vec<OnceLock<PartOutlook>> = (0..inputs.len()).into_par_iter().map(|_| OnceLock::new()).collect();
    refresh.vehicle_runs().par_iter().for_each(|run| {
        refresh.forecast_run(run, |i, outlook| {
            // Each part belongs to one vehicle, so its place is empty.
            let _ = outlooks[i].set(outlook);
        })
    });
    let results: Vec<Option<PartResult>> = refresh
        .fits
        .into_par_iter()
        .zip(outlooks)
        .map(|(own_fit, outlook)| outlook.into_inner().map(|outlook| PartResult { own_fit, outlook }))
        .collect();
    // Every place is filled (each part belongs to one vehicle). `filter_map` collects in place
    // (an `Option<PartResult>` is as large as a `PartResult`); `flatten` would copy the lot
    // into a second vector of fresh pages.
    #[allow(clippy::filter_map_identity)]
    let results: Vec<PartResult> = results.into_iter().filter_map(|r| r).collect();
    results
}

/// The pipeline of [`forecast_parts`] run as the service's forecast worker runs a refresh:
/// fits and priors over every part first, then the vehicles in passes of `pass_vehicles`
/// (each pass on rayon's threads), handing each pass's outlooks to `each_pass` as
/// `(input index, outlook)` pairs (in vehicle-key order, each vehicle's parts in input order),
/// with every part's own fit (by input index), before the next pass begins. Only one pass's
/// outlooks are held at a time, as the worker holds only the pass it is storing. Every fit and
/// outlook equals [`forecast_parts`]'s for that part.
pub fn forecast_parts_in_passes(
    inputs: &[PartInput],
    today_day: f64,
    settings: &ForecastSettings,
    pass_vehicles: usize,
    mut each_pass: impl FnMut(&[Option<WearFit>], Vec<(usize, PartOutlook)>),
) {
    let refresh = Refresh::prepare(inputs, today_day, settings);
    for pass in refresh.vehicle_runs().chunks(pass_vehicles.max(1)) {
        let outlooks: Vec<(usize, PartOutlook)> = pass
            .par_chunks(TOUCH_CHUNK)
            .flat_map_iter(|runs| {
                let mut outlooks = Vec::with_capacity(runs.iter().map(|r| r.len()).sum());
                for (j, run) in runs.iter().enumerate() {
                    if let Some(next) = runs.get(j + 1) {
                        refresh.touch(next);
                    }
                    refresh.forecast_run(run, |i, outlook| outlooks.push((i, outlook)));
                }
                outlooks
            })
            .collect();
        each_pass(&refresh.fits, outlooks);
    }
    // Each fit holds a few small allocations: freed on every thread, not one.
    refresh.fits.into_par_iter().for_each(drop);
}

/// What a refresh has after fitting and pooling: every part's own fit, the priors, and the
/// parts in vehicle-key order (see [`forecast_parts`]).
struct Refresh<'a> {
    inputs: &'a [PartInput],
    today_day: f64,
    settings: &'a ForecastSettings,
    fits: Vec<Option<WearFit>>,
    /// Each group's prior with its (vehicle class, axle, component), the class borrowed from
    /// the inputs: a fleet has a few dozen groups, and a scan of them costs less than hashing
    /// a key for each of a refresh's million-odd look-ups.
    priors: Vec<((&'a str, u32, Component), WearPrior)>,
    /// `(vehicle key, part index)` by key, then input order.
    order: Vec<(u64, usize)>,
}

impl<'a> Refresh<'a> {
    fn prepare(inputs: &'a [PartInput], today_day: f64, settings: &'a ForecastSettings) -> Self {
        let (fits, keys, priors) = fit_and_pool_keyed(inputs, settings);
        // The keys are hashes of the ids, so a run of one key is one vehicle unless two ids
        // collide; each run is checked (one id comparison per part) and split by id in that
        // case ([`for_each_vehicle`]), and no id is compared while sorting.
        let mut order: Vec<(u64, usize)> = keys.into_iter().enumerate().map(|(i, key)| (key, i)).collect();
        order.par_sort_unstable();
        let priors = priors
            .into_iter()
            .filter_map(|(k, p)| {
                let class = inputs.iter().find(|i| i.group.vehicle_class == k.vehicle_class)?.group.vehicle_class.as_str();
                Some(((class, k.axle_index, k.component), p))
            })
            .collect();
        Self { inputs, today_day, settings, fits, priors, order }
    }

    /// Reads a word at each end of each part's events and daily energy, and its fit, for the
    /// parts of `run`: with no prefetch instruction in safe Rust, these loads put the memory
    /// they sit in on its way into the cache while the vehicle before is forecast (measured:
    /// about 5 % off the refresh at 400,000 parts, whose inputs are far larger than the cache).
    fn touch(&self, run: &[(u64, usize)]) {
        let mut sum = 0u64;
        for &(_, i) in run {
            let input = &self.inputs[i];
            // Both ends: the forecast reads the events from the last back and the energy
            // from the window's start (the window is usually all of it).
            sum ^= input.history.events.first().map_or(0, |e| e.day.to_bits());
            sum ^= input.history.events.last().map_or(0, |e| e.day.to_bits());
            sum ^= input.daily_energy_mj.first().map_or(0, |e| e.to_bits());
            sum ^= input.daily_energy_mj.last().map_or(0, |e| e.to_bits());
            sum ^= self.fits[i].as_ref().map_or(0, |f| f.rate_mm_per_mj.to_bits());
        }
        std::hint::black_box(sum);
    }

    /// The runs of one vehicle key in [`Self::order`].
    fn vehicle_runs(&self) -> Vec<&[(u64, usize)]> {
        self.order.chunk_by(|a, b| a.0 == b.0).collect()
    }

    /// Forecasts the vehicles of one key `run`, calling `place(part index, outlook)` once for
    /// each of their parts.
    fn forecast_run(&self, run: &[(u64, usize)], mut place: impl FnMut(usize, PartOutlook)) {
        let inputs = self.inputs;
        for_each_vehicle(run, |i| inputs[i].vehicle_id.as_str(), |members| {
            let first = &inputs[members[0].1];
            // One random stream per vehicle, as in the service.
            let vehicle_settings = ForecastSettings { seed: vehicle_seed(self.settings.seed, &[&first.vehicle_id]), ..self.settings.clone() };
            let parts: Vec<PartData<'_>> = members
                .iter()
                .map(|&(_, i)| PartData {
                    history: &inputs[i].history,
                    daily_energy_mj: &inputs[i].daily_energy_mj,
                    current_cumulative_energy_mj: inputs[i].current_cumulative_energy_mj,
                })
                .collect();
            let class = first.group.vehicle_class.as_str();
            let prior_of = |axle_index: u32, component: Component| {
                self.priors.iter().find(|((c, a, k), _)| *a == axle_index && *k == component && *c == class).map(|(_, p)| p)
            };
            let own_fits: Vec<Option<&WearFit>> = members.iter().map(|&(_, i)| self.fits[i].as_ref()).collect();
            let forecasts = forecast_vehicle_outlooks(members[0].0, &parts, &own_fits, prior_of, self.today_day, &vehicle_settings);
            for (&(_, i), outlook) in members.iter().zip(forecasts) {
                place(i, outlook);
            }
        });
    }
}

/// Calls `forecast` with the parts of each vehicle in `run` (`(key, part index)` pairs of one
/// vehicle key, in input order), `id_of` giving a part's vehicle id: the whole run when every
/// part has the same id (always, unless two ids' keys collide), else each id's parts apart, by
/// id, each in input order.
fn for_each_vehicle<'a>(run: &[(u64, usize)], id_of: impl Fn(usize) -> &'a str, mut forecast: impl FnMut(&[(u64, usize)])) {
    let Some(&(_, first)) = run.first() else { return };
    if run.iter().all(|&(_, i)| id_of(i) == id_of(first)) {
        forecast(run);
    } else {
        let mut by_id = run.to_vec();
        by_id.sort_by(|a, b| id_of(a.1).cmp(id_of(b.1)).then(a.1.cmp(&b.1)));
        by_id.chunk_by(|a, b| id_of(a.1) == id_of(b.1)).for_each(&mut forecast);
    }
}

#[cfg(test)]
mod tests {
    use std::sync::Mutex;

    use super::for_each_vehicle;

    /// Two vehicles whose keys collide (forced here: a 64-bit hash collision is too rare to
    /// meet) are forecast apart, each with its own parts in input order; one vehicle's run
    /// is forecast whole.
    #[test]
    fn a_key_shared_by_two_ids_is_split_by_id() {
        let ids = ["van-7", "bus-2", "van-7", "bus-2", "van-7"];
        let run: Vec<(u64, usize)> = (0..ids.len()).map(|i| (42, i)).collect();
        let seen = Mutex::new(Vec::new());
        for_each_vehicle(&run, |i| ids[i], |members| seen.lock().expect("not poisoned").push(members.iter().map(|m| m.1).collect::<Vec<_>>()));
        assert_eq!(seen.into_inner().expect("not poisoned"), vec![vec![1, 3], vec![0, 2, 4]]);

        let one = ["van-7"; 3];
        let seen = Mutex::new(Vec::new());
        for_each_vehicle(&run[..3], |i| one[i], |members| seen.lock().expect("not poisoned").push(members.iter().map(|m| m.1).collect::<Vec<_>>()));
        assert_eq!(seen.into_inner().expect("not poisoned"), vec![vec![0, 1, 2]]);
    }
}
