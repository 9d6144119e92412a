//! The wear-rate fit of one part position from the vehicle's own inspections.
//!
//! # Model
//! Within a wear cycle `c` the thickness lost is proportional to the friction energy the brake
//! dissipated since the cycle's origin (Archard-type wear: worn volume ∝ frictional work;
//! Archard 1953, J. Appl. Phys. 24:981):
//!
//! ```text
//! y = T_new − t = a_c + k·x  [+ k_hot·x_hot]
//! x      energy since the cycle origin, MJ        x_hot  of which in hot stops, MJ
//! t      measured thickness, mm                   k      wear rate, mm/MJ
//! a_c    0 for a cycle that began with a recorded replacement (optionally a bedding-in
//!        intercept common to those cycles); a free intercept per cycle whose start is unknown
//! ```
//! The vehicle's cycles are pooled in one least-squares fit with a per-cycle start (the `a_c`
//! columns), solved by linfa-linear ([`crate::regression`]); coefficients, covariance, residual
//! standard deviation and degrees of freedom come with it. Without the hot regressor the design
//! is one energy column and intercept columns that never overlap, and the same fit is solved
//! in closed form on the stack ([`crate::line_fit`], checked against linfa and NIST StRD);
//! linfa remains the general path and the reference ([`fit_part_any_sign_by_qr`]). A cycle of unknown start with a
//! single inspection only fixes its own intercept and is left out of the fit.
//!
//! The reported rate `rate_mm_per_mj` is the energy coefficient `k`, or with the hot regressor
//! the effective rate `k + k_hot·h` at the part's observed hot-energy fraction `h`.

use ndarray::{Array1, Array2};
use serde::{Deserialize, Serialize};

use crate::domain::Component;
use crate::error::ModelError;
use crate::settings::ForecastSettings;
use crate::line_fit::{fit_line, WeightedPoint};
use crate::regression::fit_linear;
use crate::wear_history::{PartHistory, WearCycle};

/// A part position's own wear-rate fit.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct WearFit {
    /// Wear rate, mm of thickness per MJ of friction energy at this brake.
    pub rate_mm_per_mj: f64,
    /// Standard error of the rate, mm/MJ.
    pub rate_stderr_mm_per_mj: f64,
    /// Inspections that entered the fit.
    pub inspections_used: u32,
    /// Residual degrees of freedom (inspections minus coefficients).
    pub degrees_of_freedom: f64,
    /// Residual standard deviation, mm (gauge noise plus model error).
    pub residual_sd_mm: f64,
    /// Names of the coefficients, in order ("energy", "hot_energy", "cycle_1_start", "bedding").
    pub coefficient_names: Vec<String>,
    /// Coefficient estimates (mm/MJ for energies, mm for intercepts).
    pub coefficients: Vec<f64>,
    /// Covariance of the coefficients, row-major.
    pub covariance: Vec<Vec<f64>>,
    /// gᵀ(XᵀX)⁻¹g for the rate's gradient g: the rate variance per unit residual variance,
    /// (mm/MJ)²/mm². Lets a forecast rescale the rate's variance with another residual SD.
    pub rate_variance_per_residual_variance: f64,
    /// Hot-energy fraction `h` at which the effective rate is stated (0 without the hot regressor).
    pub hot_fraction: f64,
    /// Wear cycles that contributed points.
    pub cycles_used: u32,
    /// Residual sum of squares, mm².
    pub residual_sum_squares_mm2: f64,
    /// Σ eⱼ·eⱼ₋₁ over consecutive residuals within each cycle (in energy order), mm²: with
    /// [`Self::residual_sum_squares_mm2`] it gives the lag-1 autocorrelation of the residuals,
    /// which the pooling estimates per group (wear that is not a straight line in energy leaves
    /// runs of residuals of one sign).
    pub residual_lag_product_sum_mm2: f64,
}

impl WearFit {
    /// The fit without its coefficient names, estimates and covariance: the scalars that fleet
    /// pooling and a forecast from a stored fit read (what a store keeps of an own fit).
    pub fn without_coefficients(self) -> Self {
        Self { coefficient_names: Vec::new(), coefficients: Vec::new(), covariance: Vec::new(), ..self }
    }
}

/// Sums describing the rate information in a history, for the closed-form slope used when a
/// full fit has no residual degrees of freedom: pooled within-cycle `Sxx`, `Sxy`.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct RateSums {
    /// Σ (x − x̄_c)² over cycles (x̄_c = 0 for known-start cycles), MJ².
    pub sxx: f64,
    /// Σ (x − x̄_c)(y − ȳ_c), MJ·mm.
    pub sxy: f64,
    /// Inspections contributing.
    pub points: u32,
}

