//! Ordinary least squares with the statistics linfa leaves out: coefficient covariance,
//! standard errors, residual standard deviation, prediction intervals, and the inverse
//! (calibration) interval by Fieller's theorem.
//!
//! # Model
//! `y = X·β + ε`, `ε ~ N(0, σ²·I)`, `X` an `n × p` design of full column rank. The estimates
//! `β̂` come from `linfa-linear` (a Householder-QR least-squares solve). On top of them:
//!
//! ```text
//! residual variance      s² = ‖y − X·β̂‖² / (n − p)         (degrees of freedom ν = n − p)
//! covariance of β̂        Cov(β̂) = s² · (XᵀX)⁻¹
//! standard error         se(β̂ⱼ) = √Cov(β̂)ⱼⱼ
//! prediction interval    x₀ᵀβ̂ ± t(1−α/2, ν) · s · √(1 + x₀ᵀ(XᵀX)⁻¹x₀)
//! ```
//! (Draper & Smith, *Applied Regression Analysis*, 3rd ed., chapters 1 and 5.)
//!
//! Columns are scaled to unit length before solving and the estimates scaled back, which
//! keeps badly scaled designs (a regressor in the millions next to its square) accurate;
//! `(XᵀX)⁻¹` comes from the triangular factor `R` of a Householder QR of the scaled design,
//! `(XᵀX)⁻¹ = D·R⁻¹·R⁻ᵀ·D`, never from inverting `XᵀX` directly.
//!
//! # Inverse prediction (Fieller)
//! For a straight line `y = b₀ + b₁·x` (or `y = b₁·x`), the `x` at which the *mean* line
//! reaches a target `y₀` is `x̂ = (y₀ − b₀)/b₁`. Its confidence limits are the roots in `x` of
//!
//! ```text
//! (y₀ − b₀ − b₁x)² = t² · (Var b₀ + 2x·Cov(b₀,b₁) + x²·Var b₁)
//! ```
//! which is Fieller's theorem for the ratio of two normal estimates (Fieller 1954, J. R.
//! Stat. Soc. B 16:175; Draper & Smith §3.2). The interval is finite only when the slope is
//! significantly different from zero, `b₁² > t²·Var b₁`; otherwise no bounded interval exists
//! and [`fieller_inverse`] says so.
//!
//! Student-t quantiles come from `statrs`.

use linfa::prelude::*;
use linfa_linear::LinearRegression;
use ndarray::{Array1, Array2, ArrayView1, ArrayView2};
use statrs::distribution::{ContinuousCDF, StudentsT};

use crate::error::ModelError;

/// A least-squares fit with its uncertainty.
#[derive(Debug, Clone, PartialEq)]
pub struct LinearFit {
    /// Estimated coefficients β̂, one per design column.
    pub coefficients: Vec<f64>,
    /// Standard errors of the coefficients.
    pub standard_errors: Vec<f64>,
    /// Covariance matrix s²·(XᵀX)⁻¹, row-major `p × p`.
    pub covariance: Vec<Vec<f64>>,
    /// (XᵀX)⁻¹ (unscaled by s²), row-major `p × p`.
    pub xtx_inverse: Vec<Vec<f64>>,
    /// Residual standard deviation s (units of y).
    pub residual_sd: f64,
    /// Residual degrees of freedom ν = n − p.
    pub degrees_of_freedom: f64,
    /// Number of observations n.
    pub observations: usize,
    /// Residual sum of squares.
    pub residual_sum_of_squares: f64,
}

/// The two-sided Student-t quantile: the `probability` quantile of a t distribution with
/// `degrees_of_freedom` (`probability` in (0, 1), ν > 0).
pub fn student_t_quantile(probability: f64, degrees_of_freedom: f64) -> Result<f64, ModelError> {
    if !(probability > 0.0 && probability < 1.0) {
        return Err(ModelError::InvalidArgument(format!("probability {probability} must be in (0, 1)")));
    }
    let t = StudentsT::new(0.0, 1.0, degrees_of_freedom)
        .map_err(|e| ModelError::InvalidArgument(format!("degrees of freedom {degrees_of_freedom}: {e}")))?;
    Ok(t.inverse_cdf(probability))
}

