//! Quasi-random points for the due-date integral: the first `2^m` points of the Sobol
//! sequence in six dimensions, shifted to the centres of their cells and turned into standard
//! normal scores once per thread.
//!
//! # Why
//! The due date integrates over five uncertain quantities (wear rate, today's thickness, mean
//! daily energy, the rate's drift from today on, and the passage time itself, drawn from two
//! coordinates). Pseudo-random draws need about a thousand per part for steady quantiles; the
//! first `2^m` Sobol points are a (t, m, 6)-net in base 2 (every one-dimensional projection
//! holds exactly one point per interval `[i/2^m, (i+1)/2^m)`), so a hundred or so give the same
//! steadiness on a smooth integrand, and the same points serve every part (common random
//! numbers: a forecast recomputed with a little more data moves smoothly).
//!
//! # Construction
//! Sobol (1967) with the primitive polynomials and initial direction numbers of Joe & Kuo
//! (2008, file `new-joe-kuo-6.21201`, dimensions 2-6; dimension 1 is the van der Corput
//! sequence), in Gray-code order (Antonov & Saleev 1979), unscrambled. The raw points equal
//! `scipy.stats.qmc.Sobol(d=6, scramble=False).random(n)` (checked in the tests). Each
//! coordinate `x` (a multiple of `2^−m`) is used as `x + 2^−(m+1)`, the centre of its cell, so
//! no coordinate is 0 and the normal scores `Φ⁻¹(u)` are finite and symmetric.

use std::cell::RefCell;
use std::rc::Rc;

use statrs::distribution::{ContinuousCDF, Normal};

/// Coordinates per point.
pub const DIMENSIONS: usize = 6;

/// Bits of each coordinate.
const BITS: usize = 32;

/// (degree s, coefficients a, initial direction numbers m₁…m_s) of dimensions 2-6, Joe & Kuo
/// (2008), `new-joe-kuo-6.21201` (values recalled from memory of that file; the points they
/// give are checked against scipy in the tests).
const JOE_KUO: [(usize, u32, &[u32]); DIMENSIONS - 1] =
    [(1, 0, &[1]), (2, 1, &[1, 3]), (3, 1, &[1, 3, 1]), (3, 2, &[1, 1, 1]), (4, 1, &[1, 1, 3, 3])];

/// Direction numbers `v[d][i]` (bit `i + 1`, scaled by 2^32) of every dimension.
fn direction_numbers() -> [[u32; BITS]; DIMENSIONS] {
    let mut v = [[0u32; BITS]; DIMENSIONS];
    for (i, value) in v[0].iter_mut().enumerate() {
        *value = 1u32 << (BITS - 1 - i);
    }
    for (d, &(s, a, m)) in JOE_KUO.iter().enumerate() {
        let row = &mut v[d + 1];
        for i in 0..BITS {
            row[i] = if i < s {
                m[i] << (BITS - 1 - i)
            } else {
                let mut value = row[i - s] ^ (row[i - s] >> s);
                for k in 1..s {
                    if (a >> (s - 1 - k)) & 1 == 1 {
                        value ^= row[i - k];
                    }
                }
                value
            };
        }
    }
    v
}

/// The first `count` points of the unscrambled six-dimensional Sobol sequence, in [0, 1).
/// The first point is the origin.
pub fn sobol_points(count: usize) -> Vec<[f64; DIMENSIONS]> {
    let v = direction_numbers();
    let scale = 1.0 / (1u64 << BITS) as f64;
    let mut x = [0u32; DIMENSIONS];
    let mut out = Vec::with_capacity(count);
    for n in 0..count {
        out.push(x.map(|c| f64::from(c) * scale));
        // Gray code: flip the direction number of the lowest zero bit of n.
        let bit = (!n).trailing_zeros() as usize;
        if bit >= BITS {
            break;
        }
        for d in 0..DIMENSIONS {
            x[d] ^= v[d][bit];
        }
    }
    out
}

