//! Record → replay, with the real binary: a `wahbad serve --record` session
//! fed with a simulated bench run over TCP (the simulator's messages framed
//! by the protocol crate, as a source would send them), its live feed
//! captured by a subscriber, stopped with SIGTERM; `wahbad replay LOG
//! --solutions` then reproduces every live solution and alert bit for bit
//! (the JSON lines re-encoded to MessagePack equal the live frames byte for byte).

mod replay_support;
mod serve_support;

use std::io::Write;
use std::time::Duration;

use replay_support::{estimator_table, replay, text, write_config_file, TempDir};
use serve_support::{capture_feed, Client, Daemon};
use wahbad::simulate::{Scenario, Simulator};
use wahbad_protocol::{encode_frame, Message, Role};

#[test]
fn a_recorded_serve_session_replays_bit_for_bit() {
    let dir = TempDir::new("roundtrip");
    // The default timeline cut to 40 s: nominal stretches and the false-star
    // fault, so the feed holds alerts as well as solutions.
    let scenario = Scenario {
        duration_s: 40.0,
        ..Scenario::default()
    };
    let config = dir.join("bench.toml");
    write_config_file(&config, &estimator_table(&scenario));
    let log = dir.join("session.wlog");
    let mut daemon = Daemon::start(&[
        "--record",
        log.to_str().unwrap(),
        "--config",
        config.to_str().unwrap(),
        "--subscriber-queue",
        "65536",
    ]);
    let subscriber = capture_feed(daemon.tcp, Duration::from_secs(30));

    let mut source = Client::tcp(daemon.tcp);
    assert!(matches!(
        source.hello(Role::Source, None),
        Message::Welcome(_)
    ));
    let messages: Vec<Message> = Simulator::new(&scenario).unwrap().collect();
    let half = messages.len() / 2;
    for (idx, msg) in messages.iter().enumerate() {
        source.stream.write_all(&encode_frame(msg)).unwrap();
        if idx == half {
            // A quiet spell: the daemon's wall-clock ticks go into the log too.
            source.stream.flush().unwrap();
            std::thread::sleep(Duration::from_millis(300));
        }
    }
    source.stream.flush().unwrap();
    std::thread::sleep(Duration::from_millis(500));
    let (status, stderr) = daemon.stop();
    assert_eq!(status.code(), Some(0), "{stderr}");
    let (live, told) = subscriber.join().unwrap();
    assert!(told, "the subscriber was not told `error shutdown`");
    drop(source);

    let mut reader = wahbad::record::LogReader::open(&log).unwrap();
    let mut n_ticks = 0;
    while let Some(record) = reader.next_record().unwrap() {
        n_ticks += usize::from(matches!(record, wahbad::record::Record::Tick { .. }));
    }
    assert!(reader.ended_cleanly());
    assert!(
        n_ticks >= 2,
        "the quiet spell and the close leave ticks: {n_ticks}"
    );

    let lines = dir.join("replayed.jsonl");
    let out = replay(&[
        log.to_str().unwrap(),
        "--solutions",
        lines.to_str().unwrap(),
    ]);
    let stdout = text(&out.stdout);
    assert_eq!(out.status.code(), Some(0), "{}", text(&out.stderr));
    assert!(
        stdout.contains("configuration: recorded in the log header\n"),
        "{stdout}"
    );
    let replayed: Vec<Vec<u8>> = std::fs::read_to_string(&lines)
        .unwrap()
        .lines()
        .map(|line| {
            let msg: Message = serde_json::from_str(line).unwrap();
            encode_frame(&msg)
        })
        .collect();
    let n_alerts = live
        .iter()
        .filter(|frame| {
            matches!(
                wahbad_protocol::decode_body(&frame[4..]),
                Ok(Message::Alert(_))
            )
        })
        .count();
    assert!(live.len() >= 390, "only {} live outputs", live.len());
    assert!(
        n_alerts >= 2,
        "the false stars raise and clear an alert: {n_alerts}"
    );
    assert_eq!(replayed.len(), live.len(), "output counts differ");
    let first_diff = replayed.iter().zip(&live).position(|(a, b)| a != b);
    assert_eq!(
        first_diff, None,
        "replayed output differs from the live feed"
    );
    eprintln!(
        "measured: {} live outputs ({n_alerts} alerts, {n_ticks} ticks in the log) reproduced bit for bit",
        live.len()
    );
}

/// The same round trip with the real source program: `wahbad simulate --to`
/// streams a 20 s run (with the false-star fault) into `serve --record` at
/// 20× real time; the replay of the recording equals the live feed.
#[test]
fn a_session_fed_by_simulate_to_replays_bit_for_bit() {
    let dir = TempDir::new("roundtrip_simulate_to");
    let scenario = Scenario {
        duration_s: 30.0,
        ..Scenario::default()
    };
    let config = dir.join("bench.toml");
    write_config_file(&config, &estimator_table(&scenario));
    let log = dir.join("session.wlog");
    let mut daemon = Daemon::start(&[
        "--record",
        log.to_str().unwrap(),
        "--config",
        config.to_str().unwrap(),
        "--subscriber-queue",
        "65536",
    ]);
    let subscriber = capture_feed(daemon.tcp, Duration::from_secs(30));
    let source = std::process::Command::new(env!("CARGO_BIN_EXE_wahbad"))
        .args(["simulate", "--duration", "30", "--speed", "20", "--to"])
        .arg(daemon.tcp.to_string())
        .output()
        .expect("run wahbad simulate --to");
    assert!(
        source.status.success(),
        "simulate --to failed: {}",
        text(&source.stderr)
    );
    std::thread::sleep(Duration::from_millis(300));
    let (status, stderr) = daemon.stop();
    assert_eq!(status.code(), Some(0), "{stderr}");
    let (live, told) = subscriber.join().unwrap();
    assert!(told, "the subscriber was not told `error shutdown`");

    let lines = dir.join("replayed.jsonl");
    let out = replay(&[
        log.to_str().unwrap(),
        "--solutions",
        lines.to_str().unwrap(),
    ]);
    assert_eq!(out.status.code(), Some(0), "{}", text(&out.stderr));
    let replayed: Vec<Vec<u8>> = std::fs::read_to_string(&lines)
        .unwrap()
        .lines()
        .map(|line| encode_frame(&serde_json::from_str::<Message>(line).unwrap()))
        .collect();
    assert!(live.len() >= 290, "only {} live outputs", live.len());
    assert_eq!(replayed.len(), live.len(), "output counts differ");
    let first_diff = replayed.iter().zip(&live).position(|(a, b)| a != b);
    assert_eq!(
        first_diff, None,
        "replayed output differs from the live feed"
    );
    eprintln!(
        "measured: {} live outputs of a `simulate --to` session reproduced bit for bit",
        live.len()
    );
}
