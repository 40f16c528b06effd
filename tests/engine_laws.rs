//! The engine against textbook laws, within 4 standard errors estimated from independent
//! replications (never from correlated group-cycles).

mod common;

use common::*;
use loancycle::stats::tolerance::STANDARD_ERRORS;
use statrs::distribution::{Binomial, DiscreteCDF};

/// Independent members, no cover: a group of k repays iff nobody is hit, so P = (1 - q)^k
/// (binomial law, any probability textbook).
#[test]
fn independent_members_repay_with_binomial_probability() {
    let q: f64 = 0.1;
    let s = scenario(&format!(
        r#"
        seed = 11
        replications = 100
        cycles = 20
        [portfolio]
        borrowers = 840
        villages = 1
        [loan]
        principal = 100
        [[shock]]
        name = "illness"
        scope = "member"
        probability = {q}
        [sweep]
        group_size = [1, 2, 3, 4, 5, 6, 7, 8]
        "#
    ));
    let results = simulate(&s);
    for (arm, a) in s.arms().iter().enumerate() {
        let k = a.policy().group_size();
        let summary = arm_summary(&s, &results, arm);
        let g = summary.group_repayment.expect("groups served");
        let reference = (1.0 - q).powi(k as i32);
        assert_within(
            &format!("group repayment k={k}"),
            g.rate,
            g.standard_error.unwrap(),
            reference,
            0.002,
        );
        // everybody is served: 840 is divisible by every k in 1..=8
        assert_eq!(summary.served_share, Some(1.0), "k={k}");
        // member shortfall rate is the hit probability q (same law)
        let (rate, se) = replication_ratio(&results, arm, |r| (r.member_shortfalls as f64, r.member_loans as f64));
        assert_within(&format!("member shortfall k={k}"), rate, se, q, 0.001);
    }
}

/// Peer cover: incomes 1.5 x the amount due, severity 1, full cover (lambda = 1). A hit member has
/// shortfall D and an unhit one surplus D/2, so a group repays iff n <= (k - n) / 2, i.e.
/// n <= floor(k / 3): P = P(Bin(k, q) <= floor(k / 3)). Reference: statrs 0.18 Binomial CDF.
#[test]
fn peer_cover_matches_binomial_cdf() {
    let q: f64 = 0.2;
    let s = scenario(&format!(
        r#"
        seed = 12
        replications = 100
        cycles = 20
        [portfolio]
        borrowers = 840
        villages = 2
        [loan]
        principal = 100
        interest_rate = 0.1
        [borrowers]
        income = 1.5
        [[shock]]
        name = "harvest_failure"
        scope = "member"
        probability = {q}
        [policy]
        peer_cover = 1.0
        [sweep]
        group_size = [2, 3, 4, 5, 6, 7]
        "#
    ));
    let results = simulate(&s);
    for (arm, a) in s.arms().iter().enumerate() {
        let k = a.policy().group_size();
        let summary = arm_summary(&s, &results, arm);
        let g = summary.group_repayment.unwrap();
        let reference = Binomial::new(q, u64::from(k)).unwrap().cdf(u64::from(k / 3));
        assert_within(
            &format!("covered group repayment k={k}"),
            g.rate,
            g.standard_error.unwrap(),
            reference,
            0.003,
        );
        // rescued groups: some member hit but the group repaid, P(1 <= n <= floor(k/3))
        let rescued = reference - (1.0 - q).powi(k as i32);
        let (rate, se) = replication_ratio(&results, arm, |r| (r.groups_rescued as f64, r.group_cycles as f64));
        if rescued > 0.0 {
            assert_within(&format!("rescued k={k}"), rate, se, rescued, 0.003);
        } else {
            assert_eq!(rate, 0.0, "k={k}: nobody can be rescued");
        }
    }
}

/// Exclusion: each served cycle a member's group defaults with probability d = 1 - (1 - q)^k and
/// then sits out E cycles, so by the renewal-reward theorem (Ross, Introduction to Probability
/// Models, ch. 7) the long-run excluded share is d E / (1 + d E). Village sizes are divisible by k
/// and whole groups are excluded, so nobody waits.
#[test]
fn exclusion_share_follows_renewal_reward() {
    let q = 0.05;
    let k = 5;
    let s = scenario(&format!(
        r#"
        seed = 13
        replications = 100
        cycles = 60
        warmup_cycles = 50
        [portfolio]
        borrowers = 1000
        villages = 2
        [loan]
        principal = 100
        [[shock]]
        name = "illness"
        scope = "member"
        probability = {q}
        [policy]
        group_size = {k}
        exclusion_scope = "group"
        [sweep]
        exclusion_cycles = [1, 2, 4]
        "#
    ));
    let results = simulate(&s);
    let d = 1.0 - (1.0f64 - q).powi(k);
    for (arm, a) in s.arms().iter().enumerate() {
        let e = match a.policy().exclusion_cycles() {
            loancycle::scenario::Exclusion::Cycles(e) => f64::from(e),
            loancycle::scenario::Exclusion::Permanent => unreachable!(),
        };
        let reference = d * e / (1.0 + d * e);
        let (share, se) = replication_ratio(&results, arm, |r| {
            (r.excluded_slot_cycles as f64, r.slot_cycles() as f64)
        });
        assert_within(&format!("excluded share E={e}"), share, se, reference, 0.002);
        let summary = arm_summary(&s, &results, arm);
        assert_eq!(summary.waiting_share, Some(0.0), "E={e}: nobody waits");
        assert_eq!(summary.empty_share, Some(0.0));
    }
}

