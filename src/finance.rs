//! A year, money and capital: the figures a lender's risk officer signs.
//!
//! The engine counts loan cycles; a lender plans, reports and holds capital by the year, in money,
//! after the costs of lending. This module maps cycles to years (`[finance] cycles_per_year`), charges
//! fees and costs to each replication from its own aggregates (principal disbursed, loans served), and
//! summarises an arm's years: the annual loss law pooled over replication-years, the money a year
//! brings in and costs, operational self-sufficiency, and the capital a tail of that law calls for
//! beside the Basel II retail formula and the exact portfolio law where the scenario is in its class.
//!
//! Every money figure is derived from the per-cycle aggregates (disbursed, collected, loss,
//! recovered), never from settlement internals, so any change to how a loan settles flows through.

use crate::analytic::basel;
use crate::analytic::portfolio_law::{AnnualDefaultLaw, PortfolioDefaultLaw};
use crate::scenario::{Arm, Finance, Scenario, ShockScope};
use crate::stats::estimate;
use crate::stats::summary::Interval;
use crate::stats::{ArmTally, ReplicationTally};
use serde::Serialize;

/// The confidence level of the unexpected loss, as the Basel formula's.
pub const UNEXPECTED_LOSS_LEVEL: f64 = 0.999;

/// Charges one replication's fees and costs from its aggregates: fees and cost of funds on the
/// principal disbursed (each loan is outstanding for exactly its one cycle, so the principal
/// outstanding summed over cycles is the principal disbursed), operating cost per member loan.
pub fn charge(tally: &mut ReplicationTally, finance: &Finance) {
    tally.fees = finance.fee_rate() * tally.disbursed;
    tally.cost_of_funds = finance.cost_of_funds() * tally.disbursed;
    tally.operating_cost = finance.operating_cost() * tally.member_loans as f64;
}

/// Interest collected: collections pay interest first, so what was collected beyond the principal
/// repaid (principal disbursed minus unpaid principal, and unpaid principal = loss + recovered).
pub fn interest_collected(collected: f64, disbursed: f64, loss: f64, recovered: f64) -> f64 {
    collected - (disbursed - (loss + recovered))
}

/// One replication-year: a block of `cycles_per_year` consecutive counted cycles (kept with each
/// replication's tally, so the per-cycle records need not be).
pub use crate::stats::tally::Year;

/// The tail of the annual loss law: quantiles pooled over replication-years (type 7), ES at 99%.
#[derive(Debug, Clone, Default, Serialize)]
pub struct AnnualTail {
    /// Mean over replication-years.
    pub mean: Option<f64>,
    /// Median.
    pub p50: Option<f64>,
    /// 95% quantile.
    pub p95: Option<f64>,
    /// 99% quantile.
    pub p99: Option<f64>,
    /// 99.9% quantile.
    pub p999: Option<f64>,
    /// Mean of the values at or above the 99% quantile.
    pub es99: Option<f64>,
}

impl AnnualTail {
    /// The tail of the values `values()` yields, read in passes (it is called a few times and must
    /// yield the same values each time): no value per replication-year is held. The mean is their
    /// exact sum, rounded once, over their number, so it does not depend on the order of the years.
    fn of<I: Iterator<Item = f64>>(values: impl Fn() -> I) -> Self {
        let levels = [0.5, 0.95, 0.99, UNEXPECTED_LOSS_LEVEL];
        let quantiles = estimate::PassQuantiles::new(&values, &levels, Some(0.99));
        let mut sum = crate::stats::exact_sum::ExactSum::default();
        values().for_each(|v| sum.push(v));
        let n = quantiles.len();
        AnnualTail {
            mean: (n > 0).then(|| sum.value() / n as f64),
            p50: quantiles.quantile(0.5),
            p95: quantiles.quantile(0.95),
            p99: quantiles.quantile(0.99),
            p999: quantiles.quantile(UNEXPECTED_LOSS_LEVEL),
            es99: quantiles.expected_shortfall(),
        }
    }
}

/// Money per replication-year, in currency: means over every replication-year of the arm.
#[derive(Debug, Clone, Default, Serialize)]
pub struct Money {
    /// Principal disbursed in a year.
    pub disbursed: f64,
    /// Mean principal outstanding (the exposure at default of the capital figures).
    pub principal_outstanding: f64,
    /// Interest collected (collections pay interest first).
    pub interest_collected: f64,
    /// Fees charged at disbursement.
    pub fees: f64,
    /// Expected loss: the mean annual loss of principal after recovery.
    pub expected_loss: f64,
    /// Unexpected loss at 99.9%: the annual loss quantile minus its mean (`None` with fewer than
    /// 1,000 replication-years).
    pub unexpected_loss_999: Option<f64>,
    /// The lender's cost of funds.
    pub cost_of_funds: f64,
    /// Operating cost.
    pub operating_cost: f64,
    /// (interest + fees) / (cost of funds + loan losses + operating cost), pooled over replications,
    /// with its interval from between-replication variation; `None` when nothing is spent or lost.
    pub operational_self_sufficiency: Option<Interval>,
}

