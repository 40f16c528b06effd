//! Laws of the borrower-behaviour and loan-size extensions: who walks away when repaying is a
//! choice, how losses are booked loan by loan, and how principals grow and restart.

mod common;

use common::*;
use loancycle::stats::tolerance::STANDARD_ERRORS;

/// Exponential survival law. With temptation gamma of cv 1 (the exponential law) and mean mu, a
/// member able to pay walks away iff T > threshold, so the walk-away rate among able members is
/// P(T > threshold) = exp(-threshold / mu) (survival function of the exponential law, any probability
/// textbook). The threshold is B (delta + ... + delta^E) plus the social sanction under joint
/// liability (the repayment game of Besley and Coate 1995, "Group lending, repayment incentives and
/// social collateral", Journal of Development Economics 46, with exclusion for E cycles as the
/// penalty); the sums are written out here term by term, and delta / (1 - delta) (the geometric
/// series) for permanent exclusion. The engine decides T > threshold by comparing one uniform with
/// the gamma law's survival function (statrs' regularised incomplete gamma), so this checks that
/// function, the threshold and the walk-away stream against the exponential law's closed form.
///
/// Incomes 1.5 times the amount due and no shock: every member is able to pay every cycle. 30
/// replications of 600 members over 20 cycles: up to 360,000 able member-cycles per arm (fewer where
/// exclusion keeps defaulters out), so the standard error is at most about 0.0015 and 4 SE (0.006) is far below the gap between one
/// exclusion length and the next (at least 0.08 here), and below the gap a sum starting at delta^0
/// instead of delta^1 would make (at least 0.05).
#[test]
fn walk_aways_follow_the_exponential_survival_law() {
    let (loan_value, discount, mu, sanction) = (0.25, 0.8, 0.5, 0.2);
    let s = scenario(&format!(
        r#"
        seed = 21
        replications = 30
        cycles = 20
        [portfolio]
        borrowers = 600
        villages = 6
        [loan]
        principal = 100
        interest_rate = 0.1
        [borrowers]
        income = 1.5
        [behaviour]
        loan_value = {loan_value}
        discount = {discount}
        temptation = {{ kind = "gamma", mean = {mu}, cv = 1.0 }}
        [policy]
        group_size = 5
        peer_cover = 1.0
        [sweep]
        exclusion_cycles = [0, 1, 2, 4, "permanent"]
        "behaviour.social_sanction" = [0.0, {sanction}]
        liability = ["joint", "individual"]
        "#
    ));
    let results = simulate(&s);
    let discounted = |e: Option<u32>| -> f64 {
        match e {
            Some(e) => (1..=e).map(|j| f64::powi(discount, j as i32)).sum(),
            None => discount / (1.0 - discount),
        }
    };
    let lengths = [Some(0), Some(1), Some(2), Some(4), None];
    let mut arm = 0;
    let mut rates = Vec::new();
    for e in lengths {
        for with_sanction in [false, true] {
            for joint in [true, false] {
                let social = if with_sanction && joint { sanction } else { 0.0 };
                let threshold = loan_value * discounted(e) + social;
                let expected = (-threshold / mu).exp();
                let label = s.arms()[arm].label();
                let reps = &results.arms[arm].replications;
                assert!(
                    reps.iter().all(|t| t.able_members == t.member_loans),
                    "{label}: all able"
                );
                if threshold == 0.0 {
                    // no penalty at all: every draw of a continuous temptation beats it
                    assert!(reps.iter().all(|t| t.strategic_defaults == t.able_members), "{label}");
                } else {
                    let (rate, se) =
                        replication_ratio(&results, arm, |t| (t.strategic_defaults as f64, t.able_members as f64));
                    assert_within(label, rate, se, expected, 0.0015);
                    rates.push((label.to_owned(), rate, expected));
                }
                arm += 1;
            }
        }
    }
    // the effect the tolerance must not swallow: a sum from delta^0 would raise the threshold of
    // E = 1 without sanction from 0.2 to 0.45, moving the rate from 0.670 to 0.407
    assert!((0.670_f64 - 0.407).abs() > 10.0 * STANDARD_ERRORS * 0.0015);
    // 20 arms, three of them without any threshold (E = 0 and no sanction in force)
    assert_eq!(rates.len(), 17, "{rates:?}");
}

