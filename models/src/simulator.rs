//! A seeded fleet simulator for the demo and for calibration. All numbers here are invented
//! for simulation; none is a reference value.
//!
//! Each vehicle belongs to a class with an invented duty cycle. Day by day it drives a few
//! trips (06:00-22:00 UTC) whose friction energy is `km · MJ/km · season · route · noise`,
//! split between axles by the class's shares. Each part wears at its own true rate (mm/MJ,
//! drawn around the class rate) and is inspected at irregular intervals (05:00 UTC, gauge
//! noise about ±0.3 mm, common practice, no source); a part measured near its minimum is
//! replaced the next morning. Realism that makes forecasting hard: some vehicles move to
//! another route mid-history (energy per km and km per day change), some vehicles joined the
//! fleet mid-life (parts partly worn, no replacement on record), weekends are quieter, and
//! energy per km follows the seasons.
//!
//! After the history (the cut), the same processes run on for `future_days` without
//! inspections or replacements; the simulator records when each part fitted at the cut first
//! crosses its minimum ([`TrueCrossing`]), which the forecasts never see.

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, LogNormal, Normal};

use crate::domain::{AxleBrake, BrakeType, Component, VehicleSpec};

/// Seconds per day.
pub const SECONDS_PER_DAY: f64 = 86_400.0;

/// Settings of a simulated fleet.
#[derive(Debug, Clone, PartialEq)]
pub struct SimConfig {
    /// Seed: equal seeds give equal fleets.
    pub seed: u64,
    /// Number of vehicles.
    pub vehicles: usize,
    /// First day of the records, days since the Unix epoch.
    pub start_day: i64,
    /// Days of recorded history; the cut ("today") is `start_day + history_days`.
    pub history_days: usize,
    /// Days simulated after the cut to find the true crossings.
    pub future_days: usize,
    /// Fraction of vehicles moved to another route mid-history.
    pub reassignment_fraction: f64,
    /// Fraction of vehicles that joined mid-life (no replacement on record at the start).
    pub joined_mid_life_fraction: f64,
    /// Thickness gauge noise SD, mm.
    pub gauge_sd_mm: f64,
}

impl Default for SimConfig {
    fn default() -> Self {
        Self {
            seed: 42,
            vehicles: 200,
            start_day: 19_723, // 2024-01-01
            history_days: 730,
            future_days: 1460,
            reassignment_fraction: 0.3,
            joined_mid_life_fraction: 0.35,
            gauge_sd_mm: 0.3,
        }
    }
}

/// An invented duty cycle.
#[derive(Debug, Clone, PartialEq)]
pub struct VehicleClass {
    /// Class name ("urban-delivery").
    pub name: &'static str,
    /// Operating mass, kg.
    pub mass_kg: f64,
    /// Axle brakes, front first.
    pub axles: Vec<AxleBrake>,
    /// Mean km on an active day.
    pub daily_km: f64,
    /// Mean friction energy per km, MJ/km (all axles).
    pub mj_per_km: f64,
    /// Probability a weekday is active.
    pub weekday_active: f64,
    /// Probability a weekend day is active.
    pub weekend_active: f64,
    /// Average trip speed, km/h.
    pub speed_km_per_h: f64,
    /// Brake applications per km.
    pub applications_per_km: f64,
    /// Mean share of energy in hot stops.
    pub hot_fraction: f64,
    /// Typical life of a pad or lining, days (sets the class wear rate).
    pub friction_life_days: f64,
    /// Typical life of a rotor or drum, days.
    pub disc_life_days: f64,
}

fn axle(i: u32, brake_type: BrakeType, share: f64) -> AxleBrake {
    match brake_type {
        BrakeType::Disc => AxleBrake {
            axle_index: i,
            brake_type,
            energy_share: share,
            friction_new_mm: 22.0,
            friction_min_mm: 3.0,
            disc_new_mm: 45.0,
            disc_min_mm: 39.0,
        },
        BrakeType::Drum => AxleBrake {
            axle_index: i,
            brake_type,
            energy_share: share,
            friction_new_mm: 17.0,
            friction_min_mm: 5.0,
            disc_new_mm: 18.0,
            disc_min_mm: 14.0,
        },
    }
}

