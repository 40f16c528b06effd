//! Group formation with sizes in a range, and the outreach figures, against the cut rule worked by
//! hand, a brute-force search, the binomial law per group size, and exact accounting identities.
//! Statistical checks hold within 4 standard errors estimated from independent replications.

mod common;

use common::*;
use loancycle::engine::formation::cut;
use loancycle::engine::simulate_replication;
use loancycle::stats::ReplicationTally;
use statrs::distribution::{Binomial, Discrete};

/// The sizes of the groups `cut` makes from `n` members, larger first.
fn sizes(n: usize, k: usize, min: usize, max: usize) -> (Vec<usize>, usize) {
    let (g, m) = cut(n, k, min, max);
    let sizes = (0..g).map(|j| m / g + usize::from(j < m % g)).collect();
    (sizes, n - m)
}

/// Worked by hand: 23 members, k = 5, sizes 4 to 6. The number of groups lies in
/// [ceil(23 / 6), floor(23 / 4)] = [4, 5]; 23 / 5 = 4.6 is closest to 5, so 5 groups: 5, 5, 5, 4, 4.
#[test]
fn twenty_three_members_form_five_five_five_four_four_and_nobody_waits() {
    assert_eq!(sizes(23, 5, 4, 6), (vec![5, 5, 5, 4, 4], 0));
}

/// Fewer members than the smallest size: everyone waits (no group at all).
#[test]
fn fewer_members_than_the_smallest_size_all_wait() {
    assert_eq!(cut(3, 5, 4, 6), (0, 0));
    assert_eq!(cut(0, 5, 4, 6), (0, 0));
}

/// With min = max = k the cut is today's rule: floor(n / k) groups of k, the rest waiting.
#[test]
fn a_single_size_cuts_as_groups_of_k() {
    for k in 1..=9 {
        for n in 0..200 {
            assert_eq!(cut(n, k, k, k), (n / k, n / k * k), "n = {n}, k = {k}");
        }
    }
}

/// Against a brute-force search over the number of members cut and the number of groups: for m
/// from n down, every g whose even split (sizes floor(m / g) and ceil(m / g)) lies in [min, max];
/// the first m with any such g, and among them the g with the least |g k - m|, ties to the larger.
#[test]
fn the_cut_matches_a_brute_force_search() {
    for min in 1usize..=6 {
        for max in min..=9 {
            for k in min..=max {
                for n in 0..120 {
                    let expected = (0..=n)
                        .rev()
                        .find_map(|m: usize| {
                            let fits: Vec<usize> = (1..=m).filter(|&g| m / g >= min && m.div_ceil(g) <= max).collect();
                            fits.into_iter()
                                .min_by_key(|&g| ((g * k).abs_diff(m), std::cmp::Reverse(g)))
                                .map(|g| (g, m))
                        })
                        .unwrap_or((0, 0));
                    assert_eq!(cut(n, k, min, max), expected, "n {n} k {k} [{min}, {max}]");
                }
            }
        }
    }
}

/// Groups per size in a tally: (size, groups).
fn groups_per_size(t: &ReplicationTally) -> Vec<(u32, u64)> {
    t.shortfalls_by_size()
        .into_iter()
        .map(|(s, c)| (s, c.iter().sum()))
        .collect()
}

/// The engine forms the hand-worked groups: one village of 23, k = 5, sizes 4 to 6.
#[test]
fn the_engine_forms_the_cut_groups_and_serves_everybody() {
    let s = scenario(
        r#"
        replications = 1
        cycles = 3
        [portfolio]
        borrowers = 23
        villages = 1
        [loan]
        principal = 100
        [policy]
        group_size = 5
        min_group_size = 4
        max_group_size = 6
        "#,
    );
    let t = simulate_replication(&s, 0, 0);
    assert_eq!(groups_per_size(&t), [(4, 2 * 3), (5, 3 * 3), (6, 0)]);
    assert_eq!((t.served_slot_cycles, t.waiting_slot_cycles), (23 * 3, 0));
    // today's rule would leave 3 of the 23 waiting every cycle
    let fixed =
        scenario("replications = 1\ncycles = 3\n[portfolio]\nborrowers = 23\nvillages = 1\n[loan]\nprincipal = 100\n");
    let t = simulate_replication(&fixed, 0, 0);
    assert_eq!((t.served_slot_cycles, t.waiting_slot_cycles), (20 * 3, 3 * 3));
}

/// Binomial law per group size: independent members, no cover, no exclusion, and a table curve, so
/// a member of a group of s is short with probability phi(s) and a group of s has n short with
/// probability Bin(s, phi(s)) at n (binomial law; pmf from statrs 0.18). Villages of 17 form 6, 6, 5
/// and villages of 18 form 5, 5, 4, 4 (size_slack 1 around k = 5), so every size is present. Each
/// size's share of groups with n short is a ratio over replications with its delta-method standard
/// error; a curve read at k for every group would give 0.1 to all sizes, which the checks at sizes 4
/// (0.2) and 6 (0.05) would reject by far more than 4 SE.
#[test]
fn shortfalls_follow_the_binomial_law_at_each_group_size() {
    let phi = [(4u32, 0.2), (5, 0.1), (6, 0.05)];
    let s = scenario(
        r#"
        seed = 41
        replications = 100
        cycles = 20
        [portfolio]
        borrowers = 1750
        villages = 100
        [loan]
        principal = 100
        [[shock]]
        name = "illness"
        scope = "member"
        probability = { curve = "table", values = { "4" = 0.2, "5" = 0.1, "6" = 0.05 } }
        [policy]
        group_size = 5
        size_slack = 1
        "#,
    );
    let results = simulate(&s);
    for (size, q) in phi {
        let bin = Binomial::new(q, u64::from(size)).unwrap();
        let row = |t: &ReplicationTally| -> Vec<u64> {
            t.shortfalls_by_size()
                .into_iter()
                .find(|(s, _)| *s == size)
                .map(|(_, c)| c.to_vec())
                .unwrap()
        };
        for n in 0..=2usize {
            let (rate, se) = replication_ratio(&results, 0, |t| {
                let c = row(t);
                (c[n] as f64, c.iter().sum::<u64>() as f64)
            });
            assert_within(&format!("size {size}, {n} short"), rate, se, bin.pmf(n as u64), 0.003);
        }
    }
    let summary = arm_summary(&s, &results, 0);
    // 17 x 50 + 18 x 50 members in (3 + 4) x 50 groups per cycle
    assert_eq!(summary.mean_group_size, Some(1750.0 / 350.0));
}

