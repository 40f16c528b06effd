//! Shared code of the fuzz targets: what the binary does with a scenario text, and a structured
//! generator of scenario texts.
//!
//! `exercise` runs the path a user's file takes through `loancycle check`, `analyze` and `run`:
//! parse and validate, list the arms, the analytic report, and (for small scenarios) a simulation
//! whose results are summarised, checked against the engine's invariants and rendered by every writer.
//! A panic anywhere, a multi-line error message or a broken invariant is a finding.

use arbitrary::{Arbitrary, Result as ArbResult, Unstructured};
use loancycle::analytic::report::analyze;
use loancycle::output::{analysis, tables, terminal};
use loancycle::run::{RunOptions, simulate};
use loancycle::scenario::{Exclusion, Finance, Liability, Overrides, Scenario};
use loancycle::stats::summary::summarize_arm;
use std::fmt::Write as _;

/// The file name errors are expected to start with.
pub const ORIGIN: &str = "fuzz.toml";

/// Most member-cycles (slots x simulated cycles x replications x arms) simulated for one input.
pub const MAX_MEMBER_CYCLES: u64 = 60_000;

/// Most arms for which the analytic report is computed (one quadrature per arm).
pub const MAX_ANALYZED_ARMS: usize = 64;

/// Most replications simulated for one input (the rest would repeat the same code paths).
pub const MAX_REPLICATIONS: u32 = 3;

/// Parses `text`, and runs whatever the binary would run on it.
pub fn exercise(text: &str) {
    let mut scenario = match Scenario::from_toml_str(text, ORIGIN) {
        Ok(s) => s,
        Err(e) => {
            let message = e.to_string();
            assert!(
                !message.contains('\n'),
                "error message spans several lines: {message:?}"
            );
            assert!(
                message.starts_with(&format!("{ORIGIN}: ")),
                "error message does not name the file: {message:?}"
            );
            assert!(
                !message.trim_end().ends_with(':'),
                "error message says nothing after its location: {message:?}"
            );
            return;
        }
    };
    let _ = terminal::arms_listing(&scenario, ORIGIN);
    if scenario.arms().len() <= MAX_ANALYZED_ARMS {
        let report = analyze(&scenario);
        let _ = analysis::table(&report);
        let _ = analysis::json(&report);
    }
    if scenario.replications() > MAX_REPLICATIONS {
        let fewer = Overrides {
            replications: Some(MAX_REPLICATIONS),
            ..Default::default()
        };
        scenario = Scenario::from_toml_str_with(text, ORIGIN, &fewer).expect("fewer replications still validate");
    }
    let member_cycles = u64::from(scenario.borrowers())
        * u64::from(scenario.warmup_cycles() + scenario.cycles())
        * u64::from(scenario.replications())
        * scenario.arms().len() as u64;
    if member_cycles > MAX_MEMBER_CYCLES {
        return;
    }
    let results = simulate(
        &scenario,
        RunOptions {
            threads: Some(1),
            keep_cycle_records: true,
            ..Default::default()
        },
        &mut |_| {},
    )
    .expect("a validated small scenario simulates");
    check_invariants(&scenario, &results.arms);
    let report = loancycle::report::build(&scenario, text, ORIGIN, &results);
    let _ = tables::summary_csv(&report);
    let _ = tables::timeseries_csv(&report);
    let _ = tables::differences_csv(&report);
    let _ = tables::summary_json(&report);
    let _ = terminal::summary_table(&report);
}

/// Relative rounding allowed in money sums.
const ROUNDING: f64 = 1e-9;

fn at_most(a: f64, b: f64) -> bool {
    a <= b + ROUNDING * b.abs().max(1.0)
}

fn close(a: f64, b: f64) -> bool {
    at_most(a, b) && at_most(b, a)
}

