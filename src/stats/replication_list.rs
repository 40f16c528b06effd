//! One arm's finished replications, in replication order: in memory, or for a long run mostly in
//! a file that every pass of the summary reads back.
//!
//! Why it exists: the between-replication intervals, the quantiles over replications, the paired
//! differences and replications.csv all need every replication's totals, about 0.5 kB each per
//! arm. Held in memory they made a run's memory grow with its replications (100,000 replications
//! of one small arm peaked at 64.5 MiB against 6.8 MiB for 1,000). A list told to spill
//! ([`ReplicationList::spill_to`]) keeps at most [`MEMORY_RECORDS`] replications in memory and
//! appends the rest, in replication order and bit-exact, to a file that is unlinked as soon as it
//! is created (a crash leaves nothing behind). Passes read it back in order, so every figure is
//! formed from the same values in the same order as from a list in memory: spilling never moves a
//! figure.
//!
//! Reading back can fail only if the disk fails under the run; the iterator then stops, and the
//! failure is kept ([`ReplicationList::read_failure`]) for the caller to refuse the results rather
//! than write figures from part of the replications.

use crate::stats::tally::{CycleRecord, ReplicationTally, Year};
use serde::{Deserialize, Deserializer, Serialize, Serializer};
use std::borrow::Cow;
use std::fs::File;
use std::path::{Path, PathBuf};
use std::sync::{Arc, OnceLock};

/// Replications a spilling list keeps in memory before it appends them to its file.
pub const MEMORY_RECORDS: usize = 1024;

/// Bytes read from the file at a time by a pass.
const READ_BYTES: usize = 256 * 1024;

/// An arm's replications in replication order (see the module comment).
#[derive(Default)]
pub struct ReplicationList {
    /// The first replications, on disk; `None` until the first spill.
    spilled: Option<Spilled>,
    /// The replications after those on disk.
    /// The replications after those on disk; shared with clones until either changes.
    memory: Arc<Vec<ReplicationTally>>,
    /// Where this list may create its file and whether it may append: set by
    /// [`ReplicationList::spill_to`], never on a clone (a clone shares the file's records so far).
    spill_dir: Option<PathBuf>,
    /// Why reading the file back failed, shared with clones.
    failure: Arc<OnceLock<String>>,
}

/// The records on disk: `records` of them in the file's first `bytes` bytes.
struct Spilled {
    file: Arc<File>,
    records: usize,
    bytes: u64,
    /// Replication index of the last record on disk.
    last: u32,
}

impl ReplicationList {
    /// An empty list held in memory.
    pub fn new() -> Self {
        Self::default()
    }

    /// Lets the list keep all but its last [`MEMORY_RECORDS`] replications in an unnamed file
    /// created in `dir` (from the next [`ReplicationList::flush`] on). Where files cannot be
    /// unlinked while open (not Unix), the list stays in memory.
    pub fn spill_to(&mut self, dir: &Path) {
        if cfg!(unix) {
            self.spill_dir = Some(dir.to_path_buf());
        }
    }

    /// Replications held, on disk and in memory.
    pub fn len(&self) -> usize {
        self.spilled.as_ref().map_or(0, |s| s.records) + self.memory.len()
    }

    /// Replications held on disk (the first ones).
    pub fn on_disk(&self) -> usize {
        self.spilled.as_ref().map_or(0, |s| s.records)
    }

