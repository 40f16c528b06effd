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
            header
                .iter()
                .map(str::to_string)
                .zip(rec.iter().map(str::to_string))
                .collect()
        })
        .collect()
}

fn num(row: &BTreeMap<String, String>, column: &str) -> f64 {
    let cell = row.get(column).unwrap_or_else(|| panic!("no column {column}"));
    cell.parse()
        .unwrap_or_else(|_| panic!("{column} = {cell:?} is not a number"))
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
        assert_eq!(
            numbers,
            (1..=40).collect::<Vec<u32>>(),
            "{label}: replications in order from 1"
        );
        // Sums in replication order, as a script would take them: the pooled figures are ratios of
        // sums, so they must come out exactly, not merely close.
        let sum = |c: &str| mine.iter().map(|r| num(r, c)).fold(0.0, |a, x| a + x);
        let disbursed = sum("disbursed");
        assert_eq!(
            sum("groups_repaid") / sum("group_cycles"),
            num(arm, "group_repayment_rate"),
            "{label}"
        );
        assert_eq!(sum("loss") / disbursed, num(arm, "loss_rate"), "{label}");
        assert_eq!(
            (sum("collected") + sum("recovered") - disbursed) / disbursed,
            num(arm, "net_yield"),
            "{label}"
        );
        assert_eq!(
            sum("served_slot_cycles") / sum("slot_cycles"),
            num(arm, "served_share"),
            "{label}"
        );
        assert_eq!(
            sum("excluded_slot_cycles") / sum("slot_cycles"),
            num(arm, "excluded_share"),
            "{label}"
        );
        assert_eq!(
            sum("member_defaults") / sum("member_loans"),
            num(arm, "member_default_rate"),
            "{label}"
        );
        // Per-replication rates are their own numerator over denominator.
        for r in &mine {
            assert_eq!(num(r, "loss") / num(r, "disbursed"), num(r, "loss_rate"));
            assert!(
                num(r, "worst_cycle_loss") >= num(r, "loss_rate"),
                "the worst cycle is at least the average"
            );
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

/// An invented exclusion comparison, "Quillfield Growers' Fund": how long a defaulting group sits
/// out. Every arm sees the same shocks (common random numbers).
const EXCLUSION: &str = r#"
name = "Quillfield Growers' Fund: exclusion test"
seed = 9090
replications = 40
cycles = 10
warmup_cycles = 4
[portfolio]
borrowers = 400
villages = 8
[loan]
principal = 100.0
interest_rate = 0.06
[borrowers]
income = { kind = "lognormal", mean = 1.3, cv = 0.15 }
[[shock]]
name = "illness"
scope = "member"
probability = 0.06
village_correlation = 0.1
severity = { kind = "uniform", low = 0.4, high = 0.9 }
[[shock]]
name = "flood"
scope = "village"
probability = 0.05
reach = 0.6
severity = { kind = "beta", mean = 0.5, sd = 0.2 }
[policy]
group_size = 5
peer_cover = 0.4
[sweep]
exclusion_cycles = [0, 1, 3]
"#;

#[test]
fn common_random_numbers_narrow_the_exclusion_comparison() {
    let tmp = tempfile::tempdir().unwrap();
    let out = run_scenario(tmp.path(), EXCLUSION, &[]);
    let rows = read_csv(&out.join("differences.csv"));
    let repayment: Vec<_> = rows.iter().filter(|r| r["metric"] == "group_repayment_rate").collect();
    assert_eq!(repayment.len(), 2);
    for r in repayment {
        assert_eq!(r["baseline"], "exclusion_cycles=0");
        // se_ratio is the paired standard error over sqrt(se_a^2 + se_b^2), both recomputed here from
        // replications.csv (delta-method ratio estimator, Cochran, Sampling Techniques, ch. 6).
        let ratio = num(r, "se_ratio");
        let paired = num(r, "se");
        let own = |arm: &str| own_se(&out, arm);
        let unpaired = (own(&r["arm"]).powi(2) + own("exclusion_cycles=0").powi(2)).sqrt();
        assert!(
            (ratio - paired / unpaired).abs() <= 1e-12 * ratio.max(1.0),
            "{ratio} vs {}",
            paired / unpaired
        );
        // Both arms see the same village floods, which move every replication's repayment together;
        // pairing removes that shared part, so the paired error is well under the unpaired one (here
        // about 0.3 and 0.5; independent arms would give about 1).
        assert!(ratio < 0.6, "{}: se_ratio {ratio}", r["arm"]);
        let significant = r["significant"] == "true";
        assert_eq!(significant, num(r, "ci_low") > 0.0 || num(r, "ci_high") < 0.0);
    }
}

/// The standard error of one arm's pooled group repayment, from replications.csv.
fn own_se(out: &Path, arm: &str) -> f64 {
    let reps = read_csv(&out.join("replications.csv"));
    let pairs: Vec<(f64, f64)> = reps
        .iter()
        .filter(|r| r["arm"] == arm)
        .map(|r| (num(r, "groups_repaid"), num(r, "group_cycles")))
        .collect();
    let n = pairs.len() as f64;
    let rate = pairs.iter().map(|p| p.0).sum::<f64>() / pairs.iter().map(|p| p.1).sum::<f64>();
    let ybar = pairs.iter().map(|p| p.1).sum::<f64>() / n;
    let ss: f64 = pairs.iter().map(|&(x, y)| (x - rate * y).powi(2)).sum();
    (ss / (n * (n - 1.0))).sqrt() / ybar
}

#[test]
fn compare_against_another_baseline_needs_no_rerun_and_matches_the_run() {
    let tmp = tempfile::tempdir().unwrap();
    let again = tmp.path().join("again");
    std::fs::create_dir(&again).unwrap();
    let out = run_scenario(tmp.path(), EXCLUSION, &[]);
    let direct = run_scenario(&again, EXCLUSION, &["--baseline", "exclusion_cycles=3"]);
    let first = std::fs::read(out.join("differences.csv")).unwrap();
    // By number, as `check` lists the arms: the third arm is exclusion_cycles=3.
    let o = loancycle(&["compare", out.to_str().unwrap(), "--baseline", "3"]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let rewritten = std::fs::read(out.join("differences.csv")).unwrap();
    assert_ne!(first, rewritten);
    assert_eq!(rewritten, std::fs::read(direct.join("differences.csv")).unwrap());
    let rows = read_csv(&out.join("differences.csv"));
    assert!(rows.iter().all(|r| r["baseline"] == "exclusion_cycles=3"));
}

#[test]
fn an_unknown_baseline_is_refused_in_one_line() {
    let tmp = tempfile::tempdir().unwrap();
    let out = run_scenario(tmp.path(), EXCLUSION, &[]);
    let before = std::fs::read(out.join("differences.csv")).unwrap();
    for given in ["0", "4", "exclusion_cycles=9"] {
        let o = loancycle(&["compare", out.to_str().unwrap(), "--baseline", given]);
        assert_eq!(o.status.code(), Some(2));
        let err = String::from_utf8_lossy(&o.stderr);
        assert_eq!(err.lines().count(), 1, "{err}");
        assert!(
            err.contains("--baseline") && err.contains(given) && err.contains("from 1 to 3"),
            "{err}"
        );
    }
    assert_eq!(std::fs::read(out.join("differences.csv")).unwrap(), before);
    let o = loancycle(&[
        "compare",
        tmp.path().join("nowhere").to_str().unwrap(),
        "--baseline",
        "1",
    ]);
    assert_eq!(o.status.code(), Some(2));
}

#[test]
fn a_repeated_replication_in_a_stored_run_is_refused_in_one_line() {
    let tmp = tempfile::tempdir().unwrap();
    let out = run_scenario(tmp.path(), EXCLUSION, &[]);
    let path = out.join("replications.csv");
    let text = std::fs::read_to_string(&path).unwrap();
    let mut lines: Vec<&str> = text.lines().collect();
    // the last data row again: its arm and replication number appear twice
    lines.push(lines[lines.len() - 1]);
    std::fs::write(&path, lines.join("\n") + "\n").unwrap();
    let o = loancycle(&["compare", out.to_str().unwrap(), "--baseline", "1"]);
    assert_eq!(o.status.code(), Some(2));
    let err = String::from_utf8_lossy(&o.stderr);
    assert_eq!(err.lines().count(), 1, "{err}");
    assert!(
        err.contains("replications.csv")
            && err.contains(&format!("row {}", lines.len() - 1))
            && err.contains("repeated"),
        "{err}"
    );
}

/// The standard normal quantile at 1 - 0.05 / 3 (three arms, one constraint, Bonferroni):
/// 2.128045 (scipy.stats.norm.ppf(1 - 0.05 / 3), standard normal tables).
const Z_ONE_SIDED_THIRD: f64 = 2.128045;

#[test]
fn the_selection_prints_one_json_object_and_checks_feasibility_from_the_replications() {
    let tmp = tempfile::tempdir().unwrap();
    let out = run_scenario(tmp.path(), EXCLUSION, &[]);
    let dir = out.to_str().unwrap();
    let summary = read_csv(&out.join("summary.csv"));
    // A served-share limit between the arms: the middle of the three served shares.
    let mut served: Vec<f64> = summary.iter().map(|r| num(r, "served_share")).collect();
    served.sort_by(f64::total_cmp);
    let limit = served[1] - 1e-4;
    let constraint = format!("served_share>={limit}");
    let o = loancycle(&[
        "compare",
        dir,
        "--maximize",
        "group_repayment_rate",
        "--subject-to",
        &constraint,
        "--json",
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).expect("stdout is one JSON object");
    assert_eq!(v["objective"], "maximize group_repayment_rate");
    assert_eq!(v["constraints"][0], constraint.as_str());
    // Feasibility recomputed here: the arm's lower one-sided bound, ratio estimator from
    // replications.csv, must reach the limit.
    let reps = read_csv(&out.join("replications.csv"));
    let mut expected = Vec::new();
    for arm in &summary {
        let pairs: Vec<(f64, f64)> = reps
            .iter()
            .filter(|r| r["arm"] == arm["arm"])
            .map(|r| (num(r, "served_slot_cycles"), num(r, "slot_cycles")))
            .collect();
        let n = pairs.len() as f64;
        let rate = pairs.iter().map(|p| p.0).sum::<f64>() / pairs.iter().map(|p| p.1).sum::<f64>();
        let ybar = pairs.iter().map(|p| p.1).sum::<f64>() / n;
        let se = (pairs.iter().map(|&(x, y)| (x - rate * y).powi(2)).sum::<f64>() / (n * (n - 1.0))).sqrt() / ybar;
        if rate - Z_ONE_SIDED_THIRD * se >= limit {
            expected.push(arm["arm"].clone());
        }
    }
    let feasible: Vec<String> = v["feasible"]
        .as_array()
        .unwrap()
        .iter()
        .map(|x| x.as_str().unwrap().to_string())
        .collect();
    assert_eq!(feasible, expected);
    assert!(
        !feasible.is_empty() && feasible.len() < 3,
        "the limit should split the arms: {feasible:?}"
    );
    let best = v["best"].as_str().expect("a best arm");
    assert!(feasible.iter().any(|f| f == best));
    assert!(v["not_worse"].as_array().unwrap().iter().any(|x| x == best));

    // No arm can lose nothing: exit 0, best null, both lists empty, and the plain sentence.
    let o = loancycle(&[
        "compare",
        dir,
        "--minimize",
        "excluded_share",
        "--subject-to",
        "loss_rate<=0",
        "--json",
    ]);
    assert!(o.status.success());
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    assert!(v["best"].is_null());
    assert_eq!(v["feasible"], serde_json::json!([]));
    assert_eq!(v["not_worse"], serde_json::json!([]));
    let o = loancycle(&[
        "compare",
        dir,
        "--minimize",
        "excluded_share",
        "--subject-to",
        "loss_rate<=0",
    ]);
    assert!(String::from_utf8_lossy(&o.stdout).contains("no arm meets loss_rate<=0 with 95% confidence"));

    // A figure it does not know is refused in one line naming the flag.
    let o = loancycle(&["compare", dir, "--maximize", "happiness"]);
    assert_eq!(o.status.code(), Some(2));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(
        err.contains("--maximize") && err.contains("happiness") && err.lines().count() == 1,
        "{err}"
    );
}

#[test]
fn summary_marks_the_loss_and_service_frontier() {
    let tmp = tempfile::tempdir().unwrap();
    let out = run_scenario(tmp.path(), EXCLUSION, &[]);
    let summary = read_csv(&out.join("summary.csv"));
    let points: Vec<(f64, f64)> = summary
        .iter()
        .map(|r| (num(r, "loss_rate"), num(r, "served_share")))
        .collect();
    for (r, &(loss, served)) in summary.iter().zip(&points) {
        let dominated = points
            .iter()
            .any(|&(l, s)| l <= loss && s >= served && (l < loss || s > served));
        assert_eq!(
            r["on_frontier"],
            if dominated { "false" } else { "true" },
            "{}",
            r["arm"]
        );
    }
}

#[test]
fn the_group_size_table_answers_from_the_summary_and_the_closed_form() {
    // A table curve for the sales shock, independent members of fixed risk 1: the closed form's
    // group repayment is (1 - phi(k))^k, so k ln(1 - phi(k)) is -0.2107, -0.1539, -0.1633, -0.2565
    // for k = 2..5 (computed by hand): size 3 is best.
    let text = SWEPT
        .replace(
            "[policy]",
            "[[shock]]\nname = \"sales\"\nscope = \"member\"\nprobability = { curve = \"table\", values = { \"2\" = 0.1, \"3\" = 0.05, \"4\" = 0.04, \"5\" = 0.05 } }\n[policy]",
        )
        .replace("group_size = [3, 5]", "group_size = [2, 3, 4, 5]");
    let tmp = tempfile::tempdir().unwrap();
    let out = run_scenario(tmp.path(), &text, &[]);
    let table = read_csv(&out.join("group_size.csv"));
    let summary = read_csv(&out.join("summary.csv"));
    let contexts: Vec<&str> = table.iter().map(|r| r["context"].as_str()).collect();
    assert_eq!(
        contexts,
        [
            "shock.illness.village_correlation=0",
            "shock.illness.village_correlation=0.3"
        ]
    );
    for row in &table {
        assert_eq!(row["best_closed_form"], "3");
        let value = row["context"].rsplit('=').next().unwrap();
        let arms: Vec<_> = summary
            .iter()
            .filter(|r| r["shock.illness.village_correlation"] == value)
            .collect();
        assert_eq!(arms.len(), 4);
        let by = |column: &str, higher: bool| {
            let mut best = arms[0];
            for a in &arms[1..] {
                let (x, b) = (num(a, column), num(best, column));
                if (higher && x > b) || (!higher && x < b) {
                    best = a;
                }
            }
            best["group_size"].clone()
        };
        assert_eq!(row["best_simulated"], by("group_repayment_rate", true));
        assert_eq!(row["best_by_loss"], by("loss_rate", false));
        assert!(row["not_worse"].split(';').any(|k| k == row["best_simulated"]));
        // Village correlation takes the scenario out of the one-factor class only where it is
        // nonzero; the exact column is filled only where every arm of the row has an exact value.
        assert!(row["best_exact"].is_empty() || row["best_exact"].parse::<u32>().is_ok());
    }
}

/// Paired difference of two arms' pooled group repayment with its delta-method standard error,
/// recomputed from replications.csv (Cochran, Sampling Techniques, ch. 6: each replication
/// contributes (x_a - R_a y_a) / mean(y_a) - (x_b - R_b y_b) / mean(y_b)).
fn paired_repayment(out: &Path, arm: &str, baseline: &str) -> (f64, f64) {
    let reps = read_csv(&out.join("replications.csv"));
    let pairs = |label: &str| -> Vec<(f64, f64)> {
        reps.iter()
            .filter(|r| r["arm"] == label)
            .map(|r| (num(r, "groups_repaid"), num(r, "group_cycles")))
            .collect()
    };
    let (a, b) = (pairs(arm), pairs(baseline));
    let n = a.len() as f64;
    let pooled = |v: &[(f64, f64)]| {
        let (x, y) = v.iter().fold((0.0, 0.0), |s, p| (s.0 + p.0, s.1 + p.1));
        (x / y, y / n)
    };
    let ((ra, ya), (rb, yb)) = (pooled(&a), pooled(&b));
    let z: Vec<f64> = a
        .iter()
        .zip(&b)
        .map(|(p, q)| (p.0 - ra * p.1) / ya - (q.0 - rb * q.1) / yb)
        .collect();
    let mean = z.iter().sum::<f64>() / n;
    let var = z.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n - 1.0);
    (ra - rb, (var / n).sqrt())
}

#[test]
fn contrasts_pair_the_arms_that_differ_only_in_one_key() {
    let tmp = tempfile::tempdir().unwrap();
    let out = run_scenario(tmp.path(), SWEPT, &[]);
    let dir = out.to_str().unwrap();
    let o = loancycle(&["compare", dir, "--along", "shock.illness.village_correlation"]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let rows = read_csv(&out.join("contrasts.csv"));
    // Two group sizes, one pair of correlations each, five figures per pair.
    assert_eq!(rows.len(), 2 * 5);
    let contexts: Vec<&str> = rows.iter().map(|r| r["context"].as_str()).collect();
    assert_eq!(contexts[..5], ["group_size=3"; 5]);
    assert_eq!(contexts[5..], ["group_size=5"; 5]);
    for r in rows.iter().filter(|r| r["metric"] == "group_repayment_rate") {
        let k = r["context"].trim_start_matches("group_size=");
        assert_eq!(
            r["baseline"],
            format!("group_size={k},shock.illness.village_correlation=0")
        );
        assert_eq!(
            r["arm"],
            format!("group_size={k},shock.illness.village_correlation=0.3")
        );
        assert_eq!((r["baseline_value"].as_str(), r["value"].as_str()), ("0", "0.3"));
        let (d, se) = paired_repayment(&out, &r["arm"], &r["baseline"]);
        assert!((num(r, "difference") - d).abs() <= 1e-12, "{r:?}");
        assert!((num(r, "se") - se).abs() <= 1e-12 * se.max(1e-3), "{r:?}");
        // 1.959964: the standard normal 97.5% quantile (scipy.stats.norm.ppf(0.975)).
        assert!((num(r, "ci_low") - (d - 1.959964 * se)).abs() <= 1e-9);
        let significant = r["significant"] == "true";
        assert_eq!(significant, num(r, "ci_low") > 0.0 || num(r, "ci_high") < 0.0);
        assert!(num(r, "se_ratio") > 0.0);
    }
    // A key that is not swept exits 2 in one line naming the swept keys, and writes nothing new.
    std::fs::remove_file(out.join("contrasts.csv")).unwrap();
    let o = loancycle(&["compare", dir, "--along", "peer_cover"]);
    assert_eq!(o.status.code(), Some(2));
    let err = String::from_utf8_lossy(&o.stderr);
    assert_eq!(err.lines().count(), 1, "{err}");
    assert!(
        err.contains("--along")
            && err.contains("peer_cover")
            && err.contains("group_size, shock.illness.village_correlation"),
        "{err}"
    );
    assert!(!out.join("contrasts.csv").exists());
    // `policy.group_size` names the policy field as in a scenario file.
    let o = loancycle(&["compare", dir, "--along", "policy.group_size"]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let rows = read_csv(&out.join("contrasts.csv"));
    assert_eq!(rows.len(), 2 * 5);
    assert_eq!(rows[0]["context"], "shock.illness.village_correlation=0");
    // No temporary file is left beside the results.
    let leftovers: Vec<_> = std::fs::read_dir(&out)
        .unwrap()
        .filter_map(|e| e.ok())
        .filter(|e| e.file_name().to_string_lossy().contains("partial"))
        .collect();
    assert!(leftovers.is_empty());
}

/// Ranks of the distribution-free 95% interval for the q-quantile of n values, pasted from
/// scipy 1.17.1 (scripts/scipy_reference.py): (n, q, binom.ppf(0.025, n, q),
/// binom.ppf(0.975, n, q) + 1).
const SCIPY_RANKS: [(usize, f64, usize, usize); 6] = [
    (40, 0.5, 14, 27),
    (200, 0.95, 184, 197),
    (400, 0.99, 392, 400),
    (20000, 0.999, 19971, 19989),
    (5000000, 0.99, 4949563, 4950437),
    // Too few values for an upper rank: scipy gives n + 1.
    (200, 0.99, 195, 201),
];

/// One-sided ranks from scipy 1.17.1: (n, q, alpha, binom.ppf(1 - alpha, n, q) + 1,
/// binom.ppf(alpha, n, q)).
const SCIPY_ONE_SIDED: [(usize, f64, f64, usize, usize); 3] = [
    (200, 0.95, 0.05 / 6.0, 198, 182),
    (1000, 0.99, 0.01, 998, 982),
    (60, 0.5, 0.05, 37, 24),
];

#[test]
fn order_statistic_ranks_match_scipy_and_cover_by_the_exact_binomial_law() {
    use loancycle::stats::estimate;
    use statrs::distribution::{Binomial, DiscreteCDF};
    for (n, q, low, high) in SCIPY_RANKS {
        let expected = (high <= n).then_some((low, high));
        assert_eq!(
            estimate::quantile_interval_ranks(n, q, 0.95),
            expected,
            "n = {n}, q = {q}"
        );
    }
    for (n, q, alpha, upper, lower) in SCIPY_ONE_SIDED {
        assert_eq!(
            estimate::quantile_upper_rank(n, q, alpha),
            Some(upper),
            "n = {n}, q = {q}"
        );
        assert_eq!(
            estimate::quantile_lower_rank(n, q, alpha),
            Some(lower),
            "n = {n}, q = {q}"
        );
    }
    // Exact coverage P(l <= B <= u - 1), B ~ binomial(n, q), from statrs 0.18: at least 95%, and
    // each end as tight as it can be (moving it inward would leave more than 2.5% on its side).
    for (n, q) in [
        (40, 0.5),
        (60, 0.5),
        (200, 0.95),
        (400, 0.99),
        (1000, 0.95),
        (5000, 0.999),
    ] {
        let (l, u) = estimate::quantile_interval_ranks(n, q, 0.95).unwrap();
        let law = Binomial::new(q, n as u64).unwrap();
        let cdf = |k: usize| law.cdf(k as u64);
        let below = if l >= 2 { cdf(l - 2) } else { 0.0 };
        assert!(cdf(u - 1) - cdf(l - 1) >= 0.95, "n = {n}, q = {q}: ranks {l}, {u}");
        assert!(
            cdf(l - 1) < 0.025 && cdf(l) >= 0.025 && below < 0.025,
            "n = {n}, q = {q}: low {l}"
        );
        assert!(cdf(u - 1) >= 0.975 && cdf(u - 2) < 0.975, "n = {n}, q = {q}: high {u}");
    }
}

#[test]
fn order_statistic_intervals_cover_uniform_quantiles_as_often_as_the_binomial_law_says() {
    // Samples of n uniform values, whose q-quantile is q: the share of intervals covering q must
    // equal the exact coverage (statrs 0.18 binomial law) within 4 standard errors of a share.
    use loancycle::stats::{estimate, tolerance::STANDARD_ERRORS};
    use rand::{Rng, SeedableRng};
    use statrs::distribution::{Binomial, DiscreteCDF};
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(2026);
    let trials = 40_000;
    for (n, q) in [(40usize, 0.5), (200, 0.95)] {
        let (l, u) = estimate::quantile_interval_ranks(n, q, 0.95).unwrap();
        let law = Binomial::new(q, n as u64).unwrap();
        let exact = law.cdf(u as u64 - 1) - law.cdf(l as u64 - 1);
        let mut covered = 0u32;
        let mut values = vec![0.0; n];
        for _ in 0..trials {
            values.iter_mut().for_each(|v| *v = rng.random::<f64>());
            let sorted = estimate::sorted(&values);
            let (lo, hi) = estimate::quantile_interval_sorted(&sorted, q).unwrap();
            assert_eq!((lo, hi), (sorted[l - 1], sorted[u - 1]));
            covered += u32::from(lo <= q && q <= hi);
        }
        let share = f64::from(covered) / trials as f64;
        let se = (exact * (1.0 - exact) / trials as f64).sqrt();
        // One rank off moves the coverage by the binomial probability at that rank, about 0.02 for
        // both cases, far beyond 4 SE (0.0045).
        assert!(
            (share - exact).abs() <= STANDARD_ERRORS * se,
            "n = {n}, q = {q}: covered {share}, exact {exact}"
        );
    }
}

#[test]
fn summary_quantiles_carry_their_order_statistic_intervals() {
    let tmp = tempfile::tempdir().unwrap();
    let out = run_scenario(tmp.path(), SWEPT, &[]);
    let summary = read_csv(&out.join("summary.csv"));
    let reps = read_csv(&out.join("replications.csv"));
    for arm in &summary {
        let values = |column: &str| {
            let mut v: Vec<f64> = reps
                .iter()
                .filter(|r| r["arm"] == arm["arm"] && !r[column].is_empty())
                .map(|r| num(r, column))
                .collect();
            v.sort_by(f64::total_cmp);
            v
        };
        // 40 replications: the median's ranks are 14 and 27 (scipy 1.17.1, pasted above); the 95%
        // quantile would need rank 41, so its interval is empty.
        for (figure, column) in [("loss", "loss_rate"), ("worst_cycle_loss", "worst_cycle_loss")] {
            let v = values(column);
            assert_eq!(v.len(), 40);
            assert_eq!(num(arm, &format!("{figure}_p50_ci_low")), v[13]);
            assert_eq!(num(arm, &format!("{figure}_p50_ci_high")), v[26]);
            assert!(arm[&format!("{figure}_p95_ci_low")].is_empty());
            assert!(arm[&format!("{figure}_p95_ci_high")].is_empty());
        }
        for column in ["loss_cycle_p99", "loss_cycle_p999"] {
            let (lo, hi) = (&arm[&format!("{column}_ci_low")], &arm[&format!("{column}_ci_high")]);
            assert_eq!(lo.is_empty(), hi.is_empty());
            if !lo.is_empty() {
                assert!(num(arm, &format!("{column}_ci_low")) <= num(arm, column));
                assert!(num(arm, column) <= num(arm, &format!("{column}_ci_high")));
            }
        }
    }
}

#[test]
fn a_quantile_constraint_uses_the_order_statistic_bound() {
    use statrs::distribution::{Binomial, DiscreteCDF};
    let tmp = tempfile::tempdir().unwrap();
    let out = run_scenario(tmp.path(), EXCLUSION, &[]);
    let summary = read_csv(&out.join("summary.csv"));
    let reps = read_csv(&out.join("replications.csv"));
    // Each arm's one-sided upper bound for its median worst-cycle loss, recomputed here: the order
    // statistic at rank 1 + the binomial(40, 0.5) quantile at 1 - 0.05/3 (three arms, one
    // constraint, Bonferroni), from statrs 0.18.
    let law = Binomial::new(0.5, 40).unwrap();
    let rank = (0..=40u64).find(|&k| law.cdf(k) >= 1.0 - 0.05 / 3.0).unwrap() as usize + 1;
    let bounds: Vec<f64> = summary
        .iter()
        .map(|arm| {
            let mut v: Vec<f64> = reps
                .iter()
                .filter(|r| r["arm"] == arm["arm"])
                .map(|r| num(r, "worst_cycle_loss"))
                .collect();
            v.sort_by(f64::total_cmp);
            v[rank - 1]
        })
        .collect();
    let mut sorted = bounds.clone();
    sorted.sort_by(f64::total_cmp);
    let limit = sorted[1];
    let constraint = format!("worst_cycle_loss_p50<={limit}");
    let o = loancycle(&[
        "compare",
        out.to_str().unwrap(),
        "--maximize",
        "served_share",
        "--subject-to",
        &constraint,
        "--json",
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    let expected: Vec<&str> = summary
        .iter()
        .zip(&bounds)
        .filter(|(_, b)| **b <= limit)
        .map(|(a, _)| a["arm"].as_str())
        .collect();
    let feasible: Vec<&str> = v["feasible"]
        .as_array()
        .unwrap()
        .iter()
        .map(|x| x.as_str().unwrap())
        .collect();
    assert_eq!(feasible, expected);
    assert!(feasible.len() < 3, "the limit should split the arms: {bounds:?}");
    // The per-cycle quantiles need cycle records, which a stored run lacks: refused in one line.
    let o = loancycle(&[
        "compare",
        out.to_str().unwrap(),
        "--maximize",
        "served_share",
        "--subject-to",
        "loss_cycle_p99<=0.1",
    ]);
    assert_eq!(o.status.code(), Some(2));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(
        err.contains("worst_cycle_loss_p95") && err.lines().count() == 1,
        "{err}"
    );
}

/// An invented lender, "Saltmarsh Weavers' Union": a sales shock whose failure probability falls
/// too slowly with group size for groups to pay off without cover, in the one-factor class (fixed
/// income 1.5, a hit takes the whole income), swept over 7 group sizes and 3 levels of cover: 21
/// arms.
const COVERED: &str = r#"
name = "Saltmarsh Weavers' Union: cover and group size"
seed = 4242
replications = 10
cycles = 4
[portfolio]
borrowers = 126
villages = 3
[loan]
principal = 80.0
[borrowers]
income = 1.5
[[shock]]
name = "sales"
scope = "member"
probability = { curve = "table", values = { "1" = 0.04, "2" = 0.03, "3" = 0.024, "4" = 0.021, "5" = 0.02, "6" = 0.021, "7" = 0.024 } }
severity = 1.0
[policy]
group_size = 3
[sweep]
group_size = [1, 2, 3, 4, 5, 6, 7]
peer_cover = [0, 0.5, 1]
"#;

#[test]
fn a_long_table_shows_the_leaders_and_the_sentences_name_peer_cover() {
    let tmp = tempfile::tempdir().unwrap();
    let file = tmp.path().join("covered.toml");
    std::fs::write(&file, COVERED).unwrap();
    let out = tmp.path().join("out");
    let o = loancycle(&["run", file.to_str().unwrap(), "--out", out.to_str().unwrap()]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let stdout = String::from_utf8_lossy(&o.stdout);
    let summary = read_csv(&out.join("summary.csv"));
    assert_eq!(summary.len(), 21);
    // The ten arms with the highest group repayment, best first (earlier arm on ties), and only them.
    let mut ranked: Vec<&BTreeMap<String, String>> = summary.iter().collect();
    ranked.sort_by(|a, b| num(b, "group_repayment_rate").total_cmp(&num(a, "group_repayment_rate")));
    let leaders: Vec<&str> = ranked[..10].iter().map(|r| r["arm"].as_str()).collect();
    let listed: Vec<&str> = stdout
        .lines()
        .filter_map(|l| l.split_whitespace().next())
        .filter(|w| summary.iter().any(|r| r["arm"] == *w))
        .take(10)
        .collect();
    assert_eq!(listed, leaders);
    assert!(
        stdout.contains("the 10 arms with the highest group repayment of 21"),
        "{stdout}"
    );
    assert!(stdout.contains("summary.csv"));
    // Without cover the closed form (1 - phi(k))^k is best at k = 1: k ln(1 - phi(k)) is -0.0408,
    // -0.0609, -0.0729, ... by hand. With cover c, a group of k with income 1.5 repays while
    // hits <= c 0.5 (k - hits): by the binomial law (by hand) the best exact size is 5 at c = 0.5
    // (0.9961) and 6 at c = 1 (0.9998), so peer cover is what moves it.
    let table = read_csv(&out.join("group_size.csv"));
    let best: Vec<(&str, &str, &str)> = table
        .iter()
        .map(|r| {
            (
                r["context"].as_str(),
                r["best_closed_form"].as_str(),
                r["best_exact"].as_str(),
            )
        })
        .collect();
    assert_eq!(
        best,
        [
            ("peer_cover=0", "1", "1"),
            ("peer_cover=0.5", "1", "5"),
            ("peer_cover=1", "1", "6")
        ]
    );
    assert!(
        stdout.contains("at peer_cover=0.5, peer cover moves the best size from 1 (closed form) to 5 (exact)"),
        "{stdout}"
    );
    assert!(stdout.contains("at peer_cover=1, peer cover moves the best size from 1 (closed form) to 6 (exact)"));
}
