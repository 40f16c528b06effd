//! Loan books written from the engine (`run --loan-book`): they book every loan as the settlement
//! does, draw each arm's villages independently, change no other output of the run, and a book
//! simulated from a known curve and correlation is fitted back to them.

use loancycle::engine::book::{LoanBookSink, LoanRecord};
use loancycle::engine::simulate_replication_with_book;
use loancycle::fit::model::{CurveKind, Form};
use loancycle::fit::{FitOptions, fit_book, read_loan_book_str};
use loancycle::loanbook::{self, HEADER};
use loancycle::scenario::Scenario;
use loancycle::stats::tolerance::Z_95;
use std::collections::BTreeMap;
use std::path::Path;
use std::process::Command;

/// An invented lender with peer cover, exclusion, dropout and random incomes: every booking rule
/// of the settlement is exercised.
const BOOKING: &str = r#"
    name = "Fernhill Mutual Circle: booking check"
    seed = 515
    replications = 3
    cycles = 6
    warmup_cycles = 2
    [portfolio]
    borrowers = 300
    villages = 6
    [loan]
    principal = 100
    interest_rate = 0.1
    [borrowers]
    income = { kind = "lognormal", mean = 1.25, cv = 0.25 }
    [[shock]]
    name = "illness"
    scope = "member"
    probability = 0.15
    village_correlation = 0.1
    severity = { kind = "uniform", low = 0.2, high = 0.9 }
    [policy]
    peer_cover = 0.5
    exclusion_cycles = 1
    [pool]
    dropout = 0.05
    [sweep]
    group_size = [3, 5]
    liability = ["joint", "individual"]
"#;

/// Collects the loans in memory (a test-sized book).
#[derive(Default)]
struct Loans(Vec<LoanRecord>);

impl LoanBookSink for Loans {
    fn loan(&mut self, loan: &LoanRecord) {
        self.0.push(*loan);
    }
}

fn scenario(text: &str) -> Scenario {
    Scenario::from_toml_str(text, "inline.toml").unwrap_or_else(|e| panic!("{e}"))
}

fn book_text(s: &Scenario) -> String {
    let mut bytes = Vec::new();
    loanbook::write_loan_book(s, &mut bytes, &|| false).unwrap();
    String::from_utf8(bytes).unwrap()
}

#[test]
fn every_loan_is_booked_as_the_settlement_tallies_it() {
    let s = scenario(BOOKING);
    for arm in 0..s.arms().len() {
        let mut loans = Loans::default();
        let tally = simulate_replication_with_book(&s, arm, &mut loans);
        let loans = loans.0;
        assert_eq!(loans.len() as u64, tally.member_loans, "arm {arm}: one row per loan");
        assert!(loans.iter().all(|l| l.cycle > s.warmup_cycles()), "counted cycles only");
        let due: f64 = loans.iter().map(|l| l.due).sum();
        let paid: f64 = loans.iter().map(|l| l.paid).sum();
        assert!(
            (due - tally.due).abs() <= 1e-9 * tally.due,
            "arm {arm}: due {due} vs {}",
            tally.due
        );
        assert!(
            (paid - tally.collected).abs() <= 1e-9 * tally.due,
            "arm {arm}: the loans' payments {paid} must sum to the collections {}",
            tally.collected
        );
        assert!(loans.iter().all(|l| l.own_paid <= l.paid && l.paid <= l.due));
        let short = loans.iter().filter(|l| l.own_paid < l.due).count() as u64;
        assert_eq!(short, tally.member_shortfalls, "arm {arm}");
        // a group is booked as defaulted exactly when the engine says it did not repay
        let mut groups: BTreeMap<(u32, u32, u32), (f64, f64)> = BTreeMap::new();
        for l in &loans {
            let g = groups.entry((l.cycle, l.village, l.group)).or_default();
            g.0 += l.due;
            g.1 += l.paid;
        }
        let repaid = groups.values().filter(|(d, p)| p >= &(d - 1e-6)).count() as u64;
        assert_eq!(groups.len() as u64, tally.group_cycles, "arm {arm}");
        assert_eq!(repaid, tally.groups_repaid, "arm {arm}");
        if s.arms()[arm].policy().peer_cover() > 0.0 && arm % 2 == 0 {
            assert!(tally.groups_rescued > 0, "joint arms must show some cover");
        }
    }
}

