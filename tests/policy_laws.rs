//! The policy features (exclusion scope, permanent exclusion, persistent formation, assortative
//! matching) and common random numbers across group sizes, against computations made here, outside
//! the engine. Tolerances are 4 standard errors estimated from independent replications.

mod common;

use common::*;
use loancycle::stats::ReplicationTally;

/// `assert_within`, printing the figures it compares (shown with `--nocapture`).
fn check(label: &str, estimate: f64, se: f64, reference: f64, max_se: f64) {
    println!(
        "{label}: estimate {estimate:.6}, reference {reference:.6}, se {se:.2e}, z {:.2}",
        (estimate - reference) / se
    );
    assert_within(label, estimate, se, reference, max_se);
}

/// Per-cycle figure `f` of counted cycle `cycle` (1-based) as a pooled ratio over replications, with
/// its standard error from the variation between replications.
fn cycle_ratio(
    results: &loancycle::run::RunResults,
    arm: usize,
    cycle: usize,
    f: impl Fn(&loancycle::stats::CycleRecord) -> (f64, f64),
) -> (f64, f64) {
    let r = loancycle::stats::estimate::ratio(results.arms[arm].replications.iter().map(|t| f(&t.cycles[cycle - 1])))
        .expect("denominator");
    (r.rate, r.standard_error.expect("at least two replications"))
}

fn binomial_coefficient(n: u64, r: u64) -> f64 {
    if r > n {
        return 0.0;
    }
    (0..r).fold(1.0, |acc, i| acc * (n - i) as f64 / (i + 1) as f64)
}

/// `defaulters` scope: independent members hit with probability q (severity 1, incomes equal to
/// the amount due, no cover), so a member is short iff hit, and only the short member sits out the
/// next E cycles; the others of its defaulting group stay eligible.
///
/// Renewal-reward theorem (Ross, Introduction to Probability Models, ch. 7), or Little's law: each
/// served member-cycle starts an exclusion of E cycles with probability q, so in the stationary
/// regime excluded slot-cycles / served slot-cycles = q E, whatever the waiting. Were the whole group
/// excluded, the factor would be d = 1 - (1 - q)^k = 0.185 instead of q = 0.05: 3.7 times larger.
///
/// Per member, the chain "eligible, excluded 1..E" has stationary excluded share q E / (1 + q E)
/// when every eligible member is served. The eligible count modulo k waits; it is spread over far
/// more than k values, so the remainder is uniform on 0..k-1 and the mean waiting share is
/// w = (k - 1) / (2 N) for a village of N. Waiting members are not hit, and with the identity above
/// (excluded = q E served, served = 1 - w - excluded) the excluded share is q E (1 - w) / (1 + q E).
#[test]
fn defaulters_scope_excludes_only_the_short_members() {
    let (q, k, village) = (0.05f64, 4u32, 4000u32);
    let s = scenario(&format!(
        r#"
        seed = 101
        replications = 100
        cycles = 50
        warmup_cycles = 30
        [portfolio]
        borrowers = {village}
        villages = 1
        [loan]
        principal = 100
        [[shock]]
        name = "illness"
        scope = "member"
        probability = {q}
        [policy]
        group_size = {k}
        exclusion_scope = "defaulters"
        [sweep]
        exclusion_cycles = [1, 2, 4]
        "#
    ));
    let results = simulate(&s);
    for (arm, a) in s.arms().iter().enumerate() {
        let e = match a.policy().exclusion_cycles() {
            loancycle::scenario::Exclusion::Cycles(e) => f64::from(e),
            loancycle::scenario::Exclusion::Permanent => unreachable!(),
        };
        // renewal-reward: q E excluded cycles per served member-cycle
        let (per_served, se) = replication_ratio(&results, arm, |r| {
            (r.excluded_slot_cycles as f64, r.served_slot_cycles as f64)
        });
        let group_scope = (1.0 - (1.0 - q).powi(k as i32)) * e;
        assert!((group_scope - q * e) > 20.0 * se, "E={e}: scopes not told apart");
        check(&format!("excluded per served, E={e}"), per_served, se, q * e, 0.004);
        // a member is short iff hit: binomial law
        let (short, se) = replication_ratio(&results, arm, |r| (r.member_shortfalls as f64, r.member_loans as f64));
        check(&format!("shortfall rate, E={e}"), short, se, q, 0.001);
        // stationary excluded share of the member chain, with the waiting of the remainder
        let waiting_reference = f64::from(k - 1) / (2.0 * f64::from(village));
        let (waiting, se) = replication_ratio(&results, arm, |r| {
            (r.waiting_slot_cycles as f64, r.slot_cycles() as f64)
        });
        check(&format!("waiting share, E={e}"), waiting, se, waiting_reference, 1e-5);
        let reference = q * e * (1.0 - waiting_reference) / (1.0 + q * e);
        let (share, se) = replication_ratio(&results, arm, |r| {
            (r.excluded_slot_cycles as f64, r.slot_cycles() as f64)
        });
        check(&format!("excluded share, E={e}"), share, se, reference, 0.002);
    }
}

