//! Fault injection on one stream, against the real binary on loopback: a
//! session split at every byte boundary, disconnects mid-frame, peers that
//! stall mid-frame, zero and oversize lengths, deep MessagePack nesting.
//! After each fault the daemon must still serve (a fresh source is accepted).

mod faults_support;
mod serve_support;

use std::io::Write;
use std::net::TcpStream;
use std::time::{Duration, Instant};

use faults_support::{obs, status, status_until, REFS};
use serve_support::{hello, Client, Daemon};
use wahbad_protocol::{encode_frame, Message, Obs, Role, Status};

/// A source session: hello, observations (one invalid), a status request.
/// `base` keeps sequence numbers and times increasing across sessions; the
/// offsets keep every seq a MessagePack uint32 and every t a uint64, so all
/// sessions have the same length and layout.
fn session(base: u64) -> (Vec<u8>, u64) {
    const SEQ0: u64 = 100_000;
    const T0: i64 = 10_000_000_000;
    let mut bytes = encode_frame(&hello(Role::Source, None));
    let mut n_valid = 0;
    for k in 0..2u64 {
        for (idx, r) in REFS.iter().enumerate() {
            let seq = SEQ0 + base * 10 + k;
            let t = T0 + (base * 10 + k) as i64 * 1_000_000;
            bytes.extend(encode_frame(&obs(&format!("s{idx}"), seq, t, *r)));
            n_valid += 1;
        }
    }
    // Zero vector: rejected by validation in the session, connection stays.
    bytes.extend(encode_frame(&Message::Obs(Obs {
        sensor: "s0".into(),
        seq: SEQ0 + base * 10 + 9,
        t: T0 + (base * 10 + 9) as i64 * 1_000_000,
        b: [0.0; 3],
        r: [1.0, 0.0, 0.0],
        sigma: Some(1e-3),
        token: None,
    })));
    bytes.extend(encode_frame(&Message::Status(Status::request())));
    (bytes, n_valid)
}

/// What a source session was answered, counters left out.
fn answers(client: &mut Client<TcpStream>) -> Vec<String> {
    let mut seen = Vec::new();
    while let Some(msg) = client.recv(Duration::from_secs(10)) {
        match msg {
            Message::Welcome(_) => seen.push("welcome".to_string()),
            Message::Reject(reject) => {
                seen.push(format!("reject {:?} {}", reject.sensor, reject.reason))
            }
            Message::Status(_) => {
                seen.push("status".to_string());
                return seen;
            }
            other => panic!("unexpected answer {other:?}"),
        }
    }
    panic!("session ended without a status answer: {seen:?}");
}

/// A fresh source can still connect and have an observation accepted.
fn still_serves(daemon: &Daemon, seq: u64, t: i64) {
    let before = status(daemon.tcp).accepted;
    let mut source = Client::tcp(daemon.tcp);
    assert!(matches!(
        source.hello(Role::Source, None),
        Message::Welcome(_)
    ));
    source.send(&obs("s0", seq, t, REFS[0]));
    let report = status_until(daemon.tcp, Duration::from_secs(20), |r| r.accepted > before);
    assert_eq!(report.accepted, before + 1, "the daemon stopped accepting");
}

#[test]
fn a_session_split_at_every_byte_boundary_is_answered_and_accepted_identically() {
    let daemon = Daemon::start(&[]);
    let (whole, n_valid) = session(0);
    let mut reference_client = Client::tcp(daemon.tcp);
    reference_client.send_raw(&whole);
    let reference = answers(&mut reference_client);
    assert_eq!(
        reference.len(),
        3,
        "welcome, one reject, status: {reference:?}"
    );
    let mut sent_valid = n_valid;
    let mut n_splits = 0;
    for split in 1..whole.len() {
        let (bytes, n_valid) = session(split as u64);
        assert_eq!(bytes.len(), whole.len(), "sessions differ in layout");
        let mut client = Client::tcp(daemon.tcp);
        client.send_raw(&bytes[..split]);
        client.stream.flush().unwrap();
        std::thread::sleep(Duration::from_millis(2));
        client.send_raw(&bytes[split..]);
        assert_eq!(answers(&mut client), reference, "split at byte {split}");
        sent_valid += n_valid;
        n_splits += 1;
    }
    let report = status_until(daemon.tcp, Duration::from_secs(30), |r| {
        r.accepted >= sent_valid
    });
    assert_eq!(
        report.accepted, sent_valid,
        "accepted vs sent valid observations"
    );
    assert_eq!(report.rejected, n_splits + 1, "one reject per session");
    eprintln!("measured: {n_splits} split sessions, {sent_valid} observations accepted");
}

