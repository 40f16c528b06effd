//! The theory commands at the command line: `optimum` and `analyze`, and the exact values `run`
//! puts beside its simulated figures.

use std::process::Command;

fn loancycle(args: &[&str]) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_loancycle"))
        .args(args)
        .output()
        .expect("binary runs")
}

fn json(out: &std::process::Output) -> serde_json::Value {
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    serde_json::from_slice(&out.stdout).expect("valid JSON")
}

// x* = 5.135 for power_plus_log with p = 0.5 (recalled published value).
#[test]
fn optimum_json_reports_the_continuous_and_integer_optimum() {
    let v = json(&loancycle(&[
        "optimum",
        "--curve",
        "power_plus_log",
        "--p",
        "0.5",
        "--json",
    ]));
    let x = v["x_star"].as_f64().expect("finite maximiser");
    assert!((x - 5.135).abs() < 5e-4, "x* = {x}");
    assert_eq!(v["best_integer"].as_u64(), Some(5));
    let r = v["repayment_at_best_integer"].as_f64().unwrap();
    assert!(r > 0.0 && r < 1.0);
}

// The power curve with p = 1 rises towards e^-1 and has no finite maximiser: x_star is null.
#[test]
fn optimum_says_plainly_when_there_is_no_finite_maximiser() {
    let v = json(&loancycle(&["optimum", "--curve", "power", "--p", "1", "--json"]));
    assert!(v["x_star"].is_null());
    let table = loancycle(&["optimum", "--curve", "power", "--p", "1"]);
    let text = String::from_utf8_lossy(&table.stdout).to_lowercase();
    assert!(text.contains("no finite maximiser"), "{text}");
}

// Over p in [0.5, 1] only the integers 4 and 5 lie between the smallest and largest x* (recalled
// published value for the power_plus_log band).
#[test]
fn optimum_band_lists_the_admitted_integers() {
    let out = loancycle(&[
        "optimum",
        "--curve",
        "power_plus_log",
        "--p",
        "0.5..1",
        "--steps",
        "501",
    ]);
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(out.status.success());
    assert!(text.contains("501 values"), "{text}");
    assert!(
        text.contains("integers inside [smallest x*, largest x*]: 4, 5"),
        "{text}"
    );
}

/// The per-size CSV of a table curve: (1 - phi(k))^k at each size, by arithmetic: 0.92^2 = 0.8464,
/// 0.94^3 = 0.830584, 0.95^4 = 0.81450625, so the smallest group is the one marked best.
#[test]
fn optimum_csv_and_table_curve() {
    let out = loancycle(&[
        "optimum",
        "--curve",
        "table",
        "--values",
        "2=0.08,3=0.06,4=0.05",
        "--range",
        "2..4",
        "--csv",
    ]);
    assert!(out.status.success());
    let text = String::from_utf8_lossy(&out.stdout);
    let mut lines = text.lines();
    assert_eq!(lines.next(), Some("group_size,phi,repayment_probability,best"));
    let rows: Vec<Vec<&str>> = lines.map(|l| l.split(',').collect()).collect();
    let expected = [
        ("2", "0.08", 0.8464, "true"),
        ("3", "0.06", 0.830584, "false"),
        ("4", "0.05", 0.81450625, "false"),
    ];
    assert_eq!(rows.len(), expected.len(), "{text}");
    for (row, (k, phi, repayment, best)) in rows.iter().zip(expected) {
        assert_eq!((row[0], row[1], row[3]), (k, phi, best), "{text}");
        let r: f64 = row[2].parse().expect("a number");
        assert!((r - repayment).abs() < 1e-12, "k = {k}: {r}");
    }
}

#[test]
fn optimum_refuses_bad_flags_with_exit_code_2() {
    for args in [
        &["optimum", "--curve", "spline", "--p", "1"][..],
        &["optimum", "--curve", "power"][..],
        &["optimum", "--curve", "power", "--p", "-1"][..],
        &["optimum", "--curve", "power", "--p", "1", "--range", "5..2"][..],
        &["optimum", "--curve", "power", "--p", "0.5..x"][..],
        &["optimum", "--curve", "table", "--values", "2=1.5"][..],
    ] {
        let out = loancycle(args);
        assert_eq!(out.status.code(), Some(2), "{args:?}");
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(
            err.starts_with("error: ") && !err.contains("panicked"),
            "{args:?}: {err}"
        );
    }
}

