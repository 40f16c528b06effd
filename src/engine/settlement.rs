//! Model steps 4 and 5 (capacity and repayment): the repayment rule, and its application to every
//! group of a village with the losses it leaves.
//!
//! The rule lives here once. The engine applies it to each simulated group, and the exact
//! one-factor calculator (`analytic::one_factor`) applies it to every possible hit count, so the
//! closed form and the simulation can never disagree about what "repaid" means.

use super::ArmReplication;
use super::book::LoanRecord;
use super::pool::Pool;
use crate::scenario::Liability;
use crate::stats::CycleRecord;

/// Slack of the joint repayment test, per member and per unit of amount due: sums of identical
/// shortfalls and surpluses must not flip the verdict through rounding. It absorbs rounding only.
pub const REPAYMENT_SLACK: f64 = 1e-9;

/// One member's position against the amount due D, given her capacity C.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct MemberPosition {
    /// Shortfall S = max(0, D - C).
    pub shortfall: f64,
    /// Surplus U = max(0, C - D).
    pub surplus: f64,
    /// What she pays from her own capacity, min(C, D).
    pub paid_own: f64,
}

/// The position of a member with capacity `capacity` owing `due`.
#[inline]
pub fn member_position(capacity: f64, due: f64) -> MemberPosition {
    MemberPosition {
        shortfall: (due - capacity).max(0.0),
        surplus: (capacity - due).max(0.0),
        paid_own: capacity.min(due),
    }
}

/// Sums of the positions of a jointly liable group's members.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct GroupPosition {
    /// Sum of shortfalls.
    pub shortfall: f64,
    /// Sum of surpluses.
    pub surplus: f64,
    /// Sum of what members pay from their own capacity.
    pub paid_own: f64,
}

/// What a liable unit (a group under joint liability, a member under individual liability) pays.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Settlement {
    /// Whether the unit repaid the amount due in full.
    pub repaid: bool,
    /// Whether it repaid only because peers covered a shortfall: repaid, with the sum of shortfalls
    /// above the rounding slack.
    pub rescued: bool,
    /// Amount collected.
    pub collected: f64,
    /// Principal left unpaid (collections pay interest first, then principal: common practice).
    pub unpaid_principal: f64,
}

/// The rounding slack of a group owing `group_due` in total.
#[inline]
pub fn joint_slack(group_due: f64) -> f64 {
    REPAYMENT_SLACK * group_due
}

/// Joint liability: the group repays iff the sum of shortfalls is covered by the share `peer_cover`
/// of the sum of surpluses (plus the rounding slack). Otherwise it collects what members pay
/// themselves plus the peers' cover.
#[inline]
pub fn settle_joint(group: GroupPosition, group_due: f64, group_principal: f64, peer_cover: f64) -> Settlement {
    let slack = joint_slack(group_due);
    if group.shortfall <= peer_cover * group.surplus + slack {
        Settlement {
            repaid: true,
            rescued: group.shortfall > slack,
            collected: group_due,
            unpaid_principal: 0.0,
        }
    } else {
        let collected = group.paid_own + peer_cover * group.surplus;
        let unpaid = (group_due - collected).max(0.0);
        Settlement {
            repaid: false,
            rescued: false,
            collected,
            unpaid_principal: unpaid.min(group_principal),
        }
    }
}

/// Individual liability: the member repays iff she has no shortfall, and otherwise pays what she
/// can.
#[inline]
pub fn settle_individual(member: MemberPosition, principal: f64) -> Settlement {
    Settlement {
        repaid: member.shortfall <= 0.0,
        rescued: false,
        collected: member.paid_own,
        unpaid_principal: member.shortfall.min(principal),
    }
}

/// Capacity C = D w prod(1 - s) of the member at internal index `i`, owing `due`. One expression for
/// the settlement and the loan book, so both judge the same capacity.
#[inline(always)]
fn capacity(pool: &Pool, i: usize, due: f64) -> f64 {
    due * pool.income[i] * pool.multiplier[i]
}

impl ArmReplication<'_> {
    /// Steps 4 and 5: each member's capacity, each group's settlement, its losses and the tally.
    /// Records who fell short and which groups repaid, for the exclusion step.
    pub(super) fn settlement(&mut self, v: usize, counted: bool, record: &mut CycleRecord) {
        let d = self.due;
        let principal = self.arm.principal();
        let recovery = self.arm.recovery_rate();
        let lambda = self.policy.peer_cover();
        let joint = self.policy.liability() == Liability::Joint;
        let (first, last) = (self.groups.village_first[v], self.groups.len());
        self.group_repaid.resize(last, false);
        for (group, repaid) in self.groups.iter_from(first).zip(&mut self.group_repaid[first..]) {
            let k = group.len();
            let group_due = k as f64 * d;
            let group_principal = k as f64 * principal;
            let mut sums = GroupPosition::default();
            let mut unpaid_principal_individual = 0.0;
            let mut collected_individual = 0.0;
            let mut n_short = 0u32;
            for &i in group {
                let i = i as usize;
                let position = member_position(capacity(&self.pool, i, d), d);
                let short = position.shortfall > 0.0;
                self.pool.short[i] = short;
                n_short += u32::from(short);
                sums.shortfall += position.shortfall;
                sums.surplus += position.surplus;
                sums.paid_own += position.paid_own;
                if !joint {
                    // each member is her own liable unit
                    let own = settle_individual(position, principal);
                    unpaid_principal_individual += own.unpaid_principal;
                    collected_individual += own.collected;
                }
            }
            let (settlement, defaulting_members) = if joint {
                let s = settle_joint(sums, group_due, group_principal, lambda);
                (s, if s.repaid { 0 } else { k as u32 })
            } else {
                let s = Settlement {
                    repaid: n_short == 0,
                    rescued: false,
                    collected: collected_individual,
                    unpaid_principal: unpaid_principal_individual,
                };
                (s, n_short)
            };
            *repaid = settlement.repaid;
            if counted {
                let unpaid_principal = settlement.unpaid_principal;
                let loss = (1.0 - recovery) * unpaid_principal;
                let t = &mut self.tally;
                t.group_cycles += 1;
                t.member_loans += k as u64;
                t.member_shortfalls += u64::from(n_short);
                t.member_defaults += u64::from(defaulting_members);
                t.shortfall_free_groups += u64::from(n_short == 0);
                t.count_group_shortfalls(k, n_short as usize);
                t.due += group_due;
                t.collected += settlement.collected;
                t.disbursed += group_principal;
                t.unpaid_principal += unpaid_principal;
                t.loss += loss;
                t.recovered += recovery * unpaid_principal;
                record.disbursed += group_principal;
                record.loss += loss;
                record.shortfalls += n_short;
                if settlement.repaid {
                    t.groups_repaid += 1;
                    record.groups_repaid += 1;
                }
                t.groups_rescued += u64::from(settlement.rescued);
            }
        }
    }
}

