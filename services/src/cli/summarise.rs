//! `brakeledger summarise`: a speed trace (CSV: `time_s`, `speed_m_per_s`, optional
//! `elevation_m`) turned into a trip summary with the energy balance of
//! `brakeledger_models::physics::summarise_trace`, for integrations that log speed but not
//! braking energy. Runs locally; no server needed.

use std::io::{Read, Write};
use std::path::PathBuf;

use anyhow::Context;
use brakeledger_models::physics::{summarise_trace, BrakingVehicle, TracePoint, TripEnergy};
use chrono::{DateTime, Utc};
use serde::Serialize;

use crate::cli::dates::parse_instant;
use crate::cli::trip_file::{LineIndex, TripJson};

/// Longer description of `summarise`.
pub const SUMMARISE_LONG_ABOUT: &str = "\
Turn a speed trace into a trip summary: distance, friction braking energy (in total and per
axle), energy taken by regenerative braking and by a retarder or engine brake, brake
applications and the energy of hot stops. The trace is a CSV file with a header row and the
columns time_s (s, increasing), speed_m_per_s (m/s) and, optionally, elevation_m (m). The
vehicle is described by flags; the defaults are round figures for a two-axle heavy vehicle
(common practice, no source), to be replaced by the vehicle's own.

Braking energy goes first to regeneration (--regen-max-power-w), then to the retarder
(--retarder-max-power-w), and the friction brakes take the rest: only that rest is the
friction energy the wear forecasts use. The friction energy of each moment is split between
the axles with weight transfer: --axle-shares is the split at rest, and the harder the
vehicle decelerates (or the steeper it descends), the more goes to the front axle, by
deceleration x --cg-height-m / (g x --wheelbase-m). --cg-height-m 0 keeps the split fixed.

With --vehicle, --trip-id and --start-time the output is one line in the JSON Lines trip
format that `brakeledger push-trips` reads, so traces can be summarised into a file and sent.";

/// Examples of `summarise`.
pub const SUMMARISE_EXAMPLES: &str = "\
Examples:
  brakeledger summarise trace.csv --mass-kg 18000 --axle-shares 0.6,0.4
  brakeledger summarise trace.csv --mass-kg 18000 --axle-shares 0.6,0.4 --regen-max-power-w 150000 \\
      --fleet north --vehicle bus-17 --trip-id 2025-03-01-a --start-time 2025-03-01T07:10:00Z >> trips.jsonl
  brakeledger summarise trace.csv --mass-kg 26000 --axle-shares 0.35,0.65 --retarder-max-power-w 250000 \\
      --cg-height-m 1.6 --wheelbase-m 4.6

trace.csv:
  time_s,speed_m_per_s,elevation_m
  0,0,112.0
  1,1.4,112.0
  2,2.9,112.1";

