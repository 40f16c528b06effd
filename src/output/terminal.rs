//! The short readable table printed at the end of a run.

use crate::report::RunReport;
use crate::stats::tolerance::Z_95;
use std::fmt::Write;

fn pct(x: Option<f64>) -> String {
    x.map_or_else(|| "-".into(), |v| format!("{:.2}%", 100.0 * v))
}

/// A share in per cent (or percentage points) with its 95% half-width, e.g. `95.70% ±0.06`;
/// `signed` prints the sign of differences.
fn with_interval(share: f64, standard_error: Option<f64>, decimals: usize, unit: &str, signed: bool) -> String {
    let value = if signed {
        format!("{:+.decimals$}", 100.0 * share)
    } else {
        format!("{:.decimals$}", 100.0 * share)
    };
    match standard_error {
        Some(se) => format!("{value}{unit} ±{:.decimals$}", 100.0 * Z_95 * se),
        None => format!("{value}{unit}"),
    }
}

/// A table of the main figures per arm, the best arm, warnings and the caution.
pub fn summary_table(report: &RunReport) -> String {
    let mut out = String::new();
    let name = if report.scenario.name().is_empty() {
        "(unnamed scenario)"
    } else {
        report.scenario.name()
    };
    let _ = writeln!(
        out,
        "{name}: {} replications x {} counted cycles, seed {}",
        report.scenario.replications(),
        report.scenario.cycles(),
        report.seed
    );
    let width = report
        .arms
        .iter()
        .map(|a| a.arm.label().len())
        .max()
        .unwrap_or(3)
        .max(3);
    let _ = writeln!(
        out,
        "{:<width$}  {:>18}  {:>9}  {:>9}  {:>12}  {:>10}  {:>18}  {:>11}  {:>16}  {:>9}  {:>9}",
        "arm",
        "group repaid (95%)",
        "exact",
        "no-short",
        "indep. pred.",
        "dep. ratio",
        "loss rate (95%)",
        "horizon p99",
        "worst cycle p95",
        "served",
        "excluded"
    );
    let shown = crate::stats::select::arms_shown(
        &report
            .arms
            .iter()
            .map(|a| a.summary.group_repayment.map(|g| g.rate))
            .collect::<Vec<_>>(),
    );
    for a in shown.iter().map(|&i| &report.arms[i]) {
        let s = &a.summary;
        let g = s
            .group_repayment
            .map_or("-".into(), |g| with_interval(g.rate, g.standard_error, 2, "%", false));
        let l = s
            .loss_rate
            .map_or("-".into(), |l| with_interval(l.rate, l.standard_error, 3, "%", false));
        let _ = writeln!(
            out,
            "{:<width$}  {:>18}  {:>9}  {:>9}  {:>12}  {:>10}  {:>18}  {:>11}  {:>16}  {:>9}  {:>9}",
            a.arm.label(),
            g,
            pct(a.analytic_group_repayment),
            pct(s.shortfall_free_group_rate),
            pct(s.iid_shortfall_free),
            s.dependence_ratio.map_or_else(|| "-".into(), |r| format!("{r:.3}")),
            l,
            pct(s.loss_p99),
            pct(s.worst_cycle_loss_p95),
            pct(s.served_share),
            pct(s.excluded_share)
        );
    }
    if shown.len() < report.arms.len() {
        let _ = writeln!(
            out,
            "the {} arms with the highest group repayment of {}, best first; every arm is in summary.csv",
            shown.len(),
            report.arms.len()
        );
    }
    let _ = writeln!(
        out,
        "no-short: groups with no member short; indep. pred.: (1 - member shortfall rate)^k, a \
         prediction under independence, not a forecast that failed; dep. ratio: no-short / indep. pred. \
         (1 for independent members); horizon p99: 99% quantile of each replication's loss rate over its \
         whole horizon; worst cycle p95: 95% quantile over replications of each replication's worst \
         single-cycle loss (both with order-statistic intervals in summary.csv)"
    );
    outreach_table(&mut out, report, width);
    behaviour_table(&mut out, report, width);
    if let (true, Some(baseline)) = (report.arms.len() > 1, &report.baseline) {
        let _ = writeln!(
            out,
            "differences from the baseline arm ({baseline}), paired by replication, 95%{}:",
            if shown.len() < report.arms.len() {
                " (the arms above; every arm is in differences.csv)"
            } else {
                ""
            }
        );
        let _ = writeln!(
            out,
            "{:<width$}  {:>22}  {:>22}  {:>22}",
            "arm", "group repaid (pp)", "loss rate (pp)", "served share (pp)"
        );
        for a in shown
            .iter()
            .map(|&i| &report.arms[i])
            .filter(|a| a.arm.label() != baseline.as_str())
        {
            let show = |metric: &str| {
                report
                    .differences
                    .iter()
                    .find(|d| d.arm == a.arm.label() && d.metric == metric)
                    .map_or_else(
                        || "-".to_string(),
                        |d| with_interval(d.difference, d.standard_error, 3, "", true),
                    )
            };
            let _ = writeln!(
                out,
                "{:<width$}  {:>22}  {:>22}  {:>22}",
                a.arm.label(),
                show("group_repayment_rate"),
                show("loss_rate"),
                show("served_share")
            );
        }
    }
    money_section(&mut out, report, width);
    if let Some(reason) = &report.analytic_out_of_class {
        let _ = writeln!(out, "exact values: none, outside the one-factor class ({reason})");
    }
    if let Some(rows) = &report.group_size {
        let width = rows.iter().map(|r| r.context.len()).max().unwrap_or(0).max(7);
        let cell = |k: Option<u32>| k.map_or_else(|| "-".to_string(), |k| k.to_string());
        let _ = writeln!(out, "best group size (group_size.csv):");
        let _ = writeln!(
            out,
            "{:<width$}  {:>9}  {:>14}  {:>11}  {:>6}  {:>7}",
            "context", "simulated", "not worse", "closed form", "exact", "by loss"
        );
        for r in rows {
            let sizes: Vec<String> = r.not_worse.iter().map(u32::to_string).collect();
            let context = if r.context.is_empty() { "(all arms)" } else { &r.context };
            let _ = writeln!(
                out,
                "{:<width$}  {:>9}  {:>14}  {:>11}  {:>6}  {:>7}",
                context,
                cell(r.best_simulated),
                sizes.join(";"),
                cell(r.best_closed_form),
                cell(r.best_exact),
                cell(r.best_by_loss)
            );
        }
        for sentence in rows.iter().flat_map(|r| &r.sentences) {
            let _ = writeln!(out, "{sentence}");
        }
    }
    // With one arm there is nothing to choose, so no best-arm line.
    if let Some(sel) = &report.selection {
        let size = |label: &str| {
            report
                .arms
                .iter()
                .find(|a| a.arm.label() == label)
                .map_or(0, |a| a.arm.policy().group_size())
        };
        match &sel.best {
            Some(best) => {
                let _ = writeln!(out, "best arm by group repayment: {best} (group size {})", size(best));
                let mut sizes: Vec<u32> = sel.not_worse.iter().map(|l| size(l)).collect();
                sizes.sort_unstable();
                sizes.dedup();
                let sizes: Vec<String> = sizes.iter().map(u32::to_string).collect();
                let _ = writeln!(
                    out,
                    "not significantly worse (paired by replication, 95%, Bonferroni): {} (group sizes {})",
                    sel.not_worse.join("; "),
                    sizes.join(", ")
                );
                for note in &sel.notes {
                    let _ = writeln!(out, "{note}");
                }
            }
            None => {
                let _ = writeln!(out, "no arm served any group in its counted cycles");
            }
        }
    }
    for w in &report.warnings {
        let _ = writeln!(out, "warning: {w}");
    }
    let _ = writeln!(out, "{}", report.caution);
    out
}

