//! Issue 7, defects 3-6: the fleet pooling never treats a rate as exactly known, never counts a
//! vehicle twice, lets a rotor borrow from its own pad, and widens rates whose residuals run in
//! streaks. The fleets here are invented test data (not reference values); each test checks a
//! property a wrong implementation breaks.

use brakeledger_models::pooling::{
    combine, combine_lognormal, estimate_pad_coupling, estimate_prior, own_rate_variance, pool_pad_rotor_correlations, rate_variance_inflation, vehicle_key,
    RatePrior,
};
use brakeledger_models::{fit_part, ForecastSettings, WearFit};

use crate::forecast_behaviour::{inspection, pad, replacement};

/// A pad history with known start whose thickness falls at `rate` mm/MJ, with a fixed
/// zig-zag "gauge noise" of ±`noise` mm, at five inspections 5 000 MJ apart.
fn fit_with(rate: f64, noise: f64) -> WearFit {
    let mut events = vec![replacement(19_000.0, 0.0)];
    for i in 1..=5 {
        let e = 5_000.0 * i as f64;
        let zig = if i % 2 == 0 { noise } else { -noise };
        events.push(inspection(19_000.0 + 30.0 * i as f64, e, 22.0 - rate * e + zig));
    }
    fit_part(&pad(events), &ForecastSettings::default()).expect("fit")
}

fn keyed(fits: Vec<WearFit>) -> Vec<(u64, WearFit)> {
    fits.into_iter().enumerate().map(|(i, f)| (vehicle_key(&["test", &format!("v{i}")]), f)).collect()
}

#[test]
fn a_homogeneous_group_still_leaves_room_for_the_vehicle_own_data() {
    // Four vehicles with the same rate: the between-vehicle variance estimate is zero.
    let settings = ForecastSettings::default();
    let fits = keyed((0..4).map(|_| fit_with(4e-4, 0.2)).collect());
    let prior = estimate_prior(&fits, &settings).expect("prior");
    assert!(prior.between_sd_mm_per_mj >= 0.1 * prior.mean_mm_per_mj * (1.0 - 1e-12), "floored τ: {}", prior.between_sd_mm_per_mj);
    // A new vehicle whose own data say 6e-4 moves the posterior away from the prior mean.
    let newcomer = prior.predictive_for(vehicle_key(&["test", "new"]), &settings);
    assert!(newcomer.variance > prior.between_sd_mm_per_mj.powi(2), "predictive variance adds the mean's uncertainty");
    let own = fit_with(6e-4, 0.2);
    let own_var = own_rate_variance(&own, prior.residual_sd_mm, prior.residual_autocorrelation, &settings);
    let (posterior, variance) = combine(own.rate_mm_per_mj, own_var, &newcomer);
    assert!(posterior > 4.4e-4, "the vehicle's own data count: posterior {posterior}");
    assert!(variance > 0.0);
}

#[test]
fn the_prior_a_vehicle_is_shrunk_toward_leaves_that_vehicle_out() {
    let settings = ForecastSettings::default();
    let rates = [3e-4, 3.5e-4, 4e-4, 4.5e-4, 9e-4];
    let fits = keyed(rates.iter().map(|r| fit_with(*r, 0.15)).collect());
    let prior = estimate_prior(&fits, &settings).expect("prior");
    let outlier_key = fits[4].0;
    let loo = prior.predictive_for(outlier_key, &settings);
    // The others' precision-weighted mean at the group's τ² (computed independently here).
    let tau2 = prior.between_sd_mm_per_mj.powi(2);
    let (mut sw, mut swk) = (0.0, 0.0);
    for (key, fit) in &fits[..4] {
        let member = prior.member(*key).expect("member");
        let w = 1.0 / (member.rate_variance + tau2);
        sw += w;
        swk += w * fit.rate_mm_per_mj;
    }
    assert!((loo.mean_mm_per_mj - swk / sw).abs() < 1e-12 * loo.mean_mm_per_mj, "{} vs {}", loo.mean_mm_per_mj, swk / sw);
    assert!(loo.mean_mm_per_mj < prior.mean_mm_per_mj, "without the outlier the prior mean falls");
    assert_eq!(loo.vehicles, 4);
    assert!((loo.variance - (tau2 + 1.0 / sw)).abs() < 1e-9 * loo.variance);
    // A vehicle outside the group sees the whole group.
    let outsider = prior.predictive_for(vehicle_key(&["test", "elsewhere"]), &settings);
    assert!((outsider.mean_mm_per_mj - prior.mean_mm_per_mj).abs() < 1e-15);
    assert_eq!(outsider.vehicles, 5);
}