#[test]
fn abrupt_disconnects_mid_frame_leave_the_daemon_serving() {
    let daemon = Daemon::start(&[]);
    let hello_frame = encode_frame(&hello(Role::Source, None));
    let obs_frame = encode_frame(&obs("s1", 1, 1_000_000, REFS[1]));
    let mut n_faults = 0;
    // Cut inside the hello's prefix and body, then after the hello inside an
    // obs prefix and body; each connection is dropped right there.
    for cut in [1, 3, 5, hello_frame.len() - 1] {
        let mut stream = TcpStream::connect(daemon.tcp).unwrap();
        stream.write_all(&hello_frame[..cut]).unwrap();
        drop(stream);
        n_faults += 1;
    }
    for cut in [1, 2, 4, 10, obs_frame.len() - 1] {
        let mut client = Client::tcp(daemon.tcp);
        assert!(matches!(
            client.hello(Role::Source, None),
            Message::Welcome(_)
        ));
        client.send_raw(&obs_frame[..cut]);
        client.stream.flush().unwrap();
        drop(client);
        n_faults += 1;
    }
    // Gauges return to zero: every cut session ended.
    let report = status_until(daemon.tcp, Duration::from_secs(20), |r| r.sources == 0);
    assert_eq!(report.sources, 0, "cut sessions still open");
    assert_eq!(report.accepted, 0, "a partial frame was accepted");
    still_serves(&daemon, 1, 1_000_000);
    eprintln!("measured: {n_faults} mid-frame disconnects survived");
}

fn expect_error(client: &mut Client<TcpStream>, code: &str, limit: Duration) -> Duration {
    let start = Instant::now();
    match client.recv(limit) {
        Some(Message::Error(err)) => assert_eq!(err.code, code, "{}", err.message),
        other => panic!("expected error {code}, got {other:?}"),
    }
    assert!(
        client.closed_within(Duration::from_secs(5)),
        "not closed after error"
    );
    start.elapsed()
}

#[test]
fn peers_that_stall_before_or_mid_frame_are_timed_out() {
    let daemon = Daemon::start(&["--hello-timeout-ms", "300"]);
    // Silent after connect.
    let mut silent = Client::tcp(daemon.tcp);
    expect_error(&mut silent, "timeout", Duration::from_secs(10));
    // Stalls inside the hello's prefix, then inside its body.
    let hello_frame = encode_frame(&hello(Role::Source, None));
    for cut in [2, 8] {
        let mut client = Client::tcp(daemon.tcp);
        client.send_raw(&hello_frame[..cut]);
        expect_error(&mut client, "timeout", Duration::from_secs(10));
    }
    // After the hello: stalls inside a frame. A source may stay idle between
    // frames as long as it likes, but a started frame must be finished.
    let obs_frame = encode_frame(&obs("s1", 1, 1_000_000, REFS[1]));
    for cut in [3, 20] {
        let mut client = Client::tcp(daemon.tcp);
        assert!(matches!(
            client.hello(Role::Source, None),
            Message::Welcome(_)
        ));
        std::thread::sleep(Duration::from_millis(600)); // idle between frames: fine
        client.send_raw(&obs_frame[..cut]);
        expect_error(&mut client, "timeout", Duration::from_secs(10));
    }
    // A subscriber stalled mid-frame is treated alike, though the feed keeps
    // its connection busy with writes.
    let mut sub = Client::tcp(daemon.tcp);
    assert!(matches!(
        sub.hello(Role::Subscriber, None),
        Message::Welcome(_)
    ));
    sub.send_raw(&encode_frame(&Message::Status(Status::request()))[..3]);
    expect_error(&mut sub, "timeout", Duration::from_secs(10));
    // The idle source was not cut: it still has its observation accepted.
    let mut idle = Client::tcp(daemon.tcp);
    assert!(matches!(
        idle.hello(Role::Source, None),
        Message::Welcome(_)
    ));
    std::thread::sleep(Duration::from_millis(900));
    idle.send(&obs("s2", 5, 5_000_000, REFS[2]));
    let report = status_until(daemon.tcp, Duration::from_secs(20), |r| r.accepted >= 1);
    assert_eq!(report.accepted, 1);
    still_serves(&daemon, 6, 6_000_000);
}

