//! The SVG replay report parsed back as XML (quick-xml): well formed, and
//! holding the series, marks and spans the synthetic input calls for.

use std::collections::HashMap;

use quick_xml::escape::resolve_predefined_entity;
use quick_xml::events::Event;
use quick_xml::{Reader, XmlVersion};
use wahbad::report::svg::render;
use wahbad_protocol::{Alert, AlertState, ObsVerdict, SensorCount, Solution, SolutionStatus};

const NS: i64 = 1_000_000_000;

/// One element of the parsed document: tag, attributes, text directly inside.
#[derive(Debug)]
struct Element {
    name: String,
    attrs: HashMap<String, String>,
    text: String,
}

impl Element {
    fn attr(&self, key: &str) -> Option<&str> {
        self.attrs.get(key).map(String::as_str)
    }
    fn has_class(&self, class: &str) -> bool {
        self.attr("class")
            .is_some_and(|c| c.split_whitespace().any(|w| w == class))
    }
}

/// Parses the whole document, failing on any XML error or unbalanced tag.
fn parse(svg: &str) -> Vec<Element> {
    let mut reader = Reader::from_str(svg);
    let mut elements: Vec<Element> = Vec::new();
    let mut open: Vec<usize> = Vec::new();
    let mut saw_root = false;
    loop {
        let event = reader.read_event().unwrap_or_else(|e| {
            panic!(
                "not well-formed XML at byte {}: {e}",
                reader.buffer_position()
            )
        });
        match event {
            Event::Start(ref e) | Event::Empty(ref e) => {
                let name = e.name().as_ref().to_string();
                if open.is_empty() {
                    assert!(!saw_root, "a second root element <{name}>");
                    assert_eq!(name, "svg", "root element");
                    saw_root = true;
                }
                let attrs = e
                    .attributes()
                    .map(|a| {
                        let a = a.expect("attribute well formed, no duplicates");
                        (
                            a.key.as_ref().to_string(),
                            a.normalized_value(XmlVersion::Implicit1_0)
                                .expect("attribute value unescapes")
                                .into_owned(),
                        )
                    })
                    .collect();
                elements.push(Element {
                    name,
                    attrs,
                    text: String::new(),
                });
                if matches!(event, Event::Start(_)) {
                    open.push(elements.len() - 1);
                }
            }
            Event::End(_) => {
                open.pop().expect("end tag without a start");
            }
            Event::Text(ref t) => {
                let text = t.xml_content(XmlVersion::Implicit1_0);
                if let Some(&idx) = open.last() {
                    elements[idx].text.push_str(&text);
                } else {
                    assert!(text.trim().is_empty(), "text outside the root: {text:?}");
                }
            }
            Event::GeneralRef(ref r) => {
                let resolved = match r.resolve_char_ref().expect("valid char ref") {
                    Some(c) => c.to_string(),
                    None => resolve_predefined_entity(r)
                        .unwrap_or_else(|| panic!("undeclared entity &{};", &**r))
                        .to_string(),
                };
                let idx = *open.last().expect("reference outside the root");
                elements[idx].text.push_str(&resolved);
            }
            Event::Eof => break,
            _ => {}
        }
    }
    assert!(open.is_empty(), "unclosed elements at the end");
    assert!(saw_root, "no root element");
    elements
}

fn by_id<'a>(elements: &'a [Element], id: &str) -> Option<&'a Element> {
    elements.iter().find(|e| e.attr("id") == Some(id))
}

fn with_class<'a>(elements: &'a [Element], class: &str) -> Vec<&'a Element> {
    elements.iter().filter(|e| e.has_class(class)).collect()
}

/// Left and right x of the plot area: the alert-level line spans it.
fn plot_edges(doc: &[Element]) -> (f64, f64) {
    let level = by_id(doc, "line-inlier-level").expect("alert level line");
    let x = |key: &str| level.attr(key).unwrap().parse::<f64>().unwrap();
    (x("x1"), x("x2"))
}

/// Number of points in a path's `d` (each M or L command starts one).
fn path_points(element: &Element) -> usize {
    element
        .attr("d")
        .unwrap_or("")
        .chars()
        .filter(|c| *c == 'M' || *c == 'L')
        .count()
}

