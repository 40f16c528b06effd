//! Writers: turn a finished `RunReport` into bytes (CSV, JSON, terminal text) and put files in place
//! atomically. They compute nothing: every figure comes from the report.

pub mod analysis;
pub mod optimum;
pub mod tables;
pub mod terminal;

use crate::report::RunReport;
use std::path::{Path, PathBuf};

/// Files a run writes into its output directory.
pub const OUTPUT_FILES: [&str; 6] = [
    "summary.csv",
    "timeseries.csv",
    "differences.csv",
    "replications.csv",
    "group_size.csv",
    "summary.json",
];

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
    Io {
        path: String,
        reason: String,
        kind: std::io::ErrorKind,
    },
    /// The directory cannot be created or written to, found out before simulating.
    #[error("output directory {dir} cannot be written to ({reason}); choose another --out")]
    NotWritable {
        dir: String,
        reason: String,
        kind: std::io::ErrorKind,
    },
    /// The caller asked to stop before the files were put in place; none was.
    #[error("interrupted before the results were written; no file was changed")]
    Interrupted,
}

impl OutputError {
    /// Whether the user's choice of destination is at fault (a path that is not a directory, or one
    /// the user may not write to), as opposed to a failure of the machine (a full disk, an I/O error).
    pub fn is_bad_destination(&self) -> bool {
        use std::io::ErrorKind as K;
        match self {
            OutputError::WouldOverwrite { .. } | OutputError::NotADirectory(_) => true,
            OutputError::Io { kind, .. } | OutputError::NotWritable { kind, .. } => matches!(
                kind,
                K::PermissionDenied | K::ReadOnlyFilesystem | K::NotADirectory | K::InvalidFilename | K::NotFound
            ),
            OutputError::Interrupted => false,
        }
    }
}

fn not_writable(dir: &Path, e: std::io::Error) -> OutputError {
    OutputError::NotWritable {
        dir: dir.display().to_string(),
        reason: e.to_string().to_lowercase(),
        kind: e.kind(),
    }
}

