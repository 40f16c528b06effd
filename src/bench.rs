//! The speed limit the engine is measured against: the random numbers a replication needs, drawn
//! from the engine's own keyed streams, with no model logic at all.
//!
//! Per village and cycle it draws what the engine draws for every slot whether or not anything
//! happens: a formation key (when groups have more than one member), one uniform per member-scope
//! shock, one dropout uniform (when members drop out), and per village the normal of each
//! correlated member shock's factor and the uniform of each village-scope strike. Draws that only
//! follow an event (severities of hits, reach within a struck unit, entrants) are left out, so this
//! is a bound the engine cannot beat. `scripts/bench.sh` sets the engine's rate beside it.

use crate::engine::streams::{DenseBlocks, Purpose, SlotDraws, cycle_stream_id, replication_key, unit_f64};
use crate::run::{RunError, RunOptions, worker_pool};
use crate::scenario::{Scenario, ShockScope};
use rand::distr::Distribution;
use rand_distr::StandardNormal;
use rayon::prelude::*;

/// What [`bare_draws`] did.
#[derive(Debug, Clone, Copy)]
pub struct BareDraws {
    /// Slot-cycles drawn for (slots x counted cycles x replications x arms).
    pub member_cycles: u64,
    /// A sum of every value drawn, so that no draw can be optimised away.
    pub checksum: f64,
}

/// Draws the random numbers of every replication of every arm of `scenario`, across threads like
/// a run.
pub fn bare_draws(scenario: &Scenario, options: RunOptions) -> Result<BareDraws, RunError> {
    let (pool, _) = worker_pool(&options)?;
    let arms = scenario.arms().len();
    let tasks: Vec<(u32, usize)> = (0..scenario.replications())
        .flat_map(|r| (0..arms).map(move |a| (r, a)))
        .collect();
    let checksum: f64 = pool.install(|| {
        tasks
            .par_iter()
            .map(|&(r, a)| replication_draws(scenario, a, r))
            .collect::<Vec<f64>>()
            .iter()
            .sum()
    });
    Ok(BareDraws {
        member_cycles: u64::from(scenario.borrowers())
            * u64::from(scenario.cycles())
            * u64::from(scenario.replications())
            * arms as u64,
        checksum,
    })
}

/// The draws of one replication of one arm; returns their sum.
fn replication_draws(scenario: &Scenario, arm: usize, replication: u32) -> f64 {
    let arm = &scenario.arms()[arm];
    let key = replication_key(scenario.seed(), replication);
    let mut dense = DenseBlocks::default();
    let mut village = DenseBlocks::default();
    let villages = scenario.villages();
    let mut sum = 0.0;
    let uniforms = |dense: &DenseBlocks, size: u32| (0..size).map(|m| unit_f64(dense.u64_at(m))).sum::<f64>();
    for cycle in 1..=scenario.total_cycles() {
        for (si, shock) in arm.shocks().iter().enumerate() {
            let purpose = match shock.scope() {
                ShockScope::Member if shock.village_correlation() > 0.0 => Purpose::VillageFactor,
                ShockScope::Village => Purpose::VillageStrike,
                _ => continue,
            };
            let id = cycle_stream_id(purpose, cycle, si, 0);
            village.fill(&key, id, villages as usize, 2);
            for v in 0..villages {
                let mut d = SlotDraws::<2>::from_dense(&key, id, &village, v);
                sum += if purpose == Purpose::VillageFactor {
                    StandardNormal.sample(&mut d)
                } else {
                    unit_f64(rand::RngCore::next_u64(&mut d))
                };
            }
        }
        for v in 0..villages {
            let size = scenario.village_size(v);
            if arm.policy().group_size() > 1 {
                dense.fill(&key, cycle_stream_id(Purpose::Formation, cycle, 0, v), size as usize, 2);
                sum += uniforms(&dense, size);
            }
            for (si, shock) in arm.shocks().iter().enumerate() {
                if shock.scope() == ShockScope::Member {
                    dense.fill(
                        &key,
                        cycle_stream_id(Purpose::MemberShock, cycle, si, v),
                        size as usize,
                        2,
                    );
                    sum += uniforms(&dense, size);
                }
            }
            if arm.dropout() > 0.0 {
                dense.fill(&key, cycle_stream_id(Purpose::Dropout, cycle, 0, v), size as usize, 2);
                sum += uniforms(&dense, size);
            }
        }
    }
    sum
}
