//! Estimators computed from independent replications.

use crate::stats::tolerance::Z_95;

/// A pooled ratio estimate with its 95% interval from between-replication variation.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct RatioEstimate {
    /// Sum of numerators over sum of denominators.
    pub rate: f64,
    /// Delta-method standard error, `None` with fewer than 2 replications.
    pub standard_error: Option<f64>,
}

impl RatioEstimate {
    /// Lower end of the 95% interval (not clamped).
    pub fn ci_low(&self) -> Option<f64> {
        self.standard_error.map(|se| self.rate - Z_95 * se)
    }

    /// Upper end of the 95% interval (not clamped).
    pub fn ci_high(&self) -> Option<f64> {
        self.standard_error.map(|se| self.rate + Z_95 * se)
    }
}

/// The pooled ratio sum(x) / sum(y) over replications, with the ratio-estimator (delta-method)
/// standard error sqrt(sum (x_i - R y_i)^2 / (n (n - 1))) / mean(y) (Cochran, Sampling Techniques,
/// ch. 6). `None` when the pooled denominator is zero.
pub fn ratio(pairs: impl IntoIterator<Item = (f64, f64)>) -> Option<RatioEstimate> {
    let pairs: Vec<(f64, f64)> = pairs.into_iter().collect();
    ratio_in_passes(|| pairs.iter().copied())
}

/// [`ratio`] of the pairs `pairs()` yields, read twice (each call must yield the same pairs in the
/// same order) instead of held: a run's replications may wait on disk, and one value per
/// replication in memory is what a flat-memory run must not keep. Bit-identical to [`ratio`].
pub fn ratio_in_passes<I: Iterator<Item = (f64, f64)>>(pairs: impl Fn() -> I) -> Option<RatioEstimate> {
    let (n, sx, sy) = pairs().fold((0usize, 0.0, 0.0), |(n, a, b), (x, y)| (n + 1, a + x, b + y));
    if sy == 0.0 {
        return None;
    }
    let rate = sx / sy;
    let standard_error = (n >= 2).then(|| {
        let ybar = sy / n as f64;
        let ss: f64 = pairs().map(|(x, y)| (x - rate * y).powi(2)).sum();
        (ss / (n as f64 * (n as f64 - 1.0))).sqrt() / ybar
    });
    Some(RatioEstimate { rate, standard_error })
}

/// Mean and standard error of independent values; `None` when empty.
pub fn mean_and_se(values: &[f64]) -> Option<(f64, Option<f64>)> {
    if values.is_empty() {
        return None;
    }
    let n = values.len() as f64;
    let mean = values.iter().sum::<f64>() / n;
    let se =
        (values.len() >= 2).then(|| (values.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n - 1.0) / n).sqrt());
    Some((mean, se))
}

/// The q-quantile of sorted values by linear interpolation between order statistics (Hyndman and
/// Fan type 7, the default of R and NumPy). `None` when fewer than 1 / (1 - q) values exist.
pub fn quantile_sorted(sorted: &[f64], q: f64) -> Option<f64> {
    quantile_of_ranked(sorted.len(), q, |i| sorted.get(i).copied())
}

/// As [`quantile_sorted`], for `n` values of which `at(i)` gives the `i`-th smallest (0-based), or
/// `None` where that order statistic is not held (then the quantile is `None` too).
pub fn quantile_of_ranked(n: usize, q: f64, at: impl Fn(usize) -> Option<f64>) -> Option<f64> {
    let [lo, hi] = quantile_ranks(n, q)?;
    let h = (n as f64 - 1.0) * q;
    let (a, b) = (at(lo)?, at(hi)?);
    Some(a + (h - lo as f64) * (b - a))
}

