//! A second test-fleet generator, written independently of the forecasting model's
//! assumptions, to score forecasts on data that does not flatter the model. It produces the
//! same types as [`crate::simulator::simulate`] ([`SimulatedFleet`]), so the pipeline and
//! [`crate::calibration`] run on it unchanged.
//!
//! All numbers here are invented for testing; none is a reference value.
//!
//! # What it does that the model does not assume
//! - **Five invented vehicle classes** (`parcel-van`, `school-shuttle`, `mixer-three-axle`,
//!   `log-hauler`, `hill-bus`): disc and drum brakes mixed on one vehicle, two three-axle
//!   classes, drums on two axles (`mixer-three-axle`) and on all three (`log-hauler`).
//! - **Wear is not linear in energy.** Each trip's wear at a brake is
//!   `E_axle · k · V · w(t) · d · m(T)^γ · b`, with `k` the part's nominal rate (mm/MJ), `V` a
//!   vehicle/driver factor shared by every part of the vehicle (lognormal, SD 0.25 in log),
//!   `w(t)` a slowly wandering per-part factor (log-AR(1), time constant 120-300 days,
//!   stationary SD 0.15), `d` a day factor (per vehicle SD 0.2 and per part SD 0.1, in log),
//!   `b` a bedding-in surcharge on new pads (up to ×2, fading over the first 3 % of life), and
//!   `m(T) = 1 + 0.8·(max(0, T − 180 °C)/100 K)^1.5` a temperature multiplier (`γ` = 1 for
//!   pads, 0.6 for rotors/drums). `T` is the trip-mean brake temperature of a lumped thermal
//!   model per axle: `T_ss = T_ambient + R·P·(1 + 2·hot share)` with `P` the axle's mean
//!   braking power (kW) on the trip, `R` (K/kW) set so the class's nominal trip sits at its
//!   nominal temperature rise, and the brake relaxing towards `T_ss` (during a trip) or towards
//!   ambient (between trips) with a time constant of 0.3-0.6 h. Back-to-back trips, hilly
//!   routes and hot stops therefore wear more per MJ; ambient temperature follows the season.
//! - **Pad-rotor coupling**: a rotor's (drum's) nominal rate is its class's rotor-to-pad wear
//!   ratio (6-18 %) times the pad's class rate times `V^0.9`, so a vehicle's rotors wear fast
//!   where its pads do.
//! - **Workshops**: each vehicle belongs to one of four workshops with its own gauge (SD 0.2 mm
//!   read to 0.1 mm, SD 0.5 mm read to 0.5 mm, SD 0.3 mm read to 0.5 mm, SD 0.25 mm read to
//!   0.1 mm; rotors by some with a micrometer), its own round interval (every 2-5 months,
//!   irregular) and its own replacement margins. At a round, which starts at a random time
//!   between 06:30 and 16:00 UTC, every part is measured; a worn part is replaced 20-55 minutes
//!   later (same hour, same day); in 15 % of visits the parts are out of stock and the
//!   replacement is the next morning before the first trip. A rotor (drum) is replaced when
//!   worn, or when its pads are replaced and it would not last another pad life; whenever a
//!   rotor is replaced, the pads of that axle are replaced too (each with its own record).
//! - **Spot checks** between rounds: one axle's pads measured before the day's first trip with
//!   a coarse gauge (SD 0.5 mm, read to 0.5 mm), replaced within the hour if near the minimum.
//! - **Duty changes**: about 30 % of vehicles change route part-way through the history; the
//!   energy per day changes by a factor between 0.5 and 2 (at least 20 % either way), split
//!   between km per day and MJ per km, and the share of hot stops changes too. A vehicle that
//!   changes route moves to another workshop half of the time.
//! - **Unknown cycle starts**: about 40 % of vehicles join the fleet part-way through the
//!   history (between 35 % and 92 % of the way) with partly worn parts and no replacement
//!   on record, so many parts still have an unknown start at the cut; the others are delivered
//!   new during the first third of the history (a replacement record for every part).
//! - **Energy**: seasonal energy per km (±12 %, class phase), a summer break for the school
//!   shuttle, idle spells (parked 2-4 weeks, about once a year), quieter weekends, trips
//!   within each class's operating hours, and per-trip axle shares varying a little around the
//!   class's nominal shares (a per-vehicle load offset and a per-trip variation).
//!
//! After the history (the cut) the same processes run for `future_days` without workshop
//! visits (and without route changes).
//!
//! # Truth ([`TrueCrossing`])
//! For each part fitted at the cut: `crossing_day` when its thickness first reaches the
//! minimum (interpolated within the trip; before the cut if it was already worn out; `None`
//! if not within the simulated future); `thickness_at_cut_mm`; and the **true rate**, defined
//! here as the mean wear per MJ the part actually experienced after the cut:
//! `(thickness at cut − min) / (energy at that brake from the cut to the crossing)` for parts
//! crossing after the cut, and `(thickness at cut − thickness at the horizon) / (energy from
//! the cut to the horizon)` for the others. With it, the remaining energy at the cut is exact,
//! which is what the oracle of [`crate::calibration`] needs.
//!
//! # Reports for the tuning seeds
//! `cargo test -p brakeledger-models --release --test tests -- --ignored print_tuning_reports --nocapture`
//! prints the accuracy tables of both generators for every tuning seed.

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::StandardNormal;

use crate::domain::{AxleBrake, BrakeType, Component, VehicleSpec};
use crate::simulator::{
    SimInspection, SimReplacement, SimTrip, SimVehicle, SimulatedFleet, TrueCrossing, SECONDS_PER_DAY,
};

/// Settings of a stress fleet.
#[derive(Debug, Clone, PartialEq)]
pub struct StressConfig {
    /// Seed: equal seeds give equal fleets.
    pub seed: u64,
    /// Number of vehicles.
    pub vehicles: usize,
    /// First day of the records, days since the Unix epoch.
    pub start_day: i64,
    /// Days of recorded history; the cut is `start_day + history_days`.
    pub history_days: usize,
    /// Days simulated after the cut to find the true crossings.
    pub future_days: usize,
    /// Fraction of vehicles that change route part-way through the history.
    pub duty_change_fraction: f64,
    /// Fraction of vehicles that join mid-life (partly worn parts, no replacement on record).
    pub joined_mid_life_fraction: f64,
}