/// The engine's accounting identities, per replication, and the summary's ranges, per arm: the
/// general ones of `tests/engine_properties.rs` (DEVELOPERS.md, "Inputs that must not crash it"),
/// which hold whatever the scenario switches on: group sizes in a range, `[behaviour]`, growing loans
/// and incomes, `[finance]`, any exclusion, formation and matching.
pub fn check_invariants(scenario: &Scenario, arms: &[loancycle::stats::ArmTally]) {
    let finance = scenario.finance();
    for (a, tally) in arms.iter().enumerate() {
        let arm = &scenario.arms()[a];
        let policy = arm.policy();
        let (smallest, largest) = (u64::from(policy.min_group_size()), u64::from(policy.max_group_size()));
        let k = u64::from(policy.group_size());
        let joint = policy.liability() == Liability::Joint;
        for r in &tally.replications {
            let id = format!("arm {a} ({}), replication {}: {r:?}", arm.label(), r.replication);
            assert!(at_most(r.collected, r.due), "collected > due; {id}");
            assert!(r.collected >= 0.0, "collected < 0; {id}");
            assert!(r.loss >= 0.0, "loss < 0; {id}");
            assert!(at_most(r.loss, r.disbursed), "loss > disbursed; {id}");
            assert!(
                at_most(r.unpaid_principal, r.disbursed),
                "unpaid principal > disbursed; {id}"
            );
            assert!(
                close(r.loss + r.recovered, r.unpaid_principal),
                "loss + recovered != unpaid principal; {id}"
            );
            assert!(
                close(r.due, r.disbursed * (1.0 + arm.interest_rate())),
                "due != disbursed x (1 + interest rate); {id}"
            );
            // Every loan lies between the first principal and its cap (one principal when loans
            // do not grow).
            let first = r.member_loans as f64 * arm.principal();
            assert!(
                at_most(first, r.disbursed) && at_most(r.disbursed, first * arm.max_multiple()),
                "a loan below the first principal or above the cap; {id}"
            );
            if !arm.progressive() {
                assert!(
                    close(r.disbursed, first),
                    "fixed loans, yet disbursed != loans x principal; {id}"
                );
            }
            assert_eq!(
                r.able_members + r.member_shortfalls,
                r.member_loans,
                "able + short != member loans; {id}"
            );
            assert!(
                r.strategic_defaults <= r.able_members,
                "walk-aways > members able to pay; {id}"
            );
            if arm.behaviour().is_none() {
                assert_eq!(r.strategic_defaults, 0, "a walk-away without [behaviour]; {id}");
            }
            assert_eq!(
                r.member_loans, r.served_slot_cycles,
                "member loans != served slot-cycles; {id}"
            );
            assert!(
                smallest * r.group_cycles <= r.member_loans && r.member_loans <= largest * r.group_cycles,
                "a group outside [min, max]; {id}"
            );
            if !policy.sizes_vary() {
                assert_eq!(r.member_loans, k * r.group_cycles, "member loans != k x groups; {id}");
            }
            assert!(r.groups_repaid <= r.group_cycles, "repaid > groups; {id}");
            assert!(r.groups_rescued <= r.groups_repaid, "rescued > repaid; {id}");
            assert!(r.member_shortfalls <= r.member_loans, "shortfalls > loans; {id}");
            assert!(r.member_defaults <= r.member_loans, "defaults > loans; {id}");

            let by_size = r.shortfalls_by_size();
            for (size, _) in &by_size {
                let size = u64::from(*size);
                assert!(
                    smallest <= size && size <= largest,
                    "a histogram row for a size outside [min, max]; {id}"
                );
            }
            let hist_groups: u64 = by_size.iter().flat_map(|(_, cells)| cells.iter()).sum();
            let hist_short: u64 = by_size
                .iter()
                .flat_map(|(_, cells)| cells.iter().enumerate())
                .map(|(n, c)| n as u64 * c)
                .sum();
            let shortfall_free: u64 = by_size.iter().map(|(_, cells)| cells[0]).sum();
            assert_eq!(
                hist_groups, r.group_cycles,
                "histogram does not count every group; {id}"
            );
            assert_eq!(
                hist_short, r.member_shortfalls,
                "histogram shortfalls != shortfalls; {id}"
            );
            assert_eq!(
                r.shortfall_free_groups, shortfall_free,
                "shortfall-free groups != groups with nobody short in the histogram; {id}"
            );
            // A walk-away is no shortfall: with walk-aways a group with nobody short may be rescued
            // or default, so the repayment identities hold only without them.
            let walkers = r.strategic_defaults;
            if joint {
                if walkers == 0 {
                    assert_eq!(
                        r.groups_repaid,
                        shortfall_free + r.groups_rescued,
                        "joint: repaid != shortfall-free + rescued; {id}"
                    );
                }
                if !policy.sizes_vary() {
                    assert_eq!(
                        r.member_defaults,
                        k * (r.group_cycles - r.groups_repaid),
                        "joint: defaults != k x defaulting groups; {id}"
                    );
                }
            } else {
                assert_eq!(r.groups_rescued, 0, "individual: a group was rescued; {id}");
                if walkers == 0 {
                    assert_eq!(
                        r.groups_repaid, shortfall_free,
                        "individual: repaid != shortfall-free; {id}"
                    );
                }
                assert_eq!(
                    r.member_defaults,
                    r.member_shortfalls + walkers,
                    "individual: defaults != shortfalls + walk-aways; {id}"
                );
            }
            match policy.exclusion_cycles() {
                Exclusion::Cycles(0) => {
                    assert_eq!(r.excluded_slot_cycles, 0, "excluded without exclusion; {id}");
                    if arm.dropout() == 0.0 {
                        assert_eq!(r.empty_slot_cycles, 0, "empty slots without exclusion or dropout; {id}");
                    }
                }
                Exclusion::Permanent => {
                    assert_eq!(
                        r.excluded_slot_cycles, 0,
                        "permanent exclusion counted as excluded; {id}"
                    );
                }
                Exclusion::Cycles(_) => {}
            }
            if policy.exclusion_cycles() != Exclusion::Permanent {
                assert_eq!(r.removals, 0, "a removal without permanent exclusion; {id}");
            }
            assert!(r.removals <= r.exclusion_events, "removals > exclusions; {id}");
            assert!(
                r.removed_slot_cycles <= r.empty_slot_cycles,
                "removed slot-cycles > empty slot-cycles; {id}"
            );
            assert!(r.clients_reached <= r.member_loans, "more clients than loans; {id}");

            // Money: fees and costs are finite and never negative, and nothing without [finance].
            for (name, x) in [
                ("fees", r.fees),
                ("cost of funds", r.cost_of_funds),
                ("operating cost", r.operating_cost),
            ] {
                assert!(x.is_finite() && x >= 0.0, "{name} = {x}; {id}");
            }
            if finance.fee_rate() == 0.0 {
                assert_eq!(r.fees, 0.0, "fees without a fee rate; {id}");
            }
            if finance.cost_of_funds() == 0.0 && finance.operating_cost() == 0.0 {
                assert_eq!(
                    r.cost_of_funds + r.operating_cost,
                    0.0,
                    "costs without [finance] costs; {id}"
                );
            }
            assert!(r.net_income().is_finite(), "net income {}; {id}", r.net_income());

            let slots = u64::from(scenario.borrowers()) * u64::from(scenario.cycles());
            assert_eq!(
                r.slot_cycles(),
                slots,
                "slot-cycles != borrowers x counted cycles; {id}"
            );
            assert_eq!(r.cycles.len() as u32, scenario.cycles(), "cycle records; {id}");
            let served: u64 = r.cycles.iter().map(|c| u64::from(c.served)).sum();
            let groups: u64 = r.cycles.iter().map(|c| u64::from(c.groups)).sum();
            let repaid: u64 = r.cycles.iter().map(|c| u64::from(c.groups_repaid)).sum();
            let short: u64 = r.cycles.iter().map(|c| u64::from(c.shortfalls)).sum();
            let excluded: u64 = r.cycles.iter().map(|c| u64::from(c.excluded)).sum();
            let loss: f64 = r.cycles.iter().map(|c| c.loss).sum();
            let disbursed: f64 = r.cycles.iter().map(|c| c.disbursed).sum();
            assert!(
                served == r.member_loans && groups == r.group_cycles,
                "cycle records: served or groups; {id}"
            );
            assert!(
                repaid == r.groups_repaid && short == r.member_shortfalls,
                "cycle records: repaid or shortfalls; {id}"
            );
            assert_eq!(excluded, r.excluded_slot_cycles, "cycle records: excluded; {id}");
            assert!(
                close(loss, r.loss) && close(disbursed, r.disbursed),
                "cycle records: loss or disbursed; {id}"
            );
            for c in &r.cycles {
                assert!(
                    c.loss >= 0.0 && at_most(c.loss, c.disbursed),
                    "a cycle lost more than it lent; {id}"
                );
            }
            // With a [finance] table the counted cycles make whole years, which share out the
            // loss; without one a run keeps no years.
            if !r.years.is_empty() || *finance != Finance::default() {
                assert_eq!(
                    r.years.len() as u32,
                    scenario.cycles() / finance.cycles_per_year(),
                    "years != counted cycles / cycles per year; {id}"
                );
                let year_loss: f64 = r.years.iter().map(|y| y.loss).sum();
                assert!(close(year_loss, r.loss), "the years' losses != the loss; {id}");
            }
        }
        let s = summarize_arm(tally, policy.group_size());
        let unit = [
            ("group_repayment", s.group_repayment.map(|i| i.rate)),
            ("member_shortfall_rate", s.member_shortfall_rate),
            ("member_default_rate", s.member_default_rate),
            ("shortfall_free_group_rate", s.shortfall_free_group_rate),
            ("iid_shortfall_free", s.iid_shortfall_free),
            ("implied_member_failure", s.implied_member_failure),
            ("rescued_rate", s.rescued_rate),
            ("value_repayment_rate", s.value_repayment_rate),
            ("loss_rate", s.loss_rate.map(|i| i.rate)),
            ("strategic_default_rate", s.strategic_default_rate.map(|i| i.rate)),
            ("served_share", s.served_share),
            ("excluded_share", s.excluded_share),
            ("waiting_share", s.waiting_share),
            ("empty_share", s.empty_share),
            ("removed_share", s.removed_share),
            ("loss_p50", s.loss_p50),
            ("loss_p95", s.loss_p95),
            ("loss_p99", s.loss_p99),
            ("loss_p999", s.loss_p999),
            ("loss_es99", s.loss_es99),
            ("loss_cycle_p99", s.loss_cycle_p99),
            ("loss_cycle_p999", s.loss_cycle_p999),
            ("worst_cycle_loss_p50", s.worst_cycle_loss_p50),
            ("worst_cycle_loss_p99", s.worst_cycle_loss_p99),
        ];
        for (name, value) in unit {
            if let Some(x) = value {
                assert!(
                    (0.0..=1.0 + 1e-12).contains(&x),
                    "arm {a}: {name} = {x} is outside [0, 1]"
                );
            }
        }
        let shares = [s.served_share, s.excluded_share, s.waiting_share, s.empty_share];
        if shares.iter().all(Option::is_some) {
            let total: f64 = shares.iter().flatten().sum();
            assert!((total - 1.0).abs() < 1e-9, "arm {a}: the four shares sum to {total}");
        }
        if let Some(mean) = s.mean_group_size {
            assert!(
                smallest as f64 <= mean + 1e-9 && mean <= largest as f64 + 1e-9,
                "arm {a}: mean group size {mean} outside [min, max]"
            );
        }
        if let Some(mean) = s.mean_principal {
            assert!(
                at_most(arm.principal(), mean) && at_most(mean, arm.principal() * arm.max_multiple()),
                "arm {a}: mean principal {mean} below the first loan or above the cap"
            );
        }
    }
}

