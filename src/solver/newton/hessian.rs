//! The Newton system and its row sample: the Cholesky factor of I + scale·S for the
//! sampled (or exact) Gram matrix S, the direction it gives, the leverage sketch that
//! weights the next pass's sample, and the Gram matrix of sampled rows.

use ndarray::linalg::general_mat_mul;
use ndarray::{s, Array1, Array2, ArrayView2, Axis};
use ndarray_linalg::{CholeskyFactorized, Diag, FactorizeC, SolveC, SolveTriangular, UPLO};
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, StandardNormal};
use rayon::prelude::*;

use super::SKETCH;
use crate::error::{Error, Result};

/// Columns of the Hessian updated together by one task.
const PANEL_COLS: usize = 128;

/// The Cholesky factor of a Newton matrix.
pub(crate) type Factor = CholeskyFactorized<ndarray::OwnedRepr<f64>>;

/// Row sampling by approximate ridge leverage scores for the Hessian (see the module
/// docs of [`super`]): with H = UᵀU the last Newton matrix and G a K × (D + 1) Gaussian
/// sketch, `x` = U⁻¹Gᵀ, so that ℓ̃_i = 2C‖ẑ_iᵀx‖²/K estimates the ridge leverage
/// ℓ_i = 2C ẑ_iᵀH⁻¹ẑ_i (Johnson–Lindenstrauss; Drineas, Magdon-Ismail, Mahoney &
/// Woodruff, JMLR 2012). A row outside the tube enters with probability
/// p_i = min(1, gain·ℓ̃_i) and weight 1/p_i.
#[derive(Clone, Debug, PartialEq)]
pub(crate) struct Lever {
    /// U⁻¹Gᵀ, (D + 1) × K.
    pub x: Array2<f64>,
    /// Inclusion probability per unit of estimated leverage.
    pub gain: f64,
}

/// The Cholesky factor U (upper) of the Newton matrix I + scale·S, reading S from its
/// upper triangle only.
pub(crate) fn newton_matrix(mut s: Array2<f64>, scale: f64) -> Result<Factor> {
    crate::blas::single_threaded();
    let n = s.nrows();
    for j in 0..n {
        for i in 0..j {
            s[[i, j]] *= scale;
        }
        s[[j, j]] = 1.0 + scale * s[[j, j]];
    }
    s.factorizec(UPLO::Upper)
        .map_err(|e| Error::Numerical(format!("the Newton system could not be factorized: {e}")))
}

/// Solves UᵀU d = −g.
pub(crate) fn newton_direction(factor: &Factor, g: &Array1<f64>) -> Result<Array1<f64>> {
    let rhs = g.mapv(|v| -v);
    let d = factor
        .solvec(&rhs)
        .map_err(|e| Error::Numerical(format!("the Newton system could not be solved: {e}")))?;
    if d.iter().any(|v| !v.is_finite()) {
        return Err(Error::Numerical(
            "the Newton direction is not finite".to_string(),
        ));
    }
    Ok(d)
}

/// Leverage estimates for the next pass: x = U⁻¹Gᵀ with a seeded Gaussian G (K rows),
/// and the gain that makes the expected sample `target` rows: the ridge leverages of the
/// rows outside the tube sum to d_eff = tr(H⁻¹(H − I)) = (D + 1) − ‖U⁻¹‖²_F. `None` if the triangular solve fails (the
/// next pass then samples uniformly).
pub(super) fn leverage(factor: &Factor, target: f64, seed: u64) -> Option<Lever> {
    let n = factor.factor.nrows();
    let inv = factor
        .factor
        .solve_triangular(UPLO::Upper, Diag::NonUnit, &Array2::<f64>::eye(n))
        .ok()?;
    let d_eff = n as f64 - inv.iter().map(|v| v * v).sum::<f64>();
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let g = Array2::from_shape_fn((n, SKETCH), |_| -> f64 { StandardNormal.sample(&mut rng) });
    let x = inv.dot(&g);
    let gain = target / d_eff.max(1e-12);
    (gain.is_finite() && x.iter().all(|v| v.is_finite())).then_some(Lever { x, gain })
}

