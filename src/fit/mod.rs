//! The fitting front door: a builder that fits a [`Model`] on ndarray data or streams it
//! from Parquet/CSV sources.

use std::time::Instant;

use ndarray::{ArrayView1, ArrayView2, Axis};

use crate::band::Band;
use crate::data::{survey, SurveySettings, TableReader};
use crate::error::Result;
use crate::features::MapSpec;
use crate::kernel::KernelKind;
use crate::model::Model;
use crate::settings::thread_pool;
use crate::solver::blocks::{
    is_holdout, ArraySource, BlockSource, Method, Silent, TrainObserver, TrainOutcome, Trainer,
};
use crate::solver::dcd::Loss;

mod choose;
mod facts;
mod options;
pub mod parts;

use choose::{assemble, choose};

use facts::{facts_from_arrays, facts_from_survey, Facts, FileSource};
pub use options::{hessian_rows_for, FitOptions};

/// Builder for fitting a model (arrow-rs style `with_*` methods).
///
/// ```no_run
/// # use kernlake::fit::Fitter;
/// # let (x, y) = (ndarray::Array2::<f64>::zeros((10, 2)), ndarray::Array1::<f64>::zeros(10));
/// let model = Fitter::new().with_dim(512).with_seed(7).fit(x.view(), y.view())?;
/// # Ok::<(), kernlake::Error>(())
/// ```
#[derive(Clone, Debug, Default)]
pub struct Fitter {
    opts: FitOptions,
}

