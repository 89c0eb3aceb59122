//! Plain-text renderings of audit reports.

use std::fmt::Write;

use super::{map_name, AuditReport, ModelAuditReport};

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
            "  (SMO stopped early)"
        }
    );
    for row in &r.rows {
        let _ = writeln!(
            s,
            "{:<11} {:>6} {:>6} {:>10} {:>10} {:>8} {:>10} {:>10} {:>9.2}{}",
            map_name(row.map),
            row.components,
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
                "  (gap not reached)"
            }
        );
    }
    let _ = writeln!(s, "\n(exact: feat = support vectors)");
    let _ = writeln!(
        s,
        "smallest D agreeing within {} of the target sd:",
        num(r.agree)
    );
    for rec in &r.recommended {
        let v = rec
            .components
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
        "model audit: {} kernel, gamma {}, C {}, epsilon {}, {} map, {} features",
        r.kernel.kind.name(),
        num(r.kernel.gamma),
        num(r.c),
        num(r.epsilon),
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
        if r.exact.converged { "" } else { " (SMO stopped early)" }
    );
    for n in &r.notes {
        let _ = writeln!(s, "note: {n}");
    }
    s
}
