//! Reads a finished run directory back into memory.
//!
//! The run's files are the report's only source: nothing here simulates or re-estimates. Every CSV
//! is read by header name, because the writers add and rename columns over time; a column the
//! report can do without is optional, and a missing required one is reported like any other bad
//! input, with the file, line, column and value.

use super::BoardError;
use serde_json::Value;
use std::collections::HashMap;
use std::path::{Path, PathBuf};

/// One row of summary.csv: the figures of one arm that the report shows.
#[derive(Debug, Clone)]
pub struct ArmRow {
    /// Position in summary.csv, counted from 1 as `check` lists arms.
    pub number: usize,
    /// The arm label, e.g. `group_size=5,exclusion_cycles=2`.
    pub label: String,
    /// The label split into (key, value) pairs, in label order.
    pub keys: Vec<(String, String)>,
    /// Share of group-cycles repaid in full (absent when the arm never lent).
    pub repayment: Option<f64>,
    /// 95% interval of `repayment`.
    pub repayment_ci: Option<(f64, f64)>,
    /// Exact one-factor group repayment, where the arm is in that class.
    pub exact: Option<f64>,
    /// Principal lost over principal disbursed.
    pub loss: Option<f64>,
    /// 95% interval of `loss`.
    pub loss_ci: Option<(f64, f64)>,
    /// (collected + recovered - disbursed) / disbursed.
    pub net_yield: Option<f64>,
    /// Mean share of borrower slots served.
    pub served: Option<f64>,
    /// Mean share of borrower slots excluded.
    pub excluded: Option<f64>,
    /// Horizon loss quantiles over replications: p50, p95, p99, p99.9.
    pub loss_q: [Option<f64>; 4],
    /// Worst single-cycle loss quantiles over replications: p50, p95, p99 (newer runs only).
    pub worst_q: [Option<f64>; 3],
    /// Single-cycle loss, 99th percentile over replication-cycles (older runs' tail figure).
    pub cycle_p99: Option<f64>,
    /// Frontier flag written by the run, when it writes one.
    pub on_frontier: Option<bool>,
    /// Borrowers and money, empty in runs written before these figures existed: exclusion events,
    /// removals, clients reached, walk-away rate, mean principal, operational self-sufficiency,
    /// annual loss p99, and the lender's costs and fees per year (their sum says whether the
    /// scenario has a `[finance]` table).
    pub outreach: Outreach,
}

/// The borrower and money figures of one arm (summary.csv columns of the same names).
#[derive(Debug, Clone, Default)]
pub struct Outreach {
    /// `exclusion_events`.
    pub exclusion_events: Option<f64>,
    /// `removal_rate`.
    pub removal_rate: Option<f64>,
    /// `clients_reached`.
    pub clients_reached: Option<f64>,
    /// `strategic_default_rate`.
    pub walked: Option<f64>,
    /// `mean_principal`.
    pub mean_principal: Option<f64>,
    /// `operational_self_sufficiency`.
    pub self_sufficiency: Option<f64>,
    /// `annual_loss_p99`.
    pub annual_loss_p99: Option<f64>,
    /// `fees_per_year` + `cost_of_funds_per_year` + `operating_cost_per_year`.
    pub costs_and_fees: Option<f64>,
}

/// One row of timeseries.csv.
#[derive(Debug, Clone)]
pub struct CycleRow {
    /// Arm label.
    pub arm: String,
    /// Cycle number, counted from 1 including the warm-up.
    pub cycle: u32,
    /// Mean served share in that cycle.
    pub served: Option<f64>,
    /// Mean excluded share in that cycle.
    pub excluded: Option<f64>,
    /// Mean loss rate in that cycle.
    pub loss: Option<f64>,
}

/// One row of differences.csv.
#[derive(Debug, Clone)]
pub struct DiffRow {
    /// The arm compared.
    pub arm: String,
    /// The arm it is compared with.
    pub baseline: String,
    /// The figure compared, a summary.csv column name.
    pub metric: String,
    /// arm minus baseline.
    pub difference: f64,
    /// 95% interval of the paired difference.
    pub ci: Option<(f64, f64)>,
    /// The run's own significance verdict, when it writes one.
    pub significant: Option<bool>,
}

