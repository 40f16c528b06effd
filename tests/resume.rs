//! Interrupted runs lose nothing: a run stopped by a real SIGINT, resumed, stopped again by a real
//! SIGTERM and resumed again ends with the very files of an uninterrupted run; `--resume` without a
//! checkpoint, or with a changed scenario, is refused.

use std::path::{Path, PathBuf};
use std::process::{Child, Command, Output, Stdio};
use std::time::{Duration, Instant};

/// Two arms at 1,600 replications: about a second of work in some 200 batches, so a signal always
/// lands with most of the run still to do.
const REPLICATIONS: &str = "1600";
const SCENARIO: &str = "tests/data/resume/stream.toml";

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

fn command(args: &[&str]) -> Command {
    let mut c = Command::new(env!("CARGO_BIN_EXE_loancycle"));
    c.args(args).current_dir(root());
    c
}

fn s(p: &Path) -> &str {
    p.to_str().expect("temporary paths are UTF-8")
}

fn run_args<'a>(out: &'a Path, extra: &[&'a str]) -> Vec<&'a str> {
    let mut args = vec![
        "run",
        SCENARIO,
        "--replications",
        REPLICATIONS,
        "--quiet",
        "--out",
        s(out),
    ];
    args.extend(extra);
    args
}

/// Batches recorded in the checkpoint so far (its lines after the header).
fn batches(checkpoint: &Path) -> usize {
    std::fs::read(checkpoint).map_or(0, |b| b.iter().filter(|&&c| c == b'\n').count().saturating_sub(1))
}

/// Starts a run, waits until its checkpoint holds more batches than `before`, and sends it `signal`
/// (with kill(2): a real signal, not a simulated stop).
fn interrupt(args: &[&str], checkpoint: &Path, signal: libc::c_int) -> Output {
    let before = batches(checkpoint);
    let child: Child = command(args)
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("the loancycle binary starts");
    let started = Instant::now();
    while batches(checkpoint) <= before {
        assert!(
            started.elapsed() < Duration::from_secs(120),
            "no batch was checkpointed in two minutes"
        );
        std::thread::sleep(Duration::from_millis(10));
    }
    let pid = libc::pid_t::try_from(child.id()).expect("a process id");
    // SAFETY: kill(2) with the id of a child this test started and has not yet waited for.
    assert_eq!(unsafe { libc::kill(pid, signal) }, 0, "kill failed");
    child.wait_with_output().expect("the run ends")
}

fn stderr(out: &Output) -> String {
    String::from_utf8_lossy(&out.stderr).into_owned()
}

fn incomplete(dir: &Path) -> serde_json::Value {
    let text = std::fs::read_to_string(dir.join("summary.json")).expect("partial results were written");
    let json: serde_json::Value = serde_json::from_str(&text).expect("summary.json parses");
    json["incomplete"].clone()
}

#[test]
fn a_run_interrupted_twice_and_resumed_ends_byte_identical_to_one_run() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path().join("resumed");
    let checkpoint = dir.join("checkpoint.jsonl");

    let first = interrupt(&run_args(&dir, &[]), &checkpoint, libc::SIGINT);
    assert_eq!(first.status.code(), Some(130), "{}", stderr(&first));
    // The command it suggests repeats the flags that shape the run.
    let hint = format!(
        "marked incomplete; continue with: loancycle run {SCENARIO} --replications {REPLICATIONS} --out {} --resume\n",
        dir.display()
    );
    assert!(stderr(&first).ends_with(&hint), "{}", stderr(&first));
    let done_first = incomplete(&dir)["replications_done"].as_u64().expect("a count");
    assert!(done_first > 0 && done_first < 1600, "{done_first}");

    // Resumed on one thread (batches of another size), and stopped again by SIGTERM.
    let second = interrupt(
        &run_args(&dir, &["--resume", "--threads", "1"]),
        &checkpoint,
        libc::SIGTERM,
    );
    assert_eq!(second.status.code(), Some(143), "{}", stderr(&second));
    let done_second = incomplete(&dir)["replications_done"].as_u64().expect("a count");
    assert!(
        done_second > done_first && done_second < 1600,
        "{done_first} then {done_second}"
    );

    let last = command(&run_args(&dir, &["--resume"])).output().unwrap();
    assert!(last.status.success(), "{}", stderr(&last));
    assert!(!checkpoint.exists(), "a finished run keeps no checkpoint");
    assert!(incomplete(&dir).is_null(), "a finished run is not marked incomplete");

    let reference = tmp.path().join("reference");
    let one = command(&run_args(&reference, &[])).output().unwrap();
    assert!(one.status.success(), "{}", stderr(&one));
    let names = |d: &Path| {
        let mut v: Vec<String> = std::fs::read_dir(d)
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
            .collect();
        v.sort();
        v
    };
    assert_eq!(names(&dir), names(&reference));
    for name in names(&reference) {
        assert!(
            std::fs::read(dir.join(&name)).unwrap() == std::fs::read(reference.join(&name)).unwrap(),
            "{name} differs between the resumed run and one run"
        );
    }
}

fn refused(args: &[&str]) -> String {
    let out = command(args).output().unwrap();
    let err = stderr(&out);
    assert_eq!(out.status.code(), Some(2), "{args:?}: {err}");
    assert_eq!(err.lines().count(), 1, "{err}");
    err
}

#[test]
fn resume_needs_the_checkpoint_of_the_same_run() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path().join("run");
    let line = refused(&run_args(&dir, &["--resume"]));
    assert!(line.contains("there is no checkpoint"), "{line}");
    assert!(
        line.contains("checkpoint.jsonl to continue from; run without --resume"),
        "{line}"
    );

    let checkpoint = dir.join("checkpoint.jsonl");
    let out = interrupt(&run_args(&dir, &[]), &checkpoint, libc::SIGINT);
    assert_eq!(out.status.code(), Some(130), "{}", stderr(&out));
    let before = std::fs::read(&checkpoint).unwrap();

    // --replications and --seed are part of the resolved scenario.
    let line = refused(&run_args(&dir, &["--resume", "--seed", "99"]));
    assert!(
        line.contains("is of another run: the resolved scenario differs (seed: "),
        "{line}"
    );
    let mut args = run_args(&dir, &["--resume"]);
    args[3] = "250";
    let line = refused(&args);
    assert!(line.contains("(replications: "), "{line}");

    // A new run over the checkpoint must say whether to continue or start again.
    let line = refused(&run_args(&dir, &[]));
    assert!(line.contains("already holds"), "{line}");
    assert!(line.contains("--resume"), "{line}");
    assert_eq!(
        std::fs::read(&checkpoint).unwrap(),
        before,
        "a refused resume changed the checkpoint"
    );
}
