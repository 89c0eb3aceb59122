//! The audit procedure on an in-memory sample, and the pieces the model audit shares.

use std::sync::atomic::{AtomicUsize, Ordering};
use std::time::Instant;

use ndarray::{Array1, Array2, ArrayView1, ArrayView2, Axis};
use rand::seq::SliceRandom;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;

use super::{Accuracy, AuditOptions, AuditReport, AuditRow, Chosen, ExactResult, Recommendation};
use crate::error::{Error, Result};
use crate::features::{build_map, FeatureMap, MapKind, MapSpec};
use crate::kernel::Kernel;
use crate::metrics::{mae, r2, rmse};
use crate::scale::Standardizer;
use crate::solver::dcd::{self, DcdSettings, Loss};
use crate::solver::smo::{self, KernelModel, SmoSettings};
use crate::tune::Defaults;

/// Runs an audit on raw-unit rows `x` (rows × inputs) and targets `y`; see the
/// [module documentation](super).
///
/// # Errors
/// [`Error::InvalidParameter`] for bad options (split outside (0, 1), agree ≤ 0, an
/// empty or zero D, an orthogonal map with a non-Gaussian kernel, C ≤ 0, ε < 0, a
/// cache budget below two kernel rows); [`Error::NoRows`] for fewer than two rows or an
/// empty part; [`Error::NonFinite`] / [`Error::NonFiniteTarget`] for NaN or ±inf;
/// [`Error::Numerical`] when the defaults cannot be computed (for example when most
/// rows are identical) or a map cannot be built.
///
/// # Panics
/// If `x` and `y` differ in rows.
#[track_caller]
pub fn audit(x: ArrayView2<f64>, y: ArrayView1<f64>, opts: &AuditOptions) -> Result<AuditReport> {
    audit_with_progress(x, y, opts, &|_, _| {})
}

