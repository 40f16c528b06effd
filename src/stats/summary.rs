//! Per-arm figures computed from an arm's replications: the rows of summary.csv and the time series.

use crate::scenario::Scenario;
use crate::stats::estimate::{self, RatioEstimate};
use crate::stats::{ArmTally, CycleSums, cycle_tail};
use serde::Serialize;

/// Every figure reported for one arm. `None` is an empty cell (zero denominator, too few values).
#[derive(Debug, Clone, Serialize)]
pub struct ArmSummary {
    /// Replications simulated.
    pub replications: u64,
    /// Replications that lent nothing in their counted cycles (left out of loss quantiles).
    pub replications_without_lending: u64,
    /// Groups served, summed over counted cycles and replications.
    pub group_cycles: u64,
    /// Share of group-cycles repaid in full, with its interval.
    pub group_repayment: Option<Interval>,
    /// Member loans served.
    pub member_loans: u64,
    /// Members with a shortfall / member loans.
    pub member_shortfall_rate: Option<f64>,
    /// Defaulting members (or members of defaulting groups) / member loans.
    pub member_default_rate: Option<f64>,
    /// Group-cycles in which no member had a shortfall / group-cycles.
    pub shortfall_free_group_rate: Option<f64>,
    /// (1 - member_shortfall_rate)^k: the shortfall-free share independent members would give.
    pub iid_shortfall_free: Option<f64>,
    /// shortfall_free_group_rate / iid_shortfall_free: 1 for independent members whatever the
    /// cover, above 1 when shortfalls cluster in the same groups.
    pub dependence_ratio: Option<f64>,
    /// 1 - group_repayment_rate^(1/k): the per-member failure rate a naive analyst would infer from
    /// group repayment, peer cover included.
    pub implied_member_failure: Option<f64>,
    /// Rescued groups / group-cycles.
    pub rescued_rate: Option<f64>,
    /// Collected / due.
    pub value_repayment_rate: Option<f64>,
    /// Loss / principal disbursed, with its interval.
    pub loss_rate: Option<Interval>,
    /// (collected + recovered + fees - disbursed - cost of funds - operating cost) / disbursed.
    pub net_yield: Option<f64>,
    /// Mean shares of slots served, excluded, waiting and empty.
    pub served_share: Option<f64>,
    /// See `served_share`.
    pub excluded_share: Option<f64>,
    /// See `served_share`.
    pub waiting_share: Option<f64>,
    /// See `served_share`.
    pub empty_share: Option<f64>,
    /// Quantiles of per-replication loss rates.
    pub loss_p50: Option<f64>,
    /// See `loss_p50`.
    pub loss_p95: Option<f64>,
    /// See `loss_p50`.
    pub loss_p99: Option<f64>,
    /// See `loss_p50`.
    pub loss_p999: Option<f64>,
    /// Mean of per-replication loss rates at or above their 99% quantile.
    pub loss_es99: Option<f64>,
    /// Quantiles of single-cycle loss rates over all counted replication-cycles.
    pub loss_cycle_p99: Option<f64>,
    /// See `loss_cycle_p99`.
    pub loss_cycle_p999: Option<f64>,
    /// Median over replications of the replication's worst single-cycle loss rate.
    pub worst_cycle_loss_p50: Option<f64>,
    /// 95% quantile over replications of the worst single-cycle loss rate: the worst period in a
    /// bad year, as a risk officer quotes it.
    pub worst_cycle_loss_p95: Option<f64>,
    /// See `worst_cycle_loss_p95`.
    pub worst_cycle_loss_p99: Option<f64>,
    /// Intra-group correlation of member shortfalls (beta-binomial moment estimator, each group at
    /// its own size).
    pub shortfall_icc: Option<f64>,
    /// Member loans / group-cycles: the size groups actually had (the nominal k when every group has k).
    pub mean_group_size: Option<f64>,
    /// Members excluded (for a term or for good) / member loans.
    pub exclusion_events: Option<f64>,
    /// Members removed for good by permanent exclusion / member loans.
    pub removal_rate: Option<f64>,
    /// New entrants after the first cycle / member loans.
    pub entrant_rate: Option<f64>,
    /// Distinct borrowers who took at least one loan in the counted cycles, mean per replication.
    pub clients_reached: Option<f64>,
    /// Mean share of slots whose occupant was removed and that are not yet refilled (part of
    /// `empty_share`).
    pub removed_share: Option<f64>,
    // The quantiles' 95% intervals: order statistics at binomial ranks over replications for the
    // horizon and worst-cycle figures; Woodruff's interval with replications as clusters for the
    // per-cycle figures, whose cycles are not independent within a replication.
    /// Lower end of the distribution-free 95% interval for `loss_p50` (empty with too few values).
    pub loss_p50_ci_low: Option<f64>,
    /// Upper end of that interval.
    pub loss_p50_ci_high: Option<f64>,
    /// Lower end of the distribution-free 95% interval for `loss_p95` (empty with too few values).
    pub loss_p95_ci_low: Option<f64>,
    /// Upper end of that interval.
    pub loss_p95_ci_high: Option<f64>,
    /// Lower end of the distribution-free 95% interval for `loss_p99` (empty with too few values).
    pub loss_p99_ci_low: Option<f64>,
    /// Upper end of that interval.
    pub loss_p99_ci_high: Option<f64>,
    /// Lower end of the distribution-free 95% interval for `loss_p999` (empty with too few values).
    pub loss_p999_ci_low: Option<f64>,
    /// Upper end of that interval.
    pub loss_p999_ci_high: Option<f64>,
    /// Lower end of the distribution-free 95% interval for `loss_cycle_p99` (empty with too few values).
    pub loss_cycle_p99_ci_low: Option<f64>,
    /// Upper end of that interval.
    pub loss_cycle_p99_ci_high: Option<f64>,
    /// Lower end of the distribution-free 95% interval for `loss_cycle_p999` (empty with too few values).
    pub loss_cycle_p999_ci_low: Option<f64>,
    /// Upper end of that interval.
    pub loss_cycle_p999_ci_high: Option<f64>,
    /// Lower end of the distribution-free 95% interval for `worst_cycle_loss_p50` (empty with too few values).
    pub worst_cycle_loss_p50_ci_low: Option<f64>,
    /// Upper end of that interval.
    pub worst_cycle_loss_p50_ci_high: Option<f64>,
    /// Lower end of the distribution-free 95% interval for `worst_cycle_loss_p95` (empty with too few values).
    pub worst_cycle_loss_p95_ci_low: Option<f64>,
    /// Upper end of that interval.
    pub worst_cycle_loss_p95_ci_high: Option<f64>,
    /// Lower end of the distribution-free 95% interval for `worst_cycle_loss_p99` (empty with too few values).
    pub worst_cycle_loss_p99_ci_low: Option<f64>,
    /// Upper end of that interval.
    pub worst_cycle_loss_p99_ci_high: Option<f64>,
    /// Members able to pay who walked away / members able to pay, with its interval.
    pub strategic_default_rate: Option<Interval>,
    /// Members able to pay (capacity at least the amount due), summed over counted cycles.
    pub able_members: u64,
    /// Principal disbursed / member loans: the mean loan size, which grows with progressive lending.
    pub mean_principal: Option<f64>,
}

