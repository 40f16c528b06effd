//! The loan-cycle engine: one replication of one arm, cycle by cycle, exactly as the model states.
//!
//! Each cycle runs entry, formation, shocks, capacity, repayment, exclusion and dropout in that
//! order. All randomness comes from `streams`, keyed by entity and cycle, so the arms of one
//! replication share their draws (common random numbers) and scheduling never changes a result.
//!
//! Borrower slot j lives in village j % V. Internally the pool is stored village by village
//! (index = start of the village + j / V), so that everything one village touches in a cycle is
//! contiguous in memory; the scenario's slot numbers are used only to key random streams.

pub mod streams;

use crate::analytic::normal;
use crate::scenario::{Arm, Exclusion, ExclusionScope, Formation, Liability, Matching, Policy, Scenario, ShockScope};
use crate::stats::{CycleRecord, ReplicationTally};
use rand_distr::{Distribution as _, StandardNormal};
use streams::{DenseBlocks, Purpose, SlotDraws, cycle_stream_id, unit_f64};

/// Slack of the joint repayment test, relative to the group's amount due: absorbs rounding only.
const REPAYMENT_SLACK: f64 = 1e-9;

/// Simulates replication `replication` of arm `arm` and returns its tally over the counted cycles.
///
/// The scenario is validated, so every index and probability used here is in range.
pub fn simulate_replication(scenario: &Scenario, arm: usize, replication: u32) -> ReplicationTally {
    let mut sim = ArmReplication::new(scenario, &scenario.arms[arm], replication);
    for cycle in 1..=scenario.total_cycles() {
        sim.run_cycle(cycle);
    }
    sim.tally
}

/// A shock's portfolio-wide state in one cycle.
#[derive(Debug, Clone, Copy)]
struct ShockCycle {
    /// Probability in force (stress window, curve at k, or the fixed value).
    probability: f64,
    /// False when nobody can be hit this cycle (p = 0, or a portfolio shock that did not strike).
    active: bool,
    /// Row of the member's threshold cache (member scope).
    threshold_row: usize,
    /// The portfolio factor Mp (member scope with portfolio correlation).
    portfolio_factor: f64,
}

/// Per-member state, stored village by village (structure of arrays).
struct Pool {
    occupied: Vec<bool>,
    /// Entrants so far; the current member is entrant number `entrants - 1`.
    entrants: Vec<u32>,
    income: Vec<f64>,
    risk: Vec<f64>,
    /// Last cycle of exclusion; eligible in cycle t iff `excluded_through < t`.
    excluded_through: Vec<u32>,
    /// Hit probability min(1, u p) per member-scope shock: `hit_probability[s * N + index]`.
    hit_probability: Vec<f64>,
    /// Its normal quantile Phi^-1(min(1, u p)), the threshold of the factor model.
    threshold: Vec<f64>,
    /// Whether the member is in a group this cycle.
    assigned: Vec<bool>,
    /// Capacity multiplier prod (1 - s) this cycle.
    multiplier: Vec<f64>,
}

struct ArmReplication<'a> {
    scenario: &'a Scenario,
    /// The arm's full model: its policy, loan, borrowers, shocks and pool (any of them may be swept).
    arm: &'a Arm,
    policy: &'a Policy,
    key: [u8; 32],
    n: usize,
    villages: usize,
    /// First internal index of each village, and one past the last (length V + 1).
    village_start: Vec<usize>,
    k: usize,
    due: f64,
    pool: Pool,
    /// Indices into the arm's shocks of member-scope shocks, and the probability each threshold
    /// cache was computed for.
    member_shocks: Vec<usize>,
    cached_probability: Vec<f64>,
    /// This cycle's groups as internal indices: `groups[g * k .. (g + 1) * k]`.
    groups: Vec<u32>,
    /// Groups of village v are `village_groups[v] .. village_groups[v + 1]` (length V + 1).
    village_groups: Vec<usize>,
    /// Previous cycle's groups, their villages' group ranges and entrant numbers (persistent).
    previous_groups: Vec<u32>,
    previous_village_groups: Vec<usize>,
    previous_entrants: Vec<u32>,
    // scratch buffers
    dense: DenseBlocks,
    dense_reach: DenseBlocks,
    candidates: Vec<u64>,
    sort_scratch: Vec<u64>,
    sort_counts: Vec<u32>,
    assortative: Vec<(f64, u64, u32)>,
    shortfall: Vec<bool>,
    /// Members hit by the shock being applied (scratch).
    hits: Vec<u32>,
    shock_cycle: Vec<ShockCycle>,
    /// Whether every member has the same risk multiplier (a fixed risk distribution).
    shared_risk: bool,
    /// Per shock, this cycle's village blocks (factor or strike), indexed by village.
    village_draws: Vec<DenseBlocks>,
    tally: ReplicationTally,
}