/// The per-replication values of one arm, when the run wrote replications.csv.
#[derive(Debug, Clone, Default)]
pub struct ReplicationValues {
    /// Each replication's horizon loss rate.
    pub loss: Vec<f64>,
    /// Each replication's largest single-cycle loss rate.
    pub worst_cycle: Vec<f64>,
}

/// A stress window of one shock, from the resolved scenario.
#[derive(Debug, Clone)]
pub struct StressWindow {
    /// The shock's name.
    pub shock: String,
    /// First stressed cycle.
    pub from: u32,
    /// Last stressed cycle.
    pub to: u32,
}

/// A CSV file echoed as it is (the group-size table).
#[derive(Debug, Clone)]
pub struct PlainTable {
    /// Column names.
    pub headers: Vec<String>,
    /// Cells, row by row.
    pub rows: Vec<Vec<String>>,
}

/// Everything the report reads from a run directory.
#[derive(Debug, Clone)]
pub struct RunData {
    /// The run directory.
    pub dir: PathBuf,
    /// summary.csv, in file order.
    pub arms: Vec<ArmRow>,
    /// timeseries.csv.
    pub cycles: Vec<CycleRow>,
    /// differences.csv (empty when the file is absent or has no rows).
    pub differences: Vec<DiffRow>,
    /// replications.csv grouped by arm label, when present.
    pub replications: Option<HashMap<String, ReplicationValues>>,
    /// group_size.csv, when present.
    pub group_size: Option<PlainTable>,
    /// The swept policy keys, in sweep order.
    pub swept: Vec<String>,
    /// Stress windows of every shock.
    pub stress: Vec<StressWindow>,
    /// Warm-up cycles (not counted in the statistics).
    pub warmup: u32,
    /// Tool name and version that wrote the run.
    pub tool: String,
    /// Master seed.
    pub seed: Option<u64>,
    /// SHA-256 of the scenario file.
    pub scenario_sha256: String,
    /// Where the scenario came from.
    pub scenario_origin: String,
    /// Scenario name.
    pub scenario_name: String,
    /// Replications per arm.
    pub replications_per_arm: Option<u64>,
    /// The resolved scenario as the run recorded it.
    pub scenario: Value,
    /// Warnings the run recorded.
    pub warnings: Vec<String>,
    /// Why no exact one-factor values exist, when the run says.
    pub analytic_note: Option<String>,
}

/// A CSV file read whole, with its header and each record's line number.
struct Table {
    path: PathBuf,
    index: HashMap<String, usize>,
    headers: Vec<String>,
    rows: Vec<(u64, csv::StringRecord)>,
}

impl Table {
    fn read(path: &Path) -> Result<Table, BoardError> {
        let mut reader = csv::ReaderBuilder::new()
            .has_headers(true)
            .from_path(path)
            .map_err(|e| csv_error(path, e))?;
        let headers: Vec<String> = reader
            .headers()
            .map_err(|e| csv_error(path, e))?
            .iter()
            .map(|h| h.trim().to_string())
            .collect();
        if headers.iter().all(|h| h.is_empty()) {
            return Err(BoardError::input(
                path,
                Some(1),
                None,
                None,
                "the file has no header line",
            ));
        }
        let index = headers.iter().enumerate().map(|(i, h)| (h.clone(), i)).collect();
        let mut rows = Vec::new();
        for record in reader.records() {
            let record = record.map_err(|e| csv_error(path, e))?;
            let line = record.position().map_or(0, |p| p.line());
            rows.push((line, record));
        }
        Ok(Table {
            path: path.to_path_buf(),
            index,
            headers,
            rows,
        })
    }

    /// Fails, naming the column, when a column the report cannot do without is absent.
    fn require(&self, column: &str) -> Result<(), BoardError> {
        if self.index.contains_key(column) {
            Ok(())
        } else {
            Err(BoardError::input(
                &self.path,
                Some(1),
                Some(column),
                None,
                "required column is missing",
            ))
        }
    }

    fn rows(&self) -> impl Iterator<Item = Row<'_>> {
        self.rows.iter().map(move |(line, record)| Row {
            table: self,
            line: *line,
            record,
        })
    }
}

