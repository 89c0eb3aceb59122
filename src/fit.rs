//! The fitting front door: a builder that fits a [`Model`] on ndarray data or streams it
//! from Parquet/CSV sources.

use std::time::Instant;

use ndarray::{Array1, Array2, ArrayView1, ArrayView2, Axis};
use serde::{Deserialize, Serialize};

use crate::coverage::Coverage;
use crate::data::{splitmix64, survey, ResolvedColumns, Survey, SurveySettings, TableReader};
use crate::error::{Error, Result};
use crate::features::{build_map, MapSpec};
use crate::kernel::{Kernel, KernelKind};
use crate::model::Model;
use crate::report::{Choice, ColumnSkips, TrainingReport};
use crate::scale::Standardizer;
use crate::solver::blocks::{
    ArraySource, BlockSource, Method, Silent, TargetScale, TrainObserver, TrainOutcome,
    TrainSettings, Trainer,
};
use crate::solver::dcd::{DcdSettings, Loss};
use crate::tune::Defaults;

/// How to fit: kernel, feature map, solver and streaming settings. Values left unset
/// (gamma, C, epsilon) are chosen from the data (see [`crate::tune`]).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct FitOptions {
    /// Kernel family.
    pub kernel: KernelKind,
    /// Kernel width; `None` = median heuristic.
    pub gamma: Option<f64>,
    /// Feature map kind, D, variant, landmarks, seed.
    pub map: MapSpec,
    /// Penalty C in target units; `None` = Cherkassky & Ma.
    pub c: Option<f64>,
    /// Tube half-width in target units; `None` = Cherkassky & Ma.
    pub epsilon: Option<f64>,
    /// Loss beyond the tube.
    pub loss: Loss,
    /// Solver: Newton passes for the squared loss, dual coordinate descent for the linear
    /// one (`Auto`), or either forced.
    #[serde(default)]
    pub method: Method,
    /// Newton solver: expected rows in the Hessian's sample each pass; `None` = 32 rows
    /// per mapped feature, at least 16,384 (see [`hessian_rows_for`]).
    #[serde(default)]
    pub hessian_rows: Option<usize>,
    /// Stop when the relative duality gap is at most this.
    pub tol: f64,
    /// Epoch limit.
    pub max_epochs: usize,
    /// DCD sweeps over a block before the next one.
    pub sweeps_per_block: usize,
    /// Shrinking in the DCD sweeps.
    pub shrinking: bool,
    /// Seed for every random choice (map, order, sample, holdout).
    pub seed: u64,
    /// Threads (0 = all cores).
    pub threads: usize,
    /// Rows per block.
    pub block_rows: usize,
    /// Bytes of mapped blocks kept in memory between epochs.
    pub memory_bytes: usize,
    /// Share of rows held out for validation.
    pub holdout: f64,
    /// Epochs without holdout improvement before stopping (0 = never).
    pub patience: usize,
    /// Rows in the survey's random sample (bandwidth, landmarks, noise estimate).
    pub sample_rows: usize,
}

/// The Newton solver's default Hessian sample for `features` mapped features: 32 rows per
/// feature, at least 16,384. The sampled Gram matrix's error shrinks like √(D/m), so the
/// sample must grow with D; its cost per pass is m·D² multiply-adds.
pub fn hessian_rows_for(features: usize) -> usize {
    (32 * (features + 1)).max(16_384)
}

impl Default for FitOptions {
    fn default() -> Self {
        let dcd = DcdSettings::default();
        FitOptions {
            kernel: KernelKind::Gaussian,
            gamma: None,
            map: MapSpec::default(),
            c: None,
            epsilon: None,
            loss: Loss::L2,
            method: Method::Auto,
            hessian_rows: None,
            tol: dcd.tol,
            max_epochs: dcd.max_epochs,
            sweeps_per_block: dcd.sweeps_per_block,
            shrinking: dcd.shrinking,
            seed: 0,
            threads: 0,
            block_rows: 16_384,
            memory_bytes: 1 << 30,
            holdout: 0.0,
            patience: 3,
            sample_rows: 10_000,
        }
    }
}

