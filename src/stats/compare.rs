//! Comparisons between arms: paired differences and the set of arms not significantly worse than
//! the best.
//!
//! Both rest on one estimator, the difference of two pooled ratios paired by replication with its
//! delta-method standard error ([`estimate::paired_in_passes`], of which
//! [`estimate::paired_ratio_difference`] is the one-figure form). Keeping them together means
//! a figure ranked here and the same figure in differences.csv can never disagree in how they weigh
//! replications. All arms of a replication see the same draws, so pairing removes the shared noise.

use crate::stats::estimate::{self, RatioEstimate};
use crate::stats::{ArmTally, ReplicationTally};
use serde::Serialize;

/// One-sided level of the best-arm comparison, before the Bonferroni split over the other arms.
pub const BEST_ARM_LEVEL: f64 = 0.05;

/// A compared figure: its column name and its per-replication (numerator, denominator).
pub type Metric = (&'static str, fn(&ReplicationTally) -> (f64, f64));

/// Per-replication group repayment: (groups repaid, groups served).
pub const GROUP_REPAYMENT: Metric = ("group_repayment_rate", |r| {
    (r.groups_repaid as f64, r.group_cycles as f64)
});

/// The figures of differences.csv, in row order.
pub const COMPARED: [Metric; 5] = [
    GROUP_REPAYMENT,
    ("loss_rate", |r| (r.loss, r.disbursed)),
    ("net_yield", |r| (r.net_income(), r.disbursed)),
    ("served_share", |r| {
        (r.served_slot_cycles as f64, r.slot_cycles() as f64)
    }),
    ("excluded_share", |r| {
        (r.excluded_slot_cycles as f64, r.slot_cycles() as f64)
    }),
];

/// One arm's difference from the baseline arm on one figure, paired by replication.
#[derive(Debug, Clone, Serialize)]
pub struct ArmDifference {
    /// The arm compared.
    pub arm: String,
    /// The baseline arm.
    pub baseline: String,
    /// Which figure: group_repayment_rate, loss_rate, net_yield, served_share or excluded_share.
    pub metric: &'static str,
    /// arm's pooled figure minus the reference's.
    pub difference: f64,
    /// Delta-method standard error of the paired difference.
    pub standard_error: Option<f64>,
    /// 95% interval, difference -/+ 1.959964 SE (not clamped).
    pub ci_low: Option<f64>,
    /// See `ci_low`.
    pub ci_high: Option<f64>,
    /// Whether the 95% interval excludes 0 (`None` without an interval).
    pub significant: Option<bool>,
    /// The paired standard error over the unpaired one, sqrt(se_arm^2 + se_baseline^2): how much
    /// common random numbers narrowed the comparison (`None` when either is missing or both are 0).
    pub se_ratio: Option<f64>,
}

/// The best arm by group repayment and the arms not significantly worse.
#[derive(Debug, Clone, Serialize)]
pub struct BestArm {
    /// Index of the arm with the highest pooled group repayment rate (the earlier arm on ties).
    pub arm_index: usize,
    /// Its label.
    pub label: String,
    /// Its group size.
    pub group_size: u32,
    /// Labels of the arms whose paired shortfall from the best is not significant (one-sided 5%,
    /// Bonferroni over the other arms), the best arm included, in arm order.
    pub confidence_set: Vec<String>,
    /// Group sizes of the arms in the confidence set, ascending and without repeats.
    pub confidence_set_group_sizes: Vec<u32>,
}

/// One arm as the comparisons see it: its label, group size and replications.
#[derive(Debug, Clone, Copy)]
pub struct ComparedArm<'a> {
    /// The arm's label.
    pub label: &'a str,
    /// Its group size (reported with the best-arm set).
    pub group_size: u32,
    /// Its replications, in replication order.
    pub tally: &'a ArmTally,
}

/// R_a - R_b for one figure, paired by replication; `None` where either pooled denominator is zero.
pub fn paired(a: &ArmTally, b: &ArmTally, metric: Metric) -> Option<RatioEstimate> {
    let [figure] = paired_figures(a, b, &[metric]);
    figure.map(|f| f.difference)
}

