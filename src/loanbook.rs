//! Synthetic loan books (`run --loan-book FILE`): one simulated replication of every arm, written
//! in the CSV format `loancycle fit` reads, so that the fit can be checked against a known model and
//! demos have records to fit.
//!
//! Each arm is simulated once from streams keyed by (seed, arm), so every arm's villages are
//! independent (a book with several group sizes has independent villages per size) and the run's
//! replications are untouched: writing a book changes no other output. Arm N's villages are named
//! `aN-vM` (both counted from 1, arms in the order `loancycle check` lists them). Rows stream to a
//! temporary file beside the destination, which is renamed only once the book is complete, so a
//! failed or interrupted run never leaves a half-written book.

use crate::engine::book::{LoanBookSink, LoanRecord};
use crate::engine::simulate_replication_with_book;
use crate::scenario::Scenario;
use std::fs::File;
use std::io::{self, BufWriter, Write};
use std::path::{Path, PathBuf};

/// The header of a synthetic loan book: the fit's required columns and `own_paid`.
pub const HEADER: &str = "cycle,village,group,member,due,paid,own_paid";

/// Why a loan book could not be written.
#[derive(Debug, thiserror::Error)]
pub enum LoanBookError {
    /// The destination cannot take the book (bad input: nothing was simulated).
    #[error("--loan-book {path}: {reason}")]
    Destination {
        /// The destination as given.
        path: String,
        /// What is wrong with it.
        reason: String,
    },
    /// Writing failed while running (a full disk, a vanished directory).
    #[error("cannot write the loan book {path}: {reason}")]
    Write {
        /// The file being written.
        path: String,
        /// The operating system's reason.
        reason: String,
    },
    /// The caller asked the run to stop before the book was complete.
    #[error("interrupted before the loan book was complete")]
    Interrupted,
}

impl LoanBookError {
    /// Whether the error is bad input (exit 2) rather than a failure while running.
    pub fn is_bad_input(&self) -> bool {
        matches!(self, LoanBookError::Destination { .. })
    }
}

/// Refuses a destination that is a directory, lies in a missing directory, or holds a file that
/// `force` does not allow to replace. Checked before any simulation.
pub fn check_destination(path: &Path, force: bool) -> Result<(), LoanBookError> {
    let bad = |reason: &str| LoanBookError::Destination {
        path: path.display().to_string(),
        reason: reason.to_string(),
    };
    if path.is_dir() {
        return Err(bad("is a directory; give a file name"));
    }
    if path.file_name().is_none() {
        return Err(bad("has no file name"));
    }
    let parent = parent_dir(path);
    if !parent.is_dir() {
        return Err(bad("its directory does not exist"));
    }
    if path.exists() && !force {
        return Err(bad("exists; use --force to replace it"));
    }
    // An unwritable directory is found now, before any work, not after the simulation.
    let probe = temporary_name(path, "probe");
    File::create(&probe).map_err(|e| bad(&format!("its directory is not writable: {e}")))?;
    let _ = std::fs::remove_file(&probe);
    Ok(())
}

/// A hidden name beside `path` for a file of this process (`.NAME.partial-PID` while staging).
fn temporary_name(path: &Path, what: &str) -> PathBuf {
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    parent_dir(path).join(format!(".{name}.{what}-{}", std::process::id()))
}

/// The directory a file path lives in (the working directory for a bare name).
fn parent_dir(path: &Path) -> &Path {
    match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p,
        _ => Path::new("."),
    }
}

/// Writes the loan book of `scenario` to `out`: the header, then every loan of the counted cycles
/// of one simulation of each arm, arm by arm. `stop` is asked before each arm. Returns the rows
/// written.
pub fn write_loan_book(scenario: &Scenario, out: &mut dyn Write, stop: &dyn Fn() -> bool) -> io::Result<u64> {
    writeln!(out, "{HEADER}")?;
    let mut rows = 0u64;
    for arm in 0..scenario.arms().len() {
        if stop() {
            return Err(io::Error::new(io::ErrorKind::Interrupted, "stopped"));
        }
        let mut sink = CsvSink::new(&mut *out, arm + 1);
        simulate_replication_with_book(scenario, arm, &mut sink);
        if let Some(e) = sink.error {
            return Err(e);
        }
        rows += sink.rows;
    }
    out.flush()?;
    Ok(rows)
}

/// A loan book written in full under a temporary name, waiting for [`StagedBook::commit`]. Dropped
/// without a commit, it removes its temporary file.
#[derive(Debug)]
pub struct StagedBook {
    temporary: PathBuf,
    path: PathBuf,
    /// Rows written (loans, header excluded).
    pub rows: u64,
    committed: bool,
}

impl StagedBook {
    /// Renames the book into place and returns its path.
    pub fn commit(mut self) -> Result<PathBuf, LoanBookError> {
        std::fs::rename(&self.temporary, &self.path).map_err(|e| write_error(&self.path, &e))?;
        self.committed = true;
        Ok(self.path.clone())
    }
}

impl Drop for StagedBook {
    fn drop(&mut self) {
        if !self.committed {
            let _ = std::fs::remove_file(&self.temporary);
        }
    }
}