/// h[..j1, J] += a[.., ..j1]ᵀ a[.., J] for column panels J = j0..j1: the upper triangle of
/// h += aᵀa. Each panel's product is formed apart, from zero, and then added to h, so
/// that adding the Gram matrices of two row sets one after the other does the same
/// operations whether h starts empty or not (what [`super::PassStats::merge`] relies
/// on); the panels are independent, so the result does not depend on threads.
pub(crate) fn add_gram_upper(
    pool: Option<&rayon::ThreadPool>,
    h: &mut Array2<f64>,
    a: ArrayView2<f64>,
) {
    let cols = h.ncols();
    let mut run = || {
        h.axis_chunks_iter_mut(Axis(1), PANEL_COLS)
            .into_par_iter()
            .enumerate()
            .for_each(|(p, mut panel)| {
                let j0 = p * PANEL_COLS;
                let j1 = (j0 + PANEL_COLS).min(cols);
                let mut t = Array2::zeros((j1, j1 - j0));
                general_mat_mul(
                    1.0,
                    &a.slice(s![.., ..j1]).t(),
                    &a.slice(s![.., j0..j1]),
                    0.0,
                    &mut t,
                );
                let mut top = panel.slice_mut(s![..j1, ..]);
                top += &t;
            });
    };
    match pool {
        Some(p) => p.install(run),
        None => run(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray_linalg::Inverse;

    /// The sketch behind the Hessian's row sample against leverages computed from the
    /// explicit inverse: d_eff = Σ_i ℓ_i = tr(H⁻¹(H − I)) for H = I + 2C Σ_i ẑ_i ẑ_iᵀ
    /// (common practice: the trace identity of ridge leverages), and ‖ẑ_iᵀx‖²/K is an unbiased estimate of ẑ_iᵀH⁻¹ẑ_i
    /// (Johnson–Lindenstrauss with a Gaussian sketch, Drineas, Magdon-Ismail, Mahoney &
    /// Woodruff, JMLR 2012), so its ratio to the exact value averages to 1.
    #[test]
    fn sketched_leverages_match_the_explicit_inverse() {
        let (n, d, c) = (400, 12, 0.7);
        let mut rng = ChaCha8Rng::seed_from_u64(5);
        let z = Array2::from_shape_fn((n, d + 1), |(_, j)| {
            if j == d {
                1.0
            } else {
                let v: f64 = StandardNormal.sample(&mut rng);
                v * (1.0 + j as f64) / d as f64
            }
        });
        let gram = z.t().dot(&z);
        let mut upper = gram.clone();
        for j in 0..=d {
            for i in j + 1..=d {
                upper[[i, j]] = 0.0;
            }
        }
        let factor = newton_matrix(upper, 2.0 * c).unwrap();
        let h = Array2::<f64>::eye(d + 1) + &(gram * (2.0 * c));
        let h_inv = h.inv().unwrap();
        let exact: Vec<f64> = z
            .rows()
            .into_iter()
            .map(|r| 2.0 * c * r.dot(&h_inv.dot(&r)))
            .collect();
        let target = 50.0;
        let lever = leverage(&factor, target, 9).unwrap();
        let d_eff: f64 = exact.iter().sum();
        assert!(
            (lever.gain - target / d_eff).abs() <= 1e-9 * lever.gain,
            "gain {} vs {}",
            lever.gain,
            target / d_eff
        );
        let ratio: f64 = z
            .rows()
            .into_iter()
            .zip(&exact)
            .map(|(r, l)| {
                let u = r.dot(&lever.x);
                2.0 * c * u.dot(&u) / SKETCH as f64 / l
            })
            .sum::<f64>()
            / n as f64;
        // One sketch is shared by all rows, so the rows' ratios are correlated; with K = 8
        // their mean lies within about ±0.35 of 1 (two standard deviations of χ²₈/8).
        assert!((ratio - 1.0).abs() < 0.35, "mean ratio {ratio}");
    }
}
