//! The stored layout of a materialised part forecast ([`StoredPart`]), and the layout before it.
//!
//! Since schema 5 (sled) and 3 (PostgreSQL) a part is kept as:
//! - its 99 due quantiles as whole hours since the epoch, the first as a signed varint and each
//!   next one as its rise over the one before (an unsigned varint, one or two bytes for bands
//!   of weeks to years), which is exact for every quantile a forecast computes (they are
//!   rounded to the hour, [`DueDistribution::grid_steps`]); a part due now keeps its one date;
//!   any other set of quantiles is kept as it is (f64s);
//! - of its own fit, only the scalars that pooling and a forecast from a stored fit read
//!   ([`WearFit::without_coefficients`]: no coefficient names, values or covariance);
//! - the outlook's other fields as they are, without the trajectory (charts compute it).
//!
//! At 4 parts a vehicle this is about a quarter of the schema-4 form (99 f64s and the whole fit
//! per part; measured in BENCHMARKS.md). [`LegacyVehicleForecasts`] reads the schema-4 form for
//! the migrations, which re-encode each stored forecast without changing any value.

use brakeledger_models::domain::Component;
use brakeledger_models::forecast::DUE_QUANTILES;
use brakeledger_models::{DueDistribution, ForecastBasis, PartOutlook, WearFit};
use serde::{Deserialize, Deserializer, Serialize, Serializer};

use super::{StoredPart, VehicleForecasts};

/// The due quantiles as stored.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
enum StoredDue {
    /// Whole hours since the epoch: the first, then each rise over the one before.
    Hours { first: i64, rises: Vec<u64> },
    /// All [`DUE_QUANTILES`] quantiles the same day (a part due now).
    Constant(f64),
    /// Any other quantiles, as they are.
    Exact(Vec<f64>),
}

impl StoredDue {
    fn of(due: &DueDistribution) -> Self {
        let days = &due.quantile_days;
        if let (Some(&first), DUE_QUANTILES) = (days.first(), days.len()) {
            if days.iter().all(|d| d.to_bits() == first.to_bits()) {
                return Self::Constant(first);
            }
        }
        let hours = due.grid_steps().and_then(|steps| {
            let first = *steps.first()?;
            let rises = steps.windows(2).map(|w| u64::try_from(w[1].checked_sub(w[0])?).ok()).collect::<Option<Vec<u64>>>()?;
            Some(Self::Hours { first, rises })
        });
        hours.unwrap_or_else(|| Self::Exact(days.clone()))
    }

    fn into_due(self) -> Result<DueDistribution, String> {
        match self {
            Self::Hours { first, rises } => {
                let mut steps = Vec::with_capacity(rises.len() + 1);
                let mut step = first;
                steps.push(step);
                for rise in rises {
                    step = i64::try_from(rise).ok().and_then(|r| step.checked_add(r)).ok_or("due quantile out of range")?;
                    steps.push(step);
                }
                Ok(DueDistribution::from_grid_steps(&steps))
            }
            Self::Constant(day) => Ok(DueDistribution { quantile_days: vec![day; DUE_QUANTILES] }),
            Self::Exact(quantile_days) => Ok(DueDistribution { quantile_days }),
        }
    }
}

/// The scalars of an own fit that are stored.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
struct StoredFit {
    rate_mm_per_mj: f64,
    rate_stderr_mm_per_mj: f64,
    inspections_used: u32,
    degrees_of_freedom: f64,
    residual_sd_mm: f64,
    rate_variance_per_residual_variance: f64,
    hot_fraction: f64,
    cycles_used: u32,
    residual_sum_squares_mm2: f64,
    residual_lag_product_sum_mm2: f64,
}

impl StoredFit {
    fn of(fit: &WearFit) -> Self {
        Self {
            rate_mm_per_mj: fit.rate_mm_per_mj,
            rate_stderr_mm_per_mj: fit.rate_stderr_mm_per_mj,
            inspections_used: fit.inspections_used,
            degrees_of_freedom: fit.degrees_of_freedom,
            residual_sd_mm: fit.residual_sd_mm,
            rate_variance_per_residual_variance: fit.rate_variance_per_residual_variance,
            hot_fraction: fit.hot_fraction,
            cycles_used: fit.cycles_used,
            residual_sum_squares_mm2: fit.residual_sum_squares_mm2,
            residual_lag_product_sum_mm2: fit.residual_lag_product_sum_mm2,
        }
    }

