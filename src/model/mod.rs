//! The fitted model: input contract, scaler, feature map, weights and training report;
//! prediction, and saving to / loading from a model file (see [`crate::modelfile`]).

use std::path::Path;

use ndarray::{Array1, Array2, ArrayView2, ArrayViewMut1, Axis};
use rayon::prelude::*;

use crate::band::Band;
use crate::coverage::Coverage;
use crate::data::ResolvedColumns;
use crate::error::Result;
use crate::features::{FeatureMap, MapSpec};
use crate::kernel::Kernel;
use crate::modelfile::ModelFile;
use crate::report::TrainingReport;
use crate::scale::Standardizer;
use crate::solver::dcd::DcdSettings;

/// Rows scored together: the chunk's mapped features (rows × D f64) stay in cache.
const PREDICT_CHUNK: usize = 256;

mod stored;

/// A fitted approximate kernel epsilon-SVR.
///
/// Prediction for a row `x` of raw inputs: `intercept + weights · z(scale(x))`.
#[derive(Debug)]
pub struct Model {
    /// Input contract: feature column names in order, and the target's name.
    pub columns: ResolvedColumns,
    /// Standardizer applied to inputs before the map.
    pub scaler: Standardizer,
    /// The kernel the map approximates.
    pub kernel: Kernel,
    /// How the map was built.
    pub map_spec: MapSpec,
    /// Weights on the mapped features, in target units.
    pub weights: Array1<f64>,
    /// Constant term in target units.
    pub intercept: f64,
    /// The problem solved: C, epsilon and the loss (C and epsilon in target units), with
    /// the stopping settings the fit used.
    pub problem: DcdSettings,
    /// What happened during training.
    pub report: TrainingReport,
    /// Coverage landmarks and flag threshold (see [`crate::coverage`]), if computed.
    pub coverage: Option<Coverage>,
    /// Calibrated band (spread model and normalized holdout residuals; see
    /// [`crate::band`]), if the fit had a holdout. Files written before bands existed
    /// load with `None`.
    pub band: Option<Band>,
    map: Box<dyn FeatureMap>,
}

impl Model {
    /// Assembles a model from its parts.
    ///
    /// # Panics
    /// If the parts' dimensions disagree (library misuse).
    #[allow(clippy::too_many_arguments)]
    pub fn new(
        columns: ResolvedColumns,
        scaler: Standardizer,
        kernel: Kernel,
        map_spec: MapSpec,
        map: Box<dyn FeatureMap>,
        weights: Array1<f64>,
        intercept: f64,
        problem: DcdSettings,
        report: TrainingReport,
    ) -> Self {
        assert_eq!(
            scaler.dim(),
            map.input_dim(),
            "scaler and map disagree on inputs"
        );
        assert_eq!(
            columns.features.len(),
            map.input_dim(),
            "contract and map disagree"
        );
        assert_eq!(
            weights.len(),
            map.output_dim(),
            "weights and map disagree on D"
        );
        Model {
            columns,
            scaler,
            kernel,
            map_spec,
            weights,
            intercept,
            problem,
            report,
            coverage: None,
            band: None,
            map,
        }
    }

    /// The feature map.
    pub fn map(&self) -> &dyn FeatureMap {
        self.map.as_ref()
    }

    /// Number of input columns the model expects.
    pub fn input_dim(&self) -> usize {
        self.scaler.dim()
    }

    /// Predicts raw-unit rows `x` (rows × inputs, columns in contract order) into `out`,
    /// in parallel over chunks of rows on the current rayon pool. Row-wise, so the result
    /// does not depend on the thread count or on how rows are batched.
    ///
    /// # Panics
    /// If `x` has the wrong number of columns or `out` the wrong length.
    pub fn predict_into(&self, x: ArrayView2<f64>, mut out: ArrayViewMut1<f64>) {
        assert_eq!(
            x.ncols(),
            self.input_dim(),
            "predict: wrong number of input columns"
        );
        assert_eq!(
            out.len(),
            x.nrows(),
            "predict: output length differs from rows"
        );
        let d_out = self.map.output_dim();
        x.axis_chunks_iter(Axis(0), PREDICT_CHUNK)
            .into_par_iter()
            .zip(
                out.axis_chunks_iter_mut(Axis(0), PREDICT_CHUNK)
                    .into_par_iter(),
            )
            .for_each(|(xc, mut oc)| {
                let mut xs = xc.to_owned();
                self.scaler.apply(xs.view_mut());
                let mut z = Array2::zeros((xs.nrows(), d_out));
                self.map.transform_into(xs.view(), z.view_mut());
                for (o, zr) in oc.iter_mut().zip(z.axis_iter(Axis(0))) {
                    *o = self.intercept + zr.dot(&self.weights);
                }
            });
    }

    /// Allocating form of [`Model::predict_into`].
    pub fn predict(&self, x: ArrayView2<f64>) -> Array1<f64> {
        let mut out = Array1::zeros(x.nrows());
        self.predict_into(x, out.view_mut());
        out
    }

    /// Saves the model atomically (a partial file never appears under `path`).
    pub fn save(&self, path: &Path) -> Result<()> {
        self.to_model_file()?.save(path)
    }

    /// Loads a model saved by [`Model::save`].
    pub fn load(path: &Path) -> Result<Model> {
        let file = ModelFile::load(path)?;
        Model::from_model_file(&file, path)
    }
}
