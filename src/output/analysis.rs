//! Renderings of the `analyze` report: the terminal table and JSON.
//!
//! They sit beside the run writers so that `analytic` only computes and `output` only prints.

use crate::analytic::portfolio_law::{PortfolioDefaultLaw, QUANTILE_LEVELS};
use crate::analytic::report::{AnalyzeReport, HitShareScope, short};
use crate::scenario::{Liability, ShockProbability};
use std::fmt::Write as _;

fn liability_name(l: Liability) -> &'static str {
    match l {
        Liability::Joint => "joint",
        Liability::Individual => "individual",
    }
}

/// A readable terminal table of an `analyze` report, ending with the one-line caution.
pub fn table(report: &AnalyzeReport) -> String {
    let mut out = String::new();
    let _ = writeln!(out, "Analysis of scenario '{}'", report.scenario);
    let _ = writeln!(out);
    let _ = writeln!(out, "Exact per-cycle group repayment (one-factor class)");
    match (&report.model, &report.one_factor_out_of_class) {
        (Some(m), _) => {
            let prob = match &m.probability {
                ShockProbability::Fixed(p) => format!("p = {p}"),
                ShockProbability::Curve(c) => format!("p = phi(k), {} curve", c.kind_name()),
            };
            let _ = writeln!(
                out,
                "  in class: shock '{}' ({prob}, severity {}), income ratio {}, risk {}, rho = {}",
                m.shock_name,
                short(m.severity),
                short(m.income_ratio),
                short(m.risk),
                short(m.rho())
            );
            let width = report
                .arms
                .iter()
                .map(|a| a.label.chars().count())
                .max()
                .unwrap_or(3)
                .max(3);
            let _ = writeln!(
                out,
                "  {:<width$} {:>6} {:<10} {:>6} {:>9} {:>10} {:>11} {:>10} {:>9}",
                "arm", "k", "liability", "cover", "P(hit)", "P(repay)", "P(short)", "iid", "x*"
            );
            for arm in &report.arms {
                match (&arm.exact, &arm.reason) {
                    (Some(r), _) => {
                        let x = r
                            .class_optimum
                            .map_or_else(|| "none".to_string(), |x| format!("{x:.3}"));
                        let _ = writeln!(
                            out,
                            "  {:<width$} {:>6} {:<10} {:>6.2} {:>9.6} {:>10.6} {:>11.6} {:>10.6} {:>9}",
                            arm.label,
                            arm.group_size,
                            liability_name(arm.liability),
                            arm.peer_cover,
                            r.hit_probability,
                            r.group_repayment,
                            r.member_shortfall,
                            r.iid_group_repayment,
                            x
                        );
                    }
                    (None, Some(reason)) => {
                        let _ = writeln!(out, "  {:<width$} not computed: {reason}", arm.label);
                    }
                    (None, None) => {}
                }
            }
            let _ = writeln!(
                out,
                "  P(short): a member's own shortfall probability; iid: (1 - P(short))^k, what independence would give; x*: the class's closed-form best size (1: the smallest group)"
            );
        }
        (None, Some(reason)) => {
            let _ = writeln!(out, "  out of class: {reason}");
        }
        (None, None) => {}
    }
    let _ = writeln!(out);
    portfolio_section(&mut out, report);
    let _ = writeln!(out);
    match (&report.hit_share, &report.hit_share_reason) {
        (Some(section), _) => {
            let whom = match section.scope {
                HitShareScope::Portfolio => format!("whole portfolio of {} members", section.population),
                HitShareScope::PerVillage => format!("within one village of {} members", section.population),
            };
            let _ = writeln!(
                out,
                "Share of members hit per cycle by shock '{}' ({whom}, rho = {})",
                section.shock_name,
                short(section.rho)
            );
            if section.scope == HitShareScope::PerVillage {
                let _ = writeln!(
                    out,
                    "  one village's law, not the portfolio's: villages' own factors diversify, so the portfolio's tail is lower (its exact law is above)"
                );
            }
            for note in &section.notes {
                let _ = writeln!(out, "  note: {note}");
            }
            for e in &section.entries {
                let whose = if e.arms.len() == report.arms.len() {
                    "all arms".to_string()
                } else {
                    format!("arms: {}", e.arms.join(", "))
                };
                if e.rho == section.rho {
                    let _ = writeln!(out, "  p = {:.6} ({whose})", e.p);
                } else {
                    let _ = writeln!(out, "  p = {:.6}, rho = {} ({whose})", e.p, short(e.rho));
                }
                let levels: Vec<String> = e
                    .quantiles
                    .iter()
                    .map(|h| format!("{:>9}", format!("{}%", h.level * 100.0)))
                    .collect();
                let values: Vec<String> = e.quantiles.iter().map(|h| format!("{:>9.6}", h.share)).collect();
                let _ = writeln!(out, "    large-pool quantile {}", levels.join(" "));
                let _ = writeln!(out, "    hit share           {}", values.join(" "));
                match (e.finite_quantile_999, e.finite_minus_large, &e.finite_note) {
                    (Some(f), Some(gap), _) => {
                        let _ = writeln!(
                            out,
                            "    99.9% quantile, {} members: {f:.6} vs large pool {:.6} ({gap:+.6})",
                            e.finite_members, e.large_pool_quantile_999
                        );
                    }
                    (_, _, Some(note)) => {
                        let _ = writeln!(out, "    finite-pool quantile not computed: {note}");
                    }
                    _ => {}
                }
                if let Some(b) = &e.basel {
                    let _ = writeln!(
                        out,
                        "    Basel II other retail at PD = p, LGD = {:.2}: R(PD) = {:.4} vs scenario rho {:.4}",
                        b.lgd, b.basel_correlation, b.scenario_correlation
                    );
                    let _ = writeln!(
                        out,
                        "      99.9% conditional hit probability {:.6} (at scenario rho {:.6}); K = {:.6}, risk weight {:.2}% (at scenario rho: K = {:.6}, {:.2}%)",
                        b.conditional_hit_probability,
                        b.conditional_hit_probability_at_scenario_rho,
                        b.capital_requirement,
                        100.0 * b.risk_weight,
                        b.capital_requirement_at_scenario_rho,
                        100.0 * b.risk_weight_at_scenario_rho
                    );
                }
            }
            let horizon = if report.cycles_per_year > 1 {
                format!(
                    "one cycle as the horizon although a year is {} cycles here (`run` sets Basel capital at the annual default rate beside the simulated annual tail)",
                    report.cycles_per_year
                )
            } else {
                "one cycle as the one-year horizon".to_string()
            };
            let _ = writeln!(
                out,
                "  Basel figures treat {horizon} and a hit as a default (true when a hit leaves a shortfall nobody covers); no 1.06 scaling, no PD floor"
            );
        }
        (None, reason) => {
            let reason = reason.as_deref().unwrap_or("no reason recorded");
            let _ = writeln!(out, "Share of members hit per cycle: not shown: {reason}");
        }
    }
    let _ = writeln!(out);
    let _ = writeln!(out, "{}", report.caution);
    out
}

