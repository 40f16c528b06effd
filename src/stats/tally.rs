//! What one replication of one arm produced, and the accumulator that collects replications.
//!
//! A `ReplicationTally` is one independent observation. `ArmTally` keeps them in replication order
//! with their totals, but not their per-cycle records: memory would grow with replications x
//! cycles. What the outputs need of those records is kept in a fixed size per replication (its
//! worst cycle, its cycles that lent, its years) or pooled over replications in exact, mergeable
//! accumulators (the upper tail of the per-cycle loss rates, the per-cycle sums of the time
//! series). Pooled figures that are sums over replications are formed in replication order from
//! the ordered list, and the pooled accumulators do not depend on order at all, so merging shards
//! (from other threads, machines or a resumed run) and summarising gives bit-identical figures to
//! a single pass.

use crate::stats::cycle_tail::{CycleLossTail, TailEntry};
use crate::stats::exact_sum::ExactSum;
use crate::stats::replication_list::ReplicationList;
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
    /// Per counted cycle, in order, as the engine fills them. An [`ArmTally`] keeps their digest
    /// (the fields below and its pooled accumulators) and drops them, unless asked to keep them.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub cycles: Vec<CycleRecord>,
    /// Counted cycles that lent (the per-cycle loss rates this replication contributes).
    #[serde(default)]
    pub lent_cycles: u32,
    /// The largest single-cycle loss rate among the cycles that lent; `None` if none lent.
    #[serde(default)]
    pub worst_cycle_loss: Option<f64>,
    /// The counted cycles in consecutive blocks of the year's cycles (`[finance] cycles_per_year`).
    #[serde(default)]
    pub years: Vec<Year>,
}

/// One year of one replication: consecutive counted cycles, as many as the year has.
#[derive(Debug, Clone, Copy, Default, PartialEq, Serialize, Deserialize)]
pub struct Year {
    /// Principal lost in the year, in currency.
    pub loss: f64,
    /// Mean principal outstanding over the year's cycles, in currency (the year's exposure).
    pub principal_outstanding: f64,
}

impl Year {
    /// Loss over the mean principal outstanding, `None` when the year lent nothing.
    pub fn loss_rate(&self) -> Option<f64> {
        (self.principal_outstanding > 0.0).then(|| self.loss / self.principal_outstanding)
    }
}

/// The years of per-cycle records: consecutive blocks of `cycles_per_year` (a trailing partial
/// block, which validation rules out, is dropped).
pub fn years_of(cycles: &[CycleRecord], cycles_per_year: u32) -> Vec<Year> {
    let n = cycles_per_year.max(1) as usize;
    cycles
        .chunks_exact(n)
        .map(|block| Year {
            loss: block.iter().map(|c| c.loss).sum(),
            principal_outstanding: block.iter().map(|c| c.disbursed).sum::<f64>() / n as f64,
        })
        .collect()
}

/// The sums over replications of one counted cycle's figures, for the time series.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct CycleSums {
    /// Replications with a record of this cycle.
    pub records: u64,
    /// Member loans served, summed.
    pub served: u64,
    /// Members excluded, summed.
    pub excluded: u64,
    /// Replications that served a group in this cycle.
    pub with_groups: u64,
    /// Their shares of groups that repaid in full, summed exactly.
    pub repaid_share: ExactSum,
    /// Replications that lent in this cycle.
    pub lent: u64,
    /// Their loss rates, summed exactly.
    pub loss_rate: ExactSum,
}

impl CycleSums {
    fn add(&mut self, c: &CycleRecord) {
        self.records += 1;
        self.served += u64::from(c.served);
        self.excluded += u64::from(c.excluded);
        if c.groups > 0 {
            self.with_groups += 1;
            self.repaid_share.push(f64::from(c.groups_repaid) / f64::from(c.groups));
        }
        if c.disbursed > 0.0 {
            self.lent += 1;
            self.loss_rate.push(c.loss / c.disbursed);
        }
    }

