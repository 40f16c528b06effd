//! The portfolio's exact per-cycle default law against an independent brute-force enumeration, the
//! large-portfolio (Vasicek) limit, and the simulated per-cycle loss quantiles.

mod common;

use common::*;
use loancycle::analytic::portfolio_law::{self, PortfolioDefaultLaw};
use loancycle::analytic::quadrature::GaussHermite;
use loancycle::analytic::{normal, vasicek};
use loancycle::run::{self, RunOptions};
use loancycle::scenario::Scenario;
use loancycle::stats::summary;
use loancycle::stats::tolerance::STANDARD_ERRORS;
use statrs::distribution::{Binomial, DiscreteCDF};

/// The law of arm `arm` in normal cycles, which must be in class.
fn normal_law(s: &Scenario, arm: usize) -> PortfolioDefaultLaw {
    let laws = portfolio_law::arm_laws(s, arm);
    assert_eq!(laws.out_of_class, None, "arm {arm} should be in class");
    laws.portfolio_default_law.expect("in class")
}

/// A tiny portfolio of 2 villages of 3 members with every kind of shared draw: a member-scope shock
/// with village and portfolio factors, a village-scope strike, a portfolio-scope strike and a
/// group-scope strike, severities that differ so joint settlement depends on the hit pattern.
fn tiny(liability: &str, group_size: u32, peer_cover: f64) -> Scenario {
    scenario(&format!(
        r#"
        replications = 1
        cycles = 1
        [portfolio]
        borrowers = 6
        villages = 2
        [loan]
        principal = 100
        interest_rate = 0.1
        [borrowers]
        income = 1.5
        [[shock]]
        name = "illness"
        scope = "member"
        probability = 0.15
        village_correlation = 0.2
        portfolio_correlation = 0.15
        severity = 0.6
        [[shock]]
        name = "flood"
        scope = "village"
        probability = 0.1
        reach = 0.5
        severity = 0.9
        [[shock]]
        name = "downturn"
        scope = "portfolio"
        probability = 0.05
        reach = 0.3
        severity = 0.5
        [[shock]]
        name = "fire"
        scope = "group"
        probability = 0.08
        reach = 0.7
        severity = 1.0
        [policy]
        liability = "{liability}"
        group_size = {group_size}
        peer_cover = {peer_cover}
        "#
    ))
}

