//! Sharded runs: `run --shard I/N` then `merge` writes the very files one unsharded run writes, and
//! shards that do not make up one run are refused, one line each, with exit code 2.

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

const TINY: &str = "tests/data/cli/tiny.toml";

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

fn loancycle(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_loancycle"))
        .args(args)
        .current_dir(root())
        .output()
        .expect("the loancycle binary starts")
}

fn ok(args: &[&str]) {
    let out = loancycle(args);
    assert!(
        out.status.success(),
        "{args:?}: {:?}\n{}",
        out.status,
        String::from_utf8_lossy(&out.stderr)
    );
}

/// Runs `args`, expects exit 2 and one line on stderr, and returns that line.
fn refused(args: &[&str]) -> String {
    let out = loancycle(args);
    let stderr = String::from_utf8(out.stderr).expect("UTF-8");
    assert_eq!(out.status.code(), Some(2), "{args:?}: {stderr}");
    assert_eq!(stderr.lines().count(), 1, "{args:?}: not one line: {stderr}");
    stderr
}

fn s(p: &Path) -> &str {
    p.to_str().expect("temporary paths are UTF-8")
}

fn files(dir: &Path) -> Vec<String> {
    let mut names: Vec<String> = std::fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    names.sort();
    names
}

/// Shards of the tiny scenario at 7 replications, `count` of them into `dir` (one directory for all,
/// as array tasks sharing a directory write them).
fn shards(dir: &Path, scenario: &str, count: u32, extra: &[&str]) {
    shards_of(dir, scenario, "7", count, extra);
}

/// As [`shards`], at `replications` replications.
fn shards_of(dir: &Path, scenario: &str, replications: &str, count: u32, extra: &[&str]) {
    for i in 1..=count {
        let shard = format!("{i}/{count}");
        let mut args = vec![
            "run",
            scenario,
            "--replications",
            replications,
            "--shard",
            &shard,
            "--out",
            s(dir),
            "--quiet",
        ];
        args.extend(extra);
        ok(&args);
    }
}

/// Every CSV is byte-identical to the unsharded run, and summary.json differs only in the field
/// that records the scenario's path as typed. The shards are run with the path spelt differently,
/// with a baseline other than the first arm, and merged from one directory and from several.
#[test]
fn merged_shards_are_byte_identical_to_one_run() {
    let tmp = tempfile::tempdir().unwrap();
    let full = tmp.path().join("full");
    ok(&[
        "run",
        TINY,
        "--replications",
        "7",
        "--baseline",
        "2",
        "--out",
        s(&full),
        "--quiet",
    ]);
    let together = tmp.path().join("together");
    let spelt = format!("./{TINY}");
    shards(&together, &spelt, 3, &["--baseline", "2", "--threads", "1"]);
    assert_eq!(
        files(&together),
        ["shard-1-of-3.jsonl", "shard-2-of-3.jsonl", "shard-3-of-3.jsonl"]
    );
    let merged = tmp.path().join("merged");
    ok(&["merge", s(&together), "--out", s(&merged), "--quiet"]);
    assert_eq!(files(&merged), files(&full));
    for name in files(&full) {
        let a = std::fs::read(full.join(&name)).unwrap();
        let b = std::fs::read(merged.join(&name)).unwrap();
        if name == "summary.json" {
            let a = String::from_utf8(a).unwrap();
            let b = String::from_utf8(b).unwrap();
            let typed = format!("\"scenario_origin\": \"{TINY}\"");
            assert!(a.contains(&typed), "{a}");
            assert_eq!(a.replace(&typed, &format!("\"scenario_origin\": \"{spelt}\"")), b);
        } else {
            assert!(a == b, "{name} differs between the merged shards and one run");
        }
    }

    // One directory per shard, given in any order, merges to the same files.
    let mut dirs = Vec::new();
    for i in 1..=3u32 {
        let dir = tmp.path().join(format!("part{i}"));
        ok(&[
            "run",
            TINY,
            "--replications",
            "7",
            "--baseline",
            "2",
            "--shard",
            &format!("{i}/3"),
            "--out",
            s(&dir),
            "--quiet",
        ]);
        dirs.push(dir);
    }
    let apart = tmp.path().join("apart");
    ok(&[
        "merge",
        s(&dirs[2]),
        s(&dirs[0]),
        s(&dirs[1]),
        "--out",
        s(&apart),
        "--quiet",
    ]);
    for name in files(&full) {
        assert!(
            std::fs::read(full.join(&name)).unwrap() == std::fs::read(apart.join(&name)).unwrap(),
            "{name} differs"
        );
    }
}

/// Shards of more than 1,024 replications are read back and merged through files of replications
/// kept on disk (`stats::replication_list`), one shard at a time: the merge still writes every
/// file of one run, byte for byte, and leaves nothing beside the shards.
#[test]
fn shards_merged_through_replications_on_disk_are_byte_identical_to_one_run() {
    let tmp = tempfile::tempdir().unwrap();
    let full = tmp.path().join("full");
    ok(&["run", TINY, "--replications", "2600", "--out", s(&full), "--quiet"]);
    let parts = tmp.path().join("parts");
    shards_of(&parts, TINY, "2600", 2, &[]);
    let merged = tmp.path().join("merged");
    ok(&["merge", s(&parts), "--out", s(&merged), "--quiet"]);
    assert_eq!(files(&merged), files(&full));
    for name in files(&full) {
        assert!(
            std::fs::read(full.join(&name)).unwrap() == std::fs::read(merged.join(&name)).unwrap(),
            "{name} differs between the merged shards and one run"
        );
    }
    assert_eq!(files(&parts), ["shard-1-of-2.jsonl", "shard-2-of-2.jsonl"]);
}