const ODD_SENSOR: &str = "cam<&>\"1\"";

fn solution(idx: usize, n_epochs: usize) -> Solution {
    let t = idx as i64 * NS / 10;
    // Sun sensor outliers on epochs 40–59; the odd-named camera on 70–71;
    // epochs 90–94 insufficient, 95–96 unobservable.
    let sun_outliers = u32::from((40..60).contains(&idx));
    let cam_outliers = u32::from((70..72).contains(&idx));
    let status = match idx {
        90..=94 => SolutionStatus::Insufficient,
        95..=96 => SolutionStatus::Unobservable,
        40..=59 => SolutionStatus::Degraded,
        _ => SolutionStatus::Ok,
    };
    let sigma = 2e-5 * (1.0 + idx as f64 / n_epochs as f64);
    let huge = 1e12;
    let var = if status == SolutionStatus::Unobservable {
        huge
    } else {
        sigma * sigma
    };
    let n = 10;
    let n_inliers = n - sun_outliers - cam_outliers;
    Solution {
        t,
        q: [1.0, 0.0, 0.0, 0.0],
        cov: [var, 0.0, 0.0, 0.0, var, 0.0, 0.0, 0.0, var],
        status,
        inlier_fraction: f64::from(n_inliers) / f64::from(n),
        n,
        n_inliers,
        method: "gnc-tls".into(),
        iterations: 5,
        sensors: vec![
            SensorCount {
                sensor: "sun".into(),
                n: 2,
                n_inliers: 2 - sun_outliers,
            },
            SensorCount {
                sensor: ODD_SENSOR.into(),
                n: 6,
                n_inliers: 6 - cam_outliers,
            },
            SensorCount {
                sensor: "mag".into(),
                n: 2,
                n_inliers: 2,
            },
        ],
        verdicts: None,
        propagated: None,
    }
}

fn alert(t_s: f64, kind: &str, sensor: Option<&str>, state: AlertState) -> Alert {
    Alert {
        t: (t_s * 1e9).round() as i64,
        kind: kind.into(),
        state,
        value: 0.5,
        threshold: 0.7,
        sensor: sensor.map(Into::into),
        message: "test".into(),
    }
}

fn scenario() -> (Vec<Solution>, Vec<Alert>) {
    let n_epochs = 120;
    let solutions = (0..n_epochs).map(|i| solution(i, n_epochs)).collect();
    let alerts = vec![
        alert(4.2, "sensor_inliers", Some("sun"), AlertState::Raised),
        alert(6.1, "sensor_inliers", Some("sun"), AlertState::Cleared),
        // Raised and never cleared: runs to the end.
        alert(9.5, "unobservable", None, AlertState::Raised),
    ];
    (solutions, alerts)
}

#[test]
fn with_truth_the_error_and_its_envelope_are_drawn() {
    let (solutions, alerts) = scenario();
    // Truth at every epoch but 10–14; error grows in the sun fault.
    let errors: Vec<f64> = (0..solutions.len())
        .map(|i| match i {
            10..=14 => f64::NAN,
            40..=59 => 5e-3,
            _ => 1e-5 * (1.0 + (i % 7) as f64),
        })
        .collect();
    let svg = render(
        &solutions,
        &alerts,
        Some(&errors),
        0.7,
        "bench run <nominal> & faults",
    );
    let doc = parse(&svg);

    let error = by_id(&doc, "series-error").expect("error series");
    let envelope = by_id(&doc, "series-envelope").expect("envelope series");
    assert_eq!(error.name, "path");
    // 120 epochs in 786 columns: one point per epoch with truth (the five
    // without truth break the line, they draw nothing).
    assert_eq!(path_points(error), solutions.len() - 5);
    assert_eq!(
        error.attr("d").unwrap().matches('M').count(),
        2,
        "the truth gap splits the error line in two"
    );
    // The envelope is one closed area per run of epochs with a meaningful
    // covariance: 0–89 and 97–119 (insufficient/unobservable left out).
    assert_eq!(envelope.attr("d").unwrap().matches('Z').count(), 2);
    assert!(
        by_id(&doc, "series-sigma-x").is_none(),
        "per-axis σ only without truth"
    );

    let fraction = by_id(&doc, "series-inlier-fraction").expect("inlier fraction");
    assert_eq!(path_points(fraction), solutions.len());
    let level = by_id(&doc, "line-inlier-level").expect("alert level line");
    assert_eq!(level.attr("data-level"), Some("0.7"));
    assert_eq!(
        level.attr("y1"),
        level.attr("y2"),
        "the level is horizontal"
    );

    // The title is escaped, and reads back as given.
    assert!(doc
        .iter()
        .any(|e| e.name == "text" && e.text == "bench run <nominal> & faults"));
    // The caption states how σ is defined.
    assert!(with_class(&doc, "caption")
        .iter()
        .any(|e| e.text.contains("σ = √trace(cov)")));
}

