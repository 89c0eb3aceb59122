//! Keyword arguments from Python into the library's settings. The defaults are the
//! library's (`kernlake::settings::defaults`, written once), which the command line
//! shares.

use kernlake::data::{ColumnSelection, CsvOptions, MissingPolicy};
use kernlake::features::{FourierVariant, Landmarks, MapKind};
use kernlake::fit::FitOptions;
use kernlake::kernel::KernelKind;
use kernlake::solver::blocks::Method;
use kernlake::solver::dcd::Loss;
use pyo3::prelude::*;
use pyo3::types::{PyDict, PyString};
use serde::de::DeserializeOwned;

use crate::errors::input;

/// `kernlake fit`'s options with no setting typed: the library's one settings model,
/// whose defaults the command line's help shows too.
pub fn fit_defaults_options() -> FitOptions {
    FitOptions::default()
}

/// Parses one of the library's named choices (kernel, map, solver, loss) by its name.
pub fn choice<T: DeserializeOwned>(
    py: Python<'_>,
    what: &str,
    s: &str,
    names: &[&str],
) -> PyResult<T> {
    if !names.contains(&s) {
        return Err(input(
            py,
            format!(
                "invalid value for {what}: '{s}' is not one of {}",
                names.join(", ")
            ),
        ));
    }
    serde_json::from_value(serde_json::Value::String(s.to_string()))
        .map_err(|e| input(py, format!("invalid value for {what}: {e}")))
}

/// Kernel names.
pub const KERNELS: &[&str] = &["gaussian", "laplacian", "matern12", "matern32", "matern52"];
/// Map names.
pub const MAPS: &[&str] = &["fourier", "orthogonal", "nystrom"];

/// A byte count given as an int or as text such as "512MiB".
pub fn bytes(py: Python<'_>, what: &str, v: &Bound<'_, PyAny>) -> PyResult<usize> {
    if let Ok(s) = v.cast::<PyString>() {
        let s: String = s.extract()?;
        return kernlake_bytes(&s).map_err(|e| input(py, format!("invalid value for {what}: {e}")));
    }
    v.extract::<usize>().map_err(|_| {
        input(
            py,
            format!("invalid value for {what}: give bytes as an int or as text such as '2GiB'"),
        )
    })
}

/// Sizes such as `1GiB`, `512MiB`, `800MB` or a plain count, as the command line reads
/// them (its parser is private to it; this is the same grammar).
fn kernlake_bytes(s: &str) -> Result<usize, String> {
    let t = s.trim();
    let split = t
        .find(|c: char| !(c.is_ascii_digit() || c == '.'))
        .unwrap_or(t.len());
    let (num, unit) = t.split_at(split);
    let v: f64 = num
        .parse()
        .map_err(|_| format!("'{s}' is not a size such as 512MiB or 2GiB"))?;
    let mult = match unit.trim().to_ascii_lowercase().as_str() {
        "" | "b" => 1.0,
        "k" | "kb" => 1e3,
        "kib" => 1024.0,
        "m" | "mb" => 1e6,
        "mib" => 1024.0 * 1024.0,
        "g" | "gb" => 1e9,
        "gib" => 1024.0 * 1024.0 * 1024.0,
        _ => return Err(format!("'{s}' has an unknown unit; use B, KiB, MiB or GiB")),
    };
    Ok((v * mult) as usize)
}

