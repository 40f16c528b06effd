//! Model steps 4 and 5 (capacity and repayment): the repayment rule, and its application to every
//! group of a village with the losses it leaves.
//!
//! The rule lives here once. The engine applies it to each simulated group, and the exact
//! one-factor calculator (`analytic::one_factor`) applies it to every possible hit count, so the
//! closed form and the simulation can never disagree about what "repaid" means.

use super::ArmReplication;
use super::book::LoanRecord;
use super::pool::Pool;
use super::streams::{self, Purpose, cycle_stream_id, unit_f64};
use crate::scenario::Liability;
use crate::stats::{CycleRecord, ReplicationTally};

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

/// The position of a member with capacity `capacity` owing `due`. A capacity within the rounding
/// slack of the amount due (|C - D| <= `REPAYMENT_SLACK` D) pays D exactly, with neither shortfall
/// nor surplus: a capacity that equals D on paper but is computed a few units in the last place
/// below it (an income ratio times (1 - s), say) must not make her short, under either liability.
#[inline]
pub fn member_position(capacity: f64, due: f64) -> MemberPosition {
    // Plain comparisons instead of f64::max and f64::min: the same values for every input, NaN
    // included (a NaN difference gives 0, a NaN capacity pays `due`), without the extra
    // instructions those functions spend on NaN operands.
    let slack = REPAYMENT_SLACK * due;
    let short = due - capacity;
    let spare = capacity - due;
    MemberPosition {
        shortfall: if short > slack { short } else { 0.0 },
        surplus: if spare > slack { spare } else { 0.0 },
        paid_own: if short > slack { capacity } else { due },
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
    /// Whether it repaid although a member fell short (beyond the rounding slack of her own amount
    /// due): repaid, with a positive sum of shortfalls, which the peers' cover paid.
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
            // Shortfalls within a member's own slack are already 0 (`member_position`), so a
            // positive sum means somebody fell short and the group repaid all the same: repaid =
            // shortfall-free + rescued, exactly.
            rescued: group.shortfall > 0.0,
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

/// The position of a member able to pay who walks away owing `due`: she pays nothing and offers no
/// surplus, and her whole amount due is unpaid, which the cover rule treats like a shortfall.
#[inline]
pub fn walk_away_position(due: f64) -> MemberPosition {
    MemberPosition {
        shortfall: due,
        surplus: 0.0,
        paid_own: 0.0,
    }
}

/// The principal one loan of a defaulting jointly liable group leaves unpaid. The peers' cover
/// `cover` is shared among the loans with an unpaid amount in proportion to those amounts (their
/// sum is `total_unpaid`), and each loan pays interest first, then principal (common practice), so
/// its unpaid principal is min(principal, unpaid - its share of the cover).
#[inline]
pub fn loan_unpaid_principal(unpaid: f64, principal: f64, cover: f64, total_unpaid: f64) -> f64 {
    (unpaid - cover * unpaid / total_unpaid).max(0.0).min(principal)
}

/// Capacity D_0 w prod(1 - s) without income growth, shared by [`capacity`] and the settlement's
/// slot-order loop so that both compute the same value.
#[inline(always)]
fn steady_capacity(first_due: f64, income: f64, multiplier: f64) -> f64 {
    first_due * income * multiplier
}

/// Capacity C = w_t D_0 prod(1 - s) of the member at internal index `i` in `cycle`, where D_0 is the
/// amount due at the starting principal and w_t = w (1 + income_growth)^t, t counting the cycles since
/// her entry, `m` her slot within the village (the multiplier's index). One expression for the
/// settlement and the loan book, so both judge the same capacity.
#[inline(always)]
fn capacity(pool: &Pool, i: usize, m: usize, first_due: f64, income_growth: f64, cycle: u32) -> f64 {
    if income_growth == 0.0 {
        steady_capacity(first_due, pool.income[i], pool.multiplier[m])
    } else {
        let t = f64::from(cycle.saturating_sub(pool.entry_cycle[i]));
        first_due * (pool.income[i] * libm::pow(1.0 + income_growth, t)) * pool.multiplier[m]
    }
}

/// What the settlement reads of the arm's loan terms, once per village.
#[derive(Clone, Copy)]
struct Terms {
    /// D_0 = P_0 (1 + r), the amount due at the starting principal.
    first_due: f64,
    /// P_0, the starting principal.
    first_principal: f64,
    /// 1 + r.
    rate_factor: f64,
    /// Whether principals may differ between members.
    progressive: bool,
    /// Growth of a principal after a cycle she repaid herself.
    growth: f64,
    /// The largest principal, max_multiple P_0.
    cap: f64,
    income_growth: f64,
}

impl Terms {
    /// Her principal and amount due this cycle.
    #[inline(always)]
    fn loan(&self, pool: &Pool, i: usize) -> (f64, f64) {
        if self.progressive {
            let p = pool.principal[i];
            (p, p * self.rate_factor)
        } else {
            (self.first_principal, self.first_due)
        }
    }

    /// Her principal next cycle if she pays her own amount due in full now.
    #[inline(always)]
    fn next_principal(&self, principal: f64) -> f64 {
        (principal * (1.0 + self.growth)).min(self.cap)
    }

    /// Her position this cycle, walking away included (as the settlement left it in `pool.walked`).
    #[inline(always)]
    fn position(&self, pool: &Pool, i: usize, m: usize, cycle: u32) -> (f64, MemberPosition) {
        let (principal, due) = self.loan(pool, i);
        if pool.walked[i] {
            return (principal, walk_away_position(due));
        }
        let c = capacity(pool, i, m, self.first_due, self.income_growth, cycle);
        (principal, member_position(c, due))
    }
}

impl ArmReplication<'_> {
    fn terms(&self) -> Terms {
        let arm = self.arm;
        Terms {
            first_due: self.due,
            first_principal: arm.principal,
            rate_factor: 1.0 + arm.interest_rate,
            progressive: arm.progressive(),
            growth: arm.loan_growth,
            cap: arm.max_multiple * arm.principal,
            income_growth: arm.income_growth,
        }
    }

    /// Steps 4 and 5: each member's capacity, her choice to pay or walk away, each group's
    /// settlement, its losses loan by loan, the tally, and each member's next principal. Records who
    /// fell short, who walked away and which groups repaid, for the exclusion step.
    pub(super) fn settlement(&mut self, v: usize, cycle: u32, counted: bool, record: &mut CycleRecord) {
        let terms = self.terms();
        // Most arms have no walking away, no growing loans and no growing incomes: a copy of the loop
        // compiled without them keeps those arms as fast as before these features existed.
        if terms.progressive || terms.income_growth != 0.0 || self.arm.behaviour.is_some() {
            self.settle_village::<true>(terms, v, cycle, counted, record);
        } else {
            self.settle_village::<false>(terms, v, cycle, counted, record);
        }
    }

    /// The settlement of village `v`; `DYNAMIC` is false only for arms without behaviour, loan growth
    /// or income growth, whose members all owe the first amount due and never walk away.
    #[inline(always)]
    fn settle_village<const DYNAMIC: bool>(
        &mut self,
        terms: Terms,
        v: usize,
        cycle: u32,
        counted: bool,
        record: &mut CycleRecord,
    ) {
        let progressive = DYNAMIC && terms.progressive;
        let recovery = self.arm.recovery_rate;
        let lambda = self.policy.peer_cover;
        let joint = self.policy.liability == Liability::Joint;
        // Walking away costs the discounted cycles of access the exclusion takes (times g_i), plus
        // the peers' sanction under joint liability.
        let behaviour = self.arm.behaviour.as_ref().filter(|_| DYNAMIC).map(|b| {
            (
                b,
                b.loan_value() * b.discounted_cycles_lost(self.policy.exclusion_cycles),
                if joint { b.social_sanction() } else { 0.0 },
            )
        });
        let village_start = self.layout.village_start[v];
        if behaviour.is_some() {
            let size = self.layout.village_start[v + 1] - village_start;
            let id = cycle_stream_id(Purpose::Temptation, cycle, 0, v as u32);
            self.dense.fill(&self.key, id, size, 2);
        }
        if !DYNAMIC {
            // Every slot's position in slot order, read below by the groups' members: the income and
            // multiplier arrays are then read sequentially, not in the shuffled order of the groups,
            // and the arithmetic runs as one straight loop. Unserved slots get a value nobody reads.
            let range = self.layout.range(v);
            let size = range.len();
            let positions = &mut self.positions;
            if positions.shortfall.len() < size {
                positions.shortfall.resize(size, 0.0);
                positions.surplus.resize(size, 0.0);
                positions.paid_own.resize(size, 0.0);
            }
            let first_due = terms.first_due;
            let (income, multiplier) = (&self.pool.income[range.clone()], &self.pool.multiplier[..size]);
            let (shortfall, surplus, paid_own) = (
                &mut positions.shortfall[..size],
                &mut positions.surplus[..size],
                &mut positions.paid_own[..size],
            );
            for m in 0..size {
                let position = member_position(steady_capacity(first_due, income[m], multiplier[m]), first_due);
                shortfall[m] = position.shortfall;
                surplus[m] = position.surplus;
                paid_own[m] = position.paid_own;
            }
        }
        let (mut last_threshold, mut last_survival) = (f64::NAN, 0.0);
        let (first, last) = (self.groups.village_first[v], self.groups.len());
        self.group_repaid.resize(last, false);
        // The village's tallies accumulate in locals (registers) and are written back once: the
        // sums of money start from the tally's values and add group after group, so every float
        // is summed in the same order as when added to the tally directly.
        let mut sums_of = VillageSums::from_tally(&self.tally, record);
        for (group, repaid) in self.groups.iter_from(first).zip(&mut self.group_repaid[first..]) {
            let k = group.len();
            let (mut group_due, mut group_principal) = if progressive {
                (0.0, 0.0)
            } else {
                (k as f64 * terms.first_due, k as f64 * terms.first_principal)
            };
            let mut sums = GroupPosition::default();
            let mut unpaid_principal_individual = 0.0;
            let mut collected_individual = 0.0;
            let (mut n_short, mut n_walked) = (0u32, 0u32);
            for &i in group {
                let i = i as usize;
                let (principal, due) = if DYNAMIC {
                    terms.loan(&self.pool, i)
                } else {
                    (terms.first_principal, terms.first_due)
                };
                if progressive {
                    group_due += due;
                    group_principal += principal;
                }
                let mut position = if DYNAMIC {
                    member_position(
                        capacity(
                            &self.pool,
                            i,
                            i - village_start,
                            terms.first_due,
                            terms.income_growth,
                            cycle,
                        ),
                        due,
                    )
                } else {
                    self.positions.at(i - village_start)
                };
                let short = position.shortfall > 0.0;
                let mut walked = false;
                if let (false, Some((b, access_value, sanction))) = (short, behaviour) {
                    let g = if progressive {
                        terms.next_principal(principal) / principal
                    } else {
                        1.0
                    };
                    // T > threshold iff U < P(T > threshold), U uniform: the inverse-transform
                    // method, one uniform whatever the temptation's law.
                    let threshold = access_value * g + sanction;
                    if threshold != last_threshold {
                        (last_threshold, last_survival) = (threshold, b.temptation().survival(threshold));
                    }
                    let m = (i - village_start) as u32;
                    let occupant = self.pool.entrants[i].wrapping_sub(1);
                    let u = unit_f64(streams::occupant_word(self.dense.u64_at(m), occupant));
                    walked = u < last_survival;
                }
                if walked {
                    position = walk_away_position(due);
                }
                self.pool.short[i] = short;
                if DYNAMIC {
                    // without behaviour nobody walks away: the flags stay false from the start
                    self.pool.walked[i] = walked;
                }
                n_short += u32::from(short);
                n_walked += u32::from(walked);
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
                let mut s = settle_joint(sums, group_due, group_principal, lambda);
                if !s.repaid {
                    // Booked loan by loan: the cover goes to the loans with an unpaid amount.
                    let cover = lambda * sums.surplus;
                    let mut unpaid_principal = 0.0;
                    for &i in group {
                        let (principal, position) = if DYNAMIC {
                            terms.position(&self.pool, i as usize, i as usize - village_start, cycle)
                        } else {
                            (terms.first_principal, self.positions.at(i as usize - village_start))
                        };
                        // A loan without a shortfall adds exactly +0 (its share of the cover is 0
                        // / a positive sum), so every loan is added without a branch on which
                        // members fell short, an event no predictor can learn.
                        unpaid_principal += loan_unpaid_principal(position.shortfall, principal, cover, sums.shortfall);
                    }
                    s.unpaid_principal = unpaid_principal;
                }
                (s, if s.repaid { 0 } else { k as u32 })
            } else {
                let s = Settlement {
                    repaid: n_short + n_walked == 0,
                    rescued: false,
                    collected: collected_individual,
                    unpaid_principal: unpaid_principal_individual,
                };
                (s, n_short + n_walked)
            };
            *repaid = settlement.repaid;
            if progressive {
                // Paid herself in full: her loan grows; completed by peers' cover: it stays; walked
                // away or not repaid in full: she starts again at the first principal.
                for &i in group {
                    let i = i as usize;
                    let p = &mut self.pool.principal[i];
                    if self.pool.walked[i] {
                        *p = terms.first_principal;
                    } else if !self.pool.short[i] {
                        *p = terms.next_principal(*p);
                    } else if !(joint && settlement.repaid) {
                        *p = terms.first_principal;
                    }
                }
            }
            if counted {
                let unpaid_principal = settlement.unpaid_principal;
                let loss = (1.0 - recovery) * unpaid_principal;
                let t = &mut sums_of;
                t.group_cycles += 1;
                t.member_loans += k as u64;
                t.member_shortfalls += u64::from(n_short);
                t.member_defaults += u64::from(defaulting_members);
                t.able_members += (k as u32 - n_short) as u64;
                t.strategic_defaults += u64::from(n_walked);
                t.shortfall_free_groups += u64::from(n_short == 0);
                self.tally.count_group_shortfalls(k, n_short as usize);
                t.due += group_due;
                t.collected += settlement.collected;
                t.disbursed += group_principal;
                t.unpaid_principal += unpaid_principal;
                t.loss += loss;
                t.recovered += recovery * unpaid_principal;
                t.record_disbursed += group_principal;
                t.record_loss += loss;
                t.record_shortfalls += n_short;
                t.groups_repaid += u64::from(settlement.repaid);
                t.record_groups_repaid += u32::from(settlement.repaid);
                t.groups_rescued += u64::from(settlement.rescued);
            }
        }
        if counted {
            sums_of.write_back(&mut self.tally, record);
        }
    }
}

/// The positions of one village's slots, by slot within the village, as three arrays so that the
/// loop computing them runs on vectors.
#[derive(Debug, Default)]
pub(super) struct SlotPositions {
    shortfall: Vec<f64>,
    surplus: Vec<f64>,
    paid_own: Vec<f64>,
}

impl SlotPositions {
    /// The position of slot `m` of the village.
    #[inline(always)]
    fn at(&self, m: usize) -> MemberPosition {
        MemberPosition {
            shortfall: self.shortfall[m],
            surplus: self.surplus[m],
            paid_own: self.paid_own[m],
        }
    }
}

/// A village's share of the tallies, accumulated in locals during its settlement.
#[derive(Clone, Copy)]
struct VillageSums {
    group_cycles: u64,
    member_loans: u64,
    member_shortfalls: u64,
    member_defaults: u64,
    able_members: u64,
    strategic_defaults: u64,
    shortfall_free_groups: u64,
    groups_repaid: u64,
    groups_rescued: u64,
    due: f64,
    collected: f64,
    disbursed: f64,
    unpaid_principal: f64,
    loss: f64,
    recovered: f64,
    record_disbursed: f64,
    record_loss: f64,
    record_shortfalls: u32,
    record_groups_repaid: u32,
}

impl VillageSums {
    /// Counts start at 0 and are added on write-back; sums of money start at the running totals so
    /// that each addition is the one the tally would have made.
    #[inline(always)]
    fn from_tally(t: &ReplicationTally, record: &CycleRecord) -> Self {
        VillageSums {
            group_cycles: 0,
            member_loans: 0,
            member_shortfalls: 0,
            member_defaults: 0,
            able_members: 0,
            strategic_defaults: 0,
            shortfall_free_groups: 0,
            groups_repaid: 0,
            groups_rescued: 0,
            due: t.due,
            collected: t.collected,
            disbursed: t.disbursed,
            unpaid_principal: t.unpaid_principal,
            loss: t.loss,
            recovered: t.recovered,
            record_disbursed: record.disbursed,
            record_loss: record.loss,
            record_shortfalls: 0,
            record_groups_repaid: 0,
        }
    }

    #[inline(always)]
    fn write_back(self, t: &mut ReplicationTally, record: &mut CycleRecord) {
        t.group_cycles += self.group_cycles;
        t.member_loans += self.member_loans;
        t.member_shortfalls += self.member_shortfalls;
        t.member_defaults += self.member_defaults;
        t.able_members += self.able_members;
        t.strategic_defaults += self.strategic_defaults;
        t.shortfall_free_groups += self.shortfall_free_groups;
        t.groups_repaid += self.groups_repaid;
        t.groups_rescued += self.groups_rescued;
        t.due = self.due;
        t.collected = self.collected;
        t.disbursed = self.disbursed;
        t.unpaid_principal = self.unpaid_principal;
        t.loss = self.loss;
        t.recovered = self.recovered;
        record.disbursed = self.record_disbursed;
        record.loss = self.record_loss;
        record.shortfalls += self.record_shortfalls;
        record.groups_repaid += self.record_groups_repaid;
    }
}

impl ArmReplication<'_> {
    /// Hands the loans of village `v`'s groups to the loan book, settled by the same rule as
    /// [`settlement`](Self::settlement) (which has just run on the same capacities). Called only
    /// when a book is being written, so the settlement's own loop carries no recording cost.
    pub(super) fn record_loans(&mut self, v: usize, cycle: u32) {
        let terms = self.terms();
        let Some(book) = self.book.as_deref_mut() else {
            return;
        };
        let lambda = self.policy.peer_cover();
        let joint = self.policy.liability() == Liability::Joint;
        let (pool, layout) = (&self.pool, &self.layout);
        let village_start = layout.village_start[v];
        for ((number, group), &repaid) in self
            .groups
            .iter_from(self.groups.village_first[v])
            .enumerate()
            .zip(&self.group_repaid[self.groups.village_first[v]..])
        {
            let mut sums = GroupPosition::default();
            for &i in group {
                let (_, position) = terms.position(pool, i as usize, i as usize - village_start, cycle);
                sums.shortfall += position.shortfall;
                sums.surplus += position.surplus;
                sums.paid_own += position.paid_own;
            }
            // Individual liability has no cover; a repaid joint group pays every loan in full; a
            // defaulted one shares the peers' cover among the loans with an unpaid amount (short or
            // walked away) in proportion to those amounts.
            for &i in group {
                let i = i as usize;
                let (_, position) = terms.position(pool, i, i - village_start, cycle);
                let due = terms.loan(pool, i).1;
                let paid = match (joint, repaid) {
                    (true, true) => due,
                    (true, false) if position.shortfall > 0.0 => {
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
                    due,
                    paid: paid.min(due),
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

    /// A capacity a rounding-sized amount from the amount due pays it exactly, under either
    /// liability; one just beyond the slack is short, and a jointly liable group with that member
    /// and no surplus defaults.
    #[test]
    fn a_capacity_within_the_rounding_slack_pays_the_amount_due() {
        let due = 110.0;
        for capacity in [due * (1.0 - 1e-12), due * (1.0 + 1e-12), 1.25 * 0.8 * due] {
            let p = member_position(capacity, due);
            assert_eq!(
                (p.shortfall, p.surplus, p.paid_own),
                (0.0, 0.0, due),
                "capacity {capacity}"
            );
            assert!(settle_individual(p, 100.0).repaid);
            let sums = GroupPosition {
                shortfall: 5.0 * p.shortfall,
                surplus: 5.0 * p.surplus,
                paid_own: 5.0 * p.paid_own,
            };
            let s = settle_joint(sums, 5.0 * due, 500.0, 0.0);
            assert!(s.repaid && !s.rescued, "nobody fell short");
        }
        let beyond = member_position(due * (1.0 - 1e-8), due);
        assert!(beyond.shortfall > 0.0 && beyond.paid_own < due);
        assert!(!settle_individual(beyond, 100.0).repaid);
        let sums = GroupPosition {
            shortfall: beyond.shortfall,
            surplus: 0.0,
            paid_own: beyond.paid_own + 4.0 * due,
        };
        assert!(!settle_joint(sums, 5.0 * due, 500.0, 0.0).repaid);
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