#[test]
fn analyze_reports_exact_values_in_class_and_the_reason_outside() {
    let root = env!("CARGO_MANIFEST_DIR");
    let theory = format!("{root}/scenarios-demo/theory.toml");
    let v = json(&loancycle(&["analyze", &theory, "--json"]));
    assert!(v["one_factor_out_of_class"].is_null());
    // Every arm of the theory demo (group sizes 2..=10, each without and with full cover), in order,
    // each with an exact probability strictly between 0 and 1.
    let arms = v["arms"].as_array().expect("arms");
    let expected: Vec<String> = (2..=10)
        .flat_map(|k| [0.0, 1.0].map(|c| format!("group_size={k},peer_cover={c}")))
        .collect();
    let labels: Vec<&str> = arms.iter().map(|a| a["label"].as_str().unwrap_or("")).collect();
    assert_eq!(labels, expected);
    for arm in arms {
        let g = arm["exact"]["group_repayment"].as_f64().expect("exact value");
        assert!(g > 0.0 && g < 1.0, "{}: {g}", arm["label"]);
    }
    let baseline = format!("{root}/scenarios-demo/baseline.toml");
    let out = loancycle(&["analyze", &baseline]);
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(out.status.success());
    assert!(
        text.contains("out of class: borrowers.income is a lognormal distribution"),
        "{text}"
    );
    assert!(text.contains("client-protection"), "the caution is printed: {text}");
    let missing = loancycle(&["analyze", "no-such-file.toml"]);
    assert_eq!(missing.status.code(), Some(2));
}

#[test]
fn run_puts_exact_values_beside_simulated_ones_without_self_check_warnings() {
    let root = env!("CARGO_MANIFEST_DIR");
    let dir = tempfile::tempdir().unwrap();
    let out_dir = dir.path().join("out");
    let out = loancycle(&[
        "run",
        &format!("{root}/scenarios-demo/theory.toml"),
        "--out",
        out_dir.to_str().unwrap(),
        "--replications",
        "40",
    ]);
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert!(!stdout.contains("warning: self-check"), "{stdout}");
    let v: serde_json::Value = serde_json::from_slice(&std::fs::read(out_dir.join("summary.json")).unwrap()).unwrap();
    let best = &v["best"];
    assert!(
        best["confidence_set_group_sizes"]
            .as_array()
            .is_some_and(|a| !a.is_empty())
    );
    for arm in v["arms"].as_array().unwrap() {
        let exact = arm["analytic_group_repayment"].as_f64().expect("in class");
        let sim = arm["summary"]["group_repayment"]["rate"].as_f64().unwrap();
        assert!((exact - sim).abs() < 0.02, "{}: {exact} vs {sim}", arm["label"]);
        assert!(arm["closed_form_optimum"].as_f64().is_some());
    }
}

/// A portfolio of 20 villages with a member shock correlated by village and portfolio, a drought
/// whose strike probability rises in cycles 4-5, and two arms (individual and joint liability).
const PORTFOLIO: &str = r#"
name = "Riverside lenders: portfolio law"
replications = 10
cycles = 8
[portfolio]
borrowers = 2000
villages = 20
[loan]
principal = 100
interest_rate = 0.1
[borrowers]
income = 1.2
[[shock]]
name = "illness"
scope = "member"
probability = 0.04
village_correlation = 0.1
portfolio_correlation = 0.05
severity = 1.0
[[shock]]
name = "drought"
scope = "village"
probability = 0.05
reach = 0.5
severity = 0.5
stress = [{ from = 4, to = 5, probability = 0.4 }]
[policy]
group_size = 5
[sweep]
liability = ["individual", "joint"]
"#;

fn write(dir: &tempfile::TempDir, name: &str, text: &str) -> String {
    let path = dir.path().join(name);
    std::fs::write(&path, text).unwrap();
    path.to_str().unwrap().to_string()
}