/// Mean over u ~ Uniform(a, b) of (1 - q u)^n, exactly (antiderivative of a polynomial).
fn uniform_mean_of_power(a: f64, b: f64, q: f64, n: i32) -> f64 {
    let antiderivative = |u: f64| -(1.0 - q * u).powi(n + 1) / (q * f64::from(n + 1));
    (antiderivative(b) - antiderivative(a)) / (b - a)
}

/// Mean over u ~ Uniform(a, b) of u (1 - q u)^n, exactly: u = (1 - (1 - q u)) / q.
fn uniform_mean_of_u_times_power(a: f64, b: f64, q: f64, n: i32) -> f64 {
    (uniform_mean_of_power(a, b, q, n) - uniform_mean_of_power(a, b, q, n + 1)) / q
}

/// Permanent exclusion without replacement, groups of one: a member with risk u is short (hit)
/// with probability u q, then leaves for good; otherwise it drops out with probability d. Its slot
/// is still occupied at formation of cycle t with probability s(u)^(t - 1), s(u) = (1 - u q)(1 - d)
/// (geometric survival). With u ~ Uniform(a, b) the served share of cycle t is E[s(u)^(t - 1)] and
/// its shortfalls q E[u s(u)^(t - 1)]: the survivors are selected towards low risk, so the pooled
/// shortfall rate (0.18) is well below q E[u] = 0.2. Slots left are empty, never excluded.
///
/// Groups of four with group scope and no dropout: whole groups leave, so nobody waits and the
/// served share of cycle t is (1 - q)^(4 (t - 1)) (binomial law for a group's default, geometric
/// survival). A default probability off by 0.01 (0.196 for 0.186) moves this mean served share by
/// 0.013, about 8 standard errors.
#[test]
fn permanent_exclusion_without_replacement_empties_slots_geometrically() {
    let (q, d, a, b, cycles) = (0.2f64, 0.05f64, 0.2f64, 1.8f64, 20u32);
    let s = scenario(&format!(
        r#"
        seed = 102
        replications = 100
        cycles = {cycles}
        [portfolio]
        borrowers = 1000
        villages = 4
        [loan]
        principal = 100
        [borrowers]
        risk = {{ kind = "uniform", low = {a}, high = {b} }}
        [[shock]]
        name = "illness"
        scope = "member"
        probability = {q}
        [policy]
        group_size = 1
        exclusion_cycles = "permanent"
        [pool]
        dropout = {d}
        replace_departures = false
        "#
    ));
    let results = simulate(&s);
    let survival = |n: i32| (1.0 - d).powi(n) * uniform_mean_of_power(a, b, q, n);
    let shortfalls = |n: i32| q * (1.0 - d).powi(n) * uniform_mean_of_u_times_power(a, b, q, n);
    let served_sum: f64 = (0..cycles as i32).map(survival).sum();
    let shortfall_sum: f64 = (0..cycles as i32).map(shortfalls).sum();
    let (served, se) = replication_ratio(&results, 0, |r| (r.served_slot_cycles as f64, r.slot_cycles() as f64));
    check("served share", served, se, served_sum / f64::from(cycles), 0.002);
    let (empty, se) = replication_ratio(&results, 0, |r| (r.empty_slot_cycles as f64, r.slot_cycles() as f64));
    check("empty share", empty, se, 1.0 - served_sum / f64::from(cycles), 0.002);
    let (short, se) = replication_ratio(&results, 0, |r| (r.member_shortfalls as f64, r.member_loans as f64));
    let selected = shortfall_sum / served_sum;
    assert!(
        (q - selected) > 20.0 * se,
        "selection effect {} too small to detect",
        q - selected
    );
    check("shortfall rate of survivors", short, se, selected, 0.001);
    for t in &results.arms[0].replications {
        assert_eq!(t.cycles[0].served, 1000, "everybody is served in the first cycle");
    }
    for cycle in [2usize, 5, 10, 20] {
        let (share, se) = cycle_ratio(&results, 0, cycle, |c| (f64::from(c.served), 1000.0));
        check(
            &format!("served share, cycle {cycle}"),
            share,
            se,
            survival(cycle as i32 - 1),
            0.003,
        );
    }
    for t in &results.arms[0].replications {
        assert_eq!(t.excluded_slot_cycles, 0, "permanent exclusion empties the slot");
        assert_eq!(t.waiting_slot_cycles, 0, "groups of one: nobody waits");
    }

    let q = 0.05f64;
    let s = scenario(&format!(
        r#"
        seed = 103
        replications = 100
        cycles = {cycles}
        [portfolio]
        borrowers = 1000
        villages = 5
        [loan]
        principal = 100
        [[shock]]
        name = "illness"
        scope = "member"
        probability = {q}
        [policy]
        group_size = 4
        exclusion_cycles = "permanent"
        exclusion_scope = "group"
        [pool]
        replace_departures = false
        "#
    ));
    let results = simulate(&s);
    let group_survival = (1.0 - q).powi(4);
    let reference = (0..cycles as i32).map(|n| group_survival.powi(n)).sum::<f64>() / f64::from(cycles);
    let (served, se) = replication_ratio(&results, 0, |r| (r.served_slot_cycles as f64, r.slot_cycles() as f64));
    check("served share, groups of 4", served, se, reference, 0.003);
    for t in &results.arms[0].replications {
        assert_eq!(t.excluded_slot_cycles, 0);
        assert_eq!(t.waiting_slot_cycles, 0, "whole groups leave: nobody waits");
        assert_eq!(t.served_slot_cycles + t.empty_slot_cycles, t.slot_cycles());
    }
}

