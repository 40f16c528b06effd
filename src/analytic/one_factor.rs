//! Exact per-cycle group repayment for the one-factor class of scenarios.
//!
//! When every member has the same fixed income and risk and one member-scope shock of fixed severity
//! is the only randomness, the members of a group are exchangeable and conditionally independent given
//! the common factor, so the law of the number hit is a binomial mixture over that factor. The
//! engine's repayment rules then turn into a set of hit counts, and group repayment is an integral a
//! quadrature evaluates to ~1e-10: a fixed point the simulation can be tested against, and a planning
//! figure that carries no Monte Carlo error.

use super::quadrature::{hermite_until_stable, kronrod_adaptive};
use super::tolerance::QUADRATURE_TARGET;
use super::{AnalyticError, bad, check_correlation, check_probability, normal, optimum};
use crate::curve::GroupSizeCurve;
use crate::engine::settlement::{self, GroupPosition};
use crate::maths::binomial_pmf_into;
use crate::scenario::{Arm, Liability, Scenario, ShockProbability, ShockScope};
use serde::Serialize;

/// Largest group size whose hit-count law is computed exactly: the law has k + 1 entries at every
/// quadrature node, and beyond this the cost outgrows any use (simulate instead).
pub const MAX_EXACT_GROUP_SIZE: u32 = 10_000;

/// Factor range integrated when the adaptive rule is used: the normal density is below 1e-300 beyond.
const FACTOR_RANGE: f64 = 40.0;

/// Why a scenario lies outside the one-factor class, naming the feature that takes it there.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, thiserror::Error)]
#[error("{reason}")]
pub struct OutOfClass {
    /// For example "borrowers.income is a lognormal distribution, not fixed".
    pub reason: String,
}

impl OutOfClass {
    fn new(reason: impl Into<String>) -> Self {
        OutOfClass { reason: reason.into() }
    }
}

/// A scenario of the one-factor class, reduced to the numbers exact repayment depends on.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct OneFactorModel {
    /// The shock's name.
    pub shock_name: String,
    /// Amount due D per member per cycle.
    pub amount_due: f64,
    /// Fixed income ratio w (income / amount due).
    pub income_ratio: f64,
    /// Fixed risk multiplier u.
    pub risk: f64,
    /// Fixed severity s: the share of income lost when hit.
    pub severity: f64,
    /// The shock's probability, fixed or a group-size curve.
    pub probability: ShockProbability,
    /// Village factor loading.
    pub village_correlation: f64,
    /// Portfolio factor loading.
    pub portfolio_correlation: f64,
}

impl OneFactorModel {
    /// rho = village + portfolio correlation: the factor a group's members share, assuming (as the
    /// class does) that a group's members live in one village.
    pub fn rho(&self) -> f64 {
        self.village_correlation + self.portfolio_correlation
    }

    /// The per-cycle hit probability at group size k: min(1, u * phi(k)) or min(1, u * p).
    pub fn hit_probability(&self, group_size: u32) -> Result<f64, AnalyticError> {
        let base = match &self.probability {
            ShockProbability::Fixed(p) => *p,
            ShockProbability::Curve(c) => c.at(group_size).ok_or_else(|| {
                bad(
                    "group size",
                    group_size,
                    format!("a size where the curve is defined: {}", c.domain_text()),
                )
            })?,
        };
        check_probability("shock probability", base)?;
        if !(self.risk.is_finite() && self.risk >= 0.0) {
            return Err(bad("risk", self.risk, "a finite multiplier >= 0"));
        }
        Ok((self.risk * base).min(1.0))
    }

    /// The closed-form optimum of the class: the curve's x* for min(1, u phi); a fixed probability
    /// acts as a constant curve, whose best group is the smallest. `None` when there is no finite one.
    pub fn class_optimum(&self) -> Option<f64> {
        let curve = match &self.probability {
            ShockProbability::Fixed(p) => GroupSizeCurve::constant(*p).ok()?,
            ShockProbability::Curve(c) => c.clone(),
        };
        optimum::closed_form_optimum_scaled(&curve, self.risk)
    }
}

