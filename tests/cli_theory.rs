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
    assert!(v["out_of_class"].is_null());
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
