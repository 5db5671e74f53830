//! The replay report as a hand-written SVG: stacked panels on one data-time
//! axis (seconds on the bench clock).
//!
//! 1. attitude error against truth (arcsec, log scale) with its 3σ envelope,
//!    σ = √trace(cov) (the RSS of the three per-axis 1σ); without truth, the
//!    per-axis 1σ instead;
//! 2. inlier fraction of the window, with the alert level as a dashed line;
//! 3. one row per sensor, marked where that sensor had outliers in the window;
//! 4. one row per (alert kind, sensor), shaded from raised to cleared (or to
//!    the end of the data), and a status strip (ok / degraded / unobservable /
//!    insufficient) with its legend.
//!
//! Each pixel column draws the minimum and maximum of the epochs it covers, so
//! the file size grows with the plot width, not with the run length.
//! Elements tests and scripts can find: `#series-error`, `#series-envelope`,
//! `#series-sigma-x|y|z`, `#series-inlier-fraction`, `#line-inlier-level`,
//! `.outlier-mark[data-sensor]`, `.alert-span[data-kind][data-sensor]`,
//! `.status-run[data-status]`.

use std::f64::consts::PI;
use std::fmt::Write as _;

use wahbad_protocol::{Alert, Solution, SolutionStatus};

use super::decimate::{min_max, runs, Cell, Columns};
use super::spans::{alert_spans, has_outliers, sensor_names, worse, AlertSpan};
use crate::svg_doc::{decade_label, nice_step, step_decimals, Attr, Doc, Frame, Px, Scale};

const WIDTH: f64 = 960.0;
const LEFT: f64 = 150.0;
const RIGHT: f64 = 24.0;
const PLOT_W: f64 = WIDTH - LEFT - RIGHT;
const TOP: f64 = 118.0;
const ERROR_H: f64 = 220.0;
const FRACTION_H: f64 = 110.0;
const ROW_H: f64 = 16.0;
const STRIP_H: f64 = 14.0;
const GAP: f64 = 40.0;

const RAD_TO_ARCSEC: f64 = 180.0 / PI * 3600.0;
/// Log-axis limits, arcsec: a milliarcsecond floor; 10⁶″ exceeds half a turn.
const LOG_FLOOR: i32 = -3;
const LOG_CEIL: i32 = 6;

const INK: &str = "#22262e";
const PAPER: &str = "#fcfbf8";
const PANEL: &str = "#f0efe9";
const GRID: &str = "#d8d6cc";
const MUTED: &str = "#60646f";
const ERROR_INK: &str = "#1d4e89";
const ENVELOPE_FILL: &str = "#9cc3e4";
const AXIS_INK: [&str; 3] = ["#b5403a", "#3d8b4f", "#1d4e89"];
const FRACTION_INK: &str = "#5b3f8c";
const LEVEL_INK: &str = "#c0641f";
const OUTLIER_INK: &str = "#b5403a";
const ALERT_FILL: &str = "#e8a33d";

