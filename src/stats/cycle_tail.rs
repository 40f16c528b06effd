//! The upper tail of the per-cycle loss rates: exact, mergeable and of bounded size.
//!
//! The per-cycle loss quantiles (99% and 99.9%) and their intervals read order statistics near the
//! top of all replication-cycles that lent. Keeping every replication-cycle would make memory grow
//! with replications x cycles; this store keeps only the largest `capacity` values, which is
//! enough for those ranks (see [`tail_capacity`]). It is exact, not a sketch: the values kept are
//! exactly the largest ones, under a total order that breaks ties by replication and cycle, so the
//! store of a merged run equals the store of one pass whatever the split.

use serde::{Deserialize, Serialize};
use std::cmp::{Ordering, Reverse};
use std::collections::BinaryHeap;

/// Share of a run's replication-cycles the tail keeps: twice the 1% above the 99% quantile, so
/// the lower end of its interval is stored too.
const TAIL_SHARE: f64 = 0.02;

/// Values kept beyond [`TAIL_SHARE`]: small runs keep every value, and the intervals of runs with
/// few effectively independent replications (wide intervals) still find their lower rank.
const TAIL_MARGIN: u64 = 2048;

/// How many values the tail of a run of `replications` x `counted_cycles` keeps. It depends on the
/// whole run, never on a shard or a resumed part, so that every part keeps the same ranks.
pub fn tail_capacity(replications: u32, counted_cycles: u32) -> u64 {
    let values = u64::from(replications) * u64::from(counted_cycles);
    (values as f64 * TAIL_SHARE).ceil() as u64 + TAIL_MARGIN
}

/// One replication-cycle's loss rate and where it comes from.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct TailEntry {
    /// Principal lost / principal disbursed in the cycle.
    pub loss_rate: f64,
    /// Replication index (0-based).
    pub replication: u32,
    /// Counted cycle (0-based).
    pub cycle: u32,
}

impl Eq for TailEntry {}

impl Ord for TailEntry {
    /// Larger loss rates rank higher; among equal rates the earlier replication and cycle rank
    /// higher, so the order is total and the kept set never depends on arrival order.
    fn cmp(&self, other: &Self) -> Ordering {
        self.loss_rate
            .total_cmp(&other.loss_rate)
            .then_with(|| other.replication.cmp(&self.replication))
            .then_with(|| other.cycle.cmp(&self.cycle))
    }
}

impl PartialOrd for TailEntry {
    fn partial_cmp(&self, other: &Self) -> Option<Ordering> {
        Some(self.cmp(other))
    }
}

/// The largest per-cycle loss rates of an arm's replications (at most `capacity` of them).
#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(from = "StoredTail", into = "StoredTail")]
pub struct CycleLossTail {
    capacity: u64,
    /// A min-heap of what is kept: its top is the smallest kept value, the next to go.
    kept: BinaryHeap<Reverse<TailEntry>>,
}

impl Default for CycleLossTail {
    /// A tail that keeps every value (for tallies not tied to a run's size).
    fn default() -> Self {
        CycleLossTail::with_capacity(u64::MAX)
    }
}

impl PartialEq for CycleLossTail {
    fn eq(&self, other: &Self) -> bool {
        self.capacity == other.capacity && self.descending() == other.descending()
    }
}

impl CycleLossTail {
    /// An empty tail keeping at most `capacity` values.
    pub fn with_capacity(capacity: u64) -> Self {
        CycleLossTail {
            capacity,
            kept: BinaryHeap::new(),
        }
    }

    /// The most values kept.
    pub fn capacity(&self) -> u64 {
        self.capacity
    }

    /// Number of values kept.
    pub fn len(&self) -> usize {
        self.kept.len()
    }

    /// Whether nothing is kept.
    pub fn is_empty(&self) -> bool {
        self.kept.is_empty()
    }

    /// Offers one value: kept if the tail is not full or it ranks above the smallest kept value.
    pub fn push(&mut self, entry: TailEntry) {
        if (self.kept.len() as u64) < self.capacity {
            self.kept.push(Reverse(entry));
        } else if let Some(mut smallest) = self.kept.peek_mut()
            && entry > smallest.0
        {
            *smallest = Reverse(entry);
        }
    }

    /// Offers every value kept by `other`. The result is the tail of the union: a value among the
    /// largest of the union is among the largest of whichever part held it.
    pub fn merge(&mut self, other: &CycleLossTail) {
        for e in &other.kept {
            self.push(e.0);
        }
    }

    /// The kept values, largest first.
    pub fn descending(&self) -> Vec<TailEntry> {
        self.descending_where(|_| true)
    }

    /// The kept values from replications `range`, largest first.
    pub fn from_replications(&self, range: std::ops::Range<u32>) -> Vec<TailEntry> {
        self.descending_where(|e| range.contains(&e.replication))
    }

