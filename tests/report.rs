//! The board report, read back as a reader's tools would: report.html and charts/*.svg are parsed
//! as XML, and every plotted figure (the data attributes on each chart's marks) is compared with the
//! run's own CSV files, including where on the chart it sits. Also: no network references, the size
//! bound for 50 arms x 1,000 replications, and refusals of bad input with nothing half-written.

use std::collections::{BTreeMap, HashMap};
use std::path::{Path, PathBuf};
use std::process::Command;

const BAD_INPUT: i32 = 2;
const CHARTS: [&str; 5] = ["repayment", "losses", "cycles", "differences", "frontier"];

fn bin() -> Command {
    Command::new(env!("CARGO_BIN_EXE_loancycle"))
}

fn data(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/data/report")
        .join(name)
}

/// Runs a scenario with `--report` into a fresh directory.
fn run_with_report(scenario: &str) -> (tempfile::TempDir, PathBuf) {
    let tmp = tempfile::tempdir().expect("temporary directory");
    let out = tmp.path().join("run");
    let o = bin()
        .args(["run", "--quiet", "--report", "--out"])
        .arg(&out)
        .arg(data(scenario))
        .output()
        .expect("binary runs");
    assert_eq!(o.status.code(), Some(0), "{}", String::from_utf8_lossy(&o.stderr));
    (tmp, out)
}

fn read_csv(path: &Path) -> Vec<HashMap<String, String>> {
    let mut r = csv::Reader::from_path(path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    let headers = r.headers().expect("header").clone();
    r.records()
        .map(|rec| {
            let rec = rec.expect("record");
            headers
                .iter()
                .zip(rec.iter())
                .map(|(h, v)| (h.to_string(), v.to_string()))
                .collect()
        })
        .collect()
}

fn parse(text: &str) -> roxmltree::Document<'_> {
    let options = roxmltree::ParsingOptions {
        allow_dtd: true,
        ..Default::default()
    };
    roxmltree::Document::parse_with_options(text, options).unwrap_or_else(|e| panic!("not well-formed: {e}"))
}

/// One data-carrying mark read back from a chart.
#[derive(Debug, Clone)]
struct Mark {
    chart: String,
    series: String,
    arm: String,
    value: f64,
    axis: String,
    px: (f64, f64),
    attrs: BTreeMap<String, String>,
}

fn marks_of(doc: &roxmltree::Document) -> Vec<Mark> {
    let mut out = Vec::new();
    for svg in doc.descendants().filter(|n| n.has_tag_name("svg")) {
        let chart = svg.attribute("data-chart").unwrap_or("").to_string();
        for m in svg.descendants().filter(|n| n.attribute("class") == Some("mark")) {
            let num = |k: &str| -> f64 {
                m.attribute(k)
                    .unwrap_or_else(|| panic!("mark without {k}"))
                    .parse()
                    .expect("number")
            };
            out.push(Mark {
                chart: chart.clone(),
                series: m.attribute("data-series").expect("data-series").to_string(),
                arm: m.attribute("data-arm").expect("data-arm").to_string(),
                value: num("data-value"),
                axis: m.attribute("data-axis").expect("data-axis").to_string(),
                px: (num("cx"), num("cy")),
                attrs: m
                    .attributes()
                    .filter(|a| a.name().starts_with("data-"))
                    .map(|a| (a.name().to_string(), a.value().to_string()))
                    .collect(),
            });
        }
    }
    out
}

fn close(a: f64, b: f64) -> bool {
    (a - b).abs() <= 1e-12 * a.abs().max(b.abs()).max(1e-300)
}

/// The marks of one axis scale lie on one straight line of pixel against value: the chart places
/// each figure in proportion to its value, higher values further right or further up.
fn assert_linear(name: &str, marks: &[&Mark]) {
    let pixel = |m: &Mark| if m.axis == "x" { m.px.0 } else { m.px.1 };
    let lo = marks.iter().min_by(|a, b| a.value.total_cmp(&b.value)).expect("marks");
    let hi = marks.iter().max_by(|a, b| a.value.total_cmp(&b.value)).expect("marks");
    if hi.value - lo.value <= 0.0 {
        return;
    }
    let slope = (pixel(hi) - pixel(lo)) / (hi.value - lo.value);
    if lo.axis == "x" {
        assert!(slope > 0.0, "{name}: larger values must sit further right");
    } else {
        assert!(slope < 0.0, "{name}: larger values must sit higher");
    }
    for m in marks {
        let expected = pixel(lo) + slope * (m.value - lo.value);
        assert!(
            (pixel(m) - expected).abs() <= 1.5,
            "{name}: {} {} = {} drawn at pixel {} instead of {expected:.1}",
            m.arm,
            m.series,
            m.value,
            pixel(m)
        );
    }
}