impl<'a> ArmReplication<'a> {
    fn new(scenario: &'a Scenario, arm: &'a Arm, replication: u32) -> Self {
        let policy = &arm.policy;
        let n = scenario.borrowers as usize;
        let villages = scenario.villages as usize;
        let mut village_start = Vec::with_capacity(villages + 1);
        let mut at = 0usize;
        for v in 0..scenario.villages {
            village_start.push(at);
            at += scenario.village_size(v) as usize;
        }
        village_start.push(at);
        let member_shocks: Vec<usize> = arm
            .shocks
            .iter()
            .enumerate()
            .filter(|(_, s)| s.scope == ShockScope::Member)
            .map(|(i, _)| i)
            .collect();
        let ms = member_shocks.len();
        ArmReplication {
            scenario,
            arm,
            policy,
            key: streams::replication_key(scenario.seed, replication),
            n,
            villages,
            village_start,
            k: policy.group_size as usize,
            due: arm.amount_due(),
            pool: Pool {
                occupied: vec![false; n],
                entrants: vec![0; n],
                income: vec![0.0; n],
                risk: vec![0.0; n],
                excluded_through: vec![0; n],
                hit_probability: vec![0.0; ms * n],
                threshold: vec![f64::NEG_INFINITY; ms * n],
                assigned: vec![false; n],
                multiplier: vec![1.0; n],
            },
            cached_probability: vec![f64::NAN; ms],
            member_shocks,
            groups: Vec::with_capacity(n),
            village_groups: vec![0; villages + 1],
            previous_groups: Vec::new(),
            previous_village_groups: vec![0; villages + 1],
            previous_entrants: Vec::new(),
            dense: DenseBlocks::default(),
            dense_reach: DenseBlocks::default(),
            candidates: Vec::new(),
            sort_scratch: Vec::new(),
            sort_counts: Vec::new(),
            assortative: Vec::new(),
            shortfall: vec![false; policy.group_size as usize],
            shock_cycle: Vec::new(),
            hits: Vec::new(),
            shared_risk: arm.risk.fixed_value().is_some(),
            village_draws: vec![DenseBlocks::default(); arm.shocks.len()],
            tally: ReplicationTally::new(replication, policy.group_size, scenario.cycles),
        }
    }

    /// The scenario's slot number of internal index `i` in village `v`.
    #[inline]
    fn slot_of(&self, v: usize, i: usize) -> u32 {
        (v + self.villages * (i - self.village_start[v])) as u32
    }

    /// Caches member `i`'s hit probability and threshold for member-scope shock row `s`.
    #[inline]
    fn set_threshold(pool: &mut Pool, n: usize, s: usize, i: usize, probability: f64) {
        let pi = (pool.risk[i] * probability).min(1.0);
        pool.hit_probability[s * n + i] = pi;
        pool.threshold[s * n + i] = normal::inv_cdf(pi);
    }

    /// One cycle. Villages are independent within a cycle once the portfolio-wide draws are made,
    /// so every step runs village by village: a village's members stay in cache from entry to
    /// dropout instead of the whole pool being streamed through memory once per step.
    fn run_cycle(&mut self, cycle: u32) {
        let counted = cycle > self.scenario.warmup_cycles;
        self.refresh_thresholds(cycle);
        self.prepare_shocks(cycle);
        let mut record = CycleRecord::default();
        self.groups.clear();
        for v in 0..self.villages {
            self.entry(v, cycle);
            self.formation(v, cycle, counted, &mut record);
            self.shocks(v, cycle);
            self.repayment(v, cycle, counted, &mut record);
            self.dropout(v, cycle);
        }
        self.village_groups[self.villages] = self.groups.len() / self.k;
        if self.policy.formation == Formation::Persistent {
            // departures are detected next cycle by a changed entrant number
            self.previous_entrants.clear();
            let entrants = &self.pool.entrants;
            self.previous_entrants
                .extend(self.groups.iter().map(|&i| entrants[i as usize].wrapping_sub(1)));
            std::mem::swap(&mut self.previous_groups, &mut self.groups);
            self.previous_village_groups.copy_from_slice(&self.village_groups);
        }
        if counted {
            self.tally.cycles.push(record);
        }
    }