/// The simulator's invented vehicle classes; `highway-haulage` has three axles with drums on
/// the two rear axles.
pub fn vehicle_classes() -> Vec<VehicleClass> {
    vec![
        VehicleClass {
            name: "urban-delivery",
            mass_kg: 12_000.0,
            axles: vec![axle(1, BrakeType::Disc, 0.62), axle(2, BrakeType::Disc, 0.38)],
            daily_km: 140.0,
            mj_per_km: 1.1,
            weekday_active: 0.95,
            weekend_active: 0.25,
            speed_km_per_h: 28.0,
            applications_per_km: 2.5,
            hot_fraction: 0.03,
            friction_life_days: 420.0,
            disc_life_days: 1300.0,
        },
        VehicleClass {
            name: "regional-coach",
            mass_kg: 18_000.0,
            axles: vec![axle(1, BrakeType::Disc, 0.58), axle(2, BrakeType::Disc, 0.42)],
            daily_km: 320.0,
            mj_per_km: 0.45,
            weekday_active: 0.85,
            weekend_active: 0.7,
            speed_km_per_h: 60.0,
            applications_per_km: 0.6,
            hot_fraction: 0.06,
            friction_life_days: 520.0,
            disc_life_days: 1500.0,
        },
        VehicleClass {
            name: "highway-haulage",
            mass_kg: 40_000.0,
            axles: vec![axle(1, BrakeType::Disc, 0.36), axle(2, BrakeType::Drum, 0.32), axle(3, BrakeType::Drum, 0.32)],
            daily_km: 580.0,
            mj_per_km: 0.35,
            weekday_active: 0.9,
            weekend_active: 0.2,
            speed_km_per_h: 70.0,
            applications_per_km: 0.15,
            hot_fraction: 0.1,
            friction_life_days: 600.0,
            disc_life_days: 1600.0,
        },
        VehicleClass {
            name: "refuse-collection",
            mass_kg: 26_000.0,
            axles: vec![axle(1, BrakeType::Disc, 0.55), axle(2, BrakeType::Disc, 0.45)],
            daily_km: 85.0,
            mj_per_km: 3.0,
            weekday_active: 0.97,
            weekend_active: 0.15,
            speed_km_per_h: 18.0,
            applications_per_km: 8.0,
            hot_fraction: 0.15,
            friction_life_days: 300.0,
            disc_life_days: 1000.0,
        },
    ]
}

/// A simulated trip, as a telematics integration would report it.
#[derive(Debug, Clone, PartialEq)]
pub struct SimTrip {
    /// Trip identifier.
    pub trip_id: String,
    /// Start, seconds since the Unix epoch.
    pub start_unix_s: f64,
    /// End, seconds since the Unix epoch.
    pub end_unix_s: f64,
    /// Distance, m.
    pub distance_m: f64,
    /// Friction energy, J.
    pub friction_energy_j: f64,
    /// Friction energy per axle, J.
    pub axle_energy_j: Vec<f64>,
    /// Brake applications.
    pub brake_applications: u32,
    /// Energy of hot stops, J.
    pub hot_energy_j: f64,
}

/// A simulated inspection of one part.
#[derive(Debug, Clone, PartialEq)]
pub struct SimInspection {
    /// Inspection identifier.
    pub inspection_id: String,
    /// When, seconds since the Unix epoch (05:00 UTC).
    pub unix_s: f64,
    /// Axle, 1 = front.
    pub axle_index: u32,
    /// Which part.
    pub component: Component,
    /// Measured thickness, mm (gauge noise, rounded to 0.1 mm).
    pub thickness_mm: f64,
}

/// A simulated replacement of one part.
#[derive(Debug, Clone, PartialEq)]
pub struct SimReplacement {
    /// Replacement identifier.
    pub replacement_id: String,
    /// When, seconds since the Unix epoch (05:00 UTC).
    pub unix_s: f64,
    /// Axle, 1 = front.
    pub axle_index: u32,
    /// Which part.
    pub component: Component,
    /// Thickness fitted, mm.
    pub new_thickness_mm: f64,
}