/// [`audit`], calling `progress(finished, total)` as machines are fitted: before the
/// exact machine (`finished` = 0), once it is done (1), then after each approximate one,
/// in the order they finish (`total` counts the exact machine too).
///
/// # Errors
/// As [`audit`].
///
/// # Panics
/// If `x` and `y` differ in rows.
#[track_caller]
pub fn audit_with_progress(
    x: ArrayView2<f64>,
    y: ArrayView1<f64>,
    opts: &AuditOptions,
    progress: &(dyn Fn(usize, usize) + Sync),
) -> Result<AuditReport> {
    assert_eq!(
        x.nrows(),
        y.len(),
        "audit: x has {} rows but y has {} values",
        x.nrows(),
        y.len()
    );
    opts.validate()?;
    let maps = opts.resolved_maps()?;
    let mut sizes = opts.components.clone();
    sizes.sort_unstable();
    sizes.dedup();
    let total = maps.len() * sizes.len() + 1;
    check_finite(x, y)?;
    let parts = Parts::split(x, y, opts.split, opts.seed, None)?;
    let mut notes = parts.notes();

    let (y_mean, y_sd) = mean_sd(parts.y_fit.view());
    if y_sd == 0.0 {
        notes.push(format!(
            "the target is constant ({y_mean}) on the fit part: every machine predicts it; \
             agreement is given in target units"
        ));
    }
    let defaults = if opts.gamma.is_none() || opts.c.is_none() || opts.epsilon.is_none() {
        Some(Defaults::from_sample(
            parts.x_fit.view(),
            parts.y_fit.view(),
            y_mean,
            y_sd,
            parts.y_fit.len() as u64,
        )?)
    } else {
        None
    };
    let choose = |given: Option<f64>, default: Option<f64>, rule: &str| match given {
        Some(v) => Chosen {
            value: v,
            source: "given".into(),
        },
        None => Chosen {
            value: default.unwrap_or(f64::NAN),
            source: rule.into(),
        },
    };
    let gamma = choose(opts.gamma, defaults.map(|d| d.gamma), "median heuristic");
    let c = choose(opts.c, defaults.map(|d| d.c), "Cherkassky & Ma (2004)");
    let epsilon = choose(
        opts.epsilon,
        defaults.map(|d| d.epsilon),
        "Cherkassky & Ma (2004)",
    );
    let kernel = Kernel::new(opts.kernel, gamma.value)?;

    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(opts.threads)
        .build()
        .map_err(|e| Error::invalid("threads", format!("no thread pool could start: {e}")))?;
    let unit = if y_sd > 0.0 { y_sd } else { 1.0 };
    progress(0, total);
    let (exact, exact_pred) = pool.install(|| {
        fit_exact(
            &parts,
            kernel,
            c.value,
            epsilon.value,
            opts.smo_tol,
            opts.cache_bytes,
        )
    })?;
    let kblock = parts.kernel_block(opts.kernel_rows);
    let k_exact = pool.install(|| kernel.block(kblock.view(), kblock.view()));

    // Every (map, D) pair is an independent, seeded fit (map construction and DCD run on
    // their own), so they run side by side, one per thread of the pool, the largest D
    // first so that the long fits do not end up last; the rows keep the map-then-D order.
    let mut jobs: Vec<(usize, MapKind, usize)> = maps
        .iter()
        .flat_map(|&kind| sizes.iter().map(move |&d| (kind, d)))
        .enumerate()
        .map(|(at, (kind, d))| (at, kind, d))
        .collect();
    jobs.sort_by_key(|&(at, _, d)| (std::cmp::Reverse(d), at));
    progress(1, total);
    let finished = AtomicUsize::new(1);
    let machine = Machine {
        parts: &parts,
        kernel,
        dcd: DcdSettings {
            c: c.value,
            epsilon: epsilon.value,
            loss: Loss::L1,
            shrinking: true,
            sweeps_per_block: 20,
            tol: opts.dcd_tol,
            max_epochs: opts.dcd_epochs,
            seed: opts.seed,
        },
        opts,
        exact_pred: exact_pred.view(),
        unit,
        kblock: kblock.view(),
        k_exact: k_exact.view(),
    };
    let mut fitted: Vec<(usize, Result<AuditRow>)> = pool.install(|| {
        jobs.par_iter()
            .with_max_len(1)
            .map(|&(at, kind, d)| {
                let row = machine.fit(kind, d);
                progress(finished.fetch_add(1, Ordering::Relaxed) + 1, total);
                (at, row)
            })
            .collect()
    });
    fitted.sort_by_key(|f| f.0);
    let rows = fitted
        .into_iter()
        .map(|f| f.1)
        .collect::<Result<Vec<AuditRow>>>()?;
    if pool.current_num_threads() > 1 && jobs.len() > 1 {
        notes.push(format!(
            "the approximate machines were fitted up to {} at a time: their fit times \
             include sharing the processors",
            pool.current_num_threads().min(jobs.len())
        ));
    }
    let (recommended, overall) = recommend(&rows, &maps, opts.agree);
    Ok(AuditReport {
        kernel: opts.kernel,
        gamma,
        c,
        epsilon,
        rows_fit: parts.y_fit.len(),
        rows_check: parts.y_check.len(),
        target_sd: y_sd,
        agree: opts.agree,
        exact,
        rows,
        recommended,
        overall,
        notes,
    })
}

/// What every approximate machine of an audit shares: the sample's parts, the kernel
/// and penalties, and the exact machine's results it is compared with.
struct Machine<'a> {
    parts: &'a Parts,
    kernel: Kernel,
    /// The linear solver's settings: the exact machine's C and epsilon, the L1 loss.
    dcd: DcdSettings,
    opts: &'a AuditOptions,
    exact_pred: ArrayView1<'a, f64>,
    unit: f64,
    kblock: ArrayView2<'a, f64>,
    k_exact: ArrayView2<'a, f64>,
}