    /// Whether no replication is held.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// The replications in order; those on disk are decoded as the pass reaches them.
    pub fn iter(&self) -> Iter<'_> {
        self.iter_reading(Parts::All)
    }

    /// As [`iter`](Self::iter), for passes that read only a replication's numbers: a replication
    /// read back from disk comes without its shortfall histogram and years (empty), which saves
    /// their decoding and allocation in every such pass. Replications in memory come whole.
    pub fn iter_numbers(&self) -> Iter<'_> {
        self.iter_reading(Parts::Numbers)
    }

    fn iter_reading(&self, parts: Parts) -> Iter<'_> {
        Iter {
            disk: self.spilled.as_ref().map(|s| DiskReader {
                parts,
                file: &s.file,
                offset: 0,
                end: s.bytes,
                buffer: Vec::new(),
                at: 0,
                remaining: s.records,
                failure: &self.failure,
            }),
            memory: self.memory.iter(),
        }
    }

    /// The first replication.
    pub fn first(&self) -> Option<Cow<'_, ReplicationTally>> {
        self.iter().next()
    }

    /// The `i`-th replication held (0-based, in replication order).
    pub fn get(&self, i: usize) -> Option<Cow<'_, ReplicationTally>> {
        let on_disk = self.len() - self.memory.len();
        match i.checked_sub(on_disk) {
            Some(m) => self.memory.get(m).map(Cow::Borrowed),
            None => self.iter().nth(i),
        }
    }

    /// Index of the last replication held.
    pub fn last_replication(&self) -> Option<u32> {
        self.memory
            .last()
            .map(|r| r.replication)
            .or_else(|| self.spilled.as_ref().map(|s| s.last))
    }

    /// Why reading the replications back from disk failed, if it did: the passes that met it saw
    /// only part of the list.
    pub fn read_failure(&self) -> Option<&str> {
        self.failure.get().map(String::as_str)
    }

    /// Adds a replication after every one held (the caller keeps the order).
    pub fn append(&mut self, tally: ReplicationTally) {
        debug_assert!(self.last_replication().is_none_or(|l| tally.replication > l));
        Arc::make_mut(&mut self.memory).push(tally);
    }

    /// Adds a replication where its index puts it. A list with replications on disk is read back
    /// into memory first if the new one does not come last (merges out of order are for shards,
    /// which do not spill).
    pub fn insert(&mut self, tally: ReplicationTally) {
        if self.last_replication().is_none_or(|l| tally.replication > l) {
            Arc::make_mut(&mut self.memory).push(tally);
            return;
        }
        if self.spilled.is_some() {
            self.memory = Arc::new(self.take_all());
        }
        let memory = Arc::make_mut(&mut self.memory);
        let at = memory.partition_point(|r| r.replication < tally.replication);
        memory.insert(at, tally);
    }

    /// Takes every replication into a vector in memory, leaving the list empty (its permission to
    /// spill stays).
    pub fn take_all(&mut self) -> Vec<ReplicationTally> {
        if self.spilled.is_none() {
            return Arc::unwrap_or_clone(std::mem::take(&mut self.memory));
        }
        let all: Vec<ReplicationTally> = self.iter().map(Cow::into_owned).collect();
        self.spilled = None;
        self.memory = Arc::default();
        all
    }

    /// Replaces the list's replications by `all` (in replication order), kept in memory until
    /// the next flush.
    pub fn set_all(&mut self, all: Vec<ReplicationTally>) {
        self.spilled = None;
        self.memory = Arc::new(all);
    }

    /// Appends the replications in memory to the file once there are more than
    /// [`MEMORY_RECORDS`], if the list may spill. A failed write leaves the list as it was.
    pub fn flush(&mut self) -> std::io::Result<()> {
        let Some(dir) = &self.spill_dir else {
            return Ok(());
        };
        if self.memory.len() <= MEMORY_RECORDS {
            return Ok(());
        }
        if self.spilled.is_none() {
            self.spilled = Some(Spilled {
                file: Arc::new(unnamed_file(dir)?),
                records: 0,
                bytes: 0,
                last: 0,
            });
        }
        let spilled = self.spilled.as_mut().expect("created above");
        let mut bytes = Vec::with_capacity(self.memory.len() * 512);
        for r in self.memory.iter() {
            let start = bytes.len();
            bytes.extend_from_slice(&[0; 4]);
            encode(r, &mut bytes);
            let length = (bytes.len() - start - 4) as u32;
            bytes[start..start + 4].copy_from_slice(&length.to_le_bytes());
        }
        write_at(&spilled.file, &bytes, spilled.bytes)?;
        spilled.bytes += bytes.len() as u64;
        spilled.records += self.memory.len();
        spilled.last = self.memory.last().expect("more than MEMORY_RECORDS").replication;
        self.memory = Arc::default();
        Ok(())
    }
}

/// A file in `dir` that has no name: created under a name no one else uses and unlinked at once.
fn unnamed_file(dir: &Path) -> std::io::Result<File> {
    static NEXT: std::sync::atomic::AtomicU64 = std::sync::atomic::AtomicU64::new(0);
    let n = NEXT.fetch_add(1, std::sync::atomic::Ordering::Relaxed);
    let path = dir.join(format!(".loancycle-replications-{}-{n}.tmp", std::process::id()));
    let file = std::fs::OpenOptions::new()
        .read(true)
        .write(true)
        .create_new(true)
        .open(&path)
        .map_err(|e| named(&path, e))?;
    std::fs::remove_file(&path).map_err(|e| named(&path, e))?;
    Ok(file)
}