/// Renders the replay report. `error_rad` holds one attitude error (radians)
/// per solution, NaN where the log had no truth at that epoch, or is `None`
/// when it had no truth at all; entries beyond `solutions` are ignored and
/// missing ones count as NaN. `inlier_level` is the configured alert level of
/// the inlier fraction.
pub fn render(
    solutions: &[Solution],
    alerts: &[Alert],
    error_rad: Option<&[f64]>,
    inlier_level: f64,
    title: &str,
) -> String {
    let times: Vec<f64> = solutions.iter().map(|s| s.t as f64 * 1e-9).collect();
    let (t0, t1) = match (times.first(), times.last()) {
        (Some(&first), Some(&last)) => (first.min(last), first.max(last)),
        _ => (0.0, 1.0),
    };
    let cols = Columns::new(t0, t1, PLOT_W as usize);
    let sensors = sensor_names(solutions);
    let spans = alert_spans(alerts, t0, cols.t0() + cols.span());
    let alert_rows = alert_rows(&spans);

    let layout = Layout::new(sensors.len().max(1), alert_rows.len().max(1));
    let plot = Plot { cols };
    let n_epochs = solutions.len();
    let mut doc = Doc::new(
        WIDTH,
        layout.height,
        INK,
        PAPER,
        &[("data-epochs", &n_epochs)],
    );
    doc.heading(
        24.0,
        34.0,
        title,
        &subtitle(solutions, alerts, &spans, t0, t1, error_rad.is_some()),
        MUTED,
    );
    status_legend(&mut doc, layout.legend_y);

    let error_arcsec: Option<Vec<f64>> = error_rad.map(|errors| {
        (0..solutions.len())
            .map(|idx| errors.get(idx).copied().unwrap_or(f64::NAN) * RAD_TO_ARCSEC)
            .collect()
    });
    error_panel(
        &mut doc,
        &plot,
        &layout,
        solutions,
        &times,
        error_arcsec.as_deref(),
    );
    fraction_panel(&mut doc, &plot, &layout, solutions, &times, inlier_level);
    for y0 in [layout.error_y, layout.fraction_y] {
        alert_shades(
            &mut doc,
            &plot,
            &spans,
            y0,
            if y0 == layout.error_y {
                ERROR_H
            } else {
                FRACTION_H
            },
        );
    }
    let covers = epoch_covers(&plot.cols, &times);
    outlier_panel(&mut doc, &plot, &layout, solutions, &covers, &sensors);
    alert_panel(&mut doc, &plot, &layout, &spans, &alert_rows);
    status_strip(&mut doc, &plot, &layout, solutions, &covers);
    time_axis(&mut doc, &plot, &layout);
    caption(&mut doc, &layout, error_rad.is_some());
    doc.finish()
}

/// Vertical positions of the panels.
struct Layout {
    error_y: f64,
    fraction_y: f64,
    outlier_y: f64,
    outlier_h: f64,
    alert_y: f64,
    alert_h: f64,
    strip_y: f64,
    axis_y: f64,
    legend_y: f64,
    caption_y: f64,
    height: f64,
}

impl Layout {
    fn new(n_sensor_rows: usize, n_alert_rows: usize) -> Self {
        let error_y = TOP;
        let fraction_y = error_y + ERROR_H + GAP;
        let outlier_y = fraction_y + FRACTION_H + GAP;
        let outlier_h = n_sensor_rows as f64 * ROW_H;
        let alert_y = outlier_y + outlier_h + GAP;
        let alert_h = n_alert_rows as f64 * ROW_H;
        let strip_y = alert_y + alert_h + 12.0;
        let axis_y = strip_y + STRIP_H;
        let caption_y = axis_y + 50.0;
        Layout {
            error_y,
            fraction_y,
            outlier_y,
            outlier_h,
            alert_y,
            alert_h,
            strip_y,
            axis_y,
            legend_y: 74.0,
            caption_y,
            height: caption_y + 52.0,
        }
    }
}

/// Horizontal mapping of data time.
struct Plot {
    cols: Columns,
}

impl Plot {
    fn x_of_time(&self, t_s: f64) -> f64 {
        let u = ((t_s - self.cols.t0()) / self.cols.span()).clamp(0.0, 1.0);
        LEFT + u * PLOT_W
    }

    fn x_of_col(&self, col: usize) -> f64 {
        LEFT + (col as f64 + 0.5) * PLOT_W / self.cols.n_cols() as f64
    }

    fn col_width(&self) -> f64 {
        PLOT_W / self.cols.n_cols() as f64
    }
}

fn subtitle(
    solutions: &[Solution],
    alerts: &[Alert],
    spans: &[AlertSpan],
    t0: f64,
    t1: f64,
    has_truth: bool,
) -> String {
    if solutions.is_empty() {
        return "no solutions in this run".into();
    }
    let raised = alerts
        .iter()
        .filter(|a| a.state == wahbad_protocol::AlertState::Raised)
        .count();
    format!(
        "{} epochs · data time {t0:.1}–{t1:.1} s · {raised} alert(s) raised, {} span(s) · truth {}",
        solutions.len(),
        spans.len(),
        if has_truth { "present" } else { "absent" }
    )
}

/// The plot-wide panel from `y0` down `h` px.
fn frame(y0: f64, h: f64) -> Frame {
    Frame {
        x: LEFT,
        y: y0,
        w: PLOT_W,
        h,
    }
}

fn panel_frame(doc: &mut Doc, y0: f64, h: f64, title: &str) {
    frame(y0, h).draw(doc, PANEL, 3.0, title, &Px(y0 - 8.0), 13.0);
}