/// Common random numbers: with no peer cover and no exclusion, the arms see the same members, the
/// same groups and the same shocks, and a joint group's loans are booked like individual loans
/// (each one's own payment to its own loan, interest first), so joint and individual liability book
/// identical losses, replication by replication. With cover, the peers' payments only reduce what
/// each loan leaves unpaid, so joint losses are never above individual ones; here they are lower in
/// every replication by at least a tenth (the cover pays real money).
#[test]
fn joint_losses_equal_individual_without_cover_and_never_exceed_them_with_cover() {
    let text = |cover: f64| {
        format!(
            r#"
            seed = 33
            replications = 12
            cycles = 15
            [portfolio]
            borrowers = 500
            villages = 5
            [loan]
            principal = 100
            interest_rate = 0.3
            recovery_rate = 0.1
            [borrowers]
            income = {{ kind = "lognormal", mean = 1.3, cv = 0.3 }}
            [[shock]]
            name = "illness"
            scope = "member"
            probability = 0.12
            village_correlation = 0.15
            severity = {{ kind = "beta", mean = 0.7, sd = 0.2 }}
            [[shock]]
            name = "harvest"
            scope = "village"
            probability = 0.1
            reach = 0.5
            severity = 0.6
            [policy]
            group_size = 5
            peer_cover = {cover}
            [sweep]
            liability = ["joint", "individual"]
            "#
        )
    };
    let none = scenario(&text(0.0));
    let results = simulate(&none);
    for (joint, individual) in results.arms[0].replications.iter().zip(&results.arms[1].replications) {
        assert!(individual.loss > 0.0);
        assert_eq!(joint.loss, individual.loss, "replication {}", joint.replication);
        assert_eq!(joint.disbursed, individual.disbursed);
    }
    let covered = scenario(&text(0.6));
    let results = simulate(&covered);
    for (joint, individual) in results.arms[0].replications.iter().zip(&results.arms[1].replications) {
        assert!(
            joint.loss <= individual.loss,
            "replication {}: joint {} above individual {}",
            joint.replication,
            joint.loss,
            individual.loss
        );
        assert!(joint.loss < 0.9 * individual.loss, "cover must pay something");
    }
}

/// Progressive lending, written out by hand. Incomes 1.5 times the first amount due, no shock, no
/// cover, growth 0.2 with a cap of 3: principals run 1, 1.2, 1.44, 1.728 times the first. At 1.728
/// the amount due exceeds the income, every member is short, the groups default and everyone
/// restarts at the first principal, so the cycle of four repeats: a quarter of the member loans are
/// short, and the mean principal is (1 + 1.2 + 1.44 + 1.728) / 4 times the first. With the cap at
/// 1.3, principals run 1, 1.2, 1.3, 1.3, ... and nobody is ever short. With income growth 0.1 the
/// income ratio after t cycles is 1.5 x 1.1^t, so growth 0.2 first outruns it at t = 7 (1.2^7 = 3.58 >
/// 1.5 x 1.1^7 = 2.92), where the cap of 3 has not yet bitten: exactly the eighth cycle is short.
#[test]
fn principals_grow_restart_and_stop_at_the_cap() {
    let run = |cap: f64, income_growth: f64, cycles: u32| {
        let s = scenario(&format!(
            r#"
            seed = 4
            replications = 2
            cycles = {cycles}
            [portfolio]
            borrowers = 50
            [loan]
            principal = 100
            interest_rate = 0.1
            growth = 0.2
            max_multiple = {cap}
            [borrowers]
            income = 1.5
            income_growth = {income_growth}
            [policy]
            group_size = 5
            "#
        ));
        let results = simulate(&s);
        arm_summary(&s, &results, 0)
    };
    let restarting = run(3.0, 0.0, 16);
    assert_eq!(restarting.member_shortfall_rate, Some(0.25));
    let mean = 100.0 * (1.0 + 1.2 + 1.44 + 1.728) / 4.0;
    assert!((restarting.mean_principal.unwrap() - mean).abs() < 1e-9 * mean);
    let capped = run(1.3, 0.0, 10);
    assert_eq!(capped.member_shortfall_rate, Some(0.0));
    let mean = 100.0 * (1.0 + 1.2 + 8.0 * 1.3) / 10.0;
    assert!((capped.mean_principal.unwrap() - mean).abs() < 1e-9 * mean);
    let growing_income = run(3.0, 0.1, 8);
    assert_eq!(growing_income.member_shortfall_rate, Some(1.0 / 8.0));
}

