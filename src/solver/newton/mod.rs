//! Linear epsilon-SVR with the squared epsilon-insensitive loss by a primal Newton method
//! in the explicit feature space, one pass over the data per iteration.
//!
//! The primal (bias appended as a constant feature, ẑ_i = [z_i, 1]) is
//!
//! ```text
//! P(w) = ½‖w‖² + C Σ_i max(0, |y_i − wᵀẑ_i| − ε)²,
//! ```
//!
//! once differentiable and piecewise quadratic. Its gradient is g = w − Σ β_i ẑ_i with
//! β_i = 2C·(excess of the residual r_i over the tube, signed), and its generalized
//! Hessian H = I + 2C Σ_{|r_i| > ε} ẑ_i ẑ_iᵀ (Mangasarian, "A finite Newton method for
//! classification", Optim. Methods Softw. 2002; Keerthi & DeCoste, "A modified finite
//! Newton method for fast solution of large scale linear SVMs", JMLR 2005; Ho & Lin,
//! JMLR 2012, §2.2 treat this loss for regression with a trust-region Newton method).
//! Each Newton direction solves H d = −g by a Cholesky factorization of the
//! (D + 1) × (D + 1) matrix.
//!
//! Passes over data larger than memory are what cost, so each pass does three jobs at
//! once. With w and the last direction d fixed, it accumulates
//! * the objective along the line w + t·d on a fine grid of steps (a few scalar
//!   operations a row), for the line search;
//! * for the candidate steps t ∈ {1, ½, ¼}: the gradient sum Σ β_i ẑ_i, and the dual
//!   terms yᵀβ, ‖β‖₁, ‖β‖² that give a duality-gap certificate for w + t·d;
//! * the Hessian at t = 1 from a sample of the rows outside the tube (sub-sampled
//!   Newton: Byrd, Chin, Neveitt & Nocedal, SIAM J. Optim. 2011; Roosta-Khorasani &
//!   Mahoney, Math. Program. 2019), each sampled row weighted by the inverse of its
//!   probability. Without sampling (few rows) the step is the exact generalized Newton
//!   step, which ends in finitely many iterations.
//!
//! A uniform sample serves badly here: the curvature of some directions of the feature
//! space comes from few rows (inputs in sparse corners of their range), which a uniform
//! sample of 1–2% of the rows mostly misses, so the step along those directions is far
//! too long. So after the first pass the rows are sampled by their ridge leverage scores
//! ℓ_i = 2C ẑ_iᵀH⁻¹ẑ_i under the last Newton matrix H (Drineas, Magdon-Ismail, Mahoney
//! & Woodruff, JMLR 2012; Cohen, Musco & Musco, SODA 2017, for the ridge form),
//! estimated for every row outside the tube from an 8-column Gaussian sketch, applied to
//! the row (in single precision: the estimate only sets a probability) while it is in
//! cache for its residual: a row enters with probability min(1, gain·ℓ̃_i), the
//! gain chosen so that about `hessian_rows` rows enter. The samples of earlier passes
//! stay in the estimate with weight ½ per pass of age, which lowers its variance while
//! letting the changing active set age out. All draws come from hashes of the row ids and seeded generators, so results do not
//! depend on the number of threads.
//!
//! The largest candidate meeting the Armijo condition becomes the new w, certified with
//! the dual point β(w) (the squared loss's duals are unconstrained, so any β is feasible:
//! D(β) = −(½‖Σβ_i ẑ_i‖² − yᵀβ + ε‖β‖₁ + ‖β‖²/(4C)) ≤ P(w) for every w). When none
//! qualifies the best step of the fine grid is taken and the next pass only gathers the
//! gradient there; when no step lowers P at all the weights are optimal to working
//! precision.
//!
//! A pass's statistics are a value, [`PassStats`], so a pass can be computed in parts
//! (for example on the partitions of a cluster: the distributed Newton method of Zhuang,
//! Chin, Juan & Lin, PAKDD 2015) and merged where the step is taken; see [`PassStats`]
//! for what merging guarantees.

mod chunk;
mod fit;
mod hessian;
pub(crate) use hessian::{add_gram_upper, newton_direction, newton_matrix};
#[cfg(test)]
mod merge_tests;
mod pass;
mod rowops;
mod state;
mod stats;
mod wire;

pub use fit::fit;
pub use pass::SAMPLE_SALT;
pub use state::{NewtonState, Step};
pub use stats::PassStats;

/// Candidate steps whose gradient is gathered in a pass, largest first.
const STEPS: [f64; 3] = [1.0, 0.5, 0.25];
/// Sufficient decrease of the Armijo rule.
const ARMIJO: f64 = 1e-4;
/// Fine grid of steps 2^(−j/2), j = 0..GRID, for the fallback line search.
const GRID: usize = 48;
/// Columns of the Gaussian sketch that estimates leverage scores.
const SKETCH: usize = 8;
/// Weight of the earlier passes' sampled Hessians, per pass of age.
const HESSIAN_DECAY: f64 = 0.5;