fn law_matches(json: &serde_json::Value, law: &loancycle::analytic::portfolio_law::PortfolioDefaultLaw) {
    let close = |key: &str, v: &serde_json::Value, x: f64| {
        let got = v.as_f64().unwrap_or_else(|| panic!("{key} is a number: {v}"));
        assert!((got - x).abs() <= 1e-12 * x.abs().max(1.0), "{key}: {got} vs {x}");
    };
    assert_eq!(json["unit"], law.unit.as_str());
    assert_eq!(json["units"].as_u64(), Some(law.units));
    assert_eq!(json["cycles"], law.cycles.as_str());
    close("mean", &json["mean"], law.mean);
    close("es99", &json["es99"], law.es99);
    for q in ["0.95", "0.99", "0.995", "0.999"] {
        close(q, &json["quantiles"][q], law.quantiles[q]);
        close(
            q,
            &json["large_portfolio_quantiles"][q],
            law.large_portfolio_quantiles[q],
        );
    }
}

#[test]
fn analyze_json_carries_the_portfolio_law_of_every_arm_and_stress_state() {
    let dir = tempfile::tempdir().unwrap();
    let file = write(&dir, "portfolio.toml", PORTFOLIO);
    let out = loancycle(&["analyze", &file, "--json"]);
    // One JSON object and nothing else on stdout.
    let v = json(&out);
    assert!(v.is_object());
    let scenario = loancycle::scenario::Scenario::from_toml_str(PORTFOLIO, "portfolio.toml").expect("valid");
    let laws = loancycle::analytic::portfolio_law::portfolio_default_laws(&scenario);
    let first = laws[0].portfolio_default_law.as_ref().expect("in class");
    assert_eq!(first.unit, "member loans");
    assert_eq!(first.units, 2000);
    law_matches(&v["portfolio_default_law"], first);
    assert!(v["out_of_class"].is_null());
    let stress = v["stress_laws"].as_array().expect("stress laws");
    assert_eq!(stress.len(), 1);
    assert_eq!(stress[0]["cycles"], "4-5");
    law_matches(&stress[0], &laws[0].stress_laws[0]);
    let arms = v["arms"].as_array().expect("arms");
    assert_eq!(arms.len(), 2);
    for (arm, law) in arms.iter().zip(&laws) {
        assert_eq!(arm["label"], law.label.as_str());
        law_matches(
            &arm["portfolio_default_law"],
            law.portfolio_default_law.as_ref().unwrap(),
        );
        law_matches(&arm["stress_laws"][0], &law.stress_laws[0]);
    }
    assert_eq!(arms[1]["portfolio_default_law"]["unit"], "group loans");
    assert_eq!(arms[1]["portfolio_default_law"]["units"].as_u64(), Some(400));
    // The one-factor section's Basel yardstick is kept at the top level.
    assert!(v["basel"]["capital_requirement"].as_f64().is_some());
}

#[test]
fn analyze_table_shows_exact_and_large_portfolio_quantiles_side_by_side() {
    let dir = tempfile::tempdir().unwrap();
    let file = write(&dir, "portfolio.toml", PORTFOLIO);
    let out = loancycle(&["analyze", &file]);
    assert!(out.status.success());
    let text = String::from_utf8_lossy(&out.stdout);
    let scenario = loancycle::scenario::Scenario::from_toml_str(PORTFOLIO, "portfolio.toml").expect("valid");
    let laws = loancycle::analytic::portfolio_law::portfolio_default_laws(&scenario);
    let law = laws[0].portfolio_default_law.as_ref().unwrap();
    assert!(text.contains("liability=individual: 2000 member loans"), "{text}");
    let row = |name: &str, nth: usize| -> Vec<f64> {
        text.lines()
            .filter(|l| l.trim_start().starts_with(name))
            .nth(nth)
            .unwrap_or_else(|| panic!("row {name} in {text}"))
            .split_whitespace()
            .filter_map(|w| w.parse().ok())
            .collect()
    };
    // First arm, normal cycles: mean, four quantiles and ES99, printed to six decimals.
    let exact = row("exact", 0);
    let expected = [
        law.mean,
        law.quantiles["0.95"],
        law.quantiles["0.99"],
        law.quantiles["0.995"],
        law.quantiles["0.999"],
        law.es99,
    ];
    assert_eq!(exact.len(), 6, "{text}");
    for (got, want) in exact.iter().zip(expected) {
        assert!((got - want).abs() <= 5e-7, "{got} vs {want}");
    }
    let large = row("large portfolio", 0);
    assert_eq!(large.len(), 4, "{text}");
    assert!((large[3] - law.large_portfolio_quantiles["0.999"]).abs() <= 5e-7);
    // The finite portfolio's village factors and drought strikes add to the tail.
    assert!(exact[4] > large[3], "{text}");
    assert!(text.lines().any(|l| l.trim() == "cycles 4-5"), "{text}");
    assert!(text.contains("one village's law"), "{text}");
}