/// The scenario of the outreach identities: every village divides by k, no dropout, permanent
/// exclusion of defaulting groups, with or without replacement.
fn outreach_scenario(replace: bool) -> loancycle::scenario::Scenario {
    scenario(&format!(
        r#"
        seed = 5
        replications = 20
        cycles = 12
        [portfolio]
        borrowers = 400
        villages = 10
        [loan]
        principal = 100
        [[shock]]
        name = "illness"
        scope = "member"
        probability = 0.03
        [policy]
        group_size = 4
        exclusion_cycles = "permanent"
        [pool]
        replace_departures = {replace}
        "#
    ))
}

/// Permanent exclusion with replacement: removed borrowers are replaced at once, so no slot stays
/// empty, yet every removal shows as an exclusion event and a removal, and each entrant as a new
/// client: with every village divisible by k and nobody waiting, the clients reached are exactly the
/// first cycle's borrowers plus the entrants, and the entrants are the removals of every cycle but
/// the last (refilled at the next entry step).
#[test]
fn removals_with_replacement_show_as_removals_entrants_and_clients() {
    let s = outreach_scenario(true);
    let results = simulate(&s);
    let mut removals = 0;
    for t in &results.arms[0].replications {
        assert_eq!(t.removed_slot_cycles, 0);
        assert_eq!(t.empty_slot_cycles, 0);
        assert_eq!(t.waiting_slot_cycles, 0);
        assert_eq!(t.exclusion_events, t.removals);
        assert_eq!(t.clients_reached, 400 + t.entrants);
        assert!(t.entrants <= t.removals);
        removals += t.removals;
    }
    assert!(removals > 100, "too few removals ({removals}) to show anything");
    let summary = arm_summary(&s, &results, 0);
    assert_eq!(summary.removed_share, Some(0.0));
    assert!(summary.removal_rate.unwrap() > 0.0 && summary.entrant_rate.unwrap() > 0.0);
}

/// Without replacement a removed borrower's slot stays empty: with no dropout every empty slot is a
/// removed one, so `removed_share` equals `empty_share`, and the four shares still sum to 1.
#[test]
fn removals_without_replacement_leave_removed_slots_inside_the_empty_share() {
    let s = outreach_scenario(false);
    let results = simulate(&s);
    for t in &results.arms[0].replications {
        assert_eq!(t.removed_slot_cycles, t.empty_slot_cycles);
        assert_eq!(t.entrants, 0);
    }
    let summary = arm_summary(&s, &results, 0);
    assert!(summary.removed_share.unwrap() > 0.0);
    assert_eq!(summary.removed_share, summary.empty_share);
    let total = summary.served_share.unwrap()
        + summary.excluded_share.unwrap()
        + summary.waiting_share.unwrap()
        + summary.empty_share.unwrap();
    assert!((total - 1.0).abs() < 1e-12);
}

/// Term exclusion counts events but removes nobody; without exclusion there are no events.
#[test]
fn term_exclusion_counts_events_without_removals() {
    let s = scenario(
        r#"
        seed = 5
        replications = 4
        cycles = 12
        [portfolio]
        borrowers = 400
        villages = 10
        [loan]
        principal = 100
        [[shock]]
        name = "illness"
        scope = "member"
        probability = 0.03
        [policy]
        group_size = 4
        [sweep]
        exclusion_cycles = [0, 2]
        "#,
    );
    let results = simulate(&s);
    let none = arm_summary(&s, &results, 0);
    let term = arm_summary(&s, &results, 1);
    assert_eq!(none.exclusion_events, Some(0.0));
    assert!(term.exclusion_events.unwrap() > 0.0);
    assert_eq!(term.removal_rate, Some(0.0));
    assert_eq!(term.entrant_rate, Some(0.0));
}

/// The defaults give today's rule (min = max = k); the slack widens the range, at least 1 below; a
/// written bound wins over the slack; all three sweep like any policy field.
#[test]
fn size_bounds_default_to_k_and_follow_the_slack() {
    let s = scenario(
        r#"
        replications = 1
        cycles = 1
        [portfolio]
        borrowers = 100
        [loan]
        principal = 100
        [policy]
        group_size = 2
        [sweep]
        size_slack = [0, 3]
        max_group_size = [4, 6]
        "#,
    );
    let bounds: Vec<(u32, u32)> = s
        .arms()
        .iter()
        .map(|a| (a.policy().min_group_size(), a.policy().max_group_size()))
        .collect();
    assert_eq!(bounds, [(2, 4), (2, 6), (1, 4), (1, 6)]);
    let plain = scenario("replications = 1\ncycles = 1\n[portfolio]\nborrowers = 100\n[loan]\nprincipal = 100\n");
    let p = plain.arms()[0].policy();
    assert_eq!((p.min_group_size(), p.max_group_size(), p.sizes_vary()), (5, 5, false));
}
