//! Nyström features (Williams & Seeger, "Using the Nyström Method to Speed Up Kernel
//! Machines", NIPS 2001).
//!
//! Given landmarks `L` (rows of the sample), the landmark kernel matrix is diagonalised,
//! `K_LL = U Λ Uᵀ`, eigenvalues at or below `threshold × λ_max` are dropped (default
//! threshold `1e-10`), and `z(x) = k(x, L) U_r Λ_r^{-1/2}`, so that
//! `z(x)·z(y) = k(x, L) K_LL⁺ k(L, y)`. The output dimension is the number r of kept
//! eigenvalues, which may be smaller than the number of landmarks. With every training
//! row as a landmark the features reproduce the training kernel matrix.
//!
//! Landmarks are chosen from the sample either uniformly without replacement (seeded) or
//! as k-means centres (Zhang, Tsang & Kwok, "Improved Nyström Low-Rank Approximation and
//! Error Analysis", ICML 2008): k-means++ seeding (Arthur & Vassilvitskii, SODA 2007) then
//! at most [`KMEANS_MAX_ITER`] Lloyd iterations, stopping early when no assignment
//! changes; ties go to the lowest index, empty clusters keep their previous centre, and
//! all sums run in row order, so the result is deterministic.
//!
//! If the sample has no more rows than landmarks asked for, all of its distinct rows
//! become landmarks (no randomness involved). A sample with zero rows is an error.

use ndarray::{Array1, Array2, ArrayView2, ArrayViewMut2, Axis, Zip};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use serde::{Deserialize, Serialize};

use super::eigen::symmetric_eigen;
use super::{
    bad_parts, check_kernel, chunk_rows, par_row_chunks, saved_array, FeatureMap, Landmarks,
    MapParts, SavedKernel,
};
use crate::error::{Error, Result};
use crate::kernel::Kernel;

/// [`MapParts::kind`] of a Nyström map.
pub(crate) const KIND: &str = "nystrom";

/// Cap on Lloyd iterations when landmarks are k-means centres.
pub const KMEANS_MAX_ITER: usize = 25;

/// A Nyström map `z(x) = k(x, L) P` with `P = U_r Λ_r^{-1/2}`.
#[derive(Clone, Debug)]
pub struct NystromMap {
    kernel: Kernel,
    /// Landmarks, one per row.
    landmarks: Array2<f64>,
    /// `landmarks × r` projection.
    projection: Array2<f64>,
}

#[derive(Serialize, Deserialize)]
struct NystromMeta {
    kernel: SavedKernel,
    input_dim: usize,
    output_dim: usize,
    landmarks: usize,
}

impl NystromMap {
    /// Builds a map from a sample of standardized rows, asking for `landmarks` landmarks
    /// chosen by `how`; eigenvalues at or below `eig_threshold × λ_max` are dropped.
    ///
    /// Errors: `landmarks = 0`, zero sample rows or columns, non-finite sample values,
    /// gamma not finite and positive, `eig_threshold` outside `[0, 1)`, an eigensolver
    /// failure, or no eigenvalue surviving the threshold.
    pub fn new(
        kernel: Kernel,
        sample: ArrayView2<f64>,
        landmarks: usize,
        how: Landmarks,
        eig_threshold: f64,
        seed: u64,
    ) -> Result<Self> {
        let kernel = check_kernel(kernel)?;
        if landmarks == 0 {
            return Err(Error::invalid(
                "dim",
                "a Nyström map needs at least 1 landmark",
            ));
        }
        if !(eig_threshold.is_finite() && (0.0..1.0).contains(&eig_threshold)) {
            return Err(Error::invalid(
                "eigenvalue threshold",
                format!("must be in [0, 1), got {eig_threshold}"),
            ));
        }
        if sample.nrows() == 0 {
            return Err(Error::NoRows("the Nyström sample has no rows".into()));
        }
        if sample.ncols() == 0 {
            return Err(Error::invalid("input dimension", "must be at least 1"));
        }
        if let Some((idx, _)) = sample.indexed_iter().find(|(_, v)| !v.is_finite()) {
            return Err(Error::NonFinite {
                row: idx.0,
                column: idx.1,
            });
        }
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let l = if sample.nrows() <= landmarks {
            distinct_rows(sample)
        } else {
            match how {
                Landmarks::Uniform => {
                    let idx = rand::seq::index::sample(&mut rng, sample.nrows(), landmarks);
                    sample.select(Axis(0), &idx.into_vec())
                }
                Landmarks::KMeans => kmeans(sample, landmarks, &mut rng),
            }
        };
        Self::from_landmarks(kernel, l, eig_threshold)
    }

