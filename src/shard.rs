//! Sharded runs: a run split into N parts that run anywhere (array tasks on a cluster), then merged
//! into exactly the files one run would have written.
//!
//! Shard I of N holds a contiguous block of replications, so merging is concatenation in shard
//! order and every pooled sum over replications is still formed in replication order; the pooled
//! per-cycle accumulators (the loss tail, the time-series sums) are exact and independent of
//! order. The merged figures agree with an unsharded run to the last bit. A shard's file is a complete tally file (see `checkpoint`),
//! written as the shard's checkpoint while it runs and renamed to its final name when done.

use crate::checkpoint::{self, Header, ShardId};
use crate::run::RunResults;
use crate::scenario::Scenario;
use crate::stats::ArmTally;
use std::path::{Path, PathBuf};

/// Replications of shard `index` (1-based) of `count` in a run of `replications`: the block
/// floor(R (I-1) / N) .. floor(R I / N).
pub fn range(index: u32, count: u32, replications: u32) -> std::ops::Range<u32> {
    let at = |i: u32| (u64::from(replications) * u64::from(i) / u64::from(count)) as u32;
    at(index - 1)..at(index)
}

/// Parses `I/N` as given to `--shard`, and checks it against the run's replications.
pub fn parse(text: &str, replications: u32) -> Result<ShardId, String> {
    let bad = || format!("--shard = \"{text}\" is not allowed: I/N with 1 <= I <= N, e.g. 3/8");
    let (i, n) = text.split_once('/').ok_or_else(bad)?;
    let index: u32 = i.trim().parse().map_err(|_| bad())?;
    let count: u32 = n.trim().parse().map_err(|_| bad())?;
    if index == 0 || index > count {
        return Err(bad());
    }
    if count > replications {
        return Err(format!(
            "--shard = \"{text}\" is not allowed: {count} shards for {replications} replications; \
             at most one shard per replication"
        ));
    }
    Ok(ShardId { index, count })
}

/// The finished shard's file name in its output directory.
pub fn file_name(shard: ShardId) -> String {
    format!("shard-{}-of-{}.jsonl", shard.index, shard.count)
}

/// The shard's checkpoint while it runs (renamed to [`file_name`] when complete).
pub fn checkpoint_name(shard: ShardId) -> String {
    format!("shard-{}-of-{}.checkpoint.jsonl", shard.index, shard.count)
}

/// Whether a file name is a finished shard's.
fn is_shard_file(name: &str) -> bool {
    name.starts_with("shard-") && name.ends_with(".jsonl") && !name.ends_with(".checkpoint.jsonl")
}

/// A merge of shards, ready to be reported like a run.
pub struct Merged {
    /// The run's scenario, rebuilt from the shards' text and overrides.
    pub scenario: Scenario,
    /// The scenario text.
    pub text: String,
    /// Where the scenario came from, as typed for the first shard.
    pub origin: String,
    /// The baseline arm (0-based).
    pub baseline: usize,
    /// Every replication of every arm, in replication order.
    pub results: RunResults,
    /// The shard files merged, in shard order.
    pub files: Vec<PathBuf>,
}

