//! An SVG of measured against expected values with the band, over time, for the group a
//! deviation report ranks worst: the band as a shaded area, the expectation as a line,
//! measured values as dots (red outside the band).

use std::fmt::Write;

use super::deviation::DeviationReport;

const W: f64 = 900.0;
const H: f64 = 420.0;
const LEFT: f64 = 70.0;
const RIGHT: f64 = 20.0;
const TOP: f64 = 40.0;
const BOTTOM: f64 = 50.0;

fn escape(s: &str) -> String {
    s.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
}

/// The plot as SVG text (a short note when the report has no points).
pub fn render_band_svg(report: &DeviationReport, target: &str) -> String {
    let pts = &report.worst_points;
    let mut s = String::new();
    let _ = writeln!(
        s,
        r#"<svg xmlns="http://www.w3.org/2000/svg" width="{W}" height="{H}" font-family="sans-serif" font-size="12">"#
    );
    let title = format!(
        "{} — measured {} against expected, band at level {}",
        report.worst.as_deref().unwrap_or("no rows"),
        target,
        report.level
    );
    let _ = writeln!(s, r#"<text x="{LEFT}" y="20">{}</text>"#, escape(&title));
    if pts.is_empty() {
        s.push_str("</svg>\n");
        return s;
    }
    let (t0, t1) = (pts[0].time as f64, pts[pts.len() - 1].time as f64);
    let mut lo = f64::INFINITY;
    let mut hi = f64::NEG_INFINITY;
    for p in pts {
        for v in [p.measured, p.low, p.high] {
            if v.is_finite() {
                lo = lo.min(v);
                hi = hi.max(v);
            }
        }
    }
    if hi <= lo {
        hi = lo + 1.0;
    }
    let span_t = if t1 > t0 { t1 - t0 } else { 1.0 };
    let x = |t: i64| LEFT + (t as f64 - t0) / span_t * (W - LEFT - RIGHT);
    let y = |v: f64| TOP + (hi - v) / (hi - lo) * (H - TOP - BOTTOM);
    // Band: upper edge left to right, lower edge right to left.
    let mut poly = String::new();
    for p in pts {
        let _ = write!(poly, "{:.1},{:.1} ", x(p.time), y(p.high));
    }
    for p in pts.iter().rev() {
        let _ = write!(poly, "{:.1},{:.1} ", x(p.time), y(p.low));
    }
    let _ = writeln!(
        s,
        r##"<polygon points="{}" fill="#9ecae1" fill-opacity="0.5" stroke="none"/>"##,
        poly.trim_end()
    );
    let line: Vec<String> = pts
        .iter()
        .map(|p| format!("{:.1},{:.1}", x(p.time), y(p.expected)))
        .collect();
    let _ = writeln!(
        s,
        r##"<polyline points="{}" fill="none" stroke="#08519c" stroke-width="1"/>"##,
        line.join(" ")
    );
    for p in pts {
        let colour = if p.outside() { "#d62728" } else { "#333333" };
        let _ = writeln!(
            s,
            r#"<circle cx="{:.1}" cy="{:.1}" r="1.5" fill="{colour}"/>"#,
            x(p.time),
            y(p.measured)
        );
    }
    // Axes and labels.
    let _ = writeln!(
        s,
        r##"<line x1="{LEFT}" y1="{}" x2="{}" y2="{}" stroke="#000"/>"##,
        H - BOTTOM,
        W - RIGHT,
        H - BOTTOM
    );
    let _ = writeln!(
        s,
        r##"<line x1="{LEFT}" y1="{TOP}" x2="{LEFT}" y2="{}" stroke="#000"/>"##,
        H - BOTTOM
    );
    for k in 0..=4 {
        let v = lo + (hi - lo) * k as f64 / 4.0;
        let _ = writeln!(
            s,
            r#"<text x="{}" y="{:.1}" text-anchor="end">{:.4}</text>"#,
            LEFT - 6.0,
            y(v) + 4.0,
            v
        );
    }
    let order = report.time.as_deref().unwrap_or("row order");
    let _ = writeln!(
        s,
        r#"<text x="{}" y="{}" text-anchor="middle">{}</text>"#,
        (LEFT + W - RIGHT) / 2.0,
        H - 15.0,
        escape(order)
    );
    let _ = writeln!(
        s,
        r##"<text x="{}" y="{TOP}" text-anchor="end" fill="#d62728">red: outside the band</text>"##,
        W - RIGHT
    );
    s.push_str("</svg>\n");
    s
}
