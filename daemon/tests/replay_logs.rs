//! The committed `replay-logs/`: each log's replay matches its committed
//! expected summary exactly, the alerts the README's table lists are the
//! alerts the replay raises (kind, sensor, raised and cleared data times),
//! and each alert sits where its cause is: inside the fault span of the
//! scenario the README names, or, for the sun sensor's `stale`, a stretch of
//! the log with no sun observation.

mod serve_support;

use std::collections::BTreeSet;
use std::path::Path;
use std::process::Command;

use serve_support::{repo_root, TempDir};
use wahbad::record::{LogReader, Record};
use wahbad::simulate::{FaultEffect, Preset, Scenario};
use wahbad_protocol::Message;

/// The committed logs and the preset each was made from (see the README).
const LOGS: [(&str, Preset); 2] = [
    ("nominal.wlog", Preset::Nominal),
    ("all_faults.wlog", Preset::AllFaults),
];

fn replay_summary(log: &Path, dir: &TempDir) -> serde_json::Value {
    let out_path = dir.join("summary.json");
    let out = Command::new(env!("CARGO_BIN_EXE_wahbad"))
        .arg("replay")
        .arg(log)
        .arg("--summary")
        .arg(&out_path)
        .output()
        .expect("run wahbad replay");
    assert!(out.status.success(), "{out:?}");
    serde_json::from_str(&std::fs::read_to_string(&out_path).unwrap()).unwrap()
}

/// One alert as the README's table writes it: (log, kind, sensor, raised, cleared).
type AlertRow = (String, String, String, String, String);

/// The rows of the README's alert table (`| `log` | `kind` | `sensor` | raised | cleared | cause |`).
fn readme_alerts() -> BTreeSet<AlertRow> {
    let readme = std::fs::read_to_string(repo_root().join("replay-logs/README.md")).unwrap();
    let section = readme
        .split("## Alerts a replay raises")
        .nth(1)
        .expect("README has the alert table section");
    section
        .lines()
        .filter(|line| line.starts_with("| `"))
        .map(|line| {
            let cells: Vec<String> = line
                .trim_matches('|')
                .split('|')
                .map(|cell| cell.trim().trim_matches('`').to_string())
                .collect();
            assert!(cells.len() >= 5, "bad README row {line:?}");
            (
                cells[0].clone(),
                cells[1].clone(),
                cells[2].clone(),
                cells[3].clone(),
                cells[4].clone(),
            )
        })
        .collect()
}

fn seconds(ns: &serde_json::Value) -> String {
    match ns.as_i64() {
        Some(ns) => format!("{:.3}", ns as f64 * 1e-9),
        None => "-".into(),
    }
}

#[test]
fn each_log_replays_to_its_committed_summary_and_readme_alerts() {
    let dir = TempDir::new("replay-logs");
    let readme = readme_alerts();
    let mut seen = BTreeSet::new();
    for (name, preset) in LOGS {
        let log = repo_root().join("replay-logs").join(name);
        let size = std::fs::metadata(&log).unwrap().len();
        assert!(size < 2_000_000, "{name} is {size} bytes");
        let got = replay_summary(&log, &dir);
        let expected_path = log.with_extension("summary.json");
        let expected: serde_json::Value =
            serde_json::from_str(&std::fs::read_to_string(&expected_path).unwrap()).unwrap();
        assert_eq!(
            got,
            expected,
            "{name}: replay differs from {}",
            expected_path.display()
        );

        // The README's table, row for row.
        let alerts = got["alerts"].as_array().unwrap();
        for alert in alerts {
            let row = (
                name.to_string(),
                alert["kind"].as_str().unwrap().to_string(),
                alert["sensor"].as_str().unwrap_or("-").to_string(),
                seconds(&alert["raised"]),
                seconds(&alert["cleared"]),
            );
            assert!(
                readme.contains(&row),
                "{row:?} is not in the README's table"
            );
            seen.insert(row);
        }
        check_causes(name, preset, &log, alerts);
        if preset == Preset::Nominal {
            assert!(alerts.is_empty(), "the nominal run raises nothing");
        }
    }
    let missing: Vec<_> = readme.difference(&seen).collect();
    assert!(
        missing.is_empty(),
        "README rows no replay raised: {missing:?}"
    );
}

/// Every alert of a fault run lies where the scenario put its cause.
fn check_causes(name: &str, preset: Preset, log: &Path, alerts: &[serde_json::Value]) {
    let scenario = Scenario::preset(preset);
    // Hold time (default 1 s) plus one window span (1 s) after the fault ends.
    let settle_ns = 2_000_000_000;
    let sun_times = sun_obs_times(log);
    for alert in alerts {
        let kind = alert["kind"].as_str().unwrap();
        let sensor = alert["sensor"].as_str().unwrap_or("-");
        let raised = alert["raised"].as_i64().unwrap();
        let cleared = alert["cleared"].as_i64();
        let fault_kind = match (kind, sensor) {
            ("sensor_inliers", "star_cam") => Some("false_stars"),
            ("sensor_inliers", "sun") => Some("lamp_reflection"),
            ("sensor_inliers", "mag") => Some("coil_transient"),
            ("stale", "star_cam") => Some("dropout"),
            // With the star camera out and the lamp out of view, only the
            // magnetometer's single reference direction is left.
            ("unobservable", "-") => Some("dropout"),
            ("stale", "sun") => None,
            other => panic!("{name}: unexpected alert {other:?}"),
        };
        match fault_kind {
            Some(fault_kind) => {
                let fault = scenario
                    .faults
                    .iter()
                    .find(|fault| fault_name(&fault.effect) == fault_kind)
                    .unwrap_or_else(|| {
                        panic!("{name}: {kind} [{sensor}] without a {fault_kind} fault")
                    });
                let (start, end) = ((fault.start_s * 1e9) as i64, (fault.end_s * 1e9) as i64);
                assert!(
                    raised >= start && raised <= end,
                    "{name}: {kind} [{sensor}] raised at {raised}, fault {start}..{end}"
                );
                let cleared = cleared.expect("fault alerts clear once the fault is over");
                assert!(
                    cleared >= end && cleared <= end + settle_ns,
                    "{name}: {kind} [{sensor}] cleared at {cleared}, fault ends {end}"
                );
            }
            None => {
                // The lamp out of the sun sensor's view: no sun observation
                // between the raise and the clear.
                let cleared = cleared.expect("the lamp comes back into view");
                assert!(
                    !sun_times.iter().any(|&t| t > raised && t < cleared),
                    "{name}: sun observations inside its stale span"
                );
            }
        }
    }
}

fn fault_name(effect: &FaultEffect) -> &'static str {
    match effect {
        FaultEffect::FalseStars { .. } => "false_stars",
        FaultEffect::LampReflection { .. } => "lamp_reflection",
        FaultEffect::CoilTransient { .. } => "coil_transient",
        FaultEffect::Dropout { .. } => "dropout",
    }
}

fn sun_obs_times(log: &Path) -> Vec<i64> {
    let mut reader = LogReader::open(log).unwrap();
    let mut times = Vec::new();
    while let Some(record) = reader.next_record().unwrap() {
        if let Record::Frame { body, .. } = record {
            if let Ok(Message::Obs(obs)) = wahbad_protocol::decode_body(&body) {
                if obs.sensor == "sun" {
                    times.push(obs.t);
                }
            }
        }
    }
    times
}