#[test]
fn pooled_weights_use_the_shrunk_residual_sd_of_the_forecast() {
    let settings = ForecastSettings::default();
    // One vehicle with a near-perfect line (raw residual SD ≈ 0) must not get a near-infinite weight.
    let mut fits: Vec<WearFit> = (0..4).map(|i| fit_with(4e-4 + 2e-5 * i as f64, 0.3)).collect();
    fits.push(fit_with(8e-4, 1e-6));
    let fits = keyed(fits);
    let prior = estimate_prior(&fits, &settings).expect("prior");
    for (key, fit) in &fits {
        let member = prior.member(*key).expect("member");
        let expected = own_rate_variance(fit, prior.residual_sd_mm, prior.residual_autocorrelation, &settings);
        assert_eq!(member.rate_variance, expected, "the pooled variance is the forecast's");
    }
    let exact = prior.member(fits[4].0).expect("member");
    let raw = fits[4].1.rate_stderr_mm_per_mj.powi(2);
    assert!(exact.rate_variance > 1e6 * raw, "shrunk {} vs raw {}", exact.rate_variance, raw);
    assert!(prior.mean_mm_per_mj < 6e-4, "the near-perfect vehicle does not dominate: {}", prior.mean_mm_per_mj);
}

#[test]
fn a_rotor_borrows_from_its_own_pad() {
    let settings = ForecastSettings::default();
    // Ten vehicles whose rotor rate is 10 % of their pad rate (invented), pads spread widely.
    let pad_rates: Vec<f64> = (0..10).map(|i| 2e-4 + 6e-5 * i as f64).collect();
    let keys: Vec<u64> = (0..10).map(|i| vehicle_key(&["test", &format!("v{i}")])).collect();
    let pads: Vec<(u64, WearFit)> = keys.iter().zip(&pad_rates).map(|(k, r)| (*k, fit_with(*r, 0.05))).collect();
    let rotors: Vec<(u64, WearFit)> = keys.iter().zip(&pad_rates).map(|(k, r)| (*k, fit_with(0.1 * r, 0.05))).collect();
    let pad_prior = estimate_prior(&pads, &settings).expect("pad prior");
    let mut rotor_prior = estimate_prior(&rotors, &settings).expect("rotor prior");
    let coupling = estimate_pad_coupling(&[&pad_prior], &pad_prior, &rotor_prior, &settings).expect("coupling").coupling;
    assert!(coupling.correlation > 0.5, "ρ = {}", coupling.correlation);
    rotor_prior.pad_coupling = Some(coupling);
    // A new vehicle with a fast pad: its rotor prior moves up, and narrows.
    let key = vehicle_key(&["test", "new"]);
    let plain = rotor_prior.predictive_for(key, &settings);
    let fast_pad = (pad_prior.mean_mm_per_mj * 1.5, (0.05 * pad_prior.mean_mm_per_mj).powi(2));
    let given: RatePrior = rotor_prior.predictive_given_pad(key, fast_pad, &pad_prior.predictive_for(key, &settings), &settings);
    assert!(given.from_pad);
    assert!(given.mean_mm_per_mj > plain.mean_mm_per_mj * 1.2, "{} vs {}", given.mean_mm_per_mj, plain.mean_mm_per_mj);
    assert!(given.variance < plain.variance);
    // A pad exactly at its prior mean moves nothing.
    let average = rotor_prior.predictive_given_pad(key, (pad_prior.mean_mm_per_mj, 0.0), &pad_prior.predictive_for(key, &settings), &settings);
    assert!((average.mean_mm_per_mj - plain.mean_mm_per_mj).abs() < 1e-15);
}