fn y_tick(doc: &mut Doc, y: f64, label: &str) {
    // Any height: a tick only needs the panel's left edge and width.
    frame(y, 0.0).y_tick(doc, y, label, GRID, &Px(LEFT + PLOT_W), &Px(LEFT - 6.0));
}

/// Status of an epoch whose estimate is meaningful (and whose cov is finite).
fn is_estimate(status: SolutionStatus) -> bool {
    matches!(status, SolutionStatus::Ok | SolutionStatus::Degraded)
}

fn error_panel(
    doc: &mut Doc,
    plot: &Plot,
    layout: &Layout,
    solutions: &[Solution],
    times: &[f64],
    error_arcsec: Option<&[f64]>,
) {
    let y0 = layout.error_y;
    let sigma = |s: &Solution, diag: usize| -> f64 {
        if is_estimate(s.status) {
            s.cov[diag].sqrt() * RAD_TO_ARCSEC
        } else {
            f64::NAN
        }
    };
    // (id, colour, values, is_band)
    let mut series: Vec<(&str, &str, Vec<f64>, bool)> = Vec::new();
    match error_arcsec {
        Some(errors) => {
            let envelope: Vec<f64> = solutions
                .iter()
                .map(|s| {
                    let trace = s.cov[0] + s.cov[4] + s.cov[8];
                    if is_estimate(s.status) {
                        3.0 * trace.sqrt() * RAD_TO_ARCSEC
                    } else {
                        f64::NAN
                    }
                })
                .collect();
            series.push(("series-envelope", ENVELOPE_FILL, envelope, true));
            series.push(("series-error", ERROR_INK, errors.to_vec(), false));
        }
        None => {
            for (axis_idx, name) in ["x", "y", "z"].iter().enumerate() {
                let values: Vec<f64> = solutions.iter().map(|s| sigma(s, axis_idx * 4)).collect();
                let id = match *name {
                    "x" => "series-sigma-x",
                    "y" => "series-sigma-y",
                    _ => "series-sigma-z",
                };
                series.push((id, AXIS_INK[axis_idx], values, false));
            }
        }
    }
    let scale = log_scale(series.iter().flat_map(|(_, _, v, _)| v.iter().copied()));
    let title = if error_arcsec.is_some() {
        "attitude error against truth (arcsec, log) · shaded: 3σ envelope"
    } else {
        "1σ per body axis from the covariance (arcsec, log) · no truth in this log"
    };
    panel_frame(doc, y0, ERROR_H, title);
    if let Scale::Log { lo, hi } = scale {
        for decade in lo..=hi {
            y_tick(
                doc,
                scale.y(y0, ERROR_H, 10f64.powi(decade)),
                &decade_label(decade, -2..=3),
            );
        }
    }
    doc.y_label(LEFT - 52.0, y0 + ERROR_H / 2.0, 12.0, "arcsec");
    for (id, colour, values, is_band) in &series {
        let cells = min_max(&plot.cols, times, values);
        if *is_band {
            let d = band_path(plot, &cells, |v| scale.y(y0, ERROR_H, v), y0 + ERROR_H);
            series_path(
                doc,
                id,
                &d,
                &[
                    ("fill", colour),
                    ("fill-opacity", &0.55),
                    ("stroke", &"none"),
                ],
            );
        } else {
            let d = line_path(plot, &cells, |v| scale.y(y0, ERROR_H, v));
            series_line(doc, id, &d, colour);
        }
    }
    if error_arcsec.is_none() {
        let mut x = LEFT + PLOT_W - 150.0;
        for (axis_idx, name) in ["x", "y", "z"].iter().enumerate() {
            let y = Px(y0 + 14.0);
            doc.empty(
                "line",
                &[
                    ("x1", &x),
                    ("y1", &y),
                    ("x2", &Px(x + 16.0)),
                    ("y2", &y),
                    ("stroke", &AXIS_INK[axis_idx]),
                    ("stroke-width", &2),
                ],
            );
            doc.text(
                "text",
                &[
                    ("x", &Px(x + 20.0)),
                    ("y", &Px(y0 + 18.0)),
                    ("font-size", &11),
                ],
                &format!("σ{name}"),
            );
            x += 48.0;
        }
    }
}

