//! Materialised forecasts made up for due-list benchmarks: every part of a two-axle vehicle
//! with a due-date distribution, the due dates spread over ten years and fixed by the
//! vehicle's number, so a fleet's due list has a known, deterministic order. Written straight
//! into a store (no fitting), as the service's forecast worker would store real ones.

use brakeledger::store::{StoredPart, VehicleForecasts};
use brakeledger_models::domain::Component;
use brakeledger_models::{DueDistribution, ForecastBasis, PartOutlook};

/// The first day (days since the Unix epoch, in 2024) on which a made-up part may fall due.
pub const FIRST_DUE_DAY: i64 = 20_000;

/// Days over which the made-up due dates spread.
pub const DUE_SPREAD_DAYS: i64 = 3_650;

/// Forecasts of vehicle number `v` (`vehicle_id`) of `fleet_id`: two axles, pads and discs,
/// each with 99 due-date quantiles one day apart, starting between [`FIRST_DUE_DAY`] and
/// [`FIRST_DUE_DAY`] + [`DUE_SPREAD_DAYS`].
pub fn dated_forecasts(fleet_id: &str, vehicle_id: &str, v: usize) -> VehicleForecasts {
    let parts = (1..=2u32)
        .flat_map(|axle| {
            Component::ALL.into_iter().map(move |component| {
                let offset = (v * 7919 + axle as usize * 104_729 + component as usize * 13) % DUE_SPREAD_DAYS as usize;
                let base = (FIRST_DUE_DAY as usize + offset) as f64;
                StoredPart {
                    axle_index: axle,
                    component,
                    own_fit: None,
                    outlook: PartOutlook {
                        current_thickness_mm: 10.0,
                        current_thickness_low_mm: 9.0,
                        current_thickness_high_mm: 11.0,
                        min_thickness_mm: 3.0,
                        wear_rate_mm_per_mj: 0.002,
                        wear_rate_stderr_mm_per_mj: 0.0002,
                        daily_energy_mj: 20.0,
                        due: Some(DueDistribution { quantile_days: (1..=99).map(|q| base + q as f64).collect() }),
                        due_now: false,
                        basis: ForecastBasis::Combined,
                        inspections_used: 4,
                        notes: Vec::new(),
                        fitted_day: None,
                        energy_since_fitted_mj: 0.0,
                        trajectory: Vec::new(),
                    },
                }
            })
        })
        .collect();
    VehicleForecasts { fleet_id: fleet_id.into(), vehicle_id: vehicle_id.into(), vehicle_class: "bench".into(), computed_at_ms: 0, parts }
}