// ---------------------------------------------------------------------------------------------
// Structured scenarios
// ---------------------------------------------------------------------------------------------

/// Number spellings that have broken parsers before: NaN and infinities in every TOML spelling,
/// integers at the edges of i64, u32 and the engine's limits, subnormals, radix prefixes, and
/// values of the wrong type.
const SPECIAL_NUMBERS: &[&str] = &[
    "nan",
    "+nan",
    "-nan",
    "inf",
    "+inf",
    "-inf",
    "0",
    "-0",
    "0.0",
    "-0.0",
    "1",
    "1.0",
    "0.5",
    "0.999999999999",
    "1.0000000000000002",
    "1e-9",
    "5e-324",
    "2.2250738585072014e-308",
    "1e308",
    "1.7976931348623157e308",
    "1e309",
    "-1e308",
    "9223372036854775807",
    "-9223372036854775808",
    "4294967295",
    "4294967296",
    "-4294967296",
    "16777215",
    "16777216",
    "10000000",
    "10000001",
    "250000000",
    "255",
    "256",
    "9",
    "9.000000000000002",
    "1000",
    "1000.0000000001",
    "1e6",
    "1000001",
    "1e12",
    "1000000000001",
    "24",
    "10000",
    "10001",
    "0x7fffffffffffffff",
    "0xff",
    "0o777",
    "0b101",
    "1_000",
    "100",
    "-1",
    "2",
    "3",
    "\"0.5\"",
    "\"nan\"",
    "true",
    "[]",
    "[1, 2]",
    "{}",
    "1979-05-27T07:32:00Z",
    "1979-05-27",
    "07:32:00",
];