#[test]
fn zero_and_oversize_lengths_end_the_stream_with_framing_and_the_daemon_goes_on() {
    let daemon = Daemon::start(&[]);
    let prefixes: [(&str, u32); 4] = [
        ("zero", 0),
        ("one over", 65_537),
        ("huge", u32::MAX),
        ("2^31", 1 << 31),
    ];
    for (what, len) in prefixes {
        // As the first frame and after a hello.
        let mut first = Client::tcp(daemon.tcp);
        first.send_raw(&len.to_be_bytes());
        expect_error(&mut first, "framing", Duration::from_secs(10));
        let mut later = Client::tcp(daemon.tcp);
        assert!(
            matches!(later.hello(Role::Source, None), Message::Welcome(_)),
            "{what}"
        );
        later.send_raw(&len.to_be_bytes());
        expect_error(&mut later, "framing", Duration::from_secs(10));
    }
    // The largest legal frame, holding junk, is only rejected.
    let mut client = Client::tcp(daemon.tcp);
    assert!(matches!(
        client.hello(Role::Source, None),
        Message::Welcome(_)
    ));
    let mut frame = 65_536u32.to_be_bytes().to_vec();
    frame.extend(std::iter::repeat_n(0xc1u8, 65_536)); // 0xc1: never used in MessagePack
    client.send_raw(&frame);
    assert!(matches!(
        client.recv(Duration::from_secs(10)),
        Some(Message::Reject(_))
    ));
    still_serves(&daemon, 1, 1_000_000);
}

/// A map `{type: "obs", x: [[[...]]]}` nested `depth` arrays deep.
fn deep_body(depth: usize) -> Vec<u8> {
    let mut body = vec![0x82, 0xa4];
    body.extend(b"type");
    body.push(0xa3);
    body.extend(b"obs");
    body.push(0xa1);
    body.push(b'x');
    body.extend(std::iter::repeat_n(0x91u8, depth)); // fixarray of one element
    body.push(0xc0); // nil at the bottom
    body
}

#[test]
fn deep_messagepack_nesting_is_rejected_without_harm() {
    let daemon = Daemon::start(&["--udp", "127.0.0.1:0"]);
    let depth = 65_000;
    let body = deep_body(depth);
    let mut frame = (body.len() as u32).to_be_bytes().to_vec();
    frame.extend(&body);
    // As the first frame: not decodable as a hello.
    let mut first = Client::tcp(daemon.tcp);
    first.send_raw(&frame);
    expect_error(&mut first, "framing", Duration::from_secs(10));
    // After a hello: rejected, the connection stays usable.
    let mut client = Client::tcp(daemon.tcp);
    assert!(matches!(
        client.hello(Role::Source, None),
        Message::Welcome(_)
    ));
    for _ in 0..20 {
        client.send_raw(&frame);
        match client.recv(Duration::from_secs(10)) {
            Some(Message::Reject(reject)) => {
                assert!(reject.reason.contains("nesting"), "{}", reject.reason)
            }
            other => panic!("expected reject, got {other:?}"),
        }
    }
    client.send(&obs("s0", 1, 1_000_000, REFS[0]));
    // As datagrams: dropped and counted. One at a time, since 64 kB datagrams
    // overflow the kernel's receive buffer if sent back to back.
    let udp = std::net::UdpSocket::bind("127.0.0.1:0").unwrap();
    for k in 0..20 {
        udp.send_to(&body, daemon.udp.unwrap()).unwrap();
        status_until(daemon.tcp, Duration::from_secs(20), |r| r.rejected > 20 + k);
    }
    let report = status_until(daemon.tcp, Duration::from_secs(20), |r| {
        r.accepted >= 1 && r.rejected >= 40
    });
    assert_eq!(report.accepted, 1);
    assert_eq!(report.rejected, 40, "20 stream rejects + 20 datagrams");
    still_serves(&daemon, 2, 2_000_000);
}
