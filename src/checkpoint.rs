//! Tally files: finished replications on disk, for runs that outlive one process.
//!
//! A checkpoint (`run` writes one as it goes, so an interrupted run can be resumed) and a shard (a
//! part of a run made on another machine, for `merge`) are the same file: one JSON header line
//! that pins down the run, then one line per finished batch holding, per arm, what the batch added
//! to the arm's tally (`ArmTally::merge_part`): the batch's per-replication tallies serialised
//! whole (`ReplicationTally` through serde, so every figure any output needs is there, including
//! figures added to the tally later), but not their per-cycle records; instead the batch's sums
//! for the time series and those of its per-cycle loss rates that entered the arm's upper tail.
//! Merging the lines in order rebuilds the tallies exactly, and a file grows with replications,
//! not with replications x cycles. Batches are appended in replication order, so the file always
//! holds a prefix of its replication range; a last line cut short by a crash is dropped on
//! reading. Floats are written with enough digits to read back bit for bit.

use crate::report::sha256_hex;
use crate::run::{Batch, RunResults};
use crate::scenario::{Overrides, Scenario};
use crate::stats::ArmTally;
use serde::{Deserialize, Serialize};
use std::io::{BufRead, Seek, Write};
use std::path::{Path, PathBuf};

/// The format tag of the header line; a reader refuses any other.
pub const FORMAT: &str = "loancycle-tallies/2";

/// Name of an unsharded run's checkpoint in its output directory.
pub const CHECKPOINT_FILE: &str = "checkpoint.jsonl";

/// The tool and version that write (and must read) a tally file.
pub fn tool_version() -> String {
    format!("loancycle {}", env!("CARGO_PKG_VERSION"))
}

/// Shard I of N (I counts from 1).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct ShardId {
    /// This shard, 1..=count.
    pub index: u32,
    /// How many shards the run is split into.
    pub count: u32,
}

/// The header line: everything needed to check that two files belong to the same run and to
/// rebuild the run's scenario.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Header {
    /// Always [`FORMAT`].
    pub format: String,
    /// The writing tool and version.
    pub tool: String,
    /// SHA-256 of the scenario text.
    pub scenario_sha256: String,
    /// Where the scenario came from, as typed.
    pub scenario_origin: String,
    /// The scenario text as read.
    pub scenario_text: String,
    /// The seed in force (after `--seed`).
    pub seed: u64,
    /// The replications in force (after `--replications`).
    pub replications: u32,
    /// The resolved scenario, as summary.json shows it; compared field by field.
    pub scenario: serde_json::Value,
    /// The arm differences are taken against (0-based).
    pub baseline: usize,
    /// The shard, or `None` for a whole run.
    pub shard: Option<ShardId>,
    /// First replication of the file's range (0-based).
    pub first: u32,
    /// One past the last replication of the range.
    pub end: u32,
}

impl Header {
    /// The header of a run of `scenario` over replications `range`.
    pub fn new(
        scenario: &Scenario,
        text: &str,
        origin: &str,
        baseline: usize,
        shard: Option<ShardId>,
        range: std::ops::Range<u32>,
    ) -> Header {
        Header {
            format: FORMAT.to_string(),
            tool: tool_version(),
            scenario_sha256: sha256_hex(text),
            scenario_origin: origin.to_string(),
            scenario_text: text.to_string(),
            seed: scenario.seed(),
            replications: scenario.replications(),
            scenario: resolved(scenario),
            baseline,
            shard,
            first: range.start,
            end: range.end,
        }
    }

    /// Rebuilds the scenario from the stored text and overrides, and checks it resolves to the
    /// stored scenario (it does unless validation changed, which the version check rules out).
    pub fn scenario(&self) -> Result<Scenario, String> {
        let overrides = Overrides {
            replications: Some(self.replications),
            seed: Some(self.seed),
        };
        let scenario = Scenario::from_toml_str_with(&self.scenario_text, &self.scenario_origin, &overrides)
            .map_err(|e| format!("its scenario no longer validates: {e}"))?;
        match first_difference(&self.scenario, &resolved(&scenario)) {
            None => Ok(scenario),
            Some(path) => Err(format!("its scenario resolves differently now ({path} differs)")),
        }
    }