/// The two order statistics (0-based) the q-quantile of `n` values interpolates between, or
/// `None` when n cannot support it (see [`quantile_sorted`]).
pub fn quantile_ranks(n: usize, q: f64) -> Option<[usize; 2]> {
    if n == 0 || (n as f64) < (1.0 / (1.0 - q)).round() {
        return None;
    }
    let lo = ((n as f64 - 1.0) * q).floor() as usize;
    Some([lo, (lo + 1).min(n - 1)])
}

/// Quantiles, their distribution-free 95% intervals and the expected shortfall of one value per
/// replication (or replication-year), found from passes over the values rather than a sorted copy
/// (`stats::order_stats`): bit for bit what [`quantile_sorted`], [`quantile_interval_sorted`] and
/// [`expected_shortfall_sorted`] give on the sorted values.
#[derive(Debug, Clone)]
pub struct PassQuantiles {
    ranked: crate::stats::order_stats::OrderStatistics,
    expected_shortfall: Option<f64>,
}

impl PassQuantiles {
    /// Reads the values `values()` yields (a few passes) for the quantiles at `levels`, their
    /// intervals, and the expected shortfall at `es_level` when given (one of `levels`).
    pub fn new<I: Iterator<Item = f64>>(values: impl Fn() -> I, levels: &[f64], es_level: Option<f64>) -> Self {
        let ranked = crate::stats::order_stats::order_statistics(&values, |n| {
            let mut ranks = Vec::new();
            for &q in levels {
                ranks.extend(quantile_ranks(n, q).into_iter().flatten());
                if let Some((l, u)) = quantile_interval_ranks(n, q, 0.95) {
                    ranks.extend([l - 1, u - 1]);
                }
            }
            ranks
        });
        let n = ranked.len();
        let expected_shortfall = es_level
            .and_then(|q| quantile_of_ranked(n, q, |i| ranked.at(i)))
            .and_then(|threshold| {
                let (count, sum) = crate::stats::order_stats::tail_sum(values(), threshold);
                (count > 0).then(|| sum / count as f64)
            });
        PassQuantiles {
            ranked,
            expected_shortfall,
        }
    }

    /// How many values there are.
    pub fn len(&self) -> usize {
        self.ranked.len()
    }

    /// Whether there are none.
    pub fn is_empty(&self) -> bool {
        self.ranked.is_empty()
    }

    /// The q-quantile (q one of the levels read).
    pub fn quantile(&self, q: f64) -> Option<f64> {
        quantile_of_ranked(self.len(), q, |i| self.ranked.at(i))
    }

    /// The 95% interval of the q-quantile (q one of the levels read).
    pub fn interval(&self, q: f64) -> Option<(f64, f64)> {
        let (l, u) = quantile_interval_ranks(self.len(), q, 0.95)?;
        Some((self.ranked.at(l - 1)?, self.ranked.at(u - 1)?))
    }

    /// The expected shortfall at the level read.
    pub fn expected_shortfall(&self) -> Option<f64> {
        self.expected_shortfall
    }
}

/// Expected shortfall at level q: the mean of the values at or above the q-quantile.
pub fn expected_shortfall_sorted(sorted: &[f64], q: f64) -> Option<f64> {
    let threshold = quantile_sorted(sorted, q)?;
    let tail: Vec<f64> = sorted.iter().copied().filter(|&v| v >= threshold).collect();
    if tail.is_empty() {
        None
    } else {
        Some(tail.iter().sum::<f64>() / tail.len() as f64)
    }
}

/// Sorts a copy of the values in ascending order (NaN never occurs: rates are finite by design).
pub fn sorted(values: &[f64]) -> Vec<f64> {
    sorted_owned(values.to_vec())
}

/// `values` in ascending order, sorted in place (no second copy alive while summarising).
pub fn sorted_owned(mut values: Vec<f64>) -> Vec<f64> {
    values.sort_by(f64::total_cmp);
    values
}

#[cfg(test)]
mod tests {
    use super::*;

