//! CSV and JSON renderings of a run report.
//!
//! Each CSV row is a `Serialize` struct whose field names are the column names, so a column cannot
//! drift out of step with its header.

use crate::report::{ArmReport, RunReport};
use crate::scenario::{ExclusionScope, Formation, Liability, Matching};
use crate::stats::replications::ReplicationFigures;
use crate::stats::summary::Interval;
use serde::{Serialize, Serializer};

/// A number cell: the shortest round-trip decimal of a finite number (Rust's `Display`, so 1 is
/// written `1`, not `1.0`), empty for a missing or non-finite value.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct Cell(pub Option<f64>);

impl Serialize for Cell {
    fn serialize<S: Serializer>(&self, serializer: S) -> Result<S::Ok, S::Error> {
        match self.0 {
            Some(v) if v.is_finite() => serializer.collect_str(&v),
            _ => serializer.serialize_str(""),
        }
    }
}

fn cells(interval: Option<Interval>) -> (Cell, Cell, Cell, Cell) {
    (
        Cell(interval.map(|i| i.rate)),
        Cell(interval.and_then(|i| i.ci_low)),
        Cell(interval.and_then(|i| i.ci_high)),
        Cell(interval.and_then(|i| i.standard_error)),
    )
}

/// The scenario-file spelling of a liability.
pub fn liability_name(l: Liability) -> &'static str {
    match l {
        Liability::Joint => "joint",
        Liability::Individual => "individual",
    }
}

/// The scenario-file spelling of an exclusion scope.
pub fn exclusion_scope_name(s: ExclusionScope) -> &'static str {
    match s {
        ExclusionScope::Group => "group",
        ExclusionScope::Defaulters => "defaulters",
    }
}

/// The scenario-file spelling of a formation rule.
pub fn formation_name(f: Formation) -> &'static str {
    match f {
        Formation::Reshuffle => "reshuffle",
        Formation::Persistent => "persistent",
    }
}

/// The scenario-file spelling of a matching rule.
pub fn matching_name(m: Matching) -> &'static str {
    match m {
        Matching::Random => "random",
        Matching::Assortative => "assortative",
    }
}

/// CSV bytes of serialised rows; the header comes from the row type's field names. Without rows
/// the header is still written, taken from a default row.
fn csv_bytes<R: Serialize + Default>(rows: impl IntoIterator<Item = R>) -> Vec<u8> {
    let mut bytes = Vec::new();
    // Writing to memory cannot fail except on a broken invariant (a row type csv cannot flatten),
    // which the tests catch.
    write_csv(&mut bytes, rows).expect("in-memory csv");
    bytes
}

/// Writes serialised rows as CSV to `out` as they come, so a long table is never held whole.
fn write_csv<R: Serialize + Default>(
    out: impl std::io::Write,
    rows: impl IntoIterator<Item = R>,
) -> std::io::Result<()> {
    let mut w = csv::Writer::from_writer(out);
    let mut any = false;
    for row in rows {
        w.serialize(row).map_err(csv_error)?;
        any = true;
    }
    if !any {
        // the header alone, taken from a default row whose values are cut off
        let mut header = csv::Writer::from_writer(Vec::new());
        header.serialize(R::default()).map_err(csv_error)?;
        let bytes = header.into_inner().map_err(|e| csv_error(e.into_error().into()))?;
        let end = bytes.iter().position(|&b| b == b'\n').map_or(bytes.len(), |i| i + 1);
        let mut inner = w.into_inner().map_err(|e| e.into_error())?;
        return inner.write_all(&bytes[..end]);
    }
    w.flush()
}

fn csv_error(e: csv::Error) -> std::io::Error {
    match e.into_kind() {
        csv::ErrorKind::Io(io) => io,
        other => std::io::Error::other(format!("{other:?}")),
    }
}