impl RateSums {
    /// Least-squares slope Sxy/Sxx, mm/MJ, when Sxx > 0.
    pub fn slope(&self) -> Option<f64> {
        (self.sxx > 0.0).then(|| self.sxy / self.sxx)
    }
}

/// Closed-form pooled slope of thickness lost on energy (no hot regressor, no bedding term).
pub fn rate_sums(history: &PartHistory) -> RateSums {
    let mut sums = RateSums::default();
    for cycle in history.cycles() {
        match cycle.start {
            Some(start) => {
                for p in &cycle.points {
                    let x = p.energy_mj - start.energy_mj;
                    let y = start.new_thickness_mm - p.thickness_mm;
                    sums.sxx += x * x;
                    sums.sxy += x * y;
                    sums.points += 1;
                }
            }
            None if cycle.points.len() >= 2 => {
                let n = cycle.points.len() as f64;
                let xm = cycle.points.iter().map(|p| p.energy_mj).sum::<f64>() / n;
                let ym = cycle.points.iter().map(|p| -p.thickness_mm).sum::<f64>() / n;
                for p in &cycle.points {
                    let x = p.energy_mj - xm;
                    sums.sxx += x * x;
                    sums.sxy += x * (-p.thickness_mm - ym);
                }
                sums.points += cycle.points.len() as u32;
            }
            None => {}
        }
    }
    sums
}

/// Weight of an inspection `age_days` older than the part's latest: `2^(−age/h)`, 1 when the
/// half-life `h` is not a positive finite number.
fn recency_weight(age_days: f64, half_life_days: f64) -> f64 {
    if half_life_days.is_finite() && half_life_days > 0.0 && age_days.is_finite() {
        (-age_days.max(0.0) / half_life_days * std::f64::consts::LN_2).exp()
    } else {
        1.0
    }
}

/// The recency half-life of a part's fit, days: [`ForecastSettings::fit_half_life_days`] for a
/// pad or lining, [`ForecastSettings::disc_fit_half_life_days`] for a rotor or drum.
pub fn fit_half_life_days(history: &PartHistory, settings: &ForecastSettings) -> f64 {
    match history.component {
        Component::Friction => settings.fit_half_life_days,
        Component::Disc => settings.disc_fit_half_life_days,
    }
}

fn usable(cycle: &WearCycle) -> bool {
    match cycle.start {
        Some(_) => !cycle.points.is_empty(),
        None => cycle.points.len() >= 2,
    }
}

/// Fits the part's wear rate from the vehicle's own inspections (see the module docs).
///
/// Errors: [`ModelError::TooFewPoints`] when the inspections do not leave at least one residual
/// degree of freedom; [`ModelError::NonPositiveWearRate`] when the fitted rate is zero or
/// negative; [`ModelError::Singular`] when the energies carry no information (e.g. no energy
/// between inspections).
pub fn fit_part(history: &PartHistory, settings: &ForecastSettings) -> Result<WearFit, ModelError> {
    let fit = fit_part_any_sign(history, settings)?;
    if fit.rate_mm_per_mj.is_nan() || fit.rate_mm_per_mj <= 0.0 {
        return Err(ModelError::NonPositiveWearRate { rate_mm_per_mj: fit.rate_mm_per_mj });
    }
    Ok(fit)
}

/// As [`fit_part`], but a zero or negative rate is returned rather than refused. A rotor that
/// wears a fraction of a millimetre in years often shows a slightly negative slope within gauge
/// noise; that estimate still carries information for the fleet pooling and for a combination
/// with the prior, which a refusal would throw away (and bias the group mean upward).
pub fn fit_part_any_sign(history: &PartHistory, settings: &ForecastSettings) -> Result<WearFit, ModelError> {
    fit_any_sign(history, settings, Coefficients::Kept)
}

/// [`fit_part_any_sign`] without the coefficients: the fit as
/// [`WearFit::without_coefficients`] leaves it (no names, coefficients or covariance; every
/// other field the same bit for bit). What pooling and forecasting read, and what the service
/// stores; a refresh fits every part, and those three lists were about half of a fit's
/// allocations.
pub fn fit_part_rate(history: &PartHistory, settings: &ForecastSettings) -> Result<WearFit, ModelError> {
    fit_any_sign(history, settings, Coefficients::Dropped)
}

/// Whether a fit keeps its coefficient names, coefficients and covariance.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Coefficients {
    Kept,
    Dropped,
}

fn fit_any_sign(history: &PartHistory, settings: &ForecastSettings, coefficients: Coefficients) -> Result<WearFit, ModelError> {
    let cycles: Vec<WearCycle> = history.cycles().into_iter().filter(usable).collect();
    if !settings.hot_regressor {
        if let Some(fit) = closed_form_fit(history, &cycles, settings, coefficients) {
            return Ok(fit);
        }
    }
    let fit = least_squares_fit(history, &cycles, settings)?;
    Ok(match coefficients {
        Coefficients::Kept => fit,
        Coefficients::Dropped => fit.without_coefficients(),
    })
}

