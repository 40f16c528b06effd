//! Peak memory of a run, estimated from the scenario before anything is simulated.
//!
//! A run within the scenario limits can still need more memory than the machine has (large pools
//! with several member shocks on many workers, or many replications of many cycles of many arms).
//! Finding out after minutes of simulation, through the kernel killing the process, helps nobody,
//! so a run is refused up front when its estimate exceeds the memory available. The estimate is
//! the sum of what the run holds at its peak (the formula is in DEVELOPERS.md, section "Memory"):
//!
//! - each worker's replication state: per-slot arrays, per-village scratch, per-shock village
//!   blocks and the tally being filled with its per-cycle records;
//! - the batch in hand: its replications' tallies with their per-cycle records, until they are
//!   digested;
//! - finished replications' tallies, without per-cycle records (their years are kept): all of
//!   them for a run of at most about a thousand replications, otherwise only those not yet moved
//!   to the run's file of replications (see `stats::replication_list`), with the buffer that
//!   moves them;
//! - per arm, the upper tail of the per-cycle loss rates (about 2% of the replication-cycles) and
//!   the per-cycle sums of the time series;
//! - while one arm is summarised, sorted copies of its per-replication and per-year figures;
//! - a fixed base for the program, its thread stacks and the report.
//!
//! So memory grows with replications only by the values the quantiles over replications (and
//! replication-years) are read from, tens of bytes each, and no longer with replications x cycles.
//! The estimate is of the command line's run, which keeps replications on disk (on Unix); a
//! library caller without `RunOptions::spill_dir` holds every finished replication in memory.

use crate::scenario::{Formation, Scenario, ShockScope};
use crate::stats::{CycleRecord, CycleSums, ReplicationTally, Year};

/// Bytes in one GiB (2^30), the unit of `--max-memory` and of the messages.
pub const BYTES_PER_GIB: f64 = 1_073_741_824.0;

/// The program, its libraries, the thread stacks in use and the report: measured peak of a tiny run
/// (about 5.5 MiB on x86-64 Linux; the unoptimised test build, about 15 MiB), rounded up.
const BASE_BYTES: u64 = 8 << 20;

/// Per slot and worker: occupied, entrants, income, risk, excluded-through, assigned, short, walked,
/// removed, reached, principal, entry cycle (42 bytes), group members and offsets (about 5), padding
/// of the allocator.
const SLOT_BYTES: u64 = 47;
/// Per slot, worker and member-scope shock: the cached hit probability and threshold.
const SLOT_SHOCK_BYTES: u64 = 16;
/// Per slot and worker under persistent formation: last cycle's members, offsets and entrant numbers.
const SLOT_PERSISTENT_BYTES: u64 = 9;
/// Per slot of the largest village and worker: dense random blocks (up to 4 words), formation keys
/// and their sorting buffer, the assortative order, hits, the capacity multipliers and the slot
/// positions of the settlement.
const VILLAGE_SLOT_BYTES: u64 = 16 + 8 + 8 + 24 + 4 + 8 + 24;
/// Per village, shock and worker: the cycle's village block of two words.
const VILLAGE_SHOCK_BYTES: u64 = 8;
/// Per kept per-cycle loss rate: the entry (16 bytes), doubled for the heap's growth by doubling.
const TAIL_ENTRY_BYTES: u64 = 32;
/// While one arm is summarised, the order statistics of its quantiles over replications and
/// replication-years (`stats::order_stats`): a histogram of 4,096 counts and at most 4,096 keys
/// collected for each of the 20 or so ranks asked at once, whatever the number of replications.
const ORDER_STATISTICS_BYTES: u64 = 4096 * 4 + 20 * 4096 * 8;
/// Per value at or above a 99% quantile (about 1% of the replications and of the
/// replication-years): its entry in the ordered map the expected shortfall is summed from, with the
/// map's half-empty nodes.
const TAIL_VALUE_BYTES: u64 = 64;
/// Per kept per-cycle loss rate while its arm is summarised: the tail read in descending order (16
/// bytes, doubled for the heap's growth) and, for the half above the 99% quantile, the interval's
/// count per replication (a hash map entry with the table's spare room).
const TAIL_SUMMARY_BYTES: u64 = 64;
/// Per counted cycle and arm beyond the struct: the two exact sums' partials (a few doubles each)
/// with the allocator's share.
const CYCLE_SUMS_HEAP_BYTES: u64 = 2 * (32 + 4 * 8);
/// Allocator rounding and bookkeeping per heap block (glibc: 16 bytes of header, 16-byte steps).
const ALLOCATION_BYTES: u64 = 32;

/// A run's estimated peak memory, by part.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct MemoryEstimate {
    /// Worker threads that hold a replication at the same time.
    pub workers: u64,
    /// One worker's replication state.
    pub worker_bytes: u64,
    /// Every finished replication's tally and figures, the batch in hand, and the arms' pooled
    /// per-cycle accumulators (loss tail, time-series sums).
    pub tally_bytes: u64,
    /// What summarising one arm holds: the order statistics of its quantiles and the tails they read.
    pub summary_bytes: u64,
    /// Program, stacks and report.
    pub base_bytes: u64,
}

