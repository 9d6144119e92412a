//! Due dates: when a part reaches its minimum thickness, as a distribution, with the thickness
//! trajectory for plotting.
//!
//! # Model
//! The current thickness is `T_now = A − k·d`: `A` the cycle's anchor (the fitted part's new
//! thickness when the replacement is on record; otherwise the mean of the cycle's inspections,
//! with variance σ²/n) and `d` the energy since that anchor (MJ). When the cycle's latest
//! inspection lies more than 3 residual SDs (of the group, or of the gauge) off the wear line,
//! the line no longer describes the part and the anchor becomes that inspection (variance: the
//! gauge noise), with a note: a fresh measurement outranks an extrapolation. A part with no
//! replacement and no inspection on record (a vehicle taken over part-worn and not yet
//! inspected) is taken to lie anywhere between new and its minimum, evenly: anchor `(new +
//! min)/2` today with variance `(new − min)²/12`, the moments of that even spread. Its band is
//! wide and starts near today, and a note asks for an inspection; "no date" would hide it from
//! every due list instead. The wear rate `k` (mm/MJ)
//! is normal with the posterior mean and variance from [`crate::pooling`] (own fit, fleet
//! prior, or both; both combined under a lognormal prior by
//! [`crate::pooling::combine_lognormal`]). The residual SD σ used to scale the own fit's rate
//! variance is shrunk toward the group's pooled value (or the gauge noise, 0.3 mm, common practice, no source):
//! `σ² = (ν·s² + ν₀·σ₀²)/(ν + ν₀)`.
//!
//! The remaining energy is `R = (T_now − T_min)/k`; the days to dissipate it are inverse
//! Gaussian ([`crate::first_passage`]) given the daily energy's drift μ and variance σ²
//! ([`crate::energy_rate`]), with μ itself uncertain. The due day's distribution integrates
//! over `k`, `A`, μ, the rate's drift and the passage time, and is reported at the
//! probabilities 0.01, 0.02, ..., 0.99. By default the integral runs over the first 128 points
//! of a six-dimensional Sobol sequence ([`crate::quasi_random`]; the passage time by the
//! Michael-Schucany-Haas transformation of two coordinates, [`FirstPassage::transform`]), the
//! same points for every part: deterministic, no seed, and about a tenth of the work of the
//! 1,000 pseudo-random draws used before ([`BandSampling::PseudoRandom`], ChaCha8 seeded per
//! vehicle, axle and component, kept as the reference). On the calibration fleets the
//! quasi-random medians lie as close to a 20,000-draw reference as the 1,000 draws did; the 5 %
//! and 95 % dates a little farther (BENCHMARKS.md, "Bands").
//!
//! The trajectory is the normal (delta-method) approximation of thickness at future day τ:
//! mean `T̂_now − k̂·μ·τ`, variance `Var A + Var k·(d + μτ)² + k̂²·(σ²τ + Var μ·τ²)`, drawn up to
//! the band's latest due day, each edge held non-increasing (a part only wears).
//!
//! Forecasts support maintenance planning. They do not replace inspection by a qualified
//! technician or local roadworthiness rules.

use std::cell::RefCell;

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::StandardNormal;
use serde::{Deserialize, Serialize};
use statrs::distribution::{ContinuousCDF, Normal};

pub use crate::settings::{BandSampling, ForecastSettings};
use crate::energy_rate::{estimate_energy_rate, EnergyRate};
use crate::first_passage::FirstPassage;
use crate::quasi_random::NormalScores;
use crate::pooling::{combine, combine_lognormal, own_rate_variance, rate_variance_inflation, shrunk_residual_variance, wear_drift_sd, RatePrior};
use crate::wear_fit::{fit_part_rate, rate_sums, WearFit};
use crate::wear_history::PartHistory;
use crate::day_sort::sort_days;

/// Number of probabilities in a [`DueDistribution`] (0.01 ... 0.99).
pub const DUE_QUANTILES: usize = 99;

/// The probabilities of a [`DueDistribution`]: 0.01, 0.02, ..., 0.99 (each `i/100` in f64).
const DUE_PROBABILITIES: [f64; DUE_QUANTILES] = {
    let mut p = [0.0; DUE_QUANTILES];
    let mut i = 0;
    while i < DUE_QUANTILES {
        p[i] = (i + 1) as f64 / 100.0;
        i += 1;
    }
    p
};

/// What a forecast's wear rate rests on.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum ForecastBasis {
    /// The vehicle's own inspections only.
    VehicleData,
    /// The fleet prior of the vehicle's group only.
    FleetPrior,
    /// Both, precision weighted.
    Combined,
}

/// Steps of the due quantiles per day: each quantile a forecast computes is rounded to the
/// nearest hour. Due dates are planned to the day; an hour is far below the spread of any band
/// (the bands of the simulated fleets span weeks to years), and whole hours let a store keep the
/// 99 quantiles as small integer steps ([`DueDistribution::grid_steps`]).
pub const DUE_STEPS_PER_DAY: f64 = 24.0;

/// `day` rounded to the nearest step of [`DUE_STEPS_PER_DAY`] (non-finite days unchanged).
#[inline]
pub fn snap_due_day(day: f64) -> f64 {
    round_half_away_from_zero(day * DUE_STEPS_PER_DAY) / DUE_STEPS_PER_DAY
}

/// `x.round()` (ties away from zero, the sign kept, so −0.3 gives −0.0) without the call to
/// the C library's `round` that the baseline x86-64 target makes for it: below 2⁵² in
/// magnitude the truncation `x as i64` is exact, and so is `x − trunc(x)`; larger or
/// non-finite values are integers already or NaN and go to `round`. A forecast snaps 99
/// quantiles per part, and the call was about 2 % of a refresh.
#[inline]
fn round_half_away_from_zero(x: f64) -> f64 {
    if x.abs() < 4.0e15 {
        let whole = x as i64;
        let fraction = x - whole as f64;
        let rounded = whole + i64::from(fraction >= 0.5) - i64::from(fraction <= -0.5);
        (rounded as f64).copysign(x)
    } else {
        x.round()
    }
}

/// Due day (days since the Unix epoch, fractional) at probabilities 0.01, 0.02, ..., 0.99.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct DueDistribution {
    /// 99 non-decreasing values, days since epoch.
    pub quantile_days: Vec<f64>,
}