    // Reference: numpy.quantile (method "linear", the default) on [1, 2, ..., 10] at 0.95 gives 9.55.
    #[test]
    fn quantiles_interpolate_like_type_7() {
        let v: Vec<f64> = (1..=20).map(f64::from).collect();
        // numpy.quantile(range(1, 21), 0.95) = 19.05
        assert!((quantile_sorted(&v, 0.95).unwrap() - 19.05).abs() < 1e-12);
        assert!((quantile_sorted(&v, 0.5).unwrap() - 10.5).abs() < 1e-12);
        // 20 values cannot support a 99% quantile
        assert_eq!(quantile_sorted(&v, 0.99), None);
        assert_eq!(quantile_sorted(&[1.0], 0.5), None);
    }

    #[test]
    fn expected_shortfall_averages_the_tail() {
        let v: Vec<f64> = (1..=100).map(f64::from).collect();
        // 99% quantile = 99.01; values at or above: just 100
        assert_eq!(expected_shortfall_sorted(&v, 0.99), Some(100.0));
    }

    #[test]
    fn ratio_estimator_matches_hand_computation() {
        let pairs = [(1.0, 10.0), (2.0, 10.0), (3.0, 20.0)];
        let r = ratio(pairs).unwrap();
        assert!((r.rate - 0.15).abs() < 1e-15);
        // residuals: 1-1.5, 2-1.5, 3-3 -> 0.25 + 0.25 + 0 = 0.5; /(3*2) = 1/12; sqrt / ybar(40/3)
        let se = (0.5f64 / 6.0).sqrt() / (40.0 / 3.0);
        assert!((r.standard_error.unwrap() - se).abs() < 1e-15);
        assert_eq!(ratio([(0.0, 0.0)]), None);
        assert_eq!(ratio([(1.0, 2.0)]).unwrap().standard_error, None);
    }
}

/// The difference R_a - R_b of two pooled ratios measured on the same replications (paired by
/// replication index, so common random numbers cancel), with its delta-method standard error:
/// each replication contributes z_i = (x_ai - R_a y_ai) / mean(y_a) - (x_bi - R_b y_bi) / mean(y_b),
/// and SE = sd(z) / sqrt(n). `None` when either pooled denominator is zero or the lists differ in
/// length.
pub fn paired_ratio_difference(a: &[(f64, f64)], b: &[(f64, f64)]) -> Option<RatioEstimate> {
    if a.len() != b.len() {
        return None;
    }
    let [paired] = paired_in_passes(|| a.iter().zip(b).map(|(&pa, &pb)| [(pa, pb)]));
    paired.map(|p| p.difference)
}

/// A paired difference of two pooled ratios with each side's own standard error.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PairedEstimate {
    /// R_a - R_b with its paired standard error ([`paired_ratio_difference`]).
    pub difference: RatioEstimate,
    /// The standard error of each side's pooled ratio on its own ([`ratio`]).
    pub own_se: (Option<f64>, Option<f64>),
}

