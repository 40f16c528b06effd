//! Scenario files through the public API: valid fixtures load with the values written (and the
//! documented defaults), and every invalid fixture is refused with a message naming the file, the
//! field, the value and what is allowed.
//!
//! Each file in `tests/data/bad/` starts with comment lines stating the error it must produce, so
//! the command-line tests can reuse the same fixtures:
//! `# expect-field:`, `# expect-value:` (exact) and `# expect-allowed:` (a fragment) for a value
//! outside what is allowed, or `# expect-location:` and `# expect-message:` (fragments) for a syntax,
//! type, unknown-field or missing-field error.

use loancycle::scenario::{
    Exclusion, ExclusionScope, Formation, Liability, Matching, Scenario, ScenarioError, ShockProbability, ShockScope,
};
use std::path::{Path, PathBuf};

fn data(dir: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/data").join(dir)
}

fn toml_files(dir: &str) -> Vec<PathBuf> {
    let mut files: Vec<PathBuf> = std::fs::read_dir(data(dir))
        .unwrap_or_else(|e| panic!("cannot list tests/data/{dir}: {e}"))
        .map(|entry| entry.expect("directory entry").path())
        .filter(|p| p.extension().is_some_and(|e| e == "toml"))
        .collect();
    files.sort();
    files
}

fn load(dir: &str, name: &str) -> Scenario {
    let path = data(dir).join(name);
    Scenario::load(&path).unwrap_or_else(|e| panic!("{e}")).0
}

/// The `# expect-KEY: value` header lines of a bad fixture.
fn expectations(text: &str) -> Vec<(String, String)> {
    text.lines()
        .filter_map(|line| line.strip_prefix("# expect-"))
        .filter_map(|rest| rest.split_once(": "))
        .map(|(k, v)| (k.to_owned(), v.to_owned()))
        .collect()
}

fn expected<'a>(all: &'a [(String, String)], key: &str, file: &Path) -> &'a str {
    all.iter()
        .find(|(k, _)| k == key)
        .map(|(_, v)| v.as_str())
        .unwrap_or_else(|| panic!("{}: no `# expect-{key}:` line", file.display()))
}

#[test]
fn every_bad_fixture_is_refused_with_its_expected_message() {
    let files = toml_files("bad");
    assert!(files.len() >= 40, "only {} bad fixtures found", files.len());
    for file in files {
        let text = std::fs::read_to_string(&file).unwrap();
        let wanted = expectations(&text);
        let err = match Scenario::load(&file) {
            Ok(_) => panic!("{} was accepted", file.display()),
            Err(e) => e,
        };
        let message = err.to_string();
        assert!(message.starts_with(&format!("{}: ", file.display())), "{message}");
        assert!(!message.contains('\n'), "{message}");
        for (_, fragment) in &wanted {
            assert!(
                message.contains(fragment.as_str()),
                "{}: {message:?} lacks {fragment:?}",
                file.display()
            );
        }
        match &err {
            ScenarioError::Invalid {
                field, value, allowed, ..
            } => {
                assert_eq!(field, expected(&wanted, "field", &file), "{message}");
                assert_eq!(value, expected(&wanted, "value", &file), "{message}");
                assert!(allowed.contains(expected(&wanted, "allowed", &file)), "{message}");
            }
            ScenarioError::Syntax {
                location,
                message: text,
                ..
            } => {
                assert!(location.contains(expected(&wanted, "location", &file)), "{message}");
                assert!(text.contains(expected(&wanted, "message", &file)), "{message}");
            }
            ScenarioError::Unreadable { .. } => panic!("{message}"),
        }
    }
}

#[test]
fn invalid_value_message_has_the_documented_shape() {
    let path = data("bad").join("probability_above_one.toml");
    let err = Scenario::load(&path).expect_err("refused");
    assert_eq!(
        err.to_string(),
        format!(
            "{}: shock[0].probability = 1.5 is not allowed: a probability in [0, 1]",
            path.display()
        )
    );
}

