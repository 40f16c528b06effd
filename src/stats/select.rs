//! Choosing a policy with a stated confidence: the arms that meet every constraint, the best of
//! them by one figure, and the arms the data cannot tell apart from it.
//!
//! Feasibility is one-sided per arm and constraint, Bonferroni over arms x constraints, so that all
//! "feasible" claims hold together with 95% confidence. The best and the set not worse use the
//! paired estimator of `compare`, so a choice here never disagrees with differences.csv.

use crate::analytic::normal::inv_cdf;
use crate::stats::compare::{self, ComparedArm, Direction, Metric};
use crate::stats::estimate;
use crate::stats::{ArmTally, ReplicationTally};
use serde::Serialize;

/// Overall one-sided error level of feasibility and of the set not worse.
pub const LEVEL: f64 = 0.05;

/// The figures a selection can use: pooled rates with a numerator and denominator per replication.
pub const FIGURES: [Metric; 6] = [
    compare::COMPARED[0],
    compare::COMPARED[1],
    compare::COMPARED[2],
    compare::COMPARED[3],
    compare::COMPARED[4],
    ("member_default_rate", |r| {
        (r.member_defaults as f64, r.member_loans as f64)
    }),
];

/// A quantile figure a constraint can use: its summary.csv name, its level q and each replication's
/// value (one value per replication, so the order-statistic bound treats replications as the
/// independent values).
#[derive(Debug, Clone, Copy)]
pub struct QuantileFigure {
    /// The column name in summary.csv.
    pub name: &'static str,
    /// The quantile's level.
    pub q: f64,
    /// A replication's value; `None` leaves the replication out (it lent nothing).
    pub value: fn(&ReplicationTally) -> Option<f64>,
}

/// The quantile figures over replications a constraint can use: the horizon loss and the worst
/// single-cycle loss. (The per-cycle quantiles need cycle records, which replications.csv does not
/// hold.)
pub const QUANTILE_FIGURES: [QuantileFigure; 7] = [
    QuantileFigure {
        name: "loss_p50",
        q: 0.5,
        value: ReplicationTally::loss_rate,
    },
    QuantileFigure {
        name: "loss_p95",
        q: 0.95,
        value: ReplicationTally::loss_rate,
    },
    QuantileFigure {
        name: "loss_p99",
        q: 0.99,
        value: ReplicationTally::loss_rate,
    },
    QuantileFigure {
        name: "loss_p999",
        q: 0.999,
        value: ReplicationTally::loss_rate,
    },
    QuantileFigure {
        name: "worst_cycle_loss_p50",
        q: 0.5,
        value: worst_cycle_loss,
    },
    QuantileFigure {
        name: "worst_cycle_loss_p95",
        q: 0.95,
        value: worst_cycle_loss,
    },
    QuantileFigure {
        name: "worst_cycle_loss_p99",
        q: 0.99,
        value: worst_cycle_loss,
    },
];

/// What a constraint bounds: a pooled rate (normal bound on the ratio estimator) or a quantile
/// over replications (distribution-free order-statistic bound).
#[derive(Debug, Clone, Copy)]
pub enum ConstrainedFigure {
    /// A pooled rate.
    Rate(Metric),
    /// A quantile over replications.
    Quantile(QuantileFigure),
}

impl ConstrainedFigure {
    /// The figure's name in summary.csv.
    pub fn name(&self) -> &'static str {
        match self {
            ConstrainedFigure::Rate(m) => m.0,
            ConstrainedFigure::Quantile(f) => f.name,
        }
    }

    /// Whether arm `tally` meets `bound limit` with one-sided error `alpha`. A rate uses its own
    /// bound rate -/+ z SE; a quantile the order statistic at the one-sided binomial rank over the
    /// replications' values. Too few replications for a bound give no confidence: not met.
    fn holds(&self, tally: &ArmTally, bound: Bound, limit: f64, alpha: f64) -> bool {
        match self {
            ConstrainedFigure::Rate(metric) => {
                let z = inv_cdf(1.0 - alpha);
                match estimate::ratio(tally.replications.iter().map(|r| metric.1(&r))) {
                    Some(r) => match (r.standard_error, bound) {
                        (Some(se), Bound::AtMost) => r.rate + z * se <= limit,
                        (Some(se), Bound::AtLeast) => r.rate - z * se >= limit,
                        // One replication gives no interval: no confidence, so not shown feasible.
                        (None, _) => false,
                    },
                    None => false,
                }
            }
            ConstrainedFigure::Quantile(f) => {
                let values: Vec<f64> = tally.replications.iter().filter_map(|r| (f.value)(&r)).collect();
                let values = estimate::sorted_owned(values);
                match bound {
                    Bound::AtMost => {
                        estimate::quantile_upper_rank(values.len(), f.q, alpha).is_some_and(|u| values[u - 1] <= limit)
                    }
                    Bound::AtLeast => {
                        estimate::quantile_lower_rank(values.len(), f.q, alpha).is_some_and(|l| values[l - 1] >= limit)
                    }
                }
            }
        }
    }
}