    /// Why a file with header `other` does not belong to the same run as this one (`None` when it
    /// does). Compares the tool version, the resolved scenario (after `--seed` and
    /// `--replications`), the scenario text and the baseline; shards are compared by the caller.
    pub fn mismatch(&self, other: &Header) -> Option<String> {
        if self.tool != other.tool {
            return Some(format!("it was written by {}, this is {}", other.tool, self.tool));
        }
        if let Some(path) = first_difference(&self.scenario, &other.scenario) {
            return Some(format!(
                "the resolved scenario differs ({path}: {} here, {} there)",
                value_at(&self.scenario, &path),
                value_at(&other.scenario, &path)
            ));
        }
        if self.scenario_sha256 != other.scenario_sha256 {
            return Some("the scenario file's text differs (SHA-256), though it resolves the same".to_string());
        }
        if self.baseline != other.baseline {
            return Some(format!(
                "the baseline arm differs (arm {} here, arm {} there)",
                self.baseline + 1,
                other.baseline + 1
            ));
        }
        None
    }
}

/// The resolved scenario as a JSON value.
pub fn resolved(scenario: &Scenario) -> serde_json::Value {
    serde_json::to_value(scenario).expect("a scenario serialises")
}

/// The path (`a.b[2].c`) of the first place two JSON values differ, `None` when equal.
pub fn first_difference(a: &serde_json::Value, b: &serde_json::Value) -> Option<String> {
    use serde_json::Value;
    match (a, b) {
        (Value::Object(x), Value::Object(y)) => {
            for (k, v) in x {
                match y.get(k) {
                    None => return Some(k.clone()),
                    Some(w) => {
                        if let Some(p) = first_difference(v, w) {
                            return Some(if p.is_empty() { k.clone() } else { join(k, &p) });
                        }
                    }
                }
            }
            y.keys().find(|k| !x.contains_key(*k)).cloned()
        }
        (Value::Array(x), Value::Array(y)) => {
            for (i, (v, w)) in x.iter().zip(y).enumerate() {
                if let Some(p) = first_difference(v, w) {
                    return Some(format!(
                        "[{i}]{}",
                        if p.starts_with('[') || p.is_empty() {
                            p
                        } else {
                            format!(".{p}")
                        }
                    ));
                }
            }
            (x.len() != y.len()).then(|| format!("[{}]", x.len().min(y.len())))
        }
        _ => (a != b).then(String::new),
    }
}

fn join(key: &str, rest: &str) -> String {
    if rest.starts_with('[') {
        format!("{key}{rest}")
    } else {
        format!("{key}.{rest}")
    }
}

/// The value at a path from [`first_difference`], shortened for a message.
fn value_at(value: &serde_json::Value, path: &str) -> String {
    let mut v = Some(value);
    for part in path.split('.') {
        let (key, indices) = part.split_once('[').map_or((part, ""), |(k, i)| (k, i));
        if !key.is_empty() {
            v = v.and_then(|x| x.get(key));
        }
        for i in indices.split('[').filter(|s| !s.is_empty()) {
            v = v.and_then(|x| x.get(i.trim_end_matches(']').parse::<usize>().ok()?));
        }
    }
    let text = v.map_or_else(|| "absent".to_string(), |x| x.to_string());
    if text.len() > 60 {
        format!("{}...", &text[..text.floor_char_boundary(57)])
    } else {
        text
    }
}

/// One batch line.
#[derive(Serialize, Deserialize)]
struct BatchLine {
    first: u32,
    end: u32,
    arms: Vec<ArmTally>,
}

/// A tally file read back: its header and the per-arm tallies of `header.first..done_until`.
#[derive(Debug, Clone)]
pub struct TallyFile {
    /// The header line.
    pub header: Header,
    /// Per-arm tallies of the finished replications, in replication order.
    pub arms: Vec<ArmTally>,
    /// One past the last finished replication.
    pub done_until: u32,
    /// Byte length of the complete lines (where appending continues).
    valid_bytes: u64,
}