#[test]
fn unreadable_file_is_reported() {
    let path = data("bad").join("no_such_file.toml");
    match Scenario::load(&path) {
        Err(ScenarioError::Unreadable { file, .. }) => assert_eq!(file, path.display().to_string()),
        other => panic!("unexpected {other:?}"),
    }
}

#[test]
fn every_valid_fixture_loads() {
    let files = toml_files("scenarios");
    assert!(files.len() >= 3);
    for file in files {
        let (scenario, text) = Scenario::load(&file).unwrap_or_else(|e| panic!("{e}"));
        assert!(!text.is_empty());
        assert!(!scenario.arms.is_empty());
    }
}

#[test]
fn minimal_fixture_takes_the_defaults() {
    let s = load("scenarios", "minimal.toml");
    assert_eq!((s.replications, s.cycles, s.warmup_cycles, s.seed), (50, 12, 0, 0));
    assert_eq!((s.borrowers, s.villages), (300, 1));
    assert_eq!((s.principal, s.interest_rate, s.recovery_rate), (100.0, 0.0, 0.0));
    assert_eq!(s.amount_due(), 100.0);
    assert_eq!((s.income.fixed_value(), s.risk.fixed_value()), (Some(1.0), Some(1.0)));
    assert!(s.shocks.is_empty());
    assert_eq!((s.dropout, s.replace_departures), (0.0, true));
    assert_eq!(s.arms.len(), 1);
    assert_eq!(s.arms[0].label, "base");
    let p = &s.arms[0].policy;
    assert_eq!(p.group_size, 5);
    assert_eq!(p.liability, Liability::Joint);
    assert_eq!(p.peer_cover, 0.0);
    assert_eq!(p.exclusion_cycles, Exclusion::Cycles(0));
    assert_eq!(p.exclusion_scope, ExclusionScope::Group);
    assert_eq!(p.formation, Formation::Reshuffle);
    assert_eq!(p.matching, Matching::Random);
}

#[test]
fn full_fixture_reads_every_field() {
    let s = load("scenarios", "full.toml");
    assert_eq!(s.name, "full example: two-season programme");
    assert_eq!(
        (s.seed, s.replications, s.cycles, s.warmup_cycles),
        (20240611, 400, 24, 4)
    );
    assert_eq!(s.total_cycles(), 28);
    assert_eq!((s.borrowers, s.villages), (1200, 30));
    assert_eq!((s.principal, s.interest_rate, s.recovery_rate), (150.0, 0.08, 0.25));
    assert_eq!((s.income.kind_name(), s.income.mean()), ("lognormal", 1.4));
    assert_eq!((s.risk.kind_name(), s.risk.mean()), ("gamma", 1.0));

    let names: Vec<&str> = s.shocks.iter().map(|x| x.name.as_str()).collect();
    assert_eq!(names, ["illness", "crop_loss", "theft", "price_slump"]);
    let scopes: Vec<ShockScope> = s.shocks.iter().map(|x| x.scope).collect();
    assert_eq!(
        scopes,
        [
            ShockScope::Member,
            ShockScope::Village,
            ShockScope::Group,
            ShockScope::Portfolio
        ]
    );

    let illness = &s.shocks[0];
    assert!(matches!(&illness.probability, ShockProbability::Curve(c) if c.kind_name() == "power_plus_log"));
    assert_eq!(
        (
            illness.village_correlation,
            illness.portfolio_correlation,
            illness.reach
        ),
        (0.1, 0.05, 1.0)
    );
    assert_eq!(illness.severity.kind_name(), "beta");

    let crop = &s.shocks[1];
    assert_eq!(crop.probability, ShockProbability::Fixed(0.04));
    assert_eq!(
        (crop.village_correlation, crop.portfolio_correlation, crop.reach),
        (0.0, 0.0, 0.7)
    );
    assert_eq!(crop.severity.support(), (0.3, 0.9));
    // Windows come back sorted by their first cycle.
    let windows: Vec<(u32, u32, f64)> = crop.stress.iter().map(|w| (w.from, w.to, w.probability)).collect();
    assert_eq!(windows, [(10, 11, 0.2), (20, 22, 0.3)]);
    assert_eq!(crop.probability_in_cycle(11, 6), 0.2);
    assert_eq!(crop.probability_in_cycle(12, 6), 0.04);

    assert_eq!(s.shocks[2].severity.fixed_value(), Some(0.5));
    assert_eq!(s.shocks[3].severity.fixed_value(), Some(0.3));
    assert_eq!(s.shocks[3].reach, 0.4);

    assert_eq!(s.arms.len(), 1);
    let p = &s.arms[0].policy;
    assert_eq!(p.group_size, 6);
    assert_eq!(p.liability, Liability::Joint);
    assert_eq!(p.peer_cover, 0.5);
    assert_eq!(p.exclusion_cycles, Exclusion::Permanent);
    assert_eq!(p.exclusion_scope, ExclusionScope::Defaulters);
    assert_eq!(p.formation, Formation::Persistent);
    assert_eq!(p.matching, Matching::Assortative);
    assert_eq!((s.dropout, s.replace_departures), (0.02, false));
}

