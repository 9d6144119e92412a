//! Random-effects pooling of independent estimates: the between-unit variance τ² and the pooled
//! mean, by the method of moments and by Paule–Mandel.
//!
//! # Model
//! Unit `i` reports an estimate `yᵢ ~ N(θᵢ, vᵢ)` of its own effect, and the effects vary between
//! units as `θᵢ ~ N(μ, τ²)`. With weights `wᵢ(τ²) = 1/(vᵢ + τ²)`:
//!
//! ```text
//! μ̂(τ²) = Σwᵢyᵢ / Σwᵢ          Var μ̂ = 1/Σwᵢ
//! Q(τ²)  = Σwᵢ(yᵢ − μ̂(τ²))²
//! ```
//! - **DerSimonian–Laird** (method of moments; DerSimonian & Laird 1986, Controlled Clinical
//!   Trials 7:177): `τ² = max(0, (Q(0) − (n−1)) / (Σwᵢ − Σwᵢ²/Σwᵢ))` with `wᵢ = 1/vᵢ`.
//! - **Paule–Mandel** (Paule & Mandel 1982, J. Res. NBS 87:377): the `τ² ≥ 0` solving
//!   `Q(τ²) = n − 1`, zero when `Q(0) ≤ n − 1`. `Q` falls monotonically in τ², so the root is
//!   bracketed by doubling and found by Newton's method inside the bracket (bisecting where a
//!   Newton step would leave it).
//!
//! Both are checked against the BCG vaccine trials (Colditz et al. 1994), see
//! `models/tests/pooling_reference.rs`.

/// A random-effects summary of `n` estimates.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct RandomEffects {
    /// Between-unit variance τ² (units of the effect, squared).
    pub between_variance: f64,
    /// Pooled mean μ̂ at that τ².
    pub mean: f64,
    /// Variance of the pooled mean, 1/Σwᵢ.
    pub mean_variance: f64,
    /// Cochran's Q at τ² = 0.
    pub cochran_q: f64,
    /// Number of estimates.
    pub units: usize,
}

fn usable(effects: &[f64], variances: &[f64]) -> Option<Vec<(f64, f64)>> {
    if effects.len() != variances.len() {
        return None;
    }
    let pairs: Vec<(f64, f64)> = effects
        .iter()
        .zip(variances)
        .filter(|(y, v)| y.is_finite() && v.is_finite() && **v > 0.0)
        .map(|(y, v)| (*y, *v))
        .collect();
    (pairs.len() >= 2).then_some(pairs)
}

/// Pooled mean, its variance and Q at a given τ².
fn at_between_variance(pairs: &[(f64, f64)], tau2: f64) -> (f64, f64, f64) {
    let mut sw = 0.0;
    let mut swy = 0.0;
    for (y, v) in pairs {
        let w = 1.0 / (v + tau2);
        sw += w;
        swy += w * y;
    }
    let mean = swy / sw;
    let q = pairs.iter().map(|(y, v)| (y - mean).powi(2) / (v + tau2)).sum();
    (mean, 1.0 / sw, q)
}

fn summary(pairs: &[(f64, f64)], tau2: f64) -> RandomEffects {
    let (mean, mean_variance, _) = at_between_variance(pairs, tau2);
    let (_, _, q0) = at_between_variance(pairs, 0.0);
    RandomEffects { between_variance: tau2, mean, mean_variance, cochran_q: q0, units: pairs.len() }
}

/// DerSimonian–Laird estimate (module docs). `None` with fewer than two usable estimates
/// (finite effect, finite positive variance) or mismatched lengths.
pub fn dersimonian_laird(effects: &[f64], variances: &[f64]) -> Option<RandomEffects> {
    let pairs = usable(effects, variances)?;
    let (_, _, q) = at_between_variance(&pairs, 0.0);
    let sw: f64 = pairs.iter().map(|(_, v)| 1.0 / v).sum();
    let sw2: f64 = pairs.iter().map(|(_, v)| 1.0 / (v * v)).sum();
    let denominator = sw - sw2 / sw;
    let df = pairs.len() as f64 - 1.0;
    let tau2 = if denominator > 0.0 { ((q - df) / denominator).max(0.0) } else { 0.0 };
    Some(summary(&pairs, tau2))
}