/// Flags of `summarise`.
#[derive(Debug, clap::Args)]
pub struct SummariseArgs {
    /// The speed-trace CSV file.
    pub file: PathBuf,
    /// Vehicle mass, kg.
    #[arg(long)]
    pub mass_kg: f64,
    /// Share of friction braking energy per axle at rest (no weight transfer), front first,
    /// summing to 1 (e.g. 0.6,0.4).
    #[arg(long, value_delimiter = ',', required = true)]
    pub axle_shares: Vec<f64>,
    /// Height of the centre of gravity above the road, m, for weight transfer under braking;
    /// 0 keeps the --axle-shares split fixed. Default: a round figure for a laden two-axle
    /// heavy vehicle (common practice, no source).
    #[arg(long, default_value_t = 1.2)]
    pub cg_height_m: f64,
    /// Wheelbase, m: front axle to the rear axle (or the centre of the rear axle group).
    /// Default: a round figure for a two-axle heavy vehicle (common practice, no source).
    #[arg(long, default_value_t = 5.5)]
    pub wheelbase_m: f64,
    /// Rotating-mass factor (1 or more; about 1.03-1.10 for trucks and buses).
    #[arg(long, default_value_t = 1.05)]
    pub rotating_mass_factor: f64,
    /// Rolling-resistance coefficient.
    #[arg(long, default_value_t = 0.007)]
    pub rolling_resistance: f64,
    /// Drag coefficient times frontal area, m².
    #[arg(long, default_value_t = 6.0)]
    pub drag_area_m2: f64,
    /// Air density, kg/m³.
    #[arg(long, default_value_t = 1.2)]
    pub air_density_kg_per_m3: f64,
    /// Largest regenerative braking power, W (0 without regeneration).
    #[arg(long, default_value_t = 0.0)]
    pub regen_max_power_w: f64,
    /// Largest braking power of a retarder or engine brake, W (0 without one). It brakes after
    /// regeneration and before the friction brakes; its energy is reported as
    /// retarder_energy_j and is not part of friction_energy_j.
    #[arg(long, default_value_t = 0.0)]
    pub retarder_max_power_w: f64,
    /// Mass of one rotor or drum, kg: one value for every axle, or one per axle.
    #[arg(long, value_delimiter = ',', default_value = "35")]
    pub rotor_mass_kg: Vec<f64>,
    /// Specific heat of the rotor or drum material, J/(kg·K).
    #[arg(long, default_value_t = 490.0)]
    pub rotor_specific_heat_j_per_kg_k: f64,
    /// Fraction of friction heat going into the rotor or drum (0..1).
    #[arg(long, default_value_t = 0.9)]
    pub rotor_heat_share: f64,
    /// A stop counts as hot when it raises a rotor's bulk temperature by more than this, K.
    #[arg(long, default_value_t = 100.0)]
    pub hot_rise_k: f64,
    /// Fleet of the trip (for the JSON Lines record).
    #[arg(long)]
    pub fleet: Option<String>,
    /// Vehicle of the trip (for the JSON Lines record).
    #[arg(long, requires_all = ["trip_id", "start_time"])]
    pub vehicle: Option<String>,
    /// Trip identifier (for the JSON Lines record).
    #[arg(long, requires = "vehicle")]
    pub trip_id: Option<String>,
    /// When the trace's first sample was taken, ISO 8601 with offset.
    #[arg(long, value_parser = parse_instant, requires = "vehicle")]
    pub start_time: Option<DateTime<Utc>>,
    /// Indented JSON instead of one line.
    #[arg(long)]
    pub pretty: bool,
}

/// The summary printed without trip identity: the trace's duration and the models' trip energy.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TraceSummary {
    /// Duration of the trace, s.
    pub duration_s: f64,
    /// Distance, energies (J), per-axle split and brake applications.
    #[serde(flatten)]
    pub energy: TripEnergy,
}

/// Reads a speed trace; every bad line is reported with its number.
pub fn read_trace(mut reader: impl Read) -> anyhow::Result<Vec<TracePoint>> {
    let mut text = Vec::new();
    reader.read_to_end(&mut text).context("reading the trace")?;
    let lines = LineIndex::new(&text);
    let mut csv = csv::ReaderBuilder::new().trim(csv::Trim::All).from_reader(text.as_slice());
    let headers: Vec<String> = csv.headers().context("reading the header row")?.iter().map(|h| h.to_ascii_lowercase()).collect();
    let column = |name: &str| headers.iter().position(|h| h == name);
    let (Some(time), Some(speed)) = (column("time_s"), column("speed_m_per_s")) else {
        anyhow::bail!("line 1: the header row needs the columns time_s and speed_m_per_s (found: {})", headers.join(", "));
    };
    let elevation = column("elevation_m");
    let mut points = Vec::new();
    let mut problems = Vec::new();
    let mut previous_time = f64::NEG_INFINITY;
    for record in csv.records() {
        let record = match record {
            Ok(r) => r,
            Err(e) => {
                problems.push(format!("line {}: {e}", e.position().map(|p| lines.line_of(p.byte(), &text)).unwrap_or(0)));
                continue;
            }
        };
        let line = record.position().map(|p| lines.line_of(p.byte(), &text)).unwrap_or(0);
        let mut number = |name: &str, index: usize| -> Option<f64> {
            let text = record.get(index).unwrap_or_default();
            match text.parse::<f64>() {
                Ok(v) if v.is_finite() => Some(v),
                _ => {
                    problems.push(format!("line {line}, {name}: '{text}' is not a number"));
                    None
                }
            }
        };
        let t = number("time_s", time);
        let v = number("speed_m_per_s", speed);
        let h = match elevation.map(|i| (i, record.get(i).unwrap_or_default())) {
            Some((i, text)) if !text.is_empty() => number("elevation_m", i).map(Some),
            _ => Some(None),
        };
        let (Some(t), Some(v), Some(h)) = (t, v, h) else { continue };
        if t <= previous_time {
            problems.push(format!("line {line}, time_s: {t} does not come after the previous sample ({previous_time})"));
            continue;
        }
        if v < 0.0 {
            problems.push(format!("line {line}, speed_m_per_s: {v} is negative"));
            continue;
        }
        previous_time = t;
        points.push(TracePoint { time_s: t, speed_m_per_s: v, elevation_m: h });
    }
    if !problems.is_empty() {
        let shown = problems.len().min(50);
        let more = if problems.len() > shown { format!("\n  ... and {} more", problems.len() - shown) } else { String::new() };
        anyhow::bail!("{} problem(s) in the trace:\n  {}{more}", problems.len(), problems[..shown].join("\n  "));
    }
    if points.len() < 2 {
        anyhow::bail!("the trace needs at least two samples");
    }
    Ok(points)
}