/// Words the format knows, and some it does not, for string-valued fields.
const WORDS: &[&str] = &[
    "member",
    "group",
    "village",
    "portfolio",
    "joint",
    "individual",
    "permanent",
    "defaulters",
    "reshuffle",
    "persistent",
    "random",
    "assortative",
    "fixed",
    "uniform",
    "lognormal",
    "beta",
    "gamma",
    "constant",
    "power",
    "power_plus_log",
    "table",
    "",
    " ",
    "Permanent",
    "member\u{0}",
    "\u{200b}",
    "村",
    "ñ",
    "🙂",
    "\u{feff}joint",
    "credits",
    "a currency label far longer than twenty-four characters",
    "\t",
];

/// Parameter names of distribution and curve tables (and one that is neither).
const PARAMS: &[&str] = &[
    "value", "low", "high", "mean", "cv", "sd", "p", "values", "kind", "curve", "q",
];

/// Keys of a `[sweep]` table: the policy fields by their bare names, the other sweepable fields by
/// their paths, shock fields of the names the generator writes, and keys that may not be swept.
const SWEEP_KEYS: &[&str] = &[
    "group_size",
    "liability",
    "peer_cover",
    "exclusion_cycles",
    "exclusion_scope",
    "formation",
    "matching",
    "min_group_size",
    "max_group_size",
    "size_slack",
    "policy.group_size",
    "loan.principal",
    "loan.interest_rate",
    "loan.recovery_rate",
    "loan.growth",
    "loan.max_multiple",
    "borrowers.income",
    "borrowers.risk",
    "borrowers.income_growth",
    "behaviour.loan_value",
    "behaviour.discount",
    "behaviour.social_sanction",
    "behaviour.temptation",
    "pool.dropout",
    "pool.replace_departures",
    "shock.s0.probability",
    "shock.s1.reach",
    "shock.s0.village_correlation",
    "shock.s0.severity",
    "shock.s0.stress.0.probability",
    "finance.fee_rate",
    "finance.cycles_per_year",
    "dropout",
    "seed",
    "cycles",
    "group_size ",
];

/// What a field holds, so that a plausible value can be written for it.
#[derive(Debug, Clone, Copy)]
pub enum Kind {
    /// An integer `low + n % span`.
    Count(u32, u32),
    /// A positive real number.
    Real,
    /// A number in [0, 1].
    Probability,
    /// One of these words.
    Word(&'static [&'static str]),
    /// A name.
    Text,
    /// A boolean.
    Bool,
    /// A multiple of the first loan: >= 1.
    Multiple,
    /// A number strictly between 0 and 1 (a discount factor).
    OpenUnit,
    /// The name of the shock at this index (`s0`, `s1`, ...), which `[sweep]` keys name.
    ShockName(usize),
}

const LIABILITY_WORDS: &[&str] = &["joint", "individual"];
const EXCLUSION_WORDS: &[&str] = &["0", "1", "3", "permanent"];
const SCOPE_WORDS: &[&str] = &["group", "defaulters"];
const FORMATION_WORDS: &[&str] = &["reshuffle", "persistent"];
const MATCHING_WORDS: &[&str] = &["random", "assortative"];
const CURRENCY_WORDS: &[&str] = &["credits", "shells", "ℳ", "beads of Lower Varn", " ", "tokens\u{7}"];

/// A value to write after `=`.
#[derive(Debug)]
pub enum Value {
    /// A value that fits the field (see `Kind`).
    Plausible(u8),
    /// A small non-negative integer.
    Small(u8),
    /// A small integer, scaled to make probabilities and shares: n / 100.
    Hundredths(u8),
    /// One of `SPECIAL_NUMBERS`, written verbatim.
    Special(u8),
    /// Any integer.
    Integer(i64),
    /// Any float bit pattern, written in TOML spelling.
    Float(f64),
    /// One of `WORDS`, quoted.
    Word(u8),
    /// Any text, quoted with escapes.
    Text(String),
    /// A boolean.
    Bool(bool),
}