fn worst_cycle_loss(t: &ReplicationTally) -> Option<f64> {
    t.worst_cycle_loss
}

/// The figure named `name`, or a message listing the ones allowed.
pub fn figure(name: &str) -> Result<Metric, String> {
    FIGURES.iter().find(|m| m.0 == name).copied().ok_or_else(|| {
        let names: Vec<&str> = FIGURES.iter().map(|m| m.0).collect();
        format!(
            "`{name}` is not a figure a selection can use; one of {}",
            names.join(", ")
        )
    })
}

/// Which side of the limit a constraint wants.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Bound {
    /// FIGURE <= limit.
    AtMost,
    /// FIGURE >= limit.
    AtLeast,
}

/// One constraint, FIGURE<=X or FIGURE>=X.
#[derive(Debug, Clone, Copy)]
pub struct Constraint {
    /// The figure.
    pub figure: ConstrainedFigure,
    /// Which side.
    pub bound: Bound,
    /// The limit.
    pub limit: f64,
}

/// Parses `FIGURE<=X` or `FIGURE>=X` (spaces allowed around the parts).
pub fn parse_constraint(text: &str) -> Result<Constraint, String> {
    let (name, bound, limit) = if let Some((a, b)) = text.split_once("<=") {
        (a, Bound::AtMost, b)
    } else if let Some((a, b)) = text.split_once(">=") {
        (a, Bound::AtLeast, b)
    } else {
        return Err(format!(
            "\"{text}\" is not a constraint: write FIGURE<=X or FIGURE>=X, such as \"loss_rate<=0.02\""
        ));
    };
    let name = name.trim();
    let figure = match QUANTILE_FIGURES.iter().find(|f| f.name == name) {
        Some(f) => ConstrainedFigure::Quantile(*f),
        None => ConstrainedFigure::Rate(figure(name).map_err(|e| {
            let quantiles: Vec<&str> = QUANTILE_FIGURES.iter().map(|f| f.name).collect();
            format!("\"{text}\": {e}, or a quantile: {}", quantiles.join(", "))
        })?),
    };
    let limit: f64 = limit
        .trim()
        .parse()
        .ok()
        .filter(|x: &f64| x.is_finite())
        .ok_or_else(|| format!("\"{text}\": the limit `{}` is not a finite number", limit.trim()))?;
    Ok(Constraint { figure, bound, limit })
}

/// The answer of a selection.
#[derive(Debug, Clone, Serialize)]
pub struct Selection {
    /// `maximize FIGURE` or `minimize FIGURE`.
    pub objective: String,
    /// The constraints as written.
    pub constraints: Vec<String>,
    /// Labels of the arms meeting every constraint with 95% one-sided confidence, in arm order.
    pub feasible: Vec<String>,
    /// The feasible arm with the best point estimate (the earlier on ties), or null.
    pub best: Option<String>,
    /// Feasible arms not significantly worse than the best (paired, one-sided 5%, Bonferroni over
    /// the feasible arms), the best included, in arm order.
    pub not_worse: Vec<String>,
    /// Replications that would separate the best from the closest arm not worse (normal
    /// approximation, one-sided 5% with the same Bonferroni split, 80% power); null when the best
    /// stands alone or the tie is exact.
    pub replications_to_separate: Option<u64>,
    /// Plain sentences: no feasible arm, or leaders the data cannot separate.
    pub notes: Vec<String>,
}

