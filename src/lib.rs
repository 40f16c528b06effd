//! loancycle: Monte Carlo simulation of repeated joint-liability loan cycles.
//!
//! All computation lives in this library; the `loancycle` binary only parses arguments and prints.
//! Layout: `scenario` (file format and validation), `engine` (one replication of one arm, random
//! streams), `stats` (mergeable per-replication tallies and interval estimates), `analytic` (closed
//! forms of the independent-borrower and one-factor models), `output` (writers that turn finished
//! results into bytes), `run` (orchestration across replications and threads).

pub mod analytic;
pub mod companion;
pub mod curve;
pub mod demo;
pub mod dist;
pub mod engine;
pub mod output;
pub mod report;
pub mod run;
pub mod scenario;
pub mod stats;

/// The caution every report carries: outputs are model estimates for planning.
pub const CAUTION: &str = "Model estimates for planning only: lending decisions affect vulnerable borrowers, and local \
regulation and client-protection practice come first.";
