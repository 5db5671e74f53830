//! Crash safety of recordings: `serve --record` killed with SIGKILL at seeded
//! random moments while a source streams and a subscriber listens, 20 times.
//!
//! Each trial checks:
//! - **No whole record lost**: an independent walk of the file's bytes (the
//!   format of `record/mod.rs`: kind, len, recv_ns, payload, CRC-32) counts
//!   the whole records with a good checksum; `LogReader` must return exactly
//!   that many, warn only of a torn tail / missing end, and account for every
//!   byte of the file (header + records + torn tail = file length).
//! - **Replay reproduces the live feed up to the kill**: the recorded inputs
//!   are replayed through a fresh `Estimator` built from the recorded
//!   configuration. The log is a prefix of the input sequence the live
//!   estimator ingested (recorded just before each ingest, flushed every 50 ms),
//!   and each output depends only on inputs up to the one that caused it. So
//!   with `live` = the encoded solutions and alerts the subscriber received
//!   before the kill and `replay` = those the replay produced, the first
//!   `min(len)` of each must be byte-identical. What is compared: the whole
//!   encoded frames (t, q, cov, status, counts, method, verdicts, alerts).

mod faults_support;
mod serve_support;

use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;
use std::time::{Duration, Instant};

use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;
use serve_support::{capture_feed, scene, Client, Daemon, TempDir};
use wahbad::estimator::{Estimator, Output};
use wahbad::record::{
    crc32, record_input, LogReader, ReadWarning, RecordKind, PREAMBLE_LEN, RECORD_HEAD_LEN,
    RECORD_TAIL_LEN,
};
use wahbad_protocol::{encode_frame, Message, Role};

/// Whole records with a good checksum from the start of the file, and the
/// byte offset where they end (walked independently of `LogReader`).
fn walk_whole_records(bytes: &[u8]) -> (u64, usize) {
    let mut at = PREAMBLE_LEN;
    let mut n = 0;
    while at + RECORD_HEAD_LEN <= bytes.len() {
        let kind = RecordKind::from_byte(bytes[at]).expect("a known kind at a record start");
        let len = u32::from_be_bytes(bytes[at + 1..at + 5].try_into().unwrap()) as usize;
        assert!(len <= kind.max_payload());
        let total = RECORD_HEAD_LEN + len + RECORD_TAIL_LEN;
        if at + total > bytes.len() {
            break;
        }
        let stored = u32::from_be_bytes(bytes[at + total - 4..at + total].try_into().unwrap());
        assert_eq!(
            crc32(&bytes[at..at + total - 4]),
            stored,
            "bad checksum at {at}"
        );
        n += 1;
        at += total;
    }
    (n, at)
}

fn frame_of(output: Output) -> Vec<u8> {
    encode_frame(&match output {
        Output::Solution(solution) => Message::Solution(solution),
        Output::Alert(alert) => Message::Alert(alert),
    })
}

struct Trial {
    records: u64,
    torn_bytes: u64,
    live: usize,
    replayed: usize,
}

fn trial(delay: Duration) -> Trial {
    let dir = TempDir::new("crash");
    let log = dir.join("crash.wlog");
    let mut daemon = Daemon::start(&[
        "--record",
        log.to_str().unwrap(),
        "--period-ms",
        "20",
        "--span-ms",
        "200",
        "--latency-ms",
        "10",
    ]);
    let subscriber = capture_feed(daemon.tcp, Duration::from_secs(10));
    let mut source = Client::tcp(daemon.tcp);
    assert!(matches!(
        source.hello(Role::Source, None),
        Message::Welcome(_)
    ));
    let stop = Arc::new(AtomicBool::new(false));
    let stop_source = stop.clone();
    let streamer = std::thread::spawn(move || {
        let start = Instant::now();
        let mut frame = 0u64;
        while !stop_source.load(Ordering::Relaxed) {
            let t = start.elapsed().as_nanos() as i64;
            for msg in scene(frame, t) {
                if std::io::Write::write_all(&mut source.stream, &encode_frame(&msg)).is_err() {
                    return;
                }
            }
            frame += 1;
            std::thread::sleep(Duration::from_millis(2));
        }
    });
    std::thread::sleep(delay);
    daemon.signal("KILL");
    let (status, _) = daemon.wait(Duration::from_secs(10));
    assert!(!status.success(), "killed daemon exited successfully");
    stop.store(true, Ordering::Relaxed);
    streamer.join().unwrap();
    let (live, _) = subscriber.join().unwrap();

    let bytes = std::fs::read(&log).unwrap();
    let (n_whole, whole_end) = walk_whole_records(&bytes);
    let mut reader = LogReader::open(&log).unwrap();
    let config = reader.header().estimator_config().unwrap();
    let mut estimator = Estimator::new(config).unwrap();
    let (mut outputs, mut replay) = (Vec::new(), Vec::new());
    while let Some(record) = reader.next_record().unwrap() {
        let input = record_input(&record)
            .expect("every recorded input decodes and validates")
            .expect("no end record after a kill");
        let _ = estimator.ingest(input, &mut outputs);
        replay.extend(outputs.drain(..).map(frame_of));
    }
    assert!(!reader.ended_cleanly());
    assert_eq!(
        reader.n_records(),
        n_whole,
        "whole records lost by the reader"
    );
    let mut torn_bytes = 0;
    for warning in reader.warnings() {
        match warning {
            ReadWarning::NoCleanEnd { records } => assert_eq!(*records, n_whole),
            ReadWarning::TornTail {
                offset,
                bytes: torn,
            } => {
                assert_eq!(*offset as usize, whole_end);
                torn_bytes = *torn;
            }
            other => panic!("unexpected damage after kill -9: {other}"),
        }
    }
    assert_eq!(
        whole_end as u64 + torn_bytes,
        bytes.len() as u64,
        "bytes unaccounted for"
    );
    let common = live.len().min(replay.len());
    for idx in 0..common {
        assert!(
            live[idx] == replay[idx],
            "output {idx} of {common} differs between live and replay"
        );
    }
    Trial {
        records: n_whole,
        torn_bytes,
        live: live.len(),
        replayed: replay.len(),
    }
}

#[test]
fn kill_9_at_random_moments_never_loses_a_whole_record_and_replays_the_live_feed() {
    let mut rng = ChaCha8Rng::seed_from_u64(0x6b696c6c39); // fixed seed: same delays every run
    let n_trials = 20;
    let mut total_records = 0;
    let mut total_compared = 0;
    for idx in 0..n_trials {
        let delay = Duration::from_millis(rng.random_range(150..1500));
        let result = trial(delay);
        assert!(
            result.records > 1,
            "trial {idx}: only the header was recorded"
        );
        assert!(
            result.replayed > 0 && result.live > 0,
            "trial {idx}: nothing to compare"
        );
        total_records += result.records;
        total_compared += result.live.min(result.replayed);
        eprintln!(
            "trial {idx}: kill after {} ms: {} whole records (+{} torn bytes), live {} / replayed {} outputs, first {} identical",
            delay.as_millis(),
            result.records,
            result.torn_bytes,
            result.live,
            result.replayed,
            result.live.min(result.replayed)
        );
    }
    eprintln!(
        "measured: {n_trials} kill -9 trials, {total_records} whole records read, 0 lost, {total_compared} live outputs reproduced"
    );
}
