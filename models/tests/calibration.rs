//! Calibration on a simulated fleet (invented data, see `simulator`): the 80% band must cover
//! 75-85% of true crossing days, and the median's error must beat both baselines by the
//! margins the issue sets.

use brakeledger_models::calibration::{accuracy_report, forecast_fleet};
use brakeledger_models::simulator::{simulate, SimConfig};
use brakeledger_models::ForecastSettings;

#[test]
fn forecasts_are_calibrated_and_beat_both_baselines() {
    let config = SimConfig { vehicles: 240, ..SimConfig::default() };
    let fleet = simulate(&config);
    let settings = ForecastSettings::default();
    let forecasts = forecast_fleet(&fleet, &settings);
    let report = accuracy_report(&fleet, &forecasts, 0.8, settings.energy_window_days);
    println!("calibration on {} simulated vehicles (seed {}):\n{report}", config.vehicles, config.seed);
    assert!(report.parts >= 500, "only {} parts scored", report.parts);
    assert!((0.75..=0.85).contains(&report.band_coverage), "80% band covers {:.3}", report.band_coverage);
    assert!(report.median_mae_days <= 0.5 * report.mileage_baseline_mae_days, "vs mileage: {report}");
    assert!(report.median_mae_days <= 2.0 / 3.0 * report.odometer_baseline_mae_days, "vs odometer: {report}");
}
