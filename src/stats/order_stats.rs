//! Exact order statistics of values read in passes, without holding one value per replication.
//!
//! Why: the quantiles over replications (the horizon loss, the worst cycle, the annual loss) need
//! particular order statistics of one value per replication or replication-year, and a run of many
//! replications keeps those replications on disk (`stats::replication_list`). Sorting them all
//! would hold every value in memory again. Here the values are read in a few passes instead: a
//! histogram over the range of their sort keys finds the bucket each wanted rank falls in, buckets
//! still holding many values are narrowed by further histograms, and a bucket holding few is
//! collected and sorted. The values found are exactly those a full sort (`f64::total_cmp`) puts at
//! those ranks, so every quantile is bit-identical to one read from the sorted vector; the unit
//! tests compare with a full sort, ties, zeros of both signs and wide ranges included.

use std::collections::BTreeMap;

/// Histogram buckets per narrowing (a power of two).
const BUCKET_BITS: u32 = 12;
/// A bucket holding at most this many values is collected and sorted rather than narrowed.
const COLLECT_LIMIT: usize = 4096;

/// The sort key of a value: unsigned integer order equals `f64::total_cmp` order.
#[inline]
fn key(value: f64) -> u64 {
    let bits = value.to_bits();
    if bits >> 63 == 1 { !bits } else { bits | (1 << 63) }
}

/// The value of a sort key.
#[inline]
fn value(key: u64) -> f64 {
    f64::from_bits(if key >> 63 == 1 { key & !(1 << 63) } else { !key })
}

/// Some order statistics of `n` values: the values at the ranks asked for (0-based, ascending).
#[derive(Debug, Clone, Default, PartialEq)]
pub struct OrderStatistics {
    n: usize,
    found: BTreeMap<usize, f64>,
}

impl OrderStatistics {
    /// How many values there are.
    pub fn len(&self) -> usize {
        self.n
    }

    /// Whether there are none.
    pub fn is_empty(&self) -> bool {
        self.n == 0
    }

    /// The `rank`-th smallest value (0-based), if it was asked for.
    pub fn at(&self, rank: usize) -> Option<f64> {
        self.found.get(&rank).copied()
    }
}

/// A key interval still to narrow: its keys `lo..=hi`, the values below it, the values in it, and
/// the ranks it holds.
struct Pending {
    lo: u64,
    hi: u64,
    below: usize,
    count: usize,
    ranks: Vec<usize>,
}

/// What one pass does for one pending interval.
enum Work {
    /// Count its values in buckets of `1 << shift` keys.
    Histogram { shift: u32, counts: Vec<u32> },
    /// Keep the keys of its values.
    Collect(Vec<u64>),
}

/// The order statistics of the values `values()` yields, at the ranks `wanted(n)` gives for their
/// number n (ranks at or beyond n are ignored). `values` is called once per pass (a handful of
/// passes) and must yield the same values each time; memory stays a few histograms and at most
/// `COLLECT_LIMIT` keys per wanted rank, whatever the number of values.
pub fn order_statistics<I: Iterator<Item = f64>>(
    values: impl Fn() -> I,
    wanted: impl FnOnce(usize) -> Vec<usize>,
) -> OrderStatistics {
    let (mut n, mut lo, mut hi) = (0usize, u64::MAX, u64::MIN);
    for v in values() {
        let k = key(v);
        n += 1;
        lo = lo.min(k);
        hi = hi.max(k);
    }
    let mut ranks: Vec<usize> = wanted(n).into_iter().filter(|&r| r < n).collect();
    ranks.sort_unstable();
    ranks.dedup();
    let mut found = BTreeMap::new();
    let mut pending = Vec::new();
    if !ranks.is_empty() {
        pending.push(Pending {
            lo,
            hi,
            below: 0,
            count: n,
            ranks,
        });
    }
    while !pending.is_empty() {
        // an interval of one key holds one value, however many times it occurs
        pending.retain(|p| {
            if p.lo == p.hi {
                for &r in &p.ranks {
                    found.insert(r, value(p.lo));
                }
            }
            p.lo != p.hi
        });
        if pending.is_empty() {
            break;
        }
        let mut work: Vec<Work> = pending
            .iter()
            .map(|p| {
                if p.count <= COLLECT_LIMIT {
                    Work::Collect(Vec::with_capacity(p.count))
                } else {
                    let span_bits = u64::BITS - (p.hi - p.lo).leading_zeros();
                    let shift = span_bits.saturating_sub(BUCKET_BITS);
                    Work::Histogram {
                        shift,
                        counts: vec![0; (((p.hi - p.lo) >> shift) + 1) as usize],
                    }
                }
            })
            .collect();
        for v in values() {
            let k = key(v);
            for (p, w) in pending.iter().zip(&mut work) {
                if (p.lo..=p.hi).contains(&k) {
                    match w {
                        Work::Histogram { shift, counts } => counts[((k - p.lo) >> *shift) as usize] += 1,
                        Work::Collect(keys) => keys.push(k),
                    }
                }
            }
        }
        let mut next = Vec::new();
        for (p, w) in pending.into_iter().zip(work) {
            match w {
                Work::Collect(mut keys) => {
                    keys.sort_unstable();
                    for r in p.ranks {
                        found.insert(r, value(keys[r - p.below]));
                    }
                }
                Work::Histogram { shift, counts } => {
                    let mut below = p.below;
                    let mut ranks = p.ranks.into_iter().peekable();
                    for (b, &c) in counts.iter().enumerate() {
                        let c = c as usize;
                        let mut inside = Vec::new();
                        while let Some(&r) = ranks.peek().filter(|&&r| r < below + c) {
                            inside.push(r);
                            ranks.next();
                        }
                        if !inside.is_empty() {
                            let lo = p.lo + ((b as u64) << shift);
                            let hi = lo.saturating_add((1u64 << shift) - 1).min(p.hi);
                            next.push(Pending {
                                lo,
                                hi,
                                below,
                                count: c,
                                ranks: inside,
                            });
                        }
                        below += c;
                    }
                }
            }
        }
        pending = next;
    }
    OrderStatistics { n, found }
}