fn named(path: &Path, e: std::io::Error) -> std::io::Error {
    std::io::Error::new(
        e.kind(),
        format!(
            "cannot keep replications in {}: {}",
            path.display(),
            e.to_string().to_lowercase()
        ),
    )
}

#[cfg(unix)]
fn write_at(file: &File, bytes: &[u8], offset: u64) -> std::io::Result<()> {
    use std::os::unix::fs::FileExt;
    file.write_all_at(bytes, offset).map_err(|e| {
        std::io::Error::new(
            e.kind(),
            format!("cannot keep replications on disk: {}", e.to_string().to_lowercase()),
        )
    })
}

#[cfg(not(unix))]
fn write_at(_: &File, _: &[u8], _: u64) -> std::io::Result<()> {
    Err(std::io::Error::other("replications are kept on disk only on unix"))
}

#[cfg(unix)]
fn read_at(file: &File, buffer: &mut [u8], offset: u64) -> std::io::Result<()> {
    use std::os::unix::fs::FileExt;
    file.read_exact_at(buffer, offset)
}

#[cfg(not(unix))]
fn read_at(_: &File, _: &mut [u8], _: u64) -> std::io::Result<()> {
    Err(std::io::Error::other("replications are kept on disk only on unix"))
}

/// A pass over a [`ReplicationList`]: borrowed replications from memory, decoded ones from disk.
pub struct Iter<'a> {
    disk: Option<DiskReader<'a>>,
    memory: std::slice::Iter<'a, ReplicationTally>,
}

/// What a pass decodes of each replication read back from disk.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Parts {
    All,
    /// The numbers only: no shortfall histogram, years or cycles.
    Numbers,
}

struct DiskReader<'a> {
    parts: Parts,
    file: &'a File,
    /// File offset of the byte after those read into `buffer`.
    offset: u64,
    end: u64,
    buffer: Vec<u8>,
    /// Position of the next record in `buffer`.
    at: usize,
    remaining: usize,
    failure: &'a OnceLock<String>,
}

impl DiskReader<'_> {
    /// Makes `buffer[at..at + n]` hold the next `n` bytes of the file.
    fn ensure(&mut self, n: usize) -> Result<(), String> {
        let held = self.buffer.len() - self.at;
        if held >= n {
            return Ok(());
        }
        self.buffer.drain(..self.at);
        self.at = 0;
        let want = (n - held).max(READ_BYTES).min((self.end - self.offset) as usize);
        if held + want < n {
            return Err("the file of replications ends inside a record".to_string());
        }
        let start = self.buffer.len();
        self.buffer.resize(start + want, 0);
        read_at(self.file, &mut self.buffer[start..], self.offset).map_err(|e| {
            format!(
                "cannot read back the replications kept on disk: {}",
                e.to_string().to_lowercase()
            )
        })?;
        self.offset += want as u64;
        Ok(())
    }

    fn next_record(&mut self) -> Result<ReplicationTally, String> {
        self.ensure(4)?;
        let length = u32::from_le_bytes(self.buffer[self.at..self.at + 4].try_into().expect("4 bytes")) as usize;
        self.at += 4;
        self.ensure(length)?;
        let record = decode_parts(&self.buffer[self.at..self.at + length], self.parts)?;
        self.at += length;
        Ok(record)
    }
}

impl<'a> Iterator for Iter<'a> {
    type Item = Cow<'a, ReplicationTally>;

    fn next(&mut self) -> Option<Self::Item> {
        if let Some(disk) = &mut self.disk {
            if disk.remaining > 0 {
                match disk.next_record() {
                    Ok(r) => {
                        disk.remaining -= 1;
                        return Some(Cow::Owned(r));
                    }
                    Err(e) => {
                        let _ = disk.failure.set(e);
                        self.memory = [].iter();
                        self.disk = None;
                        return None;
                    }
                }
            }
            self.disk = None;
        }
        self.memory.next().map(Cow::Borrowed)
    }

    fn size_hint(&self) -> (usize, Option<usize>) {
        let n = self.disk.as_ref().map_or(0, |d| d.remaining) + self.memory.len();
        (0, Some(n))
    }
}

impl<'a> IntoIterator for &'a ReplicationList {
    type Item = Cow<'a, ReplicationTally>;
    type IntoIter = Iter<'a>;

    fn into_iter(self) -> Iter<'a> {
        self.iter()
    }
}