    fn descending_where(&self, keep: impl Fn(&TailEntry) -> bool) -> Vec<TailEntry> {
        let mut v: Vec<TailEntry> = self.kept.iter().map(|e| e.0).filter(|e| keep(e)).collect();
        v.sort_unstable_by(|a, b| b.cmp(a));
        v
    }
}

/// The serialised form: the capacity and the kept values, largest first.
#[derive(Serialize, Deserialize)]
struct StoredTail {
    capacity: u64,
    kept: Vec<TailEntry>,
}

impl From<StoredTail> for CycleLossTail {
    fn from(s: StoredTail) -> Self {
        let mut t = CycleLossTail::with_capacity(s.capacity);
        s.kept.into_iter().for_each(|e| t.push(e));
        t
    }
}

impl From<CycleLossTail> for StoredTail {
    fn from(t: CycleLossTail) -> Self {
        StoredTail {
            capacity: t.capacity,
            kept: t.descending(),
        }
    }
}

/// The ascending order statistics of `n` values of which `tail` holds the largest, largest first:
/// the `i`-th smallest (0-based), or `None` when it lies below what the tail holds.
pub fn order_statistic(tail: &[TailEntry], n: usize, i: usize) -> Option<f64> {
    let from_top = n.checked_sub(i + 1)?;
    tail.get(from_top).map(|e| e.loss_rate)
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};

    fn entry(loss_rate: f64, replication: u32, cycle: u32) -> TailEntry {
        TailEntry {
            loss_rate,
            replication,
            cycle,
        }
    }

    #[test]
    fn the_tail_holds_the_largest_values_of_a_full_sort() {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(5);
        // Rates on a coarse grid, so that ties are common and the tie-break matters.
        let all: Vec<TailEntry> = (0..40)
            .flat_map(|r| (0..25).map(move |c| (r, c)))
            .map(|(r, c)| entry(f64::from(rng.random_range(0..30u32)) / 100.0, r, c))
            .collect();
        let mut sorted = all.clone();
        sorted.sort_by(|a, b| b.cmp(a));
        for capacity in [1u64, 7, 50, 999, 1000, 5000] {
            let mut tail = CycleLossTail::with_capacity(capacity);
            all.iter().for_each(|&e| tail.push(e));
            let want: Vec<TailEntry> = sorted.iter().copied().take(capacity as usize).collect();
            assert_eq!(tail.descending(), want, "capacity {capacity}");
        }
    }

    #[test]
    fn merging_parts_equals_one_pass() {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(6);
        let all: Vec<TailEntry> = (0..2000)
            .map(|i| entry(f64::from(rng.random_range(0..200u32)) / 1000.0, i / 20, i % 20))
            .collect();
        let mut one = CycleLossTail::with_capacity(64);
        all.iter().for_each(|&e| one.push(e));
        for cut in [0, 1, 700, 1999, 2000] {
            let mut a = CycleLossTail::with_capacity(64);
            let mut b = CycleLossTail::with_capacity(64);
            all[..cut].iter().rev().for_each(|&e| a.push(e));
            all[cut..].iter().for_each(|&e| b.push(e));
            b.merge(&a);
            assert_eq!(b, one, "cut at {cut}");
        }
    }

    #[test]
    fn values_admitted_part_by_part_rebuild_the_tail() {
        // What a checkpoint keeps of each batch: the batch's values still in the tail after it.
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(7);
        let mut tail = CycleLossTail::with_capacity(30);
        let mut rebuilt = CycleLossTail::with_capacity(30);
        for batch in 0..20u32 {
            let reps = batch * 5..batch * 5 + 5;
            for r in reps.clone() {
                for c in 0..10 {
                    tail.push(entry(rng.random::<f64>(), r, c));
                }
            }
            tail.from_replications(reps).into_iter().for_each(|e| rebuilt.push(e));
        }
        assert_eq!(rebuilt, tail);
    }

    #[test]
    fn order_statistics_are_read_from_the_top() {
        let tail = vec![entry(0.9, 0, 0), entry(0.8, 1, 0), entry(0.5, 2, 0)];
        // 10 values: the largest is the 9th smallest (0-based).
        assert_eq!(order_statistic(&tail, 10, 9), Some(0.9));
        assert_eq!(order_statistic(&tail, 10, 7), Some(0.5));
        assert_eq!(order_statistic(&tail, 10, 6), None);
        assert_eq!(order_statistic(&tail, 10, 10), None);
    }

    #[test]
    fn the_capacity_follows_the_whole_run() {
        assert_eq!(tail_capacity(0, 10), 2048);
        // 100,000 x 20 replication-cycles: 2% plus the margin.
        assert_eq!(tail_capacity(100_000, 20), 40_000 + 2048);
    }
}
