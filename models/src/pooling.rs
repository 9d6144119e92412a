//! Fleet pooling: the population distribution of wear rates within a group (vehicle class,
//! axle, component), the prior it gives one vehicle, and a rotor's borrowing from its vehicle's pads.
//!
//! # Model
//! Random-coefficient degradation (Lu & Meeker 1993, Technometrics 35:161): vehicle `i` has
//! its own rate `kᵢ ~ N(μ, τ²)` and its own fit reports `k̂ᵢ ~ N(kᵢ, sᵢ²)`.
//!
//! **The variance of a vehicle's estimate, `sᵢ²`**, is the one the forecast uses, never the raw
//! OLS value from one or two degrees of freedom:
//! ```text
//! σᵢ² = (νᵢ·rᵢ² + ν₀·σ₀²)/(νᵢ + ν₀)      residual variance shrunk toward the group's σ₀²
//! sᵢ² = gᵢ·σᵢ² · ν/(ν − 2) · (1 + ρ)/(1 − ρ),   ν = νᵢ + ν₀
//! ```
//! `gᵢ = gᵀ(XᵀX)⁻¹g` from the fit, `ν/(ν−2)` the variance of a Student-t with the shrunk
//! degrees of freedom (a t-type spread for few inspections), and `(1+ρ)/(1−ρ)` the variance
//! inflation of a least-squares slope under AR(1) residuals of lag-1 autocorrelation ρ
//! (Box, Jenkins & Reinsel, *Time Series Analysis*, the variance of a mean under AR(1);
//! recalled from memory). ρ is pooled over the group's fits, `Σ eⱼeⱼ₋₁ / Σ eⱼ²`, clamped to
//! `[0, ρ_max]`: real wear per MJ wanders with temperature and duty, so residuals within a cycle
//! run in streaks and the OLS standard error alone is too small.
//!
//! **τ² and μ** come from Paule–Mandel ([`crate::random_effects`]); τ is floored at a fraction
//! of μ ([`crate::settings::ForecastSettings::between_sd_floor_fraction`]) so that a group
//! that happens to look homogeneous never makes a rate exactly known.
//!
//! **Leave-one-out.** The prior a vehicle is shrunk toward never contains that vehicle's own
//! fit: with `wⱼ = 1/(sⱼ² + τ²)`, `W₋ᵢ = Σⱼ≠ᵢ wⱼ`,
//! ```text
//! μ₋ᵢ = Σⱼ≠ᵢ wⱼk̂ⱼ / W₋ᵢ,     predictive variance  τ² + 1/W₋ᵢ
//! ```
//! (between-vehicle variance plus the uncertainty of the pooled mean). τ² itself is kept from
//! the whole group.
//!
//! **A rotor borrows from its vehicle's pads.** Pad and rotor of one brake share the vehicle's
//! duty, and every brake of a vehicle shares its driver, load and routes, so a rotor's rate is
//! modelled as bivariate normal with the vehicle's *pad deviation* `x`: the mean over the
//! vehicle's axles of each pad's relative deviation from its group's mean, stated in the units
//! of this axle's pad ([`vehicle_pad_deviation`]):
//! ```text
//! x = μ_p · (1/n)·Σ_b (k_b − μ_b)/μ_b,      Var x = μ_p² · (1/n²)·Σ_b v_b/μ_b²
//! ```
//! (`b` runs over the `n` axles whose pad has a rate, `μ_p` is this axle's pad group mean; with
//! one axle, `x = k_pad − μ_p`). The pads of the other axles see the vehicle's share of the
//! rotor's rate through readings of their own, so the vehicle's part is less blurred by any one
//! pad's own factor. Within a class and axle, from the vehicles with both fits,
//! `τ_x² = Var(x̂) − mean Var(x̂ | x)` (the spread of the true deviations: the observed spread
//! less the estimates' error variance, a method-of-moments correction for error in the
//! regressor; Fuller, *Measurement Error Models*, 1987, §1.1, recalled from memory), floored as
//! τ is, and `ρ_pr = Cov(x̂, k̂_rotor)/(τ_x·τ_rotor)` (the estimates' errors are independent,
//! so the sample covariance of the estimates estimates that of the true rates), clamped to
//! ±0.9. Given the vehicle's pad deviation from the pads' posteriors, `N(x, v_x)`, the rotor's
//! prior is the conditional normal:
//! ```text
//! β = ρ_pr·τ_rotor/τ_x
//! mean = μ_rotor,₋ᵢ + β·x,   variance = τ_rotor²·(1 − ρ_pr²) + β²·v_x + 1/W₋ᵢ
//! ```
//! so a rotor whose own change is still within gauge noise is forecast from the fleet and from
//! its vehicle's pad rates. One group's ρ_pr rests on some thirty vehicles and scatters widely by
//! chance, so the groups of a fleet are pooled on Fisher's z scale and each group's ρ_pr is
//! shrunk toward the fleet's ([`pool_pad_rotor_correlations`]); β follows the shrunk ρ_pr.
//!
//! A vehicle's estimate is then combined with its prior (Bayesian updating of a degradation
//! rate; Gebraeel et al. 2005, IIE Transactions 37:543). Rates spread multiplicatively between
//! vehicles, so the prior is taken as lognormal with the prior's mean and variance and the
//! posterior integrated on a grid of log k ([`combine_lognormal`]); where the own estimate is
//! too precise for that grid, the prior's shape does not matter and the conjugate normal update
//! is used ([`combine`]): `k_post = (k̂/s² + m/v)/(1/s² + 1/v)`, `Var = 1/(1/s² + 1/v)`.

