//! Daily friction energy at one brake: a recency-weighted mean and variance over a window.
//!
//! # Estimator
//! Over the last `N` days (default 120; idle days count as 0 MJ) day `i` days old gets weight
//! `wᵢ = 2^(−i/h)` with half-life `h` (default 60 days), so the recent duty counts more:
//!
//! ```text
//! μ = Σwᵢeᵢ/Σwᵢ                    mean energy per day, MJ/day
//! n_eff = (Σwᵢ)²/Σwᵢ²              effective number of days (Kish 1965)
//! σ² = Σwᵢ(eᵢ − μ)²/Σwᵢ · n_eff/(n_eff − 1)      variance per day, MJ²/day
//! Var(μ) = σ²/n_eff + (r·μ)²
//! ```
//! The last term is an allowance for duty changes the window cannot show (season, route),
//! `r` = [`crate::forecast::ForecastSettings::energy_rate_relative_sd`]. Cumulative energy is
//! then treated as Brownian motion with drift μ and variance σ² per day.

/// Summary of the recent daily energy.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct EnergyRate {
    /// Weighted mean energy per day, MJ/day.
    pub mean_mj_per_day: f64,
    /// Variance per day, MJ²/day.
    pub variance_mj2_per_day: f64,
    /// Variance of the mean itself (sampling plus duty-change allowance), (MJ/day)².
    pub mean_variance: f64,
    /// Days in the window.
    pub days: usize,
    /// Days with energy above zero.
    pub active_days: usize,
}

/// The days [`estimate_energy_rate`] reads: the last `window_days` (at least one) of
/// `daily_energy_mj`, or all of them when there are fewer. Equal windows give equal estimates.
pub fn energy_window(daily_energy_mj: &[f64], window_days: usize) -> &[f64] {
    let window = window_days.max(1).min(daily_energy_mj.len());
    &daily_energy_mj[daily_energy_mj.len() - window..]
}

/// Estimates the daily energy from `daily_energy_mj` (oldest first). Returns `None` when the
/// window is empty or holds no energy.
pub fn estimate_energy_rate(
    daily_energy_mj: &[f64],
    window_days: usize,
    half_life_days: f64,
    relative_sd: f64,
) -> Option<EnergyRate> {
    let recent = energy_window(daily_energy_mj, window_days);
    let window = recent.len();
    if window == 0 {
        return None;
    }
    let half_life = if half_life_days > 0.0 && half_life_days.is_finite() { half_life_days } else { f64::INFINITY };
    // wᵢ = 2^(−i/h) by repeated multiplication (one exp per window, not per day).
    let decay = (-std::f64::consts::LN_2 / half_life).exp();
    let mut sw = 0.0;
    let mut sw2 = 0.0;
    let mut swe = 0.0;
    let mut swee = 0.0;
    let mut active = 0;
    let mut w = 1.0;
    for e in recent.iter().rev() {
        let e = if e.is_finite() && *e > 0.0 { *e } else { 0.0 };
        if e > 0.0 {
            active += 1;
        }
        sw += w;
        sw2 += w * w;
        swe += w * e;
        swee += w * e * e;
        w *= decay;
    }
    if active == 0 || sw <= 0.0 {
        return None;
    }
    let mean = swe / sw;
    // Σwᵢ(eᵢ − μ)² = Σwᵢeᵢ² − μ·Σwᵢeᵢ; the difference of two sums is exact enough here
    // (energies are non-negative and the mean is their weighted average), and kept ≥ 0.
    let ss = (swee - mean * swe).max(0.0);
    let n_eff = sw * sw / sw2;
    let variance = if n_eff > 1.0 { ss / sw * n_eff / (n_eff - 1.0) } else { mean * mean };
    // A floor keeps the first-passage shape finite when every day was identical.
    let variance = variance.max(1e-6 * mean * mean);
    let relative = if relative_sd.is_finite() { relative_sd.max(0.0) } else { 0.0 };
    Some(EnergyRate {
        mean_mj_per_day: mean,
        variance_mj2_per_day: variance,
        mean_variance: variance / n_eff + (relative * mean).powi(2),
        days: window,
        active_days: active,
    })
}
