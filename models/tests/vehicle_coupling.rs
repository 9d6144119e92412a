//! Issue 7: a rotor (drum) borrows from every pad of its vehicle, not only its own axle's
//! (the vehicle's pad deviation, `pooling` docs). The groups here are invented test data (not
//! reference values); the coupling's figures are checked against numpy computing the
//! documented formulas from the same numbers, and the forecast against a wrong implementation
//! that reads only the rotor's own axle.

use brakeledger_models::domain::Component;
use brakeledger_models::pooling::{estimate_pad_coupling, vehicle_pad_deviation, PriorMember};
use brakeledger_models::vehicle_forecast::{forecast_vehicle, PartData};
use brakeledger_models::{ForecastSettings, PartHistory, WearPrior};

use crate::forecast_behaviour::{inspection, replacement};

/// A group prior holding `members` (key, own rate mm/MJ, its variance), with mean `mean` and
/// between-vehicle SD `tau` as the pooling would have estimated them (invented).
fn group(mean: f64, tau: f64, members: &[(u64, f64, f64)]) -> WearPrior {
    let tau2 = tau * tau;
    let members: Vec<PriorMember> = members.iter().map(|&(vehicle_key, rate_mm_per_mj, rate_variance)| PriorMember { vehicle_key, rate_mm_per_mj, rate_variance }).collect();
    WearPrior {
        mean_mm_per_mj: mean,
        between_sd_mm_per_mj: tau,
        vehicles: members.len() as u32,
        residual_sd_mm: 0.3,
        residual_degrees_of_freedom: 20.0,
        residual_autocorrelation: 0.0,
        weight_sum: members.iter().map(|m| 1.0 / (m.rate_variance + tau2)).sum(),
        weighted_rate_sum: members.iter().map(|m| m.rate_mm_per_mj / (m.rate_variance + tau2)).sum(),
        members,
        pad_coupling: None,
    }
}

/// Six vehicles of a two-axle class: front pads (mean 4e-4 mm/MJ), rear pads (2e-4; vehicle 6
/// has no rear fit) and front rotors (3e-5, τ 1e-5). Invented.
fn class_groups() -> (WearPrior, WearPrior, WearPrior) {
    let front = [3.2, 4.1, 5.0, 3.6, 4.6, 3.9];
    let front_var = [4.0, 5.0, 3.0, 6.0, 4.0, 5.0];
    let rear = [1.7, 2.2, 2.6, 1.8, 2.3];
    let rear_var = [2.0, 3.0, 2.0, 2.0, 3.0];
    let rotor = [2.5, 3.1, 3.9, 2.6, 3.5, 2.9];
    let key = |i: usize| i as u64 + 1;
    let front_pads = group(4e-4, 6e-5, &(0..6).map(|i| (key(i), front[i] * 1e-4, front_var[i] * 1e-10)).collect::<Vec<_>>());
    let rear_pads = group(2e-4, 3e-5, &(0..5).map(|i| (key(i), rear[i] * 1e-4, rear_var[i] * 1e-10)).collect::<Vec<_>>());
    let front_rotors = group(3e-5, 1e-5, &(0..6).map(|i| (key(i), rotor[i] * 1e-5, 1e-12)).collect::<Vec<_>>());
    (front_pads, rear_pads, front_rotors)
}

fn close(name: &str, got: f64, reference: f64) {
    assert!((got / reference - 1.0).abs() < 1e-12, "{name}: {got} vs reference {reference}");
}

#[test]
fn the_vehicle_pad_deviation_averages_relative_deviations_over_the_axles() {
    // One pad: the pad's own deviation from its group mean, as the coupling read it before.
    let (x, v) = vehicle_pad_deviation([(5e-4, 4e-10, 4e-4)], 4e-4).expect("one reading");
    close("one pad, x", x, 1e-4);
    close("one pad, Var x", v, 4e-10);
    // Front pad at its mean, rear pad 50 % fast: the vehicle is 25 % fast, 1e-4 in front-pad
    // units; Var x = (4e-4)²·(4e-10/(4e-4)² + 2e-10/(2e-4)²)/4 (hand-computed).
    let (x, v) = vehicle_pad_deviation([(4e-4, 4e-10, 4e-4), (3e-4, 2e-10, 2e-4)], 4e-4).expect("two readings");
    close("two pads, x", x, 1e-4);
    close("two pads, Var x", v, 3e-10);
    // A reading without a usable group mean is skipped; none at all gives none.
    let (x, _) = vehicle_pad_deviation([(4e-4, 4e-10, 0.0), (3e-4, 2e-10, 2e-4)], 4e-4).expect("one usable");
    close("skipped reading, x", x, 2e-4);
    assert!(vehicle_pad_deviation([(f64::NAN, 1.0, 1.0)], 4e-4).is_none());
}