impl Default for StressConfig {
    fn default() -> Self {
        Self {
            seed: 101,
            vehicles: 240,
            start_day: 19_905, // 2024-07-01
            history_days: 730,
            future_days: 1460,
            duty_change_fraction: 0.3,
            joined_mid_life_fraction: 0.4,
        }
    }
}

/// The thermal side of one axle's brake.
#[derive(Debug, Clone, PartialEq)]
pub struct StressAxle {
    /// The brake as the vehicle description gives it (nominal energy share included).
    pub brake: AxleBrake,
    /// Rise of the brake temperature above ambient on the class's nominal trip, K.
    pub nominal_rise_k: f64,
    /// Thermal time constant of the lumped brake, h.
    pub time_constant_h: f64,
}

/// An invented vehicle class of the stress fleet.
#[derive(Debug, Clone, PartialEq)]
pub struct StressClass {
    /// Class name.
    pub name: &'static str,
    /// Operating mass, kg.
    pub mass_kg: f64,
    /// Axles, front first.
    pub axles: Vec<StressAxle>,
    /// Mean km on an active day.
    pub daily_km: f64,
    /// Mean friction energy per km, MJ/km (all axles).
    pub mj_per_km: f64,
    /// Probability a weekday is active.
    pub weekday_active: f64,
    /// Probability a weekend day is active.
    pub weekend_active: f64,
    /// Mean trip speed, km/h.
    pub speed_km_per_h: f64,
    /// Brake applications per km.
    pub stops_per_km: f64,
    /// Mean share of a trip's energy in hot stops.
    pub hot_share: f64,
    /// Operating hours, UTC: first trip start and last trip end, h.
    pub operating_hours: (f64, f64),
    /// Fewest and most trips on an active day.
    pub trips_per_day: (usize, usize),
    /// Typical life of a front pad or lining, days (sets the class rate).
    pub pad_life_days: f64,
    /// Rotor (drum) wear per MJ as a fraction of the pad's.
    pub rotor_to_pad_wear: f64,
    /// No service from early July to mid August.
    pub summer_break: bool,
}

fn stress_axle(index: u32, brake_type: BrakeType, share: f64, heavy: bool, rise_k: f64, tau_h: f64) -> StressAxle {
    let (friction_new_mm, friction_min_mm, disc_new_mm, disc_min_mm) = match (brake_type, heavy) {
        (BrakeType::Disc, true) => (20.0, 2.5, 44.0, 39.5),
        (BrakeType::Disc, false) => (18.0, 2.0, 30.0, 27.0),
        (BrakeType::Drum, _) => (16.0, 4.5, 17.5, 14.5),
    };
    StressAxle {
        brake: AxleBrake {
            axle_index: index,
            brake_type,
            energy_share: share,
            friction_new_mm,
            friction_min_mm,
            disc_new_mm,
            disc_min_mm,
        },
        nominal_rise_k: rise_k,
        time_constant_h: tau_h,
    }
}

/// The stress fleet's invented classes.
pub fn stress_classes() -> Vec<StressClass> {
    use BrakeType::{Disc, Drum};
    vec![
        StressClass {
            name: "parcel-van",
            mass_kg: 7_500.0,
            axles: vec![stress_axle(1, Disc, 0.66, false, 140.0, 0.3), stress_axle(2, Disc, 0.34, false, 120.0, 0.3)],
            daily_km: 160.0,
            mj_per_km: 0.9,
            weekday_active: 0.96,
            weekend_active: 0.3,
            speed_km_per_h: 32.0,
            stops_per_km: 3.0,
            hot_share: 0.02,
            operating_hours: (7.0, 20.0),
            trips_per_day: (2, 5),
            pad_life_days: 380.0,
            rotor_to_pad_wear: 0.08,
            summer_break: false,
        },
        StressClass {
            name: "school-shuttle",
            mass_kg: 11_000.0,
            axles: vec![stress_axle(1, Disc, 0.6, true, 130.0, 0.4), stress_axle(2, Drum, 0.4, true, 110.0, 0.5)],
            daily_km: 120.0,
            mj_per_km: 1.3,
            weekday_active: 0.97,
            weekend_active: 0.05,
            speed_km_per_h: 30.0,
            stops_per_km: 2.2,
            hot_share: 0.03,
            operating_hours: (6.0, 18.0),
            trips_per_day: (2, 4),
            pad_life_days: 450.0,
            rotor_to_pad_wear: 0.1,
            summer_break: true,
        },
        StressClass {
            name: "mixer-three-axle",
            mass_kg: 26_000.0,
            axles: vec![
                stress_axle(1, Disc, 0.42, true, 160.0, 0.4),
                stress_axle(2, Drum, 0.29, true, 140.0, 0.6),
                stress_axle(3, Drum, 0.29, true, 140.0, 0.6),
            ],
            daily_km: 110.0,
            mj_per_km: 2.6,
            weekday_active: 0.9,
            weekend_active: 0.2,
            speed_km_per_h: 26.0,
            stops_per_km: 1.6,
            hot_share: 0.12,
            operating_hours: (5.0, 17.0),
            trips_per_day: (3, 6),
            pad_life_days: 330.0,
            rotor_to_pad_wear: 0.12,
            summer_break: false,
        },
        StressClass {
            name: "log-hauler",
            mass_kg: 38_000.0,
            axles: vec![
                stress_axle(1, Drum, 0.34, true, 150.0, 0.5),
                stress_axle(2, Drum, 0.33, true, 150.0, 0.6),
                stress_axle(3, Drum, 0.33, true, 150.0, 0.6),
            ],
            daily_km: 380.0,
            mj_per_km: 0.8,
            weekday_active: 0.88,
            weekend_active: 0.15,
            speed_km_per_h: 55.0,
            stops_per_km: 0.3,
            hot_share: 0.25,
            operating_hours: (4.0, 21.0),
            trips_per_day: (1, 3),
            pad_life_days: 420.0,
            rotor_to_pad_wear: 0.15,
            summer_break: false,
        },
        StressClass {
            name: "hill-bus",
            mass_kg: 14_500.0,
            axles: vec![stress_axle(1, Disc, 0.57, true, 190.0, 0.4), stress_axle(2, Disc, 0.43, true, 170.0, 0.4)],
            daily_km: 240.0,
            mj_per_km: 1.2,
            weekday_active: 0.93,
            weekend_active: 0.75,
            speed_km_per_h: 35.0,
            stops_per_km: 1.4,
            hot_share: 0.1,
            operating_hours: (5.0, 23.0),
            trips_per_day: (3, 6),
            pad_life_days: 300.0,
            rotor_to_pad_wear: 0.18,
            summer_break: false,
        },
    ]
}

