//! Student-t quantiles and the inverse Gaussian first-passage distribution against published
//! tables, closed forms and a reference library.

use brakeledger_models::first_passage::FirstPassage;
use brakeledger_models::regression::student_t_quantile;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;

/// Upper critical values t(1−α, ν) from the table "Critical values of the Student's t
/// distribution", NIST/SEMATECH e-Handbook of Statistical Methods, section 1.3.6.7.2
/// (https://www.itl.nist.gov/div898/handbook/eda/section3/eda3672.htm), printed to 3 decimals.
/// Values recalled from memory of that table; the same figures appear in every printed t table.
#[test]
fn student_t_quantiles_match_the_published_table() {
    let table: [(f64, f64, f64); 12] = [
        // (ν, 1 − α, t)
        (1.0, 0.90, 3.078),
        (1.0, 0.95, 6.314),
        (1.0, 0.975, 12.706),
        (5.0, 0.95, 2.015),
        (5.0, 0.975, 2.571),
        (10.0, 0.90, 1.372),
        (10.0, 0.95, 1.812),
        (10.0, 0.975, 2.228),
        (10.0, 0.995, 3.169),
        (30.0, 0.95, 1.697),
        (30.0, 0.975, 2.042),
        (30.0, 0.995, 2.750),
    ];
    for (nu, p, printed) in table {
        let t = student_t_quantile(p, nu).expect("quantile");
        assert!((t - printed).abs() <= 0.0005 + 1e-9, "t({p}, {nu}) = {t}, table {printed}");
        // Symmetry: the lower quantile is the negative of the upper one.
        let lower = student_t_quantile(1.0 - p, nu).expect("quantile");
        assert!((lower + t).abs() < 1e-8 * t.abs().max(1.0), "t({}, {nu}) = {lower}", 1.0 - p);
    }
    assert!(student_t_quantile(1.0, 3.0).is_err());
    assert!(student_t_quantile(0.5, 0.0).is_err());
}

/// (R MJ, μ MJ/day, σ² MJ²/day, [(t days, F(t))], [(p, quantile days)]) from scipy 1.17.1 on
/// this machine, with the inverse Gaussian of mean m = R/μ and shape λ = R²/σ² expressed in
/// scipy's parametrisation invgauss(mu = m/λ, scale = λ). Command:
/// `python3 -c "import scipy.stats as st; m=R/mu; lam=R*R/s2; d=st.invgauss(m/lam, scale=lam); print(d.mean(), d.var(), [d.cdf(t) for t in (0.5*m, 0.9*m, m, 1.2*m, 2*m)], [d.ppf(p) for p in (0.1, 0.5, 0.9)])"`
/// for (R, mu, s2) in (1000, 10, 400), (5000, 50, 2500), (200, 4, 100).
type ScipyCase = (f64, f64, f64, [(f64, f64); 5], [(f64, f64); 3]);
const SCIPY: [ScipyCase; 3] = [
    (
        1000.0,
        10.0,
        400.0,
        [(50.0, 0.00027545655583598064), (90.0, 0.33341763010680625), (100.0, 0.5395066941013857), (120.0, 0.8452834028698251), (200.0, 0.999868504538391)],
        [(0.1, 76.0416522058074), (0.5, 98.04533406295097), (0.9, 126.4685606165372)],
    ),
    (
        5000.0,
        50.0,
        2500.0,
        [(50.0, 1.0293344306128782e-12), (90.0, 0.15732085254808062), (100.0, 0.5198976156483264), (120.0, 0.969798111237338), (200.0, 0.9999999999994919)],
        [(0.1, 87.55717962994092), (0.5, 99.5028952201254), (0.9, 113.08145752911416)],
    ),
    (
        200.0,
        4.0,
        100.0,
        [(25.0, 0.031517058800151744), (45.0, 0.4482333270446777), (50.0, 0.5684997288125309), (60.0, 0.7569260406448013), (100.0, 0.9860167949037933)],
        [(0.1, 30.299370163448742), (0.5, 47.0840278130976), (0.9, 73.43395875783234)],
    ),
];

/// Mean R/μ and variance R·σ²/μ³ (closed form, Chhikara & Folks 1989), CDF and quantiles vs
/// scipy.stats.invgauss.
#[test]
fn inverse_gaussian_matches_closed_form_and_scipy() {
    for (r, mu, s2, cdf, quantiles) in SCIPY {
        let fp = FirstPassage::new(r, mu, s2).expect("valid");
        assert!((fp.mean_days - r / mu).abs() < 1e-12 * r / mu);
        let closed_var = r * s2 / mu.powi(3);
        assert!((fp.variance_days2() - closed_var).abs() < 1e-9 * closed_var);
        for (t, expected) in cdf {
            let got = fp.cdf(t);
            let tol = 1e-9 * expected.max(1e-3);
            assert!((got - expected).abs() <= tol.max(1e-14), "F({t}) = {got:e}, scipy {expected:e} (R={r})");
        }
        for (p, expected) in quantiles {
            let got = fp.quantile(p);
            assert!((got - expected).abs() < 1e-7 * expected, "q({p}) = {got}, scipy {expected}");
        }
    }
}