impl TallyFile {
    /// Whether every replication of the file's range is there.
    pub fn complete(&self) -> bool {
        self.done_until == self.header.end
    }

    /// The finished replications as run results.
    pub fn results(&self) -> RunResults {
        RunResults::from_tallies(self.arms.clone())
    }
}

/// Why a tally file could not be used.
#[derive(Debug, thiserror::Error)]
pub enum CheckpointError {
    /// The file is not a tally file of this format, or is damaged before its last line.
    #[error("{path}: line {line}: {reason}")]
    Malformed { path: String, line: usize, reason: String },
    /// The file could not be read or written.
    #[error("cannot {action} {path}: {reason}")]
    Io {
        action: &'static str,
        path: String,
        reason: String,
    },
}

fn io(action: &'static str, path: &Path) -> impl FnOnce(std::io::Error) -> CheckpointError {
    let path = path.display().to_string();
    move |e| CheckpointError::Io {
        action,
        path,
        reason: e.to_string().to_lowercase(),
    }
}

/// Reads a tally file. A last line without its newline (a write cut short) is ignored; any other
/// damaged line is refused, naming it.
pub fn read(path: &Path) -> Result<TallyFile, CheckpointError> {
    read_spilling(path, None)
}

/// Reads only the header line of a tally file (the checks of [`read`] on it).
pub fn read_header(path: &Path) -> Result<Header, CheckpointError> {
    let file = std::fs::File::open(path).map_err(io("read", path))?;
    let mut reader = std::io::BufReader::new(file);
    Ok(header_line(path, &mut reader, &mut String::new())?.0)
}

/// The header line of the tally file `path` read through `reader`, and its length in bytes.
fn header_line(path: &Path, reader: &mut impl BufRead, buf: &mut String) -> Result<(Header, u64), CheckpointError> {
    let malformed = |line: usize, reason: String| CheckpointError::Malformed {
        path: path.display().to_string(),
        line,
        reason,
    };
    let n = reader.read_line(buf).map_err(io("read", path))?;
    if n == 0 || !buf.ends_with('\n') {
        return Err(malformed(1, "no header line: not a loancycle tally file".to_string()));
    }
    let value: serde_json::Value =
        serde_json::from_str(buf).map_err(|e| malformed(1, format!("not a loancycle tally file ({e})")))?;
    if value.get("format").and_then(|f| f.as_str()) != Some(FORMAT) {
        return Err(malformed(1, format!("not a tally file of format {FORMAT}")));
    }
    let header: Header = serde_json::from_value(value).map_err(|e| malformed(1, format!("a damaged header ({e})")))?;
    Ok((header, n as u64))
}

