//! One replication's figures with the numerator and denominator behind each rate: the rows of
//! replications.csv.
//!
//! They exist so that every pooled figure can be recomputed exactly from the file (sums of the
//! numerators over sums of the denominators, in replication order), and so that comparisons can be
//! made later from the file alone, without simulating again: [`ReplicationFigures::to_tally`] gives
//! back the part of a tally the comparisons read.

use crate::stats::ReplicationTally;
use serde::{Deserialize, Serialize};

/// What one replication of one arm produced over its counted cycles.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct ReplicationFigures {
    /// Replication number, counted from 1.
    pub replication: u32,
    /// Groups that repaid in full (numerator of the group repayment rate).
    pub groups_repaid: u64,
    /// Groups served (its denominator).
    pub group_cycles: u64,
    /// Member loans served.
    pub member_loans: u64,
    /// Defaulting members, or members of defaulting groups.
    pub member_defaults: u64,
    /// Principal lost after recovery (numerator of the loss rate).
    pub loss: f64,
    /// Principal disbursed (denominator of the loss rate and net yield).
    pub disbursed: f64,
    /// Amount collected.
    pub collected: f64,
    /// Principal recovered later.
    pub recovered: f64,
    /// Slot-cycles served (numerator of the served share).
    pub served_slot_cycles: u64,
    /// Slot-cycles of excluded members (numerator of the excluded share).
    pub excluded_slot_cycles: u64,
    /// All slot-cycles (denominator of the four shares).
    pub slot_cycles: u64,
    /// The largest single-cycle loss rate among the counted cycles that lent, `None` when none did.
    pub worst_cycle_loss: Option<f64>,
    /// Members excluded for a term or for good (numerator of `exclusion_events`; over member loans).
    #[serde(default)]
    pub exclusion_events: u64,
    /// Members removed for good by permanent exclusion (numerator of the removal rate).
    #[serde(default)]
    pub removals: u64,
    /// New entrants after the first cycle (numerator of the entrant rate).
    #[serde(default)]
    pub entrants: u64,
    /// Distinct borrowers who took at least one loan in the counted cycles.
    #[serde(default)]
    pub clients_reached: u64,
    /// Slot-cycles empty after a removal, not yet refilled (numerator of the removed share).
    #[serde(default)]
    pub removed_slot_cycles: u64,
    /// Members able to pay who walked away (numerator of the strategic default rate).
    #[serde(default)]
    pub strategic_defaults: u64,
    /// Members able to pay (its denominator).
    #[serde(default)]
    pub able_members: u64,
    /// Fees charged at disbursement (0 in files written before `[finance]` existed).
    #[serde(default)]
    pub fees: f64,
    /// The lender's cost of funds.
    #[serde(default)]
    pub cost_of_funds: f64,
    /// Operating cost of the loans served.
    #[serde(default)]
    pub operating_cost: f64,
}

fn ratio(num: f64, den: f64) -> Option<f64> {
    (den != 0.0).then(|| num / den)
}

impl ReplicationFigures {
    /// The figures of one replication's tally.
    pub fn from_tally(t: &ReplicationTally) -> Self {
        ReplicationFigures {
            replication: t.replication + 1,
            groups_repaid: t.groups_repaid,
            group_cycles: t.group_cycles,
            member_loans: t.member_loans,
            member_defaults: t.member_defaults,
            loss: t.loss,
            disbursed: t.disbursed,
            collected: t.collected,
            recovered: t.recovered,
            served_slot_cycles: t.served_slot_cycles,
            excluded_slot_cycles: t.excluded_slot_cycles,
            slot_cycles: t.slot_cycles(),
            worst_cycle_loss: t.worst_cycle_loss,
            exclusion_events: t.exclusion_events,
            removals: t.removals,
            entrants: t.entrants,
            clients_reached: t.clients_reached,
            removed_slot_cycles: t.removed_slot_cycles,
            strategic_defaults: t.strategic_defaults,
            able_members: t.able_members,
            fees: t.fees,
            cost_of_funds: t.cost_of_funds,
            operating_cost: t.operating_cost,
        }
    }