/// One record of a [`Table`], with typed access by column name.
struct Row<'a> {
    table: &'a Table,
    line: u64,
    record: &'a csv::StringRecord,
}

impl Row<'_> {
    /// The cell's text, or None when the column is absent.
    fn text(&self, column: &str) -> Option<&str> {
        self.table
            .index
            .get(column)
            .and_then(|&i| self.record.get(i))
            .map(str::trim)
    }

    fn bad(&self, column: &str, value: &str, what: &str) -> BoardError {
        BoardError::input(&self.table.path, Some(self.line), Some(column), Some(value), what)
    }

    /// A required non-empty text cell.
    fn label(&self, column: &str) -> Result<String, BoardError> {
        match self.text(column) {
            Some(t) if !t.is_empty() => Ok(t.to_string()),
            Some(t) => Err(self.bad(column, t, "is empty; a label is required")),
            None => Err(self.bad(column, "", "column is missing")),
        }
    }

    /// A number cell: None when the column is absent or the cell empty (a figure that does not apply).
    fn number(&self, column: &str) -> Result<Option<f64>, BoardError> {
        match self.text(column) {
            None | Some("") => Ok(None),
            Some(t) => match t.parse::<f64>() {
                Ok(x) if x.is_finite() => Ok(Some(x)),
                _ => Err(self.bad(column, t, "is not a finite number")),
            },
        }
    }

    fn interval(&self, low: &str, high: &str) -> Result<Option<(f64, f64)>, BoardError> {
        Ok(match (self.number(low)?, self.number(high)?) {
            (Some(a), Some(b)) => Some((a, b)),
            _ => None,
        })
    }

    fn boolean(&self, column: &str) -> Result<Option<bool>, BoardError> {
        match self.text(column) {
            None | Some("") => Ok(None),
            Some(t) => match t.to_ascii_lowercase().as_str() {
                "true" | "1" | "yes" => Ok(Some(true)),
                "false" | "0" | "no" => Ok(Some(false)),
                _ => Err(self.bad(column, t, "is not true or false")),
            },
        }
    }
}

fn csv_error(path: &Path, e: csv::Error) -> BoardError {
    let line = e.position().map(|p| p.line());
    match e.kind() {
        csv::ErrorKind::Io(io) if io.kind() == std::io::ErrorKind::NotFound => {
            BoardError::input(path, None, None, None, "file is missing")
        }
        csv::ErrorKind::UnequalLengths { expected_len, len, .. } => BoardError::input(
            path,
            line,
            None,
            None,
            &format!("has {len} fields where the header has {expected_len}"),
        ),
        csv::ErrorKind::Utf8 { .. } => BoardError::input(path, line, None, None, "is not valid UTF-8 text"),
        _ => BoardError::input(path, line, None, None, &e.to_string()),
    }
}

/// Splits an arm label `k1=v1,k2=v2` into its pairs; a label without `=` is one unnamed value.
pub fn label_keys(label: &str) -> Vec<(String, String)> {
    label
        .split(',')
        .filter_map(|part| {
            part.split_once('=')
                .map(|(k, v)| (k.trim().to_string(), v.trim().to_string()))
        })
        .collect()
}