impl SummariseArgs {
    /// The vehicle the flags describe, checked.
    pub fn vehicle(&self) -> anyhow::Result<BrakingVehicle> {
        let positive = [
            ("--mass-kg", self.mass_kg),
            ("--rotating-mass-factor", self.rotating_mass_factor),
            ("--rotor-specific-heat-j-per-kg-k", self.rotor_specific_heat_j_per_kg_k),
            ("--wheelbase-m", self.wheelbase_m),
        ];
        for (flag, value) in positive {
            if !(value.is_finite() && value > 0.0) {
                anyhow::bail!("{flag} must be greater than 0 (got {value})");
            }
        }
        let non_negative = [
            ("--rolling-resistance", self.rolling_resistance),
            ("--drag-area-m2", self.drag_area_m2),
            ("--air-density-kg-per-m3", self.air_density_kg_per_m3),
            ("--regen-max-power-w", self.regen_max_power_w),
            ("--retarder-max-power-w", self.retarder_max_power_w),
            ("--hot-rise-k", self.hot_rise_k),
            ("--cg-height-m", self.cg_height_m),
        ];
        for (flag, value) in non_negative {
            if !(value.is_finite() && value >= 0.0) {
                anyhow::bail!("{flag} must be 0 or more (got {value})");
            }
        }
        if !(0.0..=1.0).contains(&self.rotor_heat_share) {
            anyhow::bail!("--rotor-heat-share must be between 0 and 1 (got {})", self.rotor_heat_share);
        }
        let sum: f64 = self.axle_shares.iter().sum();
        if self.axle_shares.iter().any(|s| !(s.is_finite() && *s >= 0.0)) || (sum - 1.0).abs() > 0.001 {
            anyhow::bail!("--axle-shares must be numbers of 0 or more summing to 1 (got {:?}, sum {sum})", self.axle_shares);
        }
        let rotor_mass_kg = match self.rotor_mass_kg.as_slice() {
            [one] => vec![*one; self.axle_shares.len()],
            many if many.len() == self.axle_shares.len() => many.to_vec(),
            many => anyhow::bail!("--rotor-mass-kg needs one value or one per axle ({} axles, {} values)", self.axle_shares.len(), many.len()),
        };
        if rotor_mass_kg.iter().any(|m| !(m.is_finite() && *m > 0.0)) {
            anyhow::bail!("--rotor-mass-kg values must be greater than 0");
        }
        Ok(BrakingVehicle {
            mass_kg: self.mass_kg,
            rotating_mass_factor: self.rotating_mass_factor,
            rolling_resistance: self.rolling_resistance,
            drag_area_m2: self.drag_area_m2,
            air_density_kg_per_m3: self.air_density_kg_per_m3,
            regen_max_power_w: self.regen_max_power_w,
            retarder_max_power_w: self.retarder_max_power_w,
            axle_shares: self.axle_shares.clone(),
            cg_height_m: self.cg_height_m,
            wheelbase_m: self.wheelbase_m,
            rotor_mass_kg,
            rotor_specific_heat_j_per_kg_k: self.rotor_specific_heat_j_per_kg_k,
            rotor_heat_share: self.rotor_heat_share,
            hot_rise_threshold_k: self.hot_rise_k,
        })
    }
}