/// Capital beside the tail, in currency, for one arm.
#[derive(Debug, Clone, Serialize)]
pub struct Capital {
    /// The simulated unexpected loss at 99.9% (annual loss quantile minus mean).
    pub simulated_unexpected_loss: Option<f64>,
    /// The annual default rate of a member: 1 - (1 - per-cycle member default rate)^cycles_per_year.
    pub annual_default_rate: Option<f64>,
    /// LGD = 1 - recovery rate.
    pub lgd: f64,
    /// EAD = mean principal outstanding.
    pub ead: f64,
    /// The simulated loss per defaulting member loan as a share of its principal (loss / (member
    /// defaults x principal)): under joint liability a defaulting group still pays part, so this
    /// lies well below `lgd`, and the formula at `lgd` overstates.
    pub realized_lgd: Option<f64>,
    /// The Basel II other-retail correlation R(PD) at the annual default rate.
    pub basel_correlation: Option<f64>,
    /// K x EAD: Basel II other-retail capital at the annual default rate.
    pub basel_capital: Option<f64>,
    /// The exact annual law (the per-cycle portfolio law of normal cycles convolved over a year),
    /// where the arm is in its class.
    pub exact_annual_law: Option<AnnualDefaultLaw>,
    /// EAD x (99.9% quantile - mean) of the exact annual default share x the simulated loss per
    /// defaulting loan (`realized_lgd`; `lgd` when nothing defaulted).
    pub exact_unexpected_loss: Option<f64>,
    /// Why there is no exact figure.
    pub exact_note: Option<String>,
    /// One sentence: which figure is larger and why.
    pub sentence: String,
}

impl Capital {
    /// Whether the exact law is absent (out of class, or not computed).
    pub fn exact_law_missing(&self) -> bool {
        self.exact_annual_law.is_none()
    }
}

/// An arm's year, money and capital.
#[derive(Debug, Clone, Serialize)]
pub struct ArmFinance {
    /// Loan cycles per year.
    pub cycles_per_year: u32,
    /// The currency label.
    pub currency: String,
    /// Replication-years pooled (replications x years per replication).
    pub replication_years: u64,
    /// The annual loss as a rate of the year's mean principal outstanding.
    pub annual_loss_rate: AnnualTail,
    /// The annual loss in currency.
    pub annual_loss_amount: AnnualTail,
    /// The year's money.
    pub money: Money,
    /// Capital beside the tail.
    pub capital: Capital,
}