/// Reads `key` from `kw`; absent or `None` gives `None`.
pub fn get<T>(kw: &Bound<'_, PyDict>, key: &str) -> PyResult<Option<T>>
where
    T: for<'a, 'py> FromPyObject<'a, 'py>,
{
    match kw.get_item(key)? {
        None => Ok(None),
        Some(v) if v.is_none() => Ok(None),
        Some(v) => v.extract::<T>().map(Some).map_err(|_| {
            input(
                kw.py(),
                format!(
                    "invalid value for {key}: {} is not of the expected type",
                    v.repr().map(|r| r.to_string()).unwrap_or_default()
                ),
            )
        }),
    }
}

/// Refuses keys outside `known`, naming the first one.
pub fn only(kw: &Bound<'_, PyDict>, known: &[&str]) -> PyResult<()> {
    for k in kw.keys() {
        let k: String = k.extract()?;
        if !known.contains(&k.as_str()) {
            return Err(input(kw.py(), format!("unknown setting '{k}'")));
        }
    }
    Ok(())
}

/// The settings keys [`fit_options`] knows.
const FIT_KEYS: &[&str] = &[
    "kernel",
    "gamma",
    "c",
    "epsilon",
    "map",
    "dim",
    "phase",
    "kmeans",
    "loss",
    "solver",
    "hessian_rows",
    "epochs",
    "tol",
    "sweeps",
    "seed",
    "threads",
    "memory",
    "holdout",
    "patience",
    "block_rows",
    "sample",
];

/// Fit options from keyword arguments (`None` = the command line's default), checked
/// as the command line checks them.
pub fn fit_options(kw: &Bound<'_, PyDict>) -> PyResult<FitOptions> {
    let py = kw.py();
    only(kw, FIT_KEYS)?;
    let mut o = fit_defaults_options();
    if let Some(s) = get::<String>(kw, "kernel")? {
        o.kernel = choice::<KernelKind>(py, "kernel", &s, KERNELS)?;
    }
    if let Some(s) = get::<String>(kw, "map")? {
        o.map.kind = choice::<MapKind>(py, "map", &s, MAPS)?;
    }
    if let Some(s) = get::<String>(kw, "solver")? {
        o.method = choice::<Method>(py, "solver", &s, &["auto", "dual", "newton", "barrier"])?;
    }
    if let Some(s) = get::<String>(kw, "loss")? {
        o.loss = choice::<Loss>(py, "loss", &s, &["l1", "l2"])?;
    }
    o.gamma = get(kw, "gamma")?.or(o.gamma);
    o.c = get(kw, "c")?.or(o.c);
    o.epsilon = get(kw, "epsilon")?.or(o.epsilon);
    o.hessian_rows = get(kw, "hessian_rows")?.or(o.hessian_rows);
    o.map.dim = get(kw, "dim")?.unwrap_or(o.map.dim);
    if let Some(p) = get::<bool>(kw, "phase")? {
        o.map.variant = if p {
            FourierVariant::CosPhase
        } else {
            FourierVariant::SinCos
        };
    }
    if let Some(k) = get::<bool>(kw, "kmeans")? {
        o.map.landmarks = if k {
            Landmarks::KMeans
        } else {
            Landmarks::Uniform
        };
    }
    o.max_epochs = get(kw, "epochs")?.unwrap_or(o.max_epochs);
    o.tol = get(kw, "tol")?.unwrap_or(o.tol);
    o.sweeps_per_block = get(kw, "sweeps")?.unwrap_or(o.sweeps_per_block);
    if let Some(seed) = get::<u64>(kw, "seed")? {
        o.seed = seed;
        o.map.seed = seed;
    }
    o.threads = get(kw, "threads")?.unwrap_or(o.threads);
    o.holdout = get(kw, "holdout")?.unwrap_or(o.holdout);
    o.patience = get(kw, "patience")?.unwrap_or(o.patience);
    o.block_rows = get(kw, "block_rows")?.unwrap_or(o.block_rows);
    o.sample_rows = get(kw, "sample")?.unwrap_or(o.sample_rows);
    if let Some(v) = kw.get_item("memory")? {
        if !v.is_none() {
            o.memory_bytes = bytes(py, "memory", &v)?;
        }
    }
    if !(0.0..=0.5).contains(&o.holdout) {
        return Err(input(
            py,
            format!(
                "invalid value for holdout: must be between 0 and 0.5, got {}",
                o.holdout
            ),
        ));
    }
    Ok(o)
}

/// Which rows and columns of the sources: selection, missing policy, CSV delimiter.
pub struct SourceSettings {
    /// Target, features, excluded columns.
    pub selection: ColumnSelection,
    /// Rows with a missing value.
    pub missing: MissingPolicy,
    /// CSV parsing.
    pub csv: CsvOptions,
}

/// Source settings from the keyword arguments of `fit`, `audit` and `tune`.
pub fn source_settings(
    py: Python<'_>,
    target: Option<String>,
    features: Option<Vec<String>>,
    exclude: Option<Vec<String>>,
    missing: &str,
    delimiter: &str,
) -> PyResult<SourceSettings> {
    let missing = match missing {
        "skip" => MissingPolicy::Skip,
        "fail" => MissingPolicy::Fail,
        other => {
            return Err(input(
                py,
                format!("invalid value for missing: '{other}' is not one of skip, fail"),
            ))
        }
    };
    let mut chars = delimiter.chars();
    let delimiter = match (chars.next(), chars.next()) {
        (Some(c), None) if c.is_ascii() => c as u8,
        _ => {
            return Err(input(
                py,
                "invalid value for delimiter: must be a single ASCII character",
            ))
        }
    };
    Ok(SourceSettings {
        selection: ColumnSelection {
            target,
            features,
            exclude: exclude.unwrap_or_default(),
        },
        missing,
        csv: CsvOptions { delimiter },
    })
}

/// The command line's defaults of the settings `kernlake.fit` takes, as a dict (so the
/// Python signature can be checked against them).
#[pyfunction]
pub fn fit_defaults(py: Python<'_>) -> PyResult<Bound<'_, PyDict>> {
    let o = fit_defaults_options();
    let name = |v: serde_json::Value| v.as_str().unwrap_or_default().to_string();
    let d = PyDict::new(py);
    d.set_item("kernel", name(serde_json::json!(o.kernel)))?;
    d.set_item("gamma", o.gamma)?;
    d.set_item("c", o.c)?;
    d.set_item("epsilon", o.epsilon)?;
    d.set_item("map", name(serde_json::json!(o.map.kind)))?;
    d.set_item("dim", o.map.dim)?;
    d.set_item("phase", o.map.variant == FourierVariant::CosPhase)?;
    d.set_item("kmeans", o.map.landmarks == Landmarks::KMeans)?;
    d.set_item("loss", name(serde_json::json!(o.loss)))?;
    d.set_item("solver", name(serde_json::json!(o.method)))?;
    d.set_item("hessian_rows", o.hessian_rows)?;
    d.set_item("epochs", o.max_epochs)?;
    d.set_item("tol", o.tol)?;
    d.set_item("sweeps", o.sweeps_per_block)?;
    d.set_item("seed", o.seed)?;
    d.set_item("threads", o.threads)?;
    d.set_item("memory", o.memory_bytes)?;
    d.set_item("holdout", o.holdout)?;
    d.set_item("patience", o.patience)?;
    d.set_item("block_rows", o.block_rows)?;
    d.set_item("sample", o.sample_rows)?;
    Ok(d)
}
