//! No input crashes `loancycle`: hostile scenario texts are refused with one line, or accepted and
//! simulated, and nothing panics.
//!
//! Two sources of inputs:
//! - `tests/data/fuzz/`: inputs kept from fuzzing (see DEVELOPERS.md, "Inputs that must not crash
//!   it"). `refused/` must be refused, `accepted/` must validate and simulate, and `open/` holds
//!   inputs that expose a defect not yet fixed; each of those has an ignored test below.
//! - `nasty_inputs()`: hand-written inputs, the rows of the DEVELOPERS.md table.
//!
//! The parser is driven through `Scenario::from_toml_str`, inside `catch_unwind`, and the binary
//! through `loancycle check` and `loancycle run`, which must exit 2 with one line for a bad input.

mod common;

use common::simulate_on;
use loancycle::scenario::{Overrides, Scenario};
use loancycle::stats::summary::summarize_arm;
use std::panic::{AssertUnwindSafe, catch_unwind};
use std::path::{Path, PathBuf};
use std::process::Command;

const ORIGIN: &str = "input.toml";

/// A valid scenario to build nasty variants from.
const BASE: &str = "replications = 2\ncycles = 3\n[portfolio]\nborrowers = 20\n[loan]\nprincipal = 100\n";

/// What an input must get.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Expect {
    /// Refused: an error naming the file, on one line; the binary exits 2.
    Refused,
    /// Accepted and simulated; the binary's `run` exits 0.
    Accepted,
    /// Not UTF-8: the binary refuses to read it (exit 2, one line); the parser, which takes text,
    /// gets the lossy conversion and must only not panic.
    Unreadable,
}

