//! The finished results of a run, assembled once so every writer (CSV, JSON, terminal) prints the
//! same figures and computes nothing of its own.

use crate::companion::SimulationCompanion;
use crate::group_size::GroupSizeRow;
use crate::run::RunResults;
use crate::scenario::{Arm, Scenario};
use crate::stats::ReplicationList;
use crate::stats::compare::{self, ComparedArm};
use crate::stats::select::{self, Selection};
use crate::stats::summary::{self, ArmSummary, CyclePoint};
use serde::Serialize;
use sha2::{Digest, Sha256};

/// The caution printed with every report (see [`crate::CAUTION`]).
pub use crate::CAUTION;
/// The comparisons live in `stats::compare`; re-exported because they are part of the report.
pub use crate::stats::compare::{ArmDifference, BestArm};

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
    /// Closed-form optimum x* of the curve driving a member-scope shock, if any.
    pub closed_form_optimum: Option<f64>,
    /// Means over replications per counted cycle.
    pub time_series: Vec<CyclePoint>,
    /// Whether the arm is on the efficient frontier of loss rate against served share (no other arm
    /// loses at most as much and serves at least as many, one of the two strictly); `None` when the
    /// arm lacks either figure.
    pub on_frontier: Option<bool>,
    /// The year, money and capital (`[finance]`; a year is one cycle without it).
    pub finance: crate::finance::ArmFinance,
    /// The arm's replications, in replication order, for replications.csv (not summary.json):
    /// shares the run's list, on disk for a long run.
    #[serde(skip)]
    pub replications: ReplicationList,
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
    /// The best arm, when there are at least two arms and one of them served a group.
    pub best: Option<BestArm>,
    /// The end-of-run choice: best by group repayment, no constraint, and the arms not worse
    /// (`None` with a single arm).
    pub selection: Option<Selection>,
    /// The best group size by simulation, closed form, exact value and loss, per combination of
    /// the other swept keys, when group size is swept.
    pub group_size: Option<Vec<GroupSizeRow>>,
    /// The arm the differences are taken against (the first unless `--baseline` names another).
    pub baseline: Option<String>,
    /// Every other arm against the baseline, paired by replication (common random numbers make
    /// these intervals much narrower than the difference of two separate intervals).
    pub differences: Vec<ArmDifference>,
    /// Self-check findings and other notes the user should see.
    pub warnings: Vec<String>,
    /// The planning caution.
    pub caution: String,
    /// Set when the run was stopped before every replication was simulated: these are partial
    /// results. Absent from a finished run's summary.json.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub incomplete: Option<Incomplete>,
}

/// What a stopped run finished, recorded in its partial results.
#[derive(Debug, Clone, Serialize)]
pub struct Incomplete {
    /// Replications simulated (of every arm), from the first.
    pub replications_done: u32,
    /// Replications the run was asked for.
    pub replications_asked: u32,
    /// The checkpoint `run --resume` continues from.
    pub checkpoint: String,
}

/// SHA-256 of text, as lower-case hex.
pub fn sha256_hex(text: &str) -> String {
    Sha256::digest(text.as_bytes())
        .iter()
        .map(|b| format!("{b:02x}"))
        .collect()
}

/// Assembles the report of a finished run, with differences against the first arm.
pub fn build(scenario: &Scenario, scenario_text: &str, origin: &str, results: &RunResults) -> RunReport {
    build_with_baseline(scenario, scenario_text, origin, results, 0)
}