impl DueDistribution {
    /// Builds the 99 quantiles from draws (days since epoch), each rounded to the hour
    /// ([`snap_due_day`]). `None` if there are no finite draws.
    pub fn from_draws(draws: Vec<f64>) -> Option<Self> {
        let mut days: Vec<f64> = draws.into_iter().filter(|d| !d.is_nan()).collect();
        Self::from_due_days(&mut days)
    }

    /// [`Self::from_draws`] from the draws that are not NaN, sorted here in
    /// place (a caller may reuse one buffer for every part).
    fn from_due_days(days: &mut [f64]) -> Option<Self> {
        if days.is_empty() {
            return None;
        }
        sort_days(days);
        let n = days.len();
        // The two draws around each quantile's position (gathered here, one by one, into this
        // thread's buffers), then the interpolation and the rounding to the hour in one
        // vectorised loop, written straight into the distribution's vector.
        let mut quantile_days = vec![0.0; DUE_QUANTILES];
        QUANTILE_SCRATCH.with(|cell| {
            let mut cached = cell.borrow_mut();
            let QuantileScratch { count, positions, fraction, low, high } = &mut *cached;
            if *count != n {
                *count = n;
                (*positions, *fraction) = quantile_positions(n);
            }
            for (i, &(lo, hi)) in positions.iter().enumerate() {
                low[i] = days[lo];
                high[i] = days[hi];
            }
            pulp::Arch::new().dispatch(QuantileInterpolation { low, high, fraction, out: &mut quantile_days });
        });
        Some(Self { quantile_days })
    }

    /// The quantiles as whole steps of [`DUE_STEPS_PER_DAY`] since the epoch, when every one is
    /// finite and exactly such a step (as every quantile [`Self::from_draws`] makes is):
    /// `step / DUE_STEPS_PER_DAY` gives each back bit for bit. `None` otherwise.
    pub fn grid_steps(&self) -> Option<Vec<i64>> {
        self.quantile_days
            .iter()
            .map(|&day| {
                let scaled = (day * DUE_STEPS_PER_DAY).round();
                // Within ±2^53 every integer is an f64; the bound also excludes ±∞ and NaN.
                let step = (scaled.abs() < 9.0e15).then_some(scaled as i64)?;
                ((step as f64 / DUE_STEPS_PER_DAY).to_bits() == day.to_bits()).then_some(step)
            })
            .collect()
    }

    /// The distribution whose quantiles are `steps` of [`DUE_STEPS_PER_DAY`] (inverse of
    /// [`Self::grid_steps`]).
    pub fn from_grid_steps(steps: &[i64]) -> Self {
        Self { quantile_days: steps.iter().map(|&s| s as f64 / DUE_STEPS_PER_DAY).collect() }
    }

    /// Due day at `probability`, interpolated; probability clamped to [0.01, 0.99].
    pub fn at(&self, probability: f64) -> f64 {
        let q = &self.quantile_days;
        if q.is_empty() {
            return f64::NAN;
        }
        let p = if probability.is_nan() { 0.5 } else { probability.clamp(0.01, 0.99) };
        let pos = (p * 100.0 - 1.0).clamp(0.0, (q.len() - 1) as f64);
        let lo = pos.floor() as usize;
        let hi = (lo + 1).min(q.len() - 1);
        let frac = pos - lo as f64;
        if frac == 0.0 || q[lo] == q[hi] {
            q[lo]
        } else {
            q[lo] + frac * (q[hi] - q[lo])
        }
    }

    /// `(low, median, high)` due days of the central band at `level` (0.8 → 10th, 50th, 90th).
    pub fn band(&self, level: f64) -> (f64, f64, f64) {
        let level = if level.is_nan() { 0.8 } else { level.clamp(0.0, 0.98) };
        (self.at(0.5 - level / 2.0), self.at(0.5), self.at(0.5 + level / 2.0))
    }
}

/// What [`DueDistribution::from_due_days`] keeps per thread: the count of sorted draws it
/// last read quantiles from, [`quantile_positions`] of it (the quasi-random integral gives
/// nearly every part the same count, so the positions are worked out once per thread rather
/// than once per part), and the buffers the draws around each position are gathered into.
struct QuantileScratch {
    count: usize,
    positions: [(usize, usize); DUE_QUANTILES],
    fraction: [f64; DUE_QUANTILES],
    low: [f64; DUE_QUANTILES],
    high: [f64; DUE_QUANTILES],
}

thread_local! {
    /// This thread's [`QuantileScratch`].
    static QUANTILE_SCRATCH: RefCell<QuantileScratch> = const {
        RefCell::new(QuantileScratch {
            count: 0,
            positions: [(0, 0); DUE_QUANTILES],
            fraction: [0.0; DUE_QUANTILES],
            low: [0.0; DUE_QUANTILES],
            high: [0.0; DUE_QUANTILES],
        })
    };
}

/// Where each probability of [`DUE_PROBABILITIES`] lies among `n` sorted draws (`n` ≥ 1):
/// the pairs `(lo, hi)` and the fractions `frac` with the quantile
/// `draws[lo] + frac·(draws[hi] − draws[lo])`, at position `p·(n − 1)` (linear interpolation
/// between order statistics).
fn quantile_positions(n: usize) -> ([(usize, usize); DUE_QUANTILES], [f64; DUE_QUANTILES]) {
    let mut pairs = [(0, 0); DUE_QUANTILES];
    let mut fractions = [0.0; DUE_QUANTILES];
    for ((pair, fraction), p) in pairs.iter_mut().zip(&mut fractions).zip(DUE_PROBABILITIES) {
        let pos = p * (n - 1) as f64;
        // ⌊pos⌋ for pos ≥ 0 by truncation (a conversion, not a call to `floor`).
        let lo = pos as usize;
        *pair = (lo, (lo + 1).min(n - 1));
        *fraction = pos - lo as f64;
    }
    (pairs, fractions)
}

/// The quantiles of [`DueDistribution::from_due_days`] from the sorted draws around
/// each position, as a [`pulp::WithSimd`] operation (see [`DaysOfPoints`]): each the draw
/// `low`, or `low + fraction·(high − low)` when the two differ, rounded to the hour
/// ([`snap_due_day`]). `f64::round` is `round_half_away_from_zero` bit for bit (test below);
/// with SSE4.1 and later it compiles to vector instructions, where the baseline calls the C
/// library.
struct QuantileInterpolation<'a> {
    low: &'a [f64; DUE_QUANTILES],
    high: &'a [f64; DUE_QUANTILES],
    fraction: &'a [f64; DUE_QUANTILES],
    /// Out: the quantiles (at least [`DUE_QUANTILES`] long).
    out: &'a mut [f64],
}