/// Hand-written hostile inputs: (what it is, the bytes, what it must get).
fn nasty_inputs() -> Vec<(&'static str, Vec<u8>, Expect)> {
    use Expect::*;
    let with = |extra: &str| format!("{BASE}{extra}\n").into_bytes();
    let replace = |from: &str, to: &str| BASE.replace(from, to).into_bytes();
    let many_shocks: String = (0..256)
        .map(|i| format!("[[shock]]\nname = \"s{i}\"\nscope = \"member\"\nprobability = 0.01\n"))
        .collect();
    let wide_sweep = format!(
        "[sweep]\npeer_cover = [{}]\nexclusion_cycles = [{}]\n",
        (0..=100)
            .map(|i| format!("{}", f64::from(i) / 100.0))
            .collect::<Vec<_>>()
            .join(", "),
        (0..100).map(|i| i.to_string()).collect::<Vec<_>>().join(", ")
    );
    let unicode_shock =
        "[[shock]]\nname = \"\u{0645}\u{0631}\u{0636} \u{202e}\u{75c5} 🌾\"\nscope = \"village\"\nprobability = 0.1\n";
    vec![
        ("empty file", Vec::new(), Refused),
        ("byte-order mark only", "\u{feff}".into(), Refused),
        (
            "invalid UTF-8",
            [b"name = \"\xff\xfe\"\n", BASE.as_bytes()].concat(),
            Unreadable,
        ),
        (
            "NUL byte in a string",
            format!("name = \"a\0b\"\n{BASE}").into_bytes(),
            Refused,
        ),
        ("bare NUL byte", [BASE.as_bytes(), b"\0\n"].concat(), Refused),
        (
            "lone carriage return",
            b"replications = 2\rcycles = 3\n".to_vec(),
            Refused,
        ),
        (
            "100,000 nested arrays",
            format!("replications = {}{}\n", "[".repeat(100_000), "]".repeat(100_000)).into_bytes(),
            Refused,
        ),
        (
            "20,000 nested inline tables",
            format!("replications = {}1{}\n", "{ a = ".repeat(20_000), " }".repeat(20_000)).into_bytes(),
            Refused,
        ),
        (
            "dotted key 50,000 deep",
            format!("{} = 1\n", vec!["a"; 50_000].join(".")).into_bytes(),
            Refused,
        ),
        (
            "table header 50,000 deep",
            format!("[{}]\n", vec!["a"; 50_000].join(".")).into_bytes(),
            Refused,
        ),
        (
            "1 MB name, required fields missing",
            format!("name = \"{}\"\n", "x".repeat(1 << 20)).into_bytes(),
            Refused,
        ),
        (
            "integer beyond i64",
            replace("replications = 2", "replications = 99999999999999999999"),
            Refused,
        ),
        (
            "integer beyond u32",
            replace("replications = 2", "replications = 4294967296"),
            Refused,
        ),
        ("negative count", replace("cycles = 3", "cycles = -1"), Refused),
        ("float for a count", replace("cycles = 3", "cycles = 3.0"), Refused),
        ("NaN count", replace("cycles = 3", "cycles = nan"), Refused),
        (
            "float overflow 1e400",
            replace("principal = 100", "principal = 1e400"),
            Refused,
        ),
        ("principal nan", replace("principal = 100", "principal = nan"), Refused),
        (
            "principal -nan",
            replace("principal = 100", "principal = -nan"),
            Refused,
        ),
        (
            "principal +inf",
            replace("principal = 100", "principal = +inf"),
            Refused,
        ),
        (
            "principal -0.0",
            replace("principal = 100", "principal = -0.0"),
            Refused,
        ),
        (
            "principal subnormal",
            replace("principal = 100", "principal = 5e-324"),
            Accepted,
        ),
        (
            "principal as a string",
            replace("principal = 100", "principal = \"100\""),
            Refused,
        ),
        (
            "principal as a date-time",
            replace("principal = 100", "principal = 1979-05-27T07:32:00Z"),
            Refused,
        ),
        (
            "interest rate 1e308",
            replace("principal = 100", "principal = 100\ninterest_rate = 1e308"),
            Refused,
        ),
        (
            "principal above 1e12",
            replace("principal = 100", "principal = 1.000001e12"),
            Refused,
        ),
        (
            "principal and interest rate at their bounds",
            replace("principal = 100", "principal = 1e12\ninterest_rate = 1e3"),
            Accepted,
        ),
        (
            "income 1e308",
            with("[borrowers]\nincome = { kind = \"lognormal\", mean = 1e308, cv = 1 }"),
            Refused,
        ),
        ("seed -1", format!("seed = -1\n{BASE}").into_bytes(), Refused),
        (
            "seed i64::MAX",
            format!("seed = 9223372036854775807\n{BASE}").into_bytes(),
            Accepted,
        ),
        (
            "hex, octal and binary integers",
            format!("seed = 0xff\nwarmup_cycles = 0o1\n{BASE}").into_bytes(),
            Accepted,
        ),
        (
            "borrowers beyond the limit",
            replace("borrowers = 20", "borrowers = 10000001"),
            Refused,
        ),
        (
            "villages above borrowers",
            replace("borrowers = 20", "borrowers = 20\nvillages = 21"),
            Refused,
        ),
        (
            "cycles beyond 2^24",
            replace("cycles = 3", "cycles = 16777216"),
            Refused,
        ),
        (
            "warm-up plus cycles beyond 2^24",
            replace("cycles = 3", "cycles = 16777215\nwarmup_cycles = 1"),
            Refused,
        ),
        (
            "replications x cycles beyond the record limit",
            replace("replications = 2", "replications = 4294967295"),
            Refused,
        ),
        (
            "group size u32::MAX",
            with("[policy]\ngroup_size = 4294967295"),
            Refused,
        ),
        ("group size 0", with("[policy]\ngroup_size = 0"), Refused),
        ("exclusion -1", with("[policy]\nexclusion_cycles = -1"), Refused),
        (
            "exclusion u32::MAX",
            with("[policy]\nexclusion_cycles = 4294967295"),
            Refused,
        ),
        (
            "exclusion word in capitals",
            with("[policy]\nexclusion_cycles = \"PERMANENT\""),
            Refused,
        ),
        (
            "liability with a zero-width space",
            with("[policy]\nliability = \"joint\u{200b}\""),
            Refused,
        ),
        ("dropout 1", with("[pool]\ndropout = 1"), Refused),
        (
            "dropout just below 1",
            with("[pool]\ndropout = 0.9999999999999999"),
            Accepted,
        ),
        ("256 shocks", with(&many_shocks), Refused),
        ("10,100 arms", with(&wide_sweep), Refused),
        (
            "sweep of one value given as a scalar",
            with("[sweep]\ngroup_size = 3"),
            Refused,
        ),
        ("empty sweep table", with("[sweep]"), Accepted),
        (
            "duplicate key",
            with("[policy]\ngroup_size = 2\ngroup_size = 3"),
            Refused,
        ),
        ("duplicate table", with("[policy]\n[policy]"), Refused),
        (
            "shock as a plain value",
            format!("shock = 5\n{BASE}").into_bytes(),
            Refused,
        ),
        ("shock as a single table", with("[shock]\nname = \"x\""), Refused),
        ("unicode shock name", with(unicode_shock), Accepted),
        (
            "blank shock name",
            with("[[shock]]\nname = \"\u{3000}\"\nscope = \"member\"\nprobability = 0.1"),
            Refused,
        ),
        (
            "stress window at u32::MAX",
            with(
                "[[shock]]\nname = \"x\"\nscope = \"member\"\nprobability = 0.1\nstress = [{ from = 4294967295, to = 4294967295, probability = 1 }]",
            ),
            Refused,
        ),
        (
            "curve table with non-decimal keys",
            with(
                "[[shock]]\nname = \"x\"\nscope = \"member\"\nprobability = { curve = \"table\", values = { \"+5\" = 0.1 } }",
            ),
            Refused,
        ),
        (
            "curve table with an Arabic-Indic digit",
            with(
                "[[shock]]\nname = \"x\"\nscope = \"member\"\nprobability = { curve = \"table\", values = { \"\u{665}\" = 0.1 } }",
            ),
            Refused,
        ),
        (
            "power curve with p = 1e308",
            with("[[shock]]\nname = \"x\"\nscope = \"member\"\nprobability = { curve = \"power\", p = 1e308 }"),
            Accepted,
        ),
        (
            "power_plus_log curve with p = 5e-324",
            with(
                "[[shock]]\nname = \"x\"\nscope = \"member\"\nprobability = { curve = \"power_plus_log\", p = 5e-324 }",
            ),
            Accepted,
        ),
        (
            "correlations summing to just below 1",
            with(
                "[[shock]]\nname = \"x\"\nscope = \"member\"\nprobability = 0.5\nvillage_correlation = 0.5\nportfolio_correlation = 0.4999999999999999",
            ),
            Accepted,
        ),
        (
            "lognormal income with cv 100",
            with("[borrowers]\nincome = { kind = \"lognormal\", mean = 1, cv = 100 }"),
            Accepted,
        ),
        (
            "gamma risk with the smallest cv",
            with(
                "[borrowers]\nrisk = { kind = \"gamma\", mean = 1, cv = 1e-6 }\n[[shock]]\nname = \"x\"\nscope = \"member\"\nprobability = 0.9",
            ),
            Accepted,
        ),
        (
            "beta severity at the largest sd",
            with(
                "[[shock]]\nname = \"x\"\nscope = \"group\"\nprobability = 0.5\nseverity = { kind = \"beta\", mean = 0.5, sd = 0.4999999 }",
            ),
            Accepted,
        ),
        ("CRLF line endings", BASE.replace('\n', "\r\n").into_bytes(), Accepted),
    ]
}