    /// Portfolio-wide draws of this cycle: each shock's probability, the portfolio factor of
    /// member-scope shocks and whether a portfolio-scope shock strikes.
    fn prepare_shocks(&mut self, cycle: u32) {
        self.shock_cycle.clear();
        let mut threshold_row = 0usize;
        for (si, shock) in self.arm.shocks.iter().enumerate() {
            let is_member = shock.scope == ShockScope::Member;
            let row = threshold_row;
            threshold_row += usize::from(is_member);
            let p = shock.probability_in_cycle(cycle, self.policy.group_size);
            let portfolio_factor = if is_member && shock.portfolio_correlation > 0.0 && p > 0.0 {
                let mut d = SlotDraws::<2>::seek(&self.key, cycle_stream_id(Purpose::PortfolioFactor, cycle, si, 0), 0);
                StandardNormal.sample(&mut d)
            } else {
                0.0
            };
            // p = 0: nobody is hit (no unit is struck and min(1, u * 0) = 0 for every member)
            let mut active = p > 0.0;
            if active && shock.scope == ShockScope::Portfolio {
                let mut d = SlotDraws::<2>::seek(&self.key, cycle_stream_id(Purpose::PortfolioStrike, cycle, si, 0), 0);
                active = unit_f64(rand::RngCore::next_u64(&mut d)) < p;
            }
            // Village factors and strikes: one stream per (cycle, shock), one block per village.
            let village_purpose = match shock.scope {
                ShockScope::Member if shock.village_correlation > 0.0 => Some(Purpose::VillageFactor),
                ShockScope::Village => Some(Purpose::VillageStrike),
                _ => None,
            };
            if let (Some(purpose), true) = (village_purpose, active) {
                let id = cycle_stream_id(purpose, cycle, si, 0);
                self.village_draws[si].fill(&self.key, id, self.villages, 2);
            }
            self.shock_cycle.push(ShockCycle {
                probability: p,
                active,
                threshold_row: row,
                portfolio_factor,
            });
        }
    }

    /// Recomputes cached hit thresholds of member-scope shocks whose probability changed (a stress
    /// window starting or ending).
    fn refresh_thresholds(&mut self, cycle: u32) {
        for (s, &shock_index) in self.member_shocks.iter().enumerate() {
            let p = self.arm.shocks[shock_index].probability_in_cycle(cycle, self.policy.group_size);
            if p.to_bits() == self.cached_probability[s].to_bits() {
                continue;
            }
            self.cached_probability[s] = p;
            for i in 0..self.n {
                if self.pool.occupied[i] {
                    Self::set_threshold(&mut self.pool, self.n, s, i, p);
                }
            }
        }
    }

    /// Step 1: empty slots get new entrants (always in the first cycle, later only when departures
    /// are replaced). Each entrant's attributes come from its own (slot, entrant) stream, so a
    /// rejection sampler's retries can never shift another entrant's draws.
    fn entry(&mut self, v: usize, cycle: u32) {
        if cycle > 1 && !self.arm.replace_departures {
            return;
        }
        for i in self.village_start[v]..self.village_start[v + 1] {
            if self.pool.occupied[i] {
                continue;
            }
            let entrant = self.pool.entrants[i];
            self.pool.entrants[i] += 1;
            let slot = self.slot_of(v, i);
            let mut rng = streams::open(&self.key, streams::entry_stream_id(slot, entrant));
            let income = self.arm.income.sample(&mut rng);
            let risk = self.arm.risk.sample(&mut rng);
            self.pool.occupied[i] = true;
            self.pool.income[i] = income;
            self.pool.risk[i] = risk;
            self.pool.excluded_through[i] = 0;
            for s in 0..self.member_shocks.len() {
                Self::set_threshold(&mut self.pool, self.n, s, i, self.cached_probability[s]);
            }
        }
    }

    #[inline]
    fn eligible(&self, i: usize, cycle: u32) -> bool {
        self.pool.occupied[i] && self.pool.excluded_through[i] < cycle
    }

