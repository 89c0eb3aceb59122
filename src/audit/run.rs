//! The audit procedure on an in-memory sample.

use std::sync::atomic::{AtomicUsize, Ordering};

use ndarray::{ArrayView1, ArrayView2};
use rayon::prelude::*;

use super::exact::{fit_exact, ExactSettings};
use super::machine::{solver_name, Machine};
use super::parts::{check_finite, mean_sd, Parts};
use super::{AuditOptions, AuditReport, AuditRow, Chosen, Recommendation};
use crate::error::{Error, Result};
use crate::features::MapKind;
use crate::kernel::Kernel;
use crate::solver::dcd::{DcdSettings, Loss};
use crate::tune::Defaults;

/// Runs an audit on raw-unit rows `x` (rows × inputs) and targets `y`; see the
/// [module documentation](super).
///
/// # Errors
/// [`Error::InvalidParameter`] for bad options (split outside (0, 1), agree ≤ 0, an
/// empty or zero D, an orthogonal map with a non-Gaussian kernel, C ≤ 0, ε < 0, a
/// cache budget below two kernel rows); [`Error::NoRows`] for fewer than
/// [`super::MIN_ROWS`] rows; [`Error::NonFinite`] / [`Error::NonFiniteTarget`] for NaN or ±inf;
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
    super::check_memory(&opts.dims, x.nrows(), opts.threads)?;
    let maps = opts.resolved_maps()?;
    let mut sizes = opts.dims.clone();
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
    // Cherkassky & Ma's C is in target units, as C is for the linear loss; the squared
    // loss's C is unit-free, so the rule's value is divided by the target's sd (as
    // `kernlake fit` does).
    let c = match opts.loss {
        Loss::L1 => choose(opts.c, defaults.map(|d| d.c), "Cherkassky & Ma (2004)"),
        Loss::L2 => choose(
            opts.c,
            defaults.map(|d| d.c / if y_sd > 0.0 { y_sd } else { 1.0 }),
            "Cherkassky & Ma (2004), divided by the target's sd for the squared loss",
        ),
    };
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
    let exact_settings = ExactSettings {
        loss: opts.loss,
        c: c.value,
        epsilon: epsilon.value,
        tol: opts.smo_tol,
        cache_bytes: opts.cache_bytes,
    };
    let (exact, exact_pred) = pool.install(|| fit_exact(&parts, kernel, &exact_settings))?;
    let kblock = parts.kernel_block(opts.kernel_rows);
    let k_exact = pool.install(|| kernel.block(kblock.view(), kblock.view()));

    // Every (map, D) pair is an independent, seeded fit (map construction and the
    // linear solver run on their own), so they run side by side, one per thread of the pool, the largest D
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
        linear: DcdSettings {
            c: c.value,
            epsilon: epsilon.value,
            loss: opts.loss,
            shrinking: true,
            sweeps_per_block: 20,
            tol: opts.linear_tol,
            max_epochs: opts.linear_passes,
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
        loss: opts.loss,
        linear_solver: solver_name(opts.loss).into(),
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
            dim: rows
                .iter()
                .filter(|r| r.map == m)
                .filter(within)
                .map(|r| r.dim)
                .min(),
        })
        .collect();
    let overall = rows
        .iter()
        .filter(within)
        .min_by(|a, b| a.dim.cmp(&b.dim).then(a.agreement.total_cmp(&b.agreement)))
        .map(|r| (r.map, r.dim));
    (recommended, overall)
}