/// Reads every file of a run directory the report uses.
pub fn read_run(dir: &Path) -> Result<RunData, BoardError> {
    if !dir.is_dir() {
        return Err(BoardError::input(dir, None, None, None, "no such directory"));
    }
    let summary_path = dir.join("summary.csv");
    let json_path = dir.join("summary.json");
    for p in [&summary_path, &json_path, &dir.join("timeseries.csv")] {
        if !p.is_file() {
            return Err(BoardError::input(
                p,
                None,
                None,
                None,
                "file is missing: this is not a finished run directory",
            ));
        }
    }
    let arms = read_summary(&summary_path)?;
    let cycles = read_timeseries(&dir.join("timeseries.csv"))?;
    let diff_path = dir.join("differences.csv");
    let differences = if diff_path.is_file() {
        read_differences(&diff_path)?
    } else {
        Vec::new()
    };
    let rep_path = dir.join("replications.csv");
    let replications = if rep_path.is_file() {
        Some(read_replications(&rep_path)?)
    } else {
        None
    };
    let gs_path = dir.join("group_size.csv");
    let group_size = if gs_path.is_file() {
        let t = Table::read(&gs_path)?;
        Some(PlainTable {
            headers: t.headers.clone(),
            rows: t
                .rows
                .iter()
                .map(|(_, r)| r.iter().map(str::to_string).collect())
                .collect(),
        })
    } else {
        None
    };
    let mut data = RunData {
        dir: dir.to_path_buf(),
        arms,
        cycles,
        differences,
        replications,
        group_size,
        swept: Vec::new(),
        stress: Vec::new(),
        warmup: 0,
        tool: String::new(),
        seed: None,
        scenario_sha256: String::new(),
        scenario_origin: String::new(),
        scenario_name: String::new(),
        replications_per_arm: None,
        scenario: Value::Null,
        warnings: Vec::new(),
        analytic_note: None,
    };
    read_json(&json_path, &mut data)?;
    if data.swept.is_empty() {
        // Older or hand-made runs: the swept keys are the keys of the first label.
        if let Some(first) = data.arms.first() {
            data.swept = first.keys.iter().map(|(k, _)| k.clone()).collect();
        }
    }
    Ok(data)
}

fn read_summary(path: &Path) -> Result<Vec<ArmRow>, BoardError> {
    let t = Table::read(path)?;
    for column in [
        "arm",
        "group_repayment_rate",
        "loss_rate",
        "served_share",
        "excluded_share",
    ] {
        t.require(column)?;
    }
    if t.rows.is_empty() {
        return Err(BoardError::input(path, Some(2), None, None, "has no arm rows"));
    }
    let mut arms = Vec::with_capacity(t.rows.len());
    for (i, row) in t.rows().enumerate() {
        let label = row.label("arm")?;
        let q = |c: &str| row.number(c);
        arms.push(ArmRow {
            number: i + 1,
            keys: label_keys(&label),
            label,
            repayment: q("group_repayment_rate")?,
            repayment_ci: row.interval("group_repayment_ci_low", "group_repayment_ci_high")?,
            exact: q("analytic_group_repayment")?,
            loss: q("loss_rate")?,
            loss_ci: row.interval("loss_rate_ci_low", "loss_rate_ci_high")?,
            net_yield: q("net_yield")?,
            served: q("served_share")?,
            excluded: q("excluded_share")?,
            loss_q: [q("loss_p50")?, q("loss_p95")?, q("loss_p99")?, q("loss_p999")?],
            worst_q: [
                q("worst_cycle_loss_p50")?,
                q("worst_cycle_loss_p95")?,
                q("worst_cycle_loss_p99")?,
            ],
            cycle_p99: q("loss_cycle_p99")?,
            on_frontier: row.boolean("on_frontier")?,
            outreach: Outreach {
                exclusion_events: q("exclusion_events")?,
                removal_rate: q("removal_rate")?,
                clients_reached: q("clients_reached")?,
                walked: q("strategic_default_rate")?,
                mean_principal: q("mean_principal")?,
                self_sufficiency: q("operational_self_sufficiency")?,
                annual_loss_p99: q("annual_loss_p99")?,
                costs_and_fees: [
                    q("fees_per_year")?,
                    q("cost_of_funds_per_year")?,
                    q("operating_cost_per_year")?,
                ]
                .into_iter()
                .sum(),
            },
        });
    }
    Ok(arms)
}

fn read_timeseries(path: &Path) -> Result<Vec<CycleRow>, BoardError> {
    let t = Table::read(path)?;
    for column in ["arm", "cycle"] {
        t.require(column)?;
    }
    t.rows()
        .map(|row| {
            let raw = row.label("cycle")?;
            let cycle = raw
                .parse::<u32>()
                .map_err(|_| row.bad("cycle", &raw, "is not a cycle number"))?;
            Ok(CycleRow {
                arm: row.label("arm")?,
                cycle,
                served: row.number("served_share")?,
                excluded: row.number("excluded_share")?,
                loss: row.number("loss_rate")?,
            })
        })
        .collect()
}

