//! The engine against the analytic companion: exact one-factor group repayment (Gauss-Hermite and
//! adaptive quadrature), the large-portfolio Vasicek law, and the finite-portfolio tail behind the
//! Basel II IRB retail formula.

mod common;

use common::*;
use loancycle::analytic::{basel, normal, one_factor, vasicek};
use loancycle::run::{self, RunOptions};
use loancycle::scenario::Scenario;

/// Hit shares (members short / members served) of every counted cycle of every replication.
fn cycle_hit_shares(s: &Scenario) -> Vec<f64> {
    let results = run::simulate(
        s,
        RunOptions {
            keep_cycle_records: true,
            ..Default::default()
        },
        &mut |_| {},
    )
    .unwrap();
    results.arms[0]
        .replications
        .iter()
        .flat_map(|r| {
            r.cycles
                .iter()
                .map(|c| f64::from(c.shortfalls) / f64::from(c.served))
                .collect::<Vec<_>>()
        })
        .collect()
}

/// A one-village pool of single-member groups whose only shock has probability p and factor
/// loading rho: a member is short exactly when hit, so the per-cycle share short is the hit share.
fn hit_share_scenario(p: f64, rho: f64, members: u32, replications: u32, cycles: u32, seed: u64) -> Scenario {
    scenario(&format!(
        r#"
        seed = {seed}
        replications = {replications}
        cycles = {cycles}
        [portfolio]
        borrowers = {members}
        [loan]
        principal = 100
        [[shock]]
        name = "harvest_failure"
        scope = "member"
        probability = {p}
        village_correlation = {rho}
        [policy]
        group_size = 1
        "#
    ))
}

/// Group repayment in the one-factor class against the exact law of the number hit
/// P(n) = integral C(k, n) p(m)^n (1 - p(m))^(k - n) phi(m) dm, for rho in {0, 0.1, 0.3}, k in
/// {3, 5, 8}, with and without peer cover: 18 configurations, each within 4 standard errors
/// estimated from 100 independent replications.
#[test]
fn simulated_group_repayment_matches_quadrature() {
    for (seed, village_rho, portfolio_rho) in [(21u64, 0.0, 0.0), (22, 0.1, 0.0), (23, 0.2, 0.1)] {
        let s = scenario(&format!(
            r#"
            seed = {seed}
            replications = 100
            cycles = 25
            [portfolio]
            borrowers = 1200
            villages = 10
            [loan]
            principal = 100
            interest_rate = 0.1
            [borrowers]
            income = 1.5
            [[shock]]
            name = "illness"
            scope = "member"
            probability = 0.1
            village_correlation = {village_rho}
            portfolio_correlation = {portfolio_rho}
            severity = 0.8
            [sweep]
            group_size = [3, 5, 8]
            peer_cover = [0.0, 1.0]
            "#
        ));
        let results = simulate(&s);
        let mut covered_differs = false;
        for arm in 0..s.arms().len() {
            let exact = one_factor::exact_for_arm(&s, arm).expect("in the one-factor class");
            let g = arm_summary(&s, &results, arm).group_repayment.unwrap();
            let label = format!("rho={} {}", village_rho + portfolio_rho, s.arms()[arm].label());
            assert_within(&label, g.rate, g.standard_error.unwrap(), exact.group_repayment, 0.01);
            covered_differs |=
                s.arms()[arm].policy().peer_cover() > 0.0 && exact.group_repayment > exact.iid_group_repayment + 0.05;
        }
        assert!(
            covered_differs,
            "cover must matter in this design, or the check is not sharp"
        );
    }
}

