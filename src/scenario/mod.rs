//! Scenario files: the TOML format, its validation, and the validated `Scenario` the engine accepts.
//!
//! Parsing goes through a serde mirror of the file (`raw`) that refuses unknown fields; `validate`
//! then checks every number once and resolves the sweep into arms, so no other module re-checks input.

mod model;
mod raw;
mod validate;

pub use model::*;

use std::path::Path;

/// Engine limits that keep every random stream identifier unique (see `engine::streams`).
pub mod limits {
    /// Most shocks a scenario may declare.
    pub const MAX_SHOCKS: usize = 255;
    /// Most cycles (warm-up plus counted) per replication.
    pub const MAX_TOTAL_CYCLES: u32 = (1 << 24) - 1;
    /// Most borrower slots: far above any lender's portfolio, and well inside the 28 bits the stream
    /// identifiers give villages and slots.
    pub const MAX_BORROWERS: u32 = 10_000_000;
    /// Most per-cycle records a run may keep (replications x counted cycles x arms), about 40 bytes
    /// each: 250 million is 10 GB.
    pub const MAX_CYCLE_RECORDS: u64 = 250_000_000;
    /// Most arms a sweep may resolve to.
    pub const MAX_ARMS: usize = 10_000;
}

/// An invalid scenario: names the file, the field path, the value and what is allowed.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ScenarioError {
    /// The file could not be read.
    #[error("{file}: cannot read the scenario file: {reason}")]
    Unreadable { file: String, reason: String },
    /// The text is not valid TOML, or a field has the wrong type or is unknown.
    #[error("{file}: {location}{message}")]
    Syntax {
        file: String,
        location: String,
        message: String,
    },
    /// A field's value is outside what is allowed.
    #[error("{file}: {field} = {value} is not allowed: {allowed}")]
    Invalid {
        file: String,
        field: String,
        value: String,
        allowed: String,
    },
}

impl Scenario {
    /// Parses and validates scenario text; `origin` names the file in error messages.
    pub fn from_toml_str(text: &str, origin: &str) -> Result<Scenario, ScenarioError> {
        let raw = raw::parse(text, origin)?;
        validate::validate(raw, origin)
    }

    /// Reads, parses and validates a scenario file.
    pub fn load(path: &Path) -> Result<(Scenario, String), ScenarioError> {
        let origin = path.display().to_string();
        let text = std::fs::read_to_string(path).map_err(|e| ScenarioError::Unreadable {
            file: origin.clone(),
            reason: e.to_string().to_lowercase(),
        })?;
        let scenario = Scenario::from_toml_str(&text, &origin)?;
        Ok((scenario, text))
    }
}
