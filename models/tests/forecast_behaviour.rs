//! Behaviour of the fit and the forecast on small hand-made histories: the edge cases the issue
//! names, each with its defined answer, and the Fieller inverse interval's closed form.

use brakeledger_models::forecast::BandSampling;
use brakeledger_models::domain::Component;
use brakeledger_models::error::ModelError;
use brakeledger_models::regression::{fieller_inverse, fit_rows, student_t_quantile};

use crate::pooling_behaviour::simpson_posterior;
use brakeledger_models::{
    fit_part, forecast_part, ForecastBasis, ForecastSettings, PartEvent, PartEventKind, PartHistory, RatePrior,
};

pub fn inspection(day: f64, energy: f64, thickness: f64) -> PartEvent {
    PartEvent { day, cumulative_energy_mj: energy, cumulative_hot_energy_mj: 0.0, kind: PartEventKind::Inspection { thickness_mm: thickness } }
}

pub fn replacement(day: f64, energy: f64) -> PartEvent {
    PartEvent { day, cumulative_energy_mj: energy, cumulative_hot_energy_mj: 0.0, kind: PartEventKind::Replacement { new_thickness_mm: 22.0 } }
}

pub fn pad(events: Vec<PartEvent>) -> PartHistory {
    PartHistory { axle_index: 1, component: Component::Friction, new_thickness_mm: 22.0, min_thickness_mm: 3.0, events }
}

/// A fleet prior of 20 vehicles (invented): mean 5e-4 mm/MJ, predictive SD 1e-4 mm/MJ.
pub fn prior() -> RatePrior {
    RatePrior {
        mean_mm_per_mj: 5e-4,
        variance: 1e-8,
        vehicles: 20,
        residual_sd_mm: 0.3,
        residual_autocorrelation: 0.0,
        from_pad: false,
        rate_drift_sd: 0.0,
    }
}

const TODAY: f64 = 20_000.0;

/// 100 MJ/day, 5 idle days in 7.
pub fn energy() -> Vec<f64> {
    (0..120).map(|d| if d % 7 < 5 { 100.0 } else { 0.0 }).collect()
}

#[test]
fn already_below_minimum_is_due_now() {
    let h = pad(vec![replacement(19_700.0, 0.0), inspection(19_800.0, 8000.0, 18.0), inspection(19_990.0, 30_000.0, 2.8)]);
    let o = forecast_part(&h, None, Some(&prior()), &energy(), TODAY, 31_000.0, &ForecastSettings::default());
    let due = o.due.expect("a date");
    assert!(due.quantile_days.iter().all(|d| *d == TODAY), "{:?}", &due.quantile_days[..3]);
    assert!(o.notes.iter().any(|n| n.contains("due now")), "{:?}", o.notes);
}

#[test]
fn no_braking_energy_gives_no_date_with_the_reason() {
    let h = pad(vec![replacement(19_700.0, 0.0), inspection(19_800.0, 8000.0, 18.0), inspection(19_900.0, 16_000.0, 14.1)]);
    let o = forecast_part(&h, None, Some(&prior()), &vec![0.0; 120], TODAY, 16_000.0, &ForecastSettings::default());
    assert!(o.due.is_none());
    assert!(o.notes.iter().any(|n| n.contains("no braking energy")), "{:?}", o.notes);
    // The thickness estimate is still given.
    assert!(o.current_thickness_mm < 22.0 && o.current_thickness_mm > 3.0);
}

