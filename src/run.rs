//! Orchestration: replications and arms across threads, merged in replication order.
//!
//! Each (replication, arm) is an independent task whose result depends only on the scenario and
//! the indices, so the thread count changes speed but never a figure. Replications run in batches
//! in replication order, so what is finished at any moment is a prefix of the range asked for:
//! a checkpoint, a shard or a stopped run is always "replications first..done".

use crate::engine;
use crate::scenario::Scenario;
use crate::stats::{ArmTally, ReplicationTally};

/// Options of a simulation run.
#[derive(Debug, Clone, Default)]
pub struct RunOptions {
    /// Worker threads; `None` uses every core.
    pub threads: Option<usize>,
    /// Keep every replication's per-cycle records in the results (for tests and studies that read
    /// them). Off, a run keeps only their digest, so its memory does not grow with replications x
    /// cycles; no output needs them.
    pub keep_cycle_records: bool,
    /// A directory where each arm may keep its finished replications on disk, beyond the last
    /// [`crate::stats::replication_list::MEMORY_RECORDS`], in a file without a name (the command
    /// line gives the output directory). `None` keeps them in memory, which grows with the
    /// replications by about 0.5 kB each per arm. Figures are the same either way.
    pub spill_dir: Option<std::path::PathBuf>,
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
    /// A finished batch could not be recorded (the checkpoint file could not be written).
    #[error("{0}")]
    Checkpoint(String),
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

/// As [`simulate`], but gives up with [`RunError::Interrupted`] once `stop` returns true. The batch
/// in hand is finished first (see [`simulate_range`]); a stopped run returns no results here.
pub fn simulate_until(
    scenario: &Scenario,
    options: RunOptions,
    stop: &(dyn Fn() -> bool + Sync),
    progress: &mut dyn FnMut(u64),
) -> Result<RunResults, RunError> {
    let partial = simulate_range(
        scenario,
        options,
        0..scenario.replications,
        Vec::new(),
        stop,
        &mut |_| Ok(()),
        progress,
    )?;
    if partial.complete() {
        Ok(partial.results)
    } else {
        Err(RunError::Interrupted)
    }
}

/// Replications a batch holds: at most ceil(replications / 100) per worker, so a checkpoint written
/// after each batch is never more than 1% of the run (per worker) behind, and at most 4 per worker,
/// which is enough to keep every worker busy.
pub fn batch_replications(replications: u32, threads: usize) -> u32 {
    let per_worker = replications.div_ceil(100).clamp(1, 4);
    per_worker.saturating_mul(u32::try_from(threads.max(1)).unwrap_or(u32::MAX))
}

/// One finished batch: replications `first..end` of every arm.
#[derive(Debug, Clone)]
pub struct Batch {
    /// First replication of the batch.
    pub first: u32,
    /// One past the last replication of the batch.
    pub end: u32,
    /// Per arm, what the batch added to the arm's tally (see [`ArmTally::merge_part`]): merging
    /// these parts in order rebuilds the tally exactly.
    pub arms: Vec<ArmTally>,
}

/// What [`simulate_range`] finished: every replication from the range's start up to `done_until`.
#[derive(Debug, Clone)]
pub struct PartialRun {
    /// The tallies of replications `range.start..done_until`, per arm.
    pub results: RunResults,
    /// One past the last replication finished.
    pub done_until: u32,
    /// One past the last replication asked for.
    pub end: u32,
}

impl PartialRun {
    /// Whether every replication asked for was simulated.
    pub fn complete(&self) -> bool {
        self.done_until == self.end
    }
}

/// Simulates replications `range` of every arm, in batches of [`batch_replications`], continuing
/// after `already` (per-arm tallies of the replications `range.start..` finished earlier, e.g. read
/// from a checkpoint; empty for a fresh run). After each batch `on_batch` is given its tallies (a
/// checkpoint writer) and `progress` the number of (replication, arm) tasks finished. `stop` is
/// asked between batches: a stopped run finishes the batch in hand and returns what is done.
pub fn simulate_range(
    scenario: &Scenario,
    options: RunOptions,
    range: std::ops::Range<u32>,
    already: Vec<ArmTally>,
    stop: &(dyn Fn() -> bool + Sync),
    on_batch: &mut dyn FnMut(&Batch) -> Result<(), String>,
    progress: &mut dyn FnMut(u64),
) -> Result<PartialRun, RunError> {
    let (pool, threads) = worker_pool(&options)?;
    let arms = scenario.arms.len();
    // Tallies read back from a file that holds no batch yet start afresh, sized for this run.
    let mut already = already.into_iter();
    let mut tallies: Vec<ArmTally> = (0..arms)
        .map(|_| match already.next() {
            Some(t) if !t.is_empty() => t,
            _ => ArmTally::for_scenario(scenario),
        })
        .collect();
    if let Some(dir) = &options.spill_dir {
        for t in &mut tallies {
            t.replications.spill_to(dir);
        }
    }
    let resumed = tallies.iter().map(ArmTally::len).min().unwrap_or(0) as u32;
    let batch = batch_replications(range.end - range.start, threads);
    let mut first = range.start + resumed;
    let mut done = u64::from(resumed) * arms as u64;
    if done > 0 {
        progress(done);
    }
    // Tasks are (replication, arm) pairs in replication-major order, spawned ahead of the batch
    // being waited for, so that workers never idle at a batch boundary; results are committed in
    // batch order as each batch completes. A stop lets the batch in hand finish and spawns nothing
    // after it.
    let start = first;
    let total = (range.end - start) as usize * arms;
    let batch_tasks = batch as usize * arms;
    let window = 2 * batch_tasks + threads;
    let task = |i: usize| (start + (i / arms) as u32, i % arms);
    let (sender, receiver) = std::sync::mpsc::channel::<(usize, ReplicationTally)>();
    let mut failure: Option<RunError> = None;
    pool.in_place_scope_fifo(|scope| {
        let mut spawned = 0usize;
        let mut limit = total;
        let mut pending: std::collections::BTreeMap<usize, ReplicationTally> = std::collections::BTreeMap::new();
        let mut committed = 0usize;
        loop {
            if limit == total && stop() {
                // finish the batch in hand (the one the last spawned task belongs to), nothing after
                limit = if spawned == committed {
                    committed
                } else {
                    spawned.div_ceil(batch_tasks) * batch_tasks
                }
                .min(total);
            }
            while spawned < limit && spawned < committed + window {
                let sender = sender.clone();
                let (r, a) = task(spawned);
                let i = spawned;
                scope.spawn_fifo(move |_| {
                    // the receiver outlives the scope, so the send cannot fail
                    let _ = sender.send((i, engine::simulate_replication(scenario, a, r)));
                });
                spawned += 1;
            }
            if committed >= limit {
                break;
            }
            let batch_end = (committed + batch_tasks).min(total);
            if (committed..batch_end).all(|i| pending.contains_key(&i)) {
                let last = task(batch_end - 1).0 + 1;
                let mut parts: Vec<ArmTally> = tallies.iter().map(ArmTally::empty_like).collect();
                for i in committed..batch_end {
                    let tally = pending.remove(&i).expect("checked above");
                    if options.keep_cycle_records {
                        parts[i % arms].push_keeping_cycles(tally);
                    } else {
                        parts[i % arms].push(tally);
                    }
                }
                let mut added = Vec::with_capacity(arms);
                for (tally, part) in tallies.iter_mut().zip(parts) {
                    match tally.merge_part(part, first..last) {
                        Ok(record) => added.push(record),
                        Err(e) => {
                            failure = Some(RunError::Checkpoint(format!("cannot continue the run's tallies: {e}")));
                            break;
                        }
                    }
                }
                if failure.is_none() {
                    let finished = Batch {
                        first,
                        end: last,
                        arms: added,
                    };
                    if let Err(e) = on_batch(&finished) {
                        failure = Some(RunError::Checkpoint(e));
                    }
                }
                if failure.is_some() {
                    // spawn nothing more; the tasks in flight finish and are dropped
                    break;
                }
                done += (batch_end - committed) as u64;
                progress(done);
                committed = batch_end;
                first = last;
                continue;
            }
            match receiver.recv() {
                Ok((i, tally)) => {
                    pending.insert(i, tally);
                }
                Err(_) => unreachable!("the sender is held here"),
            }
        }
    });
    if let Some(e) = failure {
        return Err(e);
    }
    Ok(PartialRun {
        results: RunResults::from_tallies(tallies),
        done_until: first,
        end: range.end,
    })
}

impl RunResults {
    /// Results from per-arm tallies (finished replications, in replication order).
    pub fn from_tallies(arms: Vec<ArmTally>) -> RunResults {
        let served_member_cycles = arms
            .iter()
            .flat_map(|t| t.replications.iter())
            .map(|r| r.served_slot_cycles)
            .sum();
        RunResults {
            arms,
            served_member_cycles,
        }
    }
}

impl RunResults {
    /// Why reading replications kept on disk back failed, if it did: figures computed since then
    /// saw only part of them and must not be written.
    pub fn read_failure(&self) -> Option<&str> {
        self.arms.iter().find_map(|a| a.replications.read_failure())
    }
}

/// The thread pool of a run with `options`, and its number of threads.
pub fn worker_pool(options: &RunOptions) -> Result<(rayon::ThreadPool, usize), RunError> {
    let threads = worker_threads(options);
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(threads)
        .build()
        .map_err(|e| RunError::ThreadPool {
            threads,
            reason: e.to_string(),
        })?;
    Ok((pool, threads))
}

/// Worker threads a run with `options` uses: the requested number, or every core.
pub fn worker_threads(options: &RunOptions) -> usize {
    options
        .threads
        .unwrap_or_else(|| std::thread::available_parallelism().map_or(1, |n| n.get()))
}

/// The estimated peak memory of a run with `options` that simulates and holds `replications_held`
/// of the scenario's replications (all of them, or one shard's).
pub fn memory_estimate(
    scenario: &Scenario,
    options: &RunOptions,
    replications_held: u32,
) -> crate::engine::memory::MemoryEstimate {
    crate::engine::memory::estimate_part(scenario, worker_threads(options), replications_held)
}

/// Refuses a run whose estimated peak memory ([`memory_estimate`]) exceeds `max_memory_gib`, or
/// without it the memory the machine has available (checked before any work, after command-line
/// overrides).
pub fn check_memory(
    scenario: &Scenario,
    options: &RunOptions,
    replications_held: u32,
    max_memory_gib: Option<f64>,
) -> Result<(), crate::engine::memory::MemoryError> {
    crate::engine::memory::check(&memory_estimate(scenario, options, replications_held), max_memory_gib)
}