/// One row of summary.csv: the field names are the column names, in column order.
#[derive(Debug, Default, Serialize)]
pub struct SummaryRow<'a> {
    arm: &'a str,
    group_size: u32,
    liability: &'static str,
    peer_cover: Cell,
    exclusion_cycles: String,
    exclusion_scope: &'static str,
    formation: &'static str,
    matching: &'static str,
    replications: u64,
    group_cycles: u64,
    group_repayment_rate: Cell,
    group_repayment_ci_low: Cell,
    group_repayment_ci_high: Cell,
    member_loans: u64,
    member_shortfall_rate: Cell,
    member_default_rate: Cell,
    shortfall_free_group_rate: Cell,
    iid_shortfall_free: Cell,
    implied_member_failure: Cell,
    rescued_rate: Cell,
    value_repayment_rate: Cell,
    loss_rate: Cell,
    loss_rate_ci_low: Cell,
    loss_rate_ci_high: Cell,
    net_yield: Cell,
    served_share: Cell,
    excluded_share: Cell,
    waiting_share: Cell,
    empty_share: Cell,
    loss_p50: Cell,
    loss_p50_ci_low: Cell,
    loss_p50_ci_high: Cell,
    loss_p95: Cell,
    loss_p95_ci_low: Cell,
    loss_p95_ci_high: Cell,
    loss_p99: Cell,
    loss_p99_ci_low: Cell,
    loss_p99_ci_high: Cell,
    loss_p999: Cell,
    loss_p999_ci_low: Cell,
    loss_p999_ci_high: Cell,
    loss_es99: Cell,
    loss_cycle_p99: Cell,
    loss_cycle_p99_ci_low: Cell,
    loss_cycle_p99_ci_high: Cell,
    loss_cycle_p999: Cell,
    loss_cycle_p999_ci_low: Cell,
    loss_cycle_p999_ci_high: Cell,
    worst_cycle_loss_p50: Cell,
    worst_cycle_loss_p50_ci_low: Cell,
    worst_cycle_loss_p50_ci_high: Cell,
    worst_cycle_loss_p95: Cell,
    worst_cycle_loss_p95_ci_low: Cell,
    worst_cycle_loss_p95_ci_high: Cell,
    worst_cycle_loss_p99: Cell,
    worst_cycle_loss_p99_ci_low: Cell,
    worst_cycle_loss_p99_ci_high: Cell,
    analytic_group_repayment: Cell,
    dependence_ratio: Cell,
    shortfall_icc: Cell,
    closed_form_optimum: Cell,
    group_repayment_se: Cell,
    loss_rate_se: Cell,
    on_frontier: &'static str,
    min_group_size: u32,
    max_group_size: u32,
    size_slack: u32,
    mean_group_size: Cell,
    exclusion_events: Cell,
    removal_rate: Cell,
    entrant_rate: Cell,
    clients_reached: Cell,
    removed_share: Cell,
    strategic_default_rate: Cell,
    strategic_default_ci_low: Cell,
    strategic_default_ci_high: Cell,
    able_members: u64,
    mean_principal: Cell,
    annual_loss_p50: Cell,
    annual_loss_p95: Cell,
    annual_loss_p99: Cell,
    annual_loss_p999: Cell,
    annual_loss_es99: Cell,
    annual_loss_amount_p999: Cell,
    annual_default_rate: Cell,
    principal_outstanding: Cell,
    disbursed_per_year: Cell,
    interest_per_year: Cell,
    fees_per_year: Cell,
    expected_loss_per_year: Cell,
    unexpected_loss_999: Cell,
    cost_of_funds_per_year: Cell,
    operating_cost_per_year: Cell,
    operational_self_sufficiency: Cell,
    operational_self_sufficiency_ci_low: Cell,
    operational_self_sufficiency_ci_high: Cell,
    basel_capital: Cell,
    exact_unexpected_loss: Cell,
}

