//! Invariants of the engine on random valid scenarios, and the independent-member law where it applies.
//!
//! Scenarios are generated as TOML text (small: at most 300 borrowers in 4 villages, 8 cycles,
//! 4 replications, 9 arms) covering both liabilities, all shock scopes, severities, incomes, risks,
//! exclusion settings, formations, matchings, stress windows and sweeps. The runner is deterministic
//! (ChaCha with a fixed seed) and runs a bounded number of cases. For every replication of every arm:
//! - collected <= due (+ rounding), collected >= 0, 0 <= loss <= disbursed, loss + recovered = unpaid
//!   principal <= disbursed (the accounting of DEVELOPERS.md, "The model", steps 5 and 6);
//! - the served, excluded, waiting and empty slot-cycles add up to borrowers x counted cycles, so the
//!   four shares sum to 1; waiting members are fewer than k per village and cycle;
//! - member loans = served slot-cycles = k x groups; the per-cycle records add up to the totals;
//! - under joint liability, repaid groups = shortfall-free groups + rescued groups, and every member
//!   of a defaulting group counts as a default; under individual liability defaults = shortfalls;
//! - without exclusion nobody is excluded; permanent exclusion empties slots instead of excluding;
//! - without exclusion and dropout no slot is ever empty;
//! - without shocks and with every income at or above the amount due, every group repays and nothing
//!   is lost;
//! - every rate of the arm summary lies in [0, 1] and group repayment <= 1.

mod common;

use common::{arm_summary, assert_within, scenario, simulate};
use loancycle::run::RunResults;
use loancycle::scenario::Scenario;
use loancycle::stats::ReplicationTally;
use loancycle::stats::summary::summarize_arm;
use proptest::prelude::*;
use proptest::test_runner::{Config, RngAlgorithm, TestCaseError, TestRng, TestRunner};
use std::cell::Cell;

/// Relative rounding allowed in sums of money.
const ROUNDING: f64 = 1e-9;

fn at_most(a: f64, b: f64) -> bool {
    a <= b + ROUNDING * b.abs().max(1.0)
}

fn close(a: f64, b: f64) -> bool {
    at_most(a, b) && at_most(b, a)
}

/// Number of random scenarios checked.
const CASES: u32 = 500;

/// A deterministic runner: ChaCha seeded with a fixed key, no persistence, a bounded case count.
fn runner(cases: u32) -> TestRunner {
    let config = Config {
        cases,
        rng_algorithm: RngAlgorithm::ChaCha,
        failure_persistence: None,
        max_shrink_iters: 256,
        ..Config::default()
    };
    let seed: [u8; 32] = *b"loancycle engine properties seed";
    TestRunner::new_with_rng(config, TestRng::from_seed(RngAlgorithm::ChaCha, &seed))
}

/// A distribution as a TOML value.
#[derive(Debug, Clone)]
enum Dist {
    Fixed(f64),
    Uniform(f64, f64),
    Lognormal(f64, f64),
    Gamma(f64, f64),
    /// Mean and the sd as a share of its largest value sqrt(mean (1 - mean)).
    Beta(f64, f64),
}

impl Dist {
    fn text(&self) -> String {
        match *self {
            Dist::Fixed(v) => format!("{v:?}"),
            Dist::Uniform(low, high) => format!("{{ kind = \"uniform\", low = {low:?}, high = {high:?} }}"),
            Dist::Lognormal(mean, cv) => format!("{{ kind = \"lognormal\", mean = {mean:?}, cv = {cv:?} }}"),
            Dist::Gamma(mean, cv) => format!("{{ kind = \"gamma\", mean = {mean:?}, cv = {cv:?} }}"),
            Dist::Beta(mean, share) => {
                let sd = share * (mean * (1.0 - mean)).sqrt();
                format!("{{ kind = \"beta\", mean = {mean:?}, sd = {sd:?} }}")
            }
        }
    }

    /// Smallest value the distribution can take.
    fn low(&self) -> f64 {
        match *self {
            Dist::Fixed(v) => v,
            Dist::Uniform(low, _) => low,
            _ => 0.0,
        }
    }
}

fn income() -> impl Strategy<Value = Dist> {
    prop_oneof![
        (0.2f64..2.5).prop_map(Dist::Fixed),
        (0.2f64..1.5, 0.0f64..1.5).prop_map(|(low, width)| Dist::Uniform(low, low + width)),
        (0.5f64..2.0, 0.0f64..1.0).prop_map(|(m, cv)| Dist::Lognormal(m, cv)),
        (0.5f64..2.0, 0.05f64..1.0).prop_map(|(m, cv)| Dist::Gamma(m, cv)),
    ]
}

