//! What a validation search found, and its text rendering: a ranked table, the
//! defaults' figure beside the winner's, and the search over D.

use std::fmt::Write;

use serde::{Deserialize, Serialize};

use crate::heuristics::Defaults;
use super::options::Validation;

/// One candidate's outcome.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct CandidateResult {
    /// Kernel width.
    pub gamma: f64,
    /// Penalty C (target units).
    pub c: f64,
    /// Tube half-width (target units).
    pub epsilon: f64,
    /// Indices into the gamma, C and epsilon factor lists; `None` for the defaults when
    /// they are not on the grid.
    pub grid: Option<[usize; 3]>,
    /// Pooled validation RMSE (target units) at the last rung this candidate reached;
    /// NaN if a run diverged.
    pub error: f64,
    /// Last rung reached (0 = first).
    pub rung: usize,
    /// Epochs run at that rung (largest over folds).
    pub epochs: usize,
    /// Every fold's run reached the duality-gap tolerance.
    pub converged: bool,
    /// This is the data-driven default.
    pub is_default: bool,
}

/// One step of the search over D.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct ComponentStep {
    /// Mapped features D.
    pub components: usize,
    /// The winner's validation RMSE at this D.
    pub error: f64,
}

/// The outcome of [`crate::tune::tune`].
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct TuneReport {
    /// Sample rows used.
    pub rows: usize,
    /// Validation scheme.
    pub validation: Validation,
    /// The data-driven defaults the grid is centred on.
    pub defaults: Defaults,
    /// Validation RMSE of the defaults (full budget, D = `grid_components`).
    pub default_error: f64,
    /// Grid factors of gamma.
    pub gamma_factors: Vec<f64>,
    /// Grid factors of C.
    pub c_factors: Vec<f64>,
    /// Grid factors of epsilon.
    pub epsilon_factors: Vec<f64>,
    /// The chosen gamma, C and epsilon.
    pub best: CandidateResult,
    /// Every candidate, best first (by last rung reached, then validation error).
    pub candidates: Vec<CandidateResult>,
    /// Epoch budget of each rung of successive halving.
    pub rung_epochs: Vec<usize>,
    /// Epochs run, summed over candidates and folds (the search's work).
    pub epochs_total: u64,
    /// D of the grid search.
    pub grid_components: usize,
    /// The search over D, in the order tried.
    pub components: Vec<ComponentStep>,
    /// The chosen D.
    pub chosen_components: usize,
    /// The winner's validation RMSE at the chosen D.
    pub chosen_error: f64,
    /// Wall time of the search.
    pub seconds: f64,
}

fn scheme(v: Validation) -> String {
    match v {
        Validation::KFold(k) => format!("{k}-fold cross-validation"),
        Validation::Holdout(h) => format!("holdout of {:.0}% of the rows", 100.0 * h),
    }
}

fn factor(list: &[f64], grid: Option<[usize; 3]>, axis: usize) -> String {
    match grid {
        Some(g) => format!("×{}", trim(list[g[axis]])),
        None => "×1".into(),
    }
}

fn trim(v: f64) -> String {
    let s = format!("{v:.3}");
    s.trim_end_matches('0').trim_end_matches('.').to_string()
}

/// The report as text: the ranked table (at most `top` rows), the defaults against the
/// choice, and the search over D.
pub fn render_tune(r: &TuneReport, top: usize) -> String {
    let mut s = String::new();
    let _ = writeln!(
        s,
        "validation search: {} sample rows, {}, D = {}",
        r.rows,
        scheme(r.validation),
        r.grid_components
    );
    let budgets: Vec<String> = r.rung_epochs.iter().map(|e| e.to_string()).collect();
    let _ = writeln!(
        s,
        "  {} candidates, rung budgets (epochs) {}, {} epochs in all, {:.1} s",
        r.candidates.len(),
        budgets.join(" → "),
        r.epochs_total,
        r.seconds
    );
    let _ = writeln!(
        s,
        "\n{:>4}  {:>22}  {:>22}  {:>22}  {:>11}  {:>4}  {:>6}",
        "rank", "gamma", "C", "epsilon", "val. RMSE", "rung", "epochs"
    );
    for (i, c) in r.candidates.iter().take(top).enumerate() {
        let mark = if c.is_default { "  (defaults)" } else { "" };
        let _ = writeln!(
            s,
            "{:>4}  {:>14.5e} {:>7}  {:>14.5e} {:>7}  {:>14.5e} {:>7}  {:>11.5}  {:>4}  {:>5}{}{}",
            i + 1,
            c.gamma,
            factor(&r.gamma_factors, c.grid, 0),
            c.c,
            factor(&r.c_factors, c.grid, 1),
            c.epsilon,
            factor(&r.epsilon_factors, c.grid, 2),
            c.error,
            c.rung,
            c.epochs,
            if c.converged { "✓" } else { " " },
            mark
        );
    }
    if r.candidates.len() > top {
        let _ = writeln!(s, "   … {} more", r.candidates.len() - top);
    }
    let gain = 100.0 * (r.default_error - r.best.error) / r.default_error;
    let _ = writeln!(
        s,
        "\ndefaults (median heuristic; Cherkassky & Ma 2004): val. RMSE {:.5}; chosen {:.5} ({:.1}% lower)",
        r.default_error, r.best.error, gain
    );
    let steps: Vec<String> = r
        .components
        .iter()
        .map(|st| format!("D = {}: {:.5}", st.components, st.error))
        .collect();
    let _ = writeln!(s, "features: {}", steps.join(", "));
    let _ = writeln!(
        s,
        "chosen: gamma = {:.6e}, C = {:.6e}, epsilon = {:.6e}, D = {} (val. RMSE {:.5})",
        r.best.gamma, r.best.c, r.best.epsilon, r.chosen_components, r.chosen_error
    );
    s
}