impl ArmReplication<'_> {
    /// Hands the loans of village `v`'s groups to the loan book, settled by the same rule as
    /// [`settlement`](Self::settlement) (which has just run on the same capacities). Called only
    /// when a book is being written, so the settlement's own loop carries no recording cost.
    pub(super) fn record_loans(&mut self, v: usize, cycle: u32) {
        let Some(book) = self.book.as_deref_mut() else {
            return;
        };
        let d = self.due;
        let principal = self.arm.principal();
        let lambda = self.policy.peer_cover();
        let joint = self.policy.liability() == Liability::Joint;
        let (pool, layout) = (&self.pool, &self.layout);
        for (number, group) in self.groups.iter_from(self.groups.village_first[v]).enumerate() {
            let k = group.len() as f64;
            let mut sums = GroupPosition::default();
            for &i in group {
                let position = member_position(capacity(pool, i as usize, d), d);
                sums.shortfall += position.shortfall;
                sums.surplus += position.surplus;
                sums.paid_own += position.paid_own;
            }
            // Individual liability has no cover; a repaid joint group pays every loan in full; a
            // defaulted one shares the peers' cover among the short members by their shortfalls.
            let settlement = joint.then(|| settle_joint(sums, k * d, k * principal, lambda));
            for &i in group {
                let i = i as usize;
                let position = member_position(capacity(pool, i, d), d);
                let paid = match settlement {
                    Some(s) if s.repaid => d,
                    Some(_) if position.shortfall > 0.0 => {
                        position.paid_own + lambda * sums.surplus * position.shortfall / sums.shortfall
                    }
                    _ => position.paid_own,
                };
                book.loan(&LoanRecord {
                    cycle,
                    village: v as u32,
                    group: number as u32,
                    slot: layout.slot_of(v, i),
                    entrant: pool.entrants[i].wrapping_sub(1),
                    due: d,
                    paid: paid.min(d),
                    own_paid: position.paid_own,
                });
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn cover_repays_a_group_and_counts_as_a_rescue() {
        // two members owe 10 each; one is 4 short, the other has 6 to spare
        let a = member_position(6.0, 10.0);
        let b = member_position(16.0, 10.0);
        assert_eq!((a.shortfall, a.surplus, a.paid_own), (4.0, 0.0, 6.0));
        assert_eq!((b.shortfall, b.surplus, b.paid_own), (0.0, 6.0, 10.0));
        let sums = GroupPosition {
            shortfall: 4.0,
            surplus: 6.0,
            paid_own: 16.0,
        };
        let full = settle_joint(sums, 20.0, 18.0, 1.0);
        assert!(full.repaid && full.rescued);
        assert_eq!((full.collected, full.unpaid_principal), (20.0, 0.0));
        // half cover gives 3 of the 4 missing: the group defaults and collects 16 + 3
        let half = settle_joint(sums, 20.0, 18.0, 0.5);
        assert!(!half.repaid && !half.rescued);
        assert_eq!((half.collected, half.unpaid_principal), (19.0, 1.0));
        // interest first: a collection of 1 does not even pay the interest of 2, so all principal is unpaid
        let broke = settle_joint(
            GroupPosition {
                shortfall: 19.0,
                surplus: 0.0,
                paid_own: 1.0,
            },
            20.0,
            18.0,
            1.0,
        );
        assert_eq!(broke.unpaid_principal, 18.0);
    }

    #[test]
    fn a_shortfall_within_the_rounding_slack_is_no_rescue() {
        let due = 110.0;
        let tiny = member_position(due * (1.0 - 1e-12), due);
        assert!(tiny.shortfall > 0.0);
        let sums = GroupPosition {
            shortfall: 5.0 * tiny.shortfall,
            surplus: 0.0,
            paid_own: 5.0 * tiny.paid_own,
        };
        let s = settle_joint(sums, 5.0 * due, 500.0, 0.0);
        assert!(s.repaid, "rounding must not default a group");
        assert!(!s.rescued, "nobody covered anything");
    }

    #[test]
    fn individual_liability_has_no_cover() {
        let short = settle_individual(member_position(70.0, 110.0), 100.0);
        assert!(!short.repaid && !short.rescued);
        assert_eq!((short.collected, short.unpaid_principal), (70.0, 40.0));
        let fine = settle_individual(member_position(150.0, 110.0), 100.0);
        assert!(fine.repaid);
        assert_eq!((fine.collected, fine.unpaid_principal), (110.0, 0.0));
    }
}