    /// Step 2: forms the village's groups and counts its shares of the pool.
    fn formation(&mut self, v: usize, cycle: u32, counted: bool, record: &mut CycleRecord) {
        let k = self.k;
        let (start, end) = (self.village_start[v], self.village_start[v + 1]);
        self.pool.assigned[start..end].fill(false);
        self.village_groups[v] = self.groups.len() / k;
        if self.policy.formation == Formation::Persistent && !self.previous_groups.is_empty() {
            // A group survives when every member is the same person and still eligible.
            for g in self.previous_village_groups[v]..self.previous_village_groups[v + 1] {
                let members = &self.previous_groups[g * k..(g + 1) * k];
                let entrants = &self.previous_entrants[g * k..(g + 1) * k];
                let keep = members.iter().zip(entrants).all(|(&i, &e)| {
                    let i = i as usize;
                    self.eligible(i, cycle) && self.pool.entrants[i] == e + 1
                });
                if keep {
                    for &i in members {
                        self.pool.assigned[i as usize] = true;
                    }
                    self.groups.extend_from_slice(members);
                }
            }
        }
        self.form_village(v, cycle);
        if counted {
            // Branch-free counts: served members are exactly the grouped ones.
            let mut occupied = 0u64;
            let mut excluded = 0u64;
            for (&occ, &through) in self.pool.occupied[start..end]
                .iter()
                .zip(&self.pool.excluded_through[start..end])
            {
                occupied += u64::from(occ);
                excluded += u64::from(occ & (through >= cycle));
            }
            let served = (self.groups.len() - self.village_groups[v] * k) as u64;
            let empty = (end - start) as u64 - occupied;
            let waiting = occupied - excluded - served;
            self.tally.served_slot_cycles += served;
            self.tally.excluded_slot_cycles += excluded;
            self.tally.waiting_slot_cycles += waiting;
            self.tally.empty_slot_cycles += empty;
            record.excluded += excluded as u32;
            record.served += served as u32;
            record.groups += (served / k as u64) as u32;
        }
    }

    /// Orders the village's unassigned eligible members and cuts them into groups of k.
    fn form_village(&mut self, v: usize, cycle: u32) {
        let k = self.k;
        let (start, end) = (self.village_start[v], self.village_start[v + 1]);
        let size = end - start;
        let needs_keys = k > 1;
        if needs_keys {
            let id = cycle_stream_id(Purpose::Formation, cycle, 0, v as u32);
            self.dense.fill(&self.key, id, size, 2);
        }
        match self.policy.matching {
            Matching::Random => {
                // Sort keys pack the slot's random word above its index in the village, so one
                // integer comparison orders by the random word and breaks ties by position.
                // Village sizes are below 2^28 (validated), so the index fits in the low bits.
                let index_bits = usize::BITS - size.leading_zeros();
                let index_mask = (1u64 << index_bits) - 1;
                self.candidates.clear();
                self.candidates.resize(size, 0);
                let mut len = 0usize;
                let assigned = &self.pool.assigned[start..end];
                let occupied = &self.pool.occupied[start..end];
                let through = &self.pool.excluded_through[start..end];
                let candidates = &mut self.candidates[..];
                if needs_keys {
                    let dense = &self.dense;
                    for (m, ((&a, &o), &t)) in assigned.iter().zip(occupied).zip(through).enumerate() {
                        let random = dense.u64_at(m as u32);
                        // written unconditionally, kept only when eligible: avoids a hard-to-predict branch
                        candidates[len] = (random & !index_mask) | m as u64;
                        len += usize::from(!a & o & (t < cycle));
                    }
                } else {
                    for (m, ((&a, &o), &t)) in assigned.iter().zip(occupied).zip(through).enumerate() {
                        candidates[len] = m as u64;
                        len += usize::from(!a & o & (t < cycle));
                    }
                }
                self.candidates.truncate(len);
                if needs_keys {
                    sort_uniform_keys(&mut self.candidates, &mut self.sort_scratch, &mut self.sort_counts);
                }
                let full = len / k * k;
                for &c in &self.candidates[..full] {
                    let i = start + (c & index_mask) as usize;
                    self.pool.assigned[i] = true;
                    self.groups.push(i as u32);
                }
            }
            Matching::Assortative => {
                self.assortative.clear();
                for m in 0..size {
                    let i = start + m;
                    if !self.pool.assigned[i] && self.eligible(i, cycle) {
                        let random = if needs_keys { self.dense.u64_at(m as u32) } else { 0 };
                        self.assortative.push((self.pool.risk[i], random, i as u32));
                    }
                }
                self.assortative
                    .sort_unstable_by(|a, b| a.0.total_cmp(&b.0).then(a.1.cmp(&b.1)).then(a.2.cmp(&b.2)));
                let full = self.assortative.len() / k * k;
                for idx in 0..full {
                    let i = self.assortative[idx].2;
                    self.pool.assigned[i as usize] = true;
                    self.groups.push(i);
                }
            }
        }
    }