/// Independent members (no correlation, no shared strike): the number in default is binomial(N, p)
/// (the binomial law, statrs), and the large-portfolio limit is a point mass at p.
#[test]
fn analyze_json_matches_the_binomial_law_for_independent_members() {
    use statrs::distribution::{Binomial, DiscreteCDF};
    let text = r#"
replications = 1
cycles = 1
[portfolio]
borrowers = 1000
villages = 10
[loan]
principal = 100
[[shock]]
name = "illness"
scope = "member"
probability = 0.05
severity = 1.0
[policy]
liability = "individual"
group_size = 1
"#;
    let dir = tempfile::tempdir().unwrap();
    let v = json(&loancycle(&["analyze", &write(&dir, "iid.toml", text), "--json"]));
    let law = &v["portfolio_default_law"];
    let binomial = Binomial::new(0.05, 1000).unwrap();
    for q in [0.95, 0.99, 0.995, 0.999] {
        let j = (0..=1000u64).find(|&j| binomial.cdf(j) >= q).unwrap();
        let got = law["quantiles"][format!("{q}")].as_f64().unwrap();
        assert!((got - j as f64 / 1000.0).abs() < 1e-12, "q {q}: {got} vs {j}/1000");
        let large = law["large_portfolio_quantiles"][format!("{q}")].as_f64().unwrap();
        assert!((large - 0.05).abs() < 1e-12);
    }
    assert!((law["mean"].as_f64().unwrap() - 0.05).abs() < 1e-12);
}

#[test]
fn analyze_names_the_input_that_puts_the_portfolio_law_out_of_class() {
    let root = env!("CARGO_MANIFEST_DIR");
    let baseline = format!("{root}/scenarios-demo/baseline.toml");
    let v = json(&loancycle(&["analyze", &baseline, "--json"]));
    assert!(v["portfolio_default_law"].is_null());
    let reason = v["out_of_class"].as_str().expect("a reason");
    assert!(reason.contains("borrowers.income"), "{reason}");
    for arm in v["arms"].as_array().unwrap() {
        assert!(arm["portfolio_default_law"].is_null());
        assert!(arm["out_of_class"].as_str().is_some());
    }
    let out = loancycle(&["analyze", &baseline]);
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(
        text.contains(
            "Share of the portfolio's loans in default per cycle (exact law)\n  out of class: borrowers.income"
        ),
        "{text}"
    );
}

/// An invented lender, "Copperhill Savings Circle": a power curve with p = 0.6 for the sales shock
/// and borrowers whose risk multiplier averages 1.8, swept over group sizes and peer cover.
const RISKY: &str = r#"
name = "Copperhill Savings Circle: risk-scaled optimum"
seed = 77
replications = 4
cycles = 3
[portfolio]
borrowers = 60
villages = 2
[loan]
principal = 50.0
[borrowers]
income = 1.2
risk = { kind = "gamma", mean = 1.8, cv = 0.3 }
[[shock]]
name = "sales"
scope = "member"
probability = { curve = "power", p = 0.6 }
severity = 1.0
[policy]
group_size = 3
[sweep]
group_size = [2, 3, 4]
peer_cover = [0, 0.5]
"#;

