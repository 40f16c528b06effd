//! Renderings of the `optimum` answer: the terminal table, JSON and the per-size CSV.
//!
//! They sit beside the run writers so that every byte the tool prints comes from `output`, and the
//! solver in `analytic::optimum` stays a solver.

use crate::analytic::optimum::{MaximiserKind, OptimumReport};
use crate::curve::GroupSizeCurve;
use crate::output::tables::Cell;
use serde::Serialize;
use std::fmt::Write as _;

fn curve_text(curve: &GroupSizeCurve) -> String {
    match curve {
        GroupSizeCurve::Constant { value } => format!("constant curve, phi = {value}"),
        GroupSizeCurve::Power { p } => format!("power curve phi(k) = k^-p, p = {p}"),
        GroupSizeCurve::PowerPlusLog { p } => format!("power_plus_log curve phi(k) = 1/(k^p + (ln k)^(1/p)), p = {p}"),
        GroupSizeCurve::Table { values } => format!("table curve with {} sizes", values.len()),
    }
}

fn opt_num(v: Option<f64>, decimals: usize) -> String {
    v.map_or_else(|| "-".to_string(), |x| format!("{x:.decimals$}"))
}

fn join_ints(v: &[u32]) -> String {
    if v.is_empty() {
        "none".into()
    } else {
        v.iter().map(u32::to_string).collect::<Vec<_>>().join(", ")
    }
}

/// A readable terminal table.
pub fn table(report: &OptimumReport) -> String {
    let mut out = String::new();
    let c = &report.continuous;
    let _ = writeln!(out, "Best group size, independent members, no peer cover");
    let _ = writeln!(out, "  {}", curve_text(&report.curve));
    let _ = writeln!(
        out,
        "  objective: x ln(1 - phi(x)); a group of k repays with probability (1 - phi(k))^k"
    );
    if report.risk_multiplier != 1.0 {
        let _ = writeln!(
            out,
            "  every phi scaled by the mean risk multiplier u = {} (capped at 1)",
            report.risk_multiplier
        );
    }
    let range_text = format!("[{}, {:e}]", c.scan_start, c.scan_end);
    match c.kind {
        MaximiserKind::Interior | MaximiserKind::DomainStart => {
            let where_text = if c.kind == MaximiserKind::DomainStart {
                ", at the smallest admissible size"
            } else {
                ""
            };
            let uniq = if c.unique { "unique" } else { "not unique" };
            let _ = writeln!(
                out,
                "  continuous optimum x* = {}{where_text} ({uniq} on {range_text})",
                opt_num(c.x_star, 4)
            );
            let _ = writeln!(out, "  repayment at x*       = {}", opt_num(c.repayment_at_x_star, 6));
            if !c.unique && c.local_maxima.len() > 1 {
                let list: Vec<String> = c.local_maxima.iter().map(|x| format!("{x:.4}")).collect();
                let _ = writeln!(out, "  local maxima at {}", list.join(", "));
            }
        }
        MaximiserKind::RisingToEnd => {
            let _ = writeln!(
                out,
                "  no finite maximiser: the objective keeps rising to x = {:e} (repayment {} there)",
                c.scan_end,
                opt_num(c.repayment_at_scan_end, 6)
            );
        }
        MaximiserKind::Flat => {
            let _ = writeln!(out, "  no maximiser: every group size repays with the same probability");
        }
        MaximiserKind::IntegerOnly => {
            let _ = writeln!(
                out,
                "  a table curve is defined at integer sizes only: see the best integer below"
            );
        }
    }
    match (report.best_integer, report.repayment_at_best_integer) {
        (Some(k), Some(r)) => {
            let _ = writeln!(
                out,
                "  best integer in {}..{}: k = {k} (repayment {r:.6})",
                report.range.0, report.range.1
            );
        }
        _ => {
            let _ = writeln!(
                out,
                "  the curve is defined at no size in {}..{}",
                report.range.0, report.range.1
            );
        }
    }
    if let Some(k) = report.best_integer_overall {
        let _ = writeln!(
            out,
            "  best integer over all sizes (from the curve's first, up to {}): k = {k} (group_size.csv's best_closed_form)",
            crate::analytic::optimum::LARGEST_SIZE_SCANNED
        );
    }
    let _ = writeln!(out);
    let phi_label = if report.risk_multiplier == 1.0 {
        "phi(k)"
    } else {
        "u phi(k)"
    };
    let _ = writeln!(out, "  {:>8}  {:>12}  {:>14}", "k", phi_label, "P(group repays)");
    for row in &report.by_integer {
        let mark = if Some(row.group_size) == report.best_integer {
            "  <- best"
        } else {
            ""
        };
        match (row.phi, row.repayment) {
            (Some(phi), Some(r)) => {
                let _ = writeln!(out, "  {:>8}  {phi:>12.6}  {r:>15.6}{mark}", row.group_size);
            }
            _ => {
                let _ = writeln!(out, "  {:>8}  {:>12}  {:>15}", row.group_size, "undefined", "-");
            }
        }
    }
    if let Some(band) = &report.band {
        let _ = writeln!(out);
        let _ = writeln!(
            out,
            "  band p in [{}, {}] ({} values):",
            band.p_from,
            band.p_to,
            band.points.len()
        );
        match (band.min_x_star, band.max_x_star) {
            (Some(lo), Some(hi)) => {
                let _ = writeln!(out, "    smallest x* = {:.4} at p = {:.4}", lo.x_star, lo.p);
                let _ = writeln!(out, "    largest  x* = {:.4} at p = {:.4}", hi.x_star, hi.p);
                let _ = writeln!(
                    out,
                    "    integers inside [smallest x*, largest x*]: {}",
                    join_ints(&band.integers_inside)
                );
            }
            _ => {
                let _ = writeln!(out, "    no value of p in the band has a finite maximiser");
            }
        }
        let _ = writeln!(
            out,
            "    best integers across the band: {}",
            join_ints(&band.best_integers)
        );
        if !band.without_finite_maximiser.is_empty() {
            let n = band.without_finite_maximiser.len();
            let first = band.without_finite_maximiser[0];
            let _ = writeln!(
                out,
                "    {n} value(s) of p have no finite maximiser (the first is p = {first});"
            );
            let _ = writeln!(
                out,
                "    x* can grow without bound as p nears them, so the extremes above cover the other values only"
            );
        }
    }
    let _ = writeln!(out, "\n{}", crate::CAUTION);
    out
}