/// The number and the sum of the values at or above `threshold`, the sum formed in ascending order
/// (`f64::total_cmp`) from -0.0, as `Iterator::sum` over the tail of the sorted values forms it.
/// Holds one entry per distinct value in the tail.
pub fn tail_sum<I: Iterator<Item = f64>>(values: I, threshold: f64) -> (usize, f64) {
    let mut tail: BTreeMap<u64, usize> = BTreeMap::new();
    for v in values.filter(|&v| v >= threshold) {
        *tail.entry(key(v)).or_default() += 1;
    }
    let mut sum = -0.0;
    let mut count = 0;
    for (k, times) in tail {
        let v = value(k);
        for _ in 0..times {
            sum += v;
        }
        count += times;
    }
    (count, sum)
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};

    fn check(values: &[f64]) {
        let mut sorted = values.to_vec();
        sorted.sort_by(f64::total_cmp);
        let all: Vec<usize> = (0..values.len()).collect();
        let stats = order_statistics(
            || values.iter().copied(),
            |n| {
                assert_eq!(n, values.len());
                all.clone()
            },
        );
        for (r, v) in sorted.iter().enumerate() {
            assert_eq!(stats.at(r).map(f64::to_bits), Some(v.to_bits()), "rank {r}");
        }
        // a few ranks only, beyond the end ignored
        let some = order_statistics(
            || values.iter().copied(),
            |n| vec![n / 2, n.saturating_sub(1), n, n + 7],
        );
        if !values.is_empty() {
            assert_eq!(some.at(values.len() / 2), Some(sorted[values.len() / 2]));
        }
        assert_eq!(some.at(values.len()), None);
        // the tail sum equals the sum of the sorted tail
        for q in [0.0, 0.5, 0.99] {
            let threshold = sorted.get((q * values.len() as f64) as usize).copied().unwrap_or(0.0);
            let tail: Vec<f64> = sorted.iter().copied().filter(|&v| v >= threshold).collect();
            let (count, sum) = tail_sum(values.iter().copied(), threshold);
            assert_eq!(count, tail.len());
            assert_eq!(sum.to_bits(), tail.iter().sum::<f64>().to_bits());
        }
    }

    #[test]
    fn keys_order_like_total_cmp() {
        let v = [f64::NEG_INFINITY, -2.0, -0.0, 0.0, 1e-300, 0.5, 1.0, f64::INFINITY];
        for w in v.windows(2) {
            assert!(key(w[0]) < key(w[1]), "{} {}", w[0], w[1]);
        }
        for x in v {
            assert_eq!(value(key(x)).to_bits(), x.to_bits());
        }
    }

    #[test]
    fn every_rank_equals_a_full_sort() {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(3);
        check(&[]);
        check(&[0.25]);
        // continuous values, enough to narrow more than once
        let smooth: Vec<f64> = (0..20_000).map(|_| rng.random::<f64>() * 0.2).collect();
        check(&smooth);
        // mostly exact zeros of both signs, ties, and a few large values
        let tied: Vec<f64> = (0..30_000)
            .map(|i| match i % 10 {
                0..=5 => 0.0,
                6 => -0.0,
                7 => 1.0,
                8 => rng.random::<f64>(),
                _ => 1e6 * rng.random::<f64>(),
            })
            .collect();
        check(&tied);
        // a dense cluster inside a wide range: one bucket of the first histogram holds nearly all
        let clustered: Vec<f64> = (0..20_000)
            .map(|i| {
                if i == 0 {
                    -1e300
                } else {
                    0.1 + 1e-12 * rng.random::<f64>()
                }
            })
            .collect();
        check(&clustered);
    }
}
