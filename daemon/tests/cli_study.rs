//! `wahbad study` run as a real process on a small grid: the JSON keys, the
//! CSV header, the SVG as XML, determinism across thread counts and flag errors.

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

use quick_xml::events::Event;
use quick_xml::reader::Reader;
use quick_xml::XmlVersion;
use serde_json::Value;

const COLUMNS: [&str; 9] = [
    "method",
    "n",
    "outlier_share",
    "trials",
    "success_rate",
    "median_error_over_crb",
    "p95_error_over_crb",
    "median_error_rad",
    "median_time_us",
];

struct Outputs {
    json: PathBuf,
    csv: PathBuf,
    svg: PathBuf,
}

fn outputs(tag: &str) -> Outputs {
    let dir = Path::new(env!("CARGO_TARGET_TMPDIR"));
    Outputs {
        json: dir.join(format!("cli_study_{tag}.json")),
        csv: dir.join(format!("cli_study_{tag}.csv")),
        svg: dir.join(format!("cli_study_{tag}.svg")),
    }
}

fn study(out: &Outputs, seed: &str, extra: &[&str]) -> Output {
    let result = Command::new(env!("CARGO_BIN_EXE_wahbad"))
        .args([
            "study",
            "--n",
            "12,30",
            "--outliers",
            "0,0.3",
            "--trials",
            "12",
        ])
        .args([
            "--sigma-deg",
            "0.05",
            "--methods",
            "ls,gnc-tls",
            "--seed",
            seed,
        ])
        .arg("--json")
        .arg(&out.json)
        .arg("--csv")
        .arg(&out.csv)
        .arg("--svg")
        .arg(&out.svg)
        .args(extra)
        .output()
        .expect("start wahbad");
    assert!(
        result.status.success(),
        "exit {:?}: {}",
        result.status,
        String::from_utf8_lossy(&result.stderr)
    );
    result
}

fn rows(path: &Path) -> Vec<Value> {
    let doc: Value = serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap();
    let top: Vec<&String> = doc.as_object().unwrap().keys().collect();
    assert_eq!(top, ["rows"]);
    doc["rows"].as_array().unwrap().clone()
}

#[test]
fn small_study_writes_json_csv_and_svg() {
    let out = outputs("small");
    study(&out, "7", &[]);

    let rows = rows(&out.json);
    // 2 sizes × 2 shares × (ls, gnc-tls, ls-inliers added as the yardstick).
    assert_eq!(rows.len(), 12);
    let mut expected = COLUMNS.to_vec();
    expected.sort_unstable();
    for row in &rows {
        let mut keys: Vec<&str> = row
            .as_object()
            .unwrap()
            .keys()
            .map(String::as_str)
            .collect();
        keys.sort_unstable();
        assert_eq!(keys, expected);
        assert_eq!(row["trials"], 12);
        let success = row["success_rate"].as_f64().unwrap();
        assert!((0.0..=1.0).contains(&success));
        assert!(
            row["median_error_over_crb"].as_f64().unwrap()
                <= row["p95_error_over_crb"].as_f64().unwrap()
        );
    }
    let find = |method: &str, n: u64, share: f64| {
        rows.iter()
            .find(|r| r["method"] == method && r["n"] == n && r["outlier_share"] == share)
            .unwrap_or_else(|| panic!("no row {method} {n} {share}"))
    };
    // Without outliers least squares is the yardstick itself (same trials):
    // identical figures, and a typical error of about one CRB.
    let ls = find("ls", 30, 0.0);
    let yardstick = find("ls-inliers", 30, 0.0);
    assert_eq!(
        ls["median_error_over_crb"],
        yardstick["median_error_over_crb"]
    );
    let ratio = ls["median_error_over_crb"].as_f64().unwrap();
    assert!(ratio > 0.3 && ratio < 3.0, "{ratio}");
    // With 30 % random outliers plain least squares fails every trial.
    assert_eq!(find("ls", 30, 0.3)["success_rate"], 0.0);

    let csv = std::fs::read_to_string(&out.csv).unwrap();
    let lines: Vec<&str> = csv.lines().collect();
    assert_eq!(lines[0], COLUMNS.join(","));
    assert_eq!(lines.len(), 13);
    assert!(lines[1..]
        .iter()
        .all(|l| l.split(',').count() == COLUMNS.len()));

    check_svg(&std::fs::read_to_string(&out.svg).unwrap());
}