/// Assembles the report of a finished run, with differences against arm `baseline` (0-based; an
/// index past the last arm gives no differences).
pub fn build_with_baseline(
    scenario: &Scenario,
    scenario_text: &str,
    origin: &str,
    results: &RunResults,
    baseline: usize,
) -> RunReport {
    let analytic = SimulationCompanion::new(scenario);
    let summaries: Vec<ArmSummary> = scenario
        .arms()
        .iter()
        .zip(&results.arms)
        .map(|(arm, tally)| summary::summarize_arm(tally, arm.policy().group_size()))
        .collect();
    let warnings = analytic.self_check(scenario, &summaries);
    let compared: Vec<ComparedArm> = scenario
        .arms()
        .iter()
        .zip(&results.arms)
        .map(|(arm, tally)| ComparedArm {
            label: arm.label(),
            group_size: arm.policy().group_size(),
            tally,
        })
        .collect();
    let best = compare::best_arm(&compared);
    let selection = (compared.len() > 1)
        .then(|| select::select(&compared, compare::GROUP_REPAYMENT, compare::Direction::Maximize, &[]));
    let frontier = on_frontier(
        &summaries
            .iter()
            .map(|s| s.loss_rate.map(|l| l.rate).zip(s.served_share))
            .collect::<Vec<_>>(),
    );
    let differences = compare::differences(&compared, baseline);
    let group_size = crate::group_size::table(
        scenario,
        &compared,
        &(0..compared.len())
            .map(|i| analytic.group_repayment(i))
            .collect::<Vec<_>>(),
        &summaries
            .iter()
            .map(|s| s.loss_rate.map(|l| l.rate))
            .collect::<Vec<_>>(),
    );
    let laws = exact_laws(scenario);
    let arms: Vec<ArmReport> = scenario
        .arms()
        .iter()
        .zip(&results.arms)
        .zip(summaries)
        .enumerate()
        .map(|(i, ((arm, tally), summary))| ArmReport {
            finance: crate::finance::arm_finance(
                scenario,
                arm,
                tally,
                laws[i].portfolio_default_law.as_ref(),
                laws[i].out_of_class.clone(),
            ),
            on_frontier: frontier[i],
            arm: arm.clone(),
            summary,
            analytic_group_repayment: analytic.group_repayment(i),
            closed_form_optimum: analytic.closed_form_optimum(i),
            time_series: summary::time_series(tally, scenario),
            replications: tally.replications.clone(),
        })
        .collect();
    RunReport {
        tool: format!("loancycle {}", env!("CARGO_PKG_VERSION")),
        scenario_sha256: sha256_hex(scenario_text),
        scenario_origin: origin.to_string(),
        seed: scenario.seed(),
        scenario: scenario.clone(),
        arms,
        analytic_out_of_class: analytic.out_of_class(),
        best,
        selection,
        group_size,
        baseline: scenario.arms().get(baseline).map(|a| a.label().to_string()),
        differences,
        warnings,
        caution: CAUTION.to_string(),
        incomplete: None,
    }
}

/// Most arms for which a run computes the exact portfolio law beside its capital figures (each law
/// can take seconds for a large portfolio; `analyze` computes it for every arm).
pub const MAX_EXACT_LAW_ARMS: usize = 64;

/// Each arm's exact portfolio laws, or why there are none; arms are independent, so in parallel.
fn exact_laws(scenario: &Scenario) -> Vec<crate::analytic::portfolio_law::ArmPortfolioLaws> {
    use rayon::prelude::*;
    let arms = scenario.arms().len();
    if arms > MAX_EXACT_LAW_ARMS {
        return scenario
            .arms()
            .iter()
            .map(|a| crate::analytic::portfolio_law::ArmPortfolioLaws {
                label: a.label().to_owned(),
                portfolio_default_law: None,
                stress_laws: Vec::new(),
                out_of_class: Some(format!(
                    "a run computes the exact law for at most {MAX_EXACT_LAW_ARMS} arms; `analyze` gives it for all"
                )),
            })
            .collect();
    }
    (0..arms)
        .into_par_iter()
        .map(|a| crate::analytic::portfolio_law::arm_laws(scenario, a))
        .collect()
}

/// For each arm's (loss rate, served share), whether no other arm has a loss rate at most as high
/// and a served share at least as high, with one of the two strictly better. `None` where an arm
/// lacks either figure; such arms dominate nothing.
pub fn on_frontier(points: &[Option<(f64, f64)>]) -> Vec<Option<bool>> {
    points
        .iter()
        .map(|p| {
            p.map(|(loss, served)| {
                !points
                    .iter()
                    .flatten()
                    .any(|&(l, s)| l <= loss && s >= served && (l < loss || s > served))
            })
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_frontier_keeps_arms_no_other_arm_beats_on_both_figures() {
        let points = [
            Some((0.02, 0.80)), // frontier: lowest loss
            Some((0.03, 0.90)), // frontier: serves more
            Some((0.03, 0.85)), // beaten by the arm above (same loss, serves less)
            Some((0.05, 0.90)), // beaten: loses more for the same service
            Some((0.02, 0.80)), // a copy of the first: neither is strictly better, both stay
            None,
        ];
        assert_eq!(
            on_frontier(&points),
            [Some(true), Some(true), Some(false), Some(false), Some(true), None]
        );
    }
}
