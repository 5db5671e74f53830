//! The result table as an SVG chart: for each pair count, a panel of success
//! rate and a panel of median error over CRB (log scale), both against the
//! outlier share, one line per method.

use std::fmt::Write as _;

use super::{Row, SUCCESS_CRB_MULTIPLE};

/// Panel size and margins, px.
const PANEL_W: f64 = 400.0;
const PANEL_H: f64 = 250.0;
const GAP_X: f64 = 90.0;
const GAP_Y: f64 = 80.0;
const LEFT: f64 = 70.0;
const TOP: f64 = 124.0;
const BOTTOM: f64 = 60.0;
const RIGHT: f64 = 30.0;

/// Line colours, in method order (muted, distinguishable in print).
const PALETTE: [&str; 8] = [
    "#c0392b", "#2e86ab", "#6a994e", "#e09f3e", "#7b2cbf", "#1b998b", "#d1495b", "#3d405b",
];
/// The yardstick's colour (drawn dashed).
const YARDSTICK: &str = "#8d8d8d";
const INK: &str = "#2b2d42";
const PAPER: &str = "#fbfaf7";
const PANEL: &str = "#f1eee6";
const GRID: &str = "#d9d4c7";
const MUTED: &str = "#5c5f73";

/// Renders `rows` with `title` above; `subtitle` (e.g. the settings) below it.
pub fn render(rows: &[Row], title: &str, subtitle: &str) -> String {
    let sizes = unique_sizes(rows);
    let methods = unique_methods(rows);
    let width = LEFT + 2.0 * PANEL_W + GAP_X + RIGHT;
    let height = TOP
        + sizes.len() as f64 * PANEL_H
        + (sizes.len().saturating_sub(1)) as f64 * GAP_Y
        + BOTTOM;

    let mut svg = String::new();
    let _ = writeln!(
        svg,
        r#"<?xml version="1.0" encoding="UTF-8"?>
<svg xmlns="http://www.w3.org/2000/svg" width="{width}" height="{height}" viewBox="0 0 {width} {height}" font-family="Helvetica, Arial, sans-serif" fill="{INK}">
<rect width="100%" height="100%" fill="{PAPER}"/>
<text x="{LEFT}" y="32" font-size="20" font-weight="bold">{}</text>
<text x="{LEFT}" y="54" font-size="13" fill="{MUTED}">{}</text>"#,
        escape(title),
        escape(subtitle)
    );
    legend(&mut svg, &methods, 80.0);

    let ratio_range = log_range(rows);
    for (size_idx, &n) in sizes.iter().enumerate() {
        let y0 = TOP + size_idx as f64 * (PANEL_H + GAP_Y);
        let of_size: Vec<&Row> = rows.iter().filter(|r| r.n == n).collect();
        let success = Panel {
            x0: LEFT,
            y0,
            y_axis: Axis::Success,
        };
        let ratio = Panel {
            x0: LEFT + PANEL_W + GAP_X,
            y0,
            y_axis: Axis::LogRatio(ratio_range),
        };
        success.frame(
            &mut svg,
            &format!("N = {n} · success rate (error < {SUCCESS_CRB_MULTIPLE} CRB)"),
        );
        ratio.frame(&mut svg, &format!("N = {n} · median error / CRB"));
        for (method_idx, method) in methods.iter().enumerate() {
            let mut points: Vec<&Row> = of_size
                .iter()
                .copied()
                .filter(|r| &r.method == method)
                .collect();
            points.sort_by(|a, b| a.outlier_share.total_cmp(&b.outlier_share));
            let style = style_of(method, method_idx);
            success.series(&mut svg, &points, |r| r.success_rate, &style);
            ratio.series(&mut svg, &points, |r| r.median_error_over_crb, &style);
        }
    }
    svg.push_str("</svg>\n");
    svg
}

#[derive(Clone, Copy)]
enum Axis {
    /// 0–100 %.
    Success,
    /// log10 range (lo, hi) of error / CRB.
    LogRatio((f64, f64)),
}

struct Panel {
    x0: f64,
    y0: f64,
    y_axis: Axis,
}

struct Style {
    colour: &'static str,
    dashed: bool,
}

impl Panel {
    fn x(&self, share: f64) -> f64 {
        self.x0 + share.clamp(0.0, 1.0) * PANEL_W
    }

    fn y(&self, value: f64) -> f64 {
        let t = match self.y_axis {
            Axis::Success => value.clamp(0.0, 1.0),
            Axis::LogRatio((lo, hi)) => {
                let v = value.max(10f64.powf(lo)).log10();
                ((v - lo) / (hi - lo)).clamp(0.0, 1.0)
            }
        };
        self.y0 + PANEL_H * (1.0 - t)
    }

