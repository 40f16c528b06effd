//! The HTML page around the charts: headline figures, tables, the scenario and the stamp.
//!
//! The page is written as well-formed XHTML-compatible markup so that any XML parser can read it
//! back (the tests do), carries its stylesheet inline, needs no script, and refers to nothing
//! outside itself: the only links are anchors within the page.

use super::charts::{Chart, escape, frontier_flags};
use super::input::{ArmRow, RunData};
use serde_json::Value;
use std::fmt::Write as _;

const STYLE: &str = r#"
:root { color-scheme: light; }
body { margin: 0; background: #f6f4ef; color: #262b33;
  font: 16px/1.5 "Segoe UI", "Helvetica Neue", Arial, sans-serif; }
main { max-width: 1180px; margin: 0 auto; padding: 28px 40px 60px; background: #ffffff; }
header { border-bottom: 3px solid #1d4e89; padding-bottom: 12px; margin-bottom: 18px; }
h1 { font-size: 30px; margin: 0 0 4px; letter-spacing: -0.01em; }
.sub { color: #5b616b; margin: 0; }
h2 { font-size: 22px; margin: 40px 0 10px; padding-left: 12px; border-left: 6px solid #1d4e89; }
.caution { background: #fbf1e2; border-left: 6px solid #e08024; padding: 12px 16px; margin: 18px 0; }
.caution strong { display: block; margin-bottom: 2px; }
.glance { display: grid; grid-template-columns: repeat(auto-fit, minmax(250px, 1fr)); gap: 12px; margin: 12px 0; }
.glance > div { border: 1px solid #d9dde3; border-radius: 6px; padding: 10px 14px; }
.glance .what { color: #5b616b; font-size: 14px; }
.glance .val { font-size: 22px; font-weight: 600; }
.glance .arm { font-size: 14px; }
nav ol { columns: 2; margin: 6px 0; }
nav a { color: #1d4e89; }
figure { margin: 18px 0 30px; }
figure svg { display: block; width: 100%; height: auto; border: 1px solid #e4e6ea; }
figcaption { color: #3c424c; font-size: 15px; margin-top: 6px; max-width: 70em; }
table { border-collapse: collapse; font-size: 14px; margin: 8px 0 16px; font-variant-numeric: tabular-nums; }
th, td { padding: 5px 9px; border-bottom: 1px solid #e4e6ea; text-align: right; vertical-align: top; }
th { background: #eef1f5; text-align: right; font-weight: 600; }
th.l, td.l { text-align: left; }
td { white-space: nowrap; }
td.l { white-space: normal; min-width: 12em; }
tbody tr:nth-child(even) { background: #f8f9fb; }
.wide { overflow-x: auto; }
dl.facts { display: grid; grid-template-columns: max-content 1fr; gap: 4px 18px; }
dl.facts dt { color: #5b616b; }
dl.facts dd { margin: 0; }
pre { background: #f4f5f7; padding: 12px; overflow-x: auto; font-size: 13px; }
.stamp { font-family: "Consolas", "Menlo", monospace; font-size: 14px; overflow-wrap: anywhere; }
.warn { color: #8e2c48; }
@media print { body { background: #ffffff; } main { padding: 0; } figure { break-inside: avoid; } nav { display: none; } }
"#;

fn pc(x: Option<f64>, decimals: usize) -> String {
    x.map_or("–".to_string(), |v| format!("{:.*}", decimals, v * 100.0))
}

fn with_ci(x: Option<f64>, ci: Option<(f64, f64)>) -> String {
    match (x, ci) {
        (Some(v), Some((lo, hi))) => format!("{:.2} <small>({:.2}–{:.2})</small>", v * 100.0, lo * 100.0, hi * 100.0),
        (Some(v), None) => format!("{:.2}", v * 100.0),
        _ => "–".into(),
    }
}

fn arm_name(a: &ArmRow) -> String {
    format!("{} · {}", a.number, a.label)
}

/// An arm label escaped for the page, free to wrap after each comma.
fn label_html(label: &str) -> String {
    escape(label).replace(',', ",<wbr/>")
}

/// The arm with the largest (or smallest) value of a figure; ties go to the earlier arm.
fn extreme(arms: &[ArmRow], f: impl Fn(&ArmRow) -> Option<f64>, largest: bool) -> Option<(&ArmRow, f64)> {
    let mut best: Option<(&ArmRow, f64)> = None;
    for a in arms {
        if let Some(v) = f(a)
            && best.is_none_or(|(_, b)| if largest { v > b } else { v < b })
        {
            best = Some((a, v));
        }
    }
    best
}

/// Assembles the whole page.
pub fn page(d: &RunData, charts: &[Chart]) -> String {
    let mut h = String::with_capacity(256 * 1024);
    let title = if d.scenario_name.is_empty() {
        "Loan-cycle simulation".to_string()
    } else {
        d.scenario_name.clone()
    };
    let _ = write!(
        h,
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\"/>\n\
         <meta name=\"viewport\" content=\"width=device-width, initial-scale=1\"/>\n\
         <title>{} · board report</title>\n<style>{STYLE}</style>\n</head>\n<body>\n<main>\n",
        escape(&title)
    );
    let cycles = d.scenario.get("cycles").and_then(Value::as_u64);
    let _ = write!(
        h,
        "<header>\n<h1>{}</h1>\n<p class=\"sub\">Board report of a simulated lending policy comparison: {} arm{} (policy variants){}{}.</p>\n</header>\n",
        escape(&title),
        d.arms.len(),
        if d.arms.len() == 1 { "" } else { "s" },
        d.replications_per_arm
            .map_or(String::new(), |r| format!(", {r} replications each")),
        cycles.map_or(String::new(), |c| format!(", {c} counted loan cycles"))
    );
    h.push_str(
        "<div class=\"caution\" id=\"caution\"><strong>Model estimates for planning, not forecasts.</strong>\
         Every figure here comes from a simulation model and the assumptions of its scenario. Lending decisions follow local \
         regulation and client-protection practice: fair treatment, transparent pricing, avoiding over-indebtedness and \
         respectful collection. No simulated repayment rate justifies pressure on borrowers or their peers.</div>\n",
    );
    glance(&mut h, d);
    h.push_str("<nav><strong>Contents</strong><ol>\n");
    for c in charts {
        let _ = writeln!(h, "<li><a href=\"#{}\">{}</a></li>", c.name, escape(&c.title));
    }
    if d.group_size.is_some() {
        h.push_str("<li><a href=\"#group-size\">Best group size, by each criterion</a></li>\n");
    }
    h.push_str("<li><a href=\"#summary\">Summary table</a></li>\n");
    if has_outreach(d) {
        h.push_str("<li><a href=\"#borrowers\">Borrowers reached and the lender's money</a></li>\n");
    }
    h.push_str(
        "<li><a href=\"#scenario\">The scenario</a></li>\n<li><a href=\"#stamp\">Reproducibility</a></li>\n</ol></nav>\n",
    );
    for c in charts {
        let _ = write!(
            h,
            "<figure id=\"{}\">\n{}\n<figcaption>{} <span class=\"file\">(Also saved as charts/{}.svg.)</span></figcaption>\n</figure>\n",
            c.name,
            inline_svg(&c.svg),
            escape(&c.caption),
            c.name
        );
    }
    if let Some(t) = &d.group_size {
        h.push_str(
            "<h2 id=\"group-size\">Best group size, by each criterion</h2>\n<div class=\"wide\"><table>\n<thead><tr>",
        );
        for head in &t.headers {
            let _ = write!(h, "<th class=\"l\">{}</th>", escape(&head.replace('_', " ")));
        }
        h.push_str("</tr></thead>\n<tbody>\n");
        for row in &t.rows {
            h.push_str("<tr>");
            for cell in row {
                let _ = write!(h, "<td class=\"l\">{}</td>", escape(cell));
            }
            h.push_str("</tr>\n");
        }
        h.push_str("</tbody></table></div>\n");
    }
    summary_table(&mut h, d);
    outreach_table(&mut h, d);
    scenario(&mut h, d);
    stamp(&mut h, d);
    h.push_str("</main>\n</body>\n</html>\n");
    h
}

/// The SVG element without the XML prolog a standalone file may carry.
fn inline_svg(svg: &str) -> &str {
    match svg.find("<svg") {
        Some(at) => svg[at..].trim_end(),
        None => svg,
    }
}

fn glance(h: &mut String, d: &RunData) {
    let flags = frontier_flags(&d.arms);
    let mut cards: Vec<(String, String, String)> = Vec::new();
    if let Some((a, v)) = extreme(&d.arms, |a| a.repayment, true) {
        cards.push((
            "Highest share of groups repaying in full".into(),
            format!("{:.2}%", v * 100.0),
            arm_name(a),
        ));
    }
    if let Some((a, v)) = extreme(&d.arms, |a| a.loss, false) {
        cards.push((
            "Lowest loss, % of amount lent".into(),
            format!("{:.2}%", v * 100.0),
            arm_name(a),
        ));
    }
    if let Some((a, v)) = extreme(&d.arms, |a| a.served, true) {
        cards.push((
            "Most borrower slots served".into(),
            format!("{:.1}%", v * 100.0),
            arm_name(a),
        ));
    }
    let on: Vec<String> = d
        .arms
        .iter()
        .zip(&flags)
        .filter(|(_, f)| **f)
        .map(|(a, _)| a.number.to_string())
        .collect();
    if !on.is_empty() {
        cards.push((
            "On the loss–outreach frontier".into(),
            format!("{} of {} arms", on.len(), d.arms.len()),
            format!("arms {}", on.join(", ")),
        ));
    }
    if cards.is_empty() {
        return;
    }
    h.push_str("<h2 id=\"glance\">At a glance</h2>\n<div class=\"glance\">\n");
    for (what, val, arm) in cards {
        let _ = writeln!(
            h,
            "<div><div class=\"what\">{}</div><div class=\"val\">{}</div><div class=\"arm\">{}</div></div>",
            escape(&what),
            escape(&val),
            label_html(&arm)
        );
    }
    h.push_str(
        "</div>\n<p>These are point estimates; the charts and the summary table give their 95% intervals. The \
         policy with the highest repayment is usually the harshest one, so read repayment together with loss and \
         with how many borrowers stay served.</p>\n",
    );
}

fn summary_table(h: &mut String, d: &RunData) {
    let flags = frontier_flags(&d.arms);
    let any_exact = d.arms.iter().any(|a| a.exact.is_some());
    let any_worst = d.arms.iter().any(|a| a.worst_q[2].is_some());
    let tail_head = if any_worst {
        "worst cycle p99"
    } else {
        "single-cycle loss p99"
    };
    h.push_str(
        "<h2 id=\"summary\">Summary table</h2>\n<p>Percentages, with 95% confidence intervals in brackets. \
         Loss is principal lost as a share of principal lent; net yield is what came back (collections, \
         recoveries and fees) less what was lent and the lender's costs, as a share of what was lent; served \
         and excluded are shares of borrower slots.</p>\n<div class=\"wide\"><table>\n<thead><tr><th>#</th><th class=\"l\">arm</th>\
         <th>groups repaying in full</th>",
    );
    if any_exact {
        h.push_str("<th>exact one-factor</th>");
    }
    let _ = write!(
        h,
        "<th>loss, % lent</th><th>net yield</th><th>served</th><th>excluded</th>\
         <th>horizon loss p99</th><th>{tail_head}</th><th class=\"l\">frontier</th></tr></thead>\n<tbody>\n"
    );
    for (a, on) in d.arms.iter().zip(&flags) {
        let _ = write!(
            h,
            "<tr><td>{}</td><td class=\"l\">{}</td><td>{}</td>",
            a.number,
            label_html(&a.label),
            with_ci(a.repayment, a.repayment_ci)
        );
        if any_exact {
            let _ = write!(h, "<td>{}</td>", pc(a.exact, 2));
        }
        let tail = if any_worst { a.worst_q[2] } else { a.cycle_p99 };
        let _ = writeln!(
            h,
            "<td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td class=\"l\">{}</td></tr>",
            with_ci(a.loss, a.loss_ci),
            pc(a.net_yield, 2),
            pc(a.served, 1),
            pc(a.excluded, 1),
            pc(a.loss_q[2], 2),
            pc(tail, 2),
            if *on { "yes" } else { "" }
        );
    }
    h.push_str("</tbody></table></div>\n");
}

/// Whether the run wrote the borrower figures (runs before they existed did not).
fn has_outreach(d: &RunData) -> bool {
    d.arms.iter().any(|a| a.outreach.exclusion_events.is_some())
}

/// Borrowers reached, walk-aways and loan sizes, and the lender's money where the scenario has costs
/// or fees: the figures an evaluator sets beside repayment, each column shown only where some arm
/// has something to show.
fn outreach_table(h: &mut String, d: &RunData) {
    if !has_outreach(d) {
        return;
    }
    let o = |f: fn(&ArmRow) -> Option<f64>| d.arms.iter().filter_map(f).collect::<Vec<f64>>();
    let any_positive = |f: fn(&ArmRow) -> Option<f64>| o(f).iter().any(|&x| x > 0.0);
    let removals = any_positive(|a| a.outreach.removal_rate);
    let walked = any_positive(|a| a.outreach.walked);
    let principals = o(|a| a.outreach.mean_principal);
    let growing = principals
        .iter()
        .any(|&p| principals.first().is_some_and(|&f| (p - f).abs() > 1e-9 * f.abs()));
    let money = any_positive(|a| a.outreach.costs_and_fees);
    h.push_str(
        "<h2 id=\"borrowers\">Borrowers reached and the lender's money</h2>\n<p>Exclusion events and removals \
         are per member loan; clients reached counts the distinct borrowers served in a replication. A longer \
         exclusion can raise repayment by turning borrowers away: read these beside the summary table.</p>\n\
         <div class=\"wide\"><table>\n<thead><tr><th>#</th><th class=\"l\">arm</th><th>exclusion events</th>",
    );
    if removals {
        h.push_str("<th>removed for good</th>");
    }
    h.push_str("<th>clients reached</th>");
    if walked {
        h.push_str("<th>walked away (of those able to pay)</th>");
    }
    if growing {
        h.push_str("<th>mean loan</th>");
    }
    if money {
        h.push_str("<th>operational self-sufficiency</th><th>annual loss p99</th>");
    }
    h.push_str("</tr></thead>\n<tbody>\n");
    for a in &d.arms {
        let r = &a.outreach;
        let _ = write!(
            h,
            "<tr><td>{}</td><td class=\"l\">{}</td><td>{}</td>",
            a.number,
            label_html(&a.label),
            pc(r.exclusion_events, 2)
        );
        if removals {
            let _ = write!(h, "<td>{}</td>", pc(r.removal_rate, 2));
        }
        let _ = write!(
            h,
            "<td>{}</td>",
            r.clients_reached.map_or("-".into(), |c| format!("{c:.0}"))
        );
        if walked {
            let _ = write!(h, "<td>{}</td>", pc(r.walked, 3));
        }
        if growing {
            let _ = write!(
                h,
                "<td>{}</td>",
                r.mean_principal.map_or("-".into(), |p| format!("{p:.1}"))
            );
        }
        if money {
            let _ = write!(
                h,
                "<td>{}</td><td>{}</td>",
                r.self_sufficiency.map_or("-".into(), |x| format!("{x:.2}")),
                pc(r.annual_loss_p99, 2)
            );
        }
        h.push_str("</tr>\n");
    }
    h.push_str("</tbody></table></div>\n");
}

fn fact(h: &mut String, name: &str, value: String) {
    let _ = writeln!(h, "<dt>{}</dt><dd>{}</dd>", escape(name), escape(&value));
}

fn num(v: &Value) -> String {
    match v {
        Value::String(s) => s.clone(),
        Value::Null => "–".into(),
        other => other.to_string(),
    }
}

/// A distribution or curve written as the scenario file writes it.
fn inline(v: &Value) -> String {
    match v {
        Value::Object(map) => {
            // The kind of a distribution or curve first, then numbered table entries in number order.
            let mut entries: Vec<(&String, &Value)> = map.iter().collect();
            entries.sort_by_key(|(k, _)| (!matches!(k.as_str(), "kind" | "curve"), k.parse::<u64>().unwrap_or(0)));
            let parts: Vec<String> = entries.iter().map(|(k, x)| format!("{k} = {}", inline(x))).collect();
            format!("{{ {} }}", parts.join(", "))
        }
        Value::Array(items) => format!("[{}]", items.iter().map(inline).collect::<Vec<_>>().join(", ")),
        Value::String(s) => format!("\"{s}\""),
        other => other.to_string(),
    }
}

fn scenario(h: &mut String, d: &RunData) {
    let s = &d.scenario;
    h.push_str("<h2 id=\"scenario\">The scenario</h2>\n<dl class=\"facts\">\n");
    let get = |k: &str| s.get(k).map(num).unwrap_or_else(|| "–".into());
    fact(h, "name", get("name"));
    fact(
        h,
        "borrowers, villages",
        format!("{} borrowers in {} villages", get("borrowers"), get("villages")),
    );
    fact(
        h,
        "cycles",
        format!(
            "{} counted after {} warm-up cycles; {} replications",
            get("cycles"),
            get("warmup_cycles"),
            get("replications")
        ),
    );
    fact(
        h,
        "loan",
        format!(
            "principal {}, interest {} per cycle (flat), {} of unpaid principal recovered",
            get("principal"),
            get("interest_rate"),
            get("recovery_rate")
        ),
    );
    if let Some(x) = s.get("income") {
        fact(h, "income ÷ amount due", inline(x));
    }
    if let Some(x) = s.get("risk") {
        fact(h, "risk multiplier", inline(x));
    }
    for shock in s.get("shocks").and_then(Value::as_array).into_iter().flatten() {
        let name = shock.get("name").map(num).unwrap_or_default();
        let mut text = format!(
            "{} scope, probability {}",
            shock.get("scope").map(num).unwrap_or_default(),
            shock.get("probability").map(inline).unwrap_or_default()
        );
        if let Some(sev) = shock.get("severity") {
            let _ = write!(text, ", severity {}", inline(sev));
        }
        for w in shock.get("stress").and_then(Value::as_array).into_iter().flatten() {
            let _ = write!(
                text,
                "; stress in cycles {} to {} with probability {}",
                w.get("from").map(num).unwrap_or_default(),
                w.get("to").map(num).unwrap_or_default(),
                w.get("probability").map(num).unwrap_or_default()
            );
        }
        fact(h, &format!("shock “{name}”"), text);
    }
    if s.get("dropout").is_some() {
        fact(
            h,
            "pool",
            format!(
                "dropout {} per member per cycle; departures replaced: {}",
                get("dropout"),
                get("replace_departures")
            ),
        );
    }
    if !d.swept.is_empty() {
        fact(h, "swept", d.swept.join(", "));
    }
    if let Some(policy) = s
        .get("arms")
        .and_then(Value::as_array)
        .and_then(|a| a.first())
        .and_then(|a| a.get("policy"))
        && let Some(map) = policy.as_object()
    {
        let fixed: Vec<String> = map
            .iter()
            .filter(|(k, _)| !d.swept.iter().any(|sk| sk == *k))
            .map(|(k, v)| format!("{k} = {}", num(v)))
            .collect();
        if !fixed.is_empty() {
            fact(h, "policy of every arm", fixed.join(", "));
        }
    }
    h.push_str("</dl>\n");
    if !s.is_null() {
        let mut shown = s.clone();
        if let Some(map) = shown.as_object_mut() {
            map.remove("arms");
        }
        let text = serde_json::to_string_pretty(&shown).unwrap_or_default();
        let _ = write!(
            h,
            "<details><summary>The resolved scenario as the run recorded it (defaults filled in)</summary>\n<pre>{}</pre>\n</details>\n",
            escape(&text)
        );
    }
}

fn stamp(h: &mut String, d: &RunData) {
    h.push_str("<h2 id=\"stamp\">Reproducibility</h2>\n<dl class=\"facts stamp\">\n");
    fact(
        h,
        "simulated by",
        if d.tool.is_empty() {
            "–".into()
        } else {
            d.tool.clone()
        },
    );
    fact(h, "report drawn by", format!("loancycle {}", env!("CARGO_PKG_VERSION")));
    fact(h, "seed", d.seed.map_or("–".into(), |s| s.to_string()));
    fact(
        h,
        "scenario SHA-256",
        if d.scenario_sha256.is_empty() {
            "–".into()
        } else {
            d.scenario_sha256.clone()
        },
    );
    fact(
        h,
        "scenario file",
        if d.scenario_origin.is_empty() {
            "–".into()
        } else {
            d.scenario_origin.clone()
        },
    );
    fact(h, "run directory", d.dir.display().to_string());
    h.push_str("</dl>\n<p>The same scenario file, seed and tool version give identical figures on any machine and any number of threads.</p>\n");
    if !d.warnings.is_empty() {
        h.push_str("<p><strong>Warnings recorded by the run:</strong></p>\n<ul class=\"warn\">\n");
        for w in &d.warnings {
            let _ = writeln!(h, "<li>{}</li>", escape(w));
        }
        h.push_str("</ul>\n");
    }
}
