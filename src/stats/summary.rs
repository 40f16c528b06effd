//! Per-arm figures computed from an arm's replications: the rows of summary.csv and the time series.

use crate::scenario::Scenario;
use crate::stats::ArmTally;
use crate::stats::estimate::{self, RatioEstimate};
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
    /// Intra-group correlation of member shortfalls (beta-binomial moment estimator).
    pub shortfall_icc: Option<f64>,
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
    let sum_u = |f: fn(&crate::stats::ReplicationTally) -> u64| reps.iter().map(f).sum::<u64>();
    let sum_f = |f: fn(&crate::stats::ReplicationTally) -> f64| reps.iter().map(f).sum::<f64>();
    let group_cycles = sum_u(|r| r.group_cycles);
    let member_loans = sum_u(|r| r.member_loans);
    let k = f64::from(group_size);
    let group_repayment =
        estimate::ratio(reps.iter().map(|r| (r.groups_repaid as f64, r.group_cycles as f64))).map(Interval::from);
    let loss_rate = estimate::ratio(reps.iter().map(|r| (r.loss, r.disbursed))).map(Interval::from);
    let member_shortfall_rate = share(sum_u(|r| r.member_shortfalls), member_loans);
    let shortfall_free_group_rate = share(sum_u(|r| r.shortfall_free_groups), group_cycles);
    let iid_shortfall_free = member_shortfall_rate.map(|q| (1.0 - q).powf(k));
    let dependence_ratio = match (shortfall_free_group_rate, iid_shortfall_free) {
        (Some(free), Some(iid)) if iid > 0.0 => Some(free / iid),
        _ => None,
    };
    let due = sum_f(|r| r.due);
    let collected = sum_f(|r| r.collected);
    let disbursed = sum_f(|r| r.disbursed);
    let recovered = sum_f(|r| r.recovered);
    let slot_cycles: u64 = reps.iter().map(|r| r.slot_cycles()).sum();
    let rep_losses: Vec<f64> = reps.iter().filter_map(|r| r.loss_rate()).collect();
    let rep_losses = estimate::sorted(&rep_losses);
    let cycle_losses: Vec<f64> = reps
        .iter()
        .flat_map(|r| {
            r.cycles
                .iter()
                .filter(|c| c.disbursed > 0.0)
                .map(|c| c.loss / c.disbursed)
        })
        .collect();
    let cycle_losses = estimate::sorted(&cycle_losses);
    let worst: Vec<f64> = reps
        .iter()
        .filter_map(crate::stats::replications::worst_cycle_loss)
        .collect();
    let worst = estimate::sorted(&worst);
    ArmSummary {
        replications: reps.len() as u64,
        replications_without_lending: reps.iter().filter(|r| r.loss_rate().is_none()).count() as u64,
        group_cycles,
        group_repayment,
        member_loans,
        member_shortfall_rate,
        member_default_rate: share(sum_u(|r| r.member_defaults), member_loans),
        shortfall_free_group_rate,
        iid_shortfall_free,
        dependence_ratio,
        implied_member_failure: group_repayment.map(|g| 1.0 - g.rate.max(0.0).powf(1.0 / k)),
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
        loss_p50: estimate::quantile_sorted(&rep_losses, 0.5),
        loss_p95: estimate::quantile_sorted(&rep_losses, 0.95),
        loss_p99: estimate::quantile_sorted(&rep_losses, 0.99),
        loss_p999: estimate::quantile_sorted(&rep_losses, 0.999),
        loss_es99: estimate::expected_shortfall_sorted(&rep_losses, 0.99),
        loss_cycle_p99: estimate::quantile_sorted(&cycle_losses, 0.99),
        loss_cycle_p999: estimate::quantile_sorted(&cycle_losses, 0.999),
        worst_cycle_loss_p50: estimate::quantile_sorted(&worst, 0.5),
        worst_cycle_loss_p95: estimate::quantile_sorted(&worst, 0.95),
        worst_cycle_loss_p99: estimate::quantile_sorted(&worst, 0.99),
        shortfall_icc: shortfall_icc(tally, group_size),
    }
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
    let n = f64::from(scenario.borrowers);
    (0..scenario.cycles as usize)
        .map(|c| {
            let mut served = (0.0, 0u64);
            let mut repay = (0.0, 0u64);
            let mut loss = (0.0, 0u64);
            let mut excluded = (0.0, 0u64);
            for r in &tally.replications {
                let Some(rec) = r.cycles.get(c) else { continue };
                served.0 += f64::from(rec.served) / n;
                served.1 += 1;
                excluded.0 += f64::from(rec.excluded) / n;
                excluded.1 += 1;
                if rec.groups > 0 {
                    repay.0 += f64::from(rec.groups_repaid) / f64::from(rec.groups);
                    repay.1 += 1;
                }
                if rec.disbursed > 0.0 {
                    loss.0 += rec.loss / rec.disbursed;
                    loss.1 += 1;
                }
            }
            let mean = |(s, c): (f64, u64)| (c > 0).then(|| s / c as f64);
            CyclePoint {
                cycle: scenario.warmup_cycles + c as u32 + 1,
                served_share: mean(served),
                group_repayment_rate: mean(repay),
                loss_rate: mean(loss),
                excluded_share: mean(excluded),
            }
        })
        .collect()
}