/// Selects among `arms`: feasible under `constraints`, best by `objective` in `direction`.
pub fn select(
    arms: &[ComparedArm],
    objective: Metric,
    direction: Direction,
    constraints: &[(String, Constraint)],
) -> Selection {
    let sign = match direction {
        Direction::Maximize => 1.0,
        Direction::Minimize => -1.0,
    };
    let tests = (arms.len() * constraints.len()).max(1) as f64;
    let alpha = LEVEL / tests;
    let feasible: Vec<usize> = (0..arms.len())
        .filter(|&i| {
            constraints
                .iter()
                .all(|(_, c)| c.figure.holds(arms[i].tally, c.bound, c.limit, alpha))
        })
        .collect();
    let rate = |i: usize| {
        let pairs: Vec<(f64, f64)> = arms[i].tally.replications.iter().map(|r| objective.1(&r)).collect();
        estimate::ratio(pairs).map(|r| sign * r.rate)
    };
    let best = feasible
        .iter()
        .filter_map(|&i| rate(i).map(|r| (i, r)))
        .fold(None, |acc: Option<(usize, f64)>, (i, r)| match acc {
            Some((_, b)) if b >= r => acc,
            _ => Some((i, r)),
        })
        .map(|(i, _)| i);
    let verb = match direction {
        Direction::Maximize => "maximize",
        Direction::Minimize => "minimize",
    };
    let mut selection = Selection {
        objective: format!("{verb} {}", objective.0),
        constraints: constraints.iter().map(|(t, _)| t.clone()).collect(),
        feasible: feasible.iter().map(|&i| arms[i].label.to_string()).collect(),
        best: best.map(|i| arms[i].label.to_string()),
        not_worse: Vec::new(),
        replications_to_separate: None,
        notes: Vec::new(),
    };
    // A quantile bound needs enough replications at the Bonferroni level; say so rather than let
    // "no arm meets" hide the reason.
    for (text, c) in constraints {
        if let ConstrainedFigure::Quantile(f) = c.figure {
            let short: Vec<&str> = arms
                .iter()
                .filter(|a| {
                    let n = a.tally.replications.iter().filter_map(|r| (f.value)(&r)).count();
                    match c.bound {
                        Bound::AtMost => estimate::quantile_upper_rank(n, f.q, alpha).is_none(),
                        Bound::AtLeast => estimate::quantile_lower_rank(n, f.q, alpha).is_none(),
                    }
                })
                .map(|a| a.label)
                .collect();
            if !short.is_empty() {
                selection.notes.push(format!(
                    "{text}: too few replications for a one-sided order-statistic bound at level {alpha:.4} in {}; more replications would allow one",
                    short.join(", ")
                ));
            }
        }
    }
    let Some(best) = best else {
        selection.notes.push(if feasible.is_empty() && !constraints.is_empty() {
            format!(
                "no arm meets {} with 95% confidence",
                selection.constraints.join(" and ")
            )
        } else {
            format!("no arm has a value of {}", objective.0)
        });
        return selection;
    };
    let others = (feasible.len().saturating_sub(1)).max(1) as f64;
    let z = inv_cdf(1.0 - LEVEL / others);
    let n = arms[best].tally.len() as f64;
    let mut needed: Option<f64> = None;
    let mut exact_tie = false;
    for &i in &feasible {
        if i == best {
            selection.not_worse.push(arms[i].label.to_string());
            continue;
        }
        if rate(i).is_none() {
            continue;
        }
        let Some(d) = compare::paired(arms[best].tally, arms[i].tally, objective) else {
            continue;
        };
        let gap = sign * d.rate;
        let keep = match d.standard_error {
            Some(se) if se > 0.0 => gap <= z * se,
            _ => gap <= 0.0,
        };
        if keep {
            selection.not_worse.push(arms[i].label.to_string());
            match d.standard_error {
                Some(se) if gap > 0.0 && se > 0.0 => {
                    // SE shrinks as 1/sqrt(n): the gap must reach (z + z_power) standard errors.
                    let z_power = inv_cdf(0.8);
                    let want = n * ((z + z_power) * se / gap).powi(2);
                    needed = Some(needed.map_or(want, |w: f64| w.max(want)));
                }
                _ => exact_tie = true,
            }
        }
    }
    if selection.not_worse.len() > 1 {
        selection.replications_to_separate = needed.map(|w| w.ceil() as u64);
        let leaders = selection.not_worse.join(", ");
        selection.notes.push(match needed {
            Some(w) => format!(
                "the data cannot separate {leaders}: about {} replications (now {n}) would, by a normal approximation",
                w.ceil() as u64
            ),
            None => format!("the data cannot separate {leaders}: they tie exactly"),
        });
        if exact_tie && needed.is_some() {
            selection
                .notes
                .push("some of them tie exactly, which no number of replications separates".to_string());
        }
    }
    selection
}