/// As [`read`], keeping the replications read beyond the last 1,024 of each arm in unnamed files
/// in `spill` when given (`stats::replication_list`), so that reading a large checkpoint or shard
/// holds a batch and not the whole file.
pub fn read_spilling(path: &Path, spill: Option<&Path>) -> Result<TallyFile, CheckpointError> {
    let file = std::fs::File::open(path).map_err(io("read", path))?;
    let mut reader = std::io::BufReader::new(file);
    let malformed = |line: usize, reason: String| CheckpointError::Malformed {
        path: path.display().to_string(),
        line,
        reason,
    };
    let mut buf = String::new();
    let (header, header_bytes) = header_line(path, &mut reader, &mut buf)?;
    let mut valid_bytes = header_bytes;
    let arms = header
        .scenario
        .get("arms")
        .and_then(|a| a.as_array())
        .map_or(0, Vec::len);
    let mut tallies: Vec<ArmTally> = vec![ArmTally::default(); arms];
    let mut done_until = header.first;
    let mut line = 1;
    loop {
        buf.clear();
        let n = reader.read_line(&mut buf).map_err(io("read", path))?;
        line += 1;
        if n == 0 || !buf.ends_with('\n') {
            // The end, or a last batch cut short by a crash: the batches before it stand.
            break;
        }
        let batch: BatchLine =
            serde_json::from_str(&buf).map_err(|e| malformed(line, format!("a damaged batch ({e})")))?;
        let continues = batch.arms.len() == arms
            && batch
                .arms
                .iter()
                .all(|a| a.replications.iter().map(|t| t.replication).eq(batch.first..batch.end));
        if batch.first != done_until || batch.end > header.end || batch.end <= batch.first || !continues {
            return Err(malformed(
                line,
                format!(
                    "batch of replications {}..{} does not continue replications {}..{} of {} arms",
                    batch.first + 1,
                    batch.end,
                    header.first + 1,
                    done_until,
                    arms
                ),
            ));
        }
        if done_until == header.first {
            // the first batch sets the tallies' year and tail size
            tallies = batch.arms.iter().map(ArmTally::empty_like).collect();
            if let Some(dir) = spill {
                for t in &mut tallies {
                    t.replications.spill_to(dir);
                }
            }
        }
        for (tally, part) in tallies.iter_mut().zip(batch.arms) {
            tally
                .merge(part)
                .map_err(|e| malformed(line, format!("a batch that does not fit: {e}")))?;
        }
        done_until = batch.end;
        valid_bytes += n as u64;
    }
    Ok(TallyFile {
        header,
        arms: tallies,
        done_until,
        valid_bytes,
    })
}

/// An open tally file that batches are appended to as they finish.
pub struct Writer {
    file: std::fs::File,
    path: PathBuf,
    synced: std::time::Instant,
}

/// How often batches are forced to disk. Each append reaches the operating system at once, so a
/// killed process loses nothing; syncing bounds what a power cut loses without making runs of
/// many small batches wait on the disk after each one.
const SYNC_INTERVAL: std::time::Duration = std::time::Duration::from_secs(1);

impl Writer {
    /// Starts a new file at `path` holding only `header`: written under a temporary name and
    /// renamed, so `path` is never a file without its header.
    pub fn create(path: &Path, header: &Header) -> Result<Writer, CheckpointError> {
        let tmp = temporary(path);
        let mut line = serde_json::to_vec(header).expect("a header serialises");
        line.push(b'\n');
        std::fs::write(&tmp, &line).map_err(|e| {
            let _ = std::fs::remove_file(&tmp);
            io("write", &tmp)(e)
        })?;
        std::fs::rename(&tmp, path).map_err(|e| {
            let _ = std::fs::remove_file(&tmp);
            io("write", path)(e)
        })?;
        let file = std::fs::OpenOptions::new()
            .append(true)
            .open(path)
            .map_err(io("write", path))?;
        Ok(Writer {
            file,
            path: path.to_path_buf(),
            synced: std::time::Instant::now(),
        })
    }

    /// Continues the file read as `read`, dropping a last line cut short.
    pub fn resume(path: &Path, read: &TallyFile) -> Result<Writer, CheckpointError> {
        let mut file = std::fs::OpenOptions::new()
            .write(true)
            .open(path)
            .map_err(io("write", path))?;
        file.set_len(read.valid_bytes).map_err(io("write", path))?;
        file.seek(std::io::SeekFrom::End(0)).map_err(io("write", path))?;
        Ok(Writer {
            file,
            path: path.to_path_buf(),
            synced: std::time::Instant::now(),
        })
    }

    /// Appends one finished batch, in one write; syncs to disk at most every [`SYNC_INTERVAL`].
    pub fn append(&mut self, batch: &Batch) -> Result<(), CheckpointError> {
        let mut line = serde_json::to_vec(&BatchLineRef {
            first: batch.first,
            end: batch.end,
            arms: &batch.arms,
        })
        .expect("tallies serialise");
        line.push(b'\n');
        self.file.write_all(&line).map_err(io("write", &self.path))?;
        if self.synced.elapsed() >= SYNC_INTERVAL {
            self.file.sync_data().map_err(io("write", &self.path))?;
            self.synced = std::time::Instant::now();
        }
        Ok(())
    }

