//! The year, money and capital figures of `[finance]`: the annual loss law against an independent
//! binomial computation, the money of a hand-checked case, the refusal of a partial year, and
//! scenarios without `[finance]` unchanged.

mod common;

use loancycle::report::{self, RunReport};
use loancycle::scenario::Scenario;
use loancycle::stats::replications::ReplicationFigures;
use loancycle::stats::tolerance::STANDARD_ERRORS;
use statrs::distribution::{Binomial, DiscreteCDF};

fn scenario(text: &str) -> Scenario {
    Scenario::from_toml_str(text, "inline.toml").unwrap_or_else(|e| panic!("{e}"))
}

fn run(text: &str) -> RunReport {
    let s = scenario(text);
    let results = common::simulate_on(&s, 2);
    report::build(&s, text, "inline.toml", &results)
}

/// Independent members, each hit with probability 0.05 per cycle and then unable to pay anything
/// (income = amount due, severity 1), no interest, no recovery, no exclusion: a cycle's loss is the
/// principal times a Binomial(200, 0.05) count, cycles are independent, so a year of 4 cycles loses
/// the principal times a Binomial(800, 0.05) count, and its loss over the mean principal outstanding
/// is that count / 200.
const INDEPENDENT: &str = r#"
seed = 77
replications = 1000
cycles = 8

[portfolio]
borrowers = 200
villages = 4

[loan]
principal = 50.0

[[shock]]
name = "failure"
scope = "member"
probability = 0.05
severity = 1.0

[policy]
group_size = 1
liability = "individual"

[finance]
cycles_per_year = 4
currency = "crowns"
"#;

#[test]
fn annual_loss_quantiles_follow_the_binomial_law_of_a_year() {
    let r = run(INDEPENDENT);
    let f = &r.arms[0].finance;
    let n_years = f.replication_years as f64;
    assert_eq!(f.replication_years, 2000);
    assert_eq!(f.currency, "crowns");
    // Reference: the binomial law of a year's defaults (statrs 0.18), Binomial(4 x 200, 0.05).
    let year = Binomial::new(0.05, 800).unwrap();
    let checks = [
        (0.5, f.annual_loss_rate.p50),
        (0.95, f.annual_loss_rate.p95),
        (0.99, f.annual_loss_rate.p99),
        (0.999, f.annual_loss_rate.p999),
    ];
    for (q, simulated) in checks {
        let count = simulated.expect("enough replication-years") * 200.0;
        // Order-statistic bound, distribution-free: the empirical q-quantile of n values has
        // F(quantile) within q +- 4 sqrt(q (1 - q) / n), F the true (here binomial) distribution
        // function. On a lattice: F(ceil) must reach the lower end, F(floor - 1) stay below the upper.
        let band = STANDARD_ERRORS * (q * (1.0 - q) / n_years).sqrt();
        let hi = year.cdf(count.ceil() as u64);
        let below = if count.floor() >= 1.0 {
            year.cdf(count.floor() as u64 - 1)
        } else {
            0.0
        };
        assert!(hi >= q - band, "q {q}: F({}) = {hi} < {}", count.ceil(), q - band);
        assert!(
            below <= q + band,
            "q {q}: F({}) = {below} > {}",
            count.floor() - 1.0,
            q + band
        );
    }
    // The mean annual loss rate is 4 x 0.05 = 0.2, with the standard error of a mean of independent
    // replications (each replication's two years together).
    let per_rep: Vec<f64> = r.arms[0]
        .replications
        .iter()
        .map(|x| x.loss / (x.disbursed / 4.0) / 2.0)
        .collect();
    let mean = per_rep.iter().sum::<f64>() / per_rep.len() as f64;
    let sd = (per_rep.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (per_rep.len() as f64 - 1.0)).sqrt();
    let se = sd / (per_rep.len() as f64).sqrt();
    let simulated_mean = f.annual_loss_rate.mean.unwrap();
    assert!(
        (simulated_mean - 0.2).abs() < STANDARD_ERRORS * se,
        "{simulated_mean} vs 0.2 (se {se})"
    );
    // Sharpness: a year of 4 cycles is told apart from a year of 3 (mean 0.15) by far more than 4 SE.
    assert!(0.05 > 10.0 * STANDARD_ERRORS * se);
    // The annual default rate is 1 - (1 - p)^4 for the per-cycle member default rate p.
    let p = r.arms[0].summary.member_default_rate.unwrap();
    let annual = f.capital.annual_default_rate.unwrap();
    assert!((annual - (1.0 - (1.0 - p).powi(4))).abs() < 1e-15);
    // The arm is in the exact law's class: the exact annual law is Binomial(800, 0.05) / 200 too.
    let exact = f.capital.exact_annual_law.as_ref().expect("in class");
    assert_eq!(exact.cycles_per_year, 4);
    for (key, q) in [("0.95", 0.95), ("0.99", 0.99), ("0.999", 0.999)] {
        let want = (0..=800u64).find(|&j| year.cdf(j) >= q).unwrap() as f64 / 200.0;
        assert!(
            (exact.quantiles[key] - want).abs() < 1e-12,
            "{key}: {} vs {want}",
            exact.quantiles[key]
        );
    }
    assert!((exact.mean - 0.2).abs() < 1e-9);
}

/// No shock, fixed income above the amount due: every loan repays in full, so a year's money follows
/// by hand. 10 borrowers x 100 principal, 10% interest a cycle, 2 cycles a year over 4 cycles; fee 2%,
/// cost of funds 3% a cycle, operating cost 2 a loan a cycle.
const NO_SHOCK: &str = r#"
replications = 3
cycles = 4

[portfolio]
borrowers = 10

