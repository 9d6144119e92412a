//! Time for a brake to dissipate a given energy: the first-passage time of a Brownian motion
//! with drift, which follows the inverse Gaussian (Wald) distribution.
//!
//! # Model
//! Cumulative friction energy at an axle is treated as `E(t) = μ·t + σ·W(t)` (MJ, `t` in days,
//! `W` a standard Wiener process): `μ` the mean daily energy, `σ²` its variance per day. The
//! first time `T` it reaches a remaining energy `R > 0` is inverse Gaussian with
//!
//! ```text
//! mean m = R/μ,   shape λ = R²/σ²,   variance = m³/λ = R·σ²/μ³
//! F(t) = Φ(√(λ/t)·(t/m − 1)) + exp(2λ/m)·Φ(−√(λ/t)·(t/m + 1))
//! ```
//! (Chhikara & Folks, *The Inverse Gaussian Distribution*, 1989, eq. 2.1-2.2; Schrödinger 1915.)
//! The second term is evaluated in log space, `exp(2λ/m + ln Φ(·))`, so large `λ/m` does not
//! overflow.

use rand::Rng;
use rand_distr::{Distribution, InverseGaussian};
use statrs::distribution::{ContinuousCDF, Normal};

use crate::error::ModelError;

/// Inverse Gaussian first-passage distribution for a remaining energy.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FirstPassage {
    /// Mean passage time m = R/μ, days.
    pub mean_days: f64,
    /// Shape λ = R²/σ², days.
    pub shape_days: f64,
}

impl FirstPassage {
    /// Passage time to dissipate `remaining_mj` at drift `daily_mean_mj` (MJ/day) with
    /// `daily_variance_mj2` (MJ²/day). All three must be positive and finite.
    pub fn new(remaining_mj: f64, daily_mean_mj: f64, daily_variance_mj2: f64) -> Result<Self, ModelError> {
        let valid = |v: f64| v.is_finite() && v > 0.0;
        if !(valid(remaining_mj) && valid(daily_mean_mj) && valid(daily_variance_mj2)) {
            return Err(ModelError::InvalidArgument(format!(
                "first passage needs positive finite R ({remaining_mj}), μ ({daily_mean_mj}) and σ² ({daily_variance_mj2})"
            )));
        }
        Ok(Self { mean_days: remaining_mj / daily_mean_mj, shape_days: remaining_mj * remaining_mj / daily_variance_mj2 })
    }

    /// Variance of the passage time, days²: m³/λ (= R·σ²/μ³).
    pub fn variance_days2(&self) -> f64 {
        self.mean_days.powi(3) / self.shape_days
    }

    /// Probability that the energy is reached within `days`.
    pub fn cdf(&self, days: f64) -> f64 {
        if days <= 0.0 {
            return 0.0;
        }
        let Ok(normal) = Normal::new(0.0, 1.0) else { return f64::NAN };
        let m = self.mean_days;
        let l = self.shape_days;
        let root = (l / days).sqrt();
        let first = normal.cdf(root * (days / m - 1.0));
        let tail = normal.cdf(-root * (days / m + 1.0));
        let second = if tail > 0.0 { (2.0 * l / m + tail.ln()).exp() } else { 0.0 };
        (first + second).clamp(0.0, 1.0)
    }

    /// Quantile (days) at `probability` in (0, 1), by bisection on [`Self::cdf`].
    pub fn quantile(&self, probability: f64) -> f64 {
        let p = probability.clamp(1e-12, 1.0 - 1e-12);
        let mut low = 0.0;
        let mut high = self.mean_days.max(1e-9);
        while self.cdf(high) < p {
            high *= 2.0;
            if high > 1e15 {
                return f64::INFINITY;
            }
        }
        for _ in 0..200 {
            let mid = 0.5 * (low + high);
            if self.cdf(mid) < p {
                low = mid;
            } else {
                high = mid;
            }
            if high - low <= 1e-12 * high {
                break;
            }
        }
        0.5 * (low + high)
    }

    /// The passage time, days, that the transformation of Michael, Schucany & Haas (1976,
    /// *The American Statistician* 30:88) makes of a χ²₁ value `chi_square` (ν² for a standard
    /// normal ν) and a uniform `uniform` in (0, 1): the smaller root
    /// `x = m/(1 + a + √(a² + 2a))`, `a = m·ν²/(2λ)` (the textbook
    /// `m + m²ν²/(2λ) − (m/2λ)·√(4mλν² + m²ν⁴)`, rewritten so that it does not cancel), taken
    /// with probability `m/(m + x)`, else `m²/x`. Fed independent χ²₁ and uniform values it is
    /// inverse Gaussian; fed quasi-random ones it integrates over the passage time.
    #[inline]
    pub fn transform(&self, chi_square: f64, uniform: f64) -> f64 {
        let m = self.mean_days;
        smaller_or_larger_root(m, m * chi_square / (2.0 * self.shape_days), uniform)
    }

