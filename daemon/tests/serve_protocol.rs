//! Every protocol error path over a real socket, against the real binary,
//! while one subscriber stays connected and keeps receiving solutions.
//! Expected answers are those of `shared/protocol.md` (Session, Rejections).

mod serve_support;

use std::time::Duration;

use serve_support::{scene, Client, Daemon, TempDir};
use wahbad_protocol::{encode_frame, Message, Obs, Role, Status};

const WAIT: Duration = Duration::from_secs(10);

fn error_code(msg: Option<Message>) -> String {
    match msg {
        Some(Message::Error(err)) => err.code,
        other => panic!("expected an error, got {other:?}"),
    }
}

fn reject_reason(msg: Option<Message>) -> String {
    match msg {
        Some(Message::Reject(reject)) => reject.reason,
        other => panic!("expected a reject, got {other:?}"),
    }
}

/// Streams `frames` frames of the scene at 20 ms of bench time each.
fn stream(source: &mut Client<std::net::TcpStream>, first: u64, frames: u64) {
    for frame in first..first + frames {
        for msg in scene(frame, frame as i64 * 20_000_000) {
            source.send(&msg);
        }
    }
}

fn next_solution(sub: &mut Client<std::net::TcpStream>) -> wahbad_protocol::Solution {
    loop {
        match sub.recv(WAIT) {
            Some(Message::Solution(solution)) => return solution,
            Some(_) => continue,
            None => panic!("no solution arrived"),
        }
    }
}