impl<'a> Arbitrary<'a> for Value {
    fn arbitrary(u: &mut Unstructured<'a>) -> ArbResult<Self> {
        // Mostly plausible values, so that many inputs get past the parser into validation.
        Ok(match u.int_in_range(0u8..=23)? {
            0..=11 => Value::Plausible(u.arbitrary()?),
            12..=13 => Value::Small(u.arbitrary()?),
            14 => Value::Hundredths(u.arbitrary()?),
            15..=18 => Value::Special(u.arbitrary()?),
            19 => Value::Integer(u.arbitrary()?),
            20 => Value::Float(u.arbitrary()?),
            21 => Value::Word(u.arbitrary()?),
            22 => Value::Text(u.arbitrary()?),
            _ => Value::Bool(u.arbitrary()?),
        })
    }
}

/// A TOML basic string with every character that needs it escaped.
pub fn quote(s: &str) -> String {
    let mut out = String::with_capacity(s.len() + 2);
    out.push('"');
    for c in s.chars() {
        match c {
            '"' => out.push_str("\\\""),
            '\\' => out.push_str("\\\\"),
            '\n' => out.push_str("\\n"),
            '\t' => out.push_str("\\t"),
            '\r' => out.push_str("\\r"),
            c if (c as u32) < 0x20 || c as u32 == 0x7f => {
                let _ = write!(out, "\\u{:04X}", c as u32);
            }
            c => out.push(c),
        }
    }
    out.push('"');
    out
}

/// A float in TOML spelling.
pub fn float(x: f64) -> String {
    if x.is_nan() {
        if x.is_sign_negative() {
            "-nan".into()
        } else {
            "nan".into()
        }
    } else if x.is_infinite() {
        if x > 0.0 { "inf".into() } else { "-inf".into() }
    } else {
        format!("{x:?}")
    }
}

impl Value {
    fn text(&self, kind: Kind) -> String {
        match self {
            Value::Plausible(n) => {
                let n = *n;
                match kind {
                    Kind::Count(low, span) => (low + u32::from(n) % span.max(1)).to_string(),
                    Kind::Real => float((f64::from(n) + 1.0) / 8.0),
                    Kind::Probability => float(f64::from(n) / 255.0),
                    Kind::Word(words) => {
                        let w = words[n as usize % words.len()];
                        if w.bytes().all(|b| b.is_ascii_digit()) {
                            w.to_owned()
                        } else {
                            quote(w)
                        }
                    }
                    Kind::Text => quote(&format!("s{n}")),
                    Kind::Bool => (n % 2 == 0).to_string(),
                    Kind::Multiple => float(1.0 + f64::from(n) / 32.0),
                    Kind::OpenUnit => float((f64::from(n) + 1.0) / 257.0),
                    Kind::ShockName(i) => quote(&format!("s{i}")),
                }
            }
            Value::Small(n) => n.to_string(),
            Value::Hundredths(n) => float(f64::from(*n) / 100.0),
            Value::Special(i) => SPECIAL_NUMBERS[*i as usize % SPECIAL_NUMBERS.len()].to_owned(),
            Value::Integer(n) => n.to_string(),
            Value::Float(x) => float(*x),
            Value::Word(i) => quote(WORDS[*i as usize % WORDS.len()]),
            Value::Text(s) => quote(s),
            Value::Bool(b) => b.to_string(),
        }
    }
}

/// A field that is present when the first byte is below `P` (out of 256): optional fields are
/// mostly left out, so that the present ones decide whether the scenario validates.
#[derive(Debug)]
pub struct Maybe<T, const P: u8>(pub Option<T>);

impl<'a, T: Arbitrary<'a>, const P: u8> Arbitrary<'a> for Maybe<T, P> {
    fn arbitrary(u: &mut Unstructured<'a>) -> ArbResult<Self> {
        let present = u.arbitrary::<u8>()? < P;
        Ok(Maybe(if present { Some(u.arbitrary()?) } else { None }))
    }
}

/// A field that is present when the first byte is above 255 - `P`, so that an input that runs out of
/// bytes (the rest read as zeros) leaves it out, where `Maybe` would write it.
#[derive(Debug)]
pub struct Seldom<T, const P: u8>(pub Option<T>);

impl<'a, T: Arbitrary<'a>, const P: u8> Arbitrary<'a> for Seldom<T, P> {
    fn arbitrary(u: &mut Unstructured<'a>) -> ArbResult<Self> {
        let present = u.arbitrary::<u8>()? > 255 - P;
        Ok(Seldom(if present { Some(u.arbitrary()?) } else { None }))
    }
}

/// A field that is usually present (the required ones).
pub type Usual<T> = Maybe<T, 250>;
/// A field that is usually left out.
pub type Rare<T> = Maybe<T, 64>;

/// A distribution: a bare value or a `{ kind = ..., ... }` table.
#[derive(Debug, Arbitrary)]
pub enum Dist {
    /// `= value`.
    Bare(Value),
    /// `= { kind = "...", <its parameters> }`.
    Proper {
        /// Which kind.
        kind: u8,
        /// First parameter.
        a: Value,
        /// Second parameter.
        b: Value,
    },
    /// `= { kind = "...", name = value, ... }`.
    Table {
        /// Which kind, or an unknown one.
        kind: u8,
        /// Parameters, named from `PARAMS`.
        params: Vec<(u8, Value)>,
    },
}