    fn into_fit(self) -> WearFit {
        WearFit {
            rate_mm_per_mj: self.rate_mm_per_mj,
            rate_stderr_mm_per_mj: self.rate_stderr_mm_per_mj,
            inspections_used: self.inspections_used,
            degrees_of_freedom: self.degrees_of_freedom,
            residual_sd_mm: self.residual_sd_mm,
            coefficient_names: Vec::new(),
            coefficients: Vec::new(),
            covariance: Vec::new(),
            rate_variance_per_residual_variance: self.rate_variance_per_residual_variance,
            hot_fraction: self.hot_fraction,
            cycles_used: self.cycles_used,
            residual_sum_squares_mm2: self.residual_sum_squares_mm2,
            residual_lag_product_sum_mm2: self.residual_lag_product_sum_mm2,
        }
    }
}

/// A part as stored (field order is the layout; `N` is the notes: borrowed when writing,
/// owned when reading).
#[derive(Serialize, Deserialize)]
struct PartLayout<N> {
    axle_index: u32,
    component: Component,
    own_fit: Option<StoredFit>,
    current_thickness_mm: f64,
    current_thickness_low_mm: f64,
    current_thickness_high_mm: f64,
    min_thickness_mm: f64,
    wear_rate_mm_per_mj: f64,
    wear_rate_stderr_mm_per_mj: f64,
    daily_energy_mj: f64,
    due: Option<StoredDue>,
    due_now: bool,
    basis: ForecastBasis,
    inspections_used: u32,
    notes: N,
    fitted_day: Option<f64>,
    energy_since_fitted_mj: f64,
}

impl Serialize for StoredPart {
    fn serialize<S: Serializer>(&self, serializer: S) -> Result<S::Ok, S::Error> {
        let o = &self.outlook;
        PartLayout {
            axle_index: self.axle_index,
            component: self.component,
            own_fit: self.own_fit.as_ref().map(StoredFit::of),
            current_thickness_mm: o.current_thickness_mm,
            current_thickness_low_mm: o.current_thickness_low_mm,
            current_thickness_high_mm: o.current_thickness_high_mm,
            min_thickness_mm: o.min_thickness_mm,
            wear_rate_mm_per_mj: o.wear_rate_mm_per_mj,
            wear_rate_stderr_mm_per_mj: o.wear_rate_stderr_mm_per_mj,
            daily_energy_mj: o.daily_energy_mj,
            due: o.due.as_ref().map(StoredDue::of),
            due_now: o.due_now,
            basis: o.basis,
            inspections_used: o.inspections_used,
            notes: &o.notes,
            fitted_day: o.fitted_day,
            energy_since_fitted_mj: o.energy_since_fitted_mj,
        }
        .serialize(serializer)
    }
}

impl<'de> Deserialize<'de> for StoredPart {
    fn deserialize<D: Deserializer<'de>>(deserializer: D) -> Result<Self, D::Error> {
        let p = PartLayout::<Vec<String>>::deserialize(deserializer)?;
        let due = p.due.map(StoredDue::into_due).transpose().map_err(serde::de::Error::custom)?;
        Ok(StoredPart {
            axle_index: p.axle_index,
            component: p.component,
            own_fit: p.own_fit.map(StoredFit::into_fit),
            outlook: PartOutlook {
                current_thickness_mm: p.current_thickness_mm,
                current_thickness_low_mm: p.current_thickness_low_mm,
                current_thickness_high_mm: p.current_thickness_high_mm,
                min_thickness_mm: p.min_thickness_mm,
                wear_rate_mm_per_mj: p.wear_rate_mm_per_mj,
                wear_rate_stderr_mm_per_mj: p.wear_rate_stderr_mm_per_mj,
                daily_energy_mj: p.daily_energy_mj,
                due,
                due_now: p.due_now,
                basis: p.basis,
                inspections_used: p.inspections_used,
                notes: p.notes,
                fitted_day: p.fitted_day,
                energy_since_fitted_mj: p.energy_since_fitted_mj,
                trajectory: Vec::new(),
            },
        })
    }
}

