//! The loan-cycle engine: one replication of one arm, cycle by cycle, exactly as the model states.
//!
//! Each model step has its own file: `pool` (member and pool state, step 1 entry), `formation`
//! (step 2), `shocks` (step 3), `settlement` (steps 4 and 5, capacity and repayment, with the
//! repayment rule the closed forms share), `exclusion` (steps 6 exclusion and 7 dropout). This file
//! holds the replication's state and the cycle loop; `memory` estimates what a whole run holds;
//! `book` is the hook that reports each loan when a synthetic loan book is asked for. All randomness comes from `streams`, keyed by
//! entity and cycle, so the arms of one replication share their draws (common random numbers) and
//! scheduling never changes a result.
//!
//! Borrower slot j lives in village j % V. Internally the pool is stored village by village
//! (index = start of the village + j / V), so that everything one village touches in a cycle is
//! contiguous in memory; the scenario's slot numbers are used only to key random streams.

pub mod book;
mod chacha_blocks;
mod exclusion;
pub mod formation;
pub mod memory;
mod pool;
pub mod settlement;
mod shocks;
pub mod streams;

use crate::scenario::{Arm, Formation, Policy, Scenario};
use crate::stats::{CycleRecord, ReplicationTally};
use book::LoanBookSink;
use formation::FormationScratch;
use pool::{Groups, Layout, Pool};
use shocks::ShockState;
use streams::DenseBlocks;

/// Simulates replication `replication` of arm `arm` and returns its tally over the counted cycles.
///
/// The scenario is validated, so every index and probability used here is in range.
pub fn simulate_replication(scenario: &Scenario, arm: usize, replication: u32) -> ReplicationTally {
    let mut sim = ArmReplication::new(scenario, &scenario.arms[arm], replication);
    for cycle in 1..=scenario.total_cycles() {
        sim.run_cycle(cycle);
    }
    crate::finance::charge(&mut sim.tally, scenario.finance());
    sim.tally
}

/// Simulates arm `arm` once for a loan book, handing every loan of the counted cycles to `book`, and
/// returns the tally of that simulation.
///
/// The replication is keyed by (seed, arm) through [`streams::loan_book_key`], not by a replication
/// number: the arms' villages are then independent of each other (a book mixing arms must not
/// repeat one village's shocks under several group sizes) and of every replication of the run.
pub fn simulate_replication_with_book(
    scenario: &Scenario,
    arm: usize,
    book: &mut dyn LoanBookSink,
) -> ReplicationTally {
    let key = streams::loan_book_key(scenario.seed(), arm as u32);
    let mut sim = ArmReplication::with_key(scenario, &scenario.arms()[arm], 0, key);
    sim.book = Some(book);
    for cycle in 1..=scenario.total_cycles() {
        sim.run_cycle(cycle);
    }
    crate::finance::charge(&mut sim.tally, scenario.finance());
    sim.tally
}

/// The state of one replication of one arm between cycles.
struct ArmReplication<'a> {
    scenario: &'a Scenario,
    /// The arm's full model: its policy, loan, borrowers, shocks and pool (any of them may be swept).
    arm: &'a Arm,
    policy: &'a Policy,
    /// The replication's stream key.
    key: [u8; 32],
    /// Amount due per member per cycle, D = P (1 + r).
    due: f64,
    layout: Layout,
    pool: Pool,
    /// This cycle's groups.
    groups: Groups,
    /// Whether each of this cycle's groups repaid (read by the exclusion step).
    group_repaid: Vec<bool>,
    /// Last cycle's groups and their members' entrant numbers (persistent formation).
    previous: Groups,
    previous_entrants: Vec<u32>,
    formation_scratch: FormationScratch,
    shocks: ShockState,
    /// Dense random blocks of the step at work (formation keys, shock uniforms, dropout).
    dense: DenseBlocks,
    /// The positions of the village being settled, by slot within the village (arms whose amounts
    /// due and incomes never change).
    positions: settlement::SlotPositions,
    tally: ReplicationTally,
    /// Where each loan of a counted cycle goes, when a loan book is being written.
    book: Option<&'a mut dyn LoanBookSink>,
}

impl<'a> ArmReplication<'a> {
    fn new(scenario: &'a Scenario, arm: &'a Arm, replication: u32) -> Self {
        Self::with_key(
            scenario,
            arm,
            replication,
            streams::replication_key(scenario.seed(), replication),
        )
    }