/// Checks a finished report against its run directory; returns the marks for further checks.
fn check_report(dir: &Path) -> Vec<Mark> {
    let html = std::fs::read_to_string(dir.join("report.html")).expect("report.html written");
    let doc = parse(&html);
    let marks = marks_of(&doc);
    for name in CHARTS {
        let inline = doc
            .descendants()
            .find(|n| n.has_tag_name("svg") && n.attribute("data-chart") == Some(name))
            .unwrap_or_else(|| panic!("chart {name} is not inline in report.html"));
        assert_eq!(
            inline.parent_element().and_then(|p| p.attribute("id")),
            Some(name),
            "chart {name} in its figure"
        );
        let file = std::fs::read_to_string(dir.join("charts").join(format!("{name}.svg"))).expect("chart file");
        let standalone = parse(&file);
        let count = marks_of(&standalone).len();
        assert!(count > 0, "chart {name} has no marks");
        assert_eq!(
            count,
            marks.iter().filter(|m| m.chart == name).count(),
            "chart {name}: file and page differ"
        );
    }
    assert!(
        doc.descendants().filter(|n| n.has_tag_name("svg")).count() >= CHARTS.len(),
        "every chart is an inline svg"
    );

    // Every figure drawn equals the run's own number.
    let summary = read_csv(&dir.join("summary.csv"));
    let by_arm: HashMap<&str, &HashMap<String, String>> = summary.iter().map(|r| (r["arm"].as_str(), r)).collect();
    let timeseries = read_csv(&dir.join("timeseries.csv"));
    let differences = read_csv(&dir.join("differences.csv"));
    for m in &marks {
        let expected: f64 = match m.chart.as_str() {
            "cycles" => {
                let cycle = &m.attrs["data-cycle"];
                let row = timeseries
                    .iter()
                    .find(|r| r["arm"] == m.arm && &r["cycle"] == cycle)
                    .unwrap_or_else(|| panic!("no timeseries row for {} cycle {cycle}", m.arm));
                row[&m.series].parse().expect("number")
            }
            "differences" => {
                let row = differences
                    .iter()
                    .find(|r| r["arm"] == m.arm && r["metric"] == m.series)
                    .unwrap_or_else(|| panic!("no difference row for {} {}", m.arm, m.series));
                row["difference"].parse().expect("number")
            }
            _ => {
                let row = by_arm
                    .get(m.arm.as_str())
                    .unwrap_or_else(|| panic!("mark of unknown arm {}", m.arm));
                row.get(&m.series)
                    .unwrap_or_else(|| panic!("{}: summary.csv has no column {}", m.chart, m.series))
                    .parse()
                    .unwrap_or_else(|_| panic!("{} {} plotted but empty in summary.csv", m.arm, m.series))
            }
        };
        assert!(
            close(m.value, expected),
            "{} {} {}: plotted {} but the run says {expected}",
            m.chart,
            m.arm,
            m.series,
            m.value
        );
    }

    // Every arm's headline figures are on the charts.
    for row in &summary {
        let arm = row["arm"].as_str();
        let has = |chart: &str, series: &str| {
            marks
                .iter()
                .any(|m| m.chart == chart && m.series == series && m.arm == arm)
        };
        assert!(has("repayment", "group_repayment_rate"), "{arm}: repayment not plotted");
        assert!(has("losses", "loss_rate"), "{arm}: loss not plotted");
        assert!(
            has("frontier", "served_share") && has("frontier", "loss_rate"),
            "{arm}: not on the frontier chart"
        );
        if !row["analytic_group_repayment"].is_empty() {
            assert!(
                has("repayment", "analytic_group_repayment"),
                "{arm}: exact value not plotted"
            );
        }
        for q in ["loss_p95", "loss_p99"] {
            if !row[q].is_empty() {
                assert!(has("losses", q), "{arm}: {q} not plotted");
            }
        }
    }

    // Frontier flags: no other arm loses less and serves more.
    let num = |r: &HashMap<String, String>, k: &str| r[k].parse::<f64>().expect("number");
    for row in &summary {
        let (l, s) = (num(row, "loss_rate"), num(row, "served_share"));
        let dominated = summary.iter().any(|b| {
            let (lb, sb) = (num(b, "loss_rate"), num(b, "served_share"));
            lb <= l && sb >= s && (lb < l || sb > s)
        });
        let flagged = marks
            .iter()
            .find(|m| m.chart == "frontier" && m.arm == row["arm"])
            .map(|m| m.attrs["data-frontier"] == "true");
        assert_eq!(flagged, Some(!dominated), "{}: frontier flag", row["arm"]);
    }

    // Positions agree with values on every axis scale.
    let mut groups: BTreeMap<(String, String, String), Vec<&Mark>> = BTreeMap::new();
    for m in &marks {
        let panel = if m.chart == "cycles" || m.chart == "differences" {
            m.series.clone()
        } else {
            String::new()
        };
        groups
            .entry((m.chart.clone(), m.axis.clone(), panel))
            .or_default()
            .push(m);
    }
    for ((chart, axis, panel), group) in &groups {
        assert_linear(&format!("{chart} {axis} {panel}"), group);
    }
    assert_offline(&html);
    marks
}