/// A workshop: its gauges, how often it calls a vehicle in, and when it replaces a part.
#[derive(Debug, Clone, Copy, PartialEq)]
struct Workshop {
    pad_gauge_sd_mm: f64,
    pad_resolution_mm: f64,
    rotor_gauge_sd_mm: f64,
    rotor_resolution_mm: f64,
    mean_interval_days: f64,
    pad_margin_mm: f64,
    rotor_margin_mm: f64,
}

const WORKSHOPS: [Workshop; 4] = [
    Workshop { pad_gauge_sd_mm: 0.2, pad_resolution_mm: 0.1, rotor_gauge_sd_mm: 0.1, rotor_resolution_mm: 0.1, mean_interval_days: 80.0, pad_margin_mm: 2.5, rotor_margin_mm: 0.6 },
    Workshop { pad_gauge_sd_mm: 0.5, pad_resolution_mm: 0.5, rotor_gauge_sd_mm: 0.3, rotor_resolution_mm: 0.5, mean_interval_days: 110.0, pad_margin_mm: 3.5, rotor_margin_mm: 1.0 },
    Workshop { pad_gauge_sd_mm: 0.3, pad_resolution_mm: 0.5, rotor_gauge_sd_mm: 0.2, rotor_resolution_mm: 0.1, mean_interval_days: 130.0, pad_margin_mm: 4.0, rotor_margin_mm: 0.8 },
    Workshop { pad_gauge_sd_mm: 0.25, pad_resolution_mm: 0.1, rotor_gauge_sd_mm: 0.3, rotor_resolution_mm: 0.5, mean_interval_days: 95.0, pad_margin_mm: 3.0, rotor_margin_mm: 0.7 },
];

/// Gauge of a spot check between rounds.
const SPOT_GAUGE_SD_MM: f64 = 0.5;
const SPOT_RESOLUTION_MM: f64 = 0.5;
/// Brake temperature above which wear per MJ rises, °C.
const WEAR_KNEE_C: f64 = 180.0;
/// Day 10 957 since the epoch is 2000-01-01.
const DAY_2000_01_01: f64 = 10_957.0;
const DAYS_PER_YEAR: f64 = 365.2425;

/// Wear multiplier at a brake temperature (°C): 1 up to the knee, then rising.
fn thermal_multiplier(temperature_c: f64) -> f64 {
    let over = (temperature_c - WEAR_KNEE_C).max(0.0) / 100.0;
    1.0 + 0.8 * over.powf(1.5)
}

/// A mean-one lognormal factor with log-SD `sd`.
fn factor<R: Rng>(rng: &mut R, sd: f64) -> f64 {
    let z: f64 = rng.sample(StandardNormal);
    (sd * z - 0.5 * sd * sd).exp()
}

fn gauge_reading<R: Rng>(rng: &mut R, thickness_mm: f64, sd_mm: f64, resolution_mm: f64) -> f64 {
    let z: f64 = rng.sample(StandardNormal);
    let steps = ((thickness_mm + sd_mm * z) / resolution_mm).round();
    // To 0.01 mm, so a reading of 12.2 is stored as 12.2 and not as 12.200000000000001.
    ((steps * resolution_mm * 100.0).round() / 100.0).max(0.0)
}

/// Simulates a stress fleet (see the module docs). Deterministic for a given config.
pub fn simulate_stress(config: &StressConfig) -> SimulatedFleet {
    let classes = stress_classes();
    let mut rng = ChaCha8Rng::seed_from_u64(config.seed ^ 0x5f1e_e7c0_ffee_0000);
    let cut_day = config.start_day + config.history_days as i64;
    let vehicles = (0..config.vehicles)
        .map(|i| {
            let class = &classes[i % classes.len()];
            let seed: u64 = rng.gen();
            VehicleRun::new(config, class, i, seed).run()
        })
        .collect();
    SimulatedFleet {
        vehicles,
        start_day: config.start_day,
        cut_day,
        horizon_end_day: cut_day + config.future_days as i64,
    }
}

/// One wearing part's hidden state.
struct Part {
    axle: usize,
    component: Component,
    new_mm: f64,
    min_mm: f64,
    /// Nominal rate, mm/MJ.
    rate: f64,
    /// Exponent of the thermal multiplier.
    thermal_exponent: f64,
    /// Log of the wandering factor.
    log_wander: f64,
    wander_keep: f64,
    wander_step_sd: f64,
    thickness: f64,
    /// Energy at this brake since the part was fitted (bedding-in), MJ.
    energy_since_fit: f64,
    /// Energy over which bedding-in fades, MJ (0: no bedding-in, e.g. an unknown start).
    bedding_mj: f64,
    crossed: Option<f64>,
    thickness_at_cut: f64,
    energy_after_cut: f64,
    energy_at_crossing: Option<f64>,
}

/// A route: multipliers on km per day, MJ per km and the hot share.
#[derive(Clone, Copy)]
struct Route {
    km: f64,
    mj_per_km: f64,
    hot: f64,
}

/// What happens at a workshop visit or spot check.
struct Visit {
    inspect_s: f64,
    replace_s: f64,
    /// A spot check measures the pads of this axle (index into the axles) only.
    only_axle: Option<usize>,
    /// A spot check (coarse gauge, tighter replacement margin) rather than a round.
    spot: bool,
}

