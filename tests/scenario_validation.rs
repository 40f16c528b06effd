//! Scenario files through the public API: valid fixtures load with the values written (and the
//! documented defaults), and every invalid fixture is refused with a message naming the file, the
//! field, the value and what is allowed.
//!
//! Each file in `tests/data/bad/` starts with comment lines stating the error it must produce, so
//! the command-line tests can reuse the same fixtures:
//! `# expect-field:`, `# expect-value:` (exact), `# expect-allowed:` (a fragment) and
//! `# expect-line:` (exact) for a value outside what is allowed, or `# expect-location:` (with the
//! line) and `# expect-message:` (fragments) for a syntax, type, unknown-field or missing-field error.

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
                field,
                value,
                allowed,
                line,
                ..
            } => {
                assert_eq!(
                    line.map(|l| l.to_string()).as_deref(),
                    Some(expected(&wanted, "line", &file)),
                    "{message}"
                );
                assert!(
                    message.contains(&format!(": line {}, field {field}: ", expected(&wanted, "line", &file))),
                    "{message}"
                );
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
                assert!(
                    location.starts_with("line "),
                    "{}: no line in {message}",
                    file.display()
                );
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
            "{}: line 19, field shock[0].probability: 1.5 is not allowed: a probability in [0, 1]",
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
        assert!(!scenario.arms().is_empty());
    }
}

#[test]
fn minimal_fixture_takes_the_defaults() {
    let s = load("scenarios", "minimal.toml");
    assert_eq!(
        (s.replications(), s.cycles(), s.warmup_cycles(), s.seed()),
        (50, 12, 0, 0)
    );
    assert_eq!((s.borrowers(), s.villages()), (300, 1));
    assert_eq!(
        (
            s.arms()[0].principal(),
            s.arms()[0].interest_rate(),
            s.arms()[0].recovery_rate()
        ),
        (100.0, 0.0, 0.0)
    );
    assert_eq!(s.amount_due(), 100.0);
    assert_eq!(
        (s.arms()[0].income().fixed_value(), s.arms()[0].risk().fixed_value()),
        (Some(1.0), Some(1.0))
    );
    assert!(s.arms()[0].shocks().is_empty());
    assert_eq!((s.arms()[0].dropout(), s.arms()[0].replace_departures()), (0.0, true));
    assert_eq!(s.arms().len(), 1);
    assert_eq!(s.arms()[0].label(), "base");
    let p = &s.arms()[0].policy();
    assert_eq!(p.group_size(), 5);
    assert_eq!(p.liability(), Liability::Joint);
    assert_eq!(p.peer_cover(), 0.0);
    assert_eq!(p.exclusion_cycles(), Exclusion::Cycles(0));
    assert_eq!(p.exclusion_scope(), ExclusionScope::Group);
    assert_eq!(p.formation(), Formation::Reshuffle);
    assert_eq!(p.matching(), Matching::Random);
}

