//! kernlake fits non-linear epsilon-insensitive support vector regression (SVR) on tables
//! far larger than memory, and scores whole folders of Parquet files with the result.
//!
//! Exact kernel SVR needs an n × n kernel matrix and stops at tens of thousands of rows.
//! kernlake instead maps each standardized input row x into an explicit feature space
//! z(x) whose inner products approximate the kernel — random Fourier features (Rahimi &
//! Recht, NIPS 2007), orthogonal random features (Yu et al., NIPS 2016) or Nyström
//! features (Williams & Seeger, NIPS 2001) — and trains a *linear* epsilon-SVR on z,
//! streaming the data block by block: by primal Newton passes for the squared loss
//! (Keerthi & DeCoste, JMLR 2005, with a sampled Hessian) or by block minimization with
//! dual coordinate descent for the linear loss (Ho & Lin, JMLR 2012; Yu, Hsieh, Chang &
//! Lin, KDD 2010). An exact SMO solver (Fan, Chen & Lin, JMLR 2005)
//! lets a user check on a sample that the approximation agrees with the exact machine.
//!
//! # Overview
//! The crate root re-exports what a program needs: [`Fitter`] and [`FitOptions`] (fit on
//! ndarray data or stream from files found by [`discover`] and read by a
//! [`TableReader`]), [`Model`] (predict, save, load), [`score_files`] and
//! [`score_batch`], [`audit()`], [`tune()`], and [`defaults`] (every default, written
//! once). The modules hold the rest:
//! * [`data`] — Parquet/CSV sources, partitions, column choice, the survey pass.
//! * [`kernel`] — exact kernels and the one place their parametrisation is defined.
//! * [`features`] — the feature maps.
//! * [`solver`] — dual coordinate descent, primal Newton, the streaming trainer, exact SMO.
//! * [`heuristics`] — data-driven defaults (median heuristic, Cherkassky & Ma).
//! * [`scale`], [`coverage`] — the model's standardizer and its coverage landmarks.
//! * [`metrics`], [`report`], [`inspect`] — figures, the training report, a model as text.
//!
//! Modules marked hidden in the documentation are internals that the project's own
//! tests and benchmarks reach; they may change without notice.
//!
//! # Example
//! ```
//! use kernlake::fit::Fitter;
//! use ndarray::{Array1, Array2};
//!
//! // A smooth non-linear target on one input.
//! let x = Array2::from_shape_fn((400, 1), |(i, _)| i as f64 / 40.0);
//! let y: Array1<f64> = x.column(0).mapv(|v| (v).sin() * 10.0);
//! let model = Fitter::new()
//!     .with_dim(128)
//!     .with_c(100.0)
//!     .with_epsilon(0.05)
//!     .with_seed(3)
//!     .fit(x.view(), y.view())?;
//! let pred = model.predict(x.view());
//! let rmse = ((&pred - &y).mapv(|e| e * e).mean().unwrap()).sqrt();
//! assert!(rmse < 0.5, "rmse {rmse}");
//! # Ok::<(), kernlake::Error>(())
//! ```
//!
//! Predictions from a fitted model are an aid for monitoring and planning: they are no
//! substitute for protective systems, and decisions about equipment follow site
//! procedures and qualified engineers.
#![deny(missing_docs)]
#![deny(unsafe_op_in_unsafe_fn)]
#![deny(clippy::undocumented_unsafe_blocks)]

mod atomic;
pub mod audit;
pub mod band;
mod blas;
#[cfg(feature = "cli")]
#[doc(hidden)]
pub mod cli;
pub mod coverage;
pub mod cpu;
pub mod data;
mod demo;
pub mod error;
pub mod features;
pub mod fit;
pub mod heuristics;
pub mod inspect;
pub mod kernel;
pub mod metrics;
pub mod model;
pub mod modelfile;
pub mod report;
pub mod scale;
pub mod score;
pub mod settings;
pub mod solver;
pub mod store;
#[doc(hidden)]
pub mod testing;
pub mod tune;

pub use error::{Error, Result};

// The entry points: what a program that fits, scores, audits or tunes needs.
pub use audit::{audit, audit_model, AuditOptions, AuditReport};
pub use data::{
    discover, resolve_columns, ColumnSelection, CsvOptions, MissingPolicy, SourceFile, TableReader,
};
pub use features::{FourierVariant, Landmarks, MapKind, MapSpec};
pub use fit::{FitOptions, Fitter};
pub use kernel::KernelKind;
pub use model::Model;
pub use report::TrainingReport;
pub use score::{score_batch, score_files, ScoreOptions, ScoreSummary};
pub use settings::defaults;
pub use solver::blocks::{Method, Silent, TrainObserver};
pub use solver::dcd::Loss;
pub use tune::{tune, TuneOptions, TuneReport};