impl Clone for ReplicationList {
    /// A list of the same replications that costs no copy: it shares the records on disk (which
    /// never change) and those in memory (copied only if either list changes), and never spills
    /// itself.
    fn clone(&self) -> Self {
        ReplicationList {
            spilled: self.spilled.as_ref().map(|s| Spilled {
                file: Arc::clone(&s.file),
                ..*s
            }),
            memory: Arc::clone(&self.memory),
            spill_dir: None,
            failure: Arc::clone(&self.failure),
        }
    }
}

impl PartialEq for ReplicationList {
    fn eq(&self, other: &Self) -> bool {
        self.len() == other.len() && self.iter().eq(other.iter())
    }
}

impl std::fmt::Debug for ReplicationList {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_list().entries(self.iter()).finish()
    }
}

impl From<Vec<ReplicationTally>> for ReplicationList {
    /// A list in memory of `all`, which must be in replication order.
    fn from(all: Vec<ReplicationTally>) -> Self {
        ReplicationList {
            memory: Arc::new(all),
            ..Default::default()
        }
    }
}

impl Serialize for ReplicationList {
    fn serialize<S: Serializer>(&self, serializer: S) -> Result<S::Ok, S::Error> {
        let done = serializer.collect_seq(self.iter())?;
        match self.read_failure() {
            Some(e) => Err(serde::ser::Error::custom(e)),
            None => Ok(done),
        }
    }
}

impl<'de> Deserialize<'de> for ReplicationList {
    fn deserialize<D: Deserializer<'de>>(deserializer: D) -> Result<Self, D::Error> {
        Vec::<ReplicationTally>::deserialize(deserializer).map(ReplicationList::from)
    }
}

/// Writes every field of `t` in little-endian order (floats as their bits, so decoding is exact).
fn encode(t: &ReplicationTally, out: &mut Vec<u8>) {
    // Destructured in full so that a new field cannot be forgotten here.
    let ReplicationTally {
        replication,
        group_cycles,
        groups_repaid,
        groups_rescued,
        shortfall_free_groups,
        member_loans,
        member_shortfalls,
        member_defaults,
        able_members,
        strategic_defaults,
        due,
        collected,
        disbursed,
        unpaid_principal,
        loss,
        recovered,
        served_slot_cycles,
        excluded_slot_cycles,
        waiting_slot_cycles,
        empty_slot_cycles,
        fees,
        cost_of_funds,
        operating_cost,
        shortfall_histogram,
        smallest_group_size,
        largest_group_size,
        exclusion_events,
        removals,
        entrants,
        clients_reached,
        removed_slot_cycles,
        cycles,
        lent_cycles,
        worst_cycle_loss,
        years,
    } = t;
    let u32s = [*replication, *smallest_group_size, *largest_group_size, *lent_cycles];
    let u64s = [
        *group_cycles,
        *groups_repaid,
        *groups_rescued,
        *shortfall_free_groups,
        *member_loans,
        *member_shortfalls,
        *member_defaults,
        *able_members,
        *strategic_defaults,
        *served_slot_cycles,
        *excluded_slot_cycles,
        *waiting_slot_cycles,
        *empty_slot_cycles,
        *exclusion_events,
        *removals,
        *entrants,
        *clients_reached,
        *removed_slot_cycles,
    ];
    let f64s = [
        *due,
        *collected,
        *disbursed,
        *unpaid_principal,
        *loss,
        *recovered,
        *fees,
        *cost_of_funds,
        *operating_cost,
    ];
    u32s.iter().for_each(|x| out.extend_from_slice(&x.to_le_bytes()));
    u64s.iter().for_each(|x| out.extend_from_slice(&x.to_le_bytes()));
    f64s.iter()
        .for_each(|x| out.extend_from_slice(&x.to_bits().to_le_bytes()));
    out.push(u8::from(worst_cycle_loss.is_some()));
    out.extend_from_slice(&worst_cycle_loss.unwrap_or(0.0).to_bits().to_le_bytes());
    out.extend_from_slice(&(shortfall_histogram.len() as u64).to_le_bytes());
    shortfall_histogram
        .iter()
        .for_each(|x| out.extend_from_slice(&x.to_le_bytes()));
    out.extend_from_slice(&(years.len() as u64).to_le_bytes());
    for y in years {
        out.extend_from_slice(&y.loss.to_bits().to_le_bytes());
        out.extend_from_slice(&y.principal_outstanding.to_bits().to_le_bytes());
    }
    out.extend_from_slice(&(cycles.len() as u64).to_le_bytes());
    for c in cycles {
        let CycleRecord {
            served,
            excluded,
            groups,
            groups_repaid,
            shortfalls,
            loss,
            disbursed,
        } = c;
        for x in [served, excluded, groups, groups_repaid, shortfalls] {
            out.extend_from_slice(&x.to_le_bytes());
        }
        out.extend_from_slice(&loss.to_bits().to_le_bytes());
        out.extend_from_slice(&disbursed.to_bits().to_le_bytes());
    }
}

