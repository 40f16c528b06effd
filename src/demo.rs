//! The demo scenarios built into the binary, so a newcomer's first command needs no file.

/// Text of `scenarios-demo/baseline.toml`: the scenario `loancycle run` uses without a file.
pub const BASELINE: &str = include_str!("../scenarios-demo/baseline.toml");

/// The name shown for the built-in baseline.
pub const BASELINE_ORIGIN: &str = "scenarios-demo/baseline.toml, built into the binary";