/// Runs `summarise`.
pub fn summarise(args: &SummariseArgs, out: &mut impl Write) -> anyhow::Result<()> {
    let vehicle = args.vehicle()?;
    let file = std::fs::File::open(&args.file).with_context(|| format!("opening {}", args.file.display()))?;
    let trace = read_trace(std::io::BufReader::new(file)).with_context(|| format!("reading {}", args.file.display()))?;
    let energy = summarise_trace(&trace, &vehicle);
    let duration_s = trace.last().map(|p| p.time_s).unwrap_or(0.0) - trace.first().map(|p| p.time_s).unwrap_or(0.0);
    let json = match (&args.vehicle, &args.trip_id, args.start_time) {
        (Some(vehicle_id), Some(trip_id), Some(start)) => {
            let end = start + chrono::Duration::milliseconds((duration_s * 1000.0).round() as i64);
            let record = TripJson {
                fleet_id: args.fleet.clone(),
                vehicle_id: vehicle_id.clone(),
                trip_id: trip_id.clone(),
                start_time: start.to_rfc3339_opts(chrono::SecondsFormat::Secs, true),
                end_time: end.to_rfc3339_opts(chrono::SecondsFormat::Millis, true),
                distance_m: energy.distance_m,
                friction_energy_j: energy.friction_energy_j,
                axle_energy_j: energy.axle_energy_j,
                brake_applications: energy.brake_applications,
                regen_energy_j: (args.regen_max_power_w > 0.0).then_some(energy.regen_energy_j),
                hot_energy_j: Some(energy.hot_energy_j),
                retarder_energy_j: (args.retarder_max_power_w > 0.0).then_some(energy.retarder_energy_j),
            };
            to_json(&record, args.pretty)?
        }
        _ => to_json(
            &TraceSummary { duration_s, energy },
            args.pretty,
        )?,
    };
    writeln!(out, "{json}")?;
    Ok(())
}