    /// A replication drawing from the streams of `key` (a replication's or a loan book's).
    fn with_key(scenario: &'a Scenario, arm: &'a Arm, replication: u32, key: [u8; 32]) -> Self {
        let policy = &arm.policy;
        let layout = Layout::new(scenario.borrowers, scenario.villages, |v| scenario.village_size(v));
        let shocks = ShockState::new(arm);
        let (n, villages) = (layout.n, layout.villages);
        ArmReplication {
            scenario,
            arm,
            policy,
            key,
            due: arm.amount_due(),
            pool: Pool::new(&layout, shocks.member_shocks.len()),
            layout,
            groups: Groups::new(villages, n),
            group_repaid: Vec::new(),
            previous: Groups::new(villages, 0),
            previous_entrants: Vec::new(),
            formation_scratch: FormationScratch::default(),
            shocks,
            dense: DenseBlocks::default(),
            positions: settlement::SlotPositions::default(),
            tally: ReplicationTally::with_group_sizes(
                replication,
                policy.min_group_size(),
                policy.max_group_size(),
                scenario.cycles,
            ),
            book: None,
        }
    }

    /// One cycle: the model's seven steps. Villages are independent within a cycle once the
    /// portfolio-wide draws are made, so the steps run village by village: a village's members stay
    /// in cache from entry to dropout instead of the whole pool being streamed through memory once
    /// per step.
    fn run_cycle(&mut self, cycle: u32) {
        let counted = cycle > self.scenario.warmup_cycles;
        self.refresh_thresholds(cycle);
        self.prepare_shocks(cycle);
        let mut record = CycleRecord::default();
        self.groups.clear();
        for v in 0..self.layout.villages {
            self.entry(v, cycle); // 1. entry
            self.formation(v, cycle, counted, &mut record); // 2. formation
            self.shocks(v, cycle); // 3. shocks
            self.settlement(v, cycle, counted, &mut record); // 4. capacity, 5. repayment
            if counted && self.book.is_some() {
                self.record_loans(v, cycle);
            }
            self.exclusion(v, cycle); // 6. exclusion
            self.dropout(v, cycle); // 7. dropout
        }
        self.groups.village_first[self.layout.villages] = self.groups.len();
        if self.policy.formation == Formation::Persistent {
            self.remember_groups();
        }
        if counted {
            self.tally.cycles.push(record);
        }
    }