    /// Background, grid, ticks, axis labels and the panel title.
    fn frame(&self, svg: &mut String, title: &str) {
        let (x0, y0) = (self.x0, self.y0);
        let _ = writeln!(
            svg,
            r#"<rect x="{x0}" y="{y0}" width="{PANEL_W}" height="{PANEL_H}" fill="{PANEL}" rx="4"/>
<text x="{x0}" y="{}" font-size="14" font-weight="bold">{}</text>"#,
            y0 - 10.0,
            escape(title)
        );
        for tick in 0..=10 {
            let share = tick as f64 / 10.0;
            let x = self.x(share);
            let _ = writeln!(
                svg,
                r#"<line x1="{x:.1}" y1="{y0}" x2="{x:.1}" y2="{}" stroke="{GRID}" stroke-width="1"/>"#,
                y0 + PANEL_H
            );
            if tick % 2 == 0 {
                let _ = writeln!(
                    svg,
                    r#"<text x="{x:.1}" y="{}" font-size="11" text-anchor="middle">{}%</text>"#,
                    y0 + PANEL_H + 16.0,
                    tick * 10
                );
            }
        }
        let _ = writeln!(
            svg,
            r#"<text x="{}" y="{}" font-size="12" text-anchor="middle">outlier share</text>"#,
            x0 + PANEL_W / 2.0,
            y0 + PANEL_H + 34.0
        );
        match self.y_axis {
            Axis::Success => {
                for pct in [0, 25, 50, 75, 100] {
                    self.y_tick(svg, pct as f64 / 100.0, &format!("{pct}%"));
                }
                // The 99 % success line the targets are stated against.
                let y = self.y(0.99);
                let _ = writeln!(
                    svg,
                    r#"<line x1="{x0}" y1="{y:.1}" x2="{}" y2="{y:.1}" stroke="{INK}" stroke-width="0.8" stroke-dasharray="2 3"/>
<text x="{}" y="{:.1}" font-size="10" text-anchor="end" fill="{MUTED}">99%</text>"#,
                    x0 + PANEL_W,
                    x0 + PANEL_W - 4.0,
                    y + 12.0
                );
                self.y_label(svg, "success rate");
            }
            Axis::LogRatio((lo, hi)) => {
                for decade in (lo as i32)..=(hi as i32) {
                    let v = 10f64.powi(decade);
                    self.y_tick(svg, v, &format_decade(decade));
                }
                let y = self.y(SUCCESS_CRB_MULTIPLE);
                let _ = writeln!(
                    svg,
                    r#"<line x1="{x0}" y1="{y:.1}" x2="{}" y2="{y:.1}" stroke="{INK}" stroke-width="0.8" stroke-dasharray="2 3"/>
<text x="{}" y="{:.1}" font-size="10" text-anchor="end" fill="{MUTED}">success limit</text>"#,
                    x0 + PANEL_W,
                    x0 + PANEL_W - 4.0,
                    y - 4.0
                );
                self.y_label(svg, "median error / CRB (log)");
            }
        }
    }

    fn y_tick(&self, svg: &mut String, value: f64, label: &str) {
        let y = self.y(value);
        let _ = writeln!(
            svg,
            r#"<line x1="{}" y1="{y:.1}" x2="{}" y2="{y:.1}" stroke="{GRID}" stroke-width="1"/>
<text x="{}" y="{:.1}" font-size="11" text-anchor="end">{}</text>"#,
            self.x0,
            self.x0 + PANEL_W,
            self.x0 - 6.0,
            y + 4.0,
            escape(label)
        );
    }

    fn y_label(&self, svg: &mut String, label: &str) {
        let (x, y) = (self.x0 - 48.0, self.y0 + PANEL_H / 2.0);
        let _ = writeln!(
            svg,
            r#"<text x="{x}" y="{y}" font-size="12" text-anchor="middle" transform="rotate(-90 {x} {y})">{}</text>"#,
            escape(label)
        );
    }

    fn series(&self, svg: &mut String, rows: &[&Row], value: impl Fn(&Row) -> f64, style: &Style) {
        if rows.is_empty() {
            return;
        }
        let points: Vec<String> = rows
            .iter()
            .map(|r| format!("{:.1},{:.1}", self.x(r.outlier_share), self.y(value(r))))
            .collect();
        let dash = if style.dashed {
            r#" stroke-dasharray="6 4""#
        } else {
            ""
        };
        let _ = writeln!(
            svg,
            r#"<polyline points="{}" fill="none" stroke="{}" stroke-width="2"{dash} stroke-linejoin="round"/>"#,
            points.join(" "),
            style.colour
        );
        for p in &points {
            let (x, y) = p.split_once(',').unwrap_or(("0", "0"));
            let _ = writeln!(
                svg,
                r#"<circle cx="{x}" cy="{y}" r="3" fill="{PAPER}" stroke="{}" stroke-width="1.5"/>"#,
                style.colour
            );
        }
    }
}

