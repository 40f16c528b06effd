//! CSV and JSON renderings of a run report.

use crate::report::RunReport;
use crate::scenario::{ExclusionScope, Formation, Liability, Matching};

/// Columns of summary.csv, in order.
pub const SUMMARY_COLUMNS: [&str; 41] = [
    "arm",
    "group_size",
    "liability",
    "peer_cover",
    "exclusion_cycles",
    "exclusion_scope",
    "formation",
    "matching",
    "replications",
    "group_cycles",
    "group_repayment_rate",
    "group_repayment_ci_low",
    "group_repayment_ci_high",
    "member_loans",
    "member_shortfall_rate",
    "member_default_rate",
    "iid_group_repayment",
    "implied_member_failure",
    "rescued_rate",
    "value_repayment_rate",
    "loss_rate",
    "loss_rate_ci_low",
    "loss_rate_ci_high",
    "net_yield",
    "served_share",
    "excluded_share",
    "waiting_share",
    "empty_share",
    "loss_p50",
    "loss_p95",
    "loss_p99",
    "loss_p999",
    "loss_es99",
    "loss_cycle_p99",
    "loss_cycle_p999",
    "analytic_group_repayment",
    "dependence_ratio",
    "shortfall_icc",
    "closed_form_optimum",
    "group_repayment_se",
    "loss_rate_se",
];

/// A cell: shortest round-trip decimal of a finite number, empty otherwise.
pub fn cell(x: Option<f64>) -> String {
    match x {
        Some(v) if v.is_finite() => format!("{v}"),
        _ => String::new(),
    }
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

fn csv_bytes(header: &[&str], rows: Vec<Vec<String>>) -> Vec<u8> {
    let mut w = csv::Writer::from_writer(Vec::new());
    // Writing to memory cannot fail except on a broken invariant (ragged rows), which tests catch.
    w.write_record(header).expect("in-memory csv");
    for r in rows {
        w.write_record(&r).expect("in-memory csv");
    }
    w.into_inner().expect("in-memory csv")
}

/// summary.csv: one row per arm.
pub fn summary_csv(report: &RunReport) -> Vec<u8> {
    let rows = report
        .arms
        .iter()
        .map(|a| {
            let p = &a.arm.policy;
            let s = &a.summary;
            let g = s.group_repayment;
            let l = s.loss_rate;
            vec![
                a.arm.label.clone(),
                p.group_size.to_string(),
                liability_name(p.liability).into(),
                format!("{}", p.peer_cover),
                p.exclusion_cycles.to_string(),
                exclusion_scope_name(p.exclusion_scope).into(),
                formation_name(p.formation).into(),
                matching_name(p.matching).into(),
                s.replications.to_string(),
                s.group_cycles.to_string(),
                cell(g.map(|g| g.rate)),
                cell(g.and_then(|g| g.ci_low)),
                cell(g.and_then(|g| g.ci_high)),
                s.member_loans.to_string(),
                cell(s.member_shortfall_rate),
                cell(s.member_default_rate),
                cell(s.iid_group_repayment),
                cell(s.implied_member_failure),
                cell(s.rescued_rate),
                cell(s.value_repayment_rate),
                cell(l.map(|l| l.rate)),
                cell(l.and_then(|l| l.ci_low)),
                cell(l.and_then(|l| l.ci_high)),
                cell(s.net_yield),
                cell(s.served_share),
                cell(s.excluded_share),
                cell(s.waiting_share),
                cell(s.empty_share),
                cell(s.loss_p50),
                cell(s.loss_p95),
                cell(s.loss_p99),
                cell(s.loss_p999),
                cell(s.loss_es99),
                cell(s.loss_cycle_p99),
                cell(s.loss_cycle_p999),
                cell(a.analytic_group_repayment),
                cell(a.dependence_ratio),
                cell(s.shortfall_icc),
                cell(a.closed_form_optimum),
                cell(g.and_then(|g| g.standard_error)),
                cell(l.and_then(|l| l.standard_error)),
            ]
        })
        .collect();
    csv_bytes(&SUMMARY_COLUMNS, rows)
}

/// Columns of timeseries.csv, in order.
pub const TIMESERIES_COLUMNS: [&str; 6] = [
    "arm",
    "cycle",
    "served_share",
    "group_repayment_rate",
    "loss_rate",
    "excluded_share",
];

/// timeseries.csv: per arm and counted cycle, means over replications.
pub fn timeseries_csv(report: &RunReport) -> Vec<u8> {
    let rows = report
        .arms
        .iter()
        .flat_map(|a| {
            a.time_series.iter().map(move |c| {
                vec![
                    a.arm.label.clone(),
                    c.cycle.to_string(),
                    cell(c.served_share),
                    cell(c.group_repayment_rate),
                    cell(c.loss_rate),
                    cell(c.excluded_share),
                ]
            })
        })
        .collect();
    csv_bytes(&TIMESERIES_COLUMNS, rows)
}

/// Columns of differences.csv, in order.
pub const DIFFERENCE_COLUMNS: [&str; 7] = [
    "arm",
    "reference_arm",
    "metric",
    "difference",
    "se",
    "ci_low",
    "ci_high",
];

/// differences.csv: every arm against the first, per figure, paired by replication.
pub fn differences_csv(report: &RunReport) -> Vec<u8> {
    let rows = report
        .differences
        .iter()
        .map(|d| {
            vec![
                d.arm.clone(),
                d.reference.clone(),
                d.metric.to_string(),
                cell(Some(d.difference)),
                cell(d.standard_error),
                cell(d.ci_low),
                cell(d.ci_high),
            ]
        })
        .collect();
    csv_bytes(&DIFFERENCE_COLUMNS, rows)
}

/// summary.json: the whole report, pretty-printed, non-finite numbers as null.
pub fn summary_json(report: &RunReport) -> Vec<u8> {
    let mut bytes = serde_json::to_vec_pretty(report).expect("report serialises: no maps with non-string keys");
    bytes.push(b'\n');
    bytes
}