/// A part in the schema-4 layout: the outlook and the whole own fit as serde derives them.
#[derive(Deserialize)]
#[cfg_attr(test, derive(Serialize))]
struct LegacyStoredPart {
    axle_index: u32,
    component: Component,
    own_fit: Option<WearFit>,
    outlook: PartOutlook,
}

/// A vehicle's forecasts in the schema-4 layout (read by the migrations only).
#[derive(Deserialize)]
#[cfg_attr(test, derive(Serialize))]
pub struct LegacyVehicleForecasts {
    fleet_id: String,
    vehicle_id: String,
    vehicle_class: String,
    computed_at_ms: i64,
    parts: Vec<LegacyStoredPart>,
}

impl From<LegacyVehicleForecasts> for VehicleForecasts {
    /// The same forecasts in the current layout: every value kept, the fits without their
    /// coefficients (which nothing reads from a store) and without trajectories (never stored).
    fn from(old: LegacyVehicleForecasts) -> Self {
        VehicleForecasts {
            fleet_id: old.fleet_id,
            vehicle_id: old.vehicle_id,
            vehicle_class: old.vehicle_class,
            computed_at_ms: old.computed_at_ms,
            parts: old
                .parts
                .into_iter()
                .map(|p| StoredPart {
                    axle_index: p.axle_index,
                    component: p.component,
                    own_fit: p.own_fit.map(WearFit::without_coefficients),
                    outlook: PartOutlook { trajectory: Vec::new(), ..p.outlook },
                })
                .collect(),
        }
    }
}

#[cfg(test)]
impl LegacyVehicleForecasts {
    /// `record` as schema 4 stored it, its fits given whole (tests of the migrations).
    pub fn of(record: &VehicleForecasts, whole_fits: &[Option<WearFit>]) -> Self {
        Self {
            fleet_id: record.fleet_id.clone(),
            vehicle_id: record.vehicle_id.clone(),
            vehicle_class: record.vehicle_class.clone(),
            computed_at_ms: record.computed_at_ms,
            parts: record
                .parts
                .iter()
                .zip(whole_fits)
                .map(|(p, fit)| LegacyStoredPart { axle_index: p.axle_index, component: p.component, own_fit: fit.clone(), outlook: p.outlook.clone() })
                .collect(),
        }
    }
}

/// Forecasts computed by the models for `vehicles` simulated vehicles (invented data), as the
/// forecaster stores them, with each part's whole own fit beside them.
#[cfg(test)]
pub fn computed_forecasts(vehicles: usize) -> Vec<(VehicleForecasts, Vec<Option<WearFit>>)> {
    use brakeledger_models::calibration::repeated_fleet_inputs;
    use brakeledger_models::pipeline::forecast_parts;
    use brakeledger_models::ForecastSettings;

    let (inputs, today) = repeated_fleet_inputs(vehicles * 4);
    let settings = ForecastSettings { with_trajectory: false, ..ForecastSettings::default() };
    let results = forecast_parts(&inputs, today, &settings);
    let mut out: Vec<(VehicleForecasts, Vec<Option<WearFit>>)> = Vec::new();
    for (input, result) in inputs.iter().zip(results) {
        if out.last().is_none_or(|(v, _)| v.vehicle_id != input.vehicle_id) {
            let record = VehicleForecasts {
                fleet_id: "north".into(),
                vehicle_id: input.vehicle_id.clone(),
                vehicle_class: input.group.vehicle_class.clone(),
                computed_at_ms: 1_750_000_000_000,
                parts: Vec::new(),
            };
            out.push((record, Vec::new()));
        }
        let Some((record, fits)) = out.last_mut() else { unreachable!("pushed above") };
        record.parts.push(StoredPart {
            axle_index: input.history.axle_index,
            component: input.history.component,
            own_fit: result.own_fit.clone(),
            outlook: result.outlook,
        });
        fits.push(result.own_fit);
    }
    out
}

#[cfg(test)]
mod tests {
    use proptest::prelude::*;

    use super::*;
    use crate::store::sled_engine::{decode, encode};

