//! The deviation report as text for a terminal: the overall line, the strongest rises of
//! the outside share within the period, tables by group and by file (worst first), and
//! the longest runs outside the band.

use std::fmt::Write;

use super::deviation::{DeviationReport, GroupFigures};

impl DeviationReport {
    /// The report as text for a terminal.
    pub fn to_text(&self) -> String {
        let mut s = String::new();
        let o = &self.overall;
        let _ = writeln!(
            s,
            "band level {:.3}: {} rows with a measured value judged ({} more outside the training data's coverage, not judged), {} outside the band ({:.2}% against {:.2}% expected, p = {:.3e})",
            self.level,
            o.rows,
            o.uncovered,
            o.outside,
            100.0 * o.outside_share,
            100.0 * self.expected_outside,
            o.p_value
        );
        let order = self.time.as_deref().unwrap_or("row order");
        if !self.changes.is_empty() {
            let _ = writeln!(
                s,
                "largest rises of the share outside the band within the period ({order}; likelihood ratio, strongest first)"
            );
            for c in self.changes.iter().take(5) {
                let group = if c.group.is_empty() {
                    String::new()
                } else {
                    format!("{}  ", c.group)
                };
                let _ = writeln!(
                    s,
                    "  {group}from {} to {}: {:.1}% outside (was {:.1}% over {} rows before), ratio {:.1}  {}",
                    c.start_text,
                    c.end_text,
                    100.0 * c.share_after,
                    100.0 * c.share_before,
                    c.rows_before,
                    c.statistic,
                    c.file
                );
            }
        }
        let table = |s: &mut String, title: &str, v: &[GroupFigures]| {
            let _ = writeln!(s, "{title} (smallest p-value first)");
            let _ = writeln!(
                s,
                "  {:<24} {:>9} {:>10} {:>11} {:>11} {:>9} {:>10}",
                "name", "rows", "uncovered", "resid mean", "resid RMSE", "outside", "p-value"
            );
            for g in v.iter().take(30) {
                let _ = writeln!(
                    s,
                    "  {:<24} {:>9} {:>10} {:>11.4} {:>11.4} {:>8.2}% {:>10.3e}",
                    short(&g.name, 24),
                    g.rows,
                    g.uncovered,
                    g.residual_mean,
                    g.residual_rmse,
                    100.0 * g.outside_share,
                    g.p_value
                );
            }
            if v.len() > 30 {
                let _ = writeln!(s, "  … {} more in the JSON report", v.len() - 30);
            }
        };
        if let Some(by) = &self.by {
            table(&mut s, &format!("by {by}"), &self.groups);
        }
        table(&mut s, "by file", &self.files);
        let _ = writeln!(
            s,
            "longest runs of consecutive rows outside the band ({order})"
        );
        for r in self.runs.iter().take(10) {
            let group = if r.group.is_empty() {
                String::new()
            } else {
                format!(" {}", r.group)
            };
            let _ = writeln!(
                s,
                "  {:>8} rows  {} to {}{}  {}",
                r.rows, r.start_text, r.end_text, group, r.file
            );
        }
        s
    }
}

/// `s` cut to its last `n` characters (with a leading ellipsis) for a table column.
fn short(s: &str, n: usize) -> String {
    let count = s.chars().count();
    if count <= n {
        s.to_string()
    } else {
        let tail: String = s.chars().skip(count - (n - 1)).collect();
        format!("…{tail}")
    }
}
