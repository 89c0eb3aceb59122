//! What a validation search found, and its text rendering: a ranked table with each
//! candidate's standard error over folds, the one-standard-error choice, the defaults'
//! figure beside it, and the search over D.

use std::fmt::Write;

use serde::{Deserialize, Serialize};

use super::options::Validation;
use crate::features::MapKind;
use crate::heuristics::Defaults;

/// One candidate's outcome on the exact kernel machine.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct CandidateResult {
    /// Kernel width.
    pub gamma: f64,
    /// Penalty C (solver units: target units for the linear loss, unit-free for the
    /// squared loss).
    pub c: f64,
    /// Tube half-width (target units).
    pub epsilon: f64,
    /// Factors of the defaults' gamma, C and epsilon.
    pub factors: [f64; 3],
    /// Indices into the report's gamma, C and epsilon factor lists.
    pub grid: [usize; 3],
    /// Pooled validation RMSE (target units); NaN if a fold's solve failed.
    pub error: f64,
    /// Standard error of the per-fold RMSE (sample deviation over folds / √folds; 0 for
    /// a holdout).
    pub se: f64,
    /// Validation RMSE of each fold.
    pub fold_errors: Vec<f64>,
    /// Newton steps (squared loss) or SMO iterations (linear loss), largest over folds.
    pub steps: u64,
    /// Every fold's solve met its optimality conditions (trained, not stopped early).
    pub converged: bool,
    /// Standard error of the difference to the lowest candidate's validation RMSE,
    /// paired over the validation rows (the standard error of the mean difference of the
    /// two candidates' squared errors, over the sum of their RMSEs).
    pub se_diff: f64,
    /// Its validation RMSE exceeds the lowest one's by at most `se_diff`.
    pub within_one_se: bool,
    /// This is the data-driven default.
    pub is_default: bool,
}

/// One step of the search over D.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct DimStep {
    /// The map family tried (reports written before it was recorded tried only the
    /// options' map, Fourier by default).
    #[serde(default = "fourier")]
    pub map: MapKind,
    /// Mapped features D.
    pub dim: usize,
    /// The chosen candidate's validation RMSE on the map with this D.
    pub error: f64,
    /// Within the tolerance of the exact machine's validation RMSE.
    pub agrees: bool,
}

/// The second stage: the exact stage's best region scored again on every sample row.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Refinement {
    /// Sample rows it validated on.
    pub rows: usize,
    /// D of the map it scored on; `None` when it used the exact machine (a fold's
    /// training rows at most `refine_dim`).
    pub dim: Option<usize>,
    /// Its gamma factors (of the defaults' gamma), after any extension.
    pub gamma_factors: Vec<f64>,
    /// Its C factors, after any extension.
    pub c_factors: Vec<f64>,
    /// Every candidate, lowest validation RMSE first.
    pub candidates: Vec<CandidateResult>,
    /// The candidate with the lowest validation RMSE.
    pub lowest: CandidateResult,
    /// The defaults, scored on the same folds.
    pub default: CandidateResult,
    /// Candidates it may evaluate.
    pub max_fits: usize,
    /// Its grid edges moved this many times.
    pub extensions: usize,
    /// The budget ran out with the lowest candidate on an edge.
    pub budget_reached: bool,
}