#[test]
fn without_truth_the_per_axis_sigma_is_drawn() {
    let (solutions, alerts) = scenario();
    let svg = render(&solutions, &alerts, None, 0.7, "no truth");
    let doc = parse(&svg);
    assert!(by_id(&doc, "series-error").is_none());
    assert!(by_id(&doc, "series-envelope").is_none());
    for axis in ["x", "y", "z"] {
        let sigma = by_id(&doc, &format!("series-sigma-{axis}")).expect("σ series");
        // σ is drawn for ok/degraded epochs only (7 are not).
        assert_eq!(path_points(sigma), solutions.len() - 7, "axis {axis}");
    }
}

#[test]
fn outliers_are_marked_per_sensor_and_names_are_escaped() {
    let (solutions, alerts) = scenario();
    let svg = render(&solutions, &alerts, None, 0.7, "marks");
    assert!(!svg.contains(ODD_SENSOR), "raw markup in the file");
    let doc = parse(&svg);
    let marks = with_class(&doc, "outlier-mark");
    let of = |sensor: &str| -> Vec<&&Element> {
        marks
            .iter()
            .filter(|m| m.attr("data-sensor") == Some(sensor))
            .collect()
    };
    // Consecutive epochs merge into one mark: one run each.
    assert_eq!(of("sun").len(), 1);
    assert_eq!(of(ODD_SENSOR).len(), 1);
    assert!(of("mag").is_empty(), "a clean sensor has no marks");
    // The sun run covers 4.0 s to 6.0 s (epochs 40-59, each standing until
    // the next) of the 0-11.9 s axis.
    let (left, right) = plot_edges(&doc);
    let sun_width: f64 = of("sun")[0].attr("width").unwrap().parse().unwrap();
    let expected = 2.0 / 11.9 * (right - left);
    assert!(
        (sun_width - expected).abs() < 2.5,
        "width {sun_width} vs {expected}"
    );
    // Row labels carry the sensor names and their outlier-epoch counts.
    for label in ["sun (20)", &format!("{ODD_SENSOR} (2)"), "mag (0)"] {
        assert!(
            doc.iter().any(|e| e.name == "text" && e.text == label),
            "label {label:?}"
        );
    }
}

#[test]
fn verdicts_alone_also_mark_outliers() {
    let mut solutions: Vec<Solution> = (0..30).map(|i| solution(i, 30)).collect();
    for s in &mut solutions {
        s.sensors.clear();
        s.verdicts = Some(
            vec![ObsVerdict {
                sensor: "star".into(),
                seq: s.t as u64,
                residual: 1e-4,
                inlier: s.t != 2 * NS,
            }]
            .into(),
        );
    }
    let doc = parse(&render(&solutions, &[], None, 0.7, "verdicts"));
    let marks = with_class(&doc, "outlier-mark");
    assert_eq!(marks.len(), 1);
    assert_eq!(marks[0].attr("data-sensor"), Some("star"));
}