#[test]
fn sweep_fixture_resolves_arms_in_written_order() {
    let s = load("scenarios", "sweep.toml");
    assert_eq!(s.swept_fields, ["group_size", "exclusion_cycles"]);
    let labels: Vec<&str> = s.arms.iter().map(|a| a.label.as_str()).collect();
    assert_eq!(
        labels,
        [
            "group_size=2,exclusion_cycles=0",
            "group_size=2,exclusion_cycles=2",
            "group_size=2,exclusion_cycles=permanent",
            "group_size=4,exclusion_cycles=0",
            "group_size=4,exclusion_cycles=2",
            "group_size=4,exclusion_cycles=permanent",
            "group_size=5,exclusion_cycles=0",
            "group_size=5,exclusion_cycles=2",
            "group_size=5,exclusion_cycles=permanent",
        ]
    );
    // The [policy] group size (3) is swept over, so it is not an arm; unswept fields carry through.
    assert!(
        s.arms
            .iter()
            .all(|a| a.policy.group_size != 3 && a.policy.peer_cover == 0.25)
    );
    assert_eq!(s.arms[5].policy.group_size, 4);
    assert_eq!(s.arms[5].policy.exclusion_cycles, Exclusion::Permanent);
    assert_eq!(s.arms[4].policy.exclusion_cycles, Exclusion::Cycles(2));
    for arm in &s.arms {
        let phi = s.shocks[0].probability.at(arm.policy.group_size);
        assert!((0.0..=1.0).contains(&phi));
    }
}

/// Replaces the right-hand side of each assignment, one at a time, with awkward values, and cuts the
/// file at every character: whatever comes back, nothing may panic.
#[test]
fn no_input_makes_the_parser_panic() {
    let awkward = [
        "-1",
        "0",
        "nan",
        "-inf",
        "1e308",
        "-0.0",
        "9223372036854775807",
        "-9223372036854775808",
        "\"\"",
        "\"permanent\"",
        "[]",
        "[nan]",
        "{}",
        "true",
        "1979-05-27",
        "{ kind = \"beta\", mean = 0.5, sd = 0 }",
        "{ curve = \"table\", values = {} }",
    ];
    for file in toml_files("scenarios") {
        let text = std::fs::read_to_string(&file).unwrap();
        let lines: Vec<&str> = text.lines().collect();
        for (i, line) in lines.iter().enumerate() {
            let Some((key, _)) = line.split_once(" = ") else {
                continue;
            };
            for value in awkward {
                let mut changed = lines.clone();
                let replaced = format!("{key} = {value}");
                changed[i] = &replaced;
                let _ = Scenario::from_toml_str(&changed.join("\n"), "mutated.toml");
            }
        }
        for (cut, _) in text.char_indices() {
            let _ = Scenario::from_toml_str(&text[..cut], "truncated.toml");
        }
    }
}