/// A rate with its 95% interval (empty ends with fewer than 2 replications).
#[derive(Debug, Clone, Copy, Serialize)]
pub struct Interval {
    /// The pooled rate.
    pub rate: f64,
    /// Standard error from between-replication variation.
    pub standard_error: Option<f64>,
    /// Lower end (rate - 1.959964 SE), not clamped.
    pub ci_low: Option<f64>,
    /// Upper end, not clamped.
    pub ci_high: Option<f64>,
}

impl From<RatioEstimate> for Interval {
    fn from(r: RatioEstimate) -> Self {
        Interval {
            rate: r.rate,
            standard_error: r.standard_error,
            ci_low: r.ci_low(),
            ci_high: r.ci_high(),
        }
    }
}

/// One point of the time series: means over replications of per-cycle figures.
#[derive(Debug, Clone, Serialize)]
pub struct CyclePoint {
    /// Cycle number counted from 1 with the warm-up, as stress windows are (the first counted cycle
    /// is warmup_cycles + 1).
    pub cycle: u32,
    /// Mean served share.
    pub served_share: Option<f64>,
    /// Mean group repayment rate (over replications that served a group in this cycle).
    pub group_repayment_rate: Option<f64>,
    /// Mean loss rate (over replications that lent in this cycle).
    pub loss_rate: Option<f64>,
    /// Mean excluded share.
    pub excluded_share: Option<f64>,
}