/// [`paired_ratio_difference`] and each side's [`ratio`] standard error for M figures at once,
/// from rows read in three passes instead of held: `rows()` yields, per replication, each figure's
/// ((x_a, y_a), (x_b, y_b)), and is called three times (it must yield the same rows each time).
/// The replications may wait on disk, and one pass reads each of them once for every figure.
/// `None` for a figure where either pooled denominator is zero, and for every figure without rows.
pub fn paired_in_passes<const M: usize, I>(rows: impl Fn() -> I) -> [Option<PairedEstimate>; M]
where
    I: Iterator<Item = [((f64, f64), (f64, f64)); M]>,
{
    /// Sums over one side's pairs for one figure.
    #[derive(Clone, Copy)]
    struct Side {
        x: f64,
        y: f64,
        /// sum of y as `Iterator::sum` forms it (from -0.0), for the mean denominator of z
        y_sum: f64,
        /// sum of squared residuals against the pooled rate
        ss: f64,
    }
    let side = Side {
        x: 0.0,
        y: 0.0,
        y_sum: -0.0,
        ss: -0.0,
    };
    let mut sides = [(side, side); M];
    // pass 1: the pooled sums
    let mut n = 0usize;
    for row in rows() {
        n += 1;
        for ((pa, pb), (sa, sb)) in row.into_iter().zip(&mut sides) {
            for (s, (x, y)) in [(sa, pa), (sb, pb)] {
                s.x += x;
                s.y += y;
                s.y_sum += y;
            }
        }
    }
    if n == 0 {
        return [None; M];
    }
    let nf = n as f64;
    // per figure: (rate a, rate b, mean y a, mean y b) where both pooled denominators are nonzero
    let rates: [Option<(f64, f64, f64, f64)>; M] = std::array::from_fn(|m| {
        let (sa, sb) = sides[m];
        (sa.y != 0.0 && sb.y != 0.0).then(|| (sa.x / sa.y, sb.x / sb.y, sa.y_sum / nf, sb.y_sum / nf))
    });
    let z = |(ra, rb, ya, yb): (f64, f64, f64, f64), pa: (f64, f64), pb: (f64, f64)| {
        (pa.0 - ra * pa.1) / ya - (pb.0 - rb * pb.1) / yb
    };
    // pass 2: each side's squared residuals, and the sum of the paired terms z
    let mut z_sums = [-0.0f64; M];
    for row in rows() {
        for (m, (pa, pb)) in row.into_iter().enumerate() {
            if let Some(r) = rates[m] {
                sides[m].0.ss += (pa.0 - r.0 * pa.1).powi(2);
                sides[m].1.ss += (pb.0 - r.1 * pb.1).powi(2);
                z_sums[m] += z(r, pa, pb);
            }
        }
    }
    // pass 3: the spread of z about its mean
    let means: [f64; M] = std::array::from_fn(|m| z_sums[m] / nf);
    let mut z_ss = [-0.0f64; M];
    if n >= 2 {
        for row in rows() {
            for (m, (pa, pb)) in row.into_iter().enumerate() {
                if let Some(r) = rates[m] {
                    z_ss[m] += (z(r, pa, pb) - means[m]).powi(2);
                }
            }
        }
    }
    std::array::from_fn(|m| {
        let (rate_a, rate_b, _, _) = rates[m]?;
        let (sa, sb) = sides[m];
        // as `ratio`: its mean denominator is the pooled sum over n
        let own = |s: Side| (n >= 2).then(|| (s.ss / (nf * (nf - 1.0))).sqrt() / (s.y / nf));
        Some(PairedEstimate {
            difference: RatioEstimate {
                rate: rate_a - rate_b,
                standard_error: (n >= 2).then(|| (z_ss[m] / (nf - 1.0) / nf).sqrt()),
            },
            own_se: (own(sa), own(sb)),
        })
    })
}

#[cfg(test)]
mod paired_tests {
    use super::*;

