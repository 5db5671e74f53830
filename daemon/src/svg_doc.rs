//! A small SVG document builder shared by the hand-written charts (the study
//! chart and the replay report): XML escaping, element writing with
//! attributes, linear/log value scales with their ticks ("nice" 1-2-5 steps,
//! log decades), panel frames, grid ticks, rotated axis labels and polylines.
//!
//! Numbers go out through [`std::fmt::Display`]: pass an `f64` for its
//! shortest form, or wrap it in [`Px`] for one decimal (sub-pixel digits are
//! noise in a chart and only grow the file).

use std::fmt::{self, Display, Write as _};

/// An attribute: its name and a value written through `Display`, escaped.
pub type Attr<'a> = (&'a str, &'a dyn Display);

/// A coordinate written with one decimal.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Px(pub f64);

impl Display for Px {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{:.1}", self.0)
    }
}

/// Escapes text for XML character data and attribute values; characters XML
/// 1.0 cannot carry at all become U+FFFD.
pub fn escape(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for c in text.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&apos;"),
            c if (c as u32) < 0x20 && !matches!(c, '\t' | '\n' | '\r') => out.push('\u{fffd}'),
            _ => out.push(c),
        }
    }
    out
}

/// An SVG document being written, one element a line.
pub struct Doc {
    out: String,
}

impl Doc {
    /// The XML declaration, the root `<svg>` (sans-serif, `ink` as the text
    /// colour, `extra` root attributes after the standard ones) and a
    /// background of `paper`.
    pub fn new(width: f64, height: f64, ink: &str, paper: &str, extra: &[Attr]) -> Self {
        let mut doc = Doc {
            out: String::from("<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n"),
        };
        let view_box = format!("0 0 {width} {height}");
        let mut root: Vec<Attr> = vec![
            ("xmlns", &"http://www.w3.org/2000/svg"),
            ("width", &width),
            ("height", &height),
            ("viewBox", &view_box),
            ("font-family", &"Helvetica, Arial, sans-serif"),
            ("fill", &ink),
        ];
        root.extend_from_slice(extra);
        doc.open_tag("svg", &root);
        doc.out.push_str(">\n");
        doc.empty(
            "rect",
            &[("width", &"100%"), ("height", &"100%"), ("fill", &paper)],
        );
        doc
    }

    fn open_tag(&mut self, name: &str, attrs: &[Attr]) {
        let _ = write!(self.out, "<{name}");
        for (key, value) in attrs {
            let _ = write!(self.out, " {key}=\"{}\"", escape(&value.to_string()));
        }
    }

    /// `<name …/>`.
    pub fn empty(&mut self, name: &str, attrs: &[Attr]) {
        self.open_tag(name, attrs);
        self.out.push_str("/>\n");
    }

    /// `<name …>text</name>`, the text escaped.
    pub fn text(&mut self, name: &str, attrs: &[Attr], text: &str) {
        self.open_tag(name, attrs);
        let _ = writeln!(self.out, ">{}</{name}>", escape(text));
    }

    /// `<name …><title>tooltip</title></name>`: an element with a tooltip.
    pub fn titled(&mut self, name: &str, attrs: &[Attr], tooltip: &str) {
        self.open_tag(name, attrs);
        let _ = writeln!(self.out, "><title>{}</title></{name}>", escape(tooltip));
    }

    /// The chart's bold 20 px title with its baseline at `y`, and a 13 px
    /// subtitle in `muted` 22 px below it.
    pub fn heading(&mut self, x: f64, y: f64, title: &str, subtitle: &str, muted: &str) {
        let bold: [Attr; 4] = [
            ("x", &x),
            ("y", &y),
            ("font-size", &20),
            ("font-weight", &"bold"),
        ];
        self.text("text", &bold, title);
        let below = y + 22.0;
        let plain: [Attr; 4] = [
            ("x", &x),
            ("y", &below),
            ("font-size", &13),
            ("fill", &muted),
        ];
        self.text("text", &plain, subtitle);
    }