/// The year, money and capital per arm, in the currency label.
fn money_section(out: &mut String, report: &RunReport, width: usize) {
    use crate::finance::money_text;
    let Some(first) = report.arms.first() else { return };
    if *report.scenario.finance() == crate::scenario::Finance::default() {
        // Without costs the self-sufficiency ratio counts losses only and reads as a comfort it is
        // not: the tables wait for a [finance] table (summary.csv has the money figures either way;
        // the annual loss quantiles need a year of more than one cycle and are left empty).
        let _ = writeln!(
            out,
            "money and capital: no [finance] table, so a year is one cycle and costs and fees are zero; add \
             [finance] for the money and capital tables and the annual loss quantiles (the money figures are in \
             summary.csv either way)"
        );
        return;
    }
    let f = &first.finance;
    let cur = &f.currency;
    let years = report
        .arms
        .iter()
        .map(|a| a.finance.replication_years)
        .max()
        .unwrap_or(0);
    let _ = writeln!(
        out,
        "a year = {} cycle(s); money per year in {cur}, means over {} replication-years:",
        f.cycles_per_year,
        money_text(years as f64)
    );
    let _ = writeln!(
        out,
        "{:<width$}  {:>13}  {:>13}  {:>11}  {:>10}  {:>11}  {:>11}  {:>11}  {:>11}  {:>15}  {:>9}",
        "arm",
        "outstanding",
        "disbursed",
        "interest",
        "fees",
        "exp. loss",
        "UL 99.9%",
        "cost funds",
        "operating",
        "OSS (95%)",
        "net yield"
    );
    let opt = |x: Option<f64>| x.map_or_else(|| "-".to_string(), money_text);
    for a in &report.arms {
        let m = &a.finance.money;
        let oss = m.operational_self_sufficiency.map_or_else(
            || "-".to_string(),
            |o| match o.standard_error {
                Some(se) => format!("{:.3} ±{:.3}", o.rate, Z_95 * se),
                None => format!("{:.3}", o.rate),
            },
        );
        let _ = writeln!(
            out,
            "{:<width$}  {:>13}  {:>13}  {:>11}  {:>10}  {:>11}  {:>11}  {:>11}  {:>11}  {:>15}  {:>9}",
            a.arm.label,
            money_text(m.principal_outstanding),
            money_text(m.disbursed),
            money_text(m.interest_collected),
            money_text(m.fees),
            money_text(m.expected_loss),
            opt(m.unexpected_loss_999),
            money_text(m.cost_of_funds),
            money_text(m.operating_cost),
            oss,
            pct(a.summary.net_yield)
        );
    }
    let _ = writeln!(
        out,
        "annual loss as a share of the year's mean principal outstanding, and capital in {cur}:"
    );
    let _ = writeln!(
        out,
        "{:<width$}  {:>8}  {:>8}  {:>8}  {:>8}  {:>8}  {:>10}  {:>13}  {:>13}  {:>13}",
        "arm", "p50", "p95", "p99", "p99.9", "ES99", "annual PD", "simulated UL", "Basel K x EAD", "exact law UL"
    );
    for a in &report.arms {
        let (t, c) = (&a.finance.annual_loss_rate, &a.finance.capital);
        let _ = writeln!(
            out,
            "{:<width$}  {:>8}  {:>8}  {:>8}  {:>8}  {:>8}  {:>10}  {:>13}  {:>13}  {:>13}",
            a.arm.label,
            pct(t.p50),
            pct(t.p95),
            pct(t.p99),
            pct(t.p999),
            pct(t.es99),
            pct(c.annual_default_rate),
            opt(c.simulated_unexpected_loss),
            opt(c.basel_capital),
            opt(c.exact_unexpected_loss)
        );
    }
    let _ = writeln!(
        out,
        "outstanding: mean principal outstanding (EAD); UL 99.9%: 99.9% annual loss minus its mean; OSS: \
         (interest + fees) / (cost of funds + loan losses + operating cost); annual PD: 1 - (1 - member \
         default rate)^cycles per year; Basel K x EAD: Basel II other-retail capital at that PD with LGD = 1 - \
         recovery rate; exact law UL: the exact portfolio default law of a year of normal cycles, each default \
         losing the simulated mean loss per defaulting loan"
    );
    if let Some(note) = first.finance.capital.exact_note.as_deref()
        && report.arms.iter().all(|a| a.finance.capital.exact_law_missing())
    {
        let _ = writeln!(out, "exact law UL: none ({note})");
    }
    const MAX_SENTENCES: usize = 4;
    for a in report.arms.iter().take(MAX_SENTENCES) {
        let prefix = if report.arms.len() > 1 {
            format!("{}: ", a.arm.label)
        } else {
            String::new()
        };
        let _ = writeln!(out, "capital: {prefix}{}", a.finance.capital.sentence);
    }
    if report.arms.len() > MAX_SENTENCES {
        let _ = writeln!(
            out,
            "capital: the sentence for every arm is in summary.json (finance.capital.sentence)"
        );
    }
}