    /// Forces every appended batch to disk (before the run reports what it kept).
    pub fn sync(&mut self) -> Result<(), CheckpointError> {
        self.file.sync_data().map_err(io("write", &self.path))
    }

    /// The file's path.
    pub fn path(&self) -> &Path {
        &self.path
    }
}

/// Why a run could not open its checkpoint.
#[derive(Debug, thiserror::Error)]
pub enum OpenError {
    /// `--resume` without a checkpoint, or with one of another run: the user's input is at fault.
    #[error("{0}")]
    Refused(String),
    /// The file could not be read or written.
    #[error(transparent)]
    Failed(#[from] CheckpointError),
}

/// Opens the checkpoint at `path` for a run described by `header`. A fresh run starts a new file;
/// with `resume` the existing file must belong to the same run (same version, resolved scenario,
/// baseline, shard and range), and its finished replications are returned to continue from (kept
/// on disk in `spill` beyond the last 1,024 of each arm, when given).
pub fn open(
    path: &Path,
    header: &Header,
    resume: bool,
    spill: Option<&Path>,
) -> Result<(Writer, Vec<ArmTally>), OpenError> {
    if !resume {
        return Ok((Writer::create(path, header)?, Vec::new()));
    }
    if !path.exists() {
        return Err(OpenError::Refused(format!(
            "--resume: there is no checkpoint {} to continue from; run without --resume",
            path.display()
        )));
    }
    let found = read_spilling(path, spill).map_err(|e| match e {
        CheckpointError::Malformed { .. } => OpenError::Refused(format!("--resume: {e}")),
        other => OpenError::Failed(other),
    })?;
    let why = header.mismatch(&found.header).or_else(|| {
        (found.header.shard != header.shard || (found.header.first, found.header.end) != (header.first, header.end))
            .then(|| "it is the checkpoint of another shard or replication range".to_string())
    });
    if let Some(why) = why {
        return Err(OpenError::Refused(format!(
            "--resume: the checkpoint {} is of another run: {why}; run without --resume (and with --force) to start again",
            path.display()
        )));
    }
    let writer = Writer::resume(path, &found)?;
    Ok((writer, found.arms))
}

#[derive(Serialize)]
struct BatchLineRef<'a> {
    first: u32,
    end: u32,
    arms: &'a [ArmTally],
}

fn temporary(path: &Path) -> PathBuf {
    let name = path
        .file_name()
        .map_or_else(String::new, |n| n.to_string_lossy().into_owned());
    path.with_file_name(format!(".{name}.partial-{}", std::process::id()))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stats::ReplicationTally;

    #[test]
    fn differences_are_named_by_path() {
        let a = serde_json::json!({"seed": 1, "arms": [{"policy": {"k": 5}}, {"policy": {"k": 6}}]});
        let mut b = a.clone();
        assert_eq!(first_difference(&a, &b), None);
        b["arms"][1]["policy"]["k"] = 7.into();
        assert_eq!(first_difference(&a, &b).as_deref(), Some("arms[1].policy.k"));
        assert_eq!(value_at(&b, "arms[1].policy.k"), "7");
        b["arms"][1]["policy"]["k"] = 6.into();
        b["seed"] = 2.into();
        assert_eq!(first_difference(&a, &b).as_deref(), Some("seed"));
        assert_eq!(value_at(&a, "seed"), "1");
    }

    #[test]
    fn floats_read_back_bit_for_bit() {
        let mut t = ReplicationTally::new(3, 5, 2);
        t.loss = 0.1 + 0.2;
        t.disbursed = 1.0 / 3.0 * 7e5;
        t.due = f64::MIN_POSITIVE * 3.3;
        let line = serde_json::to_string(&t).unwrap();
        let back: ReplicationTally = serde_json::from_str(&line).unwrap();
        assert_eq!(back.loss.to_bits(), t.loss.to_bits());
        assert_eq!(back.disbursed.to_bits(), t.disbursed.to_bits());
        assert_eq!(back.due.to_bits(), t.due.to_bits());
    }
}