/// [`fit_part_any_sign`] always through the general least-squares fit
/// ([`crate::regression::fit_linear`], linfa), never the closed form: the reference the closed
/// form is checked against.
pub fn fit_part_any_sign_by_qr(history: &PartHistory, settings: &ForecastSettings) -> Result<WearFit, ModelError> {
    let cycles: Vec<WearCycle> = history.cycles().into_iter().filter(usable).collect();
    least_squares_fit(history, &cycles, settings)
}

/// Day of the latest inspection in `cycles` (−∞ without one).
fn latest_inspection_day(cycles: &[WearCycle]) -> f64 {
    cycles.iter().flat_map(|c| c.points.iter().map(|p| p.day)).fold(f64::NEG_INFINITY, f64::max)
}

/// The fit without the hot-energy regressor by [`crate::line_fit`] (module docs): the same
/// design, columns and weights as [`least_squares_fit`], solved in closed form on the stack.
/// `None` where the closed form cannot vouch for the answer (the general fit then decides).
fn closed_form_fit(history: &PartHistory, cycles: &[WearCycle], settings: &ForecastSettings, coefficients: Coefficients) -> Option<WearFit> {
    let unknown = cycles.iter().filter(|c| c.start.is_none()).count();
    let bedding = settings.bedding_intercept && cycles.iter().any(|c| c.start.is_some());
    let latest_day = latest_inspection_day(cycles);
    // (cycle index, point) in design row order; an unknown-start cycle's intercept is group
    // `k` (its rank among those cycles), the shared bedding intercept the group after them.
    // Made once: `fit_line` walks the points three times and the residuals once more, and each
    // point's recency weight is an exponential.
    let half_life_days = fit_half_life_days(history, settings);
    let mut points: Vec<(usize, WeightedPoint)> = Vec::with_capacity(cycles.iter().map(|c| c.points.len()).sum());
    points.extend(cycles.iter().enumerate().flat_map(move |(ci, cycle)| {
        let origin = cycle.origin_energy_mj().map_or(0.0, |o| o.0);
        let (reference_mm, group) = match cycle.start {
            Some(s) => (s.new_thickness_mm, bedding.then_some(unknown)),
            None => (history.new_thickness_mm, Some(cycles[..ci].iter().filter(|c| c.start.is_none()).count())),
        };
        cycle.points.iter().map(move |p| {
            let point = WeightedPoint {
                x: p.energy_mj - origin,
                y: reference_mm - p.thickness_mm,
                weight: recency_weight(latest_day - p.day, half_life_days),
                group,
            };
            (ci, point)
        })
    }));
    let line = fit_line(points.iter().map(|(_, p)| *p))?;
    let p = line.coefficients();
    let mut lag_products = 0.0;
    let mut previous: Option<(usize, f64)> = None;
    for &(ci, point) in &points {
        let residual = line.weighted_residual(&point);
        if let Some((previous_cycle, previous_residual)) = previous {
            if previous_cycle == ci {
                lag_products += residual * previous_residual;
            }
        }
        previous = Some((ci, residual));
    }
    let s2 = line.residual_sum_of_squares / line.degrees_of_freedom;
    let (names, coefficients, covariance) = match coefficients {
        Coefficients::Kept => {
            let mut names = Vec::with_capacity(p);
            names.push("energy".to_string());
            names.extend((1..=unknown).map(|k| format!("cycle_{k}_start")));
            if bedding {
                names.push("bedding".into());
            }
            let covariance: Vec<Vec<f64>> = (0..p).map(|a| (0..p).map(|b| line.xtx_inverse(a, b) * s2).collect()).collect();
            (names, (0..p).map(|j| line.coefficient(j)).collect(), covariance)
        }
        Coefficients::Dropped => (Vec::new(), Vec::new(), Vec::new()),
    };
    Some(WearFit {
        rate_mm_per_mj: line.slope,
        rate_stderr_mm_per_mj: (line.xtx_inverse(0, 0) * s2).max(0.0).sqrt(),
        inspections_used: line.observations as u32,
        degrees_of_freedom: line.degrees_of_freedom,
        residual_sd_mm: line.residual_sd(),
        coefficient_names: names,
        coefficients,
        covariance,
        rate_variance_per_residual_variance: line.xtx_inverse(0, 0).max(0.0),
        hot_fraction: 0.0,
        cycles_used: cycles.len() as u32,
        residual_sum_squares_mm2: line.residual_sum_of_squares,
        residual_lag_product_sum_mm2: lag_products,
    })
}

