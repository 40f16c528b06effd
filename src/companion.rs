//! Theory beside every simulation: exact results of the one-factor class and the closed-form
//! optimum, per arm, and the self-check that warns when a simulation strays from an exact value.
//!
//! It lives apart from `analytic` (which knows nothing of simulations) and from `report` (which only
//! assembles), so the rule deciding when a simulated figure contradicts theory is in one place.

use crate::analytic::{normal, one_factor, optimum};
use crate::scenario::{Scenario, ShockProbability, ShockScope};
use crate::stats::summary::ArmSummary;

/// Fewest replications for the self-check: below it the between-replication standard error is too
/// unreliable to call a difference a contradiction.
pub const SELF_CHECK_MIN_REPLICATIONS: u32 = 30;

/// Two-sided family-wise level of the self-check band (99.9%, Bonferroni over the arms).
pub const SELF_CHECK_LEVEL: f64 = 0.999;

/// Closed forms computed once per scenario for the report.
pub struct SimulationCompanion {
    exact: Vec<Option<f64>>,
    optimum: Option<f64>,
    out_of_class: Option<String>,
}

impl SimulationCompanion {
    /// Computes what theory can say about each arm of `scenario`.
    pub fn new(scenario: &Scenario) -> Self {
        let (exact, out_of_class) = match one_factor::class_check(scenario) {
            Ok(model) => (
                scenario
                    .arms
                    .iter()
                    .map(|arm| {
                        let p = &arm.policy;
                        one_factor::group_repayment(&model, p.group_size, p.liability, p.peer_cover)
                            .ok()
                            .map(|r| r.group_repayment)
                    })
                    .collect(),
                None,
            ),
            Err(reason) => (vec![None; scenario.arms.len()], Some(reason.reason)),
        };
        SimulationCompanion {
            exact,
            optimum: curve_optimum(scenario),
            out_of_class,
        }
    }

    /// Exact per-cycle group repayment of arm `arm`, when the scenario is in the one-factor class.
    pub fn group_repayment(&self, arm: usize) -> Option<f64> {
        self.exact.get(arm).copied().flatten()
    }

    /// Closed-form optimum x* of the curve driving the first member-scope shock that has one.
    pub fn closed_form_optimum(&self) -> Option<f64> {
        self.optimum
    }

    /// Why the scenario has no exact results, if it has none.
    pub fn out_of_class(&self) -> Option<&str> {
        self.out_of_class.as_deref()
    }

    /// Warnings where a simulated group repayment rate lies outside the Bonferroni-adjusted 99.9%
    /// band around its exact value (only in the class and with enough replications to trust the
    /// standard error). `summaries` are the arms' figures in arm order.
    pub fn self_check(&self, scenario: &Scenario, summaries: &[ArmSummary]) -> Vec<String> {
        if scenario.replications < SELF_CHECK_MIN_REPLICATIONS || self.exact.iter().all(Option::is_none) {
            return Vec::new();
        }
        let tail = (1.0 - SELF_CHECK_LEVEL) / (2.0 * summaries.len().max(1) as f64);
        let z = normal::inv_cdf(1.0 - tail);
        let mut warnings = Vec::new();
        for (i, (summary, arm)) in summaries.iter().zip(&scenario.arms).enumerate() {
            let (Some(exact), Some(sim)) = (self.group_repayment(i), summary.group_repayment) else {
                continue;
            };
            let Some(se) = sim.standard_error else { continue };
            let distance = (sim.rate - exact).abs();
            // A zero standard error (every replication identical) makes any difference a contradiction.
            if distance > z * se && distance > 1e-12 {
                warnings.push(format!(
                    "self-check: arm {} simulated group repayment {:.6} differs from the exact {:.6} by {:.1} standard \
                     errors (band: {:.2}, 99.9% Bonferroni over {} arms)",
                    arm.label,
                    sim.rate,
                    exact,
                    if se > 0.0 { distance / se } else { f64::INFINITY },
                    z,
                    summaries.len()
                ));
            }
        }
        warnings
    }
}

/// x* of the curve of the first member-scope shock driven by a group-size curve, scaled by the risk
/// multiplier when that is fixed.
fn curve_optimum(scenario: &Scenario) -> Option<f64> {
    if scenario.model_swept().is_some() {
        return None;
    }
    let curve = scenario.shocks.iter().find_map(|s| match (&s.scope, &s.probability) {
        (ShockScope::Member, ShockProbability::Curve(c)) => Some(c),
        _ => None,
    })?;
    match scenario.risk.fixed_value() {
        Some(u) => optimum::closed_form_optimum_scaled(curve, u),
        None => optimum::closed_form_optimum(curve),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::run::{RunOptions, simulate};
    use crate::stats::summary::summarize_arm;

    const IN_CLASS: &str = r#"
        seed = 8
        replications = 40
        cycles = 10
        [portfolio]
        borrowers = 300
        villages = 3
        [loan]
        principal = 100
        [borrowers]
        income = 1.4
        [[shock]]
        name = "illness"
        scope = "member"
        probability = 0.1
        village_correlation = 0.1
        [policy]
        peer_cover = 1.0
        [sweep]
        group_size = [2, 5]
    "#;

    /// The in-class scenario, its simulated summaries and its companion.
    fn simulated() -> (Scenario, Vec<ArmSummary>, SimulationCompanion) {
        let s = Scenario::from_toml_str(IN_CLASS, "inline").unwrap();
        let results = simulate(&s, RunOptions::default(), &mut |_| {}).unwrap();
        let summaries = s
            .arms
            .iter()
            .zip(&results.arms)
            .map(|(a, t)| summarize_arm(t, a.policy.group_size))
            .collect();
        let companion = SimulationCompanion::new(&s);
        (s, summaries, companion)
    }

    #[test]
    fn exact_values_agree_with_the_simulation_without_warnings() {
        let (s, summaries, companion) = simulated();
        assert!((0..s.arms.len()).all(|i| companion.group_repayment(i).is_some()));
        let warnings = companion.self_check(&s, &summaries);
        assert!(warnings.is_empty(), "{warnings:?}");
    }

    #[test]
    fn a_wrong_exact_value_raises_a_self_check_warning() {
        let (s, summaries, truth) = simulated();
        let mut wrong = truth.exact.clone();
        wrong[1] = wrong[1].map(|g| g - 0.05);
        let fake = SimulationCompanion {
            exact: wrong,
            optimum: None,
            out_of_class: None,
        };
        let warnings = fake.self_check(&s, &summaries);
        assert_eq!(warnings.len(), 1, "{warnings:?}");
        assert!(warnings[0].contains("group_size=5"));
    }

    #[test]
    fn out_of_class_scenarios_say_why() {
        let text = IN_CLASS.replace("income = 1.4", "income = { kind = \"gamma\", mean = 1.4, cv = 0.2 }");
        let s = Scenario::from_toml_str(&text, "inline").unwrap();
        let c = SimulationCompanion::new(&s);
        assert!(c.group_repayment(0).is_none());
        assert!(c.out_of_class().unwrap().contains("borrowers.income"));
    }
}
