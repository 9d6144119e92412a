//! All parts of one vehicle forecast together: pads (linings) first, then rotors (drums), each
//! borrowing from the vehicle's pad rates (its own axle's and the others') through the group's
//! pad coupling
//! ([`crate::pooling`]). The service and the in-crate pipeline both forecast through here, so
//! one vehicle gets the same answer from either.

use crate::domain::Component;
use crate::energy_rate::{energy_window, EnergyRate};
use crate::forecast::{forecast_part_with_energy, recent_energy, PartOutlook};
use crate::pooling::{vehicle_pad_deviation, RatePrior, WearPrior};
use crate::settings::ForecastSettings;
use crate::wear_fit::{fit_part_rate, WearFit};
use crate::wear_history::PartHistory;

/// What one part's forecast reads.
#[derive(Debug, Clone, Copy)]
pub struct PartData<'a> {
    /// The part's history with cumulative energies.
    pub history: &'a PartHistory,
    /// Friction energy per day at this brake, MJ, oldest first, ending the day before today.
    pub daily_energy_mj: &'a [f64],
    /// Cumulative energy at this brake up to today, MJ.
    pub current_cumulative_energy_mj: f64,
}

/// One part's own fit (of any sign, as pooled) and its outlook.
#[derive(Debug, Clone, PartialEq)]
pub struct PartForecast {
    /// The vehicle's own fit, when the inspections allow one, without its coefficients
    /// ([`fit_part_rate`]).
    pub own_fit: Option<WearFit>,
    /// The forecast.
    pub outlook: PartOutlook,
}

/// Forecasts every part of vehicle `vehicle_key` ([`crate::pooling::vehicle_key`]); results
/// come in the order of `parts`. `prior_of(axle_index, component)` gives the group prior.
/// `settings.seed` should already be the vehicle's own ([`crate::forecast::vehicle_seed`]).
pub fn forecast_vehicle<'p>(
    vehicle_key: u64,
    parts: &[PartData<'_>],
    prior_of: impl Fn(u32, Component) -> Option<&'p WearPrior>,
    today_day: f64,
    settings: &ForecastSettings,
) -> Vec<PartForecast> {
    let own_fits: Vec<Option<WearFit>> = parts.iter().map(|p| fit_part_rate(p.history, settings).ok()).collect();
    forecast_vehicle_fitted(vehicle_key, parts, own_fits, prior_of, today_day, settings)
}

/// [`forecast_vehicle`] with each part's own fit already made (`own_fits[i]` is
/// [`fit_part_rate`] of `parts[i]`, as the pipeline keeps them from pooling), so that no
/// part is fitted twice.
pub fn forecast_vehicle_fitted<'p>(
    vehicle_key: u64,
    parts: &[PartData<'_>],
    mut own_fits: Vec<Option<WearFit>>,
    prior_of: impl Fn(u32, Component) -> Option<&'p WearPrior>,
    today_day: f64,
    settings: &ForecastSettings,
) -> Vec<PartForecast> {
    let outlooks = {
        let borrowed: Vec<Option<&WearFit>> = own_fits.iter().map(Option::as_ref).collect();
        forecast_vehicle_outlooks(vehicle_key, parts, &borrowed, prior_of, today_day, settings)
    };
    own_fits.resize(parts.len(), None);
    own_fits.into_iter().zip(outlooks).map(|(own_fit, outlook)| PartForecast { own_fit, outlook }).collect()
}

/// The outlooks of [`forecast_vehicle_fitted`] from borrowed fits (`own_fits[i]` for
/// `parts[i]`; missing entries count as no fit), in the order of `parts`: the pipeline keeps
/// the fits where they are and moves each into its result once, in parallel.
pub fn forecast_vehicle_outlooks<'p>(
    vehicle_key: u64,
    parts: &[PartData<'_>],
    own_fits: &[Option<&WearFit>],
    prior_of: impl Fn(u32, Component) -> Option<&'p WearPrior>,
    today_day: f64,
    settings: &ForecastSettings,
) -> Vec<PartOutlook> {
    let mut out: Vec<Option<PartOutlook>> = vec![None; parts.len()];
    // (axle, posterior mean, posterior variance, prior) of each forecast pad.
    let mut pads: Vec<(u32, f64, f64, RatePrior)> = Vec::new();
    // Each distinct energy window and its estimate.
    let mut energies: Vec<(&[f64], Option<EnergyRate>)> = Vec::new();
    let order = parts
        .iter()
        .enumerate()
        .filter(|(_, p)| p.history.component == Component::Friction)
        .chain(parts.iter().enumerate().filter(|(_, p)| p.history.component == Component::Disc));
    for (index, part) in order {
        let axle = part.history.axle_index;
        let group = prior_of(axle, part.history.component);
        let prior = group.map(|g| match part.history.component {
            Component::Friction => g.predictive_for(vehicle_key, settings),
            Component::Disc => {
                // The vehicle's pad deviation over every axle whose pad has a rate, stated in
                // this axle's pad (pooling docs); needs this axle's own pad. Summed in axle
                // order, so the answer does not depend on the order of `parts`.
                let own_pad = pads.iter().find(|p| p.0 == axle).map(|p| p.3);
                let deviation = own_pad.and_then(|own| {
                    let mut readings: Vec<(u32, (f64, f64, f64))> =
                        pads.iter().map(|(a, mean, variance, prior)| (*a, (*mean, *variance, prior.mean_mm_per_mj))).collect();
                    readings.sort_by_key(|r| r.0);
                    vehicle_pad_deviation(readings.into_iter().map(|r| r.1), own.mean_mm_per_mj).map(|(x, v)| (own, x, v))
                });
                match deviation {
                    Some((own, x, v)) => g.predictive_given_pad(vehicle_key, (own.mean_mm_per_mj + x, v), &own, settings),
                    None => g.predictive_for(vehicle_key, settings),
                }
            }
        });
        let own_fit = own_fits.get(index).copied().flatten();
        // Pad and rotor of one axle brake on the same energy: estimate it once per window.
        let window = energy_window(part.daily_energy_mj, settings.energy_window_days);
        let energy = match energies.iter().find(|(w, _)| *w == window) {
            Some((_, energy)) => *energy,
            None => {
                let energy = recent_energy(part.daily_energy_mj, settings);
                energies.push((window, energy));
                energy
            }
        };
        let outlook = forecast_part_with_energy(
            part.history,
            own_fit,
            prior.as_ref(),
            energy,
            today_day,
            part.current_cumulative_energy_mj,
            settings,
        );
        if part.history.component == Component::Friction {
            if let Some(p) = &prior {
                let (mean, sd) = (outlook.wear_rate_mm_per_mj, outlook.wear_rate_stderr_mm_per_mj);
                if mean.is_finite() && sd.is_finite() {
                    pads.push((axle, mean, sd * sd, *p));
                }
            }
        }
        out[index] = Some(outlook);
    }
    // Every slot is filled; `filter_map` collects in place, `flatten` would copy.
    #[allow(clippy::filter_map_identity)]
    let outlooks: Vec<PartOutlook> = out.into_iter().filter_map(|f| f).collect();
    outlooks
}