impl pulp::WithSimd for QuantileInterpolation<'_> {
    type Output = ();

    #[inline(always)]
    fn with_simd<S: pulp::Simd>(self, _simd: S) {
        for (((day, low), high), fraction) in self.out.iter_mut().zip(self.low).zip(self.high).zip(self.fraction) {
            let (low, high) = (*low, *high);
            // Computed before the choice, which is then a select rather than a branch.
            let between = low + fraction * (high - low);
            let chosen = if (*fraction == 0.0) | (low == high) { low } else { between };
            *day = (chosen * DUE_STEPS_PER_DAY).round() / DUE_STEPS_PER_DAY;
        }
    }
}

/// One point of the thickness trajectory.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct TrajectoryPoint {
    /// Days since the Unix epoch.
    pub day: f64,
    /// Median thickness, mm.
    pub median_mm: f64,
    /// Lower band edge, mm.
    pub low_mm: f64,
    /// Upper band edge, mm.
    pub high_mm: f64,
}

/// The forecast for one part.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PartOutlook {
    /// Estimated thickness today, mm (NaN when no inspection or replacement is on record).
    pub current_thickness_mm: f64,
    /// Lower band edge of today's thickness, mm.
    pub current_thickness_low_mm: f64,
    /// Upper band edge of today's thickness, mm.
    pub current_thickness_high_mm: f64,
    /// Minimum thickness, mm.
    pub min_thickness_mm: f64,
    /// Wear rate used, mm/MJ (posterior mean; NaN when none).
    pub wear_rate_mm_per_mj: f64,
    /// Its standard deviation, mm/MJ.
    pub wear_rate_stderr_mm_per_mj: f64,
    /// Recency-weighted mean friction energy per day at this brake, MJ/day.
    pub daily_energy_mj: f64,
    /// Due-day distribution; `None` when no date can be given (reason in `notes`).
    pub due: Option<DueDistribution>,
    /// The part is measured or estimated at or below its minimum: every quantile of `due` is
    /// today, whatever the wear rate or the recent energy.
    pub due_now: bool,
    /// What the wear rate rests on.
    pub basis: ForecastBasis,
    /// Inspections behind the wear rate.
    pub inspections_used: u32,
    /// Plain-words remarks: fallbacks, edge cases, reasons for a missing date.
    pub notes: Vec<String>,
    /// Day the current part was fitted, when on record.
    pub fitted_day: Option<f64>,
    /// Energy since the part was fitted (or since its first inspection when the fitting is not
    /// on record), MJ.
    pub energy_since_fitted_mj: f64,
    /// Thickness from today until the band's upper edge reaches the minimum (the band's latest
    /// due day; capped), at the band level; each edge non-increasing in time.
    pub trajectory: Vec<TrajectoryPoint>,
}

/// Posterior wear rate with its provenance.
struct RateEstimate {
    mean: f64,
    variance: f64,
    basis: ForecastBasis,
    inspections: u32,
}

fn valid_fit(f: &WearFit) -> bool {
    f.rate_mm_per_mj.is_finite() && f.rate_variance_per_residual_variance.is_finite() && f.rate_variance_per_residual_variance > 0.0
}

/// The vehicle's own rate estimate `(k̂, s², inspections)` with the variance the pooling uses,
/// and the shrunk residual SD (mm) for the anchor.
fn own_estimate(
    history: &PartHistory,
    own_fit: Option<&WearFit>,
    sigma0: f64,
    autocorrelation: f64,
    settings: &ForecastSettings,
) -> (Option<(f64, f64, u32)>, f64) {
    let refitted;
    let fitted = match own_fit {
        Some(f) => Some(f),
        None => {
            refitted = fit_part_rate(history, settings).ok();
            refitted.as_ref()
        }
    };
    if let Some(fit) = fitted.filter(|f| valid_fit(f)) {
        let variance = own_rate_variance(fit, sigma0, autocorrelation, settings);
        let sigma = shrunk_residual_variance(fit, sigma0, settings).sqrt();
        return (Some((fit.rate_mm_per_mj, variance, fit.inspections_used)), sigma);
    }
    // Too few inspections for a fit with residual degrees of freedom: the closed-form slope
    // with the group's residual SD, if the inspections carry any energy information.
    let sums = rate_sums(history);
    let estimate = sums.slope().filter(|k| k.is_finite()).map(|k| {
        let inflation = rate_variance_inflation(settings.prior_residual_weight, autocorrelation, settings);
        (k, sigma0 * sigma0 / sums.sxx * inflation, sums.points)
    });
    (estimate, sigma0)
}

fn choose_rate(
    history: &PartHistory,
    own_fit: Option<&WearFit>,
    prior: Option<&RatePrior>,
    settings: &ForecastSettings,
    sigma0: f64,
    notes: &mut Vec<String>,
) -> (Option<RateEstimate>, f64) {
    let autocorrelation = prior.map_or(0.0, |p| p.residual_autocorrelation);
    let (own, sigma) = own_estimate(history, own_fit, sigma0, autocorrelation, settings);
    let fleet = |p: &RatePrior| RateEstimate { mean: p.mean_mm_per_mj, variance: p.variance, basis: ForecastBasis::FleetPrior, inspections: 0 };
    let from_pad = |p: &RatePrior| if p.from_pad { " and this vehicle's pad (lining) rates" } else { "" };
    let rate = match (own, prior) {
        (Some((k, v, inspections)), Some(p)) => {
            // A wear rate cannot be negative: the prior is lognormal (positive), or, where the
            // own estimate is too sharp for that to matter, the normal update truncated at 0.
            let (mean, variance) = combine_lognormal(k, v, p).unwrap_or_else(|| truncated_at_zero(combine(k, v, p)));
            if k <= 0.0 {
                notes.push(format!(
                    "the vehicle's own inspections show no wear yet ({k:.3e} mm/MJ); combined with the fleet prior of {} vehicles{}",
                    p.vehicles,
                    from_pad(p)
                ));
            }
            Some(RateEstimate { mean, variance, basis: ForecastBasis::Combined, inspections })
        }
        (Some((k, v, inspections)), None) if k > 0.0 => {
            Some(RateEstimate { mean: k, variance: v, basis: ForecastBasis::VehicleData, inspections })
        }
        (Some((k, _, _)), None) => {
            notes.push(format!(
                "the vehicle's own wear fit gave a non-positive rate ({k:.3e} mm/MJ) and no fleet prior is available"
            ));
            None
        }
        (None, Some(p)) => {
            notes.push(format!(
                "no inspection since fitting measures wear: wear rate from the fleet prior of {} vehicles{}",
                p.vehicles,
                from_pad(p)
            ));
            Some(fleet(p))
        }
        (None, None) => {
            notes.push("the vehicle's inspections do not yet show a wear rate and no fleet prior is available".into());
            None
        }
    };
    (rate, sigma)
}

