//! loancycle: Monte Carlo simulation of repeated joint-liability loan cycles.
//!
//! All computation lives in this library; the `loancycle` binary only parses arguments and prints.
//! Layout: `scenario` (file format and validation), `engine` (one replication of one arm, random
//! streams), `stats` (mergeable per-replication tallies and interval estimates), `analytic` (closed
//! forms of the independent-borrower and one-factor models), `maths` (the special functions the
//! engine and the closed forms share), `output` (writers that turn finished
//! results into bytes), `run` (orchestration across replications and threads), `loanbook`
//! (synthetic loan books for `fit`).
//!
//! ```
//! use loancycle::scenario::Scenario;
//! use loancycle::run::{simulate, RunOptions};
//! use loancycle::stats::summary::summarize_arm;
//!
//! let text = r#"
//!     replications = 4
//!     cycles = 6
//!     [portfolio]
//!     borrowers = 100
//!     [loan]
//!     principal = 100
//!     [[shock]]
//!     name = "illness"
//!     scope = "member"
//!     probability = 0.05
//! "#;
//! let scenario = Scenario::from_toml_str(text, "example.toml").unwrap();
//! let results = simulate(&scenario, RunOptions::default(), &mut |_| {}).unwrap();
//! let summary = summarize_arm(&results.arms[0], scenario.arms()[0].policy().group_size());
//! // 100 borrowers in groups of 5, every cycle: 20 groups x 6 cycles x 4 replications
//! assert_eq!(summary.group_cycles, 480);
//! let repaid = summary.group_repayment.unwrap().rate;
//! assert!(repaid > 0.5 && repaid < 1.0);
//! ```

pub mod analytic;
pub mod bench;
pub mod board;
pub mod checkpoint;
pub mod companion;
pub mod curve;
pub mod demo;
pub mod dist;
pub mod engine;
pub mod finance;
pub mod fit;
pub mod group_size;
pub mod loanbook;
pub mod maths;
pub mod output;
pub mod report;
pub mod run;
pub mod scenario;
pub mod shard;
pub mod stats;
pub mod stored;

/// The caution every report carries: outputs are model estimates for planning.
pub const CAUTION: &str = "Model estimates for planning only: lending decisions affect vulnerable borrowers, and local \
regulation and client-protection practice come first.";