#[test]
fn residuals_in_streaks_widen_the_rate() {
    let settings = ForecastSettings::default();
    // Wear per MJ that rises with use (a curve, not a line): residuals of a straight fit run in
    // streaks of one sign, so their lag-1 products are positive.
    let curved = |scale: f64| {
        let mut events = vec![replacement(19_000.0, 0.0)];
        for i in 1..=8 {
            let e = 4_000.0 * i as f64;
            events.push(inspection(19_000.0 + 30.0 * i as f64, e, 22.0 - scale * (3e-4 * e + 6e-9 * e * e)));
        }
        fit_part(&pad(events), &settings).expect("fit")
    };
    let fits = keyed(vec![curved(1.0), curved(1.1), curved(0.9), curved(1.05)]);
    let prior = estimate_prior(&fits, &settings).expect("prior");
    assert!(prior.residual_autocorrelation > 0.2, "ρ = {}", prior.residual_autocorrelation);
    let fit = &fits[0].1;
    let streaky = own_rate_variance(fit, prior.residual_sd_mm, prior.residual_autocorrelation, &settings);
    let independent = own_rate_variance(fit, prior.residual_sd_mm, 0.0, &settings);
    let rho = prior.residual_autocorrelation;
    assert!((streaky / independent - (1.0 + rho) / (1.0 - rho)).abs() < 1e-9);
    // The t-type spread: few degrees of freedom widen more than many.
    assert!(rate_variance_inflation(3.0, 0.0, &settings) > rate_variance_inflation(30.0, 0.0, &settings));
    assert!((rate_variance_inflation(30.0, 0.0, &settings) - 30.0 / 28.0).abs() < 1e-12);
}

/// The pad–rotor correlations of several groups are pooled on Fisher's z scale (Hedges &
/// Olkin 1985, *Statistical Methods for Meta-Analysis*, ch. 11: z = atanh r, variance
/// 1/(n − 3)). Expected values worked from those formulas outside this code (Python 3 `math`:
/// atanh, tanh and the closed form of Paule–Mandel for equal variances).
#[test]
fn pad_rotor_correlations_are_pooled_on_fishers_z() {
    // Homogeneous: r = 0.6 and 0.7 from 8 vehicles each. z = 0.693147, 0.867301, v = 0.2;
    // Q(0) = 2·0.087077²/0.2 = 0.0758 ≤ 1, so τ_z² = 0 and both take tanh(0.780224) = 0.652835.
    let pooled = pool_pad_rotor_correlations(&[(0.6, 8), (0.7, 8)]);
    for r in &pooled {
        assert!((r - 0.652835).abs() < 1e-5, "{pooled:?}");
    }
    // Heterogeneous: r = 0.2 and 0.8 from 33 vehicles each: z = 0.202733, 1.098612, v = 1/30.
    // Paule–Mandel with equal variances: Σ(z − z̄)²/(v + τ²) = 1 gives
    // v + τ² = 2·0.447940² = 0.401300, τ² = 0.367967; each z moves toward z̄ = 0.650672 by
    // v/(v + τ²) = 0.083063: 0.239940 and 1.061405, i.e. r = 0.235439 and 0.786201.
    let pooled = pool_pad_rotor_correlations(&[(0.2, 33), (0.8, 33)]);
    assert!((pooled[0] - 0.235439).abs() < 1e-5 && (pooled[1] - 0.786201).abs() < 1e-5, "{pooled:?}");
    // A lone group keeps its own value (clamped to ±0.9); so does a group of three vehicles.
    assert_eq!(pool_pad_rotor_correlations(&[(0.95, 40)]), vec![0.9]);
    let mixed = pool_pad_rotor_correlations(&[(0.1, 3), (0.6, 8), (0.7, 8)]);
    assert_eq!(mixed[0], 0.1);
    assert!((mixed[1] - 0.652835).abs() < 1e-5);
}

/// A prior for the lognormal-combination checks (invented values).
fn lognormal_test_prior(mean: f64, sd: f64) -> RatePrior {
    RatePrior { mean_mm_per_mj: mean, variance: sd * sd, vehicles: 20, residual_sd_mm: 0.3, residual_autocorrelation: 0.0, from_pad: false, rate_drift_sd: 0.0 }
}

/// Posterior moments by direct integration over k (not log k) with Simpson's rule, the
/// lognormal density written out (σ_l² = ln(1 + v/m²), μ_l = ln m − σ_l²/2): an independent
/// route to the same integral.
pub fn simpson_posterior(own: f64, own_sd: f64, mean: f64, sd: f64) -> (f64, f64) {
    let s2 = (1.0 + (sd / mean).powi(2)).ln();
    let mu = mean.ln() - 0.5 * s2;
    let density = |k: f64| {
        let prior = (-(k.ln() - mu).powi(2) / (2.0 * s2)).exp() / k;
        prior * (-(own - k).powi(2) / (2.0 * own_sd * own_sd)).exp()
    };
    let (a, b, n) = (1e-9 * mean, 20.0 * mean, 200_000);
    let h = (b - a) / n as f64;
    let (mut z0, mut z1, mut z2) = (0.0, 0.0, 0.0);
    for i in 0..=n {
        let k = a + h * i as f64;
        let w = if i == 0 || i == n { 1.0 } else if i % 2 == 1 { 4.0 } else { 2.0 };
        let f = density(k);
        z0 += w * f;
        z1 += w * f * k;
        z2 += w * f * k * k;
    }
    (z1 / z0, z2 / z0 - (z1 / z0).powi(2))
}