/// Parses the whole document with quick-xml and checks its shape: one `svg`
/// root, balanced elements, well-formed attributes, a panel pair per size.
fn check_svg(text: &str) {
    let mut reader = Reader::from_str(text);
    let mut depth = 0usize;
    let mut roots = Vec::new();
    let mut polylines = 0;
    let mut texts = Vec::new();
    loop {
        let event = reader
            .read_event()
            .unwrap_or_else(|e| panic!("SVG not well-formed at {}: {e}", reader.error_position()));
        match event {
            Event::Start(ref e) | Event::Empty(ref e) => {
                let name = e.name().as_ref().to_string();
                for attr in e.attributes() {
                    attr.expect("well-formed attribute");
                }
                if depth == 0 {
                    roots.push(name.clone());
                }
                if name == "polyline" {
                    polylines += 1;
                }
                // `<x>` opens an element; `<x/>` (Event::Empty) does not.
                if matches!(event, Event::Start(_)) {
                    depth += 1;
                }
            }
            Event::End(_) => depth -= 1,
            Event::Text(t) => texts.push(t.xml_content(XmlVersion::Implicit1_0).into_owned()),
            // Only the five predefined XML entities are legal without a DTD.
            Event::GeneralRef(r) => {
                let name = r.xml_content(XmlVersion::Implicit1_0).into_owned();
                assert!(
                    ["amp", "lt", "gt", "quot", "apos"].contains(&name.as_str()),
                    "&{name};"
                );
            }
            Event::Eof => break,
            _ => {}
        }
    }
    assert_eq!(depth, 0, "unbalanced elements");
    assert_eq!(roots, ["svg"]);
    // 3 methods × 2 sizes × 2 panels.
    assert_eq!(polylines, 12);
    let all = texts.join("|");
    for label in ["N = 12", "N = 30", "outlier share", "ls-inliers", "gnc-tls"] {
        assert!(all.contains(label), "missing label {label}");
    }
}

fn without_times(mut rows: Vec<Value>) -> Vec<Value> {
    for row in &mut rows {
        // Wall-clock time is the one figure that is not reproducible.
        row.as_object_mut().unwrap().remove("median_time_us");
    }
    rows
}

#[test]
fn results_do_not_depend_on_the_thread_count() {
    let one = outputs("threads1");
    let two = outputs("threads2");
    study(
        &one,
        "7",
        &["--threads", "1", "--outlier-mode", "structured"],
    );
    study(
        &two,
        "7",
        &["--threads", "2", "--outlier-mode", "structured"],
    );
    let (a, b) = (
        without_times(rows(&one.json)),
        without_times(rows(&two.json)),
    );
    assert_eq!(a, b);
    // And a different seed gives different trials (the check above can fail).
    let other = outputs("seed8");
    study(
        &other,
        "8",
        &["--threads", "2", "--outlier-mode", "structured"],
    );
    assert_ne!(a, without_times(rows(&other.json)));
}

#[test]
fn bad_flags_exit_2() {
    for flags in [
        &["--outliers", "1.2"][..],
        &["--n", "1"],
        &["--methods", "ls,newton"],
        &["--sigma-deg", "-1"],
        &["--threads", "0"],
        &["--outlier-mode", "sideways"],
    ] {
        let out = Command::new(env!("CARGO_BIN_EXE_wahbad"))
            .args(["study", "--trials", "2"])
            .args(flags)
            .output()
            .unwrap();
        assert_eq!(
            out.status.code(),
            Some(2),
            "{flags:?}: {}",
            String::from_utf8_lossy(&out.stderr)
        );
        assert!(!out.stderr.is_empty());
    }
}
