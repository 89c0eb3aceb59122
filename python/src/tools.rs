//! `kernlake.audit` and `kernlake.tune`: the same survey, sample and records as the
//! command line's `audit --json` and `tune --json`, returned as plain values.

use kernlake::audit::{
    audit_model, audit_with_progress, plot::render_svg, AuditOptions, ModelAuditOptions,
};
use kernlake::data::{
    discover, resolve_columns, survey, ColumnSelection, Survey, SurveySettings, TableReader,
};
use kernlake::features::{FourierVariant, Landmarks, MapKind};
use kernlake::kernel::KernelKind;
use kernlake::solver::dcd::Loss;
use kernlake::tune::{heatmap_svg, tune, TuneOptions, Validation};
use kernlake::Error;
use ndarray::{Array1, Array2, Axis};
use pyo3::prelude::*;
use pyo3::types::{PyDict, PyTuple};

use crate::model::{to_python, PyModel};
use crate::options::{bytes, choice, get, only, source_settings, KERNELS, MAPS};
use crate::run::interruptible;

/// The survey's sample as arrays, dropping constant input columns unless `keep_all`.
fn sample_arrays(s: &Survey, keep_all: bool) -> kernlake::Result<(Array2<f64>, Array1<f64>)> {
    let y = s
        .sample_y
        .clone()
        .ok_or_else(|| Error::NoRows("no target column was read".into()))?;
    let keep: Vec<usize> = (0..s.features.len())
        .filter(|&j| keep_all || !s.constant_features.contains(&s.features[j].name))
        .collect();
    if keep.is_empty() {
        return Err(Error::NoRows("every input column is constant".into()));
    }
    Ok((s.sample_x.select(Axis(1), &keep), y))
}

/// A record (and optionally its SVG) as the Python value returned.
fn answer<'py>(
    py: Python<'py>,
    record: serde_json::Value,
    svg: Option<String>,
) -> PyResult<Bound<'py, PyAny>> {
    let rec = to_python(py, &record)?;
    match svg {
        Some(text) => Ok(PyTuple::new(py, [rec, text.into_pyobject(py)?.into_any()])?.into_any()),
        None => Ok(rec),
    }
}

fn encode(v: &impl serde::Serialize) -> kernlake::Result<serde_json::Value> {
    serde_json::to_value(v)
        .map_err(|e| Error::Numerical(format!("could not encode the report: {e}")))
}

const AUDIT_KEYS: &[&str] = &[
    "kernel", "gamma", "c", "epsilon", "maps", "dim", "phase", "agree", "split", "cache", "sample",
    "seed", "threads",
];