fn io_error(path: &Path, e: std::io::Error) -> OutputError {
    OutputError::Io {
        path: path.display().to_string(),
        reason: e.to_string().to_lowercase(),
        kind: e.kind(),
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

/// Checks the destination, creates the directory and proves it writable by creating and removing a
/// probe file, all before any simulation: a directory that cannot hold results must not cost a
/// whole run to discover. Returns true when it created the directory (see [`abandon_destination`]).
pub fn prepare_destination(dir: &Path, force: bool) -> Result<bool, OutputError> {
    check_destination(dir, force)?;
    let created = !dir.exists();
    std::fs::create_dir_all(dir).map_err(|e| not_writable(dir, e))?;
    let probe = dir.join(format!(".loancycle-probe-{}", std::process::id()));
    let written = std::fs::OpenOptions::new()
        .write(true)
        .create_new(true)
        .open(&probe)
        .map_err(|e| not_writable(dir, e));
    let removed = match written {
        Ok(_) => std::fs::remove_file(&probe).map_err(|e| io_error(&probe, e)),
        Err(e) => Err(e),
    };
    if let Err(e) = removed {
        abandon_destination(dir, created);
        return Err(e);
    }
    Ok(created)
}

/// Removes a directory [`prepare_destination`] created, when a run ends without results and left
/// it empty; anything else is left alone.
pub fn abandon_destination(dir: &Path, created: bool) {
    if created {
        // remove_dir refuses a directory that is not empty, which is the guard wanted here.
        let _ = std::fs::remove_dir(dir);
    }
}

/// Writes summary.csv, timeseries.csv, differences.csv, replications.csv and summary.json into `dir` (created if
/// missing). `stop` is asked once every file is staged and before the first is put in place: when
/// it returns true the staged files are removed and no result changes.
pub fn write_all(
    dir: &Path,
    report: &RunReport,
    force: bool,
    stop: &dyn Fn() -> bool,
) -> Result<Vec<PathBuf>, OutputError> {
    prepare_destination(dir, force)?;
    // Render everything first so a rendering problem cannot leave a partial set of files; the
    // long per-replication table is streamed into its temporary file instead of held in memory.
    let mut files = vec![
        ("summary.csv", Some(tables::summary_csv(report))),
        ("timeseries.csv", Some(tables::timeseries_csv(report))),
        ("differences.csv", Some(tables::differences_csv(report))),
        ("replications.csv", None),
    ];
    let group_size = tables::group_size_csv(report);
    let with_group_size = group_size.is_some();
    if let Some(bytes) = group_size {
        files.push(("group_size.csv", Some(bytes)));
    }
    files.push(("summary.json", Some(tables::summary_json(report))));
    // All temporary files first; only when every one is complete are they renamed into place.
    let mut staged: Vec<(PathBuf, &str)> = Vec::new();
    for (name, bytes) in &files {
        let tmp = dir.join(format!(".{name}.partial-{}", std::process::id()));
        let written = match bytes {
            Some(bytes) => std::fs::write(&tmp, bytes),
            None => std::fs::File::create(&tmp).and_then(|f| {
                let mut out = std::io::BufWriter::new(f);
                tables::write_replications_csv(&mut out, report)?;
                out.into_inner().map(drop).map_err(|e| e.into_error())
            }),
        };
        if let Err(e) = written {
            let _ = std::fs::remove_file(&tmp);
            for (p, _) in &staged {
                let _ = std::fs::remove_file(p);
            }
            return Err(io_error(&tmp, e));
        }
        staged.push((tmp, *name));
    }
    if stop() {
        for (p, _) in &staged {
            let _ = std::fs::remove_file(p);
        }
        return Err(OutputError::Interrupted);
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
    if !with_group_size {
        // An earlier run's table (replaced with --force) must not sit beside this run's files.
        let stale = dir.join("group_size.csv");
        if stale.exists() {
            std::fs::remove_file(&stale).map_err(|e| io_error(&stale, e))?;
        }
    }
    Ok(written)
}

/// Replaces DIR/NAME with `bytes`: written under a temporary name, then renamed, so the file is
/// either the old one or the whole new one.
pub fn replace_file(dir: &Path, name: &str, bytes: &[u8]) -> Result<PathBuf, OutputError> {
    let tmp = dir.join(format!(".{name}.partial-{}", std::process::id()));
    let final_path = dir.join(name);
    if let Err(e) = std::fs::write(&tmp, bytes) {
        let _ = std::fs::remove_file(&tmp);
        return Err(io_error(&tmp, e));
    }
    std::fs::rename(&tmp, &final_path).map_err(|e| {
        let _ = std::fs::remove_file(&tmp);
        io_error(&final_path, e)
    })?;
    Ok(final_path)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn an_unwritable_existing_directory_is_found_before_any_work() {
        // sysfs refuses new files even to root, so this holds for any user on Linux.
        let dir = Path::new("/sys/kernel");
        if !dir.is_dir() {
            return;
        }
        let e = prepare_destination(dir, false).unwrap_err();
        assert!(matches!(e, OutputError::NotWritable { .. }), "{e}");
        assert!(e.is_bad_destination(), "{e}");
        assert!(e.to_string().contains("/sys/kernel"), "{e}");
    }

    #[test]
    fn a_writable_directory_passes_and_keeps_no_probe() {
        let tmp = tempfile::tempdir().unwrap();
        let dir = tmp.path().join("fresh");
        assert!(prepare_destination(&dir, false).unwrap());
        assert_eq!(std::fs::read_dir(&dir).unwrap().count(), 0);
        assert!(!prepare_destination(&dir, false).unwrap());
        abandon_destination(&dir, true);
        assert!(!dir.exists());
    }

    #[test]
    fn a_full_disk_is_a_failure_while_running_not_bad_input() {
        let full = io_error(Path::new("x"), std::io::Error::from(std::io::ErrorKind::StorageFull));
        assert!(!full.is_bad_destination());
        let denied = not_writable(
            Path::new("x"),
            std::io::Error::from(std::io::ErrorKind::PermissionDenied),
        );
        assert!(denied.is_bad_destination());
    }
}