#[test]
fn arms_draw_independent_villages_and_the_book_is_reproducible() {
    // Two arms that differ only in the recovery rate, which no draw and no row depends on: under
    // the run's common random numbers their books would be identical; keyed by the arm they differ.
    let text = BOOKING.replace(
        "group_size = [3, 5]\n    liability = [\"joint\", \"individual\"]",
        "\"loan.recovery_rate\" = [0.1, 0.3]",
    );
    let s = scenario(&text);
    assert_eq!(s.arms().len(), 2);
    let book = book_text(&s);
    let rows: Vec<&str> = book.lines().skip(1).collect();
    let strip = |arm: &str| -> Vec<String> {
        rows.iter()
            .filter(|r| r.contains(&format!(",{arm}-v")))
            .map(|r| r.replace(&format!("{arm}-"), ""))
            .collect()
    };
    let (first, second) = (strip("a1"), strip("a2"));
    assert!(!first.is_empty() && !second.is_empty());
    assert_ne!(first, second, "the arms' villages must be drawn independently");
    assert_eq!(book, book_text(&s), "the same scenario writes the same book");
}

#[test]
fn the_book_is_in_the_fit_format_and_reads_back() {
    let s = scenario(BOOKING);
    let text = book_text(&s);
    assert_eq!(text.lines().next(), Some(HEADER));
    let book = read_loan_book_str(&text, "book.csv", false).unwrap_or_else(|e| panic!("{e}"));
    let loans: u64 = (0..s.arms().len())
        .map(|a| simulate_replication_with_book(&s, a, &mut Loans::default()).member_loans)
        .sum();
    assert_eq!(book.loans, loans);
    assert_eq!(book.rows_skipped, 0);
    // 4 arms x 6 villages, each under its own id
    assert_eq!(book.villages.len(), 24);
    assert!(book.villages.iter().any(|v| v == "a3-v6"));
    // every row carries own_paid, so outcomes are judged without cover
    assert_eq!(book.groups_with_own_paid, book.groups.len() as u64);
}

/// The fit's true model: one member-scope shock whose probability is the power curve, correlated
/// within villages only, that empties a member's capacity when it hits; fixed incomes and risk, no
/// cover. A group then repays iff no member is hit, the clustered model the fit assumes.
const TRUE_P: f64 = 1.6;
const TRUE_RHO: f64 = 0.2;
const ROUND_TRIP: &str = r#"
    name = "Quarry Lane Women's Fund: round trip"
    seed = 7
    replications = 1
    cycles = 6
    [portfolio]
    borrowers = 720
    villages = 15
    [loan]
    principal = 100
    interest_rate = 0.1
    [borrowers]
    income = 1.5
    [[shock]]
    name = "business_failure"
    scope = "member"
    probability = { curve = "power", p = 1.6 }
    village_correlation = 0.2
    portfolio_correlation = 0.0
    severity = 1.0
    [policy]
    peer_cover = 0.0
    [sweep]
    group_size = [3, 4, 5, 6]
"#;

#[test]
fn a_simulated_book_gives_back_its_curve_and_correlation() {
    // 4 sizes x 15 villages x 6 cycles = 360 village-cycles of 8 to 16 groups: the sample size at
    // which the fit's 95% intervals covered the truth in 95% of simulated books (README, "Calibration
    // from a loan book"). One seeded book must hold the truth inside its 95% intervals.
    let s = scenario(ROUND_TRIP);
    let text = book_text(&s);
    let book = read_loan_book_str(&text, "simulated.csv", false).unwrap();
    assert_eq!(book.village_cycles.len(), 360);
    let report = fit_book(
        &book,
        &FitOptions {
            resamples: 500,
            seed: 3,
            threads: None,
        },
    )
    .unwrap();
    let fit = |form| {
        report
            .curves
            .iter()
            .find(|c| c.curve == CurveKind::Power && c.form == form)
            .unwrap()
    };
    let clustered = fit(Form::Clustered);
    let (p, rho) = (clustered.params["p"], clustered.params["rho"]);
    let (se_p, se_rho) = (clustered.std_errors["p"].unwrap(), clustered.std_errors["rho"].unwrap());
    eprintln!("clustered p {p} (se {se_p}), rho {rho} (se {se_rho})");
    assert!((p - TRUE_P).abs() <= Z_95 * se_p, "p {p} +- {se_p} vs {TRUE_P}");
    assert!(
        (rho - TRUE_RHO).abs() <= Z_95 * se_rho,
        "rho {rho} +- {se_rho} vs {TRUE_RHO}"
    );
    // Ignoring the correlation misstates phi: correlated failures bunch in the same village-cycles,
    // which leaves more groups with nobody failing than independence allows, so the independent fit
    // reads a smaller phi (a larger p) at every size.
    let independent = fit(Form::Independent);
    let (p_ind, se_ind) = (independent.params["p"], independent.std_errors["p"].unwrap());
    eprintln!("independent p {p_ind} (se {se_ind})");
    assert!(p_ind > p, "independent p {p_ind}");
    assert!(
        p_ind - TRUE_P > Z_95 * se_ind,
        "the independent 95% interval should miss the truth: {p_ind} +- {se_ind}"
    );
    let power_bias: Vec<f64> = report
        .independent_bias
        .iter()
        .filter(|b| b.curve == CurveKind::Power)
        .flat_map(|b| b.relative_by_size.values().copied())
        .collect();
    eprintln!("independent bias {power_bias:?}");
    assert!(
        !power_bias.is_empty() && power_bias.iter().all(|&b| b < 0.0),
        "{power_bias:?}"
    );
}

