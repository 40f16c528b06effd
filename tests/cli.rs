//! The `loancycle` command line, driven as a user would: exit codes, what goes to stdout and
//! stderr, and the files a run leaves behind.
//!
//! Every `run` here uses the tiny scenario in `tests/data/cli/` or the built-in baseline with
//! `--replications 2`, so the whole file takes a few seconds. Output always goes to a fresh
//! temporary directory.

use loancycle::scenario::Scenario;
use sha2::{Digest, Sha256};
use std::collections::BTreeMap;
use std::ffi::{OsStr, OsString};
use std::path::{Path, PathBuf};
use std::process::Command;

/// Exit code the binary uses for invalid input (scenario, flags, output directory).
const BAD_INPUT: i32 = 2;

/// The columns of summary.csv as users' scripts know them, spelled out here rather than taken from
/// the writer, so a renamed or reordered column fails this file.
const SUMMARY_COLUMNS: [&str; 98] = [
    "arm",
    "group_size",
    "liability",
    "peer_cover",
    "exclusion_cycles",
    "exclusion_scope",
    "formation",
    "matching",
    "replications",
    "group_cycles",
    "group_repayment_rate",
    "group_repayment_ci_low",
    "group_repayment_ci_high",
    "member_loans",
    "member_shortfall_rate",
    "member_default_rate",
    "shortfall_free_group_rate",
    "iid_shortfall_free",
    "implied_member_failure",
    "rescued_rate",
    "value_repayment_rate",
    "loss_rate",
    "loss_rate_ci_low",
    "loss_rate_ci_high",
    "net_yield",
    "served_share",
    "excluded_share",
    "waiting_share",
    "empty_share",
    "loss_p50",
    "loss_p50_ci_low",
    "loss_p50_ci_high",
    "loss_p95",
    "loss_p95_ci_low",
    "loss_p95_ci_high",
    "loss_p99",
    "loss_p99_ci_low",
    "loss_p99_ci_high",
    "loss_p999",
    "loss_p999_ci_low",
    "loss_p999_ci_high",
    "loss_es99",
    "loss_cycle_p99",
    "loss_cycle_p99_ci_low",
    "loss_cycle_p99_ci_high",
    "loss_cycle_p999",
    "loss_cycle_p999_ci_low",
    "loss_cycle_p999_ci_high",
    "worst_cycle_loss_p50",
    "worst_cycle_loss_p50_ci_low",
    "worst_cycle_loss_p50_ci_high",
    "worst_cycle_loss_p95",
    "worst_cycle_loss_p95_ci_low",
    "worst_cycle_loss_p95_ci_high",
    "worst_cycle_loss_p99",
    "worst_cycle_loss_p99_ci_low",
    "worst_cycle_loss_p99_ci_high",
    "analytic_group_repayment",
    "dependence_ratio",
    "shortfall_icc",
    "closed_form_optimum",
    "group_repayment_se",
    "loss_rate_se",
    "on_frontier",
    "min_group_size",
    "max_group_size",
    "size_slack",
    "mean_group_size",
    "exclusion_events",
    "removal_rate",
    "entrant_rate",
    "clients_reached",
    "removed_share",
    "strategic_default_rate",
    "strategic_default_ci_low",
    "strategic_default_ci_high",
    "able_members",
    "mean_principal",
    "annual_loss_p50",
    "annual_loss_p95",
    "annual_loss_p99",
    "annual_loss_p999",
    "annual_loss_es99",
    "annual_loss_amount_p999",
    "annual_default_rate",
    "principal_outstanding",
    "disbursed_per_year",
    "interest_per_year",
    "fees_per_year",
    "expected_loss_per_year",
    "unexpected_loss_999",
    "cost_of_funds_per_year",
    "operating_cost_per_year",
    "operational_self_sufficiency",
    "operational_self_sufficiency_ci_low",
    "operational_self_sufficiency_ci_high",
    "basel_capital",
    "exact_unexpected_loss",
];

const OUTPUTS: [&str; 6] = [
    "differences.csv",
    "group_size.csv",
    "replications.csv",
    "summary.csv",
    "summary.json",
    "timeseries.csv",
];

const TIMESERIES_HEADER: [&str; 6] = [
    "arm",
    "cycle",
    "served_share",
    "group_repayment_rate",
    "loss_rate",
    "excluded_share",
];

/// What one invocation of the binary produced.
struct Outcome {
    code: Option<i32>,
    stdout: String,
    stderr: String,
}

impl Outcome {
    fn describe(&self) -> String {
        format!(
            "exit {:?}\n--- stdout ---\n{}\n--- stderr ---\n{}",
            self.code, self.stdout, self.stderr
        )
    }

    /// Asserts a clean success.
    fn ok(self) -> Self {
        assert_eq!(self.code, Some(0), "{}", self.describe());
        assert!(!self.stderr.contains("panicked"), "{}", self.describe());
        self
    }

    /// Asserts a refusal of bad input: exit code 2, nothing on stdout, no panic.
    fn refused(self) -> Self {
        assert_eq!(self.code, Some(BAD_INPUT), "{}", self.describe());
        assert!(self.stdout.is_empty(), "{}", self.describe());
        assert!(!self.stderr.contains("panicked"), "{}", self.describe());
        self
    }