    /// The paired difference written out directly on collected values, as the estimator's formula
    /// reads (the reference the passes must equal bit for bit).
    fn written_out(a: &[(f64, f64)], b: &[(f64, f64)]) -> Option<RatioEstimate> {
        let n = a.len() as f64;
        let ra = ratio(a.iter().copied())?;
        let rb = ratio(b.iter().copied())?;
        let ya = a.iter().map(|p| p.1).sum::<f64>() / n;
        let yb = b.iter().map(|p| p.1).sum::<f64>() / n;
        let z: Vec<f64> = a
            .iter()
            .zip(b)
            .map(|(&(xa, ya_i), &(xb, yb_i))| (xa - ra.rate * ya_i) / ya - (xb - rb.rate * yb_i) / yb)
            .collect();
        let standard_error = (a.len() >= 2).then(|| {
            let mean = z.iter().sum::<f64>() / n;
            (z.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n - 1.0) / n).sqrt()
        });
        Some(RatioEstimate {
            rate: ra.rate - rb.rate,
            standard_error,
        })
    }

    /// The three passes form every sum in the same order from the same start as the formula
    /// written out, so they agree bit for bit, for one figure and for several at once.
    #[test]
    fn the_passes_equal_the_formula_written_out() {
        use rand::{Rng, SeedableRng};
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(17);
        let bits = |e: Option<RatioEstimate>| e.map(|e| (e.rate.to_bits(), e.standard_error.map(f64::to_bits)));
        for n in [1usize, 2, 3, 40] {
            let mut pairs = || -> Vec<(f64, f64)> {
                (0..n)
                    .map(|_| (rng.random_range(0.0..50.0), rng.random_range(50.0..100.0)))
                    .collect()
            };
            let (a, b, c) = (pairs(), pairs(), pairs());
            let zero: Vec<(f64, f64)> = a.iter().map(|&(x, _)| (x, 0.0)).collect();
            for (x, y) in [(&a, &b), (&b, &c), (&a, &zero)] {
                assert_eq!(bits(paired_ratio_difference(x, y)), bits(written_out(x, y)), "n = {n}");
            }
            let both = paired_in_passes(|| (0..n).map(|i| [(a[i], b[i]), (b[i], c[i])]));
            assert_eq!(bits(both[0].map(|p| p.difference)), bits(written_out(&a, &b)));
            assert_eq!(bits(both[1].map(|p| p.difference)), bits(written_out(&b, &c)));
            let own = |p: &[(f64, f64)]| {
                ratio(p.iter().copied())
                    .and_then(|r| r.standard_error)
                    .map(f64::to_bits)
            };
            assert_eq!(both[0].map(|p| p.own_se.0.map(f64::to_bits)), Some(own(&a)));
            assert_eq!(both[1].map(|p| p.own_se.1.map(f64::to_bits)), Some(own(&c)));
        }
        assert_eq!(paired_ratio_difference(&[], &[]), None);
        assert_eq!(paired_ratio_difference(&[(1.0, 2.0)], &[]), None);
    }

    #[test]
    fn paired_difference_cancels_shared_noise() {
        // b is a with the same replication-level noise and a constant shift of 0.01 in the rate:
        // the paired standard error is (numerically) zero, the unpaired one is not.
        let a: Vec<(f64, f64)> = (0..50).map(|i| (10.0 + (i % 7) as f64, 100.0)).collect();
        let b: Vec<(f64, f64)> = a.iter().map(|&(x, y)| (x - 1.0, y)).collect();
        let d = paired_ratio_difference(&a, &b).unwrap();
        assert!((d.rate - 0.01).abs() < 1e-12);
        assert!(d.standard_error.unwrap() < 1e-12);
        let se_a = ratio(a.iter().copied()).unwrap().standard_error.unwrap();
        assert!(se_a > 1e-3);
        assert_eq!(paired_ratio_difference(&a, &b[..10]), None);
    }

    #[test]
    fn paired_difference_of_independent_arms_adds_variances() {
        // With b's numerators independent of a's, Var(D) ~ Var(R_a) + Var(R_b) (delta method).
        let a: Vec<(f64, f64)> = (0..400).map(|i| (((i * 37) % 11) as f64, 10.0)).collect();
        let b: Vec<(f64, f64)> = (0..400).map(|i| (((i * 53 + 5) % 13) as f64, 10.0)).collect();
        let d = paired_ratio_difference(&a, &b).unwrap();
        let va = ratio(a.iter().copied()).unwrap().standard_error.unwrap().powi(2);
        let vb = ratio(b.iter().copied()).unwrap().standard_error.unwrap().powi(2);
        let se = d.standard_error.unwrap();
        assert!((se * se / (va + vb) - 1.0).abs() < 0.2, "{} vs {}", se * se, va + vb);
    }
}

