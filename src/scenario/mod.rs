//! Scenario files: the TOML format, its validation, and the validated `Scenario` the engine accepts.
//!
//! Parsing goes through a serde mirror of the file (`raw`) that keeps each value's span and refuses
//! wrong types and unknown fields; command-line overrides are put into that mirror; `validate` then
//! checks every value once against the bounds table (`bounds`) and resolves the sweep (`sweep`) into
//! arms, each carrying its full model, so no other module re-checks input.

mod bounds;
mod model;
mod raw;
mod sweep;
mod validate;

pub use model::*;
pub use validate::curve_from_flags;

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
    /// A field's value is outside what is allowed. `field` is the field's path, `sweep.PATH[i]` for
    /// a swept value, or the flag (`--replications`) for a command-line override.
    #[error("{file}: {}{value} is not allowed: {allowed}", invalid_location(*line, field))]
    Invalid {
        file: String,
        line: Option<usize>,
        field: String,
        value: String,
        allowed: String,
    },
}

fn invalid_location(line: Option<usize>, field: &str) -> String {
    if field.starts_with("--") {
        format!("option {field}: ")
    } else {
        raw::location(line, field)
    }
}

/// Command-line overrides, put into the scenario as written before validation (so a bad one is
/// refused like a bad field, naming its flag).
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct Overrides {
    /// `--replications`.
    pub replications: Option<u32>,
    /// `--seed`.
    pub seed: Option<u64>,
}

impl Overrides {
    fn apply(&self, raw: &mut raw::RawScenario) {
        use raw::{Int, Origin, W};
        if let Some(r) = self.replications {
            raw.replications = Some(W {
                value: Int(i64::from(r)),
                origin: Origin::Flag {
                    flag: "--replications",
                    text: r.to_string(),
                },
            });
        }
        if let Some(s) = self.seed {
            raw.seed = Some(W {
                // Above i64::MAX the seed is refused, quoting the flag's argument.
                value: Int(i64::try_from(s).unwrap_or(-1)),
                origin: Origin::Flag {
                    flag: "--seed",
                    text: s.to_string(),
                },
            });
        }
    }
}

impl Scenario {
    /// Parses and validates scenario text; `origin` names the file in error messages.
    pub fn from_toml_str(text: &str, origin: &str) -> Result<Scenario, ScenarioError> {
        Scenario::from_toml_str_with(text, origin, &Overrides::default())
    }

    /// Parses scenario text, applies command-line overrides, and validates the result.
    pub fn from_toml_str_with(text: &str, origin: &str, overrides: &Overrides) -> Result<Scenario, ScenarioError> {
        let mut raw = raw::parse(text, origin)?;
        overrides.apply(&mut raw);
        validate::validate(raw, text, origin)
    }

    /// Reads, parses and validates a scenario file.
    pub fn load(path: &Path) -> Result<(Scenario, String), ScenarioError> {
        Scenario::load_with(path, &Overrides::default())
    }

    /// Reads a scenario file, applies command-line overrides, and validates the result.
    pub fn load_with(path: &Path, overrides: &Overrides) -> Result<(Scenario, String), ScenarioError> {
        let origin = path.display().to_string();
        let text = std::fs::read_to_string(path).map_err(|e| ScenarioError::Unreadable {
            file: origin.clone(),
            reason: e.to_string().to_lowercase(),
        })?;
        let scenario = Scenario::from_toml_str_with(&text, &origin, overrides)?;
        Ok((scenario, text))
    }
}