    /// Step 3: every shock at its scope; records each served member's capacity multiplier.
    fn shocks(&mut self, v: usize, cycle: u32) {
        let k = self.k;
        let (g_start, g_end) = (self.village_groups[v], self.groups.len() / k);
        for &i in &self.groups[g_start * k..g_end * k] {
            self.pool.multiplier[i as usize] = 1.0;
        }
        if g_start == g_end {
            return;
        }
        for si in 0..self.shock_cycle.len() {
            let sc = self.shock_cycle[si];
            if sc.active {
                self.shock_village(cycle, si, sc, v, g_start, g_end);
            }
        }
    }

    /// Applies shock `si` (probability `p` this cycle) to the served members of village `v`.
    fn shock_village(&mut self, cycle: u32, si: usize, sc: ShockCycle, v: usize, g_start: usize, g_end: usize) {
        let ShockCycle {
            probability: p,
            threshold_row,
            portfolio_factor,
            ..
        } = sc;
        let arm = self.arm;
        let shock = &arm.shocks[si];
        let k = self.k;
        let start = self.village_start[v];
        let size = self.village_start[v + 1] - start;
        let members = &self.groups[g_start * k..g_end * k];
        let key = &self.key;
        let hits = &mut self.hits;
        hits.clear();
        let mut hit = |i: u32| hits.push(i);
        match shock.scope {
            ShockScope::Member => {
                let rv = shock.village_correlation;
                let rp = shock.portfolio_correlation;
                let village_factor = if rv > 0.0 {
                    let id = cycle_stream_id(Purpose::VillageFactor, cycle, si, 0);
                    let mut d = SlotDraws::<2>::from_dense(key, id, &self.village_draws[si], v as u32);
                    StandardNormal.sample(&mut d)
                } else {
                    0.0
                };
                // Member i is hit iff common + idio * e_i < t_i with e_i = Phi^-1(U_i) and U_i the
                // member's uniform draw, i.e. iff U_i < Phi((t_i - common) / idio). Comparing in
                // uniform space needs no normal draw, and with a shared threshold (fixed risk) or
                // without factors no special function per member at all.
                let common = rv.sqrt() * village_factor + rp.sqrt() * portfolio_factor;
                let idiosyncratic = (1.0 - rv - rp).sqrt();
                let id = cycle_stream_id(Purpose::MemberShock, cycle, si, v as u32);
                self.dense.fill(key, id, size, 2);
                let row = threshold_row * self.n..(threshold_row + 1) * self.n;
                let hit_probability = &self.pool.hit_probability[row.clone()];
                let thresholds = &self.pool.threshold[row];
                let draw = |i: u32| unit_f64(self.dense.u64_at(i - start as u32));
                if rv == 0.0 && rp == 0.0 {
                    for &i in members {
                        if draw(i) < hit_probability[i as usize] {
                            hit(i);
                        }
                    }
                } else if self.shared_risk {
                    let conditional = normal::cdf((thresholds[members[0] as usize] - common) / idiosyncratic);
                    for &i in members {
                        if draw(i) < conditional {
                            hit(i);
                        }
                    }
                } else {
                    // Phi is increasing, so the largest threshold bounds every member's conditional
                    // probability: most draws are rejected against it without a special function,
                    // and the decisions are exactly those of the member-by-member comparison.
                    let highest = members
                        .iter()
                        .map(|&i| thresholds[i as usize])
                        .fold(f64::NEG_INFINITY, f64::max);
                    let bound = normal::cdf((highest - common) / idiosyncratic);
                    for &i in members {
                        let u = draw(i);
                        if u < bound && u < normal::cdf((thresholds[i as usize] - common) / idiosyncratic) {
                            hit(i);
                        }
                    }
                }
            }
            ShockScope::Group | ShockScope::Village | ShockScope::Portfolio => {
                if shock.scope == ShockScope::Village && unit_f64(self.village_draws[si].u64_at(v as u32)) >= p {
                    return;
                }
                let reach = shock.reach;
                if reach < 1.0 {
                    let id = cycle_stream_id(Purpose::Reach, cycle, si, v as u32);
                    self.dense_reach.fill(key, id, size, 2);
                }
                if shock.scope == ShockScope::Group {
                    let id = cycle_stream_id(Purpose::GroupStrike, cycle, si, v as u32);
                    self.dense.fill(key, id, size, 2);
                }
                for group in members.chunks_exact(k) {
                    if shock.scope == ShockScope::Group {
                        // a group's strike is keyed by its lowest slot, the lowest index in the village
                        let lowest = *group.iter().min().expect("k >= 1") - start as u32;
                        if unit_f64(self.dense.u64_at(lowest)) >= p {
                            continue;
                        }
                    }
                    for &i in group {
                        if reach >= 1.0 || unit_f64(self.dense_reach.u64_at(i - start as u32)) < reach {
                            hit(i);
                        }
                    }
                }
            }
        }
        self.apply_severities(cycle, si, v);
    }

