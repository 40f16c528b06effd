//! Orchestration: replications and arms across threads, merged in replication order.
//!
//! Each (replication, arm) is an independent task whose result depends only on the scenario and
//! the indices, so the thread count changes speed but never a figure.

use crate::engine;
use crate::scenario::Scenario;
use crate::stats::{ArmTally, ReplicationTally};
use rayon::prelude::*;

/// Options of a simulation run.
#[derive(Debug, Clone, Copy, Default)]
pub struct RunOptions {
    /// Worker threads; `None` uses every core.
    pub threads: Option<usize>,
}

/// Why a run could not start.
#[derive(Debug, thiserror::Error)]
pub enum RunError {
    /// The thread pool could not be built.
    #[error("cannot start {threads} worker threads: {reason}")]
    ThreadPool { threads: usize, reason: String },
    /// The caller asked the run to stop (an interrupt) before it finished.
    #[error("interrupted before the simulation finished")]
    Interrupted,
}

/// What a run produced: one tally per arm, in arm order.
#[derive(Debug, Clone)]
pub struct RunResults {
    /// Tallies, indexed like `scenario.arms`.
    pub arms: Vec<ArmTally>,
    /// Member-cycles served in counted cycles, over all arms and replications.
    pub served_member_cycles: u64,
}

/// Simulates every replication of every arm. `progress` is called with the number of finished
/// (replication, arm) tasks after each batch, from the calling thread.
pub fn simulate(
    scenario: &Scenario,
    options: RunOptions,
    progress: &mut dyn FnMut(u64),
) -> Result<RunResults, RunError> {
    simulate_until(scenario, options, &|| false, progress)
}

/// As [`simulate`], but gives up with [`RunError::Interrupted`] as soon as `stop` returns true.
/// Every task asks before it starts, so an interrupt waits for at most one replication of one arm
/// per worker, and a stopped run returns no partial results.
pub fn simulate_until(
    scenario: &Scenario,
    options: RunOptions,
    stop: &(dyn Fn() -> bool + Sync),
    progress: &mut dyn FnMut(u64),
) -> Result<RunResults, RunError> {
    let threads = worker_threads(&options);
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(threads)
        .build()
        .map_err(|e| RunError::ThreadPool {
            threads,
            reason: e.to_string(),
        })?;
    let arms = scenario.arms().len();
    let mut tallies = vec![ArmTally::default(); arms];
    // Batches bound memory in flight and give the progress bar something to show.
    let batch_replications = (threads * 4).max(1) as u32;
    let mut done = 0u64;
    let mut first = 0u32;
    while first < scenario.replications() {
        let last = (first + batch_replications).min(scenario.replications());
        let tasks: Vec<(u32, usize)> = (first..last).flat_map(|r| (0..arms).map(move |a| (r, a))).collect();
        let results: Option<Vec<ReplicationTally>> = pool.install(|| {
            tasks
                .par_iter()
                .map(|&(r, a)| (!stop()).then(|| engine::simulate_replication(scenario, a, r)))
                .collect()
        });
        let results = results.ok_or(RunError::Interrupted)?;
        for ((_, a), tally) in tasks.iter().zip(results) {
            tallies[*a].push(tally);
        }
        done += tasks.len() as u64;
        progress(done);
        first = last;
    }
    let served_member_cycles = tallies
        .iter()
        .flat_map(|t| &t.replications)
        .map(|r| r.served_slot_cycles)
        .sum();
    Ok(RunResults {
        arms: tallies,
        served_member_cycles,
    })
}

/// Worker threads a run with `options` uses: the requested number, or every core.
pub fn worker_threads(options: &RunOptions) -> usize {
    options
        .threads
        .unwrap_or_else(|| std::thread::available_parallelism().map_or(1, |n| n.get()))
}

/// Refuses a run whose estimated peak memory exceeds `max_memory_gib`, or without it the memory the
/// machine has available (checked before any work, after command-line overrides).
pub fn check_memory(
    scenario: &Scenario,
    options: &RunOptions,
    max_memory_gib: Option<f64>,
) -> Result<(), crate::engine::memory::MemoryError> {
    let estimate = crate::engine::memory::estimate(scenario, worker_threads(options));
    crate::engine::memory::check(&estimate, max_memory_gib)
}
