//! Linear epsilon-SVR with the (unsquared) epsilon-insensitive loss by a primal
//! log-barrier path-following method in the explicit feature space, one pass over the
//! data per Newton iteration and no per-row state.
//!
//! The primal (bias appended as a constant feature, ẑ_i = [z_i, 1]) is the QP
//!
//! ```text
//! min ½‖w‖² + C Σ_i (ξ_i + ξ*_i)   s.t.  s_i = ε + ξ_i − r_i ≥ 0,  s*_i = ε + ξ*_i + r_i ≥ 0,
//!                                        ξ_i, ξ*_i ≥ 0,              r_i = y_i − wᵀẑ_i.
//! ```
//!
//! For a barrier weight μ > 0 the barrier problem adds −μ Σ (ln ξ + ln s + ln ξ* + ln s*).
//! For fixed w each row's slacks enter only their own two one-dimensional terms, which are
//! minimised in closed form: with a = ε − r (upper side), C = μ/ξ + μ/(ξ + a) gives
//! ξ = (2μ − Ca + √(C²a² + 4μ²))/(2C). What is left is a smooth, strictly convex problem
//! in w alone,
//!
//! ```text
//! φ_μ(w) = ½‖w‖² + Σ_i [f_μ(ε − r_i) + f_μ(ε + r_i)],   f_μ(a) = min_ξ Cξ − μ ln ξ − μ ln(ξ + a),
//! ```
//!
//! with f_μ′(a) = −μ/s ∈ (−C, 0) and f_μ″(a) = μ/(ξ² + s²) (s = ξ + a). Partial
//! minimisation keeps self-concordance, so φ_μ/μ is self-concordant and damped Newton
//! steps converge from any start (Nesterov & Nemirovskii, "Interior-point polynomial
//! algorithms in convex programming", SIAM 1994); the method follows the central path as
//! μ decreases (the primal barrier method; the row slacks are eliminated as in the
//! interior-point methods for massive SVMs of Ferris & Munson, SIAM J. Optim. 13, 2002,
//! whose normal matrix is the (D + 1) × (D + 1) matrix I + Σ θ_i ẑ_i ẑ_iᵀ formed here).
//!
//! Certificate: β_i = μ/s_i − μ/s*_i lies strictly inside (−C, C), so it is feasible for
//! the dual of the *unsmoothed* problem, D(β) = yᵀβ − ε‖β‖₁ − ½‖Σ β_i ẑ_i‖², and
//! Σ β_i ẑ_i = w − ∇φ_μ(w) comes from the pass's gradient sums. Every pass reports the
//! true relative gap (P(w) − D)/P(w) of the unsmoothed primal P; at a central point the
//! gap is below 4nμ.
//!
//! One pass does the jobs of a Newton iteration at once (as [`crate::solver::newton`]
//! does for the squared loss): with w and direction d fixed it gathers φ_μ along w + t·d
//! on a grid of steps (the line search), and at a few candidate steps the gradient of
//! φ at the next barrier weight, the dual terms and the unsmoothed loss; the Hessian
//! Σ θ_i ẑ_i ẑ_iᵀ at the step chosen in advance. The next barrier weight is chosen
//! before the pass from the Newton decrement λ (μ falls tenfold when λ² is small).

mod fit;
mod pass;
mod state;

pub use fit::fit;
pub use pass::BarrierPass;
pub use state::BarrierState;

/// Candidate steps whose gradient is gathered in a pass, largest first.
const STEPS: [f64; 4] = [1.0, 0.5, 0.25, 0.125];
/// Sufficient decrease of the Armijo rule.
const ARMIJO: f64 = 1e-4;
/// Fine grid of steps 2^(−j/2), j = 0..GRID, for the fallback line search.
const GRID: usize = 30;
/// Factor by which μ falls once the iterate is near the central path.
const SHRINK: f64 = 10.0;
/// λ² = −∇φᵀd/μ below which the next pass lowers μ.
const CENTRED: f64 = 1.0;
/// Rows of a chunk summed together (fixed, so sums do not depend on threads).
const CHUNK: usize = 256;

/// One side of a row's barrier term at a = ε ∓ r: the value f_μ(a), the dual weight
/// α = μ/s ∈ (0, C) and the curvature f_μ″(a) = μ/(ξ² + s²).
#[inline]
fn side(a: f64, c: f64, mu: f64) -> (f64, f64, f64) {
    let q = (c * a).hypot(2.0 * mu);
    // ξ and s = ξ + a swap roles with the sign of a; each form avoids cancellation.
    let (xi, s) = if a >= 0.0 {
        let xi = mu / c + 2.0 * mu * mu / (c * (q + c * a));
        (xi, xi + a)
    } else {
        let s = mu / c + 2.0 * mu * mu / (c * (q - c * a));
        (s - a, s)
    };
    let value = c * xi - mu * (xi.ln() + s.ln());
    (value, mu / s, mu / (xi * xi + s * s))
}

/// A row's barrier value, β = α − α* and curvature θ at residual r.
#[inline]
fn row(r: f64, eps: f64, c: f64, mu: f64) -> (f64, f64, f64) {
    let (vu, au, tu) = side(eps - r, c, mu);
    let (vl, al, tl) = side(eps + r, c, mu);
    (vu + vl, au - al, tu + tl)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The closed-form slack against a direct minimisation of Cξ − μ ln ξ − μ ln(ξ + a)
    /// (common practice: a golden-section search), and the derivatives against central
    /// differences.
    #[test]
    fn side_matches_direct_minimisation_and_differences() {
        for &(a, c, mu) in &[
            (0.3, 2.0, 0.05),
            (-0.7, 1.0, 0.01),
            (0.0, 5.0, 1e-3),
            (2.0, 0.5, 1e-6),
        ] {
            let g = |x: f64| c * x - mu * x.ln() - mu * (x + a).ln();
            let (mut lo, mut hi) = ((-a).max(0.0) + 1e-15, (-a).max(0.0) + 10.0);
            for _ in 0..300 {
                let m1 = lo + (hi - lo) * 0.382;
                let m2 = lo + (hi - lo) * 0.618;
                if g(m1) < g(m2) {
                    hi = m2
                } else {
                    lo = m1
                }
            }
            let (v, alpha, theta) = side(a, c, mu);
            assert!(
                (v - g(lo)).abs() <= 1e-9 * (1.0 + v.abs()),
                "{a} {v} {}",
                g(lo)
            );
            let h = 1e-6 * (1.0 + a.abs());
            let d1 = (side(a + h, c, mu).0 - side(a - h, c, mu).0) / (2.0 * h);
            assert!((d1 + alpha).abs() <= 1e-5 * (1.0 + alpha), "{d1} {alpha}");
            let d2 = (side(a + h, c, mu).1 - side(a - h, c, mu).1) / (2.0 * h);
            assert!((d2 + theta).abs() <= 1e-4 * (1.0 + theta), "{d2} {theta}");
            assert!(alpha > 0.0 && alpha < c);
        }
    }
}