use std::borrow::Borrow;

use serde::{Deserialize, Serialize};

use crate::random_effects::paule_mandel;
use crate::vector_exp::exp_non_positive;
use crate::settings::ForecastSettings;
use crate::wear_fit::WearFit;

/// Fewest vehicles with an own fit for a group prior.
pub const MIN_PRIOR_VEHICLES: usize = 3;

/// Largest pad-rotor correlation used (a bound against a perfect-looking small sample).
const MAX_PAD_ROTOR_CORRELATION: f64 = 0.9;

/// One vehicle's contribution to a group prior, kept so that the vehicle can be left out of the
/// prior it is shrunk toward.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct PriorMember {
    /// Stable key of the vehicle ([`vehicle_key`]).
    pub vehicle_key: u64,
    /// The vehicle's own rate estimate k̂ᵢ, mm/MJ.
    pub rate_mm_per_mj: f64,
    /// Its variance sᵢ² as pooled (module docs), (mm/MJ)².
    pub rate_variance: f64,
}

/// How the rotors (drums) of a group follow their vehicles' pads (linings).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct PadCoupling {
    /// Correlation between a vehicle's true pad deviation (module docs) and rotor rate within
    /// the group.
    pub correlation: f64,
    /// β: rotor rate change per unit change of the vehicle's pad deviation, stated in this
    /// axle's pad rate, (mm/MJ)/(mm/MJ).
    pub slope: f64,
    /// Vehicles with both fits behind the estimate.
    pub vehicles: u32,
}

/// Population distribution of wear rates in a group.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct WearPrior {
    /// Mean wear rate μ, mm/MJ (whole group).
    pub mean_mm_per_mj: f64,
    /// Between-vehicle standard deviation τ, mm/MJ (floored, module docs).
    pub between_sd_mm_per_mj: f64,
    /// Vehicles (own fits) the prior rests on.
    pub vehicles: u32,
    /// Pooled residual standard deviation σ₀ of the group's fits, mm.
    pub residual_sd_mm: f64,
    /// Degrees of freedom behind `residual_sd_mm`.
    pub residual_degrees_of_freedom: f64,
    /// Pooled lag-1 autocorrelation ρ of the residuals within cycles, clamped (module docs).
    pub residual_autocorrelation: f64,
    /// Σwⱼ over the members at τ², (mm/MJ)⁻².
    pub weight_sum: f64,
    /// Σwⱼk̂ⱼ over the members, (mm/MJ)⁻¹.
    pub weighted_rate_sum: f64,
    /// The members, sorted by `vehicle_key`.
    pub members: Vec<PriorMember>,
    /// For a rotor or drum group: how it follows the pads on the same axle.
    pub pad_coupling: Option<PadCoupling>,
}

/// The prior for one vehicle's rate: a normal distribution with its provenance.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct RatePrior {
    /// Prior mean, mm/MJ.
    pub mean_mm_per_mj: f64,
    /// Prior (predictive) variance, (mm/MJ)².
    pub variance: f64,
    /// Other vehicles it rests on.
    pub vehicles: u32,
    /// The group's pooled residual SD σ₀, mm.
    pub residual_sd_mm: f64,
    /// The group's residual autocorrelation ρ.
    pub residual_autocorrelation: f64,
    /// Whether the mean was moved by the vehicle's pads (a rotor or drum).
    pub from_pad: bool,
    /// Log-SD of the drift of the wear rate from today on ([`wear_drift_sd`]).
    pub rate_drift_sd: f64,
}