/// Fits `y = X·β` by least squares (no implicit intercept: add a column of ones for one).
///
/// Needs `n > p` so the residual variance has at least one degree of freedom.
pub fn fit_linear(design: ArrayView2<'_, f64>, y: ArrayView1<'_, f64>) -> Result<LinearFit, ModelError> {
    let (n, p) = design.dim();
    if y.len() != n {
        return Err(ModelError::LengthMismatch { rows: n, observations: y.len() });
    }
    if p == 0 {
        return Err(ModelError::InvalidArgument("the design has no columns".into()));
    }
    if n <= p {
        return Err(ModelError::TooFewPoints { points: n, needed: p + 1, detail: format!("{p} coefficients") });
    }
    if design.iter().chain(y.iter()).any(|v| !v.is_finite()) {
        return Err(ModelError::NonFinite("design or observations".into()));
    }
    // Column scales: unit Euclidean length.
    let mut scale = vec![0.0; p];
    for (j, s) in scale.iter_mut().enumerate() {
        let norm = design.column(j).iter().map(|v| v * v).sum::<f64>().sqrt();
        if norm == 0.0 {
            return Err(ModelError::Singular(format!("design column {j} is all zeros")));
        }
        *s = norm;
    }
    let mut scaled = design.to_owned();
    for (j, s) in scale.iter().enumerate() {
        scaled.column_mut(j).mapv_inplace(|v| v / s);
    }
    let r = householder_r(&scaled)?;
    let r_inv = invert_upper(&r)?;

    let dataset = Dataset::new(scaled, y.to_owned());
    let model = LinearRegression::new()
        .with_intercept(false)
        .fit(&dataset)
        .map_err(|e| ModelError::Regression(e.to_string()))?;
    let scaled_params = model.params();
    let coefficients: Vec<f64> = scaled_params.iter().zip(&scale).map(|(b, s)| b / s).collect();

    let mut rss = 0.0;
    for i in 0..n {
        let fitted: f64 = (0..p).map(|j| design[(i, j)] * coefficients[j]).sum();
        let e = y[i] - fitted;
        rss += e * e;
    }
    let df = (n - p) as f64;
    let s2 = rss / df;
    // (ZᵀZ)⁻¹ = R⁻¹R⁻ᵀ, then (XᵀX)⁻¹ = D⁻¹ (ZᵀZ)⁻¹ D⁻¹ with Z = X·D⁻¹.
    let mut xtx_inverse = vec![vec![0.0; p]; p];
    for a in 0..p {
        for b in 0..p {
            let start = a.max(b);
            let sum: f64 = r_inv[a][start..].iter().zip(&r_inv[b][start..]).map(|(x, y)| x * y).sum();
            xtx_inverse[a][b] = sum / (scale[a] * scale[b]);
        }
    }
    let covariance: Vec<Vec<f64>> = xtx_inverse.iter().map(|row| row.iter().map(|v| v * s2).collect()).collect();
    let standard_errors = (0..p).map(|j| covariance[j][j].max(0.0).sqrt()).collect();
    Ok(LinearFit {
        coefficients,
        standard_errors,
        covariance,
        xtx_inverse,
        residual_sd: s2.sqrt(),
        degrees_of_freedom: df,
        observations: n,
        residual_sum_of_squares: rss,
    })
}

/// Upper-triangular factor R of a Householder QR of `a` (`n × p`, `n ≥ p`), as row vectors.
fn householder_r(a: &Array2<f64>) -> Result<Vec<Vec<f64>>, ModelError> {
    let (n, p) = a.dim();
    let mut m = a.clone();
    for k in 0..p {
        let norm = (k..n).map(|i| m[(i, k)] * m[(i, k)]).sum::<f64>().sqrt();
        if norm == 0.0 {
            return Err(ModelError::Singular(format!("column {k} is a combination of earlier columns")));
        }
        let alpha = if m[(k, k)] > 0.0 { -norm } else { norm };
        let mut v: Vec<f64> = (k..n).map(|i| m[(i, k)]).collect();
        v[0] -= alpha;
        let vnorm2: f64 = v.iter().map(|x| x * x).sum();
        if vnorm2 > 0.0 {
            for j in k..p {
                let dot: f64 = (k..n).map(|i| v[i - k] * m[(i, j)]).sum();
                let f = 2.0 * dot / vnorm2;
                for i in k..n {
                    m[(i, j)] -= f * v[i - k];
                }
            }
        }
    }
    let mut r = vec![vec![0.0; p]; p];
    for (i, row) in r.iter_mut().enumerate() {
        for (j, cell) in row.iter_mut().enumerate().skip(i) {
            *cell = m[(i, j)];
        }
    }
    // Rank check relative to the (unit) column norms.
    for (i, row) in r.iter().enumerate() {
        if row[i].abs() < 1e-12 {
            return Err(ModelError::Singular(format!("column {i} is (nearly) a combination of earlier columns")));
        }
    }
    Ok(r)
}

/// Inverse of an upper-triangular matrix by back substitution.
#[allow(clippy::needless_range_loop)] // index arithmetic mirrors the textbook recurrence
fn invert_upper(r: &[Vec<f64>]) -> Result<Vec<Vec<f64>>, ModelError> {
    let p = r.len();
    let mut inv = vec![vec![0.0; p]; p];
    for col in 0..p {
        for i in (0..=col).rev() {
            let mut sum = if i == col { 1.0 } else { 0.0 };
            for k in (i + 1)..=col {
                sum -= r[i][k] * inv[k][col];
            }
            if r[i][i] == 0.0 {
                return Err(ModelError::Singular("zero pivot".into()));
            }
            inv[i][col] = sum / r[i][i];
        }
    }
    Ok(inv)
}