#[test]
fn a_single_inspection_combines_with_the_prior_or_stands_alone() {
    // Own slope 8 mm / 20 000 MJ = 4e-4 mm/MJ, away from the prior mean of 5e-4, so a wrong
    // weighting cannot pass.
    let h = pad(vec![replacement(19_700.0, 0.0), inspection(19_900.0, 20_000.0, 14.0)]);
    assert!(matches!(fit_part(&h, &ForecastSettings::default()), Err(ModelError::TooFewPoints { .. })));
    let settings = ForecastSettings::default();
    // The own variance: σ₀²/Σx² with the group's σ₀ = 0.3 mm, times the t-type factor
    // ν/(ν−2) at ν = ν₀ = 4 prior degrees of freedom (no residual autocorrelation).
    let own_variance = 0.3f64.powi(2) / 20_000f64.powi(2) * (4.0 / 2.0);
    // Bayes' rule with a lognormal prior of the prior's mean and SD and the own slope as a
    // normal likelihood, integrated directly over k by Simpson's rule (see pooling_behaviour).
    let (expected_mean, expected_variance) = simpson_posterior(4e-4, own_variance.sqrt(), 5e-4, prior().variance.sqrt());
    let with_prior = forecast_part(&h, None, Some(&prior()), &energy(), TODAY, 25_000.0, &settings);
    assert_eq!(with_prior.basis, ForecastBasis::Combined);
    assert_eq!(with_prior.inspections_used, 1);
    let rate = with_prior.wear_rate_mm_per_mj;
    assert!((rate / expected_mean - 1.0).abs() < 2e-3, "{rate} vs {expected_mean}");
    assert!(rate > 4.02e-4 && rate < 4.5e-4, "both the own slope and the prior count: {rate}");
    assert!((with_prior.wear_rate_stderr_mm_per_mj / expected_variance.sqrt() - 1.0).abs() < 1e-2);
    assert!(with_prior.due.is_some());
    let alone = forecast_part(&h, None, None, &energy(), TODAY, 25_000.0, &settings);
    assert_eq!(alone.basis, ForecastBasis::VehicleData);
    assert!(alone.due.is_some());
    assert!((alone.wear_rate_mm_per_mj - 4e-4).abs() < 1e-15);
    // Without a group the assumed gauge SD (0.3 mm) stands in for σ₀.
    assert!((alone.wear_rate_stderr_mm_per_mj - own_variance.sqrt()).abs() < 1e-15);
}

#[test]
fn a_negative_fitted_rate_is_combined_with_the_prior_not_thrown_away() {
    let h = pad(vec![
        inspection(19_700.0, 0.0, 15.0),
        inspection(19_800.0, 8000.0, 15.5),
        inspection(19_900.0, 16_000.0, 16.0),
    ]);
    let err = fit_part(&h, &ForecastSettings::default()).expect_err("negative rate");
    assert!(matches!(err, ModelError::NonPositiveWearRate { rate_mm_per_mj } if rate_mm_per_mj < 0.0));
    let o = forecast_part(&h, None, Some(&prior()), &energy(), TODAY, 20_000.0, &ForecastSettings::default());
    // A growing thickness says this part wears slowly: the posterior lies below the prior mean.
    assert_eq!(o.basis, ForecastBasis::Combined);
    assert!(o.wear_rate_mm_per_mj > 0.0 && o.wear_rate_mm_per_mj < prior().mean_mm_per_mj, "{}", o.wear_rate_mm_per_mj);
    assert!(o.notes.iter().any(|n| n.contains("no wear yet")), "{:?}", o.notes);
    assert!(o.due.is_some());
    // With no prior there is nothing to combine with: no rate, and the reason.
    let alone = forecast_part(&h, None, None, &energy(), TODAY, 20_000.0, &ForecastSettings::default());
    assert!(alone.due.is_none());
    assert!(alone.notes.iter().any(|n| n.contains("non-positive")), "{:?}", alone.notes);
}

#[test]
fn a_replacement_with_no_inspection_since_uses_the_prior_from_the_new_thickness() {
    let h = pad(vec![inspection(19_700.0, 0.0, 10.0), inspection(19_800.0, 8000.0, 6.8), replacement(19_900.0, 16_000.0)]);
    let o = forecast_part(&h, None, Some(&prior()), &energy(), TODAY, 26_000.0, &ForecastSettings::default());
    // The earlier cycle (10 → 6.8 mm over 8000 MJ: 4e-4 mm/MJ, away from the prior's 5e-4, so
    // a rate that ignored it, or ignored the prior, fails) still informs the rate. Its variance:
    // σ₀²/Sxx (σ₀ = 0.3 mm, Sxx = 2·4000² MJ² about the cycle's mean) times ν/(ν−2) at ν = 4.
    assert_eq!(o.basis, ForecastBasis::Combined);
    assert_eq!(o.inspections_used, 2);
    assert_eq!(o.fitted_day, Some(19_900.0));
    assert!((o.energy_since_fitted_mj - 10_000.0).abs() < 1e-9);
    let own_sd = (0.3f64.powi(2) / (2.0 * 4000f64.powi(2)) * 2.0).sqrt();
    let (rate, _) = simpson_posterior(4e-4, own_sd, 5e-4, prior().variance.sqrt());
    assert!(rate > 4.1e-4 && rate < 4.9e-4, "{rate}");
    assert!((o.wear_rate_mm_per_mj / rate - 1.0).abs() < 2e-3, "{} vs {rate}", o.wear_rate_mm_per_mj);
    // Today's thickness runs from the new thickness: 22 mm − rate · 10 000 MJ.
    let now_mm = 22.0 - rate * 10_000.0;
    assert!((o.current_thickness_mm - now_mm).abs() < 0.01, "{} vs {now_mm}", o.current_thickness_mm);
    let due = o.due.expect("a date");
    // (now − 3 mm) / rate MJ at 500/7 MJ per day.
    let expected = TODAY + (now_mm - 3.0) / rate / (500.0 / 7.0);
    assert!((due.at(0.5) - expected).abs() < 0.05 * (expected - TODAY), "{} vs {expected}", due.at(0.5));
}

