//! Exact kernel functions, shared by Nyström, the exact SMO solver and the audit.
//!
//! # Parametrisation (the one place it is defined)
//!
//! Every kernel carries one width parameter `gamma > 0` and is a function of the
//! distance between two rows `x`, `y` of standardized inputs:
//!
//! | kind | k(x, y) | spectral density (for random features) |
//! |---|---|---|
//! | Gaussian | `exp(-gamma ‖x−y‖₂²)` | `N(0, 2·gamma·I)` |
//! | Laplacian | `exp(-gamma ‖x−y‖₁)` | Cauchy with scale `gamma`, per coordinate |
//! | Matérn ν | Matérn on `r = ‖x−y‖₂` with length scale `ℓ = 1/√(2·gamma)` | multivariate t, `2ν` degrees of freedom, scale `1/ℓ` |
//!
//! The Matérn length scale is chosen so that the same `gamma` gives the Gaussian kernel
//! in the limit ν → ∞. The Matérn forms (Rasmussen & Williams, *Gaussian Processes for
//! Machine Learning*, 2006, eq. 4.14–4.17), with `s = r/ℓ`:
//! ν = 1/2: `exp(-s)`; ν = 3/2: `(1 + √3 s) exp(-√3 s)`;
//! ν = 5/2: `(1 + √5 s + 5s²/3) exp(-√5 s)`.
//!
//! All kernels satisfy k(x, x) = 1 and k(x, y) → 0 as the distance grows: far from all
//! training rows a model built on them predicts its constant (common practice).

use ndarray::{ArrayView2, ArrayViewMut2, Axis};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use crate::error::{Error, Result};

/// The family of a kernel.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum KernelKind {
    /// `exp(-gamma ‖x−y‖₂²)`.
    Gaussian,
    /// `exp(-gamma ‖x−y‖₁)`.
    Laplacian,
    /// Matérn ν = 1/2, i.e. `exp(-‖x−y‖₂/ℓ)`.
    Matern12,
    /// Matérn ν = 3/2.
    Matern32,
    /// Matérn ν = 5/2.
    Matern52,
}

impl KernelKind {
    /// Every family, in declaration order.
    pub const ALL: [KernelKind; 5] = [
        KernelKind::Gaussian,
        KernelKind::Laplacian,
        KernelKind::Matern12,
        KernelKind::Matern32,
        KernelKind::Matern52,
    ];

    /// The name used in files, reports and on the command line.
    pub fn name(self) -> &'static str {
        match self {
            KernelKind::Gaussian => "gaussian",
            KernelKind::Laplacian => "laplacian",
            KernelKind::Matern12 => "matern12",
            KernelKind::Matern32 => "matern32",
            KernelKind::Matern52 => "matern52",
        }
    }

    /// Parses a name produced by [`KernelKind::name`].
    pub fn parse(s: &str) -> Result<Self> {
        Ok(match s {
            "gaussian" => KernelKind::Gaussian,
            "laplacian" => KernelKind::Laplacian,
            "matern12" => KernelKind::Matern12,
            "matern32" => KernelKind::Matern32,
            "matern52" => KernelKind::Matern52,
            other => {
                return Err(Error::invalid(
                    "kernel",
                    format!(
                        "'{other}' is not one of gaussian, laplacian, matern12, matern32, matern52"
                    ),
                ))
            }
        })
    }

    /// The Matérn smoothness ν, if this is a Matérn kernel.
    pub fn matern_nu(self) -> Option<f64> {
        match self {
            KernelKind::Matern12 => Some(0.5),
            KernelKind::Matern32 => Some(1.5),
            KernelKind::Matern52 => Some(2.5),
            _ => None,
        }
    }
}

/// A kernel: a family and its width `gamma` (see the module docs for the convention).
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct Kernel {
    /// The family.
    pub kind: KernelKind,
    /// The width parameter, > 0.
    pub gamma: f64,
}

impl Kernel {
    /// A kernel of the given family; fails unless `gamma` is finite and positive.
    pub fn new(kind: KernelKind, gamma: f64) -> Result<Self> {
        if !(gamma.is_finite() && gamma > 0.0) {
            return Err(Error::invalid(
                "gamma",
                format!("must be a finite number > 0, got {gamma}"),
            ));
        }
        Ok(Kernel { kind, gamma })
    }

    /// A Gaussian kernel `exp(-gamma ‖x−y‖²)`; fails unless `gamma > 0`.
    pub fn gaussian(gamma: f64) -> Result<Self> {
        Self::new(KernelKind::Gaussian, gamma)
    }

    /// The length scale `ℓ = 1/√(2·gamma)` used by the Matérn forms.
    pub fn length_scale(&self) -> f64 {
        1.0 / (2.0 * self.gamma).sqrt()
    }

    /// k(x, y) for two rows of equal length.
    ///
    /// # Panics
    /// If the two slices differ in length.
    #[inline]
    pub fn eval(&self, x: &[f64], y: &[f64]) -> f64 {
        assert_eq!(x.len(), y.len(), "kernel arguments differ in length");
        match self.kind {
            KernelKind::Laplacian => {
                let l1: f64 = x.iter().zip(y).map(|(a, b)| (a - b).abs()).sum();
                (-self.gamma * l1).exp()
            }
            _ => {
                let r2: f64 = x.iter().zip(y).map(|(a, b)| (a - b) * (a - b)).sum();
                self.from_sq_dist(r2)
            }
        }
    }

