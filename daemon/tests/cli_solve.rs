//! `wahbad solve` run as a real process: worked examples, the output contract,
//! bad input and exit codes.

use std::io::Write as _;
use std::process::{Command, Output, Stdio};

use serde_json::{json, Value};

fn wahbad_solve(input: &str, flags: &[&str]) -> Output {
    let mut child = Command::new(env!("CARGO_BIN_EXE_wahbad"))
        .arg("solve")
        .args(flags)
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("start wahbad");
    // A run that fails on its arguments may exit before reading stdin: the
    // broken pipe is then expected, the exit status tells the rest.
    match child.stdin.take().unwrap().write_all(input.as_bytes()) {
        Err(err) if err.kind() != std::io::ErrorKind::BrokenPipe => panic!("write stdin: {err}"),
        _ => {}
    }
    child.wait_with_output().unwrap()
}

fn stderr(out: &Output) -> String {
    String::from_utf8_lossy(&out.stderr).into_owned()
}

fn solved(input: &Value, flags: &[&str]) -> Value {
    let out = wahbad_solve(&input.to_string(), flags);
    assert!(
        out.status.success(),
        "exit {:?}, stderr: {}",
        out.status,
        stderr(&out)
    );
    serde_json::from_slice(&out.stdout).expect("stdout is JSON")
}

/// 90° about z. By hand (protocol formula, w = z = √½, x = y = 0):
/// A = [[0, −1, 0], [1, 0, 0], [0, 0, 1]], so A x = y, A y = −x, A z = z,
/// and q = [cos 45°, 0, 0, sin 45°]. Vectors given at odd lengths on purpose
/// (the command normalises them).
fn quarter_turn_about_z() -> Value {
    json!({"pairs": [
        {"b": [0.0, 2.0, 0.0], "r": [3.0, 0.0, 0.0], "sigma": 0.01, "sensor": "sun"},
        {"b": [-1.0, 0.0, 0.0], "r": [0.0, 0.5, 0.0], "sigma": 0.01, "sensor": "star.1"},
        {"b": [0.0, 0.0, 7.0], "r": [0.0, 0.0, 1.0], "sigma": 0.01}
    ]})
}

#[test]
fn quarter_turn_about_z_is_recovered_by_every_method() {
    let half = std::f64::consts::FRAC_1_SQRT_2;
    for method in [
        "auto",
        "svd",
        "q-method",
        "ls",
        "lud",
        "gnc-tls",
        "consensus",
    ] {
        let out = solved(&quarter_turn_about_z(), &["--method", method]);
        let q: Vec<f64> = out["q"]
            .as_array()
            .unwrap()
            .iter()
            .map(|v| v.as_f64().unwrap())
            .collect();
        let expected = [half, 0.0, 0.0, half];
        for (got, want) in q.iter().zip(expected) {
            assert!((got - want).abs() < 1e-12, "{method}: q = {q:?}");
        }
        assert_eq!(out["status"], "ok", "{method}");
        assert_eq!(out["inlier_fraction"], 1.0, "{method}");
        let verdicts = out["verdicts"].as_array().unwrap();
        assert_eq!(verdicts.len(), 3);
        for (idx, v) in verdicts.iter().enumerate() {
            assert_eq!(v["index"], idx);
            assert!(v["residual"].as_f64().unwrap() < 1e-12, "{method}: {v}");
            assert_eq!(v["inlier"], true);
        }
    }
}