fn risk() -> impl Strategy<Value = Dist> {
    prop_oneof![
        Just(Dist::Fixed(1.0)),
        (0.0f64..3.0).prop_map(Dist::Fixed),
        (0.0f64..1.0, 0.0f64..1.0).prop_map(|(low, width)| Dist::Uniform(low, low + width)),
        (0.5f64..1.5, 0.05f64..1.0).prop_map(|(m, cv)| Dist::Gamma(m, cv)),
        (0.5f64..1.5, 0.0f64..1.0).prop_map(|(m, cv)| Dist::Lognormal(m, cv)),
    ]
}

fn severity() -> impl Strategy<Value = Dist> {
    prop_oneof![
        (0.0f64..=1.0).prop_map(Dist::Fixed),
        (0.0f64..=1.0, 0.0f64..=1.0).prop_map(|(a, b)| Dist::Uniform(a.min(b), a.max(b))),
        (0.05f64..0.95, 0.05f64..0.95).prop_map(|(m, share)| Dist::Beta(m, share)),
    ]
}

/// A member-scope probability: a number or a group-size curve.
#[derive(Debug, Clone)]
enum MemberProbability {
    Number(f64),
    Constant(f64),
    Power(f64),
    PowerPlusLog(f64),
    /// phi(k) = values[k - 1], written for k = 1 ..= 6.
    Table([f64; 6]),
}

impl MemberProbability {
    /// The TOML value; power_plus_log is defined for k >= 2 only, so it falls back to power when an
    /// arm has groups of 1.
    fn text(&self, smallest_k: u32) -> String {
        match self {
            MemberProbability::Number(p) => format!("{p:?}"),
            MemberProbability::Constant(q) => format!("{{ curve = \"constant\", value = {q:?} }}"),
            MemberProbability::Power(p) => format!("{{ curve = \"power\", p = {p:?} }}"),
            MemberProbability::PowerPlusLog(p) if smallest_k >= 2 => {
                format!("{{ curve = \"power_plus_log\", p = {p:?} }}")
            }
            MemberProbability::PowerPlusLog(p) => format!("{{ curve = \"power\", p = {p:?} }}"),
            MemberProbability::Table(values) => {
                let cells: Vec<String> = values
                    .iter()
                    .enumerate()
                    .map(|(i, q)| format!("\"{}\" = {q:?}", i + 1))
                    .collect();
                format!("{{ curve = \"table\", values = {{ {} }} }}", cells.join(", "))
            }
        }
    }
}

fn member_probability() -> impl Strategy<Value = MemberProbability> {
    prop_oneof![
        (0.0f64..0.6).prop_map(MemberProbability::Number),
        (0.0f64..0.4).prop_map(MemberProbability::Constant),
        (0.2f64..2.5).prop_map(MemberProbability::Power),
        (0.5f64..2.0).prop_map(MemberProbability::PowerPlusLog),
        prop::array::uniform6(0.0f64..0.3).prop_map(MemberProbability::Table),
    ]
}

/// One shock; the scope decides which optional fields are written.
#[derive(Debug, Clone)]
struct ShockCase {
    scope: usize,
    member_probability: MemberProbability,
    unit_probability: f64,
    village_correlation: f64,
    portfolio_correlation: f64,
    reach: f64,
    severity: Option<Dist>,
    /// A stress window as (start, length) fractions of the simulated cycles, and its probability.
    stress: Option<(f64, f64, f64)>,
}

const SCOPES: [&str; 4] = ["member", "group", "village", "portfolio"];

fn shock() -> impl Strategy<Value = ShockCase> {
    (
        0usize..4,
        member_probability(),
        0.0f64..0.5,
        (0.0f64..0.45, 0.0f64..0.45),
        0.0f64..=1.0,
        prop::option::of(severity()),
        prop::option::of((0.0f64..1.0, 0.0f64..1.0, 0.0f64..=1.0)),
    )
        .prop_map(
            |(scope, member_probability, unit_probability, (vc, pc), reach, severity, stress)| ShockCase {
                scope,
                member_probability,
                unit_probability,
                village_correlation: vc,
                portfolio_correlation: pc,
                reach,
                severity,
                stress,
            },
        )
}

/// The `[policy]` table; `exclusion` None is "permanent".
#[derive(Debug, Clone)]
struct PolicyCase {
    group_size: u32,
    joint: bool,
    peer_cover: f64,
    exclusion: Option<u32>,
    defaulters: bool,
    persistent: bool,
    assortative: bool,
}

fn policy() -> impl Strategy<Value = PolicyCase> {
    (
        1u32..=6,
        any::<bool>(),
        prop_oneof![Just(0.0), Just(1.0), 0.0f64..=1.0],
        prop_oneof![Just(None), (0u32..=3).prop_map(Some)],
        any::<bool>(),
        any::<bool>(),
        any::<bool>(),
    )
        .prop_map(
            |(group_size, joint, peer_cover, exclusion, defaulters, persistent, assortative)| PolicyCase {
                group_size,
                joint,
                peer_cover,
                exclusion,
                defaulters,
                persistent,
                assortative,
            },
        )
}