#[test]
fn full_fixture_reads_every_field() {
    let s = load("scenarios", "full.toml");
    assert_eq!(s.name(), "full example: two-season programme");
    assert_eq!(
        (s.seed(), s.replications(), s.cycles(), s.warmup_cycles()),
        (20240611, 400, 24, 4)
    );
    assert_eq!(s.total_cycles(), 28);
    assert_eq!((s.borrowers(), s.villages()), (1200, 30));
    assert_eq!(
        (
            s.arms()[0].principal(),
            s.arms()[0].interest_rate(),
            s.arms()[0].recovery_rate()
        ),
        (150.0, 0.08, 0.25)
    );
    assert_eq!(
        (s.arms()[0].income().kind_name(), s.arms()[0].income().mean()),
        ("lognormal", 1.4)
    );
    assert_eq!(
        (s.arms()[0].risk().kind_name(), s.arms()[0].risk().mean()),
        ("gamma", 1.0)
    );

    let names: Vec<&str> = s.arms()[0].shocks().iter().map(|x| x.name()).collect();
    assert_eq!(names, ["illness", "crop_loss", "theft", "price_slump"]);
    let scopes: Vec<ShockScope> = s.arms()[0].shocks().iter().map(|x| x.scope()).collect();
    assert_eq!(
        scopes,
        [
            ShockScope::Member,
            ShockScope::Village,
            ShockScope::Group,
            ShockScope::Portfolio
        ]
    );

    let illness = &s.arms()[0].shocks()[0];
    assert!(matches!(&illness.probability(), ShockProbability::Curve(c) if c.kind_name() == "power_plus_log"));
    assert_eq!(
        (
            illness.village_correlation(),
            illness.portfolio_correlation(),
            illness.reach()
        ),
        (0.1, 0.05, 1.0)
    );
    assert_eq!(illness.severity().kind_name(), "beta");

    let crop = &s.arms()[0].shocks()[1];
    assert_eq!(*crop.probability(), ShockProbability::Fixed(0.04));
    assert_eq!(
        (crop.village_correlation(), crop.portfolio_correlation(), crop.reach()),
        (0.0, 0.0, 0.7)
    );
    assert_eq!(crop.severity().support(), (0.3, 0.9));
    // Windows come back sorted by their first cycle.
    let windows: Vec<(u32, u32, f64)> = crop
        .stress()
        .iter()
        .map(|w| (w.from(), w.to(), w.probability()))
        .collect();
    assert_eq!(windows, [(10, 11, 0.2), (20, 22, 0.3)]);
    assert_eq!(crop.probability_in_cycle(11, 6), 0.2);
    assert_eq!(crop.probability_in_cycle(12, 6), 0.04);

    assert_eq!(s.arms()[0].shocks()[2].severity().fixed_value(), Some(0.5));
    assert_eq!(s.arms()[0].shocks()[3].severity().fixed_value(), Some(0.3));
    assert_eq!(s.arms()[0].shocks()[3].reach(), 0.4);

    assert_eq!(s.arms().len(), 1);
    let p = &s.arms()[0].policy();
    assert_eq!(p.group_size(), 6);
    assert_eq!(p.liability(), Liability::Joint);
    assert_eq!(p.peer_cover(), 0.5);
    assert_eq!(p.exclusion_cycles(), Exclusion::Permanent);
    assert_eq!(p.exclusion_scope(), ExclusionScope::Defaulters);
    assert_eq!(p.formation(), Formation::Persistent);
    assert_eq!(p.matching(), Matching::Assortative);
    assert_eq!((s.arms()[0].dropout(), s.arms()[0].replace_departures()), (0.02, false));
}