/// The allowance for the wear rate to drift from today on, as a log-SD:
/// `c·√max(0, 1 − g²/σ₀²)`, with `σ₀` the group's residual SD, `g` the gauge noise and `c` =
/// [`ForecastSettings::wear_rate_relative_sd`]. The share of the residual variance that gauge
/// noise does not explain is wear that does not follow a straight line in energy (heat, duty,
/// lining batch): where the past shows it, the future will too. A group whose residuals are
/// gauge noise alone gets no allowance.
pub fn wear_drift_sd(residual_sd_mm: f64, settings: &ForecastSettings) -> f64 {
    let c = if settings.wear_rate_relative_sd.is_finite() { settings.wear_rate_relative_sd.max(0.0) } else { 0.0 };
    if residual_sd_mm.is_nan() || residual_sd_mm <= 0.0 {
        return 0.0;
    }
    let gauge = settings.gauge_sd_mm.max(0.0);
    c * (1.0 - (gauge / residual_sd_mm).powi(2)).max(0.0).sqrt()
}

/// A stable key for a vehicle from its identifiers (FNV-1a, 64-bit).
pub fn vehicle_key(identifiers: &[&str]) -> u64 {
    crate::forecast::vehicle_seed(0, identifiers)
}

/// σᵢ²: a fit's residual variance shrunk toward the group's σ₀ with weight ν₀, mm².
pub fn shrunk_residual_variance(fit: &WearFit, group_residual_sd_mm: f64, settings: &ForecastSettings) -> f64 {
    let nu = fit.degrees_of_freedom.max(0.0);
    let nu0 = settings.prior_residual_weight.max(0.0);
    let s0 = group_residual_sd_mm * group_residual_sd_mm;
    if nu + nu0 > 0.0 {
        (nu * fit.residual_sd_mm.powi(2) + nu0 * s0) / (nu + nu0)
    } else {
        s0
    }
}

/// The variance factor of a rate from `degrees_of_freedom` and residual autocorrelation ρ:
/// `ν/(ν − 2) · (1 + ρ)/(1 − ρ)` (module docs); ν ≤ 3 counts as 3.
pub fn rate_variance_inflation(degrees_of_freedom: f64, autocorrelation: f64, settings: &ForecastSettings) -> f64 {
    let nu = degrees_of_freedom.max(3.0);
    let rho = autocorrelation.clamp(0.0, settings.max_residual_autocorrelation.clamp(0.0, 0.99));
    nu / (nu - 2.0) * (1.0 + rho) / (1.0 - rho)
}

/// sᵢ²: the variance of a fit's rate as the pooling and the forecast both use it, (mm/MJ)².
pub fn own_rate_variance(fit: &WearFit, group_residual_sd_mm: f64, autocorrelation: f64, settings: &ForecastSettings) -> f64 {
    let sigma2 = shrunk_residual_variance(fit, group_residual_sd_mm, settings);
    let nu = fit.degrees_of_freedom.max(0.0) + settings.prior_residual_weight.max(0.0);
    fit.rate_variance_per_residual_variance * sigma2 * rate_variance_inflation(nu, autocorrelation, settings)
}

fn usable(fit: &WearFit) -> bool {
    fit.rate_mm_per_mj.is_finite()
        && fit.rate_variance_per_residual_variance.is_finite()
        && fit.rate_variance_per_residual_variance > 0.0
        && fit.residual_sd_mm.is_finite()
}