#[test]
fn the_coupling_matches_numpy_on_the_documented_formulas() {
    let (front_pads, rear_pads, front_rotors) = class_groups();
    let settings = ForecastSettings::default();
    let estimate = estimate_pad_coupling(&[&front_pads, &rear_pads], &front_pads, &front_rotors, &settings).expect("six vehicles");
    // Reference: numpy 2.4 on the same numbers, `tests/data/reference-scripts/vehicle_coupling.py`
    // (x per vehicle as in the pooling docs, then
    // np.cov(x, rotor, ddof=1)[0, 1], np.var(x, ddof=1) − mean Var x, ρ = cov/(τ_x·τ_rotor)):
    // tx 6.342318188170632e-05, rho 0.5589438900451182, slope 0.08812927284027343.
    close("τ_x", estimate.deviation_sd_mm_per_mj, 6.342318188170632e-05);
    close("ρ", estimate.coupling.correlation, 0.5589438900451182);
    close("β", estimate.coupling.slope, 0.08812927284027343);
    assert_eq!(estimate.coupling.vehicles, 6);
    // With the front pads alone, the coupling reads one pad per vehicle and differs.
    let own_only = estimate_pad_coupling(&[&front_pads], &front_pads, &front_rotors, &settings).expect("six vehicles");
    assert!((own_only.coupling.slope - estimate.coupling.slope).abs() > 1e-3, "{own_only:?}");
}

/// A pad history (new 20 mm, minimum 2 mm) on `axle`, fitted at energy 0 and then worn at
/// `rate` mm/MJ, inspected five times 5 000 MJ apart with a ±0.05 mm zig-zag.
fn pad_history(axle_index: u32, rate: f64) -> PartHistory {
    let mut events = vec![replacement(19_000.0, 0.0)];
    for i in 1..=5 {
        let e = 5_000.0 * i as f64;
        let zig = if i % 2 == 0 { 0.05 } else { -0.05 };
        events.push(inspection(19_000.0 + 30.0 * i as f64, e, 22.0 - rate * e + zig));
    }
    PartHistory { axle_index, component: Component::Friction, new_thickness_mm: 22.0, min_thickness_mm: 2.0, events }
}

#[test]
fn a_fast_rear_pad_moves_the_front_rotor() {
    let (front_pads, rear_pads, mut front_rotors) = class_groups();
    let settings = ForecastSettings::default();
    front_rotors.pad_coupling = Some(estimate_pad_coupling(&[&front_pads, &rear_pads], &front_pads, &front_rotors, &settings).expect("coupling").coupling);
    // The front rotor has no reading since fitting: its rate is its prior's.
    let rotor = PartHistory { axle_index: 1, component: Component::Disc, new_thickness_mm: 22.0, min_thickness_mm: 19.0, events: vec![replacement(19_000.0, 0.0)] };
    let energy: Vec<f64> = vec![160.0; 120];
    let front_rotor_rate = |rear_rate: f64| {
        let (front, rear) = (pad_history(1, 4e-4), pad_history(2, rear_rate));
        let parts: Vec<PartData<'_>> = [&front, &rear, &rotor]
            .into_iter()
            .map(|history| PartData { history, daily_energy_mj: &energy, current_cumulative_energy_mj: 26_000.0 })
            .collect();
        let prior_of = |axle: u32, component: Component| match (axle, component) {
            (1, Component::Friction) => Some(&front_pads),
            (2, Component::Friction) => Some(&rear_pads),
            (1, Component::Disc) => Some(&front_rotors),
            _ => None,
        };
        forecast_vehicle(99, &parts, prior_of, 19_200.0, &settings)[2].outlook.wear_rate_mm_per_mj
    };
    // Front pad at its group mean in both cases: an implementation reading only the rotor's
    // own axle gives the same rotor rate whatever the rear pad does.
    let (average, fast) = (front_rotor_rate(2e-4), front_rotor_rate(3e-4));
    assert!(fast > 1.1 * average, "rear pad 50 % fast: front rotor {fast} vs {average}");
    assert!((average / front_rotors.predictive_for(99, &settings).mean_mm_per_mj - 1.0).abs() < 0.05, "average vehicle: {average}");
}