    /// Asserts stderr is exactly one line starting `error: ` and returns it.
    fn one_error_line(&self) -> &str {
        assert!(self.stderr.ends_with('\n'), "{}", self.describe());
        assert_eq!(self.stderr.lines().count(), 1, "{}", self.describe());
        let line = self.stderr.trim_end_matches('\n');
        assert!(line.starts_with("error: "), "{}", self.describe());
        line
    }
}

fn loancycle_in<I, S>(dir: &Path, args: I) -> Outcome
where
    I: IntoIterator<Item = S>,
    S: AsRef<OsStr>,
{
    let out = Command::new(env!("CARGO_BIN_EXE_loancycle"))
        .args(args)
        .current_dir(dir)
        .output()
        .expect("the loancycle binary starts");
    Outcome {
        code: out.status.code(),
        stdout: String::from_utf8(out.stdout).expect("stdout is UTF-8"),
        stderr: String::from_utf8(out.stderr).expect("stderr is UTF-8"),
    }
}

/// Runs the binary from the crate root, so relative paths like `scenarios-demo/baseline.toml` work.
fn loancycle<I, S>(args: I) -> Outcome
where
    I: IntoIterator<Item = S>,
    S: AsRef<OsStr>,
{
    loancycle_in(&root(), args)
}

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

fn data(rel: &str) -> PathBuf {
    root().join("tests/data").join(rel)
}

fn tiny() -> PathBuf {
    data("cli/tiny.toml")
}

fn tempdir() -> tempfile::TempDir {
    tempfile::tempdir().expect("temporary directory")
}

fn toml_files(dir: &Path) -> Vec<PathBuf> {
    let mut files: Vec<PathBuf> = std::fs::read_dir(dir)
        .unwrap_or_else(|e| panic!("cannot list {}: {e}", dir.display()))
        .map(|entry| entry.expect("directory entry").path())
        .filter(|p| p.extension().is_some_and(|e| e == "toml"))
        .collect();
    files.sort();
    files
}

/// Every entry of a directory, by name, with its bytes (directories would fail the read).
fn dir_contents(dir: &Path) -> BTreeMap<String, Vec<u8>> {
    std::fs::read_dir(dir)
        .unwrap_or_else(|e| panic!("cannot list {}: {e}", dir.display()))
        .map(|entry| {
            let entry = entry.expect("directory entry");
            let name = entry.file_name().into_string().expect("UTF-8 file name");
            let bytes = std::fs::read(entry.path()).unwrap_or_else(|e| panic!("cannot read {name}: {e}"));
            (name, bytes)
        })
        .collect()
}

/// Asserts the directory holds exactly the run's outputs (no temporary or other stray files).
fn assert_only_outputs(dir: &Path) -> BTreeMap<String, Vec<u8>> {
    let contents = dir_contents(dir);
    let names: Vec<&str> = contents.keys().map(String::as_str).collect();
    assert_eq!(names, OUTPUTS, "entries of {}", dir.display());
    contents
}

fn read_text(path: &Path) -> String {
    std::fs::read_to_string(path).unwrap_or_else(|e| panic!("cannot read {}: {e}", path.display()))
}

fn read_json(path: &Path) -> serde_json::Value {
    serde_json::from_str(&read_text(path)).unwrap_or_else(|e| panic!("{} does not parse: {e}", path.display()))
}

fn sha256_hex(bytes: &[u8]) -> String {
    Sha256::digest(bytes).iter().map(|b| format!("{b:02x}")).collect()
}