/// One row of figures: mean (exact law only), the quantiles, and ES99 (exact law only).
fn law_row(out: &mut String, name: &str, mean: Option<f64>, quantiles: &[f64], es: Option<f64>) {
    let cell = |x: Option<f64>| x.map_or_else(|| format!("{:>9}", "-"), |x| format!("{x:>9.6}"));
    let q: Vec<String> = quantiles.iter().map(|&x| cell(Some(x))).collect();
    let _ = writeln!(out, "      {name:<16} {} {} {}", cell(mean), q.join(" "), cell(es));
}

fn law_rows(out: &mut String, law: &PortfolioDefaultLaw) {
    let pick = |m: &std::collections::BTreeMap<String, f64>| -> Vec<f64> {
        QUANTILE_LEVELS
            .iter()
            .map(|q| m.get(&format!("{q}")).copied().unwrap_or(f64::NAN))
            .collect()
    };
    if law.cycles.is_empty() {
        let _ = writeln!(out, "    {} (none counted)", law.state);
    } else if law.state.ends_with(&law.cycles) {
        let _ = writeln!(out, "    {}", law.state);
    } else {
        let _ = writeln!(out, "    {} ({})", law.state, law.cycles);
    }
    law_row(out, "exact", Some(law.mean), &pick(&law.quantiles), Some(law.es99));
    law_row(
        out,
        "large portfolio",
        None,
        &pick(&law.large_portfolio_quantiles),
        None,
    );
}

/// The exact per-cycle law of the portfolio's default share, per arm and stress state, beside the
/// large-portfolio limit.
fn portfolio_section(out: &mut String, report: &AnalyzeReport) {
    let _ = writeln!(out, "Share of the portfolio's loans in default per cycle (exact law)");
    let reasons: Vec<&str> = report.arms.iter().filter_map(|a| a.out_of_class.as_deref()).collect();
    if !report.arms.is_empty() && reasons.len() == report.arms.len() && reasons.iter().all(|r| *r == reasons[0]) {
        let _ = writeln!(out, "  out of class: {}", reasons[0]);
        return;
    }
    let levels: Vec<String> = QUANTILE_LEVELS
        .iter()
        .map(|q| format!("{:>9}", format!("q{}", q * 100.0)))
        .collect();
    let _ = writeln!(out, "      {:<16} {:>9} {} {:>9}", "", "mean", levels.join(" "), "ES99");
    for arm in &report.arms {
        match (&arm.portfolio_default_law, &arm.out_of_class) {
            (Some(law), _) => {
                let _ = writeln!(
                    out,
                    "  {}: {} {}; large-portfolio limit: {}",
                    arm.label, law.units, law.unit, law.large_portfolio_law
                );
                law_rows(out, law);
                for s in &arm.stress_laws {
                    law_rows(out, s);
                }
                if let Some(year) = &arm.annual_default_law
                    && year.cycles_per_year > 1
                {
                    let _ = writeln!(
                        out,
                        "    a year of {} normal cycles (loans defaulting in the year / loans per cycle)",
                        year.cycles_per_year
                    );
                    let q: Vec<f64> = QUANTILE_LEVELS
                        .iter()
                        .map(|q| year.quantiles.get(&format!("{q}")).copied().unwrap_or(f64::NAN))
                        .collect();
                    law_row(out, "exact, a year", Some(year.mean), &q, Some(year.es99));
                }
            }
            (None, reason) => {
                let reason = reason.as_deref().unwrap_or("no reason recorded");
                let _ = writeln!(out, "  {}: out of class: {reason}", arm.label);
            }
        }
    }
    let _ = writeln!(
        out,
        "  q: the smallest share x of loans in default with P(share <= x) >= q; ES99: the mean share in the worst 1% of cycles; large portfolio: villages and members per village without bound, so only the portfolio-wide draws remain"
    );
}

/// The report as pretty-printed JSON.
pub fn json(report: &AnalyzeReport) -> String {
    serde_json::to_string_pretty(report)
        .unwrap_or_else(|e| format!("{{\"error\": \"cannot serialise the report: {e}\"}}"))
}