#[test]
fn output_has_exactly_the_documented_keys_and_covariance() {
    let out = wahbad_solve(&quarter_turn_about_z().to_string(), &[]);
    assert!(out.status.success(), "{}", stderr(&out));
    let text = String::from_utf8(out.stdout).unwrap();
    // Key order as documented: q, cov, status, method, iterations, inlier_fraction, verdicts.
    let order = [
        "\"q\"",
        "\"cov\"",
        "\"status\"",
        "\"method\"",
        "\"iterations\"",
        "\"inlier_fraction\"",
        "\"verdicts\"",
    ];
    let positions: Vec<usize> = order.iter().map(|k| text.find(k).unwrap()).collect();
    assert!(positions.windows(2).all(|w| w[0] < w[1]), "{text}");

    let doc: Value = serde_json::from_str(&text).unwrap();
    let mut keys: Vec<&str> = doc
        .as_object()
        .unwrap()
        .keys()
        .map(String::as_str)
        .collect();
    keys.sort_unstable();
    assert_eq!(
        keys,
        [
            "cov",
            "inlier_fraction",
            "iterations",
            "method",
            "q",
            "status",
            "verdicts"
        ]
    );
    let verdict_keys: Vec<&str> = doc["verdicts"][0]
        .as_object()
        .unwrap()
        .keys()
        .map(String::as_str)
        .collect();
    assert_eq!(verdict_keys.len(), 3);
    assert!(doc["iterations"].is_u64());
    assert!(doc["method"].is_string());

    // By hand: b = y, −x, z with σ = 0.01 give J = σ⁻² Σ (I − b bᵀ) = σ⁻²·diag(2, 2, 2),
    // so P = (σ²/2)·I = 5e-5·I, row-major.
    let cov: Vec<f64> = doc["cov"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v.as_f64().unwrap())
        .collect();
    assert_eq!(cov.len(), 9);
    for (k, c) in cov.iter().enumerate() {
        let want = if k % 4 == 0 { 5e-5 } else { 0.0 };
        assert!((c - want).abs() < 1e-12, "cov[{k}] = {c}");
    }
}

#[test]
fn axis_permutation_gives_the_positive_scalar_quaternion() {
    // 120° about (1,1,1)/√3 permutes the axes: x → y, y → z, z → x.
    // q = [cos 60°, sin 60°/√3 · (1,1,1)] = [0.5, 0.5, 0.5, 0.5] (w > 0 branch).
    let input = json!({"pairs": [
        {"b": [0, 1, 0], "r": [1, 0, 0], "sigma": 0.001},
        {"b": [0, 0, 1], "r": [0, 1, 0], "sigma": 0.001},
        {"b": [1, 0, 0], "r": [0, 0, 1], "sigma": 0.001}
    ]});
    let out = solved(&input, &["--method", "svd"]);
    let q: Vec<f64> = out["q"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v.as_f64().unwrap())
        .collect();
    for c in &q {
        assert!((c - 0.5).abs() < 1e-12, "{q:?}");
    }
}

#[test]
fn bad_pair_names_the_pair_and_field_and_exits_2() {
    let input = json!({"pairs": [
        {"b": [1, 0, 0], "r": [1, 0, 0], "sigma": 0.01},
        {"b": [0, 1, 0], "r": [0, 1, 0], "sigma": 0.01},
        {"b": [0, 0, 1], "r": [0, 0, 1], "sigma": 0.01},
        {"b": [0, 0, 0], "r": [1, 0, 0], "sigma": 0.01}
    ]});
    let out = wahbad_solve(&input.to_string(), &[]);
    assert_eq!(out.status.code(), Some(2));
    assert!(
        stderr(&out).contains("pair 3: field `b`: zero vector"),
        "{}",
        stderr(&out)
    );
    assert!(out.stdout.is_empty());

    let cases = [
        (
            json!({"pairs": [{"b": [1, 0, 0], "r": "x", "sigma": 0.01}]}),
            "pair 0: field `r`",
        ),
        (
            json!({"pairs": [{"b": [1, 0, 0], "r": [1, 0, 0], "sigma": 4.0}]}),
            "pair 0: field `sigma`",
        ),
        (
            json!({"pairs": [{"b": [1, 0, 0], "r": [1, 0, 0]}]}),
            "pair 0: field `sigma`: missing",
        ),
        (
            json!({"pairs": [{"b": [1, 0, 0], "r": [1, 0, 0], "sigma": 0.1, "sensor": 5}]}),
            "pair 0: field `sensor`",
        ),
        (json!({"pears": []}), "missing key `pairs`"),
    ];
    for (input, expected) in cases {
        let out = wahbad_solve(&input.to_string(), &[]);
        assert_eq!(out.status.code(), Some(2), "{input}");
        assert!(stderr(&out).contains(expected), "{input}: {}", stderr(&out));
    }
}

