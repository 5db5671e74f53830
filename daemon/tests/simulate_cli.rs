//! `wahbad simulate` through the real binary: `--out` writes a log that the
//! recorder's reader and the protocol decoder take back (header, matching
//! configuration, every message, truth, the final tick, a clean end);
//! `--to` streams into a `wahbad serve` started here, and the daemon's
//! `status` (asked as a subscriber) counts exactly what was sent.

mod serve_support;

use std::collections::HashMap;
use std::process::Command;
use std::time::Duration;

use serve_support::{Client, Daemon, TempDir};
use wahbad::record::{record_input, LogReader, Record};
use wahbad::simulate::{Preset, Scenario, Simulator};
use wahbad_protocol::{Message, Role, Status};

fn wahbad(args: &[&str]) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_wahbad"))
        .args(args)
        .output()
        .expect("run wahbad")
}

/// `"... 120 obs, 200 rate, 20 truth ..."` -> (120, 200, 20).
fn printed_counts(stdout: &str) -> (u64, u64, u64) {
    let grab = |unit: &str| -> u64 {
        let before = stdout
            .split(&format!(" {unit}"))
            .next()
            .unwrap_or_else(|| panic!("no `{unit}` in {stdout:?}"));
        before
            .rsplit(|c: char| !c.is_ascii_digit())
            .next()
            .unwrap()
            .parse()
            .unwrap_or_else(|_| panic!("no count before `{unit}` in {stdout:?}"))
    };
    (grab("obs"), grab("rate"), grab("truth"))
}

#[test]
fn out_writes_a_log_that_reads_back_through_the_decoder() {
    let dir = TempDir::new("sim-out");
    let log = dir.join("run.wlog");
    let out = wahbad(&[
        "simulate",
        "--preset",
        "false_stars",
        "--duration",
        "30",
        "--seed",
        "7",
        "--out",
        log.to_str().unwrap(),
    ]);
    assert!(out.status.success(), "{:?}", out);
    let stdout = String::from_utf8(out.stdout).unwrap();
    let (n_obs, n_rate, n_truth) = printed_counts(&stdout);

    // The same run in-process: the log must hold exactly its messages.
    let mut scenario = Scenario::preset(Preset::FalseStars);
    scenario.duration_s = 30.0;
    scenario.seed = 7;
    let expected: Vec<Message> = Simulator::new(&scenario).unwrap().collect();

    let mut reader = LogReader::open(&log).unwrap();
    let header = reader.header().clone();
    assert_eq!(header.origin, "simulate");
    assert_eq!(header.protocol, wahbad_protocol::PROTOCOL_VERSION);
    let config = header.estimator_config().unwrap();
    // The recorded σ and rates are the simulator's own.
    for setting in scenario.sensor_settings() {
        let sensor = &config.sensors[&setting.name];
        assert_eq!(sensor.expected_rate_hz, Some(setting.rate_hz));
        if setting.kind != wahbad::simulate::SensorKind::Gyro {
            assert_eq!(sensor.sigma, Some(setting.sigma), "{}", setting.name);
        }
    }
    assert_eq!(config.gyro_arw, scenario.gyro.arw_rad_sqrt_s);

    let mut decoded = Vec::new();
    let mut ticks = Vec::new();
    let mut last_recv = i64::MIN;
    let mut ended = false;
    while let Some(record) = reader.next_record().unwrap() {
        match &record {
            Record::Frame { recv_ns, body } => {
                assert!(*recv_ns >= last_recv, "receive times never go back");
                last_recv = *recv_ns;
                decoded.push(wahbad_protocol::decode_body(body).unwrap());
                // And through the same validation the live server uses.
                assert!(record_input(&record).unwrap().is_some());
            }
            Record::Tick { bench_ns, .. } => ticks.push(*bench_ns),
            Record::End { end, .. } => {
                ended = true;
                assert_eq!(end.reason, "finished");
            }
            Record::Datagram { .. } => panic!("simulate writes stream frames only"),
        }
    }
    assert!(ended && reader.ended_cleanly());
    assert!(reader.warnings().is_empty(), "{:?}", reader.warnings());
    assert_eq!(decoded.len(), expected.len());
    assert!(
        decoded == expected,
        "the log holds the simulator's messages, in order"
    );

    let mut by_type: HashMap<&str, u64> = HashMap::new();
    for msg in &decoded {
        *by_type.entry(msg.type_name()).or_default() += 1;
    }
    assert_eq!(by_type.get("obs").copied().unwrap_or(0), n_obs);
    assert_eq!(by_type.get("rate").copied().unwrap_or(0), n_rate);
    assert_eq!(by_type.get("truth").copied().unwrap_or(0), n_truth);
    // Truth at the table encoder's 10 Hz over 30 s.
    assert_eq!(n_truth, 300);
    assert!(n_obs > 0 && n_rate > 0);

    // One final tick, closing the epoch of the newest data plus the latency.
    let newest = decoded
        .iter()
        .filter_map(|msg| match msg {
            Message::Obs(o) => Some(o.t),
            Message::Rate(r) => Some(r.t),
            Message::Truth(t) => Some(t.t),
            _ => None,
        })
        .max()
        .unwrap();
    let period = config.period_ms as i64 * 1_000_000;
    let latency = config.latency_ms as i64 * 1_000_000;
    assert_eq!(ticks.len(), 1);
    assert_eq!(
        ticks[0],
        (newest + period - 1).div_euclid(period) * period + latency
    );
}

#[test]
fn to_streams_into_serve_and_every_input_is_accepted() {
    let daemon = Daemon::start(&[]);
    let addr = daemon.tcp.to_string();
    let out = wahbad(&[
        "simulate",
        "--duration",
        "12",
        "--speed",
        "200",
        "--to",
        &addr,
    ]);
    assert!(out.status.success(), "{:?}", out);
    let stdout = String::from_utf8(out.stdout).unwrap();
    let (n_obs, n_rate, n_truth) = printed_counts(&stdout);
    assert!(stdout.contains("rejected 0"), "{stdout}");
    assert_eq!(n_truth, 120);

    let mut sub = Client::tcp(daemon.tcp);
    assert!(matches!(
        sub.hello(Role::Subscriber, None),
        Message::Welcome(_)
    ));
    sub.send(&Message::Status(Status::request()));
    let report = loop {
        match sub.recv(Duration::from_secs(10)) {
            Some(Message::Status(Status {
                report: Some(report),
            })) => break report,
            Some(_) => continue,
            None => panic!("no status answer"),
        }
    };
    // The daemon counts observations and rates (truth is not an input).
    assert_eq!(report.accepted, n_obs + n_rate);
    assert_eq!(report.rejected, 0);
    assert_eq!(report.dropped, 0);
    assert!(report.epochs >= 100, "{report:?}");
}

#[test]
fn bad_flags_are_usage_errors() {
    let out = wahbad(&["simulate", "--preset", "sunny_day", "--out", "/dev/null"]);
    assert_eq!(out.status.code(), Some(2));
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(stderr.contains("sunny_day"), "{stderr}");
    let out = wahbad(&["simulate", "--duration=-3", "--out", "/dev/null"]);
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("duration_s"));
    // Neither sink given.
    assert_eq!(wahbad(&["simulate"]).status.code(), Some(2));
}