/// Parses inside `catch_unwind`; a panic fails the test with the input's name.
fn parse_without_panic(name: &str, bytes: &[u8]) -> Result<Scenario, String> {
    let text = String::from_utf8_lossy(bytes).into_owned();
    catch_unwind(AssertUnwindSafe(|| Scenario::from_toml_str(&text, ORIGIN)))
        .unwrap_or_else(|_| panic!("{name}: the parser panicked"))
        .map_err(|e| e.to_string())
}

/// Simulates at most two replications on one thread, inside `catch_unwind`, and summarises. The
/// accepted text is validated again with the replications overridden, as `--replications` would.
fn simulate_without_panic(name: &str, bytes: &[u8], scenario: Scenario) {
    let text = String::from_utf8_lossy(bytes).into_owned();
    let fewer = Overrides {
        replications: Some(scenario.replications().min(2)),
        ..Default::default()
    };
    let scenario = Scenario::from_toml_str_with(&text, ORIGIN, &fewer)
        .unwrap_or_else(|e| panic!("{name}: refused with fewer replications: {e}"));
    catch_unwind(AssertUnwindSafe(|| {
        let results = simulate_on(&scenario, 1);
        for (tally, arm) in results.arms.iter().zip(scenario.arms()) {
            summarize_arm(tally, arm.policy().group_size());
        }
    }))
    .unwrap_or_else(|_| panic!("{name}: the simulation panicked"));
}