/// Standard normal scores of the first `2^m` Sobol points, each coordinate moved to the centre
/// of its cell: `Φ⁻¹(x + 2^−(m+1))`.
#[derive(Debug, Clone, PartialEq)]
pub struct NormalScores {
    /// The normal scores, one row per point.
    pub points: Vec<[f64; DIMENSIONS]>,
    /// The same points' centred coordinates in (0, 1), for a coordinate used as a uniform.
    pub cells: Vec<[f64; DIMENSIONS]>,
    /// `points` by coordinate: `score_columns[d][i]` is `points[i][d]`. A loop over the points
    /// that reads a few coordinates reads contiguous arrays, which the compiler can vectorise.
    pub score_columns: [Vec<f64>; DIMENSIONS],
    /// `cells` by coordinate, as `score_columns`.
    pub cell_columns: [Vec<f64>; DIMENSIONS],
}

impl NormalScores {
    /// Scores of the first `count` points, `count` rounded up to a power of two (at least 2).
    pub fn new(count: usize) -> Self {
        let count = count.max(2).next_power_of_two();
        let half_cell = 0.5 / count as f64;
        let cells: Vec<[f64; DIMENSIONS]> = sobol_points(count).into_iter().map(|p| p.map(|x| x + half_cell)).collect();
        let points = match Normal::new(0.0, 1.0) {
            Ok(normal) => cells.iter().map(|c| c.map(|u| normal.inverse_cdf(u))).collect(),
            Err(_) => Vec::new(),
        };
        let column = |rows: &[[f64; DIMENSIONS]], d: usize| rows.iter().map(|r| r[d]).collect::<Vec<f64>>();
        let score_columns = std::array::from_fn(|d| column(&points, d));
        let cell_columns = std::array::from_fn(|d| column(&cells, d));
        Self { points, cells, score_columns, cell_columns }
    }

    /// `exp(scale·zᵢ)` for every point's score `zᵢ` in `column` (a lognormal factor), made once
    /// per thread for the last few scales asked for (a group's parts share one scale).
    pub fn exp_scaled(&self, column: usize, scale: f64) -> Rc<[f64]> {
        /// (point count, column, scale bits) and the factors.
        type Entry = (usize, usize, u64, Rc<[f64]>);
        thread_local! {
            static CACHE: RefCell<Vec<Entry>> = const { RefCell::new(Vec::new()) };
        }
        let key = (self.points.len(), column, scale.to_bits());
        CACHE.with(|cache| {
            let mut cache = cache.borrow_mut();
            if let Some(found) = cache.iter().find(|e| (e.0, e.1, e.2) == key) {
                return Rc::clone(&found.3);
            }
            let made: Rc<[f64]> = self.points.iter().map(|p| (scale * p[column.min(DIMENSIONS - 1)]).exp()).collect();
            if cache.len() >= 16 {
                cache.remove(0);
            }
            cache.push((key.0, key.1, key.2, Rc::clone(&made)));
            made
        })
    }

    /// The scores for `count` points (rounded up to a power of two), made once per thread and
    /// count and shared after.
    pub fn cached(count: usize) -> Rc<Self> {
        thread_local! {
            static CACHE: RefCell<Vec<Rc<NormalScores>>> = const { RefCell::new(Vec::new()) };
        }
        let count = count.max(2).next_power_of_two();
        CACHE.with(|cache| {
            let mut cache = cache.borrow_mut();
            if let Some(found) = cache.iter().find(|s| s.points.len() == count) {
                return Rc::clone(found);
            }
            let made = Rc::new(Self::new(count));
            cache.push(Rc::clone(&made));
            made
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_coordinate_holds_one_point_per_cell() {
        let points = sobol_points(128);
        for d in 0..DIMENSIONS {
            let mut cells: Vec<usize> = points.iter().map(|p| (p[d] * 128.0) as usize).collect();
            cells.sort_unstable();
            assert_eq!(cells, (0..128).collect::<Vec<_>>(), "dimension {d}");
        }
    }

    #[test]
    fn scores_are_symmetric_and_standard() {
        let scores = NormalScores::new(100);
        assert_eq!(scores.points.len(), 128);
        for d in 0..DIMENSIONS {
            let mean: f64 = scores.points.iter().map(|p| p[d]).sum::<f64>() / 128.0;
            let var: f64 = scores.points.iter().map(|p| p[d] * p[d]).sum::<f64>() / 128.0;
            assert!(mean.abs() < 1e-12, "dimension {d}: mean {mean}");
            assert!((var - 1.0).abs() < 0.03, "dimension {d}: variance {var}");
        }
        assert!(Rc::ptr_eq(&NormalScores::cached(128), &NormalScores::cached(100)));
    }
}