/// Permanent exclusion with replacement, groups of one: every removal is refilled at the next entry
/// step, so every slot is served every cycle (member loans = borrowers x cycles exactly), and the
/// entrants are fresh draws of the risk multiplier. A slot is a renewal process whose tenant with
/// risk u stays a geometric number of cycles with exit probability e(u) = 1 - (1 - u q)(1 - d), and
/// its tenancy ends with one shortfall with probability u q / e(u). By the renewal-reward theorem
/// (Ross, Introduction to Probability Models, ch. 7) the long-run shortfall rate is
/// E[u q / e(u)] / E[1 / e(u)] over u ~ Uniform(a, b), integrated here in closed form. It is 0.162,
/// against q E[u] = 0.2 for an unselected pool.
#[test]
fn permanent_exclusion_with_replacement_refills_with_fresh_entrants() {
    let (q, d, a, b, borrowers, cycles) = (0.2f64, 0.05f64, 0.2f64, 1.8f64, 1000u64, 20u64);
    // slowest exit: 1 - (1 - a q)(1 - d) = 0.088 per cycle; after 150 cycles the tenants' risk
    // distribution is within 0.912^150 = 1e-6 of the stationary one
    let s = scenario(&format!(
        r#"
        seed = 104
        replications = 100
        cycles = {cycles}
        warmup_cycles = 150
        [portfolio]
        borrowers = {borrowers}
        villages = 4
        [loan]
        principal = 100
        [borrowers]
        risk = {{ kind = "uniform", low = {a}, high = {b} }}
        [[shock]]
        name = "illness"
        scope = "member"
        probability = {q}
        [policy]
        group_size = 1
        exclusion_cycles = "permanent"
        [pool]
        dropout = {d}
        replace_departures = true
        "#
    ));
    let results = simulate(&s);
    for t in &results.arms[0].replications {
        assert_eq!(t.member_loans, borrowers * cycles, "every slot refilled and served");
        assert_eq!(t.served_slot_cycles, t.slot_cycles());
    }
    let c = q * (1.0 - d);
    // E[1 / e(u)] with e(u) = d + c u
    let mean_tenure = ((d + c * b) / (d + c * a)).ln() / (c * (b - a));
    // E[u q / e(u)] = (1 - d E[1 / e(u)]) / (1 - d)
    let mean_shortfalls = (1.0 - d * mean_tenure) / (1.0 - d);
    let reference = mean_shortfalls / mean_tenure;
    let (short, se) = replication_ratio(&results, 0, |r| (r.member_shortfalls as f64, r.member_loans as f64));
    assert!(q - reference > 20.0 * se, "selection effect too small to detect");
    check("stationary shortfall rate", short, se, reference, 0.001);
}

