//! Property tests of the model's invariants.

use brakeledger_models::forecast::DueDistribution;
use brakeledger_models::{fit_part, forecast_part, ForecastSettings, RatePrior};
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
        // Each quantile is rounded to the nearest hour (`snap_due_day`), so it may lie up to
        // half an hour either side of the sample quantile: count with that much slack.
        let half_hour = 0.5 / brakeledger_models::forecast::DUE_STEPS_PER_DAY;
        for (i, q) in due.quantile_days.iter().enumerate() {
            let p = (i + 1) as f64 / 100.0;
            let at_or_below = draws.iter().filter(|d| **d <= *q + half_hour).count() as f64 / n;
            let below = draws.iter().filter(|d| **d < *q - half_hour).count() as f64 / n;
            // Interpolation between neighbours allows one draw's worth of slack.
            prop_assert!(at_or_below + 1.0 / n >= p, "p = {p}: {at_or_below} at or below {q}");
            prop_assert!(below - 1.0 / n <= p, "p = {p}: {below} below {q}");
        }
    }

    /// The band is read off the right percentiles: at level L the 50 ∓ 100·L/2 th, linearly
    /// between whole percentiles (the quantiles are sorted by construction, so nesting of bands
    /// would prove nothing; reading the wrong positions fails here).
    #[test]
    fn the_band_reads_the_right_percentiles(draws in proptest::collection::vec(0.0f64..1e4, 100..300), level in 0.02f64..0.98) {
        let due = DueDistribution::from_draws(draws).expect("draws");
        let q = &due.quantile_days;
        let (low, median, high) = due.band(level);
        let at = |p: f64| {
            let pos = p * 100.0 - 1.0;
            let i = pos.floor() as usize;
            let frac = pos - i as f64;
            if frac == 0.0 { q[i] } else { q[i] + frac * (q[i + 1] - q[i]) }
        };
        prop_assert_eq!(median, q[49]);
        prop_assert!((low - at(0.5 - level / 2.0)).abs() <= 1e-9 * low.abs().max(1.0), "{} vs {}", low, at(0.5 - level / 2.0));
        prop_assert!((high - at(0.5 + level / 2.0)).abs() <= 1e-9 * high.abs().max(1.0), "{} vs {}", high, at(0.5 + level / 2.0));
    }

    /// A part resting on the fleet prior alone (fitted, not inspected since): today's thickness
    /// is `new − k·d` with SD `sd(k)·d`, so its 80 % band is the mean ∓ z₀.₉·sd(k)·d with
    /// z₀.₉ = 1.2816 (standard normal table, NIST/SEMATECH e-Handbook of Statistical Methods,
    /// §1.3.6.7.1, recalled from memory); and a wider prior widens the due band.
    #[test]
    fn a_prior_only_part_has_the_normal_thickness_band_and_a_wider_prior_a_wider_due_band(energy_since in 2_000.0f64..20_000.0, relative_sd in 0.05f64..0.15) {
        let h = pad(vec![replacement(19_900.0, 10_000.0)]);
        let mean = 5e-4;
        let narrow = RatePrior { variance: (relative_sd * mean).powi(2), ..prior() };
        let wide = RatePrior { variance: (3.0 * relative_sd * mean).powi(2), ..prior() };
        let settings = few_draws();
        let o = forecast_part(&h, None, Some(&narrow), &energy(), 20_000.0, 10_000.0 + energy_since, &settings);
        let expected_mean = 22.0 - mean * energy_since;
        let half_width = 1.2816 * relative_sd * mean * energy_since;
        prop_assert!((o.current_thickness_mm - expected_mean).abs() < 1e-9);
        prop_assert!((o.current_thickness_high_mm - (expected_mean + half_width)).abs() < 1e-3 * half_width);
        prop_assert!((o.current_thickness_low_mm - (expected_mean - half_width).max(0.0)).abs() < 1e-3 * half_width);
        let w = forecast_part(&h, None, Some(&wide), &energy(), 20_000.0, 10_000.0 + energy_since, &settings);
        if let (Some(a), Some(b)) = (o.due.filter(|_| !o.due_now), w.due.filter(|_| !w.due_now)) {
            let (al, _, ah) = a.band(0.8);
            let (bl, _, bh) = b.band(0.8);
            // The rate is one source of spread among several (energy use, its allowance, the
            // drift allowance), so tripling its SD widens the band by less than 3x: about 1.5x
            // at the smallest rate SD tried, more above it.
            prop_assert!(bh - bl > 1.25 * (ah - al), "three times the rate SD: band {} vs {} days", bh - bl, ah - al);
        }
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

    /// The part fitted now is the last wear cycle, whatever the mix of replacements,
    /// inspections and unusable (non-finite) values; `current_cycle` builds it alone.
    #[test]
    fn the_current_cycle_is_the_last_cycle(
        events in proptest::collection::vec((0u8..4, 0.0f64..100.0, 0.0f64..5000.0, 1.0f64..22.0), 0..12),
    ) {
        let mut day = 19_000.0;
        let events = events
            .into_iter()
            .map(|(kind, step, energy, thickness)| {
                day += step;
                match kind {
                    0 => replacement(day, energy),
                    1 => inspection(day, energy, f64::NAN),
                    2 => inspection(f64::INFINITY, energy, thickness),
                    _ => inspection(day, energy, thickness),
                }
            })
            .collect();
        let history = pad(events);
        prop_assert_eq!(Some(history.current_cycle()), history.cycles().last().cloned());
    }
}

/// The refresh in passes gives every part once, with exactly the result of the whole refresh
/// (same fits, same priors, same points), whatever the pass size: a pass holds only what the
/// service's worker holds, it computes nothing differently. The reference is this crate's own
/// `forecast_parts`, itself checked against scipy and the calibration fleets elsewhere.
#[test]
fn a_refresh_in_passes_gives_the_whole_refresh_part_for_part() {
    use brakeledger_models::calibration::repeated_fleet_inputs;
    use brakeledger_models::pipeline::{forecast_parts, forecast_parts_in_passes, PartResult};

    let (inputs, today) = repeated_fleet_inputs(900);
    let settings = ForecastSettings { with_trajectory: false, ..ForecastSettings::default() };
    let whole = forecast_parts(&inputs, today, &settings);
    let vehicles = inputs.iter().map(|i| i.vehicle_id.as_str()).collect::<std::collections::HashSet<_>>().len();
    for pass_vehicles in [1, 7, 10_000] {
        let mut seen: Vec<Option<_>> = vec![None; inputs.len()];
        let mut passes = 0;
        forecast_parts_in_passes(&inputs, today, &settings, pass_vehicles, |fits, pass| {
            passes += 1;
            for (i, outlook) in pass {
                assert!(seen[i].is_none(), "part {i} given twice");
                seen[i] = Some(PartResult { own_fit: fits[i].clone(), outlook });
            }
        });
        assert_eq!(passes, vehicles.div_ceil(pass_vehicles), "passes of {pass_vehicles} over {vehicles} vehicles");
        for (i, (got, expected)) in seen.into_iter().zip(&whole).enumerate() {
            assert_eq!(got.as_ref(), Some(expected), "part {i}, passes of {pass_vehicles}");
        }
    }
}
