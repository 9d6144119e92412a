//! Property tests of the model's invariants.

use brakeledger_models::forecast::DueDistribution;
use brakeledger_models::{fit_part, forecast_part, ForecastSettings};
use proptest::prelude::*;

use crate::forecast_behaviour::{energy, inspection, pad, prior, replacement};

fn few_draws() -> ForecastSettings {
    ForecastSettings { monte_carlo_draws: 400, ..ForecastSettings::default() }
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(64))]

    /// A noiseless history (thickness = new − k·energy) gives back k.
    #[test]
    fn fit_recovers_a_noiseless_rate(k in 1e-5f64..2e-3, steps in proptest::collection::vec(500.0f64..5000.0, 2..8)) {
        let mut events = vec![replacement(19_000.0, 0.0)];
        let mut e = 0.0;
        for (i, s) in steps.iter().enumerate() {
            e += s;
            events.push(inspection(19_001.0 + i as f64 * 30.0, e, 22.0 - k * e));
        }
        let fit = fit_part(&pad(events), &ForecastSettings::default()).expect("fit");
        prop_assert!((fit.rate_mm_per_mj - k).abs() <= 1e-9 * k, "{} vs {}", fit.rate_mm_per_mj, k);
        prop_assert!(fit.residual_sd_mm < 1e-9);
    }

    /// Each reported quantile is a quantile of the draws: the share of draws at or below the
    /// p-quantile is at least p, and the share strictly below it at most p (the definition of a
    /// sample quantile; Hyndman & Fan 1996, The American Statistician 50:361). Draws are given
    /// unsorted, so a quantile read off the wrong position fails.
    #[test]
    fn reported_quantiles_are_quantiles_of_the_draws(draws in proptest::collection::vec(-1e4f64..1e5, 1..300)) {
        let due = DueDistribution::from_draws(draws.clone()).expect("draws");
        prop_assert_eq!(due.quantile_days.len(), 99);
        let n = draws.len() as f64;
        for (i, q) in due.quantile_days.iter().enumerate() {
            let p = (i + 1) as f64 / 100.0;
            let at_or_below = draws.iter().filter(|d| **d <= *q).count() as f64 / n;
            let below = draws.iter().filter(|d| **d < *q).count() as f64 / n;
            // Interpolation between neighbours allows one draw's worth of slack.
            prop_assert!(at_or_below + 1.0 / n >= p, "p = {p}: {at_or_below} at or below {q}");
            prop_assert!(below - 1.0 / n <= p, "p = {p}: {below} below {q}");
        }
    }

    /// The forecast's due quantiles are non-decreasing and the band widens with the level.
    #[test]
    fn forecast_band_widens_with_level(t1 in 10.0f64..20.0, wear in 1.0f64..6.0, level in 0.5f64..0.9) {
        let h = pad(vec![replacement(19_700.0, 0.0), inspection(19_800.0, 8000.0, t1), inspection(19_900.0, 16_000.0, t1 - wear)]);
        let o = forecast_part(&h, None, Some(&prior()), &energy(), 20_000.0, 20_000.0, &few_draws());
        let due = o.due.expect("date");
        prop_assert!(due.quantile_days.windows(2).all(|w| w[0] <= w[1]));
        let (l1, _, h1) = due.band(level);
        let (l2, _, h2) = due.band((level + 0.08).min(0.98));
        prop_assert!(l2 <= l1 && h1 <= h2);
        prop_assert!(o.current_thickness_low_mm <= o.current_thickness_mm && o.current_thickness_mm <= o.current_thickness_high_mm);
    }

    /// Thinner measured pads (same wear between inspections) fall due no later.
    #[test]
    fn due_date_moves_earlier_when_thickness_drops(t1 in 12.0f64..20.0, drop in 0.5f64..5.0) {
        let history = |offset: f64| pad(vec![
            inspection(19_700.0, 0.0, t1 - offset),
            inspection(19_800.0, 8000.0, t1 - 4.0 - offset),
            inspection(19_900.0, 16_000.0, t1 - 8.1 - offset),
        ]);
        let settings = few_draws();
        let before = forecast_part(&history(0.0), None, Some(&prior()), &energy(), 20_000.0, 20_000.0, &settings);
        let after = forecast_part(&history(drop), None, Some(&prior()), &energy(), 20_000.0, 20_000.0, &settings);
        let (b, a) = (before.due.expect("date"), after.due.expect("date"));
        prop_assert!(a.at(0.5) <= b.at(0.5), "{} > {}", a.at(0.5), b.at(0.5));
        prop_assert!(after.current_thickness_mm < before.current_thickness_mm);
    }
}
