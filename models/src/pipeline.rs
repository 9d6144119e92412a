//! The whole in-crate forecasting pipeline for many parts: own fits, a fleet prior per group,
//! then a forecast per part. The service and the calibration test run these same steps.
//!
//! Steps: (1) [`crate::fit_part`] on every part; (2) [`crate::estimate_prior`] over the
//! successful fits of each group (vehicle class, axle, component); (3) [`crate::forecast_part`]
//! with the part's own fit (or its failure) and its group's prior.

use std::collections::HashMap;

use crate::domain::Component;
use crate::forecast::{forecast_part, vehicle_seed, ForecastSettings, PartOutlook};
use crate::pooling::{estimate_prior, WearPrior};
use crate::wear_fit::{fit_part, WearFit};
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
    /// vehicle and axle are modelled together (a rotor borrows from its own pad).
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

/// Fits every part and estimates one prior per group.
pub fn fit_and_pool(inputs: &[PartInput], settings: &ForecastSettings) -> (Vec<Option<WearFit>>, HashMap<GroupKey, WearPrior>) {
    let fits: Vec<Option<WearFit>> = inputs.iter().map(|p| fit_part(&p.history, settings).ok()).collect();
    let mut groups: HashMap<GroupKey, Vec<WearFit>> = HashMap::new();
    for (input, fit) in inputs.iter().zip(&fits) {
        if let Some(f) = fit {
            groups.entry(input.group.clone()).or_default().push(f.clone());
        }
    }
    let priors = groups.into_iter().filter_map(|(k, fits)| estimate_prior(&fits).map(|p| (k, p))).collect();
    (fits, priors)
}

/// Runs the pipeline over `inputs` for `today_day` (days since epoch).
pub fn forecast_parts(inputs: &[PartInput], today_day: f64, settings: &ForecastSettings) -> Vec<PartResult> {
    let (fits, priors) = fit_and_pool(inputs, settings);
    inputs
        .iter()
        .zip(fits)
        .enumerate()
        .map(|(index, (input, own_fit))| {
            // One random stream per input, as the service has one per vehicle.
            let part_settings = ForecastSettings { seed: vehicle_seed(settings.seed, &[&index.to_string()]), ..settings.clone() };
            let outlook = forecast_part(
                &input.history,
                own_fit.as_ref(),
                priors.get(&input.group),
                &input.daily_energy_mj,
                today_day,
                input.current_cumulative_energy_mj,
                &part_settings,
            );
            PartResult { own_fit, outlook }
        })
        .collect()
}