/// Brute force for [`tiny`], written without the library's structure: Gauss-Hermite over both
/// factors, every strike outcome enumerated, and every member's hit subset enumerated and settled
/// by the engine's rules (DEVELOPERS.md, "The model", steps 3 to 5), members in order. Returns
/// P(j units in default).
fn brute_force(joint: bool, k: usize, peer_cover: f64) -> Vec<f64> {
    let (w, due): (f64, f64) = (1.5, 110.0);
    let severities = [0.6, 0.9, 0.5, 1.0];
    let (p_member, rv, rp) = (0.15f64, 0.2f64, 0.15f64);
    let t = normal::inv_cdf(p_member);
    let rule = GaussHermite::new(64).unwrap();
    let members = 3usize;
    let groups = members / k;
    let units = if joint { groups } else { groups * k };
    // Village law given the portfolio factor and whether the downturn struck.
    let village = |mp: f64, downturn: bool| -> Vec<f64> {
        let mut law = vec![0.0; units + 1];
        for (&mv, &wv) in rule.nodes.iter().zip(&rule.weights) {
            let z = (t - rv.sqrt() * mv - rp.sqrt() * mp) / (1.0 - rv - rp).sqrt();
            let illness = normal::cdf(z);
            for flood in [false, true] {
                let p_flood = if flood { 0.1 } else { 0.9 };
                // Per served member: the four sources' hit probabilities (fire per group below).
                let group_outcomes = |fire: bool| -> Vec<f64> {
                    let hit = [
                        illness,
                        if flood { 0.5 } else { 0.0 },
                        if downturn { 0.3 } else { 0.0 },
                        if fire { 0.7 } else { 0.0 },
                    ];
                    // Law of the number of this group's units in default: enumerate each member's
                    // 4-bit hit subset, with its probability and the capacity it leaves.
                    let mut subset_prob = [0.0; 16];
                    let mut subset_capacity = [0.0; 16];
                    for subset in 0..16usize {
                        let mut prob = 1.0;
                        let mut mult = 1.0;
                        for (s, (&h, &sev)) in hit.iter().zip(&severities).enumerate() {
                            if subset >> s & 1 == 1 {
                                prob *= h;
                                mult *= 1.0 - sev;
                            } else {
                                prob *= 1.0 - h;
                            }
                        }
                        subset_prob[subset] = prob;
                        subset_capacity[subset] = due * w * mult;
                    }
                    let mut out = vec![0.0; k + 1];
                    for c in 0..1usize << (4 * k) {
                        let mut prob = 1.0;
                        let (mut short, mut surplus, mut n_short) = (0.0, 0.0, 0);
                        for m in 0..k {
                            let subset = c >> (4 * m) & 15;
                            prob *= subset_prob[subset];
                            let capacity = subset_capacity[subset];
                            short += (due - capacity).max(0.0);
                            surplus += (capacity - due).max(0.0);
                            n_short += usize::from(capacity < due);
                        }
                        if prob == 0.0 {
                            continue;
                        }
                        let defaults = if joint {
                            usize::from(short > peer_cover * surplus + 1e-9 * k as f64 * due)
                        } else {
                            n_short
                        };
                        out[defaults] += prob;
                    }
                    out
                };
                let struck = group_outcomes(true);
                let spared = group_outcomes(false);
                let per_group: Vec<f64> = struck.iter().zip(&spared).map(|(a, b)| 0.08 * a + 0.92 * b).collect();
                // Groups of one village are independent given these draws: direct convolution.
                let mut v = vec![1.0];
                for _ in 0..groups {
                    let mut next = vec![0.0; v.len() + k];
                    for (i, a) in v.iter().enumerate() {
                        for (j, b) in per_group.iter().enumerate() {
                            next[i + j] += a * b;
                        }
                    }
                    v = next;
                }
                for (j, x) in v.iter().enumerate().take(units + 1) {
                    law[j] += wv * p_flood * x;
                }
            }
        }
        law
    };
    let mut total = vec![0.0; 2 * units + 1];
    for (&mp, &wp) in rule.nodes.iter().zip(&rule.weights) {
        for downturn in [false, true] {
            let pd = if downturn { 0.05 } else { 0.95 };
            let v = village(mp, downturn);
            for (i, a) in v.iter().enumerate() {
                for (j, b) in v.iter().enumerate() {
                    total[i + j] += wp * pd * a * b;
                }
            }
        }
    }
    total
}

/// The exact law of the tiny portfolio against brute-force enumeration, for member loans (groups of
/// 1 and of 3 sharing the group strike) and group loans with and without peer cover.
#[test]
fn tiny_portfolio_matches_brute_force_enumeration() {
    for (liability, k, cover) in [
        ("individual", 1, 0.0),
        ("individual", 3, 0.0),
        ("joint", 3, 0.0),
        ("joint", 3, 1.0),
        ("joint", 1, 0.0),
    ] {
        let s = tiny(liability, k, cover);
        let law = normal_law(&s, 0);
        let reference = brute_force(liability == "joint", k as usize, cover);
        assert_eq!(law.pmf.len(), reference.len(), "{liability}, k = {k}");
        for (j, (a, b)) in law.pmf.iter().zip(&reference).enumerate() {
            // Brute force: Gauss-Hermite (64 nodes per factor) and full enumeration.
            assert!(
                (a - b).abs() < 1e-10,
                "{liability}, k = {k}, cover {cover}: P({j}) = {a} vs brute force {b}"
            );
        }
        let mean: f64 = reference.iter().enumerate().map(|(j, p)| j as f64 * p).sum::<f64>() / law.units as f64;
        assert!((law.mean - mean).abs() < 1e-10);
    }
}

