//! Random Fourier features (Rahimi & Recht, "Random Features for Large-Scale Kernel
//! Machines", NIPS 2007).
//!
//! By Bochner's theorem a shift-invariant kernel is the Fourier transform of a
//! probability density p(w), so `k(x, y) = E_w[cos(wᵀ(x − y))]`. Drawing frequencies
//! `w_j ~ p` gives an unbiased Monte-Carlo estimate through explicit features, in one of
//! two variants:
//!
//! - [`FourierVariant::CosPhase`]: D frequencies and phases `b_j ~ U[0, 2π)`,
//!   `z(x) = √(2/D) cos(Wᵀx + b)`;
//! - [`FourierVariant::SinCos`]: D/2 frequencies, `z(x) = √(2/D) [cos(Wᵀx), sin(Wᵀx)]`,
//!   whose estimate has the smaller variance (Sutherland & Schneider, "On the Error of
//!   Random Fourier Features", UAI 2015).
//!
//! Spectral densities (see [`crate::kernel`] for the parametrisation): Gaussian
//! `N(0, 2γI)`; Laplacian a Cauchy with scale γ per coordinate; Matérn ν a multivariate t
//! with 2ν degrees of freedom and scale `1/ℓ`, sampled as `z·√(2ν/u)/ℓ` with
//! `z ~ N(0, I)`, `u ~ χ²(2ν)`.
//!
//! The transform works on blocks of a row chunk times a panel of output columns (see
//! `panel_layout`): the matrix product of the chunk with that panel of W is
//! written straight into the output block, then one in-place pass of the vectorised
//! kernel of [`super::fastcos`] runs over the block while it is still in the level-2
//! cache, adding the phase and applying the scale `√(2/D)` as it goes. The cos + phase
//! variant is evaluated as `sin(Wᵀx + (b + π/2))` with `b + π/2` rounded once when the
//! map is built (the sine is two operations shorter than the cosine); this moves each
//! argument by at most half a unit in the last place of `b + π/2` (`4.5·10⁻¹⁶`), well
//! below the rounding of the product `Wᵀx` itself.

use ndarray::{s, Array1, Array2, ArrayView2, ArrayViewMut2, Axis};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Cauchy, ChiSquared, Distribution, StandardNormal};
use serde::{Deserialize, Serialize};

use super::{
    bad_parts, check_kernel, fastcos, for_each_row_slice, panel_layout, par_row_chunks,
    saved_array, FeatureMap, FourierVariant, MapParts, SavedKernel,
};
use crate::error::{Error, Result};
use crate::kernel::{Kernel, KernelKind};

/// [`MapParts::kind`] of a random Fourier map.
pub(crate) const KIND_FOURIER: &str = "fourier";
/// [`MapParts::kind`] of an orthogonal random feature map.
pub(crate) const KIND_ORTHOGONAL: &str = "orthogonal";

/// A map `z(x) = √(2/D) cos(Wᵀx + b)` or `√(2/D) [cos(Wᵀx), sin(Wᵀx)]` with frequencies
/// drawn from the kernel's spectral density (random Fourier features) or in orthogonal
/// blocks (see [`super::orthogonal`]).
#[derive(Clone, Debug)]
pub struct FourierMap {
    kernel: Kernel,
    variant: FourierVariant,
    orthogonal: bool,
    /// `input_dim × m` frequencies, one per column.
    freqs: Array2<f64>,
    /// Phases (CosPhase only), length m.
    phases: Option<Array1<f64>>,
    /// `b + π/2` (CosPhase only): the transform evaluates `cos(wᵀx + b)` as
    /// `sin(wᵀx + (b + π/2))`, the shorter kernel of [`fastcos`].
    sin_shifts: Option<Array1<f64>>,
    /// `√(2/D)`.
    scale: f64,
}

/// Saved scalar settings of a [`FourierMap`].
#[derive(Serialize, Deserialize)]
struct FourierMeta {
    kernel: SavedKernel,
    variant: FourierVariant,
    input_dim: usize,
    output_dim: usize,
}

/// Validates the shared settings; returns the number of frequencies m.
pub(crate) fn frequency_count(
    input_dim: usize,
    components: usize,
    variant: FourierVariant,
) -> Result<usize> {
    if input_dim == 0 {
        return Err(Error::invalid("input dimension", "must be at least 1"));
    }
    if components == 0 {
        return Err(Error::invalid(
            "dim",
            "the feature dimension D must be at least 1",
        ));
    }
    match variant {
        FourierVariant::CosPhase => Ok(components),
        FourierVariant::SinCos if components.is_multiple_of(2) => Ok(components / 2),
        FourierVariant::SinCos => Err(Error::invalid(
            "dim",
            format!("sin/cos pairs need an even feature dimension D, got {components}"),
        )),
    }
}