/// Summarises one arm's years. `exact` is the arm's per-cycle portfolio law in normal cycles, where
/// the arm is in its class (or why not, in `exact_note`).
pub fn arm_finance(
    scenario: &Scenario,
    arm: &Arm,
    tally: &ArmTally,
    exact: Option<&PortfolioDefaultLaw>,
    exact_note: Option<String>,
) -> ArmFinance {
    let finance = scenario.finance();
    let cpy = finance.cycles_per_year().max(1);
    let reps = &tally.replications;
    // Counted from the run's shape: a run without a [finance] table keeps no per-year records (a
    // year would be one cycle), but its money figures are still per year.
    let n_years = reps.len() as u64 * u64::from(scenario.cycles() / cpy);
    // The annual quantiles read the replication-years in passes (the replications may wait on
    // disk), holding no value per year.
    let annual_loss_rate = AnnualTail::of(|| {
        reps.iter()
            .flat_map(|r| (0..r.years.len()).filter_map(move |y| r.years[y].loss_rate()))
    });
    let annual_loss_amount = AnnualTail::of(|| {
        reps.iter()
            .flat_map(|r| (0..r.years.len()).map(move |y| r.years[y].loss))
    });

    let per_year = |total: f64| if n_years > 0 { total / n_years as f64 } else { 0.0 };
    let totals = crate::stats::tally::totals(reps.iter_numbers());
    let sum = |f: fn(&ReplicationTally) -> f64| f(&totals);
    let interest = |r: &ReplicationTally| interest_collected(r.collected, r.disbursed, r.loss, r.recovered);
    let disbursed = sum(|r| r.disbursed);
    let principal_outstanding = per_year(disbursed) / f64::from(cpy);
    let oss = estimate::ratio_in_passes(|| {
        reps.iter_numbers()
            .map(|r| (interest(&r) + r.fees, r.cost_of_funds + r.loss + r.operating_cost))
    })
    .map(Interval::from);
    let unexpected_loss_999 = annual_loss_amount.p999.zip(annual_loss_amount.mean).map(|(q, m)| q - m);
    let money = Money {
        disbursed: per_year(disbursed),
        principal_outstanding,
        interest_collected: per_year(reps.iter_numbers().map(|r| interest(&r)).sum()),
        fees: per_year(sum(|r| r.fees)),
        expected_loss: per_year(sum(|r| r.loss)),
        unexpected_loss_999,
        cost_of_funds: per_year(sum(|r| r.cost_of_funds)),
        operating_cost: per_year(sum(|r| r.operating_cost)),
        operational_self_sufficiency: oss,
    };

    let loans: u64 = totals.member_loans;
    let defaults: u64 = totals.member_defaults;
    let per_cycle = (loans > 0).then(|| defaults as f64 / loans as f64);
    let annual_default_rate = per_cycle.map(|p| annual_rate(p, cpy));
    let lgd = 1.0 - arm.recovery_rate();
    let realized_lgd = (defaults > 0).then(|| sum(|r| r.loss) / (defaults as f64 * arm.principal()));
    let basel_correlation = annual_default_rate.and_then(|pd| basel::retail_correlation(pd).ok());
    let basel_capital = annual_default_rate
        .and_then(|pd| basel::capital_requirement(pd, lgd).ok())
        .map(|k| k * principal_outstanding);
    let exact_annual_law = exact.map(|law| law.over_cycles(cpy));
    // The exact law counts defaults; what a default loses is taken from the simulation (the mean
    // loss per defaulting loan), as the exact class fixes who defaults but not how much each pays.
    let loss_given_default = realized_lgd.unwrap_or(lgd);
    let exact_unexpected_loss = exact_annual_law.as_ref().and_then(|law| {
        law.quantiles
            .get(&format!("{UNEXPECTED_LOSS_LEVEL}"))
            .map(|q| loss_given_default * principal_outstanding * (q - law.mean))
    });
    let sentence = capital_sentence(
        scenario,
        arm,
        &SentenceFigures {
            simulated: unexpected_loss_999,
            basel: basel_capital,
            basel_correlation,
            exact: exact_unexpected_loss,
            realized_lgd: realized_lgd.map(|r| (r, lgd)),
        },
        finance.currency(),
    );
    ArmFinance {
        cycles_per_year: cpy,
        currency: finance.currency().to_owned(),
        replication_years: n_years,
        annual_loss_rate,
        annual_loss_amount,
        money,
        capital: Capital {
            simulated_unexpected_loss: unexpected_loss_999,
            annual_default_rate,
            lgd,
            ead: principal_outstanding,
            realized_lgd,
            basel_correlation,
            basel_capital,
            exact_annual_law,
            exact_unexpected_loss,
            exact_note: if exact.is_some() { None } else { exact_note },
            sentence,
        },
    }
}

/// The annual rate of an event with per-cycle probability `p` in independent cycles:
/// 1 - (1 - p)^cycles_per_year.
pub fn annual_rate(p: f64, cycles_per_year: u32) -> f64 {
    // A year of one cycle is the cycle itself, to the bit.
    if cycles_per_year <= 1 {
        return p;
    }
    1.0 - (1.0 - p).powi(cycles_per_year as i32)
}

/// A money amount for sentences and tables: thousands separated, no decimals above 100.
pub fn money_text(x: f64) -> String {
    if !x.is_finite() {
        return "-".into();
    }
    if x.abs() < 100.0 {
        return format!("{x:.2}");
    }
    let digits = format!("{:.0}", x.abs());
    let mut out = String::new();
    for (i, c) in digits.chars().enumerate() {
        if i > 0 && (digits.len() - i) % 3 == 0 {
            out.push(',');
        }
        out.push(c);
    }
    if x < 0.0 { format!("-{out}") } else { out }
}

/// The capital figures a sentence compares: simulated UL, Basel K x EAD and its R(PD), the exact
/// law's UL, and (realized, assumed) LGD.
#[derive(Clone, Copy)]
struct SentenceFigures {
    simulated: Option<f64>,
    basel: Option<f64>,
    basel_correlation: Option<f64>,
    exact: Option<f64>,
    realized_lgd: Option<(f64, f64)>,
}