/// No reference leaves the file: every src or href is an in-page anchor, nothing names a network
/// scheme (the SVG namespace is an identifier, not a reference), and no script is needed.
fn assert_offline(html: &str) {
    let doc = parse(html);
    for n in doc.descendants() {
        for a in n.attributes() {
            if a.name() == "src" || a.name() == "href" {
                assert!(
                    a.value().starts_with('#'),
                    "{} = {} leaves the page",
                    a.name(),
                    a.value()
                );
            }
        }
        assert!(
            !n.has_tag_name("script") && !n.has_tag_name("img") && !n.has_tag_name("iframe") && !n.has_tag_name("link")
        );
    }
    let stripped = html.replace("xmlns=\"http://www.w3.org/2000/svg\"", "");
    for scheme in ["http:", "https:", "ftp:", "//cdn", "url(", "@import", "data:"] {
        assert!(!stripped.contains(scheme), "the report contains {scheme}");
    }
}

#[test]
fn report_of_a_real_run_agrees_with_its_files() {
    let (_tmp, dir) = run_with_report("small.toml");
    let marks = check_report(&dir);
    // The stress window is shaded and named.
    let cycles = std::fs::read_to_string(dir.join("charts/cycles.svg")).expect("cycles chart");
    assert!(cycles.contains("drought stress"), "stress window label missing");
    // Of eight arms, at most six are drawn, each over twelve counted cycles in three panels.
    let drawn: std::collections::BTreeSet<&str> = marks
        .iter()
        .filter(|m| m.chart == "cycles")
        .map(|m| m.arm.as_str())
        .collect();
    assert!((3..=6).contains(&drawn.len()), "{drawn:?}");
    assert_eq!(
        marks.iter().filter(|m| m.chart == "cycles").count(),
        drawn.len() * 12 * 3
    );
    let html = std::fs::read_to_string(dir.join("report.html")).expect("report");
    for needed in [
        "model estimates for planning",
        "client-protection practice",
        "scenario SHA-256",
        "4242",
    ] {
        assert!(
            html.to_lowercase().contains(&needed.to_lowercase()),
            "report lacks {needed}"
        );
    }
    // The borrower table shows each arm's exclusion events and clients reached from summary.csv.
    let summary = read_csv(&dir.join("summary.csv"));
    let doc = parse(&html);
    let heading = doc
        .descendants()
        .find(|n| n.attribute("id") == Some("borrowers"))
        .expect("borrower table heading");
    let table = heading
        .next_siblings()
        .find_map(|n| n.descendants().find(|t| t.has_tag_name("table")))
        .expect("borrower table");
    let rows: Vec<Vec<String>> = table
        .descendants()
        .filter(|n| n.has_tag_name("tr"))
        .skip(1)
        .map(|tr| {
            tr.children()
                .filter(|c| c.has_tag_name("td"))
                .map(|td| {
                    td.descendants()
                        .filter(|t| t.is_text())
                        .filter_map(|t| t.text())
                        .collect::<String>()
                })
                .collect()
        })
        .collect();
    assert_eq!(rows.len(), summary.len());
    for (row, arm) in rows.iter().zip(&summary) {
        let events: f64 = arm["exclusion_events"].parse().expect("exclusion events");
        assert_eq!(row[2], format!("{:.2}", 100.0 * events), "arm {}", arm["arm"]);
        let reached: f64 = arm["clients_reached"].parse().expect("clients reached");
        assert_eq!(row[3], format!("{reached:.0}"), "arm {}", arm["arm"]);
    }
    let json: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.join("summary.json")).expect("json")).expect("valid json");
    assert!(
        html.contains(json["scenario_sha256"].as_str().expect("hash")),
        "stamp lacks the scenario hash"
    );
    assert!(
        html.contains(json["tool"].as_str().expect("tool")),
        "stamp lacks the tool version"
    );
    assert!(
        !dir.read_dir()
            .expect("dir")
            .any(|e| e.expect("entry").file_name().to_string_lossy().ends_with(".partial"))
    );
}