    fn merge(&mut self, o: &CycleSums) {
        self.records += o.records;
        self.served += o.served;
        self.excluded += o.excluded;
        self.with_groups += o.with_groups;
        self.repaid_share.merge(&o.repaid_share);
        self.lent += o.lent;
        self.loss_rate.merge(&o.loss_rate);
    }
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

    /// Fills the per-replication digest of the per-cycle records (cycles that lent, worst cycle,
    /// years of `cycles_per_year` cycles, none for 0); the records themselves are left in place.
    pub fn digest_cycles(&mut self, cycles_per_year: u32) {
        let rates = self
            .cycles
            .iter()
            .filter(|c| c.disbursed > 0.0)
            .map(|c| c.loss / c.disbursed);
        self.lent_cycles = rates.clone().count() as u32;
        self.worst_cycle_loss = rates.fold(None, |acc: Option<f64>, x| Some(acc.map_or(x, |a| a.max(x))));
        self.years = if cycles_per_year == 0 {
            Vec::new()
        } else {
            years_of(&self.cycles, cycles_per_year)
        };
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

/// The sums over `replications` of every count and amount of a [`ReplicationTally`], in one pass
/// (its other fields are left empty). Amounts are added in the order given, starting from -0.0,
/// exactly as `Iterator::sum` adds them, so a figure is bit-identical to a pass of its own.
pub fn totals<R: std::ops::Deref<Target = ReplicationTally>>(
    replications: impl Iterator<Item = R>,
) -> ReplicationTally {
    let start = ReplicationTally {
        due: -0.0,
        collected: -0.0,
        disbursed: -0.0,
        unpaid_principal: -0.0,
        loss: -0.0,
        recovered: -0.0,
        fees: -0.0,
        cost_of_funds: -0.0,
        operating_cost: -0.0,
        ..Default::default()
    };
    replications.fold(start, |mut t, r| {
        t.group_cycles += r.group_cycles;
        t.groups_repaid += r.groups_repaid;
        t.groups_rescued += r.groups_rescued;
        t.shortfall_free_groups += r.shortfall_free_groups;
        t.member_loans += r.member_loans;
        t.member_shortfalls += r.member_shortfalls;
        t.member_defaults += r.member_defaults;
        t.able_members += r.able_members;
        t.strategic_defaults += r.strategic_defaults;
        t.served_slot_cycles += r.served_slot_cycles;
        t.excluded_slot_cycles += r.excluded_slot_cycles;
        t.waiting_slot_cycles += r.waiting_slot_cycles;
        t.empty_slot_cycles += r.empty_slot_cycles;
        t.exclusion_events += r.exclusion_events;
        t.removals += r.removals;
        t.entrants += r.entrants;
        t.clients_reached += r.clients_reached;
        t.removed_slot_cycles += r.removed_slot_cycles;
        t.due += r.due;
        t.collected += r.collected;
        t.disbursed += r.disbursed;
        t.unpaid_principal += r.unpaid_principal;
        t.loss += r.loss;
        t.recovered += r.recovered;
        t.fees += r.fees;
        t.cost_of_funds += r.cost_of_funds;
        t.operating_cost += r.operating_cost;
        t
    })
}

/// Mergeable accumulator of one arm's replications, kept in replication order, with the pooled
/// digest of their per-cycle records.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ArmTally {
    /// The replications pushed so far, sorted by replication index, without their per-cycle
    /// records (unless pushed with [`ArmTally::push_keeping_cycles`]); in a run, mostly on disk
    /// (see [`ReplicationList`]).
    pub replications: ReplicationList,
    /// Counted cycles per year, for the replications' [`ReplicationTally::years`]; 0 keeps no
    /// years (a scenario without a `[finance]` table has no year but the cycle).
    #[serde(default = "one")]
    pub cycles_per_year: u32,
    /// The largest per-cycle loss rates over all replications.
    #[serde(default)]
    pub cycle_tail: CycleLossTail,
    /// Per counted cycle, the sums of the time series over replications.
    #[serde(default)]
    pub cycle_sums: Vec<CycleSums>,
}

fn one() -> u32 {
    1
}

impl Default for ArmTally {
    /// A tally with years of one cycle that keeps every per-cycle loss rate.
    fn default() -> Self {
        ArmTally::new(1, u64::MAX)
    }
}

/// Why two tallies cannot be merged.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum MergeError {
    /// The same replication appears in both.
    #[error("replication {0} appears in both tallies")]
    DuplicateReplication(u32),
    /// The replications could not be kept on disk (see [`ReplicationList`]).
    #[error("{0}")]
    Spill(String),
    /// The two were made for runs of different sizes or years.
    #[error("the tallies were made for different runs (tail of {0} and {1} values, years of {2} and {3} cycles)")]
    Layout(u64, u64, u32, u32),
}

