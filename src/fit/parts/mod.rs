//! A fit computed in parts: the rows live on the partitions of a cluster (Apache Spark's
//! executors, say), each partition computes its statistics in this library, and a
//! driver merges them and does the mathematics of the fit. The engine that moves bytes
//! between them is not kernlake's business; this module gives it a small API:
//!
//! ```text
//! driver                                   each partition (rows as Arrow batches)
//! check(columns, options)                  (before any job)
//!                                          SurveyPart::new + add(block_of_batch) → bytes
//! PartsFit::plan(merged SurveyPart, …)     (defaults and map exactly as the single-
//!   plan_bytes() → broadcast once           machine fit chooses them)
//! loop:
//!   open_pass() → bytes, broadcast         PartPass::new(&PartWorker, bytes)
//!                                            add_batch(batch) …; to_bytes() → driver
//!   close_pass(parts in partition order)   (merge, sampled Hessian, step, certificate,
//!     → true when a stopping rule fired     holdout metrics, stopping rules)
//! finish() → Model (the same .klm as `kernlake fit`)
//! ```
//!
//! The method is the primal Newton method of [`crate::solver::newton`] with its passes
//! distributed over the partitions (the distributed Newton method of Zhuang, Chin, Juan
//! & Lin, PAKDD 2015) and the Hessian formed from a row sample (sub-sampled Newton:
//! Byrd, Chin, Neveitt & Nocedal, SIAM J. Optim. 2011). What a partition returns each
//! pass is O(D + sample × inputs): gradient sums, the objective on the step grid, dual
//! terms, leverage-sketch sums, holdout error sums, and its share of the Hessian's
//! sample as standardized input rows with their weights (never mapped rows, never a
//! D × D matrix). Rows have no stable position on a cluster, so every row's id is a
//! hash of its own values ([`crate::data::value_key`]): the holdout split and every
//! sample depend only on the rows' values and the seed, not on the partitioning.
//! Merging in partition order makes the same partitioning give the same bits.

mod driver;
mod pass;

pub use driver::{check, PartsFit};
pub use pass::{PartPass, PartWorker};