/// Checks that a scenario is in the one-factor class and extracts its model. The class: fixed income,
/// fixed risk, exactly one shock, of member scope, with fixed severity and no stress window; any
/// correlations, curve, liability and peer cover; no `[behaviour]`, loan growth or income growth.
pub fn class_check(arm: &Arm) -> Result<OneFactorModel, OutOfClass> {
    // Walking away and growing loans or incomes make a member's position depend on her history and
    // choices, not on the cycle's hits alone, which is all the exact class integrates over.
    if let Some(reason) = arm.dynamic_reason() {
        return Err(OutOfClass::new(reason));
    }
    let income = arm.income().fixed_value().ok_or_else(|| {
        OutOfClass::new(format!(
            "borrowers.income is a {} distribution, not fixed",
            arm.income().kind_name()
        ))
    })?;
    let risk = arm.risk().fixed_value().ok_or_else(|| {
        OutOfClass::new(format!(
            "borrowers.risk is a {} distribution, not fixed",
            arm.risk().kind_name()
        ))
    })?;
    let shock = match arm.shocks() {
        [] => {
            return Err(OutOfClass::new(
                "the scenario has no shock; the class needs exactly one member-scope shock",
            ));
        }
        [only] => only,
        [_, second, ..] => {
            return Err(OutOfClass::new(format!(
                "shock[1] '{}' is a second shock",
                second.name()
            )));
        }
    };
    if shock.scope() != ShockScope::Member {
        let scope = match shock.scope() {
            ShockScope::Member => "member",
            ShockScope::Group => "group",
            ShockScope::Village => "village",
            ShockScope::Portfolio => "portfolio",
        };
        return Err(OutOfClass::new(format!(
            "shock[0] '{}' has {scope} scope, not member scope",
            shock.name()
        )));
    }
    let severity = shock.severity().fixed_value().ok_or_else(|| {
        OutOfClass::new(format!(
            "shock[0] '{}' severity is a {} distribution, not fixed",
            shock.name(),
            shock.severity().kind_name()
        ))
    })?;
    if let Some(w) = shock.stress().first() {
        return Err(OutOfClass::new(format!(
            "shock[0] '{}' has a stress window (cycles {}..={})",
            shock.name(),
            w.from(),
            w.to()
        )));
    }
    // With sizes in a range, how many groups of each size form depends on how many members are
    // eligible each cycle (exclusion, dropout): no closed form gives the weights, so such arms are
    // outside the class rather than given a value weighted by simulated shares.
    if arm.policy().sizes_vary() {
        let p = arm.policy();
        return Err(OutOfClass::new(format!(
            "groups of {} to {} members (policy.min_group_size, max_group_size); exact values \
             assume every group has policy.group_size members",
            p.min_group_size(),
            p.max_group_size()
        )));
    }
    Ok(OneFactorModel {
        shock_name: shock.name().to_owned(),
        amount_due: arm.amount_due(),
        income_ratio: income,
        risk,
        severity,
        probability: shock.probability().clone(),
        village_correlation: shock.village_correlation(),
        portfolio_correlation: shock.portfolio_correlation(),
    })
}

/// Exact per-cycle results for one group size and policy.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct OneFactorResult {
    /// Group size k.
    pub group_size: u32,
    /// Liability rule.
    pub liability: Liability,
    /// Peer cover lambda.
    pub peer_cover: f64,
    /// Hit probability p = min(1, u phi(k)).
    pub hit_probability: f64,
    /// Factor correlation rho.
    pub rho: f64,
    /// Probability the group counts as repaid in a cycle.
    pub group_repayment: f64,
    /// Probability a member falls short of the amount due on her own.
    pub member_shortfall: f64,
    /// (1 - member_shortfall)^k: what independence would predict.
    pub iid_group_repayment: f64,
    /// P(n members hit), n = 0..=k.
    pub hit_count_pmf: Vec<f64>,
    /// The hit counts n for which the group repays.
    pub repaying_hit_counts: Vec<u32>,
    /// The class's closed-form optimum group size (see [`OneFactorModel::class_optimum`]).
    pub class_optimum: Option<f64>,
    /// The quadrature used, for the record.
    pub method: String,
}

