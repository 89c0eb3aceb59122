//! A model as text for a person at a terminal (`kernlake inspect`): its input contract,
//! feature map, problem and training report.

use std::fmt::Write;

use crate::model::Model;
use crate::report::render_training;
use crate::report::text::line;

/// A model's contract, parameters and training report as text.
pub fn render_model(m: &Model) -> String {
    let mut s = String::new();
    let _ = writeln!(s, "inputs (in order)");
    for (i, c) in m.columns.features.iter().enumerate() {
        line(
            &mut s,
            &format!("{:>3}. {c}", i + 1),
            format!("mean {:.4}  sd {:.4}", m.scaler.mean[i], m.scaler.scale[i]),
        );
    }
    if let Some(t) = &m.columns.target {
        line(&mut s, "target", t);
    }
    let _ = writeln!(s, "feature map");
    line(
        &mut s,
        "kernel",
        format!("{} (gamma {:.6})", m.kernel.kind.name(), m.kernel.gamma),
    );
    line(
        &mut s,
        "map",
        format!("{:?}", m.map_spec.kind).to_lowercase(),
    );
    line(&mut s, "features D", m.weights.len());
    line(
        &mut s,
        "loss",
        format!("{:?}", m.problem.loss).to_lowercase(),
    );
    line(&mut s, "intercept", format!("{:.6}", m.intercept));
    s.push_str(&render_training(&m.report));
    s
}
