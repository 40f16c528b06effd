//! The `fit` subcommand end to end: outputs, the calibrated scenario, exit codes, and one message per
//! kind of bad record.

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

fn loancycle(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_loancycle"))
        .args(args)
        .output()
        .expect("the binary runs")
}

fn data(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/data/fit").join(name)
}

fn text(p: &Path) -> String {
    p.to_str().unwrap().to_string()
}

#[test]
fn fit_writes_csv_json_and_a_scenario_that_check_accepts() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("results");
    let scenario = dir.path().join("calibrated.toml");
    let o = loancycle(&[
        "fit",
        &text(&data("small_book.csv")),
        "--out",
        &text(&out),
        "--scenario-out",
        &text(&scenario),
        "--resamples",
        "500",
    ]);
    let stdout = String::from_utf8_lossy(&o.stdout);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(stdout.contains("Recommended group size"), "{stdout}");
    let json: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("fit.json")).unwrap()).unwrap();
    let curves = json["curves"].as_array().unwrap();
    assert_eq!(curves.len(), 8, "four curves in two forms");
    for c in curves {
        for key in ["curve", "form", "params", "std_errors", "log_likelihood", "aic"] {
            assert!(!c[key].is_null(), "{key} missing in {c}");
        }
        if c["form"] == "clustered" {
            assert!(c["params"]["rho"].is_number());
        }
    }
    for key in ["best_curve", "village_correlation", "beta_binomial", "independent_bias"] {
        assert!(!json[key].is_null(), "{key}");
    }
    for key in ["x_star", "ci_low", "ci_high", "integers"] {
        assert!(json["optimum"].get(key).is_some(), "optimum.{key}");
    }
    let csv = std::fs::read_to_string(out.join("fit.csv")).unwrap();
    assert!(csv.starts_with("group_size,groups,village_cycles,repaid,repayment_rate,"));
    assert_eq!(csv.lines().count(), 5, "header and sizes 2 to 5:\n{csv}");
    let toml = std::fs::read_to_string(&scenario).unwrap();
    assert!(toml.contains("portfolio_correlation = 0.0") && toml.contains("portfolio_correlation is 0"));
    let check = loancycle(&["check", &text(&scenario)]);
    assert!(
        check.status.success(),
        "{}\n{toml}",
        String::from_utf8_lossy(&check.stderr)
    );
    // A second run into the same directory is refused without --force, and leaves the files alone.
    let again = loancycle(&["fit", &text(&data("small_book.csv")), "--out", &text(&out)]);
    assert_eq!(again.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&again.stderr).contains("--force"));
}

/// (fixture, line, column, value, part of what is allowed)
const BAD: [(&str, u64, &str, &str, &str); 6] = [
    (
        "missing_column.csv",
        1,
        "paid",
        "missing from the header",
        "columns cycle, village",
    ),
    ("non_numeric_amount.csv", 3, "due", "\"12O.00\"", "a finite number"),
    ("negative_amount.csv", 4, "paid", "\"-15.00\"", "an amount >= 0"),
    (
        "paid_above_due.csv",
        3,
        "paid",
        "\"131.00\"",
        "at most the amount due (120)",
    ),
    (
        "group_two_villages.csv",
        4,
        "village",
        "\"Bellmoor\"",
        "the village of the group's other members in cycle 1, \"Ashgrove\"",
    ),
    (
        "duplicate_member.csv",
        5,
        "member",
        "\"ash2\"",
        "one row per member and cycle",
    ),
];

#[test]
fn every_bad_record_is_named_with_file_line_column_and_value_and_exits_2() {
    let dir = tempfile::tempdir().unwrap();
    for (file, line, column, value, allowed) in BAD {
        let out = dir.path().join(file);
        let o = loancycle(&["fit", &text(&data(&format!("bad/{file}"))), "--out", &text(&out)]);
        let stderr = String::from_utf8_lossy(&o.stderr);
        assert_eq!(o.status.code(), Some(2), "{file}: {stderr}");
        assert_eq!(stderr.lines().count(), 1, "{file}: one line\n{stderr}");
        let expected = format!("{file}: line {line}, column {column}: value {value} is not allowed: ");
        assert!(stderr.contains(&expected), "{file}: expected {expected}\ngot {stderr}");
        assert!(stderr.contains(allowed), "{file}: {stderr}");
        assert!(!stderr.contains("panicked"), "{file}");
        assert!(
            !out.join("fit.json").exists() && !out.join("fit.csv").exists(),
            "{file}"
        );
    }
}

#[test]
fn skip_bad_rows_counts_them_and_fits_the_rest() {
    let dir = tempfile::tempdir().unwrap();
    let mut book = std::fs::read_to_string(data("small_book.csv")).unwrap();
    // Five bad rows appended: a non-number, a negative amount, an overpayment, a group already
    // booked in another village, and a member with a second row in her cycle.
    book.push_str("3,Ashgrove,ASH-3-0,zz1,abc,150.00,x\n");
    book.push_str("3,Ashgrove,ASH-3-0,zz2,150.00,-1,x\n");
    book.push_str("3,Ashgrove,ASH-3-0,zz3,150.00,190.00,x\n");
    book.push_str("3,Larkfield,ASH-3-0,zz4,150.00,150.00,x\n");
    book.push_str("3,Ashgrove,ASH-3-0,ash00,150.00,150.00,x\n");
    let path = dir.path().join("book.csv");
    std::fs::write(&path, book).unwrap();
    let out = dir.path().join("results");
    let refused = loancycle(&["fit", &text(&path), "--out", &text(&out)]);
    assert_eq!(refused.status.code(), Some(2));
    let o = loancycle(&[
        "fit",
        &text(&path),
        "--out",
        &text(&out),
        "--skip-bad-rows",
        "--resamples",
        "500",
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(String::from_utf8_lossy(&o.stdout).contains("5 bad rows skipped"));
    let json: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("fit.json")).unwrap()).unwrap();
    assert_eq!(json["rows_skipped"], 5);
    assert_eq!(json["loans"], 632);
}

#[test]
fn too_few_resamples_and_a_missing_file_are_refused() {
    let o = loancycle(&["fit", &text(&data("small_book.csv")), "--resamples", "100"]);
    assert_eq!(o.status.code(), Some(2));
    let o = loancycle(&["fit", "no/such/book.csv", "--out", "/tmp/unused-fit-dir"]);
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stderr).contains("no/such/book.csv: cannot read"));
}