#[test]
fn sweep_fixture_resolves_arms_in_written_order() {
    let s = load("scenarios", "sweep.toml");
    assert_eq!(s.swept_paths(), ["group_size", "exclusion_cycles"]);
    let labels: Vec<&str> = s.arms().iter().map(|a| a.label()).collect();
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
        s.arms()
            .iter()
            .all(|a| a.policy().group_size() != 3 && a.policy().peer_cover() == 0.25)
    );
    assert_eq!(s.arms()[5].policy().group_size(), 4);
    assert_eq!(s.arms()[5].policy().exclusion_cycles(), Exclusion::Permanent);
    assert_eq!(s.arms()[4].policy().exclusion_cycles(), Exclusion::Cycles(2));
    for arm in s.arms() {
        let phi = s.arms()[0].shocks()[0].probability().at(arm.policy().group_size());
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

// ---------------------------------------------------------------------------------------------
// Values, lines and defaults through `Scenario::from_toml_str`

const MINIMAL: &str = "replications = 10\ncycles = 4\n[portfolio]\nborrowers = 20\n[loan]\nprincipal = 100\n";

fn parse(text: &str) -> Result<Scenario, ScenarioError> {
    Scenario::from_toml_str(text, "case.toml")
}

/// The (field, value, allowed, line) of an `Invalid` error.
fn invalid(text: &str) -> (String, String, String, Option<usize>) {
    match parse(text) {
        Err(ScenarioError::Invalid {
            file,
            field,
            value,
            allowed,
            line,
        }) => {
            assert_eq!(file, "case.toml");
            (field, value, allowed, line)
        }
        Err(other) => panic!("expected an invalid-value error, got {other}"),
        Ok(_) => panic!("expected an error for:\n{text}"),
    }
}

/// The (location, message) of a `Syntax` error.
fn syntax(text: &str) -> (String, String) {
    match parse(text) {
        Err(ScenarioError::Syntax { location, message, .. }) => (location, message),
        Err(other) => panic!("expected a syntax error, got {other}"),
        Ok(_) => panic!("expected an error for:\n{text}"),
    }
}

fn member_shock(extra: &str) -> String {
    format!("{MINIMAL}[[shock]]\nname = \"illness\"\nscope = \"member\"\nprobability = 0.05\n{extra}\n")
}

fn labels(s: &Scenario) -> Vec<&str> {
    s.arms().iter().map(|a| a.label()).collect()
}

#[test]
fn values_are_quoted_as_written_at_their_line() {
    let (field, value, _, line) = invalid(&MINIMAL.replace("principal = 100", "principal = 100\ninterest_rate = 1e10"));
    assert_eq!(
        (field.as_str(), value.as_str(), line),
        ("loan.interest_rate", "1e10", Some(7))
    );
    let (field, value, _, line) = invalid(&MINIMAL.replace("principal = 100", "principal = -0.50"));
    assert_eq!(
        (field.as_str(), value.as_str(), line),
        ("loan.principal", "-0.50", Some(6))
    );
    let (field, value, _, _) = invalid(&member_shock("village_correlation = nan"));
    assert_eq!(
        (field.as_str(), value.as_str()),
        ("shock[0].village_correlation", "nan")
    );
    let (field, value, _, _) = invalid(&format!("seed = -1\n{MINIMAL}"));
    assert_eq!((field.as_str(), value.as_str()), ("seed", "-1"));
    assert_eq!(
        parse(&format!("seed = {}\n{MINIMAL}", i64::MAX)).unwrap().seed(),
        i64::MAX as u64
    );
}

#[test]
fn an_error_between_fields_names_the_later_line() {
    // portfolio_correlation is written first, village_correlation later: the later one is named.
    let text = member_shock("portfolio_correlation = 0.5\nvillage_correlation = 0.6");
    let (field, value, allowed, line) = invalid(&text);
    assert_eq!(
        (field.as_str(), value.as_str(), line),
        ("shock[0].village_correlation", "0.6", Some(12))
    );
    assert_eq!(
        allowed,
        "village_correlation + portfolio_correlation < 1 (here 0.6 + 0.5)"
    );
}

#[test]
fn missing_fields_are_named_by_path_at_their_table() {
    for (text, location) in [
        (MINIMAL.replace("replications = 10\n", ""), "field replications: "),
        (
            MINIMAL.replace("borrowers = 20\n", ""),
            "line 3, field portfolio.borrowers: ",
        ),
        (
            MINIMAL.replace("principal = 100\n", ""),
            "line 5, field loan.principal: ",
        ),
        (
            member_shock("").replace("scope = \"member\"\n", ""),
            "line 7, field shock[0].scope: ",
        ),
    ] {
        let (loc, message) = syntax(&text);
        assert_eq!(loc, location);
        assert!(message.contains("required field is missing"), "{message}");
    }
}

#[test]
fn exclusion_cannot_exceed_the_run() {
    let text = format!(
        "{}[policy]\nexclusion_cycles = 7\n",
        MINIMAL.replace("cycles = 4\n", "cycles = 4\nwarmup_cycles = 2\n")
    );
    let (field, value, allowed, _) = invalid(&text);
    assert_eq!((field.as_str(), value.as_str()), ("policy.exclusion_cycles", "7"));
    assert!(
        allowed.contains("cannot usefully exceed the run's 6 cycles"),
        "{allowed}"
    );
    let ok = parse(&text.replace("exclusion_cycles = 7", "exclusion_cycles = 6")).unwrap();
    assert_eq!(ok.arms()[0].policy().exclusion_cycles(), Exclusion::Cycles(6));
}

#[test]
fn overrides_are_validated_and_named_by_their_flag() {
    use loancycle::scenario::Overrides;
    let big = Overrides {
        replications: Some(4_000_000_000),
        seed: None,
    };
    let err = Scenario::from_toml_str_with(MINIMAL, "case.toml", &big).unwrap_err();
    match &err {
        ScenarioError::Invalid { field, value, line, .. } => {
            assert_eq!(
                (field.as_str(), value.as_str(), *line),
                ("--replications", "4000000000", None)
            );
        }
        other => panic!("unexpected {other}"),
    }
    assert!(
        err.to_string()
            .starts_with("case.toml: option --replications: 4000000000 is not allowed: at most"),
        "{err}"
    );
    let seeded = Overrides {
        replications: Some(3),
        seed: Some(99),
    };
    let s = Scenario::from_toml_str_with(MINIMAL, "case.toml", &seeded).unwrap();
    assert_eq!((s.replications(), s.seed()), (3, 99));
}

// ---------------------------------------------------------------------------------------------
// [sweep]

#[test]
fn sweep_builds_the_product_with_the_last_key_fastest() {
    let text = format!(
        "{MINIMAL}[policy]\ngroup_size = 3\nliability = \"individual\"\n[sweep]\nexclusion_cycles = [0, \"permanent\"]\ngroup_size = [2, 4, 5]\n"
    );
    let s = parse(&text).unwrap();
    assert_eq!(s.swept_paths(), ["exclusion_cycles", "group_size"]);
    assert_eq!(
        labels(&s),
        [
            "exclusion_cycles=0,group_size=2",
            "exclusion_cycles=0,group_size=4",
            "exclusion_cycles=0,group_size=5",
            "exclusion_cycles=permanent,group_size=2",
            "exclusion_cycles=permanent,group_size=4",
            "exclusion_cycles=permanent,group_size=5",
        ]
    );
    assert!(s.arms().iter().all(|a| a.policy().liability() == Liability::Individual));
    assert_eq!(s.arms()[4].policy().exclusion_cycles(), Exclusion::Permanent);
    let swept: Vec<(&str, &str, &str)> = s.arms()[3]
        .swept()
        .iter()
        .map(|v| (v.path(), v.value(), v.written()))
        .collect();
    assert_eq!(
        swept,
        [
            ("exclusion_cycles", "permanent", "\"permanent\""),
            ("group_size", "2", "2")
        ]
    );
}

#[test]
fn quoted_and_dotted_keys_mean_the_same() {
    let shock = member_shock("");
    let dotted = parse(&format!(
        "{shock}[sweep]\nshock.illness.village_correlation = [0.1, 0.2]\n"
    ))
    .unwrap();
    let quoted = parse(&format!(
        "{shock}[sweep]\n\"shock.illness.village_correlation\" = [0.1, 0.2]\n"
    ))
    .unwrap();
    let header = parse(&format!(
        "{shock}[sweep.shock.illness]\nvillage_correlation = [0.1, 0.2]\n"
    ))
    .unwrap();
    for s in [&dotted, &quoted, &header] {
        assert_eq!(s.swept_paths(), ["shock.illness.village_correlation"]);
        assert_eq!(
            labels(s),
            [
                "shock.illness.village_correlation=0.1",
                "shock.illness.village_correlation=0.2"
            ]
        );
        assert_eq!(s.arms()[1].shocks()[0].village_correlation(), 0.2);
    }
}

#[test]
fn arms_follow_the_lines_of_the_keys() {
    // The dotted key takes the place of its own line, between the two policy fields.
    let text = format!(
        "{}[[shock]]\nname = \"flood\"\nscope = \"village\"\nprobability = 0.1\n[sweep]\ngroup_size = [2, 3]\nshock.flood.reach = [0.5, 1]\npeer_cover = [0, 0.5]\nshock.illness.probability = [0.01, 0.02]\n",
        member_shock("")
    );
    let s = parse(&text).unwrap();
    assert_eq!(
        s.swept_paths(),
        [
            "group_size",
            "shock.flood.reach",
            "peer_cover",
            "shock.illness.probability"
        ]
    );
    assert_eq!(s.arms().len(), 16);
    assert_eq!(
        s.arms()[1].label(),
        "group_size=2,shock.flood.reach=0.5,peer_cover=0,shock.illness.probability=0.02"
    );
    let last = &s.arms()[15];
    assert_eq!(last.shocks()[1].reach(), 1.0);
    assert_eq!(last.shocks()[0].probability(), &ShockProbability::Fixed(0.02));
    assert_eq!((last.policy().group_size(), last.policy().peer_cover()), (3, 0.5));
}

#[test]
fn loan_pool_and_severity_fields_can_be_swept() {
    let text = format!(
        "{}[sweep]\nloan.interest_rate = [0, 0.2]\nloan.recovery_rate = [0.5]\npool.dropout = [0.1]\nshock.illness.severity = [0.5]\n\"shock.illness.portfolio_correlation\" = [0.3]\n",
        member_shock("")
    );
    let s = parse(&text).unwrap();
    let arm = &s.arms()[1];
    assert_eq!(
        (arm.interest_rate(), arm.recovery_rate(), arm.dropout()),
        (0.2, 0.5, 0.1)
    );
    assert_eq!(arm.amount_due(), 120.0);
    assert_eq!(arm.shocks()[0].severity().fixed_value(), Some(0.5));
    assert_eq!(arm.shocks()[0].portfolio_correlation(), 0.3);
    assert_eq!(s.arms()[0].interest_rate(), 0.0);
    // The closed forms read each arm's own model: the swept amount due reaches the exact calculator.
    let first = loancycle::analytic::one_factor::class_check(&s.arms()[0]).unwrap();
    let second = loancycle::analytic::one_factor::class_check(arm).unwrap();
    assert_eq!((first.amount_due, second.amount_due), (100.0, 120.0));
    assert_eq!(second.portfolio_correlation, 0.3);
}

#[test]
fn the_run_size_and_draws_cannot_be_swept() {
    for key in [
        "replications",
        "cycles",
        "warmup_cycles",
        "portfolio.borrowers",
        "portfolio.villages",
        "seed",
    ] {
        let (location, message) = syntax(&format!("{MINIMAL}[sweep]\n\"{key}\" = [1, 2]\n"));
        assert_eq!(location, format!("line 8, field sweep.{key}: "));
        assert!(message.contains(&format!("`{key}` cannot be swept")), "{message}");
    }
    let (location, message) = syntax(&format!("{MINIMAL}[sweep]\nloan.colour = [1, 2]\n"));
    assert_eq!(location, "line 8, field sweep.loan.colour: ");
    assert!(message.contains("is not a field a sweep can vary"), "{message}");
}

#[test]
fn shock_paths_need_a_unique_plain_name() {
    let text = format!("{}[sweep]\nshock.flood.reach = [1]\n", member_shock(""));
    let (_, message) = syntax(&text);
    assert!(message.contains("no shock is named `flood`"), "{message}");
    let spaced =
        member_shock("").replace("\"illness\"", "\"bad name\"") + "[sweep]\n\"shock.bad name.probability\" = [0.1]\n";
    let (_, message) = syntax(&spaced);
    assert!(message.contains("letters, digits, _ and -"), "{message}");
}

#[test]
fn swept_values_are_checked_as_if_written_in_place() {
    let shock = member_shock("");
    let (field, value, allowed, line) = invalid(&format!(
        "{shock}[sweep]\nshock.illness.village_correlation = [0, 0.2, 1.5]\n"
    ));
    assert_eq!(
        (field.as_str(), value.as_str(), allowed.as_str(), line),
        (
            "sweep.shock.illness.village_correlation[2]",
            "1.5",
            "village_correlation + portfolio_correlation < 1 (here 1.5 + 0)",
            Some(13)
        )
    );
    let (field, value, allowed, _) = invalid(&format!("{shock}[sweep]\nshock.illness.probability = [0.1, 1.01]\n"));
    assert_eq!(
        (field.as_str(), value.as_str(), allowed.as_str()),
        ("sweep.shock.illness.probability[1]", "1.01", "a probability in [0, 1]")
    );
    let (field, _, _, _) = invalid(&format!("{MINIMAL}[sweep]\ngroup_size = [2, 3, 2]\n"));
    assert_eq!(field, "sweep.group_size[2]");
    let (field, value, _, _) = invalid(&format!("{MINIMAL}[sweep]\npool.dropout = [0.5, 1]\n"));
    assert_eq!((field.as_str(), value.as_str()), ("sweep.pool.dropout[1]", "1"));
    let (location, message) = syntax(&format!("{MINIMAL}[sweep]\nformation = [\"reshuffle\", \"stable\"]\n"));
    assert_eq!(location, "line 8, field sweep.formation[1]: ");
    assert!(message.contains("unknown variant `stable`"), "{message}");
}

#[test]
fn arms_of_the_same_model_are_warned_about_and_still_run() {
    let s = parse(&format!(
        "{MINIMAL}[sweep]\nexclusion_scope = [\"group\", \"defaulters\"]\n"
    ))
    .unwrap();
    assert_eq!(s.arms().len(), 2);
    assert_eq!(s.warnings().len(), 1);
    let w = &s.warnings()[0];
    assert!(w.contains("arm 2 (exclusion_scope=defaulters)"), "{w}");
    assert!(w.contains("the earlier arm 1 (exclusion_scope=group)"), "{w}");
    let distinct = parse(&format!(
        "{MINIMAL}[policy]\nexclusion_cycles = 2\n[sweep]\nexclusion_scope = [\"group\", \"defaulters\"]\n"
    ))
    .unwrap();
    assert!(distinct.warnings().is_empty(), "{:?}", distinct.warnings());
}

/// A sweep over a shock's village correlation is paired: every arm runs on the draws of the same
/// replication, so each arm equals the scenario with that correlation written in place, and two arms
/// whose correlations differ by 1e-12 see the same shortfalls cycle by cycle.
#[test]
fn a_correlation_sweep_gives_paired_arms() {
    let base = "seed = 11\nreplications = 2\ncycles = 6\n[portfolio]\nborrowers = 400\nvillages = 8\n[loan]\nprincipal = 100\n[borrowers]\nincome = 1.3\n[[shock]]\nname = \"harvest\"\nscope = \"member\"\nprobability = 0.2\nseverity = 0.8\n";
    let swept = parse(&format!(
        "{base}[sweep]\nshock.harvest.village_correlation = [0.3, 0.300000000001, 0.6]\n"
    ))
    .unwrap();
    for (arm, rho) in [(0, "0.3"), (2, "0.6")] {
        let written = parse(&format!("{base}village_correlation = {rho}\n")).unwrap();
        for r in 0..2 {
            assert_eq!(
                loancycle::engine::simulate_replication(&swept, arm, r),
                loancycle::engine::simulate_replication(&written, 0, r),
                "arm {arm} differs from the scenario written with {rho}"
            );
        }
    }
    let a = loancycle::engine::simulate_replication(&swept, 0, 0);
    let b = loancycle::engine::simulate_replication(&swept, 1, 0);
    let c = loancycle::engine::simulate_replication(&swept, 2, 0);
    let shortfalls = |t: &loancycle::stats::ReplicationTally| t.cycles.iter().map(|c| c.shortfalls).collect::<Vec<_>>();
    assert_eq!(shortfalls(&a), shortfalls(&b));
    assert_ne!(shortfalls(&a), shortfalls(&c), "the correlation should matter");
}

#[test]
fn minimal_text_gets_every_default_in_its_single_arm() {
    let s = parse(MINIMAL).unwrap();
    assert_eq!(
        (s.seed(), s.replications(), s.cycles(), s.warmup_cycles()),
        (0, 10, 4, 0)
    );
    assert_eq!((s.borrowers(), s.villages(), s.name()), (20, 1, ""));
    assert!(s.swept_paths().is_empty() && s.warnings().is_empty());
    let arm = &s.arms()[0];
    assert_eq!((arm.label(), arm.swept().len()), ("base", 0));
    assert_eq!(
        (arm.principal(), arm.interest_rate(), arm.recovery_rate()),
        (100.0, 0.0, 0.0)
    );
    assert_eq!(
        (arm.income().fixed_value(), arm.risk().fixed_value()),
        (Some(1.0), Some(1.0))
    );
    assert_eq!(
        (arm.dropout(), arm.replace_departures(), arm.shocks().len()),
        (0.0, true, 0)
    );
    assert_eq!(arm.policy(), &loancycle::scenario::Policy::default_policy());
}

#[test]
fn scope_specific_fields_are_refused_elsewhere() {
    let (field, _, allowed, _) = invalid(&member_shock("reach = 0.5"));
    assert_eq!(field, "shock[0].reach");
    assert!(allowed.starts_with('1'), "{allowed}");
    let text = format!(
        "{MINIMAL}[[shock]]\nname = \"flood\"\nscope = \"village\"\nprobability = 0.1\n[sweep]\nshock.flood.village_correlation = [0, 0.2]\n"
    );
    let (field, value, allowed, line) = invalid(&text);
    assert_eq!(
        (field.as_str(), value.as_str(), line),
        ("sweep.shock.flood.village_correlation[1]", "0.2", Some(12))
    );
    assert!(allowed.contains("member-scope shocks only"), "{allowed}");
}

#[test]
fn stress_windows_are_sorted_and_checked() {
    let s = parse(&member_shock(
        "stress = [ { from = 3, to = 4, probability = 0.5 }, { from = 1, to = 2, probability = 0.3 } ]",
    ))
    .unwrap();
    let froms: Vec<u32> = s.arms()[0].shocks()[0].stress().iter().map(|w| w.from()).collect();
    assert_eq!(froms, [1, 3]);
    assert_eq!(s.arms()[0].shocks()[0].probability_in_cycle(2, 5), 0.3);
    let (field, value, allowed, _) = invalid(&member_shock("stress = [ { from = 2, to = 5, probability = 0.5 } ]"));
    assert_eq!((field.as_str(), value.as_str()), ("shock[0].stress[0].to", "5"));
    assert!(allowed.contains("<= 4"), "{allowed}");
}

#[test]
fn curves_are_checked_against_each_arm() {
    let curve = |c: &str| member_shock("").replace("probability = 0.05", &format!("probability = {c}"));
    let s = parse(&curve("{ curve = \"power\", p = 1 }")).unwrap();
    assert_eq!(s.arms()[0].shocks()[0].probability().at(4), 0.25);
    let text = curve("{ curve = \"power_plus_log\", p = 0.5 }") + "[sweep]\ngroup_size = [2, 1]\n";
    let (field, value, allowed, line) = invalid(&text);
    assert_eq!(
        (field.as_str(), value.as_str(), line),
        ("sweep.group_size[1]", "1", Some(13))
    );
    assert_eq!(
        allowed,
        "a group size in the domain of shock[0].probability (power_plus_log curve: group sizes >= 2)"
    );
    let table = curve("{ curve = \"table\", values = { \"2\" = 0.08, \"3\" = 0.06 } }");
    let (field, value, _, line) = invalid(&table);
    assert_eq!(
        (field.as_str(), value.as_str(), line),
        ("policy.group_size", "5 (the default)", None)
    );
    assert!(parse(&(table + "[policy]\ngroup_size = 3\n")).is_ok());
    let (field, value, _, _) = invalid(&curve("{ curve = \"power\", p = 0 }"));
    assert_eq!((field.as_str(), value.as_str()), ("shock[0].probability.p", "0"));
}

#[test]
fn sweep_size_is_checked_before_arms_are_built() {
    let list = (1..=5001)
        .map(|i| (i as f64 / 5001.0).to_string())
        .collect::<Vec<_>>()
        .join(", ");
    let text = format!("{MINIMAL}[sweep]\npeer_cover = [{list}]\nliability = [\"joint\", \"individual\"]\n");
    let (field, value, allowed, _) = invalid(&text);
    assert_eq!(field, "sweep");
    assert!(value.starts_with("10002 arms"), "{value}");
    assert!(allowed.contains("at most 10000 arms"), "{allowed}");
}

#[test]
fn too_many_shocks_are_refused() {
    let mut text = MINIMAL.to_owned();
    for i in 0..=255 {
        text.push_str(&format!(
            "[[shock]]\nname = \"s{i}\"\nscope = \"portfolio\"\nprobability = 0.01\n"
        ));
    }
    let (field, _, allowed, _) = invalid(&text);
    assert_eq!(field, "shock");
    assert!(allowed.contains("at most 255 shocks"), "{allowed}");
}

#[test]
fn arms_differing_only_outside_the_policy_are_not_the_same_model() {
    let text = format!(
        "{}[sweep]\nshock.illness.probability = [0.05, 0.1]\nloan.recovery_rate = [0, 0.5]\n",
        member_shock("")
    );
    let s = parse(&text).unwrap();
    assert_eq!(s.arms().len(), 4);
    assert!(s.warnings().is_empty(), "{:?}", s.warnings());
}