impl<'a> SummaryRow<'a> {
    /// The row of one arm.
    pub fn new(a: &'a ArmReport) -> Self {
        let p = &a.arm.policy();
        let s = &a.summary;
        let (group_repayment_rate, group_repayment_ci_low, group_repayment_ci_high, group_repayment_se) =
            cells(s.group_repayment);
        let (loss_rate, loss_rate_ci_low, loss_rate_ci_high, loss_rate_se) = cells(s.loss_rate);
        let (strategic_default_rate, strategic_default_ci_low, strategic_default_ci_high, _) =
            cells(s.strategic_default_rate);
        let f = &a.finance;
        let m = &f.money;
        let (oss, oss_low, oss_high, _) = cells(m.operational_self_sufficiency);
        SummaryRow {
            arm: a.arm.label(),
            group_size: p.group_size(),
            liability: liability_name(p.liability()),
            peer_cover: Cell(Some(p.peer_cover())),
            exclusion_cycles: p.exclusion_cycles().to_string(),
            exclusion_scope: exclusion_scope_name(p.exclusion_scope()),
            formation: formation_name(p.formation()),
            matching: matching_name(p.matching()),
            replications: s.replications,
            group_cycles: s.group_cycles,
            group_repayment_rate,
            group_repayment_ci_low,
            group_repayment_ci_high,
            member_loans: s.member_loans,
            member_shortfall_rate: Cell(s.member_shortfall_rate),
            member_default_rate: Cell(s.member_default_rate),
            shortfall_free_group_rate: Cell(s.shortfall_free_group_rate),
            iid_shortfall_free: Cell(s.iid_shortfall_free),
            implied_member_failure: Cell(s.implied_member_failure),
            rescued_rate: Cell(s.rescued_rate),
            value_repayment_rate: Cell(s.value_repayment_rate),
            loss_rate,
            loss_rate_ci_low,
            loss_rate_ci_high,
            net_yield: Cell(s.net_yield),
            served_share: Cell(s.served_share),
            excluded_share: Cell(s.excluded_share),
            waiting_share: Cell(s.waiting_share),
            empty_share: Cell(s.empty_share),
            loss_p50: Cell(s.loss_p50),
            loss_p50_ci_low: Cell(s.loss_p50_ci_low),
            loss_p50_ci_high: Cell(s.loss_p50_ci_high),
            loss_p95: Cell(s.loss_p95),
            loss_p95_ci_low: Cell(s.loss_p95_ci_low),
            loss_p95_ci_high: Cell(s.loss_p95_ci_high),
            loss_p99: Cell(s.loss_p99),
            loss_p99_ci_low: Cell(s.loss_p99_ci_low),
            loss_p99_ci_high: Cell(s.loss_p99_ci_high),
            loss_p999: Cell(s.loss_p999),
            loss_p999_ci_low: Cell(s.loss_p999_ci_low),
            loss_p999_ci_high: Cell(s.loss_p999_ci_high),
            loss_es99: Cell(s.loss_es99),
            loss_cycle_p99: Cell(s.loss_cycle_p99),
            loss_cycle_p99_ci_low: Cell(s.loss_cycle_p99_ci_low),
            loss_cycle_p99_ci_high: Cell(s.loss_cycle_p99_ci_high),
            loss_cycle_p999: Cell(s.loss_cycle_p999),
            loss_cycle_p999_ci_low: Cell(s.loss_cycle_p999_ci_low),
            loss_cycle_p999_ci_high: Cell(s.loss_cycle_p999_ci_high),
            worst_cycle_loss_p50: Cell(s.worst_cycle_loss_p50),
            worst_cycle_loss_p50_ci_low: Cell(s.worst_cycle_loss_p50_ci_low),
            worst_cycle_loss_p50_ci_high: Cell(s.worst_cycle_loss_p50_ci_high),
            worst_cycle_loss_p95: Cell(s.worst_cycle_loss_p95),
            worst_cycle_loss_p95_ci_low: Cell(s.worst_cycle_loss_p95_ci_low),
            worst_cycle_loss_p95_ci_high: Cell(s.worst_cycle_loss_p95_ci_high),
            worst_cycle_loss_p99: Cell(s.worst_cycle_loss_p99),
            worst_cycle_loss_p99_ci_low: Cell(s.worst_cycle_loss_p99_ci_low),
            worst_cycle_loss_p99_ci_high: Cell(s.worst_cycle_loss_p99_ci_high),
            analytic_group_repayment: Cell(a.analytic_group_repayment),
            dependence_ratio: Cell(s.dependence_ratio),
            shortfall_icc: Cell(s.shortfall_icc),
            closed_form_optimum: Cell(a.closed_form_optimum),
            group_repayment_se,
            loss_rate_se,
            on_frontier: match a.on_frontier {
                Some(true) => "true",
                Some(false) => "false",
                None => "",
            },
            min_group_size: p.min_group_size(),
            max_group_size: p.max_group_size(),
            size_slack: p.size_slack(),
            mean_group_size: Cell(s.mean_group_size),
            exclusion_events: Cell(s.exclusion_events),
            removal_rate: Cell(s.removal_rate),
            entrant_rate: Cell(s.entrant_rate),
            clients_reached: Cell(s.clients_reached),
            removed_share: Cell(s.removed_share),
            strategic_default_rate,
            strategic_default_ci_low,
            strategic_default_ci_high,
            able_members: s.able_members,
            mean_principal: Cell(s.mean_principal),
            annual_loss_p50: Cell(f.annual_loss_rate.p50),
            annual_loss_p95: Cell(f.annual_loss_rate.p95),
            annual_loss_p99: Cell(f.annual_loss_rate.p99),
            annual_loss_p999: Cell(f.annual_loss_rate.p999),
            annual_loss_es99: Cell(f.annual_loss_rate.es99),
            annual_loss_amount_p999: Cell(f.annual_loss_amount.p999),
            annual_default_rate: Cell(f.capital.annual_default_rate),
            principal_outstanding: Cell(Some(m.principal_outstanding)),
            disbursed_per_year: Cell(Some(m.disbursed)),
            interest_per_year: Cell(Some(m.interest_collected)),
            fees_per_year: Cell(Some(m.fees)),
            expected_loss_per_year: Cell(Some(m.expected_loss)),
            unexpected_loss_999: Cell(m.unexpected_loss_999),
            cost_of_funds_per_year: Cell(Some(m.cost_of_funds)),
            operating_cost_per_year: Cell(Some(m.operating_cost)),
            operational_self_sufficiency: oss,
            operational_self_sufficiency_ci_low: oss_low,
            operational_self_sufficiency_ci_high: oss_high,
            basel_capital: Cell(f.capital.basel_capital),
            exact_unexpected_loss: Cell(f.capital.exact_unexpected_loss),
        }
    }
}