/// Paule–Mandel estimate (module docs). `None` as for [`dersimonian_laird`].
pub fn paule_mandel(effects: &[f64], variances: &[f64]) -> Option<RandomEffects> {
    let pairs = usable(effects, variances)?;
    let df = pairs.len() as f64 - 1.0;
    let excess = |tau2: f64| at_between_variance(&pairs, tau2).2 - df;
    if excess(0.0) <= 0.0 {
        return Some(summary(&pairs, 0.0));
    }
    // Q(τ²) → 0 as τ² → ∞, so doubling finds a bracket; the sample variance of the effects is
    // the natural scale to start from.
    let n = pairs.len() as f64;
    let mean = pairs.iter().map(|p| p.0).sum::<f64>() / n;
    let spread = pairs.iter().map(|p| (p.0 - mean).powi(2)).sum::<f64>() / df;
    let mut high = spread.max(f64::MIN_POSITIVE);
    while excess(high) > 0.0 {
        high *= 2.0;
        if !high.is_finite() {
            return None;
        }
    }
    // Newton's method on Q(τ²) = n − 1 (dQ/dτ² = −Σwᵢ²(yᵢ − μ̂)², the pooled mean's own
    // change dropping out since μ̂ minimises Q), kept inside the bracket: a step that would
    // leave it bisects instead. A few steps reach the root bisection needs some fifty for, and
    // each step is one pass over the estimates more than a bisection step.
    let mut low = 0.0;
    let mut tau2 = 0.5 * high;
    for _ in 0..200 {
        let (q, slope) = q_and_slope(&pairs, tau2);
        let excess = q - df;
        if excess > 0.0 {
            low = tau2;
        } else {
            high = tau2;
        }
        let newton = tau2 - excess / slope;
        let next = if newton > low && newton < high { newton } else { 0.5 * (low + high) };
        let converged = (next - tau2).abs() <= 1e-14 * next || high - low <= 1e-14 * high;
        tau2 = next;
        if converged || excess == 0.0 {
            break;
        }
    }
    Some(summary(&pairs, tau2))
}

/// `(Q(τ²), dQ/dτ²)` (module docs): `dQ/dτ² = −Σwᵢ²(yᵢ − μ̂)²`.
fn q_and_slope(pairs: &[(f64, f64)], tau2: f64) -> (f64, f64) {
    let (mean, _, _) = at_between_variance(pairs, tau2);
    let (mut q, mut slope) = (0.0, 0.0);
    for (y, v) in pairs {
        let w = 1.0 / (v + tau2);
        let weighted = (y - mean).powi(2) * w;
        q += weighted;
        slope -= weighted * w;
    }
    (q, slope)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn identical_estimates_have_no_between_variance() {
        let pm = paule_mandel(&[1.0, 1.0, 1.0], &[0.1, 0.2, 0.3]).expect("pm");
        assert_eq!(pm.between_variance, 0.0);
        assert!((pm.mean - 1.0).abs() < 1e-15);
    }

    #[test]
    fn paule_mandel_solves_its_estimating_equation() {
        let y = [0.1, 0.9, 2.0, -0.5, 1.2];
        let v = [0.05, 0.1, 0.2, 0.05, 0.3];
        let pm = paule_mandel(&y, &v).expect("pm");
        let (_, _, q) = at_between_variance(&usable(&y, &v).expect("pairs"), pm.between_variance);
        assert!((q - 4.0).abs() < 1e-9, "Q at the estimate is {q}");
    }

    #[test]
    fn too_few_or_mismatched_inputs_give_none() {
        assert!(paule_mandel(&[1.0], &[1.0]).is_none());
        assert!(dersimonian_laird(&[1.0, 2.0], &[1.0]).is_none());
        assert!(dersimonian_laird(&[1.0, f64::NAN], &[1.0, 1.0]).is_none());
    }
}