    /// Multiplies each hit member's capacity by 1 - s, drawing s per hit. Severity blocks are read by
    /// seeking when hits are few and by one dense fill when they are many: the same words either
    /// way, so the choice changes speed only.
    fn apply_severities(&mut self, cycle: u32, si: usize, v: usize) {
        let shock = &self.arm.shocks[si];
        let start = self.village_start[v] as u32;
        if let Some(s) = shock.severity.fixed_value() {
            for &i in &self.hits {
                self.pool.multiplier[i as usize] *= 1.0 - s;
            }
            return;
        }
        let size = self.village_start[v + 1] - self.village_start[v];
        let id = cycle_stream_id(Purpose::Severity, cycle, si, v as u32);
        // a seek generates 64 words; a dense fill 4 per slot
        let dense = self.hits.len() * 16 > size;
        if dense {
            self.dense.fill(&self.key, id, size, 4);
        }
        for &i in &self.hits {
            let s = if dense {
                shock
                    .severity
                    .sample(&mut SlotDraws::<4>::from_dense(&self.key, id, &self.dense, i - start))
            } else {
                shock
                    .severity
                    .sample(&mut SlotDraws::<4>::seek(&self.key, id, i - start))
            };
            self.pool.multiplier[i as usize] *= 1.0 - s;
        }
    }