/// The binomial(n, q) law as a cumulative table over the window where its mass lies, for the ranks
/// of order-statistic intervals. The probabilities are built by the ratio recursion outward from the
/// mode and normalised by their sum, so no factorial of a large n is ever formed.
struct BinomialCdf {
    /// The first count the table covers; counts below carry less than 1e-18 of the mass.
    first: u64,
    /// P(B <= first + i).
    cdf: Vec<f64>,
}

impl BinomialCdf {
    fn new(n: u64, q: f64) -> BinomialCdf {
        let mode = (((n + 1) as f64 * q).floor() as u64).min(n);
        let odds = q / (1.0 - q);
        // Relative mass below which the recursion stops: the neglected tails sum to less than 1e-18
        // of the total, as the terms shrink geometrically there.
        const TINY: f64 = 1e-21;
        let mut down = Vec::new();
        let mut term = 1.0;
        let mut k = mode;
        while k > 0 {
            term *= k as f64 / ((n - k + 1) as f64 * odds);
            k -= 1;
            if term < TINY {
                break;
            }
            down.push(term);
        }
        let mut up = Vec::new();
        let mut term = 1.0;
        let mut k = mode;
        while k < n {
            term *= (n - k) as f64 / ((k + 1) as f64) * odds;
            k += 1;
            if term < TINY {
                break;
            }
            up.push(term);
        }
        let first = mode - down.len() as u64;
        let pmf: Vec<f64> = down.iter().rev().copied().chain([1.0]).chain(up).collect();
        let total: f64 = pmf.iter().sum();
        let mut running = 0.0;
        let cdf = pmf
            .iter()
            .map(|p| {
                running += p / total;
                running
            })
            .collect();
        BinomialCdf { first, cdf }
    }

    /// The smallest k with P(B <= k) >= p (the convention of scipy.stats.binom.ppf).
    fn quantile(&self, p: f64) -> u64 {
        let i = self.cdf.partition_point(|&c| c < p);
        self.first + i.min(self.cdf.len() - 1) as u64
    }
}

/// The ranks (counted from 1) of the distribution-free two-sided interval [X_(l), X_(u)] for the
/// q-quantile of n independent values with confidence at least `level`: l = the binomial(n, q)
/// quantile at (1 - level)/2 and u = 1 + its quantile at (1 + level)/2, so that the interval covers
/// the quantile with probability P(l <= B <= u - 1) >= level for any continuous law. `None` when
/// n is too small for either end (l < 1 or u > n).
pub fn quantile_interval_ranks(n: usize, q: f64, level: f64) -> Option<(usize, usize)> {
    if n == 0 || !(q > 0.0 && q < 1.0) {
        return None;
    }
    let law = BinomialCdf::new(n as u64, q);
    let alpha = 1.0 - level;
    let low = law.quantile(alpha / 2.0);
    let high = law.quantile(1.0 - alpha / 2.0) + 1;
    (low >= 1 && high <= n as u64).then_some((low as usize, high as usize))
}

/// The rank u of a one-sided upper bound X_(u) for the q-quantile of n independent values, at
/// error level `alpha`: 1 + the binomial(n, q) quantile at 1 - alpha, so P(X_(u) >= quantile) >=
/// 1 - alpha. `None` when n is too small (u > n).
pub fn quantile_upper_rank(n: usize, q: f64, alpha: f64) -> Option<usize> {
    if n == 0 || !(q > 0.0 && q < 1.0) {
        return None;
    }
    let u = BinomialCdf::new(n as u64, q).quantile(1.0 - alpha) + 1;
    (u <= n as u64).then_some(u as usize)
}

/// The rank l of a one-sided lower bound X_(l) for the q-quantile of n independent values, at
/// error level `alpha`: the binomial(n, q) quantile at alpha, so P(X_(l) <= quantile) >= 1 -
/// alpha. `None` when n is too small (l < 1).
pub fn quantile_lower_rank(n: usize, q: f64, alpha: f64) -> Option<usize> {
    if n == 0 || !(q > 0.0 && q < 1.0) {
        return None;
    }
    let l = BinomialCdf::new(n as u64, q).quantile(alpha);
    (l >= 1).then_some(l as usize)
}