/// Which capital figure is larger, and why: diversification across villages, and the correlation
/// the scenario states against the one the formula assumes.
fn capital_sentence(scenario: &Scenario, arm: &Arm, figures: &SentenceFigures, currency: &str) -> String {
    let SentenceFigures {
        simulated,
        basel,
        basel_correlation,
        exact,
        realized_lgd,
    } = *figures;
    let (Some(sim), Some(k), Some(r)) = (simulated, basel, basel_correlation) else {
        return "No comparison: the simulated 99.9% annual loss needs at least 1,000 replication-years, and the \
                formula a default rate strictly between 0 and 1."
            .into();
    };
    let portfolio_rho: f64 = arm.shocks().iter().map(|s| s.portfolio_correlation()).sum();
    let village_rho: f64 = arm.shocks().iter().map(|s| s.village_correlation()).sum();
    let wide = arm.shocks().iter().any(|s| {
        s.scope() == ShockScope::Portfolio || (s.scope() == ShockScope::Member && s.portfolio_correlation() > 0.0)
    });
    let stressed = arm.shocks().iter().any(|s| !s.stress().is_empty());
    let exact_part = exact
        .map(|e| {
            format!(
                " The exact law of a year of normal cycles gives {} {currency}.",
                money_text(e)
            )
        })
        .unwrap_or_default();
    let (sim_t, k_t) = (money_text(sim), money_text(k));
    let mut reasons: Vec<String> = Vec::new();
    if let Some((real, lgd)) = realized_lgd
        && real < 0.8 * lgd
    {
        reasons.push(format!(
            "it takes every defaulting loan as losing {:.0}% of its principal, while the simulated defaulting loans \
             lost {:.0}% (a defaulting loan still collects part)",
            100.0 * lgd,
            100.0 * real
        ));
    }
    let scenario_rho = village_rho + portfolio_rho;
    if r > portfolio_rho + 0.005 {
        reasons.push(format!(
            "its one factor (correlation {r:.3}) moves every loan at once, while here village factors (correlation \
             {village_rho}) diversify across {} villages and only the portfolio-wide draws (portfolio correlation \
             {portfolio_rho}{}) move them all",
            scenario.villages(),
            if wide { ", portfolio-scope shocks" } else { "" }
        ));
    }
    if k >= sim {
        let why = if reasons.is_empty() {
            format!(
                "at this default rate the formula's tail (correlation {r:.3}) is heavier than the scenario's \
                 (member correlation {scenario_rho})"
            )
        } else {
            reasons.join("; and ")
        };
        format!(
            "Basel capital ({k_t} {currency}) exceeds the simulated unexpected loss ({sim_t} {currency}): {why}.{exact_part}"
        )
    } else {
        format!(
            "The simulated unexpected loss ({sim_t} {currency}) exceeds Basel capital ({k_t} {currency}): the \
             scenario's shared shocks (village correlation {village_rho}, portfolio correlation {portfolio_rho}, \
             unit-scope shocks{}) cluster defaults more than the formula's correlation {r:.3} at this default rate, \
             and {} villages do not diversify village-wide shocks away.{exact_part}",
            if stressed { ", stress windows" } else { "" },
            scenario.villages()
        )
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stats::CycleRecord;

    #[test]
    fn years_are_consecutive_blocks_of_cycles() {
        let cycles: Vec<CycleRecord> = [(1.0, 100.0), (3.0, 100.0), (0.0, 50.0), (2.0, 150.0)]
            .into_iter()
            .map(|(loss, disbursed)| CycleRecord {
                loss,
                disbursed,
                ..Default::default()
            })
            .collect();
        let y = crate::stats::tally::years_of(&cycles, 2);
        assert_eq!(y.len(), 2);
        assert_eq!(y[0].loss, 4.0);
        assert_eq!(y[0].principal_outstanding, 100.0);
        assert_eq!(y[0].loss_rate(), Some(0.04));
        assert_eq!(y[1].loss, 2.0);
        assert_eq!(y[1].principal_outstanding, 100.0);
    }

    #[test]
    fn money_is_written_with_thousands_separators() {
        assert_eq!(money_text(1_234_567.4), "1,234,567");
        assert_eq!(money_text(-1234.0), "-1,234");
        assert_eq!(money_text(12.345), "12.35");
        assert_eq!(money_text(999.6), "1,000");
    }

    #[test]
    fn interest_is_what_was_collected_beyond_the_principal_repaid() {
        // 100 lent at 10%: 60 collected pays 10 interest and 50 principal; 50 unpaid, 20 recovered.
        assert_eq!(interest_collected(60.0, 100.0, 30.0, 20.0), 10.0);
    }
}
