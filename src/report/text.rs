//! Plain-text rendering of training reports and models for a person at a terminal.

use std::fmt::Write;

use super::TrainingReport;

pub(crate) fn line(out: &mut String, key: &str, value: impl std::fmt::Display) {
    let _ = writeln!(out, "  {key:<22} {value}");
}

/// The training report as aligned text.
pub fn render_training(r: &TrainingReport) -> String {
    let mut s = String::new();
    let _ = writeln!(s, "rows");
    line(&mut s, "seen", r.rows_total);
    line(&mut s, "trained on", r.rows_trained);
    line(&mut s, "held out", r.rows_holdout);
    line(&mut s, "skipped (missing)", r.rows_skipped);
    for c in &r.skipped_by_column {
        line(&mut s, &format!("  in '{}'", c.column), c.rows);
    }
    if !r.constant_columns.is_empty() {
        line(&mut s, "constant, dropped", r.constant_columns.join(", "));
    }
    let _ = writeln!(s, "parameters");
    line(
        &mut s,
        "gamma",
        format!("{:.6}  ({})", r.gamma.value, r.gamma.source),
    );
    line(&mut s, "C", format!("{:.6}  ({})", r.c.value, r.c.source));
    line(
        &mut s,
        "epsilon",
        format!("{:.6}  ({})", r.epsilon.value, r.epsilon.source),
    );
    line(&mut s, "mapped features D", r.features);
    let _ = writeln!(s, "solver");
    line(
        &mut s,
        "epochs",
        format!(
            "{}  (solver: {}; stopped: {})",
            r.epochs,
            match r.method {
                crate::solver::blocks::Method::Newton => "newton",
                crate::solver::blocks::Method::Dual => "dual",
                crate::solver::blocks::Method::Barrier => "barrier",
                crate::solver::blocks::Method::Auto => "auto",
            },
            match r.stop {
                crate::solver::blocks::StopReason::Gap => "gap within tolerance",
                crate::solver::blocks::StopReason::Holdout => "holdout stopped improving",
                crate::solver::blocks::StopReason::MaxEpochs => "epoch limit",
                crate::solver::blocks::StopReason::Precision => "no further decrease possible",
            }
        ),
    );
    line(&mut s, "primal", format!("{:.6e}", r.objective.primal));
    line(&mut s, "dual", format!("{:.6e}", r.objective.dual));
    line(&mut s, "relative gap", format!("{:.3e}", r.objective.gap));
    line(
        &mut s,
        "support vectors",
        format!("{:.1}% of rows", 100.0 * r.support_share),
    );
    if r.threads > 0 {
        line(
            &mut s,
            "time",
            format!("{:.1} s on {} thread(s)", r.seconds, r.threads),
        );
    }
    if let Some(m) = &r.holdout {
        let _ = writeln!(s, "holdout ({} rows, target units)", m.n);
        line(&mut s, "RMSE", format!("{:.4}", m.rmse));
        line(&mut s, "MAE", format!("{:.4}", m.mae));
        line(&mut s, "R²", format!("{:.4}", m.r2));
        line(
            &mut s,
            "inside the tube",
            format!("{:.1}%", 100.0 * m.tube_share),
        );
    }
    s
}
