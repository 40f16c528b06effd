//! The finished results of a run, assembled once so every writer (CSV, JSON, terminal) prints the
//! same figures and computes nothing of its own.

use crate::run::RunResults;
use crate::scenario::{Arm, Scenario};
use crate::stats::estimate;
use crate::stats::summary::{self, ArmSummary, CyclePoint};
use serde::Serialize;
use sha2::{Digest, Sha256};

/// The caution printed with every report (see [`crate::CAUTION`]).
pub use crate::CAUTION;

/// One arm's results.
#[derive(Debug, Clone, Serialize)]
pub struct ArmReport {
    /// The arm's label and policy.
    #[serde(flatten)]
    pub arm: Arm,
    /// Every simulated figure.
    pub summary: ArmSummary,
    /// Exact per-cycle group repayment of the one-factor class, when the scenario is in it.
    pub analytic_group_repayment: Option<f64>,
    /// group_repayment_rate / iid_group_repayment.
    pub dependence_ratio: Option<f64>,
    /// Closed-form optimum x* of the curve driving a member-scope shock, if any.
    pub closed_form_optimum: Option<f64>,
    /// Means over replications per counted cycle.
    pub time_series: Vec<CyclePoint>,
}

/// The best arm by group repayment and the arms not significantly worse.
#[derive(Debug, Clone, Serialize)]
pub struct BestArm {
    /// Index of the arm with the highest group repayment rate.
    pub arm_index: usize,
    /// Its label.
    pub label: String,
    /// Its group size.
    pub group_size: u32,
    /// Labels of arms whose paired per-replication difference to the best is not significant at
    /// the 5% level, Bonferroni-adjusted over the other arms (the best arm included).
    pub confidence_set: Vec<String>,
    /// Group sizes of the arms in the confidence set, ascending and without repeats.
    pub confidence_set_group_sizes: Vec<u32>,
}

/// One arm's difference from the reference arm on one figure, paired by replication.
#[derive(Debug, Clone, Serialize)]
pub struct ArmDifference {
    /// The arm compared.
    pub arm: String,
    /// The reference arm (the first arm of the scenario).
    pub reference: String,
    /// Which figure: group_repayment_rate, loss_rate, net_yield, served_share or excluded_share.
    pub metric: &'static str,
    /// arm's figure minus the reference's.
    pub difference: f64,
    /// Delta-method standard error of the paired difference.
    pub standard_error: Option<f64>,
    /// 95% interval, difference -/+ 1.959964 SE (not clamped).
    pub ci_low: Option<f64>,
    /// See `ci_low`.
    pub ci_high: Option<f64>,
}

/// Everything a run reports.
#[derive(Debug, Clone, Serialize)]
pub struct RunReport {
    /// Tool name and version.
    pub tool: String,
    /// SHA-256 of the scenario text as read.
    pub scenario_sha256: String,
    /// Where the scenario came from (a file path, or the built-in demo).
    pub scenario_origin: String,
    /// The master seed in force.
    pub seed: u64,
    /// The resolved scenario (defaults filled in, overrides applied).
    pub scenario: Scenario,
    /// One entry per arm, in arm order.
    pub arms: Vec<ArmReport>,
    /// Why exact one-factor values are absent (the feature that takes the scenario out of the class).
    pub analytic_out_of_class: Option<String>,
    /// The best arm, when at least one arm served a group.
    pub best: Option<BestArm>,
    /// Every other arm against the first, paired by replication (common random numbers make
    /// these intervals much narrower than the difference of two separate intervals).
    pub differences: Vec<ArmDifference>,
    /// Self-check findings and other notes the user should see.
    pub warnings: Vec<String>,
    /// The planning caution.
    pub caution: String,
}

/// SHA-256 of text, as lower-case hex.
pub fn sha256_hex(text: &str) -> String {
    Sha256::digest(text.as_bytes())
        .iter()
        .map(|b| format!("{b:02x}"))
        .collect()
}

/// Assembles the report of a finished run.
pub fn build(scenario: &Scenario, scenario_text: &str, origin: &str, results: &RunResults) -> RunReport {
    let analytic = crate::companion::SimulationCompanion::new(scenario);
    let arms: Vec<ArmReport> = scenario
        .arms
        .iter()
        .zip(&results.arms)
        .enumerate()
        .map(|(i, (arm, tally))| {
            let summary = summary::summarize_arm(tally, arm.policy.group_size);
            let dependence_ratio = match (summary.group_repayment, summary.iid_group_repayment) {
                (Some(g), Some(iid)) if iid > 0.0 => Some(g.rate / iid),
                _ => None,
            };
            ArmReport {
                arm: arm.clone(),
                analytic_group_repayment: analytic.group_repayment(i),
                closed_form_optimum: analytic.closed_form_optimum(),
                dependence_ratio,
                time_series: summary::time_series(tally, scenario),
                summary,
            }
        })
        .collect();
    let best = best_arm(scenario, results, &arms);
    let warnings = analytic.self_check(scenario, &arms);
    RunReport {
        tool: format!("loancycle {}", env!("CARGO_PKG_VERSION")),
        scenario_sha256: sha256_hex(scenario_text),
        scenario_origin: origin.to_string(),
        seed: scenario.seed,
        scenario: scenario.clone(),
        arms,
        analytic_out_of_class: analytic.out_of_class().map(str::to_string),
        best,
        differences: paired_differences(scenario, results),
        warnings,
        caution: CAUTION.to_string(),
    }
}