impl Dist {
    fn text(&self, severity: bool) -> String {
        let value_kind = if severity { Kind::Probability } else { Kind::Real };
        match self {
            Dist::Bare(v) => v.text(value_kind),
            Dist::Proper { kind: which, a, b } => {
                let (name, p, q) = [
                    ("fixed", "value", ""),
                    ("uniform", "low", "high"),
                    ("lognormal", "mean", "cv"),
                    ("beta", "mean", "sd"),
                    ("gamma", "mean", "cv"),
                ][*which as usize % 5];
                let first = if name == "beta" { Kind::Probability } else { value_kind };
                let second = if name == "beta" { Kind::Probability } else { Kind::Real };
                let mut out = format!("{{ kind = \"{name}\", {p} = {}", a.text(first));
                if !q.is_empty() {
                    let _ = write!(out, ", {q} = {}", b.text(second));
                }
                out.push_str(" }");
                out
            }
            Dist::Table { kind, params } => {
                let kinds = ["fixed", "uniform", "lognormal", "beta", "gamma", "normal", ""];
                let mut out = format!("{{ kind = {}", quote(kinds[*kind as usize % kinds.len()]));
                for (name, v) in params.iter().take(6) {
                    let _ = write!(
                        out,
                        ", {} = {}",
                        PARAMS[*name as usize % PARAMS.len()],
                        v.text(value_kind)
                    );
                }
                out.push_str(" }");
                out
            }
        }
    }
}

/// A shock probability: a bare value or a group-size curve.
#[derive(Debug, Arbitrary)]
pub enum Probability {
    /// `= value`.
    Bare(Value),
    /// `= { curve = "...", name = value, ... }`.
    Curve {
        /// Which curve name.
        curve: u8,
        /// Parameters other than `values`.
        params: Vec<(u8, Value)>,
        /// Entries of a `values` table: keys are group sizes (or not), then values.
        table: Option<Vec<(TableKey, Value)>>,
    },
}

/// A key of a curve's `values` table.
#[derive(Debug, Arbitrary)]
pub enum TableKey {
    /// A group size.
    Size(u8),
    /// Any text.
    Text(String),
}

impl Probability {
    fn text(&self) -> String {
        match self {
            Probability::Bare(v) => v.text(Kind::Probability),
            Probability::Curve { curve, params, table } => {
                let curves = ["constant", "power", "power_plus_log", "table", "logistic"];
                let mut out = format!("{{ curve = {}", quote(curves[*curve as usize % curves.len()]));
                for (name, v) in params.iter().take(4) {
                    let name = PARAMS[*name as usize % PARAMS.len()];
                    if name != "values" {
                        let _ = write!(out, ", {name} = {}", v.text(Kind::Real));
                    }
                }
                if let Some(entries) = table {
                    let cells: Vec<String> = entries
                        .iter()
                        .take(16)
                        .map(|(key, v)| {
                            let key = match key {
                                TableKey::Size(n) => quote(&n.to_string()),
                                TableKey::Text(s) => quote(s),
                            };
                            format!("{key} = {}", v.text(Kind::Probability))
                        })
                        .collect();
                    let _ = write!(out, ", values = {{ {} }}", cells.join(", "));
                }
                out.push_str(" }");
                out
            }
        }
    }
}

/// One stress window: `from`, `to` and `probability`, each of which may be missing.
pub type StressSpec = (Usual<Value>, Usual<Value>, Usual<Value>);

/// One `[[shock]]` table; every field may be missing.
#[derive(Debug, Arbitrary)]
pub struct ShockSpec {
    name: Usual<Value>,
    scope: Usual<u8>,
    probability: Usual<Probability>,
    village_correlation: Rare<Value>,
    portfolio_correlation: Rare<Value>,
    reach: Rare<Value>,
    severity: Rare<Dist>,
    stress: Rare<Vec<StressSpec>>,
}

/// One `[sweep]` key with its list; `range` replaces the list by 1..=n (deep sweeps, and the empty
/// list at n = 0); no values at all make a list of one plausible value.
#[derive(Debug, Arbitrary)]
pub struct SweepAxis {
    key: u8,
    /// Whether a dotted path is written as a dotted key (`loan.growth`) rather than quoted.
    dotted: bool,
    values: Vec<Value>,
    range: Seldom<u16, 64>,
}

/// The `[behaviour]` table (strategic default); every field may be missing.
#[derive(Debug, Arbitrary)]
pub struct BehaviourSpec {
    loan_value: Usual<Value>,
    discount: Usual<Value>,
    temptation: Usual<Dist>,
    social_sanction: Rare<Value>,
}

/// The `[finance]` table; every field may be missing.
#[derive(Debug, Arbitrary)]
pub struct FinanceSpec {
    cycles_per_year: Maybe<Value, 160>,
    currency: Maybe<Value, 96>,
    operating_cost: Maybe<Value, 128>,
    cost_of_funds: Maybe<Value, 128>,
    fee_rate: Maybe<Value, 128>,
}

/// Tables a file may write as a plain value instead (`finance = 3`), a type error the parser must
/// report in one line.
const TABLE_NAMES: &[&str] = &[
    "behaviour",
    "finance",
    "policy",
    "loan",
    "pool",
    "portfolio",
    "borrowers",
    "sweep",
];

