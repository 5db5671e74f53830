//! The result table as an SVG chart: for each pair count, a panel of success
//! rate and a panel of median error over CRB (log scale), both against the
//! outlier share, one line per method.

use super::{Row, SUCCESS_CRB_MULTIPLE};
use crate::svg_doc::{decade_label, Attr, Doc, Frame, Px, Scale};

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
/// Log-axis limits of error / CRB, decades.
const LOG_LIMITS: (i32, i32) = (-6, 12);

/// Renders `rows` with `title` above; `subtitle` (e.g. the settings) below it.
pub fn render(rows: &[Row], title: &str, subtitle: &str) -> String {
    let sizes = unique_sizes(rows);
    let methods = unique_methods(rows);
    let width = LEFT + 2.0 * PANEL_W + GAP_X + RIGHT;
    let height = TOP
        + sizes.len() as f64 * PANEL_H
        + (sizes.len().saturating_sub(1)) as f64 * GAP_Y
        + BOTTOM;

    let mut doc = Doc::new(width, height, INK, PAPER, &[]);
    doc.heading(LEFT, 32.0, title, subtitle, MUTED);
    legend(&mut doc, &methods, 80.0);

    let ratio_scale = log_range(rows);
    for (size_idx, &n) in sizes.iter().enumerate() {
        let y0 = TOP + size_idx as f64 * (PANEL_H + GAP_Y);
        let of_size: Vec<&Row> = rows.iter().filter(|r| r.n == n).collect();
        let success = Panel::new(LEFT, y0, Scale::UNIT);
        let ratio = Panel::new(LEFT + PANEL_W + GAP_X, y0, ratio_scale);
        success.frame(
            &mut doc,
            &format!("N = {n} · success rate (error < {SUCCESS_CRB_MULTIPLE} CRB)"),
        );
        ratio.frame(&mut doc, &format!("N = {n} · median error / CRB"));
        for (method_idx, method) in methods.iter().enumerate() {
            let mut points: Vec<&Row> = of_size
                .iter()
                .copied()
                .filter(|r| &r.method == method)
                .collect();
            points.sort_by(|a, b| a.outlier_share.total_cmp(&b.outlier_share));
            let style = style_of(method, method_idx);
            success.series(&mut doc, &points, |r| r.success_rate, &style);
            ratio.series(&mut doc, &points, |r| r.median_error_over_crb, &style);
        }
    }
    doc.finish()
}

/// One panel: outlier share across, `scale` up (0–100 % success, or log10
/// decades of error / CRB).
struct Panel {
    frame: Frame,
    scale: Scale,
}

struct Style {
    colour: &'static str,
    dashed: bool,
}

impl Style {
    fn dash(&self) -> Option<Attr<'static>> {
        self.dashed.then_some(("stroke-dasharray", &"6 4"))
    }
}

impl Panel {
    fn new(x0: f64, y0: f64, scale: Scale) -> Self {
        Panel {
            frame: Frame {
                x: x0,
                y: y0,
                w: PANEL_W,
                h: PANEL_H,
            },
            scale,
        }
    }

    fn x(&self, share: f64) -> f64 {
        Scale::UNIT.x(self.frame.x, PANEL_W, share)
    }

    fn y(&self, value: f64) -> f64 {
        self.scale.y(self.frame.y, PANEL_H, value)
    }

    /// Background, grid, ticks, axis labels and the panel title.
    fn frame(&self, doc: &mut Doc, title: &str) {
        let (x0, y0) = (self.frame.x, self.frame.y);
        self.frame.draw(doc, PANEL, 4.0, title, &(y0 - 10.0), 14.0);
        for tick in 0..=10 {
            let x = Px(self.x(tick as f64 / 10.0));
            doc.empty(
                "line",
                &[
                    ("x1", &x),
                    ("y1", &y0),
                    ("x2", &x),
                    ("y2", &(y0 + PANEL_H)),
                    ("stroke", &GRID),
                    ("stroke-width", &1),
                ],
            );
            if tick % 2 == 0 {
                doc.text(
                    "text",
                    &[
                        ("x", &x),
                        ("y", &(y0 + PANEL_H + 16.0)),
                        ("font-size", &11),
                        ("text-anchor", &"middle"),
                    ],
                    &format!("{}%", tick * 10),
                );
            }
        }
        doc.text(
            "text",
            &[
                ("x", &(x0 + PANEL_W / 2.0)),
                ("y", &(y0 + PANEL_H + 34.0)),
                ("font-size", &12),
                ("text-anchor", &"middle"),
            ],
            "outlier share",
        );
        match self.scale {
            Scale::Linear { .. } => {
                for pct in [0, 25, 50, 75, 100] {
                    self.y_tick(doc, pct as f64 / 100.0, &format!("{pct}%"));
                }
                // The 99 % success line the targets are stated against.
                self.reference_line(doc, self.y(0.99), "99%", 12.0);
                doc.y_label(x0 - 48.0, y0 + PANEL_H / 2.0, 12.0, "success rate");
            }
            Scale::Log { lo, hi } => {
                for decade in lo..=hi {
                    self.y_tick(doc, 10f64.powi(decade), &decade_label(decade, -1..=1));
                }
                let y = self.y(SUCCESS_CRB_MULTIPLE);
                self.reference_line(doc, y, "success limit", -4.0);
                doc.y_label(
                    x0 - 48.0,
                    y0 + PANEL_H / 2.0,
                    12.0,
                    "median error / CRB (log)",
                );
            }
        }
    }