/// As villages multiply and grow, the exact law's quantiles approach the large-portfolio limit,
/// which for a single member-scope shock on member loans is Vasicek's law at the portfolio
/// correlation (Vasicek 2002, "The distribution of loan portfolio value", Risk 15(12)).
#[test]
fn quantiles_approach_the_vasicek_limit_as_villages_grow() {
    let (p, rv, rp) = (0.05, 0.1, 0.05);
    let mut gaps = Vec::new();
    for (villages, members) in [(5u32, 20u32), (50, 100), (500, 200)] {
        let s = scenario(&format!(
            r#"
            replications = 1
            cycles = 1
            [portfolio]
            borrowers = {}
            villages = {villages}
            [loan]
            principal = 100
            [[shock]]
            name = "illness"
            scope = "member"
            probability = {p}
            village_correlation = {rv}
            portfolio_correlation = {rp}
            severity = 1.0
            [policy]
            liability = "individual"
            group_size = 1
            "#,
            villages * members
        ));
        let law = normal_law(&s, 0);
        // Vasicek 2002: the q-quantile of the limiting loss share is
        // Phi((Phi^-1(p) + sqrt(rho) Phi^-1(q)) / sqrt(1 - rho)).
        let limit = vasicek::quantile(0.999, p, rp).unwrap();
        let z = (normal::inv_cdf(p) + rp.sqrt() * normal::inv_cdf(0.999)) / (1.0 - rp).sqrt();
        assert!((limit - normal::cdf(z)).abs() < 1e-15);
        assert!((law.large_portfolio_quantiles["0.999"] - limit).abs() < 1e-9, "{law:?}");
        assert!((law.mean - p).abs() < 1e-9, "mean {}", law.mean);
        gaps.push(law.quantile(0.999) - limit);
    }
    // A finite portfolio keeps village and binomial noise, so its quantile lies above the limit,
    // and the gap shrinks with every step: 100,000 borrowers in 500 villages are within 0.01.
    assert!(gaps.iter().all(|&g| g > 0.0), "{gaps:?}");
    assert!(gaps[0] > gaps[1] && gaps[1] > gaps[2], "{gaps:?}");
    assert!(gaps[2] < 0.01 && gaps[2] < gaps[0] / 4.0, "{gaps:?}");
}

/// Bounds on the type-7 sample q-quantile of n independent draws from a lattice law with CDF `cdf`
/// on 0..=units: it lies between order statistics X_(r) and X_(r+1) with r = floor((n - 1) q) + 1,
/// and P(X_(r) <= x) = P(Binomial(n, F(x)) >= r) for iid draws (the order-statistic law, no
/// assumption on the shape of F). Returns the shares (a, b) with P(X_(r) < a) and P(X_(r+1) > b) each
/// at most alpha / 2.
fn order_statistic_band(law: &PortfolioDefaultLaw, n: u64, q: f64, alpha: f64) -> (f64, f64) {
    let r = ((n - 1) as f64 * q).floor() as u64 + 1;
    // P(X_(i) <= x) by the binomial law (statrs 0.18).
    let at_most = |i: u64, f: f64| -> f64 {
        if f >= 1.0 {
            return 1.0;
        }
        if f <= 0.0 {
            return 0.0;
        }
        1.0 - Binomial::new(f, n).unwrap().cdf(i - 1)
    };
    let mut cdf = Vec::with_capacity(law.pmf.len());
    let mut acc = 0.0;
    for p in &law.pmf {
        acc += p;
        cdf.push(acc.min(1.0));
    }
    // a: the largest lattice point with P(X_(r) <= a - 1) <= alpha / 2.
    let mut a = 0;
    while a + 1 < cdf.len() && at_most(r, cdf[a]) <= alpha / 2.0 {
        a += 1;
    }
    // b: the smallest lattice point with P(X_(r+1) <= b) >= 1 - alpha / 2.
    let mut b = 0;
    while b + 1 < cdf.len() && at_most(r + 1, cdf[b]) < 1.0 - alpha / 2.0 {
        b += 1;
    }
    let u = law.units as f64;
    (a as f64 / u, b as f64 / u)
}