/// Estimates the group prior from the own-data fits of one group, each with its vehicle's key
/// (module docs). Fits of any sign count. `None` with fewer than [`MIN_PRIOR_VEHICLES`] usable
/// fits or when the pooled mean is not positive.
/// The fits may be owned or borrowed (`WearFit` or `&WearFit`).
pub fn estimate_prior<F: Borrow<WearFit>>(fits: &[(u64, F)], settings: &ForecastSettings) -> Option<WearPrior> {
    let usable: Vec<(u64, &WearFit)> = fits.iter().map(|(k, f)| (*k, f.borrow())).filter(|(_, f)| usable(f)).collect();
    if usable.len() < MIN_PRIOR_VEHICLES {
        return None;
    }
    let df: f64 = usable.iter().map(|(_, f)| f.degrees_of_freedom.max(0.0)).sum();
    let ss: f64 = usable.iter().map(|(_, f)| f.degrees_of_freedom.max(0.0) * f.residual_sd_mm.powi(2)).sum();
    let residual_sd_mm = if df > 0.0 && ss > 0.0 { (ss / df).sqrt() } else { settings.gauge_sd_mm };
    let rss: f64 = usable.iter().map(|(_, f)| f.residual_sum_squares_mm2.max(0.0)).sum();
    let lag: f64 = usable.iter().map(|(_, f)| f.residual_lag_product_sum_mm2).sum();
    let limit = settings.max_residual_autocorrelation.clamp(0.0, 0.99);
    let residual_autocorrelation = if rss > 0.0 { (lag / rss).clamp(0.0, limit) } else { 0.0 };

    let rates: Vec<f64> = usable.iter().map(|(_, f)| f.rate_mm_per_mj).collect();
    let variances: Vec<f64> =
        usable.iter().map(|(_, f)| own_rate_variance(f, residual_sd_mm, residual_autocorrelation, settings)).collect();
    let pm = paule_mandel(&rates, &variances)?;
    if pm.mean.is_nan() || pm.mean <= 0.0 {
        return None;
    }
    let floor = settings.between_sd_floor_fraction.max(0.0) * pm.mean;
    let tau2 = pm.between_variance.max(floor * floor);
    let mut members: Vec<PriorMember> = usable
        .iter()
        .zip(&variances)
        .map(|((key, f), v)| PriorMember { vehicle_key: *key, rate_mm_per_mj: f.rate_mm_per_mj, rate_variance: *v })
        .collect();
    members.sort_by_key(|m| m.vehicle_key);
    let weight_sum: f64 = members.iter().map(|m| 1.0 / (m.rate_variance + tau2)).sum();
    let weighted_rate_sum: f64 = members.iter().map(|m| m.rate_mm_per_mj / (m.rate_variance + tau2)).sum();
    let mean = weighted_rate_sum / weight_sum;
    if mean.is_nan() || mean <= 0.0 {
        return None;
    }
    Some(WearPrior {
        mean_mm_per_mj: mean,
        between_sd_mm_per_mj: tau2.sqrt(),
        vehicles: members.len() as u32,
        residual_sd_mm,
        residual_degrees_of_freedom: df,
        residual_autocorrelation,
        weight_sum,
        weighted_rate_sum,
        members,
        pad_coupling: None,
    })
}

impl WearPrior {
    /// The member entry of a vehicle, if its fit is in the prior.
    pub fn member(&self, vehicle_key: u64) -> Option<&PriorMember> {
        self.members.binary_search_by_key(&vehicle_key, |m| m.vehicle_key).ok().map(|i| &self.members[i])
    }

    /// The prior for vehicle `vehicle_key`: the group without that vehicle's own fit, with the
    /// predictive variance τ² + 1/W₋ᵢ (module docs).
    pub fn predictive_for(&self, vehicle_key: u64, settings: &ForecastSettings) -> RatePrior {
        let tau2 = self.between_sd_mm_per_mj.powi(2);
        let (mut w, mut wk, mut n) = (self.weight_sum, self.weighted_rate_sum, self.vehicles);
        if let Some(m) = self.member(vehicle_key) {
            let wi = 1.0 / (m.rate_variance + tau2);
            // Never leave the sum empty or negative through rounding.
            if w - wi > 1e-9 * w && n > 1 {
                w -= wi;
                wk -= wi * m.rate_mm_per_mj;
                n -= 1;
            }
        }
        let mean = wk / w;
        // Leaving a vehicle out can only move the mean so far; a non-positive mean (a group of
        // near-zero rates) falls back to the whole group's.
        let mean = if mean > 0.0 { mean } else { self.mean_mm_per_mj };
        RatePrior {
            mean_mm_per_mj: mean,
            variance: tau2 + 1.0 / w,
            vehicles: n,
            residual_sd_mm: self.residual_sd_mm,
            residual_autocorrelation: self.residual_autocorrelation,
            from_pad: false,
            rate_drift_sd: wear_drift_sd(self.residual_sd_mm, settings),
        }
    }