/// Mean and variance of N(mean, variance) truncated to positive values (Johnson, Kotz &
/// Balakrishnan, *Continuous Univariate Distributions* vol. 1, §13.10.1):
/// `α = −m/s`, `λ = φ(α)/(1 − Φ(α))`, mean `m + sλ`, variance `s²(1 + αλ − λ²)`.
pub fn truncated_at_zero((mean, variance): (f64, f64)) -> (f64, f64) {
    let sd = variance.max(0.0).sqrt();
    if (sd.is_nan() || sd <= 0.0) || !mean.is_finite() {
        return (mean, variance);
    }
    let Ok(normal) = Normal::new(0.0, 1.0) else { return (mean, variance) };
    let alpha = -mean / sd;
    let tail = 1.0 - normal.cdf(alpha);
    if tail.is_nan() || tail <= 1e-300 {
        return (mean, variance);
    }
    let lambda = statrs::distribution::Continuous::pdf(&normal, alpha) / tail;
    (mean + sd * lambda, variance * (1.0 + alpha * lambda - lambda * lambda).max(0.0))
}

/// `normal_quantile(0.5 + level / 2)`, the half-width of a central band at `level` in SDs,
/// kept per thread for the last level asked (a refresh asks for one level, once per part).
fn band_z(level: f64) -> f64 {
    thread_local! {
        static LAST: std::cell::Cell<Option<(u64, f64)>> = const { std::cell::Cell::new(None) };
    }
    LAST.with(|last| match last.get() {
        Some((bits, z)) if bits == level.to_bits() => z,
        _ => {
            let z = normal_quantile(0.5 + level / 2.0);
            last.set(Some((level.to_bits(), z)));
            z
        }
    })
}

/// Standard normal quantile.
fn normal_quantile(p: f64) -> f64 {
    match Normal::new(0.0, 1.0) {
        Ok(n) => n.inverse_cdf(p.clamp(1e-12, 1.0 - 1e-12)),
        Err(_) => 0.0,
    }
}

/// Forecasts when the part reaches its minimum thickness (see the module docs).
///
/// `daily_energy_mj`: this brake's friction energy per calendar day, oldest first, ending with
/// the last complete day before `today_day` (zeros on idle days; may be shorter than the
/// window). `current_cumulative_energy_mj`: cumulative energy at this brake up to today, same
/// origin as [`crate::wear_history::PartEvent::cumulative_energy_mj`].
pub fn forecast_part(
    history: &PartHistory,
    own_fit: Option<&WearFit>,
    prior: Option<&RatePrior>,
    daily_energy_mj: &[f64],
    today_day: f64,
    current_cumulative_energy_mj: f64,
    settings: &ForecastSettings,
) -> PartOutlook {
    let energy = recent_energy(daily_energy_mj, settings);
    forecast_part_with_energy(history, own_fit, prior, energy, today_day, current_cumulative_energy_mj, settings)
}

/// The recent daily energy at a brake as [`forecast_part`] reads it from `daily_energy_mj`
/// (depends only on [`crate::energy_rate::energy_window`] of it, so pad and rotor of one axle
/// share it).
pub fn recent_energy(daily_energy_mj: &[f64], settings: &ForecastSettings) -> Option<EnergyRate> {
    estimate_energy_rate(daily_energy_mj, settings.energy_window_days, settings.energy_half_life_days, settings.energy_rate_relative_sd)
}