/// The distribution-free 95% interval for the q-quantile of independent sorted values (one per
/// replication): the order statistics at [`quantile_interval_ranks`].
pub fn quantile_interval_sorted(sorted: &[f64], q: f64) -> Option<(f64, f64)> {
    let (l, u) = quantile_interval_ranks(sorted.len(), q, 0.95)?;
    Some((sorted[l - 1], sorted[u - 1]))
}

/// The 95% interval for the q-quantile of values that come in replications (the cycles of one
/// replication are not independent: exclusion and the pool carry over), by Woodruff's method
/// (Woodruff 1952, "Confidence intervals for medians and other position measures"): the share of
/// values at or below the estimated quantile gets its standard error from the replications (the
/// ratio estimator), and q -/+ 1.959964 SE is read back through the order statistics of all values.
/// With independent values it agrees with the binomial ranks to first order. Of the `n` values,
/// `at(i)` gives the `i`-th smallest (0-based) where it is held; `counts(x)` yields each
/// replication's (values <= x, values), and is called twice (see [`ratio_in_passes`]). `None` with fewer than two replications, without a
/// quantile, when either end falls outside the values, or when an order statistic the interval
/// needs is not held.
pub fn clustered_quantile_interval<I: Iterator<Item = (f64, f64)>>(
    n: usize,
    q: f64,
    at: impl Fn(usize) -> Option<f64>,
    counts: impl Fn(f64) -> I,
) -> Option<(f64, f64)> {
    let estimate = quantile_of_ranked(n, q, &at)?;
    let se = ratio_in_passes(|| counts(estimate))?.standard_error?;
    let low = (n as f64 * (q - Z_95 * se)).floor();
    let high = (n as f64 * (q + Z_95 * se)).ceil() + 1.0;
    if low >= 1.0 && high <= n as f64 {
        Some((at(low as usize - 1)?, at(high as usize - 1)?))
    } else {
        None
    }
}

#[cfg(test)]
mod order_statistic_tests {
    use super::*;

    #[test]
    fn ranks_need_enough_values_on_both_sides() {
        // The 99% quantile of 100 values: P(B <= 99) = 1 - 0.99^100 = 0.634 < 0.975, no upper rank.
        assert_eq!(quantile_interval_ranks(100, 0.99, 0.95), None);
        // A median of 5 values: P(B = 0) = 1/32 >= 0.025, no lower rank.
        assert_eq!(quantile_interval_ranks(5, 0.5, 0.95), None);
        // Of 6 values, ranks 1 and 6: 1 - 2/64 = 0.969 >= 0.95 (binomial(6, 1/2) by hand).
        assert_eq!(quantile_interval_ranks(6, 0.5, 0.95), Some((1, 6)));
    }

    #[test]
    fn perfectly_correlated_cycles_widen_the_clustered_interval() {
        // 40 replications of 25 identical cycles carry the information of 40 values, not 1000: the
        // clustered interval is wider than the binomial one for 1000 independent values.
        let reps: Vec<Vec<f64>> = (0..40).map(|r| vec![f64::from((r * 17) % 40); 25]).collect();
        let all = sorted(&reps.iter().flatten().copied().collect::<Vec<_>>());
        let counts = |x: f64| {
            reps.iter()
                .map(move |r| (r.iter().filter(|&&v| v <= x).count() as f64, r.len() as f64))
        };
        let (lo, hi) = clustered_quantile_interval(all.len(), 0.5, |i| all.get(i).copied(), counts).unwrap();
        let (blo, bhi) = quantile_interval_sorted(&all, 0.5).unwrap();
        assert!(hi - lo > 2.0 * (bhi - blo), "{lo}..{hi} against {blo}..{bhi}");
    }
}