    /// The prior of a rotor (drum) of vehicle `vehicle_key` given its own pad's prior and the
    /// vehicle's pad deviation `(x, v_x)` added to that prior's mean: `pad_posterior` =
    /// `(μ_p + x, v_x)` (module docs; with one axle, simply the pad's posterior rate `(mean,
    /// variance)`). Without a coupling it is
    /// [`Self::predictive_for`]. The rotor's drift allowance is at least its pad's: both wear on
    /// one brake at one temperature.
    pub fn predictive_given_pad(&self, vehicle_key: u64, pad_posterior: (f64, f64), pad_prior: &RatePrior, settings: &ForecastSettings) -> RatePrior {
        let mut base = self.predictive_for(vehicle_key, settings);
        base.rate_drift_sd = base.rate_drift_sd.max(pad_prior.rate_drift_sd);
        let pad_prior_mean = pad_prior.mean_mm_per_mj;
        let Some(c) = self.pad_coupling else { return base };
        let (m_p, v_p) = pad_posterior;
        if !(m_p.is_finite() && v_p.is_finite() && pad_prior_mean.is_finite()) {
            return base;
        }
        let tau2 = self.between_sd_mm_per_mj.powi(2);
        let mean_uncertainty = (base.variance - tau2).max(0.0);
        let mean = base.mean_mm_per_mj + c.slope * (m_p - pad_prior_mean);
        // The conditional mean cannot make a wearing part grow; keep it above a small fraction
        // of the group mean.
        let mean = mean.max(0.1 * base.mean_mm_per_mj);
        RatePrior {
            mean_mm_per_mj: mean,
            variance: tau2 * (1.0 - c.correlation * c.correlation) + c.slope * c.slope * v_p.max(0.0) + mean_uncertainty,
            from_pad: true,
            ..base
        }
    }
}

/// The vehicle's pad deviation `(x, Var x)` (module docs) from `(rate, variance, group mean)`
/// of each of its pads (mm/MJ, (mm/MJ)², mm/MJ), in the units of a pad whose group mean is
/// `own_group_mean_mm_per_mj`. Readings with a non-finite value or a non-positive group mean
/// are skipped; `None` when none is left.
pub fn vehicle_pad_deviation(readings: impl IntoIterator<Item = (f64, f64, f64)>, own_group_mean_mm_per_mj: f64) -> Option<(f64, f64)> {
    let (mut deviation, mut variance, mut n) = (0.0, 0.0, 0usize);
    for (rate, rate_variance, group_mean) in readings {
        if !(rate.is_finite() && rate_variance.is_finite() && group_mean.is_finite() && group_mean > 0.0) {
            continue;
        }
        deviation += (rate - group_mean) / group_mean;
        variance += rate_variance.max(0.0) / (group_mean * group_mean);
        n += 1;
    }
    if n == 0 || !own_group_mean_mm_per_mj.is_finite() {
        return None;
    }
    let n = n as f64;
    let scale = own_group_mean_mm_per_mj;
    Some((scale * deviation / n, scale * scale * variance / (n * n)))
}

/// How a rotor (drum) group follows its vehicles' pads (linings), with the spread `τ_x` of the
/// true pad deviations (mm/MJ) its slope was computed with.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CouplingEstimate {
    /// The coupling (correlation, slope β, vehicles).
    pub coupling: PadCoupling,
    /// τ_x, mm/MJ: β = ρ_pr·τ_rotor/τ_x.
    pub deviation_sd_mm_per_mj: f64,
}

/// Estimates how a rotor (drum) group follows the vehicle's pad deviation (module docs) from the
/// vehicles with an own fit in `rotor` and in `own_pad` (the pad group of the same class and
/// axle); `pads` are the pad groups of every axle of the class (`own_pad` among them), in axle
/// order. `None` with fewer than `settings.min_coupling_vehicles` such vehicles.
pub fn estimate_pad_coupling(pads: &[&WearPrior], own_pad: &WearPrior, rotor: &WearPrior, settings: &ForecastSettings) -> Option<CouplingEstimate> {
    // (x̂, Var(x̂ | x), k̂_rotor) per vehicle.
    let triples: Vec<(f64, f64, f64)> = rotor
        .members
        .iter()
        .filter(|r| own_pad.member(r.vehicle_key).is_some())
        .filter_map(|r| {
            let readings = pads.iter().filter_map(|p| p.member(r.vehicle_key).map(|m| (m.rate_mm_per_mj, m.rate_variance, p.mean_mm_per_mj)));
            vehicle_pad_deviation(readings, own_pad.mean_mm_per_mj).map(|(x, v)| (x, v, r.rate_mm_per_mj))
        })
        .collect();
    let n = triples.len();
    if n < settings.min_coupling_vehicles.max(3) {
        return None;
    }
    let nf = n as f64;
    let mx = triples.iter().map(|t| t.0).sum::<f64>() / nf;
    let mr = triples.iter().map(|t| t.2).sum::<f64>() / nf;
    let cov = triples.iter().map(|t| (t.0 - mx) * (t.2 - mr)).sum::<f64>() / (nf - 1.0);
    let spread = triples.iter().map(|t| (t.0 - mx).powi(2)).sum::<f64>() / (nf - 1.0);
    let error = triples.iter().map(|t| t.1).sum::<f64>() / nf;
    let floor = settings.between_sd_floor_fraction.max(0.0) * own_pad.mean_mm_per_mj;
    let tx = (spread - error).max(floor * floor).sqrt();
    let tr = rotor.between_sd_mm_per_mj;
    if !(tx > 0.0 && tr > 0.0 && cov.is_finite()) {
        return None;
    }
    let correlation = (cov / (tx * tr)).clamp(-MAX_PAD_ROTOR_CORRELATION, MAX_PAD_ROTOR_CORRELATION);
    Some(CouplingEstimate {
        coupling: PadCoupling { correlation, slope: correlation * tr / tx, vehicles: n as u32 },
        deviation_sd_mm_per_mj: tx,
    })
}

