//! Closed-form weighted least squares of one straight line with an intercept per group: the
//! lean path of the wear fit, on the stack, with no design matrix and no allocation.
//!
//! # Model
//! `yᵢ = k·xᵢ + a_g(i) + εᵢ`, `Var εᵢ = σ²/wᵢ`: one slope `k` shared by every point, and an
//! intercept `a_g` for the points of group `g` (a point may also belong to no group: its line
//! runs through the origin). This is the wear fit's design without the hot-energy column: an
//! energy column and indicator columns that never overlap (each row has at most one 1).
//!
//! # Formulas
//! The intercepts are profiled out (Frisch–Waugh–Lovell: the slope of the full regression is
//! the slope of `y` on `x` after both are centred within their groups). With `W_g = Σ_g wᵢ`,
//! `x̄_g = Σ_g wᵢxᵢ/W_g`, `ȳ_g` likewise, and `x̄ = ȳ = 0` for points in no group:
//!
//! ```text
//! Sxx = Σ wᵢ(xᵢ − x̄_g)²     Sxy = Σ wᵢ(xᵢ − x̄_g)(yᵢ − ȳ_g)
//! k = Sxy/Sxx              a_g = ȳ_g − k·x̄_g
//! RSS = Σ wᵢ(yᵢ − a_g − k·xᵢ)²,   ν = n − p,   s² = RSS/ν
//! (XᵀWX)⁻¹:  [k,k] = 1/Sxx,   [k,a_g] = −x̄_g/Sxx,   [a_g,a_h] = δ_gh/W_g + x̄_g·x̄_h/Sxx
//! ```
//! (the inverse of the partitioned normal matrix by its Schur complement `Sxx`; Draper &
//! Smith, *Applied Regression Analysis*, 3rd ed., ch. 1 and 5, and Seber & Lee, *Linear
//! Regression Analysis*, 2nd ed., §3.7; recalled from memory). Sums are taken around the group
//! means in a second pass, never as differences of raw sums, so a cumulative energy in the
//! thousands of MJ loses no digits.
//!
//! [`crate::regression::fit_linear`] (linfa's Householder QR) stays the reference: the tests
//! check this path against it and against NIST StRD Norris and NoInt1. A design this path
//! cannot vouch for (too many groups, non-finite values, an energy column nearly explained by
//! the intercepts) gets `None`, and the caller falls back to the reference.

/// Most intercept groups the lean path handles (more fall back to the general fit).
pub const MAX_GROUPS: usize = 8;

/// Smallest `Sxx / Σwx²` accepted: the share of the energy column the intercepts leave
/// unexplained. Below it the general fit decides (and reports a singular design): with the
/// share at least 1e-8 no pivot of the scaled QR can fall below its 1e-12 rank threshold.
const MIN_UNEXPLAINED_SHARE: f64 = 1e-8;

/// One observation: `x`, `y`, its weight (> 0) and its intercept group (`None`: no intercept).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct WeightedPoint {
    /// Regressor (energy since the cycle origin, MJ, in the wear fit).
    pub x: f64,
    /// Response (thickness lost, mm, in the wear fit).
    pub y: f64,
    /// Weight wᵢ: the point's variance is σ²/wᵢ.
    pub weight: f64,
    /// Intercept group, below [`MAX_GROUPS`]; `None` for a line through the origin.
    pub group: Option<usize>,
}

/// The fit (module docs). Coefficient order as in the design: the slope, then the intercepts
/// of groups 0, 1, ... (every group below `groups` must hold at least one point).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LineFit {
    /// Slope k.
    pub slope: f64,
    /// Intercepts a_g; only the first `groups` are used.
    pub intercepts: [f64; MAX_GROUPS],
    /// Number of intercept groups.
    pub groups: usize,
    /// Weight sum W_g of each group.
    pub group_weights: [f64; MAX_GROUPS],
    /// Weighted mean x̄_g of each group.
    pub group_mean_x: [f64; MAX_GROUPS],
    /// Σwᵢ(xᵢ − x̄_g)², the slope's information per unit residual variance.
    pub sxx: f64,
    /// Weighted residual sum of squares, Σwᵢeᵢ².
    pub residual_sum_of_squares: f64,
    /// Residual degrees of freedom ν = n − p.
    pub degrees_of_freedom: f64,
    /// Number of observations n.
    pub observations: usize,
}

impl LineFit {
    /// Coefficients p = 1 + groups.
    pub fn coefficients(&self) -> usize {
        1 + self.groups
    }

    /// Coefficient `j` (0 the slope, 1 + g the intercept of group g).
    pub fn coefficient(&self, j: usize) -> f64 {
        if j == 0 {
            self.slope
        } else {
            self.intercepts[j - 1]
        }
    }

    /// Entry `(a, b)` of (XᵀWX)⁻¹ (module docs).
    pub fn xtx_inverse(&self, a: usize, b: usize) -> f64 {
        let mean = |j: usize| if j == 0 { -1.0 } else { self.group_mean_x[j - 1] };
        let diagonal = if a == b && a > 0 { 1.0 / self.group_weights[a - 1] } else { 0.0 };
        diagonal + mean(a) * mean(b) / self.sxx
    }