impl MemoryEstimate {
    /// The estimated peak in bytes.
    pub fn total_bytes(&self) -> u64 {
        self.base_bytes + self.workers * self.worker_bytes + self.tally_bytes + self.summary_bytes
    }

    /// The estimated peak in GiB.
    pub fn total_gib(&self) -> f64 {
        self.total_bytes() as f64 / BYTES_PER_GIB
    }
}

/// Estimates the peak memory of simulating and reporting `scenario` on `threads` worker threads.
pub fn estimate(scenario: &Scenario, threads: usize) -> MemoryEstimate {
    estimate_part(scenario, threads, scenario.replications)
}

/// As [`estimate`], for a process that simulates and holds only `replications_held` of the run's
/// replications (a shard); the loss tail is still sized for the whole run.
pub fn estimate_part(scenario: &Scenario, threads: usize, replications_held: u32) -> MemoryEstimate {
    let slots = u64::from(scenario.borrowers);
    let villages = u64::from(scenario.villages.max(1));
    let largest_village = slots.div_ceil(villages);
    let member_shocks = scenario.shocks.iter().filter(|s| s.scope == ShockScope::Member).count() as u64;
    let shocks = scenario.shocks.len() as u64;
    let persistent = scenario
        .arms
        .iter()
        .any(|a| a.policy.formation == Formation::Persistent);
    // the histogram has a row of (largest + 1) cells per group size the arm may form
    let histogram_cells = scenario
        .arms
        .iter()
        .map(|a| {
            let (min, max) = (a.policy.min_group_size(), a.policy.max_group_size());
            u64::from(max - min + 1) * (u64::from(max) + 1)
        })
        .max()
        .unwrap_or(2);
    let cycles = u64::from(scenario.cycles);
    let replications = u64::from(replications_held.min(scenario.replications));
    let arms = scenario.arms.len() as u64;
    // without a [finance] table a run keeps no years (see `ArmTally::for_scenario`)
    let years = if scenario.finance == crate::scenario::Finance::default() {
        0
    } else {
        cycles / u64::from(scenario.finance.cycles_per_year().max(1))
    };
    let record_bytes = std::mem::size_of::<CycleRecord>() as u64;
    let tally_bytes = std::mem::size_of::<ReplicationTally>() as u64;
    let histogram = histogram_cells * 8 + ALLOCATION_BYTES;
    // A replication in flight: the struct, its per-cycle records and histogram.
    let in_flight = tally_bytes + cycles * record_bytes + histogram + ALLOCATION_BYTES;
    // A finished replication in memory: the struct, its histogram and years. The arm's list grows
    // by doubling, but the pages of its spare capacity are never touched (large blocks are mapped,
    // and grown by remapping), so they are not resident. The report shares the list.
    let finished = tally_bytes + histogram + years * std::mem::size_of::<Year>() as u64 + 2 * ALLOCATION_BYTES;

    let per_slot = SLOT_BYTES + member_shocks * SLOT_SHOCK_BYTES + if persistent { SLOT_PERSISTENT_BYTES } else { 0 };
    let worker_bytes =
        slots * per_slot + largest_village * VILLAGE_SLOT_BYTES + villages * shocks * VILLAGE_SHOCK_BYTES + in_flight;
    let tasks = replications * arms;
    let workers = (threads.max(1) as u64).min(tasks.max(1));
    let batch = u64::from(crate::run::batch_replications(replications_held, workers as usize)).min(replications);
    let tail =
        crate::stats::cycle_tail::tail_capacity(scenario.replications, scenario.cycles).min(replications * cycles);
    let cycle_sums = cycles * (std::mem::size_of::<CycleSums>() as u64 + CYCLE_SUMS_HEAP_BYTES);
    // Replications in memory per arm: all of them, or with a file of replications those since
    // the last move to disk (at most MEMORY_RECORDS and a batch), plus the buffer that encodes
    // them for the move (about one tally each).
    let held = if cfg!(unix) {
        replications.min(crate::stats::replication_list::MEMORY_RECORDS as u64 + 1 + batch)
    } else {
        replications
    };
    let moving = if held < replications { held * tally_bytes } else { 0 };
    MemoryEstimate {
        workers,
        worker_bytes,
        tally_bytes: arms * held * finished
            + moving
            + batch * arms * in_flight
            + arms * (tail * TAIL_ENTRY_BYTES + cycle_sums),
        // Every figure over replications is read in passes (ratios twice, paired differences in
        // three passes over both arms, quantiles through their order statistics), so nothing here
        // grows with replications except the 1% tail of the expected shortfall.
        summary_bytes: ORDER_STATISTICS_BYTES
            + (replications + replications * years).div_ceil(100) * TAIL_VALUE_BYTES
            + tail * TAIL_SUMMARY_BYTES,
        base_bytes: BASE_BYTES,
    }
}