/// Arm `a` against arm `b` on every figure of `metrics`, paired by replication, in three passes
/// over the two arms' replications side by side whatever the number of figures
/// ([`estimate::paired_in_passes`]): the replications may wait on disk, and no value per
/// replication is held. `None` for a figure where either pooled denominator is zero, and for every
/// figure when the arms differ in replications or have none.
fn paired_figures<const M: usize>(
    a: &ArmTally,
    b: &ArmTally,
    metrics: &[Metric; M],
) -> [Option<estimate::PairedEstimate>; M] {
    if a.replications.len() != b.replications.len() {
        return [None; M];
    }
    estimate::paired_in_passes(|| {
        a.replications
            .iter_numbers()
            .zip(b.replications.iter_numbers())
            .map(|(ra, rb)| std::array::from_fn(|m| (metrics[m].1(&ra), metrics[m].1(&rb))))
    })
}

/// Every other arm against arm `baseline` on each figure of [`COMPARED`], in arm order.
pub fn differences(arms: &[ComparedArm], baseline: usize) -> Vec<ArmDifference> {
    let Some(base) = arms.get(baseline) else {
        return Vec::new();
    };
    let mut out = Vec::new();
    for (i, arm) in arms.iter().enumerate() {
        if i == baseline {
            continue;
        }
        out.extend(pair_rows(arm, base));
    }
    out
}

/// `arm` against `base` on each figure of [`COMPARED`], paired by replication.
fn pair_rows(arm: &ComparedArm, base: &ComparedArm) -> Vec<ArmDifference> {
    let mut out = Vec::new();
    let figures = paired_figures(arm.tally, base.tally, &COMPARED);
    for (metric, figure) in COMPARED.into_iter().zip(figures) {
        if let Some(estimate::PairedEstimate { difference: d, own_se }) = figure {
            let unpaired = match own_se {
                (Some(a), Some(b)) => Some((a * a + b * b).sqrt()),
                _ => None,
            };
            let (ci_low, ci_high) = (d.ci_low(), d.ci_high());
            out.push(ArmDifference {
                arm: arm.label.to_string(),
                baseline: base.label.to_string(),
                metric: metric.0,
                difference: d.rate,
                standard_error: d.standard_error,
                ci_low,
                ci_high,
                significant: ci_low.zip(ci_high).map(|(lo, hi)| lo > 0.0 || hi < 0.0),
                se_ratio: d
                    .standard_error
                    .zip(unpaired)
                    .and_then(|(se, u)| (u > 0.0).then(|| se / u)),
            });
        }
    }
    out
}

/// One pair of arms that differ only in the contrasted key, on one figure.
#[derive(Debug, Clone, Serialize)]
pub struct Contrast {
    /// The other swept keys' values, as in arm labels (`key=value,...`); empty when the contrasted
    /// key is the only one swept.
    pub context: String,
    /// The contrasted key's value in the arm (the later arm of the pair).
    pub value: String,
    /// Its value in the baseline (the earlier arm of the pair).
    pub baseline_value: String,
    /// The paired difference, arm minus baseline, as in differences.csv.
    #[serde(flatten)]
    pub difference: ArmDifference,
}

/// The swept keys of a run, in `[sweep]` order, from the arms' (path, value) lists.
fn swept_keys(swept: &[Vec<(String, String)>]) -> Vec<String> {
    let mut keys: Vec<String> = Vec::new();
    for (path, _) in swept.iter().flatten() {
        if !keys.contains(path) {
            keys.push(path.clone());
        }
    }
    keys
}