fn share(num: u64, den: u64) -> Option<f64> {
    (den > 0).then(|| num as f64 / den as f64)
}

fn fraction(num: f64, den: f64) -> Option<f64> {
    (den != 0.0).then(|| num / den)
}

/// Summarises one arm with groups of `group_size`.
pub fn summarize_arm(tally: &ArmTally, group_size: u32) -> ArmSummary {
    let reps = &tally.replications;
    // every count and amount in one pass (the replications may be read back from disk; the passes
    // here read numbers only, never a histogram or years)
    let counts = crate::stats::tally::totals(reps.iter_numbers());
    let sum_u = |f: fn(&crate::stats::ReplicationTally) -> u64| f(&counts);
    let sum_f = |f: fn(&crate::stats::ReplicationTally) -> f64| f(&counts);
    let group_cycles = sum_u(|r| r.group_cycles);
    let member_loans = sum_u(|r| r.member_loans);
    let k = f64::from(group_size);
    // Ratios read the replications twice rather than hold a pair per replication (flat memory).
    let group_repayment = estimate::ratio_in_passes(|| {
        reps.iter_numbers()
            .map(|r| (r.groups_repaid as f64, r.group_cycles as f64))
    })
    .map(Interval::from);
    let loss_rate =
        estimate::ratio_in_passes(|| reps.iter_numbers().map(|r| (r.loss, r.disbursed))).map(Interval::from);
    let member_shortfall_rate = share(sum_u(|r| r.member_shortfalls), member_loans);
    let shortfall_free_group_rate = share(sum_u(|r| r.shortfall_free_groups), group_cycles);
    let by_size = sizes_vary(tally).then(|| pooled_by_size(tally));
    let iid_shortfall_free = match &by_size {
        // the mean over groups of (1 - q)^(own size)
        Some(rows) => member_shortfall_rate.and_then(|q| {
            let groups: u64 = rows.iter().map(|(_, c)| c.iter().sum::<u64>()).sum();
            let weighted: f64 = rows
                .iter()
                .map(|(size, c)| c.iter().sum::<u64>() as f64 * (1.0 - q).powf(f64::from(*size)))
                .sum();
            (groups > 0).then(|| weighted / groups as f64)
        }),
        None => member_shortfall_rate.map(|q| (1.0 - q).powf(k)),
    };
    let mean_group_size = share(member_loans, group_cycles);
    // the naive inversion reads group repayment at the size groups actually had
    let inversion_size = if by_size.is_some() {
        mean_group_size.unwrap_or(k)
    } else {
        k
    };
    let dependence_ratio = match (shortfall_free_group_rate, iid_shortfall_free) {
        (Some(free), Some(iid)) if iid > 0.0 => Some(free / iid),
        _ => None,
    };
    let due = sum_f(|r| r.due);
    let collected = sum_f(|r| r.collected);
    let disbursed = sum_f(|r| r.disbursed);
    let recovered = sum_f(|r| r.recovered);
    let slot_cycles: u64 = counts.slot_cycles();
    // Quantiles over replications from passes over them, not a sorted copy (flat memory).
    let rep_losses = estimate::PassQuantiles::new(
        || reps.iter_numbers().filter_map(|r| r.loss_rate()),
        &[0.5, 0.95, 0.99, 0.999],
        Some(0.99),
    );
    let horizon_ci = |q: f64| rep_losses.interval(q).unzip();
    // The per-cycle loss quantiles read the top of all replication-cycles that lent, which the
    // arm's tail holds (largest first).
    let tail = tally.cycle_tail.descending();
    let lent_cycles = tally.lent_cycles();
    let cycle_at = |i: usize| cycle_tail::order_statistic(&tail, lent_cycles, i);
    let cycle_counts = |x: f64| {
        // Every rate above x is in the tail (x is at or above a value the tail holds), so each
        // replication's rates at or below x are its cycles that lent less those above x.
        let mut above: std::collections::HashMap<u32, u32> = std::collections::HashMap::new();
        for e in tail.iter().take_while(|e| e.loss_rate > x) {
            *above.entry(e.replication).or_default() += 1;
        }
        reps.iter_numbers().map(move |r| {
            let lent = r.lent_cycles;
            let over = above.get(&r.replication).copied().unwrap_or(0);
            (f64::from(lent - over), f64::from(lent))
        })
    };
    let cycle_ci = |q: f64| estimate::clustered_quantile_interval(lent_cycles, q, cycle_at, cycle_counts).unzip();
    let worst = estimate::PassQuantiles::new(
        || reps.iter_numbers().filter_map(|r| r.worst_cycle_loss),
        &[0.5, 0.95, 0.99],
        None,
    );
    let worst_ci = |q: f64| worst.interval(q).unzip();
    let (loss_p50_ci_low, loss_p50_ci_high) = horizon_ci(0.5);
    let (loss_p95_ci_low, loss_p95_ci_high) = horizon_ci(0.95);
    let (loss_p99_ci_low, loss_p99_ci_high) = horizon_ci(0.99);
    let (loss_p999_ci_low, loss_p999_ci_high) = horizon_ci(0.999);
    let (loss_cycle_p99_ci_low, loss_cycle_p99_ci_high) = cycle_ci(0.99);
    let (loss_cycle_p999_ci_low, loss_cycle_p999_ci_high) = cycle_ci(0.999);
    let (worst_cycle_loss_p50_ci_low, worst_cycle_loss_p50_ci_high) = worst_ci(0.5);
    let (worst_cycle_loss_p95_ci_low, worst_cycle_loss_p95_ci_high) = worst_ci(0.95);
    let (worst_cycle_loss_p99_ci_low, worst_cycle_loss_p99_ci_high) = worst_ci(0.99);
    ArmSummary {
        replications: reps.len() as u64,
        replications_without_lending: reps.iter_numbers().filter(|r| r.loss_rate().is_none()).count() as u64,
        group_cycles,
        group_repayment,
        member_loans,
        member_shortfall_rate,
        member_default_rate: share(sum_u(|r| r.member_defaults), member_loans),
        shortfall_free_group_rate,
        iid_shortfall_free,
        dependence_ratio,
        implied_member_failure: group_repayment.map(|g| 1.0 - g.rate.max(0.0).powf(1.0 / inversion_size)),
        rescued_rate: share(sum_u(|r| r.groups_rescued), group_cycles),
        value_repayment_rate: fraction(collected, due),
        loss_rate,
        net_yield: fraction(
            crate::stats::tally::net_income(
                collected,
                recovered,
                sum_f(|r| r.fees),
                disbursed,
                sum_f(|r| r.cost_of_funds),
                sum_f(|r| r.operating_cost),
            ),
            disbursed,
        ),
        served_share: share(sum_u(|r| r.served_slot_cycles), slot_cycles),
        excluded_share: share(sum_u(|r| r.excluded_slot_cycles), slot_cycles),
        waiting_share: share(sum_u(|r| r.waiting_slot_cycles), slot_cycles),
        empty_share: share(sum_u(|r| r.empty_slot_cycles), slot_cycles),
        loss_p50: rep_losses.quantile(0.5),
        loss_p95: rep_losses.quantile(0.95),
        loss_p99: rep_losses.quantile(0.99),
        loss_p999: rep_losses.quantile(0.999),
        loss_es99: rep_losses.expected_shortfall(),
        loss_cycle_p99: estimate::quantile_of_ranked(lent_cycles, 0.99, cycle_at),
        loss_cycle_p999: estimate::quantile_of_ranked(lent_cycles, 0.999, cycle_at),
        worst_cycle_loss_p50: worst.quantile(0.5),
        worst_cycle_loss_p95: worst.quantile(0.95),
        worst_cycle_loss_p99: worst.quantile(0.99),
        shortfall_icc: match &by_size {
            Some(rows) => mixed_size_icc(rows),
            None => shortfall_icc(tally, group_size),
        },
        mean_group_size,
        exclusion_events: share(sum_u(|r| r.exclusion_events), member_loans),
        removal_rate: share(sum_u(|r| r.removals), member_loans),
        entrant_rate: share(sum_u(|r| r.entrants), member_loans),
        clients_reached: (!reps.is_empty()).then(|| sum_u(|r| r.clients_reached) as f64 / reps.len() as f64),
        removed_share: share(sum_u(|r| r.removed_slot_cycles), slot_cycles),
        loss_p50_ci_low,
        loss_p50_ci_high,
        loss_p95_ci_low,
        loss_p95_ci_high,
        loss_p99_ci_low,
        loss_p99_ci_high,
        loss_p999_ci_low,
        loss_p999_ci_high,
        loss_cycle_p99_ci_low,
        loss_cycle_p99_ci_high,
        loss_cycle_p999_ci_low,
        loss_cycle_p999_ci_high,
        worst_cycle_loss_p50_ci_low,
        worst_cycle_loss_p50_ci_high,
        worst_cycle_loss_p95_ci_low,
        worst_cycle_loss_p95_ci_high,
        worst_cycle_loss_p99_ci_low,
        worst_cycle_loss_p99_ci_high,
        strategic_default_rate: estimate::ratio_in_passes(|| {
            reps.iter_numbers()
                .map(|r| (r.strategic_defaults as f64, r.able_members as f64))
        })
        .map(Interval::from),
        able_members: sum_u(|r| r.able_members),
        mean_principal: fraction(disbursed, member_loans as f64),
    }
}