impl Machine<'_> {
    /// Builds the map of `kind` with `d` components, fits the linear machine with the
    /// L1 loss on the mapped fit part, and compares it on the check part.
    fn fit(&self, kind: MapKind, d: usize) -> Result<AuditRow> {
        let (parts, opts) = (self.parts, self.opts);
        let spec = MapSpec {
            kind,
            components: d,
            variant: opts.variant,
            seed: opts.seed,
            ..MapSpec::default()
        };
        let t0 = Instant::now();
        let map = build_map(
            &spec,
            self.kernel,
            parts.x_fit.ncols(),
            Some(parts.x_fit.view()),
        )?;
        let z = map.transform(parts.x_fit.view());
        let fit = dcd::fit(z.view(), parts.y_fit.view(), &self.dcd, z.nrows())?;
        let fit_seconds = t0.elapsed().as_secs_f64();
        let pred = fit.predict(map.transform(parts.x_check.view()).view());
        Ok(AuditRow {
            map: kind,
            components: d,
            features: map.output_dim(),
            check: accuracy(parts.y_check.view(), pred.view()),
            agreement: rmse(pred.view(), self.exact_pred) / self.unit,
            kernel_error: kernel_error(map.as_ref(), self.kblock, self.k_exact),
            fit_seconds,
            converged: fit.report.converged,
            gap: fit.report.objective.gap,
        })
    }
}

/// Smallest D within `agree` per map, and over all maps (ties: better agreement).
fn recommend(
    rows: &[AuditRow],
    maps: &[crate::features::MapKind],
    agree: f64,
) -> (
    Vec<Recommendation>,
    Option<(crate::features::MapKind, usize)>,
) {
    let within = |r: &&AuditRow| r.agreement <= agree;
    let recommended = maps
        .iter()
        .map(|&m| Recommendation {
            map: m,
            components: rows
                .iter()
                .filter(|r| r.map == m)
                .filter(within)
                .map(|r| r.components)
                .min(),
        })
        .collect();
    let overall = rows
        .iter()
        .filter(within)
        .min_by(|a, b| {
            a.components
                .cmp(&b.components)
                .then(a.agreement.total_cmp(&b.agreement))
        })
        .map(|r| (r.map, r.components));
    (recommended, overall)
}

/// The fit and check parts of a sample, inputs standardized on the fit part.
pub(super) struct Parts {
    pub(super) x_fit: Array2<f64>,
    pub(super) y_fit: Array1<f64>,
    pub(super) x_check: Array2<f64>,
    pub(super) y_check: Array1<f64>,
    /// The check rows in raw units.
    pub(super) x_check_raw: Array2<f64>,
    duplicates: usize,
}

impl Parts {
    /// Seeded split: a ChaCha8 shuffle of the row indices, the first `round(split·n)`
    /// (at least one, at most n − 1) to fit. Standardizes with `scaler` when given,
    /// else with one fitted on the fit part.
    pub(super) fn split(
        x: ArrayView2<f64>,
        y: ArrayView1<f64>,
        split: f64,
        seed: u64,
        scaler: Option<&Standardizer>,
    ) -> Result<Parts> {
        let n = x.nrows();
        if n < 2 {
            return Err(Error::NoRows(format!(
                "an audit needs at least two rows (one to fit, one to check), got {n}"
            )));
        }
        let mut idx: Vec<usize> = (0..n).collect();
        idx.shuffle(&mut ChaCha8Rng::seed_from_u64(seed ^ 0x5eed_a0d1_7000_0001));
        let n_fit = ((split * n as f64).round() as usize).clamp(1, n - 1);
        let (fit_idx, check_idx) = idx.split_at(n_fit);
        let mut x_fit = x.select(Axis(0), fit_idx);
        let x_check_raw = x.select(Axis(0), check_idx);
        let mut x_check = x_check_raw.clone();
        let owned;
        let scaler = match scaler {
            Some(s) => s,
            None => {
                owned = Standardizer::fit(x_fit.view());
                &owned
            }
        };
        scaler.apply(x_fit.view_mut());
        scaler.apply(x_check.view_mut());
        Ok(Parts {
            duplicates: count_duplicates(x_fit.view()),
            x_fit,
            y_fit: y.select(Axis(0), fit_idx),
            x_check,
            y_check: y.select(Axis(0), check_idx),
            x_check_raw,
        })
    }

    /// Remarks about the parts.
    pub(super) fn notes(&self) -> Vec<String> {
        let mut notes = Vec::new();
        if self.duplicates > 0 {
            notes.push(format!(
                "{} fit row(s) repeat an earlier row's inputs; they are kept (Nyström uses \
                 distinct landmarks only)",
                self.duplicates
            ));
        }
        notes
    }

