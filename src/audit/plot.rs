//! An SVG picture of an audit: agreement and check RMSE against D (log₂ axis), one line
//! per map, the exact machine's RMSE and the agreement tolerance as horizontal reference
//! lines. Hand-written SVG 1.1 text.

use std::fmt::Write;

use super::{map_name, AuditReport};
use crate::features::MapKind;

const PANEL_W: f64 = 440.0;
const PANEL_H: f64 = 300.0;
const LEFT: f64 = 70.0;
const TOP: f64 = 40.0;
const GAP: f64 = 90.0;

fn colour(kind: MapKind) -> &'static str {
    match kind {
        MapKind::Fourier => "#1f77b4",
        MapKind::Orthogonal => "#d62728",
        MapKind::Nystrom => "#2ca02c",
    }
}

/// Linear map of [lo, hi] onto [a, b]; a degenerate range maps to the middle.
fn scale(v: f64, lo: f64, hi: f64, a: f64, b: f64) -> f64 {
    if hi > lo {
        a + (v - lo) / (hi - lo) * (b - a)
    } else {
        (a + b) / 2.0
    }
}

fn tick(v: f64) -> String {
    if v != 0.0 && (v.abs() < 1e-2 || v.abs() >= 1e4) {
        format!("{v:.1e}")
    } else {
        format!("{v:.3}")
    }
}

/// One panel: its left edge `x0`, the y values per row from `value`, a title, the y
/// label and an optional reference line (value, label, class).
struct Panel<'a> {
    x0: f64,
    title: &'a str,
    ylabel: &'a str,
    value: fn(&super::AuditRow) -> f64,
    reference: Option<(f64, String, &'a str)>,
    /// Whether the y axis starts at zero (else it spans the values with a margin).
    from_zero: bool,
}

fn draw_panel(s: &mut String, r: &AuditReport, maps: &[MapKind], p: &Panel) {
    let finite = |v: &f64| v.is_finite();
    let mut ys: Vec<f64> = r.rows.iter().map(p.value).filter(finite).collect();
    if let Some((v, _, _)) = &p.reference {
        ys.push(*v);
    }
    let lo = ys.iter().copied().fold(f64::INFINITY, f64::min);
    let hi = ys.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    let (ymin, ymax) = if !(lo.is_finite() && hi.is_finite()) {
        (0.0, 1.0)
    } else if p.from_zero {
        (lo.min(0.0), hi * 1.08 + 1e-12)
    } else {
        let pad = ((hi - lo) * 0.08).max(hi.abs() * 1e-3).max(1e-12);
        (lo - pad, hi + pad)
    };
    let lx: Vec<f64> = r.rows.iter().map(|row| (row.dim as f64).log2()).collect();
    let xmin = lx.iter().copied().fold(f64::INFINITY, f64::min);
    let xmax = lx.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    let (xmin, xmax) = if xmin < xmax {
        (xmin - 0.25, xmax + 0.25)
    } else {
        (xmin - 1.0, xmin + 1.0)
    };
    let (x0, x1, y0, y1) = (p.x0, p.x0 + PANEL_W, TOP + PANEL_H, TOP);
    let px = |l: f64| scale(l, xmin, xmax, x0, x1);
    let py = |v: f64| scale(v, ymin, ymax, y0, y1);

    let _ = writeln!(
        s,
        r##"<rect x="{x0}" y="{y1}" width="{PANEL_W}" height="{PANEL_H}" fill="none" stroke="#444"/>"##
    );
    let _ = writeln!(
        s,
        r#"<text x="{:.1}" y="{:.1}" text-anchor="middle" font-size="15">{}</text>"#,
        (x0 + x1) / 2.0,
        y1 - 12.0,
        p.title
    );
    // x ticks: every D of the list
    let mut ds: Vec<usize> = r.rows.iter().map(|row| row.dim).collect();
    ds.sort_unstable();
    ds.dedup();
    for d in &ds {
        let x = px((*d as f64).log2());
        let _ = writeln!(
            s,
            r##"<line x1="{x:.1}" y1="{y0}" x2="{x:.1}" y2="{:.1}" stroke="#444"/><text x="{x:.1}" y="{:.1}" text-anchor="middle" font-size="11">{d}</text>"##,
            y0 + 5.0,
            y0 + 18.0
        );
    }
    let _ = writeln!(
        s,
        r#"<text x="{:.1}" y="{:.1}" text-anchor="middle" font-size="12">D (features, log2 scale)</text>"#,
        (x0 + x1) / 2.0,
        y0 + 38.0
    );
    // y ticks: five even steps
    for k in 0..=4 {
        let v = ymin + (ymax - ymin) * k as f64 / 4.0;
        let y = py(v);
        let _ = writeln!(
            s,
            r##"<line x1="{:.1}" y1="{y:.1}" x2="{x0}" y2="{y:.1}" stroke="#444"/><text x="{:.1}" y="{:.1}" text-anchor="end" font-size="11">{}</text>"##,
            x0 - 5.0,
            x0 - 8.0,
            y + 4.0,
            tick(v)
        );
    }
    let _ = writeln!(
        s,
        r#"<text x="{:.1}" y="{:.1}" text-anchor="middle" font-size="12" transform="rotate(-90 {:.1} {:.1})">{}</text>"#,
        x0 - 52.0,
        (y0 + y1) / 2.0,
        x0 - 52.0,
        (y0 + y1) / 2.0,
        p.ylabel
    );
    if let Some((v, label, class)) = &p.reference {
        let y = py(*v);
        let _ = writeln!(
            s,
            r##"<line class="{class}" x1="{x0}" y1="{y:.1}" x2="{x1}" y2="{y:.1}" stroke="#000" stroke-dasharray="6 4"/><text x="{:.1}" y="{:.1}" text-anchor="end" font-size="11">{label}</text>"##,
            x1 - 4.0,
            y - 4.0
        );
    }
    for &m in maps {
        let pts: Vec<String> = r
            .rows
            .iter()
            .filter(|row| row.map == m && (p.value)(row).is_finite())
            .map(|row| {
                format!(
                    "{:.1},{:.1}",
                    px((row.dim as f64).log2()),
                    py((p.value)(row))
                )
            })
            .collect();
        let _ = writeln!(
            s,
            r#"<polyline class="map-{}" fill="none" stroke="{}" stroke-width="2" points="{}"/>"#,
            map_name(m),
            colour(m),
            pts.join(" ")
        );
        for pt in &pts {
            let (cx, cy) = pt.split_once(',').unwrap_or(("0", "0"));
            let _ = writeln!(
                s,
                r#"<circle cx="{cx}" cy="{cy}" r="3" fill="{}"/>"#,
                colour(m)
            );
        }
    }
}