    /// Residual standard deviation s (units of y).
    pub fn residual_sd(&self) -> f64 {
        (self.residual_sum_of_squares / self.degrees_of_freedom).sqrt()
    }

    /// The weighted residual `√w·(y − a_g − k·x)` of a point.
    pub fn weighted_residual(&self, point: &WeightedPoint) -> f64 {
        let intercept = point.group.map_or(0.0, |g| self.intercepts[g]);
        point.weight.sqrt() * (point.y - intercept - self.slope * point.x)
    }
}

/// Fits the line (module docs) to `points`, which is walked three times. `None` when the lean
/// path cannot vouch for the answer: fewer points than coefficients plus one, a group out of
/// range or empty, a non-finite value or non-positive weight, or an energy column the
/// intercepts (nearly) explain; the general least-squares fit then decides.
pub fn fit_line(points: impl Iterator<Item = WeightedPoint> + Clone) -> Option<LineFit> {
    let mut weights = [0.0; MAX_GROUPS];
    let mut sum_wx = [0.0; MAX_GROUPS];
    let mut sum_wy = [0.0; MAX_GROUPS];
    let mut groups = 0;
    let mut n = 0usize;
    for p in points.clone() {
        if !(p.x.is_finite() && p.y.is_finite() && p.weight.is_finite() && p.weight > 0.0) {
            return None;
        }
        if let Some(g) = p.group {
            if g >= MAX_GROUPS {
                return None;
            }
            weights[g] += p.weight;
            sum_wx[g] += p.weight * p.x;
            sum_wy[g] += p.weight * p.y;
            groups = groups.max(g + 1);
        }
        n += 1;
    }
    if n <= 1 + groups || weights[..groups].iter().any(|w| *w <= 0.0) {
        return None;
    }
    let mut mean_x = [0.0; MAX_GROUPS];
    let mut mean_y = [0.0; MAX_GROUPS];
    for g in 0..groups {
        mean_x[g] = sum_wx[g] / weights[g];
        mean_y[g] = sum_wy[g] / weights[g];
    }
    let centred = |p: &WeightedPoint| p.group.map_or((p.x, p.y), |g| (p.x - mean_x[g], p.y - mean_y[g]));
    let (mut sxx, mut sxy, mut sum_wxx) = (0.0, 0.0, 0.0);
    for p in points.clone() {
        let (dx, dy) = centred(&p);
        sxx += p.weight * dx * dx;
        sxy += p.weight * dx * dy;
        sum_wxx += p.weight * p.x * p.x;
    }
    if !(sxx > MIN_UNEXPLAINED_SHARE * sum_wxx && sxx.is_finite()) {
        return None;
    }
    let slope = sxy / sxx;
    let mut intercepts = [0.0; MAX_GROUPS];
    for g in 0..groups {
        intercepts[g] = mean_y[g] - slope * mean_x[g];
    }
    let mut fit = LineFit {
        slope,
        intercepts,
        groups,
        group_weights: weights,
        group_mean_x: mean_x,
        sxx,
        residual_sum_of_squares: 0.0,
        degrees_of_freedom: (n - 1 - groups) as f64,
        observations: n,
    };
    fit.residual_sum_of_squares = points.map(|p| fit.weighted_residual(&p).powi(2)).sum();
    (slope.is_finite() && fit.residual_sum_of_squares.is_finite()).then_some(fit)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn point(x: f64, y: f64, group: Option<usize>) -> WeightedPoint {
        WeightedPoint { x, y, weight: 1.0, group }
    }

    #[test]
    fn refuses_what_it_cannot_vouch_for() {
        // Two points, two coefficients: no residual degree of freedom.
        assert!(fit_line([point(0.0, 1.0, Some(0)), point(1.0, 2.0, Some(0))].into_iter()).is_none());
        // Energy constant within the only group: the intercept explains it all.
        let flat = [point(5.0, 1.0, Some(0)), point(5.0, 2.0, Some(0)), point(5.0, 3.0, Some(0))];
        assert!(fit_line(flat.into_iter()).is_none());
        // A group with no point.
        assert!(fit_line([point(1.0, 1.0, Some(1)), point(2.0, 2.0, Some(1)), point(3.0, 2.5, Some(1))].into_iter()).is_none());
        assert!(fit_line([point(1.0, f64::NAN, None), point(2.0, 2.0, None)].into_iter()).is_none());
    }

    #[test]
    fn an_exact_line_is_recovered_with_no_residual() {
        // y = 0.5·x + 2 in group 0, y = 0.5·x − 1 in group 1, y = 0.5·x without a group.
        let points = [
            point(0.0, 2.0, Some(0)),
            point(4.0, 4.0, Some(0)),
            point(10.0, 4.0, Some(1)),
            point(12.0, 5.0, Some(1)),
            point(6.0, 3.0, None),
        ];
        let fit = fit_line(points.into_iter()).expect("fit");
        assert!((fit.slope - 0.5).abs() < 1e-15);
        assert!((fit.intercepts[0] - 2.0).abs() < 1e-14 && (fit.intercepts[1] + 1.0).abs() < 1e-14);
        assert!(fit.residual_sum_of_squares < 1e-25);
        assert_eq!((fit.groups, fit.degrees_of_freedom), (2, 2.0));
    }
}
