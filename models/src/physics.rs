//! Braking energy of a trip from a speed trace, its split between axles, and the single-stop
//! thermal estimates used to flag hot braking.
//!
//! # Energy balance (textbook mechanics)
//! Over each interval of the trace (speeds v₀ → v₁, elevation change Δh, distance
//! Δs = ½(v₀+v₁)Δt) the energy the brakes and the regenerative drive must absorb is
//!
//! ```text
//! E = ½·f·m·(v₀² − v₁²) − m·g·Δh − m·g·c_rr·Δs − ½·ρ·CdA·v̄²·Δs,   v̄² = ½(v₀² + v₁²)
//! ```
//! with `f` the rotating-mass factor, `c_rr` the rolling-resistance coefficient, `ρ·CdA` the
//! air density times drag area (small-grade approximation cos θ ≈ 1). When `E > 0` the
//! vehicle is braking. The braking energy goes first to regeneration (up to `P_regen·Δt`),
//! then to a retarder or engine brake (up to `P_retarder·Δt`), and the friction brakes take
//! the rest: friction = braking − regeneration − retarder. (Regeneration before the retarder
//! is how blended brake controllers usually rank them: common practice, no source.) A brake
//! application is a run of consecutive intervals in which the friction brakes work.
//!
//! # Axle split: weight transfer
//! The configured shares are the split at zero deceleration. Under a braking deceleration the
//! load moves to the front axle: with `h` the centre-of-gravity height and `L` the wheelbase,
//! the dynamic axle loads are `W_front = W_front,static + m·D·h/L` and
//! `W_rear = W_rear,static − m·D·h/L` (Gillespie, *Fundamentals of Vehicle Dynamics*, SAE 1992,
//! ch. 3; the same relation gives the dynamic axle loads of UN ECE Regulation No. 13, Annex 10).
//! On a grade the component of gravity along the road adds to the inertial force, so the
//! deceleration that loads the front axle is `D = (v₀ − v₁)/Δt − g·Δh/Δs` (a steady descent
//! loads the front axle too). With an ideal force distribution each axle brakes in proportion
//! to its load, so the front share rises by `D·h/(g·L)` and the other axles give it up in
//! proportion to their static shares ([`dynamic_axle_shares`]); each interval's friction energy
//! is split with the shares of its own deceleration. `h = 0` keeps the static split.
//!
//! # Heat
//! The fraction of friction heat entering the rotor is the thermal-effusivity ratio
//! `e_r/(e_r + e_p)`, `e = √(ρ·c·k)` (Limpert, *Brake Design and Safety*, 3rd ed., SAE 2011,
//! ch. 3), and a single stop raises the rotor's bulk temperature by `ΔT = share·E/(m·c)`
//! (no cooling during the stop). Stops whose rise passes a threshold count as hot.

use crate::plausibility::STANDARD_GRAVITY_M_PER_S2;

/// One sample of a speed trace.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TracePoint {
    /// Time, s (any origin, increasing).
    pub time_s: f64,
    /// Speed, m/s.
    pub speed_m_per_s: f64,
    /// Elevation, m, when known.
    pub elevation_m: Option<f64>,
}

/// What the energy balance needs to know about a vehicle.
#[derive(Debug, Clone, PartialEq)]
pub struct BrakingVehicle {
    /// Mass, kg.
    pub mass_kg: f64,
    /// Rotating-mass factor (≥ 1; about 1.03-1.10 for trucks and buses).
    pub rotating_mass_factor: f64,
    /// Rolling-resistance coefficient (dimensionless).
    pub rolling_resistance: f64,
    /// Drag coefficient times frontal area, m².
    pub drag_area_m2: f64,
    /// Air density, kg/m³.
    pub air_density_kg_per_m3: f64,
    /// Largest regenerative braking power, W (0 without regeneration).
    pub regen_max_power_w: f64,
    /// Largest power of a retarder or engine brake, W (0 without one). Used after
    /// regeneration and before the friction brakes on every braking interval.
    pub retarder_max_power_w: f64,
    /// Share of friction energy per axle at zero deceleration, front first (sums to 1).
    pub axle_shares: Vec<f64>,
    /// Height of the centre of gravity above the road, m (0: no weight transfer).
    pub cg_height_m: f64,
    /// Wheelbase, m: front axle to the rear axle (or the centre of the rear axle group).
    pub wheelbase_m: f64,
    /// Mass of one rotor (or drum) per axle, kg; two per axle.
    pub rotor_mass_kg: Vec<f64>,
    /// Specific heat of the rotor material, J/(kg·K).
    pub rotor_specific_heat_j_per_kg_k: f64,
    /// Fraction of friction heat entering the rotor (see [`rotor_heat_share`]).
    pub rotor_heat_share: f64,
    /// A stop is hot when its bulk rotor temperature rise on any axle exceeds this, K.
    pub hot_rise_threshold_k: f64,
}