fn loancycle_in(dir: &Path, args: &[&str]) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_loancycle"))
        .args(args)
        .current_dir(dir)
        .output()
        .expect("the loancycle binary starts")
}

/// The files of a directory (not its subdirectories) by name.
fn files(dir: &Path) -> BTreeMap<String, Vec<u8>> {
    std::fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().path())
        .filter(|p| p.is_file())
        .map(|p| {
            (
                p.file_name().unwrap().to_string_lossy().into_owned(),
                std::fs::read(&p).unwrap(),
            )
        })
        .collect()
}

/// Every entry of a directory by name, sorted.
fn names(dir: &Path) -> Vec<String> {
    let mut names: Vec<String> = std::fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    names.sort();
    names
}

#[test]
fn writing_a_book_changes_no_other_output() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    std::fs::write(d.join("s.toml"), BOOKING).unwrap();
    let plain = loancycle_in(d, &["run", "s.toml", "--out", "plain", "--quiet", "--threads", "2"]);
    assert_eq!(plain.status.code(), Some(0), "{plain:?}");
    let with = loancycle_in(
        d,
        &[
            "run",
            "s.toml",
            "--out",
            "with",
            "--quiet",
            "--threads",
            "1",
            "--loan-book",
            "book.csv",
        ],
    );
    assert_eq!(with.status.code(), Some(0), "{with:?}");
    assert_eq!(
        files(&d.join("plain")),
        files(&d.join("with")),
        "results must be byte-identical"
    );
    let book = std::fs::read_to_string(d.join("book.csv")).unwrap();
    let s = scenario(BOOKING);
    assert_eq!(
        book,
        book_text(&s),
        "the command writes the library's book, for any thread count"
    );
    // nothing but the results, the scenario and the book: no temporary file is left behind
    assert_eq!(names(d), ["book.csv", "plain", "s.toml", "with"]);
    assert!(!files(&d.join("plain")).is_empty());
    // the book fits
    let fitted = loancycle_in(d, &["fit", "book.csv", "--out", "fit", "--quiet", "--resamples", "500"]);
    assert_eq!(fitted.status.code(), Some(0), "{fitted:?}");
}

#[test]
fn a_bad_destination_is_refused_before_any_work() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    std::fs::write(d.join("s.toml"), BOOKING).unwrap();
    std::fs::write(d.join("old.csv"), "kept").unwrap();
    for (book, needle) in [
        ("old.csv", "exists; use --force"),
        ("missing/book.csv", "directory does not exist"),
        (".", "is a directory"),
    ] {
        let out = loancycle_in(d, &["run", "s.toml", "--out", "r", "--quiet", "--loan-book", book]);
        let stderr = String::from_utf8(out.stderr).unwrap();
        assert_eq!(out.status.code(), Some(2), "{book}: {stderr}");
        assert_eq!(stderr.lines().count(), 1, "{stderr}");
        assert!(stderr.contains(needle) && stderr.contains("--loan-book"), "{stderr}");
        assert!(!d.join("r").exists(), "{book}: nothing may be written");
    }
    assert_eq!(std::fs::read_to_string(d.join("old.csv")).unwrap(), "kept");
    let forced = loancycle_in(
        d,
        &[
            "run",
            "s.toml",
            "--out",
            "r",
            "--quiet",
            "--force",
            "--loan-book",
            "old.csv",
        ],
    );
    assert_eq!(forced.status.code(), Some(0), "{forced:?}");
    assert!(std::fs::read_to_string(d.join("old.csv")).unwrap().starts_with(HEADER));
}