/// The law of the number hit among k members sharing a factor of loading rho with marginal hit
/// probability p: P(n) = E[C(k, n) p(M)^n (1 - p(M))^(k - n)], p(m) = Phi((Phi^-1(p) - sqrt(rho) m) /
/// sqrt(1 - rho)). Returns the law and the name of the quadrature used.
///
/// For rho <= 0.5 Gauss-Hermite rules are doubled until nothing moves at 1e-11; above, or if that
/// does not settle, the integrand's step (where p(m) = 1/2) is put on a break point of adaptive
/// Gauss-Kronrod over |m| <= 40.
pub fn hit_count_law(group_size: u32, p: f64, rho: f64) -> Result<(Vec<f64>, String), AnalyticError> {
    if group_size == 0 || group_size > MAX_EXACT_GROUP_SIZE {
        return Err(bad(
            "group size",
            group_size,
            format!("a size in 1..={MAX_EXACT_GROUP_SIZE} for exact quadrature"),
        ));
    }
    check_probability("hit probability", p)?;
    check_correlation("rho", rho)?;
    let dim = group_size as usize + 1;
    if p == 0.0 || p == 1.0 {
        let mut law = vec![0.0; dim];
        binomial_pmf_into(p, 1.0 - p, &mut law);
        return Ok((law, "none needed (p is 0 or 1)".into()));
    }
    let threshold = normal::inv_cdf(p);
    let (load, idio) = (rho.sqrt(), (1.0 - rho).sqrt());
    let integrand = |m: f64, out: &mut [f64]| {
        let z = (threshold - load * m) / idio;
        binomial_pmf_into(normal::cdf(z), normal::cdf(-z), out);
    };
    if rho <= 0.5
        && let Some(est) = hermite_until_stable(dim, integrand)
    {
        return Ok((est.value, format!("Gauss-Hermite, {} nodes", est.nodes)));
    }
    let step = if rho > 0.0 {
        (threshold / load).clamp(-FACTOR_RANGE, FACTOR_RANGE)
    } else {
        0.0
    };
    let weighted = |m: f64, out: &mut [f64]| {
        integrand(m, out);
        let density = normal::pdf(m);
        out.iter_mut().for_each(|v| *v *= density);
    };
    let law = kronrod_adaptive(
        &[-FACTOR_RANGE, step, FACTOR_RANGE],
        dim,
        QUADRATURE_TARGET / 10.0,
        weighted,
    )?;
    Ok((law, "adaptive Gauss-Kronrod (7/15), split at the factor step".into()))
}