/// Whether the arm's groups may differ in size (its tallies' histograms have several size rows).
fn sizes_vary(tally: &ArmTally) -> bool {
    tally
        .replications
        .first()
        .is_some_and(|r| r.smallest_group_size != r.largest_group_size)
}

/// Groups by (size, members short), summed over replications: (size, counts by the number short).
pub fn pooled_by_size(tally: &ArmTally) -> Vec<(u32, Vec<u64>)> {
    let mut rows: Vec<(u32, Vec<u64>)> = Vec::new();
    for r in &tally.replications {
        for (size, cells) in r.shortfalls_by_size() {
            match rows.iter_mut().find(|(s, _)| *s == size) {
                Some((_, sum)) => sum.iter_mut().zip(cells).for_each(|(a, b)| *a += b),
                None => rows.push((size, cells.to_vec())),
            }
        }
    }
    rows
}

/// The moment estimator of the intra-group correlation with each group at its own size s: with q
/// the pooled shortfall rate, E[(n - s q)^2] = s q (1 - q) (1 + (s - 1) icc), summed over groups and
/// solved for icc. With a single size it is the estimator of [`shortfall_icc`]. `None` when no group
/// has two members, or q is 0 or 1.
pub fn mixed_size_icc(rows: &[(u32, Vec<u64>)]) -> Option<f64> {
    let (mut members, mut short, mut pairs) = (0.0, 0.0, 0.0);
    for (size, counts) in rows {
        let s = f64::from(*size);
        for (n, &c) in counts.iter().enumerate() {
            let c = c as f64;
            members += c * s;
            short += c * n as f64;
            pairs += c * s * (s - 1.0);
        }
    }
    if members == 0.0 || pairs == 0.0 {
        return None;
    }
    let q = short / members;
    let spread = q * (1.0 - q);
    if spread <= 0.0 {
        return None;
    }
    let squares: f64 = rows
        .iter()
        .flat_map(|(size, counts)| {
            let s = f64::from(*size);
            counts
                .iter()
                .enumerate()
                .map(move |(n, &c)| c as f64 * (n as f64 - s * q).powi(2))
        })
        .sum();
    Some((squares / spread - members) / pairs)
}