impl FourierMap {
    /// Random Fourier features for `kernel` on `input_dim` inputs with `components` = D
    /// outputs, frequencies (then phases) drawn from a ChaCha8 generator seeded by `seed`.
    ///
    /// Errors: `components = 0`, odd D with [`FourierVariant::SinCos`], `input_dim = 0`,
    /// gamma not finite and positive.
    pub fn new(
        kernel: Kernel,
        input_dim: usize,
        components: usize,
        variant: FourierVariant,
        seed: u64,
    ) -> Result<Self> {
        let kernel = check_kernel(kernel)?;
        let m = frequency_count(input_dim, components, variant)?;
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let mut freqs = Array2::zeros((input_dim, m));
        let mut buf = vec![0.0; input_dim];
        for mut col in freqs.axis_iter_mut(Axis(1)) {
            sample_frequency(kernel, &mut rng, &mut buf);
            for (f, v) in col.iter_mut().zip(&buf) {
                *f = *v;
            }
        }
        let phases = draw_phases(variant, m, &mut rng);
        Ok(Self::from_frequencies(
            kernel, variant, false, freqs, phases,
        ))
    }

    /// Assembles a map from given frequencies (`input_dim × m`) and, for
    /// [`FourierVariant::CosPhase`], phases of length m.
    pub(crate) fn from_frequencies(
        kernel: Kernel,
        variant: FourierVariant,
        orthogonal: bool,
        freqs: Array2<f64>,
        phases: Option<Array1<f64>>,
    ) -> Self {
        let d_out = match variant {
            FourierVariant::CosPhase => freqs.ncols(),
            FourierVariant::SinCos => 2 * freqs.ncols(),
        };
        let sin_shifts = phases
            .as_ref()
            .map(|b| b.mapv(|v| v + std::f64::consts::FRAC_PI_2));
        FourierMap {
            kernel,
            variant,
            orthogonal,
            freqs,
            phases,
            sin_shifts,
            scale: (2.0 / d_out as f64).sqrt(),
        }
    }

    /// The kernel this map approximates.
    pub fn kernel(&self) -> Kernel {
        self.kernel
    }

    /// The variant (cos + phase or sin/cos pairs).
    pub fn variant(&self) -> FourierVariant {
        self.variant
    }

    /// Whether the frequencies come in orthogonal blocks (Yu et al., NIPS 2016).
    pub fn is_orthogonal(&self) -> bool {
        self.orthogonal
    }

    /// The frequencies W, `input_dim × m`, one per column.
    pub fn frequencies(&self) -> ArrayView2<'_, f64> {
        self.freqs.view()
    }

    /// The phases b (cos + phase variant only).
    pub fn phases(&self) -> Option<&Array1<f64>> {
        self.phases.as_ref()
    }

    /// Rebuilds a map from [`FeatureMap::to_parts`] output.
    pub fn from_parts(parts: &MapParts) -> Result<Self> {
        let orthogonal = match parts.kind.as_str() {
            KIND_FOURIER => false,
            KIND_ORTHOGONAL => true,
            other => return Err(bad_parts(format!("'{other}' is not a Fourier map"))),
        };
        let meta: FourierMeta = serde_json::from_value(parts.meta.clone())
            .map_err(|e| bad_parts(format!("settings unreadable: {e}")))?;
        let kernel = meta.kernel.to_kernel()?;
        let m = frequency_count(meta.input_dim, meta.output_dim, meta.variant)
            .map_err(|e| bad_parts(format!("saved settings are invalid: {e}")))?;
        let freqs = saved_array(parts, "frequencies", Some(meta.input_dim), Some(m))?.clone();
        let phases = match meta.variant {
            FourierVariant::CosPhase => {
                let p = saved_array(parts, "phases", Some(1), Some(m))?;
                Some(p.row(0).to_owned())
            }
            FourierVariant::SinCos => None,
        };
        Ok(Self::from_frequencies(
            kernel,
            meta.variant,
            orthogonal,
            freqs,
            phases,
        ))
    }

    /// Maps one chunk of rows, one panel of at most `panel` output columns at a time: the
    /// product of the chunk with the matching columns of W into that block of `out`, then
    /// at once, while the block is in cache, one pass of phase + cosine + scale (or the
    /// sin/cos pair, `panel / 2` frequencies a block) over it.
    fn map_chunk(&self, xc: ArrayView2<f64>, mut out: ArrayViewMut2<f64>, panel: usize) {
        let m = self.freqs.ncols();
        let scale = self.scale;
        // Only used when `out` has non-contiguous rows; allocated once per chunk then.
        let mut scratch = Vec::new();
        let width = match self.variant {
            FourierVariant::CosPhase => panel,
            FourierVariant::SinCos => (panel / 2).max(1),
        };
        let mut j0 = 0;
        while j0 < m {
            let j1 = (j0 + width).min(m);
            let w = self.freqs.slice(s![.., j0..j1]);
            match self.variant {
                FourierVariant::CosPhase => {
                    let shifts = &self
                        .sin_shifts
                        .as_ref()
                        .and_then(|p| p.as_slice())
                        .expect("cos + phase map without contiguous phases")[j0..j1];
                    let mut block = out.slice_mut(s![.., j0..j1]);
                    ndarray::linalg::general_mat_mul(1.0, &xc, &w, 0.0, &mut block);
                    // Phase, cosine (as a sine of the argument moved by π/2) and scale.
                    for_each_row_slice(block, &mut scratch, |row| {
                        fastcos::sin_shifted_in_place(row, shifts, scale)
                    });
                }
                FourierVariant::SinCos => {
                    let (mut c, mut sn) =
                        out.multi_slice_mut((s![.., j0..j1], s![.., m + j0..m + j1]));
                    ndarray::linalg::general_mat_mul(1.0, &xc, &w, 0.0, &mut c);
                    // Row by row: a plain copy of each contiguous row, not an
                    // element-wise copy of the strided panel.
                    for (mut to, from) in sn.rows_mut().into_iter().zip(c.rows()) {
                        match (to.as_slice_mut(), from.as_slice()) {
                            (Some(t), Some(f)) => t.copy_from_slice(f),
                            _ => to.assign(&from),
                        }
                    }
                    for_each_row_slice(c, &mut scratch, |row| fastcos::cos_in_place(row, scale));
                    for_each_row_slice(sn, &mut scratch, |row| fastcos::sin_in_place(row, scale));
                }
            }
            j0 = j1;
        }
    }
}