/// Money flows under joint liability with incomes exactly the amount due, severity 1, no cover:
/// a defaulting group with n hit collects (k - n) D, so collected / due = 1 - q in expectation.
/// Losses are booked loan by loan, interest first (common practice): a hit member's loan received
/// nothing, so its unpaid principal is min(P, D) = P, and the others' loans are paid in full. The
/// expected loss rate is therefore (1 - recovery) q, where booking the group as one loan,
/// min(k P, n D), would give E[min(k P, n D)] (1 - recovery) / (k P) under the binomial law.
#[test]
fn losses_follow_interest_first_accounting() {
    let (q, k, r, recovery) = (0.15, 4u32, 0.25, 0.3);
    let s = scenario(&format!(
        r#"
        seed = 14
        replications = 100
        cycles = 20
        [portfolio]
        borrowers = 800
        [loan]
        principal = 100
        interest_rate = {r}
        recovery_rate = {recovery}
        [[shock]]
        name = "illness"
        scope = "member"
        probability = {q}
        [policy]
        group_size = {k}
        "#
    ));
    let results = simulate(&s);
    let (p, d) = (100.0, 100.0 * (1.0 + r));
    let bin = Binomial::new(q, u64::from(k)).unwrap();
    use statrs::distribution::Discrete;
    // the loan-by-loan reference, and the group-level booking it replaces (binomial law, statrs 0.18)
    let loss_reference = (1.0 - recovery) * q;
    let group_level: f64 = (0..=u64::from(k))
        .map(|n| bin.pmf(n) * (f64::from(k) * p).min(n as f64 * d))
        .sum::<f64>()
        * (1.0 - recovery)
        / (f64::from(k) * p);
    let summary = arm_summary(&s, &results, 0);
    let loss = summary.loss_rate.unwrap();
    assert_within(
        "loss rate",
        loss.rate,
        loss.standard_error.unwrap(),
        loss_reference,
        0.002,
    );
    assert!(
        (group_level - loss_reference).abs() > 2.0 * STANDARD_ERRORS * loss.standard_error.unwrap(),
        "the check tells loan-by-loan from group-level booking: {group_level} vs {loss_reference}"
    );
    let (value, se) = replication_ratio(&results, 0, |t| (t.collected, t.due));
    assert_within("value repayment", value, se, 1.0 - q, 0.002);
    // identities that hold exactly for every replication
    for t in &results.arms[0].replications {
        assert!((t.loss + t.recovered - t.unpaid_principal).abs() < 1e-6 * t.disbursed);
        assert!(t.collected <= t.due + 1e-9 * t.due);
    }
}

/// Individual liability: each member repays alone, so the member default rate is the hit
/// probability and a group counts as repaid iff nobody was hit: (1 - q)^k (binomial law).
#[test]
fn individual_liability_defaults_member_by_member() {
    let q: f64 = 0.08;
    let s = scenario(&format!(
        r#"
        seed = 15
        replications = 100
        cycles = 20
        [portfolio]
        borrowers = 600
        [loan]
        principal = 50
        [borrowers]
        income = 1.5
        [[shock]]
        name = "illness"
        scope = "member"
        probability = {q}
        [policy]
        group_size = 6
        liability = "individual"
        peer_cover = 1.0
        "#
    ));
    let results = simulate(&s);
    let (rate, se) = replication_ratio(&results, 0, |r| (r.member_defaults as f64, r.member_loans as f64));
    assert_within("member default rate", rate, se, q, 0.001);
    let g = arm_summary(&s, &results, 0).group_repayment.unwrap();
    assert_within(
        "group repaid",
        g.rate,
        g.standard_error.unwrap(),
        (1.0 - q).powi(6),
        0.003,
    );
    assert_eq!(
        arm_summary(&s, &results, 0).rescued_rate,
        Some(0.0),
        "peers never rescue under individual liability"
    );
}

