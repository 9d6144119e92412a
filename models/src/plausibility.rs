//! Physical limits a trip summary must respect before it is stored.
//!
//! A telematics integration reports, per trip, the friction braking energy after regeneration.
//! No road vehicle can dissipate more in its brakes than it can take in as kinetic energy at
//! each stop plus potential energy on descents. The bound used here is deliberately generous,
//! so that it only refuses values that are physically impossible (unit slips such as kJ sent
//! as J, counters that wrapped, sign errors), never an unusual but real trip:
//!
//! ```text
//! E_max = m_eff · ( f_rot · ½ · v_top² · max(n_applications, 1)  +  g · grade · d )
//! m_eff = 1.5 · mass_kg        (payload above the registered operating mass)
//! f_rot = 1.10                 (rotating-mass factor; heavy vehicles sit near 1.03-1.10)
//! v_top = 44.4 m/s (160 km/h)  (a top speed no heavy vehicle brakes from routinely)
//! grade = 0.10                 (10 % average descent over the whole distance d)
//! ```
//!
//! Kinetic energy ½·m·v² is textbook mechanics; the factors are generous bounds chosen here
//! (common practice, no source): rotating-mass factors of a few percent for trucks and buses,
//! and sustained grades above 10 % are rare on public roads.
//!
//! Other limits: a trip lasts at most 24 h, ends no more than 5 minutes in the future, and its
//! average speed is at most 200 km/h. Brake applications are at most one per second of the
//! trip plus ten (a generous bound, common practice, no source: even stop-and-go city duty
//! applies the brakes every several seconds), so a wrapped counter cannot inflate the energy
//! bound above.

use crate::domain::{FieldViolation, VehicleSpec};

/// Gravitational acceleration, m/s² (standard gravity, ISO 80000-3).
pub const STANDARD_GRAVITY_M_PER_S2: f64 = 9.806_65;
/// Factor on the declared mass for payload above the operating mass.
pub const MASS_ALLOWANCE: f64 = 1.5;
/// Rotating-mass factor used in the bound.
pub const ROTATING_MASS_FACTOR_BOUND: f64 = 1.10;
/// Top speed a vehicle is assumed to brake from at each application, m/s (160 km/h).
pub const TOP_SPEED_M_PER_S: f64 = 160.0 / 3.6;
/// Average descent grade over the whole trip distance (fraction).
pub const MAX_AVERAGE_GRADE: f64 = 0.10;
/// Longest trip, s (24 h).
pub const MAX_TRIP_SECONDS: f64 = 24.0 * 3600.0;
/// How far in the future a trip may end, s (5 minutes: clock skew of the integration).
pub const MAX_FUTURE_SECONDS: f64 = 300.0;
/// Highest average speed over a trip, m/s (200 km/h).
pub const MAX_AVERAGE_SPEED_M_PER_S: f64 = 200.0 / 3.6;
/// Brake applications per second of trip that the bound allows (plus [`EXTRA_APPLICATIONS`]).
pub const MAX_APPLICATIONS_PER_SECOND: f64 = 1.0;
/// Applications allowed on top of the per-second rate (very short trips).
pub const EXTRA_APPLICATIONS: f64 = 10.0;
/// Relative tolerance between the per-axle split's sum and the trip total (1 %).
pub const AXLE_SPLIT_TOLERANCE: f64 = 0.01;

/// The facts of a trip summary that the limits apply to.
#[derive(Debug, Clone, PartialEq)]
pub struct TripFacts {
    /// Start, seconds since the Unix epoch.
    pub start_unix_s: f64,
    /// End, seconds since the Unix epoch.
    pub end_unix_s: f64,
    /// Distance driven, m.
    pub distance_m: f64,
    /// Friction braking energy after regeneration, J.
    pub friction_energy_j: f64,
    /// Optional per-axle split, J (empty when not given).
    pub axle_energy_j: Vec<f64>,
    /// Brake applications.
    pub brake_applications: u32,
    /// Regenerated energy, J, when reported.
    pub regen_energy_j: Option<f64>,
    /// Energy of hot stops, J, when reported.
    pub hot_energy_j: Option<f64>,
}

