//! The wear fit's closed form ([`brakeledger_models::line_fit`]) against the general fit through
//! linfa (`fit_part_any_sign_by_qr`, the reference) on every part of two simulated fleets
//! (invented data: they only supply realistic designs; the reference values come from linfa's
//! Householder QR), under the settings that change the design: recency weights or none, a
//! bedding intercept or none. The two must agree to near machine precision.

use brakeledger_models::calibration::vehicle_inputs;
use brakeledger_models::simulator::{simulate, SimConfig, SimulatedFleet};
use brakeledger_models::stress_fleet::{simulate_stress, StressConfig};
use brakeledger_models::wear_fit::{fit_part_any_sign, fit_part_any_sign_by_qr, fit_part_rate};
use brakeledger_models::domain::Component;
use brakeledger_models::{ForecastSettings, PartEvent, PartEventKind, PartHistory, WearFit};

fn histories(fleet: &SimulatedFleet) -> Vec<PartHistory> {
    fleet.vehicles.iter().flat_map(|v| vehicle_inputs(v, fleet.start_day, fleet.cut_day, 120)).map(|(_, i)| i.history).collect()
}

/// |a − b| relative to `scale`.
fn close(a: f64, b: f64, scale: f64) -> bool {
    a == b || (a - b).abs() <= 1e-10 * scale.abs().max(f64::MIN_POSITIVE)
}

/// A thickness far below any gauge's resolution (0.1 mm; common practice, no source): where a
/// fit is exact (identical readings), both paths leave residuals of rounding size only, and
/// quantities are compared on the scale this thickness gives them rather than on their own.
const THICKNESS_FLOOR_MM: f64 = 1e-3;

fn assert_same(lean: &WearFit, reference: &WearFit, what: &str) {
    assert_eq!(lean.coefficient_names, reference.coefficient_names, "{what}");
    assert_eq!((lean.inspections_used, lean.cycles_used), (reference.inspections_used, reference.cycles_used), "{what}");
    assert_eq!(lean.degrees_of_freedom, reference.degrees_of_freedom, "{what}");
    assert_eq!(lean.hot_fraction, reference.hot_fraction, "{what}");
    let floor = THICKNESS_FLOOR_MM;
    let s2 = reference.residual_sd_mm.powi(2);
    // (XᵀX)⁻¹ diagonal, and the scale of coefficient j: itself, its SE, or the change that
    // moves the line by the floor thickness.
    let unscaled = |j: usize| if j == 0 { reference.rate_variance_per_residual_variance } else { reference.covariance[j][j] / s2 };
    let coefficient_scale = |j: usize| reference.coefficients[j].abs().max(reference.covariance[j][j].sqrt()).max(floor * unscaled(j).sqrt());
    let rate_scale = coefficient_scale(0);
    let rss_scale = reference.residual_sum_squares_mm2.max(floor * floor * f64::from(reference.inspections_used));
    let pairs = [
        ("rate", lean.rate_mm_per_mj, reference.rate_mm_per_mj, rate_scale),
        ("rate SE", lean.rate_stderr_mm_per_mj, reference.rate_stderr_mm_per_mj, rate_scale),
        ("residual SD", lean.residual_sd_mm, reference.residual_sd_mm, reference.residual_sd_mm.max(floor)),
        ("gᵀ(XᵀX)⁻¹g", lean.rate_variance_per_residual_variance, reference.rate_variance_per_residual_variance, reference.rate_variance_per_residual_variance),
        ("RSS", lean.residual_sum_squares_mm2, reference.residual_sum_squares_mm2, rss_scale),
        // A sum of products of either sign: compared on the scale of the RSS that bounds it.
        ("lag products", lean.residual_lag_product_sum_mm2, reference.residual_lag_product_sum_mm2, rss_scale),
    ];
    for (name, a, b, scale) in pairs {
        assert!(close(a, b, scale), "{what}: {name} {a:e} (closed form) vs {b:e} (linfa)\n{lean:?}\n{reference:?}");
    }
    for (j, (a, b)) in lean.coefficients.iter().zip(&reference.coefficients).enumerate() {
        assert!(close(*a, *b, coefficient_scale(j)), "{what}: coefficient {j} {a:e} vs {b:e}");
    }
    for (a, row) in reference.covariance.iter().enumerate() {
        for (b, expected) in row.iter().enumerate() {
            let scale = (reference.covariance[a][a] * reference.covariance[b][b]).sqrt().max(floor * floor * (unscaled(a) * unscaled(b)).sqrt());
            assert!(close(lean.covariance[a][b], *expected, scale), "{what}: covariance ({a}, {b}) {:e} vs {expected:e}", lean.covariance[a][b]);
        }
    }
}

