//! `wahbad demo` through the real binary, on a short run: it finishes, prints
//! the caution, the feed lines and the alerts of the fault it covers, and
//! writes a summary, a CSV and an SVG report that parse.

mod serve_support;

use std::process::Command;

use serve_support::TempDir;

#[test]
fn demo_runs_to_completion_and_writes_its_report() {
    let dir = TempDir::new("demo");
    let out_dir = dir.join("out");
    // 35 s of data covers the false-stars fault (22-32 s) and its clear.
    let out = Command::new(env!("CARGO_BIN_EXE_wahbad"))
        .args(["demo", "--duration", "35", "--speed", "50", "--out-dir"])
        .arg(&out_dir)
        .output()
        .expect("run wahbad demo");
    let stdout = String::from_utf8(out.stdout).unwrap();
    assert!(
        out.status.success(),
        "{stdout}\n{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert!(
        stdout.starts_with("CAUTION: wahbad is test and analysis software, not flight-qualified")
    );

    // The feed as `watch` prints it: one line per epoch (10 per data second).
    let n_solution_lines = stdout
        .lines()
        .filter(|line| {
            !line.starts_with('#') && line.contains(" q=[") && line.contains(" rpy321=(")
        })
        .count();
    assert!(
        (340..=351).contains(&n_solution_lines),
        "{n_solution_lines} solution lines"
    );
    let raised = stdout
        .lines()
        .find(|line| line.starts_with(">>> ALERT RAISED  sensor_inliers [star_cam]"))
        .unwrap_or_else(|| panic!("no false-star alert in\n{stdout}"));
    let cleared = stdout
        .lines()
        .find(|line| line.starts_with("<<< alert cleared sensor_inliers [star_cam]"))
        .unwrap_or_else(|| panic!("no clear of the false-star alert in\n{stdout}"));
    let at = |line: &str| -> f64 {
        let after = line.split(" at ").nth(1).unwrap();
        after.split('s').next().unwrap().parse().unwrap()
    };
    // Raised during the fault (22-32 s), cleared after it.
    assert!((22.0..32.0).contains(&at(raised)), "{raised}");
    assert!(at(cleared) > 32.0, "{cleared}");

    // The recording replays to exactly the feed the subscriber saw.
    assert!(stdout.contains("identical to the live feed"), "{stdout}");

    // The files it names exist and parse.
    let summary_path = out_dir.join("summary.json");
    let csv_path = out_dir.join("demo.csv");
    let svg_path = out_dir.join("report.svg");
    for path in [&summary_path, &csv_path, &svg_path] {
        assert!(
            stdout.contains(&path.display().to_string()),
            "{} not named in the output",
            path.display()
        );
    }
    let summary: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&summary_path).unwrap()).unwrap();
    let epochs = summary["epochs"].as_u64().unwrap();
    assert_eq!(
        epochs as usize, n_solution_lines,
        "live lines = replayed epochs"
    );
    assert!(summary["alerts"]
        .as_array()
        .unwrap()
        .iter()
        .any(|a| a["kind"] == "sensor_inliers" && a["sensor"] == "star_cam"));

    let csv = std::fs::read_to_string(&csv_path).unwrap();
    let mut lines = csv.lines();
    let header: Vec<&str> = lines.next().unwrap().split(',').collect();
    assert!(header.len() >= 10, "{header:?}");
    let rows: Vec<&str> = lines.collect();
    assert_eq!(rows.len() as u64, epochs);
    for row in &rows {
        assert_eq!(row.split(',').count(), header.len(), "{row}");
    }

    let svg = std::fs::read_to_string(&svg_path).unwrap();
    let mut reader = quick_xml::Reader::from_str(&svg);
    let mut root = None;
    let mut n_elements = 0usize;
    loop {
        match reader.read_event() {
            Ok(quick_xml::events::Event::Start(e)) | Ok(quick_xml::events::Event::Empty(e)) => {
                n_elements += 1;
                if root.is_none() {
                    root = Some(e.name().into_inner().to_owned());
                }
            }
            Ok(quick_xml::events::Event::Eof) => break,
            Ok(_) => {}
            Err(err) => panic!("report.svg is not well-formed XML: {err}"),
        }
    }
    assert_eq!(root.as_deref(), Some("svg"));
    assert!(n_elements > 10, "{n_elements} elements");
}