/// Every pair of arms that differ only in `key`, paired by replication, each figure of
/// [`COMPARED`]: the earlier arm of a pair is its baseline. `swept[i]` is arm i's (path, value)
/// list. A key that is not swept (`policy.` may prefix a policy field) is refused with a message
/// naming the swept keys.
pub fn contrasts(arms: &[ComparedArm], swept: &[Vec<(String, String)>], key: &str) -> Result<Vec<Contrast>, String> {
    let keys = swept_keys(swept);
    let key = keys
        .iter()
        .find(|k| *k == key || key.strip_prefix("policy.") == Some(k.as_str()))
        .ok_or_else(|| {
            let listed = if keys.is_empty() {
                "none: the run sweeps no key".to_string()
            } else {
                keys.join(", ")
            };
            format!("`{key}` is not a swept key of this run; the swept keys are {listed}")
        })?;
    let value_of = |i: usize| swept[i].iter().find(|(p, _)| p == key).map_or("", |(_, v)| v.as_str());
    let context_of = |i: usize| {
        swept[i]
            .iter()
            .filter(|(p, _)| p != key)
            .map(|(p, v)| format!("{p}={v}"))
            .collect::<Vec<_>>()
            .join(",")
    };
    let mut out = Vec::new();
    for j in 0..arms.len().min(swept.len()) {
        for i in 0..j {
            let context = context_of(i);
            if context != context_of(j) || value_of(i) == value_of(j) {
                continue;
            }
            for difference in pair_rows(&arms[j], &arms[i]) {
                out.push(Contrast {
                    context: context.clone(),
                    value: value_of(j).to_string(),
                    baseline_value: value_of(i).to_string(),
                    difference,
                });
            }
        }
    }
    // Grouped by context, so that each level of the other keys reads as one block.
    let contexts: Vec<String> = (0..arms.len().min(swept.len())).map(context_of).collect();
    let first_seen = |c: &str| contexts.iter().position(|x| x == c).unwrap_or(usize::MAX);
    out.sort_by_key(|c| first_seen(&c.context));
    Ok(out)
}

/// The arm a user names, by label or by index counted from 1 (as `check` lists them). The error
/// says what was given and what is allowed.
pub fn resolve_arm(labels: &[&str], given: &str) -> Result<usize, String> {
    if let Some(i) = labels.iter().position(|l| *l == given) {
        return Ok(i);
    }
    match given.trim().parse::<usize>() {
        Ok(i) if (1..=labels.len()).contains(&i) => Ok(i - 1),
        _ => Err(format!(
            "`{given}` is not an arm: give an arm's label or its number from 1 to {} as `check` lists them",
            labels.len()
        )),
    }
}

/// Which way a figure is better.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Direction {
    /// Higher is better (repayment, served share).
    Maximize,
    /// Lower is better (loss rate, excluded share).
    Minimize,
}

/// The arm with the highest pooled group repayment and the arms not significantly worse. `None`
/// with fewer than two arms (there is nothing to choose) or when no arm served a group.
pub fn best_arm(arms: &[ComparedArm]) -> Option<BestArm> {
    best_arm_by(arms, GROUP_REPAYMENT, Direction::Maximize)
}