impl ArmTally {
    /// An empty tally whose years have `cycles_per_year` cycles (0: keep no years) and whose
    /// per-cycle loss tail keeps `tail_capacity` values.
    pub fn new(cycles_per_year: u32, tail_capacity: u64) -> Self {
        ArmTally {
            replications: ReplicationList::new(),
            cycles_per_year,
            cycle_tail: CycleLossTail::with_capacity(tail_capacity),
            cycle_sums: Vec::new(),
        }
    }

    /// An empty tally for an arm of `scenario`: its year (none without a `[finance]` table) and a
    /// tail sized for the whole run.
    pub fn for_scenario(scenario: &crate::scenario::Scenario) -> Self {
        let finance = scenario.finance();
        ArmTally::new(
            if *finance == crate::scenario::Finance::default() {
                0
            } else {
                finance.cycles_per_year()
            },
            crate::stats::cycle_tail::tail_capacity(scenario.replications(), scenario.cycles()),
        )
    }

    /// An empty tally made like this one (same year and tail size).
    pub fn empty_like(&self) -> Self {
        ArmTally::new(self.cycles_per_year, self.cycle_tail.capacity())
    }

    /// Adds one replication, keeping replication order: its per-cycle records go into the pooled
    /// accumulators and the replication's digest, and are then dropped.
    pub fn push(&mut self, mut tally: ReplicationTally) {
        self.absorb_cycles(&mut tally);
        tally.cycles = Vec::new();
        self.insert(tally);
    }

    /// As [`ArmTally::push`], but the replication keeps its per-cycle records (for tests and
    /// studies that read them; memory then grows with replications x cycles).
    pub fn push_keeping_cycles(&mut self, mut tally: ReplicationTally) {
        self.absorb_cycles(&mut tally);
        self.insert(tally);
    }

    fn absorb_cycles(&mut self, tally: &mut ReplicationTally) {
        if tally.cycles.is_empty() {
            // already digested (read back from a file): its cycles are in some pooled accumulator
            return;
        }
        tally.digest_cycles(self.cycles_per_year);
        if self.cycle_sums.len() < tally.cycles.len() {
            self.cycle_sums.resize_with(tally.cycles.len(), CycleSums::default);
        }
        for (c, (record, sums)) in tally.cycles.iter().zip(&mut self.cycle_sums).enumerate() {
            sums.add(record);
            if record.disbursed > 0.0 {
                self.cycle_tail.push(TailEntry {
                    loss_rate: record.loss / record.disbursed,
                    replication: tally.replication,
                    cycle: c as u32,
                });
            }
        }
    }

    fn insert(&mut self, tally: ReplicationTally) {
        self.replications.insert(tally);
    }