/// The growth ratio g in the threshold, written out by hand. Incomes 3 times the first amount due
/// (everyone able), temptation fixed at 0.6, B = 1, delta = 0.5 and one cycle of exclusion, so the
/// threshold is 0.5 g. At the first principal g = 1.5 (threshold 0.75): she pays; at 1.5 times it
/// g = 2 / 1.5 (threshold 0.667): she pays; at the cap of 2, g = 1 (threshold 0.5): growth no longer
/// rewards paying and she walks away. Her group defaults, sits out one cycle, and she returns at the
/// first principal. Every member runs 100, 150, 200 (walks), excluded, and again: the mean principal
/// is 150 and a third of the able members walk away.
#[test]
fn the_cap_removes_the_reward_of_growth_and_a_walk_away_restarts_the_loan() {
    let s = scenario(
        r#"
        seed = 9
        replications = 2
        cycles = 12
        [portfolio]
        borrowers = 40
        [loan]
        principal = 100
        growth = 0.5
        max_multiple = 2
        [borrowers]
        income = 3.0
        [behaviour]
        loan_value = 1.0
        discount = 0.5
        temptation = 0.6
        [policy]
        group_size = 4
        peer_cover = 1.0
        exclusion_cycles = 1
        "#,
    );
    let results = simulate(&s);
    let summary = arm_summary(&s, &results, 0);
    assert_eq!(summary.mean_principal, Some(150.0));
    let t = &results.arms[0].replications.get(0).unwrap();
    assert_eq!((t.member_loans, t.able_members), (9 * 40, 9 * 40));
    assert_eq!(t.strategic_defaults, 3 * 40);
    assert_eq!(t.groups_repaid * 3, t.group_cycles * 2);
}

/// Walkers under joint liability, by the binomial law (any probability textbook). Incomes 3 times the
/// amount due, no shock, full cover, groups of 3; B = 0 and a social sanction of 0.5 with temptation
/// uniform on [0, 1]: each member walks away with probability 1/2, independently. One member who
/// pays covers two walkers (surplus 2 D each), so a group defaults only when all three walk (1/8),
/// and it is rescued when one or two walk (6/8). Walkers are never counted short. A defaulting group
/// is made of walkers only, so excluding the group or only its defaulters excludes the same people:
/// the two scopes give identical runs, with exclusions (walkers count as defaulters). 40
/// replications of 300 members over 20 cycles: about 70,000 group-cycles, standard errors near
/// 0.0015, so 4 SE (0.006) is far below 1/8, the gap a rule ignoring walkers would leave.
#[test]
fn walkers_are_covered_by_peers_and_excluded_as_defaulters() {
    let s = scenario(
        r#"
        seed = 55
        replications = 40
        cycles = 20
        [portfolio]
        borrowers = 300
        villages = 3
        [loan]
        principal = 100
        interest_rate = 0.1
        [borrowers]
        income = 3.0
        [behaviour]
        loan_value = 0.0
        discount = 0.5
        temptation = { kind = "uniform", low = 0.0, high = 1.0 }
        social_sanction = 0.5
        [policy]
        group_size = 3
        peer_cover = 1.0
        exclusion_cycles = 1
        [sweep]
        exclusion_scope = ["group", "defaulters"]
        "#,
    );
    let results = simulate(&s);
    assert_eq!(
        results.arms[0], results.arms[1],
        "walkers of a defaulting group are its defaulters"
    );
    let reps = &results.arms[0].replications;
    assert!(
        reps.iter()
            .all(|t| t.member_shortfalls == 0 && t.shortfall_free_groups == t.group_cycles)
    );
    assert!(reps.iter().all(|t| t.excluded_slot_cycles > 0));
    let (repaid, se) = replication_ratio(&results, 0, |t| (t.groups_repaid as f64, t.group_cycles as f64));
    assert_within("group repayment", repaid, se, 7.0 / 8.0, 0.002);
    let (rescued, se) = replication_ratio(&results, 0, |t| (t.groups_rescued as f64, t.group_cycles as f64));
    assert_within("rescued share", rescued, se, 6.0 / 8.0, 0.003);
    let (walked, se) = replication_ratio(&results, 0, |t| (t.strategic_defaults as f64, t.able_members as f64));
    assert_within("walk-away rate", walked, se, 0.5, 0.002);
}
