//! Writes the seed corpora of the fuzz targets from real frames: a session
//! made by the simulator library (hello, then its obs/rate/truth, a status
//! request), single bodies, and a recording written by the log writer from
//! the same messages (whole, cut short at several points, and damaged).
//!
//! Usage: `cargo run --example gen_corpus -- <corpus dir>`.

use std::fs;
use std::path::{Path, PathBuf};

use wahbad::record::{LogHeader, LogWriter};
use wahbad::simulate::{Scenario, Simulator};
use wahbad_protocol::{encode_body, encode_frame_into, Hello, Message, Role, Status};

fn write(dir: &Path, name: &str, bytes: &[u8]) {
    fs::create_dir_all(dir).expect("create corpus dir");
    fs::write(dir.join(name), bytes).expect("write seed");
}

fn main() {
    let root: PathBuf = std::env::args_os()
        .nth(1)
        .map(PathBuf::from)
        .unwrap_or_else(|| PathBuf::from("corpus"));
    let mut scenario = Scenario::default();
    scenario.duration_s = 3.0;
    let messages: Vec<Message> = Simulator::new(&scenario)
        .expect("default scenario is valid")
        .take(400)
        .collect();

    // frame_stream: byte 0 picks the chunking, then a whole session.
    let mut session = Vec::new();
    encode_frame_into(
        &Message::Hello(Hello {
            version: 1,
            role: Role::Source,
            name: Some("bench rig".into()),
            token: Some("s3cret".into()),
            verdicts: None,
        }),
        &mut session,
    );
    for msg in messages.iter().take(60) {
        encode_frame_into(msg, &mut session);
    }
    encode_frame_into(&Message::Status(Status::request()), &mut session);
    let dir = root.join("frame_stream");
    for seed in [0u8, 1, 7, 200] {
        let mut input = vec![seed];
        input.extend_from_slice(&session);
        write(&dir, &format!("session_{seed}"), &input);
    }
    let mut cut = vec![3u8];
    cut.extend_from_slice(&session[..session.len() - 5]);
    write(&dir, "session_cut", &cut);

    // validate: single bodies of every kind the simulator sends.
    let dir = root.join("validate");
    let mut kinds_seen = std::collections::BTreeMap::new();
    for msg in &messages {
        let n = kinds_seen.entry(msg.type_name()).or_insert(0u32);
        if *n < 4 {
            write(&dir, &format!("{}_{n}", msg.type_name()), &encode_body(msg));
            *n += 1;
        }
    }

    // log_reader: a recording of the messages as stream frames, with ticks.
    let header = LogHeader {
        created_ns: 1_700_000_000_000_000_000,
        program: "wahbad fuzz corpus".into(),
        protocol: 1,
        origin: "simulate".into(),
        config: "period_ms = 100\n".into(),
    };
    let mut writer = LogWriter::new(Vec::new(), &header).expect("header");
    for (idx, msg) in messages.iter().enumerate() {
        let body = encode_body(msg);
        if idx % 2 == 0 {
            writer.write_frame(idx as i64, &body).expect("frame");
        } else {
            writer.write_datagram(idx as i64, &body).expect("datagram");
        }
        if idx % 25 == 0 {
            writer.write_tick(idx as i64, idx as i64 * 1_000_000).expect("tick");
        }
    }
    let log = writer.finish("finished", 1).expect("end");
    let dir = root.join("log_reader");
    // Seeds stay small so the fuzzer mutates quickly: a short log, then cuts.
    let short = &log[..log.len().min(3000)];
    write(&dir, "log_short", short);
    write(&dir, "log_whole", &log);
    for cut in [13usize, 40, 101, 777, 1501] {
        write(&dir, &format!("log_cut_{cut}"), &short[..cut.min(short.len())]);
    }
    let mut damaged = short.to_vec();
    for idx in (200..damaged.len()).step_by(97) {
        damaged[idx] ^= 0x5a;
    }
    write(&dir, "log_damaged", &damaged);
    println!("corpus written under {}", root.display());
}