/// When the part fitted at the cut truly reaches its minimum.
#[derive(Debug, Clone, PartialEq)]
pub struct TrueCrossing {
    /// Axle, 1 = front.
    pub axle_index: u32,
    /// Which part.
    pub component: Component,
    /// Day (since epoch, fractional) the thickness first falls to the minimum; may lie before
    /// the cut when the part was already worn out; `None` if not within `future_days`.
    pub crossing_day: Option<f64>,
    /// The part's true wear rate, mm/MJ (here constant over the part's life; see
    /// [`crate::stress_fleet`] for a generator where it is not).
    pub true_rate_mm_per_mj: f64,
    /// True thickness at the cut, mm (may lie below the minimum).
    pub thickness_at_cut_mm: f64,
}

/// One simulated vehicle.
#[derive(Debug, Clone, PartialEq)]
pub struct SimVehicle {
    /// Fleet identifier ("sim-0001").
    pub vehicle_id: String,
    /// An invented VIN-like identifier for some vehicles.
    pub vin: Option<String>,
    /// Vehicle description.
    pub spec: VehicleSpec,
    /// Trips up to the cut.
    pub trips: Vec<SimTrip>,
    /// Inspections up to the cut.
    pub inspections: Vec<SimInspection>,
    /// Replacements up to the cut.
    pub replacements: Vec<SimReplacement>,
    /// Hidden truth: crossing days of the parts fitted at the cut.
    pub truth: Vec<TrueCrossing>,
    /// Day (since epoch) the vehicle changed route, if it did.
    pub reassigned_day: Option<i64>,
}

/// A simulated fleet.
#[derive(Debug, Clone, PartialEq)]
pub struct SimulatedFleet {
    /// The vehicles.
    pub vehicles: Vec<SimVehicle>,
    /// First day of the records, days since epoch.
    pub start_day: i64,
    /// The cut ("today"), days since epoch.
    pub cut_day: i64,
    /// End of the simulated future, days since epoch: a part whose `crossing_day` is `None`
    /// crosses at or after this day (censored).
    pub horizon_end_day: i64,
}

struct PartState {
    axle_index: u32,
    component: Component,
    new_mm: f64,
    min_mm: f64,
    margin_mm: f64,
    rate: f64,
    thickness: f64,
    crossed: Option<f64>,
    thickness_at_cut: f64,
}

fn invented_vin<R: Rng>(rng: &mut R) -> String {
    const CHARS: &[u8] = b"ABCDEFGHJKLMNPRSTUVWXYZ0123456789";
    (0..17).map(|_| CHARS[rng.gen_range(0..CHARS.len())] as char).collect()
}

fn lognormal<R: Rng>(rng: &mut R, sd: f64) -> f64 {
    match LogNormal::new(-0.5 * sd * sd, sd) {
        Ok(d) => d.sample(rng),
        Err(_) => 1.0,
    }
}

/// Simulates a fleet (see the module docs). Deterministic for a given config.
pub fn simulate(config: &SimConfig) -> SimulatedFleet {
    let classes = vehicle_classes();
    let mut rng = ChaCha8Rng::seed_from_u64(config.seed);
    let cut_day = config.start_day + config.history_days as i64;
    let vehicles = (0..config.vehicles)
        .map(|i| {
            let class = &classes[i % classes.len()];
            let vehicle_seed: u64 = rng.gen();
            simulate_vehicle(config, class, i, vehicle_seed)
        })
        .collect();
    SimulatedFleet { vehicles, start_day: config.start_day, cut_day, horizon_end_day: cut_day + config.future_days as i64 }
}

