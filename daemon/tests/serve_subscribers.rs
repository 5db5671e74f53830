//! A subscriber that never reads must not delay another subscriber's
//! solutions, and must end up disconnected. Real binary, loopback TCP.

mod serve_support;

use std::time::{Duration, Instant};

use serve_support::{Client, Daemon, SceneSource};
use wahbad_protocol::{Message, Role, Status};

#[test]
fn a_stalled_subscriber_neither_delays_others_nor_stays_connected() {
    let latency_ms = 10;
    let mut daemon = Daemon::start(&[
        "--period-ms",
        "10",
        "--span-ms",
        "400",
        "--latency-ms",
        &latency_ms.to_string(),
        "--subscriber-queue",
        "64",
        "--subscriber-timeout-ms",
        "1000",
    ]);
    // The stalled one: hello, then never another read.
    let mut stalled = Client::tcp(daemon.tcp);
    assert!(matches!(
        stalled.hello(Role::Subscriber, None),
        Message::Welcome(_)
    ));
    // The reading one asks for no verdicts, so the test keeps up easily.
    let mut good = Client::tcp(daemon.tcp);
    let mut hello = serve_support::hello(Role::Subscriber, None);
    if let Message::Hello(hello) = &mut hello {
        hello.verdicts = Some(false);
    }
    good.send(&hello);
    assert!(matches!(
        good.recv(Duration::from_secs(10)),
        Some(Message::Welcome(_))
    ));

    // Bench time is this test's clock since `start`, so a solution's delay is
    // its arrival time minus the moment its epoch could close (E + L).
    let start = Instant::now();
    let source = SceneSource::start(daemon.tcp, start, Duration::from_millis(10));

    // Delays while the stalled subscriber is connected, and after (the control).
    let mut delays_ms = Vec::new();
    let mut control_ms = Vec::new();
    let mut disconnected_after = None;
    let mut last_status = Instant::now();
    let deadline = start + Duration::from_secs(60);
    while disconnected_after.is_none() || control_ms.len() < 100 {
        assert!(
            Instant::now() < deadline,
            "the stalled subscriber was never disconnected"
        );
        match good.recv(Duration::from_secs(5)) {
            Some(Message::Solution(solution)) => {
                let due_ns = solution.t + latency_ms * 1_000_000;
                let delay = start.elapsed().as_nanos() as i64 - due_ns;
                let phase = if disconnected_after.is_none() {
                    &mut delays_ms
                } else {
                    &mut control_ms
                };
                phase.push(delay as f64 * 1e-6);
            }
            Some(Message::Status(Status {
                report: Some(report),
            })) => {
                if report.subscribers == 1 && disconnected_after.is_none() {
                    disconnected_after = Some(start.elapsed());
                }
            }
            Some(Message::Lagged(lagged)) => {
                panic!("the reading subscriber lagged by {}", lagged.skipped)
            }
            Some(_) => {}
            None => panic!("the reading subscriber got nothing for 5 s"),
        }
        if last_status.elapsed() > Duration::from_millis(250) {
            good.send(&Message::Status(Status::default()));
            last_status = Instant::now();
        }
    }
    source.signal();
    let (status, stderr) = daemon.stop();
    source.stop();
    assert!(status.success(), "{stderr}");
    assert!(
        stderr.contains("subscriber disconnected: it stopped reading"),
        "{stderr}"
    );
    let (median, p99, max) = summary(&mut delays_ms);
    let (c_median, c_p99, c_max) = summary(&mut control_ms);
    eprintln!(
        "measured: with the stalled subscriber connected ({} solutions): delay after E+L median {median:.1} ms, \
         p99 {p99:.1} ms, max {max:.1} ms; after it was dropped ({} solutions): median {c_median:.1} ms, \
         p99 {c_p99:.1} ms, max {c_max:.1} ms; dropped {:.2} s after start",
        delays_ms.len(),
        control_ms.len(),
        disconnected_after.unwrap().as_secs_f64()
    );
    assert!(
        delays_ms.len() >= 50,
        "too few solutions while stalled: {}",
        delays_ms.len()
    );
    // Generous bound: a stalled peer must not hold the feed back by anything
    // like its 1 s write timeout.
    assert!(
        max < 500.0,
        "max delay {max:.1} ms while a subscriber was stalled"
    );
    drop(stalled);
}

/// Median, 99th percentile and maximum.
fn summary(values: &mut [f64]) -> (f64, f64, f64) {
    values.sort_by(f64::total_cmp);
    let n = values.len();
    (values[n / 2], values[n * 99 / 100], values[n - 1])
}