/// Shrinks each rotor (drum) group's pad–rotor correlation toward the fleet's, given each
/// group's `(correlation, vehicles)`; returns the shrunk correlations in the same order.
///
/// One group of thirty vehicles estimates a correlation with a standard error of about 0.15,
/// so groups sharing one mechanism (pad and rotor of one brake share the vehicle's duty) show
/// correlations scattered from 0.2 to 0.9 by chance. The groups are therefore pooled as a
/// random-effects meta-analysis of correlations on Fisher's z scale: `zᵍ = atanh(rᵍ)` with
/// sampling variance `1/(nᵍ − 3)` (Hedges & Olkin 1985, *Statistical Methods for
/// Meta-Analysis*, ch. 11), the between-group variance τ_z² and the pooled ẑ by Paule–Mandel
/// ([`crate::random_effects`]), and each group's z replaced by its posterior mean
/// `(zᵍ/vᵍ + ẑ/τ_z²)/(1/vᵍ + 1/τ_z²)` (ẑ itself when τ_z² = 0), back-transformed by tanh and
/// clamped to ±0.9. A single group, or groups of three vehicles or fewer, keep their own.
pub fn pool_pad_rotor_correlations(groups: &[(f64, u32)]) -> Vec<f64> {
    let bound = MAX_PAD_ROTOR_CORRELATION;
    let clamp = |r: f64| r.clamp(-bound, bound);
    let usable: Vec<(usize, f64, f64)> = groups
        .iter()
        .enumerate()
        .filter(|(_, (r, n))| r.is_finite() && *n > 3)
        .map(|(i, (r, n))| (i, r.clamp(-0.95, 0.95).atanh(), 1.0 / (f64::from(*n) - 3.0)))
        .collect();
    let z: Vec<f64> = usable.iter().map(|u| u.1).collect();
    let v: Vec<f64> = usable.iter().map(|u| u.2).collect();
    let mut out: Vec<f64> = groups.iter().map(|(r, _)| clamp(*r)).collect();
    let Some(pm) = paule_mandel(&z, &v) else { return out };
    for &(i, zi, vi) in &usable {
        let shrunk = if pm.between_variance > 0.0 {
            (zi / vi + pm.mean / pm.between_variance) / (1.0 / vi + 1.0 / pm.between_variance)
        } else {
            pm.mean
        };
        out[i] = clamp(shrunk.tanh());
    }
    out
}

/// Points of the log-rate grid of [`combine_lognormal`].
const LOG_RATE_GRID_POINTS: usize = 400;

/// Largest step in ln k that [`combine_lognormal`] sums over.
const MAX_LOG_RATE_STEP: f64 = 0.1;

/// [`combine_lognormal`] sums with a step in ln k of at most this over the square root of a
/// bound on the log density's curvature (trapezoid error bound about exp(−2π²) ≈ 3·10⁻⁹ at
/// that bound, far less in practice).
const STEP_CURVATURE: f64 = 1.0;