    /// Steps 4 to 6: capacity, repayment, losses and exclusion, group by group.
    fn repayment(&mut self, v: usize, cycle: u32, counted: bool, record: &mut CycleRecord) {
        let k = self.k;
        let d = self.due;
        let principal = self.arm.principal;
        let recovery = self.arm.recovery_rate;
        let lambda = self.policy.peer_cover;
        let joint = self.policy.liability == Liability::Joint;
        let exclude_whole_group = self.policy.exclusion_scope == ExclusionScope::Group;
        let exclusion = self.policy.exclusion_cycles;
        let group_due = k as f64 * d;
        let group_principal = k as f64 * principal;
        let groups = std::mem::take(&mut self.groups);
        let mut short = std::mem::take(&mut self.shortfall);
        for group in groups[self.village_groups[v] * k..].chunks_exact(k) {
            let mut sum_short = 0.0;
            let mut sum_surplus = 0.0;
            let mut sum_paid_own = 0.0;
            let mut unpaid_principal_individual = 0.0;
            let mut n_short = 0u32;
            for (slot_short, &i) in short.iter_mut().zip(group) {
                let i = i as usize;
                let capacity = d * self.pool.income[i] * self.pool.multiplier[i];
                let shortfall = (d - capacity).max(0.0);
                *slot_short = shortfall > 0.0;
                n_short += u32::from(*slot_short);
                sum_short += shortfall;
                sum_surplus += (capacity - d).max(0.0);
                sum_paid_own += capacity.min(d);
                // individual liability: each member is its own liable unit
                unpaid_principal_individual += shortfall.min(principal);
            }
            let (repaid, collected, unpaid_principal, defaulting_members) = if joint {
                if sum_short <= lambda * sum_surplus + REPAYMENT_SLACK * group_due {
                    (true, group_due, 0.0, 0u32)
                } else {
                    let collected = sum_paid_own + lambda * sum_surplus;
                    let unpaid = (group_due - collected).max(0.0);
                    (false, collected, unpaid.min(group_principal), k as u32)
                }
            } else {
                (n_short == 0, sum_paid_own, unpaid_principal_individual, n_short)
            };
            if counted {
                let loss = (1.0 - recovery) * unpaid_principal;
                let t = &mut self.tally;
                t.group_cycles += 1;
                t.member_loans += k as u64;
                t.member_shortfalls += u64::from(n_short);
                t.member_defaults += u64::from(defaulting_members);
                t.shortfall_histogram[n_short as usize] += 1;
                t.due += group_due;
                t.collected += collected;
                t.disbursed += group_principal;
                t.unpaid_principal += unpaid_principal;
                t.loss += loss;
                t.recovered += recovery * unpaid_principal;
                record.disbursed += group_principal;
                record.loss += loss;
                record.shortfalls += n_short;
                if repaid {
                    t.groups_repaid += 1;
                    record.groups_repaid += 1;
                    if joint && n_short > 0 {
                        t.groups_rescued += 1;
                    }
                }
            }
            // Step 6: exclusion of the group (joint, scope group), or of members with a shortfall
            let excluded_now = group.iter().zip(short.iter()).filter_map(|(&i, &s)| {
                let out = if joint {
                    !repaid && (exclude_whole_group || s)
                } else {
                    s
                };
                out.then_some(i as usize)
            });
            match exclusion {
                Exclusion::Cycles(0) => {}
                Exclusion::Cycles(e) => excluded_now.for_each(|i| self.pool.excluded_through[i] = cycle + e),
                Exclusion::Permanent => excluded_now.for_each(|i| self.pool.occupied[i] = false),
            }
        }
        self.groups = groups;
        self.shortfall = short;
    }

    /// Step 7: each present member, excluded ones included, leaves with probability `dropout`.
    fn dropout(&mut self, v: usize, cycle: u32) {
        let q = self.arm.dropout;
        if q <= 0.0 {
            return;
        }
        let start = self.village_start[v];
        let size = self.village_start[v + 1] - start;
        self.dense.fill(
            &self.key,
            cycle_stream_id(Purpose::Dropout, cycle, 0, v as u32),
            size,
            2,
        );
        for m in 0..size {
            if self.pool.occupied[start + m] && unit_f64(self.dense.u64_at(m as u32)) < q {
                self.pool.occupied[start + m] = false;
            }
        }
    }
}

/// Sorts keys whose high bits are uniformly random in expected linear time: a counting pass on the
/// top bits spreads them into about one key per bucket, then insertion sort fixes the few keys that
/// share a bucket. Gives exactly the order of a comparison sort.
fn sort_uniform_keys(keys: &mut Vec<u64>, scratch: &mut Vec<u64>, counts: &mut Vec<u32>) {
    let n = keys.len();
    if n < 2 {
        return;
    }
    let bits = (usize::BITS - (n - 1).leading_zeros()).clamp(1, 20);
    let shift = 64 - bits;
    counts.clear();
    counts.resize((1usize << bits) + 1, 0);
    for &key in keys.iter() {
        counts[(key >> shift) as usize + 1] += 1;
    }
    for b in 1..counts.len() {
        counts[b] += counts[b - 1];
    }
    scratch.clear();
    scratch.resize(n, 0);
    for &key in keys.iter() {
        let bucket = (key >> shift) as usize;
        scratch[counts[bucket] as usize] = key;
        counts[bucket] += 1;
    }
    for i in 1..n {
        let key = scratch[i];
        let mut j = i;
        while j > 0 && scratch[j - 1] > key {
            scratch[j] = scratch[j - 1];
            j -= 1;
        }
        scratch[j] = key;
    }
    std::mem::swap(keys, scratch);
}

#[cfg(test)]
mod tests {
    use super::*;

    fn scenario(extra: &str) -> Scenario {
        let text = format!(
            "replications = 1\ncycles = 6\n[portfolio]\nborrowers = 103\nvillages = 4\n[loan]\nprincipal = 100\n{extra}"
        );
        Scenario::from_toml_str(&text, "inline").unwrap()
    }