    /// Merges another part of the same arm (a shard, a batch, a checkpoint line); refuses
    /// overlapping replications and tallies made for another run's size or year. A refused merge
    /// leaves `self` unchanged.
    pub fn merge(&mut self, mut other: ArmTally) -> Result<(), MergeError> {
        if (self.cycle_tail.capacity(), self.cycles_per_year) != (other.cycle_tail.capacity(), other.cycles_per_year) {
            return Err(MergeError::Layout(
                self.cycle_tail.capacity(),
                other.cycle_tail.capacity(),
                self.cycles_per_year,
                other.cycles_per_year,
            ));
        }
        let follows = match (self.replications.last_replication(), other.replications.first()) {
            (Some(last), Some(first)) => first.replication > last,
            _ => true,
        };
        if follows && other.replications.on_disk() > 0 {
            // the next shard, or a checkpoint read back, with replications on disk: they are read
            // in order and moved to this list's own file as they come, never held all at once
            for r in other.replications.iter() {
                self.replications.append(r.into_owned());
                if let Err(e) = self.replications.flush() {
                    return Err(MergeError::Spill(e.to_string()));
                }
            }
            if let Some(e) = other.replications.read_failure() {
                return Err(MergeError::Spill(e.to_string()));
            }
        } else if follows {
            // the usual case (a batch, the next shard): appending keeps the order, and the
            // replications move rather than being copied
            for r in other.replications.take_all() {
                self.replications.append(r);
            }
        } else {
            let mut merged = Vec::with_capacity(self.replications.len() + other.replications.len());
            let mut a = self.replications.iter().peekable();
            let mut b = other.replications.iter().peekable();
            loop {
                let take_a = match (a.peek(), b.peek()) {
                    (Some(x), Some(y)) if x.replication == y.replication => {
                        return Err(MergeError::DuplicateReplication(x.replication));
                    }
                    (Some(x), Some(y)) => x.replication < y.replication,
                    (Some(_), None) => true,
                    (None, Some(_)) => false,
                    (None, None) => break,
                };
                merged.push(if take_a { a.next() } else { b.next() }.expect("peeked").into_owned());
            }
            drop((a, b));
            self.replications.set_all(merged);
        }
        if let Err(e) = self.replications.flush() {
            return Err(MergeError::Spill(e.to_string()));
        }
        self.merge_pooled(&other.cycle_tail, &other.cycle_sums);
        Ok(())
    }

    fn merge_pooled(&mut self, tail: &CycleLossTail, sums: &[CycleSums]) {
        self.cycle_tail.merge(tail);
        if self.cycle_sums.len() < sums.len() {
            self.cycle_sums.resize_with(sums.len(), CycleSums::default);
        }
        for (mine, theirs) in self.cycle_sums.iter_mut().zip(sums) {
            mine.merge(theirs);
        }
    }

    /// Merges `part` (replications `range`, disjoint from those held) and returns what a file
    /// needs to rebuild this tally from its parts: the part's replications and cycle sums, and
    /// of its per-cycle loss rates only those still in the tail after the merge (a rate not kept
    /// now can never be kept later, as the tail's smallest value only rises).
    pub fn merge_part(&mut self, part: ArmTally, range: std::ops::Range<u32>) -> Result<ArmTally, MergeError> {
        let mut record = part.empty_like();
        record.replications = part
            .replications
            .iter()
            .map(|r| ReplicationTally {
                cycles: Vec::new(),
                ..r.into_owned()
            })
            .collect::<Vec<_>>()
            .into();
        record.cycle_sums = part.cycle_sums.clone();
        self.merge(part)?;
        for e in self.cycle_tail.from_replications(range) {
            record.cycle_tail.push(e);
        }
        Ok(record)
    }

    /// Number of replications held.
    pub fn len(&self) -> usize {
        self.replications.len()
    }

    /// Whether no replication has been pushed.
    pub fn is_empty(&self) -> bool {
        self.replications.is_empty()
    }