/// The header and records of serialised rows, so columns can be added beside a row struct's own.
fn records<R: Serialize + Default>(rows: impl IntoIterator<Item = R>) -> (csv::StringRecord, Vec<csv::StringRecord>) {
    let bytes = csv_bytes(rows);
    let mut reader = csv::Reader::from_reader(bytes.as_slice());
    let header = reader.headers().expect("in-memory csv").clone();
    let rows = reader.records().map(|r| r.expect("in-memory csv")).collect();
    (header, rows)
}

/// summary.csv: one row per arm. Each swept path that is not already a column (a `[policy]` field
/// has its own) gets a column named by the path, after the policy columns, holding the arm's value
/// as its label shows it.
pub fn summary_csv(report: &RunReport) -> Vec<u8> {
    let (header, rows) = records(report.arms.iter().map(SummaryRow::new));
    let extra: Vec<&String> = report
        .scenario
        .swept_paths()
        .iter()
        .filter(|p| !header.iter().any(|h| h == p.as_str()))
        .collect();
    let at = header
        .iter()
        .position(|h| h == "matching")
        .map_or(header.len(), |i| i + 1);
    let splice = |record: &csv::StringRecord, added: Vec<&str>| {
        let mut out = csv::StringRecord::new();
        record.iter().take(at).for_each(|f| out.push_field(f));
        added.into_iter().for_each(|f| out.push_field(f));
        record.iter().skip(at).for_each(|f| out.push_field(f));
        out
    };
    let mut w = csv::Writer::from_writer(Vec::new());
    w.write_record(&splice(&header, extra.iter().map(|p| p.as_str()).collect()))
        .expect("in-memory csv");
    for (a, record) in report.arms.iter().zip(&rows) {
        let values = extra
            .iter()
            .map(|p| a.arm.swept().iter().find(|v| v.path() == *p).map_or("", |v| v.value()))
            .collect();
        w.write_record(&splice(record, values)).expect("in-memory csv");
    }
    w.into_inner().expect("in-memory csv")
}