    /// Groups repaid / groups served.
    pub fn group_repayment_rate(&self) -> Option<f64> {
        ratio(self.groups_repaid as f64, self.group_cycles as f64)
    }
    /// Loss / disbursed.
    pub fn loss_rate(&self) -> Option<f64> {
        ratio(self.loss, self.disbursed)
    }
    /// (collected + recovered + fees - disbursed - cost of funds - operating cost) / disbursed.
    pub fn net_yield(&self) -> Option<f64> {
        ratio(
            crate::stats::tally::net_income(
                self.collected,
                self.recovered,
                self.fees,
                self.disbursed,
                self.cost_of_funds,
                self.operating_cost,
            ),
            self.disbursed,
        )
    }
    /// Served slot-cycles / slot-cycles.
    pub fn served_share(&self) -> Option<f64> {
        ratio(self.served_slot_cycles as f64, self.slot_cycles as f64)
    }
    /// Excluded slot-cycles / slot-cycles.
    pub fn excluded_share(&self) -> Option<f64> {
        ratio(self.excluded_slot_cycles as f64, self.slot_cycles as f64)
    }
    /// Member defaults / member loans.
    pub fn member_default_rate(&self) -> Option<f64> {
        ratio(self.member_defaults as f64, self.member_loans as f64)
    }
    /// Exclusion events / member loans.
    pub fn exclusion_event_rate(&self) -> Option<f64> {
        ratio(self.exclusion_events as f64, self.member_loans as f64)
    }
    /// Removals / member loans.
    pub fn removal_rate(&self) -> Option<f64> {
        ratio(self.removals as f64, self.member_loans as f64)
    }
    /// Entrants after the first cycle / member loans.
    pub fn entrant_rate(&self) -> Option<f64> {
        ratio(self.entrants as f64, self.member_loans as f64)
    }
    /// Removed slot-cycles / slot-cycles.
    pub fn removed_share(&self) -> Option<f64> {
        ratio(self.removed_slot_cycles as f64, self.slot_cycles as f64)
    }

    /// Walk-aways / members able to pay.
    pub fn strategic_default_rate(&self) -> Option<f64> {
        ratio(self.strategic_defaults as f64, self.able_members as f64)
    }
    /// Principal disbursed / member loans: the mean loan size.
    pub fn mean_principal(&self) -> Option<f64> {
        ratio(self.disbursed, self.member_loans as f64)
    }

    /// A tally holding what these figures hold (0-based replication), for the comparisons and the
    /// quantile constraints; the
    /// served share's denominator is kept as served plus excluded plus waiting slot-cycles.
    pub fn to_tally(&self) -> ReplicationTally {
        ReplicationTally {
            replication: self.replication.saturating_sub(1),
            groups_repaid: self.groups_repaid,
            group_cycles: self.group_cycles,
            member_loans: self.member_loans,
            member_defaults: self.member_defaults,
            loss: self.loss,
            disbursed: self.disbursed,
            collected: self.collected,
            recovered: self.recovered,
            strategic_defaults: self.strategic_defaults,
            able_members: self.able_members,
            fees: self.fees,
            cost_of_funds: self.cost_of_funds,
            operating_cost: self.operating_cost,
            served_slot_cycles: self.served_slot_cycles,
            excluded_slot_cycles: self.excluded_slot_cycles,
            waiting_slot_cycles: self
                .slot_cycles
                .saturating_sub(self.served_slot_cycles + self.excluded_slot_cycles),
            exclusion_events: self.exclusion_events,
            removals: self.removals,
            entrants: self.entrants,
            clients_reached: self.clients_reached,
            removed_slot_cycles: self.removed_slot_cycles,
            worst_cycle_loss: self.worst_cycle_loss,
            ..Default::default()
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stats::CycleRecord;

    #[test]
    fn the_worst_cycle_skips_cycles_that_lent_nothing() {
        let mut t = ReplicationTally::new(0, 2, 3);
        for (loss, disbursed) in [(1.0, 100.0), (0.0, 0.0), (3.0, 50.0)] {
            t.cycles.push(CycleRecord {
                loss,
                disbursed,
                ..Default::default()
            });
        }
        t.digest_cycles(1);
        assert_eq!(t.worst_cycle_loss, Some(0.06));
        let mut none = ReplicationTally::new(0, 2, 0);
        none.digest_cycles(1);
        assert_eq!(none.worst_cycle_loss, None);
    }

    #[test]
    fn a_tally_rebuilt_from_the_figures_gives_the_same_figures() {
        let mut t = ReplicationTally::new(4, 2, 0);
        t.groups_repaid = 7;
        t.group_cycles = 9;
        t.loss = 1.5;
        t.disbursed = 900.0;
        t.collected = 950.0;
        t.recovered = 0.5;
        t.served_slot_cycles = 18;
        t.excluded_slot_cycles = 2;
        t.waiting_slot_cycles = 1;
        t.empty_slot_cycles = 3;
        let f = ReplicationFigures::from_tally(&t);
        assert_eq!(f.replication, 5);
        assert_eq!(f.slot_cycles, 24);
        let back = ReplicationFigures::from_tally(&f.to_tally());
        assert_eq!(back.slot_cycles, 24);
        assert_eq!(f, back);
    }
}