/// With many members in one village, the per-cycle hit share follows the one-factor Gaussian
/// (Vasicek 1987/2002) law P(X <= x) = Phi((sqrt(1 - rho) Phi^-1(x) - Phi^-1(p)) / sqrt(rho)).
/// Kolmogorov-Smirnov distance over 10,000 cycles below the asymptotic 0.1% critical value
/// sqrt(-ln(0.0005) / 2) / sqrt(n) (Kolmogorov distribution; e.g. Massey 1951).
#[test]
fn hit_shares_follow_the_vasicek_law() {
    let (p, rho) = (0.05, 0.1);
    let mut shares = cycle_hit_shares(&hit_share_scenario(p, rho, 20_000, 10, 1_000, 31));
    assert_eq!(shares.len(), 10_000);
    shares.sort_by(f64::total_cmp);
    let n = shares.len() as f64;
    let mut distance: f64 = 0.0;
    for (i, &x) in shares.iter().enumerate() {
        let f = vasicek::cdf(x, p, rho).unwrap();
        distance = distance.max((i as f64 + 1.0) / n - f).max(f - i as f64 / n);
    }
    let critical = (-(0.0005f64).ln() / 2.0).sqrt() / n.sqrt();
    assert!(
        distance < critical,
        "KS distance {distance} >= 0.1% critical value {critical}"
    );
    // sharpness: the same shares are far from the independent-members law (rho = 0.02)
    let wrong: f64 = shares
        .iter()
        .enumerate()
        .map(|(i, &x)| {
            let f = vasicek::cdf(x, p, 0.02).unwrap();
            ((i as f64 + 1.0) / n - f).max(f - i as f64 / n)
        })
        .fold(0.0, f64::max);
    assert!(
        wrong > 3.0 * critical,
        "a wrong correlation should be rejected: {wrong}"
    );
}

/// The Basel II IRB retail correlation R(PD) (BCBS, International Convergence of Capital Measurement
/// and Capital Standards, June 2006, paras 328-330) in the engine, in a village-sized pool of 100
/// members over 200,000 cycles. The exact finite-pool 99.9% quantile of the hit share (the binomial
/// mixture over the factor, by quadrature) must lie inside the 99.99% order-statistic interval of the
/// simulated shares (distribution-free: the count below the true quantile is Binomial(n, 0.999)),
/// and the large-pool (Vasicek) quantile, which ignores the binomial noise of a finite pool, must lie
/// below it. The pool is small on purpose: at 2,000 members the two quantiles differ by about
/// 0.0015, ten times less than the interval's width, so no simulation of feasible length could tell
/// them apart; at 100 members they differ by about 0.03.
#[test]
fn finite_portfolio_tail_matches_the_basel_setting() {
    let (members, n_cycles) = (100u32, 200_000usize);
    for (pd, seed) in [(0.02, 41u64), (0.05, 42)] {
        let rho = basel::retail_correlation(pd).unwrap();
        let mut shares = cycle_hit_shares(&hit_share_scenario(pd, rho, members, 20, 10_000, seed));
        assert_eq!(shares.len(), n_cycles);
        shares.sort_by(f64::total_cmp);
        let exact = vasicek::finite_quantile(0.999, pd, rho, members).unwrap();
        let large = vasicek::quantile(0.999, pd, rho).unwrap();
        let q = 0.999;
        let n = n_cycles as f64;
        let half_width = normal::inv_cdf(1.0 - 0.0001 / 2.0) * (n * q * (1.0 - q)).sqrt();
        let low_rank = (n * q - half_width).floor() as usize; // 1-based ranks
        let high_rank = (n * q + half_width).ceil() as usize;
        let (low, high) = (shares[low_rank - 1], shares[high_rank - 1]);
        assert!(
            low <= exact && exact <= high,
            "PD {pd}: exact finite-pool quantile {exact} outside [{low}, {high}]"
        );
        // the interval separates the two laws: the large-pool quantile is rejected
        assert!(
            large < low,
            "PD {pd}: large-pool quantile {large} not below the interval [{low}, {high}]"
        );
        // and the large-portfolio Basel figure is that same Vasicek quantile at R(PD)
        let basel_figure = basel::conditional_hit_probability(pd).unwrap();
        assert!((basel_figure - large).abs() < 1e-12);
    }
}