    /// A label turned to read upwards, centred on `(x, y)`.
    pub fn y_label(&mut self, x: f64, y: f64, font_size: f64, label: &str) {
        let turn = format!("rotate(-90 {x} {y})");
        self.text(
            "text",
            &[
                ("x", &x),
                ("y", &y),
                ("font-size", &font_size),
                ("text-anchor", &"middle"),
                ("transform", &turn),
            ],
            label,
        );
    }

    /// A polyline through `points` (one-decimal coordinates) with `style`
    /// attributes after `points`; nothing for no points.
    pub fn polyline(&mut self, points: &[(f64, f64)], style: &[Attr]) {
        if points.is_empty() {
            return;
        }
        let points = polyline_points(points);
        let mut attrs: Vec<Attr> = vec![("points", &points)];
        attrs.extend_from_slice(style);
        self.empty("polyline", &attrs);
    }

    /// The finished document.
    pub fn finish(mut self) -> String {
        self.out.push_str("</svg>\n");
        self.out
    }
}

/// `x,y x,y …` with one decimal, the `points` of a polyline.
pub fn polyline_points(points: &[(f64, f64)]) -> String {
    let mut out = String::new();
    for (idx, (x, y)) in points.iter().enumerate() {
        if idx > 0 {
            out.push(' ');
        }
        let _ = write!(out, "{},{}", Px(*x), Px(*y));
    }
    out
}

/// A panel's rectangle, px.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Frame {
    pub x: f64,
    pub y: f64,
    pub w: f64,
    pub h: f64,
}

impl Frame {
    /// The panel's background (corners rounded by `rx`) and its bold title
    /// `title_y` px down the page (pass [`Px`] for one decimal).
    pub fn draw(
        &self,
        doc: &mut Doc,
        fill: &str,
        rx: f64,
        title: &str,
        title_y: &dyn Display,
        title_size: f64,
    ) {
        doc.empty(
            "rect",
            &[
                ("x", &self.x),
                ("y", &self.y),
                ("width", &self.w),
                ("height", &self.h),
                ("fill", &fill),
                ("rx", &rx),
            ],
        );
        doc.text(
            "text",
            &[
                ("x", &self.x),
                ("y", title_y),
                ("font-size", &title_size),
                ("font-weight", &"bold"),
            ],
            title,
        );
    }

    /// A horizontal grid line across the panel at `y` with `label` right
    /// aligned 6 px left of it. `right` and `label_x` are the line's end and
    /// the label's anchor as the chart writes them (e.g. [`Px`]).
    pub fn y_tick(
        &self,
        doc: &mut Doc,
        y: f64,
        label: &str,
        grid: &str,
        right: &dyn Display,
        label_x: &dyn Display,
    ) {
        doc.empty(
            "line",
            &[
                ("x1", &self.x),
                ("y1", &Px(y)),
                ("x2", right),
                ("y2", &Px(y)),
                ("stroke", &grid),
                ("stroke-width", &1),
            ],
        );
        doc.text(
            "text",
            &[
                ("x", label_x),
                ("y", &Px(y + 4.0)),
                ("font-size", &11),
                ("text-anchor", &"end"),
            ],
            label,
        );
    }
}

/// A value axis: where a value falls along a panel side.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Scale {
    /// `lo` to `hi`, linear.
    Linear { lo: f64, hi: f64 },
    /// log10 decades `lo..=hi`; values at or below 10^lo sit on the axis.
    Log { lo: i32, hi: i32 },
}

impl Scale {
    /// The unit interval.
    pub const UNIT: Scale = Scale::Linear { lo: 0.0, hi: 1.0 };

    /// Decades spanning the finite positive `values`, `lo` within
    /// `limits.0..limits.1` and at least one decade wide up to `limits.1`;
    /// `None` when no value is finite and positive.
    pub fn log_covering(values: impl Iterator<Item = f64>, limits: (i32, i32)) -> Option<Scale> {
        let (min, max) = values
            .filter(|v| v.is_finite() && *v > 0.0)
            .fold((f64::INFINITY, 0.0f64), |(lo, hi), v| {
                (lo.min(v), hi.max(v))
            });
        if !min.is_finite() {
            return None;
        }
        let lo = (min.log10().floor() as i32).clamp(limits.0, limits.1 - 1);
        let hi = (max.log10().ceil() as i32).clamp(lo + 1, limits.1);
        Some(Scale::Log { lo, hi })
    }