/// Per-replication group repayment rates of an arm (NaN where the replication served no group).
fn replication_rates(results: &RunResults, arm: usize) -> Vec<f64> {
    results.arms[arm]
        .replications
        .iter()
        .map(|r| {
            if r.group_cycles > 0 {
                r.groups_repaid as f64 / r.group_cycles as f64
            } else {
                f64::NAN
            }
        })
        .collect()
}

fn best_arm(scenario: &Scenario, results: &RunResults, arms: &[ArmReport]) -> Option<BestArm> {
    let (best_index, _) = arms
        .iter()
        .enumerate()
        .filter_map(|(i, a)| a.summary.group_repayment.map(|g| (i, g.rate)))
        .fold(None, |acc: Option<(usize, f64)>, (i, r)| match acc {
            Some((_, br)) if br >= r => acc,
            _ => Some((i, r)),
        })?;
    let best_rates = replication_rates(results, best_index);
    let others = arms.len().saturating_sub(1).max(1);
    // one-sided test at 5%, Bonferroni over the other arms
    let z = crate::analytic::normal::inv_cdf(1.0 - 0.05 / others as f64);
    let mut confidence_set = Vec::new();
    let mut sizes = Vec::new();
    for (i, arm) in arms.iter().enumerate() {
        let keep = if i == best_index {
            true
        } else if arm.summary.group_repayment.is_none() {
            false
        } else {
            let rates = replication_rates(results, i);
            let diffs: Vec<f64> = best_rates
                .iter()
                .zip(&rates)
                .filter(|(a, b)| a.is_finite() && b.is_finite())
                .map(|(a, b)| a - b)
                .collect();
            match estimate::mean_and_se(&diffs) {
                Some((mean, Some(se))) if se > 0.0 => mean <= z * se,
                Some((mean, _)) => mean <= 0.0,
                None => false,
            }
        };
        if keep {
            confidence_set.push(arm.arm.label.clone());
            sizes.push(arm.arm.policy.group_size);
        }
    }
    sizes.sort_unstable();
    sizes.dedup();
    Some(BestArm {
        arm_index: best_index,
        label: scenario.arms[best_index].label.clone(),
        group_size: scenario.arms[best_index].policy.group_size,
        confidence_set,
        confidence_set_group_sizes: sizes,
    })
}

/// The figures compared between arms, as (name, per-replication numerator and denominator).
type Metric = (&'static str, fn(&crate::stats::ReplicationTally) -> (f64, f64));

const COMPARED: [Metric; 5] = [
    ("group_repayment_rate", |r| {
        (r.groups_repaid as f64, r.group_cycles as f64)
    }),
    ("loss_rate", |r| (r.loss, r.disbursed)),
    ("net_yield", |r| (r.collected + r.recovered - r.disbursed, r.disbursed)),
    ("served_share", |r| {
        (r.served_slot_cycles as f64, r.slot_cycles() as f64)
    }),
    ("excluded_share", |r| {
        (r.excluded_slot_cycles as f64, r.slot_cycles() as f64)
    }),
];

fn paired_differences(scenario: &Scenario, results: &RunResults) -> Vec<ArmDifference> {
    let Some(reference) = results.arms.first() else {
        return Vec::new();
    };
    let mut out = Vec::new();
    for (arm, tally) in scenario.arms.iter().zip(&results.arms).skip(1) {
        for (metric, f) in COMPARED {
            let a: Vec<(f64, f64)> = tally.replications.iter().map(f).collect();
            let b: Vec<(f64, f64)> = reference.replications.iter().map(f).collect();
            if let Some(d) = estimate::paired_ratio_difference(&a, &b) {
                out.push(ArmDifference {
                    arm: arm.label.clone(),
                    reference: scenario.arms[0].label.clone(),
                    metric,
                    difference: d.rate,
                    standard_error: d.standard_error,
                    ci_low: d.ci_low(),
                    ci_high: d.ci_high(),
                });
            }
        }
    }
    out
}