fn legend(svg: &mut String, methods: &[String], y: f64) {
    let mut x = LEFT;
    for (idx, method) in methods.iter().enumerate() {
        let style = style_of(method, idx);
        let dash = if style.dashed {
            r#" stroke-dasharray="6 4""#
        } else {
            ""
        };
        let _ = writeln!(
            svg,
            r#"<line x1="{x}" y1="{y}" x2="{}" y2="{y}" stroke="{}" stroke-width="2.5"{dash}/>
<text x="{}" y="{}" font-size="12">{}</text>"#,
            x + 24.0,
            style.colour,
            x + 30.0,
            y + 4.0,
            escape(method)
        );
        x += 40.0 + 8.0 * method.chars().count() as f64 + 16.0;
    }
}

fn style_of(method: &str, idx: usize) -> Style {
    if method == super::StudyMethod::LsInliers.as_str() {
        Style {
            colour: YARDSTICK,
            dashed: true,
        }
    } else {
        Style {
            colour: PALETTE[idx % PALETTE.len()],
            dashed: false,
        }
    }
}

/// Decades spanning the ratios, at least 10⁻¹ to 10¹ so the success limit shows.
fn log_range(rows: &[Row]) -> (f64, f64) {
    let finite = rows
        .iter()
        .map(|r| r.median_error_over_crb)
        .filter(|v| v.is_finite() && *v > 0.0);
    let (min, max) = finite.fold((0.1f64, 10.0f64), |(lo, hi), v| (lo.min(v), hi.max(v)));
    (min.log10().floor().max(-6.0), max.log10().ceil().min(12.0))
}

fn format_decade(decade: i32) -> String {
    match decade {
        0 => "1".into(),
        1 => "10".into(),
        -1 => "0.1".into(),
        _ => format!("1e{decade}"),
    }
}

fn unique_sizes(rows: &[Row]) -> Vec<usize> {
    let mut sizes: Vec<usize> = Vec::new();
    for r in rows {
        if !sizes.contains(&r.n) {
            sizes.push(r.n);
        }
    }
    sizes
}

fn unique_methods(rows: &[Row]) -> Vec<String> {
    let mut methods: Vec<String> = Vec::new();
    for r in rows {
        if !methods.contains(&r.method) {
            methods.push(r.method.clone());
        }
    }
    methods
}

/// Escapes text for XML character data and attribute values.
fn escape(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for c in text.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&apos;"),
            _ => out.push(c),
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    fn row(method: &str, n: usize, share: f64, ratio: f64) -> Row {
        Row {
            method: method.into(),
            n,
            outlier_share: share,
            trials: 10,
            success_rate: 1.0 - share,
            median_error_over_crb: ratio,
            p95_error_over_crb: ratio * 2.0,
            median_error_rad: 1e-4,
            median_time_us: 10.0,
        }
    }

    #[test]
    fn escapes_markup() {
        assert_eq!(
            escape(r#"a<b & "c">'d'"#),
            "a&lt;b &amp; &quot;c&quot;&gt;&apos;d&apos;"
        );
    }

    #[test]
    fn one_panel_pair_per_size_and_a_line_per_method() {
        let rows = vec![
            row("ls", 20, 0.0, 1.0),
            row("ls", 20, 0.5, 3000.0),
            row("ls-inliers", 20, 0.0, 1.0),
            row("ls-inliers", 20, 0.5, 1.0),
            row("ls", 50, 0.0, 1.0),
            row("ls-inliers", 50, 0.0, 0.9),
        ];
        let svg = render(&rows, "t <1>", "s");
        assert_eq!(svg.matches("median error / CRB</text>").count(), 2);
        assert!(svg.contains("N = 20 ·") && svg.contains("N = 50 ·"));
        // 2 methods × 2 sizes × 2 panels.
        assert_eq!(svg.matches("<polyline").count(), 8);
        assert!(svg.contains("t &lt;1&gt;"));
        // The log axis reaches the largest ratio's decade (3000 → 1e4).
        assert!(svg.contains(">1e4</text>"));
    }

    #[test]
    fn log_range_covers_the_success_limit() {
        assert_eq!(log_range(&[row("ls", 10, 0.0, 1.0)]), (-1.0, 1.0));
        assert_eq!(log_range(&[row("ls", 10, 0.0, 0.003)]), (-3.0, 1.0));
    }
}
