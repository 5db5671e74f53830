//! Shared by the `faults_*`, `crash_*` and `soak` system tests: status polls,
//! process probes (/proc fd count and RSS) and hand-made observation streams,
//! on top of `serve_support`.

#![allow(dead_code)]

use std::net::SocketAddr;
use std::time::{Duration, Instant};

use wahbad_protocol::{Message, Obs, Role, StatusReport};

use crate::serve_support::{q_unit, rotate, unit, Client, Q_TRUE};

/// Asks the daemon for its counters over a fresh subscriber connection.
pub fn status(addr: SocketAddr) -> StatusReport {
    // `busy` means "try again later" (PROTOCOL.md): the daemon may still be
    // releasing connections a test just dropped.
    let deadline = Instant::now() + Duration::from_secs(10);
    let mut client = loop {
        let mut client = Client::tcp(addr);
        match client.hello(Role::Subscriber, None) {
            Message::Welcome(_) => break client,
            Message::Error(e) if e.code == "busy" && Instant::now() < deadline => {
                std::thread::sleep(Duration::from_millis(50));
            }
            answer => panic!("hello answered {answer:?}"),
        }
    };
    client.send(&Message::Status(wahbad_protocol::Status::request()));
    let deadline = Instant::now() + Duration::from_secs(10);
    while Instant::now() < deadline {
        match client.recv(Duration::from_secs(10)) {
            Some(Message::Status(status)) => {
                return status.report.expect("a status answer carries counters")
            }
            Some(_) => continue,
            None => break,
        }
    }
    panic!("no status answer");
}

/// Polls `status` until `done` holds or `limit` passes; returns the last report.
pub fn status_until(
    addr: SocketAddr,
    limit: Duration,
    done: impl Fn(&StatusReport) -> bool,
) -> StatusReport {
    let deadline = Instant::now() + limit;
    loop {
        let report = status(addr);
        if done(&report) || Instant::now() > deadline {
            return report;
        }
        std::thread::sleep(Duration::from_millis(50));
    }
}

/// Open file descriptors of process `pid`.
pub fn fd_count(pid: u32) -> usize {
    std::fs::read_dir(format!("/proc/{pid}/fd"))
        .expect("read /proc/<pid>/fd")
        .count()
}

/// Resident set size of process `pid`, kB (VmRSS of /proc/<pid>/status).
pub fn rss_kb(pid: u32) -> u64 {
    let text = std::fs::read_to_string(format!("/proc/{pid}/status")).expect("read status");
    text.lines()
        .find_map(|line| line.strip_prefix("VmRSS:"))
        .and_then(|rest| rest.split_whitespace().next())
        .and_then(|kb| kb.parse().ok())
        .expect("VmRSS in /proc/<pid>/status")
}

/// One noise-free observation of reference direction `r` by `sensor`.
pub fn obs(sensor: &str, seq: u64, t: i64, r: [f64; 3]) -> Message {
    let r = unit(r);
    Message::Obs(Obs {
        sensor: sensor.into(),
        seq,
        t,
        b: rotate(q_unit(Q_TRUE), r),
        r,
        sigma: Some(1e-3),
        token: None,
    })
}

/// Reference directions of the four test sensors `s0`..`s3`.
pub const REFS: [[f64; 3]; 4] = [
    [1.0, 0.0, 0.0],
    [0.0, 1.0, 0.0],
    [0.0, 0.0, 1.0],
    [0.6, -0.6, 0.5],
];