fn assert_refused_in_one_line(name: &str, result: Result<Scenario, String>) {
    match result {
        Ok(_) => panic!("{name}: accepted, but it must be refused"),
        Err(message) => {
            assert!(message.starts_with(&format!("{ORIGIN}: ")), "{name}: {message:?}");
            assert!(!message.contains('\n'), "{name}: the message spans lines: {message:?}");
        }
    }
}

/// Runs the binary on `bytes` written to a file; returns (exit code, stdout, stderr).
fn binary(args: &[&str], bytes: &[u8]) -> (Option<i32>, String, String) {
    let dir = tempfile::tempdir().expect("temporary directory");
    let file = dir.path().join(ORIGIN);
    std::fs::write(&file, bytes).expect("write the input");
    let mut command = Command::new(env!("CARGO_BIN_EXE_loancycle"));
    command.current_dir(dir.path());
    for a in args {
        command.arg(if *a == "FILE" { ORIGIN } else { a });
    }
    let out = command.output().expect("the binary starts");
    (
        out.status.code(),
        String::from_utf8_lossy(&out.stdout).into_owned(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

fn assert_binary_refuses_in_one_line(name: &str, bytes: &[u8]) {
    for command in ["check", "run"] {
        let (code, _, stderr) = binary(
            &[command, "FILE", "--out", "out"][..if command == "run" { 4 } else { 2 }],
            bytes,
        );
        assert_eq!(code, Some(2), "{name}: `{command}` exit code, stderr {stderr:?}");
        assert_eq!(stderr.lines().count(), 1, "{name}: `{command}` stderr {stderr:?}");
        assert!(
            stderr.starts_with("error: input.toml: "),
            "{name}: `{command}` stderr {stderr:?}"
        );
    }
}

fn assert_binary_runs(name: &str, bytes: &[u8]) {
    let (code, _, stderr) = binary(
        &["run", "FILE", "--out", "out", "--quiet", "--replications", "2"],
        bytes,
    );
    assert_eq!(code, Some(0), "{name}: `run` exit code, stderr {stderr:?}");
}

fn fuzz_dir(sub: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/data/fuzz").join(sub)
}

/// Every file of `tests/data/fuzz/<sub>/`, sorted.
fn fuzz_inputs(sub: &str) -> Vec<(String, Vec<u8>)> {
    let dir = fuzz_dir(sub);
    let mut files: Vec<PathBuf> = std::fs::read_dir(&dir)
        .unwrap_or_else(|e| panic!("cannot list {}: {e}", dir.display()))
        .map(|entry| entry.expect("directory entry").path())
        .filter(|p| p.is_file() && p.extension().is_some_and(|e| e == "toml"))
        .collect();
    files.sort();
    files
        .into_iter()
        .map(|p| {
            let name = format!("tests/data/fuzz/{sub}/{}", p.file_name().unwrap().to_string_lossy());
            (name, std::fs::read(&p).expect("read a fuzz input"))
        })
        .collect()
}

#[test]
fn nasty_inputs_get_what_they_must_without_panicking() {
    let inputs = nasty_inputs();
    for (name, bytes, expect) in &inputs {
        let result = parse_without_panic(name, bytes);
        match &result {
            Ok(_) => println!("{name}: accepted"),
            Err(message) => println!("{name}: {message}"),
        }
        match (expect, result) {
            (Expect::Refused, result) => assert_refused_in_one_line(name, result),
            (Expect::Accepted, Ok(scenario)) => simulate_without_panic(name, bytes, scenario),
            (Expect::Accepted, Err(message)) => panic!("{name}: refused, but it must be accepted: {message}"),
            (Expect::Unreadable, _) => {}
        }
    }
}

#[test]
fn the_binary_refuses_nasty_inputs_with_exit_2_and_one_line() {
    for (name, bytes, expect) in nasty_inputs() {
        match expect {
            Expect::Refused | Expect::Unreadable => assert_binary_refuses_in_one_line(name, &bytes),
            Expect::Accepted => assert_binary_runs(name, &bytes),
        }
    }
}

#[test]
fn fuzz_inputs_never_panic_the_parser_or_the_engine() {
    for sub in ["refused", "accepted", "open"] {
        for (name, bytes) in fuzz_inputs(sub) {
            if let Ok(scenario) = parse_without_panic(&name, &bytes) {
                simulate_without_panic(&name, &bytes, scenario);
            }
        }
    }
}

#[test]
fn refused_fuzz_inputs_are_refused_in_one_line_by_the_parser_and_the_binary() {
    let inputs = fuzz_inputs("refused");
    assert!(!inputs.is_empty(), "tests/data/fuzz/refused/ is empty");
    for (name, bytes) in inputs {
        assert_refused_in_one_line(&name, parse_without_panic(&name, &bytes));
        assert_binary_refuses_in_one_line(&name, &bytes);
    }
}

#[test]
fn accepted_fuzz_inputs_validate_and_run() {
    for (name, bytes) in fuzz_inputs("accepted") {
        let scenario = parse_without_panic(&name, &bytes).unwrap_or_else(|e| panic!("{name}: refused: {e}"));
        simulate_without_panic(&name, &bytes, scenario);
        assert_binary_runs(&name, &bytes);
    }
}

#[test]
fn an_unknown_key_with_a_newline_is_refused_in_one_line() {
    let name = "tests/data/fuzz/refused/key_with_escaped_newline.toml";
    let bytes = std::fs::read(fuzz_dir("refused").join("key_with_escaped_newline.toml")).expect("read the input");
    let message = parse_without_panic(name, &bytes).expect_err("refused");
    assert!(
        message.contains(r"field a\nb: "),
        "{name}: the path is not escaped: {message:?}"
    );
    assert_refused_in_one_line(name, Err(message));
    assert_binary_refuses_in_one_line(name, &bytes);
}

#[test]
fn control_characters_get_a_message_that_says_what_is_wrong() {
    for file in [
        "lone_carriage_return.toml",
        "nul_in_comment.toml",
        "del_in_comment.toml",
    ] {
        let name = format!("tests/data/fuzz/refused/{file}");
        let bytes = std::fs::read(fuzz_dir("refused").join(file)).expect("read the input");
        let message = parse_without_panic(&name, &bytes).expect_err("refused");
        let (_, after_line) = message.split_once(": line ").expect("a line number");
        let (_, what) = after_line.split_once(": ").expect("a message after the line number");
        assert!(!what.trim().is_empty(), "{name}: the message says nothing: {message:?}");
        let (code, _, stderr) = binary(&["check", "FILE"], &bytes);
        assert_eq!(code, Some(2), "{name}");
        assert!(!stderr.trim_end().ends_with(':'), "{name}: {stderr:?}");
    }
}

/// Found by fuzzing: members whose capacity is a rounding-sized amount below the amount due counted
/// as short while their groups repaid through the rounding slack, so repaid groups exceeded
/// shortfall-free plus rescued ones. Such a capacity now pays the amount due exactly.
#[test]
fn joint_groups_that_repay_are_shortfall_free_or_rescued() {
    let name = "tests/data/fuzz/accepted/joint_shortfall_within_rounding_slack.toml";
    let bytes =
        std::fs::read(fuzz_dir("accepted").join("joint_shortfall_within_rounding_slack.toml")).expect("read the input");
    let scenario = parse_without_panic(name, &bytes).unwrap_or_else(|e| panic!("{name}: refused: {e}"));
    let results = simulate_on(&scenario, 1);
    for r in &results.arms[0].replications {
        // Without walk-aways, a jointly liable group that repays in full had nobody short or was
        // rescued by peers, the identity tests/engine_properties.rs holds the engine to.
        assert_eq!(
            r.groups_repaid,
            r.shortfall_free_groups + r.groups_rescued,
            "{name}, replication {}: {} groups repaid, {} shortfall-free, {} rescued, {} members short",
            r.replication,
            r.groups_repaid,
            r.shortfall_free_groups,
            r.groups_rescued,
            r.member_shortfalls
        );
    }
}