    /// Keeps this cycle's groups for the next formation, with each member's entrant number so that
    /// a departure and its replacement are told apart.
    fn remember_groups(&mut self) {
        self.previous_entrants.clear();
        let entrants = &self.pool.entrants;
        self.previous_entrants.extend(
            self.groups
                .members
                .iter()
                .map(|&i| entrants[i as usize].wrapping_sub(1)),
        );
        std::mem::swap(&mut self.previous, &mut self.groups);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn scenario(extra: &str) -> Scenario {
        let text = format!(
            "replications = 1\ncycles = 6\n[portfolio]\nborrowers = 103\nvillages = 4\n[loan]\nprincipal = 100\n{extra}"
        );
        Scenario::from_toml_str(&text, "inline").unwrap()
    }

    /// The groups of the cycle just run as sorted lists of slot numbers (persistent formation keeps
    /// them in `previous_groups` once the cycle ends).
    fn group_sets(sim: &ArmReplication) -> Vec<Vec<u32>> {
        let groups = if sim.policy.formation == Formation::Persistent {
            &sim.previous
        } else {
            &sim.groups
        };
        let layout = &sim.layout;
        let mut sets: Vec<Vec<u32>> = groups
            .iter_from(0)
            .map(|group| {
                let mut slots: Vec<u32> = group
                    .iter()
                    .map(|&i| {
                        let v = (0..layout.villages)
                            .find(|&v| (i as usize) < layout.village_start[v + 1])
                            .unwrap();
                        layout.slot_of(v, i as usize)
                    })
                    .collect();
                slots.sort_unstable();
                slots
            })
            .collect();
        sets.sort();
        sets
    }

    #[test]
    fn groups_stay_within_their_village_and_cover_whole_groups_only() {
        let s = scenario("[policy]\ngroup_size = 4\n");
        let mut sim = ArmReplication::new(&s, &s.arms[0], 0);
        sim.run_cycle(1);
        let sets = group_sets(&sim);
        // villages of 26, 26, 26, 25 slots: 6 groups of 4 each, the rest wait
        assert_eq!(sets.len(), 24);
        for g in &sets {
            assert!(g.iter().all(|&slot| slot % 4 == g[0] % 4), "group {g:?} spans villages");
        }
    }

    #[test]
    fn persistent_groups_survive_while_everyone_stays_eligible() {
        let s = scenario("[policy]\ngroup_size = 5\nformation = \"persistent\"\n");
        let mut sim = ArmReplication::new(&s, &s.arms[0], 0);
        sim.run_cycle(1);
        let first = group_sets(&sim);
        sim.run_cycle(2);
        sim.run_cycle(3);
        assert_eq!(group_sets(&sim), first, "no shocks, no exclusion: the same groups");
        let r = scenario("[policy]\ngroup_size = 5\nformation = \"reshuffle\"\n");
        let mut re = ArmReplication::new(&r, &r.arms[0], 0);
        re.run_cycle(1);
        let before = group_sets(&re);
        re.run_cycle(2);
        assert_ne!(group_sets(&re), before, "reshuffled groups change");
    }

    #[test]
    fn a_departure_dissolves_a_persistent_group() {
        let s = scenario("[policy]\ngroup_size = 5\nformation = \"persistent\"\n[pool]\ndropout = 0.2\n");
        let mut sim = ArmReplication::new(&s, &s.arms[0], 0);
        sim.run_cycle(1);
        let first = group_sets(&sim);
        // cycle 1 ends with dropouts; their groups must not come back whole
        let layout = &sim.layout;
        let departed: Vec<u32> = (0..layout.villages)
            .flat_map(|v| layout.range(v).map(move |i| (v, i)))
            .filter(|&(_, i)| !sim.pool.occupied[i])
            .map(|(v, i)| layout.slot_of(v, i))
            .collect();
        assert!(!departed.is_empty());
        sim.run_cycle(2);
        let second = group_sets(&sim);
        for g in &first {
            let broken = g.iter().any(|slot| departed.contains(slot));
            if broken {
                assert!(!second.contains(g), "group {g:?} with a departed member was kept");
            }
        }
        // groups without departures are all kept
        let intact = first.iter().filter(|g| !g.iter().any(|s| departed.contains(s))).count();
        assert_eq!(first.iter().filter(|g| second.contains(g)).count(), intact);
    }

    /// A capacity a rounding-sized amount below the amount due is no shortfall: incomes 1e-12 below
    /// the amount due and no shock leave every member paying in full, every group shortfall-free
    /// and nobody rescued, under joint and individual liability alike.
    #[test]
    fn a_shortfall_within_the_rounding_slack_is_no_shortfall() {
        for liability in ["joint", "individual"] {
            let s = scenario(&format!(
                "[borrowers]\nincome = 0.999999999999\n[policy]\ngroup_size = 4\npeer_cover = 1.0\nliability = \"{liability}\"\n"
            ));
            let t = simulate_replication(&s, 0, 0);
            assert!(t.group_cycles > 0);
            assert_eq!(t.member_shortfalls, 0, "{liability}: nobody is short");
            assert_eq!(
                t.groups_repaid, t.group_cycles,
                "{liability}: rounding must not default a group"
            );
            assert_eq!(t.shortfall_free_groups, t.group_cycles, "{liability}");
            assert_eq!(t.groups_rescued, 0, "{liability}: nobody covered anything");
        }
    }

    /// Independent members, each short exactly when hit (probability q = 0.1): the share of
    /// group-cycles with nobody short is (1 - q)^k whatever the peer cover (binomial law, any
    /// probability textbook). 40 replications of 200 groups of 5 over 20 cycles: standard error
    /// about 0.0012, so 4 SE (0.005) is far below the repaid share under full cover (0.919), the
    /// figure a tally counting repaid groups instead would give.
    #[test]
    fn shortfall_free_groups_follow_the_binomial_law() {
        use crate::stats::estimate::ratio;
        use crate::stats::tolerance::STANDARD_ERRORS;
        let text = "seed = 8\nreplications = 40\ncycles = 20\n[portfolio]\nborrowers = 1000\nvillages = 10\n\
            [loan]\nprincipal = 100\n[borrowers]\nincome = 1.5\n\
            [[shock]]\nname = \"illness\"\nscope = \"member\"\nprobability = 0.1\nseverity = 1.0\n\
            [policy]\ngroup_size = 5\npeer_cover = 1.0\n";
        let s = Scenario::from_toml_str(text, "inline").unwrap();
        let tallies: Vec<ReplicationTally> = (0..40).map(|r| simulate_replication(&s, 0, r)).collect();
        let share = |f: fn(&ReplicationTally) -> u64| {
            ratio(tallies.iter().map(|t| (f(t) as f64, t.group_cycles as f64))).unwrap()
        };
        let free = share(|t| t.shortfall_free_groups);
        let se = free.standard_error.unwrap();
        let expected = 0.9f64.powi(5);
        assert!(se < 0.002, "standard error {se} too large for a sharp check");
        assert!(
            (free.rate - expected).abs() <= STANDARD_ERRORS * se,
            "{} vs {expected} (se {se})",
            free.rate
        );
        // the histogram's first cell counts the same groups
        assert!(
            tallies
                .iter()
                .all(|t| t.shortfall_histogram[0] == t.shortfall_free_groups)
        );
        let repaid = share(|t| t.groups_repaid).rate;
        assert!(
            repaid - free.rate > 10.0 * STANDARD_ERRORS * se,
            "cover must matter: {repaid}"
        );
    }

    /// Recording a loan book reads the state and changes nothing: the same key gives the same tally
    /// with and without a sink, in a scenario where cover, exclusion and dropout all act.
    #[test]
    fn recording_a_loan_book_changes_no_draw() {
        struct Count(u64);
        impl LoanBookSink for Count {
            fn loan(&mut self, _: &book::LoanRecord) {
                self.0 += 1;
            }
        }
        let s = scenario(
            "[borrowers]\nincome = { kind = \"lognormal\", mean = 1.2, cv = 0.3 }\n\
             [[shock]]\nname = \"illness\"\nscope = \"member\"\nprobability = 0.2\nvillage_correlation = 0.1\nseverity = 0.7\n\
             [policy]\ngroup_size = 4\npeer_cover = 0.5\nexclusion_cycles = 1\n[pool]\ndropout = 0.1\n",
        );
        let mut count = Count(0);
        let with_book = simulate_replication_with_book(&s, 0, &mut count);
        let mut plain = ArmReplication::with_key(&s, &s.arms()[0], 0, streams::loan_book_key(s.seed(), 0));
        for cycle in 1..=s.total_cycles() {
            plain.run_cycle(cycle);
        }
        assert_eq!(with_book, plain.tally);
        assert_eq!(count.0, with_book.member_loans);
        assert!(with_book.groups_repaid < with_book.group_cycles && with_book.groups_rescued > 0);
        // the book's key is not replication 0's: its draws differ
        assert_ne!(with_book, simulate_replication(&s, 0, 0));
    }

    #[test]
    fn bucket_sort_matches_comparison_sort() {
        let key = streams::replication_key(5, 0);
        let mut buf = DenseBlocks::default();
        for n in [0usize, 1, 2, 3, 17, 200, 1000] {
            buf.fill(&key, n as u64, n, 2);
            let mut keys: Vec<u64> = (0..n as u32).map(|m| buf.u64_at(m)).collect();
            // a few duplicates and small values exercise ties and the lowest bucket
            if n > 3 {
                keys[1] = keys[0];
                keys[2] = 3;
            }
            // and keys with only three random high bits crowd a few buckets, so that keys move
            // many places in the pass that fixes the order within buckets
            let crowded: Vec<u64> = keys
                .iter()
                .enumerate()
                .map(|(m, &k)| (k >> 61 << 61) | m as u64)
                .collect();
            for keys in [keys, crowded] {
                let mut expected = keys.clone();
                expected.sort_unstable();
                // a buffer left longer by an earlier, larger sort must not leak into the result
                let (mut sorted, mut counts) = (vec![7; 1500], Vec::new());
                let result = formation::sort_uniform_keys(&keys, &mut sorted, &mut counts);
                assert_eq!(result, expected, "n = {n}");
            }
        }
    }
}