/// Energy summary of a trip.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct TripEnergy {
    /// Distance, m.
    pub distance_m: f64,
    /// Friction braking energy, J.
    pub friction_energy_j: f64,
    /// Friction energy per axle, J.
    pub axle_energy_j: Vec<f64>,
    /// Regenerated energy, J.
    pub regen_energy_j: f64,
    /// Energy taken by the retarder or engine brake, J (not part of `friction_energy_j`).
    pub retarder_energy_j: f64,
    /// Brake applications.
    pub brake_applications: u32,
    /// Friction energy of hot stops, J.
    pub hot_energy_j: f64,
}

/// Kinetic energy ½·f·m·v², J.
pub fn kinetic_energy_j(mass_kg: f64, rotating_mass_factor: f64, speed_m_per_s: f64) -> f64 {
    0.5 * rotating_mass_factor * mass_kg * speed_m_per_s * speed_m_per_s
}

/// Thermal effusivity √(ρ·c·k), W·s^½/(m²·K).
pub fn effusivity(density_kg_per_m3: f64, specific_heat_j_per_kg_k: f64, conductivity_w_per_m_k: f64) -> f64 {
    (density_kg_per_m3 * specific_heat_j_per_kg_k * conductivity_w_per_m_k).max(0.0).sqrt()
}

/// Fraction of friction heat entering the rotor: `e_rotor/(e_rotor + e_pad)`.
pub fn rotor_heat_share(rotor_effusivity: f64, pad_effusivity: f64) -> f64 {
    let total = rotor_effusivity + pad_effusivity;
    if total > 0.0 {
        rotor_effusivity / total
    } else {
        0.5
    }
}

/// Bulk temperature rise of a rotor absorbing `share` of `energy_j`: `share·E/(m·c)`, K.
pub fn bulk_temperature_rise_k(share: f64, energy_j: f64, rotor_mass_kg: f64, specific_heat_j_per_kg_k: f64) -> f64 {
    let heat_capacity = rotor_mass_kg * specific_heat_j_per_kg_k;
    if heat_capacity > 0.0 {
        share * energy_j / heat_capacity
    } else {
        f64::INFINITY
    }
}

/// Axle shares under deceleration (see the module docs). `static_shares` front first;
/// returns shares summing to 1.
pub fn dynamic_axle_shares(static_shares: &[f64], deceleration_m_per_s2: f64, cg_height_m: f64, wheelbase_m: f64) -> Vec<f64> {
    let n = static_shares.len();
    if n < 2 || wheelbase_m.is_nan() || wheelbase_m <= 0.0 {
        return static_shares.to_vec();
    }
    let transfer = (deceleration_m_per_s2.max(0.0) * cg_height_m.max(0.0) / (STANDARD_GRAVITY_M_PER_S2 * wheelbase_m)).max(0.0);
    let rear_total: f64 = static_shares[1..].iter().sum();
    let transfer = transfer.min(rear_total);
    let mut out = static_shares.to_vec();
    out[0] += transfer;
    if rear_total > 0.0 {
        for share in &mut out[1..] {
            *share = (*share - transfer * *share / rear_total).max(0.0);
        }
    }
    let total: f64 = out.iter().sum();
    if total > 0.0 {
        out.iter_mut().for_each(|s| *s /= total);
    }
    out
}

/// The deceleration that transfers load to the front axle over one interval, m/s²: the
/// speed lost per second plus the component of gravity along a descent (see the module docs),
/// never negative.
pub fn loading_deceleration_m_per_s2(v0_m_per_s: f64, v1_m_per_s: f64, dt_s: f64, dh_m: f64, ds_m: f64) -> f64 {
    if !(dt_s > 0.0) {
        return 0.0;
    }
    let grade = if ds_m > 0.0 { -dh_m / ds_m } else { 0.0 };
    ((v0_m_per_s - v1_m_per_s) / dt_s + STANDARD_GRAVITY_M_PER_S2 * grade).max(0.0)
}

