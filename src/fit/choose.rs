//! The two ends of every fit, shared by the single-machine trainer and the fit computed
//! in parts ([`super::parts`]): the choices made before the first pass (defaults for
//! gamma, C and epsilon, the kernel, the feature map, the solver's settings), and the
//! model assembled from the solver's outcome (report, coverage).

use std::time::Instant;

use crate::coverage::Coverage;
use crate::error::Result;
use crate::features::{build_map, FeatureMap, MapSpec};
use crate::heuristics::Defaults;
use crate::kernel::Kernel;
use crate::model::Model;
use crate::report::{Choice, TrainingReport};
use crate::solver::blocks::{TrainOutcome, TrainSettings};
use crate::solver::dcd::{DcdSettings, Loss};

use super::facts::Facts;
use super::options::{hessian_rows_for, FitOptions};

/// What a fit decided before its first pass.
pub(crate) struct Chosen {
    pub gamma: Choice,
    pub c: Choice,
    pub epsilon: Choice,
    pub kernel: Kernel,
    /// The map's specification with the fit's seed.
    pub spec: MapSpec,
    pub map: Box<dyn FeatureMap>,
    /// Solver settings in target units.
    pub dcd: DcdSettings,
    pub settings: TrainSettings,
}

/// Chooses the defaults the options leave open (median-heuristic gamma, Cherkassky & Ma
/// C and epsilon on the key-ordered sample of `facts`) and builds the feature map.
pub(crate) fn choose(o: &FitOptions, facts: &Facts, pool: &rayon::ThreadPool) -> Result<Chosen> {
    let train_rows = ((facts.rows_total - facts.rows_skipped) as f64 * (1.0 - o.holdout)) as u64;
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
    let spec = MapSpec {
        seed: o.seed,
        ..o.map.clone()
    };
    let map = pool.install(|| {
        build_map(
            &spec,
            kernel,
            facts.scaler.dim(),
            Some(facts.sample_x.view()),
        )
    })?;
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
        block_rows: o.block_rows,
    };
    Ok(Chosen {
        gamma,
        c,
        epsilon,
        kernel,
        spec,
        map,
        dcd,
        settings,
    })
}

/// The model of a finished run: the report of `out`, the coverage threshold (from the
/// solver's holdout rows when there are some, else from the sample rows not used as
/// landmarks).
pub(crate) fn assemble(
    facts: Facts,
    chosen: Chosen,
    out: TrainOutcome,
    pool: &rayon::ThreadPool,
    t0: Instant,
) -> Result<Model> {
    let report = report_of(
        &facts,
        &chosen,
        &out,
        pool.current_num_threads(),
        t0.elapsed().as_secs_f64(),
    );
    let kernel = chosen.kernel;
    let coverage = pool.install(|| {
        Coverage::fit(
            facts.sample_x.view(),
            kernel,
            out.holdout_inputs.as_ref().map(|h| h.view()),
        )
    })?;
    let mut model = Model::new(
        facts.columns,
        facts.scaler,
        kernel,
        chosen.spec,
        chosen.map,
        out.weights,
        out.intercept,
        chosen.dcd,
        report,
    );
    model.coverage = Some(coverage);
    Ok(model)
}

/// The training report of a run with outcome `out`.
pub(crate) fn report_of(
    facts: &Facts,
    chosen: &Chosen,
    out: &TrainOutcome,
    threads: usize,
    seconds: f64,
) -> TrainingReport {
    TrainingReport {
        rows_total: facts.rows_total,
        rows_trained: out.rows_trained,
        rows_holdout: out.rows_holdout,
        holdout_kept: out.holdout_kept,
        rows_skipped: facts.rows_skipped,
        skipped_by_column: facts.skipped_by_column.clone(),
        constant_columns: facts.constant_columns.clone(),
        gamma: chosen.gamma.clone(),
        c: chosen.c.clone(),
        epsilon: chosen.epsilon.clone(),
        features: chosen.map.output_dim(),
        epochs: out.history.len(),
        method: out.method,
        stop: out.stop,
        objective: out.objective,
        holdout: out.holdout,
        support_share: out.support_share,
        updates: out.updates,
        history: out.history.clone(),
        seconds,
        threads,
    }
}
