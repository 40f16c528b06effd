//! The modeller's question answered directly: which group size is best, by simulation, by the
//! closed form and by the exact one-factor value, at every level of the other swept keys, and a plain
//! sentence when they disagree (so a shift of the best size is read, not guessed by eye).

use crate::analytic::optimum;
use crate::scenario::{Scenario, ShockProbability, ShockScope};
use crate::stats::compare::{self, ComparedArm, Direction};
use crate::stats::select;
use serde::Serialize;

/// One row of group_size.csv: one combination of the other swept keys.
#[derive(Debug, Clone, Serialize)]
pub struct GroupSizeRow {
    /// The other keys' values as in arm labels (`key=value,...`), empty when group size is the
    /// only swept key.
    pub context: String,
    /// The swept size with the highest simulated group repayment.
    pub best_simulated: Option<u32>,
    /// Sizes not significantly worse than it (paired by replication, one-sided 5%, Bonferroni).
    pub not_worse: Vec<u32>,
    /// The best integer size of the closed form (independent members, no cover) for the arm's
    /// curve with its mean risk multiplier, over all sizes, swept or not.
    pub best_closed_form: Option<u32>,
    /// The swept size with the highest exact one-factor group repayment, when every arm of the
    /// context is in that class.
    pub best_exact: Option<u32>,
    /// The swept size with the lowest simulated loss rate.
    pub best_by_loss: Option<u32>,
    /// Plain sentences where the figures disagree.
    pub sentences: Vec<String>,
}

/// The table, when group size is swept; `None` otherwise. `exact[i]` and `loss[i]` are arm i's
/// exact group repayment and simulated loss rate.
pub fn table(
    scenario: &Scenario,
    arms: &[ComparedArm],
    exact: &[Option<f64>],
    loss: &[Option<f64>],
) -> Option<Vec<GroupSizeRow>> {
    if !scenario.swept_paths().iter().any(|p| p == "group_size") {
        return None;
    }
    let context_of = |i: usize| {
        scenario.arms()[i]
            .swept()
            .iter()
            .filter(|v| v.path() != "group_size")
            .map(|v| format!("{}={}", v.path(), v.value()))
            .collect::<Vec<_>>()
            .join(",")
    };
    let mut contexts: Vec<(String, Vec<usize>)> = Vec::new();
    for i in 0..arms.len() {
        let c = context_of(i);
        match contexts.iter_mut().find(|(k, _)| *k == c) {
            Some((_, list)) => list.push(i),
            None => contexts.push((c, vec![i])),
        }
    }
    let size = |i: usize| scenario.arms()[i].policy().group_size();
    let mut rows = Vec::new();
    for (context, members) in contexts {
        let sub: Vec<ComparedArm> = members.iter().map(|&i| arms[i]).collect();
        let chosen = select::select(&sub, compare::GROUP_REPAYMENT, Direction::Maximize, &[]);
        let size_of_label = |l: &str| members.iter().find(|&&i| arms[i].label == l).map(|&i| size(i));
        let best_simulated = chosen.best.as_deref().and_then(size_of_label);
        let mut not_worse: Vec<u32> = chosen.not_worse.iter().filter_map(|l| size_of_label(l)).collect();
        not_worse.sort_unstable();
        not_worse.dedup();
        let arm = &scenario.arms()[members[0]];
        let best_closed_form = arm
            .shocks()
            .iter()
            .find_map(|s| match (s.scope(), s.probability()) {
                (ShockScope::Member, ShockProbability::Curve(c)) => Some(c),
                _ => None,
            })
            .and_then(|c| optimum::best_integer_scaled(c, arm.risk().mean()));
        let pick = |values: &dyn Fn(usize) -> Option<f64>, higher: bool| {
            let vals: Option<Vec<(usize, f64)>> = members.iter().map(|&i| values(i).map(|v| (i, v))).collect();
            vals?
                .into_iter()
                .fold(None, |acc: Option<(usize, f64)>, (i, v)| match acc {
                    Some((_, b)) if (higher && b >= v) || (!higher && b <= v) => acc,
                    _ => Some((i, v)),
                })
                .map(|(i, _)| size(i))
        };
        let best_exact = pick(&|i| exact[i], true);
        let best_by_loss = pick(&|i| loss[i], false);
        let mut sentences = Vec::new();
        let at = if context.is_empty() {
            String::new()
        } else {
            format!("at {context}, ")
        };
        let (in_class, out_of_class) = departures(arm);
        let sizes: Vec<u32> = members.iter().map(|&i| size(i)).collect();
        if let (Some(c), Some(e)) = (best_closed_form, best_exact)
            && c != e
        {
            let factors = attribute(arm, &sizes, &in_class, c, &|b| b == e).unwrap_or_else(|| in_class.clone());
            sentences.push(format!(
                "{at}{} the best size from {c} (closed form) to {e} (exact)",
                moves(&factors)
            ));
        }
        if let (Some(from), Some(s)) = (best_exact.or(best_closed_form), best_simulated)
            && from != s
            && !not_worse.contains(&from)
        {
            let (what, factors) = if best_exact.is_some() {
                ("exact value", vec!["the finite pool and the simulation's noise"])
            } else {
                let explained = |b: u32| b == s || not_worse.contains(&b);
                let factors = attribute(arm, &sizes, &in_class, from, &explained)
                    .unwrap_or_else(|| [in_class.clone(), out_of_class].concat());
                ("closed form", factors)
            };
            sentences.push(format!(
                "{at}{} the best size from {from} ({what}) to {s} (simulated)",
                moves(&factors)
            ));
        }
        if let (Some(s), Some(l)) = (best_simulated, best_by_loss)
            && s != l
        {
            sentences.push(format!(
                    "{at}by loss rate the best size is {l}, not {s}: a defaulting group still collects from members who were not hit"
                ));
        }
        rows.push(GroupSizeRow {
            context,
            best_simulated,
            not_worse,
            best_closed_form,
            best_exact,
            best_by_loss,
            sentences,
        });
    }
    Some(rows)
}