/// Sampled passage times reproduce the closed-form mean and variance (seeded, so the check is
/// deterministic; tolerances are about 5 standard errors).
#[test]
fn inverse_gaussian_sampling_matches_moments() {
    let fp = FirstPassage::new(1000.0, 10.0, 400.0).expect("valid");
    let mut rng = ChaCha8Rng::seed_from_u64(7);
    let n = 200_000;
    let draws: Vec<f64> = (0..n).map(|_| fp.sample(&mut rng)).collect();
    let mean = draws.iter().sum::<f64>() / n as f64;
    let var = draws.iter().map(|d| (d - mean).powi(2)).sum::<f64>() / (n as f64 - 1.0);
    let se_mean = (fp.variance_days2() / n as f64).sqrt();
    assert!((mean - fp.mean_days).abs() < 5.0 * se_mean, "mean {mean} vs {}", fp.mean_days);
    assert!((var / fp.variance_days2() - 1.0).abs() < 0.03, "variance {var} vs {}", fp.variance_days2());
    // Empirical CDF at the mean vs the closed form.
    let below = draws.iter().filter(|d| **d <= fp.mean_days).count() as f64 / n as f64;
    assert!((below - fp.cdf(fp.mean_days)).abs() < 0.005);
}

/// The normal truncated at zero against scipy 1.17.1:
/// `scipy.stats.truncnorm((0 - m)/s, inf, loc=m, scale=s).mean()` and `.var()`.
#[test]
fn truncated_normal_matches_scipy() {
    use brakeledger_models::forecast::truncated_at_zero;
    let cases = [
        (-6e-5, 3e-5, 1.1196465984685204e-05, 1.0285119037267497e-10),
        (1.0, 1.0, 1.2875999709391783, 0.6296862857766055),
        (-2.0, 0.5, 0.11280357224473825, 0.01166820959934961),
    ];
    for (m, s, mean, var) in cases {
        let (got_mean, got_var) = truncated_at_zero((m, s * s));
        assert!(((got_mean - mean) / mean).abs() < 1e-6, "mean of N({m}, {s}²)|>0: {got_mean} vs {mean}");
        assert!(((got_var - var) / var).abs() < 1e-5, "variance of N({m}, {s}²)|>0: {got_var} vs {var}");
    }
}

/// The raw six-dimensional Sobol points equal scipy 1.17.1's
/// `scipy.stats.qmc.Sobol(d=6, scramble=False).random(128)` (Joe & Kuo direction numbers) at
/// the rows printed by `python3 -c "from scipy.stats import qmc; x = qmc.Sobol(d=6,
/// scramble=False).random(128); print([list(x[i]) for i in (1, 2, 5, 37, 100, 127)])"`.
#[test]
fn sobol_points_match_scipy() {
    use brakeledger_models::quasi_random::sobol_points;
    let points = sobol_points(128);
    let scipy: [(usize, [f64; 6]); 6] = [
        (1, [0.5, 0.5, 0.5, 0.5, 0.5, 0.5]),
        (2, [0.75, 0.25, 0.25, 0.25, 0.75, 0.75]),
        (5, [0.875, 0.875, 0.125, 0.375, 0.875, 0.625]),
        (37, [0.921875, 0.640625, 0.578125, 0.921875, 0.765625, 0.296875]),
        (100, [0.4140625, 0.2578125, 0.7734375, 0.7265625, 0.8828125, 0.7421875]),
        (127, [0.0078125, 0.6640625, 0.5546875, 0.6328125, 0.4765625, 0.3359375]),
    ];
    assert_eq!(points[0], [0.0; 6]);
    for (i, expected) in scipy {
        assert_eq!(points[i], expected, "point {i}");
    }
}

/// The Michael-Schucany-Haas transformation fed quasi-random χ²₁ and uniform values (4,096
/// Sobol points) reproduces scipy's inverse Gaussian quantiles (the `SCIPY` cases above)
/// within 0.5 %.
#[test]
fn passage_transform_on_sobol_points_matches_scipy_quantiles() {
    use brakeledger_models::quasi_random::NormalScores;
    let scores = NormalScores::new(4096);
    for (r, mu, s2, _, quantiles) in SCIPY {
        let fp = FirstPassage::new(r, mu, s2).expect("valid");
        let mut days: Vec<f64> = scores.points.iter().zip(&scores.cells).map(|(z, u)| fp.transform(z[4] * z[4], u[5])).collect();
        days.sort_by(f64::total_cmp);
        for (p, expected) in quantiles {
            let got = days[(p * days.len() as f64) as usize];
            assert!((got / expected - 1.0).abs() < 0.005, "R={r}: q({p}) = {got}, scipy {expected}");
        }
    }
}
