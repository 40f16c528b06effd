//! A finished run read back from its own files, so comparisons and selections can be redone
//! without simulating again: summary.json gives the arms (labels, swept values, group sizes) in
//! order, and replications.csv gives each replication's numerators and denominators.

use crate::stats::ArmTally;
use crate::stats::compare::ComparedArm;
use crate::stats::replications::ReplicationFigures;
use serde_json::Value;
use std::path::{Path, PathBuf};

/// One arm of a stored run.
#[derive(Debug, Clone)]
pub struct StoredArm {
    /// The arm's label.
    pub label: String,
    /// Its group size.
    pub group_size: u32,
    /// Its swept values as (path, value as labels show it), in `[sweep]` order.
    pub swept: Vec<(String, String)>,
    /// Its replications, rebuilt from replications.csv.
    pub tally: ArmTally,
}

/// A run directory's arms and replications.
#[derive(Debug, Clone)]
pub struct StoredRun {
    /// The directory read.
    pub dir: PathBuf,
    /// The arms, in arm order.
    pub arms: Vec<StoredArm>,
}

/// Why a run directory cannot be read; always the user's input at fault (exit 2).
#[derive(Debug, thiserror::Error)]
#[error("{path}: {reason}")]
pub struct StoredError {
    /// The file at fault.
    pub path: String,
    /// What is wrong with it, and what is needed.
    pub reason: String,
}

fn bad(path: &Path, reason: impl Into<String>) -> StoredError {
    StoredError {
        path: path.display().to_string(),
        reason: reason.into(),
    }
}

impl StoredRun {
    /// Reads DIR/summary.json and DIR/replications.csv.
    pub fn read(dir: &Path) -> Result<StoredRun, StoredError> {
        let json_path = dir.join("summary.json");
        let text = std::fs::read_to_string(&json_path).map_err(|e| {
            bad(
                &json_path,
                format!(
                    "cannot be read ({}); give the output directory of a finished run",
                    e.to_string().to_lowercase()
                ),
            )
        })?;
        let v: Value = serde_json::from_str(&text).map_err(|e| bad(&json_path, format!("is not valid JSON ({e})")))?;
        let list = v
            .get("arms")
            .and_then(Value::as_array)
            .ok_or_else(|| bad(&json_path, "has no `arms` list; is it a run's summary.json?"))?;
        let mut arms = Vec::with_capacity(list.len());
        for (i, a) in list.iter().enumerate() {
            let label = a
                .get("label")
                .and_then(Value::as_str)
                .ok_or_else(|| bad(&json_path, format!("arm {} has no label", i + 1)))?;
            let group_size = a
                .pointer("/policy/group_size")
                .and_then(Value::as_u64)
                .and_then(|k| u32::try_from(k).ok())
                .ok_or_else(|| bad(&json_path, format!("arm {label} has no policy.group_size")))?;
            let swept = a
                .get("swept")
                .and_then(Value::as_array)
                .map(|s| {
                    s.iter()
                        .filter_map(|x| {
                            Some((
                                x.get("path")?.as_str()?.to_string(),
                                x.get("value")?.as_str()?.to_string(),
                            ))
                        })
                        .collect()
                })
                .unwrap_or_default();
            arms.push(StoredArm {
                label: label.to_string(),
                group_size,
                swept,
                tally: ArmTally::default(),
            });
        }
        let csv_path = dir.join("replications.csv");
        let mut reader = csv::Reader::from_path(&csv_path).map_err(|e| {
            bad(
                &csv_path,
                format!("cannot be read ({e}); it is written by `run` from this version on"),
            )
        })?;
        // The figures deserialise by column name (the rate columns beside them are ignored); the arm's
        // label is read from its own column, since csv cannot flatten a struct holding numbers.
        let headers = reader
            .headers()
            .map_err(|e| bad(&csv_path, format!("header: {e}")))?
            .clone();
        let arm_column = headers
            .iter()
            .position(|h| h == "arm")
            .ok_or_else(|| bad(&csv_path, "header: missing field `arm`".to_owned()))?;
        // each arm's replication numbers seen so far: a set, so that a check per row stays cheap for
        // runs of many replications
        let mut seen: Vec<std::collections::HashSet<u32>> = vec![Default::default(); arms.len()];
        for (line, record) in reader.records().enumerate() {
            let row_error = |e: csv::Error| bad(&csv_path, format!("row {}: {e}", line + 1));
            let record = record.map_err(row_error)?;
            let figures: ReplicationFigures = record.deserialize(Some(&headers)).map_err(row_error)?;
            let label = record.get(arm_column).unwrap_or_default();
            let index = arms.iter().position(|a| a.label == label).ok_or_else(|| {
                bad(
                    &csv_path,
                    format!("row {}: arm `{label}` is not in summary.json", line + 1),
                )
            })?;
            let arm = &mut arms[index];
            let number = figures.replication;
            if number == 0 || !seen[index].insert(number) {
                return Err(bad(
                    &csv_path,
                    format!(
                        "row {}: replication {number} of arm `{}` is 0 or repeated",
                        line + 1,
                        label
                    ),
                ));
            }
            arm.tally.push(figures.to_tally());
        }
        let n = arms.first().map_or(0, |a| a.tally.len());
        if let Some(a) = arms.iter().find(|a| a.tally.len() != n || n == 0) {
            return Err(bad(
                &csv_path,
                format!(
                    "arm `{}` has {} replications where the first arm has {n}; every arm needs the same replications, at least one",
                    a.label,
                    a.tally.len()
                ),
            ));
        }
        Ok(StoredRun {
            dir: dir.to_path_buf(),
            arms,
        })
    }

    /// The arms as the comparisons see them.
    pub fn compared(&self) -> Vec<ComparedArm<'_>> {
        self.arms
            .iter()
            .map(|a| ComparedArm {
                label: &a.label,
                group_size: a.group_size,
                tally: &a.tally,
            })
            .collect()
    }

    /// The arms' labels, in order.
    pub fn labels(&self) -> Vec<&str> {
        self.arms.iter().map(|a| a.label.as_str()).collect()
    }
}
