//! How far a change to the due-date computation moves the bands: writes the 10 %, 50 % and
//! 90 % due days of every dated part of two invented fleets (the simulator on tuning seed 1,
//! 8,000 parts; the stress fleet on tuning seed 101), then compares two such files.
//!
//! ```sh
//! cargo run --release -p brakeledger-models --example band_shift -- write before.txt
//! # ... change the code ...
//! cargo run --release -p brakeledger-models --example band_shift -- write after.txt
//! cargo run --release -p brakeledger-models --example band_shift -- compare before.txt after.txt
//! ```
//!
//! `compare` prints, per fleet, how many parts have any of their 99 quantiles changed, and per
//! probability the median, 95th percentile and largest `|Δ|` in days and relative to the
//! earlier date's distance from today, over the parts dated (and not due now) in both files. Used for BENCHMARKS.md ("Forecast refresh against
//! PostgreSQL"). Only tuning seeds: the test seeds of the calibration suite stay unseen.

#![allow(missing_docs)]

use std::collections::BTreeMap;
use std::fmt::Write as _;

use brakeledger_models::calibration::forecast_fleet;
use brakeledger_models::simulator::{simulate, SimConfig, SimulatedFleet};
use brakeledger_models::stress_fleet::{simulate_stress, StressConfig};
use brakeledger_models::ForecastSettings;

/// The probabilities compared, as indices into the 99 quantiles (0.10, 0.50, 0.90).
const PROBABILITIES: [(usize, &str); 3] = [(9, "10 %"), (49, "50 %"), (89, "90 %")];

fn fleets() -> Vec<(&'static str, SimulatedFleet)> {
    // About 4.5 dated parts per simulated vehicle: 1,800 vehicles give a little over 8,000.
    vec![
        ("simulator seed 1", simulate(&SimConfig { seed: 1, vehicles: 1_800, ..SimConfig::default() })),
        ("stress fleet seed 101", simulate_stress(&StressConfig { seed: 101, vehicles: 800, ..StressConfig::default() })),
    ]
}

/// One line per dated part: fleet, part, today, the three due days (bits, so nothing rounds).
fn write(path: &str) -> Result<(), String> {
    let settings = ForecastSettings::default();
    let mut out = String::new();
    for (name, fleet) in fleets() {
        let forecasts: BTreeMap<_, _> = forecast_fleet(&fleet, &settings)
            .into_iter()
            .map(|(k, d)| (format!("{}/{}/{:?}", k.vehicle_id, k.axle_index, k.component), d))
            .collect();
        for (part, due) in forecasts.into_iter().take(8_000) {
            let q = &due.quantile_days;
            // All 99 quantiles' bits folded into one number (FNV-1a), to tell whether any moved.
            let all = q.iter().fold(0xcbf2_9ce4_8422_2325u64, |h, d| (h ^ d.to_bits()).wrapping_mul(0x0000_0100_0000_01b3));
            let _ = writeln!(out, "{name}\t{part}\t{}\t{}\t{}\t{}\t{all}", fleet.cut_day, q[9].to_bits(), q[49].to_bits(), q[89].to_bits());
        }
    }
    std::fs::write(path, out).map_err(|e| format!("{path}: {e}"))
}

type Rows = BTreeMap<(String, String), (f64, [f64; 3], u64)>;

fn read(path: &str) -> Result<Rows, String> {
    let text = std::fs::read_to_string(path).map_err(|e| format!("{path}: {e}"))?;
    text.lines()
        .map(|line| {
            let f: Vec<&str> = line.split('\t').collect();
            let bits = |i: usize| f.get(i).and_then(|s| s.parse::<u64>().ok()).map(f64::from_bits).ok_or(format!("bad line: {line}"));
            let today: f64 = f.get(2).and_then(|s| s.parse().ok()).ok_or(format!("bad line: {line}"))?;
            let all: u64 = f.get(6).and_then(|s| s.parse().ok()).ok_or(format!("bad line: {line}"))?;
            Ok(((f[0].to_owned(), f[1].to_owned()), (today, [bits(3)?, bits(4)?, bits(5)?], all)))
        })
        .collect()
}

fn percentile(sorted: &[f64], p: f64) -> f64 {
    sorted.get(((sorted.len() as f64 - 1.0) * p).round() as usize).copied().unwrap_or(f64::NAN)
}

fn compare(before: &str, after: &str) -> Result<(), String> {
    let (a, b) = (read(before)?, read(after)?);
    let names: Vec<String> = a.keys().map(|k| k.0.clone()).collect::<std::collections::BTreeSet<_>>().into_iter().collect();
    println!("| fleet | parts | due day | |Δ| days: median / 95th pct / largest | |Δ| relative to the earlier date's days from today: median / 95th pct / largest |");
    println!("|---|---|---|---|---|");
    for name in names {
        // Parts dated in both and not due now (a due-now part has every quantile at today).
        let both: Vec<(f64, [f64; 3], [f64; 3], bool)> = a
            .iter()
            .filter(|(k, _)| k.0 == name)
            .filter_map(|(k, (today, qa, all_a))| b.get(k).map(|(_, qb, all_b)| (*today, *qa, *qb, all_a != all_b)))
            .collect();
        let moved = both.iter().filter(|p| p.3).count();
        println!("({name}: {moved} of {} parts dated in both have any of their 99 quantiles changed)", both.len());
        let pairs: Vec<(f64, [f64; 3], [f64; 3])> =
            both.into_iter().filter(|(today, qa, _, _)| qa[0] > *today).map(|(t, qa, qb, _)| (t, qa, qb)).collect();
        for (column, (_, label)) in PROBABILITIES.iter().enumerate() {
            let mut days: Vec<f64> = pairs.iter().map(|(_, qa, qb)| (qa[column] - qb[column]).abs()).collect();
            let mut relative: Vec<f64> = pairs.iter().map(|(t, qa, qb)| (qa[column] - qb[column]).abs() / (qa[column] - t)).collect();
            days.sort_by(f64::total_cmp);
            relative.sort_by(f64::total_cmp);
            println!(
                "| {name} | {} | {label} | {:.2} / {:.2} / {:.2} | {:.2e} / {:.2e} / {:.2e} |",
                pairs.len(),
                percentile(&days, 0.5),
                percentile(&days, 0.95),
                days.last().copied().unwrap_or(f64::NAN),
                percentile(&relative, 0.5),
                percentile(&relative, 0.95),
                relative.last().copied().unwrap_or(f64::NAN),
            );
        }
        let only = a.keys().filter(|k| k.0 == name && !b.contains_key(k)).count() + b.keys().filter(|k| k.0 == name && !a.contains_key(k)).count();
        if only > 0 {
            println!("({name}: {only} parts dated in one file only)");
        }
    }
    Ok(())
}

fn main() {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let result = match args.iter().map(String::as_str).collect::<Vec<_>>().as_slice() {
        ["write", path] => write(path),
        ["compare", before, after] => compare(before, after),
        _ => Err("usage: band_shift write FILE | band_shift compare BEFORE AFTER".to_owned()),
    };
    if let Err(e) = result {
        eprintln!("{e}");
        std::process::exit(2);
    }
}
