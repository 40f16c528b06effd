//! Theory beside every simulation: exact results of the one-factor class and the closed-form
//! optimum, per arm, and the self-check that warns when a simulation strays from an exact value.
//!
//! It lives apart from `analytic` (which knows nothing of simulations) and from `report` (which only
//! assembles), so the rule deciding when a simulated figure contradicts theory is in one place.

use crate::analytic::{normal, one_factor, optimum};
use crate::scenario::{Arm, Scenario, ShockProbability, ShockScope};
use crate::stats::summary::ArmSummary;

/// Fewest replications for the self-check: below it the between-replication standard error is too
/// unreliable to call a difference a contradiction.
pub const SELF_CHECK_MIN_REPLICATIONS: u32 = 30;

/// Two-sided family-wise level of the self-check band (99.9%, Bonferroni over the arms).
pub const SELF_CHECK_LEVEL: f64 = 0.999;

/// Closed forms computed once per scenario for the report, arm by arm: a sweep may vary any input
/// (a correlation, the income spread, a second shock's probability), so each arm is checked against
/// the class and gets its own exact value and optimum.
pub struct SimulationCompanion {
    /// Per arm: the exact group repayment, or why the arm is outside the one-factor class.
    exact: Vec<Result<f64, String>>,
    /// Per arm: the closed-form optimum of its curve.
    optimum: Vec<Option<f64>>,
    /// Arm labels, for the out-of-class summary.
    labels: Vec<String>,
}

impl SimulationCompanion {
    /// Computes what theory can say about each arm of `scenario`.
    pub fn new(scenario: &Scenario) -> Self {
        let exact = scenario
            .arms()
            .iter()
            .map(|arm| {
                let model = one_factor::class_check(arm).map_err(|e| e.reason)?;
                let p = arm.policy();
                one_factor::group_repayment(&model, p.group_size(), p.liability(), p.peer_cover())
                    .map(|r| r.group_repayment)
                    .map_err(|e| e.to_string())
            })
            .collect();
        SimulationCompanion {
            exact,
            optimum: scenario.arms().iter().map(curve_optimum).collect(),
            labels: scenario.arms().iter().map(|a| a.label().to_owned()).collect(),
        }
    }

    /// Exact per-cycle group repayment of arm `arm`, when that arm is in the one-factor class.
    pub fn group_repayment(&self, arm: usize) -> Option<f64> {
        self.exact.get(arm).and_then(|r| r.as_ref().ok()).copied()
    }

    /// Closed-form optimum x* of the curve driving arm `arm`'s first member-scope shock that has one.
    pub fn closed_form_optimum(&self, arm: usize) -> Option<f64> {
        self.optimum.get(arm).copied().flatten()
    }

    /// Why arms have no exact results: `None` when every arm has one; the reason alone when every
    /// arm is out of class for the same reason; otherwise each out-of-class arm with its reason.
    pub fn out_of_class(&self) -> Option<String> {
        let out: Vec<(&str, &str)> = self
            .exact
            .iter()
            .zip(&self.labels)
            .filter_map(|(r, label)| r.as_ref().err().map(|e| (label.as_str(), e.as_str())))
            .collect();
        let (_, first) = *out.first()?;
        if out.len() == self.exact.len() && out.iter().all(|(_, reason)| *reason == first) {
            return Some(first.to_owned());
        }
        Some(
            out.iter()
                .map(|(label, reason)| format!("arm {label}: {reason}"))
                .collect::<Vec<_>>()
                .join("; "),
        )
    }

    /// Warnings where a simulated group repayment rate lies outside the Bonferroni-adjusted 99.9%
    /// band around its exact value (only in the class and with enough replications to trust the
    /// standard error). `summaries` are the arms' figures in arm order.
    pub fn self_check(&self, scenario: &Scenario, summaries: &[ArmSummary]) -> Vec<String> {
        if scenario.replications() < SELF_CHECK_MIN_REPLICATIONS || self.exact.iter().all(Result::is_err) {
            return Vec::new();
        }
        let tail = (1.0 - SELF_CHECK_LEVEL) / (2.0 * summaries.len().max(1) as f64);
        let z = normal::inv_cdf(1.0 - tail);
        let mut warnings = Vec::new();
        for (i, (summary, arm)) in summaries.iter().zip(scenario.arms()).enumerate() {
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
                    arm.label(),
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

/// x* of the curve of the arm's first member-scope shock driven by a group-size curve, scaled by the
/// arm's risk multiplier when that is fixed.
fn curve_optimum(arm: &Arm) -> Option<f64> {
    let curve = arm.shocks().iter().find_map(|s| match (s.scope(), s.probability()) {
        (ShockScope::Member, ShockProbability::Curve(c)) => Some(c),
        _ => None,
    })?;
    match arm.risk().fixed_value() {
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
        wrong[1] = wrong[1].clone().map(|g| g - 0.05);
        let fake = SimulationCompanion { exact: wrong, ..truth };
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

    /// A sweep of the shock's correlation gives each arm its own exact value: the same value as the
    /// scenario written with that correlation and no sweep (an independent validation of each arm).
    #[test]
    fn a_correlation_sweep_gets_exact_values_per_arm() {
        let swept = IN_CLASS.replace(
            "group_size = [2, 5]",
            "\"shock.illness.village_correlation\" = [0.0, 0.3]",
        );
        let s = Scenario::from_toml_str(&swept, "inline").unwrap();
        let c = SimulationCompanion::new(&s);
        assert!(c.out_of_class().is_none());
        for (i, rho) in ["0.0", "0.3"].iter().enumerate() {
            let alone = IN_CLASS
                .replace("village_correlation = 0.1", &format!("village_correlation = {rho}"))
                .replace("[sweep]\n        group_size = [2, 5]", "");
            let one = Scenario::from_toml_str(&alone, "inline").unwrap();
            assert_eq!(one.arms().len(), 1);
            let expected = SimulationCompanion::new(&one).group_repayment(0).unwrap();
            assert_eq!(c.group_repayment(i), Some(expected), "arm {i}");
        }
        assert_ne!(c.group_repayment(0), c.group_repayment(1));
    }
}