/// [`forecast_part`] with the recent daily energy already estimated ([`recent_energy`]).
pub fn forecast_part_with_energy(
    history: &PartHistory,
    own_fit: Option<&WearFit>,
    prior: Option<&RatePrior>,
    energy: Option<EnergyRate>,
    today_day: f64,
    current_cumulative_energy_mj: f64,
    settings: &ForecastSettings,
) -> PartOutlook {
    let mut notes = Vec::new();
    let level = if settings.band_level.is_finite() { settings.band_level.clamp(0.01, 0.98) } else { 0.8 };
    let z = band_z(level);
    let sigma0 = prior.map_or(settings.gauge_sd_mm, |p| p.residual_sd_mm).max(f64::MIN_POSITIVE);
    let (rate, sigma) = choose_rate(history, own_fit, prior, settings, sigma0, &mut notes);

    let current = history.current_cycle_view();
    let last_point = current.points().next_back();
    let fitted_day = current.start.map(|s| s.day);
    // Anchor A (mm), its variance, and the energy origin of d.
    let anchor: Option<(f64, f64, f64)> = match (&current.start, last_point.is_none()) {
        (Some(s), _) => Some((s.new_thickness_mm, 0.0, s.energy_mj)),
        (None, false) => {
            let n = current.points().count() as f64;
            let t = current.points().map(|p| p.thickness_mm).sum::<f64>() / n;
            let e = current.points().map(|p| p.energy_mj).sum::<f64>() / n;
            Some((t, sigma * sigma / n, e))
        }
        (None, true) => None,
    };
    // Nothing on record (a vehicle taken over part-worn, not yet inspected): today's thickness
    // is taken as anywhere between new and the minimum, evenly (module docs), so that the part
    // has a date with a wide band rather than none at all.
    let thickness_assumed = anchor.is_none();
    let anchor = anchor.or_else(|| unknown_thickness_anchor(history, current_cumulative_energy_mj));
    let origin_energy = current.origin_energy_mj().map_or(0.0, |o| o.0);
    let energy_since_fitted_mj = (current_cumulative_energy_mj - origin_energy).max(0.0);

    let mut outlook = PartOutlook {
        current_thickness_mm: f64::NAN,
        current_thickness_low_mm: f64::NAN,
        current_thickness_high_mm: f64::NAN,
        min_thickness_mm: history.min_thickness_mm,
        wear_rate_mm_per_mj: rate.as_ref().map_or(f64::NAN, |r| r.mean),
        wear_rate_stderr_mm_per_mj: rate.as_ref().map_or(f64::NAN, |r| r.variance.max(0.0).sqrt()),
        daily_energy_mj: energy.map_or(0.0, |e| e.mean_mj_per_day),
        due: None,
        due_now: false,
        basis: rate.as_ref().map_or(ForecastBasis::FleetPrior, |r| r.basis),
        inspections_used: rate.as_ref().map_or(0, |r| r.inspections),
        notes: Vec::new(),
        fitted_day,
        energy_since_fitted_mj,
        trajectory: Vec::new(),
    };

    let Some((anchor_mm, anchor_var, anchor_energy)) = anchor else {
        notes.push(UNKNOWN_THICKNESS_NOTE.into());
        outlook.notes = notes;
        return outlook;
    };
    let d = current_cumulative_energy_mj - anchor_energy;
    // Measured at or below the minimum since the last fitting: due now, whatever the model says.
    let measured_below = last_point.filter(|p| p.thickness_mm <= history.min_thickness_mm).map(|p| p.thickness_mm);

    let Some(rate) = rate else {
        if let Some(t) = measured_below {
            outlook.current_thickness_mm = t;
            outlook.current_thickness_low_mm = t;
            outlook.current_thickness_high_mm = t;
            return due_now(outlook, notes, today_day, format!("measured at {t:.1} mm, at or below the minimum of {:.1} mm: due now", history.min_thickness_mm));
        }
        if thickness_assumed {
            notes.push(UNKNOWN_THICKNESS_NOTE.into());
        }
        if notes.is_empty() {
            notes.push("no wear rate: no due date".into());
        }
        outlook.notes = notes;
        return outlook;
    };
    if thickness_assumed {
        notes.push(format!(
            "no replacement or inspection on record: today's thickness is assumed to lie anywhere between new ({:.1} mm) and the minimum ({:.1} mm); inspect the part to narrow the band",
            history.new_thickness_mm, history.min_thickness_mm
        ));
    }
    // A latest inspection far off the wear line (beyond 3 residual SDs of the group, or of the
    // gauge) means the line no longer describes this part (changed duty, a sticking caliper, an
    // unrecorded part swap). Today's thickness is then projected from that inspection rather
    // than from the line: a fresh measurement outranks an extrapolation.
    let (anchor_mm, anchor_var, d) = match last_point {
        Some(last) => {
            let on_line = anchor_mm - rate.mean * (last.energy_mj - anchor_energy);
            let deviation = last.thickness_mm - on_line;
            let limit = 3.0 * sigma0.max(settings.gauge_sd_mm);
            if deviation.abs() > limit {
                notes.push(format!(
                    "the latest inspection ({:.1} mm) is {:.1} mm {} the wear line: today's thickness is projected from it",
                    last.thickness_mm,
                    deviation.abs(),
                    if deviation < 0.0 { "below" } else { "above" }
                ));
                (last.thickness_mm, settings.gauge_sd_mm.powi(2), current_cumulative_energy_mj - last.energy_mj)
            } else {
                // Within reach of the line: today's thickness starts from the precision-weighted
                // blend of the line's value at the latest inspection and the reading itself.
                // The line's variance holds its own uncertainty plus the wear the line cannot
                // follow (the residual variance beyond gauge noise); the reading's is the gauge.
                let x = last.energy_mj - anchor_energy;
                let gauge2 = settings.gauge_sd_mm.powi(2).max(1e-12);
                let off_line2 = (sigma * sigma - gauge2).max(0.0);
                let line_var = anchor_var + rate.variance * x * x + off_line2;
                if line_var > 0.0 {
                    let precision = 1.0 / line_var + 1.0 / gauge2;
                    let blended = (on_line / line_var + last.thickness_mm / gauge2) / precision;
                    (blended, 1.0 / precision, current_cumulative_energy_mj - last.energy_mj)
                } else {
                    (anchor_mm, anchor_var, d)
                }
            }
        }
        None => (anchor_mm, anchor_var, d),
    };
    let k_sd = rate.variance.max(0.0).sqrt();
    let now_mean = anchor_mm - rate.mean * d;
    let now_sd = (anchor_var + rate.variance * d * d).max(0.0).sqrt();
    // A projection past the backing plate reads 0 mm: thickness cannot be negative.
    outlook.current_thickness_mm = now_mean.max(0.0);
    outlook.current_thickness_low_mm = (now_mean - z * now_sd).max(0.0);
    outlook.current_thickness_high_mm = (now_mean + z * now_sd).max(0.0);

    if let Some(t) = measured_below {
        let note = format!("measured at {t:.1} mm, at or below the minimum of {:.1} mm: due now", history.min_thickness_mm);
        return due_now(outlook, notes, today_day, note);
    }
    if now_mean <= history.min_thickness_mm {
        let note = format!("estimated at {:.1} mm, at or below the minimum of {:.1} mm: due now", now_mean.max(0.0), history.min_thickness_mm);
        return due_now(outlook, notes, today_day, note);
    }
    let Some(energy) = energy else {
        notes.push(format!(
            "no braking energy at this axle in the last {} days: no due date can be forecast",
            settings.energy_window_days
        ));
        outlook.notes = notes;
        return outlook;
    };

    // Common random numbers: the points (quasi-random) or the draws (pseudo-random: by the
    // vehicle's seed, the axle and the component) never depend on the data or the clock, so a
    // forecast recomputed with a little more data moves smoothly instead of jumping with noise.
    let drift_sd = match prior {
        Some(p) => p.rate_drift_sd,
        None => wear_drift_sd(sigma, settings),
    };
    let inputs = DueInputs {
        min_thickness_mm: history.min_thickness_mm,
        rate_mean: rate.mean,
        rate_sd: rate.variance.max(0.0).sqrt(),
        anchor_mm,
        anchor_sd: anchor_var.max(0.0).sqrt(),
        energy_since_anchor_mj: d,
        energy,
        mean_energy_sd: energy.mean_variance.max(0.0).sqrt(),
        drift_sd,
        today_day,
    };
    outlook.due = match settings.band_sampling {
        BandSampling::QuasiRandom => quasi_random_due(&inputs, settings.quasi_random_points),
        BandSampling::PseudoRandom => monte_carlo_due(history, &inputs, settings),
    };
    if outlook.due.is_none() {
        notes.push("the due-date integral produced no finite date".into());
    }
    if !settings.with_trajectory {
        outlook.notes = notes;
        return outlook;
    }
    // The band is drawn until the part is below its minimum at the band's upper edge, i.e. up
    // to the latest due day of the band at the same level.
    let latest_due = outlook.due.as_ref().map_or(today_day, |q| q.at(0.5 + level / 2.0));
    outlook.trajectory = trajectory(
        today_day,
        latest_due,
        now_mean,
        anchor_var,
        rate.mean,
        k_sd,
        d,
        &energy,
        z,
        history.min_thickness_mm,
        settings,
    );
    outlook.notes = notes;
    outlook
}