/// Persistent formation keeps a group only while all its members stay eligible. Villages of six,
/// groups of three, group exclusion for one cycle, no shocks and no cover: incomes ~ Uniform(0.7,
/// 1.7) make a member short every cycle iff its income is below the amount due (probability 0.3),
/// so a group repays iff it has no such member. With b short members in the village (binomial
/// law), at every odd cycle all six are eligible: a fresh split leaves one group clean with the
/// hypergeometric probability h_b = 2 C(6 - b, 3 - b) / C(6, 3) (b = 1..3). A clean group repays at
/// that cycle and the next (when the other group sits out).
/// - Reshuffled: each odd cycle is a fresh split, so the expected groups repaid per village in
///   cycles 2j - 1 and 2j is 2 P(b = 0) + sum_b P(b) h_b.
/// - Persistent: a clean group is kept for good and the other group re-forms as itself, so the
///   first clean split is awaited with a geometric law: sum_b P(b) (1 - (1 - h_b)^j) in place of
///   sum_b P(b) h_b.
///
/// Over 16 cycles the two laws differ by 0.18 groups per village-cycle, about 60 standard errors;
/// each cycle from the third on differs by 0.09 or more, 25 standard errors.
#[test]
fn persistent_groups_await_a_clean_split_geometrically() {
    let (k, villages, cycles) = (3u64, 200u32, 16usize);
    let n = 2 * k;
    let short = 0.3f64;
    let s = scenario(&format!(
        r#"
        seed = 105
        replications = 200
        cycles = {cycles}
        [portfolio]
        borrowers = {}
        villages = {villages}
        [loan]
        principal = 100
        [borrowers]
        income = {{ kind = "uniform", low = 0.7, high = 1.7 }}
        [policy]
        group_size = {k}
        exclusion_cycles = 1
        exclusion_scope = "group"
        [sweep]
        formation = ["reshuffle", "persistent"]
        "#,
        n * u64::from(villages)
    ));
    let results = simulate(&s);
    let p_short = |b: u64| binomial_coefficient(n, b) * short.powi(b as i32) * (1.0 - short).powi((n - b) as i32);
    let clean_split = |b: u64| 2.0 * binomial_coefficient(n - b, k - b) / binomial_coefficient(n, k);
    let expected = |persistent: bool, j: i32| {
        2.0 * p_short(0)
            + (1..=k)
                .map(|b| {
                    let h = clean_split(b);
                    p_short(b) * if persistent { 1.0 - (1.0 - h).powi(j) } else { h }
                })
                .sum::<f64>()
    };
    let total = |persistent: bool| {
        (1..=cycles as i32)
            .map(|t| expected(persistent, (t + 1) / 2))
            .sum::<f64>()
    };
    for (arm, persistent) in [(0usize, false), (1, true)] {
        assert_eq!(
            s.arms()[arm].policy().formation() == loancycle::scenario::Formation::Persistent,
            persistent
        );
        for cycle in 1..=cycles {
            let (repaid, se) = cycle_ratio(&results, arm, cycle, |c| {
                (f64::from(c.groups_repaid), f64::from(villages))
            });
            let reference = expected(persistent, (cycle as i32 + 1) / 2);
            check(
                &format!("groups repaid per village, persistent={persistent}, cycle {cycle}"),
                repaid,
                se,
                reference,
                0.01,
            );
        }
        let (repaid, se) = replication_ratio(&results, arm, |r| {
            (r.groups_repaid as f64, f64::from(villages) * cycles as f64)
        });
        // the two laws differ by far more than the test's resolution
        assert!((total(true) - total(false)).abs() / cycles as f64 > 10.0 * se);
        check(
            &format!("groups repaid per village-cycle, persistent={persistent}"),
            repaid,
            se,
            total(persistent) / cycles as f64,
            0.005,
        );
    }
}

/// Expected product over the block of uniform order statistics `first..first + k` (1-based, of `n`)
/// of (alpha - beta V_(i)), expanding the product over subsets and using the product moments of
/// uniform order statistics E[V_(i_1) ... V_(i_m)] = prod_l (i_l + l - 1) / (n + l) for
/// i_1 < ... < i_m (Dirichlet law of uniform spacings; David and Nagaraja, Order Statistics).
fn order_statistic_block_product(n: u64, first: u64, k: u64, alpha: f64, beta: f64) -> f64 {
    let mut total = 0.0;
    for subset in 0u32..(1 << k) {
        let mut term = 1.0;
        let mut l = 0u64;
        for j in 0..k {
            if subset & (1 << j) != 0 {
                l += 1;
                let i = first + j;
                term *= -beta * (i + l - 1) as f64 / (n + l) as f64;
            } else {
                term *= alpha;
            }
        }
        total += term;
    }
    total
}