struct VehicleRun<'a> {
    config: &'a StressConfig,
    class: &'a StressClass,
    rng: ChaCha8Rng,
    vehicle_id: String,
    spec: VehicleSpec,
    parts: Vec<Part>,
    trips: Vec<SimTrip>,
    inspections: Vec<SimInspection>,
    replacements: Vec<SimReplacement>,
    /// First day index (since `start_day`) on record.
    first_day: usize,
    known_start: bool,
    workshop: usize,
    route: Route,
    route_change: Option<(usize, Route)>,
    km_level: f64,
    mj_level: f64,
    hot_level: f64,
    axle_offsets: Vec<f64>,
    ambient_offset_c: f64,
    season_phase_days: f64,
    /// Brake temperature per axle, °C, and when it was last updated (s since epoch).
    temperature: Vec<(f64, f64)>,
    idle_until: usize,
    next_round: usize,
    /// Replacement pending for the next morning (part indices).
    pending: Vec<usize>,
    /// Resistance per axle, K/kW.
    resistance: Vec<f64>,
}

impl<'a> VehicleRun<'a> {
    fn new(config: &'a StressConfig, class: &'a StressClass, index: usize, seed: u64) -> Self {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let vehicle_id = format!("rig-{:04}", index + 1);
        let spec = VehicleSpec {
            vehicle_class: class.name.to_string(),
            mass_kg: class.mass_kg * rng.gen_range(0.92..1.08),
            axles: class.axles.iter().map(|a| a.brake.clone()).collect(),
        };
        let history = config.history_days.max(1);
        let joined = rng.gen_bool(config.joined_mid_life_fraction.clamp(0.0, 1.0));
        let first_day = if joined { rng.gen_range(history * 7 / 20..(history * 23 / 25).max(history * 7 / 20 + 1)) } else { rng.gen_range(0..(history / 3).max(1)) };
        let route_change = if rng.gen_bool(config.duty_change_fraction.clamp(0.0, 1.0)) {
            let low = first_day.max(history / 5) + 20;
            let high = history * 9 / 10;
            (low < high).then(|| {
                let day = rng.gen_range(low..high);
                let sign = if rng.gen_bool(0.5) { 1.0 } else { -1.0 };
                let log_energy = sign * rng.gen_range(1.2f64.ln()..2f64.ln());
                let split: f64 = rng.gen_range(0.0..1.0);
                let route = Route { km: (split * log_energy).exp(), mj_per_km: ((1.0 - split) * log_energy).exp(), hot: factor(&mut rng, 0.4) };
                (day, route)
            })
        } else {
            None
        };
        let km_level = factor(&mut rng, 0.2);
        let mj_level = factor(&mut rng, 0.2);
        let hot_level = factor(&mut rng, 0.4);
        let axle_offsets: Vec<f64> = class.axles.iter().map(|_| factor(&mut rng, 0.04)).collect();
        // Parts: nominal rates from the class life, a vehicle/driver factor shared by all.
        let vehicle_factor = factor(&mut rng, 0.25);
        let active_share = (5.0 * class.weekday_active + 2.0 * class.weekend_active) / 7.0;
        let daily_mj = class.daily_km * class.mj_per_km * active_share;
        let mut parts = Vec::new();
        for (a, axle) in class.axles.iter().enumerate() {
            let b = &axle.brake;
            let life_factor = if a == 0 { 1.0 } else { 1.25 };
            let class_pad_rate = (b.friction_new_mm - b.friction_min_mm) / (class.pad_life_days * life_factor * daily_mj * b.energy_share);
            for component in Component::ALL {
                let (new_mm, min_mm) = (b.new_mm(component), b.min_mm(component));
                let (rate, thermal_exponent) = match component {
                    Component::Friction => (class_pad_rate * vehicle_factor * factor(&mut rng, 0.1), 1.0),
                    Component::Disc => (class_pad_rate * class.rotor_to_pad_wear * vehicle_factor.powf(0.9) * factor(&mut rng, 0.2), 0.6),
                };
                let tau_days: f64 = rng.gen_range(120.0..300.0);
                let wander_keep = (-1.0 / tau_days).exp();
                let stationary_sd = 0.15;
                let worn = if joined {
                    match component {
                        Component::Friction => rng.gen_range(0.05..0.7),
                        Component::Disc => rng.gen_range(0.0..0.75),
                    }
                } else {
                    0.0
                };
                let z: f64 = rng.sample(StandardNormal);
                parts.push(Part {
                    axle: a,
                    component,
                    new_mm,
                    min_mm,
                    rate,
                    thermal_exponent,
                    log_wander: stationary_sd * z,
                    wander_keep,
                    wander_step_sd: stationary_sd * (1.0 - wander_keep * wander_keep).sqrt(),
                    thickness: new_mm - worn * (new_mm - min_mm),
                    energy_since_fit: 0.0,
                    bedding_mj: 0.0,
                    crossed: None,
                    thickness_at_cut: f64::NAN,
                    energy_after_cut: 0.0,
                    energy_at_crossing: None,
                });
            }
        }
        let resistance = class
            .axles
            .iter()
            .map(|a| {
                let nominal_kw = class.mj_per_km * a.brake.energy_share * class.speed_km_per_h / 3.6;
                a.nominal_rise_k / nominal_kw.max(1e-6)
            })
            .collect();
        let workshop = rng.gen_range(0..WORKSHOPS.len());
        let first_round_delay = if joined { rng.gen_range(15..90) } else { rng.gen_range(40..140) };
        Self {
            config,
            class,
            vehicle_id,
            spec,
            parts,
            trips: Vec::new(),
            inspections: Vec::new(),
            replacements: Vec::new(),
            first_day,
            known_start: !joined,
            workshop,
            route: Route { km: 1.0, mj_per_km: 1.0, hot: 1.0 },
            route_change,
            km_level,
            mj_level,
            hot_level,
            axle_offsets,
            ambient_offset_c: 3.0 * rng.sample::<f64, _>(StandardNormal),
            season_phase_days: rng.gen_range(-30.0..30.0),
            temperature: vec![(0.0, f64::NEG_INFINITY); class.axles.len()],
            idle_until: 0,
            next_round: first_day + first_round_delay,
            pending: Vec::new(),
            resistance,
            rng,
        }
    }

