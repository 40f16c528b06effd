//! Statistics: per-replication tallies, their mergeable accumulator, the estimators (pooled
//! rates with delta-method intervals, order-statistic quantiles) computed from them, and the
//! comparisons between arms built on the same estimators.
//!
//! Every interval comes from variation between independent replications: group-cycles within one
//! replication share village factors and members, so treating them as independent would understate
//! the error.

pub mod compare;
pub mod cycle_tail;
pub mod estimate;
pub mod exact_sum;
pub mod order_stats;
pub mod replication_list;
pub mod replications;
pub mod select;
pub mod summary;
pub mod tally;
pub mod tolerance;

pub use replication_list::ReplicationList;
pub use tally::{ArmTally, CycleRecord, CycleSums, ReplicationTally, Year};