    /// Builds the map from given landmarks (one per row): eigendecomposition of `K_LL`
    /// and the projection `U_r Λ_r^{-1/2}`.
    pub fn from_landmarks(
        kernel: Kernel,
        landmarks: Array2<f64>,
        eig_threshold: f64,
    ) -> Result<Self> {
        let kernel = check_kernel(kernel)?;
        if landmarks.nrows() == 0 || landmarks.ncols() == 0 {
            return Err(Error::NoRows(
                "a Nyström map needs at least one landmark".into(),
            ));
        }
        let kll = kernel.block(landmarks.view(), landmarks.view());
        let (vals, vecs) = symmetric_eigen(&kll).map_err(|e| match e {
            Error::Numerical(m) => Error::Numerical(format!("landmark kernel matrix: {m}")),
            other => other,
        })?;
        let lmax = vals.iter().cloned().fold(f64::NEG_INFINITY, f64::max);
        if !(lmax.is_finite() && lmax > 0.0) {
            return Err(Error::Numerical(
                "the landmark kernel matrix has no positive eigenvalue".into(),
            ));
        }
        let cut = eig_threshold * lmax;
        // Keep the largest eigenvalues first (eigh returns them in ascending order).
        let keep: Vec<usize> = (0..vals.len()).rev().filter(|&i| vals[i] > cut).collect();
        if keep.is_empty() {
            return Err(Error::Numerical(
                "no eigenvalue of the landmark kernel matrix is above the threshold".into(),
            ));
        }
        let mut projection = Array2::zeros((landmarks.nrows(), keep.len()));
        for (c, &i) in keep.iter().enumerate() {
            let inv_sqrt = 1.0 / vals[i].sqrt();
            Zip::from(projection.column_mut(c))
                .and(vecs.column(i))
                .for_each(|p, &u| *p = u * inv_sqrt);
        }
        Ok(NystromMap {
            kernel,
            landmarks,
            projection,
        })
    }

    /// The kernel this map approximates.
    pub fn kernel(&self) -> Kernel {
        self.kernel
    }

    /// The landmarks, one per row.
    pub fn landmarks(&self) -> ArrayView2<'_, f64> {
        self.landmarks.view()
    }

    /// The projection `U_r Λ_r^{-1/2}`, `landmarks × output_dim`.
    pub fn projection(&self) -> ArrayView2<'_, f64> {
        self.projection.view()
    }

    /// Rebuilds a map from [`FeatureMap::to_parts`] output.
    pub fn from_parts(parts: &MapParts) -> Result<Self> {
        if parts.kind != KIND {
            return Err(bad_parts(format!("'{}' is not a Nyström map", parts.kind)));
        }
        let meta: NystromMeta = serde_json::from_value(parts.meta.clone())
            .map_err(|e| bad_parts(format!("settings unreadable: {e}")))?;
        let kernel = meta.kernel.to_kernel()?;
        if meta.input_dim == 0 || meta.output_dim == 0 || meta.landmarks == 0 {
            return Err(bad_parts("saved dimensions must be at least 1"));
        }
        let landmarks = saved_array(
            parts,
            "landmarks",
            Some(meta.landmarks),
            Some(meta.input_dim),
        )?
        .clone();
        let projection = saved_array(
            parts,
            "projection",
            Some(meta.landmarks),
            Some(meta.output_dim),
        )?
        .clone();
        Ok(NystromMap {
            kernel,
            landmarks,
            projection,
        })
    }

    fn map_chunk(&self, xc: ArrayView2<f64>, mut out: ArrayViewMut2<f64>) {
        // One kernel block per chunk: unavoidable, its width is the landmark count.
        let mut k = Array2::zeros((xc.nrows(), self.landmarks.nrows()));
        self.kernel
            .block_into_seq(xc, self.landmarks.view(), k.view_mut());
        ndarray::linalg::general_mat_mul(1.0, &k, &self.projection, 0.0, &mut out);
    }
}

impl FeatureMap for NystromMap {
    fn input_dim(&self) -> usize {
        self.landmarks.ncols()
    }

    fn output_dim(&self) -> usize {
        self.projection.ncols()
    }