fn to_json(value: &impl Serialize, pretty: bool) -> serde_json::Result<String> {
    if pretty {
        serde_json::to_string_pretty(value)
    } else {
        serde_json::to_string(value)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::cli::trip_file::{read_trips, TripFormat};
    use crate::cli::{Cli, Command};
    use clap::Parser;

    fn args(extra: &[&str], file: &std::path::Path) -> SummariseArgs {
        let mut argv = vec!["brakeledger", "summarise"];
        let file = file.to_string_lossy().into_owned();
        argv.push(&file);
        argv.extend_from_slice(extra);
        match Cli::try_parse_from(argv).expect("parse").command {
            Command::Summarise(a) => a,
            other => panic!("wrong subcommand {other:?}"),
        }
    }

    /// A 15 000 kg vehicle braking from 20 m/s to rest on the level in 10 s, drag left out:
    /// ½·f·m·v² = ½·1.05·15 000·400 = 3.15 MJ, less rolling resistance over the 100 m stop
    /// (m·g·c_rr·s = 15 000·9.80665·0.007·100 ≈ 0.103 MJ).
    #[test]
    fn a_stop_becomes_a_trip_record_that_push_trips_reads_back() {
        let dir = tempfile::tempdir().expect("temp dir");
        let path = dir.path().join("trace.csv");
        let mut text = String::from("time_s,speed_m_per_s,elevation_m\n");
        for i in 0..=10 {
            text.push_str(&format!("{i},{},50\n", 20.0 - 2.0 * i as f64));
        }
        std::fs::write(&path, text).expect("write trace");
        let a = args(&["--mass-kg", "15000", "--axle-shares", "0.6,0.4", "--drag-area-m2", "0", "--fleet", "north", "--vehicle", "bus-1", "--trip-id", "s1", "--start-time", "2025-03-01T07:00:00Z"], &path);
        let mut out = Vec::new();
        summarise(&a, &mut out).expect("summarise");
        let line = String::from_utf8(out).expect("utf8");
        let trips = read_trips(line.as_bytes(), TripFormat::Jsonl, None).expect("the output is a valid trip line");
        let trip = &trips[0].trip;
        assert_eq!((trip.vehicle_id.as_str(), trip.trip_id.as_str(), trip.fleet_id.as_str()), ("bus-1", "s1", "north"));
        assert_eq!(trip.end_time.as_ref().map(|t| t.seconds), trip.start_time.as_ref().map(|t| t.seconds + 10));
        assert!((trip.distance_m - 100.0).abs() < 1e-9, "{}", trip.distance_m);
        let kinetic = 0.5 * 1.05 * 15_000.0 * 400.0;
        let rolling = 15_000.0 * 9.806_65 * 0.007 * 100.0;
        assert!((trip.friction_energy_j - (kinetic - rolling)).abs() < 1.0, "{}", trip.friction_energy_j);
        // Weight transfer at the default centre-of-gravity height and wheelbase: 2 m/s² moves
        // 2·1.2/(9.80665·5.5) = 0.044497 of the share to the front axle (Gillespie, ch. 3).
        assert!((trip.axle_energy_j[0] / trip.friction_energy_j - (0.6 + 2.0 * 1.2 / (9.806_65 * 5.5))).abs() < 1e-9);
        assert_eq!(trip.brake_applications, 1);
        assert_eq!(trip.regen_energy_j, None, "no regeneration configured");
        assert_eq!(trip.retarder_energy_j, None, "no retarder configured");
    }

    /// A retarder takes its share before the friction brakes, and the record says how much.
    /// Kinetic energy ½·f·m·v² (Halliday, Resnick & Walker, Fundamentals of Physics, ch. 7):
    /// the 15 t stop from 20 m/s (f = 1.05, no road losses) holds ½·1.05·15 000·20² = 3.15 MJ;
    /// its one-second interval i (speed 20 − 2i to 18 − 2i) brakes 15 750·(38 − 4i) J, i.e.
    /// 598.5 kJ down to 94.5 kJ (i = 8) and 31.5 kJ (i = 9). A 100 kW retarder takes 100 kJ in
    /// each of the first eight and all of the last two: 926 000 J, leaving 2 224 000 J.
    #[test]
    fn a_retarder_is_reported_and_left_out_of_the_friction_energy() {
        let dir = tempfile::tempdir().expect("temp dir");
        let path = dir.path().join("trace.csv");
        let mut text = String::from("time_s,speed_m_per_s\n");
        for i in 0..=10 {
            text.push_str(&format!("{i},{}\n", 20.0 - 2.0 * i as f64));
        }
        std::fs::write(&path, text).expect("write trace");
        let common = ["--mass-kg", "15000", "--axle-shares", "0.6,0.4", "--drag-area-m2", "0", "--rolling-resistance", "0", "--cg-height-m", "0"];
        let with = |extra: &[&str]| {
            let mut flags: Vec<&str> = common.to_vec();
            flags.extend_from_slice(extra);
            flags.extend_from_slice(&["--vehicle", "bus-1", "--trip-id", "s1", "--start-time", "2025-03-01T07:00:00Z", "--fleet", "north"]);
            let mut out = Vec::new();
            summarise(&args(&flags, &path), &mut out).expect("summarise");
            let trips = read_trips(out.as_slice(), TripFormat::Jsonl, None).expect("trip line");
            trips[0].trip.clone()
        };
        let plain = with(&[]);
        let retarded = with(&["--retarder-max-power-w", "100000"]);
        assert!((plain.friction_energy_j - 3.15e6).abs() < 1e-3, "{}", plain.friction_energy_j);
        assert_eq!(plain.retarder_energy_j, None);
        let retarder = retarded.retarder_energy_j.expect("retarder energy reported");
        assert!((retarder - 926_000.0).abs() < 1e-3, "{retarder}");
        assert!((retarded.friction_energy_j - 2_224_000.0).abs() < 1e-3, "{}", retarded.friction_energy_j);
    }
}