fn write_error(path: &Path, e: &io::Error) -> LoanBookError {
    LoanBookError::Write {
        path: path.display().to_string(),
        reason: e.to_string(),
    }
}

/// Simulates and writes the loan book of `scenario` under a temporary name beside `path`, synced to
/// disk; [`StagedBook::commit`] puts it in place. The caller stages the book before writing its
/// other results and commits it after them, so a run leaves all its files or none.
pub fn stage(scenario: &Scenario, path: &Path, stop: &dyn Fn() -> bool) -> Result<StagedBook, LoanBookError> {
    let temporary = temporary_name(path, "partial");
    let mut staged = StagedBook {
        temporary,
        path: path.to_path_buf(),
        rows: 0,
        committed: false,
    };
    let file = File::create(&staged.temporary).map_err(|e| write_error(&staged.temporary, &e))?;
    let mut out = BufWriter::with_capacity(1 << 16, file);
    staged.rows = match write_loan_book(scenario, &mut out, stop) {
        Ok(rows) => rows,
        Err(e) if e.kind() == io::ErrorKind::Interrupted => return Err(LoanBookError::Interrupted),
        Err(e) => return Err(write_error(&staged.temporary, &e)),
    };
    let file = out
        .into_inner()
        .map_err(|e| write_error(&staged.temporary, e.error()))?;
    file.sync_all().map_err(|e| write_error(&staged.temporary, &e))?;
    Ok(staged)
}

/// Formats loans as CSV rows; keeps the first write error and drops later rows.
struct CsvSink<'w> {
    out: &'w mut dyn Write,
    /// Arm number, from 1.
    arm: usize,
    rows: u64,
    error: Option<io::Error>,
    /// The amount due last seen and its text: most loans are paid in full, so most amounts are
    /// written from this cache instead of being formatted again.
    due: f64,
    due_text: String,
    /// The row being built, reused.
    line: String,
}

impl<'w> CsvSink<'w> {
    fn new(out: &'w mut dyn Write, arm: usize) -> Self {
        CsvSink {
            out,
            arm,
            rows: 0,
            error: None,
            due: f64::NAN,
            due_text: String::new(),
            line: String::with_capacity(128),
        }
    }
}

impl LoanBookSink for CsvSink<'_> {
    fn loan(&mut self, loan: &LoanRecord) {
        use std::fmt::Write as _;
        if self.error.is_some() {
            return;
        }
        if loan.due != self.due {
            self.due = loan.due;
            self.due_text.clear();
            push_amount(&mut self.due_text, loan.due);
        }
        let (a, v) = (self.arm, loan.village + 1);
        let line = &mut self.line;
        line.clear();
        let _ = write!(
            line,
            "{},a{a}-v{v},a{a}-v{v}-g{},a{a}-m{}-{}",
            loan.cycle,
            loan.group + 1,
            loan.slot + 1,
            loan.entrant + 1
        );
        for x in [loan.due, loan.paid, loan.own_paid] {
            line.push(',');
            if x == self.due {
                line.push_str(&self.due_text);
            } else {
                push_amount(line, x);
            }
        }
        line.push('\n');
        match self.out.write_all(line.as_bytes()) {
            Ok(()) => self.rows += 1,
            Err(e) => self.error = Some(e),
        }
    }
}

/// Appends an amount written to six decimals without trailing zeros (`108`, `64.8`, `37.123457`):
/// far finer than the fit's rounding allowance of 0.005 per loan, so no outcome changes, and
/// without the binary noise of a full-precision float (`108.00000000000001`).
fn push_amount(text: &mut String, x: f64) {
    use std::fmt::Write as _;
    let start = text.len();
    let _ = write!(text, "{x:.6}");
    while text.ends_with('0') && text.len() > start + 1 && text[start..].contains('.') {
        text.pop();
    }
    if text.ends_with('.') {
        text.pop();
    }
    if &text[start..] == "-0" {
        text.truncate(start);
        text.push('0');
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn amounts_are_short_and_exact_to_six_decimals() {
        let show = |x: f64| {
            let mut text = String::from("x");
            push_amount(&mut text, x);
            text[1..].to_string()
        };
        assert_eq!(show(108.00000000000001), "108");
        assert_eq!(show(64.8), "64.8");
        assert_eq!(show(37.1234567), "37.123457");
        assert_eq!(show(0.0), "0");
        assert_eq!(show(1e-9), "0");
        assert_eq!(show(100.0), "100");
        assert_eq!(show(2.5e-7), "0");
    }

    #[test]
    fn a_missing_directory_or_an_existing_file_is_refused() {
        let dir = tempfile::tempdir().unwrap();
        let missing = dir.path().join("nowhere").join("book.csv");
        assert!(check_destination(&missing, false).unwrap_err().is_bad_input());
        assert!(check_destination(dir.path(), true).is_err());
        let existing = dir.path().join("book.csv");
        std::fs::write(&existing, "x").unwrap();
        assert!(check_destination(&existing, false).is_err());
        assert!(check_destination(&existing, true).is_ok());
        assert!(check_destination(&dir.path().join("new.csv"), false).is_ok());
    }
}