#[test]
fn a_replacement_alone_rests_on_the_fleet_prior() {
    let h = pad(vec![replacement(19_900.0, 16_000.0)]);
    let o = forecast_part(&h, None, Some(&prior()), &energy(), TODAY, 26_000.0, &ForecastSettings::default());
    assert_eq!(o.basis, ForecastBasis::FleetPrior);
    assert_eq!(o.inspections_used, 0);
    assert_eq!(o.wear_rate_mm_per_mj, prior().mean_mm_per_mj);
    assert!((o.current_thickness_mm - 17.0).abs() < 1e-9);
    // Without a prior there is no rate and no date, with the reason.
    let none = forecast_part(&h, None, None, &energy(), TODAY, 26_000.0, &ForecastSettings::default());
    assert!(none.due.is_none() && !none.notes.is_empty());
}

#[test]
fn trajectory_runs_from_today_down_to_the_minimum() {
    let h = pad(vec![replacement(19_700.0, 0.0), inspection(19_800.0, 8000.0, 18.1), inspection(19_900.0, 16_000.0, 14.0)]);
    let o = forecast_part(&h, None, Some(&prior()), &energy(), TODAY, 20_000.0, &ForecastSettings::default());
    let t = &o.trajectory;
    assert!(t.len() >= 2);
    assert_eq!(t[0].day, TODAY);
    assert!((t[0].median_mm - o.current_thickness_mm).abs() < 1e-9);
    assert!(t.windows(2).all(|w| w[1].day > w[0].day && w[1].median_mm <= w[0].median_mm));
    // The band at today is today's thickness band (two outputs computed apart), and it widens
    // as the uncertainty of the rate and of the energy use accumulates.
    assert!((t[0].low_mm - o.current_thickness_low_mm).abs() < 1e-9 && (t[0].high_mm - o.current_thickness_high_mm).abs() < 1e-9, "{:?} vs {} {}", t[0], o.current_thickness_low_mm, o.current_thickness_high_mm);
    let width = |p: &brakeledger_models::TrajectoryPoint| p.high_mm - p.low_mm;
    assert!(width(t.last().expect("point")) > 1.5 * width(&t[0]), "{} vs {}", width(t.last().expect("point")), width(&t[0]));
    // It runs to the band's latest due day (or ends once the upper edge is below the minimum).
    let last = t.last().expect("point");
    let (_, _, latest) = o.due.as_ref().expect("a due band").band(0.8);
    assert!(last.day >= latest - 1.0 || last.high_mm <= 3.0, "band cut early: ends day {} at {} mm, latest due {latest}", last.day, last.high_mm);
    assert!(last.median_mm < 3.0, "past the median due day the median is below the minimum: {}", last.median_mm);
}

