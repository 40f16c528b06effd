//! What one replication of one arm produced, and the accumulator that collects replications.
//!
//! A `ReplicationTally` is one independent observation. `ArmTally` keeps them in replication order;
//! every pooled figure is computed from that ordered list when results are summarised, so merging
//! shards (from other threads, machines or a resumed run) and summarising gives bit-identical
//! figures to a single pass.

use serde::{Deserialize, Serialize};

/// Figures of one counted cycle of one replication.
#[derive(Debug, Clone, Copy, Default, PartialEq, Serialize, Deserialize)]
pub struct CycleRecord {
    /// Member loans served this cycle.
    pub served: u32,
    /// Members excluded this cycle.
    pub excluded: u32,
    /// Groups served.
    pub groups: u32,
    /// Groups that repaid in full.
    pub groups_repaid: u32,
    /// Served members with a shortfall (S_i > 0).
    pub shortfalls: u32,
    /// Principal lost (after recovery).
    pub loss: f64,
    /// Principal disbursed.
    pub disbursed: f64,
}

/// Totals of one replication of one arm over its counted cycles.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct ReplicationTally {
    /// Replication index (0-based).
    pub replication: u32,
    /// Groups served, summed over counted cycles.
    pub group_cycles: u64,
    /// Groups that repaid in full.
    pub groups_repaid: u64,
    /// Groups with a shortfall that repaid in full thanks to peers.
    pub groups_rescued: u64,
    /// Groups none of whose members had a shortfall (S_i = 0 for every member).
    pub shortfall_free_groups: u64,
    /// Member loans served.
    pub member_loans: u64,
    /// Member loans whose borrower had a shortfall (S_i > 0).
    pub member_shortfalls: u64,
    /// Members of defaulting groups (joint) or defaulting members (individual).
    pub member_defaults: u64,
    /// Members able to pay (capacity at least the amount due): the denominator of the strategic
    /// default rate.
    #[serde(default)]
    pub able_members: u64,
    /// Members able to pay who walked away.
    #[serde(default)]
    pub strategic_defaults: u64,
    /// Amount due.
    pub due: f64,
    /// Amount collected.
    pub collected: f64,
    /// Principal disbursed.
    pub disbursed: f64,
    /// Unpaid principal before recovery.
    pub unpaid_principal: f64,
    /// Principal lost after recovery.
    pub loss: f64,
    /// Principal recovered later.
    pub recovered: f64,
    /// Slot-cycles served.
    pub served_slot_cycles: u64,
    /// Slot-cycles of excluded members.
    pub excluded_slot_cycles: u64,
    /// Slot-cycles of eligible members left waiting.
    pub waiting_slot_cycles: u64,
    /// Slot-cycles with no member.
    pub empty_slot_cycles: u64,
    /// Fees charged at disbursement (`[finance] fee_rate` x principal disbursed); never lost.
    pub fees: f64,
    /// The lender's cost of funds on the principal outstanding (`[finance] cost_of_funds`).
    pub cost_of_funds: f64,
    /// Operating cost of the member loans served (`[finance] operating_cost` each).
    pub operating_cost: f64,
    /// Groups by their size and the number of their members with a shortfall: cell
    /// (size - `smallest_group_size`) x (largest size + 1) + short. With one group size k it is
    /// indexed by the number short alone (0..=k).
    pub shortfall_histogram: Vec<u64>,
    /// The smallest group size the histogram has a row for (0 in a tally rebuilt from a file).
    #[serde(default)]
    pub smallest_group_size: u32,
    /// The largest group size the histogram has a cell for.
    #[serde(default)]
    pub largest_group_size: u32,
    /// Members excluded, for a term or for good (exclusion events).
    #[serde(default)]
    pub exclusion_events: u64,
    /// Members removed for good by permanent exclusion (dropouts are not removals).
    #[serde(default)]
    pub removals: u64,
    /// New entrants after the first cycle (refills of emptied slots).
    #[serde(default)]
    pub entrants: u64,
    /// Distinct borrowers who took at least one loan in the counted cycles.
    #[serde(default)]
    pub clients_reached: u64,
    /// Slot-cycles empty because their occupant was removed and the slot is not yet refilled (part
    /// of `empty_slot_cycles`).
    #[serde(default)]
    pub removed_slot_cycles: u64,
    /// Per counted cycle, in order.
    pub cycles: Vec<CycleRecord>,
}

impl ReplicationTally {
    /// An empty tally for replication `replication` of an arm with groups of `group_size`.
    pub fn new(replication: u32, group_size: u32, counted_cycles: u32) -> Self {
        Self::with_group_sizes(replication, group_size, group_size, counted_cycles)
    }

    /// An empty tally for an arm whose groups have sizes in [`smallest`, `largest`].
    pub fn with_group_sizes(replication: u32, smallest: u32, largest: u32, counted_cycles: u32) -> Self {
        let rows = (largest - smallest) as usize + 1;
        ReplicationTally {
            replication,
            shortfall_histogram: vec![0; rows * (largest as usize + 1)],
            smallest_group_size: smallest,
            largest_group_size: largest,
            cycles: Vec::with_capacity(counted_cycles as usize),
            ..Default::default()
        }
    }