/// A whole scenario file, field by field; every field may be missing or of any type.
#[derive(Debug, Arbitrary)]
pub struct ScenarioSpec {
    name: Rare<Value>,
    seed: Rare<Value>,
    replications: Usual<Value>,
    cycles: Usual<Value>,
    warmup_cycles: Rare<Value>,
    borrowers: Usual<Value>,
    villages: Rare<Value>,
    principal: Usual<Value>,
    interest_rate: Rare<Value>,
    recovery_rate: Rare<Value>,
    loan_growth: Rare<Value>,
    max_multiple: Rare<Value>,
    income: Rare<Dist>,
    risk: Rare<Dist>,
    income_growth: Rare<Value>,
    shocks: Vec<ShockSpec>,
    /// Extra copies of the first shock, renamed, to reach the limit on the number of shocks.
    shock_copies: Maybe<u16, 8>,
    group_size: Rare<Value>,
    liability: Rare<Value>,
    peer_cover: Rare<Value>,
    exclusion_cycles: Rare<Value>,
    exclusion_scope: Rare<Value>,
    formation: Rare<Value>,
    matching: Rare<Value>,
    min_group_size: Rare<Value>,
    max_group_size: Rare<Value>,
    size_slack: Rare<Value>,
    dropout: Rare<Value>,
    replace_departures: Rare<Value>,
    behaviour: Maybe<BehaviourSpec, 80>,
    finance: Maybe<FinanceSpec, 80>,
    /// A table written as a plain value at the top of the file (see `TABLE_NAMES`).
    table_as_value: Seldom<(u8, Value), 8>,
    sweep: Rare<Vec<SweepAxis>>,
    /// A line written verbatim at the end (unknown fields, stray syntax).
    extra: Maybe<String, 16>,
}

fn field<const P: u8>(out: &mut String, name: &str, v: &Maybe<Value, P>, kind: Kind) {
    if let Some(v) = &v.0 {
        let _ = writeln!(out, "{name} = {}", v.text(kind));
    }
}

/// The kind of each field a sweep list may name, which its values share: a `[policy]` field by its
/// bare name or its path, any other field by its path.
fn field_kind(key: &str) -> Kind {
    match key.strip_prefix("policy.").unwrap_or(key) {
        "group_size" => Kind::Count(1, 6),
        "min_group_size" => Kind::Count(1, 6),
        "max_group_size" => Kind::Count(1, 8),
        "size_slack" => Kind::Count(0, 3),
        "liability" => Kind::Word(LIABILITY_WORDS),
        "exclusion_cycles" => Kind::Word(EXCLUSION_WORDS),
        "exclusion_scope" => Kind::Word(SCOPE_WORDS),
        "formation" => Kind::Word(FORMATION_WORDS),
        "matching" => Kind::Word(MATCHING_WORDS),
        "loan.principal" | "borrowers.income" | "borrowers.risk" | "behaviour.temptation" => Kind::Real,
        "behaviour.loan_value" | "behaviour.social_sanction" | "finance.operating_cost" => Kind::Real,
        "loan.max_multiple" => Kind::Multiple,
        "behaviour.discount" => Kind::OpenUnit,
        "pool.replace_departures" => Kind::Bool,
        "finance.cycles_per_year" => Kind::Count(1, 3),
        "cycles" | "seed" => Kind::Count(1, 6),
        // Shares, probabilities, rates, growth rates and the discount factor.
        _ => Kind::Probability,
    }
}