/// Header and rows of a CSV file.
fn read_csv(path: &Path) -> (Vec<String>, Vec<Vec<String>>) {
    let mut reader = csv::Reader::from_path(path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    let header = reader
        .headers()
        .expect("header row")
        .iter()
        .map(str::to_owned)
        .collect();
    let rows = reader
        .records()
        .map(|r| r.expect("well-formed row").iter().map(str::to_owned).collect())
        .collect();
    (header, rows)
}

/// Asserts no cell spells a non-finite number (NaN, inf, infinity, in any case or sign).
fn assert_all_cells_finite(path: &Path, rows: &[Vec<String>]) {
    for (i, row) in rows.iter().enumerate() {
        for cell in row {
            if let Ok(v) = cell.trim().parse::<f64>() {
                assert!(v.is_finite(), "{} row {}: cell {cell:?}", path.display(), i + 1);
            }
        }
    }
}

/// The arm labels in `check` output, in listed order (lines "  <n>  <label>  k=...").
fn listed_arms(stdout: &str) -> Vec<String> {
    stdout
        .lines()
        .filter(|line| line.starts_with(' '))
        .filter_map(|line| {
            let mut words = line.split_whitespace();
            let number = words.next()?;
            number.parse::<usize>().ok()?;
            words.next().map(str::to_owned)
        })
        .collect()
}

fn labels(scenario: &Scenario) -> Vec<String> {
    scenario.arms().iter().map(|a| a.label().to_owned()).collect()
}

/// The `# expect-KEY: value` header lines of a bad fixture.
fn expectations(text: &str) -> BTreeMap<String, String> {
    text.lines()
        .filter_map(|line| line.strip_prefix("# expect-"))
        .filter_map(|rest| rest.split_once(": "))
        .map(|(k, v)| (k.to_owned(), v.to_owned()))
        .collect()
}

/// Asserts the error line names the file and carries every fragment the fixture's header promises.
fn assert_names_expected_error(line: &str, file: &Path) {
    let wanted = expectations(&read_text(file));
    let keys: Vec<&str> = wanted.keys().map(String::as_str).collect();
    assert!(
        keys == ["allowed", "field", "line", "value"] || keys == ["location", "message"],
        "{}: unexpected header keys {keys:?}",
        file.display()
    );
    assert!(line.starts_with(&format!("error: {}: ", file.display())), "{line}");
    if let (Some(field), Some(value), Some(allowed), Some(n)) = (
        wanted.get("field"),
        wanted.get("value"),
        wanted.get("allowed"),
        wanted.get("line"),
    ) {
        let head = format!(": line {n}, field {field}: {value} is not allowed: ");
        assert!(line.contains(&head), "{line:?} lacks {head:?}");
        let rest = &line[line.find(&head).expect("found above") + head.len()..];
        assert!(rest.contains(allowed.as_str()), "{line:?} lacks allowed {allowed:?}");
    } else {
        for fragment in wanted.values() {
            assert!(line.contains(fragment.as_str()), "{line:?} lacks {fragment:?}");
        }
    }
}

// ---------------------------------------------------------------------------------------------
// Invalid scenarios

#[test]
fn check_refuses_every_bad_fixture_with_its_expected_message() {
    let files = toml_files(&data("bad"));
    assert!(files.len() >= 40, "only {} bad fixtures found", files.len());
    for file in files {
        let out = loancycle([OsStr::new("check"), file.as_os_str()]).refused();
        let line = out.one_error_line();
        assert_names_expected_error(line, &file);
    }
}

#[test]
fn run_refuses_every_bad_fixture_and_writes_nothing() {
    let tmp = tempdir();
    let files = toml_files(&data("bad"));
    assert!(files.len() >= 40, "only {} bad fixtures found", files.len());
    for (i, file) in files.iter().enumerate() {
        let out_dir = tmp.path().join(format!("out-{i}"));
        let out = loancycle([
            OsStr::new("run"),
            file.as_os_str(),
            OsStr::new("--out"),
            out_dir.as_os_str(),
        ])
        .refused();
        let line = out.one_error_line();
        assert_names_expected_error(line, file);
        assert!(
            !out_dir.exists(),
            "{}: run created {}",
            file.display(),
            out_dir.display()
        );
    }
}

#[test]
fn run_of_a_bad_scenario_leaves_earlier_results_alone_even_with_force() {
    let tmp = tempdir();
    let out_dir = tmp.path().join("results");
    loancycle([
        OsStr::new("run"),
        tiny().as_os_str(),
        OsStr::new("--out"),
        out_dir.as_os_str(),
        OsStr::new("--quiet"),
    ])
    .ok();
    let before = assert_only_outputs(&out_dir);
    let bad = data("bad/probability_above_one.toml");
    let out = loancycle([
        OsStr::new("run"),
        bad.as_os_str(),
        OsStr::new("--out"),
        out_dir.as_os_str(),
        OsStr::new("--force"),
    ])
    .refused();
    assert_names_expected_error(out.one_error_line(), &bad);
    assert_eq!(dir_contents(&out_dir), before);
}

// ---------------------------------------------------------------------------------------------
// Flags and missing files

/// Asserts a refused `run` whose message names `needle`, and that nothing was written.
fn assert_flag_refused(flags: &[&str], needle: &str) {
    let tmp = tempdir();
    let out_dir = tmp.path().join("out");
    let mut args: Vec<OsString> = vec!["run".into(), tiny().into(), "--out".into(), out_dir.clone().into()];
    args.extend(flags.iter().map(OsString::from));
    let out = loancycle(&args).refused();
    assert!(out.stderr.starts_with("error: "), "{flags:?}: {}", out.describe());
    assert!(
        out.stderr.contains(needle),
        "{flags:?}: stderr lacks {needle:?}\n{}",
        out.describe()
    );
    assert!(!out_dir.exists(), "{flags:?}: {} was created", out_dir.display());
}

#[test]
fn zero_replications_is_refused_naming_the_flag() {
    assert_flag_refused(&["--replications", "0"], "--replications");
}

#[test]
fn zero_threads_is_refused_naming_the_flag() {
    assert_flag_refused(&["--threads", "0"], "--threads");
}

#[test]
fn non_numeric_and_attached_negative_seeds_are_refused_naming_the_flag() {
    assert_flag_refused(&["--seed=-1"], "--seed");
    assert_flag_refused(&["--seed", "abc"], "--seed");
}

#[test]
fn negative_seed_as_a_separate_word_is_refused_naming_the_flag() {
    assert_flag_refused(&["--seed", "-1"], "--seed");
}

#[test]
fn unknown_flag_is_refused_naming_the_flag() {
    assert_flag_refused(&["--replicashuns", "2"], "--replicashuns");
}

#[test]
fn missing_scenario_file_is_refused_naming_the_path() {
    let tmp = tempdir();
    let missing = tmp.path().join("no_such_scenario.toml");
    let out = loancycle([OsStr::new("check"), missing.as_os_str()]).refused();
    let line = out.one_error_line();
    assert!(line.starts_with(&format!("error: {}: ", missing.display())), "{line}");

    let out_dir = tmp.path().join("out");
    let out = loancycle([
        OsStr::new("run"),
        missing.as_os_str(),
        OsStr::new("--out"),
        out_dir.as_os_str(),
    ])
    .refused();
    let line = out.one_error_line();
    assert!(line.starts_with(&format!("error: {}: ", missing.display())), "{line}");
    assert!(!out_dir.exists());
}

// ---------------------------------------------------------------------------------------------
// demo-scenario and check

#[test]
fn demo_scenario_prints_the_baseline_file_which_checks() {
    let out = loancycle(["demo-scenario"]).ok();
    assert!(out.stderr.is_empty(), "{}", out.describe());
    let file_bytes = std::fs::read(root().join("scenarios-demo/baseline.toml")).expect("baseline file");
    assert_eq!(
        out.stdout.as_bytes(),
        file_bytes.as_slice(),
        "demo-scenario differs from scenarios-demo/baseline.toml"
    );

    let tmp = tempdir();
    let written = tmp.path().join("my_scenario.toml");
    std::fs::write(&written, &out.stdout).expect("write scenario");
    let checked = loancycle([OsStr::new("check"), written.as_os_str()]).ok();
    assert!(checked.stderr.is_empty(), "{}", checked.describe());
    assert!(
        checked
            .stdout
            .starts_with(&format!("{}: valid scenario", written.display())),
        "{}",
        checked.describe()
    );
    let expected: Vec<String> = (1..=10).map(|k| format!("group_size={k}")).collect();
    assert_eq!(listed_arms(&checked.stdout), expected, "{}", checked.describe());
}

#[test]
fn check_lists_the_arms_of_every_demo_scenario() {
    let files = toml_files(&root().join("scenarios-demo"));
    assert!(files.len() >= 2, "demo scenarios: {files:?}");
    for file in files {
        let rel = file.strip_prefix(root()).expect("inside the crate").to_path_buf();
        let out = loancycle([OsStr::new("check"), rel.as_os_str()]).ok();
        // Only warnings (arms resolving to the same model), each naming the file.
        let warning = format!("warning: {}: ", rel.display());
        assert!(
            out.stderr.lines().all(|l| l.starts_with(&warning)),
            "{}",
            out.describe()
        );
        assert!(
            out.stdout.starts_with(&format!("{}: valid scenario", rel.display())),
            "{}",
            out.describe()
        );
        let (scenario, _) = Scenario::load(&file).unwrap_or_else(|e| panic!("{e}"));
        let expected = labels(&scenario);
        assert!(!expected.is_empty());
        assert_eq!(listed_arms(&out.stdout), expected, "{}", out.describe());
        assert!(
            out.stdout.contains(&format!("{} arm(s)", expected.len())),
            "{}",
            out.describe()
        );
    }
}

#[test]
fn check_of_the_baseline_lists_group_sizes_one_to_ten() {
    let out = loancycle(["check", "scenarios-demo/baseline.toml"]).ok();
    let expected: Vec<String> = (1..=10).map(|k| format!("group_size={k}")).collect();
    assert_eq!(listed_arms(&out.stdout), expected, "{}", out.describe());
}

#[test]
fn check_of_the_tiny_scenario_lists_its_two_arms() {
    let out = loancycle([OsStr::new("check"), tiny().as_os_str()]).ok();
    assert!(out.stderr.is_empty(), "{}", out.describe());
    assert_eq!(
        listed_arms(&out.stdout),
        ["group_size=2", "group_size=4"],
        "{}",
        out.describe()
    );
}

// ---------------------------------------------------------------------------------------------
// Runs and their files

#[test]
fn run_without_a_file_runs_the_built_in_baseline_into_the_default_directory() {
    let tmp = tempdir();
    let out = loancycle_in(tmp.path(), ["run", "--replications", "2", "--quiet"]).ok();
    assert!(out.stdout.is_empty(), "--quiet printed a table\n{}", out.describe());
    assert!(
        !out.stderr.contains("built-in"),
        "--quiet still announced the demo\n{}",
        out.describe()
    );
    let dir = tmp.path().join("results");
    assert_only_outputs(&dir);

    let baseline = std::fs::read(root().join("scenarios-demo/baseline.toml")).expect("baseline file");
    let json = read_json(&dir.join("summary.json"));
    assert_eq!(json["scenario_sha256"], sha256_hex(&baseline).as_str());
    let (scenario, _) = Scenario::load(&root().join("scenarios-demo/baseline.toml")).unwrap_or_else(|e| panic!("{e}"));
    assert_eq!(json["seed"], scenario.seed());
    assert_eq!(json["arms"].as_array().map(Vec::len), Some(10));

    let (header, rows) = read_csv(&dir.join("summary.csv"));
    assert_eq!(header, SUMMARY_COLUMNS);
    let expected: Vec<String> = (1..=10).map(|k| format!("group_size={k}")).collect();
    let arms: Vec<&str> = rows.iter().map(|r| r[0].as_str()).collect();
    assert_eq!(arms, expected);
    let reps = SUMMARY_COLUMNS
        .iter()
        .position(|c| *c == "replications")
        .expect("replications column");
    assert!(
        rows.iter().all(|r| r[reps] == "2"),
        "--replications 2 not applied: {rows:?}"
    );
}

#[test]
fn run_without_a_file_says_it_runs_the_built_in_demo() {
    let tmp = tempdir();
    let dir = tmp.path().join("demo");
    let out = loancycle([
        OsStr::new("run"),
        OsStr::new("--replications"),
        OsStr::new("2"),
        OsStr::new("--out"),
        dir.as_os_str(),
    ])
    .ok();
    assert!(out.stderr.contains("built-in baseline demo"), "{}", out.describe());
    assert_only_outputs(&dir);

    // With a file, no such notice.
    let dir = tmp.path().join("tiny");
    let out = loancycle([
        OsStr::new("run"),
        tiny().as_os_str(),
        OsStr::new("--out"),
        dir.as_os_str(),
    ])
    .ok();
    assert!(!out.stderr.contains("built-in"), "{}", out.describe());
    assert_only_outputs(&dir);
}

#[test]
fn run_writes_well_formed_summary_timeseries_and_json() {
    let tmp = tempdir();
    let dir = tmp.path().join("out");
    loancycle([
        OsStr::new("run"),
        tiny().as_os_str(),
        OsStr::new("--out"),
        dir.as_os_str(),
        OsStr::new("--replications"),
        OsStr::new("2"),
        OsStr::new("--quiet"),
    ])
    .ok();
    assert_only_outputs(&dir);
    let (scenario, _) = Scenario::load(&tiny()).unwrap_or_else(|e| panic!("{e}"));
    let arm_labels = labels(&scenario);
    assert_eq!(arm_labels, ["group_size=2", "group_size=4"]);

    // summary.csv: the documented header, one row per arm in arm order, finite numbers only.
    let path = dir.join("summary.csv");
    let (header, rows) = read_csv(&path);
    assert_eq!(header, SUMMARY_COLUMNS);
    assert_eq!(rows.iter().map(|r| r[0].clone()).collect::<Vec<_>>(), arm_labels);
    assert!(rows.iter().all(|r| r.len() == SUMMARY_COLUMNS.len()));
    let size_column = SUMMARY_COLUMNS
        .iter()
        .position(|c| *c == "group_size")
        .expect("group_size column");
    let sizes: Vec<&str> = rows.iter().map(|r| r[size_column].as_str()).collect();
    assert_eq!(sizes, ["2", "4"]);
    assert_all_cells_finite(&path, &rows);
    let rate = SUMMARY_COLUMNS
        .iter()
        .position(|c| *c == "group_repayment_rate")
        .expect("rate column");
    for row in &rows {
        let v: f64 = row[rate]
            .parse()
            .unwrap_or_else(|e| panic!("group_repayment_rate {:?}: {e}", row[rate]));
        assert!((0.0..=1.0).contains(&v), "group_repayment_rate {v}");
    }

    // timeseries.csv: arms x counted cycles; cycles are numbered with the warm-up, like stress
    // windows, so they run warmup + 1 ..= warmup + cycles within each arm.
    let path = dir.join("timeseries.csv");
    let (header, rows) = read_csv(&path);
    assert_eq!(header, TIMESERIES_HEADER);
    assert_eq!(scenario.cycles(), 5);
    assert_eq!(rows.len(), arm_labels.len() * scenario.cycles() as usize);
    let keys: Vec<(String, String)> = rows.iter().map(|r| (r[0].clone(), r[1].clone())).collect();
    let expected: Vec<(String, String)> = arm_labels
        .iter()
        .flat_map(|a| {
            let first = scenario.warmup_cycles() + 1;
            (first..first + scenario.cycles()).map(move |c| (a.clone(), c.to_string()))
        })
        .collect();
    assert_eq!(keys, expected);
    assert!(rows.iter().all(|r| r.len() == TIMESERIES_HEADER.len()));
    assert_all_cells_finite(&path, &rows);

    // summary.json: parses, has the documented keys, and hashes the scenario file as read.
    let json = read_json(&dir.join("summary.json"));
    for key in ["tool", "seed", "scenario_sha256", "scenario", "arms", "caution"] {
        assert!(json.get(key).is_some(), "summary.json lacks {key:?}");
    }
    assert!(
        json["tool"].as_str().is_some_and(|t| t.starts_with("loancycle")),
        "{}",
        json["tool"]
    );
    assert_eq!(json["seed"], 4242);
    let hash = json["scenario_sha256"].as_str().expect("hash is a string");
    assert_eq!(hash.len(), 64);
    assert!(hash.bytes().all(|b| b.is_ascii_hexdigit()), "{hash}");
    let file_bytes = std::fs::read(tiny()).expect("tiny scenario");
    assert_eq!(hash, sha256_hex(&file_bytes));
    assert_eq!(json["scenario"]["name"], scenario.name());
    let json_arms: Vec<&str> = json["arms"]
        .as_array()
        .expect("arms is an array")
        .iter()
        .map(|a| a["label"].as_str().unwrap_or(""))
        .collect();
    assert_eq!(json_arms, arm_labels);
}

#[test]
fn a_second_run_needs_force_and_an_existing_file_is_not_a_directory() {
    let tmp = tempdir();
    let dir = tmp.path().join("out");
    let run = |extra: &[&str]| {
        let mut args: Vec<OsString> = vec![
            "run".into(),
            tiny().into(),
            "--out".into(),
            dir.clone().into(),
            "--quiet".into(),
        ];
        args.extend(extra.iter().map(OsString::from));
        loancycle(&args)
    };
    run(&[]).ok();
    let first = assert_only_outputs(&dir);

    let out = run(&[]).refused();
    let line = out.one_error_line();
    assert!(line.contains("--force"), "{line}");
    assert!(line.contains(&dir.display().to_string()), "{line}");
    assert_eq!(dir_contents(&dir), first, "a refused run changed the results");

    // A different seed makes the replacement visible.
    run(&["--force", "--seed", "99"]).ok();
    let second = assert_only_outputs(&dir);
    assert_ne!(
        second["summary.csv"], first["summary.csv"],
        "--force did not replace summary.csv"
    );
    assert_eq!(read_json(&dir.join("summary.json"))["seed"], 99);

    let file = tmp.path().join("not_a_directory");
    std::fs::write(&file, b"placeholder\n").expect("write file");
    for extra in [&[][..], &["--force"][..]] {
        let mut args: Vec<OsString> = vec![
            "run".into(),
            tiny().into(),
            "--out".into(),
            file.clone().into(),
            "--quiet".into(),
        ];
        args.extend(extra.iter().map(OsString::from));
        let out = loancycle(&args).refused();
        let line = out.one_error_line();
        assert!(line.contains(&file.display().to_string()), "{line}");
        assert!(line.contains("not a directory"), "{line}");
        assert_eq!(std::fs::read(&file).expect("read file"), b"placeholder\n");
    }
}

#[test]
fn results_do_not_depend_on_threads_but_do_depend_on_the_seed() {
    let tmp = tempdir();
    let run = |name: &str, extra: &[&str]| {
        let dir = tmp.path().join(name);
        let mut args: Vec<OsString> = vec![
            "run".into(),
            tiny().into(),
            "--out".into(),
            dir.clone().into(),
            "--quiet".into(),
        ];
        args.extend(extra.iter().map(OsString::from));
        loancycle(&args).ok();
        assert_only_outputs(&dir)
    };
    let one = run("one-thread", &["--threads", "1"]);
    let two = run("two-threads", &["--threads", "2"]);
    for name in OUTPUTS {
        assert!(
            one[name] == two[name],
            "{name} differs between --threads 1 and --threads 2"
        );
    }
    let again = run("one-thread-again", &["--threads", "1"]);
    assert!(again == one, "a repeated run differs");
    let reseeded = run("other-seed", &["--threads", "1", "--seed", "4243"]);
    assert!(
        reseeded["summary.csv"] != one["summary.csv"],
        "--seed did not change summary.csv"
    );
}

#[test]
fn the_caution_reaches_the_terminal_and_the_json() {
    let tmp = tempdir();
    let dir = tmp.path().join("out");
    let out = loancycle([
        OsStr::new("run"),
        tiny().as_os_str(),
        OsStr::new("--out"),
        dir.as_os_str(),
    ])
    .ok();
    let terminal = format!("{}{}", out.stdout, out.stderr);
    for phrase in ["vulnerable borrowers", "client-protection"] {
        assert!(
            terminal.contains(phrase),
            "terminal output lacks {phrase:?}\n{}",
            out.describe()
        );
    }
    assert_only_outputs(&dir);
    let json = read_json(&dir.join("summary.json"));
    let caution = json["caution"].as_str().expect("caution is a string");
    for phrase in ["vulnerable borrowers", "client-protection"] {
        assert!(
            caution.contains(phrase),
            "summary.json caution lacks {phrase:?}: {caution}"
        );
    }
}

/// A `--replications` override that would exhaust memory is refused before any work, naming the
/// flag's field, and no output directory is created.
#[test]
fn an_oversized_replication_override_is_refused_before_simulating() {
    let tmp = tempdir();
    let out_dir = tmp.path().join("results");
    let out = loancycle([
        OsStr::new("run"),
        data("cli").join("tiny.toml").as_os_str(),
        OsStr::new("--replications"),
        OsStr::new("4000000000"),
        OsStr::new("--out"),
        out_dir.as_os_str(),
    ])
    .refused();
    let line = out.one_error_line();
    assert!(
        line.contains("option --replications: 4000000000 is not allowed"),
        "{line}"
    );
    assert!(!out_dir.exists());
}

/// Header and values as users' scripts read them: a row of today's demo keeps its column names and
/// the scenario-file spelling of every policy value, and `permanent` stays a word in
/// `exclusion_cycles`.
#[test]
fn summary_rows_keep_their_column_names_and_value_spellings() {
    let tmp = tempdir();
    let dir = tmp.path().join("baseline");
    loancycle([
        OsStr::new("run"),
        OsStr::new("scenarios-demo/baseline.toml"),
        OsStr::new("--replications"),
        OsStr::new("2"),
        OsStr::new("--quiet"),
        OsStr::new("--out"),
        dir.as_os_str(),
    ])
    .ok();
    let (header, rows) = read_csv(&dir.join("summary.csv"));
    assert_eq!(header, SUMMARY_COLUMNS);
    let col = |name: &str| header.iter().position(|c| c == name).expect("column");
    let row = rows.iter().find(|r| r[0] == "group_size=5").expect("arm group_size=5");
    // The policy of scenarios-demo/baseline.toml, as written there.
    for (name, value) in [
        ("group_size", "5"),
        ("liability", "joint"),
        ("peer_cover", "0.5"),
        ("exclusion_cycles", "2"),
        ("exclusion_scope", "group"),
        ("formation", "reshuffle"),
        ("matching", "random"),
        ("replications", "2"),
    ] {
        assert_eq!(row[col(name)], value, "column {name}");
    }
    // Counts are whole numbers, rates plain decimals, intervals around their rate.
    for name in ["group_cycles", "member_loans"] {
        assert!(row[col(name)].parse::<u64>().is_ok(), "{name} = {:?}", row[col(name)]);
    }
    let number = |name: &str| -> f64 { row[col(name)].parse().unwrap_or_else(|e| panic!("{name}: {e}")) };
    for (rate, low, high, se) in [
        (
            "group_repayment_rate",
            "group_repayment_ci_low",
            "group_repayment_ci_high",
            "group_repayment_se",
        ),
        ("loss_rate", "loss_rate_ci_low", "loss_rate_ci_high", "loss_rate_se"),
    ] {
        assert!(number(low) <= number(rate) && number(rate) <= number(high), "{rate}");
        assert!(number(se) >= 0.0, "{se}");
    }
    // groups of 4 to 6 (size_slack 1): the mean over groups of (1 - q)^(own size) lies between
    let q = number("member_shortfall_rate");
    let iid = number("iid_shortfall_free");
    assert!(
        (1.0 - q).powi(6) <= iid && iid <= (1.0 - q).powi(4),
        "(1 - q)^size averaged over groups of 4 to 6 by definition"
    );
    assert_eq!(
        (row[col("min_group_size")].as_str(), row[col("max_group_size")].as_str()),
        ("4", "6")
    );

    let dir = tmp.path().join("exclusion");
    loancycle([
        OsStr::new("run"),
        OsStr::new("scenarios-demo/exclusion.toml"),
        OsStr::new("--replications"),
        OsStr::new("2"),
        OsStr::new("--quiet"),
        OsStr::new("--out"),
        dir.as_os_str(),
    ])
    .ok();
    let (header, rows) = read_csv(&dir.join("summary.csv"));
    assert_eq!(header, SUMMARY_COLUMNS);
    let exclusion = header.iter().position(|c| c == "exclusion_cycles").expect("column");
    let scope = header.iter().position(|c| c == "exclusion_scope").expect("column");
    let values: Vec<(&str, &str)> = rows
        .iter()
        .map(|r| (r[exclusion].as_str(), r[scope].as_str()))
        .collect();
    assert_eq!(values[8], ("permanent", "group"));
    assert_eq!(values[9], ("permanent", "defaulters"));
    // every group has k = 5 members here: (1 - q)^k by definition
    let col = |name: &str| header.iter().position(|c| c == name).expect("column");
    let number = |name: &str| -> f64 { rows[0][col(name)].parse().unwrap_or_else(|e| panic!("{name}: {e}")) };
    let iid = (1.0 - number("member_shortfall_rate")).powf(5.0);
    assert!(
        (number("iid_shortfall_free") - iid).abs() < 1e-12,
        "(1 - q)^k by definition"
    );
}

/// With one arm there is nothing to choose: no best-arm line, `best: null`, and differences.csv
/// holds only its header.
#[test]
fn a_single_arm_run_names_no_best_arm() {
    let tmp = tempdir();
    let text = read_text(&tiny()).replace("[sweep]\ngroup_size = [2, 4]", "");
    assert!(!text.contains("[sweep]"));
    let file = tmp.path().join("single.toml");
    std::fs::write(&file, text).expect("write scenario");
    let dir = tmp.path().join("out");
    let out = loancycle([
        OsStr::new("run"),
        file.as_os_str(),
        OsStr::new("--out"),
        dir.as_os_str(),
    ])
    .ok();
    assert!(!out.stdout.contains("best arm"), "{}", out.describe());
    assert!(!out.stdout.contains("no arm served"), "{}", out.describe());
    let json = read_json(&dir.join("summary.json"));
    assert!(
        json.get("best").is_some_and(serde_json::Value::is_null),
        "{}",
        json["best"]
    );
    assert_eq!(
        read_text(&dir.join("differences.csv")),
        "arm,baseline,metric,difference,se,ci_low,ci_high,significant,se_ratio\n"
    );
}

/// An output directory the user may not write to is refused before simulating, naming it, with
/// exit code 2. sysfs refuses new files even to root.
#[test]
fn an_unwritable_output_directory_is_refused_before_simulating() {
    let dir = Path::new("/sys/kernel");
    if !dir.is_dir() {
        return;
    }
    let out = loancycle([
        OsStr::new("run"),
        tiny().as_os_str(),
        OsStr::new("--out"),
        dir.as_os_str(),
    ])
    .refused();
    let line = out.one_error_line();
    assert!(
        line.contains("output directory /sys/kernel cannot be written to"),
        "{line}"
    );
}

/// Sends `signal` to a `run` of the baseline that would take minutes, once it has prepared its
/// output directory, and returns what it did.
fn interrupted_run(signal: &str, dir: &Path, extra: &[&str]) -> Outcome {
    let mut args: Vec<OsString> = vec![
        "run".into(),
        "scenarios-demo/baseline.toml".into(),
        "--replications".into(),
        "20000".into(),
        "--quiet".into(),
        "--out".into(),
        dir.into(),
    ];
    args.extend(extra.iter().map(OsString::from));
    let child = Command::new(env!("CARGO_BIN_EXE_loancycle"))
        .args(&args)
        .current_dir(root())
        .stdout(std::process::Stdio::piped())
        .stderr(std::process::Stdio::piped())
        .spawn()
        .expect("the loancycle binary starts");
    // The directory (or its writability probe) is prepared right before simulating; wait for it,
    // then a little more so the simulation is under way.
    let mut waited = 0;
    while !dir.is_dir() && waited < 600 {
        std::thread::sleep(std::time::Duration::from_millis(50));
        waited += 1;
    }
    std::thread::sleep(std::time::Duration::from_millis(300));
    let status = Command::new("kill")
        .args(["-s", signal, &child.id().to_string()])
        .status()
        .expect("kill runs");
    assert!(status.success(), "kill -s {signal} failed");
    let out = child.wait_with_output().expect("the run ends");
    Outcome {
        code: out.status.code(),
        stdout: String::from_utf8(out.stdout).expect("stdout is UTF-8"),
        stderr: String::from_utf8(out.stderr).expect("stderr is UTF-8"),
    }
}

/// SIGINT and SIGTERM stop a run cleanly: exit 130 and 143 (128 + the signal number), one line
/// saying what was kept, and the replications finished so far written as results marked incomplete
/// beside the checkpoint that `--resume` continues from. Earlier results replaced with --force are
/// replaced by the partial ones, never mixed with them. (Resuming is tested in tests/resume.rs.)
#[test]
fn an_interrupted_run_exits_130_or_143_and_keeps_what_it_finished() {
    let tmp = tempdir();
    for (signal, code) in [("INT", 130), ("TERM", 143)] {
        let dir = tmp.path().join(format!("fresh-{signal}"));
        let out = interrupted_run(signal, &dir, &[]);
        assert_eq!(out.code, Some(code), "{}", out.describe());
        let prefix = format!("interrupted by SIG{signal}: partial results of ");
        let suffix = format!(
            " of 20000 replications written to {0} and marked incomplete; continue with: loancycle run \
             scenarios-demo/baseline.toml --replications 20000 --out {0} --resume\n",
            dir.display()
        );
        assert!(
            out.stderr.starts_with(&prefix) && out.stderr.ends_with(&suffix),
            "{}",
            out.describe()
        );
        assert!(out.stdout.is_empty(), "{}", out.describe());
        let names: Vec<String> = dir_contents(&dir).into_keys().collect();
        let mut expected: Vec<&str> = OUTPUTS.iter().copied().chain(["checkpoint.jsonl"]).collect();
        expected.sort();
        assert_eq!(names, expected, "SIG{signal}");
        let incomplete = &read_json(&dir.join("summary.json"))["incomplete"];
        assert_eq!(incomplete["replications_asked"], 20000, "{incomplete}");
        let done = incomplete["replications_done"].as_u64().expect("a count");
        assert!(done > 0 && done < 20000, "{incomplete}");
    }

    let dir = tmp.path().join("earlier");
    loancycle([
        OsStr::new("run"),
        tiny().as_os_str(),
        OsStr::new("--out"),
        dir.as_os_str(),
        OsStr::new("--quiet"),
    ])
    .ok();
    assert!(read_json(&dir.join("summary.json")).get("incomplete").is_none());
    let out = interrupted_run("INT", &dir, &["--force"]);
    assert_eq!(out.code, Some(130), "{}", out.describe());
    let summary = read_json(&dir.join("summary.json"));
    assert_eq!(summary["incomplete"]["replications_asked"], 20000, "{}", out.describe());
    assert_eq!(summary["scenario_origin"], "scenarios-demo/baseline.toml");
}