/// Exact per-cycle group repayment at group size k under a liability rule and peer cover lambda.
///
/// The engine's rules: a member's capacity is C = D w (1 - s) if hit and D w if not; shortfall
/// S = max(0, D - C), surplus U = max(0, C - D). Joint liability repays iff sum S <= lambda sum U +
/// 1e-9 k D; individual liability counts the group as repaid iff every member has C >= D. Both are
/// decided by the engine's own rule (`engine::settlement`), applied to each possible hit count.
pub fn group_repayment(
    model: &OneFactorModel,
    group_size: u32,
    liability: Liability,
    peer_cover: f64,
) -> Result<OneFactorResult, AnalyticError> {
    if group_size == 0 || group_size > MAX_EXACT_GROUP_SIZE {
        return Err(bad(
            "group size",
            group_size,
            format!("a size in 1..={MAX_EXACT_GROUP_SIZE} for exact quadrature"),
        ));
    }
    if !(0.0..=1.0).contains(&peer_cover) {
        return Err(bad("peer cover", peer_cover, "a share in [0, 1]"));
    }
    for (name, v) in [("amount due", model.amount_due), ("income ratio", model.income_ratio)] {
        if !(v.is_finite() && v >= 0.0) {
            return Err(bad(name, v, "a finite number >= 0"));
        }
    }
    if !(0.0..=1.0).contains(&model.severity) {
        return Err(bad("severity", model.severity, "a share in [0, 1]"));
    }
    check_correlation("village correlation", model.village_correlation)?;
    check_correlation("portfolio correlation", model.portfolio_correlation)?;
    let rho = model.rho();
    check_correlation("village correlation + portfolio correlation", rho)?;
    let p = model.hit_probability(group_size)?;
    let (law, method) = hit_count_law(group_size, p, rho)?;

    // The engine's rule, applied to the two positions a member can be in.
    let d = model.amount_due;
    let hit = settlement::member_position(d * model.income_ratio * (1.0 - model.severity), d);
    let unhit = settlement::member_position(d * model.income_ratio, d);
    let k = group_size;
    let repays = |n: u32| -> bool {
        let (n_hit, n_unhit) = (n as f64, (k - n) as f64);
        match liability {
            Liability::Joint => {
                let group = GroupPosition {
                    shortfall: n_hit * hit.shortfall + n_unhit * unhit.shortfall,
                    surplus: n_hit * hit.surplus + n_unhit * unhit.surplus,
                    paid_own: n_hit * hit.paid_own + n_unhit * unhit.paid_own,
                };
                let group_due = k as f64 * d;
                settlement::settle_joint(group, group_due, group_due, peer_cover).repaid
            }
            Liability::Individual => {
                let repaid = |m: settlement::MemberPosition| settlement::settle_individual(m, d).repaid;
                (n == 0 || repaid(hit)) && (n == k || repaid(unhit))
            }
        }
    };
    let repaying: Vec<u32> = (0..=k).filter(|&n| repays(n)).collect();
    let group = repaying.iter().map(|&n| law[n as usize]).sum::<f64>().clamp(0.0, 1.0);
    let member_shortfall =
        p * f64::from(u8::from(hit.shortfall > 0.0)) + (1.0 - p) * f64::from(u8::from(unhit.shortfall > 0.0));
    Ok(OneFactorResult {
        group_size: k,
        liability,
        peer_cover,
        hit_probability: p,
        rho,
        group_repayment: group,
        member_shortfall,
        iid_group_repayment: (1.0 - member_shortfall).powi(k as i32),
        hit_count_pmf: law,
        repaying_hit_counts: repaying,
        class_optimum: model.class_optimum(),
        method,
    })
}

