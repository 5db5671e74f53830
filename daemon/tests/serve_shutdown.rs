//! Shutdown and recording, with the real binary: SIGTERM while a source
//! streams (exit 0, the recording complete and cleanly ended, and a replay of
//! it reproducing the live feed bit for bit), and `kill -9` (the recording
//! readable up to its last whole record).

mod serve_support;

use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;
use std::time::{Duration, Instant};

use serve_support::{capture_feed, scene, Client, Daemon, TempDir};
use wahbad::estimator::{Estimator, Output};
use wahbad::record::{record_input, LogReader, ReadWarning, Record};
use wahbad_protocol::{encode_frame, Message, Role};

/// Streams the scene in (about) real time until `stop` or the daemon goes away.
fn spawn_source(daemon: &Daemon, stop: Arc<AtomicBool>) -> std::thread::JoinHandle<u64> {
    let mut source = Client::tcp(daemon.tcp);
    assert!(matches!(
        source.hello(Role::Source, None),
        Message::Welcome(_)
    ));
    std::thread::spawn(move || {
        let start = Instant::now();
        let mut frame = 0u64;
        while !stop.load(Ordering::Relaxed) {
            let t = start.elapsed().as_nanos() as i64;
            for msg in scene(frame, t) {
                if std::io::Write::write_all(&mut source.stream, &encode_frame(&msg)).is_err() {
                    return frame;
                }
            }
            frame += 1;
            std::thread::sleep(Duration::from_millis(10));
        }
        frame
    })
}

#[test]
fn sigterm_while_streaming_exits_0_with_a_complete_recording_that_replays_bit_for_bit() {
    let dir = TempDir::new("term");
    let log = dir.join("session.wlog");
    let mut daemon = Daemon::start(&[
        "--record",
        log.to_str().unwrap(),
        "--period-ms",
        "50",
        "--span-ms",
        "300",
        "--latency-ms",
        "30",
    ]);
    let subscriber = capture_feed(daemon.tcp, Duration::from_secs(20));
    let stop = Arc::new(AtomicBool::new(false));
    let source = spawn_source(&daemon, stop.clone());
    std::thread::sleep(Duration::from_millis(1500));
    let (status, stderr) = daemon.stop();
    stop.store(true, Ordering::Relaxed);
    let frames_sent = source.join().unwrap();
    assert!(status.success(), "exit {status:?}: {stderr}");
    assert_eq!(status.code(), Some(0));
    let (live, told) = subscriber.join().unwrap();
    assert!(told, "the subscriber was not sent `error shutdown`");
    assert!(live.len() >= 10, "only {} live outputs", live.len());

    let mut reader = LogReader::open(&log).unwrap();
    assert_eq!(reader.header().origin, "serve");
    let config = reader.header().estimator_config().unwrap();
    assert_eq!(config.period_ms, 50);
    let mut estimator = Estimator::new(config).unwrap();
    let mut replayed = Vec::new();
    let mut outputs = Vec::new();
    let mut n_frames = 0u64;
    while let Some(record) = reader.next_record().unwrap() {
        if matches!(record, Record::Frame { .. }) {
            n_frames += 1;
        }
        let Some(input) = record_input(&record).unwrap() else {
            continue;
        };
        let _ = estimator.ingest(input, &mut outputs);
        for output in outputs.drain(..) {
            replayed.push(encode_frame(&match output {
                Output::Solution(solution) => Message::Solution(solution),
                Output::Alert(alert) => Message::Alert(alert),
            }));
        }
    }
    assert!(reader.ended_cleanly(), "no end record");
    assert!(reader.warnings().is_empty(), "{:?}", reader.warnings());
    // Every frame the daemon read was recorded; it stops reading at the signal,
    // so the log holds at most what the source sent.
    assert!(
        n_frames > 0 && n_frames <= frames_sent * 4,
        "{n_frames} vs {frames_sent}"
    );
    assert_eq!(
        replayed.len(),
        live.len(),
        "replay and live output counts differ"
    );
    assert!(
        replayed == live,
        "replayed outputs differ from the live feed"
    );
    eprintln!(
        "measured: {} frames recorded, {} live outputs reproduced bit for bit",
        n_frames,
        live.len()
    );
}

#[test]
fn kill_9_leaves_a_recording_readable_to_its_last_whole_record() {
    let dir = TempDir::new("kill");
    let log = dir.join("crash.wlog");
    let mut daemon = Daemon::start(&["--record", log.to_str().unwrap(), "--period-ms", "50"]);
    let stop = Arc::new(AtomicBool::new(false));
    let source = spawn_source(&daemon, stop.clone());
    std::thread::sleep(Duration::from_millis(800));
    daemon.signal("KILL");
    let (status, _) = daemon.wait(Duration::from_secs(10));
    assert!(!status.success());
    stop.store(true, Ordering::Relaxed);
    source.join().unwrap();

    let mut reader = LogReader::open(&log).unwrap();
    let mut n_inputs = 0;
    while let Some(record) = reader.next_record().unwrap() {
        assert!(record_input(&record).unwrap().is_some());
        n_inputs += 1;
    }
    assert!(!reader.ended_cleanly());
    // Flushed at least every 100 ms: most of 0.8 s of streaming is there.
    assert!(n_inputs >= 100, "only {n_inputs} records survived");
    for warning in reader.warnings() {
        assert!(
            matches!(
                warning,
                ReadWarning::NoCleanEnd { .. } | ReadWarning::TornTail { .. }
            ),
            "unexpected damage: {warning}"
        );
    }
    assert!(reader
        .warnings()
        .iter()
        .any(|w| matches!(w, ReadWarning::NoCleanEnd { .. })));
}
