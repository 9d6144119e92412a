//! The simulator's output obeys the service's rules: plausible trips, the start-of-day
//! convention, determinism, and the vehicle layouts the issue asks for.

use brakeledger_models::domain::BrakeType;
use brakeledger_models::plausibility::{check_trip, TripFacts};
use brakeledger_models::simulator::{simulate, SimConfig, SECONDS_PER_DAY};

#[test]
fn simulated_fleet_is_plausible_deterministic_and_varied() {
    let config = SimConfig { vehicles: 24, ..SimConfig::default() };
    let fleet = simulate(&config);
    assert_eq!(fleet, simulate(&config), "same seed, same fleet");
    assert_ne!(fleet, simulate(&SimConfig { seed: 7, ..config.clone() }));
    let cut_s = fleet.cut_day as f64 * SECONDS_PER_DAY;
    for v in &fleet.vehicles {
        assert_eq!(v.spec.validate(), Ok(()), "{}", v.vehicle_id);
        let mut per_day = std::collections::HashMap::<i64, u32>::new();
        for t in &v.trips {
            let facts = TripFacts {
                start_unix_s: t.start_unix_s,
                end_unix_s: t.end_unix_s,
                distance_m: t.distance_m,
                friction_energy_j: t.friction_energy_j,
                axle_energy_j: t.axle_energy_j.clone(),
                brake_applications: t.brake_applications,
                regen_energy_j: None,
                hot_energy_j: Some(t.hot_energy_j),
            };
            assert_eq!(check_trip(&v.spec, &facts, cut_s), Ok(()), "{}", t.trip_id);
            let hour_start = (t.start_unix_s / 3600.0).rem_euclid(24.0);
            let hour_end = (t.end_unix_s / 3600.0).rem_euclid(24.0);
            assert!(hour_start >= 6.0 && hour_end <= 22.0 && t.end_unix_s > t.start_unix_s, "{}", t.trip_id);
            assert!(t.end_unix_s <= cut_s);
            *per_day.entry((t.start_unix_s / SECONDS_PER_DAY).floor() as i64).or_default() += 1;
        }
        assert!(per_day.values().all(|n| *n <= 3));
        for i in &v.inspections {
            assert!(((i.unix_s / 3600.0).rem_euclid(24.0) - 5.0).abs() < 1e-6 && i.unix_s < cut_s);
        }
        assert_eq!(v.truth.len(), 2 * v.spec.axles.len());
    }
    assert!(fleet.vehicles.iter().any(|v| v.reassigned_day.is_some()));
    assert!(fleet.vehicles.iter().any(|v| v.reassigned_day.is_none()));
    // Some vehicles joined mid-life (no replacement at the start of the records).
    assert!(fleet.vehicles.iter().any(|v| v.replacements.iter().all(|r| r.unix_s > fleet.start_day as f64 * SECONDS_PER_DAY + 6.0 * 3600.0)));
    // A three-axle class with drums on the rear axles.
    assert!(fleet.vehicles.iter().any(|v| v.spec.axles.len() == 3
        && v.spec.axles[0].brake_type == BrakeType::Disc
        && v.spec.axles[1..].iter().all(|a| a.brake_type == BrakeType::Drum)));
    // Weekends are quieter than weekdays across the fleet.
    let mut weekday = 0.0;
    let mut weekend = 0.0;
    for t in fleet.vehicles.iter().flat_map(|v| &v.trips) {
        let dow = ((t.start_unix_s / SECONDS_PER_DAY).floor() as i64 + 3).rem_euclid(7);
        if dow >= 5 { weekend += t.friction_energy_j / 2.0 } else { weekday += t.friction_energy_j / 5.0 }
    }
    assert!(weekend < 0.7 * weekday, "weekend {weekend:e} vs weekday {weekday:e} per day");
}