#[test]
fn default_sigma_flag_fills_missing_sigmas() {
    let mut input = quarter_turn_about_z();
    for pair in input["pairs"].as_array_mut().unwrap() {
        pair.as_object_mut().unwrap().remove("sigma");
    }
    let out = solved(&input, &["--sigma", "0.01"]);
    assert_eq!(out["status"], "ok");
}

#[test]
fn unreadable_file_and_bad_json_exit_2() {
    let out = Command::new(env!("CARGO_BIN_EXE_wahbad"))
        .args(["solve", "/nonexistent/pairs.json"])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(
        stderr(&out).contains("/nonexistent/pairs.json"),
        "{}",
        stderr(&out)
    );

    let out = wahbad_solve("{\"pairs\": [", &[]);
    assert_eq!(out.status.code(), Some(2));
    assert!(stderr(&out).contains("not valid JSON"), "{}", stderr(&out));

    let out = wahbad_solve(&quarter_turn_about_z().to_string(), &["--method", "newton"]);
    assert_eq!(out.status.code(), Some(2));
}

#[test]
fn reads_a_file_argument() {
    let path = std::path::Path::new(env!("CARGO_TARGET_TMPDIR")).join("cli_solve_pairs.json");
    std::fs::write(&path, quarter_turn_about_z().to_string()).unwrap();
    let out = Command::new(env!("CARGO_BIN_EXE_wahbad"))
        .arg("solve")
        .arg(&path)
        .output()
        .unwrap();
    assert!(out.status.success(), "{}", stderr(&out));
    let doc: Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(doc["status"], "ok");
}

#[test]
fn too_few_or_parallel_pairs_report_a_status_not_an_error() {
    let one = json!({"pairs": [{"b": [1, 0, 0], "r": [0, 1, 0], "sigma": 0.01}]});
    let out = solved(&one, &[]);
    assert_eq!(out["status"], "insufficient");

    let parallel = json!({"pairs": [
        {"b": [0, 0, 1], "r": [1, 0, 0], "sigma": 0.01},
        {"b": [0, 0, 2], "r": [3, 0, 0], "sigma": 0.02},
        {"b": [0, 0, 1], "r": [1, 0, 0], "sigma": 0.01}
    ]});
    let out = solved(&parallel, &["--method", "svd"]);
    assert_eq!(out["status"], "unobservable");
    let cov: Vec<f64> = out["cov"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v.as_f64().unwrap())
        .collect();
    assert!(cov.iter().all(|c| c.is_finite()));
    assert!(cov[0].max(cov[4]).max(cov[8]) >= 1e10, "{cov:?}");
}

#[test]
fn low_inlier_fraction_is_degraded() {
    // Five pairs of the quarter turn about z and one pair 90° off: the robust
    // solve keeps 5 of 6, below an inlier level of 0.9.
    let input = json!({"pairs": [
        {"b": [0, 1, 0], "r": [1, 0, 0], "sigma": 0.001},
        {"b": [-1, 0, 0], "r": [0, 1, 0], "sigma": 0.001},
        {"b": [0, 0, 1], "r": [0, 0, 1], "sigma": 0.001},
        {"b": [-1, 1, 0], "r": [1, 1, 0], "sigma": 0.001},
        {"b": [0, 1, 1], "r": [1, 0, 1], "sigma": 0.001},
        {"b": [1, 0, 0], "r": [1, 0, 0], "sigma": 0.001}
    ]});
    let out = solved(&input, &["--method", "gnc-tls", "--inlier-min", "0.9"]);
    assert_eq!(out["status"], "degraded");
    assert!((out["inlier_fraction"].as_f64().unwrap() - 5.0 / 6.0).abs() < 1e-12);
    assert_eq!(out["verdicts"][5]["inlier"], false);
    let out = solved(&input, &["--method", "gnc-tls"]);
    assert_eq!(out["status"], "ok");
}
