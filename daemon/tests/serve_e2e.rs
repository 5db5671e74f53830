//! End to end with the Python examples: `examples/python/bench_source.py`
//! streams a static three-sensor scene with a known attitude (planted
//! outliers, then a burst of them) into the real daemon; the Python
//! `subscriber.py --json` records the feed. Checks: attitude error within
//! 3σ of `cov`, planted outliers flagged, and an `inlier_fraction` alert
//! raised during the burst and cleared after it.

mod serve_support;

use std::collections::{HashMap, HashSet};
use std::process::{Command, Stdio};
use std::time::Duration;

use serve_support::{python, python_msgpack_ready, repo_root, Daemon};

const Q: [f64; 4] = [0.9, 0.1, -0.3, 0.3];
const BURST: (f64, f64) = (4.0, 6.0);

/// Attitude matrix of the protocol (maps reference to body).
fn attitude(q: [f64; 4]) -> [[f64; 3]; 3] {
    let n = q.iter().map(|c| c * c).sum::<f64>().sqrt();
    let [w, x, y, z] = q.map(|c| c / n);
    [
        [
            1.0 - 2.0 * (y * y + z * z),
            2.0 * (x * y - w * z),
            2.0 * (x * z + w * y),
        ],
        [
            2.0 * (x * y + w * z),
            1.0 - 2.0 * (x * x + z * z),
            2.0 * (y * z - w * x),
        ],
        [
            2.0 * (x * z - w * y),
            2.0 * (y * z + w * x),
            1.0 - 2.0 * (x * x + y * y),
        ],
    ]
}

/// δθ with A_true ≈ (I − [δθ×]) A_est (protocol, Conventions): from
/// M = A_true A_estᵀ ≈ I − [δθ×].
fn error_vector(q_true: [f64; 4], q_est: [f64; 4]) -> [f64; 3] {
    let (a, b) = (attitude(q_true), attitude(q_est));
    let mut m = [[0.0; 3]; 3];
    for i in 0..3 {
        for j in 0..3 {
            m[i][j] = (0..3).map(|k| a[i][k] * b[j][k]).sum();
        }
    }
    [
        (m[1][2] - m[2][1]) / 2.0,
        (m[2][0] - m[0][2]) / 2.0,
        (m[0][1] - m[1][0]) / 2.0,
    ]
}

