//! `--fail-on-alert` on a faulty run (exit 1, the alert in the summary) and
//! the summary of a log without truth (no error keys, no error column).

mod replay_support;

use replay_support::*;
use wahbad::simulate::{Preset, Scenario};

#[test]
fn false_stars_raise_an_alert_and_fail_on_alert_exits_1() {
    let dir = TempDir::new("faulty");
    let mut scenario = Scenario::preset(Preset::FalseStars);
    scenario.duration_s = 40.0;
    scenario.truth.enabled = false;
    let log = dir.join("false_stars.wlog");
    write_sim_log(&log, &scenario, &estimator_table(&scenario));
    let (summary, csv) = (dir.join("s.json"), dir.join("e.csv"));
    let args = [
        log.to_str().unwrap(),
        "--summary",
        summary.to_str().unwrap(),
        "--csv",
        csv.to_str().unwrap(),
    ];
    let out = replay(&args);
    assert_eq!(out.status.code(), Some(0), "{}", text(&out.stderr));
    let mut with_flag = args.to_vec();
    with_flag.push("--fail-on-alert");
    let out = replay(&with_flag);
    let stderr = text(&out.stderr);
    assert_eq!(out.status.code(), Some(1), "{stderr}");
    assert!(stderr.contains("--fail-on-alert"), "{stderr}");

    let json: serde_json::Value =
        serde_json::from_slice(&std::fs::read(&summary).unwrap()).unwrap();
    let mut keys: Vec<&str> = json
        .as_object()
        .unwrap()
        .keys()
        .map(String::as_str)
        .collect();
    keys.sort();
    assert_eq!(
        keys,
        [
            "alerts",
            "dropped",
            "epochs",
            "inlier_fraction",
            "observations",
            "rejected",
            "status_counts"
        ],
        "no truth in the log: no error keys"
    );
    let alerts = json["alerts"].as_array().unwrap();
    eprintln!("alerts: {alerts:?}");
    let star = alerts
        .iter()
        .find(|a| a["kind"] == "sensor_inliers" && a["sensor"] == "star_cam")
        .expect("the star camera's inlier alert");
    // Fault from 22 s to 32 s (data time): raised inside it, cleared after it.
    let raised = star["raised"].as_i64().unwrap();
    assert!(
        (22_000_000_000..32_000_000_000).contains(&raised),
        "{raised}"
    );
    let cleared = star["cleared"].as_i64().expect("cleared after the fault");
    assert!(cleared > 32_000_000_000, "{cleared}");
    for alert in alerts {
        let keys: Vec<&str> = alert
            .as_object()
            .unwrap()
            .keys()
            .map(String::as_str)
            .collect();
        assert_eq!(keys, ["cleared", "kind", "raised", "sensor"]);
    }
    let counts = json["status_counts"].as_object().unwrap();
    let names: Vec<&str> = counts.keys().map(String::as_str).collect();
    assert_eq!(names, ["degraded", "insufficient", "ok", "unobservable"]);
    let header = std::fs::read_to_string(&csv).unwrap();
    let header = header.lines().next().unwrap();
    assert!(
        header.ends_with(",status"),
        "no error column without truth: {header}"
    );
}