    fn fit_new(&mut self, part_index: usize, unix_s: f64) {
        let noise: f64 = self.rng.sample(StandardNormal);
        let rate = self.parts[part_index].rate;
        let p = &mut self.parts[part_index];
        p.thickness = p.new_mm + 0.1 * noise;
        p.energy_since_fit = 0.0;
        p.crossed = None;
        p.bedding_mj = if p.component == Component::Friction { 0.03 * (p.new_mm - p.min_mm) / rate } else { 0.0 };
        self.replacements.push(SimReplacement {
            replacement_id: format!("{}-r{}", self.vehicle_id, self.replacements.len() + 1),
            unix_s,
            axle_index: self.spec.axles[p.axle].axle_index,
            component: p.component,
            new_thickness_mm: p.new_mm,
        });
    }

    fn run(mut self) -> SimVehicle {
        let day0 = self.config.start_day;
        let history = self.config.history_days;
        let total = history + self.config.future_days;
        if self.known_start {
            let delivered_s = (day0 + self.first_day as i64) as f64 * SECONDS_PER_DAY + self.rng.gen_range(8.0..12.0) * 3600.0;
            for i in 0..self.parts.len() {
                self.fit_new(i, delivered_s);
            }
        }
        for d in self.first_day..total {
            let day = day0 + d as i64;
            let in_history = d < history;
            if d == history {
                for p in &mut self.parts {
                    p.thickness_at_cut = p.thickness;
                }
            }
            if let Some((change_day, route)) = self.route_change {
                if d == change_day {
                    self.route = route;
                    if self.rng.gen_bool(0.5) {
                        self.workshop = (self.workshop + self.rng.gen_range(1..WORKSHOPS.len())) % WORKSHOPS.len();
                    }
                }
            }
            for p in &mut self.parts {
                let z: f64 = self.rng.sample(StandardNormal);
                p.log_wander = p.wander_keep * p.log_wander + p.wander_step_sd * z;
            }
            let (open_h, close_h) = self.class.operating_hours;
            let day_s = day as f64 * SECONDS_PER_DAY;
            // Replacements left over from yesterday's visit: before the first trip.
            if in_history && !self.pending.is_empty() {
                let at = day_s + (open_h - self.rng.gen_range(0.5..1.5)).max(0.1) * 3600.0;
                for i in std::mem::take(&mut self.pending) {
                    self.fit_new(i, at);
                }
            }
            let visit = if in_history { self.plan_visit(d, day_s) } else { None };
            let active = self.is_active(d, day);
            // Trips are laid out before a late visit, after an early one.
            let (mut window_start_h, mut window_end_h) = (open_h, close_h);
            let mut visit_first = true;
            if let Some(v) = &visit {
                let start_h = (v.inspect_s - day_s) / 3600.0;
                let end_h = (v.replace_s - day_s) / 3600.0 + 0.3;
                if !v.spot && start_h - open_h > close_h - end_h {
                    window_end_h = start_h - 0.2;
                    visit_first = false;
                } else {
                    window_start_h = window_start_h.max(end_h);
                }
            }
            if visit_first {
                if let Some(v) = &visit {
                    self.workshop_visit(v, d + 1 < history);
                }
            }
            if active && window_end_h - window_start_h > 1.0 {
                self.drive_day(day, window_start_h, window_end_h, in_history);
            }
            if !visit_first {
                if let Some(v) = &visit {
                    self.workshop_visit(v, d + 1 < history);
                }
            }
        }
        for p in &mut self.parts {
            if p.thickness_at_cut.is_nan() {
                p.thickness_at_cut = p.thickness; // no future: the loop ended at the cut
            }
        }
        let truth = self
            .parts
            .iter()
            .map(|p| {
                let usable_left = p.thickness_at_cut - p.min_mm;
                let rate = match (p.crossed, p.energy_at_crossing) {
                    (Some(_), Some(e)) if e > 0.0 && usable_left > 0.0 => usable_left / e,
                    _ if p.energy_after_cut > 0.0 && p.thickness_at_cut > p.thickness => (p.thickness_at_cut - p.thickness) / p.energy_after_cut,
                    _ => p.rate,
                };
                TrueCrossing {
                    axle_index: self.spec.axles[p.axle].axle_index,
                    component: p.component,
                    crossing_day: p.crossed,
                    true_rate_mm_per_mj: rate,
                    thickness_at_cut_mm: p.thickness_at_cut,
                }
            })
            .collect();
        SimVehicle {
            vehicle_id: self.vehicle_id,
            vin: None,
            spec: self.spec,
            trips: self.trips,
            inspections: self.inspections,
            replacements: self.replacements,
            truth,
            reassigned_day: self.route_change.map(|(d, _)| day0 + d as i64),
        }
    }

    fn is_active(&mut self, d: usize, day: i64) -> bool {
        if d < self.idle_until {
            return false;
        }
        if self.rng.gen_bool(1.0 / 365.0) {
            self.idle_until = d + self.rng.gen_range(14..29);
            return false;
        }
        let day_of_year = (day as f64 - DAY_2000_01_01).rem_euclid(DAYS_PER_YEAR);
        if self.class.summer_break && (182.0..227.0).contains(&day_of_year) {
            return false;
        }
        let weekday = (day + 3).rem_euclid(7); // 1970-01-01 was a Thursday; 0 = Monday
        let p = if weekday >= 5 { self.class.weekend_active } else { self.class.weekday_active };
        self.rng.gen_bool(p.clamp(0.0, 1.0))
    }