impl FeatureMap for FourierMap {
    fn input_dim(&self) -> usize {
        self.freqs.nrows()
    }

    fn output_dim(&self) -> usize {
        match self.variant {
            FourierVariant::CosPhase => self.freqs.ncols(),
            FourierVariant::SinCos => 2 * self.freqs.ncols(),
        }
    }

    #[track_caller]
    fn transform_into(&self, x: ArrayView2<f64>, out: ArrayViewMut2<f64>) {
        let (rows, panel) = panel_layout(self.output_dim());
        par_row_chunks(self, x, out, rows, |xc, oc| self.map_chunk(xc, oc, panel));
    }

    fn to_parts(&self) -> MapParts {
        let meta = FourierMeta {
            kernel: SavedKernel::from_kernel(self.kernel),
            variant: self.variant,
            input_dim: self.input_dim(),
            output_dim: self.output_dim(),
        };
        let mut arrays = vec![("frequencies".to_string(), self.freqs.clone())];
        if let Some(p) = &self.phases {
            arrays.push(("phases".to_string(), p.clone().insert_axis(Axis(0))));
        }
        MapParts {
            kind: if self.orthogonal {
                KIND_ORTHOGONAL
            } else {
                KIND_FOURIER
            }
            .to_string(),
            meta: serde_json::to_value(meta).expect("map settings serialise to JSON"),
            arrays,
        }
    }
}

/// Draws one frequency vector from the spectral density of `kernel` into `out`.
fn sample_frequency(kernel: Kernel, rng: &mut ChaCha8Rng, out: &mut [f64]) {
    match kernel.kind {
        KernelKind::Gaussian => {
            let sd = (2.0 * kernel.gamma).sqrt();
            for v in out.iter_mut() {
                let z: f64 = rng.sample(StandardNormal);
                *v = sd * z;
            }
        }
        KernelKind::Laplacian => {
            let c = Cauchy::new(0.0, kernel.gamma).expect("gamma was checked positive");
            for v in out.iter_mut() {
                *v = c.sample(rng);
            }
        }
        KernelKind::Matern12 | KernelKind::Matern32 | KernelKind::Matern52 => {
            let nu = kernel
                .kind
                .matern_nu()
                .expect("a Matérn kernel has a smoothness");
            for v in out.iter_mut() {
                *v = rng.sample(StandardNormal);
            }
            let u = ChiSquared::new(2.0 * nu).expect("2ν > 0").sample(rng);
            let factor = (2.0 * nu / u).sqrt() / kernel.length_scale();
            for v in out.iter_mut() {
                *v *= factor;
            }
        }
    }
}

/// Phases `b ~ U[0, 2π)` for the cos + phase variant, drawn after the frequencies.
pub(crate) fn draw_phases(
    variant: FourierVariant,
    m: usize,
    rng: &mut ChaCha8Rng,
) -> Option<Array1<f64>> {
    match variant {
        FourierVariant::CosPhase => Some(Array1::from_iter(
            (0..m).map(|_| rng.random_range(0.0..std::f64::consts::TAU)),
        )),
        FourierVariant::SinCos => None,
    }
}