/// Missing, duplicate and incomplete shards, other shard counts, versions and scenarios are each
/// refused with a message saying which.
#[test]
fn shards_that_do_not_make_one_run_are_refused() {
    let tmp = tempfile::tempdir().unwrap();
    let three = tmp.path().join("three");
    shards(&three, TINY, 3, &[]);
    let out = tmp.path().join("out");
    let out = s(&out);

    let partial = tmp.path().join("partial");
    std::fs::create_dir(&partial).unwrap();
    for i in [1, 3] {
        let name = format!("shard-{i}-of-3.jsonl");
        std::fs::copy(three.join(&name), partial.join(&name)).unwrap();
    }
    let line = refused(&["merge", s(&partial), "--out", out]);
    assert!(line.contains("shard 2 of 3 missing"), "{line}");

    let line = refused(&["merge", s(&three), s(&partial), "--out", out]);
    assert!(line.contains("shard 1/3 appears twice"), "{line}");

    let two = tmp.path().join("two");
    shards(&two, TINY, 2, &[]);
    std::fs::copy(two.join("shard-1-of-2.jsonl"), partial.join("shard-1-of-2.jsonl")).unwrap();
    let line = refused(&["merge", s(&partial), "--out", out]);
    assert!(line.contains("is shard 1 of 2") || line.contains("but"), "{line}");
    assert!(line.contains("merge shards of one split"), "{line}");

    // Another seed: the same file, a different resolved scenario.
    let seeded = tmp.path().join("seeded");
    shards(&seeded, TINY, 3, &["--seed", "7"]);
    std::fs::copy(seeded.join("shard-2-of-3.jsonl"), partial.join("shard-2-of-3.jsonl")).unwrap();
    std::fs::remove_file(partial.join("shard-1-of-2.jsonl")).unwrap();
    let line = refused(&["merge", s(&partial), "--out", out]);
    assert!(
        line.contains("resolved scenario differs (seed: 4242 here, 7 there)"),
        "{line}"
    );

    // Another version of the tool.
    let text = std::fs::read_to_string(three.join("shard-2-of-3.jsonl")).unwrap();
    let version = format!("\"loancycle {}\"", env!("CARGO_PKG_VERSION"));
    assert!(text.contains(&version));
    std::fs::write(
        partial.join("shard-2-of-3.jsonl"),
        text.replacen(&version, "\"loancycle 99.0.0\"", 1),
    )
    .unwrap();
    let line = refused(&["merge", s(&partial), "--out", out]);
    assert!(line.contains("written by loancycle 99.0.0"), "{line}");

    // A shard whose last batch is missing (as a checkpoint cut short would be).
    let lines: Vec<&str> = text.lines().collect();
    assert!(lines.len() >= 2, "a shard holds a header and at least one batch");
    std::fs::write(partial.join("shard-2-of-3.jsonl"), format!("{}\n", lines[0])).unwrap();
    let line = refused(&["merge", s(&partial), "--out", out]);
    assert!(line.contains("shard 2/3 is incomplete (0 of its"), "{line}");

    // Not a shard at all.
    std::fs::write(partial.join("shard-2-of-3.jsonl"), "replications = 3\n").unwrap();
    let line = refused(&["merge", s(&partial), "--out", out]);
    assert!(
        line.contains("shard-2-of-3.jsonl: line 1: not a loancycle tally file"),
        "{line}"
    );

    let empty = tmp.path().join("empty");
    std::fs::create_dir(&empty).unwrap();
    let line = refused(&["merge", s(&empty), "--out", out]);
    assert!(line.contains("holds no shard file"), "{line}");
    assert!(!Path::new(out).exists(), "a refused merge wrote {out}");

    let line = refused(&["run", TINY, "--shard", "3/2", "--out", out]);
    assert!(line.contains("--shard = \"3/2\" is not allowed"), "{line}");
    let line = refused(&["run", TINY, "--shard", "1/3", "--out", out]);
    assert!(line.contains("3 shards for 2 replications"), "{line}");
}

/// With more replication-cycles than the per-cycle loss tail keeps (500 replications x 5 counted
/// cycles = 2,500 values per arm, of which the tail keeps ceil(2% x 2,500) + 2,048 = 2,098), each
/// shard keeps only its own largest values, and the merge still gives the per-cycle quantiles and
/// every other figure of one run, byte for byte.
#[test]
fn shards_merge_exactly_when_the_loss_tail_keeps_only_the_top() {
    let tmp = tempfile::tempdir().unwrap();
    let full = tmp.path().join("full");
    ok(&["run", TINY, "--replications", "500", "--out", s(&full), "--quiet"]);
    let parts = tmp.path().join("parts");
    for i in 1..=3 {
        ok(&[
            "run",
            TINY,
            "--replications",
            "500",
            "--shard",
            &format!("{i}/3"),
            "--threads",
            "1",
            "--out",
            s(&parts),
            "--quiet",
        ]);
    }
    let merged = tmp.path().join("merged");
    ok(&["merge", s(&parts), "--out", s(&merged), "--quiet"]);
    for name in ["summary.csv", "timeseries.csv", "replications.csv", "differences.csv"] {
        let a = std::fs::read(full.join(name)).unwrap();
        let b = std::fs::read(merged.join(name)).unwrap();
        assert!(a == b, "{name} differs between the merged shards and one run");
    }
    let summary = std::fs::read_to_string(full.join("summary.csv")).unwrap();
    let header: Vec<&str> = summary.lines().next().unwrap().split(',').collect();
    let column = header.iter().position(|h| *h == "loss_cycle_p99").unwrap();
    let row: Vec<&str> = summary.lines().nth(1).unwrap().split(',').collect();
    assert!(
        !row[column].is_empty(),
        "the per-cycle 99% quantile is read from the tail"
    );
}