/// `kernlake audit` on files: exact machine against approximate ones (or a fitted model).
#[pyfunction]
#[pyo3(signature = (sources, target, model, features, exclude, missing, delimiter, plot, settings))]
#[allow(clippy::too_many_arguments)]
pub fn audit_files<'py>(
    py: Python<'py>,
    sources: Vec<String>,
    target: Option<String>,
    model: Option<PyRef<'py, PyModel>>,
    features: Option<Vec<String>>,
    exclude: Option<Vec<String>>,
    missing: &str,
    delimiter: &str,
    plot: bool,
    settings: &Bound<'py, PyDict>,
) -> PyResult<Bound<'py, PyAny>> {
    only(settings, AUDIT_KEYS)?;
    let mut o = AuditOptions::default();
    if let Some(s) = get::<String>(settings, "kernel")? {
        o.kernel = choice::<KernelKind>(py, "kernel", &s, KERNELS)?;
    }
    if let Some(list) = get::<Vec<String>>(settings, "maps")? {
        o.maps = list
            .iter()
            .map(|s| choice::<MapKind>(py, "maps", s, MAPS))
            .collect::<PyResult<_>>()?;
    }
    o.gamma = get(settings, "gamma")?.or(o.gamma);
    o.c = get(settings, "c")?.or(o.c);
    o.epsilon = get(settings, "epsilon")?.or(o.epsilon);
    o.dims = get(settings, "dim")?.unwrap_or(o.dims);
    if get::<bool>(settings, "phase")?.unwrap_or(false) {
        o.variant = FourierVariant::CosPhase;
    }
    o.agree = get(settings, "agree")?.unwrap_or(o.agree);
    o.split = get(settings, "split")?.unwrap_or(o.split);
    if let Some(v) = settings.get_item("cache")? {
        if !v.is_none() {
            o.cache_bytes = bytes(py, "cache", &v)?;
        }
    }
    o.seed = get(settings, "seed")?.unwrap_or(o.seed);
    o.threads = get(settings, "threads")?.unwrap_or(o.threads);
    let sample: usize = get(settings, "sample")?.unwrap_or(10_000);
    if sample < 2 {
        return Err(crate::errors::input(
            py,
            "invalid value for sample: must be at least 2 rows",
        ));
    }
    let model = model.map(|m| std::sync::Arc::clone(m.model()));
    let target = match (target, &model) {
        (Some(t), _) => t,
        (None, Some(m)) => m.columns.target.clone().ok_or_else(|| {
            crate::errors::input(py, "the model names no target column; give target")
        })?,
        (None, None) => {
            return Err(crate::errors::input(
                py,
                "give the target column to predict",
            ))
        }
    };
    let mut src = source_settings(
        py,
        Some(target.clone()),
        features,
        exclude,
        missing,
        delimiter,
    )?;
    if let Some(m) = &model {
        src.selection = ColumnSelection {
            target: Some(target),
            features: Some(m.columns.features.clone()),
            exclude: Vec::new(),
        };
    }
    let (record, svg) = interruptible(py, move |_stop| {
        let files = discover(&sources)?;
        let columns = resolve_columns(&files, &src.selection, &src.csv)?;
        let reader = TableReader::new(files, columns)
            .with_missing(src.missing)
            .with_csv(src.csv);
        let settings = SurveySettings {
            sample_rows: sample,
            seed: o.seed,
            threads: o.threads,
        };
        let s = survey(&reader, &settings, &|_| {})?;
        let short = ((s.rows_used as usize) < sample).then(|| {
            format!(
                "the data hold {} usable row(s), fewer than the {} asked for; auditing on all of them",
                s.rows_used, sample
            )
        });
        let (x, y) = sample_arrays(&s, model.is_some())?;
        match &model {
            Some(m) => {
                let mo = ModelAuditOptions {
                    split: o.split,
                    cache_bytes: o.cache_bytes,
                    seed: o.seed,
                    threads: o.threads,
                    ..ModelAuditOptions::default()
                };
                let mut r = audit_model(m, x.view(), y.view(), &mo)?;
                r.notes.extend(short);
                Ok((encode(&r)?, None))
            }
            None => {
                let mut r = audit_with_progress(x.view(), y.view(), &o, &|_, _| {})?;
                r.notes.extend(short);
                let svg = plot.then(|| render_svg(&r));
                Ok((encode(&r)?, svg))
            }
        }
    })?;
    answer(py, record, svg)
}

const TUNE_KEYS: &[&str] = &[
    "sample",
    "folds",
    "holdout",
    "gamma_factors",
    "c_factors",
    "epsilon_factors",
    "exact_rows",
    "max_fits",
    "refine_fits",
    "refine_rows",
    "refine_dim",
    "epochs",
    "sweeps",
    "tol",
    "dim",
    "max_dim",
    "dim_tol",
    "keep_map",
    "kernel",
    "map",
    "phase",
    "kmeans",
    "loss",
    "seed",
    "threads",
];