impl ScenarioSpec {
    /// The TOML text of the file.
    pub fn to_toml(&self) -> String {
        let mut out = String::new();
        field(&mut out, "name", &self.name, Kind::Text);
        field(&mut out, "seed", &self.seed, Kind::Count(0, 256));
        field(&mut out, "replications", &self.replications, Kind::Count(1, 4));
        field(&mut out, "cycles", &self.cycles, Kind::Count(1, 6));
        field(&mut out, "warmup_cycles", &self.warmup_cycles, Kind::Count(0, 3));
        if let Some((table, v)) = &self.table_as_value.0 {
            let name = TABLE_NAMES[*table as usize % TABLE_NAMES.len()];
            let _ = writeln!(out, "{name} = {}", v.text(Kind::Real));
        }
        out.push_str("[portfolio]\n");
        field(&mut out, "borrowers", &self.borrowers, Kind::Count(6, 250));
        field(&mut out, "villages", &self.villages, Kind::Count(1, 4));
        out.push_str("[loan]\n");
        field(&mut out, "principal", &self.principal, Kind::Real);
        field(&mut out, "interest_rate", &self.interest_rate, Kind::Probability);
        field(&mut out, "recovery_rate", &self.recovery_rate, Kind::Probability);
        field(&mut out, "growth", &self.loan_growth, field_kind("loan.growth"));
        field(
            &mut out,
            "max_multiple",
            &self.max_multiple,
            field_kind("loan.max_multiple"),
        );
        if self.income.0.is_some() || self.risk.0.is_some() || self.income_growth.0.is_some() {
            out.push_str("[borrowers]\n");
            if let Some(d) = &self.income.0 {
                let _ = writeln!(out, "income = {}", d.text(false));
            }
            if let Some(d) = &self.risk.0 {
                let _ = writeln!(out, "risk = {}", d.text(false));
            }
            field(
                &mut out,
                "income_growth",
                &self.income_growth,
                field_kind("borrowers.income_growth"),
            );
        }
        for (i, shock) in self.shocks.iter().take(8).enumerate() {
            shock.write(&mut out, i, None);
        }
        if let (Some(first), Some(copies)) = (self.shocks.first(), self.shock_copies.0) {
            for i in 0..copies.min(300) {
                first.write(&mut out, 0, Some(i));
            }
        }
        out.push_str("[policy]\n");
        for (name, v) in [
            ("group_size", &self.group_size),
            ("liability", &self.liability),
            ("peer_cover", &self.peer_cover),
            ("exclusion_cycles", &self.exclusion_cycles),
            ("exclusion_scope", &self.exclusion_scope),
            ("formation", &self.formation),
            ("matching", &self.matching),
            ("min_group_size", &self.min_group_size),
            ("max_group_size", &self.max_group_size),
            ("size_slack", &self.size_slack),
        ] {
            field(&mut out, name, v, field_kind(name));
        }
        out.push_str("[pool]\n");
        field(&mut out, "dropout", &self.dropout, Kind::Probability);
        field(&mut out, "replace_departures", &self.replace_departures, Kind::Bool);
        if let Some(b) = &self.behaviour.0 {
            out.push_str("[behaviour]\n");
            field(&mut out, "loan_value", &b.loan_value, Kind::Real);
            field(&mut out, "discount", &b.discount, field_kind("behaviour.discount"));
            if let Some(d) = &b.temptation.0 {
                let _ = writeln!(out, "temptation = {}", d.text(false));
            }
            field(&mut out, "social_sanction", &b.social_sanction, Kind::Real);
        }
        if let Some(f) = &self.finance.0 {
            out.push_str("[finance]\n");
            field(&mut out, "cycles_per_year", &f.cycles_per_year, Kind::Count(1, 3));
            field(&mut out, "currency", &f.currency, Kind::Word(CURRENCY_WORDS));
            field(&mut out, "operating_cost", &f.operating_cost, Kind::Real);
            field(&mut out, "cost_of_funds", &f.cost_of_funds, Kind::Probability);
            field(&mut out, "fee_rate", &f.fee_rate, Kind::Probability);
        }
        if let Some(axes) = &self.sweep.0 {
            out.push_str("[sweep]\n");
            let mut seen = Vec::new();
            for axis in axes.iter().take(8) {
                let key = SWEEP_KEYS[axis.key as usize % SWEEP_KEYS.len()];
                if seen.contains(&key) {
                    continue; // a repeated key is a TOML error; one case is enough
                }
                seen.push(key);
                let list = match axis.range.0 {
                    Some(n) => (1..=u32::from(n)).map(|i| i.to_string()).collect::<Vec<_>>(),
                    None if axis.values.is_empty() => vec![Value::Plausible(axis.key).text(field_kind(key))],
                    None => axis.values.iter().take(64).map(|v| v.text(field_kind(key))).collect(),
                };
                let written = if axis.dotted && key.split('.').all(|k| !quote_key(k).starts_with('"')) {
                    key.to_owned()
                } else {
                    quote_key(key)
                };
                let _ = writeln!(out, "{written} = [{}]", list.join(", "));
            }
        }
        if let Some(extra) = &self.extra.0 {
            out.push_str(extra);
            out.push('\n');
        }
        out
    }
}

fn quote_key(key: &str) -> String {
    if key.bytes().all(|b| b.is_ascii_alphanumeric() || b == b'_') {
        key.to_owned()
    } else {
        quote(key)
    }
}

impl ShockSpec {
    /// Writes the `[[shock]]` table of the shock at `index`, or a renamed copy of it.
    fn write(&self, out: &mut String, index: usize, copy: Option<u16>) {
        out.push_str("[[shock]]\n");
        match copy {
            Some(i) => {
                let _ = writeln!(out, "name = \"copy {i}\"");
            }
            None => field(out, "name", &self.name, Kind::ShockName(index)),
        }
        if let Some(scope) = self.scope.0 {
            let scopes = ["member", "group", "village", "portfolio", "household"];
            let _ = writeln!(out, "scope = {}", quote(scopes[scope as usize % scopes.len()]));
        }
        if let Some(p) = &self.probability.0 {
            let _ = writeln!(out, "probability = {}", p.text());
        }
        field(out, "village_correlation", &self.village_correlation, Kind::Probability);
        field(
            out,
            "portfolio_correlation",
            &self.portfolio_correlation,
            Kind::Probability,
        );
        field(out, "reach", &self.reach, Kind::Probability);
        if let Some(d) = &self.severity.0 {
            let _ = writeln!(out, "severity = {}", d.text(true));
        }
        if let Some(windows) = &self.stress.0 {
            let cells: Vec<String> = windows
                .iter()
                .take(8)
                .map(|(from, to, p)| {
                    let parts: Vec<String> = [
                        ("from", from, Kind::Count(1, 6)),
                        ("to", to, Kind::Count(1, 6)),
                        ("probability", p, Kind::Probability),
                    ]
                    .iter()
                    .filter_map(|(n, v, kind)| v.0.as_ref().map(|v| format!("{n} = {}", v.text(*kind))))
                    .collect();
                    format!("{{ {} }}", parts.join(", "))
                })
                .collect();
            let _ = writeln!(out, "stress = [{}]", cells.join(", "));
        }
    }
}