/// Assortative matching orders a village by risk multiplier, so groups are blocks of consecutive
/// order statistics. With risk u = a + (b - a) V, V uniform, independent members hit with
/// probability u q (severity 1, no cover), a group repays iff nobody is hit: prod (1 - q u_i). The
/// expected group repayment is the mean over blocks of E[prod (1 - q a - q (b - a) V_(i))], computed
/// exactly from the product moments of uniform order statistics. Random matching puts k independent
/// draws of u in a group: (1 - q E[u])^k (binomial law). (The scenario format has no two-point
/// distribution; the uniform one gives an exact reference all the same.) The two laws give 0.397
/// and 0.328, about 65 standard errors apart.
#[test]
fn assortative_matching_groups_similar_risks() {
    let (q, a, b, k, village, villages) = (0.2f64, 0.0f64, 2.0f64, 5u64, 500u64, 2u64);
    let s = scenario(&format!(
        r#"
        seed = 106
        replications = 100
        cycles = 20
        [portfolio]
        borrowers = {}
        villages = {villages}
        [loan]
        principal = 100
        [borrowers]
        risk = {{ kind = "uniform", low = {a}, high = {b} }}
        [[shock]]
        name = "illness"
        scope = "member"
        probability = {q}
        [policy]
        group_size = {k}
        [sweep]
        matching = ["random", "assortative"]
        "#,
        village * villages
    ));
    let results = simulate(&s);
    let random = (1.0 - q * (a + b) / 2.0).powi(k as i32);
    let blocks = village / k;
    let assortative = (0..blocks)
        .map(|g| order_statistic_block_product(village, g * k + 1, k, 1.0 - q * a, q * (b - a)))
        .sum::<f64>()
        / blocks as f64;
    for (arm, reference) in [(0usize, random), (1, assortative)] {
        let g = arm_summary(&s, &results, arm).group_repayment.expect("groups served");
        let se = g.standard_error.unwrap();
        assert!(
            (assortative - random).abs() > 20.0 * se,
            "the two matchings' laws ({random}, {assortative}) must differ by many standard errors ({se})"
        );
        check(
            &format!("group repayment, arm {}", s.arms()[arm].label()),
            g.rate,
            se,
            reference,
            0.002,
        );
        // matching changes who is grouped with whom, never who is hit
        let (short, se) = replication_ratio(&results, arm, |r| (r.member_shortfalls as f64, r.member_loans as f64));
        check("shortfall rate", short, se, q * (a + b) / 2.0, 0.002);
    }
}

/// Common random numbers across group sizes: a member's shock draws are keyed by its slot, the cycle
/// and the shock, never by its group, so arms that differ only in group size see the same shocks.
/// Villages of 420 = 3 x 4 x 5 x 7 members serve everybody for every k swept; with no exclusion and
/// no dropout the served members are the same, so the shortfall counts of every cycle must be equal
/// across k, replication by replication (heterogeneous incomes and risks, a village factor and random
/// severities included).
#[test]
fn group_sizes_share_member_shocks() {
    let s = scenario(
        r#"
        seed = 107
        replications = 20
        cycles = 12
        [portfolio]
        borrowers = 840
        villages = 2
        [loan]
        principal = 100
        interest_rate = 0.1
        [borrowers]
        income = { kind = "uniform", low = 1.0, high = 2.0 }
        risk = { kind = "uniform", low = 0.5, high = 1.5 }
        [[shock]]
        name = "illness"
        scope = "member"
        probability = 0.15
        village_correlation = 0.2
        severity = { kind = "uniform", low = 0.2, high = 0.9 }
        [policy]
        peer_cover = 0.5
        [sweep]
        group_size = [3, 4, 5, 7]
        "#,
    );
    let results = simulate(&s);
    let shortfalls = |t: &ReplicationTally| t.cycles.iter().map(|c| c.shortfalls).collect::<Vec<u32>>();
    let first = &results.arms[0];
    assert!(
        first.replications.iter().any(|t| t.member_shortfalls > 0),
        "the shock must hit someone"
    );
    for arm in 1..s.arms().len() {
        for (t0, t) in first.replications.iter().zip(&results.arms[arm].replications) {
            assert_eq!(t.member_loans, t0.member_loans, "everybody served");
            assert_eq!(
                shortfalls(&t),
                shortfalls(&t0),
                "replication {}: shortfalls per cycle, {} vs {}",
                t.replication,
                s.arms()[arm].label(),
                s.arms()[0].label()
            );
        }
        // the arms do differ in what the groups do with the same shocks
        assert_ne!(
            results.arms[arm].replications.get(0).unwrap().groups_repaid,
            first.replications.get(0).unwrap().groups_repaid
        );
    }
}