/// Builder for fitting a model (arrow-rs style `with_*` methods).
///
/// ```no_run
/// # use kernlake::fit::Fitter;
/// # let (x, y) = (ndarray::Array2::<f64>::zeros((10, 2)), ndarray::Array1::<f64>::zeros(10));
/// let model = Fitter::new().with_components(512).with_seed(7).fit(x.view(), y.view())?;
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
        /// Feature map specification.
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
    pub fn with_components(mut self, d: usize) -> Self {
        self.opts.map.components = d;
        self
    }

    /// Seed for every random choice.
    pub fn with_seed(mut self, seed: u64) -> Self {
        self.opts.seed = seed;
        self.opts.map.seed = seed;
        self
    }

    fn validate(&self) -> Result<()> {
        let o = &self.opts;
        if o.map.components == 0 {
            return Err(Error::invalid("components", "must be at least 1"));
        }
        if o.block_rows == 0 {
            return Err(Error::invalid("block rows", "must be at least 1"));
        }
        if let Some(g) = o.gamma {
            Kernel::new(o.kernel, g)?;
        }
        Ok(())
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
        if x.nrows() == 0 {
            return Err(Error::NoRows("the input has zero rows".into()));
        }
        for ((r, c), v) in x.indexed_iter() {
            if !v.is_finite() {
                return Err(Error::NonFinite { row: r, column: c });
            }
        }
        if let Some(r) = y.iter().position(|v| !v.is_finite()) {
            return Err(Error::NonFinite {
                row: r,
                column: x.ncols(),
            });
        }
        let n = x.nrows() as u64;
        let scaler = Standardizer::fit(x);
        let mean = y.mean().unwrap_or(0.0);
        let sd = y.mapv(|v| (v - mean).powi(2)).mean().unwrap_or(0.0).sqrt();
        let idx = sample_index(n, self.opts.sample_rows, self.opts.seed);
        let mut sx = x.select(Axis(0), &idx);
        scaler.apply(sx.view_mut());
        let sy = y.select(Axis(0), &idx);
        let columns = ResolvedColumns {
            features: (0..x.ncols()).map(|j| format!("x{}", j + 1)).collect(),
            target: Some("y".into()),
        };
        let source = ArraySource::new(x, y, self.opts.block_rows);
        let facts = Facts {
            columns,
            scaler,
            target: TargetScale { mean, sd },
            sample_x: sx,
            sample_y: sy,
            rows_total: n,
            rows_skipped: 0,
            skipped_by_column: Vec::new(),
            constant_columns: Vec::new(),
        };
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
        let o = &self.opts;
        let train_rows =
            ((facts.rows_total - facts.rows_skipped) as f64 * (1.0 - o.holdout)) as u64;
        let need_defaults = o.gamma.is_none() || o.c.is_none() || o.epsilon.is_none();
        let defaults = if need_defaults {
            Some(Defaults::from_sample(
                facts.sample_x.view(),
                facts.sample_y.view(),
                facts.target.mean,
                facts.target.sd,
                train_rows.max(2),
            )?)
        } else {
            None
        };
        let rule = |given: Option<f64>, default: Option<f64>, why: &str| match given {
            Some(v) => Choice {
                value: v,
                source: "given".into(),
            },
            None => Choice {
                value: default.unwrap_or(f64::NAN),
                source: why.into(),
            },
        };
        let gamma = rule(
            o.gamma,
            defaults.map(|d| d.gamma),
            "median heuristic: 1 / median squared distance of standardized sample rows",
        );
        // Cherkassky & Ma's C is in target units, as C is for the linear loss. For the
        // squared loss C multiplies squared residuals and is unit-free, so kernlake divides
        // the rule's value by the target's standard deviation.
        let (c_default, c_why) = match o.loss {
            Loss::L1 => (
                defaults.map(|d| d.c),
                "Cherkassky & Ma (2004): max |mean ± 3 sd| of the target",
            ),
            Loss::L2 => (
                defaults.map(|d| d.c / facts.target.sd),
                "Cherkassky & Ma (2004) max |mean ± 3 sd| of the target, divided by sd for the squared loss",
            ),
        };
        let c = rule(o.c, c_default, c_why);
        let epsilon = rule(
            o.epsilon,
            defaults.map(|d| d.epsilon),
            &format!(
                "Cherkassky & Ma (2004): 3 σ √(ln n / n), noise σ ≈ {:.4} from 3-nearest-neighbour residuals",
                defaults.map(|d| d.noise_sd).unwrap_or(f64::NAN)
            ),
        );
        let kernel = Kernel::new(o.kernel, gamma.value)?;
        let map = build_map(
            &o.map,
            kernel,
            facts.scaler.dim(),
            Some(facts.sample_x.view()),
        )?;
        let dcd = DcdSettings {
            c: c.value,
            epsilon: epsilon.value,
            loss: o.loss,
            shrinking: o.shrinking,
            sweeps_per_block: o.sweeps_per_block,
            tol: o.tol,
            max_epochs: o.max_epochs,
            seed: o.seed,
        };
        let settings = TrainSettings {
            dcd: dcd.clone(),
            method: o.method,
            hessian_rows: o
                .hessian_rows
                .unwrap_or_else(|| hessian_rows_for(map.output_dim())),
            memory_bytes: o.memory_bytes,
            holdout: o.holdout,
            patience: o.patience,
            threads: o.threads,
            block_rows: o.block_rows,
        };
        let trainer = Trainer {
            scaler: &facts.scaler,
            map: map.as_ref(),
            target: facts.target,
            settings: &settings,
            rows_total: facts.rows_total,
        };
        let out: TrainOutcome = trainer.run(source, observer)?;
        let report = TrainingReport {
            rows_total: facts.rows_total,
            rows_trained: out.rows_trained,
            rows_holdout: out.rows_holdout,
            rows_skipped: facts.rows_skipped,
            skipped_by_column: facts.skipped_by_column,
            constant_columns: facts.constant_columns,
            gamma,
            c,
            epsilon,
            features: map.output_dim(),
            epochs: out.history.len(),
            method: out.method,
            stop: out.stop,
            objective: out.objective,
            holdout: out.holdout,
            support_share: out.support_share,
            updates: out.updates,
            history: out.history,
            seconds: t0.elapsed().as_secs_f64(),
            threads: if o.threads == 0 {
                rayon::current_num_threads()
            } else {
                o.threads
            },
        };
        // The flag threshold comes from the training holdout when there is one (rows
        // the solver never saw), else from the sample rows not used as landmarks.
        let coverage = Coverage::fit(
            facts.sample_x.view(),
            kernel,
            out.holdout_inputs.as_ref().map(|h| h.view()),
        )?;
        let mut model = Model::new(
            facts.columns,
            facts.scaler,
            kernel,
            o.map.clone(),
            map,
            out.weights,
            out.intercept,
            dcd,
            report,
        );
        model.coverage = Some(coverage);
        Ok(model)
    }
}