/// The exact law's 0.99 and 0.999 quantiles against the simulated per-cycle loss quantiles of a
/// scenario where the loss rate of a cycle is its default share (member loans, zero interest, zero
/// recovery, severity 1 so a defaulter pays nothing). Cycles are independent in this class, so the
/// simulated quantiles are sample quantiles of 100,000 iid draws, held to order-statistic bounds at
/// the two-sided level of 4 standard errors.
#[test]
fn exact_quantiles_bound_the_simulated_cycle_quantiles() {
    let s = scenario(
        r#"
        seed = 41
        replications = 100
        cycles = 1000
        [portfolio]
        borrowers = 400
        villages = 20
        [loan]
        principal = 100
        [[shock]]
        name = "illness"
        scope = "member"
        probability = 0.05
        village_correlation = 0.1
        portfolio_correlation = 0.05
        severity = 1.0
        [[shock]]
        name = "drought"
        scope = "village"
        probability = 0.03
        reach = 0.4
        severity = 1.0
        [policy]
        liability = "individual"
        group_size = 4
        "#,
    );
    let law = normal_law(&s, 0);
    let results = run::simulate(&s, RunOptions::default(), &mut |_| {}).unwrap();
    let summary = summary::summarize_arm(&results.arms[0], 4);
    let n = u64::from(s.replications()) * u64::from(s.cycles());
    // Two-sided probability of a standard normal beyond STANDARD_ERRORS.
    let alpha = 2.0 * normal::cdf(-STANDARD_ERRORS);
    for (q, simulated) in [
        (0.99, summary.loss_cycle_p99.unwrap()),
        (0.999, summary.loss_cycle_p999.unwrap()),
    ] {
        let (a, b) = order_statistic_band(&law, n, q, alpha);
        let exact = law.quantile(q);
        assert!(
            a <= exact && exact <= b,
            "q = {q}: exact {exact} outside its own band [{a}, {b}]"
        );
        assert!(
            a - 1e-12 <= simulated && simulated <= b + 1e-12,
            "q = {q}: simulated {simulated} outside [{a}, {b}] around exact {exact}"
        );
        // Sharp: the band excludes the large-portfolio limit, whose quantile sits below the finite
        // portfolio's by the village and binomial noise of 400 borrowers.
        let large = law.large_portfolio_quantiles[&format!("{q}")];
        assert!(large < a, "q = {q}: band [{a}, {b}] does not exclude the limit {large}");
    }
}

/// The case that motivated the portfolio law: 100 villages of 200 members, p = 0.04, village
/// correlation 0.10 and portfolio correlation 0.05. One village's law at the summed correlation
/// 0.15 (what `analyze` showed until now) puts the 99.9% hit share at 0.285 (0.274 by the
/// large-pool formula); the portfolio's own law puts it at 0.140, half as much, close to Vasicek's
/// limit at the portfolio correlation (0.138).
#[test]
fn portfolio_tail_is_half_the_single_village_tail_at_the_summed_correlation() {
    let s = scenario(
        r#"
        replications = 1
        cycles = 1
        [portfolio]
        borrowers = 20000
        villages = 100
        [loan]
        principal = 100
        [[shock]]
        name = "illness"
        scope = "member"
        probability = 0.04
        village_correlation = 0.10
        portfolio_correlation = 0.05
        severity = 1.0
        [policy]
        liability = "individual"
        group_size = 1
        "#,
    );
    let per_village = vasicek::finite_quantile(0.999, 0.04, 0.15, 200).unwrap();
    assert!((0.26..0.29).contains(&per_village), "per-village {per_village}");
    let law = normal_law(&s, 0);
    let portfolio = law.quantile(0.999);
    // Vasicek 2002 at the portfolio correlation: Phi((Phi^-1(0.04) + sqrt(0.05) Phi^-1(0.999)) /
    // sqrt(0.95)) = 0.138.
    let limit = vasicek::quantile(0.999, 0.04, 0.05).unwrap();
    assert!((limit - 0.138).abs() < 0.001, "limit {limit}");
    assert!(
        portfolio > limit && portfolio < limit + 0.015,
        "portfolio {portfolio}, limit {limit}"
    );
    assert!(
        per_village > 1.8 * portfolio,
        "per-village {per_village}, portfolio {portfolio}"
    );
}

