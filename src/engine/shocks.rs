//! Model step 3 (shocks): who is hit by each shock, and how hard.
//!
//! The portfolio-wide draws of a cycle (probabilities in force, portfolio factors and strikes,
//! village blocks) are made once before the village loop; each village then applies every shock to
//! its served members and multiplies their capacity by 1 - s per hit.

use super::ArmReplication;
use super::streams::{DenseBlocks, Purpose, SlotDraws, cycle_stream_id, unit_f64};
use crate::analytic::normal;
use crate::scenario::{Arm, ShockProbability, ShockScope};
use rand_distr::{Distribution as _, StandardNormal};

/// A shock's portfolio-wide state in one cycle.
#[derive(Debug, Clone, Copy)]
pub(super) struct ShockCycle {
    /// Probability in force (stress window, curve at k, or the fixed value).
    probability: f64,
    /// False when nobody can be hit this cycle (p = 0, or a portfolio shock that did not strike).
    active: bool,
    /// Row of the member's threshold cache (member scope).
    threshold_row: usize,
    /// The portfolio factor Mp (member scope with portfolio correlation).
    portfolio_factor: f64,
}

/// What the shock step keeps between cycles, and its scratch buffers.
pub(super) struct ShockState {
    /// Indices into `scenario.shocks` of member-scope shocks (the threshold cache's rows).
    pub member_shocks: Vec<usize>,
    /// The probability each threshold row was computed for.
    pub cached_probability: Vec<f64>,
    /// Per threshold row, the last hit probability turned into a threshold and its threshold:
    /// members with the same risk share them, so the inverse normal is computed once, not per
    /// member.
    last_threshold: Vec<(f64, f64)>,
    /// Whether every member has the same risk multiplier (a fixed risk distribution).
    shared_risk: bool,
    /// This cycle's state of every shock.
    cycle: Vec<ShockCycle>,
    /// Per shock, this cycle's village blocks (factor or strike), indexed by village.
    village_draws: Vec<DenseBlocks>,
    /// Reach draws of the village being shocked.
    dense_reach: DenseBlocks,
    /// Members hit by the shock being applied.
    hits: Vec<u32>,
    /// Per shock, whether its probability is a group-size curve read at each group's own size
    /// (a member-scope curve in an arm whose group sizes vary).
    size_dependent: Vec<bool>,
}

impl ShockState {
    /// The state for a scenario's shocks, before the first cycle.
    pub fn new(arm: &Arm) -> Self {
        let member_shocks: Vec<usize> = arm
            .shocks
            .iter()
            .enumerate()
            .filter(|(_, s)| s.scope == ShockScope::Member)
            .map(|(i, _)| i)
            .collect();
        ShockState {
            cached_probability: vec![f64::NAN; member_shocks.len()],
            last_threshold: vec![(f64::NAN, f64::NAN); member_shocks.len()],
            member_shocks,
            shared_risk: arm.risk.fixed_value().is_some(),
            cycle: Vec::new(),
            village_draws: vec![DenseBlocks::default(); arm.shocks.len()],
            dense_reach: DenseBlocks::default(),
            hits: Vec::new(),
            size_dependent: arm
                .shocks
                .iter()
                .map(|s| {
                    s.scope == ShockScope::Member
                        && matches!(s.probability, ShockProbability::Curve(_))
                        && arm.policy.sizes_vary()
                })
                .collect(),
        }
    }
}

