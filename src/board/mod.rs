//! The board report: one self-contained HTML page with charts, built from a finished run directory.
//!
//! A run's CSV files serve people who analyse; an evaluator presenting to a lender's board, or a
//! risk officer attaching results to a memo, needs the same figures as pictures that open anywhere.
//! This module reads the run's own files (it simulates nothing and re-estimates nothing), draws the
//! charts with plotters' SVG backend, and writes DIR/report.html (every chart inline, no script, no
//! network reference) plus each chart as DIR/charts/NAME.svg. All files are staged under temporary
//! names and renamed at the end, so a failure never leaves a half-written report.

mod charts;
mod html;
pub mod input;
mod style;

use std::fmt;
use std::path::{Path, PathBuf};

pub use charts::Chart;
pub use input::{RunData, read_run};

/// Why a report could not be built: bad input (a missing or malformed run file) or a failed write.
#[derive(Debug)]
pub enum BoardError {
    /// A run file is missing or malformed; the fields locate the problem as precisely as known.
    Input {
        /// The file (or directory) at fault.
        path: PathBuf,
        /// 1-based line, when known.
        line: Option<u64>,
        /// Column name, when the problem is one cell or a missing column.
        column: Option<String>,
        /// The offending value, when there is one.
        value: Option<String>,
        /// What is wrong.
        message: String,
    },
    /// Writing the report failed.
    Write {
        /// The file being written.
        path: PathBuf,
        /// The system's reason.
        source: std::io::Error,
    },
    /// The plotting library refused to draw (not expected with an in-memory SVG backend).
    Render(String),
}

impl BoardError {
    pub(crate) fn input(
        path: &Path,
        line: Option<u64>,
        column: Option<&str>,
        value: Option<&str>,
        message: &str,
    ) -> Self {
        BoardError::Input {
            path: path.to_path_buf(),
            line,
            column: column.map(str::to_string),
            value: value.map(str::to_string),
            message: message.to_string(),
        }
    }
}

impl fmt::Display for BoardError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            BoardError::Input {
                path,
                line,
                column,
                value,
                message,
            } => {
                write!(f, "{}", path.display())?;
                if let Some(l) = line {
                    write!(f, " line {l}")?;
                }
                if let Some(c) = column {
                    write!(f, ", column {c}")?;
                }
                if let Some(v) = value {
                    write!(f, ", value \"{v}\"")?;
                }
                write!(f, ": {message}")
            }
            BoardError::Write { path, source } => write!(f, "cannot write {}: {source}", path.display()),
            BoardError::Render(m) => write!(f, "cannot draw a chart: {m}"),
        }
    }
}

impl std::error::Error for BoardError {}

impl<E: std::error::Error + Send + Sync> From<plotters::drawing::DrawingAreaErrorKind<E>> for BoardError {
    fn from(e: plotters::drawing::DrawingAreaErrorKind<E>) -> Self {
        BoardError::Render(e.to_string())
    }
}

impl BoardError {
    /// True for bad input (exit code 2), false for a failure to write or draw.
    pub fn is_bad_input(&self) -> bool {
        matches!(self, BoardError::Input { .. })
    }
}

/// A rendered report, held in memory until it is written.
pub struct Report {
    /// The whole HTML page.
    pub html: String,
    /// Every chart, in page order.
    pub charts: Vec<Chart>,
}

/// Reads the run in `dir` and renders the report in memory, writing nothing.
pub fn render(dir: &Path) -> Result<Report, BoardError> {
    let data = read_run(dir)?;
    let charts = charts::all(&data)?;
    let html = html::page(&data, &charts);
    Ok(Report { html, charts })
}

/// Renders the report of the run in `dir` and writes DIR/report.html and DIR/charts/NAME.svg.
///
/// Returns the paths written, report.html last. Every file is first written under a temporary
/// name; the renames happen only once all of them are complete.
pub fn write_report(dir: &Path) -> Result<Vec<PathBuf>, BoardError> {
    let report = render(dir)?;
    let charts_dir = dir.join("charts");
    std::fs::create_dir_all(&charts_dir).map_err(|source| BoardError::Write {
        path: charts_dir.clone(),
        source,
    })?;
    let mut staged: Vec<(PathBuf, PathBuf)> = Vec::new();
    let mut files: Vec<(PathBuf, &str)> = report
        .charts
        .iter()
        .map(|c| (charts_dir.join(format!("{}.svg", c.name)), c.svg.as_str()))
        .collect();
    files.push((dir.join("report.html"), report.html.as_str()));
    for (path, content) in &files {
        let name = path
            .file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_default();
        let tmp = path.with_file_name(format!(".{name}.partial"));
        if let Err(source) = std::fs::write(&tmp, content) {
            for (t, _) in &staged {
                let _ = std::fs::remove_file(t);
            }
            let _ = std::fs::remove_file(&tmp);
            return Err(BoardError::Write { path: tmp, source });
        }
        staged.push((tmp, path.clone()));
    }
    for (tmp, path) in &staged {
        std::fs::rename(tmp, path).map_err(|source| BoardError::Write {
            path: path.clone(),
            source,
        })?;
    }
    Ok(staged.into_iter().map(|(_, p)| p).collect())
}