/// The largest friction energy, J, a vehicle of `mass_kg` can dissipate over `distance_m` with
/// `brake_applications` stops (see the module docs for the formula).
pub fn max_friction_energy_j(mass_kg: f64, distance_m: f64, brake_applications: u32) -> f64 {
    let m_eff = MASS_ALLOWANCE * mass_kg;
    let stops = f64::from(brake_applications.max(1));
    let kinetic = ROTATING_MASS_FACTOR_BOUND * 0.5 * TOP_SPEED_M_PER_S * TOP_SPEED_M_PER_S * stops;
    let potential = STANDARD_GRAVITY_M_PER_S2 * MAX_AVERAGE_GRADE * distance_m.max(0.0);
    m_eff * (kinetic + potential)
}

fn non_negative(out: &mut Vec<FieldViolation>, field: &str, value: f64) -> bool {
    if !value.is_finite() {
        out.push(FieldViolation::new(field, "must be a finite number"));
        false
    } else if value < 0.0 {
        out.push(FieldViolation::new(field, "must not be negative"));
        false
    } else {
        true
    }
}

/// Checks a trip against the vehicle and the physical limits; `now_unix_s` is the server's
/// clock. Returns every problem found, with field names of the `TripSummary` message.
pub fn check_trip(spec: &VehicleSpec, trip: &TripFacts, now_unix_s: f64) -> Result<(), Vec<FieldViolation>> {
    let mut out = Vec::new();
    let duration_s = trip.end_unix_s - trip.start_unix_s;
    if duration_s <= 0.0 {
        out.push(FieldViolation::new("end_time", "must be after start_time"));
    } else if duration_s > MAX_TRIP_SECONDS {
        out.push(FieldViolation::new("end_time", "a trip may last at most 24 hours"));
    }
    if trip.end_unix_s > now_unix_s + MAX_FUTURE_SECONDS {
        out.push(FieldViolation::new("end_time", "is more than 5 minutes in the future"));
    }
    let applications_bound = duration_s.max(0.0) * MAX_APPLICATIONS_PER_SECOND + EXTRA_APPLICATIONS;
    let applications_ok = f64::from(trip.brake_applications) <= applications_bound;
    if !applications_ok {
        out.push(FieldViolation::new(
            "brake_applications",
            format!("{} applications in {:.0} s is more than one per second (limit {:.0})", trip.brake_applications, duration_s.max(0.0), applications_bound.floor()),
        ));
    }
    let distance_ok = non_negative(&mut out, "distance_m", trip.distance_m);
    if distance_ok && duration_s > 0.0 && trip.distance_m / duration_s > MAX_AVERAGE_SPEED_M_PER_S {
        out.push(FieldViolation::new("distance_m", "implies an average speed above 200 km/h"));
    }
    let energy_ok = non_negative(&mut out, "friction_energy_j", trip.friction_energy_j);
    if energy_ok && distance_ok && applications_ok {
        let bound = max_friction_energy_j(spec.mass_kg, trip.distance_m, trip.brake_applications);
        if trip.friction_energy_j > bound {
            out.push(FieldViolation::new(
                "friction_energy_j",
                format!(
                    "{:.0} J is more than a {:.0} kg vehicle can dissipate over {:.0} m with {} brake applications (limit {:.0} J)",
                    trip.friction_energy_j, spec.mass_kg, trip.distance_m, trip.brake_applications, bound
                ),
            ));
        }
    }
    if !trip.axle_energy_j.is_empty() {
        if trip.axle_energy_j.len() != spec.axles.len() {
            out.push(FieldViolation::new(
                "axle_energy_j",
                format!("has {} values but the vehicle has {} axles", trip.axle_energy_j.len(), spec.axles.len()),
            ));
        }
        let mut all_ok = true;
        for (i, value) in trip.axle_energy_j.iter().enumerate() {
            all_ok &= non_negative(&mut out, &format!("axle_energy_j[{i}]"), *value);
        }
        if all_ok && energy_ok {
            let sum: f64 = trip.axle_energy_j.iter().sum();
            let tolerance = AXLE_SPLIT_TOLERANCE * trip.friction_energy_j.max(1.0);
            if (sum - trip.friction_energy_j).abs() > tolerance {
                out.push(FieldViolation::new(
                    "axle_energy_j",
                    format!("sums to {sum:.0} J, more than 1% away from friction_energy_j ({:.0} J)", trip.friction_energy_j),
                ));
            }
        }
    }
    if let Some(regen) = trip.regen_energy_j {
        non_negative(&mut out, "regen_energy_j", regen);
    }
    if let Some(hot) = trip.hot_energy_j {
        if non_negative(&mut out, "hot_energy_j", hot) && energy_ok && hot > trip.friction_energy_j * (1.0 + 1e-9) {
            out.push(FieldViolation::new("hot_energy_j", "must not exceed friction_energy_j"));
        }
    }
    if out.is_empty() {
        Ok(())
    } else {
        Err(out)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::domain::{AxleBrake, BrakeType};

    fn car() -> VehicleSpec {
        let axle = |i, share| AxleBrake {
            axle_index: i,
            brake_type: BrakeType::Disc,
            energy_share: share,
            friction_new_mm: 11.0,
            friction_min_mm: 2.0,
            disc_new_mm: 28.0,
            disc_min_mm: 25.0,
        };
        VehicleSpec { vehicle_class: "car".into(), mass_kg: 1500.0, axles: vec![axle(1, 0.7), axle(2, 0.3)] }
    }

    fn trip(energy_j: f64) -> TripFacts {
        TripFacts {
            start_unix_s: 1_000_000.0,
            end_unix_s: 1_003_600.0,
            distance_m: 50_000.0,
            friction_energy_j: energy_j,
            axle_energy_j: vec![],
            brake_applications: 20,
            regen_energy_j: None,
            hot_energy_j: None,
        }
    }

    /// Textbook kinetic energy: a 1500 kg car stopping from 100 km/h dissipates
    /// ½·1500·(27.78 m/s)² = 578.7 kJ. The bound for one application must exceed that even
    /// without the allowances (it brakes from 160 km/h).
    #[test]
    fn one_stop_bound_exceeds_a_real_stop_from_100_kmh() {
        let stop_j = 578_703.7;
        let bound = max_friction_energy_j(1500.0, 0.0, 1);
        assert!(bound > stop_j * 2.0, "bound {bound} vs one stop {stop_j}");
        assert!(bound < stop_j * 10.0, "bound {bound} should not be absurdly loose");
    }

    #[test]
    fn plausible_trip_passes_and_kilojoule_slip_is_caught() {
        let now = 2_000_000.0;
        assert_eq!(check_trip(&car(), &trip(8.0e6), now), Ok(()));
        let errors = check_trip(&car(), &trip(8.0e9), now).expect_err("too much energy");
        assert_eq!(errors[0].field, "friction_energy_j");
    }

    #[test]
    fn split_must_match_axles_and_total() {
        let now = 2_000_000.0;
        let mut t = trip(1.0e6);
        t.axle_energy_j = vec![7.0e5, 2.0e5];
        let errors = check_trip(&car(), &t, now).expect_err("sum off by 10%");
        assert_eq!(errors[0].field, "axle_energy_j");
        t.axle_energy_j = vec![7.0e5, 2.95e5];
        assert_eq!(check_trip(&car(), &t, now), Ok(()));
        t.axle_energy_j = vec![1.0e6];
        assert!(check_trip(&car(), &t, now).is_err());
    }

    #[test]
    fn times_are_checked() {
        let mut t = trip(1.0e6);
        t.end_unix_s = t.start_unix_s - 1.0;
        assert_eq!(check_trip(&car(), &t, 2_000_000.0).expect_err("reversed")[0].field, "end_time");
        let t = trip(1.0e6);
        assert!(check_trip(&car(), &t, t.end_unix_s - 301.0).is_err(), "ends > 5 min in the future");
        assert!(check_trip(&car(), &t, t.end_unix_s - 299.0).is_ok());
    }

    #[test]
    fn a_wrapped_application_counter_is_refused_and_does_not_lift_the_energy_bound() {
        // The case seen from outside: a 1-second trip, 4 billion applications, 1e16 J.
        let mut wrapped = trip(1e16);
        wrapped.end_unix_s = wrapped.start_unix_s + 1.0;
        wrapped.brake_applications = 4_000_000_000;
        let violations = check_trip(&car(), &wrapped, 2_000_000.0).unwrap_err();
        assert!(violations.iter().any(|v| v.field == "brake_applications"), "{violations:?}");
        // An hour of stop-and-go with a stop every 10 s stays acceptable.
        let mut busy = trip(1.0e6);
        busy.brake_applications = 360;
        assert!(check_trip(&car(), &busy, 2_000_000.0).is_ok());
    }
}