#[test]
fn every_error_path_is_answered_and_the_daemon_keeps_serving() {
    let dir = TempDir::new("proto");
    let token_file = dir.join("token");
    std::fs::write(&token_file, "bench-secret\n").unwrap();
    let mut daemon = Daemon::start(&[
        "--token-file",
        token_file.to_str().unwrap(),
        "--max-connections",
        "6",
        "--hello-timeout-ms",
        "300",
        "--period-ms",
        "100",
    ]);
    let token = Some("bench-secret");

    // A subscriber that stays for the whole test.
    let mut sub = Client::tcp(daemon.tcp);
    assert!(matches!(
        sub.hello(Role::Subscriber, token),
        Message::Welcome(_)
    ));
    let mut source = Client::tcp(daemon.tcp);
    assert!(matches!(
        source.hello(Role::Source, token),
        Message::Welcome(_)
    ));
    stream(&mut source, 0, 20);
    let first = next_solution(&mut sub);
    assert_eq!(first.t, 0);

    // Wrong version: error `version`, then closed.
    {
        let mut client = Client::tcp(daemon.tcp);
        let mut bad = serve_support::hello(Role::Source, token);
        if let Message::Hello(hello) = &mut bad {
            hello.version = 2;
        }
        client.send(&bad);
        assert_eq!(error_code(client.recv(WAIT)), "version");
        assert!(client.closed_within(WAIT));
    }

    // Bad and missing token: error `auth`.
    for offered in [Some("guess"), None] {
        let mut client = Client::tcp(daemon.tcp);
        client.send(&serve_support::hello(Role::Subscriber, offered));
        assert_eq!(error_code(client.recv(WAIT)), "auth");
        assert!(client.closed_within(WAIT));
    }

    // First frame is not a hello: error `hello`.
    {
        let mut client = Client::tcp(daemon.tcp);
        client.send(&scene(0, 0)[0]);
        assert_eq!(error_code(client.recv(WAIT)), "hello");
        assert!(client.closed_within(WAIT));
    }

    // Oversize length prefix (after a good hello): error `framing`.
    {
        let mut client = Client::tcp(daemon.tcp);
        assert!(matches!(
            client.hello(Role::Source, token),
            Message::Welcome(_)
        ));
        client.send_raw(&(70_000u32).to_be_bytes());
        client.send_raw(&[0u8; 1000]);
        assert_eq!(error_code(client.recv(WAIT)), "framing");
        assert!(client.closed_within(WAIT));
    }

    // Zero length before the hello: `framing` too.
    {
        let mut client = Client::tcp(daemon.tcp);
        client.send_raw(&0u32.to_be_bytes());
        assert_eq!(error_code(client.recv(WAIT)), "framing");
    }

    // Garbage bodies that are well framed: reject, and the connection stays.
    // (A MessagePack int 5 is `0x05`, a positive fixint; an empty map is `0x80`;
    // MessagePack spec, "int format family" and "map format family".)
    let frame = |body: &[u8]| {
        let mut bytes = (body.len() as u32).to_be_bytes().to_vec();
        bytes.extend_from_slice(body);
        bytes
    };
    source.send_raw(&frame(&[0x05]));
    assert!(reject_reason(source.recv(WAIT)).contains("not a map"));
    // 0xc1 is the one byte MessagePack never uses (spec, "Overview"): undecodable.
    source.send_raw(&frame(&[0xc1]));
    assert!(reject_reason(source.recv(WAIT)).contains("undecodable"));
    source.send_raw(&frame(&[0x80]));
    assert!(reject_reason(source.recv(WAIT)).contains("type"));
    // NaN in a vector: reject naming the sensor and seq.
    source.send(&Message::Obs(Obs {
        sensor: "s0".into(),
        seq: 1000,
        t: 20 * 20_000_000,
        b: [f64::NAN, 0.0, 1.0],
        r: [0.0, 0.0, 1.0],
        sigma: Some(1e-3),
        token: None,
    }));
    match source.recv(WAIT) {
        Some(Message::Reject(reject)) => {
            assert_eq!(reject.sensor.as_deref(), Some("s0"));
            assert_eq!(reject.seq, Some(1000));
        }
        other => panic!("expected reject, got {other:?}"),
    }
    // Time going backwards for a sensor: reject from the estimator.
    source.send(&Message::Obs(Obs {
        sensor: "s1".into(),
        seq: 5000,
        t: 0,
        b: [0.0, 0.0, 1.0],
        r: [0.0, 0.0, 1.0],
        sigma: Some(1e-3),
        token: None,
    }));
    let reason = reject_reason(source.recv(WAIT));
    assert!(reason.contains("before"), "{reason}");
    // The source connection is still usable: a status answer comes back.
    source.send(&Message::Status(Status::default()));
    match source.recv(WAIT) {
        Some(Message::Status(Status {
            report: Some(report),
        })) => {
            assert!(report.rejected >= 4, "{report:?}");
            assert_eq!(report.sources, 1);
            assert_eq!(report.subscribers, 1);
        }
        other => panic!("expected status, got {other:?}"),
    }

    // Hello timeout: error `timeout` after the configured 300 ms.
    {
        let mut idle = Client::tcp(daemon.tcp);
        assert_eq!(error_code(idle.recv(WAIT)), "timeout");
    }
    // Refused connections give their slot back once the peer has gone;
    // let the daemon see those closes before counting slots.
    std::thread::sleep(Duration::from_millis(300));

    // Connection limit of 6 (with room for refused connections still
    // closing above): sub + source are 2; four more fill it.
    let fill: Vec<_> = (0..4)
        .map(|_| {
            let mut client = Client::tcp(daemon.tcp);
            assert!(matches!(
                client.hello(Role::Subscriber, token),
                Message::Welcome(_)
            ));
            client
        })
        .collect();
    let mut extra = Client::tcp(daemon.tcp);
    assert_eq!(error_code(extra.recv(WAIT)), "busy");
    drop(fill);

    // Throughout, the first subscriber kept receiving: new epochs still come.
    stream(&mut source, 21, 20);
    let mut last = first.t;
    while last < 30 * 20_000_000 {
        last = next_solution(&mut sub).t;
    }
    sub.send(&Message::Status(Status::default()));
    let report = loop {
        match sub.recv(WAIT) {
            Some(Message::Status(Status {
                report: Some(report),
            })) => break report,
            Some(_) => continue,
            None => panic!("no status answer"),
        }
    };
    assert!(report.epochs >= 7, "{report:?}");
    // The core answered the backwards-time reject after ingesting, in order,
    // every observation of the first 20 frames.
    assert!(report.accepted >= 4 * 20, "{report:?}");
    let (status, stderr) = daemon.stop();
    assert!(status.success(), "exit {status:?}: {stderr}");
    assert!(!stderr.contains("bench-secret"), "the token was logged");
    for counted in [
        "connection limit reached",
        "no hello in time",
        "hello refused",
    ] {
        assert!(stderr.contains(counted), "no log line {counted:?}");
    }
    let _ = encode_frame(&Message::Status(Status::default()));
}
