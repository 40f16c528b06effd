//! Reproducibility promises: results do not depend on the thread count, and arms of one
//! replication share their random draws (common random numbers).

mod common;

use common::*;
use loancycle::run::{self, RunOptions};

const SCENARIO: &str = r#"
    name = "reproducibility check"
    seed = 99
    replications = 12
    cycles = 15
    warmup_cycles = 3
    [portfolio]
    borrowers = 430
    villages = 7
    [loan]
    principal = 80
    interest_rate = 0.1
    recovery_rate = 0.2
    [borrowers]
    income = { kind = "lognormal", mean = 1.2, cv = 0.2 }
    risk = { kind = "gamma", mean = 1.0, cv = 0.5 }
    [[shock]]
    name = "illness"
    scope = "member"
    probability = 0.06
    village_correlation = 0.1
    portfolio_correlation = 0.05
    severity = { kind = "beta", mean = 0.6, sd = 0.2 }
    [[shock]]
    name = "harvest"
    scope = "village"
    probability = 0.1
    reach = 0.5
    severity = { kind = "uniform", low = 0.2, high = 0.7 }
    stress = [ { from = 5, to = 6, probability = 0.5 } ]
    [[shock]]
    name = "market"
    scope = "group"
    probability = 0.05
    reach = 0.8
    severity = 0.4
    [[shock]]
    name = "flood"
    scope = "portfolio"
    probability = 0.1
    reach = 0.3
    severity = 0.5
    [policy]
    peer_cover = 0.5
    formation = "persistent"
    [pool]
    dropout = 0.03
    [sweep]
    group_size = [3, 5]
    exclusion_cycles = [0, 2, "permanent"]
    matching = ["random", "assortative"]
"#;

#[test]
fn results_are_identical_for_one_and_two_threads() {
    let s = scenario(SCENARIO);
    let one = simulate_on(&s, 1);
    let two = simulate_on(&s, 2);
    assert_eq!(one.arms, two.arms);
    // and the run did something: loans, losses and exclusions happened
    let t = &one.arms[2].replications.get(0).unwrap();
    assert!(t.member_loans > 0 && t.loss > 0.0 && t.excluded_slot_cycles > 0);
}

/// A run that drops the per-cycle records (as `run` does) summarises to exactly what a run that
/// keeps them does: the digest and the pooled accumulators hold everything the outputs read.
#[test]
fn dropping_the_cycle_records_changes_no_figure() {
    let s = scenario(SCENARIO);
    let options = |keep| RunOptions {
        threads: Some(2),
        keep_cycle_records: keep,
        ..Default::default()
    };
    let kept = run::simulate(&s, options(true), &mut |_| {}).unwrap();
    let dropped = run::simulate(&s, options(false), &mut |_| {}).unwrap();
    assert!(kept.arms[0].replications.get(0).unwrap().cycles.len() == s.cycles() as usize);
    assert!(
        dropped
            .arms
            .iter()
            .all(|a| a.replications.iter().all(|r| r.cycles.is_empty()))
    );
    for (a, arm) in s.arms().iter().enumerate() {
        let k = arm.policy().group_size();
        let json = |t| serde_json::to_string(&loancycle::stats::summary::summarize_arm(t, k)).unwrap();
        assert_eq!(json(&kept.arms[a]), json(&dropped.arms[a]), "arm {a}");
        assert_eq!(
            loancycle::stats::summary::time_series(&kept.arms[a], &s).len(),
            s.cycles() as usize
        );
    }
}

#[test]
fn a_different_seed_gives_different_results() {
    let s = scenario(SCENARIO);
    let other = loancycle::scenario::Scenario::from_toml_str_with(
        SCENARIO,
        "inline",
        &loancycle::scenario::Overrides {
            seed: Some(s.seed() + 1),
            ..Default::default()
        },
    )
    .unwrap();
    let a = simulate_on(&s, 2);
    let b = simulate_on(&other, 2);
    assert_ne!(a.arms, b.arms);
}

/// Arms that differ only in a setting with no effect must produce identical figures: the draws
/// are keyed by entity and cycle, never by arm. Incomes equal the amount due and severities are
/// positive, so no member ever has a surplus and peer cover cannot matter; without exclusion, its
/// scope cannot matter either.
#[test]
fn arms_share_their_random_draws() {
    let s = scenario(
        r#"
        seed = 5
        replications = 6
        cycles = 12
        [portfolio]
        borrowers = 300
        villages = 4
        [loan]
        principal = 100
        [[shock]]
        name = "illness"
        scope = "member"
        probability = 0.1
        village_correlation = 0.2
        severity = { kind = "beta", mean = 0.5, sd = 0.2 }
        [[shock]]
        name = "harvest"
        scope = "village"
        probability = 0.2
        reach = 0.5
        severity = 0.5
        [policy]
        group_size = 4
        [pool]
        dropout = 0.05
        [sweep]
        peer_cover = [0.0, 0.7]
        exclusion_scope = ["group", "defaulters"]
        "#,
    );
    let results = simulate(&s);
    let first = &results.arms[0];
    assert!(first.replications.get(0).unwrap().member_shortfalls > 0);
    for other in &results.arms[1..] {
        assert_eq!(first, other);
    }
}