/// The note of a part with nothing on record and no date.
const UNKNOWN_THICKNESS_NOTE: &str = "no replacement or inspection on record: today's thickness is unknown";

/// The anchor `(thickness mm, variance mm², energy origin MJ)` of a part with nothing on
/// record: the mean and variance of a thickness spread evenly between the minimum and new
/// (`(new + min)/2`, `(new − min)²/12`), taken as today's (`current_cumulative_energy_mj`).
/// `None` when the nominal thicknesses leave no usable wear.
fn unknown_thickness_anchor(history: &PartHistory, current_cumulative_energy_mj: f64) -> Option<(f64, f64, f64)> {
    let usable = history.new_thickness_mm - history.min_thickness_mm;
    (usable.is_finite() && usable > 0.0)
        .then(|| (history.min_thickness_mm + 0.5 * usable, usable * usable / 12.0, current_cumulative_energy_mj))
}

/// Marks a part due now: every quantile at today, whatever the rate or the recent energy.
fn due_now(mut outlook: PartOutlook, mut notes: Vec<String>, today_day: f64, note: String) -> PartOutlook {
    notes.push(note);
    outlook.due = Some(DueDistribution { quantile_days: vec![today_day; DUE_QUANTILES] });
    outlook.due_now = true;
    outlook.notes = notes;
    outlook
}

/// What the due-date integral reads, for one part.
#[derive(Debug, Clone, Copy)]
struct DueInputs {
    min_thickness_mm: f64,
    /// Posterior mean and SD of the wear rate so far, mm/MJ.
    rate_mean: f64,
    rate_sd: f64,
    /// Today's thickness before the wear since the anchor, mm, and its SD.
    anchor_mm: f64,
    anchor_sd: f64,
    /// Energy since the anchor, MJ.
    energy_since_anchor_mj: f64,
    energy: EnergyRate,
    /// SD of the mean daily energy, √Var(μ), MJ/day (from `energy`, taken once per part).
    mean_energy_sd: f64,
    /// Log-SD of the rate's drift from today on.
    drift_sd: f64,
    today_day: f64,
}

impl DueInputs {
    /// One point of the integral: `zk`, `za`, `zm` standard normal scores of the rate, the
    /// anchor and the mean daily energy, `drift` the factor `exp(drift_sd·z)` of the rate's
    /// drift. Returns the thickness left above the minimum (mm), the rate from today on
    /// (mm/MJ) and the mean daily energy (MJ/day); `None`: already at the minimum.
    #[inline]
    fn point(&self, zk: f64, za: f64, zm: f64, drift: f64) -> Option<(f64, f64, f64)> {
        let point = self.point_unchecked(zk, za, zm, drift);
        // Not `> 0.0`: a NaN margin goes on (and ends as a NaN day, which is left out).
        (!(point.0 <= 0.0)).then_some(point)
    }

    /// [`Self::point`] whatever the margin.
    #[inline(always)]
    fn point_unchecked(&self, zk: f64, za: f64, zm: f64, drift: f64) -> (f64, f64, f64) {
        let k = (self.rate_mean + self.rate_sd * zk).max(0.05 * self.rate_mean);
        let margin = self.anchor_mm + self.anchor_sd * za - k * self.energy_since_anchor_mj - self.min_thickness_mm;
        let mean = self.energy.mean_mj_per_day;
        let mu = (mean + self.mean_energy_sd * zm).max(0.05 * mean);
        // The rate from today on drifts around the rate so far (lognormal, median-preserving).
        (margin, k * drift, mu)
    }

    /// Days from today to the minimum for one point ([`Self::point`]); `passage` draws the
    /// inverse Gaussian passage time. `None`: already at the minimum.
    fn days(&self, zk: f64, za: f64, zm: f64, drift: f64, passage: impl FnOnce(&FirstPassage) -> f64) -> Option<f64> {
        let (margin, rate, mu) = self.point(zk, za, zm, drift)?;
        let remaining_mj = margin / rate;
        Some(match FirstPassage::new(remaining_mj, mu, self.energy.variance_mj2_per_day) {
            Ok(fp) => passage(&fp),
            Err(_) => remaining_mj / mu,
        })
    }

    /// [`Self::days`] with the passage time by [`FirstPassage::transform`] of `chi_square` and
    /// `uniform`, through [`FirstPassage::transform_margin`] (two divisions, not five).
    #[inline]
    fn days_by_transform(&self, zk: f64, za: f64, zm: f64, drift: f64, chi_square: f64, uniform: f64) -> Option<f64> {
        let (margin, rate, mu) = self.point(zk, za, zm, drift)?;
        let (days, valid) = FirstPassage::transform_margin(margin, rate, mu, self.energy.variance_mj2_per_day, chi_square, uniform);
        Some(if valid { days } else { margin / rate / mu })
    }

    /// `self.days_by_transform(..).unwrap_or(0.0)` computed without a branch, so that a loop
    /// over the points vectorises; NaN where that takes the fallback of an invalid passage
    /// (the caller recomputes those few points with [`Self::days_by_transform`]).
    #[inline(always)]
    fn days_by_transform_or_nan(&self, zk: f64, za: f64, zm: f64, drift: f64, chi_square: f64, uniform: f64) -> f64 {
        let (margin, rate, mu) = self.point_unchecked(zk, za, zm, drift);
        let (days, valid) = FirstPassage::transform_margin(margin, rate, mu, self.energy.variance_mj2_per_day, chi_square, uniform);
        let days = if valid { days } else { f64::NAN };
        if margin <= 0.0 {
            0.0
        } else {
            days
        }
    }
}