    #[test]
    fn computed_forecasts_round_trip_exactly_in_about_a_quarter_of_the_old_size() {
        let (mut new_bytes, mut old_bytes, mut hours) = (0usize, 0usize, 0usize);
        for (record, fits) in computed_forecasts(40) {
            let bytes = encode(&record).unwrap();
            assert_eq!(decode::<VehicleForecasts>(&bytes).unwrap(), record);
            let old = encode(&LegacyVehicleForecasts::of(&record, &fits)).unwrap();
            assert_eq!(VehicleForecasts::from(decode::<LegacyVehicleForecasts>(&old).unwrap()), record, "the migration keeps every value");
            new_bytes += bytes.len();
            old_bytes += old.len();
            hours += record.parts.iter().filter(|p| matches!(p.outlook.due.as_ref().map(StoredDue::of), Some(StoredDue::Hours { .. }))).count();
        }
        assert!(hours >= 150, "computed quantiles are whole hours: {hours} of 160 parts");
        let ratio = new_bytes as f64 / old_bytes as f64;
        eprintln!("40 vehicles: {new_bytes} bytes, {old_bytes} in the schema-4 layout ({ratio:.3})");
        assert!(ratio < 0.35, "{new_bytes} bytes against {old_bytes} in the schema-4 layout ({ratio:.2})");
    }

    /// A part with the given due quantiles and every other field set (invented values).
    fn part_with(due: Option<DueDistribution>) -> StoredPart {
        StoredPart {
            axle_index: 2,
            component: Component::Disc,
            own_fit: Some(WearFit {
                rate_mm_per_mj: 2.5e-4,
                rate_stderr_mm_per_mj: 3.0e-5,
                inspections_used: 5,
                degrees_of_freedom: 3.0,
                residual_sd_mm: 0.12,
                coefficient_names: Vec::new(),
                coefficients: Vec::new(),
                covariance: Vec::new(),
                rate_variance_per_residual_variance: 0.06,
                hot_fraction: 0.1,
                cycles_used: 2,
                residual_sum_squares_mm2: 0.043,
                residual_lag_product_sum_mm2: -0.004,
            }),
            outlook: PartOutlook {
                current_thickness_mm: 24.1,
                current_thickness_low_mm: 23.8,
                current_thickness_high_mm: 24.4,
                min_thickness_mm: 22.0,
                wear_rate_mm_per_mj: 2.4e-4,
                wear_rate_stderr_mm_per_mj: 2.9e-5,
                daily_energy_mj: 31.5,
                due,
                due_now: false,
                basis: ForecastBasis::Combined,
                inspections_used: 5,
                notes: vec!["a remark".into()],
                fitted_day: Some(20_100.0),
                energy_since_fitted_mj: 8_100.0,
                trajectory: Vec::new(),
            },
        }
    }

    #[test]
    fn a_part_due_now_keeps_its_one_date() {
        let today = 20_400.123_456_789;
        let part = part_with(Some(DueDistribution { quantile_days: vec![today; 99] }));
        let bytes = encode(&part).unwrap();
        assert_eq!(decode::<StoredPart>(&bytes).unwrap(), part);
        assert!(matches!(StoredDue::of(part.outlook.due.as_ref().unwrap()), StoredDue::Constant(d) if d == today));
    }

    proptest! {
        /// Any quantiles round-trip bit for bit: whole hours (falling or rising), fractions
        /// of an hour, infinities, NaN and any count.
        #[test]
        fn any_due_quantiles_round_trip_bit_for_bit(
            start_hours in -1_000_000i64..1_000_000_000,
            rises in proptest::collection::vec(0i64..100_000, 0..120),
            off_grid in proptest::option::of(0usize..120),
            special in proptest::option::of(prop_oneof![Just(f64::INFINITY), Just(f64::NEG_INFINITY), Just(f64::NAN), Just(1e300)]),
        ) {
            let mut days: Vec<f64> = rises.iter().scan(start_hours, |h, r| { *h += r; Some(*h as f64 / 24.0) }).collect();
            days.insert(0, start_hours as f64 / 24.0);
            if let Some(i) = off_grid { let i = i % days.len(); days[i] += 1.0e-3; }
            if let Some(value) = special { let last = days.len() - 1; days[last] = value; }
            let part = part_with(Some(DueDistribution { quantile_days: days.clone() }));
            let back: StoredPart = decode(&encode(&part).unwrap()).unwrap();
            let back_days = back.outlook.due.unwrap().quantile_days;
            prop_assert_eq!(back_days.iter().map(|d| d.to_bits()).collect::<Vec<_>>(), days.iter().map(|d| d.to_bits()).collect::<Vec<_>>());
        }
    }
}
