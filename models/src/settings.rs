//! Settings of the wear fit, the fleet pooling and the forecast, in one place so that every
//! model module reads them without depending on another.

use serde::{Deserialize, Serialize};

/// How the due-date distribution integrates over the uncertain wear rate, thickness, energy
/// use and passage time.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
pub enum BandSampling {
    /// The first points of a Sobol sequence, the same for every part
    /// ([`crate::quasi_random`]), [`ForecastSettings::quasi_random_points`] of them.
    #[default]
    QuasiRandom,
    /// Seeded pseudo-random draws (ChaCha8), [`ForecastSettings::monte_carlo_draws`] of them:
    /// the earlier method, kept as a reference for the quasi-random one.
    PseudoRandom,
}

fn default_true() -> bool {
    true
}

fn default_quasi_random_points() -> usize {
    128
}

fn default_disc_fit_half_life_days() -> f64 {
    730.0
}

/// Settings of the fit and the forecast.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ForecastSettings {
    /// Two-sided level of the reported bands (0.8 = 10th to 90th percentile).
    pub band_level: f64,
    /// Days of daily energy used for the energy rate.
    pub energy_window_days: usize,
    /// Half-life of the recency weights on daily energy, days.
    pub energy_half_life_days: f64,
    /// Relative SD allowed for changes in daily energy the window cannot show (season, route).
    /// 0.12 was chosen so the simulator's 80% bands cover about 80% (see `calibration`).
    pub energy_rate_relative_sd: f64,
    /// Scale `c` of the allowance for the wear rate to drift from today on (a log-SD; see
    /// [`crate::pooling::wear_drift_sd`]): wear per MJ drifts with brake temperature, duty and
    /// lining batch, so the past rate is not the future one even when it is known exactly.
    /// Applied to the future wear only. 0.25 was chosen on the tuning seeds of both test-fleet
    /// generators (see `calibration`), not measured on real fleets.
    pub wear_rate_relative_sd: f64,
    /// How the due-date integral is evaluated (see [`crate::forecast`]).
    #[serde(default)]
    pub band_sampling: BandSampling,
    /// Quasi-random points per part ([`BandSampling::QuasiRandom`]), rounded up to a power of
    /// two. 128 keeps the quantiles within about a day of a 100,000-draw reference on the
    /// calibration fleets (see `calibration` and BENCHMARKS.md).
    #[serde(default = "default_quasi_random_points")]
    pub quasi_random_points: usize,
    /// Pseudo-random draws per part ([`BandSampling::PseudoRandom`] only).
    pub monte_carlo_draws: usize,
    /// Seed of the Monte Carlo (mixed with the axle and component). Callers set one per vehicle
    /// (see [`crate::forecast::vehicle_seed`]) so that vehicles do not share random streams.
    pub seed: u64,
    /// Half-life of the weights of older inspections in the wear fit of a pad or lining, days
    /// (weighted least squares, weight `2^(−age/h)` from the part's latest inspection);
    /// infinity weighs all alike. Wear per MJ drifts with duty, so recent wear says more about
    /// the wear to come. 180 days was chosen on the tuning seeds of both test-fleet generators
    /// (365 before rotors had a half-life of their own).
    pub fit_half_life_days: f64,
    /// The same half-life for a rotor or drum, days. A rotor is forecast years ahead, a pad
    /// months: over a longer horizon a rate that wanders around its own level is better told by
    /// a longer stretch of its past, so older readings fade more slowly. 730 days was chosen on
    /// the tuning seeds of both test-fleet generators, not measured on real fleets.
    #[serde(default = "default_disc_fit_half_life_days")]
    pub disc_fit_half_life_days: f64,
    /// Fit hot-stop energy as its own regressor.
    pub hot_regressor: bool,
    /// Fit a bedding-in intercept common to cycles that began with a recorded replacement.
    pub bedding_intercept: bool,
    /// Thickness gauge noise SD, mm, used when no residual SD is known (common practice, no source).
    pub gauge_sd_mm: f64,
    /// Weight ν₀ (degrees of freedom) of the group's residual SD when shrinking a vehicle's own.
    pub prior_residual_weight: f64,
    /// Floor of the between-vehicle SD of wear rates, as a fraction of the group's mean rate.
    /// Keeps the fleet prior from ever treating a rate as exactly known when a small group
    /// happens to look homogeneous (a modelling choice tuned on the tuning seeds; real fleets
    /// show more spread than this, common practice, no source).
    pub between_sd_floor_fraction: f64,
    /// Largest lag-1 autocorrelation of wear residuals used to inflate rate variances.
    pub max_residual_autocorrelation: f64,
    /// Fewest vehicles with both a pad and a rotor fit before a rotor borrows from its pad.
    pub min_coupling_vehicles: usize,
    /// Compute the thickness trajectory (for charts). A refresh that stores forecasts without
    /// their trajectories turns it off.
    #[serde(default = "default_true")]
    pub with_trajectory: bool,
    /// Longest trajectory, days.
    pub trajectory_cap_days: f64,
    /// Most trajectory points (the step grows beyond daily to respect it).
    pub trajectory_max_points: usize,
}

impl Default for ForecastSettings {
    fn default() -> Self {
        Self {
            band_level: 0.8,
            energy_window_days: 120,
            energy_half_life_days: 60.0,
            energy_rate_relative_sd: 0.12,
            wear_rate_relative_sd: 0.25,
            band_sampling: BandSampling::QuasiRandom,
            quasi_random_points: default_quasi_random_points(),
            monte_carlo_draws: 1000,
            seed: 0x5eed_b4a7,
            fit_half_life_days: 180.0,
            disc_fit_half_life_days: default_disc_fit_half_life_days(),
            hot_regressor: false,
            bedding_intercept: false,
            gauge_sd_mm: 0.3,
            prior_residual_weight: 4.0,
            between_sd_floor_fraction: 0.10,
            max_residual_autocorrelation: 0.9,
            min_coupling_vehicles: 5,
            with_trajectory: true,
            trajectory_cap_days: 3.0 * 365.0,
            trajectory_max_points: 200,
        }
    }
}

