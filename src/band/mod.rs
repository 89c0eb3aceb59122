//! Expected-value bands: a calibrated interval around each prediction, by split
//! conformal prediction (Vovk, Gammerman & Shafer, *Algorithmic Learning in a Random
//! World*, 2005; Lei, G'Sell, Rinaldo, Tibshirani & Wasserman, "Distribution-free
//! predictive inference for regression", JASA 2018), locally weighted by a spread model.
//!
//! ```text
//! training rows (a sample)  → |y − f(x)|  → spread model σ(x)            spread.rs
//! holdout rows (never seen) → s = |y − f(x)| / σ(x), sorted, bounded     conformal.rs
//! scoring at level α        → q = s₍⌈(n+1)α⌉₎ ; band f(x) ± q·σ(x)       conformal.rs
//! rows with a measured y    → residual, outside flag, deviation report   deviation.rs,
//!                             (binomial tail, runs of outside rows,      binomial.rs, runs.rs,
//!                             rises of the outside share)                change.rs,
//!                             as text and as an SVG                       text.rs, plot.rs
//! ```
//!
//! What the band means: if a new row is exchangeable with the holdout rows (drawn from
//! the same process, in the same state), the band at level α holds its measured value
//! with probability at least α (Lei et al. 2018, Theorem 2.1), and at most
//! α + 1/(n + 1) when the scores have no ties. It says nothing about rows from a changed
//! plant: that is what the deviation report looks for.

mod binomial;
mod change;
mod collect;
mod conformal;
mod deviation;
mod plot;
mod runs;
mod spread;
mod tally;
mod text;

pub use binomial::{binomial_mass, binomial_upper_tail};
pub use collect::DeviationTallies;
pub use conformal::{check_level, Band, SCORES_KEPT};
pub use deviation::{ChangeFigures, DeviationReport, GroupFigures, RunFigures};
pub use plot::render_band_svg;
pub use runs::{outside_runs, Run};
pub use spread::{Spread, SpreadMoments, FLOOR_SHARE};
pub use tally::{BandRow, FileDeviation, DEFAULT_RUNS_SHOWN};