    /// Counts one group of `size` members, `short` of them with a shortfall, in the histogram.
    #[inline]
    pub fn count_group_shortfalls(&mut self, size: usize, short: usize) {
        let width = self.row_width();
        self.shortfall_histogram[(size - self.smallest_group_size as usize) * width + short] += 1;
    }

    /// Cells per histogram row: the largest group size + 1.
    #[inline]
    fn row_width(&self) -> usize {
        self.largest_group_size as usize + 1
    }

    /// Groups per (size, members short), for each size with at least one cell: (size, counts by
    /// the number short, 0..=size).
    pub fn shortfalls_by_size(&self) -> Vec<(u32, &[u64])> {
        let width = self.row_width();
        self.shortfall_histogram
            .chunks(width)
            .enumerate()
            .map(|(row, cells)| {
                let size = self.smallest_group_size + row as u32;
                (size, &cells[..=(size as usize).min(width - 1)])
            })
            .collect()
    }

    /// The replication's loss rate over its counted cycles, `None` if it lent nothing.
    pub fn loss_rate(&self) -> Option<f64> {
        (self.disbursed > 0.0).then(|| self.loss / self.disbursed)
    }

    /// What lending earned net of principal, recoveries, fees and costs: collected + recovered +
    /// fees - disbursed - cost of funds - operating cost (the numerator of `net_yield`). Summed in
    /// this order so that zero fees and costs leave the figure bit-identical to collected +
    /// recovered - disbursed.
    pub fn net_income(&self) -> f64 {
        net_income(
            self.collected,
            self.recovered,
            self.fees,
            self.disbursed,
            self.cost_of_funds,
            self.operating_cost,
        )
    }

    /// Total slot-cycles (the four shares' denominator).
    pub fn slot_cycles(&self) -> u64 {
        self.served_slot_cycles + self.excluded_slot_cycles + self.waiting_slot_cycles + self.empty_slot_cycles
    }
}

/// collected + recovered + fees - disbursed - cost of funds - operating cost, in that order (see
/// [`ReplicationTally::net_income`]).
pub fn net_income(
    collected: f64,
    recovered: f64,
    fees: f64,
    disbursed: f64,
    cost_of_funds: f64,
    operating_cost: f64,
) -> f64 {
    collected + recovered + fees - disbursed - cost_of_funds - operating_cost
}

/// Mergeable accumulator of one arm's replications, kept in replication order.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct ArmTally {
    /// The replications pushed so far, sorted by replication index.
    pub replications: Vec<ReplicationTally>,
}

/// Why two tallies cannot be merged.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum MergeError {
    /// The same replication appears in both.
    #[error("replication {0} appears in both tallies")]
    DuplicateReplication(u32),
}

impl ArmTally {
    /// Adds one replication, keeping replication order.
    pub fn push(&mut self, tally: ReplicationTally) {
        let at = self.replications.partition_point(|r| r.replication < tally.replication);
        self.replications.insert(at, tally);
    }

    /// Merges another shard of the same arm; refuses overlapping replications.
    pub fn merge(&mut self, other: ArmTally) -> Result<(), MergeError> {
        let mut merged = Vec::with_capacity(self.replications.len() + other.replications.len());
        let mut a = std::mem::take(&mut self.replications).into_iter().peekable();
        let mut b = other.replications.into_iter().peekable();
        loop {
            let take_a = match (a.peek(), b.peek()) {
                (Some(x), Some(y)) if x.replication == y.replication => {
                    let r = x.replication;
                    // restore what we took so a failed merge leaves self unchanged
                    merged.extend(a);
                    merged.sort_by_key(|t: &ReplicationTally| t.replication);
                    self.replications = merged;
                    return Err(MergeError::DuplicateReplication(r));
                }
                (Some(x), Some(y)) => x.replication < y.replication,
                (Some(_), None) => true,
                (None, Some(_)) => false,
                (None, None) => break,
            };
            merged.push(if take_a { a.next() } else { b.next() }.expect("peeked"));
        }
        self.replications = merged;
        Ok(())
    }

    /// Number of replications held.
    pub fn len(&self) -> usize {
        self.replications.len()
    }

    /// Whether no replication has been pushed.
    pub fn is_empty(&self) -> bool {
        self.replications.is_empty()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn tally(r: u32) -> ReplicationTally {
        let mut t = ReplicationTally::new(r, 3, 2);
        t.group_cycles = u64::from(r) + 1;
        t.loss = 0.1 * f64::from(r);
        t
    }

    #[test]
    fn merging_shards_equals_one_pass() {
        let mut one = ArmTally::default();
        (0..10).for_each(|r| one.push(tally(r)));
        let mut even = ArmTally::default();
        let mut odd = ArmTally::default();
        for r in (0..10).rev() {
            if r % 2 == 0 {
                even.push(tally(r))
            } else {
                odd.push(tally(r))
            }
        }
        even.merge(odd).unwrap();
        assert_eq!(even, one);
    }

    #[test]
    fn merging_overlapping_shards_is_refused() {
        let mut a = ArmTally::default();
        a.push(tally(0));
        a.push(tally(1));
        let mut b = ArmTally::default();
        b.push(tally(1));
        assert_eq!(a.merge(b), Err(MergeError::DuplicateReplication(1)));
        assert_eq!(a.len(), 2);
    }
}