/// One row of replications.csv: a replication's rates and the numerators and denominators behind
/// them.
#[derive(Debug, Default, Serialize)]
struct ReplicationRow<'a> {
    arm: &'a str,
    replication: u32,
    group_repayment_rate: Cell,
    groups_repaid: u64,
    group_cycles: u64,
    loss_rate: Cell,
    loss: Cell,
    disbursed: Cell,
    net_yield: Cell,
    collected: Cell,
    recovered: Cell,
    served_share: Cell,
    excluded_share: Cell,
    served_slot_cycles: u64,
    excluded_slot_cycles: u64,
    slot_cycles: u64,
    member_default_rate: Cell,
    member_defaults: u64,
    member_loans: u64,
    worst_cycle_loss: Cell,
    exclusion_events: u64,
    exclusion_event_rate: Cell,
    removals: u64,
    removal_rate: Cell,
    entrants: u64,
    entrant_rate: Cell,
    clients_reached: u64,
    removed_slot_cycles: u64,
    removed_share: Cell,
    strategic_default_rate: Cell,
    strategic_defaults: u64,
    able_members: u64,
    mean_principal: Cell,
    fees: Cell,
    cost_of_funds: Cell,
    operating_cost: Cell,
}

/// replications.csv: one row per arm and replication, in arm order then replication order.
pub fn replications_csv(report: &RunReport) -> Vec<u8> {
    let mut bytes = Vec::new();
    write_replications_csv(&mut bytes, report).expect("in-memory csv");
    bytes
}

/// Writes replications.csv to `out` row by row (it has a row per replication and arm, so it is
/// the one table that can be large).
pub fn write_replications_csv(out: impl std::io::Write, report: &RunReport) -> std::io::Result<()> {
    write_csv(
        out,
        report.arms.iter().flat_map(|a| {
            a.replications.iter().map(move |r| {
                let r = ReplicationFigures::from_tally(&r);
                ReplicationRow {
                    arm: a.arm.label(),
                    replication: r.replication,
                    group_repayment_rate: Cell(r.group_repayment_rate()),
                    groups_repaid: r.groups_repaid,
                    group_cycles: r.group_cycles,
                    loss_rate: Cell(r.loss_rate()),
                    loss: Cell(Some(r.loss)),
                    disbursed: Cell(Some(r.disbursed)),
                    net_yield: Cell(r.net_yield()),
                    collected: Cell(Some(r.collected)),
                    recovered: Cell(Some(r.recovered)),
                    served_share: Cell(r.served_share()),
                    excluded_share: Cell(r.excluded_share()),
                    served_slot_cycles: r.served_slot_cycles,
                    excluded_slot_cycles: r.excluded_slot_cycles,
                    slot_cycles: r.slot_cycles,
                    member_default_rate: Cell(r.member_default_rate()),
                    member_defaults: r.member_defaults,
                    member_loans: r.member_loans,
                    worst_cycle_loss: Cell(r.worst_cycle_loss),
                    exclusion_events: r.exclusion_events,
                    exclusion_event_rate: Cell(r.exclusion_event_rate()),
                    removals: r.removals,
                    removal_rate: Cell(r.removal_rate()),
                    entrants: r.entrants,
                    entrant_rate: Cell(r.entrant_rate()),
                    clients_reached: r.clients_reached,
                    removed_slot_cycles: r.removed_slot_cycles,
                    removed_share: Cell(r.removed_share()),
                    strategic_default_rate: Cell(r.strategic_default_rate()),
                    strategic_defaults: r.strategic_defaults,
                    able_members: r.able_members,
                    mean_principal: Cell(r.mean_principal()),
                    fees: Cell(Some(r.fees)),
                    cost_of_funds: Cell(Some(r.cost_of_funds)),
                    operating_cost: Cell(Some(r.operating_cost)),
                }
            })
        }),
    )?;
    // a pass that met a failed read of replications kept on disk wrote only part of the rows
    match report.arms.iter().find_map(|a| a.replications.read_failure()) {
        Some(e) => Err(std::io::Error::other(e.to_string())),
        None => Ok(()),
    }
}

/// One row of timeseries.csv.
#[derive(Debug, Default, Serialize)]
struct TimeseriesRow<'a> {
    arm: &'a str,
    cycle: u32,
    served_share: Cell,
    group_repayment_rate: Cell,
    loss_rate: Cell,
    excluded_share: Cell,
}

/// timeseries.csv: per arm and counted cycle, means over replications.
pub fn timeseries_csv(report: &RunReport) -> Vec<u8> {
    csv_bytes(report.arms.iter().flat_map(|a| {
        a.time_series.iter().map(move |c| TimeseriesRow {
            arm: a.arm.label(),
            cycle: c.cycle,
            served_share: Cell(c.served_share),
            group_repayment_rate: Cell(c.group_repayment_rate),
            loss_rate: Cell(c.loss_rate),
            excluded_share: Cell(c.excluded_share),
        })
    }))
}