/// A part only wears, so no quantile of its thickness can rise with time: each edge of the band
/// is non-increasing, and none rises above today's. Checked where the normal approximation
/// alone breaks it: a drum known only from a vague fleet prior, with a long way to go.
#[test]
fn band_edges_never_rise_with_time() {
    let drum = PartHistory {
        axle_index: 2,
        component: Component::Disc,
        new_thickness_mm: 45.0,
        min_thickness_mm: 41.0,
        events: vec![PartEvent { kind: PartEventKind::Replacement { new_thickness_mm: 45.0 }, ..replacement(19_990.0, 0.0) }],
    };
    let vague = RatePrior { mean_mm_per_mj: 1e-5, variance: 1e-10, ..prior() };
    let o = forecast_part(&drum, None, Some(&vague), &energy(), TODAY, 1_000.0, &ForecastSettings::default());
    let t = &o.trajectory;
    assert!(t.len() > 10, "{} points; notes {:?}", t.len(), o.notes);
    for w in t.windows(2) {
        assert!(w[1].high_mm <= w[0].high_mm && w[1].low_mm <= w[0].low_mm && w[1].median_mm <= w[0].median_mm, "{:?} then {:?}", w[0], w[1]);
    }
    assert!(t.iter().all(|p| p.high_mm <= t[0].high_mm && p.low_mm <= p.median_mm && p.median_mm <= p.high_mm));
}

/// Fieller's interval for a line through the origin has the closed form
/// x = y₀/(b ∓ t·se(b)) (Fieller 1954); checked on the NIST NoInt1 fit.
#[test]
fn fieller_interval_matches_its_closed_form_through_the_origin() {
    let data = include_str!("data/noint1.csv");
    let (rows, y): (Vec<Vec<f64>>, Vec<f64>) = data
        .lines()
        .skip(1)
        .map(|l| {
            let v: Vec<f64> = l.split(',').map(|s| s.parse().expect("number")).collect();
            (vec![v[1]], v[0])
        })
        .unzip();
    let fit = fit_rows(&rows, &y).expect("fit");
    let b = fit.coefficients[0];
    let var_b = fit.covariance[0][0];
    let target = 150.0;
    let est = fieller_inverse(0.0, b, 0.0, var_b, 0.0, target, 0.95, fit.degrees_of_freedom).expect("bounded");
    let t = student_t_quantile(0.975, fit.degrees_of_freedom).expect("t");
    let se = var_b.sqrt();
    assert!((est.estimate - target / b).abs() < 1e-12);
    assert!((est.low - target / (b + t * se)).abs() < 1e-9);
    assert!((est.high - target / (b - t * se)).abs() < 1e-9);
    // The prediction interval at x₀ = 65 from NIST's certified NoInt1 values (B1 =
    // 2.07438016528926, residual SD s = 3.56753034006338, ν = 10; Σx² = 46 585 for x = 60…70)
    // and the textbook form ŷ ± t·s·√(1 + x₀²/Σx²) (Draper & Smith, Applied Regression
    // Analysis, ch. 1), with t(0.90, 10) = 1.372 and t(0.975, 10) = 2.228 from the NIST t table
    // (see distributions.rs): half-widths 5.112 and 8.301 about 134.8347.
    let centre = 2.07438016528926 * 65.0;
    let se = 3.56753034006338 * (1.0 + 65.0f64.powi(2) / 46_585.0).sqrt();
    for (level, t_table) in [(0.8, 1.372), (0.95, 2.228)] {
        let (low, high) = fit.prediction_interval(&[65.0], level).expect("interval");
        // The table's three decimals allow 0.0005·se of slack.
        assert!((low - (centre - t_table * se)).abs() < 0.0005 * se + 1e-9, "{level}: low {low}");
        assert!((high - (centre + t_table * se)).abs() < 0.0005 * se + 1e-9, "{level}: high {high}");
    }
}

/// With the hot regressor, a noiseless history with varying hot shares gives back both rates,
/// and the reported rate is the effective one at the part's hot fraction.
#[test]
fn hot_regressor_recovers_both_rates() {
    let (k, k_hot) = (4e-4, 6e-4);
    let mut events = vec![replacement(19_000.0, 0.0)];
    let (mut e, mut h) = (0.0, 0.0);
    for (i, (de, share)) in [(3000.0, 0.05), (2500.0, 0.3), (4000.0, 0.1), (3500.0, 0.5)].iter().enumerate() {
        e += de;
        h += de * share;
        events.push(PartEvent {
            day: 19_030.0 + 30.0 * i as f64,
            cumulative_energy_mj: e,
            cumulative_hot_energy_mj: h,
            kind: PartEventKind::Inspection { thickness_mm: 22.0 - k * e - k_hot * h },
        });
    }
    let settings = ForecastSettings { hot_regressor: true, ..ForecastSettings::default() };
    let fit = fit_part(&pad(events), &settings).expect("fit");
    assert_eq!(fit.coefficient_names[..2], ["energy".to_string(), "hot_energy".to_string()]);
    assert!((fit.coefficients[0] - k).abs() < 1e-12 && (fit.coefficients[1] - k_hot).abs() < 1e-12, "{:?}", fit.coefficients);
    assert!((fit.hot_fraction - h / e).abs() < 1e-12);
    assert!((fit.rate_mm_per_mj - (k + k_hot * h / e)).abs() < 1e-12);
}