    /// A workshop round or a spot check today, if one falls due.
    fn plan_visit(&mut self, d: usize, day_s: f64) -> Option<Visit> {
        if d >= self.next_round {
            let interval = WORKSHOPS[self.workshop].mean_interval_days * self.rng.gen_range(0.6..1.5);
            self.next_round = d + interval.round().max(20.0) as usize;
            let inspect_h = self.rng.gen_range(6.5..16.0);
            let replace_h = inspect_h + self.rng.gen_range(20.0..55.0) / 60.0;
            return Some(Visit { inspect_s: day_s + inspect_h * 3600.0, replace_s: day_s + replace_h * 3600.0, only_axle: None, spot: false });
        }
        if self.rng.gen_bool(0.006) {
            let open_h = self.class.operating_hours.0;
            let inspect_h = (open_h - self.rng.gen_range(0.8..1.5)).max(0.2);
            let replace_h = inspect_h + self.rng.gen_range(20.0..45.0) / 60.0;
            let axle = self.rng.gen_range(0..self.spec.axles.len());
            return Some(Visit { inspect_s: day_s + inspect_h * 3600.0, replace_s: day_s + replace_h * 3600.0, only_axle: Some(axle), spot: true });
        }
        None
    }

    fn workshop_visit(&mut self, visit: &Visit, may_replace: bool) {
        let shop = WORKSHOPS[self.workshop];
        let mut readings = vec![None; self.parts.len()];
        for (i, reading) in readings.iter_mut().enumerate() {
            let (axle, component) = (self.parts[i].axle, self.parts[i].component);
            if visit.only_axle.is_some_and(|a| a != axle || component != Component::Friction) {
                continue;
            }
            let (sd, resolution) = match (visit.spot, component) {
                (true, _) => (SPOT_GAUGE_SD_MM, SPOT_RESOLUTION_MM),
                (false, Component::Friction) => (shop.pad_gauge_sd_mm, shop.pad_resolution_mm),
                (false, Component::Disc) => (shop.rotor_gauge_sd_mm, shop.rotor_resolution_mm),
            };
            let thickness = self.parts[i].thickness;
            let measured = gauge_reading(&mut self.rng, thickness, sd, resolution);
            *reading = Some(measured);
            let offset_s = 60.0 * (2.0 * axle as f64 + if component == Component::Disc { 1.0 } else { 0.0 });
            self.inspections.push(SimInspection {
                inspection_id: format!("{}-i{}", self.vehicle_id, self.inspections.len() + 1),
                unix_s: visit.inspect_s + offset_s,
                axle_index: self.spec.axles[axle].axle_index,
                component,
                thickness_mm: measured,
            });
        }
        if !may_replace {
            return;
        }
        let pad_margin = if visit.spot { 1.0 } else { shop.pad_margin_mm };
        let mut replace = vec![false; self.parts.len()];
        for (i, p) in self.parts.iter().enumerate() {
            if p.component == Component::Friction {
                replace[i] = readings[i].is_some_and(|m| m <= p.min_mm + pad_margin);
            }
        }
        for i in 0..self.parts.len() {
            let p = &self.parts[i];
            if p.component != Component::Disc {
                continue;
            }
            let Some(measured) = readings[i] else { continue };
            let pads = self.parts.iter().position(|q| q.axle == p.axle && q.component == Component::Friction);
            let pads_replaced = pads.is_some_and(|j| replace[j]);
            let worn = measured <= p.min_mm + shop.rotor_margin_mm;
            let would_not_last = pads_replaced && measured <= p.min_mm + 2.0 * shop.rotor_margin_mm;
            if worn || would_not_last {
                replace[i] = true;
                if let Some(j) = pads {
                    replace[j] = true;
                }
            }
        }
        let chosen: Vec<usize> = (0..self.parts.len()).filter(|i| replace[*i]).collect();
        if chosen.is_empty() {
            return;
        }
        if !visit.spot && self.rng.gen_bool(0.15) {
            self.pending = chosen;
            return;
        }
        for (k, i) in chosen.into_iter().enumerate() {
            self.fit_new(i, visit.replace_s + 60.0 * k as f64);
        }
    }