/// The fit through the general least-squares solver ([`crate::regression::fit_linear`]).
fn least_squares_fit(history: &PartHistory, cycles: &[WearCycle], settings: &ForecastSettings) -> Result<WearFit, ModelError> {
    let hot = settings.hot_regressor;
    let unknown: Vec<usize> = cycles.iter().enumerate().filter(|(_, c)| c.start.is_none()).map(|(i, _)| i).collect();
    let any_known = cycles.iter().any(|c| c.start.is_some());
    let bedding = settings.bedding_intercept && any_known;
    let mut names = vec!["energy".to_string()];
    if hot {
        names.push("hot_energy".into());
    }
    for (k, _) in unknown.iter().enumerate() {
        names.push(format!("cycle_{}_start", k + 1));
    }
    if bedding {
        names.push("bedding".into());
    }
    let p = names.len();
    let mut rows: Vec<f64> = Vec::new();
    let mut y: Vec<f64> = Vec::new();
    let mut energy_total = 0.0;
    let mut hot_total = 0.0;
    let latest_day = latest_inspection_day(cycles);
    // Index of the first row of each cycle, to pair consecutive residuals within a cycle.
    let mut cycle_first_row: Vec<usize> = Vec::new();
    for (ci, cycle) in cycles.iter().enumerate() {
        let Some((origin, hot_origin)) = cycle.origin_energy_mj() else { continue };
        let reference_mm = cycle.start.map_or(history.new_thickness_mm, |s| s.new_thickness_mm);
        cycle_first_row.push(y.len());
        let mut row = vec![0.0; p];
        for point in &cycle.points {
            row.fill(0.0);
            let x = point.energy_mj - origin;
            let xh = point.hot_energy_mj - hot_origin;
            row[0] = x;
            let mut col = 1;
            if hot {
                row[1] = xh;
                col = 2;
            }
            if let Some(k) = unknown.iter().position(|&u| u == ci) {
                row[col + k] = 1.0;
            } else if bedding {
                row[p - 1] = 1.0;
            }
            let weight = recency_weight(latest_day - point.day, fit_half_life_days(history, settings)).sqrt();
            rows.extend(row.iter().map(|v| v * weight));
            y.push((reference_mm - point.thickness_mm) * weight);
        }
        if let Some(last) = cycle.points.last() {
            energy_total += (last.energy_mj - origin).max(0.0);
            hot_total += (last.hot_energy_mj - hot_origin).max(0.0);
        }
    }
    let n = y.len();
    if n <= p {
        return Err(ModelError::TooFewPoints {
            points: n,
            needed: p + 1,
            detail: format!("wear-rate fit with {p} coefficient(s) needs one more inspection than coefficients"),
        });
    }
    let design = Array2::from_shape_vec((n, p), rows).map_err(|e| ModelError::InvalidArgument(e.to_string()))?;
    let y = Array1::from(y);
    let fit = fit_linear(design.view(), y.view())?;
    let residuals = &y - &design.dot(&Array1::from(fit.coefficients.clone()));
    let mut lag_products = 0.0;
    for (c, &first) in cycle_first_row.iter().enumerate() {
        let end = cycle_first_row.get(c + 1).copied().unwrap_or(n);
        for j in first + 1..end {
            lag_products += residuals[j] * residuals[j - 1];
        }
    }
    let hot_fraction = if hot && energy_total > 0.0 { (hot_total / energy_total).clamp(0.0, 1.0) } else { 0.0 };
    let mut gradient = vec![0.0; p];
    gradient[0] = 1.0;
    if hot {
        gradient[1] = hot_fraction;
    }
    let rate: f64 = gradient.iter().zip(&fit.coefficients).map(|(g, b)| g * b).sum();
    let quad = |m: &Vec<Vec<f64>>| -> f64 {
        let mut q = 0.0;
        for a in 0..p {
            for b in 0..p {
                q += gradient[a] * m[a][b] * gradient[b];
            }
        }
        q
    };
    if !rate.is_finite() {
        return Err(ModelError::Singular(format!("the fitted wear rate is not finite ({rate})")));
    }
    Ok(WearFit {
        rate_mm_per_mj: rate,
        rate_stderr_mm_per_mj: quad(&fit.covariance).max(0.0).sqrt(),
        inspections_used: n as u32,
        degrees_of_freedom: fit.degrees_of_freedom,
        residual_sd_mm: fit.residual_sd,
        coefficient_names: names,
        coefficients: fit.coefficients,
        covariance: fit.covariance,
        rate_variance_per_residual_variance: quad(&fit.xtx_inverse).max(0.0),
        hot_fraction,
        cycles_used: cycles.len() as u32,
        residual_sum_squares_mm2: fit.residual_sum_of_squares,
        residual_lag_product_sum_mm2: lag_products,
    })
}