/// `<path id=… class="series" d=…>` with `style` after the path data.
fn series_path(doc: &mut Doc, id: &str, d: &str, style: &[Attr]) {
    let mut attrs: Vec<Attr> = vec![("id", &id), ("class", &"series"), ("d", &d)];
    attrs.extend_from_slice(style);
    doc.empty("path", &attrs);
}

/// A series drawn as a line of `colour`.
fn series_line(doc: &mut Doc, id: &str, d: &str, colour: &str) {
    series_path(
        doc,
        id,
        d,
        &[
            ("fill", &"none"),
            ("stroke", &colour),
            ("stroke-width", &1.3),
            ("stroke-linejoin", &"round"),
        ],
    );
}

/// Decades spanning the finite positive values, within the axis limits
/// (1 to 100″ when there is none).
fn log_scale(values: impl Iterator<Item = f64>) -> Scale {
    Scale::log_covering(values, (LOG_FLOOR, LOG_CEIL)).unwrap_or(Scale::Log { lo: 0, hi: 2 })
}

/// A polyline through each column's min and max, broken at gaps.
fn line_path(plot: &Plot, cells: &[Cell], y_of: impl Fn(f64) -> f64) -> String {
    let mut d = String::new();
    let mut pen_down = false;
    for (col, cell) in cells.iter().enumerate() {
        match *cell {
            Cell::Empty => {}
            Cell::Gap => pen_down = false,
            Cell::Range { lo, hi } => {
                let x = plot.x_of_col(col);
                let cmd = if pen_down { 'L' } else { 'M' };
                let _ = write!(d, "{cmd}{x:.1},{:.1}", y_of(lo));
                if hi != lo {
                    let _ = write!(d, "L{x:.1},{:.1}", y_of(hi));
                } else if !pen_down {
                    // A lone point still shows as a short tick.
                    let _ = write!(d, "h0.8");
                }
                pen_down = true;
            }
        }
    }
    d
}

/// Closed areas from `base_y` up to each column's maximum, one per gap-free run.
fn band_path(plot: &Plot, cells: &[Cell], y_of: impl Fn(f64) -> f64, base_y: f64) -> String {
    let mut d = String::new();
    let mut run: Vec<(f64, f64)> = Vec::new();
    let half = plot.col_width() / 2.0;
    let flush = |run: &mut Vec<(f64, f64)>, d: &mut String| {
        if let (Some(&(x_first, _)), Some(&(x_last, _))) = (run.first(), run.last()) {
            let _ = write!(d, "M{:.1},{base_y:.1}", x_first - half);
            for (x, y) in run.iter() {
                let _ = write!(d, "L{x:.1},{y:.1}");
            }
            let _ = write!(
                d,
                "L{:.1},{:.1}L{:.1},{base_y:.1}Z",
                x_last + half,
                run[run.len() - 1].1,
                x_last + half
            );
        }
        run.clear();
    };
    for (col, cell) in cells.iter().enumerate() {
        match *cell {
            Cell::Empty => {}
            Cell::Gap => flush(&mut run, &mut d),
            Cell::Range { hi, .. } => run.push((plot.x_of_col(col), y_of(hi))),
        }
    }
    flush(&mut run, &mut d);
    d
}

fn fraction_panel(
    doc: &mut Doc,
    plot: &Plot,
    layout: &Layout,
    solutions: &[Solution],
    times: &[f64],
    inlier_level: f64,
) {
    let y0 = layout.fraction_y;
    let scale = Scale::UNIT;
    panel_frame(
        doc,
        y0,
        FRACTION_H,
        "inlier fraction of the window · dashed: alert level",
    );
    for tick in [0.0, 0.25, 0.5, 0.75, 1.0] {
        y_tick(doc, scale.y(y0, FRACTION_H, tick), &format!("{tick}"));
    }
    let values: Vec<f64> = solutions.iter().map(|s| s.inlier_fraction).collect();
    let cells = min_max(&plot.cols, times, &values);
    let d = line_path(plot, &cells, |v| scale.y(y0, FRACTION_H, v));
    series_line(doc, "series-inlier-fraction", &d, FRACTION_INK);
    let level_y = Px(scale.y(y0, FRACTION_H, inlier_level));
    doc.empty(
        "line",
        &[
            ("id", &"line-inlier-level"),
            ("data-level", &inlier_level),
            ("x1", &LEFT),
            ("y1", &level_y),
            ("x2", &Px(LEFT + PLOT_W)),
            ("y2", &level_y),
            ("stroke", &LEVEL_INK),
            ("stroke-width", &1.2),
            ("stroke-dasharray", &"5 4"),
        ],
    );
    doc.text(
        "text",
        &[
            ("x", &Px(LEFT + PLOT_W - 4.0)),
            ("y", &Px(level_y.0 - 4.0)),
            ("font-size", &10),
            ("text-anchor", &"end"),
            ("fill", &LEVEL_INK),
        ],
        &format!("alert level {inlier_level:.2}"),
    );
}

