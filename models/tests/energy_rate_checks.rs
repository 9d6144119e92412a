//! The daily-energy estimator against numpy 2.4.6 (a general-purpose reference library):
//!
//! ```text
//! e = np.array([10., 0., 30., 25., 0., 40., 35., 20.])   # oldest first, MJ/day
//! w = 2.0 ** (-np.arange(len(e))[::-1] / 3.0)              # half-life 3 days
//! m = np.average(e, weights=w)                              # 23.09862367882992
//! n_eff = w.sum()**2 / (w**2).sum()                         # 6.3286272161957005 (Kish)
//! var = np.average((e - m)**2, weights=w) * n_eff / (n_eff - 1)   # 218.87257065985318
//! ```

use brakeledger_models::energy_rate::estimate_energy_rate;

const DAYS: [f64; 8] = [10.0, 0.0, 30.0, 25.0, 0.0, 40.0, 35.0, 20.0];

#[test]
fn weighted_mean_and_variance_match_numpy() {
    let rate = estimate_energy_rate(&DAYS, 8, 3.0, 0.0).expect("energy");
    assert!((rate.mean_mj_per_day - 23.09862367882992).abs() < 1e-12, "{}", rate.mean_mj_per_day);
    assert!((rate.variance_mj2_per_day - 218.87257065985318).abs() < 1e-9, "{}", rate.variance_mj2_per_day);
    // Var(μ) = σ²/n_eff with no duty-change allowance.
    assert!((rate.mean_variance - 218.87257065985318 / 6.3286272161957005).abs() < 1e-9);
    assert_eq!((rate.days, rate.active_days), (8, 6));
}

#[test]
fn the_duty_change_allowance_adds_to_the_mean_variance_only() {
    let plain = estimate_energy_rate(&DAYS, 8, 3.0, 0.0).expect("energy");
    let allowed = estimate_energy_rate(&DAYS, 8, 3.0, 0.12).expect("energy");
    assert_eq!(plain.mean_mj_per_day, allowed.mean_mj_per_day);
    assert_eq!(plain.variance_mj2_per_day, allowed.variance_mj2_per_day);
    let expected = plain.mean_variance + (0.12 * plain.mean_mj_per_day).powi(2);
    assert!((allowed.mean_variance - expected).abs() < 1e-12 * expected);
}

#[test]
fn only_the_window_counts_and_an_idle_window_gives_none() {
    // Old heavy duty outside a 4-day window must not count.
    let mut days = vec![500.0; 10];
    days.extend([10.0, 10.0, 10.0, 10.0]);
    let rate = estimate_energy_rate(&days, 4, 60.0, 0.0).expect("energy");
    assert!((rate.mean_mj_per_day - 10.0).abs() < 1e-12);
    assert!(estimate_energy_rate(&[0.0; 30], 30, 60.0, 0.1).is_none());
    assert!(estimate_energy_rate(&[], 30, 60.0, 0.1).is_none());
}