/// What separates an arm from the closed form's assumptions (independent, identical members, one
/// shock whose hit is a default, no cover), in two parts: what the exact one-factor value still
/// covers (correlation, peer cover) and what only the simulation does. These are the factors that
/// can move the best size, named in the order they usually matter most.
fn departures(arm: &crate::scenario::Arm) -> (Vec<&'static str>, Vec<&'static str>) {
    use crate::scenario::{Exclusion, Formation, Liability, Matching};
    let curve_shock = arm
        .shocks()
        .iter()
        .find(|s| s.scope() == ShockScope::Member && matches!(s.probability(), ShockProbability::Curve(_)));
    let mut in_class = Vec::new();
    let policy = arm.policy();
    if policy.liability() == Liability::Joint && policy.peer_cover() > 0.0 {
        in_class.push("peer cover");
    }
    if curve_shock.is_some_and(|s| s.village_correlation() > 0.0 || s.portfolio_correlation() > 0.0) {
        in_class.push("correlation");
    }
    let mut out = Vec::new();
    if arm.shocks().len() > 1 {
        out.push("the other shocks");
    }
    if arm.risk().fixed_value().is_none() {
        out.push("the spread of risk");
    }
    if arm.income().fixed_value().is_none() {
        out.push("random incomes");
    }
    if curve_shock.is_some_and(|s| s.severity().fixed_value().is_none()) {
        out.push("random severities");
    }
    if policy.exclusion_cycles() != Exclusion::Cycles(0) {
        out.push("exclusion");
    }
    if arm.dropout() > 0.0 {
        out.push("dropout");
    }
    if policy.matching() == Matching::Assortative {
        out.push("assortative matching");
    }
    if policy.formation() == Formation::Persistent {
        out.push("persistent groups");
    }
    (in_class, out)
}

/// Which of peer cover and correlation alone explains a move of the best size away from `from`:
/// the exact one-factor value of the curve's shock alone, with the arm's mean income, risk and
/// severity, is computed over `sizes` with only peer cover added to the closed form's assumptions,
/// then only correlation, then both; the first whose best size is not `from` and passes `explained`
/// names the factors. `None` when none does (or the arm has neither).
fn attribute(
    arm: &crate::scenario::Arm,
    sizes: &[u32],
    in_class: &[&'static str],
    from: u32,
    explained: &dyn Fn(u32) -> bool,
) -> Option<Vec<&'static str>> {
    use crate::analytic::one_factor::{OneFactorModel, group_repayment};
    let shock = arm
        .shocks()
        .iter()
        .find(|s| s.scope() == ShockScope::Member && matches!(s.probability(), ShockProbability::Curve(_)))?;
    let best_with = |cover: bool, correlation: bool| -> Option<u32> {
        let model = OneFactorModel {
            shock_name: shock.name().to_string(),
            amount_due: arm.amount_due(),
            income_ratio: arm.income().mean(),
            risk: arm.risk().mean(),
            severity: shock.severity().mean(),
            probability: shock.probability().clone(),
            village_correlation: if correlation { shock.village_correlation() } else { 0.0 },
            portfolio_correlation: if correlation {
                shock.portfolio_correlation()
            } else {
                0.0
            },
        };
        let peer_cover = if cover { arm.policy().peer_cover() } else { 0.0 };
        let liability = arm.policy().liability();
        sizes
            .iter()
            .filter_map(|&k| {
                group_repayment(&model, k, liability, peer_cover)
                    .ok()
                    .map(|r| (k, r.group_repayment))
            })
            .fold(None, |acc: Option<(u32, f64)>, (k, v)| match acc {
                Some((_, b)) if b >= v => acc,
                _ => Some((k, v)),
            })
            .map(|(k, _)| k)
    };
    let cover = in_class.contains(&"peer cover");
    let correlation = in_class.contains(&"correlation");
    let trials: [(bool, bool, &[&'static str]); 3] = [
        (cover, false, &["peer cover"]),
        (false, correlation, &["correlation"]),
        (
            cover && correlation,
            cover && correlation,
            &["peer cover", "correlation"],
        ),
    ];
    trials
        .into_iter()
        .filter(|(a, b, _)| *a || *b)
        .find(|(a, b, _)| best_with(*a, *b).is_some_and(|k| k != from && explained(k)))
        .map(|(_, _, names)| names.to_vec())
}

/// "correlation moves", "peer cover and correlation move", "a, b and c move"; with no factor
/// named, "the rest of the model moves".
fn moves(factors: &[&str]) -> String {
    match factors {
        [] => "the rest of the model moves".to_string(),
        [one] => format!("{one} moves"),
        [rest @ .., last] => format!("{} and {last} move", rest.join(", ")),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn factors_are_named_in_plain_english() {
        assert_eq!(moves(&["correlation"]), "correlation moves");
        assert_eq!(moves(&["peer cover", "correlation"]), "peer cover and correlation move");
        assert_eq!(moves(&["a", "b", "c"]), "a, b and c move");
        assert_eq!(moves(&[]), "the rest of the model moves");
    }
}