#[test]
fn exact_values_sit_beside_the_simulated_ones() {
    let (_tmp, dir) = run_with_report("exact.toml");
    let marks = check_report(&dir);
    let exact = marks.iter().filter(|m| m.series == "analytic_group_repayment").count();
    assert_eq!(exact, 8, "every arm of the one-factor class has its exact value drawn");
}

#[test]
fn report_subcommand_rewrites_without_force_and_is_deterministic() {
    let (_tmp, dir) = run_with_report("small.toml");
    let first = std::fs::read_to_string(dir.join("report.html")).expect("report");
    let o = bin().arg("report").arg(&dir).output().expect("binary runs");
    assert_eq!(o.status.code(), Some(0), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(String::from_utf8_lossy(&o.stdout).contains("report.html"));
    assert_eq!(first, std::fs::read_to_string(dir.join("report.html")).expect("report"));
}

/// A run directory in the newer format, written by hand: 50 arms, 1,000 replications each.
fn synthetic_run(dir: &Path, arms: usize, replications: usize, cycles: usize) {
    let mut state: u64 = 0x2545_f491_4f6c_dd1d;
    let mut uniform = move || {
        state ^= state << 13;
        state ^= state >> 7;
        state ^= state << 17;
        (state >> 11) as f64 / (1u64 << 53) as f64
    };
    let label = |a: usize| format!("group_size={},peer_cover={}", 2 + a / 5, (a % 5) as f64 * 0.25);
    let mut summary = String::from(
        "arm,group_size,peer_cover,replications,group_repayment_rate,group_repayment_ci_low,group_repayment_ci_high,\
         shortfall_free_group_rate,iid_shortfall_free,loss_rate,loss_rate_ci_low,loss_rate_ci_high,net_yield,\
         served_share,excluded_share,loss_p50,loss_p95,loss_p99,loss_p999,worst_cycle_loss_p50,worst_cycle_loss_p95,\
         worst_cycle_loss_p99,on_frontier\n",
    );
    let mut reps = String::from(
        "arm,replication,group_repayment_rate,loss_rate,net_yield,served_share,excluded_share,worst_cycle_loss,groups_repaid,group_cycles\n",
    );
    let mut ts = String::from("arm,cycle,served_share,group_repayment_rate,loss_rate,excluded_share\n");
    let mut diffs = String::from("arm,baseline,metric,difference,se,ci_low,ci_high,significant,se_ratio\n");
    let mut gs = String::from("context,best_simulated,not_worse,best_closed_form,best_exact,best_by_loss\n");
    for a in 0..arms {
        let l = label(a);
        let repay = 0.85 + 0.1 * uniform();
        let loss = 0.005 + 0.03 * uniform();
        let served = 0.7 + 0.3 * uniform();
        summary.push_str(&format!(
            "\"{l}\",{},{},{replications},{repay},{},{},{repay},{},{loss},{},{},{},{served},{},{},{},{},{},{},{},{},{}\n",
            2 + a / 5,
            (a % 5) as f64 * 0.25,
            repay - 0.002,
            repay + 0.002,
            repay - 0.01,
            loss - 0.001,
            loss + 0.001,
            0.06 - loss,
            1.0 - served,
            loss,
            loss * 1.2,
            loss * 1.35,
            loss * 1.5,
            loss * 3.0,
            loss * 4.0,
            loss * 4.5,
            a % 7 == 0
        ));
        for r in 1..=replications {
            let x = loss * (0.8 + 0.4 * uniform());
            reps.push_str(&format!(
                "\"{l}\",{r},{repay},{x},{},{served},{},{},{},{}\n",
                0.06 - x,
                1.0 - served,
                x * 3.5,
                (repay * 1000.0).round(),
                1000
            ));
        }
        for c in 1..=cycles {
            ts.push_str(&format!("\"{l}\",{c},{served},{repay},{loss},{}\n", 1.0 - served));
        }
        if a > 0 {
            for metric in [
                "group_repayment_rate",
                "loss_rate",
                "net_yield",
                "served_share",
                "excluded_share",
            ] {
                let d = uniform() * 0.02 - 0.01;
                diffs.push_str(&format!(
                    "\"{l}\",\"{}\",{metric},{d},0.001,{},{},{},0.2\n",
                    label(0),
                    d - 0.002,
                    d + 0.002,
                    d.abs() > 0.002
                ));
            }
        }
    }
    for p in 0..5 {
        gs.push_str(&format!("peer_cover={},4,4;5,4,,5\n", p as f64 * 0.25));
    }
    let json = serde_json::json!({
        "tool": "loancycle 9.9.9",
        "scenario_sha256": "ab".repeat(32),
        "scenario_origin": "invented.toml",
        "seed": 99,
        "scenario": {
            "name": "Invented fifty-arm comparison",
            "replications": replications,
            "cycles": cycles,
            "warmup_cycles": 0,
            "swept_fields": ["group_size", "peer_cover"],
            "shocks": [{"name": "flood", "scope": "village", "probability": 0.02,
                        "stress": [{"from": 10, "to": 12, "probability": 0.3}]}]
        },
        "warnings": [],
        "caution": "invented"
    });
    std::fs::create_dir_all(dir).expect("dir");
    for (name, text) in [
        ("summary.csv", summary),
        ("replications.csv", reps),
        ("timeseries.csv", ts),
        ("differences.csv", diffs),
        ("group_size.csv", gs),
        ("summary.json", json.to_string()),
    ] {
        std::fs::write(dir.join(name), text).expect("write");
    }
}

#[test]
fn fifty_arms_and_a_thousand_replications_stay_under_two_megabytes() {
    let tmp = tempfile::tempdir().expect("temporary directory");
    let dir = tmp.path().join("run");
    synthetic_run(&dir, 50, 1000, 40);
    let written = loancycle::board::write_report(&dir).expect("report of a newer-format run");
    assert_eq!(written.last().map(|p| p.ends_with("report.html")), Some(true));
    let size = std::fs::metadata(dir.join("report.html")).expect("report").len();
    eprintln!("report.html for 50 arms x 1,000 replications: {size} bytes");
    assert!(size < 2 * 1024 * 1024, "report.html is {size} bytes");
    let html = std::fs::read_to_string(dir.join("report.html")).expect("report");
    let doc = parse(&html);
    let marks = marks_of(&doc);
    // The newer columns are used where they exist: the run's frontier flags, the worst-cycle
    // quantile, the significance verdict, and the group-size table.
    let summary = read_csv(&dir.join("summary.csv"));
    for row in &summary {
        let flag = marks
            .iter()
            .find(|m| m.chart == "frontier" && m.arm == row["arm"])
            .expect("frontier mark");
        assert_eq!(flag.attrs["data-frontier"], row["on_frontier"]);
        let worst = marks
            .iter()
            .find(|m| m.chart == "losses" && m.series == "worst_cycle_loss_p99" && m.arm == row["arm"])
            .expect("worst-cycle mark");
        assert!(close(worst.value, row["worst_cycle_loss_p99"].parse().expect("number")));
    }
    let diffs = read_csv(&dir.join("differences.csv"));
    for m in marks.iter().filter(|m| m.chart == "differences") {
        let row = diffs
            .iter()
            .find(|r| r["arm"] == m.arm && r["metric"] == m.series)
            .expect("row");
        assert_eq!(m.attrs["data-significant"], row["significant"]);
    }
    assert!(html.contains("id=\"group-size\""), "group-size table missing");
    assert!(
        html.contains("9.9.9") && html.contains(&"ab".repeat(32)),
        "stamp missing"
    );
    assert_offline(&html);
}

fn refused(args: &[&std::ffi::OsStr]) -> String {
    let o = bin().args(args).output().expect("binary runs");
    let stderr = String::from_utf8_lossy(&o.stderr).to_string();
    assert_eq!(o.status.code(), Some(BAD_INPUT), "{stderr}");
    assert!(!stderr.contains("panicked"), "{stderr}");
    assert_eq!(stderr.lines().count(), 1, "one line: {stderr}");
    stderr
}

#[test]
fn bad_input_is_refused_in_one_line_and_nothing_is_half_written() {
    let tmp = tempfile::tempdir().expect("temporary directory");
    let missing = tmp.path().join("nowhere");
    let e = refused(&["report".as_ref(), missing.as_os_str()]);
    assert!(e.contains("nowhere") && e.contains("no such directory"), "{e}");

    let empty = tmp.path().join("empty");
    std::fs::create_dir(&empty).expect("dir");
    let e = refused(&["report".as_ref(), empty.as_os_str()]);
    assert!(
        e.contains("summary.csv") && e.contains("not a finished run directory"),
        "{e}"
    );

    let dir = tmp.path().join("run");
    synthetic_run(&dir, 3, 20, 5);
    std::fs::write(dir.join("report.html"), "earlier report").expect("write");
    let summary = std::fs::read_to_string(dir.join("summary.csv")).expect("summary");
    let mut lines: Vec<String> = summary.lines().map(str::to_string).collect();
    lines[2] = lines[2].replacen(",0.", ",zero.", 3);
    std::fs::write(dir.join("summary.csv"), lines.join("\n") + "\n").expect("write");
    let e = refused(&["report".as_ref(), dir.as_os_str()]);
    assert!(
        e.contains("summary.csv line 3, column ") && e.contains("value \"zero."),
        "{e}"
    );
    assert_eq!(
        std::fs::read_to_string(dir.join("report.html")).expect("report"),
        "earlier report"
    );
    assert!(!dir.join("charts").exists(), "no chart is written from bad input");

    std::fs::write(dir.join("summary.csv"), summary).expect("restore");
    let ts = std::fs::read_to_string(dir.join("timeseries.csv")).expect("timeseries");
    std::fs::write(dir.join("timeseries.csv"), ts.replacen('\n', "\n\"x\",1,2\n", 1)).expect("write");
    let e = refused(&["report".as_ref(), dir.as_os_str()]);
    assert!(e.contains("timeseries.csv line 2") && e.contains("fields"), "{e}");

    std::fs::write(dir.join("timeseries.csv"), ts).expect("restore");
    std::fs::write(dir.join("summary.json"), "{\"tool\": ").expect("write");
    let e = refused(&["report".as_ref(), dir.as_os_str()]);
    assert!(e.contains("summary.json line 1"), "{e}");

    let summary = std::fs::read_to_string(dir.join("summary.csv")).expect("summary");
    std::fs::write(dir.join("summary.csv"), summary.replacen("loss_rate,", "loss,", 1)).expect("write");
    let e = refused(&["report".as_ref(), dir.as_os_str()]);
    assert!(
        e.contains("summary.csv line 1, column loss_rate") && e.contains("missing"),
        "{e}"
    );
    assert_eq!(
        std::fs::read_to_string(dir.join("report.html")).expect("report"),
        "earlier report"
    );
}

#[test]
fn older_runs_without_optional_files_still_get_a_report() {
    let tmp = tempfile::tempdir().expect("temporary directory");
    let dir = tmp.path().join("run");
    synthetic_run(&dir, 4, 30, 6);
    for optional in ["replications.csv", "group_size.csv", "differences.csv"] {
        std::fs::remove_file(dir.join(optional)).expect("remove");
    }
    loancycle::board::write_report(&dir).expect("report without optional files");
    let html = std::fs::read_to_string(dir.join("report.html")).expect("report");
    assert!(
        !html.contains("data-chart=\"differences\""),
        "no comparison without differences.csv"
    );
    assert!(html.contains("data-chart=\"frontier\""));
}