impl LinearFit {
    /// Predicted mean `x₀ᵀβ̂` at a design row `x0`.
    pub fn predict(&self, x0: &[f64]) -> f64 {
        x0.iter().zip(&self.coefficients).map(|(x, b)| x * b).sum()
    }

    /// Quadratic form `x₀ᵀ(XᵀX)⁻¹x₀`.
    pub fn leverage(&self, x0: &[f64]) -> f64 {
        let mut q = 0.0;
        for (a, xa) in x0.iter().enumerate() {
            for (b, xb) in x0.iter().enumerate() {
                q += xa * self.xtx_inverse[a][b] * xb;
            }
        }
        q
    }

    /// Prediction interval `(low, high)` for a new observation at `x0` at two-sided `level`
    /// (e.g. 0.8): `x₀ᵀβ̂ ± t(½+level/2, ν)·s·√(1 + x₀ᵀ(XᵀX)⁻¹x₀)`.
    pub fn prediction_interval(&self, x0: &[f64], level: f64) -> Result<(f64, f64), ModelError> {
        if x0.len() != self.coefficients.len() {
            return Err(ModelError::LengthMismatch { rows: self.coefficients.len(), observations: x0.len() });
        }
        let t = student_t_quantile(0.5 + level / 2.0, self.degrees_of_freedom)?;
        let centre = self.predict(x0);
        let half = t * self.residual_sd * (1.0 + self.leverage(x0)).sqrt();
        Ok((centre - half, centre + half))
    }
}

/// An inverse-prediction estimate with its Fieller interval.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct InverseEstimate {
    /// Point estimate x̂ = (y₀ − b₀)/b₁.
    pub estimate: f64,
    /// Lower confidence limit.
    pub low: f64,
    /// Upper confidence limit.
    pub high: f64,
}

/// Fieller interval for the `x` at which the line `y = intercept + slope·x` reaches `target`,
/// at two-sided `level`, given the variances and covariance of the two estimates and the
/// degrees of freedom of their common variance estimate (see the module docs).
///
/// For a line through the origin pass `intercept = 0`, `var_intercept = 0`, `covariance = 0`.
/// Fails when the slope is not significantly different from zero at `level` (the interval is
/// then unbounded).
#[allow(clippy::too_many_arguments)] // the two estimates, their covariance and the test settings
pub fn fieller_inverse(
    intercept: f64,
    slope: f64,
    var_intercept: f64,
    var_slope: f64,
    covariance: f64,
    target: f64,
    level: f64,
    degrees_of_freedom: f64,
) -> Result<InverseEstimate, ModelError> {
    let t = student_t_quantile(0.5 + level / 2.0, degrees_of_freedom)?;
    let t2 = t * t;
    let d = target - intercept;
    // (d − b₁x)² − t²(V0 + 2xC + x²V1) = 0  →  A x² + B x + C0 = 0
    let a = slope * slope - t2 * var_slope;
    let b = -2.0 * d * slope - 2.0 * t2 * covariance;
    let c0 = d * d - t2 * var_intercept;
    if a <= 0.0 {
        return Err(ModelError::InvalidArgument(format!(
            "slope {slope:.4e} is not significantly different from zero at level {level}: the Fieller interval is unbounded"
        )));
    }
    let disc = b * b - 4.0 * a * c0;
    if disc < 0.0 {
        return Err(ModelError::InvalidArgument("the Fieller interval is empty".into()));
    }
    let root = disc.sqrt();
    let x1 = (-b - root) / (2.0 * a);
    let x2 = (-b + root) / (2.0 * a);
    Ok(InverseEstimate { estimate: d / slope, low: x1.min(x2), high: x1.max(x2) })
}

/// Builds an `n × p` design from rows (helper for callers assembling designs row by row).
pub fn design_from_rows(rows: &[Vec<f64>], columns: usize) -> Result<Array2<f64>, ModelError> {
    let mut flat = Vec::with_capacity(rows.len() * columns);
    for row in rows {
        if row.len() != columns {
            return Err(ModelError::LengthMismatch { rows: columns, observations: row.len() });
        }
        flat.extend_from_slice(row);
    }
    Array2::from_shape_vec((rows.len(), columns), flat).map_err(|e| ModelError::InvalidArgument(e.to_string()))
}

/// Convenience: fit from a row-major design and observations.
pub fn fit_rows(rows: &[Vec<f64>], y: &[f64]) -> Result<LinearFit, ModelError> {
    let columns = rows.first().map_or(0, Vec::len);
    let design = design_from_rows(rows, columns)?;
    let y = Array1::from(y.to_vec());
    fit_linear(design.view(), y.view())
}