/// One row of differences.csv.
#[derive(Debug, Default, Serialize)]
struct DifferenceRow<'a> {
    arm: &'a str,
    baseline: &'a str,
    metric: &'a str,
    difference: Cell,
    se: Cell,
    ci_low: Cell,
    ci_high: Cell,
    significant: &'static str,
    se_ratio: Cell,
}

/// differences.csv: every arm against the run's baseline, per figure, paired by replication.
pub fn differences_csv(report: &RunReport) -> Vec<u8> {
    difference_rows_csv(&report.differences)
}

/// differences.csv from a list of differences (what `compare --baseline` rewrites).
pub fn difference_rows_csv(differences: &[crate::stats::compare::ArmDifference]) -> Vec<u8> {
    csv_bytes(differences.iter().map(|d| DifferenceRow {
        arm: &d.arm,
        baseline: &d.baseline,
        metric: d.metric,
        difference: Cell(Some(d.difference)),
        se: Cell(d.standard_error),
        ci_low: Cell(d.ci_low),
        ci_high: Cell(d.ci_high),
        significant: significance_text(d.significant),
        se_ratio: Cell(d.se_ratio),
    }))
}

/// The `significant` cell of differences.csv and contrasts.csv.
fn significance_text(significant: Option<bool>) -> &'static str {
    match significant {
        Some(true) => "true",
        Some(false) => "false",
        None => "",
    }
}

/// One row of contrasts.csv: a pair of arms differing only in the contrasted key.
#[derive(Debug, Default, Serialize)]
struct ContrastRow<'a> {
    context: &'a str,
    arm: &'a str,
    baseline: &'a str,
    value: &'a str,
    baseline_value: &'a str,
    metric: &'a str,
    difference: Cell,
    se: Cell,
    ci_low: Cell,
    ci_high: Cell,
    significant: &'static str,
    se_ratio: Cell,
}

/// contrasts.csv (what `compare --along KEY` writes): every pair of arms differing only in KEY.
pub fn contrasts_csv(contrasts: &[crate::stats::compare::Contrast]) -> Vec<u8> {
    csv_bytes(contrasts.iter().map(|c| {
        let d = &c.difference;
        ContrastRow {
            context: &c.context,
            arm: &d.arm,
            baseline: &d.baseline,
            value: &c.value,
            baseline_value: &c.baseline_value,
            metric: d.metric,
            difference: Cell(Some(d.difference)),
            se: Cell(d.standard_error),
            ci_low: Cell(d.ci_low),
            ci_high: Cell(d.ci_high),
            significant: significance_text(d.significant),
            se_ratio: Cell(d.se_ratio),
        }
    }))
}

/// summary.json: the whole report, pretty-printed, non-finite numbers as null.
pub fn summary_json(report: &RunReport) -> Vec<u8> {
    let mut bytes = serde_json::to_vec_pretty(report).expect("report serialises: no maps with non-string keys");
    bytes.push(b'\n');
    bytes
}

/// A selection as one JSON object and a newline (what `compare --json` prints, alone, on stdout).
pub fn selection_json(selection: &crate::stats::select::Selection) -> String {
    let mut text = serde_json::to_string_pretty(selection).expect("a selection serialises");
    text.push('\n');
    text
}

/// One row of group_size.csv.
#[derive(Debug, Default, Serialize)]
struct GroupSizeCsvRow<'a> {
    context: &'a str,
    best_simulated: Option<u32>,
    not_worse: String,
    best_closed_form: Option<u32>,
    best_exact: Option<u32>,
    best_by_loss: Option<u32>,
}

/// group_size.csv, when group size is swept: one row per combination of the other swept keys.
pub fn group_size_csv(report: &RunReport) -> Option<Vec<u8>> {
    let rows = report.group_size.as_ref()?;
    Some(csv_bytes(rows.iter().map(|r| GroupSizeCsvRow {
        context: &r.context,
        best_simulated: r.best_simulated,
        not_worse: r.not_worse.iter().map(u32::to_string).collect::<Vec<_>>().join(";"),
        best_closed_form: r.best_closed_form,
        best_exact: r.best_exact,
        best_by_loss: r.best_by_loss,
    })))
}