    #[track_caller]
    fn transform_into(&self, x: ArrayView2<f64>, out: ArrayViewMut2<f64>) {
        let rows = chunk_rows(self.output_dim());
        par_row_chunks(self, x, out, rows, |xc, oc| self.map_chunk(xc, oc));
    }

    fn to_parts(&self) -> MapParts {
        let meta = NystromMeta {
            kernel: SavedKernel::from_kernel(self.kernel),
            input_dim: self.input_dim(),
            output_dim: self.output_dim(),
            landmarks: self.landmarks.nrows(),
        };
        MapParts {
            kind: KIND.to_string(),
            meta: serde_json::to_value(meta).expect("map settings serialise to JSON"),
            arrays: vec![
                ("landmarks".to_string(), self.landmarks.clone()),
                ("projection".to_string(), self.projection.clone()),
            ],
        }
    }
}

/// The distinct rows of `a` (exact bit equality), in order of first appearance.
fn distinct_rows(a: ArrayView2<f64>) -> Array2<f64> {
    let mut seen = std::collections::HashSet::new();
    let keep: Vec<usize> = (0..a.nrows())
        .filter(|&i| seen.insert(a.row(i).iter().map(|v| v.to_bits()).collect::<Vec<u64>>()))
        .collect();
    a.select(Axis(0), &keep)
}

/// Squared Euclidean distance between two rows.
#[inline]
fn sq_dist(a: &[f64], b: &[f64]) -> f64 {
    a.iter().zip(b).map(|(p, q)| (p - q) * (p - q)).sum()
}

/// k-means centres: k-means++ seeding, then Lloyd iterations (see the module docs).
/// Requires `x.nrows() > k`.
fn kmeans(x: ArrayView2<f64>, k: usize, rng: &mut ChaCha8Rng) -> Array2<f64> {
    let x = x.as_standard_layout();
    let n = x.nrows();
    let d = x.ncols();
    let row = |i: usize| {
        x.row(i)
            .to_slice()
            .expect("standard layout rows are contiguous")
    };
    // k-means++: first centre uniform, then each with probability ∝ squared distance.
    let mut centres = Array2::zeros((k, d));
    let first = rng.random_range(0..n);
    centres.row_mut(0).assign(&x.row(first));
    let mut best: Vec<f64> = (0..n).map(|i| sq_dist(row(i), row(first))).collect();
    for c in 1..k {
        let total: f64 = best.iter().sum();
        let pick = if total > 0.0 {
            let target = rng.random::<f64>() * total;
            let mut acc = 0.0;
            let mut pick = n - 1;
            for (i, b) in best.iter().enumerate() {
                acc += b;
                if acc > target {
                    pick = i;
                    break;
                }
            }
            pick
        } else {
            rng.random_range(0..n)
        };
        centres.row_mut(c).assign(&x.row(pick));
        let cr = centres.row(c).to_vec();
        for (i, b) in best.iter_mut().enumerate() {
            *b = b.min(sq_dist(row(i), &cr));
        }
    }
    // Lloyd iterations.
    let mut assign = vec![usize::MAX; n];
    let mut sums = Array2::<f64>::zeros((k, d));
    let mut counts = Array1::<usize>::zeros(k);
    for _ in 0..KMEANS_MAX_ITER {
        let new: Vec<usize> = {
            use rayon::prelude::*;
            let cs = &centres;
            (0..n)
                .into_par_iter()
                .map(|i| {
                    let xi = row(i);
                    let mut arg = 0;
                    let mut bd = f64::INFINITY;
                    for (c, cr) in cs.axis_iter(Axis(0)).enumerate() {
                        let dist = sq_dist(xi, cr.as_slice().expect("contiguous centre"));
                        if dist < bd {
                            bd = dist;
                            arg = c;
                        }
                    }
                    arg
                })
                .collect()
        };
        if new == assign {
            break;
        }
        assign = new;
        sums.fill(0.0);
        counts.fill(0);
        for (i, &c) in assign.iter().enumerate() {
            sums.row_mut(c).scaled_add(1.0, &x.row(i));
            counts[c] += 1;
        }
        for c in 0..k {
            if counts[c] > 0 {
                let inv = 1.0 / counts[c] as f64;
                Zip::from(centres.row_mut(c))
                    .and(sums.row(c))
                    .for_each(|m, &s| *m = s * inv);
            }
        }
    }
    centres
}
