//! Writers: turn a finished `RunReport` into bytes (CSV, JSON, terminal text) and put files in place
//! atomically. They compute nothing: every figure comes from the report.

pub mod tables;
pub mod terminal;

use crate::report::RunReport;
use std::path::{Path, PathBuf};

/// Files a run writes into its output directory.
pub const OUTPUT_FILES: [&str; 4] = ["summary.csv", "timeseries.csv", "differences.csv", "summary.json"];

/// Why outputs could not be written.
#[derive(Debug, thiserror::Error)]
pub enum OutputError {
    /// The directory already holds results and `--force` was not given.
    #[error(
        "output directory {dir} already holds results ({file}); choose another --out or pass --force to replace them"
    )]
    WouldOverwrite { dir: String, file: String },
    /// The path exists and is not a directory.
    #[error("output path {0} exists and is not a directory")]
    NotADirectory(String),
    /// A filesystem operation failed.
    #[error("cannot write {path}: {reason}")]
    Io { path: String, reason: String },
}

fn io_error(path: &Path, e: std::io::Error) -> OutputError {
    OutputError::Io {
        path: path.display().to_string(),
        reason: e.to_string().to_lowercase(),
    }
}

/// Checks, before any simulation, that results may be written to `dir`.
pub fn check_destination(dir: &Path, force: bool) -> Result<(), OutputError> {
    if dir.exists() && !dir.is_dir() {
        return Err(OutputError::NotADirectory(dir.display().to_string()));
    }
    if !force {
        for name in OUTPUT_FILES {
            if dir.join(name).exists() {
                return Err(OutputError::WouldOverwrite {
                    dir: dir.display().to_string(),
                    file: name.to_string(),
                });
            }
        }
    }
    Ok(())
}

/// Checks the destination and creates the directory, before any simulation, so a path that cannot
/// hold results (e.g. below a regular file) is refused before work is spent.
pub fn prepare_destination(dir: &Path, force: bool) -> Result<(), OutputError> {
    check_destination(dir, force)?;
    std::fs::create_dir_all(dir).map_err(|e| io_error(dir, e))
}

/// Writes summary.csv, timeseries.csv, differences.csv and summary.json into `dir` (created if missing).
pub fn write_all(dir: &Path, report: &RunReport, force: bool) -> Result<Vec<PathBuf>, OutputError> {
    prepare_destination(dir, force)?;
    // Render everything first so a rendering problem cannot leave a partial set of files.
    let files = [
        ("summary.csv", tables::summary_csv(report)),
        ("timeseries.csv", tables::timeseries_csv(report)),
        ("differences.csv", tables::differences_csv(report)),
        ("summary.json", tables::summary_json(report)),
    ];
    // All temporary files first; only when every one is complete are they renamed into place.
    let mut staged: Vec<(PathBuf, &str)> = Vec::new();
    for (name, bytes) in &files {
        let tmp = dir.join(format!(".{name}.partial-{}", std::process::id()));
        if let Err(e) = std::fs::write(&tmp, bytes) {
            let _ = std::fs::remove_file(&tmp);
            for (p, _) in &staged {
                let _ = std::fs::remove_file(p);
            }
            return Err(io_error(&tmp, e));
        }
        staged.push((tmp, *name));
    }
    let mut written = Vec::new();
    for (tmp, name) in &staged {
        let final_path = dir.join(name);
        if let Err(e) = std::fs::rename(tmp, &final_path) {
            // Never leave a mix of two runs' files: remove this run's and the earlier ones.
            for (t, n) in &staged {
                let _ = std::fs::remove_file(t);
                let _ = std::fs::remove_file(dir.join(n));
            }
            return Err(io_error(&final_path, e));
        }
        written.push(final_path);
    }
    Ok(written)
}