#[test]
fn a_latest_inspection_far_below_the_wear_line_sets_todays_thickness() {
    // New pad (22 mm) wearing 5e-4 mm/MJ: 20 mm at 4000 MJ, 18 mm at 8000 MJ; then the workshop
    // measures 6 mm at 12 000 MJ, where the line says 16 mm.
    let steady = vec![replacement(19_700.0, 0.0), inspection(19_750.0, 4000.0, 20.0), inspection(19_800.0, 8000.0, 18.0)];
    let mut worn = steady.clone();
    worn.push(inspection(19_990.0, 12_000.0, 6.0));
    let settings = ForecastSettings::default();
    let line = forecast_part(&pad(steady), None, Some(&prior()), &energy(), TODAY, 12_500.0, &settings);
    let o = forecast_part(&pad(worn), None, Some(&prior()), &energy(), TODAY, 12_500.0, &settings);
    // Projected from the 6 mm reading over 500 MJ, never from the line's ~16 mm.
    assert!(o.current_thickness_mm < 6.0 && o.current_thickness_mm > 5.0, "{}", o.current_thickness_mm);
    assert!(o.notes.iter().any(|n| n.contains("latest inspection")), "{:?}", o.notes);
    let (soon, later) = (o.due.expect("date").at(0.5), line.due.expect("date").at(0.5));
    assert!(soon < later - 100.0, "due {soon} must come well before the steady line's {later}");
    // A reading on the line changes nothing of the kind.
    assert!(!line.notes.iter().any(|n| n.contains("latest inspection")));
}

#[test]
fn the_same_data_a_little_later_gives_the_same_draws() {
    // Common random numbers: with no new data, an hour later shifts every quantile by an hour,
    // so dashboards do not see dates jump with Monte Carlo noise between calls.
    let h = pad(vec![replacement(19_700.0, 0.0), inspection(19_750.0, 4000.0, 20.0), inspection(19_800.0, 8000.0, 18.1)]);
    let settings = ForecastSettings::default();
    let first = forecast_part(&h, None, Some(&prior()), &energy(), TODAY, 12_500.0, &settings).due.expect("date");
    let later = forecast_part(&h, None, Some(&prior()), &energy(), TODAY + 1.0 / 24.0, 12_500.0, &settings).due.expect("date");
    for (a, b) in first.quantile_days.iter().zip(&later.quantile_days) {
        assert!((b - a - 1.0 / 24.0).abs() < 1e-9, "{a} -> {b}");
    }
    // The quasi-random points are the same for every vehicle (their error is a small,
    // deterministic integration error, not noise), so the seed plays no part in them...
    let other_seed = brakeledger_models::forecast::vehicle_seed(settings.seed, &["fleet", "other"]);
    let other = ForecastSettings { seed: other_seed, ..settings.clone() };
    let same = forecast_part(&h, None, Some(&prior()), &energy(), TODAY, 12_500.0, &other).due.expect("date");
    assert_eq!(first.quantile_days, same.quantile_days);
    // ...while pseudo-random draws follow the vehicle's seed: equal seeds, equal draws an hour
    // later; another vehicle's seed, other draws (vehicles do not share one random stream).
    let pseudo = ForecastSettings { band_sampling: BandSampling::PseudoRandom, ..settings };
    let first = forecast_part(&h, None, Some(&prior()), &energy(), TODAY, 12_500.0, &pseudo).due.expect("date");
    let later = forecast_part(&h, None, Some(&prior()), &energy(), TODAY + 1.0 / 24.0, 12_500.0, &pseudo).due.expect("date");
    for (a, b) in first.quantile_days.iter().zip(&later.quantile_days) {
        assert!((b - a - 1.0 / 24.0).abs() < 1e-9, "{a} -> {b}");
    }
    let other = ForecastSettings { seed: other_seed, ..pseudo };
    let third = forecast_part(&h, None, Some(&prior()), &energy(), TODAY, 12_500.0, &other).due.expect("date");
    assert_ne!(first.quantile_days, third.quantile_days);
}