    /// The groups of the cycle just run as sorted lists of slot numbers (persistent formation keeps
    /// them in `previous_groups` once the cycle ends).
    fn group_sets(sim: &ArmReplication) -> Vec<Vec<u32>> {
        let groups = if sim.policy.formation == Formation::Persistent {
            &sim.previous_groups
        } else {
            &sim.groups
        };
        let mut sets: Vec<Vec<u32>> = groups
            .chunks_exact(sim.k)
            .map(|g| {
                let mut slots: Vec<u32> = g
                    .iter()
                    .map(|&i| {
                        let v = (0..sim.villages)
                            .find(|&v| (i as usize) < sim.village_start[v + 1])
                            .unwrap();
                        sim.slot_of(v, i as usize)
                    })
                    .collect();
                slots.sort_unstable();
                slots
            })
            .collect();
        sets.sort();
        sets
    }

    #[test]
    fn groups_stay_within_their_village_and_cover_whole_groups_only() {
        let s = scenario("[policy]\ngroup_size = 4\n");
        let mut sim = ArmReplication::new(&s, &s.arms[0], 0);
        sim.run_cycle(1);
        let sets = group_sets(&sim);
        // villages of 26, 26, 26, 25 slots: 6 groups of 4 each, the rest wait
        assert_eq!(sets.len(), 24);
        for g in &sets {
            assert!(g.iter().all(|&slot| slot % 4 == g[0] % 4), "group {g:?} spans villages");
        }
    }

    #[test]
    fn persistent_groups_survive_while_everyone_stays_eligible() {
        let s = scenario("[policy]\ngroup_size = 5\nformation = \"persistent\"\n");
        let mut sim = ArmReplication::new(&s, &s.arms[0], 0);
        sim.run_cycle(1);
        let first = group_sets(&sim);
        sim.run_cycle(2);
        sim.run_cycle(3);
        assert_eq!(group_sets(&sim), first, "no shocks, no exclusion: the same groups");
        let r = scenario("[policy]\ngroup_size = 5\nformation = \"reshuffle\"\n");
        let mut re = ArmReplication::new(&r, &r.arms[0], 0);
        re.run_cycle(1);
        let before = group_sets(&re);
        re.run_cycle(2);
        assert_ne!(group_sets(&re), before, "reshuffled groups change");
    }

    #[test]
    fn a_departure_dissolves_a_persistent_group() {
        let s = scenario("[policy]\ngroup_size = 5\nformation = \"persistent\"\n[pool]\ndropout = 0.2\n");
        let mut sim = ArmReplication::new(&s, &s.arms[0], 0);
        sim.run_cycle(1);
        let first = group_sets(&sim);
        // cycle 1 ends with dropouts; their groups must not come back whole
        let departed: Vec<u32> = (0..sim.villages)
            .flat_map(|v| (sim.village_start[v]..sim.village_start[v + 1]).map(move |i| (v, i)))
            .filter(|&(_, i)| !sim.pool.occupied[i])
            .map(|(v, i)| sim.slot_of(v, i))
            .collect();
        assert!(!departed.is_empty());
        sim.run_cycle(2);
        let second = group_sets(&sim);
        for g in &first {
            let broken = g.iter().any(|slot| departed.contains(slot));
            if broken {
                assert!(!second.contains(g), "group {g:?} with a departed member was kept");
            }
        }
        // groups without departures are all kept
        let intact = first.iter().filter(|g| !g.iter().any(|s| departed.contains(s))).count();
        assert_eq!(first.iter().filter(|g| second.contains(g)).count(), intact);
    }

    #[test]
    fn bucket_sort_matches_comparison_sort() {
        let key = streams::replication_key(5, 0);
        let mut buf = DenseBlocks::default();
        for n in [0usize, 1, 2, 3, 17, 200, 1000] {
            buf.fill(&key, n as u64, n, 2);
            let mut keys: Vec<u64> = (0..n as u32).map(|m| buf.u64_at(m)).collect();
            // a few duplicates and small values exercise ties and the lowest bucket
            if n > 3 {
                keys[1] = keys[0];
                keys[2] = 3;
            }
            let mut expected = keys.clone();
            expected.sort_unstable();
            let (mut scratch, mut counts) = (Vec::new(), Vec::new());
            sort_uniform_keys(&mut keys, &mut scratch, &mut counts);
            assert_eq!(keys, expected, "n = {n}");
        }
    }
}