/// The outcome of [`crate::tune::tune`].
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct TuneReport {
    /// Sample rows given.
    pub rows: usize,
    /// Rows of the sample the exact machine was validated on.
    pub exact_rows: usize,
    /// Validation scheme.
    pub validation: Validation,
    /// The data-driven defaults the grid is centred on (C in solver units, as the fit
    /// uses it for the chosen loss).
    pub defaults: Defaults,
    /// The defaults' candidate.
    pub default: CandidateResult,
    /// Grid factors of gamma, after any extension.
    pub gamma_factors: Vec<f64>,
    /// Grid factors of C, after any extension.
    pub c_factors: Vec<f64>,
    /// Grid factors of epsilon, after any extension.
    pub epsilon_factors: Vec<f64>,
    /// The candidate with the lowest validation RMSE.
    pub lowest: CandidateResult,
    /// The chosen candidate: the simplest (smallest gamma, then smallest C, then largest
    /// epsilon) within one standard error of the lowest (the standard error of its
    /// difference to the lowest, paired over rows), of the second stage when it ran, else of
    /// the exact stage.
    pub best: CandidateResult,
    /// Every candidate, lowest validation RMSE first.
    pub candidates: Vec<CandidateResult>,
    /// Candidates (each a cross-validated exact fit) the search may evaluate.
    pub max_fits: usize,
    /// The grid's edges moved this many times.
    pub extensions: usize,
    /// The lowest candidate still lies on an edge of the grid because the budget ran out.
    pub budget_reached: bool,
    /// The search over D, in the order tried.
    pub dims: Vec<DimStep>,
    /// The chosen map family: the options' map, or Nyström when the options' random map
    /// does not agree with the reference machine at any D tried.
    #[serde(default = "fourier")]
    pub chosen_map: MapKind,
    /// The chosen D: the smallest tried whose machine agrees with the exact one (else
    /// the one with the lowest error).
    pub chosen_dim: usize,
    /// The chosen candidate's validation RMSE at the chosen D.
    pub chosen_error: f64,
    /// Relative tolerance of the agreement with the exact machine.
    pub dim_tol: f64,
    /// The second stage on every sample row (squared loss, when the sample has more
    /// rows than the exact stage used).
    pub refinement: Option<Refinement>,
    /// Wall time of the search on the exact machine (defaults and grid).
    pub grid_seconds: f64,
    /// Wall time of the second stage and the search over D.
    pub refine_seconds: f64,
    /// Wall time of the whole search.
    pub seconds: f64,
}

fn scheme(v: Validation) -> String {
    match v {
        Validation::KFold(k) => format!("{k}-fold cross-validation"),
        Validation::Holdout(h) => format!("holdout of {:.0}% of the rows", 100.0 * h),
    }
}

fn trim(v: f64) -> String {
    let s = format!("{v:.3}");
    s.trim_end_matches('0').trim_end_matches('.').to_string()
}

/// A ranked table of `cands` (at most `top` rows, plus the chosen and the defaults).
fn candidate_table(
    s: &mut String,
    cands: &[CandidateResult],
    best: &CandidateResult,
    default: &CandidateResult,
    top: usize,
) {
    let _ = writeln!(
        s,
        "\n{:>4}  {:>20}  {:>20}  {:>20}  {:>10}  {:>9}  {:>9}",
        "rank", "gamma", "C", "epsilon", "val. RMSE", "± s.e.", "diff s.e."
    );
    let shown: Vec<&CandidateResult> = cands.iter().take(top).collect();
    let mut lines: Vec<&CandidateResult> = shown.clone();
    if !shown.contains(&best) && cands.contains(best) {
        lines.push(best);
    }
    if !lines.iter().any(|c| c.is_default) {
        lines.push(default);
    }
    for c in lines {
        let rank = cands.iter().position(|x| x == c).map_or(0, |i| i + 1);
        let mut marks = Vec::new();
        if c == best {
            marks.push("chosen");
        } else if c.within_one_se {
            marks.push("within 1 s.e.");
        }
        if c.is_default {
            marks.push("defaults");
        }
        if !c.converged {
            marks.push("not converged");
        }
        let _ = writeln!(
            s,
            "{:>4}  {:>12.4e} {:>7}  {:>12.4e} {:>7}  {:>12.4e} {:>7}  {:>10.5}  {:>9.5}  {:>9.5}{}",
            rank,
            c.gamma,
            format!("×{}", trim(c.factors[0])),
            c.c,
            format!("×{}", trim(c.factors[1])),
            c.epsilon,
            format!("×{}", trim(c.factors[2])),
            c.error,
            c.se,
            c.se_diff,
            if marks.is_empty() {
                String::new()
            } else {
                format!("  ({})", marks.join(", "))
            }
        );
    }
    if cands.len() > top {
        let _ = writeln!(s, "   … {} more", cands.len() - top);
    }
}