#[test]
fn measured_at_the_minimum_is_due_now_without_a_rate_or_energy() {
    // One reading of a part of unknown start, at the minimum: no fit, no prior, no energy.
    let h = pad(vec![inspection(19_990.0, 30_000.0, 3.0)]);
    let o = forecast_part(&h, None, None, &vec![0.0; 120], TODAY, 30_000.0, &ForecastSettings::default());
    assert!(o.due_now);
    let due = o.due.expect("a part at its minimum always has a date");
    assert!(due.quantile_days.iter().all(|d| *d == TODAY));
    assert_eq!(o.current_thickness_mm, 3.0);
}

#[test]
fn estimated_below_the_minimum_is_due_now_without_recent_energy() {
    // Worn at about 1e-3 mm/MJ; 20 000 MJ since the last reading of 12 mm puts it near -8 mm,
    // yet the last 120 days carry no energy (parked).
    let h = pad(vec![replacement(19_000.0, 0.0), inspection(19_300.0, 5_000.0, 17.0), inspection(19_600.0, 10_000.0, 12.0)]);
    let o = forecast_part(&h, None, Some(&prior()), &vec![0.0; 120], TODAY, 30_000.0, &ForecastSettings::default());
    assert!(o.due_now, "{:?}", o.notes);
    assert!(o.due.expect("date").quantile_days.iter().all(|d| *d == TODAY));
    assert!(o.notes.iter().any(|n| n.contains("due now")), "{:?}", o.notes);
}

#[test]
fn a_part_with_neither_rate_nor_thickness_has_no_date_and_says_why() {
    let h = pad(Vec::new());
    let o = forecast_part(&h, None, None, &energy(), TODAY, 30_000.0, &ForecastSettings::default());
    assert!(o.due.is_none() && !o.due_now);
    assert!(!o.notes.is_empty());
}

/// A part with nothing on record (a vehicle taken over part-worn) is dated, not left out: its
/// thickness is spread evenly between new (22 mm) and the minimum (3 mm), whose mean and
/// variance are (a + b)/2 and (b − a)²/12 (the continuous uniform distribution; NIST/SEMATECH
/// e-Handbook of Statistical Methods, §1.3.6.6.2, recalled from memory). With the prior's rate
/// 5e-4 mm/MJ and 500/7 MJ a day, the median is near (22 − 3)/2 mm of wear away: 9.5 / 5e-4 /
/// (500/7) = 266 days. A forecast from the new thickness would say twice that; one from the
/// minimum, today. The band is wide on both sides, and the note asks for an inspection.
#[test]
fn a_part_with_nothing_on_record_is_dated_from_an_even_spread_of_thickness() {
    let h = pad(vec![]);
    let sharp = RatePrior { variance: 1e-14, ..prior() };
    let o = forecast_part(&h, None, Some(&sharp), &energy(), TODAY, 40_000.0, &ForecastSettings::default());
    let due = o.due.expect("a date");
    assert!(!o.due_now);
    let expected = 9.5 / 5e-4 / (500.0 / 7.0);
    let median = due.at(0.5) - TODAY;
    assert!((median / expected - 1.0).abs() < 0.08, "median {median} days vs {expected}");
    assert!(due.at(0.1) - TODAY < 0.45 * median && due.at(0.9) - TODAY > 1.5 * median, "{:?}", due.band(0.8));
    assert!((o.current_thickness_mm - 12.5).abs() < 1e-9, "{}", o.current_thickness_mm);
    assert!(o.notes.iter().any(|n| n.contains("assumed") && n.contains("inspect")), "{:?}", o.notes);
    // Still no date without a rate, or without recent energy.
    let no_rate = forecast_part(&h, None, None, &energy(), TODAY, 40_000.0, &ForecastSettings::default());
    assert!(no_rate.due.is_none() && no_rate.current_thickness_mm.is_nan());
    assert!(no_rate.notes.iter().any(|n| n.contains("thickness is unknown")), "{:?}", no_rate.notes);
    assert!(forecast_part(&h, None, Some(&sharp), &vec![0.0; 120], TODAY, 40_000.0, &ForecastSettings::default()).due.is_none());
}
