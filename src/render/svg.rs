//! Figures for the report, drawn as inline SVG by hand: a diagram of nesting and crossing,
//! and line charts (power curves, the cost-versus-power frontier). Black on white with
//! dash patterns and labels, so they read without colour and print on A4.

use std::fmt::Write;

/// Escapes text for XML content and attributes.
pub fn esc(s: &str) -> String {
    s.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
        .replace('"', "&quot;")
}

/// A box in the layout diagram.
pub struct Node {
    pub name: String,
    pub detail: String,
    /// Index of each factor this one is directly nested in.
    pub parents: Vec<usize>,
}

/// Factors as boxes in rows by nesting depth; an arrow runs from each factor to every
/// factor directly nested in it. Factors joined by no arrow are crossed.
pub fn layout_diagram(nodes: &[Node], title: &str) -> String {
    let depth = depths(nodes);
    let rows = depth.iter().copied().max().map_or(1, |d| d + 1);
    let mut by_row: Vec<Vec<usize>> = vec![Vec::new(); rows];
    for (i, &d) in depth.iter().enumerate() {
        by_row[d].push(i);
    }
    let (bw, bh, gap_x, gap_y, margin) = (150.0, 44.0, 30.0, 56.0, 20.0);
    let widest = by_row.iter().map(Vec::len).max().unwrap_or(1) as f64;
    let width = margin * 2.0 + widest * bw + (widest - 1.0).max(0.0) * gap_x;
    let height = margin * 2.0 + rows as f64 * bh + (rows as f64 - 1.0) * gap_y;
    let mut pos = vec![(0.0, 0.0); nodes.len()];
    for (r, row) in by_row.iter().enumerate() {
        let row_width = row.len() as f64 * bw + (row.len() as f64 - 1.0).max(0.0) * gap_x;
        let x0 = (width - row_width) / 2.0;
        for (k, &i) in row.iter().enumerate() {
            pos[i] = (
                x0 + k as f64 * (bw + gap_x),
                margin + r as f64 * (bh + gap_y),
            );
        }
    }
    let mut s = String::new();
    let _ = write!(
        s,
        r#"<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {width:.0} {height:.0}" width="{width:.0}" height="{height:.0}" role="img" aria-label="{}">"#,
        esc(title)
    );
    s.push_str(r#"<defs><marker id="arrow" viewBox="0 0 10 10" refX="10" refY="5" markerWidth="7" markerHeight="7" orient="auto-start-reverse"><path d="M 0 0 L 10 5 L 0 10 z" fill="black"/></marker></defs>"#);
    for (i, n) in nodes.iter().enumerate() {
        for &p in &n.parents {
            let (px, py) = pos[p];
            let (cx, cy) = pos[i];
            let _ = write!(
                s,
                r#"<line x1="{:.1}" y1="{:.1}" x2="{:.1}" y2="{:.1}" stroke="black" stroke-width="1.5" marker-end="url(#arrow)"/>"#,
                px + bw / 2.0,
                py + bh,
                cx + bw / 2.0,
                cy - 2.0
            );
        }
    }
    for (i, n) in nodes.iter().enumerate() {
        let (x, y) = pos[i];
        let _ = write!(
            s,
            r#"<rect x="{x:.1}" y="{y:.1}" width="{bw}" height="{bh}" rx="6" fill="white" stroke="black" stroke-width="1.5"/><text x="{:.1}" y="{:.1}" font-family="sans-serif" font-size="14" font-weight="bold" text-anchor="middle">{}</text><text x="{:.1}" y="{:.1}" font-family="sans-serif" font-size="11" text-anchor="middle">{}</text>"#,
            x + bw / 2.0,
            y + 18.0,
            esc(&n.name),
            x + bw / 2.0,
            y + 35.0,
            esc(&n.detail)
        );
    }
    s.push_str("</svg>");
    s
}

fn depths(nodes: &[Node]) -> Vec<usize> {
    let mut depth = vec![0usize; nodes.len()];
    // Longest path from a root; nesting is acyclic, so |nodes| passes suffice.
    for _ in 0..nodes.len() {
        for (i, n) in nodes.iter().enumerate() {
            for &p in &n.parents {
                depth[i] = depth[i].max(depth[p] + 1);
            }
        }
    }
    depth
}

/// One line of a chart: points, a label, and a dash pattern ("" for solid).
pub struct Series {
    pub label: String,
    pub points: Vec<(f64, f64)>,
    pub dash: &'static str,
    /// Draw points as markers instead of a line (for scatter data such as a frontier).
    pub markers: bool,
}

pub const DASHES: [&str; 5] = ["", "6 3", "2 3", "8 3 2 3", "1 5"];

/// A line chart with axes, ticks, labelled series and optional horizontal reference
/// lines (e.g. the target power).
pub fn chart(
    title: &str,
    x_label: &str,
    y_label: &str,
    series: &[Series],
    y_range: Option<(f64, f64)>,
    reference: &[(f64, &str)],
) -> String {
    let (w, h) = (560.0, 300.0);
    let (left, right, top, bottom) = (60.0, 150.0, 30.0, 45.0);
    let all: Vec<(f64, f64)> = series
        .iter()
        .flat_map(|s| s.points.iter().copied())
        .collect();
    let finite = |v: &f64| v.is_finite();
    let xs: Vec<f64> = all.iter().map(|p| p.0).filter(finite).collect();
    let ys: Vec<f64> = all.iter().map(|p| p.1).filter(finite).collect();
    let (x0, x1) = span(&xs);
    let (y0, y1) = y_range.unwrap_or_else(|| span(&ys));
    let px = |x: f64| left + (x - x0) / (x1 - x0) * (w - left - right);
    let py = |y: f64| h - bottom - (y - y0) / (y1 - y0) * (h - top - bottom);
    let mut s = String::new();
    let _ = write!(
        s,
        r#"<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {w} {h}" width="{w}" height="{h}" role="img" aria-label="{}">"#,
        esc(title)
    );
    let _ = write!(
        s,
        r#"<text x="{left}" y="18" font-family="sans-serif" font-size="13" font-weight="bold">{}</text>"#,
        esc(title)
    );
    // Axes and ticks.
    let _ = write!(
        s,
        r#"<line x1="{left}" y1="{:.1}" x2="{:.1}" y2="{:.1}" stroke="black"/><line x1="{left}" y1="{top}" x2="{left}" y2="{:.1}" stroke="black"/>"#,
        h - bottom,
        w - right,
        h - bottom,
        h - bottom
    );
    for k in 0..=4 {
        let x = x0 + (x1 - x0) * k as f64 / 4.0;
        let y = y0 + (y1 - y0) * k as f64 / 4.0;
        let _ = write!(
            s,
            r#"<line x1="{:.1}" y1="{:.1}" x2="{:.1}" y2="{:.1}" stroke="black"/><text x="{:.1}" y="{:.1}" font-family="sans-serif" font-size="10" text-anchor="middle">{}</text>"#,
            px(x),
            h - bottom,
            px(x),
            h - bottom + 4.0,
            px(x),
            h - bottom + 16.0,
            tick(x)
        );
        let _ = write!(
            s,
            r#"<line x1="{:.1}" y1="{:.1}" x2="{left}" y2="{:.1}" stroke="black"/><text x="{:.1}" y="{:.1}" font-family="sans-serif" font-size="10" text-anchor="end">{}</text>"#,
            left - 4.0,
            py(y),
            py(y),
            left - 6.0,
            py(y) + 3.0,
            tick(y)
        );
    }
    let _ = write!(
        s,
        r#"<text x="{:.1}" y="{:.1}" font-family="sans-serif" font-size="11" text-anchor="middle">{}</text><text x="14" y="{:.1}" font-family="sans-serif" font-size="11" text-anchor="middle" transform="rotate(-90 14 {:.1})">{}</text>"#,
        (left + w - right) / 2.0,
        h - 8.0,
        esc(x_label),
        (top + h - bottom) / 2.0,
        (top + h - bottom) / 2.0,
        esc(y_label)
    );
    for (y, label) in reference {
        if *y >= y0 && *y <= y1 {
            let _ = write!(
                s,
                r#"<line x1="{left}" y1="{:.1}" x2="{:.1}" y2="{:.1}" stroke="gray" stroke-dasharray="1 3"/><text x="{:.1}" y="{:.1}" font-family="sans-serif" font-size="10">{}</text>"#,
                py(*y),
                w - right,
                py(*y),
                w - right + 4.0,
                py(*y) + 3.0,
                esc(label)
            );
        }
    }
    for (k, series) in series.iter().enumerate() {
        let pts: Vec<(f64, f64)> = series
            .points
            .iter()
            .copied()
            .filter(|(x, y)| x.is_finite() && y.is_finite())
            .collect();
        if series.markers {
            for (x, y) in &pts {
                let _ = write!(
                    s,
                    r#"<circle cx="{:.1}" cy="{:.1}" r="3" fill="{}" stroke="black"/>"#,
                    px(*x),
                    py(*y),
                    if k == 0 { "black" } else { "white" }
                );
            }
        } else if pts.len() > 1 {
            let d: Vec<String> = pts
                .iter()
                .map(|(x, y)| format!("{:.1},{:.1}", px(*x), py(*y)))
                .collect();
            let _ = write!(
                s,
                r#"<polyline points="{}" fill="none" stroke="black" stroke-width="1.6" stroke-dasharray="{}"/>"#,
                d.join(" "),
                series.dash
            );
        }
        // Legend entry.
        let ly = top + 14.0 + k as f64 * 16.0;
        let lx = w - right + 10.0;
        if series.markers {
            let _ = write!(
                s,
                r#"<circle cx="{:.1}" cy="{:.1}" r="3" fill="{}" stroke="black"/>"#,
                lx + 10.0,
                ly - 4.0,
                if k == 0 { "black" } else { "white" }
            );
        } else {
            let _ = write!(
                s,
                r#"<line x1="{lx:.1}" y1="{:.1}" x2="{:.1}" y2="{:.1}" stroke="black" stroke-width="1.6" stroke-dasharray="{}"/>"#,
                ly - 4.0,
                lx + 22.0,
                ly - 4.0,
                series.dash
            );
        }
        let _ = write!(
            s,
            r#"<text x="{:.1}" y="{ly:.1}" font-family="sans-serif" font-size="10">{}</text>"#,
            lx + 26.0,
            esc(&truncate(&series.label, 22))
        );
    }
    s.push_str("</svg>");
    s
}

fn span(v: &[f64]) -> (f64, f64) {
    let lo = v.iter().copied().fold(f64::INFINITY, f64::min);
    let hi = v.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    if !lo.is_finite() || !hi.is_finite() {
        (0.0, 1.0)
    } else if (hi - lo).abs() < 1e-12 {
        (lo - 0.5, hi + 0.5)
    } else {
        (lo, hi)
    }
}

fn tick(v: f64) -> String {
    if v.abs() >= 1000.0 {
        format!("{v:.0}")
    } else if v.abs() >= 10.0 {
        format!("{v:.1}")
    } else {
        format!("{v:.2}")
    }
}

fn truncate(s: &str, n: usize) -> String {
    if s.chars().count() <= n {
        s.to_string()
    } else {
        let t: String = s.chars().take(n - 1).collect();
        format!("{t}…")
    }
}