/// The memory the kernel reports as available for new work (`MemAvailable` in /proc/meminfo), in
/// bytes; `None` where there is no such file (not Linux).
pub fn available_bytes() -> Option<u64> {
    let text = std::fs::read_to_string("/proc/meminfo").ok()?;
    parse_mem_available(&text)
}

/// The `MemAvailable:  N kB` line of /proc/meminfo, in bytes.
fn parse_mem_available(meminfo: &str) -> Option<u64> {
    let line = meminfo.lines().find(|l| l.starts_with("MemAvailable:"))?;
    let mut words = line.split_whitespace().skip(1);
    let kib: u64 = words.next()?.parse().ok()?;
    Some(kib * 1024)
}

/// Why a run is refused for its memory.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum MemoryError {
    /// The estimate exceeds the limit.
    #[error(
        "the run needs an estimated {needed_gib:.3} GiB of memory, above the {limit_gib:.2} GiB {source_text}; \
         lower replications, cycles, arms, borrowers or --threads, or set the limit with --max-memory GIB"
    )]
    TooLarge {
        /// The estimate, in GiB.
        needed_gib: f64,
        /// The limit, in GiB.
        limit_gib: f64,
        /// Where the limit came from ("available (MemAvailable in /proc/meminfo)" or "given by --max-memory").
        source_text: String,
    },
    /// A `--max-memory` value that is not a positive finite number of GiB.
    #[error("--max-memory = {0} is not allowed: a positive number of GiB, such as 8 or 0.5")]
    BadLimit(f64),
}

/// Refuses a run whose estimate exceeds `max_memory_gib`, or without it the memory available.
/// With neither (no /proc/meminfo), the run goes ahead.
pub fn check(estimate: &MemoryEstimate, max_memory_gib: Option<f64>) -> Result<(), MemoryError> {
    let (limit_bytes, source_text) = match max_memory_gib {
        Some(gib) if gib.is_finite() && gib > 0.0 => (gib * BYTES_PER_GIB, "given by --max-memory".to_string()),
        Some(gib) => return Err(MemoryError::BadLimit(gib)),
        None => match available_bytes() {
            Some(bytes) => (bytes as f64, "available (MemAvailable in /proc/meminfo)".to_string()),
            None => return Ok(()),
        },
    };
    let needed = estimate.total_bytes() as f64;
    if needed > limit_bytes {
        return Err(MemoryError::TooLarge {
            needed_gib: needed / BYTES_PER_GIB,
            limit_gib: limit_bytes / BYTES_PER_GIB,
            source_text,
        });
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn scenario(extra: &str) -> Scenario {
        let text = format!(
            "replications = 10\ncycles = 20\n[portfolio]\nborrowers = 10000\nvillages = 10\n[loan]\nprincipal = 100\n{extra}"
        );
        Scenario::from_toml_str(&text, "inline").unwrap()
    }

    #[test]
    fn reads_mem_available_in_bytes() {
        let text = "MemTotal:       24000000 kB\nMemFree:  100 kB\nMemAvailable:   22557628 kB\n";
        assert_eq!(parse_mem_available(text), Some(22_557_628 * 1024));
        assert_eq!(parse_mem_available("MemTotal: 5 kB\n"), None);
    }

    #[test]
    fn estimate_grows_with_each_part_of_the_run() {
        let base = estimate(&scenario(""), 1);
        let two = estimate(&scenario(""), 2);
        // a second worker holds a second replication in flight, and its share of the batch
        assert_eq!(two.workers, 2);
        assert!(two.total_bytes() - base.total_bytes() > base.worker_bytes);
        let shocked = estimate(
            &scenario("[[shock]]\nname = \"illness\"\nscope = \"member\"\nprobability = 0.1\n"),
            1,
        );
        assert_eq!(
            shocked.worker_bytes - base.worker_bytes,
            10_000 * SLOT_SHOCK_BYTES + 10 * 8
        );
        let longer = estimate(&scenario("[sweep]\ngroup_size = [4, 5]\n"), 1);
        assert!(longer.tally_bytes > 2 * base.tally_bytes - 1);
        // more workers than tasks never run at once
        assert_eq!(estimate(&scenario(""), 64).workers, 10);
    }

    #[test]
    fn a_run_above_the_limit_is_refused_with_its_estimate() {
        let e = estimate(&scenario(""), 1);
        assert!(check(&e, Some(1.0)).is_ok());
        let err = check(&e, Some(0.001)).unwrap_err().to_string();
        assert!(
            err.contains("GiB of memory, above the 0.00 GiB given by --max-memory"),
            "{err}"
        );
        assert!(err.contains(&format!("{:.3}", e.total_gib())), "{err}");
        assert!(
            check(&e, Some(-1.0))
                .unwrap_err()
                .to_string()
                .starts_with("--max-memory = -1")
        );
        assert!(check(&e, Some(f64::NAN)).is_err());
    }
}