/// The due-day distribution from the Sobol points of [`crate::quasi_random`] (module docs):
/// coordinates 1-4 are the rate, the mean daily energy, the rate's drift and the anchor; 5 and
/// 6 draw the passage time by Michael, Schucany & Haas (1976).
fn quasi_random_due(inputs: &DueInputs, points: usize) -> Option<DueDistribution> {
    thread_local! {
        /// The due days of one part's points, reused for every part this thread forecasts.
        static DUE_DAYS: RefCell<Vec<f64>> = const { RefCell::new(Vec::new()) };
    }
    let scores = NormalScores::cached(points);
    let drift = scores.exp_scaled(2, inputs.drift_sd);
    let [rate, energy, _, anchor, passage, _] = &scores.score_columns;
    let uniform = &scores.cell_columns[5];
    DUE_DAYS.with(|buffer| {
        let due = &mut *buffer.borrow_mut();
        // First every point's due day into the buffer (a loop without branches, pushes or
        // early exits, which the compiler vectorises), then the few that need the general
        // path; due days that are NaN are left out.
        due.clear();
        due.resize(rate.len(), 0.0);
        pulp::Arch::new().dispatch(DaysOfPoints { inputs, due, rate, anchor, energy, drift: &drift, passage, uniform });
        let mut undated = false;
        for (i, day) in due.iter_mut().enumerate().filter(|(_, d)| d.is_nan()) {
            *day = inputs.today_day + inputs.days_by_transform(rate[i], anchor[i], energy[i], drift[i], passage[i] * passage[i], uniform[i]).unwrap_or(0.0);
            undated |= day.is_nan();
        }
        if undated {
            due.retain(|d| !d.is_nan());
        }
        DueDistribution::from_due_days(due)
    })
}

/// The loop of [`quasi_random_due`] over its points, as a [`pulp::WithSimd`] operation: pulp
/// compiles it once more for the processor's widest vectors (AVX2 where present: four lanes
/// instead of SSE2's two) and picks the copy at run time. The same IEEE operations lane by
/// lane (no fused multiply-add is formed), so every day is the same bit for bit.
struct DaysOfPoints<'a> {
    inputs: &'a DueInputs,
    /// Out: each point's due day, today plus [`DueInputs::days_by_transform_or_nan`].
    due: &'a mut [f64],
    rate: &'a [f64],
    anchor: &'a [f64],
    energy: &'a [f64],
    drift: &'a [f64],
    passage: &'a [f64],
    uniform: &'a [f64],
}

impl pulp::WithSimd for DaysOfPoints<'_> {
    type Output = ();

    #[inline(always)]
    fn with_simd<S: pulp::Simd>(self, _simd: S) {
        let points = self.rate.iter().zip(self.anchor).zip(self.energy).zip(self.drift).zip(self.passage).zip(self.uniform);
        for (day, (((((zk, za), zm), f), nu), u)) in self.due.iter_mut().zip(points) {
            *day = self.inputs.today_day + self.inputs.days_by_transform_or_nan(*zk, *za, *zm, *f, nu * nu, *u);
        }
    }
}

/// The due-day distribution by seeded pseudo-random draws (the earlier method, a reference for
/// [`quasi_random_due`]). The draws depend on the seed (set per vehicle by the caller), the
/// axle and the component only, never on the data or the clock.
fn monte_carlo_due(history: &PartHistory, inputs: &DueInputs, settings: &ForecastSettings) -> Option<DueDistribution> {
    let component_code: u64 = match history.component {
        crate::domain::Component::Friction => 1,
        crate::domain::Component::Disc => 2,
    };
    let seed = settings.seed ^ (u64::from(history.axle_index).wrapping_mul(0x9E37_79B9_7F4A_7C15)) ^ (component_code << 56);
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let draws = settings.monte_carlo_draws.max(DUE_QUANTILES);
    let mut out = Vec::with_capacity(draws);
    for _ in 0..draws {
        let zk: f64 = rng.sample(StandardNormal);
        let za: f64 = rng.sample(StandardNormal);
        let zm: f64 = rng.sample(StandardNormal);
        let zf: f64 = rng.sample(StandardNormal);
        let days = inputs.days(zk, za, zm, (inputs.drift_sd * zf).exp(), |fp| fp.sample(&mut rng));
        out.push(inputs.today_day + days.unwrap_or(0.0));
    }
    DueDistribution::from_draws(out)
}

/// Thickness band from today to `latest_due` (capped at `trajectory_cap_days`), ending early
/// once the band's upper edge is below `min_mm`.
///
/// A part only wears: its thickness at a later day is never above its thickness at an earlier
/// one, so every quantile of the thickness is non-increasing in time. The normal approximation
/// can break that when the variance grows faster than the mean falls (seen on drums with
/// uncertain rates); each edge is therefore held at or below its value at earlier points.
#[allow(clippy::too_many_arguments)]
fn trajectory(
    today_day: f64,
    latest_due: f64,
    now_mean: f64,
    anchor_var: f64,
    k_mean: f64,
    k_sd: f64,
    d: f64,
    energy: &EnergyRate,
    z: f64,
    min_mm: f64,
    settings: &ForecastSettings,
) -> Vec<TrajectoryPoint> {
    let span = (latest_due - today_day).clamp(0.0, settings.trajectory_cap_days.max(0.0));
    let max_points = settings.trajectory_max_points.max(2);
    let step = (span / (max_points - 1) as f64).ceil().max(1.0);
    let mut out: Vec<TrajectoryPoint> = Vec::new();
    let mut tau = 0.0;
    loop {
        let e = energy.mean_mj_per_day * tau;
        let mean = now_mean - k_mean * e;
        let var = anchor_var
            + k_sd * k_sd * (d + e) * (d + e)
            + k_mean * k_mean * (energy.variance_mj2_per_day * tau + energy.mean_variance * tau * tau);
        let sd = var.max(0.0).sqrt();
        let mut point = TrajectoryPoint { day: today_day + tau, median_mm: mean, low_mm: mean - z * sd, high_mm: mean + z * sd };
        if let Some(before) = out.last() {
            point.median_mm = point.median_mm.min(before.median_mm);
            point.low_mm = point.low_mm.min(before.low_mm);
            point.high_mm = point.high_mm.min(before.high_mm);
        }
        out.push(point);
        if tau >= span || point.high_mm <= min_mm || out.len() >= max_points {
            break;
        }
        tau = (tau + step).min(span);
    }
    out
}

