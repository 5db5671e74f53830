//! `wahbad replay` on simulated logs with truth, with the real binary:
//! summary keys, CSV shape, the error against truth within 3σ, `--fail-on-alert`.

mod replay_support;

use replay_support::*;

#[test]
fn nominal_log_summary_csv_and_error_within_3_sigma() {
    let dir = TempDir::new("nominal");
    let keep = std::env::var("REPLAY_KEEP").ok();
    let scenario = scenario(120.0, false);
    let log = keep
        .map(std::path::PathBuf::from)
        .unwrap_or_else(|| dir.join("nominal.wlog"));
    write_sim_log(&log, &scenario, &estimator_table(&scenario));
    let (summary, csv, lines) = (dir.join("s.json"), dir.join("e.csv"), dir.join("o.jsonl"));
    let (svg, aem) = (dir.join("r.svg"), dir.join("a.aem"));
    let out = replay(&[
        log.to_str().unwrap(),
        "--summary",
        summary.to_str().unwrap(),
        "--csv",
        csv.to_str().unwrap(),
        "--solutions",
        lines.to_str().unwrap(),
        "--report",
        svg.to_str().unwrap(),
        "--aem",
        aem.to_str().unwrap(),
        "--utc-epoch",
        "2026-12-01T00:00:00Z",
        "--fail-on-alert",
    ]);
    let stdout = text(&out.stdout);
    eprintln!("{stdout}{}", text(&out.stderr));
    assert_eq!(out.status.code(), Some(0));
    assert!(
        stdout.contains("configuration: recorded in the log header"),
        "{stdout}"
    );
    let json: serde_json::Value =
        serde_json::from_slice(&std::fs::read(&summary).unwrap()).unwrap();
    let keys: Vec<&str> = json
        .as_object()
        .unwrap()
        .keys()
        .map(String::as_str)
        .collect();
    let mut expected = vec![
        "alerts",
        "dropped",
        "epochs",
        "error_arcsec",
        "inlier_fraction",
        "observations",
        "rejected",
        "status_counts",
        "within_3sigma",
    ];
    expected.sort();
    let mut keys_sorted = keys.clone();
    keys_sorted.sort();
    assert_eq!(keys_sorted, expected);
    let epochs = json["epochs"].as_u64().unwrap();
    assert!(epochs >= 1150, "{epochs} epochs in 120 s at 100 ms");
    let within = json["within_3sigma"].as_f64().unwrap();
    eprintln!(
        "measured: within 3σ {within}, error {}",
        json["error_arcsec"]
    );
    assert!(within >= 0.99, "{within}");
    assert!(json["alerts"].as_array().unwrap().is_empty());
    assert_eq!(json["status_counts"]["ok"].as_u64().unwrap(), epochs);
    let csv_text = std::fs::read_to_string(&csv).unwrap();
    let mut rows = csv_text.lines();
    let header = rows.next().unwrap();
    assert!(
        header.starts_with("t_ns,t_s,qw,qx,qy,qz,roll_321_deg"),
        "{header}"
    );
    assert!(header.ends_with(",error_arcsec"), "{header}");
    assert_eq!(rows.count() as u64, epochs);
    // The report is well-formed XML holding the error series; the AEM has
    // one data line per epoch (all `ok` here) between DATA_START and DATA_STOP.
    let svg_text = std::fs::read_to_string(&svg).unwrap();
    let mut reader = quick_xml::Reader::from_str(&svg_text);
    let mut ids = Vec::new();
    loop {
        match reader.read_event().expect("well-formed SVG") {
            quick_xml::events::Event::Eof => break,
            quick_xml::events::Event::Start(e) | quick_xml::events::Event::Empty(e) => {
                if let Some(id) = e.try_get_attribute("id").unwrap() {
                    ids.push(id.value.to_string());
                }
            }
            _ => {}
        }
    }
    assert!(ids.iter().any(|id| id == "series-error"), "{ids:?}");
    let aem_text = std::fs::read_to_string(&aem).unwrap();
    let data: Vec<&str> = aem_text
        .lines()
        .skip_while(|l| l.trim() != "DATA_START")
        .skip(1)
        .take_while(|l| l.trim() != "DATA_STOP")
        .filter(|l| !l.trim().is_empty() && !l.starts_with("COMMENT"))
        .collect();
    assert_eq!(data.len() as u64, epochs);
    assert!(data[0].starts_with("2026-12-01T00:00:00"), "{}", data[0]);
    let n_lines = std::fs::read_to_string(&lines).unwrap().lines().count() as u64;
    assert_eq!(n_lines, epochs, "no alert: one line per solution");
}
