//! A quick check after a plain fit: the exact kernel machine on a sample, at the fit's
//! gamma and at a narrower kernel (gamma × 4), same C and epsilon, by 3-fold
//! cross-validation. When the narrower kernel is clearly better the fit's output says
//! so and points to `kernlake tune` (the median heuristic is known to oversmooth with
//! few inputs: Garreau, Jitkrittum & Kanagawa, arXiv:1707.07269, 2017).

use ndarray::{ArrayView1, ArrayView2, Axis};

use crate::data::{survey, SurveySettings, TableReader};
use crate::error::Result;
use crate::kernel::Kernel;
use crate::model::Model;
use crate::solver::dcd::Loss;

use super::grid::{score_gamma, ExactFold};
use super::options::Validation;
use super::search::Folds;

/// Rows of the sample the check validates on.
pub const HINT_ROWS: usize = 1_500;
/// The narrower kernel's gamma factor.
pub const HINT_FACTOR: f64 = 4.0;
/// The narrower kernel must lower the validation RMSE by more than this share.
pub const HINT_GAIN: f64 = 0.03;

/// A clearly better gamma found by the quick check.
#[derive(Clone, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct GammaHint {
    /// The fit's gamma.
    pub gamma: f64,
    /// The better gamma (the fit's times [`HINT_FACTOR`]).
    pub better_gamma: f64,
    /// Cross-validated RMSE of the exact machine at the fit's gamma (target units).
    pub error: f64,
    /// The same at the better gamma.
    pub better_error: f64,
    /// Sample rows the check used.
    pub rows: usize,
}

impl GammaHint {
    /// One sentence for the fit's output.
    pub fn message(&self) -> String {
        format!(
            "note: on a {}-row sample the exact kernel machine at gamma = {:.4e} (×{}) has a {:.1}% lower cross-validated RMSE ({:.5} against {:.5}); `kernlake tune` searches gamma, C, epsilon and D",
            self.rows,
            self.better_gamma,
            HINT_FACTOR,
            100.0 * (self.error - self.better_error) / self.error,
            self.better_error,
            self.error
        )
    }
}

/// The check on standardized inputs `x` and raw targets `y`, with the fit's kernel, C
/// (solver units, as [`crate::solver::dcd::DcdSettings`] holds it) and epsilon (target
/// units); `None` when the narrower kernel is not clearly better.
///
/// # Errors
/// Too few rows for 3 folds ([`crate::Error::NoRows`]); a Newton system that cannot be
/// factorized ([`crate::Error::Numerical`]).
pub fn gamma_hint(
    x: ArrayView2<f64>,
    y: ArrayView1<f64>,
    kernel: Kernel,
    c: f64,
    epsilon: f64,
    loss: Loss,
    seed: u64,
) -> Result<Option<GammaHint>> {
    let m = x.nrows().min(HINT_ROWS);
    let folds = Folds::new(
        x.slice(ndarray::s![..m, ..]),
        y.slice(ndarray::s![..m]),
        Validation::KFold(3),
        seed,
    )?;
    let exact = ExactFold::all(&folds);
    let rows: usize = exact.iter().map(|f| f.y_val.len()).sum();
    let rmse = |gamma: f64| -> Result<f64> {
        let k = Kernel::new(kernel.kind, gamma)?;
        let s = score_gamma(&exact, &k, loss, &[(1.0, c)], &[(1.0, epsilon)], 1.0)?;
        Ok((s[0].sse.iter().sum::<f64>() / rows as f64).sqrt())
    };
    let error = rmse(kernel.gamma)?;
    let better_gamma = kernel.gamma * HINT_FACTOR;
    let better_error = rmse(better_gamma)?;
    Ok(
        (better_error.is_finite() && better_error < (1.0 - HINT_GAIN) * error).then_some(
            GammaHint {
                gamma: kernel.gamma,
                better_gamma,
                error,
                better_error,
                rows: m,
            },
        ),
    )
}

/// The check for a fitted `model` on a fresh uniform sample of `reader`'s rows (one
/// more pass over the data; seeded by the model's seed).
///
/// # Errors
/// As [`gamma_hint`], and any read error of the survey.
pub fn gamma_hint_for_model(reader: &TableReader, model: &Model) -> Result<Option<GammaHint>> {
    let settings = SurveySettings {
        sample_rows: HINT_ROWS,
        seed: model.problem.seed,
        threads: 0,
    };
    let s = survey(reader, &settings, &|_| {})?;
    let Some(y) = s.sample_y else {
        return Ok(None);
    };
    let cols: Vec<usize> = model
        .columns
        .features
        .iter()
        .filter_map(|name| s.features.iter().position(|f| &f.name == name))
        .collect();
    if cols.len() != model.scaler.dim() {
        return Ok(None);
    }
    let mut x = s.sample_x.select(Axis(1), &cols);
    model.scaler.apply(x.view_mut());
    gamma_hint(
        x.view(),
        y.view(),
        model.kernel,
        model.problem.c,
        model.problem.epsilon,
        model.problem.loss,
        model.problem.seed,
    )
}