    fn y_tick(&self, doc: &mut Doc, value: f64, label: &str) {
        let x0 = self.frame.x;
        self.frame.y_tick(
            doc,
            self.y(value),
            label,
            GRID,
            &(x0 + PANEL_W),
            &(x0 - 6.0),
        );
    }

    /// A dotted line across the panel at `y`, labelled at its right end
    /// `label_dy` px below it.
    fn reference_line(&self, doc: &mut Doc, y: f64, label: &str, label_dy: f64) {
        let x0 = self.frame.x;
        doc.empty(
            "line",
            &[
                ("x1", &x0),
                ("y1", &Px(y)),
                ("x2", &(x0 + PANEL_W)),
                ("y2", &Px(y)),
                ("stroke", &INK),
                ("stroke-width", &0.8),
                ("stroke-dasharray", &"2 3"),
            ],
        );
        doc.text(
            "text",
            &[
                ("x", &(x0 + PANEL_W - 4.0)),
                ("y", &Px(y + label_dy)),
                ("font-size", &10),
                ("text-anchor", &"end"),
                ("fill", &MUTED),
            ],
            label,
        );
    }

    fn series(&self, doc: &mut Doc, rows: &[&Row], value: impl Fn(&Row) -> f64, style: &Style) {
        let points: Vec<(f64, f64)> = rows
            .iter()
            .map(|r| (self.x(r.outlier_share), self.y(value(r))))
            .collect();
        let mut line: Vec<Attr> = vec![
            ("fill", &"none"),
            ("stroke", &style.colour),
            ("stroke-width", &2),
        ];
        line.extend(style.dash());
        line.push(("stroke-linejoin", &"round"));
        doc.polyline(&points, &line);
        for (x, y) in points {
            doc.empty(
                "circle",
                &[
                    ("cx", &Px(x)),
                    ("cy", &Px(y)),
                    ("r", &3),
                    ("fill", &PAPER),
                    ("stroke", &style.colour),
                    ("stroke-width", &1.5),
                ],
            );
        }
    }
}

fn legend(doc: &mut Doc, methods: &[String], y: f64) {
    let mut x = LEFT;
    for (idx, method) in methods.iter().enumerate() {
        let style = style_of(method, idx);
        let x2 = x + 24.0;
        let mut line: Vec<Attr> = vec![
            ("x1", &x),
            ("y1", &y),
            ("x2", &x2),
            ("y2", &y),
            ("stroke", &style.colour),
            ("stroke-width", &2.5),
        ];
        line.extend(style.dash());
        doc.empty("line", &line);
        doc.text(
            "text",
            &[("x", &(x + 30.0)), ("y", &(y + 4.0)), ("font-size", &12)],
            method,
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
fn log_range(rows: &[Row]) -> Scale {
    let ratios = rows.iter().map(|r| r.median_error_over_crb);
    Scale::log_covering(ratios.chain([0.1, 10.0]), LOG_LIMITS)
        .unwrap_or(Scale::Log { lo: -1, hi: 1 })
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
        assert_eq!(
            log_range(&[row("ls", 10, 0.0, 1.0)]),
            Scale::Log { lo: -1, hi: 1 }
        );
        assert_eq!(
            log_range(&[row("ls", 10, 0.0, 0.003)]),
            Scale::Log { lo: -3, hi: 1 }
        );
    }
}