[loan]
principal = 100.0
interest_rate = 0.1

[borrowers]
income = 1.5

[finance]
cycles_per_year = 2
operating_cost = 2.0
cost_of_funds = 0.03
fee_rate = 0.02
"#;

#[test]
fn money_and_self_sufficiency_of_a_hand_checked_case() {
    let r = run(NO_SHOCK);
    let a = &r.arms[0];
    let m = &a.finance.money;
    // Per year: 2 cycles x 10 loans x 100 = 2000 disbursed; outstanding 1000 in each cycle.
    assert_eq!(m.disbursed, 2000.0);
    assert_eq!(m.principal_outstanding, 1000.0);
    // Interest 10 x 10 x 2 = 200; fees 0.02 x 2000 = 40; cost of funds 0.03 x 2000 = 60;
    // operating 2 x 10 x 2 = 40; no loss.
    assert!((m.interest_collected - 200.0).abs() < 1e-9);
    assert!((m.fees - 40.0).abs() < 1e-9);
    assert!((m.cost_of_funds - 60.0).abs() < 1e-9);
    assert!((m.operating_cost - 40.0).abs() < 1e-9);
    assert_eq!(m.expected_loss, 0.0);
    // OSS = (200 + 40) / (60 + 0 + 40) = 2.4.
    let oss = m.operational_self_sufficiency.unwrap();
    assert!((oss.rate - 2.4).abs() < 1e-12, "{}", oss.rate);
    // Net yield over the 4 cycles: (4400 + 80 - 4000 - 120 - 80) / 4000 = 0.07.
    assert!((a.summary.net_yield.unwrap() - 0.07).abs() < 1e-12);
    let rep = ReplicationFigures::from_tally(&a.replications.get(0).unwrap());
    assert!((rep.net_yield().unwrap() - 0.07).abs() < 1e-12);
    assert!((rep.fees - 80.0).abs() < 1e-9 && (rep.cost_of_funds - 120.0).abs() < 1e-9);
    assert!((rep.operating_cost - 80.0).abs() < 1e-9);
    // replications.csv carries the fees and costs, and reading it back gives the same net yield.
    let csv = String::from_utf8(loancycle::output::tables::replications_csv(&r)).unwrap();
    let header = csv.lines().next().unwrap();
    assert!(header.ends_with("fees,cost_of_funds,operating_cost"), "{header}");
    let back = rep.to_tally();
    assert!((back.net_income() / back.disbursed - 0.07).abs() < 1e-12);
}

#[test]
fn counted_cycles_that_do_not_make_whole_years_are_refused() {
    let text = NO_SHOCK.replace("cycles = 4\n", "cycles = 5\n");
    let err = Scenario::from_toml_str(&text, "year.toml").unwrap_err().to_string();
    assert!(
        err.starts_with(
            "year.toml: line 16, field finance.cycles_per_year: 2 is not allowed: a divisor of the counted cycles"
        ),
        "{err}"
    );
    assert!(!err.contains('\n'));
    let swept = NO_SHOCK.replace(
        "fee_rate = 0.02\n",
        "fee_rate = 0.02\n[sweep]\nfinance.fee_rate = [0.01, 0.02]\n",
    );
    assert!(Scenario::from_toml_str(&swept, "sweep.toml").is_err());
}

/// A scenario without `[finance]`, and the same with a `[finance]` table that states the defaults.
const PLAIN: &str = r#"
seed = 5
replications = 40
cycles = 6

[portfolio]
borrowers = 300
villages = 6

[loan]
principal = 80.0
interest_rate = 0.05
recovery_rate = 0.3

[borrowers]
income = { kind = "uniform", low = 0.9, high = 1.6 }

[[shock]]
name = "illness"
scope = "member"
probability = 0.08
village_correlation = 0.1
severity = 0.6

[policy]
peer_cover = 0.5
exclusion_cycles = 1
"#;

#[test]
fn a_scenario_without_finance_gives_the_same_figures() {
    let plain = run(PLAIN);
    let stated = run(&format!(
        "{PLAIN}\n[finance]\ncycles_per_year = 1\ncurrency = \"units\"\noperating_cost = 0\ncost_of_funds = 0\nfee_rate = 0\n"
    ));
    let (a, b) = (&plain.arms[0], &stated.arms[0]);
    // the replications' figures agree (a tally with a [finance] table also keeps its years)
    let figures = |arm: &loancycle::report::ArmReport| -> Vec<ReplicationFigures> {
        arm.replications
            .iter()
            .map(|t| ReplicationFigures::from_tally(&t))
            .collect()
    };
    assert_eq!(figures(a), figures(b));
    assert_eq!(
        serde_json::to_string(&a.summary).unwrap(),
        serde_json::to_string(&b.summary).unwrap()
    );
    // Without costs, net yield is bit for bit (collected + recovered - disbursed) / disbursed, as
    // before the finance table existed.
    let (c, r, d): (f64, f64, f64) = a.replications.iter().fold((0.0, 0.0, 0.0), |acc, x| {
        (acc.0 + x.collected, acc.1 + x.recovered, acc.2 + x.disbursed)
    });
    assert_eq!(a.summary.net_yield, Some((c + r - d) / d));
    for x in figures(a) {
        assert_eq!(
            x.net_yield(),
            Some((x.collected + x.recovered - x.disbursed) / x.disbursed)
        );
        assert_eq!((x.fees, x.cost_of_funds, x.operating_cost), (0.0, 0.0, 0.0));
    }
    // A year is one cycle: the annual default rate is the per-cycle member default rate.
    assert_eq!(a.finance.cycles_per_year, 1);
    assert_eq!(a.finance.capital.annual_default_rate, a.summary.member_default_rate);
}
