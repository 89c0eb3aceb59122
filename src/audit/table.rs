//! Plain-text renderings of audit reports.

use std::fmt::Write;

use super::{map_name, AuditReport, Loss, ModelAuditReport};

/// The loss as the report names it.
fn loss_name(loss: Loss) -> &'static str {
    match loss {
        Loss::L1 => "linear (l1)",
        Loss::L2 => "squared (l2)",
    }
}

fn num(v: f64) -> String {
    if v.is_nan() {
        "-".into()
    } else if v != 0.0 && (v.abs() >= 1e5 || v.abs() < 1e-3) {
        format!("{v:.3e}")
    } else {
        format!("{v:.4}")
    }
}

/// A readable summary of an [`AuditReport`]: parameters, the exact machine, one line
/// per approximate machine, and the recommendations.
pub fn render_audit(r: &AuditReport) -> String {
    let mut s = String::new();
    let _ = writeln!(
        s,
        "audit: {} kernel, gamma {} ({}), C {} ({}), epsilon {} ({})",
        r.kernel.name(),
        num(r.gamma.value),
        r.gamma.source,
        num(r.c.value),
        r.c.source,
        num(r.epsilon.value),
        r.epsilon.source
    );
    let _ = writeln!(
        s,
        "loss: {} beyond the tube for every machine; exact by SMO, approximate by {}",
        loss_name(r.loss),
        r.linear_solver
    );
    let _ = writeln!(
        s,
        "rows: {} to fit, {} to check; target sd {} (the unit of agreement)",
        r.rows_fit,
        r.rows_check,
        num(r.target_sd)
    );
    let _ = writeln!(
        s,
        "\n{:<11} {:>6} {:>6} {:>10} {:>10} {:>8} {:>10} {:>10} {:>9}",
        "machine", "D", "feat", "rmse", "mae", "r2", "agreement", "kern.err", "fit s"
    );
    let e = &r.exact;
    let _ = writeln!(
        s,
        "{:<11} {:>6} {:>6} {:>10} {:>10} {:>8} {:>10} {:>10} {:>9.2}{}",
        "exact",
        "-",
        e.support_vectors,
        num(e.check.rmse),
        num(e.check.mae),
        num(e.check.r2),
        "0",
        "0",
        e.fit_seconds,
        if e.converged {
            ""
        } else {
            "  (not converged *)"
        }
    );
    for row in &r.rows {
        let _ = writeln!(
            s,
            "{:<11} {:>6} {:>6} {:>10} {:>10} {:>8} {:>10} {:>10} {:>9.2}{}",
            map_name(row.map),
            row.dim,
            row.features,
            num(row.check.rmse),
            num(row.check.mae),
            num(row.check.r2),
            num(row.agreement),
            num(row.kernel_error),
            row.fit_seconds,
            if row.converged {
                ""
            } else {
                "  (not converged *)"
            }
        );
    }
    let _ = writeln!(s, "\n(exact: feat = support vectors)");
    let unfinished: Vec<String> = std::iter::once(("exact".to_string(), &e.stopped))
        .chain(r.rows.iter().map(|row| {
            (
                format!("{} D = {}", map_name(row.map), row.dim),
                &row.stopped,
            )
        }))
        .filter_map(|(name, why)| why.as_ref().map(|w| format!("  {name}: {w}")))
        .collect();
    if unfinished.is_empty() {
        let _ = writeln!(s, "every machine reached its tolerance");
    } else {
        let _ = writeln!(
            s,
            "* {} machine(s) did not reach their tolerance; their agreement includes \
             the remaining optimisation error:",
            unfinished.len()
        );
        for line in unfinished {
            let _ = writeln!(s, "{line}");
        }
    }
    let _ = writeln!(
        s,
        "smallest D agreeing within {} of the target sd:",
        num(r.agree)
    );
    for rec in &r.recommended {
        let v = rec
            .dim
            .map_or_else(|| "none of the list".to_string(), |d| d.to_string());
        let _ = writeln!(s, "  {:<11} {v}", map_name(rec.map));
    }
    match r.overall {
        Some((m, d)) => {
            let _ = writeln!(s, "recommended: {} with D = {d}", map_name(m));
        }
        None => {
            let _ = writeln!(s, "recommended: none; try a larger D or a looser --agree");
        }
    }
    for n in &r.notes {
        let _ = writeln!(s, "note: {n}");
    }
    s
}

/// A readable summary of a [`ModelAuditReport`].
pub fn render_model_audit(r: &ModelAuditReport) -> String {
    let mut s = String::new();
    let _ = writeln!(
        s,
        "model audit: {} kernel, gamma {}, C {}, epsilon {}, {} loss, {} map, {} features",
        r.kernel.kind.name(),
        num(r.kernel.gamma),
        num(r.c),
        num(r.epsilon),
        loss_name(r.loss),
        map_name(r.map.kind),
        r.features
    );
    let _ = writeln!(
        s,
        "rows: {} to fit the exact machine, {} to check; target sd {}",
        r.rows_fit,
        r.rows_check,
        num(r.target_sd)
    );
    let _ = writeln!(
        s,
        "\n{:<8} {:>10} {:>10} {:>8}",
        "machine", "rmse", "mae", "r2"
    );
    for (name, a) in [("exact", &r.exact.check), ("model", &r.model)] {
        let _ = writeln!(
            s,
            "{name:<8} {:>10} {:>10} {:>8}",
            num(a.rmse),
            num(a.mae),
            num(a.r2)
        );
    }
    let _ = writeln!(
        s,
        "\nagreement (rms difference / target sd): {}\nkernel error ‖K − ZZᵀ‖/‖K‖: {}\nexact fit: {:.2} s, {} support vectors{}",
        num(r.agreement),
        num(r.kernel_error),
        r.exact.fit_seconds,
        r.exact.support_vectors,
        if r.exact.converged { "" } else { " (not converged)" }
    );
    if let Some(why) = &r.exact.stopped {
        let _ = writeln!(s, "exact machine: {why}");
    }
    for n in &r.notes {
        let _ = writeln!(s, "note: {n}");
    }
    s
}