/// The report as pretty-printed JSON; `x_star` is null when there is no finite maximiser.
pub fn json(report: &OptimumReport) -> String {
    serde_json::to_string_pretty(report)
        .unwrap_or_else(|e| format!("{{\"error\": \"cannot serialise the report: {e}\"}}"))
}

/// One row of the per-size CSV: the field names are the column names.
#[derive(Serialize)]
struct SizeRow {
    group_size: u32,
    phi: Cell,
    repayment_probability: Cell,
    best: bool,
}

/// The integer table as CSV: `group_size,phi,repayment_probability,best` (empty cells where the
/// curve is undefined). The continuous optimum and the band are in the table and JSON forms.
pub fn csv(report: &OptimumReport) -> String {
    let mut w = csv::Writer::from_writer(Vec::new());
    for row in &report.by_integer {
        // Writing to memory cannot fail.
        w.serialize(SizeRow {
            group_size: row.group_size,
            phi: Cell(row.phi),
            repayment_probability: Cell(row.repayment),
            best: Some(row.group_size) == report.best_integer,
        })
        .expect("in-memory csv");
    }
    String::from_utf8(w.into_inner().expect("in-memory csv")).expect("csv of numbers and ASCII names is UTF-8")
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::analytic::optimum::{OptimumRequest, solve};

    #[test]
    fn outputs_carry_the_required_keys() {
        let r = solve(&OptimumRequest {
            curve: GroupSizeCurve::power(1.0).unwrap(),
            band: None,
            range: (2, 6),
        })
        .unwrap();
        let value: serde_json::Value = serde_json::from_str(&json(&r)).unwrap();
        assert!(value["x_star"].is_null());
        assert_eq!(value["best_integer"], 6);
        assert!(value["repayment_at_best_integer"].as_f64().unwrap() > 0.3);
        assert!(table(&r).contains("no finite maximiser"));
        // phi(k) = 1/k, so (1 - 1/k)^k: 0.25 at k = 2 (arithmetic); only the best size is marked.
        let text = csv(&r);
        let mut lines = text.lines();
        assert_eq!(lines.next(), Some("group_size,phi,repayment_probability,best"));
        assert_eq!(lines.next(), Some("2,0.5,0.25,false"));
        let last: Vec<&str> = lines.last().unwrap().split(',').collect();
        assert_eq!((last[0], last[3]), ("6", "true"));
        let curve = GroupSizeCurve::table([(2, 0.1), (4, 0.05)].into_iter().collect()).unwrap();
        let r = solve(&OptimumRequest {
            curve,
            band: None,
            range: (1, 4),
        })
        .unwrap();
        assert!(table(&r).contains("undefined"));
        assert!(csv(&r).contains("\n1,,,false\n"));
    }
}
