//! Both renderers on a real run: the default bench scenario (with its fault
//! timeline) through the estimator, then the SVG report and the AEM.
//! Set `WAHBAD_REPORT_DUMP=<dir>` to keep both files for a look.

use quick_xml::events::Event;
use quick_xml::{Reader, XmlVersion};
use wahbad::estimator::{Estimator, EstimatorConfig, Input, Output};
use wahbad::report::{aem, svg};
use wahbad::simulate::{Scenario, Simulator};
use wahbad_protocol::{validate_obs, validate_rate, validate_truth, Alert, Message, Solution};

/// Solutions, alerts and per-epoch error against the simulator's truth.
fn run() -> (Vec<Solution>, Vec<Alert>, Vec<f64>, f64) {
    let scenario = Scenario {
        duration_s: 60.0,
        ..Scenario::default()
    };
    let mut sim = Simulator::new(&scenario).expect("default scenario is valid");
    let config = EstimatorConfig::default();
    let level = config.alerts.inlier_fraction.level;
    let mut estimator = Estimator::new(config).expect("default config is valid");
    let mut out = Vec::new();
    let mut last_t = 0;
    for message in sim.by_ref() {
        let input = match message {
            Message::Obs(obs) => Input::Obs(validate_obs(&obs).expect("simulated obs valid")),
            Message::Rate(rate) => Input::Rate(validate_rate(&rate).expect("simulated rate valid")),
            Message::Truth(truth) => {
                Input::Truth(validate_truth(&truth).expect("simulated truth valid"))
            }
            _ => continue,
        };
        if let Input::Obs(obs) = &input {
            last_t = last_t.max(obs.t);
        }
        estimator.ingest(input, &mut out).expect("ingest");
    }
    estimator
        .ingest(Input::Tick(last_t + 2_000_000_000), &mut out)
        .expect("final tick");
    let sim = Simulator::new(&scenario).unwrap();
    let mut solutions = Vec::new();
    let mut alerts = Vec::new();
    for output in out {
        match output {
            Output::Solution(s) => solutions.push(s),
            Output::Alert(a) => alerts.push(a),
        }
    }
    let errors = solutions
        .iter()
        .map(|s| {
            let truth = sim.truth_at(s.t);
            let dot = s.q[0] * truth.w + s.q[1] * truth.i + s.q[2] * truth.j + s.q[3] * truth.k;
            2.0 * dot.abs().min(1.0).acos()
        })
        .collect();
    (solutions, alerts, errors, level)
}

fn ids_and_classes(svg: &str) -> (Vec<String>, Vec<String>) {
    let mut reader = Reader::from_str(svg);
    let (mut ids, mut classes) = (Vec::new(), Vec::new());
    let mut depth = 0i32;
    loop {
        let event = reader.read_event().expect("well-formed XML");
        match &event {
            Event::Start(e) | Event::Empty(e) => {
                if matches!(event, Event::Start(_)) {
                    depth += 1;
                }
                for attr in e.attributes() {
                    let attr = attr.expect("attribute");
                    let value = attr
                        .normalized_value(XmlVersion::Implicit1_0)
                        .expect("value")
                        .into_owned();
                    match attr.key.as_ref() {
                        "id" => ids.push(value),
                        "class" => classes.push(value),
                        _ => {}
                    }
                }
            }
            Event::End(_) => depth -= 1,
            Event::Eof => break,
            _ => {}
        }
    }
    assert_eq!(depth, 0, "unbalanced tags");
    (ids, classes)
}

#[test]
fn a_simulated_run_renders_and_exports() {
    let (solutions, alerts, errors, level) = run();
    assert!(solutions.len() > 500, "{} epochs", solutions.len());

    let report = svg::render(
        &solutions,
        &alerts,
        Some(&errors),
        level,
        "default scenario, 60 s",
    );
    let (ids, classes) = ids_and_classes(&report);
    for id in [
        "series-error",
        "series-envelope",
        "series-inlier-fraction",
        "line-inlier-level",
    ] {
        assert!(ids.iter().any(|i| i == id), "{id}");
    }
    let raised = alerts
        .iter()
        .filter(|a| a.state == wahbad_protocol::AlertState::Raised)
        .count();
    let spans = classes.iter().filter(|c| *c == "alert-span").count();
    assert!(spans >= raised, "{spans} spans for {raised} raises");
    assert!(report.len() < 300_000, "{} bytes", report.len());

    let text = aem::write(&solutions, &aem::AemOptions::default()).expect("AEM");
    let data_lines = text
        .lines()
        .skip_while(|l| *l != "DATA_START")
        .skip(1)
        .take_while(|l| *l != "DATA_STOP")
        .count();
    let usable = solutions
        .iter()
        .filter(|s| aem::is_written(s.status))
        .count();
    assert_eq!(data_lines, usable);
    if let Ok(dir) = std::env::var("WAHBAD_REPORT_DUMP") {
        std::fs::write(format!("{dir}/report_e2e.svg"), &report).unwrap();
        std::fs::write(format!("{dir}/report_e2e.aem"), &text).unwrap();
    }
}