/// The arm with the best pooled `metric` (the earlier arm on ties) and the arms not significantly
/// worse: an arm stays when the paired difference from the best does not exceed the one-sided 5%
/// bound, Bonferroni over the other arms. `None` with fewer than two arms or when no arm has the
/// metric's denominator.
pub fn best_arm_by(arms: &[ComparedArm], metric: Metric, direction: Direction) -> Option<BestArm> {
    if arms.len() < 2 {
        return None;
    }
    // Signed so that larger is better either way.
    let sign = match direction {
        Direction::Maximize => 1.0,
        Direction::Minimize => -1.0,
    };
    let rates: Vec<Option<f64>> = arms
        .iter()
        .map(|a| {
            estimate::ratio_in_passes(|| a.tally.replications.iter_numbers().map(|r| metric.1(&r)))
                .map(|r| sign * r.rate)
        })
        .collect();
    let best = rates
        .iter()
        .enumerate()
        .filter_map(|(i, r)| r.map(|r| (i, r)))
        .fold(None, |acc: Option<(usize, f64)>, (i, r)| match acc {
            Some((_, b)) if b >= r => acc,
            _ => Some((i, r)),
        })?
        .0;
    let others = (arms.len() - 1) as f64;
    let z = crate::analytic::normal::inv_cdf(1.0 - BEST_ARM_LEVEL / others);
    let mut confidence_set = Vec::new();
    let mut sizes = Vec::new();
    for (i, arm) in arms.iter().enumerate() {
        let keep = i == best
            || (rates[i].is_some()
                && match paired(arms[best].tally, arm.tally, metric) {
                    Some(RatioEstimate {
                        rate,
                        standard_error: Some(se),
                    }) if se > 0.0 => sign * rate <= z * se,
                    // Identical replications (or too few to vary): only an exact tie is not worse.
                    Some(d) => sign * d.rate <= 0.0,
                    None => false,
                });
        if keep {
            confidence_set.push(arm.label.to_string());
            sizes.push(arm.group_size);
        }
    }
    sizes.sort_unstable();
    sizes.dedup();
    Some(BestArm {
        arm_index: best,
        label: arms[best].label.to_string(),
        group_size: arms[best].group_size,
        confidence_set,
        confidence_set_group_sizes: sizes,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// An arm whose replication r repaid `repaid[r]` of `served[r]` groups.
    fn tally(repaid: &[u64], served: &[u64]) -> ArmTally {
        let mut t = ArmTally::default();
        for (r, (&g, &n)) in repaid.iter().zip(served).enumerate() {
            let mut rep = ReplicationTally::new(r as u32, 2, 0);
            rep.groups_repaid = g;
            rep.group_cycles = n;
            t.push(rep);
        }
        t
    }

    fn arms<'a>(list: &'a [(&'a str, u32, ArmTally)]) -> Vec<ComparedArm<'a>> {
        list.iter()
            .map(|(label, group_size, tally)| ComparedArm {
                label,
                group_size: *group_size,
                tally,
            })
            .collect()
    }

    /// An arm of `n` replications with varied figures from `seed` (a zero denominator where
    /// `no_loans`).
    fn varied(n: u32, seed: u64, no_loans: bool) -> ArmTally {
        use rand::{Rng, SeedableRng};
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
        let mut t = ArmTally::default();
        for r in 0..n {
            let mut rep = ReplicationTally::new(r, 2, 0);
            rep.group_cycles = rng.random_range(50..100);
            rep.groups_repaid = rng.random_range(0..=rep.group_cycles);
            rep.disbursed = if no_loans { 0.0 } else { rng.random_range(1.0..1e4) };
            rep.loss = rng.random_range(0.0..rep.disbursed.max(1.0));
            rep.collected = rng.random_range(0.0..1e4);
            rep.served_slot_cycles = rng.random_range(0..500);
            rep.excluded_slot_cycles = rng.random_range(0..100);
            rep.empty_slot_cycles = rng.random_range(0..100);
            t.push(rep);
        }
        t
    }

    /// The figures of two arms, read from their replications all at once, are each what the
    /// estimators give on that figure's collected pairs.
    #[test]
    fn paired_figures_equal_the_estimators_on_collected_pairs() {
        let collected =
            |t: &ArmTally, metric: Metric| -> Vec<(f64, f64)> { t.replications.iter().map(|r| metric.1(&r)).collect() };
        let bits = |e: Option<RatioEstimate>| e.map(|e| (e.rate.to_bits(), e.standard_error.map(f64::to_bits)));
        for (n, no_loans) in [(1, false), (2, false), (37, false), (37, true)] {
            let (a, b) = (varied(n, 1, false), varied(n, 2, no_loans));
            let figures = paired_figures(&a, &b, &COMPARED);
            for (metric, figure) in COMPARED.into_iter().zip(figures) {
                let (pa, pb) = (collected(&a, metric), collected(&b, metric));
                let expected = estimate::paired_ratio_difference(&pa, &pb);
                assert_eq!(
                    bits(figure.map(|f| f.difference)),
                    bits(expected),
                    "{} n = {n}",
                    metric.0
                );
                if let Some(f) = figure {
                    let own = |p: &[(f64, f64)]| estimate::ratio(p.iter().copied()).and_then(|r| r.standard_error);
                    assert_eq!(f.own_se.0.map(f64::to_bits), own(&pa).map(f64::to_bits));
                    assert_eq!(f.own_se.1.map(f64::to_bits), own(&pb).map(f64::to_bits));
                }
            }
        }
        // arms of different lengths are not paired
        assert!(
            paired_figures(&varied(5, 1, false), &varied(6, 2, false), &COMPARED)
                .iter()
                .all(Option::is_none)
        );
    }

    #[test]
    fn a_single_arm_has_no_best_arm() {
        let one = [("base", 5, tally(&[5, 6], &[10, 10]))];
        assert!(best_arm(&arms(&one)).is_none());
    }

    #[test]
    fn the_best_arm_ranks_pooled_ratios_not_means_of_replication_rates() {
        // Arm a: replication rates 1/1 and 50/100, mean of rates 0.75, pooled 51/101 = 0.505.
        // Arm b: 60/100 and 60/100, mean and pooled 0.6. Pooled ratios (the rates summary.csv
        // reports) make b the best; the unweighted mean of replication rates would pick a.
        let list = [
            ("a", 2, tally(&[1, 50], &[1, 100])),
            ("b", 3, tally(&[60, 60], &[100, 100])),
        ];
        let best = best_arm(&arms(&list)).unwrap();
        assert_eq!(best.label, "b");
        assert_eq!(best.arm_index, 1);
    }

    #[test]
    fn a_clearly_worse_arm_leaves_the_set_and_a_tie_stays() {
        // Arms b and c repay exactly 30 points less than a in every replication: the paired
        // difference is 0.3 with zero standard error, so both leave the set; a copy of a stays.
        let served = [100u64; 8];
        let good: Vec<u64> = (0..8).map(|r| 60 + r).collect();
        let bad: Vec<u64> = good.iter().map(|g| g - 30).collect();
        let list = [
            ("a", 2, tally(&good, &served)),
            ("b", 3, tally(&bad, &served)),
            ("copy", 4, tally(&good, &served)),
            ("c", 5, tally(&bad, &served)),
        ];
        let best = best_arm(&arms(&list)).unwrap();
        assert_eq!(best.label, "a");
        assert_eq!(best.confidence_set, ["a", "copy"]);
        assert_eq!(best.confidence_set_group_sizes, [2, 4]);
    }

    #[test]
    fn a_noisy_small_gap_stays_in_the_set() {
        // b trails a by 1 point on average but the paired differences swing by +-10 points between
        // replications: far inside the one-sided 5% bound, so b is not significantly worse.
        let served = [100u64; 6];
        let a = [60u64, 70, 60, 70, 60, 70];
        let b = [69u64, 59, 69, 59, 69, 59];
        let list = [("a", 2, tally(&a, &served)), ("b", 3, tally(&b, &served))];
        let best = best_arm(&arms(&list)).unwrap();
        assert_eq!(best.confidence_set, ["a", "b"]);
    }

    #[test]
    fn differences_skip_the_reference_and_pair_by_replication() {
        let served = [100u64; 4];
        let list = [
            ("a", 2, tally(&[50, 60, 70, 80], &served)),
            ("b", 3, tally(&[55, 65, 75, 85], &served)),
        ];
        let d = differences(&arms(&list), 0);
        let g = d.iter().find(|d| d.metric == "group_repayment_rate").unwrap();
        assert_eq!((g.arm.as_str(), g.baseline.as_str()), ("b", "a"));
        assert_eq!(g.significant, Some(true));
        assert!((g.difference - 0.05).abs() < 1e-15);
        assert!(g.standard_error.unwrap() < 1e-15);
        assert!(d.iter().all(|d| d.arm == "b"));
    }

    #[test]
    fn arms_are_named_by_label_or_by_number_from_one() {
        let labels = ["base", "group_size=4", "7"];
        assert_eq!(resolve_arm(&labels, "group_size=4"), Ok(1));
        assert_eq!(resolve_arm(&labels, "1"), Ok(0));
        // A label wins over a number that spells the same text.
        assert_eq!(resolve_arm(&labels, "7"), Ok(2));
        assert!(resolve_arm(&labels, "0").unwrap_err().contains("from 1 to 3"));
        assert!(resolve_arm(&labels, "4").is_err());
        assert!(resolve_arm(&labels, "size").unwrap_err().contains("`size`"));
    }

    #[test]
    fn minimising_a_figure_picks_the_lowest_and_keeps_ties() {
        // Loss rate per replication: a loses 5% and b 2% of what they lend in every replication; a
        // copy of b ties with it exactly.
        let arm_with_loss = |loss: f64| {
            let mut t = ArmTally::default();
            for r in 0..5 {
                let mut rep = ReplicationTally::new(r, 2, 0);
                rep.loss = loss * (100.0 + f64::from(r));
                rep.disbursed = 100.0 + f64::from(r);
                t.push(rep);
            }
            t
        };
        let list = [
            ("a", 2, arm_with_loss(0.05)),
            ("b", 3, arm_with_loss(0.02)),
            ("copy", 4, arm_with_loss(0.02)),
        ];
        let best = best_arm_by(&arms(&list), COMPARED[1], Direction::Minimize).unwrap();
        assert_eq!(best.label, "b");
        assert_eq!(best.confidence_set, ["b", "copy"]);
    }
}