/// The SVG document for `report`: left panel agreement (with the tolerance line), right
/// panel check RMSE (with the exact machine's RMSE), legend below.
pub fn render_svg(report: &AuditReport) -> String {
    let mut maps: Vec<MapKind> = Vec::new();
    for row in &report.rows {
        if !maps.contains(&row.map) {
            maps.push(row.map);
        }
    }
    let width = LEFT + 2.0 * PANEL_W + GAP + 30.0;
    let height = TOP + PANEL_H + 90.0;
    let mut s = String::new();
    let _ = writeln!(s, r#"<?xml version="1.0" encoding="UTF-8"?>"#);
    let _ = writeln!(
        s,
        r#"<svg xmlns="http://www.w3.org/2000/svg" version="1.1" width="{width}" height="{height}" viewBox="0 0 {width} {height}" font-family="sans-serif">"#
    );
    let _ = writeln!(s, r#"<rect width="100%" height="100%" fill="white"/>"#);
    draw_panel(
        &mut s,
        report,
        &maps,
        &Panel {
            x0: LEFT,
            title: "agreement with the exact machine",
            ylabel: "rms difference / target sd",
            value: |row| row.agreement,
            reference: Some((
                report.agree,
                format!("tolerance {}", tick(report.agree)),
                "tolerance",
            )),
            from_zero: true,
        },
    );
    draw_panel(
        &mut s,
        report,
        &maps,
        &Panel {
            x0: LEFT + PANEL_W + GAP,
            title: "check RMSE",
            ylabel: "RMSE (target units)",
            value: |row| row.check.rmse,
            reference: Some((
                report.exact.check.rmse,
                format!("exact {}", tick(report.exact.check.rmse)),
                "exact",
            )),
            from_zero: false,
        },
    );
    // legend
    let ly = TOP + PANEL_H + 70.0;
    let mut lx = LEFT;
    for &m in &maps {
        let _ = writeln!(
            s,
            r#"<line x1="{lx}" y1="{ly}" x2="{:.1}" y2="{ly}" stroke="{}" stroke-width="2"/><text x="{:.1}" y="{:.1}" font-size="12">{}</text>"#,
            lx + 24.0,
            colour(m),
            lx + 30.0,
            ly + 4.0,
            map_name(m)
        );
        lx += 120.0;
    }
    let _ = writeln!(
        s,
        r##"<line x1="{lx}" y1="{ly}" x2="{:.1}" y2="{ly}" stroke="#000" stroke-dasharray="6 4"/><text x="{:.1}" y="{:.1}" font-size="12">exact machine / tolerance</text>"##,
        lx + 24.0,
        lx + 30.0,
        ly + 4.0
    );
    let _ = writeln!(s, "</svg>");
    s
}