/// A selection in plain lines: the objective, constraints, feasible arms, best, not worse, notes.
pub fn selection_text(s: &crate::stats::select::Selection) -> String {
    let mut out = String::new();
    let list = |v: &[String]| if v.is_empty() { "none".to_string() } else { v.join("; ") };
    let _ = writeln!(out, "objective: {}", s.objective);
    if !s.constraints.is_empty() {
        let _ = writeln!(
            out,
            "subject to (each met with 95% one-sided confidence, Bonferroni over arms x constraints): {}",
            s.constraints.join(", ")
        );
        let _ = writeln!(out, "feasible: {}", list(&s.feasible));
    }
    let _ = writeln!(out, "best: {}", s.best.as_deref().unwrap_or("none"));
    let _ = writeln!(
        out,
        "not significantly worse (paired by replication, one-sided 5%, Bonferroni): {}",
        list(&s.not_worse)
    );
    for note in &s.notes {
        let _ = writeln!(out, "{note}");
    }
    out
}

/// What `check` prints: the scenario's size and the arms it resolves to.
pub fn arms_listing(scenario: &crate::scenario::Scenario, origin: &str) -> String {
    use crate::output::tables::{exclusion_scope_name, formation_name, liability_name, matching_name};
    let mut out = String::new();
    let _ = writeln!(out, "{origin}: valid scenario \"{}\"", scenario.name());
    let _ = writeln!(
        out,
        "{} borrowers in {} villages, {} replications x ({} warm-up + {} counted) cycles, {} shocks, seed {}",
        scenario.borrowers(),
        scenario.villages(),
        scenario.replications(),
        scenario.warmup_cycles(),
        scenario.cycles(),
        scenario.arms()[0].shocks().len(),
        scenario.seed()
    );
    let _ = writeln!(out, "{} arm(s):", scenario.arms().len());
    for (i, a) in scenario.arms().iter().enumerate() {
        let p = &a.policy();
        let _ = writeln!(
            out,
            "  {:>3}  {:<32} k={} {} cover={} exclusion={} ({}) {} {}",
            i + 1,
            a.label(),
            p.group_size(),
            liability_name(p.liability()),
            p.peer_cover(),
            p.exclusion_cycles(),
            exclusion_scope_name(p.exclusion_scope()),
            formation_name(p.formation()),
            matching_name(p.matching())
        );
    }
    out
}