#[test]
fn closed_form_wear_fit_matches_linfa_on_simulated_fleets() {
    let fleets = [
        ("simulator", simulate(&SimConfig { vehicles: 60, future_days: 1, ..SimConfig::default() })),
        ("stress fleet", simulate_stress(&StressConfig { vehicles: 60, future_days: 1, ..StressConfig::default() })),
    ];
    let variants = [
        ("defaults", ForecastSettings::default()),
        ("no recency weights", ForecastSettings { fit_half_life_days: f64::INFINITY, disc_fit_half_life_days: f64::INFINITY, ..ForecastSettings::default() }),
        ("bedding intercept", ForecastSettings { bedding_intercept: true, ..ForecastSettings::default() }),
    ];
    let (mut fitted, mut intercepts) = (0, 0);
    for (fleet_name, fleet) in &fleets {
        let histories = histories(fleet);
        for (settings_name, settings) in &variants {
            for (i, history) in histories.iter().enumerate() {
                let what = format!("{fleet_name}, {settings_name}, part {i}");
                // The fit without coefficients is the full fit stripped of them, bit for bit.
                let stripped = fit_part_any_sign(history, settings).map(WearFit::without_coefficients);
                assert_eq!(format!("{:?}", fit_part_rate(history, settings)), format!("{stripped:?}"), "{what}");
                match (fit_part_any_sign(history, settings), fit_part_any_sign_by_qr(history, settings)) {
                    (Ok(lean), Ok(reference)) => {
                        assert_same(&lean, &reference, &what);
                        fitted += 1;
                        intercepts += usize::from(lean.coefficients.len() > 1);
                    }
                    (Err(a), Err(b)) => assert_eq!(a.to_string(), b.to_string(), "{what}"),
                    (a, b) => panic!("{what}: closed form {a:?} but linfa {b:?}"),
                }
            }
        }
    }
    // The comparison covered lines through the origin and lines with intercepts.
    assert!(intercepts > 100 && fitted - intercepts > 100, "{fitted} fits, {intercepts} with intercepts");
}

/// One part fitted new (30 mm) at day 19 000 and inspected four times (invented readings).
fn weighted_history(component: Component) -> PartHistory {
    let event = |day: f64, cumulative_energy_mj: f64, kind: PartEventKind| PartEvent { day, cumulative_energy_mj, cumulative_hot_energy_mj: 0.0, kind };
    let mut events = vec![event(19_000.0, 0.0, PartEventKind::Replacement { new_thickness_mm: 30.0 })];
    for (day, energy, thickness_mm) in [(19_100.0, 4_000.0, 29.6), (19_300.0, 11_000.0, 29.1), (19_500.0, 18_500.0, 28.4), (19_700.0, 26_000.0, 28.0)] {
        events.push(event(day, energy, PartEventKind::Inspection { thickness_mm }));
    }
    PartHistory { axle_index: 1, component, new_thickness_mm: 30.0, min_thickness_mm: 2.0, events }
}

/// A rotor's fit weighs older readings by its own half-life (730 days), a pad's by 180 days:
/// weighted least squares through the origin with weights 2^(−age/h), against numpy 2.4
/// (`np.linalg.lstsq` on √w-scaled rows, s² = Σwe²/(n − 1), se = √(s²/Σwx²); the script in
/// `tests/data/reference-scripts/wls_half_life.py`). The same readings give each part its own rate.
#[test]
fn each_component_fits_with_its_own_recency_half_life() {
    let settings = ForecastSettings::default();
    assert_eq!((settings.fit_half_life_days, settings.disc_fit_half_life_days), (180.0, 730.0));
    for (component, rate, residual_sd, stderr) in [
        (Component::Disc, 8.008328918351834e-05, 0.08601566269273783, 2.653403982236199e-06),
        (Component::Friction, 7.887073254827192e-05, 0.06503274412743924, 2.2150762954460017e-06),
    ] {
        let history = weighted_history(component);
        for fit in [fit_part_any_sign(&history, &settings).expect("fit"), fit_part_any_sign_by_qr(&history, &settings).expect("fit")] {
            for (name, got, reference) in [("rate", fit.rate_mm_per_mj, rate), ("residual SD", fit.residual_sd_mm, residual_sd), ("standard error", fit.rate_stderr_mm_per_mj, stderr)] {
                assert!((got / reference - 1.0).abs() < 1e-10, "{component:?} {name}: {got} vs numpy {reference}");
            }
        }
    }
}