/// What the trainer needs to know about the data before the first epoch.
struct Facts {
    columns: ResolvedColumns,
    scaler: Standardizer,
    target: TargetScale,
    sample_x: Array2<f64>,
    sample_y: Array1<f64>,
    rows_total: u64,
    rows_skipped: u64,
    skipped_by_column: Vec<ColumnSkips>,
    constant_columns: Vec<String>,
}

/// The rows of a seeded uniform sample of `k` of `n` rows: the `k` smallest keys
/// of [`splitmix64`], the same rule as the survey pass's bottom-k sample, in row order.
fn sample_index(n: u64, k: usize, seed: u64) -> Vec<usize> {
    let mut keyed: Vec<(u64, usize)> = (0..n).map(|r| (splitmix64(seed, r), r as usize)).collect();
    if keyed.len() > k {
        keyed.select_nth_unstable(k);
        keyed.truncate(k);
    }
    let mut idx: Vec<usize> = keyed.into_iter().map(|(_, r)| r).collect();
    idx.sort_unstable();
    idx
}

/// Turns a survey into training facts, dropping constant input columns (and returning a
/// reader over the remaining columns).
fn facts_from_survey(s: Survey, reader: &TableReader) -> Result<(Facts, TableReader)> {
    let target = s.target.as_ref().ok_or_else(|| {
        Error::NoRows("no target column was chosen (give the target column's name)".into())
    })?;
    if s.rows_used == 0 {
        return Err(Error::NoRows(format!(
            "all {} rows were skipped for missing values",
            s.rows_total
        )));
    }
    let keep: Vec<usize> = (0..s.features.len())
        .filter(|&j| !s.constant_features.contains(&s.features[j].name))
        .collect();
    if keep.is_empty() {
        return Err(Error::NoRows("every input column is constant".into()));
    }
    let columns = ResolvedColumns {
        features: keep.iter().map(|&j| s.features[j].name.clone()).collect(),
        target: s.columns.target.clone(),
    };
    let full = Standardizer::from_survey(&s);
    let scaler = Standardizer {
        mean: keep.iter().map(|&j| full.mean[j]).collect(),
        scale: keep.iter().map(|&j| full.scale[j]).collect(),
    };
    let mut sample_x = s.sample_x.select(Axis(1), &keep);
    scaler.apply(sample_x.view_mut());
    let sample_y = s.sample_y.clone().unwrap_or_else(|| Array1::zeros(0));
    let mut skipped_by_column: Vec<ColumnSkips> = s
        .features
        .iter()
        .map(|c| ColumnSkips {
            column: c.name.clone(),
            rows: c.missing,
        })
        .collect();
    skipped_by_column.push(ColumnSkips {
        column: target.name.clone(),
        rows: target.missing,
    });
    skipped_by_column.retain(|c| c.rows > 0);
    let sd = target.variance.sqrt();
    let facts = Facts {
        columns: columns.clone(),
        scaler,
        target: TargetScale {
            mean: target.mean,
            sd: if sd > 0.0 { sd } else { 1.0 },
        },
        sample_x,
        sample_y,
        rows_total: s.rows_total,
        rows_skipped: s.rows_skipped,
        skipped_by_column,
        constant_columns: s.constant_features.clone(),
    };
    let reader = TableReader::new(reader.files().to_vec(), columns)
        .with_batch_rows(reader.batch_rows())
        .with_missing(reader.missing())
        .with_csv(reader.csv().clone());
    Ok((facts, reader))
}

/// A [`TableReader`] as a block source: one unit per file.
struct FileSource<'a> {
    reader: &'a TableReader,
}

impl BlockSource for FileSource<'_> {
    fn units(&self) -> usize {
        self.reader.files().len()
    }

    fn read_unit(
        &self,
        unit: usize,
        sink: &mut dyn FnMut(crate::data::Block) -> Result<()>,
    ) -> Result<()> {
        for b in self.reader.file_blocks(unit)? {
            sink(b?)?;
        }
        Ok(())
    }
}
