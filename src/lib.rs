//! kernlake fits non-linear epsilon-insensitive support vector regression on tables far
//! larger than memory, by mapping inputs into an explicit feature space and training a
//! linear epsilon-SVR there by dual coordinate descent.
#![deny(missing_docs)]

pub mod atomic;
pub mod data;
pub mod demo;
pub mod error;
pub mod features;
pub mod kernel;
pub mod metrics;
pub mod modelfile;
pub mod scale;
pub mod solver;

pub use error::{Error, Result};