#[test]
fn alerts_become_spans_labelled_by_kind_and_sensor() {
    let (solutions, alerts) = scenario();
    let doc = parse(&render(&solutions, &alerts, None, 0.7, "alerts"));
    let spans = with_class(&doc, "alert-span");
    assert_eq!(spans.len(), 2);
    let sun = spans
        .iter()
        .find(|s| s.attr("data-kind") == Some("sensor_inliers"))
        .expect("sensor_inliers span");
    assert_eq!(sun.attr("data-sensor"), Some("sun"));
    assert_eq!(sun.attr("data-open"), Some("false"));
    let x: f64 = sun.attr("x").unwrap().parse().unwrap();
    let w: f64 = sun.attr("width").unwrap().parse().unwrap();
    // Raised 4.2 s, cleared 6.1 s, on the 0-11.9 s axis.
    let (left, right) = plot_edges(&doc);
    let px = |t: f64| left + t / 11.9 * (right - left);
    assert!((x - px(4.2)).abs() < 0.2, "x {x}");
    assert!((x + w - px(6.1)).abs() < 0.2, "end {}", x + w);
    // Each row is labelled by kind and sensor.
    for label in ["sensor_inliers · sun", "unobservable"] {
        assert!(
            doc.iter().any(|e| e.name == "text" && e.text == label),
            "label {label:?}"
        );
    }

    let open = spans
        .iter()
        .find(|s| s.attr("data-kind") == Some("unobservable"))
        .expect("unobservable span");
    assert_eq!(open.attr("data-open"), Some("true"));
    assert!(open.attr("data-sensor").is_none());
    let end = open.attr("x").unwrap().parse::<f64>().unwrap()
        + open.attr("width").unwrap().parse::<f64>().unwrap();
    assert!(
        (end - px(11.9)).abs() < 0.2,
        "an open alert runs to the end"
    );

    // The status strip shows every status present, and the legend names all four.
    let statuses: Vec<&str> = with_class(&doc, "status-run")
        .iter()
        .filter_map(|r| r.attr("data-status"))
        .collect();
    for status in ["ok", "degraded", "unobservable", "insufficient"] {
        assert!(statuses.contains(&status), "{status} in the strip");
        assert!(doc.iter().any(|e| e.name == "text" && e.text == status));
    }
}

#[test]
fn no_alerts_and_no_solutions_still_give_a_valid_document() {
    let doc = parse(&render(&[], &[], None, 0.7, "empty"));
    assert!(with_class(&doc, "alert-span").is_empty());
    assert!(by_id(&doc, "series-inlier-fraction").is_some());
    let (solutions, _) = scenario();
    let doc = parse(&render(
        &solutions[..1],
        &[],
        Some(&[1e-5]),
        0.7,
        "one epoch",
    ));
    assert_eq!(path_points(by_id(&doc, "series-error").unwrap()), 1);
}

#[test]
fn a_long_run_stays_small() {
    // 50 000 epochs (about 1.4 h at 10 Hz) with a fault every 1000 epochs.
    let n_epochs = 50_000;
    let solutions: Vec<Solution> = (0..n_epochs)
        .map(|i| {
            let mut s = solution(i % 120, 120);
            s.t = i as i64 * NS / 10;
            s
        })
        .collect();
    let errors: Vec<f64> = (0..n_epochs)
        .map(|i| 1e-5 * (1.0 + ((i * 7919) % 13) as f64))
        .collect();
    let alerts: Vec<Alert> = (0..50)
        .flat_map(|k| {
            let t = k as f64 * 100.0;
            [
                alert(t + 4.2, "sensor_inliers", Some("sun"), AlertState::Raised),
                alert(t + 6.1, "sensor_inliers", Some("sun"), AlertState::Cleared),
            ]
        })
        .collect();
    let svg = render(&solutions, &alerts, Some(&errors), 0.7, "long run");
    let doc = parse(&svg);
    assert!(
        svg.len() < 300_000,
        "{} bytes for {n_epochs} epochs",
        svg.len()
    );
    // At most two points per pixel column for the error line.
    let (left, right) = plot_edges(&doc);
    assert!(
        path_points(by_id(&doc, "series-error").unwrap()) <= 2 * (right - left).ceil() as usize
    );
    assert_eq!(with_class(&doc, "alert-span").len(), 50);
}
