//! Fleet pooling: the population distribution of wear rates within a group (vehicle class,
//! axle, component), and its combination with one vehicle's own estimate.
//!
//! # Model
//! Random-coefficient degradation (Lu & Meeker 1993, Technometrics 35:161): each vehicle `i`
//! has its own rate `kᵢ ~ N(μ, τ²)`, and its fit reports `k̂ᵢ ~ N(kᵢ, sᵢ²)`. The prior
//! `N(μ, τ²)` is estimated from the group by the method of moments of DerSimonian & Laird
//! (1986, Controlled Clinical Trials 7:177):
//!
//! ```text
//! wᵢ = 1/sᵢ²,   k̄ = Σwᵢk̂ᵢ/Σwᵢ,   Q = Σwᵢ(k̂ᵢ − k̄)²
//! τ² = max(0, (Q − (n−1)) / (Σwᵢ − Σwᵢ²/Σwᵢ))
//! μ  = Σwᵢ*k̂ᵢ/Σwᵢ*  with  wᵢ* = 1/(sᵢ² + τ²)
//! ```
//! The pooled residual standard deviation `√(Σνᵢsᵢ²/Σνᵢ)` of the group is kept as well: it
//! stands in for a vehicle's own when that has few degrees of freedom.
//!
//! A vehicle's estimate is combined with the prior by precision weighting (the conjugate
//! normal update; Gebraeel et al. 2005, IIE Transactions 37:543):
//! `k_post = (k̂/s² + μ/τ²)/(1/s² + 1/τ²)`, `Var = 1/(1/s² + 1/τ²)`.

use serde::{Deserialize, Serialize};

use crate::wear_fit::WearFit;

/// Fewest vehicles with an own fit for a group prior.
pub const MIN_PRIOR_VEHICLES: usize = 3;

/// Population distribution of wear rates in a group.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct WearPrior {
    /// Mean wear rate μ, mm/MJ.
    pub mean_mm_per_mj: f64,
    /// Between-vehicle standard deviation τ, mm/MJ.
    pub between_sd_mm_per_mj: f64,
    /// Vehicles (own fits) the prior rests on.
    pub vehicles: u32,
    /// Pooled residual standard deviation of the group's fits, mm.
    pub residual_sd_mm: f64,
    /// Degrees of freedom behind `residual_sd_mm`.
    pub residual_degrees_of_freedom: f64,
}

/// Estimates the group prior from the own-data fits of one group (vehicle class, axle,
/// component). `None` with fewer than [`MIN_PRIOR_VEHICLES`] usable fits.
pub fn estimate_prior(fits: &[WearFit]) -> Option<WearPrior> {
    let usable: Vec<&WearFit> = fits
        .iter()
        .filter(|f| {
            f.rate_mm_per_mj.is_finite()
                && f.rate_mm_per_mj > 0.0
                && f.rate_stderr_mm_per_mj.is_finite()
                && f.rate_stderr_mm_per_mj > 0.0
        })
        .collect();
    let n = usable.len();
    if n < MIN_PRIOR_VEHICLES {
        return None;
    }
    let w: Vec<f64> = usable.iter().map(|f| 1.0 / f.rate_stderr_mm_per_mj.powi(2)).collect();
    let sw: f64 = w.iter().sum();
    let sw2: f64 = w.iter().map(|v| v * v).sum();
    let fixed_mean = usable.iter().zip(&w).map(|(f, w)| w * f.rate_mm_per_mj).sum::<f64>() / sw;
    let q: f64 = usable.iter().zip(&w).map(|(f, w)| w * (f.rate_mm_per_mj - fixed_mean).powi(2)).sum();
    let denominator = sw - sw2 / sw;
    let tau2 = if denominator > 0.0 { ((q - (n as f64 - 1.0)) / denominator).max(0.0) } else { 0.0 };
    let w_star: Vec<f64> = usable.iter().map(|f| 1.0 / (f.rate_stderr_mm_per_mj.powi(2) + tau2)).collect();
    let mean = usable.iter().zip(&w_star).map(|(f, w)| w * f.rate_mm_per_mj).sum::<f64>() / w_star.iter().sum::<f64>();
    let df: f64 = usable.iter().map(|f| f.degrees_of_freedom).sum();
    let ss: f64 = usable.iter().map(|f| f.degrees_of_freedom * f.residual_sd_mm.powi(2)).sum();
    let residual_sd_mm = if df > 0.0 { (ss / df).sqrt() } else { 0.0 };
    Some(WearPrior {
        mean_mm_per_mj: mean,
        between_sd_mm_per_mj: tau2.sqrt(),
        vehicles: n as u32,
        residual_sd_mm,
        residual_degrees_of_freedom: df,
    })
}

/// Precision-weighted combination of an estimate `(mean, variance)` with the prior; returns
/// the posterior `(mean, variance)`. A zero between-vehicle variance makes the prior decisive.
pub fn combine(own_mean: f64, own_variance: f64, prior: &WearPrior) -> (f64, f64) {
    let tau2 = prior.between_sd_mm_per_mj.powi(2);
    if tau2 <= 0.0 {
        return (prior.mean_mm_per_mj, 0.0);
    }
    if own_variance.is_nan() || own_variance <= 0.0 {
        return (own_mean, 0.0);
    }
    let precision = 1.0 / own_variance + 1.0 / tau2;
    let mean = (own_mean / own_variance + prior.mean_mm_per_mj / tau2) / precision;
    (mean, 1.0 / precision)
}