    /// `FirstPassage::new(margin_mm / rate_mm_per_mj, daily_mean_mj, daily_variance_mj2)`
    /// followed by [`Self::transform`]`(chi_square, uniform)`, for a remaining energy given as
    /// the thickness left over the wear rate, with the divisions folded into one: with
    /// `q = 1/(margin·rate·μ)`, `m = R/μ = margin²·q` and `m·ν²/(2λ) = ν²·σ²/(2Rμ) = ν²·σ²·rate²·q/2`.
    /// The same value up to rounding, computed without a branch, and whether the inputs were
    /// ones [`Self::new`] accepts (all positive and finite; the value means nothing otherwise).
    /// A loop over many points with it has no branches, so the compiler can vectorise it.
    #[inline(always)]
    pub fn transform_margin(
        margin_mm: f64,
        rate_mm_per_mj: f64,
        daily_mean_mj: f64,
        daily_variance_mj2: f64,
        chi_square: f64,
        uniform: f64,
    ) -> (f64, bool) {
        let q = 1.0 / (margin_mm * rate_mm_per_mj * daily_mean_mj);
        let m = margin_mm * margin_mm * q;
        let a = 0.5 * chi_square * daily_variance_mj2 * rate_mm_per_mj * rate_mm_per_mj * q;
        // Finite and positive, as comparisons (NaN fails both) combined without short cuts.
        let valid = |v: f64| (v > 0.0) & (v < f64::INFINITY);
        let all_valid = valid(margin_mm) & valid(rate_mm_per_mj) & valid(daily_mean_mj) & valid(daily_variance_mj2) & valid(m) & valid(q);
        (smaller_or_larger_root(m, a, uniform), all_valid)
    }

    /// One random passage time, days (Michael, Schucany & Haas 1976 via `rand_distr`).
    pub fn sample<R: Rng + ?Sized>(&self, rng: &mut R) -> f64 {
        match InverseGaussian::new(self.mean_days, self.shape_days) {
            Ok(d) => d.sample(rng),
            Err(_) => self.mean_days,
        }
    }
}

/// The Michael-Schucany-Haas step of [`FirstPassage::transform`] given the mean `m` and
/// `a = m·ν²/(2λ)`: the smaller root `x = m/D`, `D = 1 + a + √(a² + 2a)`, taken with
/// probability `m/(m + x)` (`uniform` below it), else the larger `m²/x = m·D`.
#[inline(always)]
fn smaller_or_larger_root(m: f64, a: f64, uniform: f64) -> f64 {
    let denominator = 1.0 + a + (a * a + 2.0 * a).sqrt();
    let x = m / denominator;
    // Both roots, then a select: which one is taken is a coin flip for the processor, and a
    // mispredicted branch costs more than a multiplication.
    let larger = m * denominator;
    if uniform * (m + x) <= m {
        x
    } else {
        larger
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The folded form gives what `new` then `transform` give (that pair is checked against
    /// scipy's inverse Gaussian in `tests/distributions.rs`), to rounding.
    #[test]
    fn transform_margin_is_new_then_transform() {
        for &(margin, rate, mean, variance) in &[(8.0, 4e-4, 60.0, 900.0), (0.02, 1e-3, 5.0, 400.0), (15.0, 2e-5, 300.0, 1.0)] {
            let fp = FirstPassage::new(margin / rate, mean, variance).expect("valid");
            for &chi in &[1e-6, 0.3, 1.0, 4.0, 30.0] {
                for &u in &[0.01, 0.4, 0.6, 0.99] {
                    let (folded, valid) = FirstPassage::transform_margin(margin, rate, mean, variance, chi, u);
                    assert!(valid);
                    let reference = fp.transform(chi, u);
                    assert!((folded - reference).abs() <= 1e-13 * reference, "{folded} vs {reference}");
                }
            }
        }
        assert!(!FirstPassage::transform_margin(0.0, 1e-3, 50.0, 100.0, 1.0, 0.5).1);
        assert!(!FirstPassage::transform_margin(5.0, 1e-3, 50.0, 0.0, 1.0, 0.5).1);
        assert!(!FirstPassage::transform_margin(5.0, f64::NAN, 50.0, 100.0, 1.0, 0.5).1);
        assert!(!FirstPassage::transform_margin(5.0, 1e-3, f64::INFINITY, 100.0, 1.0, 0.5).1);
    }
}