/// Unit-scope shocks: a struck unit hits each served member with probability `reach`, severity 1,
/// incomes equal to the amount due and no cover, so a group repays iff none of its members is hit:
/// P = 1 - p + p (1 - reach)^k for group, village and portfolio scope alike (law of total
/// probability over the strike, binomial law within it).
#[test]
fn unit_scope_shocks_follow_the_strike_and_reach_law() {
    let (p, reach, k) = (0.2f64, 0.3f64, 4);
    let reference = 1.0 - p + p * (1.0 - reach).powi(k);
    for (scope, seed, replications, max_se) in [
        ("group", 61u64, 100, 0.003),
        ("village", 62, 100, 0.01),
        ("portfolio", 63, 400, 0.01),
    ] {
        let s = scenario(&format!(
            r#"
            seed = {seed}
            replications = {replications}
            cycles = 30
            [portfolio]
            borrowers = 800
            villages = 10
            [loan]
            principal = 100
            [[shock]]
            name = "flood"
            scope = "{scope}"
            probability = {p}
            reach = {reach}
            [policy]
            group_size = {k}
            "#
        ));
        let results = simulate(&s);
        let g = arm_summary(&s, &results, 0).group_repayment.unwrap();
        assert_within(
            &format!("{scope} scope"),
            g.rate,
            g.standard_error.unwrap(),
            reference,
            max_se,
        );
    }
}

/// A stress window replaces the shock's probability in its cycles only: per-cycle group repayment
/// is (1 - 0.3)^k inside cycles 5..=6 and (1 - 0.02)^k outside (binomial law), checked on the
/// per-replication rates of those cycles.
#[test]
fn stress_windows_apply_to_their_cycles_only() {
    let k = 3;
    let s = scenario(&format!(
        r#"
        seed = 64
        replications = 100
        cycles = 8
        [portfolio]
        borrowers = 900
        [loan]
        principal = 100
        [[shock]]
        name = "drought"
        scope = "member"
        probability = 0.02
        stress = [ {{ from = 5, to = 6, probability = 0.3 }} ]
        [policy]
        group_size = {k}
        "#
    ));
    let results = simulate(&s);
    for cycle in 1..=8usize {
        let p: f64 = if (5..=6).contains(&cycle) { 0.3 } else { 0.02 };
        let (rate, se) = loancycle::stats::estimate::ratio(results.arms[0].replications.iter().map(|r| {
            let c = &r.cycles[cycle - 1];
            (f64::from(c.groups_repaid), f64::from(c.groups))
        }))
        .map(|r| (r.rate, r.standard_error.unwrap()))
        .unwrap();
        assert_within(&format!("cycle {cycle}"), rate, se, (1.0 - p).powi(k), 0.01);
    }
}

/// Without replacement, each member leaves after a cycle with probability d, so the share of
/// occupied slots at formation of cycle t is (1 - d)^(t - 1) (geometric survival); the mean empty
/// share over cycles 1..=T is 1 - (1/T) sum (1 - d)^(t - 1). With replacement nothing stays empty.
#[test]
fn dropout_empties_slots_geometrically_unless_replaced() {
    let (d, cycles) = (0.05f64, 20);
    for replace in [false, true] {
        let s = scenario(&format!(
            r#"
            seed = 65
            replications = 100
            cycles = {cycles}
            [portfolio]
            borrowers = 500
            [loan]
            principal = 100
            [policy]
            group_size = 1
            [pool]
            dropout = {d}
            replace_departures = {replace}
            "#
        ));
        let results = simulate(&s);
        let (empty, se) = replication_ratio(&results, 0, |r| (r.empty_slot_cycles as f64, r.slot_cycles() as f64));
        if replace {
            assert_eq!(empty, 0.0);
        } else {
            let reference = 1.0 - (0..cycles).map(|t| (1.0 - d).powi(t)).sum::<f64>() / f64::from(cycles);
            assert_within("empty share", empty, se, reference, 0.002);
        }
    }
}

/// Heterogeneous risk and random severity: with u ~ Uniform(0, 2) and p = 0.1, a member is hit
/// with probability E[min(1, u p)] = p whatever the factor loading (the factor model keeps each
/// member's marginal hit probability); with income 1.5 D and severity ~ Uniform(0.2, 0.8), a hit
/// member is short iff 1.5 (1 - s) < 1, i.e. s > 1/3, with probability (0.8 - 1/3) / 0.6 (uniform
/// law). So the member shortfall rate is 0.1 x 7/9.
#[test]
fn risk_multipliers_and_severities_enter_as_specified() {
    let reference = 0.1 * (0.8 - 1.0 / 3.0) / 0.6;
    for (rho, seed) in [(0.0, 66u64), (0.25, 67)] {
        let s = scenario(&format!(
            r#"
            seed = {seed}
            replications = 100
            cycles = 20
            [portfolio]
            borrowers = 1000
            villages = 10
            [loan]
            principal = 100
            [borrowers]
            income = 1.5
            risk = {{ kind = "uniform", low = 0.0, high = 2.0 }}
            [[shock]]
            name = "illness"
            scope = "member"
            probability = 0.1
            village_correlation = {rho}
            severity = {{ kind = "uniform", low = 0.2, high = 0.8 }}
            [policy]
            group_size = 5
            "#
        ));
        let results = simulate(&s);
        let (rate, se) = replication_ratio(&results, 0, |r| (r.member_shortfalls as f64, r.member_loans as f64));
        assert_within(&format!("shortfall rate, rho = {rho}"), rate, se, reference, 0.003);
    }
}