/// Beta-binomial moment estimator of the intra-group correlation of member shortfalls: with n the
/// number short in a group of k and q the pooled shortfall rate, Var(n) = k q (1 - q) (1 + (k - 1) icc).
/// `None` for k = 1, without groups, or when q is 0 or 1.
pub fn shortfall_icc(tally: &ArmTally, group_size: u32) -> Option<f64> {
    if group_size < 2 {
        return None;
    }
    let k = f64::from(group_size);
    let mut hist = vec![0u64; group_size as usize + 1];
    for r in &tally.replications {
        for (h, c) in hist.iter_mut().zip(&r.shortfall_histogram) {
            *h += c;
        }
    }
    let groups: u64 = hist.iter().sum();
    if groups == 0 {
        return None;
    }
    let g = groups as f64;
    let mean = hist.iter().enumerate().map(|(n, &c)| n as f64 * c as f64).sum::<f64>() / g;
    let var = hist
        .iter()
        .enumerate()
        .map(|(n, &c)| (n as f64 - mean).powi(2) * c as f64)
        .sum::<f64>()
        / g;
    let q = mean / k;
    let binomial_var = k * q * (1.0 - q);
    (binomial_var > 0.0).then(|| (var / binomial_var - 1.0) / (k - 1.0))
}

/// The time series of one arm: per counted cycle, means over replications.
pub fn time_series(tally: &ArmTally, scenario: &Scenario) -> Vec<CyclePoint> {
    let n = f64::from(scenario.borrowers());
    let none = CycleSums::default();
    (0..scenario.cycles() as usize)
        .map(|c| {
            let sums = tally.cycle_sums.get(c).unwrap_or(&none);
            let per = |count: u64| (count > 0).then_some(count as f64);
            CyclePoint {
                cycle: scenario.warmup_cycles() + c as u32 + 1,
                served_share: per(sums.records).map(|r| sums.served as f64 / n / r),
                group_repayment_rate: per(sums.with_groups).map(|g| sums.repaid_share.value() / g),
                loss_rate: per(sums.lent).map(|l| sums.loss_rate.value() / l),
                excluded_share: per(sums.records).map(|r| sums.excluded as f64 / n / r),
            }
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stats::ReplicationTally;

    /// With one group size the per-size estimator is the beta-binomial one: the same data, two
    /// formulas (deviations about the pooled mean, and Var(n) = k q (1 - q) (1 + (k - 1) icc)).
    #[test]
    fn the_mixed_size_icc_reduces_to_the_single_size_estimator() {
        let mut t = ReplicationTally::new(0, 4, 0);
        for (short, groups) in [(0, 50), (1, 30), (2, 12), (3, 5), (4, 3)] {
            for _ in 0..groups {
                t.count_group_shortfalls(4, short);
            }
        }
        let mut tally = ArmTally::default();
        tally.push(t);
        let single = shortfall_icc(&tally, 4).unwrap();
        let rows = vec![(4, tally.replications.get(0).unwrap().shortfall_histogram.clone())];
        let mixed = mixed_size_icc(&rows).unwrap();
        assert!((single - mixed).abs() < 1e-12, "{single} vs {mixed}");
        assert!(single > 0.0);
    }

    /// Groups of several sizes land in their own rows, and the pooled rows add replications.
    #[test]
    fn shortfalls_are_kept_per_group_size() {
        let mut tally = ArmTally::default();
        for r in 0..2 {
            let mut t = ReplicationTally::with_group_sizes(r, 4, 6, 0);
            t.count_group_shortfalls(4, 1);
            t.count_group_shortfalls(6, 6);
            t.count_group_shortfalls(6, 0);
            tally.push(t);
        }
        let rows = pooled_by_size(&tally);
        assert_eq!(rows[0], (4, vec![0, 2, 0, 0, 0]));
        assert_eq!(rows[1], (5, vec![0; 6]));
        assert_eq!(rows[2], (6, vec![2, 0, 0, 0, 0, 0, 2]));
    }
}