/// Scenarios outside the class come back with the input named.
#[test]
fn out_of_class_inputs_are_named() {
    let base = r#"
        replications = 1
        cycles = 20
        [portfolio]
        borrowers = 100
        villages = 4
        [loan]
        principal = 100
    "#;
    let cases = [
        (
            "[borrowers]\nincome = { kind = \"lognormal\", mean = 1.5, cv = 0.3 }\n[[shock]]\nname = \"a\"\nscope = \"member\"\nprobability = 0.1\n",
            "borrowers.income is a lognormal distribution",
        ),
        (
            "[borrowers]\nincome = 1.5\n[[shock]]\nname = \"a\"\nscope = \"member\"\nprobability = 0.1\nseverity = 0.2\n",
            "shock[0] 'a' severity = 0.2",
        ),
        (
            "[[shock]]\nname = \"a\"\nscope = \"member\"\nprobability = 0.1\n[policy]\nexclusion_cycles = 2\n",
            "policy.exclusion_cycles = 2",
        ),
        (
            "[[shock]]\nname = \"a\"\nscope = \"member\"\nprobability = 0.1\nportfolio_correlation = 0.1\n[[shock]]\nname = \"b\"\nscope = \"member\"\nprobability = 0.1\nportfolio_correlation = 0.2\n",
            "shock[1] 'b' has a portfolio correlation",
        ),
        (
            "[[shock]]\nname = \"a\"\nscope = \"member\"\nprobability = 0.1\n[pool]\ndropout = 0.1\nreplace_departures = false\n",
            "pool.replace_departures = false",
        ),
    ];
    for (extra, expected) in cases {
        let s = scenario(&format!("{base}{extra}"));
        let laws = portfolio_law::arm_laws(&s, 0);
        let reason = laws.out_of_class.unwrap_or_default();
        assert!(reason.contains(expected), "{reason:?} should contain {expected:?}");
        assert!(laws.portfolio_default_law.is_none());
    }
}

/// A stress window gives its own law, labelled by its cycles; the normal law comes first.
#[test]
fn stress_windows_give_one_law_per_state() {
    let s = scenario(
        r#"
        replications = 1
        cycles = 20
        [portfolio]
        borrowers = 300
        villages = 10
        [loan]
        principal = 100
        [[shock]]
        name = "drought"
        scope = "village"
        probability = 0.05
        reach = 0.6
        severity = 1.0
        stress = [{ from = 10, to = 11, probability = 0.5 }]
        [policy]
        liability = "individual"
        group_size = 1
        "#,
    );
    let laws = portfolio_law::arm_laws(&s, 0);
    let normal_law = laws.portfolio_default_law.unwrap();
    assert_eq!(normal_law.state, "normal cycles");
    assert_eq!(normal_law.cycles, "1-9, 12-20");
    assert_eq!(laws.stress_laws.len(), 1);
    let stressed = &laws.stress_laws[0];
    assert_eq!(stressed.state, "cycles 10-11");
    assert_eq!(stressed.cycles, "10-11");
    // The mean default share is p x reach in each state (linearity of expectation).
    assert!((normal_law.mean - 0.05 * 0.6).abs() < 1e-12);
    assert!((stressed.mean - 0.5 * 0.6).abs() < 1e-12);
    // Without a portfolio draw the large-portfolio limit is a point mass at the mean.
    assert!((normal_law.large_portfolio_quantiles["0.999"] - 0.03).abs() < 1e-12);
}

/// Timing of a 100,000-borrower portfolio (run with --ignored in release to measure).
#[test]
#[ignore]
fn timing_of_a_large_portfolio() {
    let s = scenario(
        r#"
        replications = 1
        cycles = 1
        [portfolio]
        borrowers = 100000
        villages = 100
        [loan]
        principal = 100
        interest_rate = 0.1
        [borrowers]
        income = 1.2
        [[shock]]
        name = "illness"
        scope = "member"
        probability = 0.05
        village_correlation = 0.1
        portfolio_correlation = 0.05
        severity = 1.0
        [[shock]]
        name = "drought"
        scope = "village"
        probability = 0.05
        reach = 0.5
        severity = 0.5
        [[shock]]
        name = "downturn"
        scope = "portfolio"
        probability = 0.02
        reach = 0.2
        severity = 0.6
        [sweep]
        liability = ["individual", "joint"]
        "#,
    );
    for arm in 0..2 {
        let start = std::time::Instant::now();
        let law = normal_law(&s, arm);
        eprintln!(
            "arm {arm}: {} {} in {:.2} s, {} portfolio nodes, q999 {}, cdf change {:e}",
            law.units,
            law.unit,
            start.elapsed().as_secs_f64(),
            law.portfolio_nodes,
            law.quantile(0.999),
            law.cdf_change
        );
    }
}