/// Posterior `(mean, variance)` of a rate whose prior is lognormal and whose own estimate is
/// normal: the prior's mean `m` and variance `v` are matched by a lognormal (σ_l² = ln(1 +
/// v/m²), μ_l = ln m − σ_l²/2), the own estimate `k̂ ~ N(k, s²)` is the likelihood, and the
/// posterior moments of `k` are integrated on an even grid of `u = ln k` spanning both
/// (posterior density in u ∝ N(u; μ_l, σ_l²)·N(k̂; eᵘ, s²)).
///
/// Wear rates are positive and spread multiplicatively between vehicles (a vehicle factor times
/// a part factor), so a lognormal prior fits them better than a normal one: it puts no mass
/// at or below zero (a negative own slope within gauge noise is combined without truncation),
/// and its right tail is heavier, so a part that really wears fast is pulled down less; its
/// left tail is lighter, so a slow part is pulled up a little more than by a normal prior of
/// the same mean and spread. Random-parameter degradation models with lognormal rates: Meeker
/// & Escobar, *Statistical Methods for Reliability Data*, 1998, ch. 13 (recalled from memory).
///
/// `None` when an input is not finite or not positive where it must be, or when the own
/// estimate is so precise that the grid cannot resolve it (the prior's shape is then
/// immaterial; use [`combine`]).
pub fn combine_lognormal(own_mean: f64, own_variance: f64, prior: &RatePrior) -> Option<(f64, f64)> {
    let (m, v) = (prior.mean_mm_per_mj, prior.variance);
    if !(own_mean.is_finite() && own_variance > 0.0 && own_variance.is_finite() && m > 0.0 && v > 0.0 && m.is_finite() && v.is_finite()) {
        return None;
    }
    let log_var = (v / (m * m)).ln_1p();
    let log_sd = log_var.sqrt();
    let log_mean = m.ln() - 0.5 * log_var;
    let own_sd = own_variance.sqrt();
    // The grid spans ±6 prior SDs and the likelihood's ±6 SDs (where positive).
    let low = (log_mean - 6.0 * log_sd).min((own_mean - 6.0 * own_sd).max((log_mean - 12.0 * log_sd).exp()).ln());
    let high = (log_mean + 6.0 * log_sd).max((own_mean + 6.0 * own_sd).max(f64::MIN_POSITIVE).ln());
    let step = (high - low) / LOG_RATE_GRID_POINTS as f64;
    // Four grid steps per likelihood SD at the larger of the two centres, or the grid is too coarse.
    if step.is_nan() || step <= 0.0 || step > 0.25 * own_sd / own_mean.max(m) {
        return None;
    }
    // Only grid points within e⁻⁶⁰ of the largest weight (which is 1) can move the sums, whose
    // last bit is worth 2⁻⁵² of at least 1. The log density at the grid points nearest the two
    // centres bounds the largest from below; since each of its two terms is ≤ 0, a point whose
    // prior term or likelihood term alone falls below that bound − 60 is skipped without being
    // evaluated. Where the own estimate is much sharper than the prior, that is most of the grid.
    let ratio = step.exp();
    let (prior_scale, own_scale) = (0.5 / log_var, 0.5 / own_variance);
    let last = LOG_RATE_GRID_POINTS as f64;
    let index_of = |u: f64| ((u - low) / step).clamp(0.0, last);
    let k_at = |j: usize| low.exp() * ratio.powi(j as i32);
    let log_density = |j: usize, k: f64| -(low + step * j as f64 - log_mean).powi(2) * prior_scale - (own_mean - k).powi(2) * own_scale;
    let density_near = |u: f64| {
        let j = index_of(u).round() as usize;
        log_density(j, k_at(j))
    };
    let bound = if own_mean > 0.0 { density_near(log_mean).max(density_near(own_mean.ln())) } else { density_near(log_mean) };
    let gap = 61.0 - bound.min(0.0);
    let prior_reach = (gap / prior_scale).sqrt();
    let own_reach = (gap / own_scale).sqrt();
    let first = index_of((log_mean - prior_reach).max((own_mean - own_reach).max(f64::MIN_POSITIVE).ln())).floor() as usize;
    let end = index_of((log_mean + prior_reach).min((own_mean + own_reach).max(f64::MIN_POSITIVE).ln())).ceil() as usize;
    let (first, end) = if bound.is_finite() && first <= end { (first, end) } else { (0, LOG_RATE_GRID_POINTS) };
    // Every `stride`-th of those points is enough. The posterior density is analytic in u and
    // negligible at both ends of the range, where the trapezoid rule (here a plain sum)
    // converges geometrically in the step: its relative error is about exp(−2π²/(h²·c)) for a
    // step h and a bound c on the curvature −d²/du² of the log density (Trefethen & Weideman,
    // "The exponentially convergent trapezoidal rule", SIAM Review 56 (2014) 385, recalled
    // from memory). Here c ≤ 1/σ_l² + (2k² + max(0, −k̂)·k)/s² at the largest k of the range
    // (a pessimistic bound: the mass lies well below that k), and h ≤ [`STEP_CURVATURE`]/√c;
    // the step is also held at or below [`MAX_LOG_RATE_STEP`], since the likelihood's e²ᵘ
    // limits how far off the real axis the density stays tame. Against every grid point, the
    // moments move by at most 7·10⁻¹² relative on the sweep of `tests/pooling_behaviour.rs`,
    // for about a third of the exponentials where the own estimate is sharp.
    let k_end = k_at(end);
    let curvature = 1.0 / log_var + (2.0 * k_end * k_end + (-own_mean).max(0.0) * k_end) / own_variance;
    let largest_step = (STEP_CURVATURE / curvature.sqrt()).min(MAX_LOG_RATE_STEP);
    let stride = if largest_step.is_finite() { ((largest_step / step) as usize).clamp(1, LOG_RATE_GRID_POINTS) } else { 1 };
    let stride_ratio = ratio.powi(stride as i32);
    // Each of those points' log density and rate into this thread's buffers (k by repeated
    // multiplication from the first), then the largest log density, then the weights in one
    // vectorised loop.
    let (w0, w1, w2) = GRID.with(|grid| {
        let (log_densities, rates) = &mut *grid.borrow_mut();
        log_densities.clear();
        rates.clear();
        let mut k = k_at(first);
        for j in (first..=end).step_by(stride) {
            log_densities.push(log_density(j, k));
            rates.push(k);
            k *= stride_ratio;
        }
        let top = log_densities.iter().fold(f64::NEG_INFINITY, |top, ld| top.max(*ld));
        pulp::Arch::new().dispatch(WeightedMoments { log_densities, rates, top })
    });
    let mean = w1 / w0;
    let variance = (w2 / w0 - mean * mean).max(0.0);
    (mean.is_finite() && mean > 0.0 && variance.is_finite()).then_some((mean, variance))
}

