//! An exact, mergeable sum of floating-point values.
//!
//! Pooled per-cycle figures (the time series) are sums over replications. A run keeps only the
//! sums, not the replications' per-cycle records, so shards made on other machines and the parts
//! of a resumed run must add up to the same bits in any grouping. A plain running sum does not:
//! (a + b) + c and a + (b + c) differ in the last bit. This accumulator holds the sum exactly, as
//! non-overlapping partial sums (Shewchuk, "Adaptive precision floating-point arithmetic and fast
//! robust geometric predicates", Discrete & Computational Geometry 18, 1997), and rounds it once,
//! correctly, when read; so the result depends on the values alone, never on their order or on how
//! they were split.

use serde::{Deserialize, Serialize};

/// The exact sum of the finite values pushed or merged into it.
#[derive(Debug, Clone, Default, Serialize, Deserialize)]
#[serde(transparent)]
pub struct ExactSum {
    /// Non-overlapping partial sums in increasing magnitude; their exact sum is the total.
    partials: Vec<f64>,
}

impl ExactSum {
    /// Adds one finite value exactly.
    pub fn push(&mut self, value: f64) {
        debug_assert!(value.is_finite(), "exact sums take finite values");
        let mut x = value;
        let mut kept = 0;
        for j in 0..self.partials.len() {
            let mut y = self.partials[j];
            if x.abs() < y.abs() {
                std::mem::swap(&mut x, &mut y);
            }
            // hi + lo == x + y exactly (Knuth's two-sum with |x| >= |y|)
            let hi = x + y;
            let lo = y - (hi - x);
            if lo != 0.0 {
                self.partials[kept] = lo;
                kept += 1;
            }
            x = hi;
        }
        self.partials.truncate(kept);
        self.partials.push(x);
    }

    /// Adds every value held by `other`, exactly.
    pub fn merge(&mut self, other: &ExactSum) {
        for &p in &other.partials {
            self.push(p);
        }
    }

    /// The exact sum rounded to the nearest double (ties to even).
    pub fn value(&self) -> f64 {
        let p = &self.partials;
        let Some(&top) = p.last() else { return 0.0 };
        let mut n = p.len() - 1;
        let mut hi = top;
        let mut lo = 0.0;
        // Add partials from the largest down until the sum stops being exact.
        while n > 0 {
            let x = hi;
            n -= 1;
            let y = p[n];
            hi = x + y;
            lo = y - (hi - x);
            if lo != 0.0 {
                break;
            }
        }
        // hi + lo is exact; when lo is exactly half an ulp and the partials below pull the same
        // way, the true sum lies past the halfway point and rounds away from hi.
        if n > 0 && ((lo < 0.0 && p[n - 1] < 0.0) || (lo > 0.0 && p[n - 1] > 0.0)) {
            let y = lo * 2.0;
            let x = hi + y;
            if y == x - hi {
                hi = x;
            }
        }
        hi
    }
}

impl PartialEq for ExactSum {
    /// Equal when the exact sums are equal (however they are split into partials): their exact
    /// difference is then zero, and a non-zero exact difference of doubles never rounds to zero.
    fn eq(&self, other: &Self) -> bool {
        let mut difference = self.clone();
        other.partials.iter().for_each(|&p| difference.push(-p));
        difference.value() == 0.0
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};

    /// Values that are integer multiples of 2^-60 below 2^-7 in magnitude: their exact sum is an
    /// i128 count of 2^-60, and the i128 -> f64 conversion rounds to nearest, ties to even (Rust
    /// reference, "numeric cast"), as does scaling by a power of two; an independent exact answer.
    fn exact_reference(ints: &[i64]) -> f64 {
        let total: i128 = ints.iter().map(|&k| i128::from(k)).sum();
        total as f64 * 2f64.powi(-60)
    }

    fn values(ints: &[i64]) -> Vec<f64> {
        ints.iter().map(|&k| k as f64 * 2f64.powi(-60)).collect()
    }

    #[test]
    fn the_sum_is_correctly_rounded_in_any_order_and_split() {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(11);
        for case in 0..200 {
            let n = rng.random_range(1..300);
            // Mixed magnitudes make a naive sum lose bits; k fits 53 bits so every value is exact.
            let ints: Vec<i64> = (0..n)
                .map(|_| {
                    let bits = rng.random_range(0..53);
                    let k = rng.random_range(0..(1i64 << bits).max(1));
                    if rng.random_bool(0.5) { -k } else { k }
                })
                .collect();
            let xs = values(&ints);
            let want = exact_reference(&ints);
            let mut one = ExactSum::default();
            xs.iter().for_each(|&x| one.push(x));
            assert_eq!(one.value().to_bits(), want.to_bits(), "case {case}: one pass");
            // Another order and a split into two merged parts give the same bits.
            let cut = rng.random_range(0..=xs.len());
            let (mut a, mut b) = (ExactSum::default(), ExactSum::default());
            xs[..cut].iter().rev().for_each(|&x| a.push(x));
            xs[cut..].iter().for_each(|&x| b.push(x));
            b.merge(&a);
            assert_eq!(b.value().to_bits(), want.to_bits(), "case {case}: split at {cut}");
        }
    }

    #[test]
    fn halfway_cases_round_to_even_with_the_lower_partials_deciding() {
        // 1 + 2^-53 is halfway between 1 and its successor: ties to even give 1.
        let mut s = ExactSum::default();
        s.push(1.0);
        s.push(2f64.powi(-53));
        assert_eq!(s.value(), 1.0);
        // A tiny further amount in the same direction puts it past halfway: the successor.
        s.push(2f64.powi(-80));
        assert_eq!(s.value(), 1.0 + f64::EPSILON);
        // The classic cancellation: 1e100 + 1 - 1e100 is exactly 1.
        let mut c = ExactSum::default();
        [1e100, 1.0, -1e100].iter().for_each(|&x| c.push(x));
        assert_eq!(c.value(), 1.0);
        assert_eq!(ExactSum::default().value(), 0.0);
        // equality is of the exact sums, not of their partials
        let mut d = ExactSum::default();
        [1.0, 1e100, -1e100].iter().for_each(|&x| d.push(x));
        assert_eq!(c, d);
        d.push(f64::MIN_POSITIVE * f64::EPSILON);
        assert_ne!(c, d);
    }
}