macro_rules! setter {
    ($(#[$doc:meta] $name:ident, $field:ident : $ty:ty;)*) => {
        $( #[$doc] pub fn $name(mut self, v: $ty) -> Self { self.opts.$field = v; self } )*
    };
}

impl Fitter {
    /// A builder with the defaults of [`FitOptions`].
    pub fn new() -> Self {
        Self::default()
    }

    /// A builder from complete options.
    pub fn from_options(opts: FitOptions) -> Self {
        Fitter { opts }
    }

    /// The options as they stand.
    pub fn options(&self) -> &FitOptions {
        &self.opts
    }

    setter! {
        /// Kernel family.
        with_kernel, kernel: KernelKind;
        /// Feature map specification (its seed is replaced by the fit's seed).
        with_map, map: MapSpec;
        /// Loss beyond the tube.
        with_loss, loss: Loss;
        /// Solver (Newton for the squared loss by default).
        with_method, method: Method;
        /// Newton solver: expected rows in the Hessian's sample each pass.
        with_hessian_rows, hessian_rows: Option<usize>;
        /// Relative duality gap tolerance.
        with_tol, tol: f64;
        /// Epoch limit.
        with_max_epochs, max_epochs: usize;
        /// Thread count (0 = all cores).
        with_threads, threads: usize;
        /// Rows per block.
        with_block_rows, block_rows: usize;
        /// Resident-memory budget in bytes.
        with_memory_bytes, memory_bytes: usize;
        /// Holdout share.
        with_holdout, holdout: f64;
        /// DCD sweeps per block.
        with_sweeps_per_block, sweeps_per_block: usize;
    }

    /// Kernel width gamma (see [`crate::kernel`] for the convention).
    pub fn with_gamma(mut self, gamma: f64) -> Self {
        self.opts.gamma = Some(gamma);
        self
    }

    /// Penalty C in target units.
    pub fn with_c(mut self, c: f64) -> Self {
        self.opts.c = Some(c);
        self
    }

    /// Tube half-width epsilon in target units.
    pub fn with_epsilon(mut self, epsilon: f64) -> Self {
        self.opts.epsilon = Some(epsilon);
        self
    }

    /// Number of mapped features D.
    pub fn with_dim(mut self, d: usize) -> Self {
        self.opts.map.dim = d;
        self
    }

    /// Seed for every random choice (the map's too).
    pub fn with_seed(mut self, seed: u64) -> Self {
        self.opts.seed = seed;
        self
    }

    /// Checks every setting (see [`FitOptions::validate`]); the fits call it first.
    pub fn validate(&self) -> Result<()> {
        self.opts.validate()
    }

    /// Fits on in-memory rows `x` (rows × inputs, raw units) and targets `y`.
    ///
    /// # Panics
    /// If `x` and `y` differ in rows.
    pub fn fit(&self, x: ArrayView2<f64>, y: ArrayView1<f64>) -> Result<Model> {
        self.fit_observed(x, y, &Silent)
    }

    /// [`Fitter::fit`] with an observer that sees progress and may stop the run
    /// ([`TrainObserver::should_stop`]).
    ///
    /// # Panics
    /// If `x` and `y` differ in rows.
    pub fn fit_observed(
        &self,
        x: ArrayView2<f64>,
        y: ArrayView1<f64>,
        observer: &dyn TrainObserver,
    ) -> Result<Model> {
        assert_eq!(x.nrows(), y.len(), "fit: x and y differ in rows");
        self.validate()?;
        let t0 = Instant::now();
        let facts = facts_from_arrays(x, y, self.opts.sample_rows, self.opts.seed)?;
        let source = ArraySource::new(x, y, self.opts.block_rows);
        self.train(facts, &source, observer, t0)
    }

    /// Streams a fit over files: one survey pass (statistics, sample), then block
    /// minimization epochs. `observer` sees progress.
    pub fn fit_files(
        &self,
        reader: &TableReader,
        observer: &dyn TrainObserver,
        survey_progress: &dyn Fn(u64),
    ) -> Result<Model> {
        self.validate()?;
        let t0 = Instant::now();
        if observer.should_stop() {
            return Err(crate::Error::Interrupted);
        }
        let settings = SurveySettings {
            sample_rows: self.opts.sample_rows,
            seed: self.opts.seed,
            threads: self.opts.threads,
        };
        let s = survey(reader, &settings, survey_progress)?;
        let (facts, reader) = facts_from_survey(s, reader)?;
        let source = FileSource { reader: &reader };
        self.train(facts, &source, observer, t0)
    }

    fn train(
        &self,
        facts: Facts,
        source: &dyn BlockSource,
        observer: &dyn TrainObserver,
        t0: Instant,
    ) -> Result<Model> {
        let pool = thread_pool(self.opts.threads)?;
        let chosen = choose(&self.opts, &facts, &pool)?;
        let trainer = Trainer {
            scaler: &facts.scaler,
            map: chosen.map.as_ref(),
            target: facts.target,
            settings: &chosen.settings,
            rows_total: facts.rows_total,
            pool: &pool,
        };
        let out: TrainOutcome = trainer.run(source, observer)?;
        let band =
            pool.install(|| calibrate_band(&facts, chosen.map.as_ref(), &out, &self.opts))?;
        let mut model = assemble(facts, chosen, out, &pool, t0)?;
        model.band = band;
        Ok(model)
    }
}

/// The band of a fitted model (see [`crate::band`]): the spread model on the survey's
/// seeded uniform sample restricted to training rows (the holdout hash decides, as in
/// the passes), the scores on every kept holdout row. `None` without a holdout.
fn calibrate_band(
    facts: &Facts,
    map: &dyn crate::features::FeatureMap,
    out: &TrainOutcome,
    o: &FitOptions,
) -> Result<Option<Band>> {
    let Some((hx, hy)) = out.holdout_rows.as_ref() else {
        return Ok(None);
    };
    let train: Vec<usize> = facts
        .sample_row_ids
        .iter()
        .enumerate()
        .filter(|&(_, &id)| !is_holdout(id, o.seed, o.holdout))
        .map(|(i, _)| i)
        .collect();
    let tx = facts.sample_x.select(Axis(0), &train);
    let ty = facts.sample_y.select(Axis(0), &train);
    Band::calibrate(
        map,
        out.weights.view(),
        out.intercept,
        (tx.view(), ty.view()),
        (hx.view(), hy.view()),
    )
}