fn outlier_panel(
    doc: &mut Doc,
    plot: &Plot,
    layout: &Layout,
    solutions: &[Solution],
    covers: &[(usize, usize)],
    sensors: &[String],
) {
    let y0 = layout.outlier_y;
    panel_frame(
        doc,
        y0,
        layout.outlier_h,
        "epochs with outliers, per sensor",
    );
    if sensors.is_empty() {
        row_label(doc, y0, "no sensors");
        return;
    }
    for (row_idx, sensor) in sensors.iter().enumerate() {
        let row_y = y0 + row_idx as f64 * ROW_H;
        let mut flags = vec![false; plot.cols.n_cols()];
        let mut n_epochs = 0usize;
        for (solution, &(first, last)) in solutions.iter().zip(covers) {
            if has_outliers(solution, sensor) {
                flags[first..=last].iter_mut().for_each(|f| *f = true);
                n_epochs += 1;
            }
        }
        row_label(doc, row_y, &format!("{sensor} ({n_epochs})"));
        for (first, count) in runs(&flags) {
            doc.empty(
                "rect",
                &[
                    ("class", &"outlier-mark"),
                    ("data-sensor", sensor),
                    ("x", &Px(LEFT + first as f64 * plot.col_width())),
                    ("y", &Px(row_y + 3.0)),
                    ("width", &Px((count as f64 * plot.col_width()).max(1.0))),
                    ("height", &Px(ROW_H - 6.0)),
                    ("fill", &OUTLIER_INK),
                ],
            );
        }
    }
}

fn row_label(doc: &mut Doc, row_y: f64, label: &str) {
    end_label(doc, row_y + ROW_H - 4.0, label);
}

/// A label right-aligned just left of the plot, its baseline at `y`.
fn end_label(doc: &mut Doc, y: f64, label: &str) {
    doc.text(
        "text",
        &[
            ("x", &Px(LEFT - 6.0)),
            ("y", &Px(y)),
            ("font-size", &11),
            ("text-anchor", &"end"),
        ],
        label,
    );
}

/// The columns `(first, last)` each epoch stands for: from its own column to
/// the one before the next epoch's, so runs of epochs draw as unbroken bars
/// at any zoom; across a gap longer than twice the median epoch spacing (a
/// dropout) an epoch covers only its own column.
fn epoch_covers(cols: &Columns, times: &[f64]) -> Vec<(usize, usize)> {
    let mut steps: Vec<f64> = times.windows(2).map(|w| w[1] - w[0]).collect();
    steps.sort_by(f64::total_cmp);
    let median_step = steps.get(steps.len() / 2).copied().unwrap_or(0.0);
    (0..times.len())
        .map(|idx| {
            let first = cols.index(times[idx]);
            let last = match times.get(idx + 1) {
                Some(&next) if next - times[idx] <= 2.0 * median_step => {
                    cols.index(next).saturating_sub(1).max(first)
                }
                _ => first,
            };
            (first, last)
        })
        .collect()
}

/// Distinct (kind, sensor) pairs of the spans, in order.
fn alert_rows(spans: &[AlertSpan]) -> Vec<(String, Option<String>)> {
    let mut rows: Vec<(String, Option<String>)> = Vec::new();
    for span in spans {
        let key = (span.kind.clone(), span.sensor.clone());
        if !rows.contains(&key) {
            rows.push(key);
        }
    }
    rows
}