/// `kernlake tune` on files: search gamma, C, epsilon and D by validation on a sample.
#[pyfunction]
#[pyo3(signature = (sources, target, features, exclude, missing, delimiter, heatmap, settings))]
#[allow(clippy::too_many_arguments)]
pub fn tune_files<'py>(
    py: Python<'py>,
    sources: Vec<String>,
    target: String,
    features: Option<Vec<String>>,
    exclude: Option<Vec<String>>,
    missing: &str,
    delimiter: &str,
    heatmap: bool,
    settings: &Bound<'py, PyDict>,
) -> PyResult<Bound<'py, PyAny>> {
    only(settings, TUNE_KEYS)?;
    let mut o = TuneOptions::default();
    if let Some(s) = get::<String>(settings, "kernel")? {
        o.kernel = choice::<KernelKind>(py, "kernel", &s, KERNELS)?;
    }
    if let Some(s) = get::<String>(settings, "map")? {
        o.map.kind = choice::<MapKind>(py, "map", &s, MAPS)?;
    }
    if let Some(s) = get::<String>(settings, "loss")? {
        o.loss = choice::<Loss>(py, "loss", &s, &["l1", "l2"])?;
    }
    if get::<bool>(settings, "phase")?.unwrap_or(false) {
        o.map.variant = FourierVariant::CosPhase;
    }
    if get::<bool>(settings, "kmeans")?.unwrap_or(false) {
        o.map.landmarks = Landmarks::KMeans;
    }
    o.gamma_factors = get(settings, "gamma_factors")?.unwrap_or(o.gamma_factors);
    o.c_factors = get(settings, "c_factors")?.unwrap_or(o.c_factors);
    o.epsilon_factors = get(settings, "epsilon_factors")?.unwrap_or(o.epsilon_factors);
    o.validation = match get::<f64>(settings, "holdout")? {
        Some(h) => Validation::Holdout(h),
        None => Validation::KFold(get(settings, "folds")?.unwrap_or(3)),
    };
    o.exact_rows = get(settings, "exact_rows")?.unwrap_or(o.exact_rows);
    o.max_fits = get(settings, "max_fits")?.unwrap_or(o.max_fits);
    o.refine_fits = get(settings, "refine_fits")?.unwrap_or(o.refine_fits);
    o.refine_rows = get(settings, "refine_rows")?.unwrap_or(o.refine_rows);
    o.refine_dim = get(settings, "refine_dim")?.unwrap_or(o.refine_dim);
    o.max_epochs = get(settings, "epochs")?.unwrap_or(o.max_epochs);
    o.sweeps_per_epoch = get(settings, "sweeps")?.unwrap_or(o.sweeps_per_epoch);
    o.tol = get(settings, "tol")?.unwrap_or(o.tol);
    o.dim = get(settings, "dim")?.unwrap_or(o.dim);
    o.map.dim = o.dim;
    o.max_dim = get(settings, "max_dim")?.unwrap_or(o.max_dim);
    o.dim_tol = get(settings, "dim_tol")?.unwrap_or(o.dim_tol);
    o.map_fallback = !get::<bool>(settings, "keep_map")?.unwrap_or(false);
    o.seed = get(settings, "seed")?.unwrap_or(o.seed);
    o.map.seed = o.seed;
    let threads: usize = get(settings, "threads")?.unwrap_or(0);
    let sample: usize = get(settings, "sample")?.unwrap_or(20_000);
    let src = source_settings(py, Some(target), features, exclude, missing, delimiter)?;
    let (record, svg) = interruptible(py, move |_stop| {
        let files = discover(&sources)?;
        let columns = resolve_columns(&files, &src.selection, &src.csv)?;
        let reader = TableReader::new(files, columns)
            .with_missing(src.missing)
            .with_csv(src.csv);
        let settings = SurveySettings {
            sample_rows: sample,
            seed: o.seed,
            threads,
        };
        let s = survey(&reader, &settings, &|_| {})?;
        let (x, y) = sample_arrays(&s, false)?;
        let mut o = o;
        o.rows_total = Some(s.rows_used);
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .map_err(|e| Error::invalid("threads", e.to_string()))?;
        let report = pool.install(|| tune(x.view(), y.view(), &o))?;
        let svg = heatmap.then(|| heatmap_svg(&report));
        Ok((encode(&report)?, svg))
    })?;
    answer(py, record, svg)
}
