//! Least squares against the certified values of the NIST Statistical Reference Datasets
//! (https://www.itl.nist.gov/div898/strd/lls/lls.shtml), data in `tests/data/`.

use brakeledger_models::line_fit::{fit_line, WeightedPoint};
use brakeledger_models::regression::fit_rows;

fn read(csv: &str) -> Vec<(f64, f64)> {
    csv.lines()
        .skip(1)
        .filter(|l| !l.trim().is_empty())
        .map(|l| {
            let mut it = l.split(',').map(|v| v.trim().parse::<f64>().expect("number"));
            (it.next().expect("y"), it.next().expect("x"))
        })
        .collect()
}

/// Number of agreeing significant digits: −log10(|a − b| / |b|).
fn digits(a: f64, b: f64) -> f64 {
    if a == b {
        return 16.0;
    }
    -((a - b).abs() / b.abs()).log10()
}

fn assert_digits(name: &str, got: f64, certified: f64) {
    let d = digits(got, certified);
    println!("{name}: got {got:.15e}, certified {certified:.15e}, {d:.1} digits");
    assert!(d >= 9.0, "{name}: {got} vs certified {certified} agree to only {d:.1} digits");
}

/// NIST StRD Norris (y = B0 + B1·x), certified values from Norris.shtml.
#[test]
fn norris_matches_certified_values() {
    let data = read(include_str!("data/norris.csv"));
    let rows: Vec<Vec<f64>> = data.iter().map(|(_, x)| vec![1.0, *x]).collect();
    let y: Vec<f64> = data.iter().map(|(y, _)| *y).collect();
    let fit = fit_rows(&rows, &y).expect("fit");
    assert_digits("Norris B0", fit.coefficients[0], -0.262323073774029);
    assert_digits("Norris sd(B0)", fit.standard_errors[0], 0.232818234301152);
    assert_digits("Norris B1", fit.coefficients[1], 1.00211681802045);
    assert_digits("Norris sd(B1)", fit.standard_errors[1], 0.429796848199937e-03);
    assert_digits("Norris residual sd", fit.residual_sd, 0.884796396144373);
    assert_eq!(fit.degrees_of_freedom, 34.0);
}

/// NIST StRD NoInt1 (y = B1·x, through the origin, the shape of a wear line from a new part),
/// certified values from NoInt1.shtml.
#[test]
fn noint1_matches_certified_values() {
    let data = read(include_str!("data/noint1.csv"));
    let rows: Vec<Vec<f64>> = data.iter().map(|(_, x)| vec![*x]).collect();
    let y: Vec<f64> = data.iter().map(|(y, _)| *y).collect();
    let fit = fit_rows(&rows, &y).expect("fit");
    assert_digits("NoInt1 B1", fit.coefficients[0], 2.07438016528926);
    assert_digits("NoInt1 sd(B1)", fit.standard_errors[0], 0.165289256198347e-01);
    assert_digits("NoInt1 residual sd", fit.residual_sd, 3.56753034006338);
    assert_eq!(fit.degrees_of_freedom, 10.0);
}

/// NIST StRD Pontius (y = B0 + B1·x + B2·x², average difficulty), certified values from
/// Pontius.shtml.
#[test]
fn pontius_matches_certified_values() {
    let data = read(include_str!("data/pontius.csv"));
    let rows: Vec<Vec<f64>> = data.iter().map(|(_, x)| vec![1.0, *x, x * x]).collect();
    let y: Vec<f64> = data.iter().map(|(y, _)| *y).collect();
    let fit = fit_rows(&rows, &y).expect("fit");
    assert_digits("Pontius B0", fit.coefficients[0], 0.673565789473684e-03);
    assert_digits("Pontius sd(B0)", fit.standard_errors[0], 0.107938612033077e-03);
    assert_digits("Pontius B1", fit.coefficients[1], 0.732059160401003e-06);
    assert_digits("Pontius sd(B1)", fit.standard_errors[1], 0.157817399981659e-09);
    assert_digits("Pontius B2", fit.coefficients[2], -0.316081871345029e-14);
    assert_digits("Pontius sd(B2)", fit.standard_errors[2], 0.486652849992036e-16);
    assert_digits("Pontius residual sd", fit.residual_sd, 0.205177424076185e-03);
}

/// The closed-form line of the wear fit's lean path ([`fit_line`]) on NIST StRD Norris
/// (one intercept group, unit weights), certified values from Norris.shtml.
#[test]
fn closed_form_line_matches_norris() {
    let data = read(include_str!("data/norris.csv"));
    let points = data.iter().map(|&(y, x)| WeightedPoint { x, y, weight: 1.0, group: Some(0) });
    let fit = fit_line(points).expect("closed-form fit");
    let s2 = fit.residual_sd().powi(2);
    assert_digits("closed form Norris B0", fit.intercepts[0], -0.262323073774029);
    assert_digits("closed form Norris sd(B0)", (s2 * fit.xtx_inverse(1, 1)).sqrt(), 0.232818234301152);
    assert_digits("closed form Norris B1", fit.slope, 1.00211681802045);
    assert_digits("closed form Norris sd(B1)", (s2 * fit.xtx_inverse(0, 0)).sqrt(), 0.429796848199937e-03);
    assert_digits("closed form Norris residual sd", fit.residual_sd(), 0.884796396144373);
    assert_eq!(fit.degrees_of_freedom, 34.0);
}

/// The closed-form line through the origin (no intercept group, the wear line of a part whose
/// replacement is on record) on NIST StRD NoInt1, certified values from NoInt1.shtml.
#[test]
fn closed_form_line_matches_noint1() {
    let data = read(include_str!("data/noint1.csv"));
    let points = data.iter().map(|&(y, x)| WeightedPoint { x, y, weight: 1.0, group: None });
    let fit = fit_line(points).expect("closed-form fit");
    assert_digits("closed form NoInt1 B1", fit.slope, 2.07438016528926);
    assert_digits("closed form NoInt1 sd(B1)", (fit.residual_sd().powi(2) * fit.xtx_inverse(0, 0)).sqrt(), 0.165289256198347e-01);
    assert_digits("closed form NoInt1 residual sd", fit.residual_sd(), 3.56753034006338);
    assert_eq!(fit.degrees_of_freedom, 10.0);
}
