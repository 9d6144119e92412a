//! Sorting one part's due days: the 128 values of a quasi-random integral with AVX2 vector
//! instructions where the processor has them, any other count (or another processor) by the
//! standard library's sort. A refresh sorts 128 values per part, and the standard sort was the
//! largest single cost of the due-date integral.
//!
//! # Method
//! The 128 values are held as 32 vectors of 4. A bitonic sorting network (Batcher, "Sorting
//! networks and their applications", AFIPS 1968) applied to whole vectors, lane by lane with
//! vector minimum and maximum, sorts each of the 4 lanes over the 32 vectors; 4×4 transposes
//! turn the lanes into 4 sorted runs of 32; bitonic merges (one run reversed, then
//! compare-exchanges at halving distances, the last two inside each vector by shuffles) join
//! them two by two. No comparison branches, so nothing for the processor to mispredict.
//!
//! The values must not be NaN (vector minimum and maximum do not order it); the caller leaves
//! undated points out first. Equal values may come out in any order, which for numbers that
//! compare equal changes nothing but the order of −0 and +0.

#[cfg(target_arch = "x86_64")]
use std::arch::x86_64::__m256d;

#[cfg(target_arch = "x86_64")]
use pulp::x86::V3;

/// The count of values sorted with vector instructions.
pub const VECTOR_SORTED: usize = 128;

/// Sorts `days` ascending (none may be NaN; see the module docs).
pub fn sort_days(days: &mut [f64]) {
    #[cfg(target_arch = "x86_64")]
    if let Ok(block) = <&mut [f64; VECTOR_SORTED]>::try_from(&mut *days) {
        if let Some(simd) = V3::try_new() {
            simd.vectorize(move || sort_128(simd, block));
            return;
        }
    }
    days.sort_unstable_by(f64::total_cmp);
}

/// Vectors of the 128 values.
#[cfg(target_arch = "x86_64")]
const ROWS: usize = VECTOR_SORTED / 4;

#[cfg(target_arch = "x86_64")]
#[inline(always)]
fn sort_128(simd: V3, days: &mut [f64; VECTOR_SORTED]) {
    let zero: __m256d = pulp::cast([0.0f64; 4]);
    let mut rows = [zero; ROWS];
    for (row, chunk) in rows.iter_mut().zip(days.as_chunks::<4>().0) {
        *row = pulp::cast(*chunk);
    }
    // 1. Each lane sorted over the 32 rows: Batcher's bitonic network, whole vectors at a time.
    let mut size = 2;
    while size <= ROWS {
        let mut distance = size / 2;
        while distance > 0 {
            for i in 0..ROWS {
                let partner = i ^ distance;
                if partner > i {
                    if i & size == 0 {
                        compare_exchange(simd, &mut rows, i, partner);
                    } else {
                        compare_exchange(simd, &mut rows, partner, i);
                    }
                }
            }
            distance /= 2;
        }
        size *= 2;
    }
    // 2. Lane c of rows 4b..4b+4 becomes vector b of run c: four ascending runs of 8 vectors.
    let mut runs = [[zero; ROWS / 4]; 4];
    for (block, four) in rows.chunks_exact(4).enumerate() {
        for (run, column) in runs.iter_mut().zip(transpose(simd, [four[0], four[1], four[2], four[3]])) {
            run[block] = column;
        }
    }
    // 3. Merged two by two.
    let mut halves = [[zero; ROWS / 2]; 2];
    merge(simd, &runs[0], &runs[1], &mut halves[0]);
    merge(simd, &runs[2], &runs[3], &mut halves[1]);
    merge(simd, &halves[0], &halves[1], &mut rows);
    for (chunk, row) in days.as_chunks_mut::<4>().0.iter_mut().zip(rows) {
        *chunk = pulp::cast(row);
    }
}

/// Puts the lane-wise minimum of vectors `low` and `high` in `low` and the maximum in `high`.
#[cfg(target_arch = "x86_64")]
#[inline(always)]
fn compare_exchange(simd: V3, vectors: &mut [__m256d], low: usize, high: usize) {
    let (a, b) = (vectors[low], vectors[high]);
    vectors[low] = simd.avx._mm256_min_pd(a, b);
    vectors[high] = simd.avx._mm256_max_pd(a, b);
}