/// A `[sweep]` axis: the key and its list as TOML text, and the group sizes it lists (if any).
fn sweep_axis() -> impl Strategy<Value = (&'static str, String, Vec<u32>)> {
    prop_oneof![
        (1u32..=6, 1u32..=5).prop_map(|(a, d)| {
            let b = (a + d - 1) % 6 + 1;
            ("group_size", format!("[{a}, {b}]"), vec![a, b])
        }),
        Just(("liability", "[\"joint\", \"individual\"]".to_owned(), vec![])),
        Just(("peer_cover", "[0, 0.5, 1]".to_owned(), vec![])),
        Just(("exclusion_cycles", "[0, 2, \"permanent\"]".to_owned(), vec![])),
        Just(("exclusion_scope", "[\"group\", \"defaulters\"]".to_owned(), vec![])),
        Just(("formation", "[\"reshuffle\", \"persistent\"]".to_owned(), vec![])),
        Just(("matching", "[\"random\", \"assortative\"]".to_owned(), vec![])),
    ]
}

/// A whole scenario.
#[derive(Debug, Clone)]
struct Case {
    seed: u64,
    replications: u32,
    cycles: u32,
    warmup: u32,
    borrowers: u32,
    villages: u32,
    principal: f64,
    interest: f64,
    recovery: f64,
    income: Dist,
    risk: Dist,
    shocks: Vec<ShockCase>,
    policy: PolicyCase,
    dropout: f64,
    replace: bool,
    sweep: Vec<(&'static str, String, Vec<u32>)>,
    extras: Extras,
}

/// The optional features a scenario may switch on: group sizes one either side of k, strategic
/// default, and loans and incomes that grow.
#[derive(Debug, Clone)]
struct Extras {
    /// `size_slack = 1`, written only where every size in [k - 1, k + 1] is valid.
    slack: bool,
    /// (loan_value, discount, temptation mean, social_sanction).
    behaviour: Option<(f64, f64, f64, f64)>,
    /// (growth, max_multiple, income_growth).
    growth: Option<(f64, f64, f64)>,
}

fn extras() -> impl Strategy<Value = Extras> {
    (
        any::<bool>(),
        prop_oneof![
            Just(None),
            (0.0f64..1.0, 0.05f64..0.95, 0.0f64..0.5, 0.0f64..0.5).prop_map(Some)
        ],
        prop_oneof![Just(None), (0.0f64..0.5, 1.0f64..4.0, 0.0f64..0.05).prop_map(Some)],
    )
        .prop_map(|(slack, behaviour, growth)| Extras {
            slack,
            behaviour,
            growth,
        })
}

fn case() -> impl Strategy<Value = Case> {
    (
        (any::<u32>(), 2u32..=4, 1u32..=6, 0u32..=2, 24u32..=300, 1u32..=4),
        (
            prop_oneof![Just(1.0), Just(100.0), 1.0f64..1000.0],
            prop_oneof![Just(0.0), 0.0f64..0.3],
            prop_oneof![Just(0.0), 0.0f64..=1.0],
        ),
        (income(), risk(), prop::collection::vec(shock(), 0..=3)),
        policy(),
        (prop_oneof![Just(0.0), 0.0f64..0.2], any::<bool>()),
        prop::collection::vec(sweep_axis(), 0..=2),
        extras(),
    )
        .prop_map(
            |(
                (seed, replications, cycles, warmup, borrowers, villages),
                (principal, interest, recovery),
                (income, risk, shocks),
                policy,
                (dropout, replace),
                mut sweep,
                extras,
            )| {
                sweep.dedup_by_key(|(key, _, _)| *key);
                Case {
                    seed: u64::from(seed),
                    replications,
                    cycles,
                    warmup,
                    borrowers,
                    villages,
                    principal,
                    interest,
                    recovery,
                    income,
                    risk,
                    shocks,
                    policy,
                    dropout,
                    replace,
                    sweep,
                    extras,
                }
            },
        )
}

impl Case {
    /// The group sizes the arms use.
    fn group_sizes(&self) -> Vec<u32> {
        self.sweep
            .iter()
            .find(|(key, _, _)| *key == "group_size")
            .map_or_else(|| vec![self.policy.group_size], |(_, _, sizes)| sizes.clone())
    }

    /// Whether group sizes may vary: slack asked for, every size in [k - 1, k + 1] within the
    /// smallest village, and no curve that a size outside 1..=6 or a size of 1 would leave undefined.
    fn slack(&self) -> bool {
        let largest = self.group_sizes().into_iter().max().unwrap_or(1);
        let curves_fit = self.shocks.iter().all(|s| {
            s.scope != 0
                || matches!(
                    s.member_probability,
                    MemberProbability::Number(_) | MemberProbability::Constant(_) | MemberProbability::Power(_)
                )
        });
        self.extras.slack && curves_fit && largest < self.borrowers / self.villages
    }

