//! Model steps 6 (exclusion) and 7 (dropout): who sits out the next cycles or leaves for good.

use super::ArmReplication;
use super::streams::{Purpose, cycle_stream_id, unit_f64};
use crate::scenario::{Exclusion, ExclusionScope, Liability};

impl ArmReplication<'_> {
    /// Step 6: a defaulting group (joint liability, group scope), the members with a shortfall or who
    /// walked away of a defaulting group (defaulters scope), or each defaulting member (individual
    /// liability) sits
    /// out cycles t+1 ..= t+E, or leaves for good (`permanent`).
    pub(super) fn exclusion(&mut self, v: usize, cycle: u32) {
        let exclusion = self.policy.exclusion_cycles;
        if exclusion == Exclusion::Cycles(0) {
            return;
        }
        let joint = self.policy.liability == Liability::Joint;
        let whole_group = self.policy.exclusion_scope == ExclusionScope::Group;
        let counted = cycle > self.scenario.warmup_cycles;
        let first = self.groups.village_first[v];
        let mut events = 0u64;
        for (group, &repaid) in self.groups.iter_from(first).zip(&self.group_repaid[first..]) {
            if joint && repaid {
                continue;
            }
            for &i in group {
                let i = i as usize;
                // A member who walked away defaults like one who fell short.
                if (joint && whole_group) || self.pool.short[i] || self.pool.walked[i] {
                    events += 1;
                    match exclusion {
                        Exclusion::Cycles(e) => self.pool.excluded_through[i] = cycle + e,
                        Exclusion::Permanent => {
                            self.pool.vacancies[v] += 1;
                            self.pool.occupied[i] = false;
                            self.pool.removed[i] = true;
                        }
                    }
                }
            }
        }
        if counted {
            self.tally.exclusion_events += events;
            if exclusion == Exclusion::Permanent {
                self.tally.removals += events;
            }
        }
    }

    /// Step 7: each present member, excluded ones included, leaves with probability `dropout`.
    pub(super) fn dropout(&mut self, v: usize, cycle: u32) {
        let q = self.arm.dropout;
        if q <= 0.0 {
            return;
        }
        let start = self.layout.village_start[v];
        let size = self.layout.village_start[v + 1] - start;
        self.dense.fill(
            &self.key,
            cycle_stream_id(Purpose::Dropout, cycle, 0, v as u32),
            size,
            2,
        );
        let mut departures = 0u32;
        for m in 0..size {
            if self.pool.occupied[start + m] && unit_f64(self.dense.u64_at(m as u32)) < q {
                self.pool.occupied[start + m] = false;
                departures += 1;
            }
        }
        self.pool.vacancies[v] += departures;
    }
}