    /// Share 0..=1 of the axis at `value`; a NaN sits on the axis (0) rather
    /// than leaving the file as `NaN`.
    pub fn fraction(self, value: f64) -> f64 {
        let u = match self {
            Scale::Linear { lo, hi } => (value - lo) / (hi - lo),
            Scale::Log { lo, hi } => {
                let v = if value > 10f64.powi(lo) {
                    value.log10()
                } else {
                    lo as f64
                };
                (v - lo as f64) / (hi - lo) as f64
            }
        };
        if u.is_nan() {
            0.0
        } else {
            u.clamp(0.0, 1.0)
        }
    }

    /// Page y of `value` on a panel from `y0` down `h` px (up is larger).
    pub fn y(self, y0: f64, h: f64, value: f64) -> f64 {
        y0 + h * (1.0 - self.fraction(value))
    }

    /// Page x of `value` on a panel from `x0` across `w` px.
    pub fn x(self, x0: f64, w: f64, value: f64) -> f64 {
        x0 + w * self.fraction(value)
    }

    /// The tick values: each decade of a log scale, or multiples of a nice
    /// step giving about `n_linear` ticks on a linear one.
    pub fn ticks(self, n_linear: usize) -> Vec<f64> {
        match self {
            Scale::Log { lo, hi } => (lo..=hi).map(|d| 10f64.powi(d)).collect(),
            Scale::Linear { lo, hi } => {
                let step = nice_step(hi - lo, n_linear);
                let first = (lo / step).ceil() as i64;
                let last = (hi / step).floor() as i64;
                (first..=last).map(|k| k as f64 * step).collect()
            }
        }
    }
}

/// A tick spacing of 1, 2 or 5 × 10ᵏ giving about `n_ticks` ticks over `span`.
pub fn nice_step(span: f64, n_ticks: usize) -> f64 {
    let raw = span / n_ticks.max(1) as f64;
    let magnitude = 10f64.powf(raw.log10().floor());
    [1.0, 2.0, 5.0, 10.0]
        .into_iter()
        .map(|m| m * magnitude)
        .find(|step| *step >= raw)
        .unwrap_or(10.0 * magnitude)
}

/// Decimals that show a multiple of `step` exactly (0 for steps ≥ 1).
pub fn step_decimals(step: f64) -> usize {
    if step >= 1.0 {
        0
    } else {
        (-step.log10().floor()) as usize
    }
}