/// Most arms a terminal table lists in full; above it, only the leaders are shown.
pub const FULL_TABLE_ARMS: usize = 20;
/// How many leaders a long table shows.
pub const LEADERS_SHOWN: usize = 10;

/// The indices of the arms a terminal table shows: all of them up to [`FULL_TABLE_ARMS`], in arm
/// order; beyond it the [`LEADERS_SHOWN`] highest values (the earlier arm on ties, arms without a
/// value last), best first.
pub fn arms_shown(values: &[Option<f64>]) -> Vec<usize> {
    if values.len() <= FULL_TABLE_ARMS {
        return (0..values.len()).collect();
    }
    let mut order: Vec<usize> = (0..values.len()).collect();
    // A stable sort keeps arm order among equal values.
    order.sort_by(|&a, &b| match (values[a], values[b]) {
        (Some(x), Some(y)) => y.total_cmp(&x),
        (Some(_), None) => std::cmp::Ordering::Less,
        (None, Some(_)) => std::cmp::Ordering::Greater,
        (None, None) => std::cmp::Ordering::Equal,
    });
    order.truncate(LEADERS_SHOWN);
    order
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stats::{ArmTally, ReplicationTally};

    /// An arm whose replication r lent 1000 and lost `loss[r]`, and repaid `repaid[r]` of 100 groups.
    fn arm(loss: &[f64], repaid: &[u64]) -> ArmTally {
        let mut t = ArmTally::default();
        for (r, (&l, &g)) in loss.iter().zip(repaid).enumerate() {
            let mut rep = ReplicationTally::new(r as u32, 2, 0);
            rep.loss = l;
            rep.disbursed = 1000.0;
            rep.groups_repaid = g;
            rep.group_cycles = 100;
            t.push(rep);
        }
        t
    }

    fn compared<'a>(list: &'a [(&'a str, ArmTally)]) -> Vec<ComparedArm<'a>> {
        list.iter()
            .map(|(label, tally)| ComparedArm {
                label,
                group_size: 2,
                tally,
            })
            .collect()
    }

    #[test]
    fn long_tables_show_the_leaders_best_first() {
        let few: Vec<Option<f64>> = vec![Some(0.1), Some(0.9), None];
        assert_eq!(arms_shown(&few), [0, 1, 2]);
        let mut many: Vec<Option<f64>> = (0..25).map(|i| Some(f64::from(i % 7))).collect();
        many[3] = None;
        // Values 6 at arms 6, 13, 20; 5 at 5, 12, 19; 4 at 4, 11, 18; then 3 at 10 (arm 3 has none).
        assert_eq!(arms_shown(&many), [6, 13, 20, 5, 12, 19, 4, 11, 18, 10]);
    }

    #[test]
    fn constraints_parse_with_either_bound_and_refuse_the_rest() {
        let c = parse_constraint(" loss_rate <= 0.02").unwrap();
        assert_eq!((c.figure.name(), c.bound, c.limit), ("loss_rate", Bound::AtMost, 0.02));
        assert_eq!(parse_constraint("served_share>=0.7").unwrap().bound, Bound::AtLeast);
        assert!(parse_constraint("loss_rate<0.02").unwrap_err().contains("FIGURE<=X"));
        assert!(
            parse_constraint("loss<=0.02")
                .unwrap_err()
                .contains("one of group_repayment_rate")
        );
        assert!(parse_constraint("loss_rate<=nan").unwrap_err().contains("finite"));
    }

    #[test]
    fn the_harshest_arm_is_not_chosen_when_it_fails_the_constraint() {
        // "harsh" repays best but loses 5% every replication; the limit 3% leaves "mild" and "soft".
        let harsh = arm(&[50.0, 51.0, 49.0, 50.0], &[90, 91, 89, 90]);
        let mild = arm(&[20.0, 21.0, 19.0, 20.0], &[80, 82, 79, 81]);
        let soft = arm(&[10.0, 11.0, 9.0, 10.0], &[60, 61, 59, 60]);
        let list = [("harsh", harsh), ("mild", mild), ("soft", soft)];
        let c = parse_constraint("loss_rate<=0.03").unwrap();
        let s = select(
            &compared(&list),
            compare::GROUP_REPAYMENT,
            Direction::Maximize,
            &[("loss_rate<=0.03".into(), c)],
        );
        assert_eq!(s.feasible, ["mild", "soft"]);
        assert_eq!(s.best.as_deref(), Some("mild"));
        assert_eq!(s.not_worse, ["mild"]);
        assert!(s.notes.is_empty());
    }

    #[test]
    fn a_quantile_constraint_without_enough_replications_says_why() {
        // Four replications cannot bound a 95% quantile: 0.95^4 = 0.81, far above any error level.
        let a = arm(&[10.0, 12.0, 11.0, 9.0], &[90, 91, 92, 90]);
        let list = [("a", a.clone()), ("b", a)];
        let c = parse_constraint("loss_p95<=0.5").unwrap();
        let s = select(
            &compared(&list),
            compare::GROUP_REPAYMENT,
            Direction::Maximize,
            &[("loss_p95<=0.5".into(), c)],
        );
        assert!(s.feasible.is_empty());
        assert!(
            s.notes[0].starts_with("loss_p95<=0.5: too few replications"),
            "{:?}",
            s.notes
        );
        assert_eq!(s.notes[1], "no arm meets loss_p95<=0.5 with 95% confidence");
    }

    #[test]
    fn no_feasible_arm_is_said_plainly() {
        let a = arm(&[50.0, 52.0], &[90, 91]);
        let list = [("a", a.clone()), ("b", a)];
        let c = parse_constraint("loss_rate<=0.01").unwrap();
        let s = select(
            &compared(&list),
            compare::GROUP_REPAYMENT,
            Direction::Maximize,
            &[("loss_rate<=0.01".into(), c)],
        );
        assert!(s.best.is_none() && s.feasible.is_empty() && s.not_worse.is_empty());
        assert_eq!(s.notes, ["no arm meets loss_rate<=0.01 with 95% confidence"]);
    }

    #[test]
    fn close_leaders_come_with_the_replications_that_would_separate_them() {
        // b trails a by under 1 point on average, with paired differences of up to 3 points.
        let a = arm(&[0.0; 6], &[60, 62, 60, 62, 60, 62]);
        let b = arm(&[0.0; 6], &[61, 59, 61, 59, 61, 60]);
        let list = [("a", a), ("b", b)];
        let s = select(&compared(&list), compare::GROUP_REPAYMENT, Direction::Maximize, &[]);
        assert_eq!(s.best.as_deref(), Some("a"));
        assert_eq!(s.not_worse, ["a", "b"]);
        // Paired differences d = -1, 3, -1, 3, -1, 2 points: mean 5/6, sd by hand, n = 6.
        let d = [-1.0, 3.0, -1.0, 3.0, -1.0, 2.0f64].map(|x| x / 100.0);
        let mean = d.iter().sum::<f64>() / 6.0;
        let se = (d.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / 5.0 / 6.0).sqrt();
        // Normal quantiles 1.6449 (95%) and 0.8416 (80%), the usual sample-size formula.
        let expected = (6.0 * ((1.644854 + 0.841621) * se / mean).powi(2)).ceil() as u64;
        assert_eq!(s.replications_to_separate, Some(expected));
        assert!(
            s.notes[0].contains(&format!("about {expected} replications")),
            "{:?}",
            s.notes
        );
    }
}