impl ArmReplication<'_> {
    /// Caches member `i`'s hit probability and threshold for member-scope shock row `row`.
    #[inline]
    pub(super) fn set_threshold(&mut self, row: usize, i: usize, probability: f64) {
        let n = self.layout.n;
        let pi = (self.pool.risk[i] * probability).min(1.0);
        let last = &mut self.shocks.last_threshold[row];
        if pi.to_bits() != last.0.to_bits() {
            *last = (pi, normal::inv_cdf(pi));
        }
        self.pool.hit_probability[row * n + i] = pi;
        self.pool.threshold[row * n + i] = last.1;
    }

    /// Recomputes cached hit thresholds of member-scope shocks whose probability changed (a stress
    /// window starting or ending).
    pub(super) fn refresh_thresholds(&mut self, cycle: u32) {
        for row in 0..self.shocks.member_shocks.len() {
            let shock = &self.arm.shocks[self.shocks.member_shocks[row]];
            let p = shock.probability_in_cycle(cycle, self.policy.group_size);
            if p.to_bits() == self.shocks.cached_probability[row].to_bits() {
                continue;
            }
            self.shocks.cached_probability[row] = p;
            for i in 0..self.layout.n {
                if self.pool.occupied[i] {
                    self.set_threshold(row, i, p);
                }
            }
        }
    }

    /// Portfolio-wide draws of this cycle: each shock's probability, the portfolio factor of
    /// member-scope shocks and whether a portfolio-scope shock strikes.
    pub(super) fn prepare_shocks(&mut self, cycle: u32) {
        let state = &mut self.shocks;
        state.cycle.clear();
        let mut threshold_row = 0usize;
        for (si, shock) in self.arm.shocks.iter().enumerate() {
            let is_member = shock.scope == ShockScope::Member;
            let row = threshold_row;
            threshold_row += usize::from(is_member);
            let p = shock.probability_in_cycle(cycle, self.policy.group_size);
            // a curve read at each group's size may be positive where it is 0 at k
            let possible = p > 0.0 || state.size_dependent[si];
            let portfolio_factor = if is_member && shock.portfolio_correlation > 0.0 && possible {
                let mut d = SlotDraws::<2>::seek(&self.key, cycle_stream_id(Purpose::PortfolioFactor, cycle, si, 0), 0);
                StandardNormal.sample(&mut d)
            } else {
                0.0
            };
            // p = 0: nobody is hit (no unit is struck and min(1, u * 0) = 0 for every member)
            let mut active = possible;
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
                state.village_draws[si].fill(&self.key, id, self.layout.villages, 2);
            }
            state.cycle.push(ShockCycle {
                probability: p,
                active,
                threshold_row: row,
                portfolio_factor,
            });
        }
    }

    /// Step 3: every shock at its scope; records each served member's capacity multiplier.
    pub(super) fn shocks(&mut self, v: usize, cycle: u32) {
        let (g_start, g_end) = (self.groups.village_first[v], self.groups.len());
        // The whole village in slot order rather than the served members in group order: a
        // sequential fill, and only served members' multipliers are ever read.
        self.pool.multiplier[..self.layout.range(v).len()].fill(1.0);
        if g_start == g_end {
            return;
        }
        for si in 0..self.shocks.cycle.len() {
            let sc = self.shocks.cycle[si];
            if sc.active {
                self.shock_village(cycle, si, sc, v, g_start, g_end);
            }
        }
    }

    /// Applies shock `si` (probability `p` this cycle) to the served members of village `v`, whose
    /// groups are `g_start..g_end`.
    fn shock_village(&mut self, cycle: u32, si: usize, sc: ShockCycle, v: usize, g_start: usize, g_end: usize) {
        let ShockCycle {
            probability: p,
            threshold_row,
            portfolio_factor,
            ..
        } = sc;
        let arm = self.arm;
        let shock = &arm.shocks[si];
        let start = self.layout.village_start[v];
        let size = self.layout.village_start[v + 1] - start;
        let n = self.layout.n;
        let groups = &self.groups;
        let members = &groups.members[groups.member_range(g_start, g_end)];
        let key = &self.key;
        let state = &mut self.shocks;
        let hits = &mut state.hits;
        hits.clear();
        let mut hit = |i: u32| hits.push(i);
        match shock.scope {
            ShockScope::Member => {
                let rv = shock.village_correlation;
                let rp = shock.portfolio_correlation;
                let village_factor = if rv > 0.0 {
                    let id = cycle_stream_id(Purpose::VillageFactor, cycle, si, 0);
                    let mut d = SlotDraws::<2>::from_dense(key, id, &state.village_draws[si], v as u32);
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
                let row = threshold_row * n..(threshold_row + 1) * n;
                let hit_probability = &self.pool.hit_probability[row.clone()];
                let thresholds = &self.pool.threshold[row];
                let dense = &self.dense;
                let draw = |i: u32| unit_f64(dense.u64_at(i - start as u32));
                if state.size_dependent[si] {
                    // The curve at each group's own size: the cached values hold at k, so members
                    // of other sizes get theirs computed here, by the same per-member test.
                    let cached = state.cached_probability[threshold_row];
                    let risk = &self.pool.risk;
                    let hits = &mut state.hits;
                    for group in groups.iter_from(g_start).take(g_end - g_start) {
                        let p_size = shock.probability_in_cycle(cycle, group.len() as u32);
                        let at_k = p_size.to_bits() == cached.to_bits();
                        for &i in group {
                            let m = i as usize;
                            let (pi, t) = if at_k {
                                (hit_probability[m], thresholds[m])
                            } else {
                                let pi = (risk[m] * p_size).min(1.0);
                                (pi, normal::inv_cdf(pi))
                            };
                            let u = draw(i);
                            let is_hit = if rv == 0.0 && rp == 0.0 {
                                u < pi
                            } else {
                                u < normal::cdf((t - common) / idiosyncratic)
                            };
                            if is_hit {
                                hits.push(i);
                            }
                        }
                    }
                } else if rv == 0.0 && rp == 0.0 {
                    for &i in members {
                        if draw(i) < hit_probability[i as usize] {
                            hit(i);
                        }
                    }
                } else if state.shared_risk {
                    // Every member shares the threshold last cached (one risk multiplier, and every
                    // member's threshold recomputed when the probability changes): read it from the
                    // shock state rather than from a member's entry in the large threshold array,
                    // a cache miss per village.
                    let shared = state.last_threshold[threshold_row].1;
                    debug_assert_eq!(shared.to_bits(), thresholds[members[0] as usize].to_bits());
                    let conditional = normal::cdf((shared - common) / idiosyncratic);
                    // the same decision as draw(i) < conditional, on the words
                    let bound = crate::maths::unit_bound(conditional);
                    for &i in members {
                        if dense.u64_at(i - start as u32) >> 11 < bound {
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
                if shock.scope == ShockScope::Village && unit_f64(state.village_draws[si].u64_at(v as u32)) >= p {
                    return;
                }
                let reach = shock.reach;
                if reach < 1.0 {
                    let id = cycle_stream_id(Purpose::Reach, cycle, si, v as u32);
                    state.dense_reach.fill(key, id, size, 2);
                }
                if shock.scope == ShockScope::Group {
                    let id = cycle_stream_id(Purpose::GroupStrike, cycle, si, v as u32);
                    self.dense.fill(key, id, size, 2);
                }
                for group in groups.iter_from(g_start).take(g_end - g_start) {
                    if shock.scope == ShockScope::Group {
                        // a group's strike is keyed by its lowest slot, the lowest index in the village
                        let lowest = *group.iter().min().expect("groups are not empty") - start as u32;
                        if unit_f64(self.dense.u64_at(lowest)) >= p {
                            continue;
                        }
                    }
                    for &i in group {
                        if reach >= 1.0 || unit_f64(state.dense_reach.u64_at(i - start as u32)) < reach {
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
        let start = self.layout.village_start[v] as u32;
        let hits = &self.shocks.hits;
        if let Some(s) = shock.severity.fixed_value() {
            for &i in hits {
                self.pool.multiplier[(i - start) as usize] *= 1.0 - s;
            }
            return;
        }
        let size = self.layout.village_start[v + 1] - self.layout.village_start[v];
        let id = cycle_stream_id(Purpose::Severity, cycle, si, v as u32);
        // a seek generates 64 words; a dense fill 4 per slot
        let dense = hits.len() * 16 > size;
        if dense {
            self.dense.fill(&self.key, id, size, 4);
        }
        for &i in hits {
            let s = if dense {
                shock
                    .severity
                    .sample(&mut SlotDraws::<4>::from_dense(&self.key, id, &self.dense, i - start))
            } else {
                shock
                    .severity
                    .sample(&mut SlotDraws::<4>::seek(&self.key, id, i - start))
            };
            self.pool.multiplier[(i - start) as usize] *= 1.0 - s;
        }
    }
}