/// The label of decade `decade`: written out (`0.1`, `100`) inside `plain`,
/// `1e{decade}` outside it.
pub fn decade_label(decade: i32, plain: std::ops::RangeInclusive<i32>) -> String {
    if plain.contains(&decade) {
        format!("{}", 10f64.powi(decade))
    } else {
        format!("1e{decade}")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn escapes_markup_and_control_characters() {
        // The five predefined entities of XML 1.0 (§4.6) and a C0 control
        // character, which XML 1.0 (§2.2 Char) does not allow.
        assert_eq!(
            escape("a<b & \"c\">'d'\u{1}\tz"),
            "a&lt;b &amp; &quot;c&quot;&gt;&apos;d&apos;\u{fffd}\tz"
        );
    }

    #[test]
    fn elements_escape_their_attributes_and_text() {
        let mut doc = Doc::new(10.0, 20.0, "#000", "#fff", &[("data-n", &3)]);
        doc.empty(
            "rect",
            &[("x", &1.5), ("y", &Px(2.26)), ("data-s", &"a\"<b")],
        );
        doc.text("text", &[("x", &0)], "<&>");
        doc.titled("rect", &[("class", &"c")], "t & u");
        let svg = doc.finish();
        assert!(svg.starts_with("<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n<svg xmlns=\"http://www.w3.org/2000/svg\" width=\"10\" height=\"20\" viewBox=\"0 0 10 20\""));
        assert!(svg.contains(
            " fill=\"#000\" data-n=\"3\">\n<rect width=\"100%\" height=\"100%\" fill=\"#fff\"/>\n"
        ));
        assert!(svg.contains("<rect x=\"1.5\" y=\"2.3\" data-s=\"a&quot;&lt;b\"/>\n"));
        assert!(svg.contains("<text x=\"0\">&lt;&amp;&gt;</text>\n"));
        assert!(svg.contains("<rect class=\"c\"><title>t &amp; u</title></rect>\n"));
        assert!(svg.ends_with("</svg>\n"));
    }

    #[test]
    fn nice_steps_on_known_ranges() {
        assert_eq!(nice_step(60.0, 8), 10.0);
        assert_eq!(nice_step(1.0, 8), 0.2);
        assert_eq!(nice_step(3600.0, 8), 500.0);
        assert_eq!(nice_step(100.0, 10), 10.0);
        assert_eq!(nice_step(7.0, 5), 2.0);
        assert_eq!(step_decimals(0.2), 1);
        assert_eq!(step_decimals(0.05), 2);
        assert_eq!(step_decimals(500.0), 0);
        assert_eq!(Scale::Linear { lo: 0.0, hi: 60.0 }.ticks(8).len(), 7);
        assert_eq!(
            Scale::Linear { lo: 3.0, hi: 27.0 }.ticks(5),
            vec![5.0, 10.0, 15.0, 20.0, 25.0]
        );
    }

    #[test]
    fn log_scale_covers_values_in_decades() {
        let limits = (-3, 6);
        assert_eq!(
            Scale::log_covering([3.0, 250.0].into_iter(), limits),
            Some(Scale::Log { lo: 0, hi: 3 })
        );
        assert_eq!(
            Scale::log_covering([1e-9, 1e12].into_iter(), limits),
            Some(Scale::Log { lo: -3, hi: 6 })
        );
        // One value still gets a decade of room.
        assert_eq!(
            Scale::log_covering([100.0].into_iter(), limits),
            Some(Scale::Log { lo: 2, hi: 3 })
        );
        assert_eq!(
            Scale::log_covering([f64::NAN, -1.0].into_iter(), limits),
            None
        );
        let ticks = Scale::Log { lo: -1, hi: 2 }.ticks(8);
        assert_eq!(ticks, vec![0.1, 1.0, 10.0, 100.0]);
        assert_eq!(decade_label(-1, -2..=3), "0.1");
        assert_eq!(decade_label(3, -2..=3), "1000");
        assert_eq!(decade_label(4, -2..=3), "1e4");
    }

    #[test]
    fn coordinates_are_always_numbers() {
        assert_eq!(Scale::UNIT.y(10.0, 100.0, f64::NAN), 110.0);
        assert_eq!(Scale::UNIT.y(10.0, 100.0, 2.0), 10.0);
        assert_eq!(Scale::UNIT.x(10.0, 100.0, 0.25), 35.0);
        let log = Scale::Log { lo: 0, hi: 2 };
        assert_eq!(log.y(0.0, 100.0, -5.0), 100.0);
        assert_eq!(log.y(0.0, 100.0, f64::INFINITY), 0.0);
        assert_eq!(log.y(0.0, 100.0, 10.0), 50.0);
    }

    #[test]
    fn polyline_points_have_one_decimal() {
        assert_eq!(
            polyline_points(&[(1.0, 2.26), (3.04, 4.0)]),
            "1.0,2.3 3.0,4.0"
        );
        let mut doc = Doc::new(1.0, 1.0, "#000", "#fff", &[]);
        doc.polyline(&[], &[]);
        doc.polyline(&[(0.0, 1.0)], &[("fill", &"none")]);
        let svg = doc.finish();
        assert_eq!(svg.matches("<polyline").count(), 1);
        assert!(svg.contains("<polyline points=\"0.0,1.0\" fill=\"none\"/>"));
    }
}
