//! An exponential of non-positive arguments written so that a loop over it compiles to vector
//! instructions: no call and no branch, where `f64::exp` calls the C library once per value.
//! The pooling's lognormal combination sums some sixty weights `e^(ℓ − ℓ_max)` per part.
//!
//! # Method
//! Argument reduction `x = n·ln 2 + r` with `n` the integer nearest `x/ln 2` and `|r| ≤ ln 2/2`,
//! ln 2 split in two parts so that `n·ln2_hi` is exact (Cody & Waite, *Software Manual for the
//! Elementary Functions*, 1980; the two constants are fdlibm's `ln2_hi`/`ln2_lo`, recalled
//! from memory and checked by the tests below); `eʳ` by its Taylor polynomial of degree 13
//! (remainder below `0.347¹⁴/14! ≈ 4·10⁻¹⁸` relative); `2ⁿ` built from its exponent bits. The
//! integer `n` comes from adding `1.5·2⁵²`, which rounds to an integer in the low bits of the
//! sum, so no rounding call or float-to-integer conversion is needed either.

/// `x/ln 2` is rounded to an integer by adding this (`1.5·2⁵²`): the sum's last bits then hold it.
const ROUNDING_SHIFT: f64 = 6_755_399_441_055_744.0;
/// ln 2 to 32 bits (its last 21 bits zero, so `n·LN2_HI` is exact for `|n| < 2¹¹`).
const LN2_HI: f64 = 6.931_471_803_691_238e-1;
/// ln 2 − [`LN2_HI`].
const LN2_LO: f64 = 1.908_214_929_270_587_7e-10;
/// Below this, `eˣ` is under the smallest normal f64 and is given as 0.
const SMALLEST_ARGUMENT: f64 = -708.0;

/// `eˣ` for `x ≤ 0`, to within a few units in the last place of `f64::exp` (tests below); 0 for
/// `x < −708`, NaN for NaN. Inlined into its callers' loops, which it leaves free of calls and
/// branches.
#[inline(always)]
pub fn exp_non_positive(x: f64) -> f64 {
    let clamped = if x < SMALLEST_ARGUMENT { SMALLEST_ARGUMENT } else { x };
    let shifted = clamped * std::f64::consts::LOG2_E + ROUNDING_SHIFT;
    let n = shifted - ROUNDING_SHIFT;
    let r = (clamped - n * LN2_HI) - n * LN2_LO;
    // Taylor coefficients 1/k!, k = 13 down to 2, by Horner's rule.
    let mut p = 1.0 / 6_227_020_800.0;
    for coefficient in [
        1.0 / 479_001_600.0,
        1.0 / 39_916_800.0,
        1.0 / 3_628_800.0,
        1.0 / 362_880.0,
        1.0 / 40_320.0,
        1.0 / 5_040.0,
        1.0 / 720.0,
        1.0 / 120.0,
        1.0 / 24.0,
        1.0 / 6.0,
        0.5,
        1.0,
        1.0,
    ] {
        p = p * r + coefficient;
    }
    // 2ⁿ: the exponent field n + 1023 (n ≥ −1022 here, so a normal number).
    let n_bits = (shifted.to_bits() as i64).wrapping_sub(ROUNDING_SHIFT.to_bits() as i64);
    let scale = f64::from_bits((n_bits.wrapping_add(1023) << 52) as u64);
    let value = p * scale;
    if x < SMALLEST_ARGUMENT {
        0.0
    } else {
        value
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Relative error against Rust's `f64::exp` (the platform's C library; glibc's `exp` is
    /// correctly rounded in nearly every case), over a dense sweep of the domain.
    fn largest_relative_error(from: f64, to: f64, steps: usize) -> f64 {
        (0..=steps)
            .map(|i| from + (to - from) * i as f64 / steps as f64)
            .map(|x| {
                let reference = x.exp();
                ((exp_non_positive(x) - reference) / reference).abs()
            })
            .fold(0.0, f64::max)
    }

    #[test]
    fn agrees_with_the_standard_exponential_to_a_few_units_in_the_last_place() {
        // 2.2·10⁻¹⁶ is one unit in the last place at 1; three of them allowed.
        let bound = 3.0 * f64::EPSILON;
        assert!(largest_relative_error(-60.0, 0.0, 600_000) <= bound, "{}", largest_relative_error(-60.0, 0.0, 600_000));
        assert!(largest_relative_error(-1e-6, 0.0, 10_000) <= bound);
        assert!(largest_relative_error(-708.0, -60.0, 200_000) <= bound);
    }

    #[test]
    fn the_ends_of_the_domain() {
        assert_eq!(exp_non_positive(0.0), 1.0);
        assert_eq!(exp_non_positive(-0.0), 1.0);
        assert_eq!(exp_non_positive(-709.0), 0.0);
        assert_eq!(exp_non_positive(f64::NEG_INFINITY), 0.0);
        assert!(exp_non_positive(f64::NAN).is_nan());
        // ln 2 split: the high part has its last 21 bits clear, and the parts add up to ln 2.
        assert_eq!(LN2_HI.to_bits() & ((1 << 21) - 1), 0);
        assert_eq!(LN2_HI + LN2_LO, std::f64::consts::LN_2);
    }
}