/// Reads every finished shard file in `dirs` and merges them. Refuses, with a message naming the
/// file: unreadable or damaged files, shards of another version, scenario (resolved, after
/// `--seed` and `--replications`) or shard count, duplicate and missing shards, and incomplete
/// shards.
///
/// The headers are checked first; then the shards are read one at a time, in shard order, and
/// merged as each is read. Replications beyond the last 1,024 of each arm wait in unnamed files in
/// `spill` when given (`stats::replication_list`), so merging many shards holds one shard's batch
/// at a time, not every shard.
pub fn merge(dirs: &[PathBuf], spill: Option<&Path>) -> Result<Merged, String> {
    let mut found: Vec<(PathBuf, Header)> = Vec::new();
    for dir in dirs {
        let entries = std::fs::read_dir(dir).map_err(|e| {
            format!(
                "cannot read shard directory {}: {}",
                dir.display(),
                e.to_string().to_lowercase()
            )
        })?;
        let mut names: Vec<String> = entries
            .filter_map(|e| e.ok())
            .map(|e| e.file_name().to_string_lossy().into_owned())
            .filter(|n| is_shard_file(n))
            .collect();
        if names.is_empty() {
            return Err(format!(
                "{} holds no shard file (shard-I-of-N.jsonl, written by run --shard I/N)",
                dir.display()
            ));
        }
        names.sort();
        for name in names {
            let path = dir.join(&name);
            let header = checkpoint::read_header(&path).map_err(|e| e.to_string())?;
            found.push((path, header));
        }
    }
    let (first_path, first) = &found[0];
    let shard_of = |path: &Path, h: &Header| {
        h.shard
            .ok_or_else(|| format!("{}: not a shard (a whole run's checkpoint)", path.display()))
    };
    let count = shard_of(first_path, first)?.count;
    let mut slots: Vec<Option<usize>> = vec![None; count as usize];
    for (i, (path, file)) in found.iter().enumerate() {
        let shard = shard_of(path, file)?;
        if let Some(why) = first.mismatch(file) {
            return Err(format!(
                "{} does not belong with {}: {why}",
                path.display(),
                first_path.display()
            ));
        }
        if shard.count != count {
            return Err(format!(
                "{} is shard {} of {}, but {} is of {count}: merge shards of one split",
                path.display(),
                shard.index,
                shard.count,
                first_path.display()
            ));
        }
        let expected = range(shard.index, count, file.replications);
        if (file.first..file.end) != expected {
            return Err(format!(
                "{}: shard {}/{count} covers replications {}..{}, expected {}..{}",
                path.display(),
                shard.index,
                file.first + 1,
                file.end,
                expected.start + 1,
                expected.end
            ));
        }
        let slot = &mut slots[shard.index as usize - 1];
        if let Some(j) = slot {
            return Err(format!(
                "shard {}/{count} appears twice: {} and {}",
                shard.index,
                found[*j].0.display(),
                path.display()
            ));
        }
        *slot = Some(i);
    }
    let missing: Vec<String> = slots
        .iter()
        .enumerate()
        .filter(|(_, s)| s.is_none())
        .map(|(i, _)| (i + 1).to_string())
        .collect();
    if !missing.is_empty() {
        return Err(format!(
            "shard{} {} of {count} missing: give every shard's directory",
            if missing.len() > 1 { "s" } else { "" },
            missing.join(", ")
        ));
    }
    let scenario = first.scenario().map_err(|e| format!("{}: {e}", first_path.display()))?;
    let mut arms = vec![ArmTally::for_scenario(&scenario); scenario.arms().len()];
    if let Some(dir) = spill {
        for arm in &mut arms {
            arm.replications.spill_to(dir);
        }
    }
    let mut files = Vec::new();
    for i in slots.into_iter().flatten() {
        let (path, header) = &found[i];
        let file = checkpoint::read_spilling(path, spill).map_err(|e| e.to_string())?;
        if !file.complete() {
            return Err(format!(
                "{}: shard {}/{count} is incomplete ({} of its {} replications)",
                path.display(),
                header.shard.map_or(0, |s| s.index),
                file.done_until - header.first,
                header.end - header.first
            ));
        }
        for (arm, tally) in arms.iter_mut().zip(file.arms) {
            // Shards are taken in order and hold consecutive blocks: this only appends.
            arm.merge(tally).map_err(|e| format!("{}: {e}", path.display()))?;
        }
        files.push(path.clone());
    }
    let header: &Header = first;
    Ok(Merged {
        text: header.scenario_text.clone(),
        origin: header.scenario_origin.clone(),
        baseline: header.baseline,
        scenario,
        results: RunResults::from_tallies(arms),
        files,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn shards_partition_the_replications_in_order() {
        for (r, n) in [(10, 3), (4, 4), (1000, 7), (5, 1)] {
            let mut next = 0;
            for i in 1..=n {
                let block = range(i, n, r);
                assert_eq!(block.start, next);
                assert!(!block.is_empty());
                next = block.end;
            }
            assert_eq!(next, r);
        }
    }

    #[test]
    fn shard_flags_are_checked() {
        assert_eq!(parse("2/4", 10), Ok(ShardId { index: 2, count: 4 }));
        for bad in ["0/4", "5/4", "2", "a/b", "2/0"] {
            assert!(parse(bad, 10).unwrap_err().contains("I/N"), "{bad}");
        }
        assert!(parse("1/11", 10).unwrap_err().contains("11 shards for 10 replications"));
    }
}