fn alert_panel(
    doc: &mut Doc,
    plot: &Plot,
    layout: &Layout,
    spans: &[AlertSpan],
    rows: &[(String, Option<String>)],
) {
    let y0 = layout.alert_y;
    panel_frame(doc, y0, layout.alert_h, "alerts, raised → cleared");
    if rows.is_empty() {
        row_label(doc, y0, "none raised");
        return;
    }
    for (row_idx, (kind, sensor)) in rows.iter().enumerate() {
        let row_y = y0 + row_idx as f64 * ROW_H;
        let label = match sensor {
            Some(sensor) => format!("{kind} · {sensor}"),
            None => kind.clone(),
        };
        row_label(doc, row_y, &label);
        for span in spans
            .iter()
            .filter(|s| &s.kind == kind && &s.sensor == sensor)
        {
            let x = plot.x_of_time(span.start_s);
            let w = (plot.x_of_time(span.end_s) - x).max(1.5);
            let until = if span.open {
                "end of data (still raised)".to_string()
            } else {
                format!("{:.3} s", span.end_s)
            };
            let from = if span.raised_before_start {
                "before the log".to_string()
            } else {
                format!("{:.3} s", span.start_s)
            };
            let mut attrs: Vec<Attr> = vec![("class", &"alert-span"), ("data-kind", kind)];
            if let Some(sensor) = &span.sensor {
                attrs.push(("data-sensor", sensor));
            }
            let (x, y, w, h) = (Px(x), Px(row_y + 2.0), Px(w), Px(ROW_H - 4.0));
            attrs.extend_from_slice(&[
                ("data-open", &span.open),
                ("x", &x),
                ("y", &y),
                ("width", &w),
                ("height", &h),
                ("fill", &ALERT_FILL),
                ("rx", &2),
            ]);
            doc.titled("rect", &attrs, &format!("{label} from {from} to {until}"));
        }
    }
}

/// Faint bands over a panel where any alert is raised.
fn alert_shades(doc: &mut Doc, plot: &Plot, spans: &[AlertSpan], y0: f64, h: f64) {
    for span in spans {
        let x = plot.x_of_time(span.start_s);
        let w = (plot.x_of_time(span.end_s) - x).max(1.0);
        doc.empty(
            "rect",
            &[
                ("class", &"alert-shade"),
                ("x", &Px(x)),
                ("y", &Px(y0)),
                ("width", &Px(w)),
                ("height", &Px(h)),
                ("fill", &ALERT_FILL),
                ("fill-opacity", &0.12),
            ],
        );
    }
}

fn status_colour(status: SolutionStatus) -> &'static str {
    match status {
        SolutionStatus::Ok => "#6fae7a",
        SolutionStatus::Degraded => "#e8c13d",
        SolutionStatus::Unobservable => "#d8743a",
        SolutionStatus::Insufficient => "#8b8f99",
    }
}

const STATUSES: [SolutionStatus; 4] = [
    SolutionStatus::Ok,
    SolutionStatus::Degraded,
    SolutionStatus::Unobservable,
    SolutionStatus::Insufficient,
];

fn status_strip(
    doc: &mut Doc,
    plot: &Plot,
    layout: &Layout,
    solutions: &[Solution],
    covers: &[(usize, usize)],
) {
    let y0 = layout.strip_y;
    let mut cells: Vec<Option<SolutionStatus>> = vec![None; plot.cols.n_cols()];
    for (solution, &(first, last)) in solutions.iter().zip(covers) {
        for cell in &mut cells[first..=last] {
            *cell = Some(cell.map_or(solution.status, |s| worse(s, solution.status)));
        }
    }
    end_label(doc, y0 + STRIP_H - 3.0, "status");
    for status in STATUSES {
        let flags: Vec<bool> = cells.iter().map(|c| *c == Some(status)).collect();
        for (first, count) in runs(&flags) {
            doc.empty(
                "rect",
                &[
                    ("class", &"status-run"),
                    ("data-status", &status.as_str()),
                    ("x", &Px(LEFT + first as f64 * plot.col_width())),
                    ("y", &Px(y0)),
                    ("width", &Px(count as f64 * plot.col_width())),
                    ("height", &STRIP_H),
                    ("fill", &status_colour(status)),
                ],
            );
        }
    }
}