#[test]
fn python_source_and_subscriber_end_to_end() {
    if !python_msgpack_ready() {
        return;
    }
    let examples = repo_root().join("examples/python");
    let mut daemon = Daemon::start(&["--period-ms", "100", "--hold-ms", "300"]);
    let addr = daemon.tcp.to_string();
    let subscriber = Command::new(python())
        .arg(examples.join("subscriber.py"))
        .args(["--addr", &addr, "--json"])
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("start subscriber.py");
    std::thread::sleep(Duration::from_millis(300));
    let burst = format!("{}:{}", BURST.0, BURST.1);
    let q_args: Vec<String> = Q.iter().map(|c| c.to_string()).collect();
    let source = Command::new(python())
        .arg(examples.join("bench_source.py"))
        .args([
            "--addr",
            &addr,
            "--duration",
            "9",
            "--speed",
            "4",
            "--outlier-every",
            "11",
        ])
        .args(["--burst", &burst, "--q"])
        .args(&q_args)
        .output()
        .expect("run bench_source.py");
    assert!(
        source.status.success(),
        "{}",
        String::from_utf8_lossy(&source.stderr)
    );
    let planted: serde_json::Value = serde_json::from_slice(&source.stdout).unwrap();
    let planted: HashSet<(String, u64)> = planted["planted"]
        .as_array()
        .unwrap()
        .iter()
        .map(|p| (p[0].as_str().unwrap().to_string(), p[1].as_u64().unwrap()))
        .collect();
    std::thread::sleep(Duration::from_millis(500));
    let (status, stderr) = daemon.stop();
    assert!(status.success(), "{stderr}");
    let feed = subscriber.wait_with_output().unwrap();
    let messages: Vec<serde_json::Value> = String::from_utf8_lossy(&feed.stdout)
        .lines()
        .map(|line| serde_json::from_str(line).unwrap())
        .collect();

    // 3σ: every axis of every `ok` epoch whose window misses the burst
    // (window span 1 s by default).
    let (mut n_axes, mut n_within, mut n_ok) = (0, 0, 0);
    let mut verdicts: HashMap<(String, u64), Vec<bool>> = HashMap::new();
    for msg in messages.iter().filter(|m| m["type"] == "solution") {
        for v in msg["verdicts"].as_array().unwrap() {
            let key = (
                v["sensor"].as_str().unwrap().to_string(),
                v["seq"].as_u64().unwrap(),
            );
            verdicts
                .entry(key)
                .or_default()
                .push(v["inlier"].as_bool().unwrap());
        }
        let t = msg["t"].as_i64().unwrap() as f64 * 1e-9;
        if msg["status"] != "ok" || (t > BURST.0 && t < BURST.1 + 1.0) {
            continue;
        }
        n_ok += 1;
        let q: Vec<f64> = msg["q"]
            .as_array()
            .unwrap()
            .iter()
            .map(|v| v.as_f64().unwrap())
            .collect();
        let cov: Vec<f64> = msg["cov"]
            .as_array()
            .unwrap()
            .iter()
            .map(|v| v.as_f64().unwrap())
            .collect();
        let err = error_vector(Q, [q[0], q[1], q[2], q[3]]);
        for axis in 0..3 {
            n_axes += 1;
            if err[axis].abs() <= 3.0 * cov[axis * 4].sqrt() {
                n_within += 1;
            }
        }
    }
    assert!(n_ok >= 40, "only {n_ok} ok epochs outside the burst");
    // A Gaussian stays within 3σ 99.73 % of the time (common knowledge of
    // the normal distribution); windows overlap, so allow a little slack.
    let share = n_within as f64 / n_axes as f64;
    assert!(
        share >= 0.97,
        "only {:.1} % of axes within 3σ",
        share * 100.0
    );

    // Planted outliers: each one seen is flagged, in every window it is in.
    let seen: Vec<_> = planted
        .iter()
        .filter(|p| verdicts.contains_key(*p))
        .collect();
    assert!(
        seen.len() * 10 >= planted.len() * 9,
        "{} of {} planted seen",
        seen.len(),
        planted.len()
    );
    for key in &seen {
        assert!(
            verdicts[*key].iter().all(|inlier| !inlier),
            "planted {key:?} taken as inlier"
        );
    }

    // The burst raises `inlier_fraction` and its end clears it.
    let alerts: Vec<_> = messages
        .iter()
        .filter(|m| m["type"] == "alert" && m["kind"] == "inlier_fraction")
        .collect();
    let raised = alerts
        .iter()
        .find(|a| a["state"] == "raised")
        .expect("no raised alert");
    let cleared = alerts
        .iter()
        .find(|a| a["state"] == "cleared")
        .expect("no cleared alert");
    let t_raised = raised["t"].as_i64().unwrap() as f64 * 1e-9;
    let t_cleared = cleared["t"].as_i64().unwrap() as f64 * 1e-9;
    assert!(
        t_raised > BURST.0 && t_raised < BURST.1,
        "raised at {t_raised}"
    );
    assert!(
        t_cleared > BURST.1 && t_cleared < 9.0,
        "cleared at {t_cleared}"
    );
    assert!(
        stderr.contains("alert raised"),
        "alerts are logged as warnings"
    );
    eprintln!(
        "measured: {n_ok} ok epochs, {:.2} % of axes within 3σ; {} planted outliers flagged; \
         inlier_fraction raised at {t_raised:.2} s, cleared at {t_cleared:.2} s (burst {}–{} s)",
        share * 100.0,
        seen.len(),
        BURST.0,
        BURST.1
    );
}