    /// The kernel value at squared Euclidean distance `r2` (not for the Laplacian kernel,
    /// which uses the L1 distance).
    #[inline]
    pub fn from_sq_dist(&self, r2: f64) -> f64 {
        let r2 = r2.max(0.0);
        match self.kind {
            KernelKind::Gaussian => (-self.gamma * r2).exp(),
            KernelKind::Laplacian => panic!("the Laplacian kernel is not a function of ‖x−y‖₂"),
            KernelKind::Matern12 => (-r2.sqrt() / self.length_scale()).exp(),
            KernelKind::Matern32 => {
                let s = 3f64.sqrt() * r2.sqrt() / self.length_scale();
                (1.0 + s) * (-s).exp()
            }
            KernelKind::Matern52 => {
                let s = 5f64.sqrt() * r2.sqrt() / self.length_scale();
                (1.0 + s + s * s / 3.0) * (-s).exp()
            }
        }
    }

    /// Fills `out[i, j] = k(a_i, b_j)` for the rows of `a` and `b`, in parallel over
    /// chunks of 256 rows of `a` (each output row depends only on its row of `a`, so the
    /// result does not depend on the thread count). See [`Kernel::block_into_seq`] for
    /// how each entry is computed.
    ///
    /// # Panics
    /// If `a` and `b` differ in columns or `out` is not `a.nrows() × b.nrows()`.
    #[track_caller]
    pub fn block_into(&self, a: ArrayView2<f64>, b: ArrayView2<f64>, mut out: ArrayViewMut2<f64>) {
        check_block_shapes(&a, &b, &out);
        // Chunks of rows of `a` keep the product's output in cache and run in parallel.
        const CHUNK: usize = 256;
        let kernel = *self;
        out.axis_chunks_iter_mut(Axis(0), CHUNK)
            .into_par_iter()
            .zip(a.axis_chunks_iter(Axis(0), CHUNK).into_par_iter())
            .for_each(|(o, ac)| kernel.block_into_seq(ac, b, o));
    }

    /// Single-threaded form of [`Kernel::block_into`], for callers already running in
    /// parallel over row chunks.
    ///
    /// Gaussian: squared distances come from one matrix product, `‖a‖² + ‖b‖² − 2abᵀ`,
    /// clamped at zero (absolute error about `1e-16·(‖a‖² + ‖b‖²)`, harmless inside the
    /// exponential). Laplacian and Matérn: distances from explicit differences, because
    /// the Matérn forms depend on `√r²`, which would turn a rounding error of `1e-16` in
    /// `r²` into `1e-8` in the kernel for nearly equal rows.
    ///
    /// # Panics
    /// If `a` and `b` differ in columns or `out` is not `a.nrows() × b.nrows()`.
    #[track_caller]
    pub fn block_into_seq(
        &self,
        a: ArrayView2<f64>,
        b: ArrayView2<f64>,
        mut out: ArrayViewMut2<f64>,
    ) {
        check_block_shapes(&a, &b, &out);
        match self.kind {
            KernelKind::Gaussian => {
                let bn: Vec<f64> = b.axis_iter(Axis(0)).map(|r| r.dot(&r)).collect();
                ndarray::linalg::general_mat_mul(-2.0, &a, &b.t(), 0.0, &mut out);
                for (mut orow, ar) in out.axis_iter_mut(Axis(0)).zip(a.axis_iter(Axis(0))) {
                    let an = ar.dot(&ar);
                    for (v, bnj) in orow.iter_mut().zip(&bn) {
                        *v = self.from_sq_dist(*v + an + bnj);
                    }
                }
            }
            _ => {
                for (mut orow, ar) in out.axis_iter_mut(Axis(0)).zip(a.axis_iter(Axis(0))) {
                    for (v, bj) in orow.iter_mut().zip(b.axis_iter(Axis(0))) {
                        *v = match (ar.as_slice(), bj.as_slice()) {
                            (Some(x), Some(y)) => self.eval(x, y),
                            _ => self.eval(&ar.to_vec(), &bj.to_vec()),
                        };
                    }
                }
            }
        }
    }

    /// Allocating form of [`Kernel::block_into`].
    #[track_caller]
    pub fn block(&self, a: ArrayView2<f64>, b: ArrayView2<f64>) -> ndarray::Array2<f64> {
        let mut out = ndarray::Array2::zeros((a.nrows(), b.nrows()));
        self.block_into(a, b, out.view_mut());
        out
    }
}

#[track_caller]
fn check_block_shapes(a: &ArrayView2<f64>, b: &ArrayView2<f64>, out: &ArrayViewMut2<f64>) {
    assert_eq!(a.ncols(), b.ncols(), "kernel block: column counts differ");
    assert_eq!(
        out.dim(),
        (a.nrows(), b.nrows()),
        "kernel block: output has the wrong shape"
    );
}
