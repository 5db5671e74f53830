//! Soak: `wahbad serve` fed by the simulator library over TCP at a high rate,
//! in real time, for `WAHBAD_SOAK_SECS` seconds (default 8 here so the
//! ordinary test run stays short; `scripts/soak.sh` runs 600 by default).
//!
//! Sampled: the daemon's VmRSS every second and its `status` counters every
//! five. Fails when
//! - memory grows: after a warm-up (the first tenth of the run, at most 30 s),
//!   the median RSS of the last quarter of the samples exceeds the median of
//!   the first quarter × 1.2 + 2048 kB;
//! - counters disagree: at the end, messages sent ≠ accepted + rejected
//!   (every message sent is an obs or rate; truth is off), or `dropped` ≠ 0;
//! - an epoch is missing: the subscriber's solutions are not consecutive
//!   multiples of the period P (100 ms), or it is sent `lagged`.

mod faults_support;
mod serve_support;

use std::io::Write;
use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};
use std::sync::Arc;
use std::time::{Duration, Instant};

use faults_support::{rss_kb, status, status_until};
use serve_support::{Client, Daemon};
use wahbad::simulate::{Scenario, Simulator};
use wahbad_protocol::{encode_frame_into, Hello, Message, Role};

const PERIOD_NS: i64 = 100_000_000;

fn median(values: &[u64]) -> u64 {
    let mut sorted = values.to_vec();
    sorted.sort_unstable();
    sorted[sorted.len() / 2]
}

#[test]
fn soak_memory_counters_and_epochs_hold_steady() {
    let secs: u64 = std::env::var("WAHBAD_SOAK_SECS")
        .ok()
        .and_then(|s| s.parse().ok())
        .unwrap_or(8);
    let mut daemon = Daemon::start(&["--period-ms", "100", "--span-ms", "1000"]);
    let pid = daemon.child.id();

    let mut sub = Client::tcp(daemon.tcp);
    sub.send(&Message::Hello(Hello {
        version: 1,
        role: Role::Subscriber,
        name: Some("soak".into()),
        token: None,
        verdicts: Some(false),
    }));
    assert!(matches!(
        sub.recv(Duration::from_secs(10)),
        Some(Message::Welcome(_))
    ));
    let subscriber = std::thread::spawn(move || {
        let mut epochs: Vec<i64> = Vec::new();
        let mut lagged = 0u64;
        while let Some(msg) = sub.recv(Duration::from_secs(15)) {
            match msg {
                Message::Solution(s) => epochs.push(s.t),
                Message::Lagged(l) => lagged += l.skipped,
                Message::Alert(_) => {}
                Message::Error(err) => {
                    assert_eq!(err.code, "shutdown");
                    break;
                }
                other => panic!("unexpected {other:?}"),
            }
        }
        (epochs, lagged)
    });

    // A busy bench: star camera 50 Hz × 8 stars, gyro 1 kHz, magnetometer
    // and sun sensor 50 Hz each: about 1,500 messages per second.
    let mut scenario = Scenario::nominal();
    scenario.duration_s = secs as f64 + 120.0;
    scenario.truth.enabled = false;
    scenario.star_cam.rate_hz = 50.0;
    scenario.gyro.rate_hz = 1000.0;
    scenario.mag.rate_hz = 50.0;
    scenario.sun.rate_hz = 50.0;
    // Offsets must stay within one period of the faster rates.
    scenario.star_cam.offset_s = 0.002;
    scenario.gyro.offset_s = 0.0;
    scenario.mag.offset_s = 0.004;
    scenario.sun.offset_s = 0.006;
    let simulator = Simulator::new(&scenario).expect("valid scenario");
    let mut source = Client::tcp(daemon.tcp);
    assert!(matches!(
        source.hello(Role::Source, None),
        Message::Welcome(_)
    ));
    let sent = Arc::new(AtomicU64::new(0));
    let stop = Arc::new(AtomicBool::new(false));
    let (sent_by_source, stop_source) = (sent.clone(), stop.clone());
    let streamer = std::thread::spawn(move || {
        let start = Instant::now();
        let mut burst = Vec::with_capacity(64 * 1024);
        for msg in simulator {
            let t = match &msg {
                Message::Obs(o) => o.t,
                Message::Rate(r) => r.t,
                _ => continue,
            };
            // Real time: hold each message until its data time has come.
            let due = Duration::from_nanos(t.max(0) as u64);
            let now = start.elapsed();
            if due > now {
                source.stream.write_all(&burst).expect("source write");
                burst.clear();
                if stop_source.load(Ordering::Relaxed) {
                    break;
                }
                std::thread::sleep(due - now);
            }
            encode_frame_into(&msg, &mut burst);
            sent_by_source.fetch_add(1, Ordering::Relaxed);
        }
        source.stream.write_all(&burst).expect("source write");
        source
    });

    let start = Instant::now();
    let mut rss = Vec::new();
    let mut last_status = Instant::now();
    while start.elapsed() < Duration::from_secs(secs) {
        std::thread::sleep(Duration::from_secs(1));
        rss.push(rss_kb(pid));
        if last_status.elapsed() >= Duration::from_secs(5) {
            last_status = Instant::now();
            let report = status(daemon.tcp);
            let sent_now = sent.load(Ordering::Relaxed);
            assert!(
                report.accepted + report.rejected <= sent_now,
                "more counted than sent: {report:?} vs {sent_now}"
            );
            assert_eq!(report.dropped, 0, "{report:?}");
        }
    }
    stop.store(true, Ordering::Relaxed);
    let _source = streamer.join().unwrap();
    let n_sent = sent.load(Ordering::Relaxed);
    let report = status_until(daemon.tcp, Duration::from_secs(60), |r| {
        r.accepted + r.rejected >= n_sent
    });
    let (exit, stderr) = daemon.stop();
    assert!(exit.success(), "exit {exit:?}: {stderr}");
    let (epochs, lagged) = subscriber.join().unwrap();

    let elapsed = start.elapsed().as_secs_f64();
    let warm = (rss.len() / 10).min(30);
    let steady = &rss[warm..];
    let quarter = (steady.len() / 4).max(1);
    let first = median(&steady[..quarter]);
    let last = median(&steady[steady.len() - quarter..]);
    eprintln!(
        "measured: soak {elapsed:.0} s, {n_sent} messages ({:.0}/s), accepted {}, rejected {}, dropped {}, \
         epochs {} seen {}, RSS first sample {} kB, after warm-up {} kB, end {} kB, \
         first-quarter median {first} kB, last-quarter median {last} kB",
        n_sent as f64 / elapsed,
        report.accepted,
        report.rejected,
        report.dropped,
        report.epochs,
        epochs.len(),
        rss[0],
        steady[0],
        rss[rss.len() - 1],
    );
    assert_eq!(
        report.accepted + report.rejected,
        n_sent,
        "counters disagree with sent"
    );
    assert_eq!(report.dropped, 0);
    assert_eq!(
        lagged, 0,
        "the subscriber was sent lagged: epochs lost to it"
    );
    assert!(
        epochs.len() as u64 >= secs * 9,
        "only {} epochs in {secs} s",
        epochs.len()
    );
    for pair in epochs.windows(2) {
        assert_eq!(
            pair[1] - pair[0],
            PERIOD_NS,
            "epoch missing between {} and {}",
            pair[0],
            pair[1]
        );
    }
    assert!(
        last as f64 <= first as f64 * 1.2 + 2048.0,
        "memory grew: first-quarter median {first} kB, last-quarter median {last} kB"
    );
}