/// Reads what [`encode`] wrote.
#[cfg(test)]
fn decode(bytes: &[u8]) -> Result<ReplicationTally, String> {
    decode_parts(bytes, Parts::All)
}

fn decode_parts(bytes: &[u8], parts: Parts) -> Result<ReplicationTally, String> {
    let whole = parts == Parts::All;
    let mut at = 0usize;
    let mut take = |n: usize| -> Result<&[u8], String> {
        let slice = bytes
            .get(at..at + n)
            .ok_or_else(|| "a record of the replications kept on disk is cut short".to_string())?;
        at += n;
        Ok(slice)
    };
    macro_rules! read {
        (u32) => {
            u32::from_le_bytes(take(4)?.try_into().expect("4 bytes"))
        };
        (u64) => {
            u64::from_le_bytes(take(8)?.try_into().expect("8 bytes"))
        };
        (f64) => {
            f64::from_bits(read!(u64))
        };
    }
    let replication = read!(u32);
    let smallest_group_size = read!(u32);
    let largest_group_size = read!(u32);
    let lent_cycles = read!(u32);
    let mut u64s = [0u64; 18];
    for x in &mut u64s {
        *x = read!(u64);
    }
    let mut f64s = [0f64; 9];
    for x in &mut f64s {
        *x = read!(f64);
    }
    let has_worst = take(1)?[0] != 0;
    let worst = read!(f64);
    // A list part: `count` items of `size` bytes, each read by `item`, or skipped (left empty)
    // when only the numbers are wanted. Lengths are checked against what is left before anything
    // is reserved for them.
    macro_rules! list {
        ($count:expr, $size:expr, $item:expr) => {{
            let count = $count;
            let mut list = Vec::new();
            if whole {
                list.reserve(count.min(bytes.len() / $size));
                for _ in 0..count {
                    list.push($item);
                }
            } else {
                take(count.checked_mul($size).ok_or("a record's list length overflows")?)?;
            }
            list
        }};
    }
    let shortfall_histogram = list!(read!(u64) as usize, 8, read!(u64));
    let years = list!(
        read!(u64) as usize,
        16,
        Year {
            loss: read!(f64),
            principal_outstanding: read!(f64),
        }
    );
    let cycles = list!(
        read!(u64) as usize,
        36,
        CycleRecord {
            served: read!(u32),
            excluded: read!(u32),
            groups: read!(u32),
            groups_repaid: read!(u32),
            shortfalls: read!(u32),
            loss: read!(f64),
            disbursed: read!(f64),
        }
    );
    let [
        group_cycles,
        groups_repaid,
        groups_rescued,
        shortfall_free_groups,
        member_loans,
        member_shortfalls,
        member_defaults,
        able_members,
        strategic_defaults,
        served_slot_cycles,
        excluded_slot_cycles,
        waiting_slot_cycles,
        empty_slot_cycles,
        exclusion_events,
        removals,
        entrants,
        clients_reached,
        removed_slot_cycles,
    ] = u64s;
    let [
        due,
        collected,
        disbursed,
        unpaid_principal,
        loss,
        recovered,
        fees,
        cost_of_funds,
        operating_cost,
    ] = f64s;
    Ok(ReplicationTally {
        replication,
        group_cycles,
        groups_repaid,
        groups_rescued,
        shortfall_free_groups,
        member_loans,
        member_shortfalls,
        member_defaults,
        able_members,
        strategic_defaults,
        due,
        collected,
        disbursed,
        unpaid_principal,
        loss,
        recovered,
        served_slot_cycles,
        excluded_slot_cycles,
        waiting_slot_cycles,
        empty_slot_cycles,
        fees,
        cost_of_funds,
        operating_cost,
        shortfall_histogram,
        smallest_group_size,
        largest_group_size,
        exclusion_events,
        removals,
        entrants,
        clients_reached,
        removed_slot_cycles,
        cycles,
        lent_cycles,
        worst_cycle_loss: has_worst.then_some(worst),
        years,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A replication with every field set, each to a value no other field has.
    fn full(replication: u32) -> ReplicationTally {
        let x = f64::from(replication);
        ReplicationTally {
            replication,
            group_cycles: 11,
            groups_repaid: 12,
            groups_rescued: 13,
            shortfall_free_groups: 14,
            member_loans: 15,
            member_shortfalls: 16,
            member_defaults: 17,
            able_members: 18,
            strategic_defaults: 19,
            due: 1.5 + x,
            collected: 2.5,
            disbursed: 3.5,
            unpaid_principal: 4.5,
            loss: 0.1 + x / 3.0,
            recovered: -0.0,
            served_slot_cycles: 20,
            excluded_slot_cycles: 21,
            waiting_slot_cycles: 22,
            empty_slot_cycles: 23,
            fees: 6.5,
            cost_of_funds: 7.5,
            operating_cost: f64::MIN_POSITIVE,
            shortfall_histogram: vec![1, 2, 3, u64::MAX],
            smallest_group_size: 2,
            largest_group_size: 3,
            exclusion_events: 24,
            removals: 25,
            entrants: 26,
            clients_reached: 27,
            removed_slot_cycles: 28,
            cycles: vec![CycleRecord {
                served: 1,
                excluded: 2,
                groups: 3,
                groups_repaid: 4,
                shortfalls: 5,
                loss: 0.25,
                disbursed: 8.0,
            }],
            lent_cycles: 29,
            worst_cycle_loss: replication.is_multiple_of(2).then_some(0.3 + x),
            years: vec![
                Year {
                    loss: 1.0 / 3.0,
                    principal_outstanding: 9.0,
                };
                (replication % 3) as usize
            ],
        }
    }

    #[test]
    fn a_record_decodes_to_the_replication_encoded_bit_for_bit() {
        for r in 0..6 {
            let t = full(r);
            let mut bytes = Vec::new();
            encode(&t, &mut bytes);
            let back = decode(&bytes).unwrap();
            assert_eq!(back, t);
            // -0.0 == 0.0, so the bits are compared as well
            assert_eq!(back.recovered.to_bits(), t.recovered.to_bits());
            assert!(decode(&bytes[..bytes.len() - 1]).is_err());
            // the numbers alone: the same record without its histogram, years and cycles
            let numbers = decode_parts(&bytes, Parts::Numbers).unwrap();
            let mut expected = t.clone();
            expected.shortfall_histogram.clear();
            expected.years.clear();
            expected.cycles.clear();
            assert_eq!(numbers, expected);
            assert!(decode_parts(&bytes[..bytes.len() - 1], Parts::Numbers).is_err());
        }
    }

    #[test]
    fn a_spilled_list_reads_back_what_a_list_in_memory_holds() {
        let dir = std::env::temp_dir().join(format!("loancycle-list-test-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let n = 3 * MEMORY_RECORDS as u32 + 17;
        let in_memory = ReplicationList::from((0..n).map(full).collect::<Vec<_>>());
        let mut spilled = ReplicationList::new();
        spilled.spill_to(&dir);
        for r in 0..n {
            spilled.append(full(r));
            spilled.flush().unwrap();
        }
        assert_eq!(spilled.len(), n as usize);
        if cfg!(unix) {
            assert!(spilled.memory.len() <= MEMORY_RECORDS, "most replications went to disk");
            // the file has no name: the directory holds nothing
            assert_eq!(std::fs::read_dir(&dir).unwrap().count(), 0);
        }
        assert_eq!(spilled, in_memory);
        assert_eq!(spilled.last_replication(), Some(n - 1));
        // two passes at once, and a clone that shares the file
        let copy = spilled.clone();
        assert!(spilled.iter().zip(copy.iter()).all(|(a, b)| a == b));
        assert_eq!(
            serde_json::to_string(&spilled).unwrap(),
            serde_json::to_string(&in_memory).unwrap()
        );
        // an insertion out of order reads the list back into memory, in order
        let mut reordered = spilled.clone();
        let mut taken = reordered.take_all();
        let moved = taken.remove(5);
        reordered.set_all(taken);
        reordered.insert(moved);
        assert_eq!(reordered, in_memory);
        assert!(spilled.read_failure().is_none());
        std::fs::remove_dir_all(&dir).unwrap();
    }
}