    /// The first `rows` check rows (standardized), for the kernel error.
    pub(super) fn kernel_block(&self, rows: usize) -> Array2<f64> {
        let r = rows.clamp(1, self.x_check.nrows());
        self.x_check.slice(ndarray::s![..r, ..]).to_owned()
    }
}

fn count_duplicates(x: ArrayView2<f64>) -> usize {
    let mut keys: Vec<Vec<u64>> = x
        .axis_iter(Axis(0))
        .map(|r| r.iter().map(|v| v.to_bits()).collect())
        .collect();
    let n = keys.len();
    keys.sort_unstable();
    keys.dedup();
    n - keys.len()
}

/// Typed errors for NaN or ±inf in `x` or `y`.
pub(super) fn check_finite(x: ArrayView2<f64>, y: ArrayView1<f64>) -> Result<()> {
    if let Some(((row, column), _)) = x.indexed_iter().find(|(_, v)| !v.is_finite()) {
        return Err(Error::NonFinite { row, column });
    }
    if let Some(row) = y.iter().position(|v| !v.is_finite()) {
        return Err(Error::NonFiniteTarget { row });
    }
    Ok(())
}

/// Population mean and standard deviation.
pub(super) fn mean_sd(y: ArrayView1<f64>) -> (f64, f64) {
    let n = y.len().max(1) as f64;
    let mean = y.sum() / n;
    let var = y.iter().map(|v| (v - mean) * (v - mean)).sum::<f64>() / n;
    (mean, var.sqrt())
}

/// RMSE, MAE and R² of `pred` against `y`.
pub(super) fn accuracy(y: ArrayView1<f64>, pred: ArrayView1<f64>) -> Accuracy {
    Accuracy {
        rmse: rmse(y, pred),
        mae: mae(y, pred),
        r2: r2(y, pred),
    }
}

/// Fits the exact machine by SMO on the fit part and predicts the check part.
///
/// The target is centred and divided by its standard deviation, and C and ε divided by
/// it, so that SMO's tolerance is in standardized units; with a free bias this is the
/// same problem (the solution scales back exactly: coefficients × sd, bias × sd + mean).
pub(super) fn fit_exact(
    parts: &Parts,
    kernel: Kernel,
    c: f64,
    epsilon: f64,
    tol: f64,
    cache_bytes: usize,
) -> Result<(ExactResult, Array1<f64>)> {
    let (mean, sd) = mean_sd(parts.y_fit.view());
    let unit = if sd > 0.0 { sd } else { 1.0 };
    if !(c.is_finite() && c > 0.0) {
        return Err(Error::invalid(
            "C",
            format!("must be a finite number > 0, got {c}"),
        ));
    }
    let settings = SmoSettings {
        c: c / unit,
        epsilon: epsilon / unit,
        tol,
        cache_bytes,
        ..SmoSettings::default()
    };
    let ys = parts.y_fit.mapv(|v| (v - mean) / unit);
    let fit = smo::fit(parts.x_fit.view(), ys.view(), kernel, &settings)?;
    let model = KernelModel {
        coef: fit.model.coef.mapv(|b| b * unit),
        bias: fit.model.bias * unit + mean,
        ..fit.model
    };
    let pred = model.predict(parts.x_check.view());
    Ok((
        ExactResult {
            check: accuracy(parts.y_check.view(), pred.view()),
            fit_seconds: fit.report.seconds,
            support_vectors: fit.report.support_vectors,
            iterations: fit.report.iterations,
            converged: fit.report.converged,
        },
        pred,
    ))
}

/// `‖K − ZZᵀ‖_F / ‖K‖_F` with Z the map of the rows `xb` and K their exact kernel.
pub(super) fn kernel_error(map: &dyn FeatureMap, xb: ArrayView2<f64>, k: ArrayView2<f64>) -> f64 {
    let z = map.transform(xb);
    let approx = z.dot(&z.t());
    let num: f64 = k
        .iter()
        .zip(approx.iter())
        .map(|(a, b)| (a - b) * (a - b))
        .sum();
    let den: f64 = k.iter().map(|a| a * a).sum();
    (num / den).sqrt()
}
