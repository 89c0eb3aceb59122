//! A hand-written SVG heat map of validation error over gamma × C at the chosen epsilon.
//! Each cell shows the exact machine's validation RMSE and its standard error over folds;
//! the chosen cell is outlined.

use std::fmt::Write;

use super::report::TuneReport;

const CELL_W: f64 = 124.0;
const CELL_H: f64 = 44.0;
const LEFT: f64 = 110.0;
const TOP: f64 = 60.0;

/// Colour ramp from low error (dark blue) to high error (pale yellow).
fn colour(t: f64) -> String {
    const STOPS: [(f64, f64, f64); 4] = [
        (33.0, 49.0, 140.0),
        (34.0, 140.0, 140.0),
        (120.0, 200.0, 90.0),
        (250.0, 240.0, 160.0),
    ];
    let t = t.clamp(0.0, 1.0) * (STOPS.len() - 1) as f64;
    let i = (t.floor() as usize).min(STOPS.len() - 2);
    let u = t - i as f64;
    let (a, b) = (STOPS[i], STOPS[i + 1]);
    let mix = |x: f64, y: f64| (x + (y - x) * u).round() as u8;
    format!(
        "#{:02x}{:02x}{:02x}",
        mix(a.0, b.0),
        mix(a.1, b.1),
        mix(a.2, b.2)
    )
}

fn escape(s: &str) -> String {
    s.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
}

/// The heat map of the exact stage as an SVG document: rows are gamma factors, columns
/// C factors, at the epsilon factor of the chosen candidate (of the exact stage's
/// lowest when a second stage chose; the outline then marks no cell).
pub fn heatmap_svg(r: &TuneReport) -> String {
    // The exact stage's grid: at the chosen candidate's epsilon, or the exact stage's
    // lowest's when a second stage made the choice (its grid indices are its own).
    let eps_index = if r.refinement.is_some() {
        r.lowest.grid[2]
    } else {
        r.best.grid[2]
    };
    let (ng, nc) = (r.gamma_factors.len(), r.c_factors.len());
    let mut cells = vec![None; ng * nc];
    for c in &r.candidates {
        let g = c.grid;
        if g[2] == eps_index {
            cells[g[0] * nc + g[1]] = Some(c);
        }
    }
    let finite: Vec<f64> = cells
        .iter()
        .flatten()
        .map(|c| c.error)
        .filter(|e| e.is_finite() && *e > 0.0)
        .collect();
    let lo = finite.iter().copied().fold(f64::INFINITY, f64::min).ln();
    let hi = finite
        .iter()
        .copied()
        .fold(f64::NEG_INFINITY, f64::max)
        .ln();
    let width = LEFT + CELL_W * nc as f64 + 20.0;
    let height = TOP + CELL_H * ng as f64 + 70.0;
    let mut s = String::new();
    let _ = writeln!(
        s,
        r#"<svg xmlns="http://www.w3.org/2000/svg" width="{width}" height="{height}" font-family="sans-serif" font-size="12">"#
    );
    let _ = writeln!(s, r#"<rect width="100%" height="100%" fill="white"/>"#);
    let title = format!(
        "validation RMSE over gamma × C, epsilon = {:.4e} (×{})",
        r.defaults.epsilon * r.epsilon_factors.get(eps_index).copied().unwrap_or(1.0),
        r.epsilon_factors.get(eps_index).copied().unwrap_or(1.0)
    );
    let _ = writeln!(
        s,
        r#"<text x="10" y="22" font-size="14">{}</text>"#,
        escape(&title)
    );
    let _ = writeln!(
        s,
        r#"<text x="{}" y="{}" text-anchor="middle">C (× {:.4e})</text>"#,
        LEFT + CELL_W * nc as f64 / 2.0,
        TOP - 24.0,
        r.defaults.c
    );
    for (j, f) in r.c_factors.iter().enumerate() {
        let _ = writeln!(
            s,
            r#"<text x="{}" y="{}" text-anchor="middle">×{}</text>"#,
            LEFT + CELL_W * (j as f64 + 0.5),
            TOP - 6.0,
            f
        );
    }
    for (i, f) in r.gamma_factors.iter().enumerate() {
        let _ = writeln!(
            s,
            r#"<text x="{}" y="{}" text-anchor="end">gamma ×{}</text>"#,
            LEFT - 8.0,
            TOP + CELL_H * (i as f64 + 0.5) + 4.0,
            f
        );
    }
    for i in 0..ng {
        for j in 0..nc {
            let (x, y) = (LEFT + CELL_W * j as f64, TOP + CELL_H * i as f64);
            let Some(c) = cells[i * nc + j] else {
                let _ = writeln!(
                    s,
                    r##"<rect x="{x}" y="{y}" width="{CELL_W}" height="{CELL_H}" fill="#eeeeee" stroke="white"/>"##
                );
                continue;
            };
            let t = if c.error.is_finite() && hi > lo {
                (c.error.ln() - lo) / (hi - lo)
            } else {
                1.0
            };
            let fill = if c.error.is_finite() {
                colour(t)
            } else {
                "#cccccc".into()
            };
            let text = if t < 0.5 { "white" } else { "black" };
            let _ = writeln!(
                s,
                r#"<rect x="{x}" y="{y}" width="{CELL_W}" height="{CELL_H}" fill="{fill}" stroke="white"/>"#
            );
            let note = format!(" ±{:.3}", c.se);
            let _ = writeln!(
                s,
                r#"<text x="{}" y="{}" text-anchor="middle" fill="{text}">{:.4}{}</text>"#,
                x + CELL_W / 2.0,
                y + CELL_H / 2.0 + 4.0,
                c.error,
                note
            );
            if *c == r.best {
                let _ = writeln!(
                    s,
                    r#"<rect x="{}" y="{}" width="{}" height="{}" fill="none" stroke="red" stroke-width="3"/>"#,
                    x + 1.5,
                    y + 1.5,
                    CELL_W - 3.0,
                    CELL_H - 3.0
                );
            }
        }
    }
    let _ = writeln!(
        s,
        r#"<text x="10" y="{}">gamma × {:.4e}; validation RMSE ± its standard error over folds; lower is better; red = chosen.</text>"#,
        TOP + CELL_H * ng as f64 + 30.0,
        r.defaults.gamma
    );
    let _ = writeln!(s, "</svg>");
    s
}