thread_local! {
    /// The log densities and rates of one [`combine_lognormal`] call's grid points, reused by
    /// every call on this thread.
    static GRID: std::cell::RefCell<(Vec<f64>, Vec<f64>)> = const { std::cell::RefCell::new((Vec::new(), Vec::new())) };
}

/// Lanes of [`WeightedMoments`]' partial sums.
const MOMENT_LANES: usize = 4;

/// The sums `(Σw, Σw·k, Σw·k²)` over grid points with log density `ℓ` and rate `k`, weights
/// `w = e^(ℓ − top)` where `ℓ − top > −60` (0 elsewhere: nothing further down can move a
/// sum), as a [`pulp::WithSimd`] operation: the weights by [`exp_non_positive`], summed in
/// [`MOMENT_LANES`] interleaved partial sums, so the loop runs on vector instructions.
struct WeightedMoments<'a> {
    log_densities: &'a [f64],
    rates: &'a [f64],
    top: f64,
}

impl pulp::WithSimd for WeightedMoments<'_> {
    type Output = (f64, f64, f64);

    #[inline(always)]
    fn with_simd<S: pulp::Simd>(self, _simd: S) -> (f64, f64, f64) {
        let top = self.top;
        let weight = |ld: f64| {
            let gap = ld - top;
            let w = exp_non_positive(gap.min(0.0));
            if gap > -60.0 {
                w
            } else {
                0.0
            }
        };
        let mut sums = [[0.0; MOMENT_LANES]; 3];
        let lanes = self.log_densities.chunks_exact(MOMENT_LANES).zip(self.rates.chunks_exact(MOMENT_LANES));
        for (ld, k) in lanes {
            for lane in 0..MOMENT_LANES {
                let w = weight(ld[lane]);
                sums[0][lane] += w;
                sums[1][lane] += w * k[lane];
                sums[2][lane] += w * k[lane] * k[lane];
            }
        }
        let tail = self.log_densities.len() - self.log_densities.len() % MOMENT_LANES;
        for (ld, k) in self.log_densities[tail..].iter().zip(&self.rates[tail..]) {
            let w = weight(*ld);
            sums[0][0] += w;
            sums[1][0] += w * k;
            sums[2][0] += w * k * k;
        }
        let add = |lanes: [f64; MOMENT_LANES]| (lanes[0] + lanes[1]) + (lanes[2] + lanes[3]);
        (add(sums[0]), add(sums[1]), add(sums[2]))
    }
}

/// Precision-weighted combination of an estimate `(mean, variance)` with a prior; returns the
/// posterior `(mean, variance)`. The prior's variance is positive by construction (a floored τ²
/// plus the pooled mean's uncertainty), so neither side is ever ignored.
pub fn combine(own_mean: f64, own_variance: f64, prior: &RatePrior) -> (f64, f64) {
    let v = prior.variance;
    if v.is_nan() || v <= 0.0 {
        return (prior.mean_mm_per_mj, 0.0);
    }
    if !own_mean.is_finite() || own_variance.is_nan() || own_variance < 0.0 {
        return (prior.mean_mm_per_mj, v);
    }
    if own_variance == 0.0 {
        return (own_mean, 0.0);
    }
    let precision = 1.0 / own_variance + 1.0 / v;
    let mean = (own_mean / own_variance + prior.mean_mm_per_mj / v) / precision;
    (mean, 1.0 / precision)
}