/// Exact results for one arm of a scenario; out-of-class scenarios, a missing arm and sizes the
/// quadrature refuses all come back as [`OutOfClass`] with the reason.
pub fn exact_for_arm(scenario: &Scenario, arm_index: usize) -> Result<OneFactorResult, OutOfClass> {
    let arm = scenario.arms().get(arm_index).ok_or_else(|| {
        OutOfClass::new(format!(
            "arm index {arm_index} does not exist: the scenario has {} arm(s)",
            scenario.arms().len()
        ))
    })?;
    let model = class_check(arm)?;
    let policy = &arm.policy();
    group_repayment(&model, policy.group_size(), policy.liability(), policy.peer_cover())
        .map_err(|e| OutOfClass::new(format!("arm '{}': {e}", arm.label())))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::analytic::tolerance::{QUADRATURE_CHECK, SCIPY_MATCH};
    use crate::dist::Distribution;
    use crate::scenario::{Policy, Shock, StressWindow};
    use statrs::distribution::{Binomial, Discrete};

    fn model(p: f64, village: f64, portfolio: f64) -> OneFactorModel {
        OneFactorModel {
            shock_name: "illness".into(),
            amount_due: 110.0,
            income_ratio: 1.5,
            risk: 1.0,
            severity: 0.6,
            probability: ShockProbability::Fixed(p),
            village_correlation: village,
            portfolio_correlation: portfolio,
        }
    }

    fn scenario() -> Scenario {
        Scenario {
            name: "one-factor".into(),
            seed: 1,
            replications: 1,
            cycles: 10,
            warmup_cycles: 0,
            borrowers: 100,
            villages: 1,
            principal: 100.0,
            interest_rate: 0.1,
            recovery_rate: 0.0,
            income: Distribution::fixed(1.5).unwrap(),
            risk: Distribution::fixed(1.0).unwrap(),
            shocks: vec![Shock {
                name: "illness".into(),
                scope: ShockScope::Member,
                probability: ShockProbability::Fixed(0.1),
                village_correlation: 0.1,
                portfolio_correlation: 0.05,
                reach: 1.0,
                severity: Distribution::fixed(0.6).unwrap(),
                stress: vec![],
            }],
            dropout: 0.0,
            replace_departures: true,
            swept_fields: vec![],
            arms: vec![],
            warnings: vec![],
            finance: crate::scenario::Finance::default(),
        }
        .with_policies(vec![("base", Policy::default_policy())])
    }

    #[test]
    fn hit_count_law_sums_to_one_in_both_regimes() {
        for &(k, p, rho) in &[
            (5, 0.1, 0.0),
            (5, 0.1, 0.2),
            (8, 0.03, 0.5),
            (8, 0.03, 0.51),
            (10, 0.2, 0.9),
            (30, 1e-4, 0.95),
            (1, 0.4, 0.7),
        ] {
            let (law, method) = hit_count_law(k, p, rho).unwrap();
            let total: f64 = law.iter().sum();
            assert!(
                (total - 1.0).abs() < QUADRATURE_CHECK,
                "k = {k}, p = {p}, rho = {rho}: {total} by {method}"
            );
            // The mean number hit is k p whatever the correlation (linearity of expectation).
            let mean: f64 = law.iter().enumerate().map(|(n, q)| n as f64 * q).sum();
            assert!(
                (mean - k as f64 * p).abs() < 1e-9 * k as f64,
                "k = {k}, p = {p}, rho = {rho}: mean {mean}"
            );
            assert!(law.iter().all(|&q| q >= -1e-15));
        }
    }

    #[test]
    fn zero_correlation_gives_the_binomial_law() {
        // Compared with statrs 0.18 `Binomial::pmf` (an independent implementation of the textbook
        // binomial law).
        for &(k, p) in &[(1, 0.3), (5, 0.1), (12, 0.35), (40, 0.02)] {
            let (law, _) = hit_count_law(k, p, 0.0).unwrap();
            let reference = Binomial::new(p, k as u64).unwrap();
            for (n, q) in law.iter().enumerate() {
                assert!(
                    (q - reference.pmf(n as u64)).abs() < 1e-12,
                    "k = {k}, p = {p}, n = {n}: {q}"
                );
            }
        }
    }

    #[test]
    fn hit_count_law_matches_scipy_quad() {
        // P(n) for k = 5, p = 0.1, rho = 0.3 by scipy 1.17.1 `scipy.integrate.quad` of
        // `scipy.stats.binom.pmf` over the factor (printed by scripts/scipy_reference.py).
        let reference: [(usize, f64); 6] = [
            (0, 0.6595346289323434),    // quad error estimate 1.7e-14
            (1, 0.22611045259681112),   // quad error estimate 3.3e-15
            (2, 0.07927310653045494),   // quad error estimate 3.7e-15
            (3, 0.026336479062208297),  // quad error estimate 2.5e-15
            (4, 0.007392767235256449),  // quad error estimate 5.1e-16
            (5, 0.0013525656429256752), // quad error estimate 2.9e-16
        ];
        let (law, _) = hit_count_law(5, 0.1, 0.3).unwrap();
        for &(n, q) in &reference {
            // scipy 1.17.1 integrate.quad
            assert!((law[n] - q).abs() < SCIPY_MATCH, "n = {n}: {} vs {q}", law[n]);
        }
    }

    #[test]
    fn two_member_law_matches_the_bivariate_normal() {
        // For k = 2, P(both hit) = P(X1 < t, X2 < t) with corr(X1, X2) = rho, t = Phi^-1(p). Checked
        // against a direct adaptive integral of the conditional probability squared.
        let (p, rho) = (0.2, 0.3);
        let (law, _) = hit_count_law(2, p, rho).unwrap();
        let t = normal::inv_cdf(p);
        let both = super::super::quadrature::kronrod_adaptive_scalar(&[-40.0, 0.0, 40.0], 1e-13, |m| {
            normal::cdf((t - rho.sqrt() * m) / (1.0 - rho).sqrt()).powi(2) * normal::pdf(m)
        })
        .unwrap();
        assert!((law[2] - both).abs() < QUADRATURE_CHECK);
        assert!((law[1] - 2.0 * (p - both)).abs() < QUADRATURE_CHECK);
        // Positive correlation makes both-hit likelier than independence would.
        assert!(law[2] > p * p);
    }

    #[test]
    fn repayment_sets_follow_the_engine_rules() {
        // Hit: C = 1.5 * 0.4 D = 0.6 D, S = 0.4 D. Unhit: C = 1.5 D, U = 0.5 D.
        let m = model(0.1, 0.0, 0.0);
        // No cover: any hit defaults the joint group.
        let r = group_repayment(&m, 5, Liability::Joint, 0.0).unwrap();
        assert_eq!(r.repaying_hit_counts, vec![0]);
        assert!((r.group_repayment - 0.9f64.powi(5)).abs() < 1e-12);
        // Full cover: 0.4 n <= 0.5 (5 - n) iff n <= 2.
        let r = group_repayment(&m, 5, Liability::Joint, 1.0).unwrap();
        assert_eq!(r.repaying_hit_counts, vec![0, 1, 2]);
        // Half cover: 0.4 n <= 0.25 (5 - n) iff n <= 1.92.
        let r = group_repayment(&m, 5, Liability::Joint, 0.5).unwrap();
        assert_eq!(r.repaying_hit_counts, vec![0, 1]);
        // Individual liability ignores cover.
        let r = group_repayment(&m, 5, Liability::Individual, 1.0).unwrap();
        assert_eq!(r.repaying_hit_counts, vec![0]);
        assert!((r.member_shortfall - 0.1).abs() < 1e-15);
        assert!((r.iid_group_repayment - 0.9f64.powi(5)).abs() < 1e-15);
        // Income too low to repay even unhit: nobody can repay.
        let poor = OneFactorModel {
            income_ratio: 0.9,
            ..m.clone()
        };
        let r = group_repayment(&poor, 5, Liability::Joint, 1.0).unwrap();
        assert!(r.repaying_hit_counts.is_empty() && r.group_repayment == 0.0 && r.member_shortfall == 1.0);
        // A mild shock leaves the hit member able to pay.
        let mild = OneFactorModel { severity: 0.2, ..m };
        let r = group_repayment(&mild, 5, Liability::Individual, 0.0).unwrap();
        assert_eq!(r.repaying_hit_counts.len(), 6);
        assert!((r.group_repayment - 1.0).abs() < 1e-12);
    }

    #[test]
    fn correlation_raises_group_repayment_without_cover() {
        // With no cover the group repays iff nobody is hit; positive dependence makes "nobody" likelier.
        let independent = group_repayment(&model(0.1, 0.0, 0.0), 5, Liability::Joint, 0.0).unwrap();
        let correlated = group_repayment(&model(0.1, 0.2, 0.1), 5, Liability::Joint, 0.0).unwrap();
        assert!(correlated.group_repayment > independent.group_repayment + 0.01);
        assert!((correlated.iid_group_repayment - independent.iid_group_repayment).abs() < 1e-15);
    }

    #[test]
    fn behaviour_and_growth_put_a_scenario_outside_the_class() {
        let base = "replications = 1\ncycles = 2\n[portfolio]\nborrowers = 10\n[loan]\nprincipal = 100\n\
            [borrowers]\nincome = 1.5\n[[shock]]\nname = \"illness\"\nscope = \"member\"\nprobability = 0.1\nseverity = 1.0\n";
        let check = |extra: &str| {
            let s = Scenario::from_toml_str(&format!("{base}{extra}"), "inline").unwrap();
            class_check(&s.arms[0]).err().map(|e| e.reason)
        };
        assert_eq!(check(""), None);
        let behaviour = "[behaviour]\nloan_value = 0.3\ndiscount = 0.9\ntemptation = 0.1\n";
        assert!(check(behaviour).unwrap().contains("[behaviour]"));
        let grown = base.replace("principal = 100\n", "principal = 100\ngrowth = 0.1\nmax_multiple = 2\n");
        let s = Scenario::from_toml_str(&grown, "inline").unwrap();
        assert!(
            class_check(&s.arms[0])
                .unwrap_err()
                .reason
                .contains("loan.growth = 0.1")
        );
        let s = Scenario::from_toml_str(
            &base.replace("income = 1.5\n", "income = 1.5\nincome_growth = 0.01\n"),
            "inline",
        )
        .unwrap();
        assert!(
            class_check(&s.arms[0])
                .unwrap_err()
                .reason
                .contains("borrowers.income_growth")
        );
        assert!(
            crate::analytic::portfolio_law::class_check(&s, 0)
                .unwrap_err()
                .reason
                .contains("borrowers.income_growth")
        );
    }

    #[test]
    fn class_check_names_the_feature_outside_the_class() {
        let s = scenario();
        let m = class_check(&s.arms[0]).unwrap();
        assert!((m.rho() - 0.15).abs() < 1e-15);
        assert!((m.amount_due - 110.0).abs() < 1e-12);
        let result = exact_for_arm(&s, 0).unwrap();
        assert_eq!(result.group_size, 5);
        assert!(exact_for_arm(&s, 3).unwrap_err().reason.contains("arm index 3"));

        let mut t = s.clone();
        t.arms[0].income = Distribution::lognormal(1.5, 0.3).unwrap();
        assert_eq!(
            class_check(&t.arms[0]).unwrap_err().reason,
            "borrowers.income is a lognormal distribution, not fixed"
        );
        let mut t = s.clone();
        t.arms[0].risk = Distribution::gamma(1.0, 0.5).unwrap();
        assert_eq!(
            class_check(&t.arms[0]).unwrap_err().reason,
            "borrowers.risk is a gamma distribution, not fixed"
        );
        let mut t = s.clone();
        let mut second = t.arms[0].shocks[0].clone();
        second.name = "harvest".into();
        t.arms[0].shocks.push(second);
        assert_eq!(
            class_check(&t.arms[0]).unwrap_err().reason,
            "shock[1] 'harvest' is a second shock"
        );
        let mut t = s.clone();
        t.arms[0].shocks[0].stress.push(StressWindow {
            from: 3,
            to: 5,
            probability: 0.5,
        });
        assert!(
            class_check(&t.arms[0])
                .unwrap_err()
                .reason
                .starts_with("shock[0] 'illness' has a stress window")
        );
        let mut t = s.clone();
        t.arms[0].shocks[0].scope = ShockScope::Village;
        assert_eq!(
            class_check(&t.arms[0]).unwrap_err().reason,
            "shock[0] 'illness' has village scope, not member scope"
        );
        let mut t = s.clone();
        t.arms[0].shocks[0].severity = Distribution::beta(0.5, 0.1).unwrap();
        assert!(
            class_check(&t.arms[0])
                .unwrap_err()
                .reason
                .contains("severity is a beta distribution")
        );
        let mut t = s;
        t.arms[0].shocks.clear();
        assert!(class_check(&t.arms[0]).unwrap_err().reason.contains("no shock"));
    }

    #[test]
    fn curve_probability_uses_the_arm_size_and_reports_the_curve_optimum() {
        let mut s = scenario();
        let curve = GroupSizeCurve::power_plus_log(0.5).unwrap();
        s.arms[0].shocks[0].probability = ShockProbability::Curve(curve.clone());
        let r = exact_for_arm(&s, 0).unwrap();
        assert!((r.hit_probability - curve.at(5).unwrap()).abs() < 1e-15);
        assert_eq!(r.class_optimum, optimum::closed_form_optimum(&curve));
        s.arms[0].policy.group_size = 1;
        assert!(exact_for_arm(&s, 0).unwrap_err().reason.contains("group size = 1"));
    }

    #[test]
    fn bad_numbers_are_refused_not_panicked_on() {
        let m = model(0.1, 0.0, 0.0);
        assert!(group_repayment(&m, 0, Liability::Joint, 0.0).is_err());
        assert!(group_repayment(&m, MAX_EXACT_GROUP_SIZE + 1, Liability::Joint, 0.0).is_err());
        assert!(group_repayment(&m, 5, Liability::Joint, 1.5).is_err());
        assert!(group_repayment(&model(f64::NAN, 0.0, 0.0), 5, Liability::Joint, 0.0).is_err());
        assert!(group_repayment(&model(0.1, 0.6, 0.5), 5, Liability::Joint, 0.0).is_err());
        assert!(hit_count_law(5, 0.1, 1.0).is_err());
        let (law, _) = hit_count_law(4, 1.0, 0.3).unwrap();
        assert_eq!(law, vec![0.0, 0.0, 0.0, 0.0, 1.0]);
    }
}