/// `dependence_ratio` (shortfall_free_group_rate / iid_shortfall_free) and its delta-method standard
/// error over replications: log ratio = ln(F/G) - k ln(1 - S/L), linearised per replication.
fn dependence_ratio_and_se(results: &loancycle::run::RunResults, arm: usize, k: u32) -> (f64, f64) {
    let reps = &results.arms[arm].replications;
    let n = reps.len() as f64;
    let sum = |f: fn(&loancycle::stats::ReplicationTally) -> u64| reps.iter().map(|r| f(&r) as f64).sum::<f64>();
    let (free, groups) = (sum(|r| r.shortfall_free_groups), sum(|r| r.group_cycles));
    let (short, loans) = (sum(|r| r.member_shortfalls), sum(|r| r.member_loans));
    let (a, q) = (free / groups, short / loans);
    let ratio = a / (1.0 - q).powi(k as i32);
    let (g_mean, l_mean) = (groups / n, loans / n);
    let z: Vec<f64> = reps
        .iter()
        .map(|r| {
            (r.shortfall_free_groups as f64 - a * r.group_cycles as f64) / (g_mean * a)
                + f64::from(k) * (r.member_shortfalls as f64 - q * r.member_loans as f64) / (l_mean * (1.0 - q))
        })
        .collect();
    let mean = z.iter().sum::<f64>() / n;
    let sd = (z.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (n - 1.0)).sqrt();
    (ratio, ratio * sd / n.sqrt())
}

/// Binomial law: with independent members, a group of k is shortfall-free with probability
/// (1 - q)^k, so `dependence_ratio` is 1 within 4 SE, with no cover and with full cover alike (cover
/// decides repayment, not shortfalls). With village correlation 0.3 (q = 0.1, k = 5) the one-factor
/// law gives E[(1 - p(M))^5] / 0.9^5 = 0.65953 / 0.59049 = 1.117 (quadrature over the village
/// factor): an effect of 0.117, which the test must see as more than 4 SE above 1 with an SE below
/// 0.01, that is at least 11 SE (seed 29 gives 1.1167, SE 0.0012: about 97 SE above 1).
#[test]
fn dependence_ratio_is_one_for_independent_members_and_above_one_when_correlated() {
    let k = 5;
    let text = |correlation: f64| {
        format!(
            r#"
            seed = 29
            replications = 100
            cycles = 20
            [portfolio]
            borrowers = 1000
            villages = 50
            [loan]
            principal = 100
            [borrowers]
            income = 1.2
            [[shock]]
            name = "illness"
            scope = "member"
            probability = 0.1
            village_correlation = {correlation:?}
            [policy]
            group_size = {k}
            [sweep]
            peer_cover = [0.0, 1.0]
            "#
        )
    };
    let independent = scenario(&text(0.0));
    let results = simulate(&independent);
    for arm in 0..2 {
        let (ratio, se) = dependence_ratio_and_se(&results, arm, k);
        let summary = arm_summary(&independent, &results, arm);
        let reported = summary.dependence_ratio.expect("a ratio");
        assert!(
            (reported - ratio).abs() <= 1e-12 * ratio,
            "arm {arm}: {reported} vs {ratio}"
        );
        assert_within(
            &format!("dependence ratio, independent, arm {arm}"),
            ratio,
            se,
            1.0,
            0.01,
        );
    }
    let correlated = scenario(&text(0.3));
    let results = simulate(&correlated);
    for arm in 0..2 {
        let (ratio, se) = dependence_ratio_and_se(&results, arm, k);
        println!("village correlation 0.3, arm {arm}: dependence ratio {ratio:.4} (SE {se:.4})");
        assert!(se < 0.01, "arm {arm}: SE {se} too large to see the effect");
        assert!(
            ratio - 1.0 > 4.0 * se,
            "arm {arm}: ratio {ratio} (SE {se}) not clearly above 1"
        );
        assert_within(
            &format!("dependence ratio, correlated, arm {arm}"),
            ratio,
            se,
            1.116_927_7,
            0.01,
        );
    }
}