fn read_differences(path: &Path) -> Result<Vec<DiffRow>, BoardError> {
    let t = Table::read(path)?;
    for column in ["arm", "metric", "difference"] {
        t.require(column)?;
    }
    let baseline_column = if t.index.contains_key("baseline") {
        "baseline"
    } else {
        "reference_arm"
    };
    t.require(baseline_column)?;
    t.rows()
        .filter_map(|row| {
            // A difference left empty (a rate with no denominator) has nothing to plot.
            match row.number("difference") {
                Ok(None) => None,
                Ok(Some(d)) => Some((|| {
                    Ok(DiffRow {
                        arm: row.label("arm")?,
                        baseline: row.label(baseline_column)?,
                        metric: row.label("metric")?,
                        difference: d,
                        ci: row.interval("ci_low", "ci_high")?,
                        significant: row.boolean("significant")?,
                    })
                })()),
                Err(e) => Some(Err(e)),
            }
        })
        .collect()
}

fn read_replications(path: &Path) -> Result<HashMap<String, ReplicationValues>, BoardError> {
    let t = Table::read(path)?;
    for column in ["arm", "loss_rate"] {
        t.require(column)?;
    }
    let mut by_arm: HashMap<String, ReplicationValues> = HashMap::new();
    for row in t.rows() {
        let entry = by_arm.entry(row.label("arm")?).or_default();
        if let Some(x) = row.number("loss_rate")? {
            entry.loss.push(x);
        }
        if let Some(x) = row.number("worst_cycle_loss")? {
            entry.worst_cycle.push(x);
        }
    }
    Ok(by_arm)
}

fn read_json(path: &Path, data: &mut RunData) -> Result<(), BoardError> {
    let text = std::fs::read_to_string(path).map_err(|e| BoardError::input(path, None, None, None, &e.to_string()))?;
    let v: Value = serde_json::from_str(&text).map_err(|e| {
        BoardError::input(
            path,
            Some(e.line() as u64),
            None,
            None,
            &format!("column {}: {e}", e.column()),
        )
    })?;
    if !v.is_object() {
        return Err(BoardError::input(path, Some(1), None, None, "is not a JSON object"));
    }
    let text_of = |key: &str| v.get(key).and_then(Value::as_str).unwrap_or("").to_string();
    data.tool = text_of("tool");
    data.scenario_sha256 = text_of("scenario_sha256");
    data.scenario_origin = text_of("scenario_origin");
    data.seed = v.get("seed").and_then(Value::as_u64);
    data.analytic_note = v
        .get("analytic_out_of_class")
        .and_then(Value::as_str)
        .map(str::to_string);
    data.warnings = v
        .get("warnings")
        .and_then(Value::as_array)
        .map(|a| a.iter().filter_map(|w| w.as_str().map(str::to_string)).collect())
        .unwrap_or_default();
    let scenario = v.get("scenario").cloned().unwrap_or(Value::Null);
    data.scenario_name = scenario.get("name").and_then(Value::as_str).unwrap_or("").to_string();
    data.replications_per_arm = scenario.get("replications").and_then(Value::as_u64);
    data.warmup = scenario.get("warmup_cycles").and_then(Value::as_u64).unwrap_or(0) as u32;
    data.swept = scenario
        .get("swept_fields")
        .and_then(Value::as_array)
        .map(|a| a.iter().filter_map(|k| k.as_str().map(str::to_string)).collect())
        .unwrap_or_default();
    for shock in scenario.get("shocks").and_then(Value::as_array).into_iter().flatten() {
        let name = shock.get("name").and_then(Value::as_str).unwrap_or("shock");
        for w in shock.get("stress").and_then(Value::as_array).into_iter().flatten() {
            if let (Some(from), Some(to)) = (
                w.get("from").and_then(Value::as_u64),
                w.get("to").and_then(Value::as_u64),
            ) {
                data.stress.push(StressWindow {
                    shock: name.to_string(),
                    from: from as u32,
                    to: to as u32,
                });
            }
        }
    }
    data.scenario = scenario;
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn labels_split_into_pairs() {
        assert_eq!(
            label_keys("group_size=5,exclusion_cycles=permanent"),
            vec![
                ("group_size".to_string(), "5".to_string()),
                ("exclusion_cycles".to_string(), "permanent".to_string())
            ]
        );
        assert!(label_keys("baseline").is_empty());
    }
}