/// Value stability: exact figures of one replication for a fixed seed. They change only when the
/// engine's model or its random streams change, which must be announced (the reproducibility
/// promise in DEVELOPERS.md).
#[test]
fn engine_value_stability() {
    let s = scenario(SCENARIO);
    let t0 = loancycle::engine::simulate_replication(&s, 2, 0);
    let t7 = loancycle::engine::simulate_replication(&s, 11, 3);
    let got = (
        t0.group_cycles,
        t0.groups_repaid,
        t0.member_shortfalls,
        t0.excluded_slot_cycles,
        t0.loss,
        t7.group_cycles,
        t7.groups_repaid,
        t7.empty_slot_cycles,
        t7.collected,
        t0.groups_rescued,
        t0.shortfall_free_groups,
        t7.loss,
    );
    assert_eq!(
        got,
        (
            1307,
            866,
            1154,
            2404,
            16454.75780010676,
            1260,
            728,
            0,
            517923.57792428706,
            343,
            523,
            29174.91626873318
        ),
        "{got:?}"
    );
}

/// Paired differences between arms: arms that see the same draws and behave alike differ by exactly
/// zero with zero standard error, and a real policy difference has a paired standard error well below
/// the unpaired sqrt(SE_a^2 + SE_b^2) (common random numbers at work).
#[test]
fn paired_differences_are_sharp() {
    let text = r#"
        seed = 17
        replications = 40
        cycles = 12
        [portfolio]
        borrowers = 600
        villages = 6
        [loan]
        principal = 100
        [borrowers]
        income = 1.3
        [[shock]]
        name = "illness"
        scope = "member"
        probability = 0.08
        village_correlation = 0.2
        [policy]
        group_size = 5
        [sweep]
        peer_cover = [0.0, 1.0]
        exclusion_scope = ["group", "defaulters"]
    "#;
    let s = scenario(text);
    let results = simulate(&s);
    let report = loancycle::report::build(&s, text, "inline", &results);
    let same: Vec<_> = report
        .differences
        .iter()
        .filter(|d| d.arm == s.arms()[1].label())
        .collect();
    assert_eq!(same.len(), 5);
    assert!(
        same.iter()
            .all(|d| d.difference == 0.0 && d.standard_error == Some(0.0))
    );
    let covered = report
        .differences
        .iter()
        .find(|d| d.arm == s.arms()[2].label() && d.metric == "group_repayment_rate")
        .unwrap();
    let se = |a: usize| report.arms[a].summary.group_repayment.unwrap().standard_error.unwrap();
    let unpaired = (se(0).powi(2) + se(2).powi(2)).sqrt();
    assert!(
        covered.difference > 0.1,
        "full cover rescues groups: {}",
        covered.difference
    );
    assert!(
        covered.standard_error.unwrap() < 0.8 * unpaired,
        "{:?} vs {unpaired}",
        covered.standard_error
    );
}

/// The behaviour and loan-growth extensions keep the promises: the same figures on one and two
/// threads, and exact pinned values (walk-aways come from their own stream, one uniform per (slot,
/// occupant, cycle), so a change here is a change of that stream or of the rules that read it).
#[test]
fn behaviour_and_growth_are_reproducible_and_pinned() {
    let s = scenario(
        r#"
        seed = 123
        replications = 6
        cycles = 14
        warmup_cycles = 2
        [portfolio]
        borrowers = 300
        villages = 5
        [loan]
        principal = 100
        interest_rate = 0.1
        growth = 0.15
        max_multiple = 2.5
        [borrowers]
        income = { kind = "lognormal", mean = 1.6, cv = 0.25 }
        income_growth = 0.01
        [[shock]]
        name = "illness"
        scope = "member"
        probability = 0.08
        village_correlation = 0.1
        severity = { kind = "beta", mean = 0.6, sd = 0.2 }
        [behaviour]
        loan_value = 0.2
        discount = 0.85
        temptation = { kind = "lognormal", mean = 0.08, cv = 1.2 }
        social_sanction = 0.05
        [policy]
        group_size = 4
        peer_cover = 0.5
        [pool]
        dropout = 0.02
        [sweep]
        exclusion_cycles = [1, "permanent"]
        liability = ["joint", "individual"]
        "#,
    );
    let one = simulate_on(&s, 1);
    let two = simulate_on(&s, 2);
    assert_eq!(one.arms, two.arms);
    let t = loancycle::engine::simulate_replication(&s, 0, 1);
    let u = loancycle::engine::simulate_replication(&s, 3, 4);
    let got = (
        t.able_members,
        t.strategic_defaults,
        t.groups_repaid,
        t.disbursed,
        t.loss,
        u.strategic_defaults,
        u.disbursed,
        u.collected,
    );
    assert_eq!(
        got,
        (
            2152,
            106,
            519,
            430571.95976093743,
            22760.517887273727,
            1,
            580375.4276015649,
            605528.1393613436
        ),
        "{got:?}"
    );
}

