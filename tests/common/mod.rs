//! Helpers shared by the statistical integration tests.
#![allow(dead_code)]

use loancycle::run::{self, RunOptions, RunResults};
use loancycle::scenario::Scenario;
use loancycle::stats::summary::{self, ArmSummary};
use loancycle::stats::tolerance::STANDARD_ERRORS;

/// Parses and validates a scenario written inline in a test.
pub fn scenario(text: &str) -> Scenario {
    Scenario::from_toml_str(text, "inline test scenario").unwrap_or_else(|e| panic!("test scenario invalid: {e}"))
}

/// Simulates on every core.
pub fn simulate(s: &Scenario) -> RunResults {
    // the law tests read the per-cycle records, which a run drops unless asked to keep them
    let options = RunOptions {
        keep_cycle_records: true,
        ..Default::default()
    };
    run::simulate(s, options, &mut |_| {}).expect("simulation runs")
}

/// Simulates on `threads` worker threads, keeping only what `run` keeps (no per-cycle records).
pub fn simulate_on(s: &Scenario, threads: usize) -> RunResults {
    let options = RunOptions {
        threads: Some(threads),
        ..Default::default()
    };
    run::simulate(s, options, &mut |_| {}).expect("simulation runs")
}

/// Summary of arm `arm`.
pub fn arm_summary(s: &Scenario, results: &RunResults, arm: usize) -> ArmSummary {
    summary::summarize_arm(&results.arms[arm], s.arms()[arm].policy().group_size())
}

/// Asserts |estimate - reference| <= STANDARD_ERRORS * se, and that the check is sharp: the standard
/// error must be below `max_se`, so the tolerance cannot swallow a real discrepancy.
pub fn assert_within(label: &str, estimate: f64, se: f64, reference: f64, max_se: f64) {
    assert!(se.is_finite() && se > 0.0, "{label}: standard error {se} unusable");
    assert!(
        se <= max_se,
        "{label}: standard error {se} too large for a sharp check (max {max_se})"
    );
    let z = (estimate - reference) / se;
    assert!(
        z.abs() <= STANDARD_ERRORS,
        "{label}: estimate {estimate} vs reference {reference}: {z:.2} standard errors (se {se})"
    );
}

/// Pooled ratio and its delta-method standard error of a per-replication (numerator, denominator).
pub fn replication_ratio(
    results: &RunResults,
    arm: usize,
    f: impl Fn(&loancycle::stats::ReplicationTally) -> (f64, f64),
) -> (f64, f64) {
    let r =
        loancycle::stats::estimate::ratio(results.arms[arm].replications.iter().map(|r| f(&r))).expect("denominator");
    (r.rate, r.standard_error.expect("at least two replications"))
}