/// The report as text: the ranked table (at most `top` rows), the choice by the
/// one-standard-error rule, the defaults against it, and the search over D.
pub fn render_tune(r: &TuneReport, top: usize) -> String {
    let mut s = String::new();
    let _ = writeln!(
        s,
        "validation search on the exact kernel machine: {} of {} sample rows, {}",
        r.exact_rows,
        r.rows,
        scheme(r.validation)
    );
    let _ = writeln!(
        s,
        "  {} candidates (budget {}), grid edges moved {} time(s){}, {:.1} s ({:.1} s on the grid)",
        r.candidates.len(),
        r.max_fits,
        r.extensions,
        if r.budget_reached {
            "; the budget ran out with the lowest candidate on an edge"
        } else {
            ""
        },
        r.seconds,
        r.grid_seconds
    );
    candidate_table(&mut s, &r.candidates, &r.best, &r.default, top);
    let _ = writeln!(
        s,
        "\nchosen: the simplest candidate (smallest gamma, then smallest C, then largest epsilon) within one standard error of the lowest ({:.5}), the one-standard-error rule of cross-validation (common practice), with the standard error of each candidate's difference to the lowest, paired over the validation rows (diff s.e.)",
        r.lowest.error
    );
    let default = r.refinement.as_ref().map_or(&r.default, |f| &f.default);
    if let Some(f) = &r.refinement {
        let _ = writeln!(
            s,
            "\nsecond stage on {} sample rows ({}, {}), around the lowest candidate above: gamma ×{{1, 2, 4}}, C ×{{1, √10, 10}}, and the defaults; {} candidates (budget {}), grid edges moved {} time(s){}, {:.1} s with the search over D",
            f.rows,
            scheme(r.validation),
            match f.dim {
                Some(d) => format!("the map with D = {d}"),
                None => "the exact machine".to_string(),
            },
            f.candidates.len(),
            f.max_fits,
            f.extensions,
            if f.budget_reached {
                "; the budget ran out with the lowest candidate on an edge"
            } else {
                ""
            },
            r.refine_seconds
        );
        candidate_table(&mut s, &f.candidates, &r.best, &f.default, top);
        let _ = writeln!(
            s,
            "\nchosen: the simplest candidate within one standard error of the second stage's lowest ({:.5}), by the same rule",
            f.lowest.error
        );
    }
    let gain = 100.0 * (default.error - r.best.error) / default.error;
    let _ = writeln!(
        s,
        "defaults (median heuristic; Cherkassky & Ma 2004): val. RMSE {:.5} ± {:.5}; chosen {:.5} ({:.1}% lower)",
        default.error, default.se, r.best.error, gain
    );
    let steps: Vec<String> = r
        .dims
        .iter()
        .map(|st| {
            format!(
                "{} D = {}: {:.5}{}",
                map_name(st.map),
                st.dim,
                st.error,
                if st.agrees { " (agrees)" } else { "" }
            )
        })
        .collect();
    let _ = writeln!(
        s,
        "features (agreement: within {:.1}% of the {} {:.5}): {}",
        100.0 * r.dim_tol,
        match r.refinement.as_ref().and_then(|f| f.dim) {
            Some(d) => format!("second stage's map (D = {d}),"),
            None => "exact machine's".to_string(),
        },
        r.best.error,
        steps.join(", ")
    );
    if !r.dims.iter().any(|d| d.agrees) {
        let _ = writeln!(
            s,
            "no map tried agrees with the reference machine; the lowest error is chosen (raise --max-dim)"
        );
    }
    if r.chosen_map == MapKind::Nystrom && r.dims.first().is_some_and(|d| d.map != MapKind::Nystrom)
    {
        let _ = writeln!(
            s,
            "random features stay short of the reference machine up to the largest D; Nyström features reach it, at about D² operations a row when fitting (--keep-map keeps the random map)"
        );
    }
    let _ = writeln!(
        s,
        "chosen: gamma = {:.6e}, C = {:.6e}, epsilon = {:.6e}, {} D = {} (val. RMSE {:.5})",
        r.best.gamma,
        r.best.c,
        r.best.epsilon,
        map_name(r.chosen_map),
        r.chosen_dim,
        r.chosen_error
    );
    s
}

fn fourier() -> MapKind {
    MapKind::Fourier
}

/// The map family as the command line spells it.
fn map_name(m: MapKind) -> &'static str {
    match m {
        MapKind::Fourier => "fourier",
        MapKind::Orthogonal => "orthogonal",
        MapKind::Nystrom => "nystrom",
    }
}