/// The per-cycle loss tail of a run keeps only its top values when the run has more (here 500 x 5
/// = 2,500 per arm against 2,098 kept): every figure, the per-cycle quantiles and their intervals
/// included, equals the one computed from a tail that keeps every value.
#[test]
fn the_kept_tail_gives_the_figures_of_all_values() {
    let text = std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/tests/data/cli/tiny.toml")).unwrap();
    let s = loancycle::scenario::Scenario::from_toml_str_with(
        &text,
        "tiny.toml",
        &loancycle::scenario::Overrides {
            replications: Some(500),
            ..Default::default()
        },
    )
    .unwrap();
    let options = RunOptions {
        threads: Some(2),
        keep_cycle_records: true,
        ..Default::default()
    };
    let results = run::simulate(&s, options, &mut |_| {}).unwrap();
    for (a, arm) in s.arms().iter().enumerate() {
        let kept = &results.arms[a];
        assert!(
            (kept.cycle_tail.len() as u64) < kept.lent_cycles() as u64,
            "the tail is pruned"
        );
        let mut everything = loancycle::stats::ArmTally::new(kept.cycles_per_year, u64::MAX);
        kept.replications.iter().for_each(|r| everything.push(r.into_owned()));
        assert_eq!(everything.cycle_tail.len(), everything.lent_cycles());
        let k = arm.policy().group_size();
        let summary = |t| loancycle::stats::summary::summarize_arm(t, k);
        let (pruned, full) = (summary(kept), summary(&everything));
        assert!(full.loss_cycle_p99.is_some() && full.loss_cycle_p99_ci_low.is_some());
        assert_eq!(
            serde_json::to_string(&pruned).unwrap(),
            serde_json::to_string(&full).unwrap(),
            "arm {a}"
        );
    }
}

/// Enough replications that a run told to keep them on disk does so (more than
/// `MEMORY_RECORDS` twice over), two arms and years, so every figure built from per-replication
/// records passes over a list that is mostly on disk.
const MANY_REPLICATIONS: &str = r#"
    name = "replications kept on disk"
    seed = 31
    replications = 2600
    cycles = 8
    warmup_cycles = 0
    [portfolio]
    borrowers = 24
    villages = 3
    [loan]
    principal = 100.0
    interest_rate = 0.1
    recovery_rate = 0.2
    [[shock]]
    name = "illness"
    scope = "member"
    probability = 0.1
    village_correlation = 0.2
    [policy]
    group_size = 4
    peer_cover = 0.5
    exclusion_cycles = 1
    [finance]
    cycles_per_year = 4
    currency = "crowns"
    [sweep]
    "policy.peer_cover" = [0.2, 0.8]
"#;

#[test]
fn keeping_replications_on_disk_changes_no_output_byte() {
    let s = scenario(MANY_REPLICATIONS);
    assert!(s.replications() as usize > 2 * loancycle::stats::replication_list::MEMORY_RECORDS);
    let base = std::env::temp_dir().join(format!("loancycle-spill-test-{}", std::process::id()));
    let spill = base.join("spill");
    std::fs::create_dir_all(&spill).unwrap();
    let in_memory = run::simulate(&s, RunOptions::default(), &mut |_| {}).unwrap();
    let on_disk = run::simulate(
        &s,
        RunOptions {
            spill_dir: Some(spill.clone()),
            ..Default::default()
        },
        &mut |_| {},
    )
    .unwrap();
    // the files have no names: nothing is left in the directory, during the run or after it
    assert_eq!(std::fs::read_dir(&spill).unwrap().count(), 0);
    if cfg!(unix) {
        for a in &on_disk.arms {
            assert!(a.replications.on_disk() >= 2 * loancycle::stats::replication_list::MEMORY_RECORDS);
        }
    }
    assert_eq!(in_memory.arms, on_disk.arms);
    assert!(on_disk.read_failure().is_none());
    let mut written = Vec::new();
    for (name, results) in [("memory", &in_memory), ("disk", &on_disk)] {
        let report = loancycle::report::build(&s, MANY_REPLICATIONS, "many.toml", results);
        let dir = base.join(name);
        loancycle::output::write_all(&dir, &report, true, &|| false).unwrap();
        written.push(dir);
    }
    let mut files: Vec<_> = std::fs::read_dir(&written[0])
        .unwrap()
        .map(|e| e.unwrap().file_name())
        .collect();
    files.sort();
    assert!(files.iter().any(|f| f == "replications.csv"), "{files:?}");
    for f in &files {
        let (a, b) = (
            std::fs::read(written[0].join(f)).unwrap(),
            std::fs::read(written[1].join(f)).unwrap(),
        );
        assert!(a == b, "{} differs", f.to_string_lossy());
    }
    std::fs::remove_dir_all(&base).unwrap();
}