/// A stable Monte Carlo seed for one vehicle: FNV-1a (64-bit) of its identifiers, mixed with
/// `base`. Stable across runs and platforms, so forecasts are reproducible.
pub fn vehicle_seed(base: u64, identifiers: &[&str]) -> u64 {
    let mut hash: u64 = 0xcbf2_9ce4_8422_2325;
    for id in identifiers {
        for byte in id.bytes().chain(std::iter::once(0u8)) {
            hash ^= u64::from(byte);
            hash = hash.wrapping_mul(0x0000_0100_0000_01b3);
        }
    }
    base ^ hash
}

#[cfg(test)]
mod tests {
    use super::{round_half_away_from_zero, snap_due_day, DaysOfPoints, DueInputs, QuantileInterpolation, DUE_QUANTILES};
    use crate::energy_rate::EnergyRate;
    use crate::quasi_random::NormalScores;

    /// The loop pulp compiles for the processor's widest vectors gives each point's days bit
    /// for bit as [`DueInputs::days_by_transform_or_nan`] called point by point (reference:
    /// the scalar IEEE 754 operations themselves), over parts that take every path: valid
    /// passages, a margin at or below zero, and inputs the passage rejects (NaN, the fallback).
    #[test]
    fn the_vectorised_points_loop_is_the_scalar_one_bit_for_bit() {
        let scores = NormalScores::cached(128);
        let [rate, energy, _, anchor, passage, _] = &scores.score_columns;
        let uniform = &scores.cell_columns[5];
        let energy_rate = |mean: f64, variance: f64| EnergyRate { mean_mj_per_day: mean, variance_mj2_per_day: variance, mean_variance: 4.0, days: 120, active_days: 100 };
        let cases = [
            (9.0, 0.8, 3e-4, 4e-5, 8_000.0, energy_rate(35.0, 900.0), 0.1),
            (3.1, 0.5, 1e-3, 5e-4, 100.0, energy_rate(5.0, 400.0), 0.3),
            (2.05, 0.0, 2e-4, 1e-4, 200.0, energy_rate(60.0, 0.0), 0.0),
            (6.0, 0.2, 2e-5, 1e-6, 0.0, energy_rate(f64::NAN, 50.0), 0.2),
        ];
        for (anchor_mm, anchor_sd, rate_mean, rate_sd, since, energy_rate, drift_sd) in cases {
            let inputs = DueInputs {
                min_thickness_mm: 2.0,
                rate_mean,
                rate_sd,
                anchor_mm,
                anchor_sd,
                energy_since_anchor_mj: since,
                energy: energy_rate,
                mean_energy_sd: 2.0,
                drift_sd,
                today_day: 20_000.0,
            };
            let drift = scores.exp_scaled(2, drift_sd);
            let mut due = vec![0.0; rate.len()];
            pulp::Arch::new().dispatch(DaysOfPoints { inputs: &inputs, due: &mut due, rate, anchor, energy, drift: &drift, passage, uniform });
            for (i, day) in due.iter().enumerate() {
                let scalar = inputs.today_day + inputs.days_by_transform_or_nan(rate[i], anchor[i], energy[i], drift[i], passage[i] * passage[i], uniform[i]);
                assert_eq!(day.to_bits(), scalar.to_bits(), "point {i}: {day} against {scalar}");
            }
        }
    }

    /// The vectorised quantile loop gives, bit for bit, the scalar interpolation rounded by
    /// [`snap_due_day`] (reference: the scalar IEEE 754 operations and the rounding checked
    /// against `f64::round` below), over days on and off the hour, ties at the half hour,
    /// equal neighbours, zero fractions and negative days.
    #[test]
    fn the_vectorised_quantile_loop_is_the_scalar_one_bit_for_bit() {
        let (mut low_days, mut high_days, mut fractions) = ([0.0; DUE_QUANTILES], [0.0; DUE_QUANTILES], [0.0; DUE_QUANTILES]);
        let mut expected = [0.0; DUE_QUANTILES];
        for i in 0..DUE_QUANTILES {
            let base = 20_000.0 + i as f64 * 0.37 - if i % 7 == 0 { 40_000.0 } else { 0.0 };
            let low = if i % 5 == 0 { base.floor() + 0.5 / 24.0 } else { base };
            let high = if i % 3 == 0 { low } else { low + (i % 11) as f64 * 0.013 };
            let fraction = if i % 4 == 0 { 0.0 } else { (i % 9) as f64 / 9.0 };
            low_days[i] = low;
            high_days[i] = high;
            fractions[i] = fraction;
            let between = low + fraction * (high - low);
            expected[i] = snap_due_day(if fraction == 0.0 || low == high { low } else { between });
        }
        let mut got = [0.0; DUE_QUANTILES];
        pulp::Arch::new().dispatch(QuantileInterpolation { low: &low_days, high: &high_days, fraction: &fractions, out: &mut got });
        for (i, (g, e)) in got.iter().zip(&expected).enumerate() {
            assert_eq!(g.to_bits(), e.to_bits(), "quantile {i}: {g} against {e}");
        }
    }

    /// Reference: Rust's `f64::round` (IEEE 754 roundToIntegralTiesToAway), bit for bit,
    /// at the ties, around zero, near the 2⁵² limit and beyond it.
    #[test]
    fn rounding_matches_the_standard_library() {
        let mut values = vec![0.0, -0.0, 0.5, -0.5, 1.5, -1.5, 2.5, 0.49999999999999994, -0.49999999999999994, 0.3, -0.3, 483_123.5, -483_123.5];
        values.extend([4.0e15 - 0.5, 4.0e15, 4.5e15 + 1.0, 9.0e15, 1e300, -1e300, f64::INFINITY, f64::NEG_INFINITY, f64::MIN_POSITIVE, f64::EPSILON]);
        let mut x: f64 = 1.0e-3;
        while x < 1.0e17 {
            values.extend([x, -x, x * 24.0 + 0.5, 480_000.0 + x.fract()]);
            x *= 1.37;
        }
        for v in values {
            assert_eq!(round_half_away_from_zero(v).to_bits(), v.round().to_bits(), "{v:e}");
        }
        assert!(round_half_away_from_zero(f64::NAN).is_nan());
    }
}