    /// Whether members may walk away or loans and incomes grow (the invariants of a fixed loan and
    /// of shortfall-only defaults no longer hold then).
    fn dynamic(&self) -> bool {
        self.extras.behaviour.is_some() || self.extras.growth.is_some()
    }

    fn swept(&self, key: &str) -> bool {
        self.sweep.iter().any(|(k, _, _)| *k == key)
    }

    fn toml(&self) -> String {
        let total = self.warmup + self.cycles;
        let smallest_k = self.group_sizes().into_iter().min().unwrap_or(1);
        let mut t = format!(
            "seed = {}\nreplications = {}\ncycles = {}\nwarmup_cycles = {}\n\
             [portfolio]\nborrowers = {}\nvillages = {}\n\
             [loan]\nprincipal = {:?}\ninterest_rate = {:?}\nrecovery_rate = {:?}\n{}\
             [borrowers]\nincome = {}\nrisk = {}\n{}",
            self.seed,
            self.replications,
            self.cycles,
            self.warmup,
            self.borrowers,
            self.villages,
            self.principal,
            self.interest,
            self.recovery,
            self.extras.growth.map_or(String::new(), |(g, m, _)| format!(
                "growth = {g:?}\nmax_multiple = {m:?}\n"
            )),
            self.income.text(),
            self.risk.text(),
            self.extras
                .growth
                .map_or(String::new(), |(_, _, i)| format!("income_growth = {i:?}\n"))
        );
        for (i, s) in self.shocks.iter().enumerate() {
            t += &format!("[[shock]]\nname = \"shock {i}\"\nscope = \"{}\"\n", SCOPES[s.scope]);
            if s.scope == 0 {
                t += &format!(
                    "probability = {}\nvillage_correlation = {:?}\nportfolio_correlation = {:?}\n",
                    s.member_probability.text(smallest_k),
                    s.village_correlation,
                    s.portfolio_correlation
                );
            } else {
                t += &format!("probability = {:?}\nreach = {:?}\n", s.unit_probability, s.reach);
            }
            if let Some(d) = &s.severity {
                t += &format!("severity = {}\n", d.text());
            }
            if let Some((start, length, p)) = s.stress {
                let from = 1 + (start * f64::from(total)) as u32;
                let from = from.min(total);
                let to = (from + (length * f64::from(total - from + 1)) as u32).min(total);
                t += &format!("stress = [{{ from = {from}, to = {to}, probability = {p:?} }}]\n");
            }
        }
        let p = &self.policy;
        // An exclusion longer than the whole run is refused by validation, so it is capped there.
        let exclusion = p
            .exclusion
            .map_or_else(|| "\"permanent\"".to_owned(), |e| e.min(total).to_string());
        t += &format!(
            "[policy]\ngroup_size = {}\nliability = \"{}\"\npeer_cover = {:?}\nexclusion_cycles = {exclusion}\n\
             exclusion_scope = \"{}\"\nformation = \"{}\"\nmatching = \"{}\"\n",
            p.group_size,
            if p.joint { "joint" } else { "individual" },
            p.peer_cover,
            if p.defaulters { "defaulters" } else { "group" },
            if p.persistent { "persistent" } else { "reshuffle" },
            if p.assortative { "assortative" } else { "random" },
        );
        if self.slack() {
            t += "size_slack = 1\n";
        }
        t += &format!(
            "[pool]\ndropout = {:?}\nreplace_departures = {}\n",
            self.dropout, self.replace
        );
        if let Some((value, discount, mean, sanction)) = self.extras.behaviour {
            t += &format!(
                "[behaviour]\nloan_value = {value:?}\ndiscount = {discount:?}\n\
                 temptation = {{ kind = \"gamma\", mean = {:?}, cv = 1.0 }}\nsocial_sanction = {sanction:?}\n",
                mean.max(1e-3)
            );
        }

        if !self.sweep.is_empty() {
            t += "[sweep]\n";
            for (key, list, _) in &self.sweep {
                let capped;
                let list = if *key == "exclusion_cycles" && total < 2 {
                    capped = format!("[0, {total}, \"permanent\"]");
                    &capped
                } else {
                    list
                };
                t += &format!("{key} = {list}\n");
            }
        }
        t
    }
}

fn check(condition: bool, what: impl FnOnce() -> String) -> Result<(), TestCaseError> {
    if condition {
        Ok(())
    } else {
        Err(TestCaseError::fail(what()))
    }
}

/// The per-replication identities listed in the module comment.
fn check_replication(case: &Case, s: &Scenario, arm: usize, r: &ReplicationTally) -> Result<(), TestCaseError> {
    let policy = &s.arms()[arm].policy();
    let k = u64::from(policy.group_size());
    let joint = policy.liability() == loancycle::scenario::Liability::Joint;
    let at = |what: &str| {
        format!(
            "arm {arm} ({}), replication {}: {what}; {r:?}",
            s.arms()[arm].label(),
            r.replication
        )
    };
    check(at_most(r.collected, r.due), || at("collected > due"))?;
    check(r.collected >= 0.0, || at("collected < 0"))?;
    check(r.loss >= 0.0, || at("loss < 0"))?;
    check(at_most(r.loss, r.disbursed), || at("loss > disbursed"))?;
    check(at_most(r.unpaid_principal, r.disbursed), || {
        at("unpaid principal > disbursed")
    })?;
    check(close(r.loss + r.recovered, r.unpaid_principal), || {
        at("loss + recovered != unpaid principal")
    })?;
    check(close(r.due, r.disbursed * (1.0 + s.arms()[0].interest_rate())), || {
        at("due != disbursed x (1 + r)")
    })?;
    let principal = s.arms()[0].principal();
    match case.extras.growth {
        None => check(close(r.disbursed, r.member_loans as f64 * principal), || {
            at("disbursed != member loans x P")
        })?,
        Some((_, multiple, _)) => check(
            at_most(r.member_loans as f64 * principal, r.disbursed)
                && at_most(r.disbursed, r.member_loans as f64 * principal * multiple),
            || at("a loan below the first principal or above the cap"),
        )?,
    }
    check(r.strategic_defaults <= r.able_members, || {
        at("walk-aways > members able to pay")
    })?;
    check(r.able_members + r.member_shortfalls == r.member_loans, || {
        at("able + short != member loans")
    })?;
    if case.extras.behaviour.is_none() {
        check(r.strategic_defaults == 0, || at("a walk-away without [behaviour]"))?;
    }

    check(
        r.slot_cycles() == u64::from(s.borrowers()) * u64::from(s.cycles()),
        || at("slot-cycles != N x cycles"),
    )?;
    check(r.member_loans == r.served_slot_cycles, || {
        at("member loans != served slot-cycles")
    })?;
    let sizes_vary = policy.sizes_vary();
    if sizes_vary {
        let (min, max) = (u64::from(policy.min_group_size()), u64::from(policy.max_group_size()));
        check(
            min * r.group_cycles <= r.member_loans && r.member_loans <= max * r.group_cycles,
            || at("a group outside [min, max]"),
        )?;
    } else {
        check(r.member_loans == k * r.group_cycles, || {
            at("member loans != k x groups")
        })?;
        check(
            r.waiting_slot_cycles <= (k - 1) * u64::from(s.villages()) * u64::from(s.cycles()),
            || at("k or more members waiting in a village"),
        )?;
    }
    check(r.groups_repaid <= r.group_cycles, || at("repaid > groups"))?;
    check(r.groups_rescued <= r.groups_repaid, || at("rescued > repaid"))?;
    check(r.member_shortfalls <= r.member_loans, || at("shortfalls > loans"))?;

    let by_size = r.shortfalls_by_size();
    let histogram_groups: u64 = by_size.iter().flat_map(|(_, cells)| cells.iter()).sum();
    let histogram_short: u64 = by_size
        .iter()
        .flat_map(|(_, cells)| cells.iter().enumerate())
        .map(|(n, c)| n as u64 * c)
        .sum();
    check(histogram_groups == r.group_cycles, || at("histogram groups != groups"))?;
    check(histogram_short == r.member_shortfalls, || {
        at("histogram shortfalls != shortfalls")
    })?;
    let shortfall_free: u64 = by_size.iter().map(|(_, cells)| cells[0]).sum();
    check(r.shortfall_free_groups == shortfall_free, || {
        at("shortfall-free groups != groups with no member short in the histogram")
    })?;
    // A walk-away is no shortfall: with [behaviour] a group with nobody short may be rescued (peers
    // covered the walker) or default, and an individual loan defaults on a shortfall or a walk-away.
    let walkers = r.strategic_defaults;
    if joint {
        if walkers == 0 {
            check(r.groups_repaid == shortfall_free + r.groups_rescued, || {
                at("joint: repaid != shortfall-free + rescued")
            })?;
        }
        if !sizes_vary {
            check(r.member_defaults == k * (r.group_cycles - r.groups_repaid), || {
                at("joint: defaults != k x defaulting groups")
            })?;
        }
    } else {
        check(r.groups_rescued == 0, || at("individual: a group was rescued"))?;
        if walkers == 0 {
            check(r.groups_repaid == shortfall_free, || {
                at("individual: repaid != shortfall-free")
            })?;
        }
        check(r.member_defaults == r.member_shortfalls + walkers, || {
            at("individual: defaults != shortfalls + walk-aways")
        })?;
    }
    match policy.exclusion_cycles() {
        loancycle::scenario::Exclusion::Cycles(0) => {
            check(r.excluded_slot_cycles == 0, || at("excluded without exclusion"))?;
            if s.arms()[0].dropout() == 0.0 {
                check(r.empty_slot_cycles == 0, || {
                    at("empty slots without exclusion or dropout")
                })?;
            }
        }
        loancycle::scenario::Exclusion::Permanent => {
            check(r.excluded_slot_cycles == 0, || {
                at("permanent exclusion counted as excluded")
            })?;
        }
        loancycle::scenario::Exclusion::Cycles(_) => {}
    }
    if case.shocks.is_empty() && case.income.low() >= 1.0 && !case.dynamic() {
        check(r.groups_repaid == r.group_cycles, || {
            at("no shock, income >= due, yet a default")
        })?;
        check(r.loss == 0.0 && r.member_shortfalls == 0, || {
            at("no shock, income >= due, yet a loss")
        })?;
    }

    check(r.cycles.len() == s.cycles() as usize, || {
        at("cycle records != counted cycles")
    })?;
    let served: u64 = r.cycles.iter().map(|c| u64::from(c.served)).sum();
    let groups: u64 = r.cycles.iter().map(|c| u64::from(c.groups)).sum();
    let repaid: u64 = r.cycles.iter().map(|c| u64::from(c.groups_repaid)).sum();
    let short: u64 = r.cycles.iter().map(|c| u64::from(c.shortfalls)).sum();
    let excluded: u64 = r.cycles.iter().map(|c| u64::from(c.excluded)).sum();
    let loss: f64 = r.cycles.iter().map(|c| c.loss).sum();
    let disbursed: f64 = r.cycles.iter().map(|c| c.disbursed).sum();
    check(served == r.member_loans && groups == r.group_cycles, || {
        at("cycle records: served or groups")
    })?;
    check(repaid == r.groups_repaid && short == r.member_shortfalls, || {
        at("cycle records: repaid or shortfalls")
    })?;
    check(excluded == r.excluded_slot_cycles, || at("cycle records: excluded"))?;
    check(close(loss, r.loss) && close(disbursed, r.disbursed), || {
        at("cycle records: loss or disbursed")
    })?;
    for c in &r.cycles {
        check(c.loss >= 0.0 && at_most(c.loss, c.disbursed), || {
            at("a cycle lost more than it lent")
        })?;
    }
    Ok(())
}

/// The ranges of an arm's summary.
fn check_summary(s: &Scenario, results: &RunResults, arm: usize) -> Result<(), TestCaseError> {
    let m = summarize_arm(&results.arms[arm], s.arms()[arm].policy().group_size());
    let unit = [
        ("group_repayment", m.group_repayment.map(|i| i.rate)),
        ("member_shortfall_rate", m.member_shortfall_rate),
        ("member_default_rate", m.member_default_rate),
        ("shortfall_free_group_rate", m.shortfall_free_group_rate),
        ("iid_shortfall_free", m.iid_shortfall_free),
        ("implied_member_failure", m.implied_member_failure),
        ("rescued_rate", m.rescued_rate),
        ("value_repayment_rate", m.value_repayment_rate),
        ("loss_rate", m.loss_rate.map(|i| i.rate)),
        ("served_share", m.served_share),
        ("excluded_share", m.excluded_share),
        ("waiting_share", m.waiting_share),
        ("empty_share", m.empty_share),
        ("loss_p50", m.loss_p50),
        ("loss_p95", m.loss_p95),
        ("loss_p99", m.loss_p99),
        ("loss_p999", m.loss_p999),
        ("loss_es99", m.loss_es99),
        ("loss_cycle_p99", m.loss_cycle_p99),
        ("loss_cycle_p999", m.loss_cycle_p999),
    ];
    for (name, value) in unit {
        if let Some(x) = value {
            check((0.0..=1.0 + ROUNDING).contains(&x), || {
                format!("arm {arm}: {name} = {x} outside [0, 1]")
            })?;
        }
    }
    let shares = [m.served_share, m.excluded_share, m.waiting_share, m.empty_share];
    check(shares.iter().all(Option::is_some), || {
        format!("arm {arm}: a share is missing")
    })?;
    let total: f64 = shares.iter().flatten().sum();
    check((total - 1.0).abs() <= 1e-12, || {
        format!("arm {arm}: the four shares sum to {total}")
    })?;
    let policy = s.arms()[arm].policy();
    if policy.sizes_vary() {
        let mean = m.mean_group_size.unwrap_or(f64::from(policy.group_size()));
        check(
            f64::from(policy.min_group_size()) <= mean && mean <= f64::from(policy.max_group_size()),
            || format!("arm {arm}: mean group size {mean} outside [min, max]"),
        )?;
    } else {
        check(
            m.member_loans == m.group_cycles * u64::from(policy.group_size()),
            || format!("arm {arm}: member loans != k x group-cycles"),
        )?;
    }
    Ok(())
}

#[test]
fn invariants_hold_on_random_valid_scenarios() {
    let mut runner = runner(CASES);
    let arms_checked = Cell::new(0usize);
    let replications_checked = Cell::new(0usize);
    let swept: [Cell<usize>; 7] = Default::default();
    // scenarios with sizes in a range, with [behaviour], with growing loans and incomes
    let featured: [Cell<usize>; 3] = Default::default();
    let outcome = runner.run(&case(), |case| {
        let text = case.toml();
        for (cell, on) in featured.iter().zip([
            case.slack(),
            case.extras.behaviour.is_some(),
            case.extras.growth.is_some(),
        ]) {
            cell.set(cell.get() + usize::from(on));
        }
        let s = Scenario::from_toml_str(&text, "generated.toml")
            .map_err(|e| TestCaseError::fail(format!("the generator wrote an invalid scenario: {e}\n{text}")))?;
        let results = loancycle::run::simulate(
            &s,
            loancycle::run::RunOptions {
                threads: Some(1),
                keep_cycle_records: true,
                ..Default::default()
            },
            &mut |_| {},
        )
        .map_err(|e| TestCaseError::fail(e.to_string()))?;
        for (arm, tally) in results.arms.iter().enumerate() {
            check(tally.replications.len() == s.replications() as usize, || {
                "replication count".into()
            })?;
            for r in &tally.replications {
                check_replication(&case, &s, arm, &r).map_err(|e| TestCaseError::fail(format!("{e}\n{text}")))?;
                replications_checked.set(replications_checked.get() + 1);
            }
            check_summary(&s, &results, arm).map_err(|e| TestCaseError::fail(format!("{e}\n{text}")))?;
            arms_checked.set(arms_checked.get() + 1);
        }
        for (i, key) in [
            "group_size",
            "liability",
            "peer_cover",
            "exclusion_cycles",
            "exclusion_scope",
            "formation",
            "matching",
        ]
        .iter()
        .enumerate()
        {
            swept[i].set(swept[i].get() + usize::from(case.swept(key)));
        }
        Ok(())
    });
    let swept: Vec<usize> = swept.iter().map(Cell::get).collect();
    let featured: Vec<usize> = featured.iter().map(Cell::get).collect();
    println!(
        "{CASES} scenarios, {} arms, {} replications checked; scenarios sweeping each policy field {swept:?}; \
         with sizes in a range, behaviour, growth {featured:?}",
        arms_checked.get(),
        replications_checked.get()
    );
    if let Err(e) = outcome {
        panic!("{e}");
    }
}

/// Independent member shocks, no exclusion: a member is short exactly when hit (fixed income 1, so
/// capacity equals the amount due unless a hit cuts it by the severity 0.4). Nobody ever has a
/// surplus, so peer cover (0.7 here) changes nothing. A group of k therefore repays with probability
/// (1 - q)^k (binomial law), and a member is short with probability q (Bernoulli law).
#[test]
fn independent_members_follow_the_binomial_law() {
    // (q, k, borrowers, villages, liability, formation, matching)
    let cases: [(f64, i32, u32, u32, &str, &str, &str); 5] = [
        (0.05, 5, 600, 3, "joint", "reshuffle", "random"),
        (0.10, 3, 450, 1, "joint", "persistent", "random"),
        (0.20, 1, 300, 2, "joint", "reshuffle", "assortative"),
        (0.02, 8, 640, 4, "joint", "persistent", "assortative"),
        (0.15, 4, 400, 2, "individual", "reshuffle", "random"),
    ];
    // A seed per case, so the cases do not share their random numbers.
    for (seed, (q, k, borrowers, villages, liability, formation, matching)) in (11..).zip(cases) {
        let text = format!(
            "seed = {seed}\nreplications = 200\ncycles = 20\n\
             [portfolio]\nborrowers = {borrowers}\nvillages = {villages}\n\
             [loan]\nprincipal = 100\ninterest_rate = 0.1\n\
             [borrowers]\nincome = 1.0\nrisk = 1.0\n\
             [[shock]]\nname = \"illness\"\nscope = \"member\"\nprobability = {q}\nseverity = 0.4\n\
             [policy]\ngroup_size = {k}\nliability = \"{liability}\"\npeer_cover = 0.7\nexclusion_cycles = 0\n\
             formation = \"{formation}\"\nmatching = \"{matching}\"\n"
        );
        let s = scenario(&text);
        let results = simulate(&s);
        let m = arm_summary(&s, &results, 0);
        let label = format!("q = {q}, k = {k}, {liability}, {formation}, {matching}");
        let repaid = m.group_repayment.expect("groups were served");
        let se = repaid.standard_error.expect("replications");
        // binomial law: P(no member of k hit) = (1 - q)^k
        let law = (1.0 - q).powi(k);
        println!(
            "{label}: group repayment {:.5} (SE {se:.5}) vs binomial law {law:.5}",
            repaid.rate
        );
        assert_within(&format!("{label}: group repayment"), repaid.rate, se, law, 0.01);
        // Bernoulli law: every member-cycle is an independent trial with success probability q
        let n = m.member_loans as f64;
        let shortfall = m.member_shortfall_rate.expect("loans");
        let se = (q * (1.0 - q) / n).sqrt();
        assert_within(&format!("{label}: member shortfall rate"), shortfall, se, q, 0.01);
    }
}

/// The fuzz inputs whose amounts overflowed (principal 1e300 and 1e308, incomes up to 1e308): the
/// validator now refuses them, naming the money bound.
fn assert_overflowing_fixtures_refused(names: &[&str]) {
    for name in names {
        let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
            .join("tests/data/fuzz/refused")
            .join(name);
        let message = Scenario::load(&path)
            .err()
            .unwrap_or_else(|| panic!("{name}: accepted"))
            .to_string();
        assert!(
            message.contains("it keeps every sum of money finite"),
            "{name}: not refused by the money bound: {message}"
        );
    }
}

/// A scenario at the money bounds: principal 1e12, interest rate 1e3 and the given income, groups of
/// `k`, peer cover 0, and `shocks` appended.
fn at_the_money_bounds(income: &str, k: u32, shocks: &str) -> Scenario {
    scenario(&format!(
        "replications = 3\ncycles = 4\n[portfolio]\nborrowers = 40\n\
         [loan]\nprincipal = 1e12\ninterest_rate = 1e3\n[borrowers]\nincome = {income}\n\
         [policy]\ngroup_size = {k}\npeer_cover = 0\n{shocks}"
    ))
}

const INCOMES_AT_THE_BOUND: [&str; 4] = [
    "1e6",
    "{ kind = \"uniform\", low = 1, high = 1e6 }",
    "{ kind = \"lognormal\", mean = 1e6, cv = 100 }",
    "{ kind = \"gamma\", mean = 1e6, cv = 100 }",
];

/// A group of members whose income is far above the amount due repays: nobody is short.
/// Found by fuzzing: with an income or a principal near the largest float, a member's capacity
/// (amount due x income) or the group's surplus overflowed to infinity, `peer_cover` 0 times infinity
/// was NaN, and the repayment test `shortfall <= cover x surplus` failed for a group with no
/// shortfall at all. Validation now bounds principal, interest rate and income (bounds.rs), and at
/// those bounds no group without a shortfall defaults.
#[test]
fn groups_without_shortfall_repay_even_at_extreme_amounts() {
    assert_overflowing_fixtures_refused(&["overflowing_capacity.toml", "overflowing_income.toml"]);
    for (income, k) in [("1e6", 2), ("{ kind = \"uniform\", low = 1, high = 1e6 }", 1)] {
        let s = at_the_money_bounds(income, k, "");
        let m = arm_summary(&s, &simulate(&s), 0);
        assert_eq!(m.member_shortfall_rate, Some(0.0), "{income}");
        assert_eq!(
            m.group_repayment.map(|g| g.rate),
            Some(1.0),
            "{income}: groups with no shortfall defaulted"
        );
    }
}

/// Every rate of a scenario the validator accepts is a number in [0, 1].
/// Found by fuzzing: with a principal near the largest float, the sums of amounts due, collected,
/// disbursed and lost over a replication overflowed to infinity (or k x the amount due did), and
/// the value repayment rate, loss rate and net yield became inf / inf = NaN. Those inputs are now
/// refused; at the bounds, with shocks that make some groups default, every rate is finite.
#[test]
fn rates_stay_finite_at_extreme_principals() {
    assert_overflowing_fixtures_refused(&[
        "overflowing_capacity.toml",
        "overflowing_income.toml",
        "overflowing_group_due.toml",
        "overflowing_money_sums.toml",
    ]);
    let shock = "[[shock]]\nname = \"x\"\nscope = \"member\"\nprobability = 0.5\nseverity = 1\n";
    for income in INCOMES_AT_THE_BOUND {
        let s = at_the_money_bounds(income, 5, shock);
        let m = arm_summary(&s, &simulate(&s), 0);
        for (label, value) in [
            ("value_repayment_rate", m.value_repayment_rate),
            ("loss_rate", m.loss_rate.map(|l| l.rate)),
        ] {
            assert!(
                value.is_some_and(|x| (0.0..=1.0).contains(&x)),
                "{income}: {label} = {value:?}"
            );
        }
        assert!(
            m.net_yield.is_some_and(f64::is_finite),
            "{income}: net_yield = {:?}",
            m.net_yield
        );
    }
}
