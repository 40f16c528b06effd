//! The files decisions are taken from: replications.csv against summary.csv, differences.csv and
//! the `compare` command, all read back as a user's script would, by column name.

use std::collections::BTreeMap;
use std::path::Path;
use std::process::Command;

/// An invented programme, "Quillfield Growers' Fund": two group sizes and two village
/// correlations of the illness shock, 40 replications so a 95% quantile has enough values.
const SWEPT: &str = r#"
name = "Quillfield Growers' Fund: decision test"
seed = 515
replications = 40
cycles = 6
warmup_cycles = 1
[portfolio]
borrowers = 120
villages = 4
[loan]
principal = 100.0
interest_rate = 0.06
recovery_rate = 0.25
[borrowers]
income = { kind = "lognormal", mean = 1.3, cv = 0.2 }
[[shock]]
name = "illness"
scope = "member"
probability = 0.08
village_correlation = 0.1
severity = { kind = "uniform", low = 0.4, high = 0.9 }
[policy]
group_size = 4
peer_cover = 0.3
exclusion_cycles = 1
[sweep]
group_size = [3, 5]
shock.illness.village_correlation = [0.0, 0.3]
"#;

fn loancycle(args: &[&str]) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_loancycle"))
        .args(args)
        .output()
        .expect("the binary runs")
}

/// Runs `text` into DIR/out and returns that directory.
fn run_scenario(dir: &Path, text: &str, extra: &[&str]) -> std::path::PathBuf {
    let file = dir.join("scenario.toml");
    std::fs::write(&file, text).unwrap();
    let out = dir.join("out");
    let mut args = vec!["run", file.to_str().unwrap(), "--out", out.to_str().unwrap(), "--quiet"];
    args.extend_from_slice(extra);
    let o = loancycle(&args);
    assert!(o.status.success(), "run failed: {}", String::from_utf8_lossy(&o.stderr));
    out
}

/// A CSV file as rows of column name -> cell.
fn read_csv(path: &Path) -> Vec<BTreeMap<String, String>> {
    let mut r = csv::Reader::from_path(path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    let header = r.headers().unwrap().clone();
    r.records()
        .map(|rec| {
            let rec = rec.unwrap();
            header.iter().map(str::to_string).zip(rec.iter().map(str::to_string)).collect()
        })
        .collect()
}

fn num(row: &BTreeMap<String, String>, column: &str) -> f64 {
    let cell = row.get(column).unwrap_or_else(|| panic!("no column {column}"));
    cell.parse().unwrap_or_else(|_| panic!("{column} = {cell:?} is not a number"))
}

/// The q-quantile by linear interpolation between order statistics (Hyndman and Fan type 7, the
/// default of R's quantile and NumPy's quantile), written out here independently of the crate.
fn type7(values: &[f64], q: f64) -> f64 {
    let mut v = values.to_vec();
    v.sort_by(f64::total_cmp);
    let h = (v.len() - 1) as f64 * q;
    let lo = h.floor() as usize;
    let hi = (lo + 1).min(v.len() - 1);
    v[lo] + (h - lo as f64) * (v[hi] - v[lo])
}

#[test]
fn pooled_figures_recomputed_from_replications_equal_the_summary() {
    let tmp = tempfile::tempdir().unwrap();
    let out = run_scenario(tmp.path(), SWEPT, &[]);
    let summary = read_csv(&out.join("summary.csv"));
    let reps = read_csv(&out.join("replications.csv"));
    assert_eq!(summary.len(), 4);
    assert_eq!(reps.len(), 4 * 40);
    for arm in &summary {
        let label = &arm["arm"];
        let mine: Vec<_> = reps.iter().filter(|r| &r["arm"] == label).collect();
        let numbers: Vec<u32> = mine.iter().map(|r| r["replication"].parse().unwrap()).collect();
        assert_eq!(numbers, (1..=40).collect::<Vec<u32>>(), "{label}: replications in order from 1");
        // Sums in replication order, as a script would take them: the pooled figures are ratios of
        // sums, so they must come out exactly, not merely close.
        let sum = |c: &str| mine.iter().map(|r| num(r, c)).fold(0.0, |a, x| a + x);
        let disbursed = sum("disbursed");
        assert_eq!(sum("groups_repaid") / sum("group_cycles"), num(arm, "group_repayment_rate"), "{label}");
        assert_eq!(sum("loss") / disbursed, num(arm, "loss_rate"), "{label}");
        assert_eq!(
            (sum("collected") + sum("recovered") - disbursed) / disbursed,
            num(arm, "net_yield"),
            "{label}"
        );
        assert_eq!(sum("served_slot_cycles") / sum("slot_cycles"), num(arm, "served_share"), "{label}");
        assert_eq!(sum("excluded_slot_cycles") / sum("slot_cycles"), num(arm, "excluded_share"), "{label}");
        assert_eq!(sum("member_defaults") / sum("member_loans"), num(arm, "member_default_rate"), "{label}");
        // Per-replication rates are their own numerator over denominator.
        for r in &mine {
            assert_eq!(num(r, "loss") / num(r, "disbursed"), num(r, "loss_rate"));
            assert!(num(r, "worst_cycle_loss") >= num(r, "loss_rate"), "the worst cycle is at least the average");
        }
        let worst: Vec<f64> = mine.iter().map(|r| num(r, "worst_cycle_loss")).collect();
        for (column, q) in [("worst_cycle_loss_p50", 0.5), ("worst_cycle_loss_p95", 0.95)] {
            let expected = type7(&worst, q);
            assert!((num(arm, column) - expected).abs() <= 1e-15, "{label} {column}");
        }
        // 40 values cannot support a 99% quantile (it needs 100): an empty cell.
        assert_eq!(arm["worst_cycle_loss_p99"], "");
    }
    // The swept shock path has its own column, named by the path; group_size keeps its policy column.
    let correlations: Vec<&str> = summary
        .iter()
        .map(|r| r["shock.illness.village_correlation"].as_str())
        .collect();
    assert_eq!(correlations, ["0", "0.3", "0", "0.3"]);
    let sizes: Vec<&str> = summary.iter().map(|r| r["group_size"].as_str()).collect();
    assert_eq!(sizes, ["3", "3", "5", "5"]);
}