    fn drive_day(&mut self, day: i64, window_start_h: f64, window_end_h: f64, in_history: bool) {
        let class = self.class;
        let day_s = day as f64 * SECONDS_PER_DAY;
        let season_angle = 2.0 * std::f64::consts::PI * ((day as f64 - DAY_2000_01_01 - self.season_phase_days) / DAYS_PER_YEAR);
        let season = 1.0 + 0.12 * season_angle.cos(); // more braking energy per km around the new year
        let ambient_c = 12.0 - 9.0 * (season_angle - 0.35).cos() + self.ambient_offset_c;
        let (min_trips, max_trips) = class.trips_per_day;
        let n = self.rng.gen_range(min_trips..=max_trips);
        let day_km = class.daily_km * self.km_level * self.route.km * factor(&mut self.rng, 0.3);
        let weights: Vec<f64> = (0..n).map(|_| self.rng.gen_range(0.4..1.6)).collect();
        let weight_sum: f64 = weights.iter().sum();
        let mut kms: Vec<f64> = weights.iter().map(|w| day_km * w / weight_sum).collect();
        let mut hours: Vec<f64> = kms.iter().map(|km| km / (class.speed_km_per_h * factor(&mut self.rng, 0.15))).collect();
        let available_h = window_end_h - window_start_h;
        let driving_h: f64 = hours.iter().sum();
        if driving_h > 0.8 * available_h {
            let shrink = 0.8 * available_h / driving_h;
            kms.iter_mut().for_each(|k| *k *= shrink);
            hours.iter_mut().for_each(|h| *h *= shrink);
        }
        let gaps: Vec<f64> = (0..=n).map(|_| self.rng.gen_range(0.2..1.0)).collect();
        let gap_sum: f64 = gaps.iter().sum();
        let spare_h = available_h - hours.iter().sum::<f64>();
        let vehicle_day = factor(&mut self.rng, 0.2);
        let part_day: Vec<f64> = (0..self.parts.len()).map(|_| factor(&mut self.rng, 0.1)).collect();
        let mut clock_h = window_start_h + spare_h * gaps[0] / gap_sum;
        for t in 0..n {
            let start_s = day_s + clock_h * 3600.0;
            let duration_s = hours[t] * 3600.0;
            clock_h += hours[t] + spare_h * gaps[t + 1] / gap_sum;
            let mj = kms[t] * class.mj_per_km * self.mj_level * self.route.mj_per_km * season * factor(&mut self.rng, 0.15);
            let hot_share = (class.hot_share * self.hot_level * self.route.hot * factor(&mut self.rng, 0.5)).min(0.8);
            let mut shares: Vec<f64> =
                class.axles.iter().zip(&self.axle_offsets).map(|(a, o)| a.brake.energy_share * o * factor(&mut self.rng, 0.05)).collect();
            let share_sum: f64 = shares.iter().sum();
            shares.iter_mut().for_each(|s| *s /= share_sum);
            let axle_mj: Vec<f64> = shares.iter().map(|s| s * mj).collect();
            // Lumped thermal model per axle: the trip-mean temperature.
            let mut multipliers = Vec::with_capacity(axle_mj.len());
            for (a, e) in axle_mj.iter().enumerate() {
                let tau_s = class.axles[a].time_constant_h * 3600.0;
                let (last_c, last_s) = self.temperature[a];
                let start_c = if last_s.is_finite() { ambient_c + (last_c - ambient_c) * (-(start_s - last_s) / tau_s).exp() } else { ambient_c };
                let power_kw = e * 1000.0 / duration_s.max(60.0);
                let steady_c = ambient_c + self.resistance[a] * power_kw * (1.0 + 2.0 * hot_share);
                let decay = (-duration_s / tau_s).exp();
                let mean_c = steady_c + (start_c - steady_c) * (tau_s / duration_s.max(1.0)) * (1.0 - decay);
                self.temperature[a] = (steady_c + (start_c - steady_c) * decay, start_s + duration_s);
                multipliers.push(thermal_multiplier(mean_c));
            }
            for (i, p) in self.parts.iter_mut().enumerate() {
                let e = axle_mj[p.axle];
                let bedding = if p.bedding_mj > 0.0 { 1.0 + (-p.energy_since_fit / p.bedding_mj).exp() } else { 1.0 };
                let wear = e * p.rate * trip_wear_factor(p.log_wander, vehicle_day * part_day[i], multipliers[p.axle], p.thermal_exponent) * bedding;
                let before = p.thickness;
                p.thickness = (p.thickness - wear).max(0.0);
                p.energy_since_fit += e;
                let crossed_now = p.crossed.is_none() && before > p.min_mm && p.thickness <= p.min_mm;
                let fraction = if crossed_now && wear > 0.0 { (before - p.min_mm) / wear } else { 1.0 };
                if crossed_now {
                    p.crossed = Some((start_s + fraction * duration_s) / SECONDS_PER_DAY);
                }
                if !in_history {
                    if crossed_now {
                        p.energy_at_crossing = Some(p.energy_after_cut + fraction * e);
                    }
                    p.energy_after_cut += e;
                }
            }
            if in_history {
                let applications = (kms[t] * class.stops_per_km * factor(&mut self.rng, 0.2)).round().max(1.0) as u32;
                let energy_j = mj * 1e6;
                self.trips.push(SimTrip {
                    trip_id: format!("{}-t{}", self.vehicle_id, self.trips.len() + 1),
                    start_unix_s: start_s,
                    end_unix_s: start_s + duration_s,
                    distance_m: kms[t] * 1000.0,
                    friction_energy_j: energy_j,
                    axle_energy_j: axle_mj.iter().map(|e| e * 1e6).collect(),
                    brake_applications: applications,
                    hot_energy_j: energy_j * hot_share,
                });
            }
        }
    }
}

/// The multiplicative wear factors of one trip: wandering, day, and temperature.
fn trip_wear_factor(log_wander: f64, day_factor: f64, thermal: f64, exponent: f64) -> f64 {
    log_wander.exp() * day_factor * thermal.powf(exponent)
}

#[cfg(test)]
mod tests {
    //! The generator does what its module docs say (checked on invented data).
    use std::collections::HashMap;

    use super::*;
    use crate::plausibility::{check_trip, TripFacts};

    fn fleet(vehicles: usize) -> SimulatedFleet {
        simulate_stress(&StressConfig { vehicles, ..StressConfig::default() })
    }