/// Integrates a speed trace into a [`TripEnergy`] (see the module docs). Intervals with
/// non-finite values or non-increasing time are skipped.
pub fn summarise_trace(trace: &[TracePoint], vehicle: &BrakingVehicle) -> TripEnergy {
    let g = STANDARD_GRAVITY_M_PER_S2;
    let m = vehicle.mass_kg;
    let axles = vehicle.axle_shares.len();
    let mut out = TripEnergy {
        distance_m: 0.0,
        friction_energy_j: 0.0,
        axle_energy_j: vec![0.0; axles],
        regen_energy_j: 0.0,
        retarder_energy_j: 0.0,
        brake_applications: 0,
        hot_energy_j: 0.0,
    };
    let mut in_application = false;
    // Friction energy of the current application per axle, J.
    let mut application_j = vec![0.0; axles];
    let close_application = |axle_j: &[f64], out: &mut TripEnergy| {
        let hot = axle_j.iter().enumerate().any(|(i, energy_j)| {
            let rotor = vehicle.rotor_mass_kg.get(i).copied().unwrap_or(0.0);
            // Two rotors (or drums) per axle share the axle's energy.
            bulk_temperature_rise_k(vehicle.rotor_heat_share, energy_j / 2.0, rotor, vehicle.rotor_specific_heat_j_per_kg_k)
                > vehicle.hot_rise_threshold_k
        });
        if hot {
            out.hot_energy_j += axle_j.iter().sum::<f64>();
        }
    };
    for pair in trace.windows(2) {
        let (a, b) = (pair[0], pair[1]);
        let dt = b.time_s - a.time_s;
        if !(dt > 0.0 && a.speed_m_per_s.is_finite() && b.speed_m_per_s.is_finite()) {
            continue;
        }
        let (v0, v1) = (a.speed_m_per_s.max(0.0), b.speed_m_per_s.max(0.0));
        let ds = 0.5 * (v0 + v1) * dt;
        let dh = match (a.elevation_m, b.elevation_m) {
            (Some(h0), Some(h1)) if h0.is_finite() && h1.is_finite() => h1 - h0,
            _ => 0.0,
        };
        out.distance_m += ds;
        let v2 = 0.5 * (v0 * v0 + v1 * v1);
        let absorbed = kinetic_energy_j(m, vehicle.rotating_mass_factor, v0) - kinetic_energy_j(m, vehicle.rotating_mass_factor, v1)
            - m * g * dh
            - m * g * vehicle.rolling_resistance * ds
            - 0.5 * vehicle.air_density_kg_per_m3 * vehicle.drag_area_m2 * v2 * ds;
        if absorbed > 0.0 {
            let regen = absorbed.min(vehicle.regen_max_power_w.max(0.0) * dt);
            let retarder = (absorbed - regen).min(vehicle.retarder_max_power_w.max(0.0) * dt);
            let friction = absorbed - regen - retarder;
            out.regen_energy_j += regen;
            out.retarder_energy_j += retarder;
            out.friction_energy_j += friction;
            let deceleration = loading_deceleration_m_per_s2(v0, v1, dt, dh, ds);
            let shares = dynamic_axle_shares(&vehicle.axle_shares, deceleration, vehicle.cg_height_m, vehicle.wheelbase_m);
            if friction > 0.0 {
                if !in_application {
                    in_application = true;
                    out.brake_applications += 1;
                    application_j.iter_mut().for_each(|e| *e = 0.0);
                }
                for ((total, current), share) in out.axle_energy_j.iter_mut().zip(application_j.iter_mut()).zip(&shares) {
                    *total += share * friction;
                    *current += share * friction;
                }
                continue;
            }
        }
        if in_application {
            close_application(&application_j, &mut out);
            in_application = false;
        }
    }
    if in_application {
        close_application(&application_j, &mut out);
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    fn car() -> BrakingVehicle {
        BrakingVehicle {
            mass_kg: 1500.0,
            rotating_mass_factor: 1.0,
            rolling_resistance: 0.0,
            drag_area_m2: 0.0,
            air_density_kg_per_m3: 1.2,
            regen_max_power_w: 0.0,
            retarder_max_power_w: 0.0,
            axle_shares: vec![0.7, 0.3],
            cg_height_m: 0.0,
            wheelbase_m: 2.7,
            rotor_mass_kg: vec![7.0, 5.0],
            rotor_specific_heat_j_per_kg_k: 490.0,
            rotor_heat_share: 0.9,
            hot_rise_threshold_k: 100.0,
        }
    }

    fn stop(from_m_per_s: f64, seconds: usize) -> Vec<TracePoint> {
        (0..=seconds)
            .map(|i| TracePoint {
                time_s: i as f64,
                speed_m_per_s: from_m_per_s * (1.0 - i as f64 / seconds as f64),
                elevation_m: None,
            })
            .collect()
    }

    /// Textbook kinetic energy: a 1500 kg car stopping from 100 km/h dissipates
    /// ½·m·v² = ½·1500·(27.78 m/s)² = 578.7 kJ before the rotating-mass factor.
    #[test]
    fn stop_from_100_kmh_dissipates_textbook_kinetic_energy() {
        let trip = summarise_trace(&stop(100.0 / 3.6, 10), &car());
        assert!((trip.friction_energy_j - 578_703.7).abs() < 1.0, "{}", trip.friction_energy_j);
        assert_eq!(trip.brake_applications, 1);
        assert!((trip.axle_energy_j[0] - 0.7 * trip.friction_energy_j).abs() < 1e-6);
        // With a rotating-mass factor of 1.05 the energy scales by the factor.
        let mut heavy = car();
        heavy.rotating_mass_factor = 1.05;
        let trip = summarise_trace(&stop(100.0 / 3.6, 10), &heavy);
        assert!((trip.friction_energy_j - 1.05 * 578_703.7).abs() < 1.0);
    }

    /// Bulk rotor temperature rise against the definitions of the units of heat in a published
    /// standard: NIST Special Publication 811 (2008), Appendix B, gives 1 Btu_IT =
    /// 1.055 056 × 10³ J and 1 Btu_IT/(lb·°F) = 4.1868 × 10³ J/(kg·K), and 1 lb = 0.453 592 37 kg
    /// exactly (factors recalled from memory of that table). By the definition of the British
    /// thermal unit, Q Btu into W lb of a material of specific heat c Btu/(lb·°F) raises it by
    /// Q/(W·c) °F, whatever the SI route: 469.7 Btu (the energy of a 3000 lb car stopping from
    /// 60 mph) into four 10 lb cast-iron rotors of c = 0.130 Btu/(lb·°F) is 469.7/5.2 = 90.33 °F,
    /// and 1 Btu into 1 lb at 1 Btu/(lb·°F) (water, by definition) is 1 °F = 5/9 K. The car,
    /// the rotors and their specific heat are illustrative figures; the expected rises follow
    /// from the unit definitions alone.
    #[test]
    fn rotor_temperature_rise_of_a_single_stop() {
        let rise = bulk_temperature_rise_k(1.0, 469.7 * 1055.056, 4.0 * 10.0 * 0.453_592_37, 0.130 * 4186.8);
        assert!((rise * 9.0 / 5.0 - 469.7 / 5.2).abs() < 1e-3, "{} °F", rise * 9.0 / 5.0);
        let water = bulk_temperature_rise_k(1.0, 1055.056, 0.453_592_37, 4186.8);
        assert!((water - 5.0 / 9.0).abs() < 1e-3, "{water} K");
        // The heat share into the rotor scales the rise in proportion.
        let shared = bulk_temperature_rise_k(0.9, 469.7 * 1055.056, 4.0 * 10.0 * 0.453_592_37, 0.130 * 4186.8);
        assert!((shared / rise - 0.9).abs() < 1e-12);
        // The stop is not hot at a 100 K threshold but is at 50 K.
        let mut v = car();
        assert_eq!(summarise_trace(&stop(100.0 / 3.6, 10), &v).hot_energy_j, 0.0);
        v.hot_rise_threshold_k = 50.0;
        let trip = summarise_trace(&stop(100.0 / 3.6, 10), &v);
        assert!((trip.hot_energy_j - trip.friction_energy_j).abs() < 1e-6);
    }

    /// Heat partition by effusivity (Limpert, Brake Design and Safety, ch. 3). Grey cast iron
    /// ρ ≈ 7200 kg/m³, c ≈ 490 J/(kg·K), k ≈ 50 W/(m·K); an organic pad ρ ≈ 2000 kg/m³,
    /// c ≈ 1000 J/(kg·K), k ≈ 1 W/(m·K) (typical handbook values, recalled from memory). The
    /// rotor then takes about 90 % of the heat, the figure usually quoted for disc brakes
    /// (value recalled from memory).
    #[test]
    fn heat_partition_by_effusivity() {
        let rotor = effusivity(7200.0, 490.0, 50.0);
        let pad = effusivity(2000.0, 1000.0, 1.0);
        assert!((rotor - 13_281.6).abs() < 0.1);
        let share = rotor_heat_share(rotor, pad);
        assert!((share - 13_281.6 / (13_281.6 + 1_414.2)).abs() < 1e-4);
        assert!(share > 0.88 && share < 0.92, "{share}");
    }

    /// A long descent at constant speed: 40 t down 500 m over 8 km at 60 km/h. Potential energy
    /// m·g·Δh = 196.1 MJ dominates; rolling resistance (c_rr 0.006) takes m·g·c_rr·s = 18.8 MJ
    /// and drag (ρ 1.2 kg/m³, CdA 6 m²) ½·ρ·CdA·v²·s = 8.0 MJ (textbook road-load formulas;
    /// the coefficients are typical heavy-truck values, common practice, no source).
    #[test]
    fn long_descent_subtracts_rolling_and_drag_losses() {
        let v = 60.0 / 3.6;
        let seconds = 8000.0 / v;
        let steps = 480;
        let trace: Vec<TracePoint> = (0..=steps)
            .map(|i| {
                let t = seconds * i as f64 / steps as f64;
                TracePoint { time_s: t, speed_m_per_s: v, elevation_m: Some(500.0 * (1.0 - t / seconds)) }
            })
            .collect();
        let truck = BrakingVehicle {
            mass_kg: 40_000.0,
            rotating_mass_factor: 1.05,
            rolling_resistance: 0.006,
            drag_area_m2: 6.0,
            air_density_kg_per_m3: 1.2,
            regen_max_power_w: 0.0,
            retarder_max_power_w: 0.0,
            axle_shares: vec![0.4, 0.3, 0.3],
            cg_height_m: 1.5,
            wheelbase_m: 5.0,
            rotor_mass_kg: vec![35.0, 35.0, 35.0],
            rotor_specific_heat_j_per_kg_k: 490.0,
            rotor_heat_share: 0.9,
            hot_rise_threshold_k: 150.0,
        };
        let trip = summarise_trace(&trace, &truck);
        let g: f64 = 9.806_65;
        let potential: f64 = 40_000.0 * g * 500.0;
        let rolling = 40_000.0 * g * 0.006 * 8000.0;
        let drag = 0.5 * 1.2 * 6.0 * v * v * 8000.0;
        assert!((potential - 196.133e6).abs() < 1e3);
        assert!((trip.friction_energy_j - (potential - rolling - drag)).abs() < 1e-6 * potential);
        assert!((trip.distance_m - 8000.0).abs() < 1e-6);
        assert_eq!(trip.brake_applications, 1, "one continuous application");
        // The whole descent is one long application, far above the threshold: all hot.
        assert!((trip.hot_energy_j - trip.friction_energy_j).abs() < 1.0);
        // A steady descent loads the front axle as braking does: the grade's share of gravity,
        // g·Δh/Δs, is the loading deceleration, so the front share rises by (Δh/Δs)·h/L =
        // (500/8000)·1.5/5 = 0.01875 (g cancels), and the two rear axles give it up equally.
        let front = trip.axle_energy_j[0] / trip.friction_energy_j;
        assert!((front - 0.41875).abs() < 1e-9, "{front}");
        assert!((trip.axle_energy_j[1] - trip.axle_energy_j[2]).abs() < 1e-6 * trip.friction_energy_j);
    }

    #[test]
    fn regeneration_takes_its_power_limit_first_and_applications_are_counted() {
        let mut v = car();
        v.regen_max_power_w = 20_000.0;
        let mut trace = stop(100.0 / 3.6, 10);
        // Accelerate again and stop a second time.
        for i in 1..=10 {
            trace.push(TracePoint { time_s: 10.0 + i as f64, speed_m_per_s: 2.0 * i as f64, elevation_m: None });
        }
        let last = trace.last().expect("point").time_s;
        for i in 1..=10 {
            trace.push(TracePoint { time_s: last + i as f64, speed_m_per_s: 20.0 - 2.0 * i as f64, elevation_m: None });
        }
        let trip = summarise_trace(&trace, &v);
        assert_eq!(trip.brake_applications, 2);
        // Regeneration never exceeds its power limit over the 20 s of braking.
        assert!(trip.regen_energy_j <= 20_000.0 * 20.0 + 1e-6 && trip.regen_energy_j > 0.0);
        let total = 578_703.7 + 0.5 * 1500.0 * 400.0;
        assert!((trip.friction_energy_j + trip.regen_energy_j - total).abs() < 1.0);
    }

    /// Weight transfer against the dynamic axle load of a published standard: UN ECE
    /// Regulation No. 13-H (braking of passenger cars), Annex 5, writes the front axle load
    /// under a braking rate `z` as `T₁ = P₁ + z·P·h/E` (`P` the vehicle's mass, `P₁` its static
    /// front axle load, `h` the height of the centre of gravity, `E` the wheelbase; the same
    /// relation as Gillespie, *Fundamentals of Vehicle Dynamics*, SAE 1992, ch. 3; both recalled
    /// from memory). For a 1500 kg vehicle with 55 % of its mass on the front axle, h = 520 mm,
    /// E = 2700 mm, z = 0.9: 0.9·1500·0.52/2.7 = 260.0 kg moves to the front, which carries
    /// 825 + 260 = 1085 kg, a share of 0.7233 (evaluated by hand).
    #[test]
    fn dynamic_split_moves_share_to_the_front() {
        let shares = dynamic_axle_shares(&[0.55, 0.45], 0.9 * 9.806_65, 0.52, 2.7);
        let transferred_kg = (shares[0] - 0.55) * 1500.0;
        assert!((transferred_kg - 260.0).abs() < 0.5, "{transferred_kg} kg");
        assert!((shares[0] + shares[1] - 1.0).abs() < 1e-12, "{shares:?}");
        let three = dynamic_axle_shares(&[0.4, 0.3, 0.3], 0.3 * 9.806_65, 1.0, 5.0);
        assert!((three[0] - 0.46).abs() < 1e-12);
        assert!((three[1] - three[2]).abs() < 1e-12);
        assert!((three.iter().sum::<f64>() - 1.0).abs() < 1e-12);
        assert_eq!(dynamic_axle_shares(&[0.6, 0.4], 0.0, 0.6, 3.0), vec![0.6, 0.4]);
    }

    /// Dynamic axle loads under braking, from the handbook relation W_f = W_f,static + m·D·h/L
    /// (Gillespie, Fundamentals of Vehicle Dynamics, SAE 1992, ch. 3; recalled from memory, as
    /// is its use for the dynamic axle loads of UN ECE Regulation No. 13, Annex 10). No
    /// published numeric example was at hand, so the figures are evaluated by hand here: a
    /// 1500 kg car, wheelbase 2.7 m, centre of gravity 0.55 m high, 60 % of its weight on the
    /// front axle at rest, braking at 0.8 g. Static front load 0.6·1500·9.80665 = 8 826.0 N;
    /// transfer 1500·0.8·9.80665·0.55/2.7 = 2 397.2 N; front 11 223.2 N of 14 710.0 N = 76.30 %.
    /// The rear axle is unloaded (share 0) at D = g·0.4·L/h = 1.964 g: the tipping limit.
    #[test]
    fn dynamic_axle_loads_of_a_braking_car() {
        let g = 9.806_65;
        let shares = dynamic_axle_shares(&[0.6, 0.4], 0.8 * g, 0.55, 2.7);
        let weight_n = 1500.0 * g;
        assert!((shares[0] * weight_n - 11_223.2).abs() < 0.1, "{}", shares[0] * weight_n);
        assert!((shares[1] * weight_n - (14_710.0 - 11_223.2)).abs() < 0.1);
        let tipping = dynamic_axle_shares(&[0.6, 0.4], 0.4 * 2.7 / 0.55 * g, 0.55, 2.7);
        assert!(tipping[1].abs() < 1e-12 && (tipping[0] - 1.0).abs() < 1e-12, "{tipping:?}");
        // Beyond the tipping limit the rear share stays at 0, never negative.
        let beyond = dynamic_axle_shares(&[0.6, 0.4], 3.0 * g, 0.55, 2.7);
        assert!(beyond[1] >= 0.0 && (beyond[0] - 1.0).abs() < 1e-12);
    }

    /// The split of a trace follows each interval's own deceleration, not the stop's average:
    /// a 10 t vehicle (f = 1, no road losses) stops from 20 m/s, 4 s at 3 m/s² (to 8 m/s) then
    /// 8 s at 1 m/s². Kinetic energy ½·m·v² (Halliday, Resnick & Walker, Fundamentals of
    /// Physics, ch. 7): phase one ½·10 000·(20² − 8²) = 1.68 MJ, phase two ½·10 000·8² =
    /// 0.32 MJ. With h = 1 m, L = 4 m and a static front share of 0.6 the front shares are
    /// 0.6 + 3/(4g) = 0.676479 and 0.6 + 1/(4g) = 0.625493, so the front axle takes
    /// 1.68·0.676479 + 0.32·0.625493 = 1.336642 MJ (the stop's mean deceleration, 1.667 m/s²,
    /// would give 1.284954 MJ; static shares 1.2 MJ).
    #[test]
    fn each_interval_is_split_with_its_own_weight_transfer() {
        let mut trace = Vec::new();
        for i in 0..=4 {
            trace.push(TracePoint { time_s: i as f64, speed_m_per_s: 20.0 - 3.0 * i as f64, elevation_m: None });
        }
        for i in 1..=8 {
            trace.push(TracePoint { time_s: 4.0 + i as f64, speed_m_per_s: 8.0 - i as f64, elevation_m: None });
        }
        let vehicle = BrakingVehicle { mass_kg: 10_000.0, axle_shares: vec![0.6, 0.4], cg_height_m: 1.0, wheelbase_m: 4.0, ..car() };
        let trip = summarise_trace(&trace, &vehicle);
        assert!((trip.friction_energy_j - 2.0e6).abs() < 1e-3, "{}", trip.friction_energy_j);
        assert!((trip.axle_energy_j[0] - 1_336_642.0).abs() < 5.0, "{}", trip.axle_energy_j[0]);
        assert!((trip.axle_energy_j[0] + trip.axle_energy_j[1] - trip.friction_energy_j).abs() < 1e-6);
        assert_eq!(trip.brake_applications, 1);
    }

    /// Retarder energy is subtracted before the friction brakes see any. A 15 t truck (f = 1,
    /// no road losses) stops from 25 m/s at 2.5 m/s² in 10 s, sampled each second: kinetic
    /// energy ½·m·v² = ½·15 000·25² = 4 687 500 J (Halliday, Resnick & Walker, Fundamentals of
    /// Physics, ch. 7). The smallest one-second share is the last, ½·15 000·2.5² = 46 875 J, so
    /// a 40 kW retarder takes its full 40 kJ in each of the 10 seconds: 400 000 J, leaving
    /// 4 287 500 J to the friction brakes. With 20 kW of regeneration as well (taken first):
    /// 200 000 J regenerated; in the last second only 46 875 − 20 000 = 26 875 J remain for the
    /// retarder, so it takes 9·40 000 + 26 875 = 386 875 J and the friction brakes 4 100 625 J.
    #[test]
    fn retarder_energy_is_subtracted_from_friction_energy() {
        let truck = BrakingVehicle { mass_kg: 15_000.0, axle_shares: vec![0.6, 0.4], retarder_max_power_w: 40_000.0, rotor_mass_kg: vec![35.0, 35.0], ..car() };
        let trace = stop(25.0, 10);
        let trip = summarise_trace(&trace, &truck);
        assert!((trip.retarder_energy_j - 400_000.0).abs() < 1e-6, "{}", trip.retarder_energy_j);
        assert!((trip.friction_energy_j - 4_287_500.0).abs() < 1e-6, "{}", trip.friction_energy_j);
        assert_eq!(trip.regen_energy_j, 0.0);
        let hybrid = BrakingVehicle { regen_max_power_w: 20_000.0, ..truck };
        let trip = summarise_trace(&trace, &hybrid);
        assert!((trip.regen_energy_j - 200_000.0).abs() < 1e-6);
        assert!((trip.retarder_energy_j - 386_875.0).abs() < 1e-6, "{}", trip.retarder_energy_j);
        assert!((trip.friction_energy_j - 4_100_625.0).abs() < 1e-6, "{}", trip.friction_energy_j);
        // A retarder strong enough for the whole stop leaves the friction brakes nothing: no
        // brake application is counted.
        let strong = BrakingVehicle { retarder_max_power_w: 2.0e6, ..car() };
        let trip = summarise_trace(&trace, &strong);
        assert_eq!((trip.friction_energy_j, trip.brake_applications), (0.0, 0));
    }
}