fn simulate_vehicle(config: &SimConfig, class: &VehicleClass, index: usize, seed: u64) -> SimVehicle {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let vehicle_id = format!("sim-{:04}", index + 1);
    let vin = rng.gen_bool(0.7).then(|| invented_vin(&mut rng));
    let mass_kg = class.mass_kg * rng.gen_range(0.9..1.1);
    let spec = VehicleSpec { vehicle_class: class.name.to_string(), mass_kg, axles: class.axles.clone() };
    let gauge = Normal::new(0.0, config.gauge_sd_mm.max(0.0)).ok();

    // Duty: this vehicle's own level, and perhaps a new route mid-history.
    let km_level = lognormal(&mut rng, 0.2);
    let mj_level = lognormal(&mut rng, 0.2);
    let season_phase = rng.gen_range(0.0..365.25);
    let reassigned = rng.gen_bool(config.reassignment_fraction.clamp(0.0, 1.0)).then(|| {
        let day = rng.gen_range(config.history_days / 4..(config.history_days * 19 / 20).max(config.history_days / 4 + 1));
        (day, rng.gen_range(0.6..1.5), rng.gen_range(0.55..1.8))
    });
    let hot_level = class.hot_fraction * rng.gen_range(0.5..1.5);
    let active_mean_axle_mj = class.daily_km * class.mj_per_km;
    let active_share = (5.0 * class.weekday_active + 2.0 * class.weekend_active) / 7.0;

    // Parts: true rates around the class rate set by the typical life.
    let joined_mid_life = rng.gen_bool(config.joined_mid_life_fraction.clamp(0.0, 1.0));
    let vehicle_factor = lognormal(&mut rng, 0.2);
    let mut parts: Vec<PartState> = Vec::new();
    for a in &class.axles {
        for component in Component::ALL {
            let (new_mm, min_mm) = (a.new_mm(component), a.min_mm(component));
            let life = match component {
                Component::Friction => class.friction_life_days,
                Component::Disc => class.disc_life_days,
            };
            let daily_axle = active_mean_axle_mj * active_share * a.energy_share;
            let rate = (new_mm - min_mm) / (life * daily_axle) * vehicle_factor * lognormal(&mut rng, 0.15);
            let thickness = if joined_mid_life { new_mm - rng.gen_range(0.0..0.75) * (new_mm - min_mm) } else { new_mm };
            let margin_mm = match component {
                Component::Friction => 2.0,
                Component::Disc => 0.8,
            };
            parts.push(PartState { axle_index: a.axle_index, component, new_mm, min_mm, margin_mm, rate, thickness, crossed: None, thickness_at_cut: f64::NAN });
        }
    }

    let mut trips = Vec::new();
    let mut inspections = Vec::new();
    let mut replacements = Vec::new();
    let day0 = config.start_day;
    let record_replacement = |replacements: &mut Vec<SimReplacement>, day: i64, p: &PartState| {
        replacements.push(SimReplacement {
            replacement_id: format!("{vehicle_id}-r{}", replacements.len() + 1),
            unix_s: day as f64 * SECONDS_PER_DAY + 5.0 * 3600.0,
            axle_index: p.axle_index,
            component: p.component,
            new_thickness_mm: p.new_mm,
        });
    };
    if !joined_mid_life {
        for p in &parts {
            record_replacement(&mut replacements, day0, p);
        }
    }
    let mut next_inspection = rng.gen_range(1..40usize);
    let mut pending: Vec<usize> = Vec::new();
    let total_days = config.history_days + config.future_days;
    for d in 0..total_days {
        let day = day0 + d as i64;
        let in_history = d < config.history_days;
        if d == config.history_days {
            for p in parts.iter_mut() {
                p.thickness_at_cut = p.thickness;
            }
        }
        // 05:00: replacements decided at yesterday's inspection, then today's inspection.
        if in_history {
            for &i in &pending {
                parts[i].thickness = parts[i].new_mm;
                parts[i].crossed = None;
                record_replacement(&mut replacements, day, &parts[i]);
            }
            pending.clear();
            if d == next_inspection {
                for (i, p) in parts.iter().enumerate() {
                    let noise = gauge.map_or(0.0, |g| g.sample(&mut rng));
                    // A gauge reads no less than zero: a part worn through reads 0 mm.
                    let measured = (((p.thickness + noise) * 10.0).round() / 10.0).max(0.0);
                    inspections.push(SimInspection {
                        inspection_id: format!("{vehicle_id}-i{}", inspections.len() + 1),
                        unix_s: day as f64 * SECONDS_PER_DAY + 5.0 * 3600.0,
                        axle_index: p.axle_index,
                        component: p.component,
                        thickness_mm: measured,
                    });
                    if measured <= p.min_mm + p.margin_mm && d + 1 < config.history_days {
                        pending.push(i);
                    }
                }
                next_inspection = d + rng.gen_range(25..80usize);
            }
        }
        // The day's driving.
        let weekday = (day + 3).rem_euclid(7); // 1970-01-01 was a Thursday: 0 = Monday
        let p_active = if weekday >= 5 { class.weekend_active } else { class.weekday_active };
        if !rng.gen_bool(p_active.clamp(0.0, 1.0)) {
            continue;
        }
        let (km_route, mj_route) = match reassigned {
            Some((rd, km, mj)) if d >= rd => (km, mj),
            _ => (1.0, 1.0),
        };
        let season = 1.0 + 0.15 * (2.0 * std::f64::consts::PI * (d as f64 - season_phase) / 365.25).sin();
        let km = class.daily_km * km_level * km_route * lognormal(&mut rng, 0.25);
        let mj = km * class.mj_per_km * mj_level * mj_route * season * lognormal(&mut rng, 0.2);
        // Wear and crossings.
        for p in parts.iter_mut() {
            let share = class.axles.iter().find(|a| a.axle_index == p.axle_index).map_or(0.0, |a| a.energy_share);
            let wear = p.rate * mj * share;
            let before = p.thickness;
            p.thickness -= wear;
            if p.crossed.is_none() && before > p.min_mm && p.thickness <= p.min_mm {
                let frac = if wear > 0.0 { (before - p.min_mm) / wear } else { 0.0 };
                p.crossed = Some(day as f64 + 0.25 + frac * (16.0 / 24.0));
            }
        }
        if in_history {
            let n_trips = 1 + usize::from(rng.gen_bool(0.5)) + usize::from(rng.gen_bool(0.2));
            let weights: Vec<f64> = (0..n_trips).map(|_| rng.gen_range(0.5..1.5)).collect();
            let total_w: f64 = weights.iter().sum();
            let driving_h = (km / class.speed_km_per_h).min(15.0);
            let gap_h = (16.0 - driving_h) / (n_trips as f64 + 1.0);
            let mut clock_h = 6.0 + gap_h * rng.gen_range(0.2..1.0);
            for w in weights {
                let f = w / total_w;
                let hours = driving_h * f;
                let start = day as f64 * SECONDS_PER_DAY + clock_h * 3600.0;
                let end = start + hours * 3600.0;
                clock_h += hours + gap_h;
                let energy_j = mj * f * 1e6;
                let trip_km = km * f;
                trips.push(SimTrip {
                    trip_id: format!("{vehicle_id}-t{}", trips.len() + 1),
                    start_unix_s: start,
                    end_unix_s: end,
                    distance_m: trip_km * 1000.0,
                    friction_energy_j: energy_j,
                    axle_energy_j: class.axles.iter().map(|a| a.energy_share * energy_j).collect(),
                    brake_applications: ((trip_km * class.applications_per_km).round() as u32).max(1),
                    hot_energy_j: energy_j * (hot_level * rng.gen_range(0.5..1.5)).clamp(0.0, 1.0),
                });
            }
        }
    }
    let truth = parts
        .iter()
        .map(|p| TrueCrossing { axle_index: p.axle_index, component: p.component, crossing_day: p.crossed,
            true_rate_mm_per_mj: p.rate,
            // Without a future the loop ends at the cut.
            thickness_at_cut_mm: if p.thickness_at_cut.is_nan() { p.thickness } else { p.thickness_at_cut },
        })
        .collect();
    SimVehicle {
        vehicle_id,
        vin,
        spec,
        trips,
        inspections,
        replacements,
        truth,
        reassigned_day: reassigned.map(|(d, _, _)| day0 + d as i64),
    }
}