    #[test]
    fn deterministic_per_seed_and_plausible() {
        let config = StressConfig { vehicles: 15, ..StressConfig::default() };
        let f = simulate_stress(&config);
        assert_eq!(f, simulate_stress(&config), "same seed, same fleet");
        assert_ne!(f, simulate_stress(&StressConfig { seed: 7, ..config }));
        let cut_s = f.cut_day as f64 * SECONDS_PER_DAY;
        for v in &f.vehicles {
            assert_eq!(v.spec.validate(), Ok(()), "{}", v.vehicle_id);
            assert_eq!(v.truth.len(), 2 * v.spec.axles.len());
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
                assert!(t.end_unix_s <= cut_s);
                let start_day = (t.start_unix_s / SECONDS_PER_DAY).floor();
                assert_eq!(start_day, ((t.end_unix_s - 1.0) / SECONDS_PER_DAY).floor(), "a trip stays within its day");
            }
            assert!(v.inspections.iter().chain(v.inspections.iter()).all(|i| i.unix_s < cut_s));
            assert!(v.replacements.iter().all(|r| r.unix_s < cut_s));
        }
    }

    #[test]
    fn classes_mix_brakes_and_have_three_axles() {
        let classes = stress_classes();
        assert!(classes.len() >= 4);
        let simulator_names: Vec<&str> = crate::simulator::vehicle_classes().iter().map(|c| c.name).collect();
        assert!(classes.iter().all(|c| !simulator_names.contains(&c.name)), "names of its own");
        let drums = |c: &StressClass| c.axles.iter().filter(|a| a.brake.brake_type == BrakeType::Drum).count();
        assert!(classes.iter().any(|c| c.axles.len() == 3 && drums(c) >= 2));
        assert!(classes.iter().any(|c| drums(c) > 0 && drums(c) < c.axles.len()), "disc and drum on one vehicle");
        assert!(classes.iter().all(|c| (0.05..=0.2).contains(&c.rotor_to_pad_wear)));
    }

    #[test]
    fn workshop_habits_show_in_the_records() {
        let f = fleet(60);
        let mut same_hour = 0;
        let mut hours = std::collections::BTreeSet::new();
        let mut coarse_only = 0;
        let mut fine = 0;
        let mut rotor_jobs = 0;
        for v in &f.vehicles {
            for i in &v.inspections {
                hours.insert(((i.unix_s / 3600.0).rem_euclid(24.0)).floor() as i64);
                let halves = i.thickness_mm * 2.0;
                if (halves - halves.round()).abs() < 1e-9 { coarse_only += 1 } else { fine += 1 }
            }
            for r in &v.replacements {
                let measured_before = v.inspections.iter().any(|i| {
                    i.axle_index == r.axle_index && i.component == r.component && r.unix_s > i.unix_s && r.unix_s - i.unix_s <= 3600.0
                });
                same_hour += usize::from(measured_before);
                if r.component == Component::Disc {
                    rotor_jobs += 1;
                    // New pads with every rotor, each with its own record.
                    let pads = v.replacements.iter().filter(|p| {
                        p.axle_index == r.axle_index && p.component == Component::Friction && (p.unix_s - r.unix_s).abs() < 600.0
                    });
                    assert_eq!(pads.count(), 1, "{} {r:?}", v.vehicle_id);
                }
            }
        }
        assert!(same_hour >= 100, "same-hour inspect-then-replace: {same_hour}");
        assert!(rotor_jobs >= 5, "rotor replacements: {rotor_jobs}");
        assert!(hours.len() >= 8, "inspection hours {hours:?}");
        assert!(coarse_only > 0 && fine > 0, "0.5 mm and finer readings: {coarse_only} / {fine}");
    }

    #[test]
    fn unknown_starts_duty_changes_and_idle_spells_occur() {
        let f = fleet(100);
        let unknown = f
            .vehicles
            .iter()
            .filter(|v| {
                let first_inspection = v.inspections.first().map_or(f64::INFINITY, |i| i.unix_s);
                v.replacements.iter().all(|r| r.unix_s > first_inspection)
            })
            .count();
        assert!((25..=55).contains(&unknown), "{unknown} of 100 joined mid-life");
        let changed: Vec<&SimVehicle> = f.vehicles.iter().filter(|v| v.reassigned_day.is_some()).collect();
        assert!((15..=45).contains(&changed.len()), "{} of 100 changed route", changed.len());
        // Energy per active day before and after the change differs by more than 15 % on average.
        let mut shift = 0.0;
        for v in &changed {
            let change_s = v.reassigned_day.map_or(0.0, |d| d as f64 * SECONDS_PER_DAY);
            let mut per_day: [HashMap<i64, f64>; 2] = [HashMap::new(), HashMap::new()];
            for t in &v.trips {
                let side = usize::from(t.start_unix_s >= change_s);
                *per_day[side].entry((t.start_unix_s / SECONDS_PER_DAY) as i64).or_default() += t.friction_energy_j;
            }
            let mean = |m: &HashMap<i64, f64>| m.values().sum::<f64>() / m.len().max(1) as f64;
            shift += (mean(&per_day[1]) / mean(&per_day[0])).ln().abs();
        }
        assert!(shift / changed.len() as f64 > 0.15_f64.ln_1p(), "mean |log| shift {}", shift / changed.len() as f64);
        // Some vehicle outside the summer-break class is parked for two weeks or more.
        let parked = f.vehicles.iter().filter(|v| v.spec.vehicle_class != "school-shuttle").any(|v| {
            v.trips.windows(2).any(|w| w[1].start_unix_s - w[0].end_unix_s >= 14.0 * SECONDS_PER_DAY)
        });
        assert!(parked);
    }

    #[test]
    fn rotor_rates_follow_the_pads_of_the_same_vehicle() {
        let f = fleet(240);
        let cut = f.cut_day as f64;
        let worn_out = |t: &TrueCrossing| t.crossing_day.is_some_and(|d| d <= cut);
        // log rates relative to their (class, axle) mean; pad and rotor of one brake paired
        // (parts worn out before the cut have no rate of their own after it and are left out).
        let mut groups: HashMap<(String, u32), Vec<(f64, f64)>> = HashMap::new();
        let mut ratios = Vec::new();
        for v in &f.vehicles {
            for pad in v.truth.iter().filter(|t| t.component == Component::Friction && !worn_out(t)) {
                let rotor = v.truth.iter().find(|t| t.component == Component::Disc && t.axle_index == pad.axle_index);
                let Some(rotor) = rotor.filter(|r| !worn_out(r)) else { continue };
                ratios.push(rotor.true_rate_mm_per_mj / pad.true_rate_mm_per_mj);
                groups
                    .entry((v.spec.vehicle_class.clone(), pad.axle_index))
                    .or_default()
                    .push((pad.true_rate_mm_per_mj.ln(), rotor.true_rate_mm_per_mj.ln()));
            }
        }
        ratios.sort_by(f64::total_cmp);
        let median_ratio = ratios[ratios.len() / 2];
        assert!((0.05..=0.2).contains(&median_ratio), "rotors wear {median_ratio} as fast as pads");
        let mut pairs = Vec::new();
        for values in groups.values() {
            let n = values.len() as f64;
            let (mx, my) = (values.iter().map(|p| p.0).sum::<f64>() / n, values.iter().map(|p| p.1).sum::<f64>() / n);
            pairs.extend(values.iter().map(|(x, y)| (x - mx, y - my)));
        }
        let sxy: f64 = pairs.iter().map(|(x, y)| x * y).sum();
        let sxx: f64 = pairs.iter().map(|(x, _)| x * x).sum();
        let syy: f64 = pairs.iter().map(|(_, y)| y * y).sum();
        let correlation = sxy / (sxx * syy).sqrt();
        assert!(correlation > 0.4, "pad-rotor log-rate correlation {correlation}");
    }

    #[test]
    fn wear_per_mj_rises_with_brake_temperature() {
        assert_eq!(thermal_multiplier(20.0), 1.0);
        assert_eq!(thermal_multiplier(WEAR_KNEE_C), 1.0);
        assert!((thermal_multiplier(WEAR_KNEE_C + 100.0) - 1.8).abs() < 1e-12);
        assert!(thermal_multiplier(WEAR_KNEE_C + 200.0) > thermal_multiplier(WEAR_KNEE_C + 100.0));
    }
}