/// The line `check` prints about memory: the estimated peak of the run, or of one shard of it, on the
/// worker threads of `options`, beside the memory available here. A cluster job sized from it asks
/// for what its task needs (Slurm's `--mem`) instead of guessing; `run` refuses to start above the
/// memory available, or above `--max-memory`.
pub fn memory_line(
    scenario: &crate::scenario::Scenario,
    options: &crate::run::RunOptions,
    shard: Option<crate::checkpoint::ShardId>,
) -> String {
    use crate::engine::memory::{BYTES_PER_GIB, available_bytes};
    let threads = crate::run::worker_threads(options);
    let (held, what) = match shard {
        Some(id) => {
            let held = crate::shard::range(id.index, id.count, scenario.replications()).len() as u32;
            (
                held,
                format!("shard {} of {} ({held} replications)", id.index, id.count),
            )
        }
        None => (scenario.replications(), "the run".to_string()),
    };
    let bytes = crate::run::memory_estimate(scenario, options, held).total_bytes();
    let threads_text = if threads == 1 {
        "1 thread".to_string()
    } else {
        format!("{threads} threads")
    };
    let available = match available_bytes() {
        Some(a) => format!("{:.3} GiB available here", a as f64 / BYTES_PER_GIB),
        None => "the memory available here is unknown".to_string(),
    };
    format!(
        "estimated peak memory of {what} on {threads_text}: {:.1} MiB ({:.3} GiB); {available}",
        bytes as f64 / (1u64 << 20) as f64,
        bytes as f64 / BYTES_PER_GIB
    )
}