/// The 4×4 transpose: lane c of the four rows becomes vector c.
#[cfg(target_arch = "x86_64")]
#[inline(always)]
fn transpose(simd: V3, [r0, r1, r2, r3]: [__m256d; 4]) -> [__m256d; 4] {
    let t0 = simd.avx._mm256_unpacklo_pd(r0, r1); // r0[0] r1[0] r0[2] r1[2]
    let t1 = simd.avx._mm256_unpackhi_pd(r0, r1); // r0[1] r1[1] r0[3] r1[3]
    let t2 = simd.avx._mm256_unpacklo_pd(r2, r3);
    let t3 = simd.avx._mm256_unpackhi_pd(r2, r3);
    [
        simd.avx._mm256_permute2f128_pd::<0x20>(t0, t2),
        simd.avx._mm256_permute2f128_pd::<0x20>(t1, t3),
        simd.avx._mm256_permute2f128_pd::<0x31>(t0, t2),
        simd.avx._mm256_permute2f128_pd::<0x31>(t1, t3),
    ]
}

/// Merges the ascending runs `a` and `b` (equal lengths, a power of two) into `out` (twice as
/// long): `a` then `b` reversed is bitonic, and a bitonic merge sorts it.
#[cfg(target_arch = "x86_64")]
#[inline(always)]
fn merge(simd: V3, a: &[__m256d], b: &[__m256d], out: &mut [__m256d]) {
    let n = a.len();
    out[..n].copy_from_slice(a);
    for (slot, vector) in out[n..].iter_mut().zip(b.iter().rev()) {
        // Lanes reversed: 3 2 1 0.
        *slot = simd.avx2._mm256_permute4x64_pd::<0x1B>(*vector);
    }
    let mut distance = n;
    while distance > 0 {
        for i in 0..2 * n {
            if i & distance == 0 {
                compare_exchange(simd, out, i, i + distance);
            }
        }
        distance /= 2;
    }
    for vector in out.iter_mut() {
        // Lanes two apart, then neighbours.
        let swapped = simd.avx._mm256_permute2f128_pd::<0x01>(*vector, *vector); // 2 3 0 1
        let (low, high) = (simd.avx._mm256_min_pd(*vector, swapped), simd.avx._mm256_max_pd(*vector, swapped));
        let halves = simd.avx._mm256_blend_pd::<0b1100>(low, high);
        let swapped = simd.avx._mm256_shuffle_pd::<0b0101>(halves, halves); // 1 0 3 2
        let (low, high) = (simd.avx._mm256_min_pd(halves, swapped), simd.avx._mm256_max_pd(halves, swapped));
        *vector = simd.avx._mm256_blend_pd::<0b1010>(low, high);
    }
}

#[cfg(test)]
mod tests {
    use proptest::prelude::*;

    use super::*;

    /// Reference: the standard library's sort in the IEEE 754 total order (`f64::total_cmp`).
    fn reference(values: &[f64]) -> Vec<f64> {
        let mut sorted = values.to_vec();
        sorted.sort_unstable_by(f64::total_cmp);
        sorted
    }

    fn sorted(values: &[f64]) -> Vec<f64> {
        let mut out = values.to_vec();
        sort_days(&mut out);
        out
    }

    #[test]
    fn orders_that_break_naive_sorts() {
        let ascending: Vec<f64> = (0..128).map(f64::from).collect();
        let descending: Vec<f64> = ascending.iter().rev().copied().collect();
        let few_values: Vec<f64> = (0..128).map(|i| f64::from((i * 37) % 5)).collect();
        let organ_pipe: Vec<f64> = (0..128).map(|i| f64::from(64 - (i - 64i32).abs())).collect();
        let extremes: Vec<f64> =
            (0..128).map(|i| match i % 4 { 0 => f64::INFINITY, 1 => f64::NEG_INFINITY, 2 => f64::MAX, _ => -f64::MIN_POSITIVE * f64::from(i) }).collect();
        for values in [ascending, descending, few_values, organ_pipe, extremes, vec![20_000.5; 128]] {
            assert_eq!(sorted(&values), reference(&values));
        }
    }

    proptest! {
        /// Any 128 values that are not NaN come out in the standard sort's order.
        #[test]
        fn sorts_like_the_standard_library(values in proptest::collection::vec(-1e7f64..1e7, 128)) {
            prop_assert_eq!(sorted(&values), reference(&values));
        }

        /// Due days as the integral makes them: many close together, a long tail, repeats.
        #[test]
        fn sorts_due_days_with_repeats(offsets in proptest::collection::vec(0u32..40, 128), tail in proptest::collection::vec(0.0f64..3_000.0, 128)) {
            let values: Vec<f64> = offsets.iter().zip(&tail).map(|(o, t)| 20_000.0 + f64::from(*o) / 24.0 + if *o % 3 == 0 { *t } else { 0.0 }).collect();
            prop_assert_eq!(sorted(&values), reference(&values));
        }

        /// Other counts take the standard sort.
        #[test]
        fn other_counts_sort_too(values in proptest::collection::vec(-1e3f64..1e3, 0..200)) {
            prop_assert_eq!(sorted(&values), reference(&values));
        }
    }
}