#[test]
fn optimum_with_the_mean_risk_reproduces_the_group_size_table() {
    let tmp = tempfile::tempdir().unwrap();
    let file = write(&tmp, "risky.toml", RISKY);
    let out = tmp.path().join("out");
    let o = loancycle(&["run", &file, "--out", out.to_str().unwrap(), "--quiet"]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let table = std::fs::read_to_string(out.join("group_size.csv")).unwrap();
    let mut reader = csv::Reader::from_reader(table.as_bytes());
    let column = reader
        .headers()
        .unwrap()
        .iter()
        .position(|h| h == "best_closed_form")
        .unwrap();
    let from_run: Vec<String> = reader.records().map(|r| r.unwrap()[column].to_string()).collect();
    assert_eq!(from_run.len(), 2);
    // The best k of (1 - min(1, u k^-0.6))^k with u = 1.8, by direct arithmetic over k = 1..1000.
    let u = 1.8;
    let log_repayment = |k: f64| k * (1.0 - (u * k.powf(-0.6)).min(1.0)).ln();
    let by_hand = (1..=1000u32)
        .map(f64::from)
        .fold((1.0, f64::NEG_INFINITY), |best, k| {
            if log_repayment(k) > best.1 {
                (k, log_repayment(k))
            } else {
                best
            }
        })
        .0;
    let v = json(&loancycle(&[
        "optimum", "--curve", "power", "--p", "0.6", "--risk", "1.8", "--json",
    ]));
    assert_eq!(v["risk_multiplier"], 1.8);
    assert_eq!(v["best_integer_overall"].as_f64(), Some(by_hand));
    for cell in &from_run {
        assert_eq!(cell.parse::<f64>().unwrap(), by_hand);
    }
    // Without the risk, the plain curve's answer differs: the multiplier matters here.
    let plain = json(&loancycle(&["optimum", "--curve", "power", "--p", "0.6", "--json"]));
    assert_ne!(plain["best_integer_overall"].as_f64(), Some(by_hand));
    // A bad multiplier is refused naming its flag.
    let o = loancycle(&["optimum", "--curve", "power", "--p", "0.6", "--risk", "-1"]);
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stderr).contains("--risk"));
}

#[test]
fn a_bad_command_line_curve_gets_the_scenario_files_bounds_and_words() {
    let tmp = tempfile::tempdir().unwrap();
    for (curve_in_file, flags, flag) in [
        (
            r#"{ curve = "power", p = -2 }"#,
            &["--curve", "power", "--p", "-2"][..],
            "--p",
        ),
        (
            r#"{ curve = "constant", value = 1.5 }"#,
            &["--curve", "constant", "--value", "1.5"][..],
            "--value",
        ),
        (
            r#"{ curve = "table", values = { "2" = 0.1, "3" = 1.5 } }"#,
            &["--curve", "table", "--values", "2=0.1,3=1.5"][..],
            "--values",
        ),
        (
            r#"{ curve = "table", values = { "0" = 0.1 } }"#,
            &["--curve", "table", "--values", "0=0.1"][..],
            "--values",
        ),
    ] {
        let text = RISKY.replace(r#"{ curve = "power", p = 0.6 }"#, curve_in_file);
        let file = write(&tmp, "bad.toml", &text);
        let from_file = loancycle(&["check", &file]);
        assert_eq!(from_file.status.code(), Some(2));
        let file_err = String::from_utf8_lossy(&from_file.stderr).trim().to_string();
        let mut args = vec!["optimum"];
        args.extend_from_slice(flags);
        let from_flags = loancycle(&args);
        assert_eq!(from_flags.status.code(), Some(2), "{flags:?}");
        let flag_err = String::from_utf8_lossy(&from_flags.stderr).trim().to_string();
        assert_eq!(flag_err.lines().count(), 1, "{flag_err}");
        // The same value and words after the location; the flag named instead of the line.
        let tail = |e: &str| {
            e.split(": ")
                .skip_while(|p| !p.contains(" is not allowed"))
                .collect::<Vec<_>>()
                .join(": ")
        };
        assert!(!tail(&file_err).is_empty(), "{file_err}");
        assert_eq!(tail(&flag_err), tail(&file_err), "{flag_err} / {file_err}");
        assert!(flag_err.contains(&format!("option {flag}: ")), "{flag_err}");
    }
}