/// Outreach per arm: exclusion events always; removals, entrants and removed slots when an arm
/// removes borrowers for good (with replacement the removed slots refill at once, so the served
/// share alone hides them); the mean group size when an arm's sizes vary.
fn outreach_table(out: &mut String, report: &RunReport, width: usize) {
    use crate::scenario::Exclusion;
    let permanent = report
        .arms
        .iter()
        .any(|a| a.arm.policy().exclusion_cycles() == Exclusion::Permanent);
    let varying = report.arms.iter().any(|a| a.arm.policy().sizes_vary());
    let mut header = format!("{:<width$}  {:>12}", "arm", "excl. events");
    if permanent {
        let _ = write!(header, "  {:>9}  {:>9}  {:>9}", "removals", "entrants", "removed");
    }
    let _ = write!(header, "  {:>14}", "clients reached");
    if varying {
        let _ = write!(header, "  {:>9}", "mean size");
    }
    let _ = writeln!(
        out,
        "outreach (per member loan; removed: share of slots left empty by removals):"
    );
    let _ = writeln!(out, "{header}");
    for a in &report.arms {
        let s = &a.summary;
        let mut line = format!("{:<width$}  {:>12}", a.arm.label, pct(s.exclusion_events));
        if permanent {
            let own = a.arm.policy().exclusion_cycles() == Exclusion::Permanent;
            let show = |x: Option<f64>| if own { pct(x) } else { "-".into() };
            let _ = write!(
                line,
                "  {:>9}  {:>9}  {:>9}",
                show(s.removal_rate),
                pct(s.entrant_rate),
                show(s.removed_share)
            );
        }
        let _ = write!(
            line,
            "  {:>14}",
            s.clients_reached.map_or_else(|| "-".into(), |c| format!("{c:.1}"))
        );
        if varying {
            let _ = write!(
                line,
                "  {:>9}",
                s.mean_group_size.map_or_else(|| "-".into(), |m| format!("{m:.3}"))
            );
        }
        let _ = writeln!(out, "{line}");
    }
}

/// Walk-aways and loan sizes per arm, printed only when some arm has `[behaviour]`, growing loans or
/// growing incomes: without them nobody walks away and every loan is the first principal.
fn behaviour_table(out: &mut String, report: &RunReport, width: usize) {
    let dynamic = report
        .arms
        .iter()
        .any(|a| a.arm.behaviour().is_some() || a.arm.loan_growth() > 0.0 || a.arm.income_growth() > 0.0);
    if !dynamic {
        return;
    }
    let _ = writeln!(
        out,
        "{:<width$}  {:>20}  {:>14}  {:>14}",
        "arm", "walked away (95%)", "able to pay", "mean principal"
    );
    for a in &report.arms {
        let s = &a.summary;
        let walked = s
            .strategic_default_rate
            .map_or("-".into(), |w| with_interval(w.rate, w.standard_error, 3, "%", false));
        let _ = writeln!(
            out,
            "{:<width$}  {:>20}  {:>14}  {:>14}",
            a.arm.label(),
            walked,
            s.able_members,
            s.mean_principal.map_or_else(|| "-".into(), |p| format!("{p:.2}"))
        );
    }
    let _ = writeln!(
        out,
        "walked away: members able to pay who chose not to (strategic_default_rate); able to pay: their \
         number over all counted cycles; mean principal: disbursed / member loans"
    );
}