    /// Counted cycles that lent, over all replications: how many per-cycle loss rates there are.
    pub fn lent_cycles(&self) -> usize {
        self.replications.iter().map(|r| r.lent_cycles as usize).sum()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn totals_are_bit_identical_to_summing_each_field_on_its_own() {
        type Field = fn(&ReplicationTally) -> f64;
        let amounts: [Field; 9] = [
            |r| r.due,
            |r| r.collected,
            |r| r.disbursed,
            |r| r.unpaid_principal,
            |r| r.loss,
            |r| r.recovered,
            |r| r.fees,
            |r| r.cost_of_funds,
            |r| r.operating_cost,
        ];
        // magnitudes far apart (so the order of addition shows in the last bits), and signed zeros
        let value = |i: u64, k: u64| match (i * 7 + k * 3) % 5 {
            0 => -0.0,
            1 => 1e16 / (i + 1) as f64,
            2 => 0.1 * (i * 13 + k) as f64,
            3 => -(1.0 / 3.0) * (k + 1) as f64,
            _ => 0.0,
        };
        let reps: Vec<ReplicationTally> = (0..40u64)
            .map(|i| ReplicationTally {
                member_loans: i * 3,
                removed_slot_cycles: i,
                due: value(i, 0),
                collected: value(i, 1),
                disbursed: value(i, 2),
                unpaid_principal: value(i, 3),
                loss: value(i, 4),
                recovered: value(i, 5),
                fees: value(i, 6),
                cost_of_funds: value(i, 7),
                operating_cost: if i % 2 == 0 { -0.0 } else { value(i, 8) },
                ..Default::default()
            })
            .collect();
        let all_negative_zero = vec![
            ReplicationTally {
                loss: -0.0,
                ..Default::default()
            };
            3
        ];
        for list in [&reps[..], &reps[..1], &[], &all_negative_zero[..]] {
            let t = totals(list.iter());
            for f in amounts {
                let alone: f64 = list.iter().map(f).sum();
                assert_eq!(f(&t).to_bits(), alone.to_bits(), "{} vs {alone}", f(&t));
            }
            assert_eq!(t.member_loans, list.iter().map(|r| r.member_loans).sum::<u64>());
            assert_eq!(
                t.removed_slot_cycles,
                list.iter().map(|r| r.removed_slot_cycles).sum::<u64>()
            );
        }
    }

    fn tally(r: u32) -> ReplicationTally {
        let mut t = ReplicationTally::new(r, 3, 2);
        t.group_cycles = u64::from(r) + 1;
        t.loss = 0.1 * f64::from(r);
        for c in 0..4 {
            t.cycles.push(CycleRecord {
                served: 10 + r,
                groups: 3,
                groups_repaid: (r + c) % 4,
                loss: 0.1 * f64::from((r * 7 + c * 3) % 11),
                disbursed: if c == 3 && r.is_multiple_of(3) { 0.0 } else { 10.0 },
                ..Default::default()
            });
        }
        t
    }

    #[test]
    fn the_digest_keeps_what_the_outputs_need_of_the_cycles() {
        let mut one = ArmTally::new(2, 5);
        let mut kept = ArmTally::new(2, 5);
        (0..10).for_each(|r| {
            one.push(tally(r));
            kept.push_keeping_cycles(tally(r));
        });
        let t = &kept.replications.get(3).unwrap();
        assert!(one.replications.iter().all(|r| r.cycles.is_empty()));
        assert_eq!(t.lent_cycles, 3);
        let worst = t.cycles[..3].iter().map(|c| c.loss / c.disbursed).fold(0.0, f64::max);
        assert_eq!(t.worst_cycle_loss, Some(worst));
        assert_eq!(t.years.len(), 2);
        assert_eq!(t.years[1].loss, t.cycles[2].loss + t.cycles[3].loss);
        assert_eq!(one.lent_cycles(), 36);
        assert_eq!(one.cycle_tail.len(), 5);
        assert_eq!(one.cycle_sums[0].served, (10..20).sum::<u64>());
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
        // a tail that keeps fewer values than the run has still merges exactly
        let mut one = ArmTally::new(2, 7);
        (0..10).for_each(|r| one.push(tally(r)));
        let mut first = ArmTally::new(2, 7);
        (0..4).for_each(|r| first.push(tally(r)));
        let mut rest = ArmTally::new(2, 7);
        (4..10).for_each(|r| rest.push(tally(r)));
        first.merge(rest).unwrap();
        assert_eq!(first, one);
        assert_eq!(
            ArmTally::new(1, 7).merge(ArmTally::new(2, 7)),
            Err(MergeError::Layout(7, 7, 1, 2))
        );
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