#[test]
fn a_lognormal_prior_is_combined_with_the_own_rate_as_its_integral_says() {
    let prior = lognormal_test_prior(4e-4, 1.6e-4);
    // A slow part, a negative own slope within noise, and a fast part.
    for (own, own_sd) in [(2e-4, 5e-5), (-1e-4, 1.5e-4), (7e-4, 1e-4)] {
        let (mean, variance) = combine_lognormal(own, own_sd * own_sd, &prior).expect("resolvable");
        let (reference_mean, reference_variance) = simpson_posterior(own, own_sd, 4e-4, 1.6e-4);
        assert!((mean / reference_mean - 1.0).abs() < 2e-3, "own {own}: mean {mean} vs {reference_mean}");
        assert!((variance / reference_variance - 1.0).abs() < 1e-2, "own {own}: variance {variance} vs {reference_variance}");
        assert!(mean > 0.0);
    }
    // Own data that say nothing leave the prior's own mean and variance (the moment matching).
    let (mean, variance) = combine_lognormal(4e-4, 1.0, &prior).expect("resolvable");
    assert!((mean / 4e-4 - 1.0).abs() < 1e-3 && (variance.sqrt() / 1.6e-4 - 1.0).abs() < 1e-2, "{mean} {variance}");
    // Its right tail is heavier than a normal prior's of the same mean and SD: a fast part is
    // pulled down less; its left tail is lighter: a slow part is pulled up more.
    let (fast_lognormal, _) = combine_lognormal(8e-4, (1.5e-4f64).powi(2), &prior).expect("resolvable");
    let (fast_normal, _) = combine(8e-4, (1.5e-4f64).powi(2), &prior);
    assert!(fast_lognormal > fast_normal, "{fast_lognormal} vs {fast_normal}");
    let (slow_lognormal, _) = combine_lognormal(1.5e-4, (6e-5f64).powi(2), &prior).expect("resolvable");
    let (slow_normal, _) = combine(1.5e-4, (6e-5f64).powi(2), &prior);
    assert!(slow_lognormal > slow_normal, "{slow_lognormal} vs {slow_normal}");
    // An own rate far sharper than the grid can resolve is left to the normal update.
    assert!(combine_lognormal(4e-4, (1e-9f64).powi(2), &prior).is_none());
}

/// The lognormal combination over a sweep of priors (coefficient of variation 0.125 to 2) and
/// own estimates (slow, negative, fast; from 0.3 % to 300 % of the prior mean in SD) against
/// the independent Simpson integral over k ([`simpson_posterior`]): the grid, summed at the
/// coarser step its curvature allows, keeps mean and variance within 10⁻⁸ and 10⁻⁷.
/// One case is left out: an own rate ten of its SDs below zero against a tight prior puts the
/// posterior below the grid's lower end (12 prior SDs under the mean), off by 10⁻³ before and
/// after the step was coarsened.
#[test]
fn the_lognormal_combination_holds_over_a_sweep() {
    let m = 4e-4;
    let mut cases = 0;
    for cv in [0.125, 0.4, 1.0, 2.0] {
        let prior = lognormal_test_prior(m, cv * m);
        for own in [-0.5, 0.1, 0.5, 1.0, 2.0, 4.0] {
            for own_sd in [0.003, 0.01, 0.05, 0.2, 1.0, 3.0] {
                if (cv, own, own_sd) == (0.125, -0.5, 0.05) {
                    continue;
                }
                let Some((mean, variance)) = combine_lognormal(own * m, (own_sd * m).powi(2), &prior) else { continue };
                let (reference_mean, reference_variance) = simpson_posterior(own * m, own_sd * m, m, cv * m);
                assert!((mean / reference_mean - 1.0).abs() < 1e-8, "cv {cv} own {own} sd {own_sd}: mean {mean} vs {reference_mean}");
                assert!((variance / reference_variance - 1.0).abs() < 1e-7, "cv {cv} own {own} sd {own_sd}: variance {variance} vs {reference_variance}");
                cases += 1;
            }
        }
    }
    assert!(cases > 60, "only {cases} cases resolvable");
}