fn status_legend(doc: &mut Doc, y: f64) {
    let mut x = 24.0;
    for status in STATUSES {
        legend_swatch(doc, x, y, Some("legend-status"), status_colour(status));
        doc.text(
            "text",
            &[("x", &(x + 16.0)), ("y", &y), ("font-size", &11)],
            status.as_str(),
        );
        x += 24.0 + 7.0 * status.as_str().len() as f64;
    }
    legend_swatch(doc, x, y, None, ALERT_FILL);
    doc.text(
        "text",
        &[("x", &(x + 16.0)), ("y", &y), ("font-size", &11)],
        "alert raised",
    );
    legend_swatch(doc, x + 110.0, y, None, OUTLIER_INK);
    doc.text(
        "text",
        &[("x", &(x + 126.0)), ("y", &y), ("font-size", &11)],
        "outliers in window",
    );
}

/// A 12 × 10 px colour swatch at `x` sitting on baseline `y`.
fn legend_swatch(doc: &mut Doc, x: f64, y: f64, class: Option<&str>, fill: &str) {
    let mut attrs: Vec<Attr> = Vec::new();
    if let Some(class) = &class {
        attrs.push(("class", class));
    }
    let top = Px(y - 9.0);
    attrs.extend_from_slice(&[
        ("x", &x),
        ("y", &top),
        ("width", &12),
        ("height", &10),
        ("fill", &fill),
    ]);
    doc.empty("rect", &attrs);
}

fn time_axis(doc: &mut Doc, plot: &Plot, layout: &Layout) {
    let (t0, span) = (plot.cols.t0(), plot.cols.span());
    let step = nice_step(span, 8);
    let first = (t0 / step).ceil() as i64;
    let last = ((t0 + span) / step).floor() as i64;
    let decimals = step_decimals(step);
    for k in first..=last {
        let t = k as f64 * step;
        let x = Px(plot.x_of_time(t));
        doc.empty(
            "line",
            &[
                ("x1", &x),
                ("y1", &Px(layout.error_y)),
                ("x2", &x),
                ("y2", &Px(layout.axis_y)),
                ("stroke", &GRID),
                ("stroke-width", &0.8),
                ("stroke-dasharray", &"1 3"),
            ],
        );
        doc.text(
            "text",
            &[
                ("x", &x),
                ("y", &Px(layout.axis_y + 14.0)),
                ("font-size", &11),
                ("text-anchor", &"middle"),
            ],
            &format!("{t:.decimals$}"),
        );
    }
    doc.text(
        "text",
        &[
            ("x", &Px(LEFT + PLOT_W / 2.0)),
            ("y", &Px(layout.axis_y + 32.0)),
            ("font-size", &12),
            ("text-anchor", &"middle"),
        ],
        "data time (s, bench clock)",
    );
}

fn caption(doc: &mut Doc, layout: &Layout, has_truth: bool) {
    let lines: &[&str] = if has_truth {
        &[
            "Error: rotation angle between the estimate and truth. Envelope: 3σ with σ = √trace(cov),",
            "the RSS of the per-axis 1σ; the error is an angle (≥ 0), so the envelope is one-sided.",
        ]
    } else {
        &["No truth in this log: the top panel shows the 1σ of each body axis, √cov[i][i]."]
    };
    let last = "Each pixel column shows the min and max of the epochs it covers; \
                unobservable and insufficient epochs carry no σ.";
    for (idx, line) in lines.iter().chain([&last]).enumerate() {
        doc.text(
            "text",
            &[
                ("class", &"caption"),
                ("x", &24),
                ("y", &Px(layout.caption_y + idx as f64 * 15.0)),
                ("font-size", &11),
                ("fill", &MUTED),
            ],
            line,
        );
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn log_scale_covers_values_within_limits() {
        assert!(matches!(
            log_scale([3.0, 250.0].into_iter()),
            Scale::Log { lo: 0, hi: 3 }
        ));
        assert!(matches!(
            log_scale([1e-9, 1e12].into_iter()),
            Scale::Log { lo: -3, hi: 6 }
        ));
        assert!(matches!(
            log_scale([f64::NAN].into_iter()),
            Scale::Log { lo: 0, hi: 2 }
        ));
        // One value still gets a decade of room.
        assert!(matches!(
            log_scale([100.0].into_iter()),
            Scale::Log { lo: 2, hi: 3 }
        ));
    }
}
